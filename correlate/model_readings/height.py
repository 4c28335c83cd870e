"""Grid height: the model reading at the grid, a backing-and-adhesive height above the surface.

Stage: model readings. In: the gauge operator, one case's field and each gauge's ``height``
(gauge-map column, length unit). Out: the change of every operator row's axial and transverse
strain [m/m] from the surface to the grid.

Solids: ``E(h) = E(0) + h dE/dn`` along the outward normal, dE/dn from the shape-function
gradients of a nodal strain field at the sample point. Within an element of cell data, or of
strain from the displacement of linear elements, the strain is constant and that gradient is
zero: there the nodal-averaged strain field is differentiated instead (a warning says so; the
correction is then only as good as that average). Shells: linear through the thickness between
the two faces' arrays, read at t/2 + h from the mid-surface: ``E = E_face + h (E_face -
E_other) / t``.
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import CorrelateWarning, GaugeError
from correlate.mechanics import elements
from correlate.mechanics.gauge import indicated_strain
from correlate.model_readings.evaluate import strain_at_points
from correlate.model_readings.gradients import nodal_strain
from correlate.model_readings.operator import GaugeOperator
from correlate.readers.model import Field

Float = NDArray[np.float64]


def height_at_points(op: GaugeOperator, heights: Float) -> Float:
    """Each sample point's grid height (p,) from the heights per gauge (g,), 0 where blank."""
    h = np.nan_to_num(np.asarray(heights, dtype=float))
    rows = op.weights.tocoo()
    out = np.zeros(op.weights.shape[1])
    out[rows.col] = h[op.row_gauge[rows.row]]
    return out


def height_strain(op: GaugeOperator, field: Field, heights: Float, *,
                  thickness: float | None = None, warn: bool = True) -> Float:
    """The strain change (p, 3, 3) from the surface to the grid at every sample point.

    Parameters
    ----------
    op : GaugeOperator
    field : Field
        The case's whole field (not a partial read).
    heights : ndarray (g,)
        Grid height above the surface per gauge of ``op``; NaN or 0 for none. [length unit]
    thickness : float, optional
        Shell thickness ([model] thickness), needed on shell models. [length unit]
    warn : bool
        Warn when the nodal-averaged gradient stands in (once per call).

    Raises
    ------
    GaugeError
        A height on a plane model, or on a shell model without a thickness or with a single
        array for both faces.
    """
    h = height_at_points(op, heights)
    family = op.mesh.family
    if family == "plane":
        raise GaugeError("gauge map height applies to solid and shell models; a plane model has "
                         "no through-thickness gradient: leave height blank")
    if family == "shell":
        return h[:, None, None] * _shell_gradient(op, field, thickness)
    exact = field.kind == "strain" and field.location == "point"
    if exact:
        nodal = np.asarray(field.values, dtype=float)
        linear = _linear_under(op, h > 0)
    else:
        nodal = _averaged(op, field)
    if warn and (not exact or linear):
        why = ("cell data" if field.location == "cell" and field.kind == "strain" else
               "strain from displacement" if not exact else "linear elements")
        warnings.warn(f"case '{field.case}': the grid-height correction needs a nodal strain "
                      f"field of quadratic elements; with {why} the gradient within an element "
                      "is zero or first-order, so the nodal-averaged gradient is used",
                      CorrelateWarning, stacklevel=3)
    normal = np.cross(op.direction, op.transverse)
    flat = nodal.reshape(len(nodal), 9)
    grad = [g @ np.nan_to_num(flat) for g in op.gradients()]
    dn = sum(normal[:, j, None] * grad[j] for j in range(3))
    return h[:, None, None] * dn.reshape(-1, 3, 3)


def raised_rows(op: GaugeOperator, rows: dict[str, Float], delta: Float) -> dict[str, Float]:
    """A case's operator rows read at the grid height: ``delta`` (p, 3, 3) added at every point.

    Returns the rows with ``axial``, ``transverse`` and ``indicated`` at the grid and
    ``height_indicated``, the change of the indicated reading (the correction). [m/m]
    """
    add_axial = op.weights @ np.einsum("pi,pij,pj->p", op.direction, delta, op.direction)
    add_trans = op.weights @ np.einsum("pi,pij,pj->p", op.transverse, delta, op.transverse)
    out = dict(rows)
    out["axial"] = rows["axial"] + add_axial
    out["transverse"] = rows["transverse"] + add_trans
    out["indicated"] = indicated_strain(out["axial"], out["transverse"], op.kt[op.row_gauge],
                                        op.nu0[op.row_gauge])
    out["height_indicated"] = out["indicated"] - rows["indicated"]
    return out


def _linear_under(op: GaugeOperator, raised: NDArray[np.bool_]) -> bool:
    """Whether any raised sample point lies in a linear element."""
    block, _ = op.mesh.block_rows(op.cell[raised])
    kinds = {str(op.mesh.blocks[b][0]) for b in np.unique(block)}
    return any(elements.ELEMENTS[k].n_nodes == elements.ELEMENTS[k].n_corners for k in kinds)


def _averaged(op: GaugeOperator, field: Field) -> Float:
    """Nodal-averaged strain (n, 3, 3): of the displacement's element gradients, or of cells."""
    if field.kind == "displacement":
        return nodal_strain(op, np.asarray(field.values, dtype=float))
    cells = np.asarray(field.values, dtype=float)
    mesh = op.mesh
    total = np.zeros((len(mesh.points), 3, 3))
    count = np.zeros(len(mesh.points))
    offset = 0
    for _, conn in mesh.blocks:
        for k in range(conn.shape[1]):
            np.add.at(total, conn[:, k], cells[offset:offset + len(conn)])
            np.add.at(count, conn[:, k], 1.0)
        offset += len(conn)
    with np.errstate(invalid="ignore", divide="ignore"):
        return total / count[:, None, None]


def _shell_gradient(op: GaugeOperator, field: Field, thickness: float | None) -> Float:
    """(E_face - E_other) / t at every sample point of a shell with one array per face."""
    if not isinstance(field.data, dict) or set(field.data) != {"top", "bottom"}:
        raise GaugeError(f"case '{field.case}': gauge map height on a shell model needs the strain "
                         "of both faces (strain = { top = ..., bottom = ... }) to interpolate "
                         "through the thickness")
    if not isinstance(thickness, int | float) or not thickness > 0:
        raise GaugeError("gauge map height on a shell model needs [model] thickness (the shell's "
                         "thickness in the length unit)")
    faces = {face: strain_at_points(op, _one_face(field, face)) for face in ("top", "bottom")}
    on_bottom = (op.face == "bottom")[:, None, None]
    own = np.where(on_bottom, faces["bottom"], faces["top"])
    other = np.where(on_bottom, faces["top"], faces["bottom"])
    return (own - other) / float(thickness)


def _one_face(field: Field, face: str) -> Field:
    """The field with one face's array for both faces (evaluated at every sample point)."""
    data = field.data[face]  # type: ignore[index]
    return Field(case=field.case, kind=field.kind, location=field.location,
                 data={"top": data, "bottom": data}, source_kind=field.source_kind,
                 array=field.array, notes=field.notes, index=field.index,
                 convert=field.convert)


__all__ = ["height_at_points", "height_strain", "raised_rows"]
