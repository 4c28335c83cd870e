"""Comparison stage: propagate standard uncertainties through a data reduction.

Inputs: independent input estimates and their standard uncertainties (such as a rosette's grid
readings and their ``u_D``) and either a Jacobian or a vectorised function (such as the
principal-strain reduction). Output: a `Propagation` record with the output uncertainties,
their covariance and the sensitivity coefficients used.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from correlate.comparison._checks import FloatArray, finite, nonnegative
from correlate.core.errors import StudyError

__all__ = ["Propagation", "propagate_function", "propagate_linear"]


@dataclass(frozen=True)
class Propagation:
    """Uncertainty propagated through a Jacobian (GUM law of propagation).

    Attributes
    ----------
    u : ndarray, shape (..., m)
        Standard uncertainty of each output.
    covariance : ndarray, shape (..., m, m)
        ``J diag(u_x**2) J^T``.
    jacobian : ndarray, shape (..., m, n)
        Sensitivity coefficients used.
    value : ndarray, shape (..., m), or None
        ``f(x)`` when a function was given.
    """

    u: FloatArray
    covariance: FloatArray
    jacobian: FloatArray
    value: FloatArray | None = None


def propagate_linear(J: ArrayLike, u: ArrayLike) -> Propagation:
    """Propagate independent input uncertainties through a Jacobian.

    Parameters
    ----------
    J : array_like, shape (..., m, n)
        Sensitivity coefficients ``d y_i / d x_j``.
    u : array_like, shape (..., n)
        Standard uncertainties of the independent inputs.

    Returns
    -------
    Propagation
        ``u`` (..., m), ``covariance`` (..., m, m), ``jacobian``; ``value`` is None.

    Raises
    ------
    StudyError
        Non-finite J, a negative uncertainty, or J and u disagreeing on n.

    Notes
    -----
    ``u(y_i)**2 = sum_j J_ij**2 u(x_j)**2`` (JCGM 100:2008 eq. 10); the output covariance is
    ``J diag(u**2) J^T`` (JCGM 102:2011 with uncorrelated inputs).

    Examples
    --------
    >>> propagate_linear([[3.0, 4.0]], [1.0, 1.0]).u
    array([5.])
    """
    J = finite("propagation: J", J, StudyError, "sensitivity coefficients")
    u = nonnegative("propagation: u", u)
    if J.ndim < 2 or u.ndim < 1 or J.shape[-1] != u.shape[-1]:
        msg = f"propagation: J must be (..., m, n) and u (..., n); found J {J.shape}, u {u.shape}"
        raise StudyError(msg)
    covariance = np.einsum("...ij,...j,...kj->...ik", J, np.square(u), J)
    u_out = np.sqrt(np.einsum("...ii->...i", covariance))
    return Propagation(u=u_out, covariance=covariance, jacobian=J)


def propagate_function(
    f: Callable[[FloatArray], ArrayLike],
    x: ArrayLike,
    u: ArrayLike,
    *,
    step: ArrayLike | None = None,
) -> Propagation:
    """Propagate independent input uncertainties through a function by its numerical Jacobian.

    Parameters
    ----------
    f : callable
        ``f(x)`` with x of shape (..., n) returning (..., m), vectorised over leading axes
        (e.g. a rosette's grid readings -> principal strains).
    x : array_like, shape (..., n)
        Input estimates.
    u : array_like, shape (..., n)
        Their standard uncertainties.
    step : array_like, optional
        Absolute difference step per input, broadcastable to x; default
        ``eps**(1/3) max(|x|, 1)``.

    Returns
    -------
    Propagation
        With ``value = f(x)``.

    Raises
    ------
    StudyError
        Non-finite x, a non-positive step, or an f that does not return (..., m).

    Notes
    -----
    Central differences ``J_ij = (f_i(x + h e_j) - f_i(x - h e_j)) / 2h`` (error O(h**2)),
    vectorised over all gauges at once, which ``scipy.optimize.approx_fprime`` (one point,
    forward difference) is not; then `propagate_linear`. The linearisation needs f smooth at x:
    a rosette's principal strains are not smooth where the two principal strains are equal.
    """
    x = finite("propagation: x", x, StudyError, "input estimates")
    if x.ndim < 1:
        raise StudyError(f"propagation: x must be (..., n), found shape {x.shape}")
    if step is None:
        step = np.cbrt(np.finfo(float).eps) * np.maximum(np.abs(x), 1.0)
    h = np.broadcast_to(np.asarray(step, dtype=float), x.shape)
    if not (np.isfinite(h) & (h > 0)).all():
        raise StudyError("propagation: step must be finite and > 0 for every input")
    value = np.asarray(f(x), dtype=float)
    if value.ndim != x.ndim or value.shape[:-1] != x.shape[:-1]:
        msg = f"propagation: f(x) must be (..., m) for x of shape {x.shape}, found {value.shape}"
        raise StudyError(msg)
    columns = []
    for j in range(x.shape[-1]):
        dx = np.zeros_like(x)
        dx[..., j] = h[..., j]
        difference = np.asarray(f(x + dx), dtype=float) - np.asarray(f(x - dx), dtype=float)
        columns.append(difference / (2.0 * h[..., j, None]))
    result = propagate_linear(np.stack(columns, axis=-1), u)
    return Propagation(
        u=result.u, covariance=result.covariance, jacobian=result.jacobian, value=value
    )
