"""The verdict's direction sentence: which way the overall ratio points (common practice: a
measured/predicted ratio above 1 means the model under-predicts strain, unconservative for
strain-based margins), and never a printed "1.000 < 1"."""

from __future__ import annotations

import json

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


@pytest.mark.parametrize(("ratio", "words"), [
    (1.2e-4, "readings look like percent"), (0.0098, "about 100 times off"),
    (104.0, "about 100 times off"), (1.25, ""), (0.5, ""), (float("nan"), ""), (None, ""),
    (0.0, "")])
def test_a_ratio_of_about_one_hundredth_or_1e4_names_the_unit_slip(ratio, words):
    # 1 % strain is 10,000 microstrain (the definition of the units): readings exported in
    # percent against a model in m/m give measured/predicted ~1e-4; a strain in percent on one
    # side and m/m or microstrain on the other, ~100 or ~1/100
    from correlate.comparison.verdict import unit_hint

    hint = unit_hint(ratio)
    assert (words in hint) if words else hint == ""


def test_the_verdict_gives_the_unit_hint_with_the_ratio_outside_the_criterion(tmp_path):
    from builders import block_readings, default_gauges, write_block_study

    from correlate.commands.cli import main

    gauges = default_gauges()
    rows = block_readings(gauges)
    names = list(gauges["gauge"])
    rows[names] = rows[names] * 100.0     # readings 100 times the model's: a unit slip
    study = write_block_study(tmp_path, readings_rows=rows, gauges=gauges)
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "o"), "--no-report"]) == 0
    reasons = json.loads((tmp_path / "o" / "summary.json").read_text())["verdict"]["reasons"]
    assert any(r.startswith("measured/predicted ratio 100.000 outside") and
               "about 100 times off" in r for r in reasons)
