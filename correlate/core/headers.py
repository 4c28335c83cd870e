"""The header row of a CSV table as written: names given twice, rows longer than the header.

Stage: core. pandas renames a repeated column name ``x`` to ``x.1`` (the readers would then use
the first ``x`` without a word), and reads a file whose rows have one field more than the header
with the first column as its index (every value one column off), so the readers check the table
as the file gives it first (:func:`table_problems`) and read it with ``index_col=False``.
"""

from __future__ import annotations

import csv
from pathlib import Path

__all__ = ["header_of", "long_rows", "repeated_columns", "separator", "table_problems"]


def separator(path: Path) -> str:
    """``;`` for a table saved with semicolons (a spreadsheet where the comma is the decimal
    mark: its numbers then have decimal commas), else ``,``; judged on the header row."""
    with path.open(encoding="utf-8-sig", errors="replace") as f:
        head = f.readline()
    return ";" if head.count(";") > head.count(",") else ","


def header_of(path: Path, sep: str = ",") -> list[str]:
    """The names in the first row of a CSV file, stripped (a byte-order mark dropped)."""
    with path.open(encoding="utf-8-sig", errors="replace", newline="") as f:
        return [c.strip() for c in next(csv.reader(f, delimiter=sep), [])]


def repeated_columns(header: list[str], source: str) -> list[str]:
    """One line per non-blank column name the header gives more than once, naming the columns
    by position."""
    lines = []
    for name in dict.fromkeys(header):
        where = [j + 1 for j, h in enumerate(header) if h == name]
        if name and len(where) > 1:
            lines.append(f"{source}: column {name!r} appears {len(where)} times in the header "
                         f"(columns {', '.join(map(str, where))}); rename or remove the others")
    return lines


def long_rows(path: Path, sep: str, width: int, source: str) -> list[str]:
    """One line for the rows with more fields than the header's ``width`` (trailing empty
    fields, a spreadsheet's stray delimiters, do not count): the first three by line number."""
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


def table_problems(path: Path, source: str, sep: str = ",") -> list[str]:
    """Names the header gives twice and rows longer than the header, one line each."""
    header = header_of(path, sep)
    return repeated_columns(header, source) + long_rows(path, sep, len(header), source)
