"""A report for many gauges stays readable: curves and labels for the gauges that matter."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from correlate.report.document import MAX_CURVES, _curve_gauges


def test_curves_keep_failing_and_flagged_then_largest_differences():
    g = 300
    rng = np.random.default_rng(0)
    diff = rng.normal(0, 10, (3, g))
    words = ["pass"] * g
    words[7], words[250] = "fail", "dead"
    diff[1, 11] = 500.0                      # the largest difference at the reference step
    corr = SimpleNamespace(gauges=[f"G{i}" for i in range(g)], status=SimpleNamespace(difference=diff))
    chosen = _curve_gauges(corr, words, ref=1)
    assert len(chosen) == MAX_CURVES and chosen == sorted(chosen)
    assert {7, 250, 11} <= set(chosen)
    # the rest are the largest |difference| at the reference step among the passing gauges
    passing = [j for j in range(g) if words[j] == "pass"]
    expect = sorted(passing, key=lambda j: -abs(diff[1, j]))[:MAX_CURVES - 2]
    assert set(chosen) - {7, 250} == set(expect)


def test_few_gauges_all_get_curves():
    corr = SimpleNamespace(gauges=["A", "B"], status=SimpleNamespace(difference=np.zeros((2, 2))))
    assert _curve_gauges(corr, ["pass", "fail"], ref=0) == [0, 1]
