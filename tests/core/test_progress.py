"""The stage table of --timings: every level adds up to the stage that holds it."""

from __future__ import annotations

import time

from correlate.core import progress


def _rows(table: str) -> list[tuple[int, str, float]]:
    out = []
    for line in table.splitlines()[1:]:
        text, seconds = line.rsplit(None, 1)
        out.append(((len(line) - len(line.lstrip())) // 2, text.strip(), float(seconds)))
    return out


def test_children_and_the_remainder_add_up_to_their_parent():
    progress.reset_timings()
    with progress.step("whole"):
        with progress.step("a"):
            time.sleep(0.02)
            with progress.step("a1"):
                time.sleep(0.01)
        with progress.step("b"):
            time.sleep(0.01)
        time.sleep(0.02)                       # outside any child: the remainder row
    rows = _rows(progress.timing_table(startup=0.5))
    assert rows[0] == (1, "start-up (interpreter and imports)", 0.5)
    rows = rows[1:]
    for k, (depth, _, seconds) in enumerate(rows):
        children = []
        for d, _, t in rows[k + 1:]:
            if d <= depth:
                break
            if d == depth + 1:
                children.append(t)
        if children:
            # each line is rounded to 0.01 s: allow half of that per line
            assert abs(sum(children) - seconds) <= 0.005 * (len(children) + 1), (rows, k)
    names = [n for _, n, _ in rows]
    assert names.count("(in none of the stages above)") == 2      # under "whole" and under "a"
    remainder_whole = [t for d, n, t in rows if d == 2 and n.startswith("(in none")]
    assert remainder_whole and remainder_whole[0] >= 0.015          # the 0.02 s sleep
