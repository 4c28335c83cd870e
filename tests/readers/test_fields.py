"""Field kinds: strain orders and shear conventions, stress by Hooke's law, displacement gradients."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from builders import gauge_frame, solid_mesh

from correlate.core.errors import ModelError
from correlate.mechanics.tensors import from_voigt, strain_from_stress, stress_from_strain, to_voigt
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.operator import build_operator
from correlate.readers.fields import read_field
from correlate.readers.model import ModelSource
from correlate.readers.study import Case, Material

ORDER = ("xx", "yy", "zz", "xy", "yz", "xz")
GAUGES = [dict(gauge=f"G{i}", x=0.7 + 0.5 * i, y=0.6 + 0.3 * i, z=2.0, dir_x=np.cos(0.7 * i),
               dir_y=np.sin(0.7 * i), dir_z=0, length=0.4) for i in range(5)]


def source_with(mesh, point_data=None, cell_data=None) -> ModelSource:
    return ModelSource(path=__import__("pathlib").Path("mem.vtu"), mesh=mesh,
                       point_data=point_data or {}, cell_data=cell_data or {})


def tensor_field(x: np.ndarray) -> np.ndarray:
    """A linear, fully populated symmetric strain field (tensor shear). [m/m]"""
    t = np.zeros((len(x), 3, 3))
    vals = [3e-4 + 1e-4 * x[:, 0], -1e-4 + 2e-5 * x[:, 1], 5e-5 * x[:, 2], 1e-4 + 1e-5 * x[:, 1],
            -4e-5 * x[:, 0], 7e-5]
    for (i, j), v in zip([(0, 0), (1, 1), (2, 2), (0, 1), (1, 2), (0, 2)], vals, strict=True):
        t[:, i, j] = v
        t[:, j, i] = v
    return t


@pytest.fixture(scope="module")
def setup():
    mesh = solid_mesh("hexahedron20")
    op = build_operator(mesh, gauge_frame(GAUGES))
    ref = tensor_field(mesh.points)
    return mesh, op, ref


def reading(setup, source, case, materials=()):
    _, op, _ = setup
    return evaluate_rows(op, read_field(source, case, materials))["axial"][op.row_kind == 0]


@pytest.mark.parametrize("shear", ["engineering", "tensor"])
def test_every_voigt_order_and_shear_convention_round_trips(setup, shear):
    # Reference: the same tensor field written in any of the 720 component orders and either
    # shear convention gives the same readings (an oblique gauge sees every component).
    # Tolerance: round-off.
    mesh, _, ref = setup
    expected = reading(setup, source_with(mesh, {"E": to_voigt(ref, ORDER)}),
                       Case(name="c", kind="strain", array="E", components=None))
    for perm in itertools.permutations(range(6)):
        order = [ORDER[i] for i in perm]
        data = to_voigt(ref, order, shear=shear)
        case = Case(name="c", kind="strain", array="E", components=tuple(order), shear=shear)
        got = reading(setup, source_with(mesh, {"E": data}), case)
        np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-18, err_msg=str(order))


def test_wrong_shear_convention_changes_an_oblique_reading(setup):
    # The trap the conventions guard against: reading engineering shear as tensor shear doubles it.
    mesh, _, ref = setup
    data = to_voigt(ref, ORDER, shear="engineering")
    right = reading(setup, source_with(mesh, {"E": data}), Case("c", "strain", "E", None))
    wrong = reading(setup, source_with(mesh, {"E": data}), Case("c", "strain", "E", None, shear="tensor"))
    assert np.max(np.abs(right - wrong)) > 1e-5


def test_stress_input_by_hookes_law(setup):
    # Reference: isotropic Hooke's law (e.g. Timoshenko & Goodier, Theory of Elasticity, ch. 1);
    # stress made from the strain field must give back the strain readings.
    mesh, _, ref = setup
    E, nu = 70000.0, 0.33
    sigma = stress_from_strain(ref, E, nu)
    np.testing.assert_allclose(strain_from_stress(sigma, E, nu), ref, rtol=0, atol=1e-18)
    expected = reading(setup, source_with(mesh, {"E": to_voigt(ref, ORDER)}), Case("c", "strain", "E", None))
    got = reading(setup, source_with(mesh, {"S": to_voigt(sigma, ORDER, shear="tensor")}),
                  Case("c", "stress", "S", None), (Material(E=E, nu=nu),))
    np.testing.assert_allclose(got, expected, rtol=1e-12, atol=1e-18)


def test_cell_data_constant_per_element_and_nodal_average(setup):
    # A uniform field is the same as cell data (constant) and averaged to the nodes: exact.
    mesh, _, _ = setup
    uni = np.tile(to_voigt(tensor_field(np.zeros((1, 3))), ORDER), (mesh.n_cells, 1))
    got_cell = reading(setup, source_with(mesh, cell_data={"E": [uni]}), Case("c", "strain", "E", None))
    got_nodal = reading(setup, source_with(mesh, cell_data={"E": [uni]}),
                        Case("c", "strain", "E", None, average="nodal"))
    expected = reading(setup, source_with(mesh, {"E": np.tile(uni[:1], (len(mesh.points), 1))}),
                       Case("c", "strain", "E", None))
    np.testing.assert_allclose(got_cell, expected, rtol=1e-12, atol=0)
    np.testing.assert_allclose(got_nodal, expected, rtol=1e-12, atol=0)


@pytest.mark.parametrize("ctype", ["tetra10", "hexahedron20", "hexahedron27"])
def test_displacement_gradient_exact_for_quadratic_field_on_affine_cells(ctype):
    # Reference: u = linear + quadratic polynomial; eps = sym(grad u) analytically. Quadratic
    # elements on affine maps reproduce it exactly (completeness). Tolerance: round-off.
    mesh = solid_mesh(ctype)
    x = mesh.points
    u = np.c_[1e-3 * x[:, 0] + 2e-4 * x[:, 0] * x[:, 1],
              -3e-4 * x[:, 1] + 1e-4 * x[:, 2] ** 2,
              5e-4 * x[:, 2] + 1e-4 * x[:, 0] * x[:, 2]]
    op = build_operator(mesh, gauge_frame(GAUGES))
    rows = evaluate_rows(op, read_field(source_with(mesh, {"U": u}), Case("c", "displacement", "U", None)))
    c = op.placement.centre
    d = op.placement.direction
    H = np.zeros((len(c), 3, 3))
    H[:, 0, 0] = 1e-3 + 2e-4 * c[:, 1]
    H[:, 0, 1] = 2e-4 * c[:, 0]
    H[:, 1, 1] = -3e-4
    H[:, 1, 2] = 2e-4 * c[:, 2]
    H[:, 2, 2] = 5e-4 + 1e-4 * c[:, 0]
    H[:, 2, 0] = 1e-4 * c[:, 2]
    eps = 0.5 * (H + np.swapaxes(H, 1, 2))
    # grid of length 0.4 along d: average of a linear-in-s strain = centre value
    expected = np.einsum("gi,gij,gj->g", d, eps, d)
    np.testing.assert_allclose(rows["axial"][op.row_kind == 0], expected, rtol=1e-10, atol=1e-17)


def test_missing_array_lists_the_arrays_found(setup):
    mesh, _, ref = setup
    with pytest.raises(ModelError, match=r"'E_pul'.*arrays found: E_pull \(point, 6\).*did you mean 'E_pull'"):
        read_field(source_with(mesh, {"E_pull": to_voigt(ref, ORDER)}), Case("lift", "strain", "E_pul", None))


def test_wrong_component_count_is_refused(setup):
    mesh, _, _ = setup
    with pytest.raises(ModelError, match=r"has 4 component\(s\)"):
        read_field(source_with(mesh, {"E": np.zeros((len(mesh.points), 4))}), Case("c", "strain", "E", None))


def test_local_axes_rotate_cell_tensors_to_global(setup):
    # Reference: tensor transformation T_global = R^T T_local R with R's rows the local axes.
    mesh, _, _ = setup
    rng = np.random.default_rng(1)
    q, _ = np.linalg.qr(rng.normal(size=(3, 3)))
    R = q if np.linalg.det(q) > 0 else -q
    glob = tensor_field(np.zeros((1, 3)))[0]
    local = R @ glob @ R.T
    cells = mesh.n_cells
    data = np.tile(to_voigt(local[None], ORDER), (cells, 1))
    axes = np.tile(np.r_[R[0], R[1]], (cells, 1))
    fld = read_field(source_with(mesh, cell_data={"E": [data], "frame": [axes]}),
                     Case("c", "strain", "E", None, axes="frame"))
    np.testing.assert_allclose(fld.values[0], glob, rtol=0, atol=1e-18)
    with pytest.raises(ModelError, match="point data in local axes"):
        read_field(source_with(mesh, {"E": np.tile(data[:1], (len(mesh.points), 1))},
                               {"frame": [axes]}), Case("c", "strain", "E", None, axes="frame"))


def test_from_voigt_matches_to_voigt_inverse():
    rng = np.random.default_rng(2)
    v = rng.normal(size=(5, 6))
    np.testing.assert_allclose(to_voigt(from_voigt(v, ORDER), ORDER), v, rtol=0, atol=1e-15)


def test_convention_checks_name_the_order_that_fits():
    # Reference: the traction-free condition of a free surface (Timoshenko & Goodier, Theory of
    # Elasticity: sigma . n = 0 on a free boundary) with isotropic Hooke's law gives e_nt = 0 and
    # e_nn = -nu/(1-nu)(e_11 + e_22); and Hooke's law against a stress array.
    from correlate.model_readings.conventions import convention_evidence, describe

    rng = np.random.default_rng(4)
    nu = 0.3
    g = 12
    # plane stress states on the top face z = const, so the surface condition holds exactly
    sx, sy, txy = rng.normal(0, 100, (3, g))
    sig = np.zeros((g, 3, 3))
    sig[:, 0, 0], sig[:, 1, 1], sig[:, 0, 1], sig[:, 1, 0] = sx, sy, txy, txy
    eps = strain_from_stress(sig, 70000.0, nu)
    normal = np.tile([0, 0, 1.0], (g, 1))
    direction = np.tile([1.0, 0, 0], (g, 1))
    right = to_voigt(eps, ("xx", "yy", "zz", "xy", "yz", "xz"))
    ev = convention_evidence(right, None, "engineering", normal, direction, nu)
    assert ev["declared"] < 1e-12 and describe("c", ev) is None
    # an array that holds tensor shear, declared engineering: the xy shear is doubled; the surface
    # check cannot see in-plane shear, Hooke's law can
    wrong = to_voigt(eps, ("xx", "yy", "zz", "xy", "yz", "xz"), shear="tensor")
    ev = convention_evidence(wrong, None, "engineering", normal, direction, nu, stress_strain=eps)
    assert ev["best"][1] == "tensor" and ev["best"][2] < 1e-12
    assert "would fit" in describe("c", ev)
    # an order with zz and xy swapped fails the surface check (e_nn is no longer -nu/(1-nu)(e11+e22))
    swapped = to_voigt(eps, ("xx", "yy", "xy", "zz", "yz", "xz"))
    ev = convention_evidence(swapped, None, "engineering", normal, direction, nu)
    assert ev["declared"] > 0.25 and describe("c", ev) is not None


def test_rows_convert_alone_like_the_whole_field(setup):
    # Reference: Hooke's law for an isotropic solid, eps = ((1 + nu) sigma - nu tr(sigma) I) / E,
    # and the tensor transformation T_global = R^T T_local R, per cell with its own frame. The
    # gauge path converts only the rows it touches (Field.at); it must equal the whole-field
    # conversion and the closed form row by row (tolerance 1e-17 m/m on strains of about 3e-3:
    # a few float64 roundings in the rotation).
    mesh, _, _ = setup
    rng = np.random.default_rng(7)
    cells = mesh.n_cells
    E, nu = 70000.0, 0.33
    sig = rng.normal(scale=100.0, size=(cells, 3, 3))
    sig = 0.5 * (sig + np.swapaxes(sig, 1, 2))
    q, _ = np.linalg.qr(rng.normal(size=(cells, 3, 3)))
    R = q * np.sign(np.linalg.det(q))[:, None, None]
    local = R @ sig @ np.swapaxes(R, 1, 2)
    axes = np.c_[R[:, 0], R[:, 1]]
    fld = read_field(source_with(mesh, cell_data={"S": [to_voigt(local, ORDER, shear="tensor")],
                                                    "frame": [axes]}),
                     Case("c", "stress", "S", None, axes="frame"), (Material(E=E, nu=nu),))
    ids = rng.permutation(cells)[: cells // 2]
    tr = np.trace(sig, axis1=1, axis2=2)[:, None, None]
    expected = ((1 + nu) * sig - nu * tr * np.eye(3)) / E
    np.testing.assert_allclose(fld.at(ids), expected[ids], rtol=0, atol=1e-17)
    np.testing.assert_allclose(fld.values[ids], expected[ids], rtol=0, atol=1e-17)
