"""Argument checks shared by the uncertainty modules of the comparison stage (private)."""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import StudyError

FloatArray = NDArray[np.float64]


def first_bad(mask: NDArray[np.bool_]) -> str:
    """Return the index of the first True element of ``mask`` as text."""
    return str(tuple(int(i) for i in np.argwhere(mask)[0])) if mask.ndim else "()"


def finite(name: str, value: ArrayLike, error: type[Exception], what: str) -> FloatArray:
    """Return ``value`` as a float array; raise ``error`` naming the first non-finite index."""
    a = np.asarray(value, dtype=float)
    bad = ~np.isfinite(a)
    if bad.any():
        msg = (
            f"{name}: {int(bad.sum())} non-finite value(s), first at index {first_bad(bad)}; "
            f"expected finite {what}; repair or drop those entries first"
        )
        raise error(msg)
    return a


def nonnegative(name: str, value: ArrayLike) -> FloatArray:
    """Return ``value`` as a float array of standard uncertainties (finite, >= 0)."""
    a = finite(name, value, StudyError, "uncertainty")
    bad = a < 0
    if bad.any():
        msg = (
            f"{name}: expected a standard uncertainty >= 0, found {a[bad].flat[0]!r} at index "
            f"{first_bad(bad)}; give uncertainties as positive magnitudes"
        )
        raise StudyError(msg)
    return a


def common_shape(where: str, **arrays: FloatArray) -> tuple[int, ...]:
    """Return the broadcast shape of ``arrays``; raise StudyError listing them if there is none."""
    try:
        return np.broadcast_shapes(*(a.shape for a in arrays.values()))
    except ValueError:
        shapes = ", ".join(f"{k} {v.shape}" for k, v in arrays.items())
        msg = f"{where}: shapes do not broadcast ({shapes}); give per-gauge arrays as (g, 1)"
        raise StudyError(msg) from None


def rss(terms: Mapping[str, FloatArray]) -> FloatArray:
    """Return the root-sum-square of independent standard uncertainties (JCGM 100:2008 eq. 10)."""
    return np.sqrt(sum(np.square(t) for t in terms.values()))
