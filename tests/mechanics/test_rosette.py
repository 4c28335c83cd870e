"""Tests of correlate.mechanics.rosette against published rosette formulas, worked examples and numpy."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from correlate.core.errors import GaugeError
from correlate.mechanics import rosette
from correlate.mechanics.rosette import (
    check_angles,
    grid_angles,
    plane_stress,
    principal,
    reduce_grids,
    reduce_rosette,
    von_mises,
)

ANGLE_SETS = {
    "rectangular": [0.0, 45.0, 90.0],
    "delta": [0.0, 60.0, 120.0],
    "delta-240": [0.0, 120.0, 240.0],
    "odd-3": [0.0, 30.0, 100.0],
    "rect-4": [0.0, 45.0, 90.0, 135.0],
    "odd-5": [0.0, 25.0, 70.0, 110.0, 160.0],
}


def _grid_strains(ex, ey, gxy, angles_deg):
    """Strain transformation e(t) = ex cos^2 t + ey sin^2 t + gxy sin t cos t (mechanics texts)."""
    t = np.radians(np.asarray(angles_deg, dtype=float))
    ex, ey, gxy = (np.asarray(a, dtype=float)[..., None] for a in (ex, ey, gxy))
    return ex * np.cos(t) ** 2 + ey * np.sin(t) ** 2 + gxy * np.sin(t) * np.cos(t)


def _angle_gap(a, b):
    """Difference of two axis directions in degrees, modulo 180 (an axis has no sign)."""
    return np.degrees(np.angle(np.exp(2j * np.radians(a - b)))) / 2


def test_all_names_exist():
    for name in rosette.__all__:
        assert hasattr(rosette, name)


# --- 1. closed forms, ASTM E1561 and Vishay Micro-Measurements TN-515 (both from memory) ---

def test_rectangular_closed_form_matches_general_solve():
    rng = np.random.default_rng(1561)
    ea, eb, ec = rng.uniform(-2000, 2000, size=(3, 200))
    # ASTM E1561 / TN-515 rectangular (0/45/90) rosette, from memory:
    # e1,2 = (ea + ec)/2 +/- (1/sqrt 2) sqrt((ea - eb)^2 + (eb - ec)^2);
    # TN-515 gives tan 2theta = (ea - 2 eb + ec)/(ea - ec) for the angle measured the other way
    # (clockwise); counterclockwise from grid A it is atan2(2 eb - ea - ec, ea - ec)/2.
    root = np.sqrt((ea - eb) ** 2 + (eb - ec) ** 2) / np.sqrt(2)
    e1, e2 = (ea + ec) / 2 + root, (ea + ec) / 2 - root
    theta = 0.5 * np.degrees(np.arctan2(2 * eb - ea - ec, ea - ec))
    state = reduce_grids(np.stack([ea, eb, ec], axis=-1), [0, 45, 90])
    got = principal(state["ex"], state["ey"], state["gxy"])
    # 1e-9 microstrain: round-off only on values of order 1e3
    np.testing.assert_allclose(got["e1"], e1, rtol=0, atol=1e-9)
    np.testing.assert_allclose(got["e2"], e2, rtol=0, atol=1e-9)
    np.testing.assert_allclose(_angle_gap(got["angle_deg"], theta), 0, rtol=0, atol=1e-9)  # deg


def test_delta_closed_form_matches_general_solve():
    rng = np.random.default_rng(515)
    ea, eb, ec = rng.uniform(-2000, 2000, size=(3, 200))
    # ASTM E1561 / TN-515 delta (0/60/120) rosette, from memory:
    # e1,2 = (ea + eb + ec)/3 +/- (sqrt 2 / 3) sqrt((ea - eb)^2 + (eb - ec)^2 + (ec - ea)^2);
    # TN-515 gives tan 2theta = sqrt 3 (ec - eb)/(2 ea - eb - ec) measured clockwise;
    # counterclockwise from grid A it is atan2(sqrt 3 (eb - ec), 2 ea - eb - ec)/2.
    root = np.sqrt(2) / 3 * np.sqrt((ea - eb) ** 2 + (eb - ec) ** 2 + (ec - ea) ** 2)
    mean = (ea + eb + ec) / 3
    theta = 0.5 * np.degrees(np.arctan2(np.sqrt(3) * (eb - ec), 2 * ea - eb - ec))
    state = reduce_grids(np.stack([ea, eb, ec], axis=-1), [0, 60, 120])
    got = principal(state["ex"], state["ey"], state["gxy"])
    # 1e-9 microstrain: round-off only
    np.testing.assert_allclose(got["e1"], mean + root, rtol=0, atol=1e-9)
    np.testing.assert_allclose(got["e2"], mean - root, rtol=0, atol=1e-9)
    np.testing.assert_allclose(_angle_gap(got["angle_deg"], theta), 0, rtol=0, atol=1e-9)  # deg


# --- 2. worked examples ---

def test_worked_example_delta_rosette_e1_beyond_minus_45():
    # Hibbeler, Mechanics of Materials, strain-rosette example (from memory, page not confirmed):
    # 0/60/120 rosette reads ea = 60, eb = 135, ec = 264 microstrain.
    # Hand check: ex = ea = 60; gxy = (2/sqrt 3)(eb - ec) = -148.956;
    # ey = (2(eb + ec) - ea)/3 = 246.
    # Mohr: centre 153, radius sqrt(93^2 + 74.478^2) = 119.147 -> e1 = 272.147, e2 = 33.853;
    # 2 theta = atan2(-148.956, -186) = -141.31 deg -> theta = -70.655 deg (ex < ey, gxy < 0).
    state = reduce_grids([60.0, 135.0, 264.0], [0, 60, 120])
    got = principal(state["ex"], state["ey"], state["gxy"])
    radius = np.hypot(93.0, 129.0 / np.sqrt(3))
    # 1e-9: exact arithmetic apart from round-off
    np.testing.assert_allclose(state["ex"], 60.0, rtol=0, atol=1e-9)
    np.testing.assert_allclose(state["ey"], 246.0, rtol=0, atol=1e-9)
    np.testing.assert_allclose(state["gxy"], -258.0 / np.sqrt(3), rtol=0, atol=1e-9)
    np.testing.assert_allclose(got["e1"], 153.0 + radius, rtol=0, atol=1e-9)
    np.testing.assert_allclose(got["e2"], 153.0 - radius, rtol=0, atol=1e-9)
    theta = 0.5 * np.degrees(np.arctan2(-258 / np.sqrt(3), -186))
    np.testing.assert_allclose(got["angle_deg"], theta, rtol=0, atol=1e-9)
    # textbook rounding to three significant figures: 0.5 microstrain, 0.05 deg
    np.testing.assert_allclose([got["e1"], got["e2"]], [272.0, 33.9], rtol=0, atol=0.5)
    np.testing.assert_allclose(got["angle_deg"], -70.66, rtol=0, atol=0.05)


@pytest.mark.parametrize(("eb", "angle"), [(550.0, 63.43494882292201), (150.0, -63.43494882292201)],
                         ids=["gxy-positive", "gxy-negative"])
def test_worked_example_rectangular_second_quadrant(eb, angle):
    # Hand-worked (Mohr's circle): 0/45/90 rosette, ea = 200, ec = 500, eb = 550 or 150 microstrain.
    # ex = 200, ey = 500, gxy = 2 eb - ea - ec = +400 or -400. Centre 350, radius
    # sqrt(150^2 + 200^2) = 250 -> e1 = 600, e2 = 100, shear_max = 500.
    # tan theta = 2 (check: cos^2 = 1/5, sin^2 = 4/5, sin cos = 2/5; 40 + 400 + 160 = 600), so
    # theta = +/- atan 2 = +/- 63.4349 deg: the e1 axis is beyond 45 deg since ex < ey.
    state = reduce_grids([200.0, eb, 500.0], [0, 45, 90])
    got = principal(state["ex"], state["ey"], state["gxy"])
    assert np.degrees(np.arctan(2.0)) == pytest.approx(abs(angle), rel=0, abs=1e-12)  # the constant
    # 1e-9: round-off only
    np.testing.assert_allclose([got["e1"], got["e2"], got["shear_max"]], [600.0, 100.0, 500.0],
                               rtol=0, atol=1e-9)
    np.testing.assert_allclose(got["angle_deg"], angle, rtol=0, atol=1e-9)


def test_principal_direction_undefined_within_noise():
    # Equal principal strains (Mohr's circle of zero radius) have no principal direction.
    got = principal([300.0, 300.0, 300.0], [300.0, 302.0, 310.0], [0.0, 0.0, 0.0], noise=5.0)
    assert np.isnan(got["angle_deg"][:2]).all()
    # 90 deg: ex < ey with gxy = 0 puts e1 along y; the range is (-90, 90]
    assert got["angle_deg"][2] == pytest.approx(90.0, rel=0, abs=1e-12)
    # with negative-zero shear atan2 returns -180; the result must still be +90
    assert principal(1.0, 2.0, -0.0)["angle_deg"] == pytest.approx(90.0, rel=0, abs=1e-12)


# --- 3. round trip and numpy reference ---

@pytest.mark.parametrize("angles", list(ANGLE_SETS.values()), ids=list(ANGLE_SETS))
def test_round_trip_recovers_state_and_principal_matches_eigvalsh(angles):
    rng = np.random.default_rng(len(angles) * 1000 + int(sum(angles)))
    ex, ey, gxy = rng.uniform(-3000, 3000, size=(3, 50))
    state = reduce_grids(_grid_strains(ex, ey, gxy, angles), angles)
    # 1e-9 microstrain: round-off only (condition numbers are below 10 for these sets)
    for key, want in (("ex", ex), ("ey", ey), ("gxy", gxy), ("residual", 0.0 * ex)):
        np.testing.assert_allclose(state[key], want, rtol=0, atol=1e-9)
    tensor = np.stack([np.stack([ex, gxy / 2], -1), np.stack([gxy / 2, ey], -1)], -2)
    values, vectors = np.linalg.eigh(tensor)  # numpy as reference library, ascending eigenvalues
    got = principal(state["ex"], state["ey"], state["gxy"])
    np.testing.assert_allclose(got["e1"], values[:, 1], rtol=0, atol=1e-9)
    np.testing.assert_allclose(got["e2"], values[:, 0], rtol=0, atol=1e-9)
    ref_angle = np.degrees(np.arctan2(vectors[:, 1, 1], vectors[:, 0, 1]))
    # 1e-6 deg: eigenvector round-off, amplified where e1 - e2 is small
    np.testing.assert_allclose(_angle_gap(got["angle_deg"], ref_angle), 0, rtol=0, atol=1e-6)
    assert np.all((got["angle_deg"] > -90) & (got["angle_deg"] <= 90))


def test_residual_is_rms_of_least_squares_misfit():
    rng = np.random.default_rng(7)
    angles = ANGLE_SETS["odd-5"]
    readings = _grid_strains(400.0, -150.0, 250.0, angles) + rng.normal(0, 10, size=(4, 5))
    state = reduce_grids(readings, angles)
    t = np.radians(angles)
    design = np.stack([np.cos(t) ** 2, np.sin(t) ** 2, np.sin(t) * np.cos(t)], -1)
    for row, reading in enumerate(readings):
        x, ssr, _, _ = np.linalg.lstsq(design, reading, rcond=None)  # numpy as reference library
        # 1e-9 microstrain: round-off only
        np.testing.assert_allclose([state["ex"][row], state["ey"][row], state["gxy"][row]], x,
                                   rtol=0, atol=1e-9)
        np.testing.assert_allclose(state["residual"][row], np.sqrt(ssr[0] / 5), rtol=1e-9, atol=0)
    # the added noise (sd 10 microstrain) shows in the misfit; exact readings give 0 (round trip)
    assert np.all(state["residual"] > 0.1)


# --- 4. transverse sensitivity, Vishay Micro-Measurements TN-509 (from memory) ---

def _indicated(ex, ey, gxy, angles, kt, nu0):
    # TN-509 "Errors Due to Transverse Sensitivity in Strain Gages" (from memory):
    # indicated = (e_a + Kt e_t)/(1 - nu0 Kt), e_t the strain at 90 deg to the grid.
    e_a = _grid_strains(ex, ey, gxy, angles)
    e_t = _grid_strains(ex, ey, gxy, np.asarray(angles) + 90.0)
    return (e_a + np.asarray(kt) * e_t) / (1 - np.asarray(nu0) * np.asarray(kt))


@pytest.mark.parametrize("angles", list(ANGLE_SETS.values()), ids=list(ANGLE_SETS))
def test_transverse_correction_recovers_true_state(angles):
    rng = np.random.default_rng(509)
    ex, ey, gxy = rng.uniform(-3000, 3000, size=(3, 20))
    indicated = _indicated(ex, ey, gxy, angles, 0.02, 0.285)
    state = reduce_grids(indicated, angles, kt=0.02, nu0=0.285)
    # 1e-9 microstrain: round-off only
    for key, want in (("ex", ex), ("ey", ey), ("gxy", gxy)):
        np.testing.assert_allclose(state[key], want, rtol=0, atol=1e-9)
    # without the correction the state is wrong by far more than round-off
    plain = reduce_grids(indicated, angles)
    assert np.max(np.abs(plain["ex"] - ex)) > 1.0


def test_transverse_correction_per_grid_kt_and_nu0():
    angles, kt, nu0 = [0.0, 60.0, 120.0], [0.01, -0.02, 0.03], [0.285, 0.30, 0.33]
    indicated = _indicated(-700.0, 1200.0, 450.0, angles, kt, nu0)
    state = reduce_grids(indicated, angles, kt=kt, nu0=nu0)
    # 1e-9 microstrain: round-off only
    np.testing.assert_allclose([state["ex"], state["ey"], state["gxy"]], [-700.0, 1200.0, 450.0],
                               rtol=0, atol=1e-9)


def test_transverse_correction_matches_tn509_rectangular_formula():
    # TN-509 closed form for a 0/45/90 rosette of identical grids (from memory):
    # ex = (1 - nu0 Kt)(ê_a - Kt ê_c)/(1 - Kt^2), ey = (1 - nu0 Kt)(ê_c - Kt ê_a)/(1 - Kt^2),
    # e45 = (1 - nu0 Kt)(ê_b - Kt(ê_a + ê_c - ê_b))/(1 - Kt^2); gxy = 2 e45 - ex - ey.
    kt, nu0 = 0.02, 0.285
    ind = np.array([[812.0, -240.0, 355.0], [-90.0, 410.0, 1300.0]])
    a, b, c = ind.T
    f = (1 - nu0 * kt) / (1 - kt**2)
    ex, ey, e45 = f * (a - kt * c), f * (c - kt * a), f * (b - kt * (a + c - b))
    state = reduce_grids(ind, [0, 45, 90], kt=kt, nu0=nu0)
    # 1e-9 microstrain: round-off only
    np.testing.assert_allclose(state["ex"], ex, rtol=0, atol=1e-9)
    np.testing.assert_allclose(state["ey"], ey, rtol=0, atol=1e-9)
    np.testing.assert_allclose(state["gxy"], 2 * e45 - ex - ey, rtol=0, atol=1e-9)


def test_no_transverse_correction_for_grid_along_uniaxial_stress_when_nu_is_nu0():
    # TN-509 (from memory): the gauge factor is calibrated in a uniaxial stress field on a material
    # with nu0 = 0.285, so a grid along the stress in that field reads true: e_t = -nu0 e_a and
    # (e_a + Kt e_t)/(1 - nu0 Kt) = e_a.
    kt, nu0, eps = 0.02, 0.285, 1000.0
    angles = [0.0, 45.0, 90.0]
    indicated = _indicated(eps, -nu0 * eps, 0.0, angles, kt, nu0)
    state = reduce_grids(indicated, angles, kt=kt, nu0=nu0)
    # 1e-9 microstrain: round-off only; grid A's indicated reading is already the true strain
    np.testing.assert_allclose(state["ex"], indicated[0], rtol=0, atol=1e-9)
    np.testing.assert_allclose(state["ex"], eps, rtol=0, atol=1e-9)
    # the transverse grid (90 deg) is not in that condition: its correction is large
    assert abs(state["ey"] - indicated[2]) > 10.0


# --- 5. degenerate angles and grid_angles ---

@pytest.mark.parametrize("angles", [[0, 2, 90], [0, 90, 180], [0, 60, 240], [0, 45]],
                         ids=["close-grids", "repeat-180", "repeat-60-240", "two-grids"])
def test_degenerate_angles_raise_naming_rosette(angles):
    # common practice: three independent directions are needed for the three unknowns
    with pytest.raises(GaugeError, match="R-7"):
        check_angles(angles, name="R-7")
    with pytest.raises(ValueError, match=r"R-7.*deg"):
        reduce_grids(np.zeros(len(angles)), angles, name="R-7")


def test_readings_length_mismatch_raises():
    with pytest.raises(GaugeError, match="3 grid angles"):
        reduce_grids(np.zeros((2, 4)), [0, 45, 90])


def test_grid_angles_plane_and_normal_flip():
    directions = [[1, 0, 0], [1, 1, 0], [0, 1, 0], [-1, 1, 0]]
    # atan2 of the planar vectors: 0, 45, 90, 135 deg counterclockwise about +z (right-hand rule)
    np.testing.assert_allclose(grid_angles(directions, [0, 0, 1]), [0, 45, 90, 135], rtol=0,
                               atol=1e-12)  # exact up to round-off
    np.testing.assert_allclose(grid_angles(directions, [0, 0, -1]), [0, 315, 270, 225], rtol=0,
                               atol=1e-12)


def test_grid_angles_on_tilted_face_with_out_of_plane_components():
    rng = np.random.default_rng(11)
    rot = Rotation.random(random_state=rng)  # scipy as reference for an arbitrary orientation
    angles = np.array([0.0, 30.0, 100.0, 250.0])
    t = np.radians(angles + 17.0)  # grid A is not along the local x axis
    local = np.stack([np.cos(t), np.sin(t), rng.uniform(-2, 2, size=4)], -1)  # z: off-plane part
    normal = rot.apply([0.0, 0.0, 1.0])
    got = grid_angles(rot.apply(local), 3.0 * normal)
    # 1e-9 deg: round-off of the rotation
    np.testing.assert_allclose(got, angles, rtol=0, atol=1e-9)
    np.testing.assert_allclose(grid_angles(rot.apply(local), -normal), (360 - angles) % 360,
                               rtol=0, atol=1e-9)
    with pytest.raises(GaugeError, match="parallel"):
        grid_angles(np.vstack([local[:2], [[0, 0, 1]]]), [0, 0, 1])


# --- 6. plane stress and von Mises (Hooke's law, any strength-of-materials handbook) ---

def test_plane_stress_uniaxial_and_equibiaxial():
    E, nu, e = 200e3, 0.3, 1e-3
    s1, s2 = plane_stress(e, -nu * e, E, nu)  # uniaxial stress: s1 = E e1, s2 = 0
    # 1e-9 relative / 1e-12 absolute: exact-arithmetic path apart from round-off
    np.testing.assert_allclose(s1, E * e, rtol=1e-12, atol=0)
    np.testing.assert_allclose(s2, 0.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(von_mises(s1, s2), E * e, rtol=1e-12, atol=0)  # = |s1| uniaxially
    s1, s2 = plane_stress(e, e, E, nu)  # equibiaxial: s = E e/(1 - nu), von Mises = s
    np.testing.assert_allclose([s1, s2], [E * e / (1 - nu)] * 2, rtol=1e-12, atol=0)
    np.testing.assert_allclose(von_mises(s1, s2), E * e / (1 - nu), rtol=1e-12, atol=0)
    # pure shear s1 = -s2 = t: von Mises = sqrt 3 t
    np.testing.assert_allclose(von_mises(50.0, -50.0), np.sqrt(3) * 50.0, rtol=1e-12, atol=0)


def test_reduce_rosette_table():
    readings = np.array([[200.0, 550.0, 500.0], [200.0, 150.0, 500.0]])
    table = reduce_rosette(readings, [0, 45, 90], E=200e3 * 1e-6, nu=0.3)  # MPa per microstrain
    assert list(table.columns) == ["ex", "ey", "gxy", "e1", "e2", "angle_deg", "shear_max", "s1",
                                   "s2", "von_mises", "residual"]
    # expected from the hand-worked rectangular example above; 1e-9 for round-off
    np.testing.assert_allclose(table["e1"], [600.0, 600.0], rtol=0, atol=1e-9)
    # Hooke: s1 = 0.2/(1 - 0.09)(600 + 0.3*100) = 138.4615 MPa
    np.testing.assert_allclose(table["s1"], [0.2 / 0.91 * 630.0] * 2, rtol=1e-12, atol=0)
    bare = reduce_rosette(readings, [0, 45, 90])
    assert bare[["s1", "s2", "von_mises"]].isna().all().all()
    with pytest.raises(GaugeError, match="2-D"):
        reduce_rosette(readings[0], [0, 45, 90])


def test_degeneracy_check_does_not_depend_on_which_grid_is_a():
    # The same three directions must be accepted or refused whatever grid comes first: rotating
    # every angle by a constant is an orthogonal change of (cos 2t, sin 2t) (double-angle
    # identities), so the condition number in that basis is invariant.
    from correlate.mechanics.rosette import check_angles

    base = np.array([0.0, 3.0, 110.0])
    for k in range(3):
        rolled = np.roll(base, k)
        check_angles(rolled - rolled[0], name="R")  # accepted in every order
