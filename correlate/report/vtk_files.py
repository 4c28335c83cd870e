"""VTK files of a run: ``gauges.vtp`` (gauge centres with their results) and ``surface.vtp``
(the reference-step strain field on the model surface), for any VTK-based viewer."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np

from correlate.report.glyphs import drawn_grids
from correlate.report.scene import model_surface

STATUS_CODES = {"pass": 0, "fail": 1}
STATUS_LEGEND = ("0 pass", "1 fail", "2 not evaluated (tare, zero-load, missing, flagged or excluded)")


def strings(name: str, values: Any) -> Any:
    """A ``vtkStringArray`` filled one value at a time (UTF-8; pyvista refuses non-ASCII text)."""
    from vtkmodules.vtkCommonCore import vtkStringArray

    array = vtkStringArray()
    array.SetName(name)
    for v in values:
        array.InsertNextValue(str(v))
    return array


def gauge_points(corr: Any) -> Any:
    """One point per gauge centre with its reference-step readings, status and statistics.

    Point data: ``gauge`` (string), ``predicted_ue``, ``measured_ue``, ``difference_ue``,
    ``ratio``, ``band_low_ue``, ``band_high_ue``, ``status`` (string) and ``status_code`` (int,
    legend in the field data ``status_legend``), ``unconservative``, ``grid_length``, the
    all-step fit of each gauge as ``stats_<column of gauge_stats.csv>``, and the vectors
    ``grid_direction`` and ``normal``. A bridge channel is one point per arm, each at its
    arm's grid with the channel's values; with bridges, the strings ``grid`` (the gauge-map row
    drawn) and ``label`` and the int ``arm`` (1..4, 0 for a single grid) are added.
    """
    import pyvista as pv

    grids = drawn_grids(corr)
    j = grids.channel
    ref = corr.reference
    st = corr.status
    poly = pv.PolyData(np.asarray(grids.centre, dtype=float))
    status = np.asarray(st.status[ref]).astype(str)[j]
    data = {
        "predicted_ue": corr.predicted[ref], "measured_ue": corr.measured[ref],
        "difference_ue": st.difference[ref], "ratio": st.ratio[ref],
        "band_low_ue": corr.band_low[ref], "band_high_ue": corr.band_high[ref],
    }
    for name, values in data.items():
        poly.point_data[name] = np.asarray(values, dtype=float)[j]
    poly.point_data["grid_length"] = np.asarray(grids.length, dtype=float)
    poly.point_data["status_code"] = np.array([STATUS_CODES.get(s, 2) for s in status],
                                              dtype=np.int32)
    poly.point_data["unconservative"] = np.asarray(st.unconservative[ref], dtype=np.int32)[j]
    per = corr.per_gauge.set_index("gauge") if len(corr.per_gauge) else None
    if per is not None:
        for col in per.columns:
            values = per[col].reindex(corr.gauges)
            if values.dtype.kind in "iufc":  # numbers (a text column such as arms is left out)
                poly.point_data[f"stats_{col}"] = values.to_numpy(dtype=float)[j]
    poly.point_data["grid_direction"] = np.asarray(grids.direction, dtype=float)
    poly.point_data["normal"] = np.asarray(grids.normal, dtype=float)
    poly.GetPointData().AddArray(strings("gauge", [corr.gauges[k] for k in j]))
    poly.GetPointData().AddArray(strings("status", status))
    if (grids.arm > 0).any():
        poly.GetPointData().AddArray(strings("grid", grids.grid))
        poly.GetPointData().AddArray(strings("label", grids.label))
        poly.point_data["arm"] = np.asarray(grids.arm, dtype=np.int32)
    poly.GetFieldData().AddArray(strings("status_legend", STATUS_LEGEND))
    step = corr.steps
    poly.field_data["reference_step"] = np.array([step.step[ref], step.sequence[ref]], dtype=np.int64)
    poly.GetFieldData().AddArray(strings("units", [
        "strain in microstrain (ue), tension positive", f"lengths in {corr.study.length_unit}"]))
    return poly


def write_vtk(corr: Any, folder: Path, surface: Any | None = None) -> None:
    """Write ``gauges.vtp`` (gauge centres) and ``surface.vtp`` (reference-step strain field)."""
    gauge_points(corr).save(str(folder / "gauges.vtp"))
    if surface is None:
        surface, _ = model_surface(corr)
    out = surface.copy()
    ref = corr.reference
    out.field_data["reference_step"] = np.array([corr.steps.step[ref], corr.steps.sequence[ref]],
                                                dtype=np.int64)
    out.GetFieldData().AddArray(strings("units", [
        "strain in microstrain (ue), tension positive",
        "gxy_ue, gyz_ue, gxz_ue: engineering shear; strain_tensor_ue: full tensor, tensor shear",
        f"coordinates in {corr.study.length_unit}"]))
    out.save(str(folder / "surface.vtp"))
