"""Flags and their dispositions: health flags, overrides, reversed and installation flags."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pandas as pd

from correlate.comparison.dispositions import (
    PENDING,
    dispose_health,
    flag_installation,
    flag_reversed,
    gauge_ratios,
)
from correlate.comparison.pairing import Steps
from correlate.readers.study import Override

NAMES = ["A", "B", "C"]


def _steps(n: int = 4) -> Steps:
    loads = np.linspace(0, 10, n)[:, None]
    return Steps(step=np.arange(n), sequence=np.zeros(n, dtype=np.int64), loads=loads,
                 load_names=("F",), tare=np.arange(n) == 0, zero_load=np.zeros(n, dtype=bool),
                 factors=loads / 10.0)


def _study(*overrides: Override) -> SimpleNamespace:
    return SimpleNamespace(overrides=tuple(overrides), health={})


def _flags(rows: list[dict]) -> pd.DataFrame:
    cols = ["gauge", "step", "sequence", "flag", "value", "threshold", "scope", "drops", "reason"]
    df = pd.DataFrame(rows, columns=cols)
    df["disposition"] = ""
    return df


def test_a_gauge_flag_leaves_the_gauge_out_and_keep_brings_it_back():
    flags = _flags([dict(gauge="A", step=-1, sequence=-1, flag="dead", drops="gauge"),
                    dict(gauge="B", step=-1, sequence=-1, flag="drift", drops="gauge")])
    excl = dispose_health(flags, _study(Override("B", "keep", "drift within the gauge spec")),
                          NAMES, _steps())
    assert excl.gauges.tolist() == [True, False, False]
    assert (excl.text[:, 0] == "dead").all() and (excl.text[:, 1] == "").all()
    assert flags.loc[1, "disposition"] == "kept: drift within the gauge spec"


def test_a_step_flag_leaves_only_that_step_out():
    flags = _flags([dict(gauge="C", step=2, sequence=0, flag="rail", drops="step")])
    excl = dispose_health(flags, _study(), NAMES, _steps())
    assert excl.steps[:, 2].tolist() == [False, False, True, False]
    assert not excl.gauges.any()


def test_exclude_adds_a_record_with_the_reason():
    flags = _flags([])
    excl = dispose_health(flags, _study(Override("C", "exclude", "debonded after step 3")),
                          NAMES, _steps())
    assert excl.gauges.tolist() == [False, False, True]
    row = flags.iloc[-1]
    assert (row["gauge"], row["flag"], row["disposition"]) == \
        ("C", "excluded", "excluded: debonded after step 3")


def test_gauge_ratios_match_least_squares_through_the_origin():
    # Reference: numpy.linalg.lstsq of measured on predicted without intercept.
    rng = np.random.default_rng(5)
    p = rng.normal(0, 300, (6, 2))
    m = np.c_[1.1 * p[:, 0] + rng.normal(0, 5, 6), -p[:, 1]]
    k, r2 = gauge_ratios(m, p, np.ones_like(m, dtype=bool))
    for j in range(2):
        (ref,), *_ = np.linalg.lstsq(p[:, [j]], m[:, j], rcond=None)
        assert abs(k[j] - ref) < 1e-12          # same normal equation, rounding only
    assert abs(k[1] + 1.0) < 1e-12 and abs(r2[1] - 1.0) < 1e-12


def test_reversed_gauge_waits_for_a_disposition():
    steps = _steps()
    predicted = np.outer(steps.loads[:, 0], [100.0, 50.0, 80.0])
    measured = predicted * np.array([1.0, -1.0, 1.0])   # B reads with its sign reversed
    for study, dropped, disposition in ((_study(), True, PENDING),
                                        (_study(Override("B", "keep", "confirmed")), False,
                                         "kept: confirmed")):
        flags = _flags([])
        excl = dispose_health(flags, study, NAMES, steps)
        rev = flag_reversed(measured, predicted, NAMES, steps, excl, flags, study)
        assert rev.tolist() == [False, True, False]
        assert excl.gauges[1] == dropped
        assert flags.iloc[-1]["flag"] == "reversed"
        assert flags.iloc[-1]["disposition"] == disposition


def test_installation_flag_once_per_gauge_and_not_on_a_reversed_one():
    steps = _steps()
    flags = _flags([])
    excl = dispose_health(flags, _study(), NAMES, steps)
    faults = [("A", "grid rotated 90 degrees, ..."), ("A", "channels swapped, ..."),
              ("B", "channels swapped, ...")]
    suspect = flag_installation(faults, NAMES, np.array([False, True, False]), excl, flags,
                                _study())
    assert suspect.tolist() == [True, False, False]
    assert flags["flag"].tolist() == ["installation"]
    assert (excl.text[:, 0] == "installation").all()


def test_reversed_ratio_of_the_study_sets_the_band():
    # [health] reversed_ratio r: ratios in [-(2 - r), -r] count as reversed (common practice).
    steps = _steps()
    predicted = np.outer(steps.loads[:, 0], [100.0, 50.0, 80.0])
    measured = predicted * np.array([1.0, -1.2, 1.0])
    for r, expected in ((0.5, True), (0.95, False)):
        study = SimpleNamespace(overrides=(), health={"reversed_ratio": r})
        flags = _flags([])
        excl = dispose_health(flags, study, NAMES, steps)
        assert flag_reversed(measured, predicted, NAMES, steps, excl, flags, study)[1] == expected
