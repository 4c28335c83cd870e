"""The ``[fullfield]`` study table: which DIC frames to read and how to compare them.

Stage: readers. In: the study's parsed TOML (``raw``), its folder and the list of problems being
gathered. Out: a :class:`FullFieldSettings` record (None when the table is absent), with one
problem line per bad key, naming the table and the key. The frames themselves are read by
:mod:`correlate.readers.dic_frames`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from correlate.core.units import LENGTH_UNITS
from correlate.readers._values import number, path, unknown_keys

FULLFIELD_KEYS = {"files", "frame_step", "columns", "shear", "measure", "length_unit", "register",
                  "filter", "edge", "strain_unit", "snap_tol", "axes", "reference_frame"}
COLUMN_KEYS = ("x", "y", "z", "exx", "eyy", "exy")
REQUIRED_COLUMNS = ("x", "y", "exx", "eyy", "exy")
REGISTER_KEYS = {"landmarks", "refine", "matrix", "tol", "max_move"}
FILTER_KEYS = {"size", "kind"}
SHEARS = ("tensor", "engineering")
MEASURES = ("green-lagrange", "small")
STRAIN_UNITS = {"fraction": 1.0, "percent": 1e-2, "ue": 1e-6}   # m/m per unit
FILTER_KINDS = ("gaussian", "mean")
AXES = ("camera", "tangent")
ICP_TOL = 1e-4        # ICP stops when no point moves more than this per step [length unit]
ICP_MAX_MOVE = 2.0    # refuse an ICP result this far from the landmark solution [length unit]


@dataclass(frozen=True)
class FullFieldSettings:
    """Everything ``[fullfield]`` says, validated; paths absolute, lengths in ``length_unit``.

    ``register`` is "landmarks", "matrix" or "model"; ``filter_size`` None compares unfiltered
    (``filter = "none"``); ``axes`` "camera" when the exported strains are in the camera's x, y
    axes, "tangent" when already in the tangent-plane axes that follow them.
    """

    files: tuple[Path, ...]
    columns: dict[str, str]
    frame_step: Path | None = None
    shear: str = "tensor"
    measure: str = "green-lagrange"
    strain_unit: str = "fraction"
    length_unit: str = "mm"
    register: str = "model"
    landmarks: Path | None = None
    refine: str | None = None
    matrix: tuple[tuple[float, ...], ...] | None = None
    icp_tol: float = ICP_TOL
    icp_max_move: float = ICP_MAX_MOVE
    filter_size: float | None = None
    filter_kind: str = "gaussian"
    edge: float = 0.0
    snap_tol: float = 0.5
    axes: str = "camera"
    reference_frame: str | None = None

    @property
    def inputs(self) -> list[Path]:
        """Every file the table reads (an output may never touch them)."""
        extra = [p for p in (self.frame_step, self.landmarks) if p is not None]
        return list(self.files) + extra


def natural_key(p: Path) -> list[Any]:
    """Sort key putting frame_2 before frame_10 (digits compared as numbers)."""
    return [int(s) if s.isdigit() else s.lower() for s in re.split(r"(\d+)", p.name)]


def _choice(table: dict[str, Any], key: str, options: tuple[str, ...] | list[str], default: str,
            where: str, name: str, problems: list[str]) -> str:
    value = table.get(key, default)
    if value not in options:
        problems.append(f"{name}: {where} {key} = {value!r} is not one of "
                        f"{', '.join(repr(o) for o in options)}; write one of them")
        return default
    return str(value)


def _files(ff: dict[str, Any], base: Path, name: str, problems: list[str]) -> tuple[Path, ...]:
    pattern = ff.get("files")
    if not isinstance(pattern, str) or not pattern:
        problems.append(f"{name}: [fullfield] files is missing; give a file or a pattern such as "
                        "\"dic/frame_*.csv\" relative to the study file")
        return ()
    found = sorted(base.glob(pattern), key=natural_key) if any(c in pattern for c in "*?[") \
        else [base / pattern]
    found = [p.resolve() for p in found if p.is_file()]
    if not found:
        problems.append(f"{name}: [fullfield] files = {pattern!r} matches no file (looked in "
                        f"{base}); check the pattern")
    return tuple(found)


def _columns(ff: dict[str, Any], name: str, problems: list[str]) -> dict[str, str]:
    given = ff.get("columns", {})
    if not isinstance(given, dict):
        problems.append(f"{name}: [fullfield] columns must be a table such as "
                        "{ x = \"X\", y = \"Y\", exx = \"exx\", eyy = \"eyy\", exy = \"exy\" }")
        return {k: k for k in REQUIRED_COLUMNS}
    unknown_keys("[fullfield] columns", given, set(COLUMN_KEYS), problems, name)
    cols = {k: k for k in REQUIRED_COLUMNS}
    for k, v in given.items():
        if k in COLUMN_KEYS:
            if not isinstance(v, str) or not v:
                problems.append(f"{name}: [fullfield] columns {k} = {v!r} is not a column name; "
                                "give the name as exported, in quotes")
            else:
                cols[k] = v
    return cols


def _matrix(value: Any, name: str, problems: list[str]) -> tuple[tuple[float, ...], ...] | None:
    ok = (isinstance(value, list) and len(value) == 4
          and all(isinstance(r, list) and len(r) == 4 for r in value)
          and all(isinstance(x, int | float) and not isinstance(x, bool) for r in value for x in r))
    if not ok:
        problems.append(f"{name}: [fullfield] register matrix must be 4 rows of 4 numbers "
                        "(the homogeneous transform from DIC to model axes)")
        return None
    return tuple(tuple(float(x) for x in r) for r in value)


def _register(ff: dict[str, Any], base: Path, name: str, problems: list[str]) -> dict[str, Any]:
    reg = ff.get("register", "model")
    where = "[fullfield] register"
    if reg == "model":
        return {"register": "model"}
    if not isinstance(reg, dict):
        problems.append(f"{name}: {where} = {reg!r}; write \"model\" (points already in model "
                        "axes), { landmarks = \"landmarks.csv\" } or { matrix = [[...4x4...]] }")
        return {"register": "model"}
    unknown_keys(where, reg, REGISTER_KEYS, problems, name)
    out: dict[str, Any] = {}
    for key, field in (("tol", "icp_tol"), ("max_move", "icp_max_move")):
        if key in reg:
            out[field] = number(reg, key, None, where, name, problems, positive=True)
    if ("landmarks" in reg) == ("matrix" in reg):
        problems.append(f"{name}: {where} needs exactly one of landmarks or matrix")
        return {"register": "model", **out}
    if "matrix" in reg:
        return {"register": "matrix", "matrix": _matrix(reg["matrix"], name, problems), **out}
    refine = reg.get("refine", "none")
    if refine not in ("icp", "none"):
        problems.append(f"{name}: {where} refine = {refine!r} is not \"icp\" or \"none\"")
    return {"register": "landmarks", "refine": "icp" if refine == "icp" else None,
            "landmarks": path(base, reg["landmarks"], f"{where} landmarks", name, problems), **out}


def _filter(ff: dict[str, Any], name: str, problems: list[str]) -> dict[str, Any]:
    flt = ff.get("filter", "none")
    where = "[fullfield] filter"
    if flt == "none":
        return {"filter_size": None}
    if not isinstance(flt, dict) or "size" not in flt:
        problems.append(f"{name}: {where} = {flt!r}; write {{ size = 2.5, kind = \"gaussian\" }} "
                        "(the DIC's strain window in length_unit) or \"none\"")
        return {"filter_size": None}
    unknown_keys(where, flt, FILTER_KEYS, problems, name)
    return {"filter_size": number(flt, "size", None, where, name, problems, positive=True),
            "filter_kind": _choice(flt, "kind", FILTER_KINDS, "gaussian", where, name, problems)}


def fullfield_table(raw: dict[str, Any], base: Path, name: str, problems: list[str]
                    ) -> FullFieldSettings | None:
    """Read ``[fullfield]``; None when the study has none (see the module docstring)."""
    ff = raw.get("fullfield")
    if not isinstance(ff, dict):
        return None   # absent, or not a table (the study's table check says so)
    where = "[fullfield]"
    step = ff.get("frame_step")
    frame_step = path(base, step, f"{where} frame_step", name, problems) if step is not None \
        else None
    unit = _choice(ff, "length_unit", list(LENGTH_UNITS), "mm", where, name, problems)
    edge = number(ff, "edge", 0.0, where, name, problems)
    if edge is not None and edge < 0:
        problems.append(f"{name}: {where} edge = {edge:g} is negative; give 0 or a distance")
    ref = ff.get("reference_frame")
    return FullFieldSettings(
        files=_files(ff, base, name, problems), columns=_columns(ff, name, problems),
        frame_step=frame_step,
        shear=_choice(ff, "shear", SHEARS, "tensor", where, name, problems),
        measure=_choice(ff, "measure", MEASURES, "green-lagrange", where, name, problems),
        strain_unit=_choice(ff, "strain_unit", list(STRAIN_UNITS), "fraction", where, name,
                            problems),
        length_unit=unit, edge=max(edge or 0.0, 0.0),
        snap_tol=number(ff, "snap_tol", 0.5, where, name, problems, positive=True) or 0.5,
        axes=_choice(ff, "axes", AXES, "camera", where, name, problems),
        reference_frame=None if ref is None else str(ref),
        **_register(ff, base, name, problems), **_filter(ff, name, problems))


__all__ = ["FULLFIELD_KEYS", "STRAIN_UNITS", "FullFieldSettings", "fullfield_table", "natural_key"]
