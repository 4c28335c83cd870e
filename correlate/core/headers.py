"""The header row of a CSV table as written, and the column names it gives more than once.

Stage: core. pandas renames a repeated column name ``x`` to ``x.1`` and the tables' readers
would then use the first ``x`` without a word, so the readers check the header as the file
gives it first.
"""

from __future__ import annotations

import csv
from collections.abc import Collection
from pathlib import Path

__all__ = ["header_of", "repeated_columns"]


def header_of(path: Path, sep: str = ",") -> list[str]:
    """The names in the first row of a CSV file, stripped (a byte-order mark dropped)."""
    with path.open(encoding="utf-8-sig", errors="replace", newline="") as f:
        return [c.strip() for c in next(csv.reader(f, delimiter=sep), [])]


def repeated_columns(header: list[str], source: str,
                     only: Collection[str] | None = None) -> list[str]:
    """One line per non-blank column name the header gives more than once (of ``only``, the
    names the reader uses, when given), naming the columns by position."""
    lines = []
    for name in dict.fromkeys(header):
        where = [j + 1 for j, h in enumerate(header) if h == name]
        if name and len(where) > 1 and (only is None or name in only):
            lines.append(f"{source}: column {name!r} appears {len(where)} times in the header "
                         f"(columns {', '.join(map(str, where))}); rename or remove the others")
    return lines
