"""Strain from displacement checks: the nodal-averaged gradient and the rotation at gauges.

Stage: evaluation (displacement input only). The element's own gradient at the gauge is the
reading; the nodal-averaged gradient (each cell's gradient at its nodes, averaged over the cells
sharing a node, then interpolated) is a second estimate. Their difference is cheap evidence that the
mesh is too coarse at the gauge. Only cells around the gauges' cells are evaluated.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from correlate.mechanics import elements, mapping
from correlate.mechanics.tensors import rotation_magnitude, small_strain
from correlate.model_readings.evaluate import displacement_gradient
from correlate.model_readings.operator import GaugeOperator


def nodal_strain(op: GaugeOperator, displacement: NDArray[np.float64]) -> NDArray[np.float64]:
    """Nodal-averaged small-strain tensors (n_nodes, 3, 3); NaN away from the gauges."""
    mesh = op.mesh
    n_nodes = len(mesh.points)
    needed = np.zeros(n_nodes, dtype=bool)
    block, row = mesh.block_rows(np.unique(op.cell))
    for b, r in zip(block, row, strict=True):
        needed[mesh.blocks[b][1][r]] = True
    total = np.zeros((n_nodes, 3, 3))
    count = np.zeros(n_nodes)
    for ctype, conn in mesh.blocks:
        touch = needed[conn].any(axis=1)
        if not touch.any():
            continue
        c = conn[touch]
        ref = elements.ELEMENTS[ctype].reference_nodes
        for k in range(conn.shape[1]):
            xi = np.tile(ref[k], (len(c), 1))
            H = mapping.element_gradient(ctype, mesh.points[c], displacement[c], xi)
            np.add.at(total, c[:, k], small_strain(H))
            np.add.at(count, c[:, k], 1.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total / count[:, None, None]


def rotation_at_points(op: GaugeOperator, displacement: NDArray[np.float64]) -> NDArray[np.float64]:
    """Magnitude of the infinitesimal rotation |w| at each gauge centre. [rad]"""
    return rotation_magnitude(displacement_gradient(op, displacement))[op.centre_points]


__all__ = ["nodal_strain", "rotation_at_points"]
