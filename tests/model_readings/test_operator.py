"""Model readings at gauges: interpolation, projection, grid averaging, transverse sensitivity.

References are analytic fields and published closed forms, named beside each check.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from builders import SOLID_TYPES, gauge_frame, solid_mesh

from correlate.core.errors import GaugeError, GaugeOutsideMeshError, ModelError
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator
from correlate.readers.model import Field

A0 = np.array([[4.0, 1.0, -0.5], [1.0, -2.0, 0.7], [-0.5, 0.7, 1.5]]) * 1e-4
GRAD = np.array([[[1.0, 0.3, -0.2], [0.3, -0.4, 0.1], [-0.2, 0.1, 0.5]],
                 [[-0.6, 0.2, 0.4], [0.2, 0.9, -0.3], [0.4, -0.3, 0.2]],
                 [[0.3, -0.1, 0.6], [-0.1, 0.2, 0.4], [0.6, 0.4, -0.8]]]) * 1e-5


def linear_strain(x: np.ndarray) -> np.ndarray:
    """E(x) = A0 + sum_k x_k G_k: an analytic linear tensor field (symmetric)."""
    return A0 + np.einsum("nk,kij->nij", x, GRAD)


def top_gauges(rng: np.random.Generator, mesh, n: int = 12, length: float = 0.0) -> tuple:
    """Random gauges on the top face z = max, random in-plane directions."""
    lo, hi = mesh.points.min(axis=0), mesh.points.max(axis=0)
    margin = 0.3 + length
    x = rng.uniform(lo[0] + margin, hi[0] - margin, n)
    y = rng.uniform(lo[1] + margin, hi[1] - margin, n)
    th = rng.uniform(0, np.pi, n)
    rows = [dict(gauge=f"G{i}", x=x[i], y=y[i], z=hi[2], dir_x=np.cos(th[i]), dir_y=np.sin(th[i]),
                 dir_z=0.0, length=length) for i in range(n)]
    return gauge_frame(rows), th


@pytest.mark.parametrize("ctype", SOLID_TYPES, ids=SOLID_TYPES)
@pytest.mark.parametrize("curve", [0.0, 0.05], ids=["straight", "curved"])
def test_linear_field_reproduced_at_surface_points(ctype, curve, rng):
    # Reference: the analytic field at the located surface point (isoparametric elements
    # reproduce linear fields exactly on any geometry); tolerance: round-off on 1e-4 strains.
    mesh = solid_mesh(ctype, curve=curve)
    gauges, _ = top_gauges(rng, mesh)
    op = build_operator(mesh, gauges, snap_tol=1.0)
    field = Field(case="c", kind="strain", location="point", data=linear_strain(mesh.points),
                  source_kind="strain", array="E")
    rows = evaluate_rows(op, field)
    place = op.placement
    expected = np.einsum("gi,gij,gj->g", place.direction, linear_strain(place.centre), place.direction)
    got = rows["axial"][op.row_kind == 0]
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-15)


@pytest.mark.parametrize("ctype", ["tetra10", "hexahedron20", "hexahedron27"])
def test_quadratic_field_reproduced_on_affine_quadratic_cells(ctype, rng):
    # Reference: analytic quadratic field; quadratic elements on affine maps are complete to
    # degree 2 (Zienkiewicz & Taylor, vol. 1, ch. 6, from memory). Tolerance: the closest-point
    # Newton stops at 1e-12 in natural coordinates, so the located point carries ~1e-10 relative.
    mesh = solid_mesh(ctype)
    x = mesh.points
    q = (1e-5 * (x[:, 0] ** 2 - 0.5 * x[:, 0] * x[:, 1] + 0.3 * x[:, 1] ** 2))[:, None, None] * np.eye(3)
    gauges, _ = top_gauges(rng, mesh)
    op = build_operator(mesh, gauges, snap_tol=1.0)
    rows = evaluate_rows(op, Field("c", "strain", "point", q, "strain", "E"))
    c = op.placement.centre
    expected = 1e-5 * (c[:, 0] ** 2 - 0.5 * c[:, 0] * c[:, 1] + 0.3 * c[:, 1] ** 2)
    np.testing.assert_allclose(rows["axial"][op.row_kind == 0], expected, rtol=1e-9, atol=0)


def test_plane_strain_transformation_on_an_oblique_gauge(rng):
    # Reference: the plane strain-transformation law
    #   e(theta) = (ex + ey)/2 + (ex - ey)/2 cos 2theta + (gxy/2) sin 2theta
    # (Gere & Goodno, Mechanics of Materials, section on plane strain; any edition).
    mesh = solid_mesh("hexahedron")
    for _ in range(5):
        ex, ey, gxy = rng.normal(0, 500e-6, 3)
        E = np.zeros((len(mesh.points), 3, 3))
        E[:, 0, 0], E[:, 1, 1], E[:, 0, 1], E[:, 1, 0] = ex, ey, gxy / 2, gxy / 2
        E[:, 2, 2] = rng.normal(0, 100e-6)
        gauges, th = top_gauges(rng, mesh, n=6, length=0.5)
        op = build_operator(mesh, gauges)
        got = evaluate_rows(op, Field("c", "strain", "point", E, "strain", "E"))["axial"]
        expected = (ex + ey) / 2 + (ex - ey) / 2 * np.cos(2 * th) + gxy / 2 * np.sin(2 * th)
        np.testing.assert_allclose(got[op.row_kind == 0], expected, rtol=0, atol=1e-15)


def test_grid_average_of_linear_field_equals_centre_value(rng):
    # Reference: the mean of a linear function over a segment is its value at the midpoint.
    mesh = solid_mesh("tetra10")
    gauges, _ = top_gauges(rng, mesh, length=0.6)
    op = build_operator(mesh, gauges)
    rows = evaluate_rows(op, Field("c", "strain", "point", linear_strain(mesh.points), "strain", "E"))
    np.testing.assert_allclose(rows["axial"][op.row_kind == 0], rows["axial"][op.row_kind == 1],
                               rtol=0, atol=1e-15)


def test_grid_average_of_quadratic_profile_is_its_exact_mean(rng):
    # Reference: (1/L) int_{-L/2}^{L/2} (a + b s^2) ds = a + b L^2 / 12 (elementary calculus).
    mesh = solid_mesh("hexahedron27", n=(4, 3, 2))
    L = 1.2
    x = mesh.points
    E = np.zeros((len(x), 3, 3))
    E[:, 0, 0] = 1e-4 * (x[:, 0] - 2.0) ** 2
    gauges = gauge_frame([dict(gauge="Q", x=2.0, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0, length=L)])
    op = build_operator(mesh, gauges)
    rows = evaluate_rows(op, Field("c", "strain", "point", E, "strain", "E"))
    np.testing.assert_allclose(rows["axial"][0], 1e-4 * L ** 2 / 12, rtol=1e-12, atol=0)
    np.testing.assert_allclose(rows["axial"][1], 0.0, rtol=0, atol=1e-18)


def test_transverse_sensitivity_relation():
    # Reference: e_ind = (e_a + Kt e_t) / (1 - nu0 Kt), Vishay Micro-Measurements Tech Note
    # TN-509, "Errors Due to Transverse Sensitivity in Strain Gages" (from memory). Worked by
    # hand: uniaxial stress, e_a = 1000 ue, e_t = -0.30 e_a, Kt = 0.02, nu0 = 0.285:
    #   (1000 - 6) / (1 - 0.0057) = 994 / 0.9943 = 999.6983 ue.
    mesh = solid_mesh("hexahedron")
    E = np.zeros((len(mesh.points), 3, 3))
    E[:, 0, 0], E[:, 1, 1], E[:, 2, 2] = 1000e-6, -300e-6, -300e-6
    gauges = gauge_frame([dict(gauge="K", x=2.0, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0,
                               length=1.0, kt=0.02)])
    op = build_operator(mesh, gauges, calibration_poisson=0.285)
    rows = evaluate_rows(op, Field("c", "strain", "point", E, "strain", "E"))
    np.testing.assert_allclose(rows["indicated"][0] * 1e6, 994 / 0.9943, rtol=0, atol=1e-9)
    # the correction vanishes for a grid along a uniaxial stress on a material with nu = nu0
    E[:, 1, 1] = E[:, 2, 2] = -0.285 * 1000e-6
    rows = evaluate_rows(op, Field("c", "strain", "point", E, "strain", "E"))
    np.testing.assert_allclose(rows["indicated"][0], 1000e-6, rtol=1e-12, atol=0)


def test_gauge_off_the_model_names_gauge_and_distance():
    mesh = solid_mesh("hexahedron")
    gauges = gauge_frame([dict(gauge="FAR-1", x=2.0, y=1.5, z=5.0, dir_x=1, dir_y=0, dir_z=0)])
    with pytest.raises(GaugeOutsideMeshError, match=r"FAR-1.*3 from the model surface.*snap_tol 1"):
        build_operator(mesh, gauges, snap_tol=1.0)


def test_direction_along_normal_is_refused():
    mesh = solid_mesh("hexahedron")
    gauges = gauge_frame([dict(gauge="N-1", x=2.0, y=1.5, z=2.0, dir_x=0, dir_y=0.1, dir_z=1)])
    with pytest.raises(GaugeError, match=r"N-1.*out of the surface plane"):
        build_operator(mesh, gauges)


def test_a_search_grid_moved_onto_a_face_its_direction_crosses_reads_nan():
    # A diagnosis moves a failing gauge's grid about its place (non-strict builds); moved past
    # the top face's edge x = 4 of the box onto the side face x = 4, a grid along x points along
    # that face's normal (geometry of a box). The search must read NaN there, as for a grid that
    # overhangs an edge, not stop the run: on the demo bracket with its strains scaled, such a
    # candidate of gauge G07 ended `correlate run` with "G07#55 ... out of the surface plane".
    mesh = solid_mesh("hexahedron")
    gauges = gauge_frame([dict(gauge="TOP", x=2.0, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0,
                               normal_x=0, normal_y=0, normal_z=1),
                          dict(gauge="SIDE", x=4.0, y=1.5, z=1.0, dir_x=1, dir_y=0, dir_z=0,
                               normal_x=1, normal_y=0, normal_z=0)])
    with pytest.raises(GaugeError, match=r"SIDE.*out of the surface plane"):
        build_operator(mesh, gauges)   # strict (the gauge map itself): refused as before
    op = build_operator(mesh, gauges, strict=False)
    assert op.invalid.tolist() == [False, True]
    rows = evaluate_rows(op, Field("c", "strain", "point", linear_strain(mesh.points), "strain",
                                   "E"))
    nominal = op.row_kind == 0
    axial = rows["axial"][nominal]
    assert np.isnan(axial[1])
    # the other gauge is read as the field: E_xx at (2, 1.5, 2), exact for a linear field
    np.testing.assert_allclose(axial[0], linear_strain(np.array([[2.0, 1.5, 2.0]]))[0, 0, 0],
                               rtol=1e-12, atol=0)


def test_a_search_grid_over_undefined_values_reads_nan_and_the_gauges_own_are_refused():
    # A result may leave a region undefined (NaN: failed or unexported elements). A gauge over
    # it is refused, naming it (a model reading there would be invented); a failure search's
    # moved grid that reaches it reads NaN and the search goes on: before, the whole run
    # stopped with "NaN or infinite values at 168 gauge(s): G09#1, G09#6, ...".
    mesh = solid_mesh("hexahedron", n=(4, 3, 2))
    gauges = gauge_frame([dict(gauge="NEAR", x=3.0, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0,
                               length=0.5),
                          dict(gauge="FAR", x=0.5, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0,
                               length=0.5)])
    values = linear_strain(mesh.points)
    values[mesh.points[:, 0] > 3.5] = np.nan      # the region x > 3.5 left undefined
    field = Field("c", "strain", "point", values, "strain", "E")
    with pytest.raises(ModelError, match=r"NaN or infinite values at 1 gauge\(s\): NEAR"):
        evaluate_rows(build_operator(mesh, gauges), field)
    rows = evaluate_rows(build_operator(mesh, gauges, strict=False), field, strict=False)
    axial = rows["axial"][build_operator(mesh, gauges, strict=False).row_kind == 0]
    assert np.isnan(axial[0]) and np.isnan(rows["indicated"][0])
    # the other gauge reads the linear field exactly (round-off on 1e-4 strains)
    np.testing.assert_allclose(axial[1], linear_strain(np.array([[0.5, 1.5, 2.0]]))[0, 0, 0],
                               rtol=1e-12, atol=0)


def test_a_search_grid_over_an_inverted_element_is_marked_invalid_not_refused():
    # An inverted element (an inner node pulled up through the top face: the Jacobian changes
    # sign) under a gauge is refused, naming the gauge and the element; a failure search's moved
    # grid over it is marked invalid (NaN readings) so that the search, and the run, go on.
    mesh = solid_mesh("hexahedron", n=(4, 3, 2))
    conn = mesh.blocks[0][1]
    pts = mesh.points
    centre = pts[conn].mean(axis=1)
    cell = int(np.argmin(np.linalg.norm(centre - [3.5, 1.5, 1.5], axis=1)))   # top layer
    low = conn[cell][np.argsort(pts[conn[cell], 2])[:4]]
    inner = low[np.argmin(np.abs(pts[low, 0] - 3.0) + np.abs(pts[low, 1] - 1.0))]
    pts[inner] = [pts[inner, 0], pts[inner, 1], 6.0]   # det J < 0 at the cell centre
    gauges = gauge_frame([dict(gauge="OVER", x=3.5, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0,
                               normal_x=0, normal_y=0, normal_z=1),
                          dict(gauge="AWAY", x=0.5, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0,
                               normal_x=0, normal_y=0, normal_z=1)])
    with pytest.raises(ModelError, match=r"gauge 'OVER': element \d+ under it is inverted"):
        build_operator(mesh, gauges)
    op = build_operator(mesh, gauges, strict=False)
    assert op.invalid.tolist() == [True, False]


def test_grid_overhanging_an_edge_is_refused():
    mesh = solid_mesh("hexahedron")
    gauges = gauge_frame([dict(gauge="EDGE", x=3.9, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0,
                               length=1.0)])
    with pytest.raises(GaugeError, match=r"EDGE.*overhangs an edge"):
        build_operator(mesh, gauges)


def tube(ctype: str, R: float = 5.0):
    """A thick tube R <= r <= R + 3, -2 <= z <= 2, 24 cells around (a bore of radius R)."""
    def warp(p):
        r, th, z = R + p[:, 0], p[:, 1], p[:, 2] - 2.0
        return np.c_[r * np.cos(th), r * np.sin(th), z]
    return solid_mesh(ctype, n=(2, 24, 2), size=(3.0, 2 * np.pi, 4.0), warp=warp)


@pytest.mark.parametrize("ctype", ["tetra", "tetra10", "hexahedron20"])
def test_point_above_a_curved_bore_lands_on_it(ctype, rng):
    # Reference: a cylinder of radius R; the closest point to p lies at angle atan2(p_y, p_x).
    # Linear faces are chords (radius between R cos(7.5 deg) and R); quadratic faces follow the
    # arc to the interpolation error of a parabola over 15 degrees, R (dtheta)^4 / 512 ~ 2.5e-5 R.
    R = 5.0
    mesh = tube(ctype, R)
    th = rng.uniform(0, 2 * np.pi, 8)
    r = R * 1.01
    rows = [dict(gauge=f"B{i}", x=r * np.cos(t), y=r * np.sin(t), z=rng.uniform(-1, 1),
                 dir_x=0, dir_y=0, dir_z=1, length=1.0) for i, t in enumerate(th)]
    op = build_operator(mesh, gauge_frame(rows), snap_tol=0.5)
    c = op.placement.centre
    radius = np.hypot(c[:, 0], c[:, 1])
    if ctype == "tetra":
        assert np.all(radius <= R + 1e-9) and np.all(radius >= R * np.cos(np.pi / 24) - 1e-9)
    else:
        np.testing.assert_allclose(radius, R, rtol=1e-4, atol=0)
    # angle: on a chord the foot of the perpendicular is not radial (up to ~2e-3 rad here);
    # a quadratic face follows the arc to ~1e-4
    atol = 2e-3 if ctype == "tetra" else 1e-4
    np.testing.assert_allclose(np.arctan2(c[:, 1], c[:, 0]) % (2 * np.pi), th, rtol=0, atol=atol)
    # the normal of a bore points into the hole (out of the material)
    inward = -c[:, :2] / radius[:, None]
    cosang = np.sum(op.placement.normal[:, :2] * inward, axis=1)
    assert np.all(cosang > np.cos(np.radians(7.6)))


def test_near_an_edge_the_normal_is_the_faces_own():
    # Reference: geometry of a box: the top face's normal is +z exactly, even 1e-3 from the edge.
    mesh = solid_mesh("tetra10")
    gauges = gauge_frame([dict(gauge="E1", x=3.999, y=1.5, z=2.0, dir_x=0, dir_y=1, dir_z=0)])
    op = build_operator(mesh, gauges)
    np.testing.assert_allclose(op.placement.normal[0], [0, 0, 1], rtol=0, atol=1e-12)
    # given a preferred normal on the edge itself, the side face is chosen
    gauges = gauge_frame([dict(gauge="E2", x=4.0, y=1.5, z=2.0, dir_x=0, dir_y=1, dir_z=0,
                               normal_x=1, normal_y=0, normal_z=0)])
    op = build_operator(mesh, gauges)
    np.testing.assert_allclose(op.placement.normal[0], [1, 0, 0], rtol=0, atol=1e-12)


def test_band_of_combined_cases_matches_dense_sampling(rng):
    # Reference: dense sampling of the combined reading over positions within position_tol and
    # angles within angle_tol. Band samples use 8 directions, so a linear field's extreme on the
    # circle is under-reached by at most (1 - cos 22.5 deg) of its range there: tolerance below.
    mesh = solid_mesh("hexahedron20", n=(4, 3, 2))
    x = mesh.points
    E1 = np.zeros((len(x), 3, 3))
    E1[:, 0, 0] = 1e-4 * (1 + 0.5 * x[:, 0])
    E2 = np.zeros((len(x), 3, 3))
    E2[:, 0, 0] = 1e-4 * (2 + 0.5 * x[:, 0] + 0.1 * x[:, 1])  # same trend: extremes cancel
    E2[:, 0, 1] = E2[:, 1, 0] = 0.6e-4
    gauges = gauge_frame([dict(gauge="B", x=2.0, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0, length=0.5)])
    ptol, atol = 0.4, 3.0
    op = build_operator(mesh, gauges, position_tol=ptol, angle_tol=atol)
    r1 = evaluate_rows(op, Field("a", "strain", "point", E1, "strain", "E"))["indicated"]
    r2 = evaluate_rows(op, Field("b", "strain", "point", E2, "strain", "E"))["indicated"]
    combined = 1.0 * r1 - 0.8 * r2            # opposite signs
    band = combined[op.row_kind != 1]
    # dense sampling
    rho, phi, ang = np.meshgrid(np.linspace(0, ptol, 5), np.linspace(0, 2 * np.pi, 37),
                                np.linspace(-atol, atol, 7), indexing="ij")
    rho, phi, ang = rho.ravel(), phi.ravel(), ang.ravel()
    a = np.radians(ang)
    rows = [dict(gauge=f"D{i}", x=2.0 + rho[i] * np.cos(phi[i]), y=1.5 + rho[i] * np.sin(phi[i]),
                 z=2.0, dir_x=np.cos(a[i]), dir_y=np.sin(a[i]), dir_z=0, length=0.5)
            for i in range(len(rho))]
    dense_op = build_operator(mesh, gauge_frame(rows), band=False)
    d1 = evaluate_rows(dense_op, Field("a", "strain", "point", E1, "strain", "E"))["indicated"]
    d2 = evaluate_rows(dense_op, Field("b", "strain", "point", E2, "strain", "E"))["indicated"]
    dense = (1.0 * d1 - 0.8 * d2)[dense_op.row_kind == 0]
    spread = dense.max() - dense.min()
    tol = (1 - np.cos(np.radians(22.5))) * spread
    assert abs(band.min() - dense.min()) <= tol
    assert abs(band.max() - dense.max()) <= tol
    # scaling per-case extremes instead is wrong: it over-widens the band beyond that tolerance
    wrong_low = 1.0 * r1[op.row_kind != 1].min() - 0.8 * r2[op.row_kind != 1].max()
    assert dense.min() - wrong_low > tol


def test_sensitivities_to_position_and_angle_match_the_closed_form():
    # Reference: strain transformation, eps(theta) = eps_xx cos^2 + eps_yy sin^2 + 2 eps_xy sin cos
    # (a closed form), in a field linear in x: eps_xx = 1e-3 + 2e-5 x, eps_xy = 3e-4 (tensor).
    # Moving a gauge along x by r changes its reading by 2e-5 r, the most of the eight band
    # directions: 20 ue per unit. Turning it by -a and +a (a = 2 deg) changes it by
    # eps_xy (sin 2a - sin(-2a)), over 2a: eps_xy sin(2a) / a per degree. Tolerance 1e-7 ue: the
    # quadratic cells reproduce a linear field exactly.
    import meshio

    from correlate.api import predict_readings

    mesh = solid_mesh("tetra10", n=(10, 5, 2), size=(20.0, 10.0, 4.0))
    x = mesh.points[:, 0]
    E = np.zeros((len(x), 6))
    E[:, 0] = 1e-3 + 2e-5 * x
    E[:, 5] = 3e-4
    m = meshio.Mesh(mesh.points, [("tetra10", mesh.blocks[0][1])], point_data={"E": E})
    g = pd.DataFrame([dict(gauge="G1", x=10.0, y=5.0, z=4.0, dir_x=1.0, dir_y=0.0, dir_z=0.0,
                           length=3.0, kt=0.0)])
    spec = {"strain": "E", "components": ["xx", "yy", "zz", "yz", "xz", "xy"], "shear": "tensor"}
    row = predict_readings(m, g, {"c": spec}, position_tol=1.0, angle_tol=2.0).iloc[0]
    assert row["sens_position_ue_per_unit"] == pytest.approx(20.0, rel=0, abs=1e-7)
    a = np.radians(2.0)
    assert row["sens_angle_ue_per_deg"] == pytest.approx(300.0 * np.sin(2 * a) / 2.0, rel=0,
                                                         abs=1e-7)


def test_a_field_with_no_finite_value_names_its_gauges_counted_in_map_order(rng):
    # A field of NaN at every node refuses in one line: how many gauges, the first eight in
    # the gauge map's order (G0, G1, ..., not the text order G0, G1, G10, G11), then "and N more".
    mesh = solid_mesh("hexahedron")
    gauges, _ = top_gauges(rng, mesh, n=12)
    op = build_operator(mesh, gauges, snap_tol=1.0)
    with pytest.raises(ModelError) as err:
        evaluate_rows(op, Field("c", "strain", "point", np.full((len(mesh.points), 3, 3), np.nan),
                                "strain", "E"))
    line = str(err.value)
    assert "array 'E' has NaN or infinite values at 12 gauge(s): " in line
    assert "G0, G1, G2, G3, G4, G5, G6, G7 and 4 more;" in line
