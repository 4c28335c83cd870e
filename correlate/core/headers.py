"""A CSV table read as a spreadsheet saves it, with the faults of its shape named.

Stage: core. Comma- or semicolon-separated (the latter with decimal commas, as a spreadsheet
saves it where the comma is the decimal mark), a byte-order mark dropped. pandas renames a
repeated column name ``x`` to ``x.1`` (a reader would then use the first ``x`` without a word),
and reads a file whose rows have one field more than the header with the first column as its
index (every value one column off): :func:`read_csv_table` reads with ``index_col=False`` and
names both faults, one line each. Rows longer than the header are looked for line by line only
when pandas says the lengths disagree, so a well-formed table is parsed once.
"""

from __future__ import annotations

import csv
import warnings
from pathlib import Path
from typing import Any

import pandas as pd

__all__ = ["read_csv_table"]


def read_csv_table(path: Path, source: str, **options: Any
                   ) -> tuple[pd.DataFrame, str, list[str]]:
    """The table, its separator (``,`` or ``;``) and the problems of its shape (names the
    header gives twice, rows with more fields than the header), one line each.

    ``options`` go to :func:`pandas.read_csv`; its parse errors propagate for the caller to word.
    Empty fields a spreadsheet leaves at the line ends are no extra column.
    """
    with path.open(encoding="utf-8-sig", errors="replace", newline="") as f:
        first = f.readline()
    sep = ";" if first.count(";") > first.count(",") else ","
    header = [c.strip() for c in next(csv.reader([first], delimiter=sep), [])]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", pd.errors.ParserWarning)
        table = pd.read_csv(path, sep=sep, decimal="," if sep == ";" else ".",
                            skipinitialspace=True, encoding="utf-8-sig", index_col=False,
                            **options)
    lengths_differ = False
    for w in caught:   # pandas' note that rows are longer than the header; the rest as raised
        if issubclass(w.category, pd.errors.ParserWarning):
            lengths_differ = True
        else:
            warnings.warn_explicit(w.message, w.category, w.filename, w.lineno)
    problems = _repeated(header, source)
    if lengths_differ:
        problems += _long_rows(path, sep, len(header), source)
    return table, sep, problems


def _repeated(header: list[str], source: str) -> list[str]:
    """One line per non-blank column name the header gives more than once."""
    lines = []
    for name in dict.fromkeys(header):
        where = [j + 1 for j, h in enumerate(header) if h == name]
        if name and len(where) > 1:
            lines.append(f"{source}: column {name!r} appears {len(where)} times in the header "
                         f"(columns {', '.join(map(str, where))}); rename or remove the others")
    return lines


def _long_rows(path: Path, sep: str, width: int, source: str) -> list[str]:
    """One line for the rows with more fields than the header's ``width`` (trailing empty
    fields do not count): the first three by line number."""
    with path.open(encoding="utf-8-sig", errors="replace", newline="") as f:
        reader = csv.reader(f, delimiter=sep)
        next(reader, None)
        long = []
        for row in reader:
            while row and not row[-1].strip():
                row.pop()
            if len(row) > width:
                long.append((reader.line_num, len(row)))
    if not long:
        return []
    shown = ", ".join(f"line {n} has {k}" for n, k in long[:3])
    more = f" and {len(long) - 3} more rows" if len(long) > 3 else ""
    return [f"{source}: {len(long)} row(s) have more fields than the header's {width} "
            f"({shown}{more}); remove the extra delimiters or name the extra columns in the header"]
