"""DIC frames: the exported full-field point tables, read into one tidy table.

Stage: readers. In: the ``[fullfield]`` settings (:class:`FullFieldSettings`). Out: a
:class:`DicFrames` record whose table has one row per point and frame, with the columns
``frame, step, x, y, z, exx, eyy, exy``: coordinates in the DIC's length unit and axes, strain in
m/m with tensor shear (the export's unit and shear convention converted here, the strain measure
not: Green-Lagrange stays Green-Lagrange until :mod:`correlate.fullfield`). Also the landmark
pairs of ``register = { landmarks = ... }``.

Formats, by suffix: CSV (comma, or semicolon with decimal comma, as spreadsheet exports in many
locales give), Parquet, and VTK point clouds (``.vtp``, ``.vtu``: the points are the coordinates,
the strains are point arrays named by ``columns``). A blank strain stays NaN (the point is used
in the frames where it has a value); a row with a blank coordinate is left out of its frame.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core.errors import ReadingsFormatError, StudyError
from correlate.core.headers import read_csv_table
from correlate.core.units import FULL_STRAIN
from correlate.readers.fullfield_study import STRAIN_UNITS, FullFieldSettings, natural_key

LANDMARK_COLUMNS = ("landmark", "dic_x", "dic_y", "dic_z", "model_x", "model_y", "model_z")
STEP_COLUMNS = ("frame", "file", "step")
STRAINS = ("exx", "eyy", "exy")


@dataclass(frozen=True)
class DicFrames:
    """The frames in natural order and their points (see the module docstring)."""

    table: pd.DataFrame        # frame, step, x, y, z, exx, eyy, exy
    frames: tuple[str, ...]
    steps: tuple[float, ...]   # the readings step of each frame
    planar: bool               # no z column: a 2D DIC export (z = 0)


@dataclass(frozen=True)
class Landmarks:
    """Landmark pairs: names, DIC coordinates (n, 3) and model coordinates (n, 3)."""

    names: tuple[str, ...]
    dic: NDArray[np.float64]
    model: NDArray[np.float64]


def _read_csv(path: Path) -> pd.DataFrame:
    try:
        table, _, problems = read_csv_table(path, path.name)
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise ReadingsFormatError(f"{path.name}: not a readable CSV table ({first}); export the "
                                  "DIC frame as CSV with one header row") from None
    if problems:
        raise ReadingsFormatError(*problems)
    return table


def _read_vtk(path: Path) -> pd.DataFrame:
    # vtkmodules directly: pyvista's import costs about 2 s
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkIOXML import vtkXMLPolyDataReader, vtkXMLUnstructuredGridReader

    reader = vtkXMLPolyDataReader() if path.suffix.lower() == ".vtp" \
        else vtkXMLUnstructuredGridReader()
    reader.SetFileName(str(path))
    reader.Update()
    data = reader.GetOutput()
    if data is None or data.GetPoints() is None or data.GetNumberOfPoints() == 0:
        raise ReadingsFormatError(f"{path.name}: no points could be read; write the DIC frame as "
                                  "a VTK XML point cloud with the strains as point arrays")
    pts = vtk_to_numpy(data.GetPoints().GetData()).astype(float)
    out = {"__x": pts[:, 0], "__y": pts[:, 1], "__z": pts[:, 2]}
    pd_ = data.GetPointData()
    for i in range(pd_.GetNumberOfArrays()):
        arr = vtk_to_numpy(pd_.GetArray(i))
        if arr.ndim == 1:
            out[pd_.GetArrayName(i)] = arr.astype(float)
    return pd.DataFrame(out)


def read_table(path: Path) -> pd.DataFrame:
    """One exported file as a raw table (the names as exported)."""
    suffix = path.suffix.lower()
    if suffix in (".csv", ".txt"):
        return _read_csv(path)
    if suffix == ".parquet":
        try:
            return pd.read_parquet(path)
        except (OSError, ValueError) as exc:
            raise ReadingsFormatError(f"{path.name}: not a readable Parquet file ({exc}); "
                                      "export the frame again") from None
    if suffix in (".vtp", ".vtu"):
        return _read_vtk(path)
    raise ReadingsFormatError(f"{path.name}: unknown DIC file type '{suffix}'; give CSV, "
                              "Parquet, VTP or VTU")


def _cell(path: Path, row: int, column: str) -> str:
    """Where value ``row`` (from 0) of ``column`` stands in the file: the spreadsheet row of a
    CSV (header = 1), the row of a Parquet table counted from 1 (as the readings' messages count
    them) and the point of a VTK cloud counted from 0 (VTK's point ids)."""
    suffix = path.suffix.lower()
    if suffix == ".parquet":
        return f"row {row + 1} (from 1, no header row), column '{column}'"
    if suffix in (".vtp", ".vtu"):
        return f"point {row} (from 0), array '{column}'"
    return f"row {row + 2}, column '{column}'"


def _numeric(raw: pd.DataFrame, col: str, path: Path) -> NDArray[np.float64]:
    values = pd.to_numeric(raw[col], errors="coerce")
    bad = values.isna() & raw[col].notna() & (raw[col].astype(str).str.strip() != "")
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise ReadingsFormatError(f"{path.name}: {_cell(path, row, col)} holds "
                                  f"{raw[col].iloc[row]!r}, not a number; fix or blank it")
    return values.to_numpy(dtype=float)


def _standard(raw: pd.DataFrame, path: Path, ff: FullFieldSettings) -> pd.DataFrame:
    """Map the exported names to the standard columns, convert unit and shear."""
    vtk = "__x" in raw.columns
    names = dict(ff.columns)
    if vtk:
        names.update({"x": "__x", "y": "__y", "z": "__z"})
    missing = [f"{k} = {v!r}" for k, v in names.items() if v not in raw.columns]
    if missing:
        shown = [c for c in raw.columns if not str(c).startswith("__")]
        raise ReadingsFormatError(f"{path.name}: column(s) {', '.join(missing)} of [fullfield] "
                                  f"columns not found (found {', '.join(map(str, shown))}); fix "
                                  "the names in the study's [fullfield] columns")
    out = pd.DataFrame({k: _numeric(raw, v, path) for k, v in names.items()})
    if "z" not in out:
        out["z"] = 0.0
    scale = STRAIN_UNITS[ff.strain_unit]
    for k in STRAINS:
        out[k] = out[k] * scale
        big = np.flatnonzero(np.abs(out[k].to_numpy()) >= FULL_STRAIN)
        if len(big):   # 100 % strain: as for the gauges, no measurement here reads it
            row = int(big[0])
            raise ReadingsFormatError(
                f"{path.name}: {_cell(path, row, names[k])} holds "
                f"{out[k].iloc[row] / scale:g}, a strain of {abs(out[k].iloc[row]) * 100:.3g} % "
                f"read as strain_unit = \"{ff.strain_unit}\" ({len(big)} value(s) of 100 % or "
                "more in the column): set [fullfield] strain_unit to the export's unit "
                f"({', '.join(STRAIN_UNITS)})")
    if ff.shear == "engineering":
        out["exy"] = out["exy"] / 2.0     # tensor shear inside the package
    for extra in ("frame", "step"):
        if extra in raw.columns and extra not in names.values():
            out[extra] = raw[extra].to_numpy()
    return out[out[["x", "y", "z"]].notna().all(axis=1)]


def _step_table(ff: FullFieldSettings) -> dict[str, float] | None:
    if ff.frame_step is None:
        return None
    raw = _read_csv(ff.frame_step)
    missing = [c for c in ("frame", "step") if c not in raw.columns]
    if missing:
        raise ReadingsFormatError(f"{ff.frame_step.name}: column(s) {', '.join(missing)} missing "
                                  f"(found {', '.join(map(str, raw.columns))}); it needs "
                                  f"{', '.join(STEP_COLUMNS)}")
    steps = _numeric(raw, "step", ff.frame_step)
    out: dict[str, float] = {}
    for i, (frame, step) in enumerate(zip(raw["frame"].astype(str), steps, strict=True)):
        if not np.isfinite(step):
            raise ReadingsFormatError(f"{ff.frame_step.name}: row {i + 2} (frame {frame}) has no "
                                      "step; give the readings step of every frame")
        out[frame] = float(step)
        if "file" in raw.columns and isinstance(raw["file"].iloc[i], str):
            out[Path(raw["file"].iloc[i]).name] = float(step)
    return out


def _frame_step(frame: str, file: Path, table: pd.DataFrame, steps: dict[str, float] | None,
                ff: FullFieldSettings) -> float:
    if steps is not None:
        for key in (frame, file.name, file.stem):
            if key in steps:
                return steps[key]
        raise ReadingsFormatError(f"{ff.frame_step.name}: frame '{frame}' ({file.name}) has no "  # type: ignore[union-attr]
                                  "row; give every frame its readings step")
    if "step" not in table.columns:
        raise ReadingsFormatError(f"{file.name}: frame '{frame}' has no step: give a 'step' "
                                  "column or frame_step = \"frames.csv\" in [fullfield]")
    values = pd.to_numeric(pd.Series(table["step"]), errors="coerce").dropna().unique()
    if len(values) != 1:
        raise ReadingsFormatError(f"{file.name}: frame '{frame}' has {len(values)} different "
                                  "steps in its 'step' column; one frame belongs to one step")
    return float(values[0])


def read_frames(ff: FullFieldSettings) -> DicFrames:
    """Read every frame of ``[fullfield]`` (see the module docstring).

    Raises
    ------
    ReadingsFormatError
        A missing column (naming the file and the study's name for it), a non-numeric value (file,
        row, column), a frame without a step, a frame with no points.
    """
    steps = _step_table(ff)
    parts: list[pd.DataFrame] = []
    frames: list[str] = []
    frame_steps: list[float] = []
    for file in ff.files:
        table = _standard(read_table(file), file, ff)
        if "frame" in table.columns and len(ff.files) == 1:
            groups = [(str(k), g) for k, g in table.groupby(table["frame"].astype(str), sort=False)]
            groups.sort(key=lambda kg: natural_key(Path(kg[0])))
        else:
            groups = [(file.stem, table)]
        for frame, g in groups:
            if g[list(STRAINS)].notna().any(axis=1).sum() == 0:
                raise ReadingsFormatError(f"{file.name}: frame '{frame}' has no point with a "
                                          "strain value; check the export")
            step = _frame_step(frame, file, g, steps, ff)
            frames.append(frame)
            frame_steps.append(step)
            parts.append(g.drop(columns=[c for c in ("frame", "step") if c in g.columns])
                         .assign(frame=frame, step=step))
    if len(set(frames)) != len(frames):
        dup = next(f for f in frames if frames.count(f) > 1)
        raise StudyError(f"[fullfield] files: frame '{dup}' is given twice; give each frame once")
    table = pd.concat(parts, ignore_index=True)[["frame", "step", "x", "y", "z", *STRAINS]]
    return DicFrames(table=table, frames=tuple(frames), steps=tuple(frame_steps),
                     planar="z" not in ff.columns)


def read_landmarks(path: Path) -> Landmarks:
    """The landmark pairs table (columns :data:`LANDMARK_COLUMNS`)."""
    raw = _read_csv(path)
    missing = [c for c in LANDMARK_COLUMNS if c not in raw.columns]
    if missing:
        raise ReadingsFormatError(f"{path.name}: column(s) {', '.join(missing)} missing (found "
                                  f"{', '.join(map(str, raw.columns))}); it needs "
                                  f"{', '.join(LANDMARK_COLUMNS)}")
    xyz = np.column_stack([_numeric(raw, c, path) for c in LANDMARK_COLUMNS[1:]])
    bad = ~np.isfinite(xyz).all(axis=1)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise ReadingsFormatError(f"{path.name}: row {row + 2} (landmark "
                                  f"{raw['landmark'].iloc[row]}) has a blank coordinate; give "
                                  "all six")
    return Landmarks(tuple(raw["landmark"].astype(str)), xyz[:, :3], xyz[:, 3:])


__all__ = ["LANDMARK_COLUMNS", "DicFrames", "Landmarks", "read_frames", "read_landmarks",
           "read_table"]
