"""The reviewer's tables of the report: what went in and how the run read it.

Stage: report. In: a :class:`~correlate.comparison.correlation.Correlation` (its study, steps, model
placement, statuses, flags and ``summary``). Out: rows of plain strings for the HTML template: the
document block, the load mapping, the material, the channel-health thresholds, the gauge map as
entered with where each gauge landed, the agreement statistics of ``summary.json`` and the flag
table. Nothing here computes a result: every number is one the run already holds.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from correlate.comparison.correlation import Correlation
from correlate.comparison.dispositions import PENDING, REVERSED_R2, reversed_band
from correlate.measurement.health import DEFAULTS

NOT_GIVEN = "not given"
DASH = "\u2013"

# [document] keys in the order of the block, with their labels
DOCUMENT_KEYS = (("number", "document number"), ("revision", "revision"),
                 ("prepared", "prepared by"), ("checked", "checked by"), ("approved", "approved by"))

HEALTH_MEANING = {
    "dead_ue": ("ue", "a gauge whose tared readings span less over the loaded steps is dead"),
    "rail_fraction": ("-", "a reading at this share of the gauge's range_ue or more is at the rail"),
    "drift_ue": ("ue", "a return-to-zero residual above max(drift_ue, drift_fraction x peak) drifts"),
    "drift_fraction": ("-", "see drift_ue"),
    "nonlinear_fraction": ("-", "RMS residual of the regression on the loads over the peak, above "
                                "which a gauge is non-linear"),
    "hysteresis_fraction": ("-", "|mean unloading - mean loading residual| over the peak, above "
                               "which a gauge shows hysteresis"),
    "noise_ue": ("ue", "residuals below this are channel noise, never a shape flag"),
    "min_points": ("steps", "with fewer valid steps the gauge-level checks are skipped"),
}


def num(value: Any, fmt: str = ".1f") -> str:
    """Format a number; a dash for None, NaN or text that is not a number."""
    if value is None or isinstance(value, bool):
        return DASH if value is None else str(value)
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    return DASH if not np.isfinite(x) else format(x, fmt)


def given(value: Any) -> str:
    """A free-text value, or "not given"."""
    if value is None:
        return NOT_GIVEN
    text = str(value).strip()
    return text or NOT_GIVEN


def document_block(corr: Correlation) -> list[tuple[str, str]]:
    """The [document] table as (label, value) pairs; a date follows its name ("not given" where
    absent)."""
    raw = corr.study.raw.get("document", {})
    doc = raw if isinstance(raw, dict) else {}
    rows = []
    for key, label in DOCUMENT_KEYS:
        value = given(doc.get(key))
        if key in ("prepared", "checked", "approved"):
            date = given(doc.get(f"{key}_date"))
            value += f", {date}" if date != NOT_GIVEN else (
                "" if value == NOT_GIVEN else ", date not given")
        rows.append((label, value))
    return rows


def running_text(corr: Correlation) -> dict[str, str]:
    """The running header and footer of a printed page (plain text, shortened)."""
    doc = dict(document_block(corr))
    header = f"Document {doc['document number']}, revision {doc['revision']}"
    footer = " \u00b7 ".join(f"{k.split()[0]}: {doc[k]}" for k in
                             ("prepared by", "checked by", "approved by"))
    return {"header": shorten(header, 90), "footer": shorten(footer, 120)}


def shorten(text: str, chars: int) -> str:
    text = " ".join(str(text).split())
    return text if len(text) <= chars else text[: chars - 3] + "..."


def load_mapping(corr: Correlation) -> list[dict[str, str]]:
    """Readings column -> FE case -> reference value, with the tared load and the case factor at
    the reference step."""
    study, steps, ref = corr.study, corr.steps, corr.reference
    units = corr.readings_info.get("load_units", {}) or {}
    cases = [c.name for c in study.cases]
    rows = []

    def tared(column: str) -> str:
        if column not in steps.load_names:
            return DASH
        return num(steps.loads[ref, steps.load_names.index(column)], ".4g")

    def factor(case: str) -> str:
        if steps.factors is None or case not in cases:
            return DASH
        return num(steps.factors[ref, cases.index(case)], ".4g")

    for ld in study.loads:
        rows.append({"column": ld.column, "unit": str(units.get(ld.column, "") or DASH),
                     "case": ld.case, "reference": num(ld.reference, ".6g"),
                     "tared": tared(ld.column), "factor": factor(ld.case),
                     "kind": "superposition: factor = tared load / reference"})
    for case in study.cases:
        if case.match and "column" in case.match:
            column = str(case.match["column"])
            at_one = {k: v for k, v in case.match.items() if k != "column"}
            rows.append({"column": column, "unit": str(units.get(column, "") or DASH),
                         "case": case.name,
                         "reference": ", ".join(f"{k} = {v}" for k, v in at_one.items()) or DASH,
                         "tared": tared(column), "factor": DASH,
                         "kind": "series: the FE state at this load, interpolated"})
    return rows


def material_rows(corr: Correlation) -> list[dict[str, str]]:
    """E, nu and the stress unit of each [material] (stresses of the rosettes, stress input)."""
    unit = str(corr.study.stress_unit or "unit of E")
    rows = []
    for m in corr.study.materials:
        rows.append({"E": num(m.E, ".6g"), "nu": num(m.nu, ".4g"), "unit": unit,
                     "blocks": "all" if m.blocks is None else ", ".join(map(str, m.blocks))})
    return rows


def health_rows(corr: Correlation) -> list[dict[str, str]]:
    """The channel-health thresholds the run used: the defaults merged with [health]."""
    study = corr.study
    rows = []
    for key, default in DEFAULTS.items():
        value = study.health.get(key, default)
        unit, meaning = HEALTH_MEANING.get(key, ("", ""))
        rows.append({"key": key, "value": num(value, "g"), "unit": unit,
                     "source": "study" if key in study.health else "default",
                     "meaning": meaning})
    low, high = reversed_band(study)
    rows.append({"key": "reversed_ratio", "value": num(-high, "g"), "unit": "-",
                 "source": "study" if "reversed_ratio" in study.health else "default",
                 "meaning": (f"a gauge whose measured/predicted ratio lies in [{low:g}, {high:g}] "
                             f"with R\u00b2 of at least {REVERSED_R2:g} is suspected reversed")})
    return rows


def _vector(x: Any, y: Any, z: Any) -> str:
    values = [float(v) for v in (x, y, z)]
    if not np.isfinite(values).all():
        return DASH
    # rounded first, so that -1e-16 prints as +0.000
    return "(" + ", ".join(f"{np.round(v, 3) + 0.0:+.3f}" for v in values) + ")"


def gauge_map_rows(corr: Correlation) -> list[dict[str, str]]:
    """The gauge map as entered, with the snap distance, the located element and its face normal,
    and each gauge's allowed difference at the reference step."""
    gauges = corr.model.gauges
    place = corr.model.operator.placement.table.set_index("gauge")
    allowed = corr.status.allowed[corr.reference]
    study = corr.study
    rows = []
    for j, g in enumerate(gauges.itertuples(index=False)):
        p = place.loc[g.gauge] if g.gauge in place.index else None
        pos_tol = g.position_tol if np.isfinite(_float(g.position_tol)) else study.position_tol
        ang_tol = g.angle_tol if np.isfinite(_float(g.angle_tol)) else study.angle_tol
        rows.append({
            "gauge": str(g.gauge), "arms": _text(getattr(g, "arms", "")),
            "xyz": _vector(g.x, g.y, g.z),
            "direction": _vector(g.dir_x, g.dir_y, g.dir_z),
            "length": num(g.length, "g"), "kt": num(g.kt, "g"),
            "rosette": str(g.rosette or ""),
            "tolerances": f"{num(pos_tol, 'g')} / {num(ang_tol, 'g')}",
            "snap": DASH if p is None else num(np.round(p["snap_distance"], 3) + 0.0, ".3f"),
            "element": DASH if p is None else f"{int(p['element'])} ({p['cell_type']})",
            "normal": DASH if p is None else _vector(p["normal_x"], p["normal_y"], p["normal_z"]),
            "face": "" if p is None else str(p.get("face", "") or ""),
            "allowed": num(allowed[j], ".1f"),
        })
    return rows


def _text(value: Any) -> str:
    """A text cell ('' for a blank or NaN one)."""
    return value if isinstance(value, str) else ""


def _float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return float("nan")


def statistics(summary: dict[str, Any]) -> dict[str, Any]:
    """Concordance, Bland-Altman limits, the load-path check and the most influential gauges, as
    ``summary.json`` holds them."""
    metrics = summary.get("metrics", {}) or {}
    out: dict[str, Any] = {"ccc": num(metrics.get("concordance"), ".4f"),
                           "ccc_source": str(metrics.get("concordance_source", "")),
                           "ba_source": str(metrics.get("bland_altman_source", "")), "ba": []}
    for key, label, fmt, unit in (("bland_altman_reference", "difference", ".1f", "ue"),
                                  ("bland_altman_reference_relative", "relative difference",
                                   ".3f", "-")):
        ba = metrics.get(key)
        if isinstance(ba, dict):
            out["ba"].append({"label": label, "unit": unit, "bias": num(ba.get("bias"), fmt),
                              "sd": num(ba.get("sd"), fmt), "low": num(ba.get("loa_low"), fmt),
                              "high": num(ba.get("loa_high"), fmt), "n": num(ba.get("n"), "g")})
    checks = summary.get("load_checks", {}) or {}
    errors = checks.get("standard_errors", {}) or {}
    out["load_checks"] = [{"path": str(k), "factor": num(v, ".4f"),
                           "se": num(errors.get(k), ".2g")}
                          for k, v in (checks.get("factors", {}) or {}).items()]
    out["load_check_notes"] = [
        f"RMS difference {num(checks.get('rms_before_ue'))} ue with one ratio for all loads, "
        f"{num(checks.get('rms_after_ue'))} ue with one factor per load path "
        f"({num(checks.get('n_pairs'), 'g')} gauge-step pairs)" if checks else ""]
    for key, label in (("swapped_loads", "loads that fit better swapped"),
                       ("load_sign", "loads that fit better with the sign reversed")):
        if checks.get(key):
            out["load_check_notes"].append(f"{label}: {', '.join(map(str, checks[key]))}")
    out["load_check_notes"] = [n for n in out["load_check_notes"] if n]
    out["load_check_note"] = str(checks.get("note", ""))
    influence = sorted(summary.get("influence", []) or [], key=lambda r: r.get("rank", 0))
    out["influence"] = [{"rank": num(r.get("rank"), "g"), "gauge": str(r.get("gauge", "")),
                         "cooks_d": num(r.get("cooks_d"), ".3f"),
                         "student": num(r.get("max_abs_student"), ".2f")}
                        for r in influence[:INFLUENTIAL]]
    return out


INFLUENTIAL = 5   # gauges listed as the most influential on the fit


def flag_rows(corr: Correlation) -> list[dict[str, str]]:
    """Every flag with the tool's reason, the analyst's action and reason, who and when, the
    figure before and after, and its state: a disposed flag stays, shown as disposed."""
    rows = []
    for _, f in corr.flags.iterrows():
        step = f.get("step")
        whole = step is None or (isinstance(step, int | float | np.integer | np.floating)
                                 and (not np.isfinite(step) or int(step) == -1))
        scope = "all steps" if whole else f"step {int(step)}, sequence {int(f['sequence'])}"
        action = _text(f.get("action"))
        disposition = _text(f.get("disposition"))
        if action:
            state, css = f"disposed ({action})", "disposed"
        elif disposition == PENDING:
            state, css = "open: needs a disposition", "open"
        elif str(f.get("drops", "")) == "none":
            state, css = "noted (the readings stay in the fit)", "noted"
        else:
            state, css = "removed by the health checks", "noted"
        rows.append({"gauge": str(f["gauge"]), "scope": scope, "flag": str(f["flag"]),
                     "reason": _text(f.get("reason")), "disposition": disposition,
                     "action": action or DASH, "by": _text(f.get("by")) or DASH,
                     "date": _text(f.get("date")) or DASH,
                     "before": num(f.get("value"), ".4g"), "after": num(f.get("value_after"), ".4g"),
                     "state": state, "css": css})
    return rows


def _text(value: Any) -> str:
    """A text cell of the flag table; NaN and None are empty."""
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return ""
    return str(value).strip()
