"""Diagnosis stage: try the usual explanations for a gauge that fails the comparison criterion.

Inputs are array data per failing gauge (:class:`GaugeEvidence`): tared readings, the model's
reading, the model's readings under alternative hypotheses, the contribution of each load case and,
when available, a callable that evaluates the model with the grid moved or turned. The output is a
DataFrame with one row per (gauge, explanation) that qualifies, with the numbers behind it.

An explanation qualifies only if, with it applied, the gauge passes the criterion at EVERY evaluated
active (non-zero-load) step AND its RMS difference over those steps falls at least threefold.
Several explanations may qualify for one gauge; the tool shows the evidence and the analyst decides.
Strain is in microstrain, lengths in the model's length unit, angles in degrees.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import optimize

from correlate.comparison.criteria import Criterion
from correlate.core.errors import ModelError, ReadingsFormatError, StudyError

__all__ = ["ALTERNATIVES", "COLUMNS", "Criterion", "GaugeEvidence", "diagnose", "diagnose_loads",
           "diagnose_rosette"]

Array = NDArray[np.float64]
NAN = float("nan")
COLUMNS = ("gauge", "explanation", "detail", "rms_before_ue", "rms_after_ue", "plausible",
           "parameter")
#: Keys of ``GaugeEvidence.alternatives`` and the explanation each stands for.
ALTERNATIVES = {"rotated_90": "grid rotated 90 degrees",
                "no_kt": "transverse sensitivity in data reduction",
                "other_face": "gauge on the other face",
                "nodal_average": "mesh too coarse"}
_ORDER = ("sign reversed", "channels swapped", "channel gain", "grid rotated 90 degrees",
          "grid angle", "position offset", "transverse sensitivity in data reduction",
          "gauge on the other face", "mesh too coarse", "rosette grids permuted",
          "rosette mirrored")
#: An explanation must cut the RMS difference at least this many times.
RMS_FACTOR = 3.0
#: Two load cases vary independently at a gauge when the second singular value of its active
#: contributions is at least this fraction of the first (our judgement, not a published value).
INDEPENDENT = 0.1


@dataclass(frozen=True, eq=False)  # eq on array fields would be ambiguous
class GaugeEvidence:
    """What is known about one gauge, s load steps and C load cases (see the module docstring)."""

    gauge: str
    measured: Array  # (s,) tared [microstrain], NaN = not evaluated
    predicted: Array  # (s,) model reading for the test loads [microstrain]
    active: NDArray[np.bool_]  # (s,) non-zero-load steps that count
    alternatives: Mapping[str, Array]  # key of ALTERNATIVES -> (s,) model reading [microstrain]
    contributions: Array  # (s, C) per load case, summing to predicted [microstrain]
    evaluate_at: Callable[[Array, Array], Array] | None  # (k, 2) offsets, (k,) deg -> (k, s)
    position_tol: float  # [length unit]
    angle_tol: float  # [deg]
    neighbours_pass: bool | None
    rosette: str | None = None


def _checked(ev: GaugeEvidence) -> GaugeEvidence:
    """Return ``ev`` with float arrays; raise ReadingsFormatError naming the gauge and array."""
    m, p = np.asarray(ev.measured, dtype=float), np.asarray(ev.predicted, dtype=float)
    alt = {k: np.asarray(v, dtype=float) for k, v in ev.alternatives.items()}
    s = m.shape[0] if m.ndim == 1 else -1
    arrays = {"measured": m, "predicted": p, "active": np.asarray(ev.active, dtype=bool),
              **{f"alternatives[{k!r}]": v for k, v in alt.items()}}
    for name, a in arrays.items():
        if a.shape != (s,):
            msg = (f"gauge {ev.gauge!r}: {name} has shape {a.shape}, expected ({max(s, 0)},), "
                   "one value per load step; pass 1-D arrays of the same length")
            raise ReadingsFormatError(msg)
    if set(alt) - set(ALTERNATIVES):
        msg = f"gauge {ev.gauge!r}: unknown alternatives {sorted(set(alt) - set(ALTERNATIVES))}; "
        raise ReadingsFormatError(msg + f"use keys from {list(ALTERNATIVES)}")
    c = np.asarray(ev.contributions, dtype=float)
    if c.ndim != 2 or c.shape[0] != s or not np.allclose(
            c.sum(axis=1), p, rtol=1e-6, atol=1e-6 * np.max(np.abs(p), initial=1.0)):
        msg = (f"gauge {ev.gauge!r}: contributions (shape {c.shape}) must be (steps, load cases) "
               "and sum over load cases to predicted; rebuild them from the same model run")
        raise ReadingsFormatError(msg)
    return replace(ev, measured=m, predicted=p, active=arrays["active"], alternatives=alt,
                   contributions=c)


def _score(m: Array, p: Array, mask: NDArray[np.bool_], criterion: Criterion) -> tuple[bool, float]:
    """Whether ``p`` passes against ``m`` at every masked entry, and the RMS difference there."""
    if not mask.any() or not np.all(np.isfinite(p[mask])):
        return False, NAN
    d = m[mask] - p[mask]
    return bool(criterion.passes(m[mask], p[mask]).all()), float(np.sqrt(np.mean(d**2)))


def _fits(data: Array, model: Array, mask: NDArray[np.bool_], criterion: Criterion,
          before: float) -> float | None:
    """RMS difference with an explanation applied if it qualifies, else None."""
    ok, after = _score(data, model, mask, criterion)
    return after if ok and before > 0 and after * RMS_FACTOR <= before else None


def _rms_rows(m: Array, P: Array, mask: NDArray[np.bool_]) -> Array:
    """RMS difference of each row of model readings ``P`` (k, s) against ``m`` on the mask.

    Infinite where the model has no reading (a moved grid off the part): never a best fit.
    """
    return np.nan_to_num(np.sqrt(np.mean((P[:, mask] - m[mask]) ** 2, axis=1)), nan=np.inf)


def _row(gauge: str, explanation: str, detail: str, before: float, after: float,
         plausible: bool | None = None, parameter: float = NAN) -> dict[str, Any]:
    return dict(zip(COLUMNS, (gauge, explanation, detail, before, after, plausible, parameter),
                    strict=True))


def _evaluate(ev: GaugeEvidence, offsets: Array, angles: Array) -> Array:
    assert ev.evaluate_at is not None  # callers check; narrows the type for mypy
    out = np.asarray(ev.evaluate_at(offsets, angles), dtype=float)
    if out.shape != (len(angles), ev.measured.size):
        msg = (f"gauge {ev.gauge!r}: evaluate_at returned shape {out.shape}, expected "
               f"{(len(angles), ev.measured.size)} (one model reading per offset and load step)")
        raise ModelError(msg)
    return out


def _gain(ev: GaugeEvidence, mask: NDArray[np.bool_]) -> float | None:
    """Ratio k of measured = k predicted when the evidence can tell gain from a model error.

    A constant ratio points at the channel only when the gauge's reading mixes at least two load
    cases in varying proportions (a model error would scale them differently) and the nearby gauges
    pass. A negative k is a sign reversal with a gain, reported as ``sign reversed`` if it fits.
    """
    if ev.neighbours_pass is not True or mask.sum() < 2 or not np.all(
            np.isfinite(ev.contributions[mask])):
        return None
    sv = np.linalg.svd(ev.contributions[mask], compute_uv=False)
    p = ev.predicted[mask]
    if sv.size < 2 or not sv[1] >= INDEPENDENT * sv[0] or not p @ p > 0:
        return None
    k = float(ev.measured[mask] @ p / (p @ p))
    return k if k > 0 else None


def _best_angle(ev: GaugeEvidence, criterion: Criterion, mask: NDArray[np.bool_], before: float
                ) -> dict[str, Any] | None:
    """Search the grid angle over +/- 90 deg: 1-degree scan, then refine each of the 4 best minima.

    Of the refined angles that qualify, the smallest in magnitude is reported and the others are
    named in the detail (a single load case usually fits at two angles).
    """
    m = ev.measured
    grid = np.linspace(-90.0, 90.0, 181)
    r = _rms_rows(m, _evaluate(ev, np.zeros((grid.size, 2)), grid), mask)
    low = (r <= np.r_[np.inf, r[:-1]]) & (r <= np.r_[r[1:], np.inf])
    fits: list[tuple[float, float, float]] = []
    for i in np.flatnonzero(low)[np.argsort(r[low])][:4]:
        res = optimize.minimize_scalar(
            lambda a: _rms_rows(m, _evaluate(ev, np.zeros((1, 2)), np.array([a])), mask)[0],
            bounds=(max(grid[i] - 1.0, -90.0), min(grid[i] + 1.0, 90.0)), method="bounded",
            options={"xatol": 0.01, "maxiter": 30})  # 0.01 deg is far below any angle_tol
        a = float(res.x)
        after = _fits(m, _evaluate(ev, np.zeros((1, 2)), np.array([a]))[0], mask, criterion, before)
        if after is not None:
            fits.append((abs(a), a, after))
    if not fits:
        return None
    fits.sort()
    _, a, after = fits[0]
    detail = f"grid turned {a:+.2f} deg from the model's direction (tolerance {ev.angle_tol:g})"
    if len(fits) > 1:
        detail += "; also fits at " + ", ".join(f"{f[1]:+.2f}" for f in fits[1:]) + " deg"
    return _row(ev.gauge, "grid angle", detail, before, after, abs(a) <= ev.angle_tol, a)


WIDENINGS = 3   # an offset found at the rim of the disc doubles the radius, at most this often
RIM = 0.95      # ... "at the rim": this share of the radius or more


def _best_offset(ev: GaugeEvidence, criterion: Criterion, mask: NDArray[np.bool_], before: float,
                 radius: float) -> dict[str, Any] | None:
    """The offset search of :func:`_offset_in_disc`, widened while the best offset sits at the rim.

    A best offset at the edge of the disc is clipped, not found: the disc's radius is doubled (at
    most WIDENINGS times) and the detail says how far the search went.
    """
    for widened in range(WIDENINGS + 1):
        found, x = _offset_in_disc(ev, criterion, mask, before, radius)
        if x is None or float(np.hypot(*x)) < RIM * radius or widened == WIDENINGS:
            break
        radius *= 2.0
    if found is not None and widened:
        found["detail"] += f"; search widened to a radius of {radius:.3g}"
    return found


def _offset_in_disc(ev: GaugeEvidence, criterion: Criterion, mask: NDArray[np.bool_],
                    before: float, radius: float) -> tuple[dict[str, Any] | None, Array | None]:
    """Search the grid centre offset over a disc: a 21 x 21 scan, then nested 11 x 11 scans
    around the best, each a fifth of the spacing before (down to a 1250th of the radius), every
    scan one evaluation of all its points together.

    When the readings depend on one offset component only (one load case in a linear field), the
    fit is a line of offsets; the shortest one is reported and the detail says so. Returns the
    row (None when no offset makes the gauge pass) and the offset found (None when none is).
    """
    m = ev.measured

    def clip(x: Array) -> Array:
        """Points pulled back onto the disc (rows of offsets)."""
        norm = np.maximum(np.hypot(x[..., 0], x[..., 1]), 1e-300)
        return x * np.minimum(1.0, radius / norm)[..., None]

    def best(points: Array) -> Array | None:
        r = _rms_rows(m, _evaluate(ev, points, np.zeros(len(points))), mask)
        return points[int(np.nanargmin(r))] if np.any(np.isfinite(r)) else None

    h = radius / 10.0
    a = np.linspace(-radius, radius, 21)
    X = np.stack(np.meshgrid(a, a, indexing="ij"), axis=-1).reshape(-1, 2)
    x = best(X[np.hypot(X[:, 0], X[:, 1]) <= radius * (1 + 1e-12)])
    if x is None:
        return None, None
    # a 1250th of the radius is far below what the analyst can act on
    for _ in range(3):
        a = np.linspace(-h, h, 11)
        near = clip(x + np.stack(np.meshgrid(a, a, indexing="ij"), axis=-1).reshape(-1, 2))
        found = best(near)
        x = x if found is None else found
        h /= 5.0
    x = clip(x)
    # Jacobian of the readings with respect to the offset, by central differences.
    e = 1e-3 * radius
    P = _evaluate(ev, x + np.array([[e, 0], [-e, 0], [0, e], [0, -e]]), np.zeros(4))[:, mask]
    J = np.column_stack([P[0] - P[1], P[2] - P[3]]) / (2 * e)
    sv, vt = np.linalg.svd(J)[1:] if np.all(np.isfinite(J)) else (np.ones(2), np.eye(2))
    note = ""
    if sv.size < 2 or sv[1] < 1e-3 * sv[0]:
        x = x - (x @ vt[1]) * vt[1]
        note = "; only the component along the strain gradient is determined, shortest shown"
    after = _fits(m, _evaluate(ev, x[None], np.zeros(1))[0], mask, criterion, before)
    if after is None:
        return None, x
    d = float(np.hypot(*x))
    detail = (f"grid centre moved by (along, across) = ({x[0]:+.3g}, {x[1]:+.3g}), distance "
              f"{d:.3g} (tolerance {ev.position_tol:g}){note}")
    return _row(ev.gauge, "position offset", detail, before, after, d <= ev.position_tol, d), x


ALTERNATIVE_DETAIL = {
    "rotated_90": "the model's reading of a grid turned 90 degrees fits the measurement",
    "no_kt": "the model's reading without transverse sensitivity fits (Kt left out of, or applied "
             "twice in, the data reduction)",
    "other_face": "the model's reading on the other shell face fits",
    "nodal_average": "the nodal-averaged model strain fits: the mesh may be too coarse here",
}


def _explain(ev: GaugeEvidence, criterion: Criterion, radius: float) -> list[dict[str, Any]]:
    """Rows of the single-gauge explanations that qualify for one failing gauge."""
    m, p = ev.measured, ev.predicted
    mask = ev.active & np.isfinite(m)
    before = _score(m, p, mask, criterion)[1]
    rows: list[dict[str, Any]] = []

    def check(name: str, data: Array, model: Array, detail: str, parameter: float = NAN) -> None:
        after = _fits(data, model, mask, criterion, before)
        if after is not None:
            rows.append(_row(ev.gauge, name, detail, before, after, None, parameter))

    check("sign reversed", -m, p, "-1 x measured fits the model reading")
    k = _gain(ev, mask)
    if k is not None:
        check("channel gain", m / k, p, f"measured = {k:.4g} x predicted across independent load "
              "cases, and the neighbouring gauges pass", k)
    for key, alt in ev.alternatives.items():
        check(ALTERNATIVES[key], m, alt, ALTERNATIVE_DETAIL[key])
    if ev.evaluate_at is not None:
        for found in (_best_angle(ev, criterion, mask, before),
                      _best_offset(ev, criterion, mask, before, radius)):
            if found is not None:
                rows.append(found)
    return rows


def _swaps(failing: list[GaugeEvidence], criterion: Criterion) -> list[dict[str, Any]]:
    """Rows for pairs of failing gauges that both pass with their measured columns exchanged."""
    rows: list[dict[str, Any]] = []
    for a, b in itertools.combinations(failing, 2):
        if a.measured.shape != b.measured.shape:
            continue
        found: list[dict[str, Any]] = []
        for x, y in ((a, b), (b, a)):
            before = _score(x.measured, x.predicted, x.active & np.isfinite(x.measured),
                            criterion)[1]
            after = _fits(y.measured, x.predicted, x.active & np.isfinite(y.measured), criterion,
                          before)
            if after is not None:
                found.append(_row(x.gauge, "channels swapped", f"swapped with gauge {y.gauge!r}",
                                  before, after))
        rows += found if len(found) == 2 else []
    return rows


def _frame(rows: list[dict[str, Any]], gauges: list[str]) -> pd.DataFrame:
    """Rows in gauge order, then best fit first (RMS difference after the explanation, to
    0.001 ue), then in the order of ``_ORDER``."""
    def fit(r: dict[str, Any]) -> float:
        after = r["rms_after_ue"]
        return round(float(after), 3) if np.isfinite(after) else np.inf

    rows = sorted(rows, key=lambda r: (gauges.index(r["gauge"]), fit(r),
                                       _ORDER.index(r["explanation"])))
    return pd.DataFrame(rows, columns=list(COLUMNS)).astype({"plausible": object})


def diagnose(evidence: Sequence[GaugeEvidence], criterion: Criterion, *,
             search_radius: float | None = None) -> pd.DataFrame:
    """Try the usual explanations on each failing gauge and keep those that make it pass.

    Parameters
    ----------
    evidence : sequence of GaugeEvidence
        One record per gauge; gauges that already pass at every active step are skipped.
    criterion : Criterion
        The analyst's pass criterion.
    search_radius : float, optional
        Radius of the disc of grid-centre offsets searched. [length unit] Default
        ``max(5 * position_tol, 3)`` per gauge.

    Returns
    -------
    pandas.DataFrame
        ``COLUMNS``, one row per (failing gauge, qualifying explanation). ``parameter`` is the gain
        k, the grid angle [deg] or the offset distance [length unit], else NaN; ``plausible``
        compares the angle or offset with the gauge's tolerance, else None.

    Raises
    ------
    ReadingsFormatError
        An array of the wrong shape, or an unknown alternative key.
    ModelError
        ``evaluate_at`` returned readings of the wrong shape.

    Notes
    -----
    Tried: measured x -1; the measured columns of two failing gauges exchanged (both must
    qualify); measured / k (see ``_gain``); each alternative model reading; the best grid angle
    and grid-centre offset found with ``evaluate_at``.
    """
    if search_radius is not None and not search_radius > 0:
        msg = f"search_radius is {search_radius}; give a positive length in the model's unit"
        raise StudyError(msg)
    checked = [_checked(ev) for ev in evidence]
    masks = [ev.active & np.isfinite(ev.measured) for ev in checked]
    failing = [ev for ev, mask in zip(checked, masks, strict=True)
               if mask.any() and not _score(ev.measured, ev.predicted, mask, criterion)[0]]
    rows: list[dict[str, Any]] = []
    for ev in failing:
        radius = search_radius if search_radius is not None else max(5 * ev.position_tol, 3.0)
        rows += _explain(ev, criterion, radius)
    rows += _swaps(failing, criterion)
    return _frame(rows, [ev.gauge for ev in checked])


def diagnose_rosette(name: str, grids: list[str], measured: ArrayLike, predicted: ArrayLike,
                     mirrored: ArrayLike, active: ArrayLike, criterion: Criterion) -> pd.DataFrame:
    """Check whether a failing rosette passes with its grid columns permuted or its layout mirrored.

    Parameters
    ----------
    name : str
        Rosette id, written in the ``gauge`` column.
    grids : list of str
        Grid labels in column order (e.g. ``["A", "B", "C"]``).
    measured, predicted, mirrored : array_like, shape (s, m)
        Tared measurements, model readings, and model readings of the mirror-image rosette (grid
        angles negated). [microstrain]
    active : array_like of bool, shape (s,)
        Non-zero-load steps that count.
    criterion : Criterion

    Returns
    -------
    pandas.DataFrame
        ``COLUMNS``; ``rosette grids permuted`` (detail: the order of measured columns that fits
        the grids in order) or ``rosette mirrored``.
    """
    m, p, mir = (np.asarray(a, dtype=float) for a in (measured, predicted, mirrored))
    act = np.asarray(active, dtype=bool)
    for label, a in (("predicted", p), ("mirrored", mir)):
        if m.ndim != 2 or a.shape != m.shape or m.shape[1] != len(grids) \
                or act.shape != m.shape[:1]:
            msg = (f"rosette {name!r}: measured {m.shape}, {label} {a.shape}, active {act.shape} "
                   f"with {len(grids)} grids; pass (steps, grids) arrays and (steps,) active")
            raise ReadingsFormatError(msg)
    mask = act[:, None] & np.isfinite(m)
    ok, before = _score(m, p, mask, criterion)
    rows: list[dict[str, Any]] = []
    if ok or not mask.any():
        return _frame(rows, [name])
    for perm in list(itertools.permutations(range(len(grids))))[1:]:  # [0] is the identity
        mp = m[:, list(perm)]
        after = _fits(mp, p, act[:, None] & np.isfinite(mp), criterion, before)
        if after is not None:
            detail = (f"measured columns {', '.join(grids[i] for i in perm)} fit grids "
                      f"{', '.join(grids)}")
            rows.append(_row(name, "rosette grids permuted", detail, before, after))
    after = _fits(m, mir, mask, criterion, before)
    if after is not None:
        rows.append(_row(name, "rosette mirrored", "mirrored grid layout fits", before, after))
    return _frame(rows, [name])


def _histories(c: Array, loads: Array | None) -> tuple[Array, Array, list[int]]:
    """Split each load column into a load history L (s,) and unit case U (g,), contribution L U.

    Without ``loads``, L comes from a rank-1 factorisation scaled to a peak of +1; columns that are
    not rank 1 are listed and left out of the swap check.
    """
    s, g, n = c.shape
    L, U = np.zeros((s, n)), np.zeros((g, n))
    bad: list[int] = []
    for j in range(n):
        if loads is not None:
            L[:, j] = loads[:, j]
        else:
            u, sv, _ = np.linalg.svd(c[:, :, j], full_matrices=False)
            if sv[0] > 0 and (sv.size < 2 or sv[1] <= 1e-9 * sv[0]):
                L[:, j] = u[:, 0] / u[np.argmax(np.abs(u[:, 0])), 0]
        if not L[:, j] @ L[:, j] > 0:
            bad.append(j)
            continue
        U[:, j] = L[:, j] @ c[:, :, j] / (L[:, j] @ L[:, j])
    return L, U, bad


def diagnose_loads(measured: ArrayLike, contributions: ArrayLike, active: ArrayLike,
                   load_names: Sequence[str], criterion: Criterion, *,
                   loads: ArrayLike | None = None) -> dict[str, Any]:
    """Fit a factor per load column and look for swapped or sign-reversed load columns.

    Parameters
    ----------
    measured : array_like, shape (s, g)
        Tared readings of all gauges; NaN = not evaluated. [microstrain]
    contributions : array_like, shape (s, g, C)
        Model contribution of each load column to each gauge reading. [microstrain]
    active : array_like of bool, shape (s,)
        Non-zero-load steps that count.
    load_names : sequence of str, length C
    criterion : Criterion
        Used for the pass fractions reported with each finding.
    loads : array_like, shape (s, C), optional
        Applied loads. Without them, a swap exchanges the load histories scaled to their peaks.

    Returns
    -------
    dict
        ``factors`` and ``standard_errors`` by load name: least squares measured = sum_j k_j
        contribution_j over the finite active pairs, SE = sqrt(diag(s^2 (X'X)^-1)), s^2 = RSS /
        (n - C); ``n_pairs``; ``rms_before_ue``, ``rms_after_ue`` (with the factors);
        ``swapped_loads``, ``load_sign``: findings whose correction cuts the overall RMS
        difference at least 3 times, with ``loads``, ``rms_before_ue``, ``rms_after_ue``,
        ``factor`` (RMS ratio), ``pass_fraction_before``/``_after``; ``reason`` if anything is NaN
        or skipped.
    """
    m, c = np.asarray(measured, dtype=float), np.asarray(contributions, dtype=float)
    act, names = np.asarray(active, dtype=bool), [str(n) for n in load_names]
    if m.ndim != 2 or c.shape != (*m.shape, len(names)) or act.shape != m.shape[:1]:
        msg = (f"measured {m.shape}, contributions {c.shape}, active {act.shape} with "
               f"{len(names)} load names: pass (steps, gauges), (steps, gauges, loads), (steps,)")
        raise ReadingsFormatError(msg)
    lo = None if loads is None else np.asarray(loads, dtype=float)
    if lo is not None and lo.shape != (m.shape[0], len(names)):
        msg = f"loads has shape {lo.shape}, expected {(m.shape[0], len(names))}: (steps, loads)"
        raise ReadingsFormatError(msg)
    mask = act[:, None] & np.isfinite(m) & np.all(np.isfinite(c), axis=2)
    y, X = m[mask], c[mask]
    pred = X.sum(axis=1)
    n, k = X.shape
    reasons: list[str] = []

    def rms(p: Array) -> float:
        return float(np.sqrt(np.mean((y - p) ** 2))) if n else NAN

    def passed(p: Array) -> float:
        return float(np.mean(criterion.passes(y, p))) if n else NAN

    factors, se = np.full(k, NAN), np.full(k, NAN)
    if n and np.linalg.matrix_rank(X) == k:
        factors = np.linalg.lstsq(X, y, rcond=None)[0]
        if n > k:
            s2 = np.sum((y - X @ factors) ** 2) / (n - k)
            se = np.sqrt(np.diag(s2 * np.linalg.inv(X.T @ X)))
        else:
            reasons.append(f"standard errors need more than {k} pairs; found {n}")
    else:
        reasons.append(f"factors need {k} independent load columns over {n} finite active pairs")
    before = rms(pred)
    out: dict[str, Any] = {
        "factors": dict(zip(names, map(float, factors), strict=True)),
        "standard_errors": dict(zip(names, map(float, se), strict=True)),
        "n_pairs": int(n), "rms_before_ue": before,
        "rms_after_ue": rms(X @ factors) if np.all(np.isfinite(factors)) else NAN,
        "swapped_loads": [], "load_sign": []}

    def finding(key: str, which: list[str], p: Array) -> None:
        after = rms(p)
        if before > 0 and after * RMS_FACTOR <= before:
            out[key].append({"loads": which, "rms_before_ue": before, "rms_after_ue": after,
                             "factor": before / after if after > 0 else float("inf"),
                             "pass_fraction_before": passed(pred),
                             "pass_fraction_after": passed(p)})

    for j in range(k):
        finding("load_sign", [names[j]], pred - 2 * X[:, j])
    L, U, bad = _histories(np.where(np.isfinite(c), c, 0.0), lo)
    if bad:
        reasons.append("swap check skipped for " + ", ".join(names[j] for j in bad) + ": no "
                       "load history (all zero, or not rank 1 without loads=)")
    for i, j in itertools.combinations([j for j in range(k) if j not in bad], 2):
        if np.allclose(U[:, i], U[:, j], rtol=1e-9, atol=1e-12 * np.max(np.abs(U))):
            continue  # same unit case: exchanging the loads changes nothing
        finding("swapped_loads", [names[i], names[j]],
                pred - np.outer(L[:, i] - L[:, j], U[:, i] - U[:, j])[mask])
    if reasons:
        out["reason"] = "; ".join(reasons)
    return out
