"""Comparison stage: numerical uncertainty ``u_num`` from a grid-refinement study.

Inputs: the prediction of every gauge and step on two or three systematically refined meshes
(microstrain, broadcasting over gauges x steps) and the refinement ratios. Output: a
`GridConvergence` record with the order, the grid convergence index, ``u_num``, the
Richardson-extrapolated value and flags, per element.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.optimize import fixed_point

from correlate.comparison._checks import FloatArray, common_shape, finite
from correlate.core.errors import ModelError, StudyError

__all__ = ["GridConvergence", "grid_convergence"]

#: Fine-mesh change below which the discretisation error is taken as zero. [µε]
NEGLIGIBLE_CHANGE_UE = 0.01
#: Safety factors of the grid convergence index (Roache): observed order, and fall-back.
FACTOR_OBSERVED, FACTOR_FALLBACK = 1.25, 3.0
#: GCI (taken as a 95 % expanded uncertainty) -> u_num, per ASME V&V 20 (from memory).
GCI_TO_STANDARD = 1.15


@dataclass(frozen=True)
class GridConvergence:
    """Grid convergence index per element; meshes numbered 1 = finest.

    Attributes
    ----------
    order : ndarray
        Order p used: observed, or ``formal_order`` on a fall-back; NaN where negligible.
    observed_order : ndarray
        Order solved from three meshes (NaN with two meshes or where it cannot be solved).
    factor : ndarray
        Safety factor used, 1.25 or 3.0; NaN where negligible.
    gci : ndarray
        Fine-grid convergence index ``factor |S2 - S1| / (r21**p - 1)``; 0 where negligible. [µε]
    u_num : ndarray
        Numerical standard uncertainty ``gci / 1.15``. [µε]
    extrapolated : ndarray
        Richardson-extrapolated value ``S1 + (S1 - S2) / (r21**p - 1)``; S1 where negligible. [µε]
    oscillatory, fell_back, nonconstant_r, negligible : ndarray of bool
        S3-S2 and S2-S1 of opposite sign; fall-back order and factor used; r32 differs from r21
        (order solved by fixed-point iteration); ``|S2 - S1| < 0.01 µε``.
    """

    order: FloatArray
    observed_order: FloatArray
    factor: FloatArray
    gci: FloatArray
    u_num: FloatArray
    extrapolated: FloatArray
    oscillatory: NDArray[np.bool_]
    fell_back: NDArray[np.bool_]
    nonconstant_r: NDArray[np.bool_]
    negligible: NDArray[np.bool_]


def _celik_order(e21: FloatArray, e32: FloatArray, r21: float, r32: float, p0: float) -> FloatArray:
    """Solve Celik et al. (2008) eqs. 5a-5c by fixed-point iteration; NaN where it fails."""
    s = np.sign(e32 / e21)
    log_ratio = np.log(np.abs(e32 / e21))

    def update(p: FloatArray, log_ratio: FloatArray, s: FloatArray) -> FloatArray:
        q = np.log((r21**p - s) / (r32**p - s))
        return np.abs(log_ratio + q) / np.log(r21)

    options = {"xtol": 1e-12, "maxiter": 500}
    with np.errstate(all="ignore"):
        try:
            p = fixed_point(update, np.full(e21.shape, p0), args=(log_ratio, s), **options)
            return np.asarray(p, dtype=float)
        except RuntimeError:  # some element did not converge: solve each alone to tell which
            out = np.full(e21.shape, np.nan)
            for i in range(e21.size):
                try:
                    out[i] = fixed_point(update, p0, args=(log_ratio[i], s[i]), **options)
                except RuntimeError:
                    out[i] = np.nan  # the caller falls back to the formal order here
            return out


def _check_ratios(S3: ArrayLike | None, r21: float, r32: float | None, formal_order: float) -> None:
    if S3 is None and r32 is not None:
        msg = "grid_convergence: r32 is given but S3 is not; give the coarse mesh or drop r32"
        raise StudyError(msg)
    for label, r in (("r21", r21), ("r32", r32)):
        if r is not None and not (np.isfinite(r) and r > 1):
            msg = f"grid_convergence: {label} must be a finite size ratio coarse/fine > 1, found {r!r}"
            raise StudyError(msg)
    if not (np.isfinite(formal_order) and formal_order > 0):
        raise StudyError(f"grid_convergence: formal_order must be > 0, found {formal_order!r}")


def grid_convergence(
    S1: ArrayLike,
    S2: ArrayLike,
    S3: ArrayLike | None = None,
    *,
    r21: float,
    r32: float | None = None,
    formal_order: float = 2.0,
) -> GridConvergence:
    """Estimate the numerical uncertainty ``u_num`` from a grid-refinement study.

    Parameters
    ----------
    S1, S2, S3 : array_like
        Prediction on the fine, medium and coarse mesh (S3 optional), broadcastable. [µε]
    r21, r32 : float
        Refinement ratios ``h2/h1`` and ``h3/h2`` (> 1); ``r32`` defaults to ``r21``. [-]
    formal_order : float
        Formal order of the discretisation, used on a fall-back. [-]

    Returns
    -------
    GridConvergence

    Raises
    ------
    StudyError
        ``r <= 1``, ``r32`` without ``S3``, ``formal_order <= 0``, shapes that do not broadcast.
    ModelError
        A non-finite prediction.

    Notes
    -----
    Roache's GCI as ASME V&V 20-2009 section 2 uses it, ``e21 = S2 - S1``, ``e32 = S3 - S2``.
    Constant r: ``p = ln(|e32| / |e21|) / ln r``. Otherwise (Celik et al. 2008, eqs. 5a-c)
    ``p = |ln|e32/e21| + q(p)| / ln r21``, ``q(p) = ln((r21**p - s) / (r32**p - s))``,
    ``s = sign(e32/e21)``, iterated to a fixed point from ``formal_order``.
    ``GCI = Fs |e21| / (r21**p - 1)`` with Fs = 1.25; with two meshes, an oscillation
    (``e32 e21 < 0``) or p outside ``[0.5, 2 formal_order]``, p = formal_order and Fs = 3.
    Richardson extrapolation: ``S_ext = S1 + (S1 - S2) / (r21**p - 1)``. ``u_num = GCI / 1.15``
    (V&V 20's conversion of the GCI taken as a 95 % expanded uncertainty; from memory). Where
    ``|e21| < 0.01 µε`` the discretisation error is negligible: u_num = 0, p = NaN.

    References
    ----------
    ASME V&V 20-2009, section 2. P. J. Roache, Verification and Validation in Computational
    Science and Engineering, Hermosa, 1998. I. B. Celik et al., "Procedure for estimation and
    reporting of uncertainty due to discretization in CFD applications", J. Fluids Eng. 130(7)
    078001, 2008.

    Examples
    --------
    >>> g = grid_convergence(1.0 + 1.0, 1.0 + 4.0, 1.0 + 16.0, r21=2.0)  # S = 1 + h**2
    >>> float(g.order), float(g.extrapolated), float(g.gci)
    (2.0, 1.0, 1.25)
    """
    _check_ratios(S3, r21, r32, formal_order)
    arrays = {
        "S1": finite("grid_convergence: S1", S1, ModelError, "microstrain"),
        "S2": finite("grid_convergence: S2", S2, ModelError, "microstrain"),
    }
    if S3 is not None:
        arrays["S3"] = finite("grid_convergence: S3", S3, ModelError, "microstrain")
    shape = common_shape("grid_convergence", **arrays)
    S1, S2 = np.broadcast_to(arrays["S1"], shape), np.broadcast_to(arrays["S2"], shape)
    e21 = S2 - S1
    negligible = np.abs(e21) < NEGLIGIBLE_CHANGE_UE
    observed = np.full(shape, np.nan)
    oscillatory = np.zeros(shape, dtype=bool)
    r32 = r21 if r32 is None else float(r32)
    nonconstant = S3 is not None and not np.isclose(r32, r21, rtol=1e-12, atol=0)
    if S3 is not None:
        e32 = np.broadcast_to(arrays["S3"], shape) - S2
        oscillatory = (e32 * e21 < 0) & ~negligible
        solvable = ~negligible & (e32 != 0)
        if nonconstant:
            observed[solvable] = _celik_order(e21[solvable], e32[solvable], r21, r32, formal_order)
        else:
            observed[solvable] = np.log(np.abs(e32[solvable] / e21[solvable])) / np.log(r21)
    accepted = ~oscillatory & (observed >= 0.5) & (observed <= 2.0 * formal_order)
    order = np.where(negligible, np.nan, np.where(accepted, observed, formal_order))
    factor = np.where(negligible, np.nan, np.where(accepted, FACTOR_OBSERVED, FACTOR_FALLBACK))
    with np.errstate(invalid="ignore"):  # NaN order where negligible; replaced below
        denominator = r21**order - 1.0
        gci = np.where(negligible, 0.0, factor * np.abs(e21) / denominator)
        extrapolated = np.where(negligible, S1, S1 - e21 / denominator)
    return GridConvergence(
        order=order,
        observed_order=observed,
        factor=factor,
        gci=gci,
        u_num=gci / GCI_TO_STANDARD,
        extrapolated=extrapolated,
        oscillatory=oscillatory,
        fell_back=~negligible & ~accepted,
        nonconstant_r=np.full(shape, nonconstant),
        negligible=negligible,
    )
