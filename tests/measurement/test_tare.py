"""Tare per sequence: each sequence's readings and loads relative to its own tare row."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from correlate.core.errors import ReadingsFormatError
from correlate.measurement.tare import apply_tare, tare_readings, tare_rows, tare_steps


def _table(loads, sequence):
    loads = np.asarray(loads, dtype=float)
    return pd.DataFrame({"step": np.arange(len(loads)), "sequence": sequence, "F": loads})


def test_apply_tare_matches_pandas_groupby_first():
    # Reference: pandas' own groupby-transform("first") subtracted per sequence.
    rng = np.random.default_rng(3)
    values = rng.normal(100, 30, (9, 4))
    sequence = np.array([0, 0, 0, 1, 1, 1, 1, 2, 2])
    tare = tare_rows(values[:, :1], sequence, rule="first", zero_tol=0.01, source="t")
    got = apply_tare(values, tare, sequence)
    frame = pd.DataFrame(values).assign(seq=sequence)
    expected = (frame.drop(columns="seq") - frame.groupby("seq").transform("first")).to_numpy()
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-12)  # same subtraction, exact


def test_zero_load_rule_takes_the_last_unloaded_row_before_loading():
    # A seating preload of 0.05 before the 0.0 row: the row just before loading is the tare row
    # (common practice: tare as close to the start of loading as the log allows).
    loads = [0.05, 0.0, 5.0, 10.0, 0.0]
    tare = tare_rows(np.c_[loads], np.zeros(5, dtype=int), rule="zero-load", zero_tol=0.01,
                     source="t")
    assert tare.tolist() == [False, True, False, False, False]


def test_zero_load_rule_without_an_unloaded_row_is_refused():
    with pytest.raises(ReadingsFormatError, match="sequence 0 has no zero-load row"):
        tare_rows(np.c_[[5.0, 10.0]], np.zeros(2, dtype=int), rule="zero-load", zero_tol=0.01,
                  source="log.csv")


def test_tared_loads_and_later_zero_rows():
    # Hand values: sequence 1 starts at a 1 kN preload, so its tared loads drop by 1; the last row
    # of each sequence returns to zero and is a zero-load row, not a tare row.
    steps = tare_steps(_table([0, 5, 10, 0, 1, 6, 11, 1], [0, 0, 0, 0, 1, 1, 1, 1]), ("F",),
                       rule="first", zero_tol=0.01, source="t")
    assert steps.loads[:, 0].tolist() == [0, 5, 10, 0, 0, 5, 10, 0]
    assert steps.tare.tolist() == [True, False, False, False, True, False, False, False]
    assert steps.zero_load.tolist() == [False, False, False, True, False, False, False, True]
    assert steps.active.tolist() == [False, True, True, False, False, True, True, False]


def test_missing_load_value_names_the_step():
    table = _table([0, np.nan, 10], [0, 0, 0])
    with pytest.raises(ReadingsFormatError, match=r"load value missing in column\(s\) F at step"):
        tare_steps(table, ("F",), rule="first", zero_tol=0.01, source="log.csv")


def test_a_gauge_without_a_tare_value_is_left_untared_not_guessed():
    steps = tare_steps(_table([0, 5, 10], [0, 0, 0]), ("F",), rule="first", zero_tol=0.01,
                       source="t")
    raw = np.array([[np.nan, 1.0], [50.0, 51.0], [100.0, 101.0]])
    got = tare_readings(raw, steps)
    assert np.isnan(got[:, 0]).all()                       # no tare value: the sequence is NaN
    np.testing.assert_allclose(got[:, 1], [0.0, 50.0, 100.0], rtol=0, atol=1e-12)
