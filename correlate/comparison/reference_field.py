"""The model's strain field at the reference step, for the report's surface and ``surface.vtp``.

Stage: comparison. In: a :class:`~correlate.comparison.correlation.Correlation`. Out: strain
tensors (m/m) at the nodes or cells and their principal and component values in microstrain.
Each case's field times the reference step's factor, summed (readings and fields are linear in the
loads); a series case contributes the FE states the run pairs with the reference row
(:mod:`correlate.comparison.pairing`). Strain from displacement is the element's own gradient at
each cell's centre, constant per element.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from correlate.comparison.correlation import Correlation
from correlate.comparison.pairing import pair_series
from correlate.core.units import MICROSTRAIN
from correlate.mechanics import elements, mapping
from correlate.mechanics.tensors import small_strain
from correlate.model_readings.model import Model
from correlate.readers.model import Mesh
from correlate.readers.study import Case


@dataclass(frozen=True)
class ReferenceField:
    """Strain at the reference step: ``location`` "point" or "cell", ``tensors`` (n, 3, 3) in m/m
    (None when no field can be had), and a note on how it was made."""

    location: str
    tensors: NDArray[np.float64] | None
    note: str


def _cell_mean(mesh: Mesh, values: NDArray) -> NDArray:
    """Mean of nodal values over each cell's nodes (global cell order)."""
    return np.concatenate([values[conn].mean(axis=1) for _, conn in mesh.blocks])


def cell_strain_from_displacement(mesh: Mesh, u: NDArray) -> NDArray:
    """Small-strain tensor at each cell's centre from nodal displacements (m/m)."""
    parts = []
    for ctype, conn in mesh.blocks:
        el = elements.ELEMENTS[ctype]
        xi = np.tile(el.reference_nodes[: el.n_corners].mean(axis=0), (len(conn), 1))
        parts.append(small_strain(mapping.element_gradient(ctype, mesh.points[conn], u[conn], xi)))
    return np.concatenate(parts)


def _case_strain(model: Model, case: Case, fe_index: int | None, notes: list[str]
                 ) -> tuple[str, NDArray] | None:
    """One FE state of a case as ("point" | "cell", strain tensors in m/m); None if impossible."""
    fld = model.case_field(case, fe_index)
    values = fld.values
    if isinstance(values, dict):
        face = "top" if "top" in values else next(iter(values))
        values = values[face]
        notes.append(f"shell surface shows the {face} face")
    if fld.kind != "displacement":
        return fld.location, np.asarray(values)
    try:
        strain = cell_strain_from_displacement(model.operator.mesh, np.asarray(values))
    except (ValueError, KeyError, np.linalg.LinAlgError):
        notes.append(f"case '{case.name}' gives displacement and its strain could not be "
                     "derived on these cells: the surface is not coloured")
        return None
    notes.append("strain from displacement, constant per element")
    return "cell", strain


def reference_strain(corr: Correlation) -> ReferenceField:
    """Predicted strain tensors at the reference step (see the module docstring)."""
    model, study = corr.model, corr.study
    mesh = model.operator.mesh
    ref = corr.reference
    parts: list[tuple[str, NDArray]] = []
    notes: list[str] = []
    for case, f in zip(study.cases, corr.steps.factors[ref], strict=True):
        if case.is_series:
            weights = pair_series(study, model, case, corr.steps).weights(ref)
            if weights is None:
                notes.append(f"series case '{case.name}' is not modelled at the reference load: "
                             "the surface is not coloured")
                return ReferenceField("point", None, "; ".join(notes))
        else:
            weights = {case.fe_index: float(f)}
        for fe_index, w in weights.items():
            if w == 0:
                continue
            got = _case_strain(model, case, fe_index, notes)
            if got is None:
                return ReferenceField("cell", None, "; ".join(dict.fromkeys(notes)))
            parts.append((got[0], w * got[1]))
    note = "; ".join(dict.fromkeys(notes))
    if not parts:
        return ReferenceField("point", np.zeros((len(mesh.points), 3, 3)), note)
    if all(loc == "point" for loc, _ in parts):
        return ReferenceField("point", sum(v for _, v in parts), note)
    return ReferenceField("cell", sum(v if loc == "cell" else _cell_mean(mesh, v)
                                      for loc, v in parts), note)


def strain_arrays(tensors: NDArray) -> dict[str, NDArray]:
    """Principal and component arrays in microstrain (engineering shear for gxy, gyz, gxz)."""
    t = np.nan_to_num(tensors) * MICROSTRAIN
    eig = np.linalg.eigvalsh(t)
    return {
        "max_principal_ue": eig[:, -1], "min_principal_ue": eig[:, 0],
        "exx_ue": t[:, 0, 0], "eyy_ue": t[:, 1, 1], "ezz_ue": t[:, 2, 2],
        "gxy_ue": 2 * t[:, 0, 1], "gyz_ue": 2 * t[:, 1, 2], "gxz_ue": 2 * t[:, 0, 2],
        "strain_tensor_ue": t.reshape(len(t), 9),
    }


__all__ = ["ReferenceField", "cell_strain_from_displacement", "reference_strain",
           "strain_arrays"]
