"""The validation budget of a run: every comparison with its uncertainty (ASME V&V 20 style).

Stage: comparison. In: the study's ``[uncertainty]`` (and ``[numerical]``) records, the measured
and predicted readings (s, g) of a correlation, the model's axial and transverse strain at each
gauge, the placement band, the statuses and the predictions on the other models (coarser meshes,
input variants), given by a callable so that each other model is opened, evaluated and dropped
in turn. Out: a :class:`ValidationBudget` with the columns ``gauges.csv`` gains, the rows of
``uncertainty.csv`` (the budget per gauge at the reference step) and the summary's
``validation``. The formulas are in :mod:`correlate.comparison.uncertainty`; this module only
gathers their inputs and lays out their results.

Every term is a standard uncertainty in microstrain. ``comparison_error_ue`` is V&V 20's
``E = S - D`` (predicted minus measured), so its sign is the opposite of the project's
``difference_ue`` (measured minus predicted), which keeps its meaning.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.criteria import Statuses
from correlate.comparison.pairing import Steps
from correlate.comparison.uncertainty import (
    Budget,
    GridConvergence,
    ModelInput,
    RatioInterval,
    Validation,
    grid_convergence,
    input_uncertainty,
    measurement_uncertainty,
    ratio_interval,
    validation,
)
from correlate.core.errors import StudyError
from correlate.core.folders import sha256
from correlate.readers.records import Numerical, Uncertainty
from correlate.readers.study import Study

#: Gauges.csv columns added by a budget, in this order (blank where a row has no reading).
GAUGE_COLUMNS = ("u_d_ue", "u_input_ue", "u_num_ue", "u_val_ue", "comparison_error_ue")
#: Steps of different runs are repeats of one nominal load when every load agrees within this
#: share of its peak (common practice: a load-cell reading settles within about 1 %).
REPEAT_LOAD_SHARE = 0.01
STATES = ("model error", "uncertainty dominated", "consistent")

Predict = Callable[[Path], NDArray[np.float64]]   # a result file -> predicted (s, g) [ue]


@dataclass(frozen=True)
class ValidationBudget:
    """What a run's validation budget adds to the outputs."""

    columns: pd.DataFrame          # GAUGE_COLUMNS, one row per gauge and step (gauges.csv order)
    table: pd.DataFrame            # uncertainty.csv: the budget per gauge at the reference step
    summary: dict[str, Any]        # summary.json "validation"
    result: Validation             # per gauge and step, (g, s)
    convergence: GridConvergence | None
    measurement: Budget            # u_D and its terms, (g, s)
    model_input: Budget            # u_input and its terms, (g, s)
    inputs: dict[str, ModelInput]  # the model inputs as used (variants' predictions included)
    u_num: NDArray[np.float64]     # (g, s)
    rosettes: pd.DataFrame | None = None   # u_e1_ue, u_e2_ue per rosettes.csv row, once made


def repeat_spread(measured: NDArray, steps: Steps) -> tuple[NDArray, NDArray]:
    """Standard deviation and number of the repeats of each reading, (g, s) each.

    Repeats are the steps of different sequences (runs) at the same nominal load: every tared
    load within ``REPEAT_LOAD_SHARE`` of its peak, and the same occurrence of that load within
    its run (the second visit of a load in a run, on unloading, is repeated by the second visit
    in the next run, not by the first). Where a reading has fewer than two repeats, n is 0 and
    the standard deviation 0.
    """
    s, g = measured.shape
    loads = np.asarray(steps.loads, dtype=float).reshape(s, -1)
    peak = np.nanmax(np.abs(loads), axis=0) if s else np.zeros(loads.shape[1])
    key = np.round(np.nan_to_num(loads) / (REPEAT_LOAD_SHARE * np.where(peak > 0, peak, 1.0)))
    frame = pd.DataFrame(key.astype(np.int64), columns=[f"L{j}" for j in range(key.shape[1])])
    frame["sequence"] = steps.sequence
    frame["visit"] = frame.groupby(list(frame.columns)).cumcount()
    frame["active"] = steps.active
    sd, n = np.zeros((g, s)), np.zeros((g, s))
    by = [c for c in frame.columns if c.startswith("L")] + ["visit"]
    for _, rows in frame[frame["active"]].groupby(by).groups.items():
        rows = np.asarray(rows)
        if len(rows) < 2:
            continue
        sub = measured[rows]                                   # (repeats, g)
        count = np.isfinite(sub).sum(axis=0)
        ok = count >= 2
        spread = np.zeros(g)
        spread[ok] = np.nanstd(sub[:, ok], axis=0, ddof=1)
        sd[:, rows] = spread[:, None]
        n[:, rows] = np.where(ok, count, 0)[:, None]
    return sd, n


def measurement_budget(u: Uncertainty, study: Study, kt: NDArray, measured: NDArray,
                       axial: NDArray, transverse: NDArray, low: NDArray, high: NDArray,
                       steps: Steps) -> Budget:
    """u_D of every reading, (g, s); blank readings are taken as 0 (their rows stay blank)."""
    D = np.nan_to_num(measured.T)
    sd, n = repeat_spread(measured, steps)
    none = n < 2
    # No repeat at that reading: no Type A term (s = 0 with n = 2 gives exactly 0).
    sd, n = np.where(none, 0.0, sd), np.where(none, 2.0, n)
    band = {"band_low": low, "band_high": high} if u.placement else {}
    return measurement_uncertainty(D, axial.T, transverse.T, kt[:, None],
                                   study.calibration_poisson, gauge_factor=u.gauge_factor,
                                   transverse=u.transverse, daq_ue=u.daq_ue,
                                   daq_relative=u.daq_relative, repeat_sd=sd, repeat_n=n,
                                   **band)


def model_inputs(u: Uncertainty, predict: Predict) -> dict[str, ModelInput]:
    """The inputs of the budget; a variant's prediction is made here, one file at a time."""
    out = {}
    for item in u.inputs:
        if item.variant is not None:
            out[item.name] = ModelInput(relative=item.relative, variant=predict(item.variant).T,
                                        step=item.step)
        else:
            out[item.name] = ModelInput(relative=item.relative, exponent=item.exponent)
    return out


def _reads_as_model(other: NDArray, S: NDArray) -> bool:
    """Whether a prediction on another result file equals the model's at every gauge and step,
    to round-off. No other mesh or input variant does: the model file itself or a copy, whose
    GCI or input term would be 0."""
    return bool(np.allclose(other, S, rtol=1e-12, atol=1e-9, equal_nan=True))


def numerical_budget(num: Numerical, S: NDArray, predict: Predict, source: str = "study"
                     ) -> GridConvergence:
    """The GCI of each gauge and step on the combined prediction (1 = the study's own model).

    Raises
    ------
    StudyError
        A mesh of ``[numerical]`` reads exactly as the study's own model (``source``: the study
        file's name, for the message).
    """
    others = [predict(mesh.file).T for mesh in num.meshes]     # one mesh at a time
    for mesh, other in zip(num.meshes, others, strict=True):
        if _reads_as_model(other, S):
            raise StudyError(f"{source}: [numerical] meshes: '{mesh.file.name}' gives the "
                             "model's own readings at every gauge and step, so its grid "
                             "convergence index would be 0: the model file or a copy of it? give "
                             "the results on a mesh of other element sizes")
    sizes = [num.h] + [mesh.h for mesh in num.meshes]
    r32 = sizes[2] / sizes[1] if len(others) == 2 else None
    return grid_convergence(S, *others, r21=sizes[1] / sizes[0], r32=r32,
                            formal_order=num.formal_order)


def systematic_parts(u: Uncertainty, inputs: dict[str, ModelInput], S: NDArray,
                     evaluated: NDArray) -> dict[str, float]:
    """Relative standard uncertainties acting on every gauge at once (fully correlated).

    A common relative change ``c_i u`` of the predictions moves the through-origin slope by
    ``sum(p_i c_i u p_i) / sum(p_i**2)`` relative (first order): for an exponent input that is
    ``|exponent| u``; for a variant, the prediction-weighted mean of its sensitivity.
    """
    p = S[evaluated]
    out = {"gauge_factor": u.gauge_factor, "load": u.load}
    for name, item in inputs.items():
        if item.exponent is not None:
            out[f"input {name}"] = abs(float(item.exponent)) * item.relative
        else:
            dp = ((np.asarray(item.variant) - S) / float(item.step))[evaluated] * item.relative
            pp = float(p @ p)
            out[f"input {name}"] = abs(float(p @ dp)) / pp if pp > 0 else 0.0
    return {k: v for k, v in out.items() if v > 0}


def _label(term: str) -> str:
    group, _, name = term.partition(".")
    return f"{group}: {name}" if name else group


def _column(term: str) -> str:
    group, _, name = term.partition(".")
    stem = name if group == "measurement" else f"{group}_{name}" if name else group
    return "".join(ch if ch.isalnum() else "_" for ch in stem)


def reference_table(names: list[str], steps: Steps, ref: int, S: NDArray, D: NDArray,
                    groups: tuple[NDArray, NDArray, NDArray], terms: dict[str, NDArray],
                    v: Validation, allowed: NDArray, evaluated: NDArray,
                    gc: GridConvergence | None) -> pd.DataFrame:
    """uncertainty.csv: one row per gauge at the reference step, every term and its share.

    ``groups`` holds u_D, u_input and u_num (g, s); ``terms`` every single term (g, s).
    """
    var = v.u_val[:, ref] ** 2
    state = np.where(evaluated, v.state[:, ref], "not evaluated")
    out = pd.DataFrame({
        "gauge": names, "step": int(steps.step[ref]), "sequence": int(steps.sequence[ref]),
        "predicted_ue": S[:, ref], "measured_ue": D[:, ref],
        "comparison_error_ue": np.where(evaluated, v.error[:, ref], np.nan),
        "u_d_ue": groups[0][:, ref], "u_input_ue": groups[1][:, ref],
        "u_num_ue": groups[2][:, ref], "u_val_ue": v.u_val[:, ref], "coverage": v.k, "expanded_ue": v.k * v.u_val[:, ref],
        "lower_ue": v.lower[:, ref], "upper_ue": v.upper[:, ref], "allowed_ue": allowed[:, ref],
        "state": state,
        "model_error_ue": np.where(evaluated, v.sign[:, ref] * v.model_error[:, ref], np.nan),
        "dominant": [_label(t) if t != "none" else "none" for t in v.dominant[:, ref]],
    })
    for term, value in terms.items():
        col = _column(term)
        out[f"u_{col}_ue"] = value[:, ref]
        with np.errstate(invalid="ignore", divide="ignore"):
            out[f"share_{col}"] = np.where(var > 0, value[:, ref] ** 2 / var, 0.0)
    if gc is not None:
        out["order"] = gc.order[:, ref]
        out["factor"] = gc.factor[:, ref]
        out["gci_ue"] = gc.gci[:, ref]
        notes = [", ".join(w for w, f in (("oscillatory", gc.oscillatory[j, ref]),
                                          ("order fell back", gc.fell_back[j, ref]),
                                          ("non-constant r, order by iteration",
                                           gc.nonconstant_r[j, ref]),
                                          ("negligible change", gc.negligible[j, ref])) if f)
                 for j in range(len(names))]
        out["convergence"] = notes
    for col in ("comparison_error_ue", "u_val_ue", "expanded_ue", "lower_ue", "upper_ue"):
        out[col] = np.where(evaluated | (col == "u_val_ue"), out[col], np.nan)
    return out


def _inputs_as_read(study: Study) -> dict[str, Any]:
    u = asdict(study.uncertainty)  # type: ignore[arg-type]
    base = study.path.parent

    def rel(p: Any) -> Any:
        return {"path": os.path.relpath(p, base), "sha256": sha256(Path(p))} if p else None

    for item in u["inputs"]:
        item["variant"] = rel(item["variant"])
    out = {"uncertainty": u}
    if study.numerical is not None:
        num = asdict(study.numerical)
        for mesh in num["meshes"]:
            mesh["file"] = rel(mesh["file"])
        out["numerical"] = num
    return out


def validation_summary(study: Study, table: pd.DataFrame, ratio: RatioInterval | None,
                       gc: GridConvergence | None, k: float) -> dict[str, Any]:
    """summary.json ``validation``: counts per state, the ratio with both parts, the inputs."""
    counts = {s: int((table["state"] == s).sum()) for s in STATES}
    out: dict[str, Any] = {
        "coverage": k,
        "states": counts,
        "not_evaluated": int((table["state"] == "not evaluated").sum()),
        "reference_step": {"step": int(table["step"].iloc[0]),
                           "sequence": int(table["sequence"].iloc[0])},
        "dominant": table.loc[table["state"] != "not evaluated", "dominant"]
        .value_counts().to_dict(),
        "ratio": None if ratio is None else {
            "ratio": ratio.ratio, "n": ratio.n, "u_statistical": ratio.u_statistical,
            "u_systematic": ratio.u_systematic, "systematic_terms": ratio.systematic_terms,
            "u_combined": ratio.u_combined, "lower": ratio.lower, "upper": ratio.upper,
            "note": "systematic terms (gauge-factor lot, load cell, model inputs) act on every "
                    "gauge at once and do not shrink with the number of gauges"},
        "framework": "ASME V&V 20-2009: E = S - D, u_val = sqrt(u_num^2 + u_input^2 + u_D^2), "
                     "model error in E -/+ k u_val; terms combined as in JCGM 100:2008",
        "note": "the criteria verdict stands as given; the validation states are a statement "
                "beside it",
        "inputs": _inputs_as_read(study),
    }
    if gc is not None:
        evaluated = table["state"] != "not evaluated"
        out["convergence"] = {
            "oscillatory": table.loc[evaluated & table["convergence"].str.contains(
                "oscillatory"), "gauge"].tolist(),
            "order_fell_back": table.loc[evaluated & table["convergence"].str.contains(
                "fell back"), "gauge"].tolist(),
            "nonconstant_r": bool(gc.nonconstant_r.any()),
        }
    return out


def validation_budget(study: Study, names: list[str], steps: Steps, measured: NDArray,
                      predicted: NDArray, model_strain: tuple[NDArray, NDArray, NDArray],
                      band: tuple[NDArray, NDArray], st: Statuses, ref: int, *,
                      statistical_se: float, predict: Predict) -> ValidationBudget | None:
    """The whole budget of a run; None when the study has no ``[uncertainty]`` table.

    ``predicted``, ``measured`` and the statuses are (s, g); ``model_strain`` holds the gauges'
    Kt (g,) and the model's axial and transverse strain (s, g) [ue]; ``band`` the placement band
    (g, s) [ue]; ``predict`` gives the predicted readings (s, g) on another result file.
    """
    u = study.uncertainty
    if u is None:
        return None
    kt, axial, transverse = model_strain
    S, D = predicted.T, measured.T
    meas = measurement_budget(u, study, kt, measured, axial, transverse, *band, steps)
    inputs = model_inputs(u, predict)
    for name, item in inputs.items():
        if item.variant is not None and _reads_as_model(item.variant, S):
            raise StudyError(f"{study.path.name}: [[uncertainty.input]] '{name}': its variant "
                             "gives the model's own readings at every gauge and step, so its "
                             "term would be 0: the model file or a copy of it? give the result "
                             "solved with the input changed by its step")
    inp = input_uncertainty(S, inputs, load=u.load or None)
    gc = numerical_budget(study.numerical, S, predict, study.path.name) if study.numerical \
        else None
    u_num = gc.u_num if gc is not None else np.zeros_like(S)
    E = S - np.nan_to_num(D)
    v = validation(E, u_num, inp, meas, k=u.coverage, allowed=st.allowed.T)
    evaluated = st.evaluated.T
    terms = {"numerical": u_num,
             **{f"input.{k}": t for k, t in inp.terms.items()},
             **{f"measurement.{k}": t for k, t in meas.terms.items()}}
    table = reference_table(names, steps, ref, S, D, (meas.combined, inp.combined, u_num), terms,
                            v, st.allowed.T, evaluated[:, ref], gc)
    ratio = None   # no healthy pair with a non-zero prediction: no ratio (the fit says so too)
    if np.any(predicted[st.evaluated] != 0):
        ratio = ratio_interval(measured[st.evaluated], predicted[st.evaluated],
                               statistical_se=statistical_se if np.isfinite(statistical_se)
                               else 0.0, systematic=systematic_parts(u, inputs, S, evaluated),
                               k=u.coverage)
    have = np.isfinite(D)
    columns = pd.DataFrame({
        "u_d_ue": np.where(have, meas.combined, np.nan).T.ravel(),
        "u_input_ue": np.where(have, inp.combined, np.nan).T.ravel(),
        "u_num_ue": np.where(have, u_num, np.nan).T.ravel(),
        "u_val_ue": np.where(have, v.u_val, np.nan).T.ravel(),
        "comparison_error_ue": np.where(have, E, np.nan).T.ravel(),
    })
    return ValidationBudget(columns=columns, table=table,
                            summary=validation_summary(study, table, ratio, gc, u.coverage),
                            result=v,
                            convergence=gc, measurement=meas, model_input=inp, inputs=inputs,
                            u_num=u_num)


__all__ = ["GAUGE_COLUMNS", "ValidationBudget", "repeat_spread", "validation_budget"]
