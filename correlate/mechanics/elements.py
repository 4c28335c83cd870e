"""Reference elements: node layouts, faces and shape functions of every supported cell type.

The isoparametric map built on them (inverse map, closest point on a face, gradients, normals) is
in :mod:`correlate.mechanics.mapping`. Inputs are a meshio cell type name, node
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
    "checked_array",
    "clip_to_reference",
    "corner_type",
    "element_of",
    "inside_reference",
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
# the corner-only cell of each quadratic type (same corners, linear map)
_CORNER_TYPE = {"triangle6": "triangle", "quad8": "quad", "quad9": "quad", "tetra10": "tetra",
                "hexahedron20": "hexahedron", "hexahedron27": "hexahedron"}
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


def corner_type(cell_type: str) -> str:
    """The linear cell type with the same corners (``tetra10`` -> ``tetra``; linear types map to
    themselves)."""
    return _CORNER_TYPE.get(cell_type, cell_type)


def element_of(cell_type: str, dim: int | None = None) -> ElementType:
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


def checked_array(values: object, last: tuple[int, ...], name: str) -> Array:
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
    element = element_of(cell_type)
    xi = checked_array(xi, (element.dim,), "xi")
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
    element = element_of(cell_type)
    xi = checked_array(xi, (element.dim,), "xi")
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
    element = element_of(cell_type)
    xi = checked_array(xi, (element.dim,), "xi")
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
    element = element_of(cell_type)
    xi = checked_array(xi, (element.dim,), "xi")
    domain = _DOMAIN[cell_type]
    if domain == "box":
        return np.clip(xi, -1.0, 1.0)
    if domain == "simplex":
        return _project_simplex(xi)
    return np.column_stack([_project_simplex(xi[:, :2]), np.clip(xi[:, 2], -1.0, 1.0)])
