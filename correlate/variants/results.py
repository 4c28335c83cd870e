"""A sweep's results: the ranked variants table and the parameters identified from the readings.

Stage: variants. In: a :class:`~correlate.variants.sweep_file.Sweep`, each variant's
:class:`~correlate.variants.evaluate.VariantResult` and the test's measured readings (steps,
gauges) [microstrain] with, optionally, the validation uncertainty of each. Out: the rows of
``variants.csv`` and the content of ``identified.json``.

The identification is sensitivity-based model updating by weighted least squares (Friswell and
Mottershead, *Finite Element Model Updating in Structural Dynamics*, Kluwer, 1995, ch. 7) on a
response surface fitted over the variants (:mod:`correlate.variants.identify`).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core.errors import StudyError
from correlate.core.names import CAUTION
from correlate.variants.evaluate import METRICS, VALIDATION, VariantResult
from correlate.variants.identify import (
    fit_response,
    identify,
    leave_one_out_error,
    rank_variants,
)
from correlate.variants.sweep_file import Sweep

__all__ = ["identify_sweep", "variants_table"]

METHOD = ("sensitivity-based model updating by weighted least squares on a response surface over "
          "the variants (Friswell and Mottershead, Finite Element Model Updating in Structural "
          "Dynamics, 1995); covariance s^2 (J^T W J)^-1 at the optimum (Seber and Wild, "
          "Nonlinear Regression, 1989)")


def variants_table(sweep: Sweep, results: dict[str, VariantResult]) -> pd.DataFrame:
    """One row per variant: name, file, parameters, metrics, rank and failure reason.

    Successful variants are ranked by the RMS difference of the healthy gauges, then by pass
    fraction (:func:`~correlate.variants.identify.rank_variants`); failed ones follow, unranked,
    in table order.
    """
    validation = [c for c, _ in VALIDATION
                  if any(c in results[v.name].metrics for v in sweep.variants)]
    rows = []
    for v in sweep.variants:
        r = results[v.name]
        row: dict[str, Any] = {"variant": v.name, "file": str(v.file or "")}
        row.update(v.parameters)
        row.update({c: r.metrics.get(c) for c in [*(c for c, _ in METRICS), *validation]})
        row["failure"] = r.failure
        rows.append(row)
    df = pd.DataFrame(rows)
    ok = df["failure"] == ""
    for c in [*(c for c, _ in METRICS if c != "verdict"), *validation]:
        df[c] = pd.to_numeric(df[c], errors="coerce")
    ranked = rank_variants(df[ok])
    failed = df[~ok].assign(rank=pd.NA)
    out = pd.concat([ranked, failed]) if len(failed) else ranked
    out["rank"] = out["rank"].astype("Int64")
    for c in validation:
        out[c] = out[c].astype("Int64")
    cols = ["rank", "variant", *sweep.parameters, *(c for c, _ in METRICS), *validation,
            "failure", "file"]
    return out[cols].reset_index(drop=True)


def identify_sweep(sweep: Sweep, results: dict[str, VariantResult], measured: NDArray,
                   *, gauges: list[str], steps: NDArray) -> dict[str, Any]:
    """Fit the response surface over the variants and identify the parameters.

    The gauge-steps used, and their weights ``1 / u_val^2`` when the study has
    ``[uncertainty]`` (equal weights without it), are those of the best-ranked variant's run.

    Parameters
    ----------
    sweep : Sweep
        With an ``[identify]`` table.
    results : dict of VariantResult
        By variant name; failed variants are left out.
    measured : ndarray, shape (S, G)
        The test's measured readings in the base study's order. [microstrain]
    gauges : list of str
        Gauge ids, G of them.
    steps : ndarray, shape (S,)
        Step numbers.

    Returns
    -------
    dict
        The content of ``identified.json``.

    Raises
    ------
    StudyError
        Too few successful variants for the response surface, or no gauge-step evaluated in all.
    """
    spec = sweep.identify
    assert spec is not None
    ok = [v for v in sweep.variants if not results[v.name].failure]
    names = list(sweep.parameters)
    P = np.array([[v.parameters[p] for p in names] for v in ok]).reshape(len(ok), len(names))
    if not ok:
        raise StudyError(f"{sweep.path.name}: no variant was correlated; nothing to identify")
    best = min(ok, key=lambda v: (_rms(results[v.name]), sweep.variants.index(v)))
    # the gauge-steps the best-ranked variant's comparison evaluated: health flags that depend
    # on the model (a reversed ratio, an installation fault found by the diagnosis) are judged
    # most fairly against the model that agrees best
    use = results[best.name].evaluated & np.isfinite(measured)
    # weights 1 / u_val^2: the validation uncertainty (ASME V&V 20) of the best variant's run,
    # whose model-input and numerical terms are those of the model nearest the test
    u_val = results[best.name].u_val
    if u_val is not None:
        use &= np.isfinite(u_val) & (u_val > 0)
    if not use.any():
        raise StudyError(f"{sweep.path.name}: no gauge-step is evaluated in the best variant "
                         f"'{best.name}'; nothing to identify")
    Y = np.stack([results[v.name].predicted[use] for v in ok])            # (V, N)
    notes = same_parameters(ok, P, Y, sweep.table_file.name)
    log_all = np.array([p in spec.log for p in names])
    full = fit_response(P, Y, kind=spec.response, log=log_all, names=names)
    loo = leave_one_out_error(P, Y, kind=spec.response, log=log_all)
    free = [names.index(p) for p in spec.parameters]
    surface = _held_surface(sweep, full, P, free)
    w = None if u_val is None else 1.0 / u_val[use] ** 2
    lo = [spec.bounds.get(names[i], (full.lower[i], full.upper[i]))[0] for i in free]
    hi = [spec.bounds.get(names[i], (full.lower[i], full.upper[i]))[1] for i in free]
    ident = identify(surface, measured[use], weights=w, bounds=(lo, hi))
    at_estimate = surface.predict(ident.estimate)[0]
    s_idx, g_idx = np.nonzero(use)
    return {
        "method": METHOD,
        "response": spec.response,
        "parameters": list(spec.parameters),
        "held": {names[i]: sweep.base[names[i]] for i in range(len(names)) if i not in free},
        "log": list(spec.log),
        "weights": "1/u_val^2 (validation uncertainty)" if u_val is not None else "equal",
        "estimate": dict(zip(spec.parameters, ident.estimate.tolist(), strict=True)),
        "standard_error": dict(zip(spec.parameters, ident.standard_error.tolist(), strict=True)),
        "correlation": ident.correlation.tolist(),
        "condition_number": ident.condition_number,
        "residual_variance": ident.residual_variance,
        "dof": ident.dof,
        "bounds": {"lower": ident.lower.tolist(), "upper": ident.upper.tolist()},
        "extrapolated": ident.extrapolated,
        "identifiable": not ident.warnings,
        "warnings": list(ident.warnings) + notes,
        "variants_used": len(ok),
        "surface_loo_rms_ue": dict(zip([v.name for v in ok], loo.tolist(), strict=True)),
        "surface_loo_rms_ue_max": float(loo.max()),
        "best_variant": {"variant": best.name, **best.parameters,
                         "rms_ue": results[best.name].metrics.get("rms_ue")},
        "readings": [{"gauge": gauges[g], "step": int(steps[s]), "measured_ue": float(m),
                      "at_estimate_ue": float(p), "best_variant_ue": float(b),
                      "residual_ue": float(m - p)}
                     for s, g, m, p, b in zip(s_idx, g_idx, measured[use], at_estimate,
                                              results[best.name].predicted[use], strict=True)],
        "caution": CAUTION,
    }


def same_parameters(variants: list[Any], P: NDArray, Y: NDArray, table: str,
                    tol_ue: float = 0.01) -> list[str]:
    """A warning for each set of variants with the same parameters but other model readings.

    Their difference cannot come from the parameters, so something the table does not list
    changed between them (or a value is wrong); the response surface fits their mean. Readings
    within ``tol_ue`` (the CSV precision) count as the same.
    """
    out = []
    _, group = np.unique(P, axis=0, return_inverse=True)
    for g in np.unique(group.ravel()):
        members = np.flatnonzero(group.ravel() == g)
        if len(members) < 2:
            continue
        spread = float(np.max(np.ptp(Y[members], axis=0)))
        if spread > tol_ue:
            named = ", ".join(f"'{variants[i].name}' (row {variants[i].row})" for i in members)
            out.append(f"{table}: variants {named} have the same parameters but model readings "
                       f"up to {spread:.3g} ue apart: something the table does not list changed "
                       "between them, or a value is wrong; the response surface fits their mean")
    return out


def _rms(result: VariantResult) -> float:
    value = result.metrics.get("rms_ue")
    return float(value) if isinstance(value, int | float) and np.isfinite(value) else np.inf


def _held_surface(sweep: Sweep, full: Any, P: NDArray, free: list[int]) -> Any:
    """The response surface in the identified parameters, the others at their base values.

    The full surface is evaluated at the variants' values of the identified parameters with the
    held ones at base, and refitted with the same polynomial in the identified parameters alone:
    a polynomial of that degree with some variables fixed is one of the same degree in the rest,
    so the refit reproduces it exactly (up to round-off).
    """
    names = list(sweep.parameters)
    if len(free) == len(names):
        return full
    held = [i for i in range(len(names)) if i not in free]
    for i in held:
        value = sweep.base[names[i]]
        if not full.lower[i] <= value <= full.upper[i]:
            raise StudyError(f"{sweep.path.name}: base value {value:g} of held parameter "
                             f"'{names[i]}' lies outside the variants ({full.lower[i]:g} to "
                             f"{full.upper[i]:g}); the surface is not extrapolated")
    points = np.unique(P[:, free], axis=0)
    at = np.empty((len(points), len(names)))
    at[:, free] = points
    at[:, held] = [sweep.base[names[i]] for i in held]
    return fit_response(points, full.predict(at), kind=full.kind,
                        log=full.log[free], names=[names[i] for i in free])
