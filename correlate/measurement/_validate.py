"""Checks and conversions shared by the measurement modules (per-channel parameters)."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import GaugeError, ReadingsFormatError

Float = NDArray[np.float64]


def readings_array(values: ArrayLike) -> Float:
    a = np.array(values, dtype=float)
    if a.ndim != 2:
        msg = f"readings: found an array of shape {a.shape}; expected (steps, channels) in microstrain"
        raise ReadingsFormatError(msg)
    return a


def channel_array(value: ArrayLike | None, n: int, name: str) -> Float:
    """One float per channel from a scalar, a sequence (None inside becomes NaN) or None."""
    if value is None:
        return np.full(n, np.nan)
    a = np.asarray(value, dtype=float)
    try:
        return np.broadcast_to(a, (n,)).copy()
    except ValueError:
        msg = f"{name}: {a.size} values for {n} channels; expected one per channel or one for all"
        raise GaugeError(msg) from None


def channel_flags(value: ArrayLike | None, n: int, name: str) -> NDArray[np.bool_]:
    """One flag per channel; None, NaN and False mean off."""
    if value is None:
        return np.zeros(n, dtype=bool)
    flags = [
        False if v is None or (isinstance(v, float) and np.isnan(v)) else bool(v)
        for v in np.atleast_1d(np.asarray(value, dtype=object)).tolist()
    ]
    try:
        return np.broadcast_to(np.array(flags, dtype=bool), (n,)).copy()
    except ValueError:
        msg = (
            f"{name}: {len(flags)} values for {n} channels; expected one per channel or one for all"
        )
        raise GaugeError(msg) from None


def channel_count(*values: ArrayLike | None) -> int:
    sizes = {np.size(v) for v in values if v is not None} - {1}
    if len(sizes) > 1:
        msg = f"channel factors: parameters hold {sorted(sizes)} values; expected one per channel, the same number each"
        raise GaugeError(msg)
    return sizes.pop() if sizes else 1


def names_for(gauges: Sequence[str] | None, n: int) -> list[str]:
    if gauges is None:
        return [f"channel {i}" for i in range(n)]
    names = [str(g) for g in gauges]
    if len(names) != n:
        msg = f"gauges: {len(names)} gauge ids for {n} channels; expected one id per channel"
        raise GaugeError(msg)
    return names
