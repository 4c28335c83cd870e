"""Study tables of the measurement chain: ``[[gauge_lot]]``, ``[thermal]``, ``[gauges] nonlinearity``.

Stage: readers. In: the study file as parsed TOML. Out: :class:`ChainSettings` (with its
:class:`GaugeLot` records); one problem line per bad value, with strict types (a number in quotes
is refused) and physical ranges. :func:`correlate.readers.study.parse_study` calls
:func:`parse_chain`.
"""

from __future__ import annotations

import math
from typing import Any

from correlate.readers.records import CaseThermal, ChainSettings, GaugeLot

CASE_THERMAL_KEYS = {"temperature", "alpha", "reference_C"}
_ALPHA_LIMIT = 1e-3   # 1/degC: engineering materials lie within 0 .. 5e-5; 1e-3 is a unit slip
LOT_KEYS = {"name", "thermal_output", "gauge_factor", "gauge_factor_tc", "reference_C", "range_C"}
THERMAL_KEYS = {"column"}
NONLINEARITY = ("", "none", "quarter-bridge")
_ABSOLUTE_ZERO_C = -273.15
_TC_LIMIT = 10.0   # % per 100 degC: foil alloys lie within about +-1.5 (from memory), 10 is a typo


def parse_chain(raw: dict[str, Any], name: str, problems: list[str]) -> ChainSettings:
    """Read the measurement-chain tables of a study; append one line per problem.

    Parameters
    ----------
    raw : dict
        The study as parsed TOML.
    name : str
        The study file's name, for the messages.
    problems : list of str
        Problem lines, appended to.

    Returns
    -------
    ChainSettings
        Empty (``used`` False) when the study has none of the keys.
    """
    lots: dict[str, GaugeLot] = {}
    items = raw.get("gauge_lot", [])
    for i, item in enumerate(items if isinstance(items, list) else [items]):
        lot = _lot(item, i, name, problems)
        if lot is not None and lot.name in lots:
            problems.append(f"{name}: [[gauge_lot]] '{lot.name}' is defined twice; give each lot "
                            "one table")
        elif lot is not None:
            lots[lot.name] = lot
    thermal = raw.get("thermal", {})
    column = None
    if isinstance(thermal, dict) and "column" in thermal:
        column = thermal["column"]
        if not isinstance(column, str) or not column.strip():
            problems.append(f"{name}: [thermal] column = {column!r}; expected the name of the "
                            "readings column holding the gauge temperature in degC")
            column = None
        else:
            column = column.strip()
    gauges = raw.get("gauges", {})
    nonlinearity = gauges.get("nonlinearity", "") if isinstance(gauges, dict) else ""
    if nonlinearity not in NONLINEARITY:
        problems.append(f"{name}: [gauges] nonlinearity = {nonlinearity!r}; expected "
                        "\"quarter-bridge\" (constant-voltage quarter bridges) or \"none\"")
        nonlinearity = ""
    return ChainSettings(lots=lots, thermal_column=column,
                         nonlinearity="" if nonlinearity == "none" else nonlinearity)


def parse_case_thermal(raw: dict[str, Any], where: str, name: str, kind: str,
                       problems: list[str]) -> CaseThermal | None:
    """A case's ``thermal = { temperature, alpha, reference_C }``, or None when absent.

    Appends one line per problem: a key missing or unknown, a number in quotes, an ``alpha``
    that is not per degC, a stress case (its strain from Hooke's law is mechanical already).
    """
    if "thermal" not in raw:
        return None
    table = raw["thermal"]
    if not isinstance(table, dict):
        problems.append(f"{name}: {where} thermal = {table!r}; expected {{ temperature = \"T\", "
                        "alpha = 23e-6, reference_C = 20.0 }")
        return None
    before = len(problems)
    for key in table:
        if key not in CASE_THERMAL_KEYS:
            problems.append(f"{name}: {where} thermal: unknown key '{key}'; valid keys: "
                            f"{', '.join(sorted(CASE_THERMAL_KEYS))}")
    array = table.get("temperature")
    if not isinstance(array, str) or not array.strip():
        problems.append(f"{name}: {where} thermal temperature = {array!r}; expected the name of "
                        "the model's temperature array")
    for key in ("alpha", "reference_C"):
        if key not in table:
            problems.append(f"{name}: {where} thermal needs {key} ("
                            + ("the gauged material's expansion coefficient per degC, e.g. 23e-6"
                               if key == "alpha" else "the model's stress-free temperature in "
                               "degC") + ")")
    alpha = _value(table, "alpha", None, f"{where} thermal", name, problems, low=0.0,
                   high=_ALPHA_LIMIT)
    ref = _value(table, "reference_C", None, f"{where} thermal", name, problems,
                 low=_ABSOLUTE_ZERO_C, high=5000.0)
    if kind == "stress":
        problems.append(f"{name}: {where} is a stress case: the strain from Hooke's law is "
                        "mechanical already; remove thermal or give the total strain array")
    if len(problems) > before:
        return None
    return CaseThermal(temperature=array.strip(), alpha=float(alpha), reference_C=float(ref))  # type: ignore[arg-type,union-attr]


def _lot(item: Any, i: int, name: str, problems: list[str]) -> GaugeLot | None:
    """One [[gauge_lot]] table, or None when it has a problem (reported)."""
    if not isinstance(item, dict):  # reported with the study's table shapes
        return None
    lot = item.get("name")
    if not isinstance(lot, str) or not lot.strip():
        problems.append(f"{name}: [[gauge_lot]] #{i + 1} has no name; add name = \"...\" (the "
                        "gauge map's lot column refers to it)")
        return None
    where = f"[[gauge_lot]] '{lot.strip()}'"
    before = len(problems)
    coefficients = item.get("thermal_output")
    if not (isinstance(coefficients, list) and 1 <= len(coefficients) <= 5
            and all(_real(c) for c in coefficients)):
        problems.append(f"{name}: {where} thermal_output = {coefficients!r}; expected a list of "
                        "1 to 5 numbers a0 .. a4 (microstrain against degC, from the data sheet)")
    gf = _value(item, "gauge_factor", None, where, name, problems, low=0.1, high=200.0)
    if "gauge_factor" not in item:
        problems.append(f"{name}: {where} needs gauge_factor (the lot's gauge factor at "
                        "reference_C, about 2 for foil gauges)")
    tc = _value(item, "gauge_factor_tc", None, where, name, problems, low=-_TC_LIMIT,
                high=_TC_LIMIT)
    ref = _value(item, "reference_C", 24.0, where, name, problems, low=_ABSOLUTE_ZERO_C,
                 high=1000.0)
    span = item.get("range_C")
    if not (isinstance(span, list) and len(span) == 2 and all(_real(v) for v in span)
            and _ABSOLUTE_ZERO_C < span[0] < span[1]):
        problems.append(f"{name}: {where} range_C = {span!r}; expected [low, high] in degC with "
                        "low < high, the temperatures the data sheet's curve covers (a reading "
                        "outside them is refused, never extrapolated)")
    if len(problems) > before:
        return None
    return GaugeLot(name=lot.strip(), thermal_output=tuple(float(c) for c in coefficients),
                    gauge_factor=float(gf), range_C=(float(span[0]), float(span[1])),  # type: ignore[index,arg-type]
                    gauge_factor_tc=tc, reference_C=float(ref))  # type: ignore[arg-type]


def _real(value: Any) -> bool:
    """A finite TOML number (a boolean or a string is not)."""
    return (not isinstance(value, bool) and isinstance(value, int | float)
            and math.isfinite(value))


def _value(table: dict[str, Any], key: str, default: float | None, where: str, name: str,
           problems: list[str], *, low: float, high: float) -> float | None:
    """A finite number within [low, high], or ``default`` when absent."""
    if key not in table:
        return default
    value = table[key]
    if not _real(value):
        quoted = "; write it without quotes" if isinstance(value, str) else ""
        problems.append(f"{name}: {where} {key} = {value!r} is not a finite number{quoted}")
        return default
    if not low <= value <= high:
        problems.append(f"{name}: {where} {key} = {value:g} is outside [{low:g}, {high:g}]; "
                        "check the data sheet's value and unit")
        return default
    return float(value)


__all__ = ["CASE_THERMAL_KEYS", "LOT_KEYS", "NONLINEARITY", "THERMAL_KEYS", "parse_case_thermal",
           "parse_chain"]
