"""The regression statistics of a correlation: overall, per step, per gauge, and the metrics beside.

Stage: comparison. In: measured and predicted readings (s, g) and the statuses. Out: the fits
(cluster-robust through :mod:`correlate.comparison.statistics`) of the evaluated pairs, of all
pairs with the reversed and suspect gauges, of the reference step and of every active step; the
per-gauge fits; concordance, Bland-Altman, the area metric and the influence of each gauge.
:func:`core_fits` are the figures that judge and rank a model (a sweep's worker stops there);
:func:`detail_fits` the rest a run's report shows.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.comparison import statistics as stats
from correlate.comparison.criteria import Statuses
from correlate.comparison.pairing import Steps


def core_fits(steps: Steps, names: list[str], measured: NDArray, predicted: NDArray,
              st: Statuses) -> dict[str, Any]:
    """The pooled fit of the evaluated pairs, the per-gauge fits (the diagnosis reads them) and
    the concordance: the figures that judge and rank a model."""
    ev = st.evaluated
    groups = np.tile(names, (len(steps.step), 1))
    return {"fit": stats.fit_pairs(measured[ev], predicted[ev], groups[ev]),
            "metrics": {"concordance": stats.concordance(measured[ev], predicted[ev]),
                        "concordance_source": "Lin (1989), Biometrics 45:255-268"},
            "per_gauge_table": stats.per_gauge_fits(measured[ev], predicted[ev], groups[ev])}


def detail_fits(steps: Steps, names: list[str], measured: NDArray, predicted: NDArray,
                st: Statuses, reversed_: NDArray, ref: int) -> dict[str, Any]:
    """The fits a report shows beside the pooled one: with the reversed and suspect gauges, at
    the reference step and at every active step; Bland-Altman, the area metric and each
    gauge's influence."""
    ev = st.evaluated
    groups = np.tile(names, (len(steps.step), 1))
    ev_all = ev | (steps.active[:, None] & reversed_[None, :] & np.isfinite(measured))
    fit_all = stats.fit_pairs(measured[ev_all], predicted[ev_all], groups[ev_all])
    fit_ref = stats.fit_pairs(measured[ref][ev[ref]], predicted[ref][ev[ref]],
                              np.asarray(names)[ev[ref]])
    by_step = []
    for i in np.flatnonzero(steps.active):
        f = stats.fit_pairs(measured[i][ev[i]], predicted[i][ev[i]], np.asarray(names)[ev[i]])
        by_step.append({"step": int(steps.step[i]), "sequence": int(steps.sequence[i]), **f})
    m_ref, p_ref = measured[ref][ev[ref]], predicted[ref][ev[ref]]
    metrics = {
        "bland_altman_reference": stats.bland_altman(m_ref, p_ref),
        "bland_altman_reference_relative": stats.bland_altman(m_ref, p_ref, relative=True),
        "bland_altman_source": "Bland and Altman (1986), Lancet i:307-310",
    }
    return {"fit_all": fit_all, "fit_reference": fit_ref, "fit_by_step": by_step,
            "metrics": metrics, "area_metric": area_metrics(steps, names, measured, predicted, ev),
            "influence": stats.influence_by_gauge(measured[ev], predicted[ev], groups[ev])}


def area_metrics(steps: Steps, names: list[str], measured: NDArray, predicted: NDArray,
                  ev: NDArray) -> list[dict[str, Any]]:
    """Area validation metric per gauge and load level where repeated sequences give replicates."""
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
