"""The verdict and the summary of a correlation (the content of ``summary.json``).

Stage: comparison. In: the statuses, fits, flags and diagnoses of a run. Out: the verdict against
the study's criteria (the measured/predicted ratio within the slope band, and the share of healthy
gauges that pass), with the reasons and the flags still awaiting a disposition, and the summary
with the provenance of every input.
"""

from __future__ import annotations

import datetime as _dt
import os
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate._version import __version__
from correlate.comparison.criteria import Statuses
from correlate.comparison.pairing import Steps
from correlate.core.folders import sha256
from correlate.core.names import CAUTION
from correlate.model_readings.model import Model
from correlate.readers.study import Study


def summarise(study: Study, model: Model, readings: Any, steps: Steps, names: list[str],
             result: dict, per_gauge: pd.DataFrame, flags: pd.DataFrame, diag: pd.DataFrame,
             ref: int, st: Statuses, reversed_: NDArray) -> dict[str, Any]:
    ev = st.evaluated
    status = st.status
    healthy = ev.any(axis=0)
    failing = ((status == "fail") & ev).any(axis=0)
    passing = healthy & ~failing
    uncons = (st.unconservative & ev).any(axis=0)
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
