"""Tests of correlate.measurement.health on synthetic channels whose flags follow from closed forms.

Each channel is a known function of the load; the expected span, residual, regression residual or
loading/unloading gap is worked out by hand (stated beside the check) or with numpy.linalg.lstsq.
The thresholds are the module's defaults, which are common practice, not a standard.
"""

from __future__ import annotations

import numpy as np
import pytest

from correlate.core.errors import ReadingsFormatError, StudyError
from correlate.measurement.health import (
    DEFAULTS,
    DROPS,
    FLAG_COLUMNS,
    assess_channels,
    load_direction,
)

# One load cycle with a tare row and a return to zero: 0 (tare), up to 5, back to 0.
CYCLE = np.array([0.0, 1, 2, 3, 4, 5, 4, 3, 2, 1, 0])
CYCLE_DIRECTION = np.array([0, 1, 1, 1, 1, 1, -1, -1, -1, -1, -1])


def _assess(columns, loads=CYCLE, direction=CYCLE_DIRECTION, range_ue=None, zero_load=None,
            **thresholds):
    """Run assess_channels on gauges SG-1.. with the tare at row 0, one sequence, steps 0..s-1."""
    y = np.column_stack(columns).astype(float)
    P = np.asarray(loads, dtype=float)
    s, g = y.shape
    mag = np.abs(P) if P.ndim == 1 else np.abs(P).sum(axis=1)
    tare = np.arange(s) == 0
    if zero_load is None:
        zero_load = (mag == 0) & ~tare
    return assess_channels(
        y, gauges=[f"SG-{k + 1}" for k in range(g)], loads=P, steps=np.arange(s),
        sequence=np.zeros(s, dtype=int), tare=tare, zero_load=zero_load, direction=direction,
        range_ue=np.full(g, np.nan) if range_ue is None else range_ue,
        thresholds=thresholds or None)


def _flags(table, gauge="SG-1"):
    return set(table.loc[table["gauge"] == gauge, "flag"])


def test_clean_linear_channel_has_no_flag():
    table = _assess([200.0 * CYCLE])  # e = 200 P exactly: every residual is zero
    assert table.empty
    assert tuple(table.columns) == FLAG_COLUMNS


def test_constant_channel_is_dead_with_its_span():
    y = np.full(CYCLE.size, 3.0)
    y[0] = 0.0   # tare row
    y[5] = 4.0   # span over the loaded steps = max - min = 4 - 3 = 1 ue
    table = _assess([y])
    assert list(table["flag"]) == ["dead"]  # a dead gauge gets no further gauge-level flags
    row = table.iloc[0]
    # span by hand: 4 - 3; exact in binary floating point
    np.testing.assert_allclose(row["value"], 1.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(row["threshold"], DEFAULTS["dead_ue"], rtol=0, atol=0)
    assert (row["step"], row["scope"], row["drops"]) == (-1, "gauge", "gauge")
    assert "below 5 ue" in row["reason"]


def test_dead_threshold_is_configurable():
    y = np.full(CYCLE.size, 3.0)
    y[0], y[5] = 0.0, 4.0  # span 1 ue, above a dead_ue of 0.5 ue
    assert "dead" not in _flags(_assess([y], dead_ue=0.5))


def test_all_missing_channel_is_dead_only():
    table = _assess([200.0 * CYCLE, np.full(CYCLE.size, np.nan)])
    assert list(table["flag"]) == ["dead"]  # no 'missing' rows on top of the dead one
    assert table["gauge"].iloc[0] == "SG-2"


def test_missing_step_is_flagged_at_that_step_only():
    y = 200.0 * CYCLE
    y[3] = np.nan
    table = _assess([y])
    assert list(table["flag"]) == ["missing"]
    assert (table["step"].iloc[0], table["drops"].iloc[0]) == (3, "step")


def test_channel_at_the_rail_is_flagged_at_exactly_those_steps():
    P = np.array([0.0, 1, 2, 3, 2, 1, 0, -1, -2, -3, -2, -1, 0])
    direction = np.array([0, 1, 1, 1, -1, -1, -1, 1, 1, 1, -1, -1, -1])  # change of |P|
    rng = 1000.0
    y = np.clip(500.0 * P, -rng, rng)  # a channel saturating at +-1000 ue
    table = _assess([y, y], loads=P, direction=direction, range_ue=np.array([rng, np.nan]))
    rail = table[table["flag"] == "rail"]
    # closed form: rail where |500 P| >= 0.98 * 1000, i.e. |P| >= 1.96 -> |P| in {2, 3}
    expected = np.flatnonzero(np.abs(500.0 * P) >= DEFAULTS["rail_fraction"] * rng)
    np.testing.assert_array_equal(rail["step"], expected)
    np.testing.assert_allclose(rail["value"], np.sign(P[expected]) * rng, rtol=0, atol=0)
    np.testing.assert_allclose(rail["threshold"], 980.0, rtol=1e-15, atol=0)  # 0.98 x 1000
    assert set(rail["drops"]) == {"step"}
    assert _flags(table, "SG-1") == {"rail"}  # the steps left once the rail is dropped are linear
    # unknown range (SG-2): no rail check, so the clipped steps stay in the fit and bend it
    assert _flags(table, "SG-2") == {"nonlinear"}


def test_residual_at_final_zero_step_is_drift_with_its_value():
    y = 120.0 * CYCLE  # peak 600 ue at P = 5
    y[-1] = 40.0       # return-to-zero residual 40 ue
    table = _assess([y])
    assert _flags(table) == {"drift"}
    row = table.iloc[0]
    np.testing.assert_allclose(row["value"], 40.0, rtol=0, atol=1e-12)  # the reading itself
    # closed form: max(drift_ue, drift_fraction * peak) = max(20, 0.05 * 600) = 30 ue
    np.testing.assert_allclose(row["threshold"], 30.0, rtol=1e-12, atol=0)
    assert (row["scope"], row["drops"]) == ("gauge", "gauge")


def test_quadratic_response_is_nonlinear_with_lstsq_residual_fraction():
    y = 40.0 * CYCLE**2  # peak 40 * 25 = 1000 ue
    table = _assess([y])
    row = table[table["flag"] == "nonlinear"].iloc[0]
    # reference: numpy least squares of e ~ a + b P over the loaded steps (rows 1..)
    X = np.column_stack([np.ones(CYCLE.size - 1), CYCLE[1:]])
    r = y[1:] - X @ np.linalg.lstsq(X, y[1:], rcond=None)[0]
    expected = np.sqrt(np.mean(r**2)) / 1000.0
    assert expected > DEFAULTS["nonlinear_fraction"]
    np.testing.assert_allclose(row["value"], expected, rtol=1e-9, atol=0)  # two lstsq solvers agree
    assert (row["scope"], row["drops"]) == ("gauge", "none")


def test_unloading_path_offset_by_ten_percent_is_hysteresis():
    P = np.array([0.0, 1, 2, 3, 4, 5, 4, 3, 2, 1])  # no return to zero: no drift
    direction = np.array([0, 1, 1, 1, 1, 1, -1, -1, -1, -1])
    u = (direction < 0).astype(float)
    y = 100.0 * P + 50.0 * u  # unloading offset d = 50 ue = 10 % of the 500 ue peak
    table = _assess([y], loads=P, direction=direction)
    row = table[table["flag"] == "hysteresis"].iloc[0]
    # Closed form (Frisch-Waugh-Lovell): the residual of e on [1, P] is d times the residual of u,
    # u_res = u - mean(u) - beta (P - mean(P)), beta = cov(u, P) / var(P). Over P = 1..5, 4..1:
    # cov = 10/9 - (4/9)(25/9) = -10/81, var = 85/9 - 625/81 = 140/81, beta = -1/14, so
    # mean u_res(unloading) - mean u_res(loading) = 1 - beta (2.5 - 3) = 27/28 and
    # value = 50 * 27/28 / 500 = 27/280.
    np.testing.assert_allclose(row["value"], 27.0 / 280.0, rtol=1e-9, atol=0)  # lstsq round-off
    np.testing.assert_allclose(row["threshold"], DEFAULTS["hysteresis_fraction"], rtol=0, atol=0)
    assert row["drops"] == "none"


def test_two_actuators_linear_in_both_is_not_nonlinear():
    # two load columns varied independently; the channel reads 100 F1 - 60 F2 exactly
    F = np.array([[0.0, 0], [1, 0], [2, 0], [2, 1], [2, 2], [1, 2], [0, 2], [0, 1], [1, 1], [0, 0]])
    y = 100.0 * F[:, 0] - 60.0 * F[:, 1]
    direction = load_direction(F, np.zeros(len(F)), tol=1e-6)
    table = _assess([y], loads=F, direction=direction)
    assert table.empty
    # the multiple regression is the reason: a fit on F1 alone (numpy lstsq) leaves > 5 % of peak
    X = np.column_stack([np.ones(len(F) - 1), F[1:, 0]])
    r = y[1:] - X @ np.linalg.lstsq(X, y[1:], rcond=None)[0]
    assert np.sqrt(np.mean(r**2)) / np.abs(y).max() > DEFAULTS["nonlinear_fraction"]


@pytest.mark.parametrize("seed", range(10), ids=lambda s: f"seed{s}")
def test_slight_hysteresis_and_noise_raise_no_flag(seed):
    # realistic channel: 1000 ue peak, unloading 1 % of peak above loading, 2 ue noise. Expected:
    # hysteresis about 0.01 and RMS residual about 0.5 % of peak (both < 0.05), zero residual about
    # 10 +- 2 ue < max(20, 50) ue.
    rng = np.random.default_rng(seed)
    u = (CYCLE_DIRECTION < 0).astype(float)
    y = 200.0 * CYCLE + 10.0 * u + rng.normal(0.0, 2.0, CYCLE.size)
    y[0] = 0.0
    assert _assess([y]).empty


def test_too_few_points_skips_the_gauge_checks():
    y = np.full(CYCLE.size, np.nan)
    y[[0, 1, 2, 3]] = [0.0, 5.0, 5.0, 5.0]  # 3 readings < min_points 4: flat but not judged dead
    assert _flags(_assess([y])) == {"missing"}


def test_every_flag_row_carries_value_threshold_and_drops():
    y = np.column_stack([
        np.full(CYCLE.size, np.nan),              # dead (all missing)
        np.where(CYCLE == 3, np.nan, 100 * CYCLE),  # missing x2
        np.clip(300.0 * CYCLE, None, 1000.0),      # rail
        40.0 * CYCLE**2,                          # nonlinear
    ])
    y[-1, 3] = 200.0                              # drift on the nonlinear one
    table = _assess(list(y.T), range_ue=np.array([np.nan, np.nan, 1000.0, np.nan]))
    assert {"dead", "missing", "rail", "nonlinear", "drift"} <= set(table["flag"])
    assert np.isfinite(table["value"]).all() and np.isfinite(table["threshold"]).all()
    assert (table["drops"] == table["flag"].map(DROPS)).all()
    assert ((table["scope"] == "gauge") == (table["step"] == -1)).all()
    assert table["reason"].str.len().gt(0).all()


def test_load_direction_on_up_and_down_sequence():
    # magnitude 0, 2, 4, 6, 4, 2, 0: first step 0, then three increases and three decreases
    got = load_direction([0.0, 2, 4, 6, 4, 2, 0], np.zeros(7), tol=0.01)
    np.testing.assert_array_equal(got, [0, 1, 1, 1, -1, -1, -1])


def test_load_direction_restarts_per_sequence_and_ignores_small_changes():
    # 2 -> 2.001 changes the magnitude by 0.001 / 4 < tol; a new sequence starts at 0
    got = load_direction([0.0, 2, 2.001, 4, 0, 3], [0, 0, 0, 0, 1, 1], tol=0.01)
    np.testing.assert_array_equal(got, [0, 1, 0, 1, 0, 1])


def test_load_direction_uses_the_norm_of_scaled_columns():
    # each column peaks at 1, so the magnitudes are 0, 1, sqrt(2), 1
    got = load_direction([[0.0, 0], [1, 0], [1, 1], [0, 1]], [0, 0, 0, 0], tol=0.01)
    np.testing.assert_array_equal(got, [0, 1, 1, -1])


def test_wrong_shape_names_the_array():
    with pytest.raises(ReadingsFormatError, match="zero_load"):
        assess_channels(np.zeros((3, 1)), gauges=["SG-1"], loads=np.zeros(3), steps=range(3),
                        sequence=np.zeros(3), tare=np.zeros(3), zero_load=np.zeros(4),
                        direction=np.zeros(3), range_ue=[np.nan])


def test_unknown_threshold_key_is_a_study_error():
    with pytest.raises(StudyError, match="dead_u"):
        _assess([200.0 * CYCLE], dead_u=3.0)


@pytest.mark.parametrize("seed", range(5), ids=lambda s: f"seed{s}")
def test_low_strain_channel_noise_is_not_a_shape_flag(seed):
    # A channel peaking at 30 ue with 3 ue of noise: the noise alone is ~10 % of its peak, above
    # the 5 % shape fractions, but below the noise floor (noise_ue, common practice 10 ue), so
    # neither nonlinear nor hysteresis is raised. A 1000 ue channel with the same relative
    # curvature would be flagged (see the quadratic test above).
    rng = np.random.default_rng(seed)
    y = 6.0 * CYCLE + rng.normal(0.0, 3.0, CYCLE.size)
    y[0] = 0.0
    flags = _flags(_assess([y]))
    assert "nonlinear" not in flags and "hysteresis" not in flags
