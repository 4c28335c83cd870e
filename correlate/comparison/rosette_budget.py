"""Rosette outputs with their uncertainty: the grids' budgets propagated through the reduction.

Stage: comparison. In: the rosette groups and grid angles of the located gauge map, the tared
measured grid readings and the model's true grid strains (s, g), the grids' measurement and
model-input budgets and u_num (g, s). Out: per rosette, step and side (measured, predicted) the
standard uncertainties ``u_e1_ue`` and ``u_e2_ue`` of the principal strains, as columns merged
into ``rosettes.csv`` (only with ``[uncertainty]``).

The law of propagation of the GUM (JCGM 100:2008 eq. 13) with the Jacobian of the reduction (grid
readings -> in-plane state -> principal strains) taken by central differences
(:func:`~correlate.comparison.propagation.propagate_function`): terms independent from grid to
grid (Kt, acquisition, repeats, placement; u_num, taken as independent between the grids) add as
``J diag(u^2) J^T``; terms shared by the grids of a rosette (the gauge-factor lot, the load, each
model input) move every grid at once and add as ``(J . delta)^2`` with the signed change
``delta`` of each grid (correlation r = 1, JCGM 100:2008 5.2.2).
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.pairing import Steps
from correlate.comparison.propagation import propagate_function
from correlate.comparison.rosettes import rosette_grids
from correlate.comparison.uncertainty import Budget, ModelInput
from correlate.mechanics.rosette import principal, reduce_grids
from correlate.readers.study import Study

SHARED_MEASUREMENT = ("gauge_factor",)   # the lot: every grid of a rosette at once
KEYS = ["rosette", "step", "sequence", "source"]


def _reduction(angles: NDArray, kt: NDArray | None, nu0: NDArray, name: str):
    def f(x: NDArray) -> NDArray:
        state = reduce_grids(x, angles, kt=kt, nu0=nu0, name=name)
        out = principal(state["ex"], state["ey"], state["gxy"])
        return np.stack([out["e1"], out["e2"]], axis=-1)
    return f


def _propagate(f, x: NDArray, independent: NDArray, shared: list[NDArray]) -> NDArray:
    """u of (e1, e2) per row from independent u (rows, m) and shared signed changes (rows, m)."""
    prop = propagate_function(f, x, independent)
    variance = prop.u**2
    for delta in shared:
        variance = variance + np.einsum("...ij,...j->...i", prop.jacobian, delta) ** 2
    return np.sqrt(variance)


def rosette_uncertainty(study: Study, model: Any, gauges: pd.DataFrame, steps: Steps,
                        measured: NDArray, predicted_axial: NDArray, evaluated: NDArray,
                        measurement: Budget, inputs: dict[str, ModelInput],
                        predicted: NDArray, u_num: NDArray, load: float) -> pd.DataFrame:
    """``u_e1_ue`` and ``u_e2_ue`` per rosette, step and side (the rows of rosettes.csv).

    ``measured``, ``predicted_axial``, ``predicted`` and ``evaluated`` are (s, g); the budgets
    and ``u_num`` (g, s). The rows are those :func:`~correlate.comparison.rosettes.rosette_table`
    writes: active steps, and on the measured side only where every grid is evaluated.
    """
    parts = []
    for rid, angles, idx, kt, nu0 in rosette_grids(study, model, gauges):
        active = np.flatnonzero(steps.active)
        rows = active[evaluated[np.ix_(active, idx)].all(axis=1)]
        if len(rows):
            x = measured[np.ix_(rows, idx)]
            own = [t[np.ix_(idx, rows)].T for k, t in measurement.terms.items()
                   if k not in SHARED_MEASUREMENT]
            independent = np.sqrt(sum(np.square(t) for t in own)) if own else np.zeros_like(x)
            shared = [study.uncertainty.gauge_factor * x]  # type: ignore[union-attr]
            u = _propagate(_reduction(angles, kt, nu0, rid), x, independent, shared)
            parts.append(_rows(rid, "measured", steps, rows, u))
        if len(active):
            x = predicted_axial[np.ix_(active, idx)]
            shared = [load * x]
            for item in inputs.values():
                if item.exponent is not None:
                    shared.append(item.exponent * item.relative * x)
                else:   # the variant's change of the indicated reading, per unit of the input
                    change = (np.asarray(item.variant).T - predicted)[np.ix_(active, idx)]
                    shared.append(change / float(item.step) * item.relative)
            independent = u_num[np.ix_(idx, active)].T
            u = _propagate(_reduction(angles, None, nu0, rid), x, independent, shared)
            parts.append(_rows(rid, "predicted", steps, active, u))
    if not parts:
        return pd.DataFrame(columns=KEYS + ["u_e1_ue", "u_e2_ue"])
    return pd.concat(parts, ignore_index=True)


def _rows(rid: str, source: str, steps: Steps, rows: NDArray, u: NDArray) -> pd.DataFrame:
    return pd.DataFrame({"rosette": rid, "step": steps.step[rows],
                         "sequence": steps.sequence[rows], "source": source,
                         "u_e1_ue": u[:, 0], "u_e2_ue": u[:, 1]})


def with_uncertainty(rosettes: pd.DataFrame, extra: pd.DataFrame) -> pd.DataFrame:
    """rosettes.csv with ``u_e1_ue`` and ``u_e2_ue`` appended, row order kept."""
    if not len(rosettes):
        return rosettes.assign(u_e1_ue=pd.Series(dtype=float), u_e2_ue=pd.Series(dtype=float))
    merged = rosettes.merge(extra, on=KEYS, how="left", validate="one_to_one")
    return merged[list(rosettes.columns) + ["u_e1_ue", "u_e2_ue"]]


__all__ = ["rosette_uncertainty", "with_uncertainty"]
