"""CSV text of a result table made column by column in bulk, and the same table as Parquet.

Stage: core (output). Input: a pandas DataFrame; output: a CSV file byte-identical to
``tables.pandas_csv`` (``round_table`` then ``DataFrame.to_csv(index=False, lineterminator="\\n",
float_format="%.10g")``), or a Parquet file holding the same rounded doubles, typed.

pandas formats every float cell with a Python call. Here each column becomes a pyarrow string
array through numpy and pyarrow.compute, is quoted as the standard ``csv`` module quotes
(QUOTE_MINIMAL), and rows are joined in C. A float cell is formatted in bulk only where the text
is provably what ``"%.10g" % value`` gives (see `correlate.core.floattext`); other cells get that
very call. A column of a kind not handled here (datetimes, complex numbers, duplicate or non-text
column names, ...) makes :func:`write_csv` return False, and the caller writes with pandas.
"""

from __future__ import annotations

import csv
import io
import math
import os
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from correlate.core.floattext import grid_cells, sig_cells, sig_values
from correlate.core.precision import (
    CSV_FLOAT_FORMAT,
    FLOAT_DIGITS,
    LENGTH_COLUMNS,
    LENGTH_DECIMALS,
    NOISE,
    UE_DECIMALS,
)

_CHUNK_ROWS = 1 << 16     # rows formatted and joined at a time (bounds memory and string offsets)
_MAX_THREADS = 2          # row blocks formatted at once (pyarrow and numpy release the GIL)
_BOOLS = pa.array(["False", "True", ""], type=pa.large_string())
_LIT = {t: pa.scalar(t, pa.large_string()) for t in ("", '"', '""', "\n", ",")}
CellMaker = Callable[..., pa.Array]


def _csv_row(fields: list[str]) -> str:
    buf = io.StringIO()
    csv.writer(buf, lineterminator="\n").writerow(fields)
    return buf.getvalue()


# Characters that make the standard csv writer quote a field (QUOTE_MINIMAL, delimiter ",",
# quotechar '"', lineterminator "\n"), asked of the csv module itself: Python 3.11 quotes "\r"
# only when it is in the line terminator, later versions may always quote it.
_QUOTE_CHARS = "".join(ch for ch in ',"\n\r' if _csv_row([f"a{ch}b", "c"]).startswith('"'))
_QUOTE_PATTERN = "[" + _QUOTE_CHARS.replace("\n", "\\n").replace("\r", "\\r") + "]"
# Text is quoted here only for those characters; should this Python's csv module quote other
# fields too (spaces, empty fields, control characters), tables with text go to pandas.
_PLAIN = ["", " a", "a ", "\t", "\x00", "=1", "\x1f", "\u2028", "'"]
_CSV_QUOTES_AS_EXPECTED = all(_csv_row([f, "c"]) == f"{f},c\n" for f in _PLAIN)


# ---------------------------------------------------------------- rounding
def _kind(name: str) -> int | None:
    """Decimal places of a grid column (microstrain, lengths), None for significant digits."""
    if name.endswith("_ue"):
        return UE_DECIMALS
    return LENGTH_DECIMALS if name in LENGTH_COLUMNS else None


def denoised(values: np.ndarray) -> np.ndarray:
    """Return float64 values with round-off below NOISE x the column's largest set to +0.

    Parameters
    ----------
    values : ndarray of float [n]
        A column of another kind than microstrain or length.

    Returns
    -------
    ndarray of float64 [n]
        Values below ``NOISE * max|finite|`` (and -0) as +0.0, the rest unchanged.
    """
    x = np.asarray(values, dtype=float)
    finite = np.abs(x[np.isfinite(x)])
    if finite.size:
        x = np.where(np.abs(x) < NOISE * finite.max(), 0.0, x)
    return x + 0.0     # + 0.0: no "-0"


def rounded_column(name: str, s: pd.Series) -> np.ndarray:
    """Return a float column rounded as ``tables.round_table`` rounds it, the same doubles.

    Microstrain to UE_DECIMALS places and lengths to LENGTH_DECIMALS (numpy's rounding, as
    pandas' ``Series.round``), other floats to FLOAT_DIGITS significant digits after
    :func:`denoised`; no negative zero.
    """
    grid = _kind(name)
    if grid is not None:
        return s.round(grid).to_numpy() + 0.0
    return sig_values(denoised(s.to_numpy()), FLOAT_DIGITS) + 0.0


# ---------------------------------------------------------------- cells of each column kind
def _quote(arr: pa.Array) -> pa.Array:
    """Quote fields as csv.writer does with QUOTE_MINIMAL and doublequote (Python docs, csv)."""
    needs = pc.match_substring_regex(arr, _QUOTE_PATTERN)
    if not pc.any(needs).as_py():
        return arr
    sub = arr.filter(needs)
    quoted = pc.binary_join_element_wise(_LIT['"'], pc.replace_substring(sub, '"', '""'),
                                         _LIT['"'], _LIT[""])
    return pc.replace_with_mask(arr, needs, quoted)


def _object_cells(values: np.ndarray) -> pa.Array:
    mask = np.asarray(pd.isna(values), dtype=bool)
    if pd.api.types.infer_dtype(values, skipna=True) in ("string", "empty"):
        arr = pa.array(values, type=pa.large_string(), mask=mask)
    else:   # csv.writer writes str(field) for anything that is not a str
        arr = pa.array([None if m else v if isinstance(v, str) else str(v)
                        for v, m in zip(values, mask, strict=True)], type=pa.large_string())
    return _quote(pc.fill_null(arr, ""))


def _lookup_maker(table: pa.Array, codes: np.ndarray) -> CellMaker:
    """Cells by table look-up; ``lead=True`` gives each cell a leading newline at no cost."""
    led = pc.binary_join_element_wise(_LIT["\n"], table, _LIT[""])

    def make(a: int, b: int, lead: bool = False) -> pa.Array:
        return (led if lead else table).take(pa.array(codes[a:b]))
    make.can_lead = True  # type: ignore[attr-defined]  # read by _blocks
    return make


def _category_maker(s: pd.Series) -> CellMaker | None:
    cats = s.cat.categories
    if cats.dtype.kind in "Mm" or isinstance(cats.dtype, pd.PeriodDtype | pd.IntervalDtype):
        return None
    if pd.api.types.is_float_dtype(cats.dtype) and len(cats):
        return None   # pandas prints float categories with float_format: left to pandas
    texts = [v if isinstance(v, str) else str(v) for v in np.asarray(cats.astype(object))]
    table = _quote(pa.array([*texts, ""], type=pa.large_string()))
    codes = s.cat.codes.to_numpy()
    return _lookup_maker(table, np.where(codes < 0, len(texts), codes))


def _float_maker(name: object, s: pd.Series) -> CellMaker | None:
    if not isinstance(name, str) or not isinstance(s.dtype, np.dtype):
        return None            # round_table fails on name.endswith; nullable floats to pandas
    grid = _kind(name)
    if grid is None:           # round_table turns any float width into float64 here
        x = denoised(s.to_numpy())
        return lambda a, b: sig_cells(x[a:b], FLOAT_DIGITS)
    rounded = s.round(grid).to_numpy() + 0.0
    if rounded.dtype == np.float64:
        return lambda a, b: grid_cells(rounded[a:b], grid)

    def one_by_one(a: int, b: int) -> pa.Array:        # float32 / float16 grids, longdouble
        return pa.array(["" if math.isnan(v) else CSV_FLOAT_FORMAT % v for v in rounded[a:b]],
                        type=pa.large_string())
    return one_by_one


def _cell_maker(name: object, s: pd.Series) -> CellMaker | None:
    """Return a function of a row range giving the column's CSV cells, or None if not handled."""
    dtype = s.dtype
    if pd.api.types.is_float_dtype(dtype):
        return _float_maker(name, s)
    if isinstance(dtype, pd.CategoricalDtype):
        return _category_maker(s) if _CSV_QUOTES_AS_EXPECTED else None
    if isinstance(dtype, np.dtype) and dtype.kind in "iu":
        v = s.to_numpy()
        return lambda a, b: pc.cast(pa.array(v[a:b]), pa.large_string())
    if isinstance(dtype, np.dtype) and dtype.kind == "b":
        return _lookup_maker(_BOOLS, s.to_numpy().astype(np.int8))
    if not _CSV_QUOTES_AS_EXPECTED:
        return None
    if isinstance(dtype, np.dtype) and dtype.kind == "O":
        o = s.to_numpy()
        return lambda a, b: _object_cells(o[a:b])
    if isinstance(dtype, pd.StringDtype):
        t = s.array
        return lambda a, b: _quote(pc.fill_null(pa.array(t[a:b]).cast(pa.large_string()), ""))
    if isinstance(dtype, pd.BooleanDtype):
        m = s.array
        return lambda a, b: pc.fill_null(_BOOLS.take(pa.array(m[a:b]).cast(pa.int8())), "")
    if pd.api.types.is_integer_dtype(dtype) and not isinstance(dtype, pd.ArrowDtype):
        k = s.array
        return lambda a, b: pc.fill_null(pa.array(k[a:b]).cast(pa.large_string()), "")
    return None


# ---------------------------------------------------------------- rows
def _flat(arr: pa.Array | pa.ChunkedArray) -> pa.Array:
    arr = arr.combine_chunks() if isinstance(arr, pa.ChunkedArray) else arr
    return arr.cast(pa.large_string())


def _rows_bytes(cells: list[pa.Array], lead: bool) -> list[pa.Buffer | bytes]:
    """Join cells with "," into rows ending in "\\n"; return the UTF-8 bytes in pieces.

    With ``lead`` the first column's cells already start with "\\n": the joined text is then
    "\\n" row0 "\\n" row1 ..., which is the file text shifted by one byte.
    """
    cells = [_flat(c) for c in cells]    # nulls are empty cells
    if len(cells) == 1:   # csv.writer writes a row of one empty field as ""
        one = pc.fill_null(cells[0], _LIT[""])
        cells[0] = pc.if_else(pc.equal(one, _LIT[""]), _LIT['""'], one)
    if not lead:
        cells[-1] = pc.binary_join_element_wise(cells[-1], _LIT[""], _LIT["\n"],
                                                null_handling="replace")
    rows = pc.binary_join_element_wise(*cells, _LIT[","], null_handling="replace")
    offsets = np.frombuffer(rows.buffers()[1], dtype=np.int64)
    start, stop = offsets[rows.offset], offsets[rows.offset + len(rows)]
    data = rows.buffers()[2]
    if lead:
        return [data[start + 1:stop], b"\n"]
    return [data[start:stop]]


def _makers(df: pd.DataFrame) -> list[CellMaker] | None:
    """Return one cell maker per column, or None where pandas must write the table."""
    cols = df.columns
    if len(cols) == 0 or isinstance(cols, pd.MultiIndex) or not cols.is_unique:
        return None
    makers = []
    for j, name in enumerate(cols):
        maker = _cell_maker(name, df.iloc[:, j])
        if maker is None:
            return None
        makers.append(maker)
    return makers


def _blocks(df: pd.DataFrame, makers: list[CellMaker]) -> Iterator[pa.Buffer | bytes]:
    """Yield the header, then blocks of rows, formatted on a few threads and kept in order."""
    header = df.iloc[:0].to_csv(index=False, lineterminator="\n", float_format=CSV_FLOAT_FORMAT)
    yield header.encode("utf-8")
    n = len(df)
    lead = len(makers) > 1 and getattr(makers[0], "can_lead", False)

    def block(a: int) -> list[pa.Buffer | bytes]:
        b = min(a + _CHUNK_ROWS, n)
        first = makers[0](a, b, lead=True) if lead else makers[0](a, b)
        return _rows_bytes([first, *(m(a, b) for m in makers[1:])], lead)

    starts = range(0, n, _CHUNK_ROWS)
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    workers = min(_MAX_THREADS, len(starts), cores or 1)
    if workers < 2:
        for a in starts:
            yield from block(a)
        return
    with ThreadPoolExecutor(max_workers=workers) as pool:
        pending: deque = deque()
        for a in starts:                        # at most 2 blocks per thread ahead of the writer
            pending.append(pool.submit(block, a))
            if len(pending) >= 2 * workers:
                yield from pending.popleft().result()
        while pending:
            yield from pending.popleft().result()


_BULK_ERRORS = (UnicodeError, pa.ArrowInvalid, pa.ArrowTypeError)   # e.g. lone surrogates


# ---------------------------------------------------------------- public
def format_csv(df: pd.DataFrame) -> bytes | None:
    """Return the CSV text of a table as UTF-8 bytes, or None where pandas must write it.

    Parameters
    ----------
    df : pandas.DataFrame [rows, columns]
        Any table; microstrain columns end in ``_ue``.

    Returns
    -------
    bytes or None
        Header, one line per row, ``"\\n"`` line ends, no index: byte for byte
        ``tables.pandas_csv(df)``; None for a table with a column kind not handled here.
    """
    makers = _makers(df)
    if makers is None:
        return None
    try:
        return b"".join(_blocks(df, makers))
    except _BULK_ERRORS:
        return None


def write_csv(df: pd.DataFrame, path: Path) -> bool:
    """Write a table's CSV text (see :func:`format_csv`); False, nothing written, where pandas
    must write it."""
    makers = _makers(df)
    if makers is None:
        return False
    try:
        with open(path, "wb") as f:
            for block in _blocks(df, makers):
                f.write(block)
    except _BULK_ERRORS:
        return False      # the caller writes the whole file again with pandas
    return True


def rounded_table(df: pd.DataFrame) -> pd.DataFrame:
    """Return a copy with each float column as :func:`rounded_column` gives it."""
    out = df.copy()
    for j, name in enumerate(df.columns):
        s = df.iloc[:, j]
        if pd.api.types.is_float_dtype(s.dtype):
            out[name] = pd.Series(rounded_column(str(name), s), index=s.index)
    return out


def write_parquet(df: pd.DataFrame, path: Path) -> None:
    """Write a table as Parquet with the CSV's rounding and typed columns.

    Parameters
    ----------
    df : pandas.DataFrame [rows, columns]
        Any table pyarrow converts (categoricals become dictionary columns).
    path : pathlib.Path
        Target file.
    """
    table = pa.Table.from_pandas(rounded_table(df), preserve_index=False)
    pq.write_table(table, os.fspath(path))
