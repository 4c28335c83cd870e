"""Evaluating a gauge operator on a field: strain at the sample points, then every row's readings.

Stage: model readings. In: a :class:`~correlate.model_readings.operator.GaugeOperator` and one
load case's :class:`~correlate.readers.model.Field`. Out: the axial, transverse and indicated strain
of every operator row [m/m], and the full strain tensor at each gauge centre. Strain from a
displacement field is the element's own gradient at the point (:func:`small_strain`); the
indicated reading applies the transverse-sensitivity relation of
:mod:`correlate.mechanics.gauge`.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import ModelError
from correlate.mechanics.gauge import indicated_strain
from correlate.mechanics.tensors import small_strain
from correlate.model_readings.operator import GaugeOperator
from correlate.readers.model import Field


def displacement_gradient(op: GaugeOperator, displacement: NDArray[np.float64],
                          index: NDArray[np.int64] | None = None) -> NDArray[np.float64]:
    """H[p, i, j] = du_i/dx_j at the operator's sample points, from nodal displacements.

    ``index``: the nodes ``displacement`` holds, when it is a partial read (sorted).
    """
    G = op.gradients()
    if index is not None:
        G = [g[:, index] for g in G]
    return np.stack([g @ displacement for g in G], axis=2)


def strain_at_points(op: GaugeOperator, field: Field) -> NDArray[np.float64]:
    """Strain tensors (p, 3, 3) at the operator's sample points for one field.

    Only the nodes or cells the operator touches are converted to tensors (the conversion is
    row by row, and interpolation commutes with it).
    """
    index = field.index

    def one(face: str) -> NDArray:
        if field.kind == "displacement":
            values = field.values[face] if isinstance(field.values, dict) else field.values
            return small_strain(displacement_gradient(op, values, index))
        if field.location == "cell":
            return field.at(op.cell if index is None else _positions(index, op.cell, field), face)
        touched = op.touched()
        ids = touched.point if index is None else _positions(index, touched.point, field)
        return (touched.compact @ field.at(ids, face).reshape(len(ids), 9)).reshape(-1, 3, 3)

    if isinstance(field.data, dict):
        out = np.zeros((len(op.cell), 3, 3))
        for face in field.data:
            sel = op.face == face
            if face == "top":
                sel = sel | (op.face == "")
            out[sel] = one(face)[sel]
        return out
    return one("")


def _positions(index: NDArray[np.int64], wanted: NDArray[np.int64], field: Field) -> NDArray:
    """Positions of the wanted nodes/cells in a partial read holding only ``index``."""
    pos = np.minimum(np.searchsorted(index, wanted), len(index) - 1)
    if len(index) == 0 or (index[pos] != wanted).any():
        raise ModelError(f"case '{field.case}': the rows read from '{field.array}' do not hold "
                         "every node the gauges need (internal error; please report it)")
    return pos


def check_finite(op: GaugeOperator, field: Field, strain: NDArray) -> None:
    """Refuse NaN or infinite values at any gauge."""
    bad = ~np.isfinite(strain).all(axis=(1, 2))
    if bad.any():
        rows = np.unique(op.weights[:, np.flatnonzero(bad)].nonzero()[0])
        gauges = [op.gauges[g] for g in np.unique(op.row_gauge[rows])]   # in the map's order
        shown = ", ".join(gauges[:8]) + (f" and {len(gauges) - 8} more" if len(gauges) > 8 else "")
        raise ModelError(f"case '{field.case}': array '{field.array}' has NaN or infinite values at "
                         f"{len(gauges)} gauge(s): {shown}; check the result file there")


def evaluate_rows(op: GaugeOperator, field: Field, *, strict: bool = True
                  ) -> dict[str, NDArray[np.float64]]:
    """Axial, transverse and indicated strain [m/m] of every operator row for one field.

    ``strict``: refuse NaN or infinite values under any gauge (:func:`check_finite`); not strict
    (a search's moved grids, which may reach a region the result leaves undefined), the rows
    over such values read NaN.
    """
    eps = strain_at_points(op, field)
    if strict:
        check_finite(op, field, eps)
    ea = np.einsum("pi,pij,pj->p", op.direction, eps, op.direction)
    et = np.einsum("pi,pij,pj->p", op.transverse, eps, op.transverse)
    axial = op.weights @ ea
    trans = op.weights @ et
    bad = op.invalid[op.row_gauge] | ~np.isfinite(axial) | ~np.isfinite(trans)
    axial, trans = np.where(bad, np.nan, axial), np.where(bad, np.nan, trans)
    return {"axial": axial, "transverse": trans,
            "indicated": indicated_strain(axial, trans, op.kt[op.row_gauge],
                                          op.nu0[op.row_gauge])}


def centre_strain(op: GaugeOperator, field: Field) -> NDArray[np.float64]:
    """Full strain tensor (g, 3, 3) at each gauge centre (the point rows)."""
    return strain_at_points(op, field)[op.centre_points]


__all__ = ["centre_strain", "check_finite", "displacement_gradient", "evaluate_rows",
           "strain_at_points"]
