"""Tests of correlate.comparison.explanations on synthetic gauges whose fault is built into the construction.

The model is an analytic plane strain field: per load case, in-plane strains (ex, ey, gxy) at the
origin plus a linear gradient in (x, y). A grid at angle theta reads the normal strain
    e(theta) = (ex + ey)/2 + (ex - ey)/2 cos 2 theta + gxy/2 sin 2 theta,
the strain transformation equation for plane strain (Gere & Goodno, Mechanics of Materials,
section "Plane Strain"; section number from memory, 7.7). Readings are linear in the load, so a
step's reading is the sum over load cases of load x unit-load reading (superposition, same text).
Each test builds "measured" from a known fault, so the expected explanation is known a priori.
"""

from __future__ import annotations

import re

import numpy as np
import pytest
import statsmodels.api as sm

from correlate.comparison.criteria import Criterion
from correlate.comparison.explanations import (
    GaugeEvidence,
    diagnose,
    diagnose_loads,
    diagnose_rosette,
)
from correlate.core.errors import ModelError, ReadingsFormatError

# Case A: uniaxial stress along x with nu = 0.3 (ey = -nu ex, Hooke's law, same text), strain
# growing along x. Case B: a general in-plane state whose strain grows along y. [microstrain] and
# [microstrain per length unit]; columns of the gradient are d/dx, d/dy.
CASE_A = (np.array([500.0, -150.0, 0.0]), np.array([[20.0, 0.0], [-6.0, 0.0], [0.0, 0.0]]))
CASE_B = (np.array([100.0, 300.0, 250.0]), np.array([[0.0, 5.0], [0.0, 15.0], [0.0, 10.0]]))
# Load steps: the two loads varied independently; the first step is zero load (not active).
LOADS = np.array([[0, 0], [0.5, 0], [1, 0], [1, 0.5], [1, 1], [0.5, 1], [0, 1]], dtype=float)
RAMP = np.array([[0.0], [0.25], [0.5], [0.75], [1.0]])
CRIT = Criterion(relative=0.05, absolute_ue=10.0)


def _grid_reading(strain, theta_deg):
    """Plane strain transformation (Gere & Goodno); strain (..., 3) as (ex, ey, gxy)."""
    t = np.radians(theta_deg)
    ex, ey, gxy = strain[..., 0], strain[..., 1], strain[..., 2]
    return (ex + ey) / 2 + (ex - ey) / 2 * np.cos(2 * t) + gxy / 2 * np.sin(2 * t)


def _unit(cases, centre, phi, offsets, angles):
    """Unit-load readings (k, C) of a grid at ``phi`` deg, moved by (along, across) offsets."""
    t = np.radians(phi)
    along, across = np.array([np.cos(t), np.sin(t)]), np.array([-np.sin(t), np.cos(t)])
    offsets = np.asarray(offsets, dtype=float)
    pos = np.asarray(centre) + offsets[:, :1] * along + offsets[:, 1:] * across
    theta = phi + np.asarray(angles, dtype=float)
    return np.stack([_grid_reading(base + pos @ grad.T, theta) for base, grad in cases], axis=1)


def _gauge(name, centre=(0.0, 0.0), phi=0.0, *, cases=(CASE_A, CASE_B), loads=LOADS,
           offset=(0.0, 0.0), angle=0.0, measured=None, neighbours_pass=True, position_tol=1.0):
    """Evidence for a gauge whose true grid is moved by ``offset`` and turned by ``angle``."""
    def evaluate_at(off, ang):
        return _unit(cases, centre, phi, off, ang) @ loads.T

    zero = np.zeros((1, 2))
    unit = _unit(cases, centre, phi, zero, [0.0])[0]
    predicted = loads @ unit
    if measured is None:
        measured = evaluate_at(np.array([offset]), [angle])[0]
    alternatives = {"rotated_90": evaluate_at(zero, [90.0])[0],
                    # an arbitrary 3 % different model reading, standing in for a finer mesh
                    "nodal_average": 0.97 * predicted}
    return GaugeEvidence(name, np.asarray(measured, dtype=float), predicted,
                         np.any(loads != 0, axis=1), alternatives, loads * unit, evaluate_at,
                         position_tol, 5.0, neighbours_pass)


def _fails(ev):
    mask = ev.active & np.isfinite(ev.measured)
    return not CRIT.passes(ev.measured[mask], ev.predicted[mask]).all()


def _found(df, gauge):
    return set(df.loc[df["gauge"] == gauge, "explanation"])


def test_criterion_passes_hand_worked():
    # Criterion as given by the analyst; limits worked by hand: max(0.1*100, 5) = 10 and
    # max(0.1*0, 5) = 5; NaN measured is not evaluated, NaN predicted cannot pass.
    got = Criterion(0.1, 5.0).passes([110.0, 110.5, np.nan, -5.0, 5.5, 3.0],
                                     [100.0, 100.0, 100.0, 0.0, 0.0, np.nan])
    assert got.tolist() == [True, False, True, True, False, False]


def test_sign_reversed_is_the_only_explanation():
    ev = _gauge("SG-1")
    ev = _gauge("SG-1", measured=-ev.predicted)
    assert _fails(ev)
    df = diagnose([ev], CRIT)
    # -e is outside the range of e(theta) (principal strains bound it) and out of reach of the
    # gradient within the search disc, and a negative gain is not a gain: only the sign fits.
    assert df["explanation"].tolist() == ["sign reversed"]
    np.testing.assert_allclose(df["rms_after_ue"], 0.0, atol=1e-9)  # exact: -(-p) = p


def test_swapped_channels_name_each_other():
    g1, g2 = _gauge("SG-1", (0.0, 0.0), 0.0), _gauge("SG-2", (12.0, 4.0), 90.0)
    g1, g2 = (_gauge("SG-1", (0.0, 0.0), 0.0, measured=g2.measured),
              _gauge("SG-2", (12.0, 4.0), 90.0, measured=g1.measured))
    ok = _gauge("SG-3", (-5.0, 0.0), 20.0)
    df = diagnose([g1, g2, ok], CRIT)
    rows = df[df["explanation"] == "channels swapped"].set_index("gauge")
    assert sorted(rows.index) == ["SG-1", "SG-2"]
    assert "SG-2" in rows.loc["SG-1", "detail"]
    assert "SG-1" in rows.loc["SG-2", "detail"]
    assert "SG-3" not in set(df["gauge"])  # passes, so not diagnosed


def test_grid_rotated_90_in_uniaxial_field():
    # Case A alone: e1 = 500, e2 = -150, so |e1| >= 2 |e2| (uniaxial-ish); the grid lies along e1.
    ev = _gauge("SG-4", cases=(CASE_A,), loads=RAMP, angle=90.0)
    assert _fails(ev)
    df = diagnose([ev], CRIT)
    assert "grid rotated 90 degrees" in _found(df, "SG-4")
    assert "sign reversed" not in _found(df, "SG-4")
    # the +/- 90 deg angle search finds the same turn, and flags it as outside the tolerance
    angle = df[df["explanation"] == "grid angle"]
    np.testing.assert_allclose(np.abs(angle["parameter"]), [90.0], atol=0.01)  # search xatol
    assert angle["plausible"].tolist() == [False]


def test_explanations_of_a_gauge_are_ranked_by_how_well_they_fit():
    # Issue 12: a rotated gauge lists the exact 90-degree turn before any partial fit; within a
    # gauge the rows go from the smallest RMS difference after the explanation upwards.
    ev = _gauge("SG-4", cases=(CASE_A,), loads=RAMP, angle=90.0)
    df = diagnose([ev], CRIT)
    after = df["rms_after_ue"].to_numpy()
    assert (np.diff(np.round(after, 3)) >= 0).all()
    assert df["explanation"].iloc[0] in ("grid rotated 90 degrees", "grid angle")
    assert after[0] < 1e-6                      # the true turn fits exactly


def test_position_offset_three_units_is_found_and_implausible():
    # True offset (2.4, -1.8): distance 3 (3-4-5 triangle). The two load cases have gradients in
    # different directions, so both offset components are determined.
    ev = _gauge("SG-5", phi=30.0, offset=(2.4, -1.8), position_tol=1.0)
    assert _fails(ev)
    df = diagnose([ev], CRIT)
    row = df[df["explanation"] == "position offset"]
    assert len(row) == 1
    np.testing.assert_allclose(row["parameter"], 3.0, atol=0.2)  # brief's tolerance
    assert row["plausible"].tolist() == [False]
    found = re.findall(r"\(([-+\d.e]+), ([-+\d.e]+)\)", row["detail"].iloc[0])
    along, across = map(float, found[0])
    # the field is linear, so the fit is exact; 0.01 allows the optimiser's stopping tolerance
    np.testing.assert_allclose([along, across], [2.4, -1.8], atol=0.01)


def test_offset_search_tolerates_model_with_no_reading_off_the_part():
    # A free edge at along = +3.5: a moved grid beyond it has no model reading (NaN), as when a
    # real model is evaluated off the mesh. The true offset lies inside, so it is still found.
    base = _gauge("SG-5", phi=30.0, offset=(2.4, -1.8))

    def edge(off, ang):
        out = base.evaluate_at(off, ang)
        out[np.asarray(off)[:, 0] > 3.5] = np.nan
        return out

    ev = GaugeEvidence(base.gauge, base.measured, base.predicted, base.active, base.alternatives,
                       base.contributions, edge, 1.0, 5.0, True)
    row = diagnose([ev], CRIT).query("explanation == 'position offset'")
    np.testing.assert_allclose(row["parameter"], 3.0, atol=0.2)  # brief's tolerance


def test_position_offset_with_one_load_case_gives_shortest_offset():
    # One load case, gradient along x: only the x-component of the offset is determined. The true
    # offset (3, 2) along/across on a grid at 0 deg; the shortest offset that fits is (3, 0).
    ev = _gauge("SG-6", cases=(CASE_A,), loads=RAMP, offset=(3.0, 2.0))
    assert _fails(ev)
    row = diagnose([ev], CRIT).query("explanation == 'position offset'")
    np.testing.assert_allclose(row["parameter"], 3.0, atol=0.01)  # optimiser stopping tolerance
    assert "only the component" in row["detail"].iloc[0]


def test_small_angle_error_is_found_and_plausible():
    # At 30 deg to case A's principal axis, de/dtheta is about 10 microstrain per degree, so 3 deg
    # moves the reading by about 30 microstrain, beyond the 17 microstrain limit: it matters.
    ev = _gauge("SG-7", phi=30.0, angle=3.0)
    assert _fails(ev)
    row = diagnose([ev], CRIT).query("explanation == 'grid angle'")
    assert len(row) == 1
    np.testing.assert_allclose(row["parameter"], 3.0, atol=0.01)  # bounded search, xatol 1e-6
    assert row["plausible"].tolist() == [True]


def test_two_fitting_angles_report_the_smaller():
    # One load case: e(theta) = 175 + 325 cos 2 theta is even in theta, so a grid at 30 deg turned
    # by +3 deg (reading at 33 deg) reads the same as one turned by -63 deg (reading at -33 deg).
    ev = _gauge("SG-12", phi=30.0, cases=(CASE_A,), loads=RAMP, angle=3.0)
    assert _fails(ev)
    row = diagnose([ev], CRIT).query("explanation == 'grid angle'")
    np.testing.assert_allclose(row["parameter"], 3.0, atol=0.01)  # bounded search, xatol 1e-6
    assert "also fits at -63.00 deg" in row["detail"].iloc[0]


def test_noisy_gauge_gets_no_explanation():
    rng = np.random.default_rng(20240611)
    ev = _gauge("SG-8", phi=10.0)
    ev = _gauge("SG-8", phi=10.0, measured=ev.predicted + rng.normal(0.0, 15.0, ev.predicted.size))
    assert _fails(ev)
    assert diagnose([ev], CRIT).empty


@pytest.mark.parametrize(("loads", "neighbours", "expected"), [
    (LOADS, True, True), (RAMP * [1.0, 0.6], True, False), (LOADS, False, False),
], ids=["independent-cases", "proportional-loads", "neighbours-fail"])
def test_channel_gain_needs_independent_cases_and_passing_neighbours(loads, neighbours, expected):
    ev = _gauge("SG-9", phi=20.0, loads=loads)
    ev = _gauge("SG-9", phi=20.0, loads=loads, measured=1.3 * ev.predicted,
                neighbours_pass=neighbours)
    assert _fails(ev)
    row = diagnose([ev], CRIT).query("explanation == 'channel gain'")
    assert len(row) == int(expected)
    if expected:
        np.testing.assert_allclose(row["parameter"], 1.3, atol=0.01)  # brief's tolerance


@pytest.mark.parametrize(("key", "explanation"), [
    ("no_kt", "transverse sensitivity in data reduction"),
    ("other_face", "gauge on the other face"),
    ("nodal_average", "mesh too coarse"),
], ids=["no_kt", "other_face", "nodal_average"])
def test_alternative_prediction_that_fits_is_reported(key, explanation):
    base = _gauge("SG-10", phi=45.0)
    alt = 0.8 * base.predicted + 40.0 * base.active  # any reading far from the prediction
    ev = GaugeEvidence("SG-10", alt.copy(), base.predicted, base.active, {key: alt},
                       base.contributions, None, 1.0, 5.0, None)
    assert _fails(ev)
    df = diagnose([ev], CRIT)
    assert df["explanation"].tolist() == [explanation]


def test_bad_shapes_raise_naming_the_gauge():
    ev = _gauge("SG-11")
    bad = GaugeEvidence("SG-11", ev.measured[:-1], ev.predicted, ev.active, {}, ev.contributions,
                        None, 1.0, 5.0, None)
    with pytest.raises(ReadingsFormatError, match="SG-11"):
        diagnose([bad], CRIT)
    wrong = GaugeEvidence("SG-11", -ev.measured, ev.predicted, ev.active, {}, ev.contributions,
                          lambda off, ang: np.zeros((3, 3)), 1.0, 5.0, None)
    with pytest.raises(ModelError, match="SG-11"):
        diagnose([wrong], CRIT)


def _loads_data():
    """Four gauges at different places and angles; contributions (s, g, 2) from the field."""
    places = [((0.0, 0.0), 0.0), ((3.0, 1.0), 45.0), ((-2.0, 4.0), 90.0), ((1.0, -3.0), 120.0)]
    unit = np.stack([_unit((CASE_A, CASE_B), c, p, np.zeros((1, 2)), [0.0])[0] for c, p in places])
    return unit, LOADS[:, None, :] * unit[None, :, :]


def test_load_factors_recovered_exactly():
    _, c = _loads_data()
    measured = 0.95 * c[..., 0] + 1.05 * c[..., 1]
    out = diagnose_loads(measured, c, np.any(LOADS != 0, axis=1), ["A", "B"], CRIT)
    # noise-free data and a full-rank design: least squares is exact up to rounding
    np.testing.assert_allclose([out["factors"]["A"], out["factors"]["B"]], [0.95, 1.05],
                               rtol=0, atol=1e-9)


def test_load_factor_standard_errors_match_statsmodels():
    _, c = _loads_data()
    rng = np.random.default_rng(7)
    measured = 0.95 * c[..., 0] + 1.05 * c[..., 1] + rng.normal(0.0, 5.0, c.shape[:2])
    active = np.any(LOADS != 0, axis=1)
    out = diagnose_loads(measured, c, active, ["A", "B"], CRIT)
    ref = sm.OLS(measured[active].ravel(), c[active].reshape(-1, 2)).fit()  # reference library
    # same closed form computed two ways: agreement to rounding
    np.testing.assert_allclose(list(out["factors"].values()), ref.params, rtol=1e-9, atol=0)
    np.testing.assert_allclose(list(out["standard_errors"].values()), ref.bse, rtol=1e-9, atol=0)


def test_load_with_wrong_sign_is_detected():
    _, c = _loads_data()
    measured = c[..., 0] - c[..., 1]  # the test applied load B opposite to the model's
    out = diagnose_loads(measured, c, np.any(LOADS != 0, axis=1), ["A", "B"], CRIT)
    assert [f["loads"] for f in out["load_sign"]] == [["B"]]
    assert out["load_sign"][0]["factor"] >= 3.0
    assert out["load_sign"][0]["pass_fraction_after"] == 1.0
    # with the sign fixed the fit is exact; the factor of B comes out as -1
    np.testing.assert_allclose(out["factors"]["B"], -1.0, rtol=0, atol=1e-9)


@pytest.mark.parametrize("give_loads", [True, False], ids=["loads-given", "loads-factored"])
def test_swapped_load_columns_are_detected(give_loads):
    unit, c = _loads_data()
    loads = LOADS * [1.0, 1.0]
    measured = LOADS[:, [1, 0]] @ unit.T  # load A recorded as B and vice versa
    out = diagnose_loads(measured, c, np.any(LOADS != 0, axis=1), ["A", "B"], CRIT,
                         loads=loads if give_loads else None)
    assert [f["loads"] for f in out["swapped_loads"]] == [["A", "B"]]
    # both loads peak at 1, so the scaled and absolute swaps agree and the fit is exact
    np.testing.assert_allclose(out["swapped_loads"][0]["rms_after_ue"], 0.0, atol=1e-9)


def _rosette(angles=(0.0, 45.0, 90.0)):
    """Rectangular rosette at the origin under both load cases: grid readings (s, 3), and those
    of its mirror image (grid angles negated)."""
    ang = np.array(angles)
    cases = (CASE_A, CASE_B)
    unit = np.stack([_grid_reading(base, ang) for base, _ in cases], axis=-1)  # (3, C)
    unit_mirror = np.stack([_grid_reading(base, -ang) for base, _ in cases], axis=-1)
    return LOADS @ unit.T, LOADS @ unit_mirror.T


def test_rosette_permuted_grids_detected():
    predicted, mirrored = _rosette()
    # channel of grid A holds grid B's reading, B holds C's, C holds A's
    measured = predicted[:, [1, 2, 0]]
    active = np.any(LOADS != 0, axis=1)
    df = diagnose_rosette("R-1", ["A", "B", "C"], measured, predicted, mirrored, active, CRIT)
    assert df["explanation"].tolist() == ["rosette grids permuted"]
    # measured columns in the order C, A, B restore grids A, B, C
    assert "measured columns C, A, B fit grids A, B, C" in df["detail"].iloc[0]


def test_rosette_mirrored_detected_and_healthy_rosette_quiet():
    predicted, mirrored = _rosette()
    active = np.any(LOADS != 0, axis=1)
    df = diagnose_rosette("R-2", ["A", "B", "C"], mirrored, predicted, mirrored, active, CRIT)
    assert "rosette mirrored" in set(df["explanation"])
    quiet = diagnose_rosette("R-3", ["A", "B", "C"], predicted, predicted, mirrored, active, CRIT)
    assert quiet.empty


def test_offset_at_the_rim_of_the_search_widens_it_instead_of_reporting_the_clip():
    # True offset (4.8, -3.6), distance 6, with a search radius of 3.5: a disc of radius 3.5 can only
    # offer its rim (distance 3.5), which does not fit the linear field exactly. The search doubles
    # its radius and finds the true offset; 0.01 is the optimiser's stopping tolerance as above.
    ev = _gauge("SG-5", phi=30.0, offset=(4.8, -3.6), position_tol=1.0)
    assert _fails(ev)
    row = diagnose([ev], CRIT, search_radius=3.5).query("explanation == 'position offset'")
    assert len(row) == 1
    detail = row["detail"].iloc[0]
    along, across = map(float, re.findall(r"\(([-+\d.e]+), ([-+\d.e]+)\)", detail)[0])
    np.testing.assert_allclose([along, across], [4.8, -3.6], atol=0.01)
    assert "search widened to a radius of 7" in detail


def test_offset_inside_the_search_is_not_widened():
    ev = _gauge("SG-5", phi=30.0, offset=(2.4, -1.8), position_tol=1.0)
    row = diagnose([ev], CRIT, search_radius=5.0).query("explanation == 'position offset'")
    assert "widened" not in row["detail"].iloc[0]
