"""Channel health: flag bad strain-gauge channels from the readings and the loads alone.

Stage: checks on the test data, before correlation; no model is used. In: tared readings (steps x
gauges, microstrain, NaN where missing), tared loads (steps x load columns), per-step bookkeeping
(tare, return to zero, loading direction) and each channel's range. Out: a tidy DataFrame with one
row per flag. Flagged channels stay in the tables; ``drops`` tells the fits to leave out one step of
the gauge (``'step'``), the whole gauge (``'gauge'``) or nothing (``'none'``, a warning).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import ReadingsFormatError, StudyError
from correlate.readers.study import SCHEMA

# Thresholds of the study's [health] table. Common practice, not a standard: starting values a test
# engineer would use for foil gauges read in microstrain; tune them per test in the study.
DEFAULTS: dict[str, float] = {
    "dead_ue": 5.0,               # span of the tared readings over the loaded steps below this: dead
    "rail_fraction": 0.98,        # |reading| >= rail_fraction * range_ue: at the rail
    "drift_ue": 20.0,             # return-to-zero residual above max(drift_ue, drift_fraction * peak)
    "drift_fraction": 0.05,
    "nonlinear_fraction": 0.05,   # RMS residual of the regression on the loads / peak
    "hysteresis_fraction": 0.05,  # |mean unloading - mean loading residual| / peak
    "noise_ue": 10.0,             # residuals below this are channel noise, never a shape flag
    "min_points": 4,              # fewer valid steps: the gauge-level checks are skipped
}
FLAG_COLUMNS = ("gauge", "step", "sequence", "flag", "value", "threshold", "scope", "drops", "reason")
DROPS = {"dead": "gauge", "missing": "step", "rail": "step", "drift": "gauge", "nonlinear": "none",
         "hysteresis": "none"}
# [health] keys that other stages use (reversed_ratio: comparison.dispositions.reversed_band).
_OTHER_KEYS = frozenset(SCHEMA["health"]) - frozenset(DEFAULTS)
# The dead check needs loads that vary over the gauge's steps: some load column must span at least
# this fraction of its largest |value| (common practice), so that the jitter of a held load does not
# make a healthy gauge look flat.
_LOAD_SPAN_FRACTION = 0.1


def load_direction(loads: ArrayLike, sequence: ArrayLike, *, tol: float) -> NDArray[np.int64]:
    """Classify each step as loading (+1), unloading (-1) or neither (0).

    Parameters
    ----------
    loads : array_like, shape (s, L) or (s,)
        Tared loads per step. [load unit]
    sequence : array_like, shape (s,)
        Load sequence of each step; rows of one sequence are in step order.
    tol : float
        Smallest change of the load magnitude that counts, as a fraction of the peak. [-]

    Returns
    -------
    ndarray of int, shape (s,)
        Sign of the change of ``m = sqrt(sum_j (P_j / max|P_j|)**2)`` since the previous step of
        the sequence; 0 for a sequence's first step, a change within ``tol`` or a missing load.
        Each column is scaled by its own peak so that loads in different units weigh alike.

    Examples
    --------
    >>> load_direction([0, 2, 4, 2], [0, 0, 0, 0], tol=0.01).tolist()
    [0, 1, 1, -1]
    """
    P = _columns(loads, "loads")
    seq = np.asarray(sequence)
    if seq.shape != (P.shape[0],):
        msg = f"sequence has shape {seq.shape} but loads have {P.shape[0]} steps; pass one per step"
        raise ReadingsFormatError(msg)
    peak = np.where(np.isfinite(P), np.abs(P), 0.0).max(axis=0, initial=0.0)
    m = np.sqrt(np.sum((P / np.where(peak > 0, peak, 1.0)) ** 2, axis=1))
    order = np.argsort(seq, kind="stable")  # compare within a sequence even if sequences interleave
    change = np.zeros(m.size)
    change[1:] = np.diff(m[order])
    same = np.zeros(m.size, dtype=bool)
    same[1:] = seq[order][1:] == seq[order][:-1]
    out = np.zeros(m.size, dtype=np.int64)
    out[order] = np.where(same & (change > tol), 1, np.where(same & (change < -tol), -1, 0))
    return out


def assess_channels(measured: ArrayLike, *, gauges: Sequence[str], loads: ArrayLike,
                    steps: ArrayLike, sequence: ArrayLike, tare: ArrayLike, zero_load: ArrayLike,
                    direction: ArrayLike, range_ue: ArrayLike,
                    thresholds: Mapping[str, float] | None = None) -> pd.DataFrame:
    """Flag dead, missing, railed, drifting, nonlinear and hysteretic gauge channels.

    Parameters
    ----------
    measured : array_like, shape (s, g)
        Tared readings; tare rows 0 or NaN; NaN where missing or a sentinel. [µε]
    gauges : sequence of str, length g
        Gauge ids, in column order.
    loads : array_like, shape (s, L) or (s,)
        Tared loads. [load unit]
    steps, sequence : array_like of int, shape (s,)
        Step number and load sequence of each row.
    tare, zero_load : array_like of bool, shape (s,)
        Tare rows; later rows whose loads are all about zero (return to zero, never the tare).
    direction : array_like of int, shape (s,)
        +1 loading, -1 unloading, 0 neither or tare (see :func:`load_direction`).
    range_ue : array_like, shape (g,)
        Full-scale range of each channel, NaN when unknown. [µε]
    thresholds : mapping of str to float, optional
        Overrides of :data:`DEFAULTS` (the study's [health] table).

    Returns
    -------
    pandas.DataFrame
        One row per flag, columns :data:`FLAG_COLUMNS`. ``step`` and ``sequence`` are -1 when the
        flag concerns the whole gauge. ``value`` is the number that raised the flag, ``threshold``
        the limit it crossed.

    Raises
    ------
    ReadingsFormatError
        An array whose shape does not match ``measured``.
    StudyError
        An unknown or out-of-range threshold.

    Notes
    -----
    ``dead``: no reading at any loaded step, or a span below ``dead_ue`` while the loads vary.
    ``missing``: NaN at a loaded step. ``rail``: ``|e| >= rail_fraction * range_ue``. The
    gauge-level checks below use the valid steps (loaded, read, loads known, not at the rail) and
    are skipped with fewer than ``min_points`` of them, or once a gauge is dead. With ``peak`` the
    largest valid ``|e|``: ``drift``: a return-to-zero reading above
    ``max(drift_ue, drift_fraction * peak)``. ``nonlinear``: ``rms(r) / peak`` above its fraction,
    ``r`` the residuals of the least-squares fit ``e ~ a + sum_j b_j P_j`` (several actuators).
    ``hysteresis``: ``|mean r(unloading) - mean r(loading)| / peak`` above its fraction; the
    magnitude, because a compressive gauge lags the other way.

    Examples
    --------
    >>> P = np.array([0.0, 1, 2, 3, 2, 0])
    >>> flags = assess_channels(np.c_[100 * P], gauges=["SG-1"], loads=P, steps=range(6),
    ...     sequence=[0] * 6, tare=[1, 0, 0, 0, 0, 0], zero_load=[0, 0, 0, 0, 0, 1],
    ...     direction=[0, 1, 1, 1, -1, -1], range_ue=[np.nan])
    >>> len(flags)
    0
    """
    t = _thresholds(thresholds)
    y = np.asarray(measured, dtype=float)
    if y.ndim != 2:
        msg = f"measured has shape {y.shape}; pass a 2-D array of steps x gauges in microstrain"
        raise ReadingsFormatError(msg)
    s, g = y.shape
    P = _columns(loads, "loads")
    step = {"steps": np.asarray(steps), "sequence": np.asarray(sequence),
            "tare": np.asarray(tare, dtype=bool), "zero_load": np.asarray(zero_load, dtype=bool),
            "direction": np.asarray(direction)}
    rng = np.asarray(range_ue, dtype=float)
    for name, a, n in [("gauges", np.asarray(gauges), g), ("range_ue", rng, g), ("loads", P, s),
                       *[(k, a, s) for k, a in step.items()]]:
        if a.shape[:1] != (n,) or a.ndim != (2 if name == "loads" else 1):
            msg = (f"{name} has shape {a.shape} but measured is {s} steps x {g} gauges; pass one "
                   f"entry per {'gauge' if name in ('gauges', 'range_ue') else 'step'}")
            raise ReadingsFormatError(msg)
    rows: list[tuple[Any, ...]] = []
    for k, name in enumerate(gauges):
        rows += _gauge_flags(str(name), y[:, k], P, step, float(rng[k]), t)
    table = pd.DataFrame(rows, columns=list(FLAG_COLUMNS))
    return table.astype({"gauge": str, "step": np.int64, "sequence": np.int64, "value": float,
                         "threshold": float})


def _gauge_flags(name: str, y: NDArray[np.float64], P: NDArray[np.float64],
                 step: dict[str, NDArray[Any]], range_ue: float, t: dict[str, float]
                 ) -> list[tuple[Any, ...]]:
    """Flag rows of one gauge, in the order dead, missing, rail, drift, nonlinear, hysteresis."""
    out: list[tuple[Any, ...]] = []

    def flag(kind: str, value: float, threshold: float, reason: str, i: int | None = None) -> None:
        where = (-1, -1) if i is None else (int(step["steps"][i]), int(step["sequence"][i]))
        out.append((name, *where, kind, float(value), float(threshold),
                    "gauge" if i is None else "step", DROPS[kind], reason))

    loaded = ~step["tare"]
    read = np.isfinite(y)
    n_loaded = int(loaded.sum())
    if not (read & loaded).any():
        flag("dead", 0, 1, f"no reading at any of the {n_loaded} loaded steps (0 readings; dead "
             "or disconnected channel)")
        return out
    gaps = np.flatnonzero(loaded & ~read)
    for i in gaps:
        flag("missing", gaps.size, 0, f"no reading at step {step['steps'][i]} (missing or sentinel "
             f"value); {gaps.size} of {n_loaded} loaded steps missing", int(i))
    railed = np.zeros_like(read)
    if math.isfinite(range_ue):
        limit = t["rail_fraction"] * range_ue
        railed = read & (np.abs(np.where(read, y, 0.0)) >= limit)
        for i in np.flatnonzero(railed):
            flag("rail", y[i], limit, f"reading {y[i]:.1f} ue is at the rail (|reading| >= "
                 f"{limit:.1f} ue, {t['rail_fraction']:g} of the {range_ue:g} ue range)", int(i))
    valid = loaded & read & ~railed & np.isfinite(P).all(axis=1)
    if valid.sum() < t["min_points"]:
        return out
    yv, Pv = y[valid], P[valid]
    span = float(yv.max() - yv.min())
    load_peak = np.where(np.isfinite(P), np.abs(P), 0.0).max(axis=0)
    if np.any(np.ptp(Pv, axis=0) > _LOAD_SPAN_FRACTION * load_peak) and span < t["dead_ue"]:
        flag("dead", span, t["dead_ue"], f"span {span:.1f} ue over the loaded steps is below "
             f"{t['dead_ue']:g} ue (dead or flat channel)")
        return out
    peak = float(np.abs(yv).max())
    if peak == 0.0:
        return out
    back = np.flatnonzero(valid & step["zero_load"])
    if back.size:
        worst = int(back[np.argmax(np.abs(y[back]))])
        limit = max(t["drift_ue"], t["drift_fraction"] * peak)
        if abs(y[worst]) > limit:
            flag("drift", abs(y[worst]), limit, f"reads {y[worst]:.1f} ue at zero-load step "
                 f"{step['steps'][worst]}, above max({t['drift_ue']:g} ue, {t['drift_fraction']:g} "
                 f"x peak {peak:.0f} ue) = {limit:.1f} ue (zero drift)")
    X = np.column_stack([np.ones(yv.size), Pv])
    coef = np.linalg.lstsq(X, yv, rcond=None)[0]
    r = yv - X @ coef
    rms_ue = float(np.sqrt(np.mean(r**2)))
    rms = rms_ue / peak
    # a low-strain channel's noise is a large share of its peak: judge shape only above the noise
    if rms > t["nonlinear_fraction"] and rms_ue > t["noise_ue"]:
        flag("nonlinear", rms, t["nonlinear_fraction"], f"RMS residual of the linear fit on the "
             f"loads is {100 * rms:.1f} % of peak {peak:.0f} ue (above "
             f"{100 * t['nonlinear_fraction']:g} %; nonlinear response)")
    d = step["direction"][valid]
    if (d > 0).any() and (d < 0).any():
        gap = float(r[d < 0].mean() - r[d > 0].mean())
        if abs(gap) / peak > t["hysteresis_fraction"] and abs(gap) > t["noise_ue"]:
            flag("hysteresis", abs(gap) / peak, t["hysteresis_fraction"], f"unloading path lies "
                 f"{gap:+.1f} ue ({100 * abs(gap) / peak:.1f} % of peak) from the loading path "
                 f"(above {100 * t['hysteresis_fraction']:g} %; hysteresis)")
    return out


def _columns(loads: ArrayLike, name: str) -> NDArray[np.float64]:
    """Loads as a (s, L) float array; a 1-D array is one load column."""
    P = np.asarray(loads, dtype=float)
    P = P[:, None] if P.ndim == 1 else P
    if P.ndim != 2:
        msg = f"{name} has shape {P.shape}; pass steps x load columns (or one column as 1-D)"
        raise ReadingsFormatError(msg)
    return P


def _thresholds(given: Mapping[str, float] | None) -> dict[str, float]:
    """DEFAULTS updated with the study's [health] values; StudyError lists every bad key."""
    t = dict(DEFAULTS)
    problems = [f"[health] key {key!r} is unknown; use one of {', '.join(DEFAULTS)}"
                for key in (given or {}) if key not in DEFAULTS and key not in _OTHER_KEYS]
    for key, value in (given or {}).items():
        if key not in DEFAULTS:
            continue
        try:
            v = float(value)
        except (TypeError, ValueError):
            v = math.nan
        if (not math.isfinite(v) or v < 0 or (key == "rail_fraction" and not 0 < v <= 1)
                or (key == "min_points" and (v < 2 or v != int(v)))):
            problems.append(f"[health] {key} = {value!r} is out of range; give a number >= 0 "
                            "(rail_fraction in (0, 1], min_points a whole number >= 2)")
        t[key] = v
    if problems:
        raise StudyError(*problems)
    return t

