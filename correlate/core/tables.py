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

from correlate.core import progress, table_text
from correlate.core.precision import (
    CSV_FLOAT_FORMAT,
    FLOAT_DIGITS,
    LENGTH_COLUMNS,
    LENGTH_DECIMALS,
    NOISE,
    UE_DECIMALS,
)


def round_table(df: pd.DataFrame) -> pd.DataFrame:
    """Round microstrain columns to 0.001 and other floats to fixed significant digits.

    In the other float columns a value below NOISE times the column's largest magnitude (an angle
    of 6.5e-17 degrees beside 45) is round-off of the arithmetic, not a figure: it is written as 0.
    No column is written with a negative zero.
    """
    df = df.copy()
    for col in df.columns:
        if not pd.api.types.is_float_dtype(df[col]):
            continue
        if col.endswith("_ue"):
            df[col] = df[col].round(UE_DECIMALS) + 0.0  # + 0.0: no "-0"
        elif col in LENGTH_COLUMNS:
            df[col] = df[col].round(LENGTH_DECIMALS) + 0.0
        else:
            values = df[col].to_numpy(dtype=float)
            finite = np.abs(values[np.isfinite(values)])
            if finite.size:
                values = np.where(np.abs(values) < NOISE * finite.max(), 0.0, values)
            df[col] = pd.Series(values, index=df.index).map(lambda v: _sig(v) + 0.0)
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
    """Write a table as CSV: fixed precision, formula-like text cells escaped (:func:`safe_cell`).

    The text is made column by column in bulk (:mod:`correlate.core.table_text`), byte for byte
    what :func:`pandas_csv` writes; a table with a column kind the bulk writer does not handle
    goes to :func:`pandas_csv` itself.
    """
    with progress.step(f"writing {Path(path).name}"):
        safe = safe_text(df)
        if not table_text.write_csv(safe, Path(path)):
            pandas_csv(safe, path)


def pandas_csv(df: pd.DataFrame, path: Path | None = None) -> str | None:
    """The table rounded by :func:`round_table` and written by pandas (the reference writer).

    One Python call per value: slow on long tables, kept for the column kinds the bulk writer
    leaves alone and as the reference its tests compare against. Text cells are written as they
    are (apply :func:`safe_text` first). Returns the text when no path is given.
    """
    return round_table(df).to_csv(path, index=False, lineterminator="\n",
                                  float_format=CSV_FLOAT_FORMAT)


def write_parquet(df: pd.DataFrame, path: Path) -> None:
    """Write a table as Parquet: the CSV's columns and rounding, typed; text cells as they are
    (a Parquet file is not opened by a spreadsheet, so no formula escape)."""
    with progress.step(f"writing {Path(path).name}"):
        table_text.write_parquet(df, Path(path))


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
        return round(v, UE_DECIMALS) + 0.0 if key.endswith("_ue") else _sig(v) + 0.0
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, datetime.date | datetime.time):  # TOML dates and times
        return obj.isoformat()
    return obj


def write_json(obj: Any, path: Path) -> None:
    with progress.step(f"writing {Path(path).name}"):
        text = json.dumps(clean_json(obj), indent=2, sort_keys=False, ensure_ascii=False)
        path.write_text(text + "\n", encoding="utf-8")
