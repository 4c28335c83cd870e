"""Series cases: pair each readings row with the FE state at the same load (nonlinear models).

Stage: comparison (series). When superposition does not hold, a case with ``time_index = "all"``
holds every step of a load history. ``match = { column = "F_kN", value_at_time_1 = 10.0 }`` says
the FE load at time t is t x value_at_time_1 of that column. Each readings row is paired with the
FE state at its tared load by linear interpolation between neighbouring FE steps, within
monotonic segments of the FE load (loading rows with loading segments, unloading with unloading).
Rows outside the series' range, or unloading rows when the series never unloads, are not modelled.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray


def monotonic_segments(load: NDArray[np.float64]) -> list[tuple[int, int, int]]:
    """(first, last, direction) of each monotonic run of the FE load (+1 rising, -1 falling)."""
    out = []
    start = 0
    for k in range(1, len(load)):
        d = np.sign(load[k] - load[k - 1])
        if k == start + 1:
            direction = d
        elif d != direction and d != 0:
            out.append((start, k - 1, int(direction)))
            start, direction = k - 1, d
    if len(load) >= 2:
        out.append((start, len(load) - 1, int(direction)))
    return out


def interpolate_series(fe_load: NDArray[np.float64], rows: NDArray[np.float64],
                       load: NDArray[np.float64], direction: NDArray[np.int64]
                       ) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Operator rows at each readings row's load.

    Parameters
    ----------
    fe_load : ndarray, shape (K,)
        FE load of each series step (t x value_at_time_1). An unloaded state (load 0, rows 0) is
        put in front when the series does not start at zero.
    rows : ndarray, shape (R, K)
        Operator rows (readings) of each step.
    load : ndarray, shape (s,)
        Tared load of each readings row in the match column.
    direction : ndarray, shape (s,)
        +1 loading, -1 unloading, 0 neither (tare, holds): matched with rising segments.

    Returns
    -------
    interp : ndarray, shape (R, s)
        NaN where not modelled.
    modelled : ndarray, shape (s,) of bool
    """
    fe_load = np.asarray(fe_load, dtype=float)
    rows = np.asarray(rows, dtype=float)
    if fe_load[0] != 0:
        fe_load = np.r_[0.0, fe_load]
        rows = np.c_[np.zeros(len(rows)), rows]
    out = np.full((len(rows), len(load)), np.nan)
    modelled = np.zeros(len(load), dtype=bool)
    segments = monotonic_segments(fe_load)
    for i, (L, d) in enumerate(zip(load, direction, strict=True)):
        want = -1 if d < 0 else 1
        for first, last, seg_dir in segments:
            if seg_dir != want:
                continue
            lo, hi = sorted((fe_load[first], fe_load[last]))
            tol = 1e-9 * max(abs(hi), 1.0)
            if not lo - tol <= L <= hi + tol:
                continue
            xs = fe_load[first:last + 1]
            order = np.argsort(xs) if seg_dir < 0 else np.arange(len(xs))
            xs = xs[order]
            k = int(np.clip(np.searchsorted(xs, L) - 1, 0, len(xs) - 2))
            w = 0.0 if xs[k + 1] == xs[k] else (L - xs[k]) / (xs[k + 1] - xs[k])
            cols = np.arange(first, last + 1)[order]
            out[:, i] = (1 - w) * rows[:, cols[k]] + w * rows[:, cols[k + 1]]
            modelled[i] = True
            break
        if abs(L) <= 1e-12 and not modelled[i]:
            out[:, i] = 0.0
            modelled[i] = True
    return out, modelled
