"""Registration of DIC points onto a model surface: landmark fit and point-to-plane ICP.

Scenario (our own): a DIC patch on a pipe of radius 100 mm (a cylinder about the model z axis),
seen by a camera whose frame is the model frame rotated 4 deg about an oblique axis and shifted.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation
from scipy.stats import norm

from correlate.core.errors import ModelError, StudyError
from correlate.fullfield.registration import (
    apply,
    icp_point_to_plane,
    rigid_from_landmarks,
    rotation_angle_deg,
)

RADIUS = 100.0  # mm
NOISE = 0.01  # mm, DIC shape noise along the surface normal
AXIS = np.array([1.0, 2.0, 3.0]) / np.sqrt(14.0)
R_TRUE = Rotation.from_rotvec(np.radians(4.0) * AXIS).as_matrix()
T_TRUE = np.array([12.5, -7.0, 30.0])


def _cyl(theta, z):
    return np.stack([RADIUS * np.cos(theta), RADIUS * np.sin(theta), z], axis=-1)


def _radial(p):
    n = p * [1.0, 1.0, 0.0]
    return n / np.linalg.norm(n, axis=1)[:, None]


def _to_camera(model_pts, R=R_TRUE, t=T_TRUE):
    """Invert x_model = R x_cam + t."""
    return (model_pts - t) @ R


def _cylinder_surface():
    th, z = np.meshgrid(np.radians(np.arange(-50.0, 50.0, 0.25)), np.arange(-90.0, 90.0, 0.5))
    s = _cyl(th.ravel(), z.ravel())
    return s, _radial(s)


def _cylinder_patch(rng):
    """DIC points on the patch, 15 % missing at random and a 12 mm hole (a bolt head)."""
    th, z = np.meshgrid(np.radians(np.arange(-35.0, 35.0, 0.6)), np.arange(-60.0, 60.0, 1.0))
    p = _cyl(th.ravel(), z.ravel())
    keep = (rng.random(len(p)) > 0.15) & (np.hypot(p[:, 1] - 20.0, p[:, 2] - 10.0) > 12.0)
    p = p[keep]
    return p, p + rng.normal(0.0, NOISE, (len(p), 1)) * _radial(p)


def _errors(M, clean_model_pts, R=R_TRUE, t=T_TRUE):
    """Rotation error [deg], largest point error [mm], translation error [mm]."""
    ang = rotation_angle_deg(M[:3, :3] @ R.T)
    pts = apply(M, _to_camera(clean_model_pts, R, t))
    return ang, float(np.linalg.norm(pts - clean_model_pts, axis=1).max()), float(
        np.linalg.norm(M[:3, 3] - t))


def _horn(p, q):
    """Horn (1987) unit-quaternion solution, written out independently: eigenvector of N."""
    pc, qc = p - p.mean(0), q - q.mean(0)
    S = pc.T @ qc
    (sxx, sxy, sxz), (syx, syy, syz), (szx, szy, szz) = S
    N = np.array([
        [sxx + syy + szz, syz - szy, szx - sxz, sxy - syx],
        [syz - szy, sxx - syy - szz, sxy + syx, szx + sxz],
        [szx - sxz, sxy + syx, -sxx + syy - szz, syz + szy],
        [sxy - syx, szx + sxz, syz + szy, -sxx - syy + szz]])
    _, v = np.linalg.eigh(N)
    q0, qx, qy, qz = v[:, -1]
    return Rotation.from_quat([qx, qy, qz, q0]).as_matrix()  # scipy: scalar last


def test_landmarks_recover_exact_transform_of_consistent_data():
    # Kabsch (1976): for pairs related exactly by a rotation the minimiser is that rotation.
    rng = np.random.default_rng(11)
    q = rng.uniform(-50.0, 50.0, (6, 3))
    R = Rotation.from_rotvec(np.radians(150.0) * AXIS).as_matrix()
    t = np.array([300.0, -20.0, 510.0])
    fit = rigid_from_landmarks(_to_camera(q, R, t), q)
    # rtol/atol: exact arithmetic up to round-off of coordinates of size ~500 mm
    np.testing.assert_allclose(fit.rotation, R, rtol=0, atol=1e-12)
    np.testing.assert_allclose(fit.translation, t, rtol=0, atol=1e-10)
    np.testing.assert_allclose(fit.matrix[:3, :3], fit.rotation, rtol=0, atol=0)
    assert fit.rms_residual < 1e-10 and fit.n_pairs == 6


def test_landmarks_agree_with_horn_quaternion_method_on_noisy_pairs():
    # Horn (1987) and Kabsch (1976) minimise the same sum: the rotations must coincide.
    rng = np.random.default_rng(12)
    q = rng.uniform(-50.0, 50.0, (9, 3))
    p = _to_camera(q) + rng.normal(0.0, 0.3, q.shape)
    fit = rigid_from_landmarks(p, q)
    # atol: two closed forms of one minimiser agree to round-off (eigen/SVD solvers ~1e-12)
    np.testing.assert_allclose(fit.rotation, _horn(p, q), rtol=0, atol=1e-10)
    res = q - apply(fit, p)
    np.testing.assert_allclose(fit.rms_residual, np.sqrt(np.mean(np.sum(res**2, 1))), rtol=1e-12)


def test_coplanar_landmarks_give_a_proper_rotation():
    # Reflection fix (Kabsch 1978 note, Horn 1987 sec. 5): coplanar points admit a mirror
    # solution with the same residual; the returned R must be the proper one (det +1).
    q = np.array([[0.0, 0.0, 0.0], [40.0, 0.0, 0.0], [0.0, 30.0, 0.0], [35.0, 25.0, 0.0]])
    fit = rigid_from_landmarks(_to_camera(q), q)
    np.testing.assert_allclose(np.linalg.det(fit.rotation), 1.0, rtol=0, atol=1e-12)
    np.testing.assert_allclose(fit.rotation, R_TRUE, rtol=0, atol=1e-12)  # round-off only


def test_mirror_image_landmarks_get_no_reflection():
    # A mirrored set has no exact rigid fit: R stays proper and the residual is the one of
    # Horn's proper-rotation optimum (Horn 1987), not zero.
    rng = np.random.default_rng(13)
    q = rng.uniform(-50.0, 50.0, (7, 3))
    p = q * [-1.0, 1.0, 1.0]
    fit = rigid_from_landmarks(p, q)
    np.testing.assert_allclose(np.linalg.det(fit.rotation), 1.0, rtol=0, atol=1e-12)
    R = _horn(p, q)
    t = q.mean(0) - R @ p.mean(0)
    rms = np.sqrt(np.mean(np.sum((q - p @ R.T - t) ** 2, 1)))
    np.testing.assert_allclose(fit.rms_residual, rms, rtol=1e-9)  # two solvers, one optimum
    assert fit.rms_residual > 1.0


@pytest.mark.parametrize("n", [0, 1, 2])
def test_too_few_landmarks_raise_one_line(n):
    q = np.array([[0.0, 0.0, 0.0], [10.0, 0.0, 0.0]])[:n]
    with pytest.raises(StudyError, match="at least 3") as err:
        rigid_from_landmarks(q.reshape(n, 3), q.reshape(n, 3))
    assert "\n" not in str(err.value)


@pytest.mark.parametrize("offset", [0.0, 1e-3])
def test_collinear_landmarks_raise_one_line(offset):
    # offset 1e-3 mm across a 100 mm line: spread ratio ~1e-5, below the stated 1e-3 tolerance
    q = np.array([[0.0, 0.0, 0.0], [50.0, 0.0, offset], [100.0, 0.0, 0.0], [25.0, 0.0, 0.0]])
    with pytest.raises(StudyError, match="collinear") as err:
        rigid_from_landmarks(_to_camera(q), q)
    assert "\n" not in str(err.value)


def test_slightly_spread_landmarks_are_accepted():
    # spread ratio ~0.03 is above the 1e-3 tolerance: accepted, and exact on consistent data
    q = np.array([[0.0, 0.0, 0.0], [50.0, 0.0, 5.0], [100.0, 0.0, 0.0], [25.0, 0.0, 0.0]])
    fit = rigid_from_landmarks(_to_camera(q), q)
    np.testing.assert_allclose(fit.rotation, R_TRUE, rtol=0, atol=1e-10)  # round-off


def test_landmarks_and_icp_recover_the_camera_transform_on_a_cylinder():
    # Landmarks picked in the DIC cloud are noisier across the surface (0.05 mm) than along it
    # (0.002 mm): the out-of-plane position of stereo DIC is the less certain one (common
    # practice). ICP must then fix what the shape fixes; the axial slide and the spin about the
    # axis keep the landmark values (the surface cannot fix them), which are good enough here.
    rng = np.random.default_rng(20240611)
    surf, normals = _cylinder_surface()
    clean, noisy = _cylinder_patch(rng)
    th = np.radians([-30.0, -15.0, 0.0, 15.0, 30.0, -25.0, 5.0, 25.0])
    lm = _cyl(th, np.array([-50.0, 40.0, -20.0, 55.0, -45.0, 10.0, 50.0, -5.0]))
    tang = np.stack([-np.sin(th), np.cos(th), 0.0 * th], axis=-1)
    picked = (lm + rng.normal(0, 0.05, (8, 1)) * _radial(lm) + rng.normal(0, 0.002, (8, 1)) * tang
              + rng.normal(0, 0.002, (8, 1)) * [0.0, 0.0, 1.0])
    start = rigid_from_landmarks(_to_camera(picked), lm)
    assert max(_errors(start.matrix, clean)[:2]) > 0.01  # landmarks alone miss the target
    fit = icp_point_to_plane(_to_camera(noisy), surf, normals, start, tol=1e-6, max_move=1.0)
    ang, worst, dt = _errors(fit.matrix, clean)
    assert ang < 0.01  # deg, the brief's target
    assert worst < 0.01 and dt < 0.01  # mm, the brief's target (worst point and translation)
    assert fit.free_directions == 2  # a cylinder leaves axial slide and spin free
    assert fit.singular_ratios[3] > 0.01 and fit.singular_ratios[4] < 1e-9  # exact symmetry
    # the residual is the DIC noise: RMS = sigma, p95 of |N(0, sigma)| = 1.96 sigma (scipy.stats);
    # rtol 5 %: sampling sd of an RMS of 11 500 values is 0.7 %, sampling bias < 2 %
    np.testing.assert_allclose(fit.rms_distance, NOISE, rtol=0.05)
    np.testing.assert_allclose(fit.p95_distance, norm.ppf(0.975) * NOISE, rtol=0.05)
    assert fit.n_used == len(noisy) and np.isfinite(fit.distances).all()
    assert fit.largest_move < 1.0 and 1 <= fit.iterations < 50


def test_icp_keeps_the_free_directions_of_a_cylinder_at_the_start():
    # Rotation about and slide along the cylinder axis do not change any distance to the
    # surface, so no least-squares step can see them (Low 2004: rank of the system).
    rng = np.random.default_rng(7)
    surf, normals = _cylinder_surface()
    _, noisy = _cylinder_patch(rng)
    spin = Rotation.from_rotvec(np.radians([0.0, 0.0, 0.2])).as_matrix()
    off = np.eye(4)
    off[:3, :3] = spin
    off[:3, 3] = [0.3, 0.0, 0.5]  # 0.3 mm radial (fixable) + 0.5 mm axial (free)
    truth = np.eye(4)
    truth[:3, :3], truth[:3, 3] = R_TRUE, T_TRUE
    fit = icp_point_to_plane(_to_camera(noisy), surf, normals, off @ truth, tol=1e-6,
                             max_move=2.0)
    rest = fit.matrix @ np.linalg.inv(truth)  # what is left of the offset in model frame
    rotvec = Rotation.from_matrix(rest[:3, :3]).as_rotvec()
    # atol 0.002 deg / 0.005 mm: the ICP noise floor here, far below the 0.2 deg / 0.5 mm kept
    np.testing.assert_allclose(np.degrees(rotvec), [0.0, 0.0, 0.2], rtol=0, atol=2e-3)
    np.testing.assert_allclose(rest[:3, 3], [0.0, 0.0, 0.5], rtol=0, atol=5e-3)


def _wavy_panel(x, y):
    """A curved panel with a 2 mm pressed wave pattern: no rigid motion maps it onto itself."""
    z = 2.0 * np.sin(x / 15.0) * np.sin(y / 12.0) + x**2 / 300.0
    zx = 2.0 / 15.0 * np.cos(x / 15.0) * np.sin(y / 12.0) + x / 150.0
    zy = 2.0 / 12.0 * np.sin(x / 15.0) * np.cos(y / 12.0)
    n = np.stack([-zx, -zy, np.ones_like(x)], axis=-1)
    return np.stack([x, y, z], axis=-1), n / np.linalg.norm(n, axis=-1)[..., None]


def test_icp_fixes_all_six_directions_on_a_wavy_panel():
    # No rigid motion keeps this surface in place: ICP alone must bring a poor landmark start
    # (0.3 mm picking noise) to the true transform.
    rng = np.random.default_rng(5)
    g = np.arange(-70.0, 70.0, 0.4)
    s, n = _wavy_panel(*[a.ravel() for a in np.meshgrid(g, g)])
    g = np.arange(-50.0, 50.0, 1.0)
    clean, pn = _wavy_panel(*[a.ravel() for a in np.meshgrid(g, g)])
    noisy = clean + rng.normal(0.0, NOISE, (len(clean), 1)) * pn
    lm = clean[rng.choice(len(clean), 6, replace=False)]
    start = rigid_from_landmarks(_to_camera(lm + rng.normal(0, 0.3, lm.shape)), lm)
    assert max(_errors(start.matrix, clean)[:2]) > 0.05
    fit = icp_point_to_plane(_to_camera(noisy), s, n, start, tol=1e-6, max_move=5.0)
    ang, worst, dt = _errors(fit.matrix, clean)
    assert ang < 0.01 and worst < 0.01 and dt < 0.01  # deg, mm, mm: the brief's target
    assert fit.free_directions == 0 and fit.singular_ratios[-1] > 0.01


def test_icp_leaves_out_points_off_the_surface():
    # A clamp in view: 300 points 5 mm off the pipe. Unpaired, they must not bias the fit.
    rng = np.random.default_rng(8)
    surf, normals = _cylinder_surface()
    clean, noisy = _cylinder_patch(rng)
    clamp = _cyl(np.radians(rng.uniform(-30, 30, 300)), rng.uniform(-50, 50, 300)) * [1.05, 1.05, 1]
    cam = _to_camera(np.vstack([noisy, clamp]))
    start = np.eye(4)
    start[:3, :3], start[:3, 3] = R_TRUE, T_TRUE + np.array([0.2, 0.0, 0.0])  # radial offset (fixable)
    fit = icp_point_to_plane(cam, surf, normals, start, tol=1e-6, max_move=1.0,
                             max_pair_distance=1.0)
    assert fit.n_used == len(noisy) and np.isnan(fit.distances[len(noisy):]).all()
    ang, worst, _ = _errors(fit.matrix, clean)
    assert ang < 0.01 and worst < 0.01  # deg, mm


def test_icp_refuses_a_move_beyond_max_move():
    rng = np.random.default_rng(9)
    surf, normals = _cylinder_surface()
    _, noisy = _cylinder_patch(rng)
    start = np.eye(4)
    start[:3, :3], start[:3, 3] = R_TRUE, T_TRUE + np.array([0.5, 0.0, 0.0])
    with pytest.raises(StudyError, match="max_move") as err:
        icp_point_to_plane(_to_camera(noisy), surf, normals, start, tol=1e-6, max_move=0.1)
    assert "\n" not in str(err.value)


def test_icp_reports_no_convergence_and_bad_surfaces():
    surf, normals = _cylinder_surface()
    pts = _to_camera(_cyl(np.radians(np.arange(-20, 20, 1.0)), np.zeros(40)))
    start = np.eye(4)
    start[:3, :3], start[:3, 3] = R_TRUE, T_TRUE + np.array([0.5, 0.0, 0.0])
    with pytest.raises(StudyError, match="no convergence"):
        icp_point_to_plane(pts, surf, normals, start, tol=1e-12, max_move=5.0, max_iter=1)
    with pytest.raises(ModelError, match="zero length"):
        icp_point_to_plane(pts, surf, normals * 0.0, start, tol=1e-6, max_move=5.0)
    mirror = start @ np.diag([-1.0, 1.0, 1.0, 1.0])
    with pytest.raises(StudyError, match="not a proper rigid"):
        icp_point_to_plane(pts, surf, normals, mirror, tol=1e-6, max_move=5.0)


def test_apply_and_rotation_angle_against_closed_forms():
    th = np.radians(33.0)
    Rz = np.array([[np.cos(th), -np.sin(th), 0.0], [np.sin(th), np.cos(th), 0.0], [0, 0, 1.0]])
    M = np.eye(4)
    M[:3, :3], M[:3, 3] = Rz, [1.0, 2.0, 3.0]
    p = np.array([[1.0, 0.0, 0.0], [0.0, 2.0, -1.0]])
    expected = (M @ np.c_[p, np.ones(2)].T).T[:, :3]  # homogeneous product, by definition
    np.testing.assert_allclose(apply(M, p), expected, rtol=0, atol=1e-15)
    # the angle of a rotation by 33 deg about z (Rodrigues' closed form) is 33 deg
    np.testing.assert_allclose(rotation_angle_deg(Rz), 33.0, rtol=1e-12)
    np.testing.assert_allclose(rotation_angle_deg(np.eye(3)), 0.0, rtol=0, atol=1e-12)
