"""Parameter identification from a study of model variants (stage: variants).

Finds the parameters whose response-surface readings (:mod:`correlate.variants.surface`) agree
best with the measured ones, with their standard errors, correlations and a warning where the
readings cannot tell parameters apart or pull them beyond the variants; and ranks the variants by
their correlation metrics.

Inputs: a :class:`ResponseSurface`, the measured readings (N,) in the surface's output order, and
a metrics table with one row per variant. Outputs: :class:`Identification` and a ranked copy of
the table. The surface's functions are re-exported so that one import serves the whole study.

References
----------
.. [1] M. I. Friswell and J. E. Mottershead, *Finite Element Model Updating in Structural
   Dynamics*, Kluwer, 1995, ch. 7 (sensitivity-based updating by least squares).
.. [2] G. A. F. Seber and C. J. Wild, *Nonlinear Regression*, Wiley, 1989, sec. 2.1 and 5.1.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
import scipy.linalg
import scipy.optimize
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import StudyError
from correlate.variants.surface import ResponseSurface, fit_response, leave_one_out_error

if TYPE_CHECKING:  # pandas is only duck-typed here: rank_variants calls the table's own sort
    import pandas as pd

__all__ = [
    "Identification",
    "ResponseSurface",
    "fit_response",
    "identify",
    "leave_one_out_error",
    "rank_variants",
]

CONDITION_LIMIT = 1e3  # above this the scaled Jacobian is called ill-conditioned (common practice)
# Distance to a bound, in scaled coordinates (range 2), that counts as resting on it: the
# trust-region reflective iterates stay strictly inside the bounds (scipy documentation)
_ON_BOUND = 1e-4


@dataclass(frozen=True, eq=False)
class Identification:
    """Parameters identified from measured readings, with their Gauss-Newton uncertainty.

    Attributes
    ----------
    names : tuple of str
        Parameter names, P of them.
    estimate : ndarray, shape (P,)
        Identified parameters. [parameter unit]
    standard_error : ndarray, shape (P,)
        Linearised standard errors. [parameter unit]
    covariance, correlation : ndarray, shape (P, P)
        Covariance [parameter unit squared] and correlation [-] of the estimate.
    estimate_scaled, standard_error_scaled : ndarray, shape (P,)
        The same in the surface's scaled coordinates, where the solve ran. [-]
    condition_number : float
        Ratio of largest to smallest singular value of the weighted scaled Jacobian.
    residual_variance : float
        ``s^2``: weighted sum of squared residuals over ``dof``. [weight x output unit squared]
    dof : int
        Outputs used minus parameters.
    used : ndarray of bool, shape (N,)
        Outputs that entered the fit (finite measured value and positive weight).
    residuals : ndarray, shape (N,)
        Measured minus predicted at the estimate, NaN where not used. [output unit]
    lower, upper : ndarray, shape (P,)
        Bounds the solve ran in: the given bounds clipped to the hull. [parameter unit]
    extrapolated : bool
        True when the readings pull some parameter beyond the variants' hull, so that its
        estimate rests on a hull face and is not a least-squares estimate.
    at_hull : ndarray of int, shape (P,)
        -1 or +1 where the estimate rests on the lower or upper hull face and the cost falls
        outwards; 0 elsewhere.
    warnings : tuple of str
        One line each: ill-conditioning, undetermined parameters, extrapolation, bounds, solver.
    """

    names: tuple[str, ...]
    estimate: NDArray[np.float64]
    standard_error: NDArray[np.float64]
    covariance: NDArray[np.float64]
    correlation: NDArray[np.float64]
    estimate_scaled: NDArray[np.float64]
    standard_error_scaled: NDArray[np.float64]
    condition_number: float
    residual_variance: float
    dof: int
    used: NDArray[np.bool_]
    residuals: NDArray[np.float64]
    lower: NDArray[np.float64]
    upper: NDArray[np.float64]
    extrapolated: bool
    at_hull: NDArray[np.int_]
    warnings: tuple[str, ...]


def identify(
    surface: ResponseSurface,
    measured: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    bounds: tuple[ArrayLike, ArrayLike],
    x0: ArrayLike | None = None,
    hull: tuple[ArrayLike, ArrayLike] | None = None,
) -> Identification:
    """Find the parameters whose surface outputs best match the measured readings.

    Parameters
    ----------
    surface : ResponseSurface
        From :func:`fit_response`.
    measured : array_like, shape (N,)
        Measured readings in the surface's output order; NaN entries are left out. [output unit]
    weights : array_like, shape (N,), optional
        Non-negative weights, normally ``1 / sigma_n^2``; zero leaves an output out. Default 1.
    bounds : (array_like, array_like), each shape (P,)
        Lower and upper bounds of the parameters. [parameter unit]
    x0 : array_like, shape (P,), optional
        Starting point inside the bounds. Default: mid-point of the bounds in scaled coordinates.
        [parameter unit]
    hull : (array_like, array_like), each shape (P,), optional
        Where the surface may be trusted. Default: the variants' range, ``surface.lower`` to
        ``surface.upper``; a wider hull lets the solve extrapolate the surface. [parameter unit]

    Returns
    -------
    Identification

    Raises
    ------
    StudyError
        Wrong shapes, bounds that do not overlap the hull, a starting point outside them, or no
        more usable outputs than parameters.

    Notes
    -----
    ``scipy.optimize.least_squares`` (trust-region reflective, analytic Jacobian) minimises
    ``sum_n w_n (y_n(x) - m_n)^2`` over the scaled coordinates ``x`` inside the bounds, which are
    clipped to the hull first: the surface is a fit to the variants and says nothing reliable
    beyond them, so the solve never leaves them. When the cost still falls outwards at a clipped
    hull face, the estimate is reported with ``extrapolated=True`` and a warning (the variants
    must be extended there). Sensitivity-based updating as in Friswell and Mottershead [1]_. A
    quadratic surface may have more than one local minimum: start from the best-ranked variant
    (:func:`rank_variants`) when in doubt.

    The covariance is the usual Gauss-Newton one (Seber and Wild [2]_, sec. 2.1 and 5.1)::

        cov_x = s^2 (J^T W J)^-1,   s^2 = sum_n w_n r_n^2 / (n - P)

    with ``J`` the scaled Jacobian at the optimum, computed from the singular values of
    ``W^(1/2) J``; it is mapped to parameter units by ``d theta / d x`` (delta method). A
    Jacobian singular to machine precision gives infinite standard errors. Warnings are raised
    when the condition number of ``W^(1/2) J`` exceeds 1e3 or a standard error exceeds the width
    of its bounds in scaled coordinates.
    """
    names, n_par = surface.names, len(surface.names)
    m, w = _validated_readings(surface, measured, weights)
    used = np.isfinite(m) & (w > 0)
    n = int(used.sum())
    if n <= n_par:
        msg = (f"identify: {n} usable measured outputs for {n_par} parameters; at least "
               f"{n_par + 1} finite readings with positive weight are needed")
        raise StudyError(msg)
    lo, hi, hull_lo, hull_hi = _clipped_bounds(surface, bounds, hull)
    xl, xh = surface.scale(lo)[0], surface.scale(hi)[0]
    start = _start(surface, x0, lo, hi, xl, xh)
    x, fun, jw, grad, status = _solve(surface, m[used], w[used], used, (xl, xh), start)
    s2 = float(fun @ fun) / (n - n_par)
    cov_x, cond, null = _gauss_newton(jw, s2)
    se_x = np.sqrt(np.diag(cov_x))
    d = surface.dtheta_dx(x[None, :])[0]
    with np.errstate(invalid="ignore", divide="ignore"):
        corr = cov_x / np.outer(se_x, se_x)
    side = _on_bound(x, xl, xh, grad)
    at_hull = np.where(((side == -1) & (lo == hull_lo)) | ((side == 1) & (hi == hull_hi)), side, 0)
    notes = _notes(names, cond, null, se_x, xh - xl, at_hull, (hull_lo, hull_hi),
                   (side != 0) & (at_hull == 0), status)
    estimate = surface.unscale(x[None, :])[0]
    full = np.full(m.shape, np.nan)
    full[used] = m[used] - surface.predict_scaled(x[None, :])[0, used]
    return Identification(
        names=names, estimate=estimate, standard_error=d * se_x, covariance=cov_x * np.outer(d, d),
        correlation=corr, estimate_scaled=x, standard_error_scaled=se_x, condition_number=cond,
        residual_variance=s2, dof=n - n_par, used=used, residuals=full, lower=lo, upper=hi,
        extrapolated=bool(np.any(at_hull)), at_hull=at_hull, warnings=notes,
    )


def rank_variants(
    metrics: pd.DataFrame,
    *,
    rms_column: str = "rms_ue",
    pass_column: str = "pass_fraction",
) -> pd.DataFrame:
    """Rank variants by RMS difference of the healthy gauges, then by pass fraction.

    Parameters
    ----------
    metrics : pandas.DataFrame
        One row per variant with the RMS measured-minus-predicted difference over the healthy
        gauges ``rms_column`` [microstrain] and the fraction of them that pass ``pass_column``
        [-].
    rms_column, pass_column : str
        Column names.

    Returns
    -------
    pandas.DataFrame
        A sorted copy, smallest RMS first, ties broken by larger pass fraction, remaining ties in
        input order; missing values last. A ``rank`` column counts from 1.

    Raises
    ------
    StudyError
        A named column is missing.
    """
    missing = [c for c in (rms_column, pass_column) if c not in metrics.columns]
    if missing:
        msg = (f"rank variants: the metrics table has no column {', '.join(map(repr, missing))}; "
               f"found {', '.join(map(str, metrics.columns))}")
        raise StudyError(msg)
    ranked = metrics.sort_values([rms_column, pass_column], ascending=[True, False],
                                 kind="stable", na_position="last")
    return ranked.assign(rank=np.arange(1, len(ranked) + 1))


# -- helpers -------------------------------------------------------------------------------------


def _validated_readings(surface: ResponseSurface, measured: ArrayLike,
                        weights: ArrayLike | None) -> tuple[NDArray, NDArray]:
    m = np.asarray(measured, dtype=float)
    w = np.ones(m.shape) if weights is None else np.asarray(weights, dtype=float)
    if m.shape != (surface.n_outputs,) or w.shape != m.shape:
        msg = (f"identify: measured {m.shape} and weights {w.shape} must both be "
               f"({surface.n_outputs},), one entry per surface output")
        raise StudyError(msg)
    if not np.all(np.isfinite(w) & (w >= 0)):
        bad = w[~(np.isfinite(w) & (w >= 0))]
        msg = f"identify: weights must be finite and non-negative; found {bad[:3]}"
        raise StudyError(msg)
    return m, w


def _clipped_bounds(surface: ResponseSurface, bounds: tuple[ArrayLike, ArrayLike],
                    hull: tuple[ArrayLike, ArrayLike] | None) -> tuple[NDArray, ...]:
    lo, hi = _pair(bounds, len(surface.names), "bounds")
    h_lo, h_hi = (surface.lower, surface.upper) if hull is None else _pair(hull, len(lo), "hull")
    c_lo, c_hi = np.maximum(lo, h_lo), np.minimum(hi, h_hi)
    for i, nm in enumerate(surface.names):
        if not c_lo[i] < c_hi[i]:
            msg = (f"identify: parameter '{nm}': bounds {lo[i]:g}..{hi[i]:g} leave nothing inside "
                   f"the variants' hull {h_lo[i]:g}..{h_hi[i]:g}; widen the bounds or solve "
                   f"variants there")
            raise StudyError(msg)
    return c_lo, c_hi, h_lo, h_hi


def _pair(pair: tuple[ArrayLike, ArrayLike], n_par: int, what: str) -> tuple[NDArray, NDArray]:
    """(lower, upper) as two float arrays of shape (P,); a scalar applies to every parameter."""
    try:
        lo, hi = (np.broadcast_to(np.asarray(b, dtype=float), (n_par,)).copy() for b in pair)
    except ValueError:
        msg = (f"identify: {what} must be a pair (lower, upper) of {n_par} values each; found "
               f"{pair!r}")
        raise StudyError(msg) from None
    return lo, hi


def _start(surface: ResponseSurface, x0: ArrayLike | None, lo: NDArray, hi: NDArray,
           xl: NDArray, xh: NDArray) -> NDArray[np.float64]:
    if x0 is None:
        return 0.5 * (xl + xh)
    t0 = np.asarray(x0, dtype=float).reshape(-1)
    if t0.shape != lo.shape or np.any(t0 < lo) or np.any(t0 > hi):
        msg = (f"identify: x0 {t0} lies outside the bounds clipped to the hull {lo} .. {hi}; "
               f"start inside them")
        raise StudyError(msg)
    return surface.scale(t0)[0]


def _gauss_newton(jw: NDArray[np.float64], s2: float) -> tuple[NDArray, float, NDArray]:
    """Covariance ``s2 (Jw^T Jw)^-1``, condition number of ``Jw`` and its weakest direction."""
    _, sv, vt = scipy.linalg.svd(jw, full_matrices=False)
    cond = float(sv[0] / sv[-1]) if sv[-1] > 0 else np.inf
    with np.errstate(divide="ignore", invalid="ignore"):
        cov = s2 * (vt.T / sv**2) @ vt
    return cov, cond, vt[-1]


def _on_bound(x: NDArray, xl: NDArray, xh: NDArray, grad: NDArray) -> NDArray[np.int_]:
    """-1/+1 where x rests on its lower/upper bound with the cost falling outwards, else 0."""
    low = (x - xl <= _ON_BOUND) & (grad > 0)
    high = (xh - x <= _ON_BOUND) & (grad < 0)
    return np.where(low, -1, np.where(high, 1, 0))


def _solve(surface: ResponseSurface, mu: NDArray, w: NDArray, used: NDArray,
           box: tuple[NDArray, NDArray], start: NDArray) -> tuple[NDArray, ...]:
    """Bounded least squares in scaled coordinates: x, weighted residuals, Jacobian, gradient."""
    sw = np.sqrt(w)
    # scipy's gtol is absolute: readings in m/m (~1e-4) would stop the solver at once, so the
    # residuals are divided by the weighted RMS reading, which moves neither optimum nor covariance
    norm = float(np.sqrt(np.mean((sw * mu) ** 2))) or 1.0
    sw_n = sw / norm

    def residual(x: NDArray[np.float64]) -> NDArray[np.float64]:
        return sw_n * (surface.predict_scaled(x[None, :])[0, used] - mu)

    def jac(x: NDArray[np.float64]) -> NDArray[np.float64]:
        return sw_n[:, None] * surface.jacobian_scaled(x[None, :])[0, used, :]

    res = scipy.optimize.least_squares(residual, start, jac=jac, bounds=box, method="trf",
                                       xtol=1e-12, ftol=1e-12, gtol=1e-12)
    status = "" if res.status > 0 else str(res.message)
    return res.x, res.fun * norm, res.jac * norm, res.jac.T @ res.fun, status


def _notes(names: tuple[str, ...], cond: float, null: NDArray, se_x: NDArray, width: NDArray,
           at_hull: NDArray, hull: tuple[NDArray, NDArray], at_bound: NDArray,
           failure: str) -> tuple[str, ...]:
    """The identification's warning lines."""
    hull_lo, hull_hi = hull
    notes = []
    if not cond <= CONDITION_LIMIT:
        weak = [repr(names[i]) for i in np.flatnonzero(np.abs(null) >= 0.3)]
        notes.append(f"parameters {', '.join(weak)} act alike on these gauges: condition number "
                     f"{cond:.3g} of the scaled Jacobian exceeds {CONDITION_LIMIT:g}; fix one of "
                     f"them, add gauges that separate them, or narrow the study")
    for i in np.flatnonzero(~(se_x <= width)):
        notes.append(f"parameter {names[i]!r}: standard error {se_x[i]:.3g} exceeds the width "
                     f"{width[i]:.3g} of its bounds (scaled coordinates); the readings do not "
                     f"determine it")
    for i in np.flatnonzero(at_hull):
        edge, value = ("lowest", hull_lo[i]) if at_hull[i] < 0 else ("highest", hull_hi[i])
        notes.append(f"parameter {names[i]!r}: the readings pull the estimate beyond the "
                     f"variants' {edge} value {value:g}; it is held there (extrapolated): solve "
                     f"variants beyond it")
    for i in np.flatnonzero(at_bound):
        notes.append(f"parameter {names[i]!r}: the estimate rests on a given bound; widen it "
                     f"(the standard error does not describe a bounded estimate)")
    if failure:
        notes.append(f"identify: the solver stopped without converging: {failure}")
    return tuple(notes)
