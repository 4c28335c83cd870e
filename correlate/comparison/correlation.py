"""The `run` command: the whole correlation from a study to the output folder.

Stage: orchestration of readings -> tare -> model readings for the test loads -> channel health ->
statuses -> statistics -> rosettes -> diagnosis -> outputs. The maths lives in the stage modules.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import os
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate._version import __version__
from correlate.core import progress
from correlate.core.errors import StudyError
from correlate.core.folders import check_target, sha256, staged_folder, write_csv, write_json
from correlate.core.units import MICROSTRAIN
from correlate.measurement.tare import Steps, make_steps, reference_step, status_table
from correlate.model_readings.model import Model, band_limits, case_rows, prepare
from correlate.readers.study import Study, read_study

REVERSED_BAND = (-1.5, -0.5)   # per-gauge ratio taken as reversed polarity (common practice)
REVERSED_R2 = 0.9


@dataclass
class Correlation:
    """Everything a run computed; the report and the outputs read from it."""

    study: Study
    model: Model
    steps: Steps
    gauges: list[str]
    measured: NDArray[np.float64]        # (s, g) tared, corrected, microstrain
    predicted: NDArray[np.float64]       # (s, g) microstrain
    predicted_axial: NDArray[np.float64]  # (s, g) true grid-averaged strain, microstrain
    band_low: NDArray[np.float64]
    band_high: NDArray[np.float64]
    contributions: NDArray[np.float64]   # (s, g, C)
    status: dict[str, NDArray]
    flags: pd.DataFrame
    gauge_table: pd.DataFrame            # gauges.csv
    per_gauge: pd.DataFrame
    rosettes: pd.DataFrame
    diagnoses: pd.DataFrame
    summary: dict[str, Any]
    readings_info: dict[str, Any] = field(default_factory=dict)
    rows_by_case: dict[str, dict[str, NDArray]] = field(default_factory=dict)


def _pause(stage: str) -> None:
    """Test hook: CORRELATE_PAUSE_AT=stage sleeps there so a test can kill the run."""
    if os.environ.get("CORRELATE_PAUSE_AT") == stage:
        time.sleep(float(os.environ.get("CORRELATE_PAUSE_SECONDS", "30")))


def read_test_data(study: Study, gauges_df: pd.DataFrame) -> tuple[Any, Steps, tuple[str, ...]]:
    """Read the readings file and tare the steps (also used by `check`)."""
    from correlate.readers.readings import read_readings

    names = gauges_df["gauge"].tolist()
    for o in study.overrides:
        if o.gauge not in names:
            raise StudyError(f"{study.path.name}: [[override]] names gauge '{o.gauge}', which is not "
                             "in the gauge map")
    matched = [c.match["column"] for c in study.cases if c.match and "column" in c.match]
    load_cols = tuple(dict.fromkeys([ld.column for ld in study.loads] + matched))
    readings = read_readings(study.readings_file, gauges=_gauge_channel_map(gauges_df),
                             loads=load_cols, sentinels=study.sentinels)
    steps = make_steps(readings.table, load_cols, study.loads, [c.name for c in study.cases],
                       rule=study.zero, zero_tol=study.zero_tol,
                       source=Path(readings.path).name)
    return readings, steps, load_cols


def _gauge_channel_map(gauges: pd.DataFrame) -> dict[str, str]:
    return {g: (c or g) for g, c in zip(gauges["gauge"], gauges["channel"], strict=True)}


def _scale_factors(gauges: pd.DataFrame, study: Study) -> NDArray[np.float64]:
    """Per-gauge multiplier: daq/gauge factor rescale, polarity as wired, reverse overrides."""
    gf = gauges["gauge_factor"].to_numpy(dtype=float)
    daq = gauges["daq_gauge_factor"].to_numpy(dtype=float)
    scale = np.where(np.isfinite(gf) & np.isfinite(daq), daq / gf, 1.0)
    scale = scale * gauges["polarity"].fillna(1.0).to_numpy(dtype=float)
    for o in study.overrides:
        if o.action == "reverse":
            scale[gauges["gauge"].tolist().index(o.gauge)] *= -1.0
    return scale


def _reversed(measured: NDArray, predicted: NDArray, ok: NDArray) -> tuple[NDArray, NDArray]:
    """Per-gauge ratio and R^2 of measured against predicted (through the origin)."""
    g = measured.shape[1]
    k = np.full(g, np.nan)
    r2 = np.full(g, np.nan)
    for j in range(g):
        m, p = measured[ok[:, j], j], predicted[ok[:, j], j]
        if len(m) >= 2 and np.dot(p, p) > 0:
            k[j] = np.dot(m, p) / np.dot(p, p)
            ss = np.sum((m - m.mean()) ** 2)
            r2[j] = 1 - np.sum((m - k[j] * p) ** 2) / ss if ss > 0 else np.nan
    return k, r2


def correlate_study(study: Study, model: Model | None = None) -> Correlation:
    """Run the correlation of a study; nothing is written."""
    from correlate.measurement.health import assess_channels, load_direction

    matched = [c.match["column"] for c in study.cases if c.match and "column" in c.match]
    if study.readings_file is None or not (study.loads or matched):
        raise StudyError(f"{study.path.name}: run needs [readings] file = \"...\" and at least one "
                         "[[load]] mapping a load column to a case; use predict for model "
                         "readings alone")
    model = model or prepare(study)
    gauges_df = model.gauges
    names = gauges_df["gauge"].tolist()
    with progress.step("reading the test data"):
        readings, steps, load_cols = read_test_data(study, gauges_df)
    table = readings.table
    case_names = [c.name for c in study.cases]
    _pause("readings")

    raw = table[names].to_numpy(dtype=float) * _scale_factors(gauges_df, study)[None, :]
    tare_src = np.where(np.isnan(raw), 0.0, raw)
    from correlate.measurement.tare import apply_tare
    measured = apply_tare(tare_src, steps.tare, steps.sequence)
    measured[np.isnan(raw)] = np.nan
    # a missing tare value leaves the whole sequence of that gauge untared: refuse to guess
    for seq in np.unique(steps.sequence):
        t = np.flatnonzero(steps.tare & (steps.sequence == seq))
        if len(t):
            bad = np.isnan(raw[t[0]])
            measured[np.ix_(steps.sequence == seq, bad)] = np.nan

    # model rows per case, combined with the step factors, then the band
    op = model.operator
    rows_by_case = {}
    series = [c for c in study.cases if c.time_index == "all" or isinstance(c.time_index, tuple)]
    for case in progress.bar([c for c in study.cases if c not in series],
                             desc="evaluating the cases"):
        rows_by_case[case.name] = case_rows(model, case, case.time_index
                                            if isinstance(case.time_index, int) else None)
    key = "axial" if study.kt_corrected else "indicated"
    n_rows = len(op.row_kind)
    R = np.stack([rows_by_case[c][key] if c in rows_by_case else np.zeros(n_rows)
                  for c in case_names], axis=1)                               # (rows, C)
    R_axial = np.stack([rows_by_case[c]["axial"] if c in rows_by_case else np.zeros(n_rows)
                        for c in case_names], axis=1)
    combined = R @ steps.factors.T * MICROSTRAIN                              # (rows, s)
    combined_axial = R_axial @ steps.factors.T * MICROSTRAIN
    nominal = op.row_kind == 0
    contributions = steps.factors[:, None, :] * R[nominal][None, :, :] * MICROSTRAIN
    not_modelled = np.zeros(len(steps.step), dtype=bool)
    for case in series:
        add, add_axial, modelled = _series_rows(study, model, case, steps, load_cols, key)
        combined += np.nan_to_num(add)
        combined_axial += np.nan_to_num(add_axial)
        contributions[:, :, case_names.index(case.name)] = np.nan_to_num(add[nominal]).T
        not_modelled |= ~modelled
    predicted = combined[nominal].T                                           # (s, g)
    axial = combined_axial[nominal].T
    low, high = band_limits(op, combined)
    _pause("model")

    # channel health
    direction = load_direction(steps.loads, steps.sequence, tol=study.zero_tol)
    flags = assess_channels(
        measured, gauges=names, loads=steps.loads, steps=steps.step, sequence=steps.sequence,
        tare=steps.tare, zero_load=steps.zero_load, direction=direction,
        range_ue=gauges_df["range_ue"].to_numpy(dtype=float),
        thresholds={**study.health})
    if len(readings.flags):
        sent = readings.flags[readings.flags["gauge"].isin(names)]
        extra = pd.DataFrame({"gauge": sent["gauge"], "step": sent["step"],
                              "sequence": sent["sequence"], "flag": "sentinel",
                              "value": sent["value"].astype(str), "threshold": np.nan,
                              "scope": "step", "drops": "step",
                              "reason": "open or overranged channel value " + sent["value"].astype(str)})
        flags = pd.concat([extra, flags], ignore_index=True)  # a sentinel says more than "missing"
    flags["disposition"] = ""
    gidx = {g: j for j, g in enumerate(names)}
    s_count, g_count = measured.shape
    dropped_steps = np.zeros((s_count, g_count), dtype=bool)
    dropped_gauges = np.zeros(g_count, dtype=bool)
    flag_text = np.full((s_count, g_count), "", dtype=object)
    keep = {o.gauge: o for o in study.overrides if o.action == "keep"}
    exclude = {o.gauge: o for o in study.overrides if o.action == "exclude"}
    step_index = {(int(s), int(q)): i for i, (s, q) in enumerate(zip(steps.step, steps.sequence,
                                                                       strict=True))}
    for i, f in flags.iterrows():
        j = gidx[f["gauge"]]
        if f["gauge"] in keep and f["drops"] == "gauge":
            flags.at[i, "disposition"] = f"kept: {keep[f['gauge']].reason}"
            continue
        if f["drops"] == "gauge":
            dropped_gauges[j] = True
            flag_text[:, j] = np.where(flag_text[:, j] == "", f["flag"], flag_text[:, j])
        elif f["drops"] == "step":
            k = step_index.get((int(f["step"]), int(f["sequence"])))
            if k is not None:
                dropped_steps[k, j] = True
                flag_text[k, j] = flag_text[k, j] or f["flag"]
    for g, o in exclude.items():
        j = gidx[g]
        dropped_gauges[j] = True
        flag_text[:, j] = "excluded"
        flags.loc[len(flags)] = {"gauge": g, "step": -1, "sequence": -1, "flag": "excluded",
                                 "value": np.nan, "threshold": np.nan, "scope": "gauge",
                                 "drops": "gauge", "reason": "excluded by the study",
                                 "disposition": f"excluded: {o.reason}"}

    # model-based flag: reversed polarity
    active = steps.active
    usable = active[:, None] & ~dropped_steps & ~dropped_gauges[None, :] & np.isfinite(measured)
    k, r2 = _reversed(measured, predicted, usable)
    reversed_ = (k >= REVERSED_BAND[0]) & (k <= REVERSED_BAND[1]) & (r2 >= REVERSED_R2)
    for j in np.flatnonzero(reversed_):
        g = names[j]
        disp = f"kept: {keep[g].reason}" if g in keep else "needs a disposition"
        flags.loc[len(flags)] = {"gauge": g, "step": -1, "sequence": -1, "flag": "reversed",
                                 "value": float(k[j]), "threshold": REVERSED_BAND[1],
                                 "scope": "gauge", "drops": "gauge",
                                 "reason": f"ratio {k[j]:.3f} with R^2 {r2[j]:.3f}: fits the model "
                                           "with the sign reversed (suspected reversed polarity)",
                                 "disposition": disp}
        if g not in keep:
            dropped_gauges[j] = True
            flag_text[:, j] = np.where(flag_text[:, j] == "", "reversed", flag_text[:, j])
    flag_text = np.where(flag_text == "", "flagged", flag_text)
    dropped_steps[not_modelled] = True
    flag_text[not_modelled] = "not-modelled"
    _pause("health")

    st = status_table(measured, predicted, study.criteria, steps, dropped_steps, dropped_gauges,
                      flag_text)
    ref = reference_step(predicted, steps)
    from correlate.comparison.evidence import (
        diagnose_failures,
        installation_faults,
        load_checks,
        rosette_diagnoses,
    )

    result = _statistics(study, steps, names, measured, predicted, st, reversed_, ref)
    with progress.step("diagnosing the failing gauges"):
        diag = diagnose_failures(study, model, steps, names, measured, predicted, st,
                                 rows_by_case, contributions, result["per_gauge_table"])
        ros_diag = rosette_diagnoses(study, model, steps, measured, st, predicted)
    if len(ros_diag):
        diag = pd.concat([diag, ros_diag[[c for c in diag.columns if c in ros_diag.columns]]],
                         ignore_index=True)
    # A gauge explained by an installation fault (turned, moved beyond its tolerance, swapped,
    # permuted) does not measure what the gauge map says: like a reversed gauge it is left out of
    # `fit` (kept in `fit_all`) until the analyst disposes of it.
    suspect = np.zeros(len(names), dtype=bool)
    for gauge, explanation in installation_faults(diag):
        j = gidx[gauge]
        if suspect[j] or reversed_[j]:
            continue
        suspect[j] = True
        disp = f"kept: {keep[gauge].reason}" if gauge in keep else "needs a disposition"
        flags.loc[len(flags)] = {"gauge": gauge, "step": -1, "sequence": -1,
                                 "flag": "installation", "value": np.nan, "threshold": np.nan,
                                 "scope": "gauge", "drops": "gauge",
                                 "reason": f"failing gauge explained by: {explanation} (see the "
                                           "diagnosis)", "disposition": disp}
        if gauge not in keep:
            dropped_gauges[j] = True
            flag_text[:, j] = "installation"
    if suspect.any():
        st = status_table(measured, predicted, study.criteria, steps, dropped_steps,
                          dropped_gauges, flag_text)
        result = _statistics(study, steps, names, measured, predicted, st, reversed_ | suspect,
                             ref)
    ev = st["evaluated"]
    gauge_table = _gauge_table(names, steps, measured, predicted, low, high, st, flag_text)
    per_gauge = result.pop("per_gauge_table")
    from correlate.comparison.rosettes import rosette_table

    ros = rosette_table(study, model, gauges_df, steps, measured, axial, ev)
    result["load_checks"] = load_checks(study, steps, measured, st, rows_by_case, op)
    summary = _summary(study, model, readings, steps, names, result, per_gauge, flags, diag, ref,
                       st, reversed_)
    return Correlation(study=study, model=model, steps=steps, gauges=names, measured=measured,
                       predicted=predicted, predicted_axial=axial, band_low=low.T,
                       band_high=high.T, contributions=contributions, status=st, flags=flags,
                       gauge_table=gauge_table, per_gauge=per_gauge, rosettes=ros, diagnoses=diag,
                       summary=summary, rows_by_case=rows_by_case,
                       readings_info={"ignored": list(readings.ignored),
                                      "load_units": readings.load_units})


def _series_rows(study: Study, model: Model, case: Any, steps: Steps, load_cols: tuple[str, ...],
                 key: str) -> tuple[NDArray, NDArray, NDArray]:
    """Rows of a series case at every readings row's load (matched by load, interpolated)."""
    from correlate.comparison.pairing import interpolate_series
    from correlate.measurement.health import load_direction
    from correlate.model_readings.model import case_steps

    match = case.match or {}
    column, scale = match.get("column"), match.get("value_at_time_1")
    if column not in load_cols or not isinstance(scale, int | float) or scale == 0:
        raise StudyError(f"case '{case.name}' is a series (time_index = {case.time_index!r}); run "
                         "needs match = { column = \"<load column>\", value_at_time_1 = <value> } "
                         f"naming one of the [[load]] columns ({', '.join(load_cols)})")
    states = case_steps(model, case)
    per_step = [case_rows(model, case, k) for k, _ in states]
    fe_load = np.array([t * scale for _, t in states])
    load = steps.loads[:, load_cols.index(column)]
    direction = load_direction(load[:, None], steps.sequence, tol=study.zero_tol)
    ind, modelled = interpolate_series(fe_load, np.stack([r[key] for r in per_step], axis=1),
                                       load, direction)
    ax, _ = interpolate_series(fe_load, np.stack([r["axial"] for r in per_step], axis=1), load,
                               direction)
    return ind * MICROSTRAIN, ax * MICROSTRAIN, modelled


def _gauge_table(names: list[str], steps: Steps, measured: NDArray, predicted: NDArray,
                 low: NDArray, high: NDArray, st: dict, flag_text: NDArray) -> pd.DataFrame:
    s, g = measured.shape
    in_band = (measured >= low.T - 1e-9) & (measured <= high.T + 1e-9)
    status = st["status"]
    flag = np.where(np.isin(status, ["pass", "fail", "tare", "zero-load"]), "", status)
    return pd.DataFrame({
        "gauge": np.tile(names, s),
        "step": np.repeat(steps.step, g),
        "sequence": np.repeat(steps.sequence, g),
        "predicted_ue": predicted.ravel(),
        "measured_ue": measured.ravel(),
        "difference_ue": st["difference"].ravel(),
        "ratio": st["ratio"].ravel(),
        "relative": st["relative"].ravel(),
        "band_low_ue": low.T.ravel(),
        "band_high_ue": high.T.ravel(),
        "in_band": np.where(np.isfinite(measured), in_band, False).ravel(),
        "status": status.ravel(),
        "basis": st["basis"].ravel(),
        "unconservative": st["unconservative"].ravel(),
        "flag": flag.ravel(),
    })


def _statistics(study: Study, steps: Steps, names: list[str], measured: NDArray,
                predicted: NDArray, st: dict, reversed_: NDArray, ref: int) -> dict[str, Any]:
    from correlate.comparison import (
        statistics as stats,  # statsmodels: imported when statistics are needed
    )
    ev = st["evaluated"]
    groups = np.tile(names, (len(steps.step), 1))
    fit = stats.fit_pairs(measured[ev], predicted[ev], groups[ev])
    ev_all = ev | (steps.active[:, None] & reversed_[None, :] & np.isfinite(measured))
    fit_all = stats.fit_pairs(measured[ev_all], predicted[ev_all], groups[ev_all])
    fit_ref = stats.fit_pairs(measured[ref][ev[ref]], predicted[ref][ev[ref]],
                              np.asarray(names)[ev[ref]])
    by_step = []
    for i in np.flatnonzero(steps.active):
        f = stats.fit_pairs(measured[i][ev[i]], predicted[i][ev[i]], np.asarray(names)[ev[i]])
        by_step.append({"step": int(steps.step[i]), "sequence": int(steps.sequence[i]), **f})
    per_gauge = stats.per_gauge_fits(measured[ev], predicted[ev], groups[ev])
    m_ref, p_ref = measured[ref][ev[ref]], predicted[ref][ev[ref]]
    metrics = {
        "concordance": stats.concordance(measured[ev], predicted[ev]),
        "concordance_source": "Lin (1989), Biometrics 45:255-268",
        "bland_altman_reference": stats.bland_altman(m_ref, p_ref),
        "bland_altman_reference_relative": stats.bland_altman(m_ref, p_ref, relative=True),
        "bland_altman_source": "Bland and Altman (1986), Lancet i:307-310",
    }
    area = _area_metrics(steps, names, measured, predicted, ev)
    infl = stats.influence_by_gauge(measured[ev], predicted[ev], groups[ev])
    return {"fit": fit, "fit_all": fit_all, "fit_reference": fit_ref, "fit_by_step": by_step,
            "metrics": metrics, "area_metric": area, "influence": infl,
            "per_gauge_table": per_gauge}


def _area_metrics(steps: Steps, names: list[str], measured: NDArray, predicted: NDArray,
                  ev: NDArray) -> list[dict[str, Any]]:
    """Area validation metric per gauge and load level where repeated sequences give replicates."""
    from correlate.comparison import statistics as stats

    if len(np.unique(steps.sequence)) < 2:
        return []
    levels = np.round(steps.loads, 6)
    out = []
    keys = {}
    for i in np.flatnonzero(steps.active):
        keys.setdefault(tuple(levels[i]), []).append(i)
    for level, idx in keys.items():
        if len({int(steps.sequence[i]) for i in idx}) < 2:
            continue
        for j, g in enumerate(names):
            rows = [i for i in idx if ev[i, j]]
            if len(rows) >= 2:
                out.append({"gauge": g, "loads": list(level), "replicates": len(rows),
                            "area_metric_ue": stats.area_metric(measured[rows, j],
                                                                float(np.mean(predicted[rows, j])))})
    return out


def _summary(study: Study, model: Model, readings: Any, steps: Steps, names: list[str],
             result: dict, per_gauge: pd.DataFrame, flags: pd.DataFrame, diag: pd.DataFrame,
             ref: int, st: dict, reversed_: NDArray) -> dict[str, Any]:
    ev = st["evaluated"]
    status = st["status"]
    healthy = ev.any(axis=0)
    failing = ((status == "fail") & ev).any(axis=0)
    passing = healthy & ~failing
    uncons = (st["unconservative"] & ev).any(axis=0)
    flagged = sorted(set(flags["gauge"]))
    crit = study.criteria
    fit = result["fit"]
    slope_ok = fit["slope_origin"] is not None and np.isfinite(fit["slope_origin"]) and \
        crit.slope[0] <= fit["slope_origin"] <= crit.slope[1]
    n_healthy = int(healthy.sum())
    frac = float(passing.sum()) / n_healthy if n_healthy else 0.0
    frac_ok = n_healthy > 0 and frac >= crit.pass_fraction
    verdict = "meets the criteria" if slope_ok and frac_ok else "does not meet the criteria"
    reasons = []
    if not slope_ok:
        reasons.append(f"measured/predicted ratio {fit['slope_origin']:.3f} outside "
                       f"[{crit.slope[0]:g}, {crit.slope[1]:g}]")
    if not frac_ok:
        reasons.append(f"{passing.sum()} of {n_healthy} healthy gauges pass ({frac:.0%}); "
                       f"{crit.pass_fraction:.0%} required")
    pending = sorted({str(f["gauge"]) for _, f in flags.iterrows()
                      if f.get("disposition") == "needs a disposition"})
    if pending:
        reasons.append(f"{len(pending)} flagged gauge(s) need a disposition before sign-off: "
                       f"{', '.join(pending)} (see the flags)")
    diff = np.abs(st["difference"][ref])
    worst = [names[j] for j in np.argsort(-np.where(ev[ref], diff, -1)) if ev[ref, j]][:5]
    inputs = {"study": study.path, "model": study.model_file, "gauges": study.gauges_file,
              "readings": study.readings_file}
    for c in study.cases:
        if c.file is not None:
            inputs[f"case {c.name}"] = c.file
    provenance = {
        "tool": "correlate", "version": __version__,
        "generated": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "inputs": {k: {"path": os.path.relpath(v, study.path.parent), "sha256": sha256(v)}
                   for k, v in inputs.items() if v is not None},
        "study_as_read": study.raw,
    }
    per_gauge_records = per_gauge.to_dict(orient="records")
    status_by_gauge = {g: ("fail" if failing[j] else "pass" if passing[j] else "not evaluated")
                       for j, g in enumerate(names)}
    for rec in per_gauge_records:
        rec["status"] = status_by_gauge.get(rec["gauge"], "")
    return {
        "title": study.title,
        "verdict": {"result": verdict, "reasons": reasons,
                    "criteria": {"relative": crit.relative, "absolute_ue": crit.absolute_ue,
                                 "slope": list(crit.slope), "pass_fraction": crit.pass_fraction,
                                 "source": "the analyst's choice for this programme, not a standard"},
                    "gauges": len(names), "healthy": n_healthy, "passing": int(passing.sum()),
                    "failing": int(failing.sum()), "unconservative": int(uncons.sum()),
                    "flagged": len(flagged), "pass_fraction": frac, "worst": worst,
                    "pending_dispositions": pending,
                    "note": "counts are gauges, not gauge-steps"},
        "fit": result["fit"], "fit_all": result["fit_all"], "fit_reference": result["fit_reference"],
        "fit_by_step": result["fit_by_step"],
        "reference_step": {"step": int(steps.step[ref]), "sequence": int(steps.sequence[ref]),
                           "rule": "largest RMS predicted reading"},
        "metrics": result["metrics"], "area_metric": result["area_metric"],
        "load_checks": result["load_checks"],
        "gauge_map": model.gauges.drop(columns=["row"]).to_dict(orient="records"),
        "influence": result["influence"].to_dict(orient="records"),
        "per_gauge": per_gauge_records,
        "flags": flags.to_dict(orient="records"),
        "diagnoses": diag.to_dict(orient="records"),
        "units": {"strain": "microstrain (ue)", "length": study.length_unit,
                  "stress": study.stress_unit or "unit of E",
                  "shear": "engineering shear strain in rosette outputs"},
        "tare": {"rule": study.zero, "zero_tol": study.zero_tol,
                 "note": "tare subtracted from gauge readings and load columns per sequence"},
        "test": study.test, "model": {"file": study.model_file.name, **study.model_info},
        "provenance": provenance,
        "caution": CAUTION,
    }


CAUTION = ("These results support, but do not replace, engineering judgement, the applicable codes "
           "and licensed practice.")


def write_outputs(corr: Correlation, out: Path, *, force: bool, report: bool = True) -> None:
    """Write every output into a staged folder and move it into place."""
    with staged_folder(out, force=force) as tmp:
        write_csv(corr.gauge_table, tmp / "gauges.csv")
        write_csv(corr.rosettes, tmp / "rosettes.csv")
        write_csv(corr.per_gauge, tmp / "gauge_stats.csv")
        write_csv(corr.flags, tmp / "flags.csv")
        write_json(corr.summary, tmp / "summary.json")
        _pause("write")
        if report:
            try:
                from correlate.report import write_report
            except ImportError:
                write_report = None
            if write_report is not None:
                with progress.step("writing the report (3D views and figures)"):
                    write_report(corr, tmp)


def print_summary(corr: Correlation) -> None:
    s = corr.summary
    v, fit = s["verdict"], s["fit"]

    def num(x: Any, fmt: str) -> str:
        return "n/a" if x is None or (isinstance(x, float) and not np.isfinite(x)) else format(x, fmt)

    print(f"{s['title']}: {v['result']}")
    for r in v["reasons"]:
        print(f"  - {r}")
    ci = fit.get("slope_origin_ci") or [None, None]
    print(f"measured/predicted strain ratio {num(fit['slope_origin'], '.3f')} "
          f"(95% {num(ci[0], '.3f')} to {num(ci[1], '.3f')}, {fit.get('ci_method', '')})")
    print(f"fit: slope {num(fit['slope'], '.3f')}, intercept {num(fit['intercept'], '.1f')} ue, "
          f"R^2 {num(fit['r2'], '.4f')}, RMS {num(fit['rms_ue'], '.1f')} ue, "
          f"max {num(fit['max_abs_ue'], '.1f')} ue, n = {fit['n']} pairs")
    print(f"gauges: {v['passing']} pass, {v['failing']} fail, {v['unconservative']} "
          f"unconservative, {v['flagged']} flagged, of {v['gauges']}")
    if v["worst"]:
        print(f"worst at the reference step: {', '.join(v['worst'])}")
    for f in s["flags"]:
        if f["step"] in (-1, None):
            print(f"flag {f['gauge']}: {f['flag']} - {f['reason']}"
                  + (f" [{f['disposition']}]" if f.get("disposition") else ""))
    for d in s["diagnoses"]:
        print(f"diagnosis {d['gauge']}: {d['explanation']} - {d['detail']}")
    print(CAUTION)


def run_command(args: argparse.Namespace) -> int:
    study = read_study(args.study)
    out = Path(args.out)
    check_target(out, force=args.force)
    model = prepare(study)
    with progress.step("correlating (statistics, health, rosettes)"):
        corr = correlate_study(study, model)
    write_outputs(corr, out, force=args.force, report=not args.no_report)
    print_summary(corr)
    print(f"outputs in {out}" + ("" if args.no_report else f"; report: {out / 'report.html'}"))
    return 0


__all__ = ["Correlation", "correlate_study", "read_test_data", "run_command", "write_outputs"]
