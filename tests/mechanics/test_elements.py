"""Tests of correlate.mechanics.elements against VTK, scipy, closed forms and textbook FE properties."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import optimize
from scipy.spatial.transform import Rotation

from correlate.core.errors import ModelError
from correlate.mechanics import elements as fe
from correlate.mechanics import mapping as fmap
from correlate.mechanics.elements import ELEMENTS

ALL = list(ELEMENTS)
SOLIDS = [n for n, e in ELEMENTS.items() if e.dim == 3]
QUADRATIC = [n for n, e in ELEMENTS.items() if e.quadratic]
QUADRATIC_SOLIDS = [n for n in QUADRATIC if ELEMENTS[n].dim == 3]
SIMPLEX = {"triangle", "triangle6", "tetra", "tetra10"}
VTK_CLASS = {
    "triangle": "vtkTriangle", "triangle6": "vtkQuadraticTriangle", "quad": "vtkQuad",
    "quad8": "vtkQuadraticQuad", "quad9": "vtkBiQuadraticQuad", "tetra": "vtkTetra",
    "tetra10": "vtkQuadraticTetra", "hexahedron": "vtkHexahedron",
    "hexahedron20": "vtkQuadraticHexahedron", "hexahedron27": "vtkTriQuadraticHexahedron",
    "wedge": "vtkWedge",
}
# Closed-form surface area and volume of each reference solid (elementary geometry): unit corner
# tetrahedron, cube [-1, 1]^3, right triangle x [-1, 1].
REFERENCE_AREA = {"tetra": 1.5 + np.sqrt(3) / 2, "hexahedron": 24.0, "wedge": 5 + 2 * np.sqrt(2)}
REFERENCE_VOLUME = {"tetra": 1 / 6, "hexahedron": 8.0, "wedge": 1.0}


def _family(name: str) -> str:
    return {"tetra10": "tetra", "hexahedron20": "hexahedron", "hexahedron27": "hexahedron"}.get(
        name, name)


def _vtk_scale(name: str) -> np.ndarray:
    """dr/dxi per axis: VTK uses [0, 1] where we use [-1, 1] (box axes and the wedge's zeta)."""
    dim = ELEMENTS[name].dim
    if name in SIMPLEX:
        return np.ones(dim)
    return np.array([1.0, 1.0, 0.5]) if name == "wedge" else np.full(dim, 0.5)


def _to_vtk(name: str, xi: np.ndarray) -> np.ndarray:
    s = _vtk_scale(name)
    return s * xi + (1 - s)


def _random_xi(name: str, rng: np.random.Generator, n: int) -> np.ndarray:
    dim = ELEMENTS[name].dim
    if name in SIMPLEX:
        return rng.dirichlet(np.ones(dim + 1), n)[:, :dim]
    if name == "wedge":
        return np.column_stack([rng.dirichlet(np.ones(3), n)[:, :2], rng.uniform(-1, 1, n)])
    return rng.uniform(-1, 1, (n, dim))


def _affine(dim: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """Return a well-conditioned map xi -> A xi + b into 3D with positive orientation."""
    a = 2.0 * np.eye(3)[:, :dim] + 0.4 * rng.uniform(-1, 1, (3, dim))
    return a, rng.uniform(-1, 1, 3)


def _cell(name: str, rng: np.random.Generator, curved: float = 0.0, h: float = 1.0
          ) -> tuple[np.ndarray, np.ndarray]:
    """Nodes h * (A ref + b), with non-corner nodes moved by up to ``curved * h**2``.

    For linear types ``curved`` moves every node (a non-affine hexahedron or wedge).
    """
    e = ELEMENTS[name]
    a, b = _affine(e.dim, rng)
    nodes = h * (e.reference_nodes @ a.T + b)
    first = e.n_corners if e.quadratic else 0
    nodes[first:] += curved * h**2 * rng.uniform(-1, 1, (e.n_nodes - first, 3))
    return nodes, a


def _vtk_cell(name: str):
    from vtkmodules import vtkCommonDataModel

    return getattr(vtkCommonDataModel, VTK_CLASS[name])()


def _vtk_grid_cell(name: str, nodes: np.ndarray):
    import pyvista as pv

    e = ELEMENTS[name]
    grid = pv.UnstructuredGrid(np.r_[e.n_nodes, np.arange(e.n_nodes)], np.array([e.vtk_id]), nodes)
    return grid.GetCell(0)


# --- 1. VTK agreement ----------------------------------------------------------------------------


@pytest.mark.parametrize("name", ALL, ids=ALL)
def test_reference_nodes_and_ids_match_vtk(name):
    e, cell = ELEMENTS[name], _vtk_cell(name)
    assert (e.vtk_id, e.n_nodes, e.dim) == (cell.GetCellType(), cell.GetNumberOfPoints(),
                                           cell.GetCellDimension())
    pc = np.array(cell.GetParametricCoords()[: 3 * e.n_nodes]).reshape(-1, 3)[:, : e.dim]
    # VTK's parametric coordinates of the nodes; exact binary fractions, so exact comparison.
    assert_allclose(_to_vtk(name, e.reference_nodes), pc, rtol=0, atol=0)


@pytest.mark.parametrize("name", ALL, ids=ALL)
def test_shape_functions_and_derivatives_match_vtk(name):
    rng = np.random.default_rng(11)
    e, cell = ELEMENTS[name], _vtk_cell(name)
    xi = _random_xi(name, rng, 12)
    want_n, want_d = [], []
    for r in _to_vtk(name, xi):
        pc = [*r, 0.0][:3]
        w, d = [0.0] * e.n_nodes, [0.0] * (e.n_nodes * e.dim)
        cell.InterpolateFunctions(pc, w)  # VTK reference
        cell.InterpolateDerivs(pc, d)  # d/dr, d/ds, d/dt blocks in VTK parametric coordinates
        want_n.append(w)
        want_d.append(np.reshape(d, (e.dim, e.n_nodes)).T)
    # chain rule dN/dxi = dN/dr * dr/dxi; both are exact formulas, so only round-off differs
    assert_allclose(fe.shape_functions(name, xi), want_n, rtol=0, atol=1e-12)
    assert_allclose(fe.shape_derivatives(name, xi), np.array(want_d) * _vtk_scale(name),
                    rtol=0, atol=1e-12)


# --- 2. Textbook properties ----------------------------------------------------------------------


@pytest.mark.parametrize("name", ALL, ids=ALL)
def test_partition_of_unity_and_kronecker_delta(name):
    # Zienkiewicz & Taylor, The Finite Element Method, vol. 1 (from memory, edition not
    # confirmed): sum N_i = 1 everywhere and N_i(x_j) = delta_ij at the nodes.
    e = ELEMENTS[name]
    xi = _random_xi(name, np.random.default_rng(2), 20)
    # round-off of sums of about 30 terms of order 1
    assert_allclose(fe.shape_functions(name, xi).sum(axis=1), 1.0, rtol=0, atol=1e-13)
    assert_allclose(fe.shape_derivatives(name, xi).sum(axis=1), 0.0, rtol=0, atol=1e-13)
    assert_allclose(fe.shape_functions(name, e.reference_nodes), np.eye(e.n_nodes),
                    rtol=0, atol=1e-13)


# --- 3. Field reproduction -----------------------------------------------------------------------

FIELD_CASES = [(n, False) for n in ALL] + [(n, True) for n in QUADRATIC]
FIELD_IDS = [f"{n}-{'curved' if c else 'affine'}" for n, c in FIELD_CASES]


@pytest.mark.parametrize(("name", "curved"), FIELD_CASES, ids=FIELD_IDS)
def test_constant_and_linear_fields_reproduced(name, curved):
    # Isoparametric completeness (Zienkiewicz & Taylor vol. 1, from memory): since sum N_i = 1
    # and x = sum N_i x_i, any f = c.x + d is interpolated exactly, on curved cells too.
    rng = np.random.default_rng(3)
    nodes, _ = _cell(name, rng, curved=0.3 if curved else 0.0)
    xi = _random_xi(name, rng, 30)
    c, d = rng.normal(size=3), 0.7
    n = fe.shape_functions(name, xi)
    x = fmap.map_to_physical(name, np.broadcast_to(nodes, (len(xi), *nodes.shape)), xi)
    # round-off on values of order 10
    assert_allclose(n @ np.full(len(nodes), 3.5), 3.5, rtol=0, atol=1e-12)
    assert_allclose(n @ (nodes @ c + d), x @ c + d, rtol=0, atol=1e-12)


def _quadratic_field(x: np.ndarray) -> np.ndarray:
    q = np.array([[1.0, 0.3, -0.2], [0.3, -0.5, 0.4], [-0.2, 0.4, 0.8]])
    return np.einsum("...i,ij,...j->...", x, q, x) + x @ np.array([0.5, -1.0, 2.0]) + 1.0


@pytest.mark.parametrize("name", QUADRATIC, ids=QUADRATIC)
def test_quadratic_field_exact_on_affine_quadratic_cells(name):
    # A quadratic in x is quadratic in xi under an affine map; P2, Q2 and the 8/20-node
    # serendipity spaces all contain the complete quadratics (Zienkiewicz & Taylor vol. 1, from
    # memory), so interpolation is exact.
    rng = np.random.default_rng(4)
    nodes, _ = _cell(name, rng)
    xi = _random_xi(name, rng, 30)
    x = fe.shape_functions(name, xi) @ nodes
    # round-off on values of order 10-30
    assert_allclose(fe.shape_functions(name, xi) @ _quadratic_field(nodes), _quadratic_field(x),
                    rtol=0, atol=1e-11)


@pytest.mark.parametrize("name", QUADRATIC, ids=QUADRATIC)
def test_quadratic_field_converges_at_third_order_on_curved_cells(name):
    # Interpolation theory of isoparametric elements (Ciarlet & Raviart 1972, from memory): a
    # quadratic element whose non-affine part is O(h^2) interpolates a smooth field with error
    # O(h^3). Two meshes sizes h and h/2: the observed order must be 3 within 0.2.
    xi = _random_xi(name, np.random.default_rng(5), 200)
    errors = []
    for h in (0.02, 0.01):
        nodes, _ = _cell(name, np.random.default_rng(6), curved=1.0, h=h)
        x = fe.shape_functions(name, xi) @ nodes
        errors.append(np.abs(fe.shape_functions(name, xi) @ _quadratic_field(nodes)
                             - _quadratic_field(x)).max())
    assert errors[1] > 1e-12  # curvature really makes the field non-polynomial in xi
    assert_allclose(np.log2(errors[0] / errors[1]), 3.0, rtol=0, atol=0.2)


# --- 4. Inverse map ------------------------------------------------------------------------------


@pytest.mark.parametrize("name", SOLIDS, ids=SOLIDS)
def test_natural_coordinates_recovers_xi_on_curved_cells(name):
    # Reference: the xi used to build the points (forward map x(xi) by the same shape functions,
    # checked against VTK above). Newton's method converges quadratically: 8 steps are plenty.
    rng = np.random.default_rng(7)
    nodes, _ = _cell(name, rng, curved=0.3)
    xi_true = _random_xi(name, rng, 40)
    xi_true[:5] = 1.2 * xi_true[:5] - 0.05  # a few points slightly outside: allowed, not clipped
    many = np.broadcast_to(nodes, (len(xi_true), *nodes.shape))
    points = fmap.map_to_physical(name, many, xi_true)
    xi, converged = fmap.natural_coordinates(name, many, points, max_iter=8)
    assert converged.all()
    # Newton stops below tol=1e-12 in natural coordinates
    assert_allclose(xi, xi_true, rtol=0, atol=1e-12)


@pytest.mark.parametrize(("name", "atol"), [("tetra10", 1e-4), ("hexahedron20", 1e-3)],
                         ids=["tetra10", "hexahedron20"])
def test_natural_coordinates_agree_with_vtk_evaluate_position(name, atol):
    # Reference: VTK's vtkCell.EvaluatePosition. Its damped Newton stops near 1e-5 (tet10) and
    # 1e-4 (hex20) in VTK parametric coordinates (LIBRARY-NOTES.md), hence the loose atol;
    # hex coordinates are doubled by the [0, 1] -> [-1, 1] change.
    from vtkmodules.vtkCommonCore import reference

    rng = np.random.default_rng(8)
    nodes, _ = _cell(name, rng, curved=0.3)
    xi_true = 0.9 * _random_xi(name, rng, 10)
    many = np.broadcast_to(nodes, (len(xi_true), *nodes.shape))
    points = fmap.map_to_physical(name, many, xi_true)
    xi, _ = fmap.natural_coordinates(name, many, points)
    cell, want = _vtk_grid_cell(name, nodes), []
    for p in points:
        pc = [0.0] * 3
        status = cell.EvaluatePosition(list(p), [0.0] * 3, reference(0), pc, reference(0.0),
                                       [0.0] * len(nodes))
        assert status == 1
        want.append(pc)
    vtk_xi = (np.array(want) - (1 - _vtk_scale(name))) / _vtk_scale(name)
    assert_allclose(xi, vtk_xi, rtol=0, atol=atol)


def test_natural_coordinates_rejects_2d_cell_type():
    with pytest.raises(ModelError, match="quad8"):
        fmap.natural_coordinates("quad8", np.zeros((1, 8, 3)), np.zeros((1, 3)))


def test_unknown_cell_type_is_named():
    with pytest.raises(ModelError, match="pyramid"):
        fe.shape_functions("pyramid", np.zeros((1, 3)))


# --- reference domain ----------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["triangle", "tetra", "wedge", "hexahedron"],
                         ids=["triangle", "tetra", "wedge", "hexahedron"])
def test_clip_to_reference_is_nearest_point(name):
    # Reference: scipy.optimize.minimize (SLSQP) of |y - xi|^2 subject to the domain's linear
    # inequalities.
    rng = np.random.default_rng(9)
    dim = ELEMENTS[name].dim
    xi = rng.uniform(-1.5, 2.0, (8, dim))
    got = fe.clip_to_reference(name, xi)
    rows = {"triangle": [[1, 0], [0, 1], [-1, -1]], "tetra": np.vstack([np.eye(3), -np.ones(3)]),
            "wedge": [[1, 0, 0], [0, 1, 0], [-1, -1, 0], [0, 0, 1], [0, 0, -1]],
            "hexahedron": np.vstack([np.eye(3), -np.eye(3)])}[name]
    rhs = {"triangle": [0, 0, -1], "tetra": [0, 0, 0, -1], "wedge": [0, 0, -1, -1, -1],
           "hexahedron": [-1, -1, -1, -1, -1, -1]}[name]
    cons = {"type": "ineq", "fun": lambda y: np.asarray(rows, float) @ y - rhs}
    for p, g in zip(xi, got, strict=True):
        ref = optimize.minimize(lambda y, p=p: np.sum((y - p) ** 2), np.zeros(dim),
                                constraints=[cons], method="SLSQP", tol=1e-14)
        assert_allclose(g, ref.x, rtol=0, atol=1e-7)  # SLSQP's own accuracy
    assert fe.inside_reference(name, got).all()
    assert_array_equal(fe.inside_reference(name, xi), np.all(np.isclose(got, xi, atol=0), axis=1))


# --- 5. Physical gradients -----------------------------------------------------------------------


@pytest.mark.parametrize("name", SOLIDS, ids=SOLIDS)
def test_gradient_of_linear_field_exact_on_curved_solids(name):
    # Isoparametric completeness (as above): grad(sum N_i f_i) = c for f = c.x + d.
    rng = np.random.default_rng(10)
    nodes, _ = _cell(name, rng, curved=0.3)
    xi = _random_xi(name, rng, 25)
    c = rng.normal(size=3)
    dn_dx, det = fmap.physical_gradients(name, np.broadcast_to(nodes, (25, *nodes.shape)), xi)
    assert (det > 0).all()
    # round-off through a 3x3 inverse of a well-conditioned Jacobian
    assert_allclose(np.einsum("pni,n->pi", dn_dx, nodes @ c + 1.0), np.tile(c, (25, 1)),
                    rtol=0, atol=1e-12)


@pytest.mark.parametrize("name", SOLIDS, ids=SOLIDS)
def test_gradient_of_quadratic_displacement_and_detj_on_affine_solids(name):
    # Analytic gradient of u_k = x.Q_k x + C_k.x: du_k/dx = (Q_k + Q_k^T) x + C_k; det J of the
    # affine map xi -> A xi + b is det A. Quadratic u only on quadratic cells.
    rng = np.random.default_rng(12)
    nodes, a = _cell(name, rng)
    xi = _random_xi(name, rng, 25)
    q = rng.normal(size=(3, 3, 3)) if ELEMENTS[name].quadratic else np.zeros((3, 3, 3))
    cmat = rng.normal(size=(3, 3))
    u_nodes = np.einsum("ni,kij,nj->nk", nodes, q, nodes) + nodes @ cmat.T
    many = np.broadcast_to(nodes, (25, *nodes.shape))
    dn_dx, det = fmap.physical_gradients(name, many, xi)
    x = fmap.map_to_physical(name, many, xi)
    want = np.einsum("kij,pj->pki", q + q.transpose(0, 2, 1), x) + cmat
    # round-off on gradients of order 10
    assert_allclose(np.einsum("pnj,nk->pkj", dn_dx, u_nodes), want, rtol=0, atol=1e-11)
    assert_allclose(det, np.linalg.det(a), rtol=1e-13, atol=0)


@pytest.mark.parametrize("name", ["triangle", "quad"], ids=["triangle", "quad"])
def test_surface_gradient_on_tilted_flat_face(name):
    # Reference: tangential gradient of f = c.x on a plane with unit normal n is (I - n n^T) c;
    # the area scale is the in-plane det B, kept by the rotation R (elementary geometry).
    rng = np.random.default_rng(13)
    e = ELEMENTS[name]
    b = np.array([[1.5, 0.4], [-0.3, 1.2]])
    rot = Rotation.random(random_state=14).as_matrix()
    nodes = np.column_stack([e.reference_nodes @ b.T, np.zeros(e.n_nodes)]) @ rot.T + [1, 2, 3]
    xi = _random_xi(name, rng, 10)
    many = np.broadcast_to(nodes, (10, *nodes.shape))
    c = rng.normal(size=3)
    normal = rot[:, 2]
    dn_dx, det = fmap.physical_gradients(name, many, xi)
    # round-off through the 2x2 metric inverse
    assert_allclose(np.einsum("pni,n->pi", dn_dx, nodes @ c),
                    np.tile(c - normal * (normal @ c), (10, 1)), rtol=0, atol=1e-12)
    assert_allclose(det, np.linalg.det(b), rtol=1e-13, atol=0)
    assert_allclose(fmap.face_normals(name, many, xi), np.tile(normal, (10, 1)), rtol=0, atol=1e-13)


def test_singular_jacobian_raises():
    nodes = np.zeros((1, 4, 3))
    nodes[0, 1] = [1, 0, 0]
    with pytest.raises(ModelError, match="singular"):
        fmap.physical_gradients("tetra", nodes, np.full((1, 3), 0.25))


# --- 6. Closest point on a curved face -----------------------------------------------------------


def _curved_face(name: str) -> np.ndarray:
    """Return a dome: reference nodes in the xy-plane, mid-side and centre nodes raised."""
    e = ELEMENTS[name]
    nodes = np.column_stack([e.reference_nodes, np.zeros(e.n_nodes)])
    nodes[e.n_corners:, 2] = 0.25
    nodes[e.n_corners:, :2] *= 1.05
    return nodes


def _reference_distance(name: str, nodes: np.ndarray, p: np.ndarray) -> float:
    """Dense sampling of the face, refined by scipy.optimize.minimize over the reference domain."""
    g = np.linspace(-1, 1, 201) if name not in SIMPLEX else np.linspace(0, 1, 201)
    grid = np.array(np.meshgrid(g, g)).reshape(2, -1).T
    grid = grid[fe.inside_reference(name, grid)]
    x = fe.shape_functions(name, grid) @ nodes
    d = np.linalg.norm(x - p, axis=1)
    start = grid[np.argmin(d)]

    def f(y):
        return np.sum((fe.shape_functions(name, y[None]) @ nodes - p) ** 2)

    if name in SIMPLEX:
        res = optimize.minimize(f, start, method="SLSQP", tol=1e-16, bounds=[(0, 1)] * 2,
                                constraints=[{"type": "ineq", "fun": lambda y: 1 - y.sum()}])
    else:
        res = optimize.minimize(f, start, method="L-BFGS-B", bounds=[(-1, 1)] * 2,
                                options={"ftol": 1e-16, "gtol": 1e-12})
    return min(np.sqrt(res.fun), d.min())


CURVED_FACES = ["triangle6", "quad8", "quad9"]


@pytest.mark.parametrize("name", CURVED_FACES, ids=CURVED_FACES)
def test_closest_point_above_curved_face(name):
    # Reference 1 (construction): p = x(xi) + d n(xi) has its foot at xi for |d| below the
    # radius of curvature. Reference 2: dense sampling refined by scipy.optimize.minimize.
    rng = np.random.default_rng(15)
    nodes = _curved_face(name)
    centre = ELEMENTS[name].reference_nodes[: ELEMENTS[name].n_corners].mean(axis=0)
    xi_true = centre + 0.8 * (_random_xi(name, rng, 8) - centre)
    many = np.broadcast_to(nodes, (8, *nodes.shape))
    d = rng.uniform(-0.15, 0.15, 8)
    points = fmap.map_to_physical(name, many, xi_true) + d[:, None] * fmap.face_normals(
        name, many, xi_true)
    xi, x, dist = fmap.closest_point_on_face(name, many, points)
    assert_allclose(xi, xi_true, rtol=0, atol=1e-9)  # Gauss-Newton stops at 1e-12 steps
    assert_allclose(dist, np.abs(d), rtol=0, atol=1e-12)
    assert_allclose(x, fmap.map_to_physical(name, many, xi), rtol=0, atol=1e-15)
    want = [_reference_distance(name, nodes, p) for p in points]
    assert_allclose(dist, want, rtol=0, atol=1e-9)  # face size is about 1-2


@pytest.mark.parametrize("name", CURVED_FACES, ids=CURVED_FACES)
def test_straight_quadratic_faces_take_the_linear_face_and_agree(name, monkeypatch):
    # Faces with mid-side nodes at their edges' middles are solved as the linear face; mixed in
    # one call with curved faces. Reference: dense sampling refined by scipy.optimize.minimize
    # (tolerance 1e-9 of a face about 1-2 across), and the quadratic iteration itself, forced by
    # a negative straightness tolerance (agreement 1e-12: both converge to rounding).
    rng = np.random.default_rng(17)
    e = ELEMENTS[name]
    rot = Rotation.from_rotvec([0.3, -0.5, 0.2]).as_matrix()
    flat = np.column_stack([e.reference_nodes, np.zeros(e.n_nodes)]) @ rot.T + [1.0, 2.0, 3.0]
    faces = np.stack([flat, _curved_face(name)] * 6)
    assert fmap._straight(name, faces).tolist() == [True, False] * 6
    # near the faces (as gauge points are): far above a strongly curved face the closest point
    # need not be unique, and the iteration may stop at a local one
    points = fmap.map_to_physical(name, faces, _random_xi(name, rng, 12) * 1.2) + \
        rng.normal(scale=0.05, size=(12, 3))
    xi, x, dist = fmap.closest_point_on_face(name, faces, points)
    assert_allclose(x, fmap.map_to_physical(name, faces, xi), rtol=0, atol=1e-12)
    want = [_reference_distance(name, f, p) for f, p in zip(faces, points, strict=True)]
    assert_allclose(dist, want, rtol=0, atol=1e-9)
    monkeypatch.setattr(fmap, "STRAIGHT_TOL", -1.0)
    xi_q, x_q, dist_q = fmap.closest_point_on_face(name, faces, points)
    assert_allclose(xi, xi_q, rtol=0, atol=1e-12)  # the same natural coordinates
    assert_allclose(x, x_q, rtol=0, atol=1e-12)
    assert_allclose(dist, dist_q, rtol=0, atol=1e-12)


EDGE_CASES = [("quad8", "edge"), ("quad9", "corner"), ("triangle6", "edge"),
              ("triangle6", "corner")]


@pytest.mark.parametrize(("name", "where"), EDGE_CASES, ids=[f"{n}-{w}" for n, w in EDGE_CASES])
def test_closest_point_beyond_edge_lands_on_edge(name, where):
    # Points in the face's plane beyond an edge (or corner) must land on it; reference distance:
    # dense sampling refined by scipy.optimize.minimize over the whole face.
    rng = np.random.default_rng(16)
    nodes = _curved_face(name)
    n = 6
    if name in SIMPLEX:  # beyond the edge xi + eta = 1, or beyond corner (1, 0)
        t = rng.uniform(0.1, 0.9, n) if where == "edge" else np.ones(n)
        foot = np.column_stack([t, 1 - t])
        out = np.array([1.0, 1.0, 0.0]) if where == "edge" else np.array([1.0, -0.3, 0.0])
    else:  # beyond the edge xi = 1, or beyond corner (1, 1)
        t = rng.uniform(-0.8, 0.8, n) if where == "edge" else np.ones(n)
        foot = np.column_stack([np.ones(n), t])
        out = np.array([1.0, 0.0, 0.0]) if where == "edge" else np.array([1.0, 1.0, 0.0])
    many = np.broadcast_to(nodes, (n, *nodes.shape))
    points = fmap.map_to_physical(name, many, foot) + rng.uniform(0.2, 0.5, (n, 1)) * out
    xi, x, dist = fmap.closest_point_on_face(name, many, points)
    assert_allclose(x, fmap.map_to_physical(name, many, xi), rtol=0, atol=1e-15)  # on the face
    if name in SIMPLEX:
        assert_allclose(xi.sum(axis=1), 1.0, rtol=0, atol=1e-12)  # on the hypotenuse, exactly
    else:
        assert_allclose(xi[:, 0], 1.0, rtol=0, atol=1e-12)  # clipped to the edge, exactly
    if where == "corner":
        assert_allclose(xi, foot, rtol=0, atol=1e-12)
    want = [_reference_distance(name, nodes, p) for p in points]
    assert_allclose(dist, want, rtol=0, atol=1e-9)  # face size is about 1-2


# --- 7. Face tables ------------------------------------------------------------------------------


def _boundary_constraints(name: str, xi: np.ndarray) -> np.ndarray:
    """Values of the reference domain's inequality constraints (zero on that boundary facet)."""
    if name in SIMPLEX:
        return np.column_stack([xi, 1 - xi.sum(axis=1)])
    if name == "wedge":
        return np.column_stack([xi[:, :2], 1 - xi[:, :2].sum(axis=1), 1 + xi[:, 2], 1 - xi[:, 2]])
    return np.column_stack([1 + xi, 1 - xi])


def _face_integral(face_type: str, nodes: np.ndarray) -> tuple[float, float]:
    """Return the area and the integral of x.n over a flat face.

    Gauss-Legendre 2x2 (numpy) on quadrilaterals, the degree-2 three-point rule (Strang & Fix,
    from memory) on triangles; exact for these integrands on affine faces.
    """
    if ELEMENTS[face_type].n_corners == 3:
        pts, w = np.array([[1 / 6, 1 / 6], [2 / 3, 1 / 6], [1 / 6, 2 / 3]]), np.full(3, 1 / 6)
    else:
        g, gw = np.polynomial.legendre.leggauss(2)
        pts, w = np.array([[a, b] for a in g for b in g]), np.outer(gw, gw).ravel()
    many = np.broadcast_to(nodes, (len(pts), *nodes.shape))
    _, det = fmap.physical_gradients(face_type, many, pts)
    x = fmap.map_to_physical(face_type, many, pts)
    flux = np.einsum("pi,pi->p", x, fmap.face_normals(face_type, many, pts))
    return float(w @ det), float(w @ (det * flux))


@pytest.mark.parametrize("name", SOLIDS, ids=SOLIDS)
def test_faces_match_vtk_and_lie_on_reference_boundary(name):
    e = ELEMENTS[name]
    cell = _vtk_grid_cell(name, e.reference_nodes)
    assert len(e.faces) == cell.GetNumberOfFaces()
    for k, (face_type, ids) in enumerate(e.faces):
        vtk_face = cell.GetFace(k)  # VTK's face table is the reference
        assert ELEMENTS[face_type].vtk_id == vtk_face.GetCellType()
        assert ids == tuple(vtk_face.GetPointIds().GetId(j) for j in range(len(ids)))
        g = _boundary_constraints(name, e.reference_nodes[list(ids)])
        assert np.any(np.all(g == 0, axis=0))  # one boundary facet holds all the face's nodes


@pytest.mark.parametrize("name", SOLIDS, ids=SOLIDS)
def test_faces_cover_boundary_once_and_satisfy_divergence_theorem(name):
    # Area: the faces of the reference solid add up to its closed-form surface area (each part
    # once). Divergence theorem: sum over faces of integral(x.n) / 3 = volume, with outward n;
    # for x = A xi + b the volume is det(A) times the reference volume.
    e = ELEMENTS[name]
    ref3 = np.column_stack([e.reference_nodes, np.zeros((e.n_nodes, 3 - e.dim))])
    areas = [_face_integral(t, ref3[list(ids)])[0] for t, ids in e.faces]
    assert_allclose(sum(areas), REFERENCE_AREA[_family(name)], rtol=1e-13, atol=0)  # round-off
    nodes, a = _cell(name, np.random.default_rng(17))
    flux = sum(_face_integral(t, nodes[list(ids)])[1] for t, ids in e.faces)
    assert_allclose(flux / 3, np.linalg.det(a) * REFERENCE_VOLUME[_family(name)], rtol=1e-12,
                    atol=0)  # round-off


@pytest.mark.parametrize("name", SOLIDS, ids=SOLIDS)
def test_face_to_parent_maps_face_nodes_and_geometry(name):
    # Face nodes must map onto the parent's reference nodes; and on a curved cell the face's own
    # shape functions must trace the parent's boundary (same physical point both ways).
    rng = np.random.default_rng(18)
    e = ELEMENTS[name]
    nodes, _ = _cell(name, rng, curved=0.3)
    for k, (face_type, ids) in enumerate(e.faces):
        f = ELEMENTS[face_type]
        assert_allclose(fmap.face_to_parent(name, k, f.reference_nodes), e.reference_nodes[list(ids)],
                        rtol=0, atol=1e-15)  # exact binary fractions up to round-off
        xi_f = _random_xi(face_type, rng, 10)
        xi_p = fmap.face_to_parent(name, k, xi_f)
        assert fe.inside_reference(name, xi_p).all()
        via_parent = fmap.map_to_physical(name, np.broadcast_to(nodes, (10, *nodes.shape)), xi_p)
        via_face = fmap.map_to_physical(face_type, np.broadcast_to(nodes[list(ids)],
                                                                 (10, len(ids), 3)), xi_f)
        assert_allclose(via_parent, via_face, rtol=0, atol=1e-13)  # round-off, size about 3
