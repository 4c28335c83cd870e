"""Temperature effects on a bonded strain gauge: thermal output and gauge-factor variation.

Stage: measurement. Inputs are gauge temperatures [degC] and the data sheet's thermal-output
polynomial, range and gauge-factor temperature coefficient; outputs are apparent strains
[microstrain], gauge factors and out-of-range masks. :mod:`correlate.measurement.chain` applies
them to readings.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial import polynomial as _poly
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import GaugeError

__all__ = ["gauge_factor_at", "out_of_range", "thermal_correction", "thermal_output"]

Float = NDArray[np.float64]

_THERMAL_DATA_GF = 2.0  # gauge factor at which data sheets state thermal output (TN-504)


def thermal_output(temperature_C: ArrayLike, coefficients: ArrayLike) -> Float:
    """Evaluate a gauge's thermal-output polynomial.

    Parameters
    ----------
    temperature_C : array_like
        Gauge temperature. [degC]
    coefficients : array_like, shape (k,) or (..., k), k <= 5 in data sheets
        ``a0 .. a(k-1)`` in ascending powers, the last axis broadcast against the temperature's
        trailing axes (e.g. (channels, 5) with temperatures (steps, channels)). [microstrain/degC^j]

    Returns
    -------
    ndarray
        Apparent strain ``a0 + a1 T + ... + a4 T^4`` at an instrument gauge factor of 2.00.
        [microstrain]

    Notes
    -----
    The data-sheet form (Vishay TN-504, Strain Gage Thermal Output and Gage Factor Variation
    with Temperature, the regression polynomial); evaluated by ``numpy.polynomial``.
    """
    c = np.moveaxis(np.asarray(coefficients, dtype=float), -1, 0)
    return _poly.polyval(np.asarray(temperature_C, dtype=float), c, tensor=False)


def thermal_correction(
    temperature_C: ArrayLike,
    temperature_tare_C: ArrayLike,
    coefficients: ArrayLike,
    daq_gauge_factor: ArrayLike,
) -> Float:
    """Compute the apparent strain to subtract: thermal output since the tare, at a gauge factor.

    Parameters
    ----------
    temperature_C : array_like
        Gauge temperature at each reading. [degC]
    temperature_tare_C : array_like, broadcastable
        Gauge temperature at the tare (bridge balance). [degC]
    coefficients : array_like, shape (k,) or (..., k)
        Thermal-output polynomial, see :func:`thermal_output`.
    daq_gauge_factor : array_like, broadcastable
        Gauge factor the reading is expressed at: the instrument setting for a raw reading
        (TN-504), the gauge's own factor once the gauge-factor ratio has been applied. [-]

    Returns
    -------
    ndarray
        ``(TO(T) - TO(T_tare)) * 2.00 / GF``. [microstrain]

    Notes
    -----
    Vishay TN-504, Eq. (504.4): thermal output stated at 2.00 is scaled by 2.00 over the
    gauge factor in use.
    """
    to = thermal_output(temperature_C, coefficients) - thermal_output(
        temperature_tare_C, coefficients
    )
    return to * _THERMAL_DATA_GF / np.asarray(daq_gauge_factor, dtype=float)


def gauge_factor_at(
    temperature_C: ArrayLike,
    gauge_factor: ArrayLike,
    tc_percent_per_100C: ArrayLike,
    reference_C: ArrayLike = 24.0,
) -> Float:
    """Compute a gauge's gauge factor at a temperature.

    Parameters
    ----------
    temperature_C : array_like
        Gauge temperature. [degC]
    gauge_factor : array_like, broadcastable
        Gauge factor at the reference temperature. [-]
    tc_percent_per_100C : array_like, broadcastable
        Temperature coefficient of gauge factor. [% per 100 degC]
    reference_C : array_like, broadcastable
        Temperature of the stated gauge factor (data sheets: 24 degC). [degC]

    Returns
    -------
    ndarray
        ``GF (1 + tc/100 (T - reference)/100)``; a reading is multiplied by GF/GF(T). [-]

    Notes
    -----
    Linear variation as data sheets state it (Vishay TN-504, sec. 3).
    """
    dt = np.asarray(temperature_C, dtype=float) - np.asarray(reference_C, dtype=float)
    return np.asarray(gauge_factor, dtype=float) * (
        1.0 + np.asarray(tc_percent_per_100C, dtype=float) / 100.0 * dt / 100.0
    )


def out_of_range(temperature_C: ArrayLike, range_C: ArrayLike) -> NDArray[np.bool_]:
    """Flag temperatures outside the range a thermal-output polynomial was fitted over.

    Parameters
    ----------
    temperature_C : array_like
        Gauge temperature. [degC]
    range_C : array_like, shape (2,) or (..., 2)
        Lowest and highest temperature of the data sheet's curve, broadcast against the
        temperature's trailing axes. [degC]

    Returns
    -------
    ndarray of bool
        True outside ``[low, high]`` and where the temperature is NaN (never extrapolate).

    Raises
    ------
    GaugeError
        A range whose low end is not below its high end.
    """
    r = np.asarray(range_C, dtype=float)
    if r.shape[-1:] != (2,) or not np.all(r[..., 0] < r[..., 1]):
        msg = f"thermal range: found {r.tolist()}; expected [low, high] in degC with low < high, from the data sheet"
        raise GaugeError(msg)
    t = np.asarray(temperature_C, dtype=float)
    return ~((t >= r[..., 0]) & (t <= r[..., 1]))
