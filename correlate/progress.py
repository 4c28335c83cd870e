"""Progress on the terminal for long work (tqdm), quiet when asked or when not on a terminal."""

from __future__ import annotations

import sys
import time
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from typing import TypeVar

T = TypeVar("T")
_QUIET = [False]


def set_quiet(quiet: bool) -> None:
    """Silence progress output (``--quiet``)."""
    _QUIET[0] = quiet


def _active() -> bool:
    return not _QUIET[0] and sys.stderr.isatty()


def bar(items: Iterable[T], *, desc: str, total: int | None = None) -> Iterator[T]:
    """Iterate with a progress bar on stderr when on a terminal."""
    if not _active():
        yield from items
        return
    from tqdm import tqdm

    yield from tqdm(items, desc=desc, total=total, file=sys.stderr, leave=False)


@contextmanager
def step(desc: str) -> Iterator[None]:
    """Show a spinner-free one-line status for a stage that has no natural count."""
    if not _active():
        yield
        return
    from tqdm import tqdm

    with tqdm(total=1, desc=desc, file=sys.stderr, leave=False,
              bar_format="{desc}... {elapsed}") as t:
        start = time.perf_counter()
        yield
        t.update(1)
        del start
