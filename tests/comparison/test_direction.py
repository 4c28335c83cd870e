"""The verdict's direction sentence: which way the overall ratio points (common practice: a
measured/predicted ratio above 1 means the model under-predicts strain, unconservative for
strain-based margins), and never a printed "1.000 < 1"."""

from __future__ import annotations

import numpy as np
import pytest

from correlate.comparison.criteria import Statuses
from correlate.comparison.verdict import overall_direction


def _statuses(unconservative: list[bool]) -> Statuses:
    g = len(unconservative)
    z = np.zeros((1, g))
    return Statuses(difference=z, ratio=z, relative=z, allowed=z, basis=z.astype(str),
                    status=np.full((1, g), "pass"),
                    unconservative=np.array([unconservative]), evaluated=np.ones((1, g), bool))


@pytest.mark.parametrize(("ratio", "words"), [
    (1.055, "under-predicts"), (0.95, "over-predicts"),
    (1.0004, "within 0.05 %"), (0.9996, "within 0.05 %"), (1.0, "within 0.05 %"),
    (1.0006, "under-predicts"), (0.9994, "over-predicts")])
def test_direction_follows_the_printed_ratio(ratio, words):
    text, _ = overall_direction(ratio, _statuses([False, False]), ["A", "B"])
    assert words in text
    assert f"{ratio:.3f}" in text
    # the printed figure and the sign written beside it never contradict each other
    assert not ("1.000 <" in text or "1.000 >" in text)


def test_unconservative_gauges_are_named_whatever_the_overall_ratio():
    _, beyond = overall_direction(0.9, _statuses([False, True]), ["A", "B"])
    assert beyond == ["B"]
    assert overall_direction(float("nan"), _statuses([True, False]), ["A", "B"]) == (
        "the overall ratio is not defined", ["A"])
