"""Response surface of a study of model variants (stage: variants).

After a failed correlation the analyst solves the model for several values of its uncertain
parameters (joint stiffness, modulus, thickness, ...). Each variant gives the model's readings for
every gauge at the test's steps. This module fits a least-squares polynomial to those readings
across the variants and tells how well it reproduces a variant it was not fitted to;
:mod:`correlate.variants.identify` uses it to find the parameters that match the test.

Inputs: the variants' parameters (V, P) and their predicted readings (V, N), one column per output
(a gauge at a step, flattened in any fixed order). Outputs: :class:`ResponseSurface` and
leave-one-out errors (V,).

References
----------
.. [1] R. H. Myers, D. C. Montgomery and C. M. Anderson-Cook, *Response Surface Methodology*,
   3rd ed., Wiley, 2009 (first- and second-order models in coded variables).
.. [2] T. Hastie, R. Tibshirani and J. Friedman, *The Elements of Statistical Learning*, 2nd ed.,
   Springer, 2009, eq. (7.52); R. D. Cook and S. Weisberg, *Residuals and Influence in
   Regression*, Chapman and Hall, 1982.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from itertools import combinations_with_replacement

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import StudyError

__all__ = ["ResponseSurface", "fit_response", "leave_one_out_error"]

KINDS = ("linear", "quadratic")
_LN10 = np.log(10.0)


@dataclass(frozen=True, eq=False)
class ResponseSurface:
    """A least-squares polynomial in the scaled parameters, one column of coefficients per output.

    Attributes
    ----------
    kind : str
        ``"linear"`` or ``"quadratic"``.
    names : tuple of str
        Parameter names, P of them.
    log : ndarray of bool, shape (P,)
        True where the parameter is scaled by its base-10 logarithm.
    centre, half_range : ndarray, shape (P,)
        Scaling ``x = (u - centre) / half_range`` with ``u = log10(theta)`` where ``log`` else
        ``theta``; the variants span ``x`` in [-1, 1]. [parameter unit or log10 of it]
    exponents : ndarray of int, shape (T, P)
        Term ``t`` is the monomial ``prod_p x_p ** exponents[t, p]``.
    coefficients : ndarray, shape (T, N)
        Least-squares coefficients of each term for each output. [output unit]
    lower, upper : ndarray, shape (P,)
        The variants' hull: smallest and largest value of each parameter. [parameter unit]
    n_variants : int
        Number of variants the surface was fitted to.
    """

    kind: str
    names: tuple[str, ...]
    log: NDArray[np.bool_]
    centre: NDArray[np.float64]
    half_range: NDArray[np.float64]
    exponents: NDArray[np.int_]
    coefficients: NDArray[np.float64]
    lower: NDArray[np.float64]
    upper: NDArray[np.float64]
    n_variants: int

    @property
    def n_outputs(self) -> int:
        """Number of outputs N (gauge-steps)."""
        return int(self.coefficients.shape[1])

    def scale(self, theta: ArrayLike) -> NDArray[np.float64]:
        """Map parameters (M, P) [parameter unit] to scaled coordinates (M, P) [-]."""
        t = _points(theta, len(self.names), "theta")
        if np.any(t[:, self.log] <= 0):
            msg = (f"response surface: parameters {_listed(self.names, self.log)} are log-scaled "
                   f"and need positive values; found {t[:, self.log].min():g}")
            raise StudyError(msg)
        u = np.where(self.log, np.log10(np.where(self.log, t, 1.0)), t)
        return (u - self.centre) / self.half_range

    def unscale(self, x: ArrayLike) -> NDArray[np.float64]:
        """Map scaled coordinates (M, P) [-] back to parameters (M, P) [parameter unit]."""
        u = self.centre + self.half_range * _points(x, len(self.names), "x")
        return np.where(self.log, 10.0 ** np.where(self.log, u, 0.0), u)

    def predict_scaled(self, x: ArrayLike) -> NDArray[np.float64]:
        """Evaluate the surface at scaled points (M, P); return the outputs (M, N)."""
        return _design(_points(x, len(self.names), "x"), self.exponents) @ self.coefficients

    def jacobian_scaled(self, x: ArrayLike) -> NDArray[np.float64]:
        """Return d outputs / d x at scaled points (M, P) as (M, N, P) [output unit]."""
        dX = _design_derivative(_points(x, len(self.names), "x"), self.exponents)
        return np.einsum("mtp,tn->mnp", dX, self.coefficients)

    def predict(self, theta: ArrayLike) -> NDArray[np.float64]:
        """Evaluate the surface at parameters (M, P); return the outputs (M, N) [output unit].

        A single point of shape (P,) is read as (1, P), here and in the other methods.
        """
        return self.predict_scaled(self.scale(theta))

    def jacobian(self, theta: ArrayLike) -> NDArray[np.float64]:
        """Return the analytic d outputs / d theta at parameters (M, P) as (M, N, P).

        Notes
        -----
        Chain rule through the scaling: ``dx/dtheta = 1 / half_range`` for a linear parameter and
        ``1 / (half_range * theta * ln 10)`` for a log-scaled one. [output unit / parameter unit]
        """
        t = _points(theta, len(self.names), "theta")
        dxdt = 1.0 / (self.half_range * np.where(self.log, t * _LN10, 1.0))
        return self.jacobian_scaled(self.scale(t)) * dxdt[:, None, :]

    def dtheta_dx(self, x: ArrayLike) -> NDArray[np.float64]:
        """Return d theta / d x at scaled points (M, P) as (M, P) [parameter unit]."""
        theta = self.unscale(x)
        return self.half_range * np.where(self.log, theta * _LN10, 1.0)


def fit_response(
    params: ArrayLike,
    predictions: ArrayLike,
    *,
    kind: str = "linear",
    log: ArrayLike | None = None,
    names: Sequence[str] | None = None,
) -> ResponseSurface:
    """Fit a least-squares response surface of the predicted readings across the variants.

    Parameters
    ----------
    params : array_like, shape (V, P)
        Parameter values of each variant. [parameter unit]
    predictions : array_like, shape (V, N)
        Predicted readings of each variant, one column per output (gauge-step). [output unit]
    kind : {"linear", "quadratic"}
        First-order model, or full second-order model with squares and cross terms.
    log : array_like of bool, shape (P,), optional
        Scale these parameters by log10 before coding them to [-1, 1]. Default: none.
    names : sequence of str, optional
        Parameter names for messages. Default ``p0, p1, ...``.

    Returns
    -------
    ResponseSurface

    Raises
    ------
    StudyError
        Wrong shapes, non-finite values, a parameter that does not vary or is not positive under
        log, fewer variants than terms, or a set of variants that does not determine the terms.

    Notes
    -----
    Coded variables ``x_p = (u_p - c_p) / h_p`` with ``c_p``, ``h_p`` the mid-point and half of
    the variants' range of ``u_p`` (``log10 theta_p`` where asked), and per output ``n``::

        y_n(x) = b_0n + sum_p b_pn x_p [+ sum_{p<=q} b_pqn x_p x_q]

    fitted by one ``numpy.linalg.lstsq`` call for all outputs (Myers et al. [1]_, ch. 2 and 6).
    """
    P, Y, log_mask, names_t = _validated_study(params, predictions, log, names)
    if kind not in KINDS:
        msg = f"response surface: kind is {kind!r}; expected one of {', '.join(KINDS)}"
        raise StudyError(msg)
    exponents = _exponents(P.shape[1], kind)
    V, T = P.shape[0], exponents.shape[0]
    if T > V:
        msg = (f"response surface: {V} variants cannot fit the {T} terms of a {kind} surface in "
               f"{P.shape[1]} parameters; solve at least {T} variants or use fewer terms")
        raise StudyError(msg)
    u = np.where(log_mask, np.log10(np.where(log_mask, P, 1.0)), P)
    lo_u, hi_u = u.min(axis=0), u.max(axis=0)
    centre, half = 0.5 * (hi_u + lo_u), 0.5 * (hi_u - lo_u)
    X = _design((u - centre) / half, exponents)
    coefficients, _, rank, _ = np.linalg.lstsq(X, Y, rcond=None)
    if rank < T:
        msg = (f"response surface: the {V} variants determine only {rank} of the {T} terms of a "
               f"{kind} surface; vary the parameters independently (e.g. a factorial design)")
        raise StudyError(msg)
    return ResponseSurface(
        kind=kind, names=names_t, log=_frozen(log_mask), centre=_frozen(centre),
        half_range=_frozen(half), exponents=_frozen(exponents), coefficients=_frozen(coefficients),
        lower=_frozen(P.min(axis=0)), upper=_frozen(P.max(axis=0)), n_variants=V,
    )


def leave_one_out_error(
    params: ArrayLike,
    predictions: ArrayLike,
    *,
    kind: str = "linear",
    log: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """Return each variant's RMS leave-one-out error of the response surface.

    Parameters
    ----------
    params : array_like, shape (V, P)
        Parameter values of each variant. [parameter unit]
    predictions : array_like, shape (V, N)
        Predicted readings of each variant. [output unit]
    kind, log
        As for :func:`fit_response`.

    Returns
    -------
    ndarray, shape (V,)
        ``sqrt(mean_n e_(i)n^2)``: RMS over outputs of the error in predicting variant ``i`` by
        the surface fitted to the other variants. [output unit]

    Raises
    ------
    StudyError
        As :func:`fit_response`, or a variant without which the surface is not determined.

    Notes
    -----
    For linear least squares the leave-one-out residual is exactly ``e_(i) = e_i / (1 - h_ii)``,
    with ``e_i`` the ordinary residual and ``h_ii`` the diagonal of the hat matrix
    ``H = X (X^T X)^-1 X^T`` (Hastie et al. [2]_, eq. 7.52; Cook and Weisberg [2]_). It is the
    same with the coding fixed or re-derived without the variant, because linear and full
    quadratic polynomials stay the same space under any affine change of the coded variables.
    """
    surface = fit_response(params, predictions, kind=kind, log=log)
    X = _design(surface.scale(np.asarray(params, dtype=float)), surface.exponents)
    residual = np.asarray(predictions, dtype=float) - X @ surface.coefficients
    Q, _ = np.linalg.qr(X)
    leverage = np.einsum("it,it->i", Q, Q)
    alone = np.flatnonzero(1.0 - leverage < 1e-10)
    if alone.size:
        msg = (f"leave-one-out: without variant(s) {', '.join(map(str, alone))} the {kind} "
               f"surface is not determined (leverage 1); solve more variants around them")
        raise StudyError(msg)
    loo = residual / (1.0 - leverage)[:, None]
    return np.sqrt(np.mean(loo**2, axis=1))


# -- helpers --------------------------------------------------------------------------------------


def _frozen(a: NDArray) -> NDArray:
    out = np.array(a, copy=True)
    out.setflags(write=False)
    return out


def _listed(names: Sequence[str], mask: NDArray[np.bool_]) -> str:
    return ", ".join(repr(nm) for nm, k in zip(names, mask, strict=True) if k)


def _points(a: ArrayLike, n_par: int, what: str) -> NDArray[np.float64]:
    p = np.atleast_2d(np.asarray(a, dtype=float))
    if p.ndim != 2 or p.shape[1] != n_par:
        msg = f"response surface: {what} has shape {np.shape(a)}; expected (M, {n_par})"
        raise StudyError(msg)
    return p


def _exponents(n_par: int, kind: str) -> NDArray[np.int_]:
    eye = np.eye(n_par, dtype=int)
    rows = [np.zeros(n_par, dtype=int), *eye]
    if kind == "quadratic":
        rows += [eye[i] + eye[j] for i, j in combinations_with_replacement(range(n_par), 2)]
    return np.array(rows)


def _design(x: NDArray[np.float64], exponents: NDArray[np.int_]) -> NDArray[np.float64]:
    """Monomials (M, T) of the scaled points (M, P)."""
    return np.prod(x[:, None, :] ** exponents[None, :, :], axis=2)


def _design_derivative(x: NDArray[np.float64], exponents: NDArray[np.int_]) -> NDArray[np.float64]:
    """Derivatives (M, T, P) of the monomials with respect to each scaled coordinate."""
    powers = x[:, None, :] ** exponents[None, :, :]
    out = np.empty(powers.shape)
    for p in range(x.shape[1]):
        e = exponents[:, p]
        lowered = powers.copy()
        # e * x^(e-1); the clip keeps 0 ** -1 out of the constant-in-x_p terms, whose factor e is 0
        lowered[:, :, p] = e * x[:, None, p] ** np.maximum(e - 1, 0)
        out[:, :, p] = np.prod(lowered, axis=2)
    return out


def _validated_study(params: ArrayLike, predictions: ArrayLike, log: ArrayLike | None,
                     names: Sequence[str] | None) -> tuple[NDArray, NDArray, NDArray, tuple]:
    P = np.asarray(params, dtype=float)
    Y = np.asarray(predictions, dtype=float)
    if P.ndim != 2 or Y.ndim != 2 or P.shape[0] != Y.shape[0]:
        msg = (f"response surface: params {P.shape} and predictions {Y.shape} must be (V, P) and "
               f"(V, N) with one row per variant")
        raise StudyError(msg)
    n_par = P.shape[1]
    names_t = tuple(names) if names is not None else tuple(f"p{i}" for i in range(n_par))
    log_mask = np.zeros(n_par, bool) if log is None else np.asarray(log, dtype=bool)
    if log_mask.shape != (n_par,) or len(names_t) != n_par:
        msg = (f"response surface: log mask {log_mask.shape} and names ({len(names_t)}) must "
               f"have one entry per parameter ({n_par})")
        raise StudyError(msg)
    for what, a in (("params", P), ("predictions", Y)):
        bad = np.argwhere(~np.isfinite(a))
        if bad.size:
            msg = (f"response surface: {what} is not finite at variant {bad[0, 0]}, column "
                   f"{bad[0, 1]}; drop or re-solve that variant")
            raise StudyError(msg)
    bad = [f"{nm} (minimum {col.min():g})"
           for nm, k, col in zip(names_t, log_mask, P.T, strict=True) if k and col.min() <= 0]
    if bad:
        msg = (f"response surface: log-scaled parameter(s) {', '.join(bad)} must be positive; "
               f"scale them linearly or correct the variants")
        raise StudyError(msg)
    flat = [nm for nm, col in zip(names_t, P.T, strict=True) if col.max() == col.min()]
    if flat:
        msg = (f"response surface: parameter(s) {', '.join(flat)} take a single value over the "
               f"variants; vary them or leave them out")
        raise StudyError(msg)
    return P, Y, log_mask, names_t
