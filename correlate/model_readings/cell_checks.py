"""Elements a reading must not be taken on: inverted or collapsed cells, and unmerged nodes.

Stage: evaluation. In: a mesh, the cells under sample points and the points' natural
coordinates. Out: per sample point, what is wrong with its cell (empty when nothing), and the
gauges' refusal built on it. A cell is collapsed when |det J| at the point or at the cell's
centre is below :data:`DEGENERATE` times its size to the power of its dimension, and inverted
(solids only) when det J is negative there: a mesh the solver should not have accepted, whose
results at that cell are not evidence.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import ModelError
from correlate.mechanics import elements, mapping
from correlate.readers.model import Mesh

DEGENERATE = 1e-9  # |det J| below this share of the cell's size (h^dim) is a collapsed cell
INVERTED = "inverted (negative Jacobian)"
COLLAPSED = "degenerate (collapsed: zero Jacobian)"
BLOCK = 100_000    # sample points checked at a time (bounds the nodes array of a large set)


def _jacobian_det(ctype: str, nodes: NDArray, xi: NDArray) -> NDArray:
    """det J (3D cells) or the area scale |x_xi x x_eta| (2D cells) at xi."""
    _, jac = mapping.jacobian(ctype, nodes, xi)
    if jac.shape[2] == 3:
        return np.linalg.det(jac)
    return np.linalg.norm(np.cross(jac[:, :, 0], jac[:, :, 1]), axis=1)


def bad_cells(mesh: Mesh, cells: NDArray[np.int64], xi: NDArray[np.float64]) -> NDArray[np.str_]:
    """What is wrong with the cell under each sample point: :data:`INVERTED`,
    :data:`COLLAPSED` or "" (det J at the point and at the cell centre; see the module)."""
    out = np.full(len(cells), "", dtype=object)
    block, row = mesh.block_rows(cells)
    for b, (ctype, conn_b) in enumerate(mesh.blocks):
        el = elements.ELEMENTS[str(ctype)]
        centre_xi = el.reference_nodes.mean(axis=0)
        where = np.flatnonzero(block == b)
        for start in range(0, len(where), BLOCK):
            sel = where[start:start + BLOCK]
            nodes = mesh.points[conn_b[row[sel]]]
            scale = np.linalg.norm(np.ptp(nodes, axis=1), axis=1) ** el.dim * DEGENERATE
            det = _jacobian_det(str(ctype), nodes, xi[sel])
            uniq, first, back = np.unique(row[sel], return_index=True, return_inverse=True)
            det_c = _jacobian_det(str(ctype), nodes[first],
                                  np.tile(centre_xi, (len(uniq), 1)))[back.ravel()]
            collapsed = (np.abs(det) <= scale) | (np.abs(det_c) <= scale)
            inverted = (el.dim == 3) & ((det < 0) | (det_c < 0)) & ~collapsed
            out[sel[collapsed]] = COLLAPSED
            out[sel[inverted]] = INVERTED
    return out.astype(str)


def check_cells(mesh: Mesh, cells: NDArray[np.int64], xi: NDArray[np.float64],
                gauges: list[str]) -> None:
    """Refuse inverted or collapsed elements under a gauge, one line per gauge and element."""
    what = bad_cells(mesh, cells, xi)
    problems: dict[tuple[str, int], str] = {}
    for i in np.flatnonzero(what != ""):
        problems.setdefault((gauges[i], int(cells[i])), str(what[i]))
    if problems:
        raise ModelError(*[f"gauge '{g}': element {c} under it is {w}; fix the mesh there "
                           "before correlating" for (g, c), w in problems.items()])


__all__ = ["COLLAPSED", "DEGENERATE", "INVERTED", "bad_cells", "check_cells"]


def coincident_nodes(points: NDArray, centre: NDArray, radius: float, scale: float) -> int:
    """How many nodes within ``radius`` of ``centre`` sit where another node is (within 1e-9 of
    the model size): elements exported without merging their nodes, or a tied interface. Such
    elements share no faces, so each one's faces are outer faces."""
    from scipy.spatial import cKDTree
    near = points[np.linalg.norm(points - centre, axis=1) <= max(radius, 1e-6 * scale)]
    if len(near) < 2:
        return 0
    pairs = cKDTree(near).query_pairs(1e-9 * scale, output_type="ndarray")
    return len(np.unique(pairs))
