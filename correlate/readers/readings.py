"""Readings input: strain-gauge readings per load step from a data-acquisition CSV export.

Input: a "wide" CSV (or Parquet) file with one row per load step: a ``step`` column, the load columns named by
the caller, one column per gauge channel in microstrain, an optional ``sequence`` column (repeated
load runs), an optional units row under the header, and other columns, ignored and listed.
Output: :class:`Readings`, a table of step, sequence, loads and one column per gauge id [µε], with a
record of every cell read as a sentinel of an open or overranged channel.
"""

from __future__ import annotations

import csv
import difflib
import importlib.util
import io
import math
import re
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from os import PathLike
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core.errors import CorrelateWarning, ReadingsFormatError
from correlate.core.units import FULL_STRAIN, MICROSTRAIN

__all__ = ["DEFAULT_SENTINELS", "GAUGE_RANGE_UE", "MICROSTRAIN_UNITS", "STRAIN_LIMIT", "Readings",
           "read_readings"]

# Values a data-acquisition system writes for an open, overranged or unread channel (common
# practice; 9.9e37 and 9.91e37 are the overload and not-a-number codes of SCPI instruments, from
# memory). Text matches case-insensitively. Always sentinels as well: any spelling of NaN or
# infinity (never a reading) and a cell made only of '#' (a spreadsheet column too narrow).
DEFAULT_SENTINELS: tuple[float | str, ...] = (
    -999999.0, 999999.0, -99999.0, 99999.0, 1e30, -1e30, 9.9e37, 9.91e37,
    "OVER", "OVR", "OVERRANGE", "OVERLOAD", "UNDER", "UNDR", "OPEN", "ERR", "ERROR",
    "NaN", "N/A", "#N/A", "####",
)
# Spellings of microstrain accepted in the units row: case-insensitive, without spaces and
# enclosing brackets; the micro sign and the Greek mu are one letter after case folding.
MICROSTRAIN_UNITS: tuple[str, ...] = (
    "µε", "με", "µe", "ue", "uE", "um/m", "µm/m", "μm/m", "microstrain", "micro-strain",
    "ustrain", "µstrain", "μstrain",
)
STRAIN_LIMIT = 0.05  # every |reading| below this while the loads vary: strain, not microstrain
PERCENT_LIMIT = 1.0  # every |reading| below 1 µε while the loads vary: percent (or strain)
GAUGE_RANGE_UE = FULL_STRAIN * MICROSTRAIN   # no gauge reads 100 % strain (core.units)
_STEP, _SEQUENCE = "step", "sequence"
PARQUET_SUFFIXES = (".parquet", ".pq")
_PYARROW_MIN_BYTES = 1 << 18  # measured: below about 250 kB pandas' C engine is faster
_MAX_PROBLEMS = 20
_DECIMAL_COMMA = re.compile(r"[+-]?\d*,\d+(?:[eE][+-]?\d+)?")  # "324,129": a quoted decimal comma


def _loose(name: str) -> str:
    return re.sub(r"[\s_\-]+", "", name).casefold()


def _unit_key(unit: str) -> str:
    return "".join(unit.split()).strip("[](){}").casefold()


_MICROSTRAIN_KEYS = frozenset(_unit_key(u) for u in MICROSTRAIN_UNITS)


@dataclass(frozen=True, eq=False)  # eq=False: == on DataFrame fields has no single truth value
class Readings:
    """Gauge readings per load step, in microstrain.

    Attributes
    ----------
    table : pandas.DataFrame
        Columns ``step`` (int), ``sequence`` (int, 0 when the file has none), the load columns
        (float), then one float column per gauge id [µε]. Missing readings are NaN.
    loads, gauges : tuple of str
        Load column names and gauge ids, in table order.
    load_units : dict of str to str
        Unit of each load column from the units row, ``""`` when none is given.
    ignored : tuple of str
        Columns of the file that were not used, in file order.
    flags : pandas.DataFrame
        One row per sentinel cell read as NaN: ``gauge`` (gauge id, or the load column name),
        ``step``, ``sequence``, ``value`` (the cell text) and ``reason`` ("sentinel").
    lines : ndarray of int, shape (n,)
        1-based line of the file holding each table row.
    path : str
        The file read.
    """

    table: pd.DataFrame
    loads: tuple[str, ...]
    gauges: tuple[str, ...]
    load_units: dict[str, str]
    ignored: tuple[str, ...]
    flags: pd.DataFrame
    lines: NDArray[np.int64]
    path: str


def read_readings(path: str | PathLike[str], *, gauges: Mapping[str, str], loads: Sequence[str],
                  sentinels: Sequence[float | str] | None = None) -> Readings:
    """Read a wide CSV of gauge readings per load step.

    Parameters
    ----------
    path : str or path-like
        CSV file separated by commas, or by semicolons (or tabs) with decimal commas or points;
        UTF-8 with or without BOM, or latin-1. The file is only read.
    gauges : mapping of str to str
        Gauge id -> name of its channel column in the file. [µε]
    loads : sequence of str
        Names of the load columns.
    sentinels : sequence of float or str, optional
        Cell values meaning "no reading", read as NaN and recorded in ``flags``. Default
        :data:`DEFAULT_SENTINELS`.

    Returns
    -------
    Readings

    Raises
    ------
    ReadingsFormatError
        One line per problem found: unreadable or ragged file, missing or repeated column, unit
        not microstrain, cell that is not a number, step not an integer, repeated step.

    Warns
    -----
    CorrelateWarning
        When every reading is below :data:`STRAIN_LIMIT` in magnitude while the loads vary.
    """
    name = Path(path).name
    loads = (loads,) if isinstance(loads, str) else tuple(str(x) for x in loads)
    gauge_map = {str(g): str(c) for g, c in gauges.items()}
    codes = _sentinel_sets(DEFAULT_SENTINELS if sentinels is None else sentinels)
    if Path(path).suffix.casefold() in PARQUET_SUFFIXES:
        return _read_parquet(path, gauge_map, loads, codes)
    try:
        raw = Path(path).read_bytes()
    except OSError as exc:
        raise ReadingsFormatError(f"{name}: cannot read the file ({exc.strerror})") from None
    rows = _text_lines(_decode(raw, name))
    if not rows:
        raise ReadingsFormatError(f"{name}: the file is empty; expected a header with 'step'")
    head = rows[0][1]
    sep = max((";", "\t", ","), key=head.count) if any(s in head for s in ";\t,") else ","
    decimal_comma = sep != ","  # there a comma inside a number can only be a decimal comma
    header = [h.strip() for h in _fields(head, sep, name, rows[0][0])]
    rows = [(k, t) for k, t in rows[1:] if t.strip(sep + " \t")]  # rows of empty cells are blank
    columns, problems = _columns(header, gauge_map, loads, name)
    widths = [len(_fields(t, sep, name, k)) for k, t in rows]
    hint = ("check for a stray separator" if decimal_comma else "decimal commas in a comma-"
            "separated file make the columns ambiguous; export with semicolons or decimal points")
    problems += [f"{name} line {k}: {n} fields but the header has {len(header)}; {hint}"
                 for (k, _), n in zip(rows, widths, strict=True) if n > len(header)]
    _raise(problems, name)
    load_units = dict.fromkeys(loads, "")
    first = _fields(rows[0][1], sep, name, rows[0][0]) + [""] * len(header) if rows else []
    if first and all(_number(first[j], decimal_comma) is None
                     for key, j in columns.items() if key != _SEQUENCE):
        _check_units(first, header, [columns[g] for g in gauge_map], rows[0][0], name)
        load_units = {ld: first[columns[ld]].strip() for ld in loads}
        rows, widths = rows[1:], widths[1:]
    if not rows:
        raise ReadingsFormatError(f"{name}: no data rows under the header; expected one per step")
    lines = np.array([k for k, _ in rows], dtype=np.int64)
    used = sorted(set(columns.values()))
    # short rows get empty cells: pyarrow, and the C engine with usecols, refuse ragged rows
    width = len(header)
    text = "".join(t + sep * (width - n) + "\n" for (_, t), n in zip(rows, widths, strict=True))
    cells = _read_cells(text, sep, used, len(raw), name, codes[0])
    return _readings(path, cells, header, columns, lines, decimal_comma, codes, gauge_map, loads,
                     load_units)


def _readings(path: str | PathLike[str], cells: pd.DataFrame, header: list[str],
              columns: dict[str, int], lines: NDArray[np.int64], decimal_comma: bool,
              codes: tuple[NDArray[np.float64], frozenset[str]], gauge_map: dict[str, str],
              loads: tuple[str, ...], load_units: dict[str, str]) -> Readings:
    """The checked table from the cells of the used columns (CSV and Parquet alike)."""
    name = Path(path).name
    labels = [(ld, columns[ld]) for ld in loads] + [(g, columns[g]) for g in gauge_map]
    table, flags = _convert(cells, header, columns, labels, lines, decimal_comma, codes, name)
    _check_range(table, {g: header[columns[g]] for g in gauge_map}, lines, name)
    _warn_if_strain(table, loads, tuple(gauge_map), name)
    used = set(columns.values())
    ignored = tuple(h or f"(column {j + 1})" for j, h in enumerate(header) if j not in used)
    return Readings(table=table, loads=loads, gauges=tuple(gauge_map), load_units=load_units,
                    ignored=ignored, flags=flags, lines=lines, path=str(path))


def _read_parquet(path: str | PathLike[str], gauge_map: dict[str, str], loads: tuple[str, ...],
                  codes: tuple[NDArray[np.float64], frozenset[str]]) -> Readings:
    """The same table from a Parquet file: typed columns, no units row, rows numbered from 1."""
    name = Path(path).name
    try:
        import pyarrow.parquet as pq

        frame = pq.read_table(path).to_pandas()
    except ImportError:
        raise ReadingsFormatError(f"{name}: reading Parquet needs pyarrow; pip install pyarrow, "
                                  "or export the readings as CSV") from None
    except (OSError, ValueError) as exc:  # pyarrow's errors derive from these
        raise ReadingsFormatError(f"{name}: cannot read it as Parquet ({str(exc)[:120]}); "
                                  "export the readings again") from None
    header = [str(c) for c in frame.columns]
    columns, problems = _columns(header, gauge_map, loads, name)
    _raise(problems, name)
    if not len(frame):
        raise ReadingsFormatError(f"{name}: no data rows; expected one per step")
    used = sorted(set(columns.values()))
    cells = frame.iloc[:, used]
    cells.columns = used
    lines = np.arange(1, len(frame) + 1, dtype=np.int64)  # "line k": the k-th row of the table
    return _readings(path, cells, header, columns, lines, False, codes, gauge_map, loads,
                     dict.fromkeys(loads, ""))


# a number that groups thousands with dots beside a decimal comma ("1.512,2", "12.345"): ambiguous
_GROUPED = re.compile(r"'-?\d{1,3}(?:\.\d{3})+(?:,\d*)?'")


def _raise(problems: list[str], name: str) -> None:
    grouped = [(p, m.group(0)) for p in problems if (m := _GROUPED.search(p))]
    if grouped:
        where = re.search(r" line \d+", grouped[0][0])
        raise ReadingsFormatError(
            f"{name}{where.group(0) if where else ''}: numbers such as {grouped[0][1]} group "
            "thousands with '.' beside decimal "
            f"commas ({len(grouped)} cell(s) in the file); the tool does not guess which is "
            "meant: export the log without thousands separators")
    problems = _by_row(problems)
    if problems:
        more = len(problems) - _MAX_PROBLEMS
        tail = [f"{name}: ... and {more} more problems like these"] if more > 0 else []
        raise ReadingsFormatError(*problems[:_MAX_PROBLEMS], *tail)


_CELL = re.compile(r"^(?P<where>.* line \d+), column (?P<column>[^:]*): (?P<what>.*)$")


def _by_row(problems: list[str]) -> list[str]:
    """One line per row: the cell problems of a row that has several are joined into one."""
    rows: dict[str, list[tuple[str, str]]] = {}
    for p in problems:
        if m := _CELL.match(p):
            rows.setdefault(m["where"], []).append((m["column"], m["what"].split(";")[0]))
    out, said = [], set()
    for p in problems:
        m = _CELL.match(p)
        if m is None or len(rows[m["where"]]) == 1:
            out.append(p)
        elif m["where"] not in said:
            said.add(m["where"])
            cells = "; ".join(f"column {c}: {w}" for c, w in rows[m["where"]])
            comment = " (a comment line? the file must hold only the header, an optional units " \
                      "row and data rows: delete it)" if "'#" in cells else ""
            out.append(f"{m['where']}: {len(rows[m['where']])} cells cannot be read ({cells})"
                       f"{comment}")
    return out


def _sentinel_sets(sentinels: Sequence[float | str]) -> tuple[NDArray[np.float64], frozenset[str]]:
    numeric, words = [], set()
    for item in sentinels:
        value = _number(item, False) if isinstance(item, str) else float(item)
        if value is not None and math.isfinite(value):
            numeric.append(value)
        else:
            words.add(str(item).strip().casefold())
    return np.array(numeric, dtype=float), frozenset(words)


def _decode(raw: bytes, name: str) -> str:
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff"):  # spreadsheet "Unicode text" exports
        try:
            text = raw.decode("utf-16")
        except UnicodeDecodeError:
            raise ReadingsFormatError(f"{name}: broken UTF-16 text; export as UTF-8 CSV") from None
    else:
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            text = raw.removeprefix(b"\xef\xbb\xbf").decode("latin-1")  # never fails
    if "\x00" in text:
        raise ReadingsFormatError(f"{name}: holds NUL bytes, so it is not CSV text; export as CSV")
    return text.lstrip("\ufeff")


def _text_lines(text: str) -> list[tuple[int, str]]:
    """Return (1-based line number, text) of the non-blank lines; \\r\\n, \\r and \\n end a line."""
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    return [(k + 1, t) for k, t in enumerate(lines) if t.strip()]


def _fields(line: str, sep: str, name: str, number: int) -> list[str]:
    if '"' not in line:
        return line.split(sep)
    if line.count('"') % 2:  # a quoted cell running on past the line end
        raise ReadingsFormatError(f"{name} line {number}: unbalanced quote; close or remove it")
    try:
        return next(csv.reader([line], delimiter=sep), [""])
    except csv.Error as exc:
        raise ReadingsFormatError(f"{name} line {number}: cannot split the row ({exc})") from None


def _columns(header: list[str], gauges: dict[str, str], loads: tuple[str, ...],
             name: str) -> tuple[dict[str, int], list[str]]:
    """Map step, sequence, each load and each gauge id to a column index; list every problem."""
    problems, columns = [], {}
    named = [h for h in header if h]
    have = ", ".join(named[:40]) + (", ..." if len(named) > 40 else "")
    wanted = [(_STEP, _STEP, "the load step number"), (_SEQUENCE, _SEQUENCE, None)]
    wanted += [(ld, ld, f"load {ld!r}") for ld in loads]
    wanted += [(g, c, f"gauge {g!r}") for g, c in gauges.items()]
    for n, (key, column, role) in enumerate(wanted):
        found = [j for j, h in enumerate(header) if (h.casefold() if n < 2 else h) == column]
        if len(found) == 1:
            columns[key] = found[0]
        elif found:
            problems.append(f"{name}: column {column!r} appears {len(found)} times in the header "
                            f"(columns {', '.join(str(j + 1) for j in found)}); rename the others")
        elif role is not None:
            # a name that differs only in case, spaces, '_' or '-' first, then difflib's nearest
            same = [h for h in named if _loose(h) == _loose(column)]
            close = same[:1] or difflib.get_close_matches(column, named, n=1)
            hint = f"closest name: {close[0]!r}" if close else "no similar name"
            problems.append(f"{name}: no column {column!r} for {role}; {hint}; "
                            f"the file has columns: {have}")
    repeated = [p for p in problems if " times in the header " in p]
    if repeated:  # the mapping of the other columns cannot be trusted before the header is fixed
        return columns, repeated
    missing = [g for g in gauges if g not in columns]
    if len(gauges) > 1 and len(missing) == len(gauges):
        listed = ", ".join(gauges.values()) if len(gauges) <= 6 else \
            ", ".join(list(gauges.values())[:5]) + ", ..."
        return columns, [f"{name}: none of the {len(gauges)} gauge channels ({listed}) is a column "
                         f"of this file, so it is not the readings of these gauges; check the "
                         f"readings file the study names; the file has columns: {have}"]
    keys = [_STEP, _SEQUENCE, *loads, *gauges]
    problems += [f"{name}: {k!r} names two of step, sequence, the loads and the gauge ids; give "
                 "each its own name" for k in sorted({k for k in keys if keys.count(k) > 1})]
    taken = [columns[k] for k in (_STEP, _SEQUENCE, *loads) if k in columns]
    if len(set(taken)) < len(taken):
        problems.append(f"{name}: one column serves as two of step, sequence and the loads")
    problems += [f"{name}: gauge {g!r} reads column {c!r}, which is the step, sequence or a load "
                 "column; map the gauge to its own channel"
                 for g, c in gauges.items() if columns.get(g, -1) in taken]
    if not gauges:
        problems.append(f"{name}: no gauges requested; map at least one gauge id to a column")
    return columns, problems


def _check_units(units: list[str], header: list[str], gauge_columns: list[int], line: int,
                 name: str) -> None:
    """Refuse a units row where a gauge column's unit is not microstrain (blank is accepted)."""
    _raise([f"{name} line {line}, column {header[j]}: unit {units[j].strip()!r} is not "
            f"microstrain; export the channel in µε (accepted: {', '.join(MICROSTRAIN_UNITS)})"
            for j in gauge_columns
            if units[j].strip() and _unit_key(units[j]) not in _MICROSTRAIN_KEYS], name)


def _pyarrow_available() -> bool:
    return importlib.util.find_spec("pyarrow") is not None


def _read_cells(text: str, sep: str, used: list[int], size: int, name: str,
                sentinels: NDArray[np.float64]) -> pd.DataFrame:
    """Read the data rows, all as wide as the header: one column per used column.

    Small files are read as text. Large ones go through pyarrow with type inference, so that
    columns of plain numbers arrive parsed (correctly rounded, like float()); a column with any
    other cell, a NaN (a blank cell or a NaN spelling, which must be told apart), an infinity or
    a numeric sentinel (whose text the flags quote) is read again as text for the text checks.
    """
    if size < _PYARROW_MIN_BYTES or not _pyarrow_available():
        return _read_text(text, sep, used, "c", str, name)
    cells = _read_text(text, sep, used, "pyarrow", None, name)

    def plain(column: pd.Series) -> bool:
        if column.dtype.kind in "iu":
            return not column.isin(sentinels).any()
        values = column.to_numpy()
        return column.dtype.kind == "f" and bool(np.isfinite(values).all()) and \
            not np.isin(values, sentinels).any()

    redo = [c for c in used if not plain(cells[c])]
    if redo:
        again = _read_text(text, sep, redo, "pyarrow", str, name)
        for c in redo:
            cells[c] = again[c]
    return cells


def _read_text(text: str, sep: str, used: list[int], engine: str, dtype: type | None,
               name: str) -> pd.DataFrame:
    with warnings.catch_warnings():
        warnings.simplefilter("error", pd.errors.ParserWarning)
        try:
            cells = pd.read_csv(io.StringIO(text), sep=sep, header=None, usecols=used,
                                dtype=dtype, keep_default_na=False, engine=engine)
        except (ValueError, pd.errors.ParserWarning) as exc:
            msg = f"{name}: cannot split the rows into columns ({str(exc)[:120]})"
            raise ReadingsFormatError(msg) from None
    if len(cells) != text.count("\n") or cells.shape[1] != len(used):
        raise ReadingsFormatError(f"{name}: rows do not match lines (a quoted cell over two "
                                  "lines?); export one row per line")
    cells.columns = used
    return cells


def _number(cell: object, decimal_comma: bool) -> float | None:
    text = str(cell).strip()
    try:
        return float(text.replace(",", ".") if decimal_comma else text)
    except ValueError:
        return None


class _Typed:
    """Text of typed cells (Parquet numbers), made only for the cells a message quotes."""

    def __init__(self, values: NDArray[np.float64]) -> None:
        self.values = values  # _convert blanks sentinels in a copy, so these stay as read

    def __getitem__(self, i: int) -> str:
        return "" if np.isnan(self.values[i]) else f"{self.values[i]:g}"


def _parse(cells: pd.Series, decimal_comma: bool) -> tuple[NDArray[np.float64], pd.Series | _Typed,
                                                         NDArray[np.bool_]]:
    """Return values (NaN where blank or not a number), stripped texts, not-a-number mask."""
    if _typed(cells):
        values = cells.to_numpy(dtype=float, na_value=np.nan, copy=True)
        return values, _Typed(values), np.zeros(len(values), dtype=bool)
    strings = cells.fillna("").astype(str).str.strip().reset_index(drop=True)
    clean = strings.str.replace(",", ".", regex=False) if decimal_comma else strings
    values = pd.to_numeric(clean, errors="coerce").to_numpy(dtype=float, na_value=np.nan, copy=True)
    return values, strings, np.isnan(values) & (strings != "").to_numpy(dtype=bool)


def _typed(column: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(column) and not pd.api.types.is_bool_dtype(column)


def _parse_columns(cells: pd.DataFrame, cols: list[int], decimal_comma: bool
                   ) -> dict[int, tuple[NDArray[np.float64], NDArray[np.object_] | _Typed,
                                        NDArray[np.bool_]]]:
    """:func:`_parse` of each column; the text columns in one pass (a wide file has thousands)."""
    out = {}
    text = []
    for c in dict.fromkeys(cols):
        if _typed(cells[c]):
            out[c] = _parse(cells[c], decimal_comma)
        else:
            text.append(c)
    if text:
        n = len(cells)
        flat = pd.Series(cells[text].to_numpy(dtype=object).ravel(order="F"))
        values, strings, bad = _parse(flat, decimal_comma)
        words = np.asarray(strings, dtype=object)
        for k, c in enumerate(text):
            part = slice(k * n, (k + 1) * n)
            out[c] = (values[part], words[part], bad[part])
    return out


def _convert(cells: pd.DataFrame, header: list[str], columns: dict[str, int],
             labels: list[tuple[str, int]], lines: NDArray[np.int64], decimal_comma: bool,
             codes: tuple[NDArray[np.float64], frozenset[str]],
             name: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Turn text cells into the readings table and the sentinel flags; raise on bad cells."""
    problems: list[tuple[int, int, str]] = []  # (row, column, message): sorted for the reader
    step = _integers(cells, columns[_STEP], header, lines, decimal_comma, name, problems)
    sequence = (_integers(cells, columns[_SEQUENCE], header, lines, decimal_comma, name, problems)
                if _SEQUENCE in columns else np.zeros(len(lines), np.int64))
    numeric, words = codes
    data, flags = {}, []
    parsed = _parse_columns(cells, [col for _, col in labels], decimal_comma)
    for label, col in labels:
        values, strings, bad = parsed[col]
        values = values.copy()
        for i in np.flatnonzero(bad):
            word = strings[i].casefold()
            value = _number(word, decimal_comma)  # float() reads NaN and inf spellings
            if word in words or set(word) == {"#"} or (value is not None and math.isnan(value)):
                flags.append((i, col, label, strings[i]))
            else:
                hint = ("a decimal comma in a comma-separated file; export with decimal points, or "
                        "separate the columns with semicolons"
                        if not decimal_comma and _DECIMAL_COMMA.fullmatch(strings[i])
                        else "correct the cell or list the text in sentinels")
                msg = (f"{name} line {lines[i]}, column {header[col]}: {strings[i][:40]!r} is not "
                       f"a number; {hint}")
                problems.append((i, col, msg))
        hit = np.isin(values, numeric) | np.isinf(values)
        flags += [(i, col, label, strings[i]) for i in np.flatnonzero(hit)]
        values[hit] = np.nan
        data[label] = values
    _raise([msg for *_, msg in sorted(problems)], name)
    _check_duplicates(step, sequence, lines, _SEQUENCE in columns, name)
    table = pd.DataFrame({_STEP: step, _SEQUENCE: sequence, **data})
    flag_table = pd.DataFrame([(label, step[i], sequence[i], text, "sentinel")
                               for i, _, label, text in sorted(flags)],
                              columns=["gauge", _STEP, _SEQUENCE, "value", "reason"])
    return table, flag_table.astype({_STEP: "int64", _SEQUENCE: "int64"})


def _integers(cells: pd.DataFrame, col: int, header: list[str], lines: NDArray[np.int64],
              decimal_comma: bool, name: str, problems: list[tuple[int, int, str]]
              ) -> NDArray[np.int64]:
    values, strings, _ = _parse(cells[col], decimal_comma)
    good = np.isfinite(values) & (np.abs(values) < 2.0**53)  # integers exact in a double
    good[good] = values[good] == np.round(values[good])
    for i in np.flatnonzero(~good):
        found = f"{strings[i][:40]!r} is not an integer" if strings[i] else "blank"
        msg = f"{name} line {lines[i]}, column {header[col]}: {found}; give every row an integer"
        problems.append((i, col, msg))
    return np.where(good, values, 0).astype(np.int64)


def _check_duplicates(step: NDArray[np.int64], sequence: NDArray[np.int64],
                      lines: NDArray[np.int64], has_sequence: bool, name: str) -> None:
    keys = pd.DataFrame({_SEQUENCE: sequence, _STEP: step, "line": lines})
    repeated = keys[keys.duplicated([_SEQUENCE, _STEP], keep=False)]
    _raise([f"{name}: step {stp}{f' in sequence {seq}' if has_sequence else ''} appears "
            f"{len(group)} times (lines {', '.join(map(str, group['line']))}); give each load "
            "step one row, and number repeated load runs in a 'sequence' column"
            for (seq, stp), group in repeated.groupby([_SEQUENCE, _STEP], sort=True)], name)


def _check_range(table: pd.DataFrame, gauge_columns: dict[str, str], lines: NDArray[np.int64],
                 name: str) -> None:
    """Refuse a gauge reading of :data:`GAUGE_RANGE_UE` or more in magnitude: no gauge reads it,
    and passed on it would come out of the quarter-bridge correction as a plausible number."""
    values = table[list(gauge_columns)].to_numpy(dtype=float)
    with np.errstate(invalid="ignore"):
        rows, cols = np.nonzero(np.abs(values) >= GAUGE_RANGE_UE)   # row by row
    columns = list(gauge_columns.values())
    _raise([f"{name} line {lines[i]}, column {columns[j]}: {values[i, j]:g} µε is beyond any "
            f"strain gauge's range ({GAUGE_RANGE_UE:g} µε is 100 % strain): an instrument's "
            "overrange code or not microstrain; list the value in [readings] sentinels or "
            "correct the cell" for i, j in zip(rows, cols, strict=True)], name)


def _warn_if_strain(table: pd.DataFrame, loads: tuple[str, ...], gauges: tuple[str, ...],
                    name: str) -> None:
    readings = np.abs(table[list(gauges)].to_numpy(dtype=float))
    readings = readings[np.isfinite(readings)]
    load_values = [v[np.isfinite(v)] for v in (table[ld].to_numpy(dtype=float) for ld in loads)]
    loads_vary = any(v.size and np.ptp(v) > 0 for v in load_values)
    if not (readings.size and loads_vary) or readings.max() >= PERCENT_LIMIT:
        return
    if readings.max() < STRAIN_LIMIT:
        msg = (f"{name}: every gauge reading is below {STRAIN_LIMIT} in magnitude (largest "
               f"|value| {readings.max():.3g}) while the loads vary; the channels look like "
               "strain, not microstrain: export in µε or multiply by 1e6")
    else:
        msg = (f"{name}: every gauge reading is below {PERCENT_LIMIT:g} in magnitude (largest "
               f"|value| {readings.max():.3g}) while the loads vary; the channels look like "
               "percent strain (1 % is 10,000 µε), not microstrain: export in µε or multiply "
               "by 10,000")
    warnings.warn(msg, CorrelateWarning, stacklevel=3)
