"""A run folder written by `correlate run`, read back for `correlate compare`.

Stage: readers. In: a folder path. Out: a :class:`RunFolder` with ``gauges.csv`` and
``summary.json`` (the parts compare reads), checked for the columns and keys it needs.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pandas as pd

from correlate.core.errors import RunFolderError


@dataclass(frozen=True)
class RunFolder:
    """The parts of a run folder that compare reads."""

    path: Path
    rows: pd.DataFrame        # gauges.csv: gauge, step, sequence, difference_ue, status
    summary: dict[str, Any]   # summary.json


def read_run(folder: Path) -> RunFolder:
    """Read ``gauges.csv`` and ``summary.json`` of a run folder; raise RunFolderError if unusable."""
    folder = Path(folder)
    if not folder.is_dir():
        raise RunFolderError(f"run folder '{folder}' does not exist; give a folder written by "
                             "`correlate run`")
    for name in ("gauges.csv", "summary.json"):
        if not (folder / name).is_file():
            raise RunFolderError(f"'{folder}' is not a run folder: {name} is missing; give a folder "
                                 "written by `correlate run`")
    try:
        summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise RunFolderError(f"{folder / 'summary.json'}: not valid JSON ({exc}); rerun "
                             "`correlate run`") from exc
    # gauge ids and statuses stay text ("NA" is a valid gauge id); numbers are parsed explicitly
    rows = pd.read_csv(folder / "gauges.csv", dtype=str, keep_default_na=False)
    missing = [c for c in ("gauge", "step", "sequence", "difference_ue", "status")
               if c not in rows.columns]
    if missing:
        raise RunFolderError(f"{folder / 'gauges.csv'}: lacks column(s) {', '.join(missing)}; "
                             "rerun `correlate run`")
    _check_summary(summary, folder / "summary.json")
    for col in ("step", "sequence", "difference_ue"):
        rows[col] = pd.to_numeric(rows[col], errors="coerce")
    return RunFolder(path=folder, rows=rows, summary=summary)


def _number_or_null(value: Any) -> bool:
    return value is None or (isinstance(value, int | float) and not isinstance(value, bool))


def _check_summary(summary: Any, path: Path) -> None:
    """Refuse a summary that lacks, or has the wrong type for, a key compare reads."""
    ref = summary.get("reference_step") if isinstance(summary, dict) else None
    if not isinstance(ref, dict) or not {"step", "sequence"} <= set(ref) or not all(
            isinstance(ref[k], int) and not isinstance(ref[k], bool) for k in ("step", "sequence")):
        raise RunFolderError(f"{path}: reference_step {{step, sequence}} is missing or not whole "
                             "numbers; the folder is damaged: rerun `correlate run`")
    wanted = {"fit": ("slope_origin", "r2", "rms_ue", "max_abs_ue"), "verdict": ("failing",)}
    for table, keys in wanted.items():
        block = summary.get(table)
        if not isinstance(block, dict):
            raise RunFolderError(f"{path}: '{table}' is missing or not a table; the folder is "
                                 "damaged: rerun `correlate run`")
        for key in keys:
            if key not in block or not _number_or_null(block[key]):
                raise RunFolderError(f"{path}: {table}.{key} is missing or not a number "
                                     f"({block.get(key)!r}); the folder is damaged: rerun "
                                     "`correlate run`")


def readings_hash(run: RunFolder) -> str:
    """The sha256 of the readings input recorded in the run's provenance."""
    found = input_hash(run, "readings")
    if found is None:
        raise RunFolderError(f"{run.path / 'summary.json'}: provenance.inputs.readings.sha256 is "
                             "missing, so the test data cannot be checked; rerun `correlate "
                             "run`")
    return found


def input_hash(run: RunFolder, name: str) -> str | None:
    """The sha256 of input ``name`` (gauges, model, ...) in the run's provenance, if recorded."""
    try:
        return str(run.summary["provenance"]["inputs"][name]["sha256"])
    except (KeyError, TypeError):
        return None


__all__ = ["RunFolder", "input_hash", "read_run", "readings_hash"]
