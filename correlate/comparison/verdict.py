"""The verdict and the summary of a correlation (the content of ``summary.json``).

Stage: comparison. In: the statuses, fits, flags and diagnoses of a run. Out: the verdict against
the study's criteria (the measured/predicted ratio within the slope band, and the share of healthy
gauges that pass), with the reasons and the flags still awaiting a disposition, and the summary
with the provenance of every input.
"""

from __future__ import annotations

import datetime as _dt
import os
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate._version import __version__
from correlate.comparison.criteria import Statuses
from correlate.comparison.dispositions import PENDING
from correlate.comparison.pairing import Steps
from correlate.core.folders import sha256
from correlate.core.names import CAUTION
from correlate.core.units import percent_off
from correlate.model_readings.model import Model
from correlate.readers.study import Study

CRITERIA_SOURCE = "the analyst's choice for this programme, not a standard"
DEFAULT_CRITERIA_SOURCE = "tool defaults (no criteria given in the study)"
STATES = ("meets", "does not meet", "provisional")


def overall_direction(ratio: Any, st: Statuses, names: list[str]) -> tuple[str, list[str]]:
    """Which way the model errs overall, and the gauges unconservative beyond the criterion.

    measured/predicted above 1: the test strains are larger than the model's, so the model
    under-predicts strain and is unconservative for strain-based margins (common practice).
    """
    beyond = [names[j] for j in np.flatnonzero((st.unconservative & st.evaluated).any(axis=0))]
    if ratio is None or not np.isfinite(ratio):
        return "the overall ratio is not defined", beyond
    if round(float(ratio), 3) == 1.0:   # as printed: 0.9996 is "1.000", not "1.000 < 1"
        text = (f"the model predicts the overall strain level within 0.05 % (measured/predicted "
                f"{ratio:.3f}); see the gauges for local differences")
    elif ratio > 1:
        text = (f"the model under-predicts strain overall (measured/predicted {ratio:.3f} > 1: "
                "the test strains are larger than the model's), so it is unconservative for "
                "strain-based margins")
    else:
        text = (f"the model over-predicts strain overall (measured/predicted {ratio:.3f} < 1: "
                "the test strains are smaller than the model's), so it is conservative for "
                "strain-based margins")
    return text, beyond


def unit_hint(ratio: Any) -> str:
    """A clause naming a unit slip when the overall measured/predicted ratio is about 1e-4
    (readings in percent: 1 % is 10,000 µε) or about 1/100 or 100 (a strain in percent on one
    side); empty otherwise."""
    if ratio is None or not np.isfinite(ratio) or ratio == 0:
        return ""
    if percent_off(float(ratio) * 100.0) == -1:    # about 1e-4 = (1/100) / 100
        return ("; about 1e-4: the readings look like percent strain (1 % is 10,000 µε), "
                "export them in µε")
    if percent_off(ratio):
        return ("; about 100 times off: a strain in percent on one side? the model's strain is "
                "read in m/m and the readings in µε")
    return ""


def judge(study: Study, names: list[str], fit: dict[str, Any], st: Statuses,
          flags: pd.DataFrame) -> dict[str, Any]:
    """The verdict: the criteria's result, and a state that is ``provisional`` while a flag
    awaits a disposition or too few gauges are left healthy, whatever the criteria say.

    ``result`` keeps its meaning (the criteria alone: ``meets the criteria`` or ``does not meet
    the criteria``); ``state`` is ``meets``, ``does not meet`` or ``provisional``, and
    ``leaning`` says which way the criteria lean today.
    """
    ev = st.evaluated
    healthy = ev.any(axis=0)
    failing = ((st.status == "fail") & ev).any(axis=0)
    passing = healthy & ~failing
    uncons = (st.unconservative & ev).any(axis=0)
    crit = study.criteria
    slope_ok = fit["slope_origin"] is not None and np.isfinite(fit["slope_origin"]) and \
        crit.slope[0] <= fit["slope_origin"] <= crit.slope[1]
    n_healthy = int(healthy.sum())
    frac = float(passing.sum()) / n_healthy if n_healthy else 0.0
    frac_ok = n_healthy > 0 and frac >= crit.pass_fraction
    result = "meets the criteria" if slope_ok and frac_ok else "does not meet the criteria"
    reasons = []
    if not slope_ok:
        reasons.append(f"measured/predicted ratio {fit['slope_origin']:.3f} outside "
                       f"[{crit.slope[0]:g}, {crit.slope[1]:g}]{unit_hint(fit['slope_origin'])}")
    if not frac_ok:
        reasons.append(f"{passing.sum()} of {n_healthy} healthy gauges pass ({frac:.0%}); "
                       f"{crit.pass_fraction:.0%} required")
    pending = sorted({str(f["gauge"]) for _, f in flags.iterrows()
                      if f.get("disposition") == PENDING})
    leaning = "meets" if result == "meets the criteria" else "does not meet"
    provisional = []
    if pending:
        provisional.append(f"{len(pending)} flagged gauge(s) need a disposition before sign-off: "
                           f"{', '.join(pending)} (see the flags)")
    min_healthy = float(getattr(crit, "min_healthy_fraction", 0.8))
    share = n_healthy / len(names) if names else 0.0
    if share < min_healthy:
        provisional.append(f"only {n_healthy} of {len(names)} gauges ({share:.0%}) are left "
                           f"healthy; {min_healthy:.0%} are needed for a verdict "
                           "([criteria] min_healthy_fraction)")
    state = "provisional" if provisional else leaning
    if provisional:
        provisional.append(f"the criteria alone would say the model {leaning} them")
    direction, beyond = overall_direction(fit["slope_origin"], st, names)
    given = study.criteria_given
    return {
        "result": result, "state": state, "leaning": leaning, "reasons": reasons + provisional,
        "open_dispositions": pending, "excluded_fraction": 1.0 - share if names else 0.0,
        "direction": direction, "unconservative_gauges": beyond,
        "criteria": {"relative": crit.relative, "absolute_ue": crit.absolute_ue,
                     "slope": list(crit.slope), "pass_fraction": crit.pass_fraction,
                     "min_healthy_fraction": min_healthy,
                     "source": CRITERIA_SOURCE if given else DEFAULT_CRITERIA_SOURCE},
        "gauges": len(names), "healthy": n_healthy, "passing": int(passing.sum()),
        "failing": int(failing.sum()), "unconservative": int(uncons.sum()),
        "flagged": len(set(flags["gauge"])), "pass_fraction": frac,
        "pending_dispositions": pending,
    }


def summarise(study: Study, model: Model, readings: Any, steps: Steps, names: list[str],
             result: dict, per_gauge: pd.DataFrame, flags: pd.DataFrame, diag: pd.DataFrame,
             ref: int, st: Statuses, reversed_: NDArray,
             hashes: dict[Path, str] | None = None) -> dict[str, Any]:
    ev = st.evaluated
    verdict = judge(study, names, result["fit"], st, flags)
    failing = ((st.status == "fail") & ev).any(axis=0)
    passing = ev.any(axis=0) & ~failing
    diff = np.abs(st.difference[ref])
    worst = [names[j] for j in np.argsort(-np.where(ev[ref], diff, -1)) if ev[ref, j]][:5]
    inputs = {"study": study.path, "model": study.model_file, "gauges": study.gauges_file,
              "readings": study.readings_file}
    for c in study.cases:
        if c.file is not None:
            inputs[f"case {c.name}"] = c.file
    provenance = {
        "tool": "correlate", "version": __version__,
        "generated": _dt.datetime.now(_dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "inputs": {k: {"path": os.path.relpath(v, study.path.parent),
                       "sha256": (hashes or {}).get(Path(v)) or sha256(v)}
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
        "verdict": {**verdict, "worst": worst, "note": "counts are gauges, not gauge-steps"},
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
