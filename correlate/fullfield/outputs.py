"""Write a full-field comparison: ``fullfield.parquet``, ``fullfield_stats.csv``,
``fullfield.vtp`` and ``fullfield.json``.

Stage: fullfield. In: a :class:`~correlate.fullfield.comparison.FullFieldResult` and the staged
output folder. Out: the four files. ``fullfield.vtp`` holds the registered points (model axes,
on the surface) with one point array per frame and quantity, ``<frame>/<quantity>``, NaN where a
frame has no value, for any VTK viewer.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from correlate.core import progress
from correlate.core.tables import write_csv, write_json
from correlate.fullfield.comparison import FullFieldResult


def write_points(result: FullFieldResult, path: Path) -> None:
    """The registered points with one array per frame and quantity (see the module docstring)."""
    from vtkmodules.util.numpy_support import numpy_to_vtk
    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkPolyData
    from vtkmodules.vtkIOXML import vtkXMLPolyDataWriter

    xyz = result.points[["x", "y", "z"]].to_numpy(dtype=float)
    poly = vtkPolyData()
    pts = vtkPoints()
    pts.SetData(numpy_to_vtk(np.ascontiguousarray(xyz), deep=True))
    poly.SetPoints(pts)
    verts = vtkCellArray()
    for i in range(len(xyz)):
        verts.InsertNextCell(1)
        verts.InsertCellPoint(i)
    poly.SetVerts(verts)
    quantities = [c for c in result.frames[0].columns if c.endswith("_ue")]
    for g in result.frames:
        frame = g["frame"].iloc[0]
        idx = g["point"].to_numpy()
        for q in quantities:
            values = np.full(len(xyz), np.nan)
            values[idx] = g[q].to_numpy(dtype=float)
            array = numpy_to_vtk(values, deep=True)
            array.SetName(f"{frame}/{q}")
            poly.GetPointData().AddArray(array)
    writer = vtkXMLPolyDataWriter()
    writer.SetFileName(str(path))
    writer.SetInputData(poly)
    writer.SetDataModeToBinary()
    if not writer.Write():
        raise OSError(f"could not write {path.name}")


def write_table(frames: tuple[pd.DataFrame, ...], path: Path) -> None:
    """``fullfield.parquet``, one row group per frame: the frames are never joined in memory."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    schema = pa.Schema.from_pandas(frames[0], preserve_index=False)
    with pq.ParquetWriter(path, schema) as writer:
        for t in frames:
            writer.write_table(pa.Table.from_pandas(t, schema=schema, preserve_index=False))


def write_fullfield(result: FullFieldResult, folder: Path, *, unit: str) -> None:
    """Write the four full-field outputs into ``folder`` (a staged output folder)."""
    with progress.step("writing fullfield.parquet"):
        write_table(result.frames, folder / "fullfield.parquet")
    write_csv(result.stats, folder / "fullfield_stats.csv")
    write_json({**result.summary, "length_unit": unit}, folder / "fullfield.json")
    with progress.step("writing fullfield.vtp"):
        write_points(result, folder / "fullfield.vtp")


__all__ = ["write_fullfield", "write_points", "write_table"]
