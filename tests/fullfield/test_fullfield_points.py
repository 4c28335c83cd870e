"""DIC points on a curved model: registration, location and the model strain there.

Scenario (our own): a DIC patch on the outside of a tube segment (radius 40 mm, wall 2 mm) meshed
with quadratic hexahedra by tests/builders.solid_mesh, seen by a camera turned 3 degrees about an
oblique axis and shifted. The model carries a strain field linear in the coordinates, which the
isoparametric quadratic cells reproduce exactly at any point (the isoparametric property), so the
expected values come from the closed form, not from the tool.
"""

from __future__ import annotations

import numpy as np
from builders import solid_mesh
from scipy.spatial.transform import Rotation

from correlate.fullfield.points import distinct_rows, locate_points
from correlate.fullfield.registration import rotation_angle_deg
from correlate.fullfield.strain import tensor_in_axes
from correlate.model_readings.evaluate import centre_strain
from correlate.model_readings.locator import Locator
from correlate.model_readings.surface import build_surface
from correlate.readers.dic_frames import Landmarks
from correlate.readers.fullfield_study import FullFieldSettings
from correlate.readers.model import Field

RADIUS, WALL, LENGTH, HALF_ANGLE = 40.0, 2.0, 30.0, np.radians(40.0)
ROT = Rotation.from_rotvec(np.radians(3.0) * np.array([1.0, -2.0, 2.0]) / 3.0).as_matrix()
SHIFT = np.array([4.0, -2.5, 1.5])           # model = ROT dic + SHIFT  [mm]
G0 = np.array([[300.0, 40.0, 0.0], [40.0, -90.0, 10.0], [0.0, 10.0, 20.0]]) * 1e-6
G1 = np.array([[8.0, 1.0, 0.0], [1.0, -3.0, 0.5], [0.0, 0.5, 2.0]]) * 1e-6   # per mm of x, y, z


def _tube(p):
    """Box (arc length, axial, radial) -> tube segment about the model y axis."""
    r = RADIUS - WALL + p[:, 2]
    th = (p[:, 0] - RADIUS * HALF_ANGLE) / RADIUS
    return np.c_[r * np.sin(th), p[:, 1], r * np.cos(th)]


def _strain(x):
    """The analytic field: G0 + G1 (x + y + z) (symmetric tensors, m/m)."""
    return G0[None] + (x.sum(axis=1))[:, None, None] * G1[None]


def _on_tube(th, y):
    return np.c_[RADIUS * np.sin(th), y, RADIUS * np.cos(th)]


def _setup():
    mesh = solid_mesh("hexahedron20", n=(24, 8, 1), size=(2 * RADIUS * HALF_ANGLE, LENGTH, WALL),
                      warp=_tube)
    rng = np.random.default_rng(1717)
    th, y = np.meshgrid(np.radians(np.arange(-30.0, 30.01, 1.2)), np.arange(4.0, 26.01, 0.8))
    pts = _on_tube(th.ravel(), y.ravel())
    pts = pts[rng.random(len(pts)) > 0.1]              # 10 % of the points lost
    normal = pts * [1.0, 0.0, 1.0] / RADIUS
    noisy = pts + rng.normal(0.0, 0.005, (len(pts), 1)) * normal   # 5 um shape noise
    cam = (noisy - SHIFT) @ ROT
    marks = _on_tube(np.radians([-32.0, 32.0, 32.0, -32.0, 0.0, 10.0]),
                     np.array([2.0, 2.0, 28.0, 28.0, 15.0, 5.0]))
    picked = (marks - SHIFT) @ ROT + rng.normal(0.0, 0.002, marks.shape)
    lm = Landmarks(tuple("ABCDEF"), picked, marks)
    ff = FullFieldSettings(files=(), columns={}, register="landmarks", refine="icp",
                           snap_tol=0.3, icp_tol=1e-6)
    locator = Locator(mesh, build_surface(mesh))
    reg, pm = locate_points(cam, ff, locator, lm, scale=1.0)
    return mesh, pts, reg, pm


def test_registration_on_a_tube_recovers_the_transform_within_the_issue_target():
    # issue 17: the transform within 0.01 length unit and 0.01 degree. ICP fixes what the tube's
    # shape fixes; the axial slide and the spin about the axis come from the six landmarks
    # (2 um noise over about 50 mm: some 1e-3 deg and 1e-3 mm, from memory of Kabsch error
    # propagation), so the targets hold with margin.
    _, pts, reg, pm = _setup()
    M = reg.matrix
    assert rotation_angle_deg(M[:3, :3] @ ROT.T) < 0.01
    assert np.linalg.norm(M[:3, 3] - SHIFT) < 0.01
    assert reg.dropped_snap == 0 and len(pm.kept) == len(pts)
    # the points sit on the surface within their 5 um noise: RMS about 5 um (rtol 30 %: the
    # quadratic faces' own distance from the true circle is below 1e-5 mm at 3.3 deg per cell)
    assert abs(reg.rms - 0.005) < 0.0015


def test_model_strain_at_the_points_is_the_analytic_field_in_the_dic_axes():
    # At each kept point: the model tensor equals the closed form (rtol 1e-9 of the field's
    # size: exact reproduction, round-off), and the tangent axes follow the DIC's x axis
    # (x_cam in model axes, projected on the tube's tangent plane) within 1e-4 rad: the
    # faces' normals differ from the circle's by the quadratic geometry's O(h^3) error.
    mesh, _, reg, pm = _setup()
    nodal = _strain(mesh.points)
    field = Field(case="c", kind="strain", location="point", data=nodal, source_kind="strain",
                  array="E")
    got = centre_strain(pm.operator, field)
    want = _strain(pm.position)
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-9 * np.abs(want).max())
    n = pm.position * [1.0, 0.0, 1.0]
    n /= np.linalg.norm(n, axis=1)[:, None]
    x = reg.matrix[:3, :3] @ [1.0, 0.0, 0.0]
    ex = x - (n @ x)[:, None] * n
    ex /= np.linalg.norm(ex, axis=1)[:, None]
    assert np.max(np.linalg.norm(pm.ex - ex, axis=1)) < 1e-4
    exx, eyy, exy = tensor_in_axes(want, ex, np.cross(n, ex))
    mxx, myy, mxy = tensor_in_axes(got, pm.ex, pm.ey)
    # axes within 1e-4 rad and strains of 400 ue: 0.1 ue
    for a, b in ((mxx, exx), (myy, eyy), (mxy, exy)):
        np.testing.assert_allclose(a, b, rtol=0, atol=1e-7)


def test_distinct_rows_are_numpys_unique_rows():
    # reference: numpy.unique(axis=0, return_inverse=True), on rows repeated in shuffled order
    rng = np.random.default_rng(2)
    rows = np.round(rng.random((3000, 3)) * 20, 1)
    table = np.concatenate([rows, rows[::-1], rows[rng.permutation(len(rows))]])
    got, inv = distinct_rows(table)
    want, winv = np.unique(table, axis=0, return_inverse=True)
    np.testing.assert_array_equal(got, want)
    np.testing.assert_array_equal(inv, winv.ravel())
    np.testing.assert_array_equal(got[inv], table)


def test_frame_points_short_cut_matches_the_general_rule():
    # frames with the same points (the short cut) and frames with their own points (all rows):
    # both equal numpy.unique of all rows (the reference)
    from correlate.fullfield.points import frame_points

    rng = np.random.default_rng(3)
    pts = np.round(rng.random((500, 3)) * 9, 2)
    rows = [np.arange(k * 500, (k + 1) * 500) for k in range(4)]
    for table in (np.concatenate([pts] * 4),
                  np.concatenate([pts + 0.01 * k for k in range(4)])):
        got, inv = frame_points(table, rows)
        want, winv = np.unique(table, axis=0, return_inverse=True)
        np.testing.assert_array_equal(got, want)
        np.testing.assert_array_equal(inv, winv.ravel())
