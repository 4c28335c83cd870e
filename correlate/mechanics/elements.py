"""Finite-element geometry core: shape functions, inverse map and closest point on a face.

Stage helper used by ``locate`` and ``predict``. Inputs are a meshio cell type name, node
coordinates of P cells ``(P, n_nodes, 3)`` and natural coordinates or physical points ``(P, 3)``;
outputs are shape-function values, gradients, natural coordinates and closest points, all float64
and vectorised over P (loops run over Newton iterations, never over points). A value at a gauge
always comes from the element's own shape functions, never from the nearest node.

Conventions
-----------
Node order is VTK's (the order meshio uses). Natural coordinates: triangles and tetrahedra use the
area/volume coordinates of VTK (xi_i >= 0, sum <= 1); quadrilaterals and hexahedra use xi in
[-1, 1] (VTK uses [0, 1]); the wedge uses a triangle in (xi, eta) and zeta in [-1, 1].
Faces of 3D cells follow VTK's face order and are oriented so that the right-hand rule on the
face's node order gives the outward normal of a cell with a positive Jacobian.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from itertools import product

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import ModelError

__all__ = [
    "ELEMENTS",
    "ElementType",
    "clip_to_reference",
    "closest_point_on_face",
    "face_normals",
    "face_to_parent",
    "inside_reference",
    "map_to_physical",
    "natural_coordinates",
    "physical_gradients",
    "shape_derivatives",
    "shape_functions",
]

Array = NDArray[np.float64]


@dataclass(frozen=True, eq=False)
class ElementType:
    """Fixed description of one cell type.

    Attributes
    ----------
    name : str
        meshio cell type name, e.g. ``"tetra10"``.
    dim : int
        Dimension of the reference element (2 or 3).
    n_nodes, n_corners : int
        Number of nodes and of corner (vertex) nodes; corners come first.
    vtk_id : int
        VTK cell type id.
    reference_nodes : ndarray, shape (n_nodes, dim)
        Natural coordinates of the nodes, in VTK order (read-only).
    faces : tuple of (str, tuple of int)
        3D cells only: meshio type and local node ids of each face, in the face type's own node
        order, outward by the right-hand rule. Empty for 2D cells.
    quadratic : bool
        Whether the cell has mid-side nodes.
    """

    name: str
    dim: int
    n_nodes: int
    n_corners: int
    vtk_id: int
    reference_nodes: Array
    faces: tuple[tuple[str, tuple[int, ...]], ...]
    quadratic: bool


# Corner coordinates and edges (pairs of corners, VTK order of the mid-side nodes).
_TRI = ((0, 0), (1, 0), (0, 1))
_TRI_EDGES = ((0, 1), (1, 2), (2, 0))
_QUAD = ((-1, -1), (1, -1), (1, 1), (-1, 1))
_QUAD_EDGES = ((0, 1), (1, 2), (2, 3), (3, 0))
_TET = ((0, 0, 0), (1, 0, 0), (0, 1, 0), (0, 0, 1))
_TET_EDGES = ((0, 1), (1, 2), (2, 0), (0, 3), (1, 3), (2, 3))
_HEX = tuple((x, y, z) for z in (-1, 1) for x, y in _QUAD)
_HEX_EDGES = ((0, 1), (1, 2), (2, 3), (3, 0), (4, 5), (5, 6), (6, 7), (7, 4),
              (0, 4), (1, 5), (2, 6), (3, 7))
_WEDGE = tuple((x, y, z) for z in (-1, 1) for x, y in _TRI)

# Corner faces, VTK's order; the hexahedron's order (x-, x+, y-, y+, z-, z+) is also the order of
# the VTK_TRIQUADRATIC_HEXAHEDRON face-centre nodes 20..25.
_TET_FACES = ((0, 1, 3), (1, 2, 3), (2, 0, 3), (0, 2, 1))
_HEX_FACES = ((0, 4, 7, 3), (1, 2, 6, 5), (0, 1, 5, 4), (3, 7, 6, 2), (0, 3, 2, 1), (4, 5, 6, 7))
_WEDGE_FACES = ((0, 2, 1), (3, 4, 5), (0, 1, 4, 3), (1, 2, 5, 4), (2, 0, 3, 5))

# Polynomial space of each element as a rule on monomial exponents (a, b[, c]).
_SPACES: dict[str, Callable[[tuple[int, ...]], bool]] = {
    "P1": lambda e: sum(e) <= 1,
    "P2": lambda e: sum(e) <= 2,
    "Q1": lambda e: max(e) <= 1,
    "Q2": lambda e: max(e) <= 2,
    # serendipity: at most one variable squared, i.e. superlinear degree <= 2
    "S2": lambda e: max(e) <= 2 and sum(k == 2 for k in e) <= 1,
    "W1": lambda e: e[0] + e[1] <= 1 and e[2] <= 1,
}

# name: (vtk id, corners, edges with mid-side nodes, faces with centre nodes, body centre,
#        polynomial space, domain, corner faces)
_TABLE = {
    "triangle": (5, _TRI, (), (), False, "P1", "simplex", ()),
    "triangle6": (22, _TRI, _TRI_EDGES, (), False, "P2", "simplex", ()),
    "quad": (9, _QUAD, (), (), False, "Q1", "box", ()),
    "quad8": (23, _QUAD, _QUAD_EDGES, (), False, "S2", "box", ()),
    "quad9": (28, _QUAD, _QUAD_EDGES, (), True, "Q2", "box", ()),
    "tetra": (10, _TET, (), (), False, "P1", "simplex", _TET_FACES),
    "tetra10": (24, _TET, _TET_EDGES, (), False, "P2", "simplex", _TET_FACES),
    "hexahedron": (12, _HEX, (), (), False, "Q1", "box", _HEX_FACES),
    "hexahedron20": (25, _HEX, _HEX_EDGES, (), False, "S2", "box", _HEX_FACES),
    "hexahedron27": (29, _HEX, _HEX_EDGES, _HEX_FACES, True, "Q2", "box", _HEX_FACES),
    "wedge": (13, _WEDGE, (), (), False, "W1", "wedge", _WEDGE_FACES),
}
_FACE_TYPE = {(3, False): "triangle", (3, True): "triangle6", (4, False): "quad",
              (4, True): "quad8", (4, "centre"): "quad9"}


_Ints = tuple[tuple[int, ...], ...]


def _reference_nodes(corners: _Ints, edges: _Ints, faces: _Ints, centre: bool) -> Array:
    c = np.array(corners, dtype=float)
    groups = [*edges, *faces, *([range(len(c))] if centre else [])]
    return np.vstack([c, *[c[list(g)].mean(axis=0) for g in groups]]) if groups else c


def _face_table(ref: Array, corner_faces: _Ints, quadratic: bool, centres: bool
                ) -> tuple[tuple[str, tuple[int, ...]], ...]:
    """Add the mid-side (and face-centre) nodes to each corner face, found by their coordinates."""

    def node_at(point: Array) -> int:
        return int(np.argmin(np.abs(ref - point).sum(axis=1)))

    table = []
    for face in corner_faces:
        ids = list(face)
        if quadratic:
            edges = zip(face, face[1:] + face[:1], strict=True)
            ids += [node_at(ref[[a, b]].mean(axis=0)) for a, b in edges]
        if centres:
            ids.append(node_at(ref[list(face)].mean(axis=0)))
        key = (len(face), "centre" if centres else quadratic)
        table.append((_FACE_TYPE[key], tuple(ids)))
    return tuple(table)


def _build() -> tuple[dict[str, ElementType], dict[str, NDArray[np.int64]], dict[str, Array],
                      dict[str, str]]:
    elements, exponents, coefficients, domains = {}, {}, {}, {}
    for name, (vtk_id, corners, edges, faces, centre, space, domain, cfaces) in _TABLE.items():
        ref = _reference_nodes(corners, edges, faces, centre)
        ref.setflags(write=False)
        dim = ref.shape[1]
        exps = np.array([e for e in product(range(3), repeat=dim) if _SPACES[space](e)])
        vander = np.prod(ref[:, None, :] ** exps[None], axis=2)
        quadratic = bool(edges)
        elements[name] = ElementType(name, dim, len(ref), len(corners), vtk_id, ref,
                                     _face_table(ref, cfaces, quadratic, bool(faces)), quadratic)
        exponents[name], coefficients[name] = exps, np.linalg.inv(vander)
        domains[name] = domain
    return elements, exponents, coefficients, domains


ELEMENTS, _EXPONENTS, _COEFFICIENTS, _DOMAIN = _build()


def _element(cell_type: str, dim: int | None = None) -> ElementType:
    if cell_type not in ELEMENTS:
        msg = (f"cell type {cell_type!r} is not supported; expected one of {', '.join(ELEMENTS)}; "
               "convert the model to one of these cell types")
        raise ModelError(msg)
    element = ELEMENTS[cell_type]
    if dim is not None and element.dim != dim:
        msg = (f"cell type {cell_type!r} is {element.dim}D but this function needs a {dim}D cell "
               "type; pass a cell type of that dimension")
        raise ModelError(msg)
    return element


def _array(values: object, last: tuple[int, ...], name: str) -> Array:
    out = np.asarray(values, dtype=float)
    if out.ndim != len(last) + 1 or out.shape[1:] != last:
        msg = f"array '{name}' has shape {out.shape} but (P, {', '.join(map(str, last))}) is needed"
        raise ModelError(msg)
    return out


def _powers(xi: Array, degree: int) -> Array:
    """xi ** k for k = 0..degree, as (P, dim, degree + 1), by repeated products."""
    pw = np.ones(xi.shape + (degree + 1,))
    for k in range(1, degree + 1):
        pw[:, :, k] = pw[:, :, k - 1] * xi
    return pw


def _monomials(cell_type: str, xi: Array, axis: int | None = None) -> Array:
    """Monomials of the element's space at xi (P, dim) -> (P, m), or their derivative d/dxi_axis.

    Built from a table of integer powers (no float ``**`` and no 3D temporary): this sits in the
    Newton loops of every projection.
    """
    exps = _EXPONENTS[cell_type]
    pw = _powers(xi, int(exps.max()))
    if axis is not None:
        factor = exps[:, axis]
        exps = exps.copy()
        exps[:, axis] = np.maximum(exps[:, axis] - 1, 0)
    out = pw[:, 0, exps[:, 0]]
    for d in range(1, exps.shape[1]):
        out = out * pw[:, d, exps[:, d]]
    return out if axis is None else out * factor


def shape_functions(cell_type: str, xi: Array) -> Array:
    """Evaluate the shape functions at natural coordinates.

    Parameters
    ----------
    cell_type : str
        meshio cell type name (a key of :data:`ELEMENTS`).
    xi : ndarray, shape (P, dim)
        Natural coordinates.

    Returns
    -------
    ndarray, shape (P, n_nodes)
        Shape-function values, columns in VTK node order.

    Notes
    -----
    Each element's shape functions are the nodal basis of its polynomial space (linear,
    quadratic, bilinear, biquadratic, 8/20-node serendipity, wedge = triangle x line):
    ``N(xi) = m(xi) V^-1``, where ``m`` lists the monomials spanning the space and
    ``V[i, j] = m_j(node_i)``. This is the same basis as the textbook closed forms (the nodal
    basis of a unisolvent space is unique).

    Examples
    --------
    >>> shape_functions("quad", np.array([[0.0, 0.0]]))
    array([[0.25, 0.25, 0.25, 0.25]])
    """
    element = _element(cell_type)
    xi = _array(xi, (element.dim,), "xi")
    return _monomials(cell_type, xi) @ _COEFFICIENTS[cell_type]


def shape_derivatives(cell_type: str, xi: Array) -> Array:
    """Evaluate the derivatives of the shape functions with respect to natural coordinates.

    Parameters
    ----------
    cell_type : str
        meshio cell type name.
    xi : ndarray, shape (P, dim)
        Natural coordinates.

    Returns
    -------
    ndarray, shape (P, n_nodes, dim)
        ``dN_i / dxi_j``.
    """
    element = _element(cell_type)
    xi = _array(xi, (element.dim,), "xi")
    coeffs = _COEFFICIENTS[cell_type]
    return np.stack([_monomials(cell_type, xi, k) @ coeffs for k in range(element.dim)], axis=-1)


def inside_reference(cell_type: str, xi: Array, tol: float = 1e-9) -> NDArray[np.bool_]:
    """Tell which natural coordinates lie in the reference element (within ``tol``).

    Parameters
    ----------
    cell_type : str
        meshio cell type name.
    xi : ndarray, shape (P, dim)
        Natural coordinates.
    tol : float
        Allowed excess in natural coordinates.

    Returns
    -------
    ndarray of bool, shape (P,)
    """
    element = _element(cell_type)
    xi = _array(xi, (element.dim,), "xi")
    domain = _DOMAIN[cell_type]
    if domain == "box":
        return np.all(np.abs(xi) <= 1 + tol, axis=1)
    tri = xi if domain == "simplex" else xi[:, :2]
    inside = np.all(tri >= -tol, axis=1) & (tri.sum(axis=1) <= 1 + tol)
    return inside if domain == "simplex" else inside & (np.abs(xi[:, 2]) <= 1 + tol)


def _project_simplex(x: Array) -> Array:
    """Euclidean projection of rows of x onto {y >= 0, sum(y) <= 1}."""
    out = np.maximum(x, 0.0)
    over = out.sum(axis=1) > 1
    if over.any():
        # On the face sum(y) = 1: y = max(x - theta, 0) with the sort-based threshold theta
        # (Held, Wolfe and Crowder 1974; Duchi et al. 2008).
        z = x[over]
        u = -np.sort(-z, axis=1)
        css = np.cumsum(u, axis=1) - 1
        k = np.arange(1, z.shape[1] + 1)
        rho = z.shape[1] - 1 - np.argmax((u - css / k > 0)[:, ::-1], axis=1)
        theta = css[np.arange(len(z)), rho] / (rho + 1)
        out[over] = np.maximum(z - theta[:, None], 0.0)
    return out


def clip_to_reference(cell_type: str, xi: Array) -> Array:
    """Return the nearest point of the reference element (Euclidean in natural coordinates).

    Parameters
    ----------
    cell_type : str
        meshio cell type name.
    xi : ndarray, shape (P, dim)
        Natural coordinates.

    Returns
    -------
    ndarray, shape (P, dim)
        Exact nearest point for the simplex, box and wedge (triangle x interval) domains.
    """
    element = _element(cell_type)
    xi = _array(xi, (element.dim,), "xi")
    domain = _DOMAIN[cell_type]
    if domain == "box":
        return np.clip(xi, -1.0, 1.0)
    if domain == "simplex":
        return _project_simplex(xi)
    return np.column_stack([_project_simplex(xi[:, :2]), np.clip(xi[:, 2], -1.0, 1.0)])


def _nodes(element: ElementType, nodes: Array) -> Array:
    return _array(nodes, (element.n_nodes, 3), "nodes")


def map_to_physical(cell_type: str, nodes: Array, xi: Array) -> Array:
    """Map natural coordinates to physical points, x = sum_i N_i(xi) x_i.

    Parameters
    ----------
    cell_type : str
        meshio cell type name.
    nodes : ndarray, shape (P, n_nodes, 3)
        Node coordinates of each cell.
    xi : ndarray, shape (P, dim)
        Natural coordinates.

    Returns
    -------
    ndarray, shape (P, 3)
    """
    nodes = _nodes(_element(cell_type), nodes)
    return np.einsum("pn,pnk->pk", shape_functions(cell_type, xi), nodes)


def _jacobian(cell_type: str, nodes: Array, xi: Array) -> tuple[Array, Array]:
    """Return dN/dxi (P, n, dim) and J = dx/dxi (P, 3, dim)."""
    dn = shape_derivatives(cell_type, xi)
    return dn, np.swapaxes(nodes, 1, 2) @ dn  # batched matmul: 3x faster than einsum here


def _solve(matrix: Array, rhs: Array) -> tuple[Array, NDArray[np.bool_]]:
    """Solve batched small systems; rows with a singular matrix get a zero step and False."""
    if matrix.shape[1] == 2:  # Cramer's rule: the Gauss-Newton steps on faces, most of the calls
        (a, b), (c, d) = matrix[:, 0].T, matrix[:, 1].T
        det = a * d - b * c
        ok = np.abs(det) > 0
        with np.errstate(divide="ignore", invalid="ignore"):
            step = np.stack([d * rhs[:, 0] - b * rhs[:, 1], a * rhs[:, 1] - c * rhs[:, 0]],
                            axis=1) / det[:, None]
        return np.where(ok[:, None], step, 0.0), ok
    ok = np.abs(np.linalg.det(matrix)) > 0
    safe = np.where(ok[:, None, None], matrix, np.eye(matrix.shape[1]))
    step = np.linalg.solve(safe, rhs[..., None])[..., 0]
    return np.where(ok[:, None], step, 0.0), ok


def natural_coordinates(cell_type: str, nodes: Array, points: Array, xi0: Array | None = None,
                        tol: float = 1e-12, max_iter: int = 25
                        ) -> tuple[Array, NDArray[np.bool_]]:
    """Find the natural coordinates of physical points in 3D cells by Newton's method.

    Parameters
    ----------
    cell_type : str
        meshio name of a 3D cell type.
    nodes : ndarray, shape (P, n_nodes, 3)
        Node coordinates of the cell that holds each point.
    points : ndarray, shape (P, 3)
        Physical points.
    xi0 : ndarray, shape (P, 3), optional
        Starting natural coordinates; the element centre by default.
    tol : float
        Stop a point when the Newton step is shorter than this (natural coordinates).
    max_iter : int
        Most Newton steps per point.

    Returns
    -------
    xi : ndarray, shape (P, 3)
        Natural coordinates, not clipped: points slightly outside the cell get coordinates
        slightly outside the reference element, and the caller decides (:func:`inside_reference`).
    converged : ndarray of bool, shape (P,)
        Whether the step fell below ``tol`` within ``max_iter`` steps.

    Notes
    -----
    Undamped Newton on r(xi) = x(xi) - p: ``xi <- xi - J^-1 r`` with J = dx/dxi. The map is
    polynomial and smooth, so convergence is quadratic: on curved quadratic cells (tet10,
    hex20 with displaced mid-side nodes) it reaches 1e-14 in 3-6 steps. VTK's own
    ``EvaluatePosition`` stops near 1e-5 (tet10) or 1e-4 (hex20), too coarse for strain
    gradients, hence this refinement.
    """
    element = _element(cell_type, dim=3)
    nodes = _nodes(element, nodes)
    points = _array(points, (3,), "points")
    if xi0 is None:
        centre = element.reference_nodes[: element.n_corners].mean(axis=0)
        xi = np.tile(centre, (len(points), 1))
    else:
        xi = _array(xi0, (3,), "xi0").copy()
    converged = np.zeros(len(points), dtype=bool)
    active = np.arange(len(points))
    for _ in range(max_iter):
        if active.size == 0:
            break
        x = map_to_physical(cell_type, nodes[active], xi[active])
        _, jac = _jacobian(cell_type, nodes[active], xi[active])
        step, ok = _solve(jac, points[active] - x)
        xi[active] += step
        size = np.linalg.norm(step, axis=1)
        done = ok & (size < tol)
        converged[active[done]] = True
        active = active[ok & ~done & np.isfinite(size)]
    return xi, converged


def _gauss_newton(cell_type: str, nodes: Array, points: Array, origin: Array, span: Array,
                  clip: Callable[[Array], Array], t: Array, tol: float, max_iter: int) -> Array:
    """Minimise |x(origin + t span) - p|^2 over t by Gauss-Newton, projecting t by ``clip``.

    On a linear triangle the map is affine and an unclipped step lands on the minimum exactly,
    so those points stop after one step.
    """
    affine = cell_type == "triangle"
    active = np.arange(len(points))
    for _ in range(max_iter):
        if active.size == 0:
            break
        xi = origin + t[active] @ span
        residual = map_to_physical(cell_type, nodes[active], xi) - points[active]
        _, jac = _jacobian(cell_type, nodes[active], xi)
        jt = jac @ span.T
        step, ok = _solve(np.swapaxes(jt, 1, 2) @ jt, -(residual[:, None, :] @ jt)[:, 0])
        free = t[active] + step
        new = clip(free)
        size = np.linalg.norm(new - t[active], axis=1)
        t[active] = new
        done = size < tol
        if affine:
            done |= np.all(new == free, axis=1)
        active = active[ok & ~done]
    return origin + t @ span


_LINEAR_FACE = {"triangle6": "triangle", "quad8": "quad", "quad9": "quad"}
STRAIGHT_TOL = 1e-13  # mid-side nodes this close (share of the face size) to the linear map's:
# rounding only, so the answer does not change (nodes written with 9 digits stay quadratic)


def _straight(cell_type: str, nodes: Array) -> NDArray[np.bool_]:
    """Quadratic faces whose extra nodes sit where the linear face through the corners puts them.

    Their map is the linear face's map (the quadratic space contains it), so the cheaper linear
    face gives the same closest point, to rounding.
    """
    element, linear = ELEMENTS[cell_type], _LINEAR_FACE[cell_type]
    nc = element.n_corners
    N = shape_functions(linear, element.reference_nodes[nc:])          # (extra, corners)
    corners = nodes[:, :nc]
    off = np.abs(nodes[:, nc:] - N @ corners).max(axis=(1, 2))
    size = np.abs(corners - corners[:, :1]).max(axis=(1, 2))
    return off <= STRAIGHT_TOL * size


def closest_point_on_face(cell_type: str, nodes: Array, points: Array, tol: float = 1e-12,
                          max_iter: int = 30) -> tuple[Array, Array, Array]:
    """Find the closest point on a (possibly curved) 2D cell in 3D space.

    Parameters
    ----------
    cell_type : str
        meshio name of a 2D cell type (shell element or face of a solid).
    nodes : ndarray, shape (P, n_nodes, 3)
        Node coordinates of each face.
    points : ndarray, shape (P, 3)
        Physical points.
    tol : float
        Stop when the step is shorter than this (natural coordinates).
    max_iter : int
        Most Gauss-Newton steps per candidate.

    Returns
    -------
    xi : ndarray, shape (P, 2)
        Natural coordinates of the closest point, inside the reference element.
    x : ndarray, shape (P, 3)
        Closest point on the curved face.
    distance : ndarray, shape (P,)
        |x - p|.

    Notes
    -----
    Minimises |x(xi) - p|^2 over the reference domain by projected Gauss-Newton: each step
    solves ``(J^T J) d = -J^T r`` and clips ``xi + d`` to the reference element. Clipping a
    two-parameter step is not an exact constrained minimiser when the metric J^T J is not
    diagonal, so the same iteration also runs along each reference edge (one parameter in
    [0, 1], where clipping is exact, corners included); the closest candidate wins. A point
    whose foot lies outside the face thus lands on the nearest edge or corner.
    """
    element = _element(cell_type, dim=2)
    nodes = _nodes(element, nodes)
    points = _array(points, (3,), "points")
    n = len(points)
    if cell_type in _LINEAR_FACE and n:
        straight = _straight(cell_type, nodes)
        if straight.any():
            out = np.zeros((n, 2)), np.zeros((n, 3)), np.zeros(n)
            parts = [(straight, _LINEAR_FACE[cell_type], nodes[straight][:, :element.n_corners]),
                     (~straight, cell_type, nodes[~straight])]
            for sel, ctype, sub in parts:
                if sel.any():
                    got = closest_point_on_face(ctype, sub, points[sel], tol, max_iter)
                    for o, g in zip(out, got, strict=True):
                        o[sel] = g
            return out
    corners = element.reference_nodes[: element.n_corners]
    centre = corners.mean(axis=0)
    best = _gauss_newton(cell_type, nodes, points, np.zeros(2), np.eye(2),
                         lambda t: clip_to_reference(cell_type, t), np.tile(centre, (n, 1)),
                         tol, max_iter)
    best_x = map_to_physical(cell_type, nodes, best)
    best_d = np.linalg.norm(best_x - points, axis=1)
    # an interior stationary point needs no edge search; a clipped one does
    edge = np.flatnonzero(~inside_reference(cell_type, best, tol=-1e-9))
    if edge.size == 0:
        return best, best_x, best_d
    sub_nodes, sub_points = nodes[edge], points[edge]
    for a, b in zip(corners, np.roll(corners, -1, axis=0), strict=True):
        xi = _gauss_newton(cell_type, sub_nodes, sub_points, a, (b - a)[None, :],
                           lambda t: np.clip(t, 0.0, 1.0), np.full((edge.size, 1), 0.5), tol,
                           max_iter)
        x = map_to_physical(cell_type, sub_nodes, xi)
        d = np.linalg.norm(x - sub_points, axis=1)
        closer = d < best_d[edge]
        idx = edge[closer]
        best[idx], best_x[idx], best_d[idx] = xi[closer], x[closer], d[closer]
    return best, best_x, best_d


def physical_gradients(cell_type: str, nodes: Array, xi: Array) -> tuple[Array, Array]:
    """Return shape-function gradients in physical space and the Jacobian determinant.

    Parameters
    ----------
    cell_type : str
        meshio cell type name.
    nodes : ndarray, shape (P, n_nodes, 3)
        Node coordinates.
    xi : ndarray, shape (P, dim)
        Natural coordinates.

    Returns
    -------
    dN_dx : ndarray, shape (P, n_nodes, 3)
        3D cells: ``dN/dx = dN/dxi J^-1`` with ``J = dx/dxi``. 2D cells in 3D space: the
        tangential (surface) gradient ``dN/dxi J^+`` with the pseudo-inverse
        ``J^+ = (J^T J)^-1 J^T`` of the 3x2 Jacobian; its normal component is zero.
    detJ : ndarray, shape (P,)
        3D: det J (negative for an inverted cell). 2D: |x_xi x x_eta| (area scale).

    Raises
    ------
    ModelError
        If a cell has a singular Jacobian at xi (degenerate or collapsed element).
    """
    element = _element(cell_type)
    nodes = _nodes(element, nodes)
    dn, jac = _jacobian(cell_type, nodes, xi)
    if element.dim == 3:
        det = np.linalg.det(jac)
        metric = jac
    else:
        det = np.linalg.norm(np.cross(jac[:, :, 0], jac[:, :, 1]), axis=1)
        metric = np.swapaxes(jac, 1, 2) @ jac
    bad = np.flatnonzero(~(np.abs(det) > 0))
    if bad.size:
        msg = (f"{bad.size} '{cell_type}' cell(s) have a singular Jacobian (first: row {bad[0]} "
               "of 'nodes'); check the mesh for collapsed or duplicate nodes")
        raise ModelError(msg)
    inverse = np.linalg.inv(jac) if element.dim == 3 else np.linalg.solve(
        metric, np.swapaxes(jac, 1, 2))
    return dn @ inverse, det


def face_normals(cell_type: str, nodes: Array, xi: Array) -> Array:
    """Return the unit normal of 2D cells, n = x_xi x x_eta / |x_xi x x_eta|.

    Parameters
    ----------
    cell_type : str
        meshio name of a 2D cell type.
    nodes : ndarray, shape (P, n_nodes, 3)
        Node coordinates.
    xi : ndarray, shape (P, 2)
        Natural coordinates.

    Returns
    -------
    ndarray, shape (P, 3)
        Right-hand rule on the node order (outward for the faces in :data:`ELEMENTS`).
    """
    nodes = _nodes(_element(cell_type, dim=2), nodes)
    _, jac = _jacobian(cell_type, nodes, xi)
    normal = np.cross(jac[:, :, 0], jac[:, :, 1])
    return normal / np.linalg.norm(normal, axis=1, keepdims=True)


def face_to_parent(cell_type_3d: str, face_index: int, xi_face: Array) -> Array:
    """Map natural coordinates on face ``face_index`` of a 3D cell to the parent's.

    Parameters
    ----------
    cell_type_3d : str
        meshio name of a 3D cell type.
    face_index : int
        Index into ``ELEMENTS[cell_type_3d].faces``.
    xi_face : ndarray, shape (P, 2)
        Natural coordinates on the face.

    Returns
    -------
    ndarray, shape (P, 3)
        Parent natural coordinates: the face's shape functions interpolating the parent
        reference coordinates of the face nodes (exact: every reference face is affine).
    """
    element = _element(cell_type_3d, dim=3)
    if not 0 <= face_index < len(element.faces):
        msg = (f"face index {face_index} is out of range for '{cell_type_3d}', which has "
               f"{len(element.faces)} faces")
        raise ModelError(msg)
    face_type, ids = element.faces[face_index]
    return shape_functions(face_type, xi_face) @ element.reference_nodes[list(ids)]
