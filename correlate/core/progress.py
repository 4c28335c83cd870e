"""Progress on the terminal for long work (tqdm), quiet when asked or when not on a terminal."""

from __future__ import annotations

import os
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
    """Iterate with a progress bar on stderr when on a terminal (timed like :func:`step`)."""
    with _timed(desc):
        if not _active():
            yield from items
            return
        from tqdm import tqdm

        yield from tqdm(items, desc=desc, total=total, file=sys.stderr, leave=False)


@contextmanager
def step(desc: str) -> Iterator[None]:
    """Show a one-line status for a stage that has no natural count, and time it."""
    with _timed(desc):
        if not _active():
            yield
            return
        from tqdm import tqdm

        with tqdm(total=1, desc=desc, file=sys.stderr, leave=False,
                  bar_format="{desc}... {elapsed}") as t:
            yield
            t.update(1)


_TIMES: list[tuple[int, str, float]] = []  # (depth, stage, seconds), in the order stages began
_DEPTH = [0]


@contextmanager
def _timed(desc: str) -> Iterator[None]:
    slot, depth = len(_TIMES), _DEPTH[0]
    _TIMES.append((depth, desc, float("nan")))
    _DEPTH[0] += 1
    start = time.perf_counter()
    try:
        yield
    finally:
        _DEPTH[0] = depth
        _TIMES[slot] = (depth, desc, time.perf_counter() - start)


def reset_timings() -> None:
    """Forget the stage times so far (each command starts afresh)."""
    _TIMES.clear()
    _DEPTH[0] = 0


def timings() -> list[tuple[int, str, float]]:
    """Stage times of this process so far: (nesting depth, stage, seconds)."""
    return list(_TIMES)


def timing_table() -> str:
    """The stage times as indented text lines (``--timings``)."""
    width = max((2 * d + len(s) for d, s, _ in _TIMES), default=0)
    lines = [f"  {'  ' * d}{s:<{width - 2 * d}}  {t:8.2f}" for d, s, t in _TIMES]
    return "\n".join(["stage times (seconds):", *lines])


def pause(stage: str) -> None:
    """Test hook: ``CORRELATE_PAUSE_AT=stage`` sleeps there so that a test can kill the run."""
    if os.environ.get("CORRELATE_PAUSE_AT") == stage:
        time.sleep(float(os.environ.get("CORRELATE_PAUSE_SECONDS", "30")))
