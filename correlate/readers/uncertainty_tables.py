"""The ``[uncertainty]`` and ``[numerical]`` study tables: the validation budget's inputs.

Stage: readers. In: the study's parsed TOML (``raw``), its folder and the list of problems being
gathered. Out: an :class:`~correlate.readers.records.Uncertainty` and a
:class:`~correlate.readers.records.Numerical` record (None when the table is absent), with one
problem line per bad key, naming the table and the key.

Every uncertainty is a standard uncertainty (one standard deviation). Relative ones are fractions
(0.0058 for 0.58 %), so a value of 0.5 or more is refused with the percentage hint.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from correlate.readers._values import boolean, number, path, unknown_keys
from correlate.readers.records import Case, GridMesh, Numerical, UncertainInput, Uncertainty

UNCERTAINTY_KEYS = {"coverage", "gauge_factor", "transverse", "daq_ue", "daq_relative", "load",
                    "placement", "input"}
INPUT_KEYS = {"name", "relative", "exponent", "variant", "step"}
NUMERICAL_KEYS = {"h", "meshes", "formal_order"}
MESH_KEYS = {"file", "h"}
RELATIVE_MAX = 0.5     # a relative standard uncertainty of 50 % or more is a percentage typed in
KT_U_MAX = 0.1         # u(Kt) at or above 0.1 (10 %) is a percentage typed in (common practice)
DAQ_UE_MAX = 10_000.0  # microstrain: 1 % strain is no acquisition uncertainty
COVERAGE_MAX = 10.0    # k above 10 is no coverage factor (k = 2 is usual, about 95 %)
MAX_MESHES = 2         # coarser meshes beside the study's own: the GCI uses three at most


def _bounded(table: dict[str, Any], key: str, where: str, name: str, problems: list[str],
             high: float, what: str) -> float:
    """A number in [0, high): 0 when absent; one problem line when out of range."""
    value = number(table, key, 0.0, where, name, problems)
    if value is None:
        return 0.0
    if value < 0:
        problems.append(f"{name}: {where} {key} = {value:g} is negative; a standard uncertainty "
                        "is 0 or more")
        return 0.0
    if value >= high:
        problems.append(f"{name}: {where} {key} = {value:g} is too large for {what}; "
                        + ("it is a fraction: for 1 % write 0.01" if high <= 1 else
                           f"give less than {high:g}"))
        return 0.0
    return value


def _given(raw: dict[str, Any], key: str) -> dict[str, Any] | None:
    """The table ``key``; None when absent or not a table (the study's table check says so)."""
    table = raw.get(key)
    return table if isinstance(table, dict) else None


def _input(item: dict[str, Any], i: int, base: Path, name: str, problems: list[str],
           seen: set[str]) -> UncertainInput | None:
    where = f"[[uncertainty.input]] #{i + 1}"
    unknown_keys(where, item, INPUT_KEYS, problems, name)
    label = item.get("name")
    if not isinstance(label, str) or not label.strip():
        problems.append(f"{name}: {where} has no name; add name = \"...\" (such as \"E\")")
        return None
    where = f"[[uncertainty.input]] '{label}'"
    if label in seen or label == "load":
        why = "is given twice" if label in seen else "is the name of [uncertainty] load"
        problems.append(f"{name}: {where} {why}; give each input one entry and its own name")
        return None
    seen.add(label)
    if "relative" not in item:
        problems.append(f"{name}: {where} needs relative = ... (its relative standard "
                        "uncertainty, 0.02 for 2 %)")
    relative = _bounded(item, "relative", where, name, problems, RELATIVE_MAX,
                        "a relative standard uncertainty")
    by_exponent = "exponent" in item
    by_variant = "variant" in item or "step" in item
    if by_exponent == by_variant:
        problems.append(f"{name}: {where} needs either exponent = ... or variant = \"file\" with "
                        "step = ...; found " + ("both" if by_exponent else "neither"))
        return None
    if by_exponent:
        exponent = number(item, "exponent", None, where, name, problems)
        return UncertainInput(name=label, relative=relative, exponent=exponent) \
            if exponent is not None else None
    if "variant" not in item or "step" not in item:
        missing = "variant" if "variant" not in item else "step"
        problems.append(f"{name}: {where} gives {'step' if missing == 'variant' else 'variant'} "
                        f"without {missing}; a variant needs both (the file and its relative "
                        "change of the input)")
        return None
    step = number(item, "step", None, where, name, problems)
    if step is not None and not (step != 0 and abs(step) < 1):
        problems.append(f"{name}: {where} step = {step:g}; expected the relative change of the "
                        "input in the variant, non-zero and below 1 in size (0.05 for +5 %)")
        step = None
    variant = path(base, item["variant"], f"{where} variant", name, problems)
    if step is None or variant is None:
        return None
    return UncertainInput(name=label, relative=relative, variant=variant, step=step)


def uncertainty_table(raw: dict[str, Any], base: Path, name: str, problems: list[str], *,
                      band: bool) -> Uncertainty | None:
    """``[uncertainty]``: None when absent; ``band`` is the study's ``[gauges] band``."""
    table = _given(raw, "uncertainty")
    if table is None:
        return None
    where = "[uncertainty]"
    coverage = number(table, "coverage", 2.0, where, name, problems, positive=True)
    if coverage is not None and coverage > COVERAGE_MAX:
        problems.append(f"{name}: {where} coverage = {coverage:g} is no coverage factor; give k, "
                        "such as 2.0 (about 95 % for a normal distribution)")
        coverage = None
    relative = "a relative standard uncertainty"
    values = {key: _bounded(table, key, where, name, problems, RELATIVE_MAX, relative)
              for key in ("gauge_factor", "daq_relative", "load")}
    values["transverse"] = _bounded(table, "transverse", where, name, problems, KT_U_MAX,
                                    "a standard uncertainty of Kt")
    values["daq_ue"] = _bounded(table, "daq_ue", where, name, problems, DAQ_UE_MAX,
                                "an acquisition uncertainty in microstrain")
    placement = boolean(table, "placement", False, where, name, problems)
    if placement and not band:
        problems.append(f"{name}: {where} placement = true needs the placement band; remove "
                        "[gauges] band = false, or set placement = false")
    items = table.get("input", [])
    if not isinstance(items, list) or not all(isinstance(v, dict) for v in items):
        problems.append(f"{name}: {where} input must be tables [[uncertainty.input]] with name, "
                        "relative and exponent (or variant and step)")
        items = []
    seen: set[str] = set()
    inputs = [_input(item, i, base, name, problems, seen) for i, item in enumerate(items)]
    return Uncertainty(coverage=2.0 if coverage is None else coverage, placement=placement,
                       inputs=tuple(v for v in inputs if v is not None), **values)


def _mesh(item: Any, i: int, base: Path, name: str, problems: list[str]) -> GridMesh | None:
    where = f"[numerical] meshes #{i + 1}"
    if not isinstance(item, dict):
        problems.append(f"{name}: {where} must be a table {{ file = \"...\", h = ... }}")
        return None
    unknown_keys(where, item, MESH_KEYS, problems, name)
    file = path(base, item.get("file"), where, name, problems)
    if "h" not in item:
        problems.append(f"{name}: {where} needs h = ... (its element size)")
    h = number(item, "h", None, where, name, problems, positive=True)
    return GridMesh(file=file, h=h) if file is not None and h is not None else None


def numerical_table(raw: dict[str, Any], base: Path, name: str, problems: list[str],
                    cases: list[Case]) -> Numerical | None:
    """``[numerical]``: None when absent; the meshes come back finest first."""
    table = _given(raw, "numerical")
    if table is None:
        return None
    where = "[numerical]"
    if "uncertainty" not in raw:
        problems.append(f"{name}: {where} feeds the validation budget, which needs an "
                        "[uncertainty] table; add [uncertainty] (at least coverage = 2.0)")
    if "h" not in table:
        problems.append(f"{name}: {where} needs h = ... (the element size of the study's model)")
    h = number(table, "h", None, where, name, problems, positive=True)
    formal = number(table, "formal_order", 2.0, where, name, problems, positive=True)
    if formal is not None and formal > 10:
        problems.append(f"{name}: {where} formal_order = {formal:g}; expected the order of the "
                        "discretisation, such as 2 for quadratic elements")
        formal = None
    items = table.get("meshes")
    if not isinstance(items, list) or not 1 <= len(items) <= MAX_MESHES:
        problems.append(f"{name}: {where} meshes must list one or two coarser meshes such as "
                        "[ { file = \"coarse.vtu\", h = 4.0 } ]")
        items = []
    meshes = [m for m in (_mesh(item, i, base, name, problems) for i, item in enumerate(items))
              if m is not None]
    sizes = [m.h for m in meshes]
    if h is not None and any(s <= h for s in sizes):
        problems.append(f"{name}: {where} meshes must be coarser than the study's model "
                        f"(h = {h:g}); found h = {min(sizes):g}")
    if len(set(sizes)) != len(sizes):
        problems.append(f"{name}: {where} meshes give the same h twice; each mesh needs its own "
                        "element size")
    _one_file_per_mesh(cases, name, problems, where)
    if h is None or formal is None or len(meshes) != len(items) or problems:
        return None  # the study is refused with its problems; no record is needed
    return Numerical(h=h, meshes=tuple(sorted(meshes, key=lambda m: m.h)), formal_order=formal)


def _one_file_per_mesh(cases: list[Case], name: str, problems: list[str], where: str) -> None:
    """A coarser mesh (or an input variant) stands for the model file of every case."""
    own = [c.name for c in cases if c.file is not None]
    if own:
        problems.append(f"{name}: {where} case '{own[0]}' reads its own file; a coarser mesh or "
                        "input variant replaces the model file for every case, so give the "
                        "cases' arrays in the model file (no case file = ...)")


def variant_problems(uncertainty: Uncertainty | None, cases: list[Case], name: str,
                     problems: list[str]) -> None:
    """Input variants, like coarser meshes, need every case in the model file."""
    if uncertainty is not None and any(v.variant is not None for v in uncertainty.inputs):
        _one_file_per_mesh(cases, name, problems, "[[uncertainty.input]] variant:")


__all__ = ["numerical_table", "uncertainty_table", "variant_problems"]
