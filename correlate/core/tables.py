"""Tables and JSON written at a fixed precision, so that the same inputs give byte-identical files.

Microstrain to 0.001, lengths to 1e-6 of the model's unit, other floats to six significant digits.
"""

from __future__ import annotations

import datetime
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from correlate.core import progress

FLOAT_DIGITS = 6          # significant decimals for ratios and other dimensionless numbers
UE_DECIMALS = 3           # microstrain to 0.001
LENGTH_DECIMALS = 6       # lengths (snap distances, positions) to 1e-6 of the model's unit
LENGTH_COLUMNS = {"snap_distance", "x", "y", "z"}


def round_table(df: pd.DataFrame) -> pd.DataFrame:
    """Round microstrain columns to 0.001 and other floats to fixed significant digits."""
    df = df.copy()
    for col in df.columns:
        if not pd.api.types.is_float_dtype(df[col]):
            continue
        if col.endswith("_ue"):
            df[col] = df[col].round(UE_DECIMALS)
        elif col in LENGTH_COLUMNS:
            df[col] = df[col].round(LENGTH_DECIMALS) + 0.0  # + 0.0: no "-0"
        else:
            df[col] = df[col].map(lambda v: _sig(v))
    return df


def _sig(v: float) -> float:
    if v is None or not math.isfinite(v) or v == 0:
        return v
    return float(f"{v:.{FLOAT_DIGITS}g}")


FORMULA_START = ("=", "+", "-", "@", "\t", "\r")  # what spreadsheets evaluate at a cell's start


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def safe_cell(value: object) -> object:
    """A text cell that a spreadsheet would run as a formula gets a leading apostrophe (the usual
    mitigation of CSV injection, e.g. OWASP's "CSV Injection" page); numbers and other cells are
    returned as they are."""
    if isinstance(value, str) and value.startswith(FORMULA_START) and not _is_number(value):
        return "'" + value
    return value


def safe_text(df: pd.DataFrame) -> pd.DataFrame:
    """The table with :func:`safe_cell` applied to its text columns (a copy where needed)."""
    out = df
    for col in df.columns:
        s = df[col]
        if isinstance(s.dtype, pd.CategoricalDtype):
            cats = s.cat.categories
            if any(safe_cell(c) != c for c in cats):
                out = out.copy() if out is df else out
                out[col] = s.cat.rename_categories([safe_cell(c) for c in cats])
        elif s.dtype == object or pd.api.types.is_string_dtype(s.dtype):
            # judged on the distinct values: a long table repeats a few ids
            unsafe = {v: safe_cell(v) for v in pd.unique(s) if safe_cell(v) is not v}
            if unsafe:
                out = out.copy() if out is df else out
                out[col] = s.replace(unsafe)
    return out


def write_csv(df: pd.DataFrame, path: Path) -> None:
    """Write a table as CSV: fixed precision, formula-like text cells escaped (:func:`safe_cell`)."""
    with progress.step(f"writing {Path(path).name}"):
        safe_text(round_table(df)).to_csv(path, index=False, lineterminator="\n",
                                          float_format="%.10g")


def clean_json(obj: Any, key: str = "") -> Any:
    """Make a structure JSON-safe and reproducible: NaN -> None, numpy -> Python, rounded floats."""
    if isinstance(obj, dict):
        return {str(k): clean_json(v, str(k)) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [clean_json(v, key) for v in obj]
    if isinstance(obj, np.ndarray):
        return [clean_json(v, key) for v in obj.tolist()]
    if isinstance(obj, np.integer | bool | np.bool_):
        return obj.item() if hasattr(obj, "item") else obj
    if isinstance(obj, float | np.floating):
        v = float(obj)
        if not math.isfinite(v):
            return None
        return round(v, UE_DECIMALS) if key.endswith("_ue") else _sig(v)
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, datetime.date | datetime.time):  # TOML dates and times
        return obj.isoformat()
    return obj


def write_json(obj: Any, path: Path) -> None:
    with progress.step(f"writing {Path(path).name}"):
        text = json.dumps(clean_json(obj), indent=2, sort_keys=False, ensure_ascii=False)
        path.write_text(text + "\n", encoding="utf-8")
