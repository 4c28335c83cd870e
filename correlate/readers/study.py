"""Study file: read and validate the TOML study into frozen records.

Stage: input. In: a study file path. Out: :class:`Study`. Paths in the study are relative to it.
Unknown keys are refused with the nearest valid key suggested; every problem is reported at once.
The records themselves are in :mod:`correlate.readers.records` (imported here too).
"""

from __future__ import annotations

import difflib
import tomllib
import warnings
from pathlib import Path
from typing import Any

from correlate.core.errors import CorrelateWarning, StudyError
from correlate.core.units import LENGTH_UNITS
from correlate.readers._values import boolean as _boolean
from correlate.readers._values import number as _number
from correlate.readers._values import path as _path
from correlate.readers._values import unknown_keys as _unknown_keys
from correlate.readers.bridge_map import BRIDGE_KEYS, parse_bridge_tables
from correlate.readers.chain_study import LOT_KEYS, THERMAL_KEYS, parse_case_thermal, parse_chain
from correlate.readers.fullfield_study import FULLFIELD_KEYS, fullfield_table
from correlate.readers.records import Case, Criteria, Load, Material, Override, Study
from correlate.readers.uncertainty_tables import (
    NUMERICAL_KEYS,
    UNCERTAINTY_KEYS,
    numerical_table,
    uncertainty_table,
    variant_problems,
)

# The keys each table accepts. Free-text tables ([test], [model] description keys) accept any key.
SCHEMA: dict[str, set[str]] = {
    "": {"title", "model", "case", "material", "gauges", "test", "readings", "load", "criteria",
         "override", "health", "report", "document", "gauge_lot", "thermal", "uncertainty",
         "numerical", "bridge", "fullfield"},
    "model": {"file", "length_unit", "stress_unit", "plane", "revision", "description", "solver",
              "element", "mesh_size", "materials", "thickness", "kind"},
    "case": {"name", "strain", "displacement", "stress", "components", "shear", "time_index", "file",
             "average", "axes", "check_stress", "check_displacement", "match", "thermal"},
    "material": {"E", "nu", "blocks", "name"},
    "gauges": {"file", "position_tol", "angle_tol", "snap_tol", "calibration_poisson", "grid_points",
               "band", "nonlinearity"},
    "readings": {"file", "zero", "zero_tol", "sentinels", "kt_corrected", "order"},
    "load": {"column", "case", "reference"},
    "criteria": {"relative", "absolute_ue", "slope", "pass_fraction", "min_healthy_fraction"},
    "override": {"gauge", "action", "reason", "by", "date"},
    "health": {"dead_ue", "rail_fraction", "drift_ue", "drift_fraction", "nonlinear_fraction",
               "hysteresis_fraction", "noise_ue", "reversed_ratio", "min_points"},
    "report": {"steps", "views", "title"},
    "document": {"number", "revision", "prepared", "checked", "approved", "prepared_date",
                 "checked_date", "approved_date"},
    "gauge_lot": LOT_KEYS,
    "thermal": THERMAL_KEYS,
    "uncertainty": UNCERTAINTY_KEYS,
    "numerical": NUMERICAL_KEYS,
    "bridge": BRIDGE_KEYS,
    "fullfield": FULLFIELD_KEYS,
}
FREE_TEXT = {"test"}
ABSOLUTE_UE_MAX = 10_000.0   # microstrain: a pass floor above 1 % strain is no floor
FIELD_KINDS = ("strain", "displacement", "stress")


def _table(raw: dict[str, Any], key: str) -> dict[str, Any]:
    """The table ``key``, or {} when absent or of another shape (already reported as a problem)."""
    value = raw.get(key, {})
    return value if isinstance(value, dict) else {}


def _tables(raw: dict[str, Any], key: str) -> list[dict[str, Any]]:
    """The array of tables ``key`` (one table counts as one); items of another shape dropped."""
    value = raw.get(key, [])
    items = [value] if isinstance(value, dict) else value if isinstance(value, list) else []
    return [item for item in items if isinstance(item, dict)]


def _read_case(raw: dict[str, Any], i: int, base: Path, name: str, problems: list[str]) -> Case | None:
    where = f"[[case]] #{i + 1}"
    _unknown_keys(where, raw, SCHEMA["case"], problems, name)
    case_name = raw.get("name")
    if not isinstance(case_name, str) or not case_name:
        problems.append(f"{name}: {where} has no name; add name = \"...\"")
        return None
    where = f"[[case]] '{case_name}'"
    kinds = [k for k in FIELD_KINDS if k in raw]
    if len(kinds) != 1:
        found = ", ".join(kinds) if kinds else "none"
        problems.append(f"{name}: {where} needs exactly one of strain / displacement / stress "
                        f"(an array name); found {found}")
        return None
    kind = kinds[0]
    array = raw[kind]
    if isinstance(array, dict):
        bad = set(array) - {"top", "bottom"}
        if bad or not all(isinstance(v, str) for v in array.values()):
            problems.append(f"{name}: {where} {kind} table takes top = \"...\" and bottom = \"...\"")
            return None
    elif not isinstance(array, str):
        problems.append(f"{name}: {where} {kind} must be an array name or {{ top = ..., bottom = ... }}")
        return None
    shear = raw.get("shear", "engineering")
    if shear not in ("engineering", "tensor"):
        problems.append(f"{name}: {where} shear = '{shear}'; expected 'engineering' or 'tensor'")
    components = raw.get("components")
    if components is not None:
        if not (isinstance(components, list) and len(components) in (3, 6, 9)
                and all(isinstance(c, str) for c in components)):
            problems.append(f"{name}: {where} components must list 3, 6 or 9 names such as \"xx\"")
            components = None
        else:
            from correlate.mechanics.tensors import _pair
            for c in components:
                try:
                    _pair(c)
                except ValueError as exc:
                    problems.append(f"{name}: {where} {exc}")
            repeated = sorted({c for c in components if components.count(c) > 1})
            if repeated:
                problems.append(f"{name}: {where} components name {', '.join(repeated)} more than "
                                "once; each component must appear once, in the array's order")
            components = tuple(components)
    time_index = raw.get("time_index")
    if time_index is not None:
        ok = (isinstance(time_index, int) and not isinstance(time_index, bool) and time_index >= 0) \
            or time_index == "all" \
            or (isinstance(time_index, list) and len(time_index) == 2
                and all(isinstance(t, int) for t in time_index))
        if not ok:
            problems.append(f"{name}: {where} time_index = {time_index!r}; expected a step number counted "
                            "from 0, \"all\", or [first, last]")
        if ok and isinstance(time_index, list):
            time_index = (time_index[0], time_index[1])
    average = raw.get("average", "cell")
    if average not in ("cell", "nodal"):
        problems.append(f"{name}: {where} average = '{average}'; expected 'cell' or 'nodal'")
    for key in ("axes", "check_stress", "check_displacement"):
        if key in raw and not (isinstance(raw[key], str) and raw[key]):
            problems.append(f"{name}: {where} {key} = {raw[key]!r}; expected an array name")
    file = _path(base, raw["file"], where, name, problems) if "file" in raw else None
    thermal = parse_case_thermal(raw, where, name, kind, problems)
    return Case(name=case_name, kind=kind, array=array, components=components, shear=shear,
                time_index=time_index, file=file, average=average, axes=raw.get("axes"),
                check_stress=raw.get("check_stress"),
                check_displacement=raw.get("check_displacement"), match=raw.get("match"),
                thermal=thermal)


def _check_tables(raw: dict[str, Any], name: str, problems: list[str]) -> None:
    """Unknown keys at the top and in each table, tables of the wrong shape."""
    _unknown_keys("the top level", raw, SCHEMA[""], problems, name)
    for section, allowed in SCHEMA.items():
        if not section or section not in raw:
            continue
        items = raw[section] if isinstance(raw[section], list) else [raw[section]]
        for item in items:
            if not isinstance(item, dict):
                problems.append(f"{name}: [{section}] must be a table")
            elif section not in ("case",):
                _unknown_keys(f"[{section}]", item, allowed, problems, name)
    if "test" in raw and not isinstance(raw["test"], dict):
        problems.append(f"{name}: [test] must be a table of free-text entries")


def _model(raw: dict[str, Any], base: Path, name: str, problems: list[str]
           ) -> tuple[dict[str, Any], Path | None, Any, Any]:
    """[model]: the table, its file, length unit and plane."""
    model = raw.get("model")
    if not isinstance(model, dict):
        problems.append(f"{name}: the [model] table is missing; it needs file = \"...\" and length_unit")
        model = {}
    model_file = _path(base, model.get("file"), "[model]", name, problems) if model else None
    length_unit = model.get("length_unit")
    if length_unit is None:
        problems.append(f"{name}: [model] length_unit is missing; give one of {', '.join(LENGTH_UNITS)}")
    elif not isinstance(length_unit, str) or length_unit not in LENGTH_UNITS:
        problems.append(f"{name}: [model] length_unit = '{length_unit}' is not known; "
                        f"expected one of {', '.join(LENGTH_UNITS)}")
    plane = model.get("plane")
    if plane is not None and plane not in ("stress", "strain"):
        problems.append(f"{name}: [model] plane = '{plane}'; expected \"stress\" or \"strain\"")
    if model.get("kind", "solid") not in ("solid", "shell", "plane"):
        problems.append(f"{name}: [model] kind = {model['kind']!r}; expected \"solid\", \"shell\" "
                        "or \"plane\"")
    return model, model_file, length_unit, plane


def _cases(raw: dict[str, Any], base: Path, name: str, problems: list[str]
           ) -> tuple[list[Case], set[str]]:
    """[[case]]: every case, and the names declared (valid or not)."""
    raw_cases = _tables(raw, "case")
    if not raw_cases:
        problems.append(f"{name}: no [[case]] given; add one per FE load case with name and an array")
    cases = []
    # names of every [[case]] that has one, valid or not: a [[load]] naming an invalid case is
    # reported once, at the case, not again at the load
    declared = {c["name"] for c in raw_cases if isinstance(c.get("name"), str)}
    for i, raw_case in enumerate(raw_cases):
        if isinstance(raw_case, dict) and (c := _read_case(raw_case, i, base, name, problems)):
            cases.append(c)
    seen: set[str] = set()
    for c in cases:
        if c.name in seen:
            problems.append(f"{name}: case name '{c.name}' is used twice; names must be unique")
        seen.add(c.name)
    return cases, declared


def _materials(raw: dict[str, Any], cases: list[Case], name: str, problems: list[str]
               ) -> list[Material]:
    """[material] (one, or one per cell block)."""
    materials = []
    for m in _tables(raw, "material"):
        E = _number(m, "E", None, "[material]", name, problems, positive=True)
        nu = _number(m, "nu", None, "[material]", name, problems)
        if E is None or nu is None:
            problems.append(f"{name}: [material] needs E and nu")
            continue
        if not -1.0 < nu < 0.5:
            problems.append(f"{name}: [material] nu = {nu} is outside (-1, 0.5)")
        blocks = m.get("blocks")
        if blocks is not None and not (isinstance(blocks, list) and all(
                isinstance(b, int) and not isinstance(b, bool) for b in blocks)):
            problems.append(f"{name}: [material] blocks = {blocks!r}; expected a list of cell "
                            "block numbers such as [0, 2]")
            continue
        materials.append(Material(E=E, nu=nu, blocks=tuple(blocks) if blocks is not None else None))
    if any(c.kind == "stress" for c in cases) and not materials:
        problems.append(f"{name}: a case gives stress, so [material] E and nu are needed to convert it "
                        "to strain")
    return materials


def _gauges(raw: dict[str, Any], base: Path, name: str, problems: list[str]) -> dict[str, Any]:
    """[gauges]: the map file and the placement settings."""
    gauges = raw.get("gauges")
    if not isinstance(gauges, dict):
        problems.append(f"{name}: the [gauges] table is missing; it needs file = \"gauges.csv\"")
        gauges = {}
    gauges_file = _path(base, gauges.get("file"), "[gauges]", name, problems) if gauges else None
    position_tol = _number(gauges, "position_tol", 1.0, "[gauges]", name, problems)
    angle_tol = _number(gauges, "angle_tol", 2.0, "[gauges]", name, problems)
    snap_tol = _number(gauges, "snap_tol", position_tol or None, "[gauges]", name, problems,
                       positive=True)  # None: 1 % of the model size, decided when it is read
    nu0 = _number(gauges, "calibration_poisson", 0.285, "[gauges]", name, problems)
    for key, value in (("position_tol", position_tol), ("angle_tol", angle_tol)):
        if value is not None and value < 0:
            problems.append(f"{name}: [gauges] {key} = {value:g} is negative; give 0 or more")
    if nu0 is not None and not 0 <= nu0 < 0.5:
        problems.append(f"{name}: [gauges] calibration_poisson = {nu0:g} is outside [0, 0.5), the "
                        "range of Poisson's ratio of a calibration material (0.285 is usual); a "
                        "percentage or a misplaced decimal point?")
    grid_points = gauges.get("grid_points", 5)
    if isinstance(grid_points, bool) or not isinstance(grid_points, int) \
            or not 1 <= grid_points <= 20:
        problems.append(f"{name}: [gauges] grid_points = {grid_points!r}; expected a whole number 1 to 20")
        grid_points = 5
    return {"gauges_file": gauges_file, "position_tol": position_tol or 0.0,
            "angle_tol": angle_tol or 0.0, "snap_tol": snap_tol,
            "calibration_poisson": nu0 if nu0 is not None else 0.285,
            "grid_points": grid_points,
            "band": _boolean(gauges, "band", True, "[gauges]", name, problems)}


def _readings(raw: dict[str, Any], base: Path, name: str, problems: list[str]
              ) -> dict[str, Any]:
    """[readings]: the file and the tare rule."""
    readings = _table(raw, "readings")
    readings_file = _path(base, readings.get("file"), "[readings]", name, problems) \
        if readings else None
    zero = readings.get("zero", "first")
    if zero not in ("first", "zero-load", "none"):
        problems.append(f"{name}: [readings] zero = '{zero}'; expected \"first\", \"zero-load\" or \"none\"")
    zero_tol = _number(readings, "zero_tol", 0.01, "[readings]", name, problems)
    if zero_tol is not None and not 0 <= zero_tol < 1:
        problems.append(f"{name}: [readings] zero_tol = {zero_tol:g}; expected a fraction of each "
                        "load's peak from 0 to below 1 (0.01 for 1 %)")
    return {"readings_file": readings_file, "zero": zero,
            "zero_tol": zero_tol if zero_tol is not None else 0.01,
            "kt_corrected": _boolean(readings, "kt_corrected", False, "[readings]", name,
                                     problems),
            "newest_first": _order(readings, name, problems)}


def _order(readings: dict[str, Any], name: str, problems: list[str]) -> bool:
    order = readings.get("order", "oldest-first")
    if order not in ("oldest-first", "newest-first"):
        problems.append(f"{name}: [readings] order = {order!r}; expected \"oldest-first\" (the "
                        "default) or \"newest-first\"")
    return order == "newest-first"


def _loads(raw: dict[str, Any], cases: list[Case], declared: set[str], name: str,
           problems: list[str]) -> list[Load]:
    """[[load]]: load column -> case -> reference value."""
    loads = []
    case_names = {c.name for c in cases}
    for i, ld in enumerate(_tables(raw, "load")):
        column, case = ld.get("column"), ld.get("case")
        ref = _number(ld, "reference", None, f"[[load]] #{i + 1}", name, problems)
        if not isinstance(column, str) or not isinstance(case, str) or ref is None:
            label = f"[[load]] #{i + 1}" + (f" ('{column}')" if isinstance(column, str) else "")
            missing = [k for k in ("column", "case", "reference") if k not in ld]
            if missing:
                problems.append(f"{name}: {label} has no {', '.join(missing)}; each [[load]] needs "
                                "column, case and reference")
            elif not isinstance(column, str) or not isinstance(case, str):
                problems.append(f"{name}: {label}: column and case must be text (names in quotes)")
            continue
        if ref == 0:
            problems.append(f"{name}: [[load]] '{column}' reference = 0; give the value of {column} "
                            f"that case '{case}' was solved for")
            continue
        if case not in case_names | declared:
            near = difflib.get_close_matches(case, sorted(case_names), n=1)
            hint = f"; did you mean '{near[0]}'?" if near else ""
            problems.append(f"{name}: [[load]] '{column}' names case '{case}', which is not a [[case]] "
                            f"(cases: {', '.join(sorted(case_names))}){hint}")
        if any(ld.column == column and ld.case == case for ld in loads):
            problems.append(f"{name}: [[load]] column '{column}' -> case '{case}' is given twice, "
                            "so it would be summed twice; remove the copy")
            continue
        loads.append(Load(column=column, case=case, reference=ref))
    return loads


def _warn_loads(loads: list[Load], cases: list[Case], name: str) -> None:
    """Warn of a superposed case that several load columns drive (added once per column):
    usually a case name slip in one of them."""
    if not loads:   # a study for `predict` only
        return
    driven: dict[str, list[str]] = {}
    for ld in loads:
        driven.setdefault(ld.case, []).append(ld.column)
    for case in cases:
        if case.is_series:   # matched to the readings by load, not superposed
            continue
        columns = driven.get(case.name, [])
        if len(columns) > 1:   # none: refused by `run` and `check` (correlation.require_loads)
            warnings.warn(f"{name}: case '{case.name}' is driven by {len(columns)} load columns "
                          f"({', '.join(columns)}), so the model readings add it once per "
                          "column; if a column was meant for another case, correct its [[load]] "
                          "case", CorrelateWarning, stacklevel=3)


def _criteria(raw: dict[str, Any], name: str, problems: list[str]) -> Criteria:
    """[criteria]: the pass rule and the verdict's thresholds."""
    crit = _table(raw, "criteria")
    slope = crit.get("slope", [0.90, 1.10])
    if not (isinstance(slope, list) and len(slope) == 2
            and all(isinstance(v, int | float) and not isinstance(v, bool) for v in slope)
            and slope[0] < slope[1]):
        problems.append(f"{name}: [criteria] slope = {slope!r}; expected [low, high]")
        slope = [0.90, 1.10]
    # a value of 0 is a choice (no relative term, no floor): keep it, never fall back to a default
    relative = _number(crit, "relative", 0.10, "[criteria]", name, problems)
    absolute_ue = _number(crit, "absolute_ue", 50.0, "[criteria]", name, problems)
    pass_fraction = _number(crit, "pass_fraction", 0.90, "[criteria]", name, problems)
    for key, value in (("relative", relative), ("absolute_ue", absolute_ue)):
        if value is not None and value < 0:
            problems.append(f"{name}: [criteria] {key} = {value:g} is negative; give 0 or more")
    if relative == 0 and absolute_ue == 0:
        problems.append(f"{name}: [criteria] relative and absolute_ue are both 0, so no gauge "
                        "could pass; give at least one of them")
    if pass_fraction is not None and not 0 < pass_fraction <= 1:
        problems.append(f"{name}: [criteria] pass_fraction = {pass_fraction:g}; expected a "
                        "fraction above 0 and at most 1 (0.9 for 90 %)")
    if relative is not None and relative >= 1:
        problems.append(f"{name}: [criteria] relative = {relative:g} is 100 % or more of the "
                        "predicted reading; it is a fraction: for 10 % write relative = 0.10")
    if absolute_ue is not None and absolute_ue > ABSOLUTE_UE_MAX:
        problems.append(f"{name}: [criteria] absolute_ue = {absolute_ue:g} microstrain is above "
                        f"{ABSOLUTE_UE_MAX:g} (1 % strain), which is no floor; give it in "
                        "microstrain, e.g. 50")
    if "slope" in crit and not slope[0] < 1 < slope[1]:
        problems.append(f"{name}: [criteria] slope = {slope!r} does not contain 1 (a model that "
                        "predicts exactly); give [low, high] around 1, e.g. [0.9, 1.1]")
    min_healthy = _number(crit, "min_healthy_fraction", 0.80, "[criteria]", name, problems)
    if min_healthy is not None and not 0 < min_healthy <= 1:
        problems.append(f"{name}: [criteria] min_healthy_fraction = {min_healthy:g}; expected a "
                        "fraction above 0 and at most 1 (0.8 for 80 %)")
    return Criteria(
        relative=0.10 if relative is None else relative,
        absolute_ue=50.0 if absolute_ue is None else absolute_ue,
        slope=(float(slope[0]), float(slope[1])),
        pass_fraction=0.90 if pass_fraction is None else pass_fraction,
        min_healthy_fraction=0.80 if min_healthy is None else min_healthy)


def _sentinels_and_health(raw: dict[str, Any], name: str, problems: list[str]
                          ) -> tuple[Any, dict[str, Any]]:
    """[readings] sentinels and the [health] thresholds."""
    sentinels = _table(raw, "readings").get("sentinels")
    if sentinels is not None and not (isinstance(sentinels, list) and all(
            isinstance(v, int | float | str) and not isinstance(v, bool) for v in sentinels)):
        problems.append(f"{name}: [readings] sentinels = {sentinels!r}; expected a list of numbers "
                        "and words, such as [-999999, \"OVER\"]")
        sentinels = None
    health = _table(raw, "health")
    for key, value in health.items():
        if isinstance(value, bool) or not isinstance(value, int | float):
            problems.append(f"{name}: [health] {key} = {value!r} is not a number")
    return sentinels, health


def _overrides(raw: dict[str, Any], name: str, problems: list[str]) -> list[Override]:
    """[[override]]: the analyst's dispositions of flags."""
    overrides = []
    for o in _tables(raw, "override"):
        action = o.get("action")
        if action not in ("keep", "exclude", "reverse"):
            problems.append(f"{name}: [[override]] for gauge '{o.get('gauge')}' action = {action!r}; "
                            "expected keep, exclude or reverse")
            continue
        if not isinstance(o.get("gauge"), str) or not o["gauge"]:
            problems.append(f"{name}: [[override]] with action = '{action}' names no gauge; add "
                            "gauge = \"...\"")
            continue
        if not o.get("reason"):
            problems.append(f"{name}: [[override]] for gauge '{o.get('gauge')}' needs a reason")
            continue
        overrides.append(Override(gauge=str(o.get("gauge")), action=action, reason=str(o["reason"]),
                                  by=str(o.get("by", "")), date=str(o.get("date", ""))))
    by_gauge: dict[str, list[str]] = {}
    for o in overrides:
        by_gauge.setdefault(o.gauge, []).append(o.action)
    for gauge, actions in by_gauge.items():
        if len(actions) != len(set(actions)) or ("exclude" in actions and len(actions) > 1):
            problems.append(f"{name}: [[override]] for gauge '{gauge}' gives {', '.join(actions)}; "
                            "they conflict (exclude goes alone, and each action once): keep one "
                            "disposition per flag")
    return overrides


def parse_study(text: str, path: Path) -> Study:
    """Validate a study given as TOML text; ``path`` locates the files it names.

    Each section is read by its own function, which appends one line per problem; every problem
    is reported at once.
    """
    name = path.name
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StudyError(f"{name}: not valid TOML: {exc}; fix the syntax at that line") from None
    base = path.parent
    problems: list[str] = []
    _check_tables(raw, name, problems)
    model, model_file, length_unit, plane = _model(raw, base, name, problems)
    cases, declared = _cases(raw, base, name, problems)
    materials = _materials(raw, cases, name, problems)
    gauges = _gauges(raw, base, name, problems)
    readings = _readings(raw, base, name, problems)
    loads = _loads(raw, cases, declared, name, problems)
    criteria = _criteria(raw, name, problems)
    sentinels, health = _sentinels_and_health(raw, name, problems)
    overrides = _overrides(raw, name, problems)
    chain = parse_chain(raw, name, problems)
    bridge_tables = parse_bridge_tables(raw, name, problems)
    uncertainty = uncertainty_table(raw, base, name, problems, band=gauges["band"])
    variant_problems(uncertainty, cases, name, problems)
    numerical = numerical_table(raw, base, name, problems, cases)
    fullfield = fullfield_table(raw, base, name, problems)
    if problems:
        raise StudyError(*problems)
    _warn_loads(loads, cases, name)
    info = {k: v for k, v in model.items() if k not in ("file", "length_unit", "stress_unit", "plane")}
    return Study(
        path=path, title=str(raw.get("title", path.stem)), model_file=model_file,  # type: ignore[arg-type]
        length_unit=length_unit, stress_unit=model.get("stress_unit"), plane=plane, model_info=info,
        cases=tuple(cases), materials=tuple(materials), **gauges, test=dict(_table(raw, "test")),
        **readings, sentinels=tuple(sentinels) if sentinels is not None else None,
        loads=tuple(loads), criteria=criteria, criteria_given="criteria" in raw,
        overrides=tuple(overrides), health=dict(health), report=dict(_table(raw, "report")),
        raw=raw, chain=chain, uncertainty=uncertainty, numerical=numerical,
        bridge_tables=bridge_tables, fullfield=fullfield)


def read_study(path: str | Path) -> Study:
    """Read and validate a study file.

    Raises
    ------
    StudyError
        With one line per problem: syntax (with line number), unknown keys (nearest valid key),
        missing files and keys.
    """
    path = Path(path).resolve()
    if path.is_dir():
        raise StudyError(f"'{path}' is a folder; give the path of the study file (.toml) in it")
    if not path.is_file():
        raise StudyError(f"study file '{path}' does not exist; give the path to a .toml study")
    try:
        text = path.read_text(encoding="utf-8-sig")   # a byte-order mark is dropped
    except UnicodeDecodeError:
        raise StudyError(f"{path.name}: not UTF-8 text; save the study as UTF-8") from None
    return parse_study(text, path)


__all__ = ["SCHEMA", "Case", "Criteria", "Load", "Material", "Override", "Study", "parse_study",
           "read_study"]
