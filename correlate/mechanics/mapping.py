"""The isoparametric map of each cell: physical points, inverse map, closest point on a face,
gradients and normals.

Inputs are a meshio cell type name, node coordinates of P cells ``(P, n_nodes, 3)`` and natural
coordinates or physical points ``(P, 3)``; outputs are float64 and vectorised over P (loops run
over Newton iterations, never over points). Conventions are those of
:mod:`correlate.mechanics.elements`.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import ModelError
from correlate.mechanics.elements import (
    ELEMENTS,
    ElementType,
    checked_array,
    clip_to_reference,
    corner_type,
    element_of,
    inside_reference,
    shape_derivatives,
    shape_functions,
)

__all__ = [
    "closest_point_on_face",
    "element_gradient",
    "face_normals",
    "face_to_parent",
    "jacobian",
    "map_to_physical",
    "natural_coordinates",
    "physical_gradients",
]

Array = NDArray[np.float64]


def _nodes(element: ElementType, nodes: Array) -> Array:
    return checked_array(nodes, (element.n_nodes, 3), "nodes")


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
    nodes = _nodes(element_of(cell_type), nodes)
    return np.einsum("pn,pnk->pk", shape_functions(cell_type, xi), nodes)


def jacobian(cell_type: str, nodes: Array, xi: Array) -> tuple[Array, Array]:
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
    element = element_of(cell_type, dim=3)
    nodes = _nodes(element, nodes)
    points = checked_array(points, (3,), "points")
    if xi0 is None:
        centre = element.reference_nodes[: element.n_corners].mean(axis=0)
        xi = np.tile(centre, (len(points), 1))
    else:
        xi = checked_array(xi0, (3,), "xi0").copy()
    converged = np.zeros(len(points), dtype=bool)
    active = np.arange(len(points))
    for _ in range(max_iter):
        if active.size == 0:
            break
        x = map_to_physical(cell_type, nodes[active], xi[active])
        _, jac = jacobian(cell_type, nodes[active], xi[active])
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
        _, jac = jacobian(cell_type, nodes[active], xi)
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


STRAIGHT_TOL = 1e-13  # mid-side nodes this close (share of the face size) to the linear map's:
# rounding only, so the answer does not change (nodes written with 9 digits stay quadratic)


def _straight(cell_type: str, nodes: Array) -> NDArray[np.bool_]:
    """Quadratic faces whose extra nodes sit where the linear face through the corners puts them.

    Their map is the linear face's map (the quadratic space contains it), so the cheaper linear
    face gives the same closest point, to rounding.
    """
    element, linear = ELEMENTS[cell_type], corner_type(cell_type)
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
    element = element_of(cell_type, dim=2)
    nodes = _nodes(element, nodes)
    points = checked_array(points, (3,), "points")
    n = len(points)
    if corner_type(cell_type) != cell_type and n:
        straight = _straight(cell_type, nodes)
        if straight.any():
            out = np.zeros((n, 2)), np.zeros((n, 3)), np.zeros(n)
            parts = [(straight, corner_type(cell_type), nodes[straight][:, :element.n_corners]),
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
    element = element_of(cell_type)
    nodes = _nodes(element, nodes)
    dn, jac = jacobian(cell_type, nodes, xi)
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
    nodes = _nodes(element_of(cell_type, dim=2), nodes)
    _, jac = jacobian(cell_type, nodes, xi)
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
    element = element_of(cell_type_3d, dim=3)
    if not 0 <= face_index < len(element.faces):
        msg = (f"face index {face_index} is out of range for '{cell_type_3d}', which has "
               f"{len(element.faces)} faces")
        raise ModelError(msg)
    face_type, ids = element.faces[face_index]
    return shape_functions(face_type, xi_face) @ element.reference_nodes[list(ids)]


def element_gradient(cell_type: str, nodes: Array, values: Array, xi: Array) -> Array:
    """Gradient of a nodal vector field inside P cells: H[p, i, j] = du_i/dx_j at xi.

    Parameters
    ----------
    nodes : ndarray, shape (P, n_nodes, 3)
    values : ndarray, shape (P, n_nodes, 3)
        The field at each cell's nodes (displacements for a strain).
    xi : ndarray, shape (P, dim)
    """
    dN, _ = physical_gradients(cell_type, nodes, xi)
    return np.einsum("cni,cnj->cij", values, dN)
