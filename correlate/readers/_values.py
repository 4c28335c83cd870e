"""Strict values of a study table: numbers, booleans, paths and unknown keys, one problem line each.

Stage: readers. Shared by :mod:`correlate.readers.study` and the tables read beside it
(:mod:`correlate.readers.uncertainty_tables`); each helper appends to ``problems`` and never raises.
"""

from __future__ import annotations

import difflib
import math
from pathlib import Path
from typing import Any


def unknown_keys(where: str, table: dict[str, Any], allowed: set[str], problems: list[str],
                  name: str) -> None:
    for key in table:
        if key not in allowed:
            near = difflib.get_close_matches(key, sorted(allowed), n=1)
            hint = f"; did you mean '{near[0]}'?" if near else f"; valid keys: {', '.join(sorted(allowed))}"
            problems.append(f"{name}: unknown key '{key}' in {where}{hint}")


def number(table: dict[str, Any], key: str, default: float | None, where: str, name: str,
            problems: list[str], *, positive: bool = False) -> float | None:
    value = table.get(key, default)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float):
        hint = ""
        if isinstance(value, str):
            try:
                float(value)
                hint = "; write it without quotes"
            except ValueError:
                hint = "; give a number"
        problems.append(f"{name}: {where} {key} = {value!r} is not a number{hint}")
        return default
    if not math.isfinite(value):
        problems.append(f"{name}: {where} {key} = {value} is not a finite number")
        return default
    if positive and value <= 0:
        problems.append(f"{name}: {where} {key} = {value} must be greater than zero")
        return default
    return float(value)


def boolean(table: dict[str, Any], key: str, default: bool, where: str, name: str,
             problems: list[str]) -> bool:
    """A true/false key, strictly: a string such as "false" is never read as a boolean."""
    value = table.get(key, default)
    if isinstance(value, bool):
        return value
    problems.append(f"{name}: {where} {key} = {value!r} is not true or false; write {key} = true "
                    "or false, without quotes")
    return default


def path(base: Path, value: Any, where: str, name: str, problems: list[str],
          *, must_exist: bool = True) -> Path | None:
    if not isinstance(value, str) or not value:
        problems.append(f"{name}: {where} file is missing; give the path relative to the study file")
        return None
    try:
        path = (base / value).resolve()
    except (RuntimeError, OSError):  # Python 3.11 raises RuntimeError on a symbolic-link loop
        problems.append(f"{name}: {where} file '{value}' is a symbolic link that loops back on "
                        "itself; point it at the real file")
        return None
    if must_exist and not path.exists():
        problems.append(f"{name}: {where} file '{value}' does not exist (looked for {path})")
    return path
