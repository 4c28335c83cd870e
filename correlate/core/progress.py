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


def startup_seconds() -> float | None:
    """Seconds from the start of this process to now, from the kernel's own accounting (Linux
    /proc; None elsewhere): the interpreter's start and the imports before the command ran."""
    try:
        with open("/proc/self/stat", encoding="ascii") as f:
            start_ticks = float(f.read().rsplit(")", 1)[1].split()[19])
        with open("/proc/uptime", encoding="ascii") as f:
            uptime = float(f.read().split()[0])
    except (OSError, ValueError, IndexError):
        return None
    return max(uptime - start_ticks / os.sysconf("SC_CLK_TCK"), 0.0)


def timing_table(startup: float | None = None) -> str:
    """The stage times as indented text lines (``--timings``).

    Under each stage that has stages inside it, a row "(in none of the stages above)" holds the
    rest of its time, so that every level adds up to its parent; ``startup`` (seconds before the
    command began) is its own first line.
    """
    rows: list[tuple[int, str, float]] = []
    for k, (d, s, t) in enumerate(_TIMES):
        rows.append((d, s, t))
        # the last child of a parent: add the parent's remainder after it
        end = next((j for j in range(k + 1, len(_TIMES)) if _TIMES[j][0] <= d), len(_TIMES))
        children = [c for c in _TIMES[k + 1:end] if c[0] == d + 1]
        if children:
            rows_left = t - sum(c[2] for c in children)
            rows.append((d + 1, "(in none of the stages above)", rows_left))
    ordered = _order(rows)
    width = max((2 * d + len(s) for d, s, _ in ordered), default=0)
    width = max(width, len("start-up (interpreter and imports)"))
    lines = ["stage times (seconds):"]
    if startup is not None:
        lines.append(f"  {'start-up (interpreter and imports)':<{width}}  {startup:8.2f}")
    lines += [f"  {'  ' * d}{s:<{width - 2 * d}}  {t:8.2f}" for d, s, t in ordered]
    return "\n".join(lines)


def _order(rows: list[tuple[int, str, float]]) -> list[tuple[int, str, float]]:
    """Move each remainder row after the last descendant of its parent."""
    out: list[tuple[int, str, float]] = []
    pending: list[tuple[int, str, float]] = []
    for row in rows:
        if row[1] == "(in none of the stages above)":
            pending.append(row)
            continue
        while pending and pending[-1][0] > row[0]:
            out.append(pending.pop())
        out.append(row)
    out.extend(reversed(pending))
    return out


def pause(stage: str) -> None:
    """Test hook: ``CORRELATE_PAUSE_AT=stage`` sleeps there so that a test can kill the run."""
    if os.environ.get("CORRELATE_PAUSE_AT") == stage:
        time.sleep(float(os.environ.get("CORRELATE_PAUSE_SECONDS", "30")))
