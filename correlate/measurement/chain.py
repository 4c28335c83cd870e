"""Measurement chain of a strain-gauge channel: bridge, leads, gauge factor, non-linearity, heat.

Stage: measurement (the test side). Inputs are a channel's raw readings as the acquisition
indicated them [microstrain] and the channel's wiring and gauge data; outputs are the corrected
readings [microstrain] and a record of every factor and term applied, row by row.

Every row is corrected in this order (:func:`correct_channels`):

1. gauge-factor ratio, and the lead-wire factor or (instead) the shunt-calibration gain;
2. quarter-bridge non-linearity (constant-voltage excitation);
3. thermal output removed (apparent strain relative to the tare temperature);
4. gauge-factor variation with temperature;

and then, elsewhere, the tare. :func:`raw_from_true` runs the same relations forward.

The bridge relations (arm numbering, leads, non-linearity) are in
:mod:`correlate.measurement.bridge`, the temperature relations in
:mod:`correlate.measurement.thermal`; both are re-exported here.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import GaugeError
from correlate.measurement._validate import (
    channel_array,
    channel_count,
    channel_flags,
    names_for,
    readings_array,
)
from correlate.measurement.bridge import (
    bridge_output,
    bridge_ratio_exact,
    lead_wire_factor,
    quarter_bridge_indicated_strain,
    quarter_bridge_true_strain,
    validate_bridges,
)
from correlate.measurement.thermal import (
    gauge_factor_at,
    out_of_range,
    thermal_correction,
    thermal_output,
)

# The bridge and thermal relations are re-exported so that the whole chain reads from one module.
__all__ = [
    "ChainResult",
    "ChannelFactors",
    "bridge_output",
    "bridge_ratio_exact",
    "channel_factor",
    "correct_channels",
    "gauge_factor_at",
    "lead_wire_factor",
    "out_of_range",
    "quarter_bridge_indicated_strain",
    "quarter_bridge_true_strain",
    "raw_from_true",
    "thermal_correction",
    "thermal_output",
    "validate_bridges",
]

Float = NDArray[np.float64]

_GF_AGREEMENT = 1e-3  # relative: daq_gauge_factor / gf_ratio must give gauge_factor to 0.1 %


@dataclass(frozen=True)
class ChannelFactors:
    """Step 1 of the chain per channel.

    Attributes
    ----------
    multiplier : ndarray, shape (channels,)
        The raw reading is multiplied by this: ``gf_ratio / desensitisation``. [-]
    desensitisation : ndarray, shape (channels,)
        Lead-wire factor or shunt gain divided out, 1 where neither applied. [-]
    notes : tuple of str, length channels
        Which factors applied, in words.
    """

    multiplier: Float
    desensitisation: Float
    notes: tuple[str, ...]


def channel_factor(
    gf_ratio: ArrayLike | None,
    lead_factor: ArrayLike | None,
    shunt_gain: ArrayLike | None,
    *,
    gauges: Sequence[str] | None = None,
) -> ChannelFactors:
    """Combine the gauge-factor ratio with the lead-wire factor or the shunt gain.

    Parameters
    ----------
    gf_ratio : array_like, shape (channels,), or None
        Instrument gauge-factor setting over the gauge's gauge factor; the reading is
        multiplied by it. NaN or None: not applied. [-]
    lead_factor : array_like, shape (channels,), or None
        From :func:`lead_wire_factor`; the reading is divided by it. NaN or None: not applied.
    shunt_gain : array_like, shape (channels,), or None
        Measured shunt-calibration response over the expected one; the reading is divided by
        it, and then the lead-wire factor is not applied. NaN or None: not applied. [-]
    gauges : sequence of str, optional
        Gauge ids for the messages.

    Returns
    -------
    ChannelFactors
        Multiplier, the desensitisation divided out, and a note per channel.

    Raises
    ------
    GaugeError
        A ratio or gain that is not positive, or a lead factor outside (0, 1], naming the gauge.

    Notes
    -----
    A shunt across the gauge at its end of the leads registers the same attenuation as the
    strain signal, so the measured over expected response replaces the lead-wire factor
    (Vishay Micro-Measurements TN-514, Shunt Calibration of Strain Gage Instrumentation).
    """
    n = channel_count(gf_ratio, lead_factor, shunt_gain)
    names = names_for(gauges, n)
    ratio, lead, shunt = (
        channel_array(v, n, label)
        for v, label in (
            (gf_ratio, "gf_ratio"),
            (lead_factor, "lead_factor"),
            (shunt_gain, "shunt_gain"),
        )
    )
    problems = [
        f"gauge '{names[i]}': gf_ratio {ratio[i]} is not positive; expected instrument GF / gauge GF (e.g. 2.00/2.11)"
        for i in np.flatnonzero(~np.isnan(ratio) & ~(ratio > 0))
    ]
    problems += [
        f"gauge '{names[i]}': lead_factor {lead[i]} is outside (0, 1]; expected RG/(RG + n RL) from lead_wire_factor"
        for i in np.flatnonzero(~np.isnan(lead) & ~((lead > 0) & (lead <= 1)))
    ]
    problems += [
        f"gauge '{names[i]}': shunt_gain {shunt[i]} is not positive; expected measured over expected shunt response (near 1)"
        for i in np.flatnonzero(~np.isnan(shunt) & ~(shunt > 0))
    ]
    if problems:
        raise GaugeError(*problems)
    use_shunt = ~np.isnan(shunt)
    d = np.where(use_shunt, shunt, np.where(np.isnan(lead), 1.0, lead))
    notes = []
    for i in range(n):
        parts = [] if np.isnan(ratio[i]) else [f"gauge-factor ratio {ratio[i]:.6g} multiplied"]
        if use_shunt[i]:
            parts.append(f"shunt gain {shunt[i]:.6g} divided")
            if not np.isnan(lead[i]):
                parts.append(
                    "lead-wire factor not applied (the shunt calibration includes the leads)"
                )
        elif not np.isnan(lead[i]):
            parts.append(f"lead-wire factor {lead[i]:.6g} divided")
        notes.append("; ".join(parts) or "no factor applied")
    return ChannelFactors(np.where(np.isnan(ratio), 1.0, ratio) / d, d, tuple(notes))


@dataclass(frozen=True)
class ChainResult:
    """Corrected readings and every factor and term applied (for a corrections table).

    Attributes
    ----------
    gauges : tuple of str, length channels
    raw_ue : ndarray, shape (steps, channels)
        Readings as given. [microstrain]
    multiplier : ndarray, shape (channels,)
        Step 1: gauge-factor ratio over lead-wire factor or shunt gain. [-]
    nonlinearity_ue : ndarray, shape (steps, channels)
        Step 2: term added; NaN where not applied. [microstrain]
    thermal_ue : ndarray, shape (steps, channels)
        Step 3: apparent strain subtracted; NaN where not applied. [microstrain]
    gf_temperature_factor : ndarray, shape (steps, channels)
        Step 4: GF/GF(T) multiplied; NaN where not applied. [-]
    corrected_ue : ndarray, shape (steps, channels)
        ``((raw * multiplier + nonlinearity) - thermal) * gf_temperature_factor``. [microstrain]
    notes : tuple of str, length channels
        Step 1 in words (which of lead-wire factor and shunt gain applied).
    """

    gauges: tuple[str, ...]
    raw_ue: Float
    multiplier: Float
    nonlinearity_ue: Float
    thermal_ue: Float
    gf_temperature_factor: Float
    corrected_ue: Float
    notes: tuple[str, ...]

    def as_columns(self) -> dict[str, NDArray]:
        """Return the record as long columns, one row per step and channel (step-major)."""
        steps, channels = self.raw_ue.shape
        return {
            "step": np.repeat(np.arange(steps), channels),
            "gauge": np.tile(np.array(self.gauges, dtype=object), steps),
            "raw_ue": self.raw_ue.ravel(),
            "multiplier": np.tile(self.multiplier, steps),
            "nonlinearity_ue": self.nonlinearity_ue.ravel(),
            "thermal_ue": self.thermal_ue.ravel(),
            "gf_temperature_factor": self.gf_temperature_factor.ravel(),
            "corrected_ue": self.corrected_ue.ravel(),
            "note": np.tile(np.array(self.notes, dtype=object), steps),
        }


@dataclass(frozen=True)
class _Chain:
    gauges: tuple[str, ...]
    factors: ChannelFactors
    bridge_gf: Float  # gauge factor times desensitisation, NaN where step 2 is off
    thermal_ue: Float  # (steps, channels), NaN where step 3 is off
    gf_temperature_factor: Float  # (steps, channels), NaN where step 4 is off


def correct_channels(
    raw_ue: ArrayLike,
    *,
    gauges: Sequence[str] | None = None,
    gf_ratio: ArrayLike | None = None,
    lead_factor: ArrayLike | None = None,
    shunt_gain: ArrayLike | None = None,
    nonlinear: ArrayLike | None = None,
    gauge_factor: ArrayLike | None = None,
    temperature: ArrayLike | None = None,
    temperature_tare: ArrayLike | None = None,
    thermal_coefficients: ArrayLike | None = None,
    thermal_range_C: ArrayLike | None = None,
    daq_gauge_factor: ArrayLike | None = None,
    gf_tc: ArrayLike | None = None,
    reference_C: ArrayLike = 24.0,
) -> ChainResult:
    """Apply the measurement chain to raw readings, channel by channel and row by row.

    Parameters
    ----------
    raw_ue : array_like, shape (steps, channels)
        Readings as the acquisition indicated them; NaN stays NaN. [microstrain]
    gauges : sequence of str, length channels, optional
        Gauge ids for the record and the messages.
    gf_ratio, lead_factor, shunt_gain : array_like, shape (channels,), or None
        Step 1, see :func:`channel_factor`.
    nonlinear : array_like of bool, shape (channels,), or None
        Step 2 on for these channels (constant-voltage quarter bridges); needs the gauge factor.
    gauge_factor : array_like, shape (channels,), or None
        The gauge's gauge factor (data sheet, at ``reference_C``): the factor a reading carries
        after step 1, used by steps 2 and 3. Where omitted, ``daq_gauge_factor / gf_ratio``;
        where both are given they must agree within 0.1 %. [-]
    temperature : array_like, shape (steps, channels) or (steps,), or None
        Gauge temperature per reading; (steps,) is one temperature for all channels. [degC]
    temperature_tare : array_like, shape (channels,) or scalar, or None
        Gauge temperature at the tare (bridge balance). [degC]
    thermal_coefficients : array_like, shape (channels, k) or (k,), or None
        Step 3: thermal-output polynomial per channel, a NaN row where not applied. [microstrain]
    thermal_range_C : array_like, shape (channels, 2) or (2,), or None
        Temperature range of each polynomial; required where step 3 applies. [degC]
    daq_gauge_factor : array_like, shape (channels,), or None
        Instrument gauge-factor setting. [-]
    gf_tc : array_like, shape (channels,), or None
        Step 4: temperature coefficient of gauge factor; NaN where not applied. [%/100 degC]
    reference_C : array_like, shape (channels,) or scalar
        Temperature of the stated gauge factor. [degC]

    Returns
    -------
    ChainResult
        Corrected readings and the record of every factor and term.

    Raises
    ------
    ReadingsFormatError
        ``raw_ue`` is not two-dimensional.
    GaugeError
        Every parameter problem at once, one line per gauge and problem: bad factors, step 2
        or 3 without a gauge factor, a gauge factor that disagrees with ``daq_gauge_factor /
        gf_ratio``, temperatures missing or outside the thermal range.

    Notes
    -----
    With ``e1 = raw gf_ratio / d`` (d the lead factor or shunt gain, step 1),
    ``e2 = 2 e1 / (2 - GF d e1)`` (step 2, Vishay TN-507; the arm's leads scale its gauge
    factor by d, which keeps the relation exact for the circuit), ``e3 = e2 - (TO(T) -
    TO(T_tare)) 2.00 / GF`` (step 3, TN-504 Eq. 504.4 at the gauge factor the reading carries
    after step 1) and ``e4 = e3 GF / GF(T)`` (step 4, TN-504 sec. 3). Steps 3 and 4 together
    equal TN-504's procedure of reading at the instrument setting GF(T) and subtracting the
    thermal output scaled to GF(T).
    """
    settings = {k: v for k, v in locals().items() if k != "raw_ue"}  # the keyword arguments
    raw = readings_array(raw_ue)
    c = _prepare(raw.shape, **settings)
    e = raw * c.factors.multiplier
    nl = np.full(raw.shape, np.nan)
    on = ~np.isnan(c.bridge_gf)
    _check_bridge_range(raw, e, c.bridge_gf, on, c.gauges)
    nl[:, on] = quarter_bridge_true_strain(e[:, on], c.bridge_gf[on]) - e[:, on]
    e = e + np.where(on, nl, 0.0)
    e = e - np.where(np.isnan(c.thermal_ue), 0.0, c.thermal_ue)
    e = e * np.where(np.isnan(c.gf_temperature_factor), 1.0, c.gf_temperature_factor)
    return ChainResult(
        c.gauges,
        raw,
        c.factors.multiplier,
        nl,
        c.thermal_ue,
        c.gf_temperature_factor,
        e,
        c.factors.notes,
    )


def _check_bridge_range(raw: NDArray[np.float64], e: NDArray[np.float64], bridge_gf: NDArray,
                        on: NDArray[np.bool_], gauges: Sequence[str]) -> None:
    """Refuse a quarter-bridge reading at or past the pole of its correction: the bridge's output
    ``GF e / (4 + 2 GF e)`` stays below 1/2, so it cannot indicate ``2 / GF`` (Vishay TN-507),
    and the inversion there would turn it into a plausible-looking strain."""
    with np.errstate(invalid="ignore"):
        beyond = on & (bridge_gf * e * 1e-6 >= 2.0)
    problems = []
    for j in np.flatnonzero(beyond.any(axis=0)):
        i = int(np.flatnonzero(beyond[:, j])[0])
        problems.append(f"gauge '{gauges[j]}': reading {raw[i, j]:g} µε is at or beyond what a "
                        f"constant-voltage quarter bridge can indicate ({2e6 / bridge_gf[j]:.6g} "
                        "µε at its gauge factor and leads); it is an overrange code, or the "
                        "channel is not a quarter bridge: list the value in [readings] sentinels "
                        "or set the channel's nonlinearity to none in the gauge map")
    if problems:
        raise GaugeError(*problems)


def raw_from_true(
    true_ue: ArrayLike,
    *,
    gauges: Sequence[str] | None = None,
    gf_ratio: ArrayLike | None = None,
    lead_factor: ArrayLike | None = None,
    shunt_gain: ArrayLike | None = None,
    nonlinear: ArrayLike | None = None,
    gauge_factor: ArrayLike | None = None,
    temperature: ArrayLike | None = None,
    temperature_tare: ArrayLike | None = None,
    thermal_coefficients: ArrayLike | None = None,
    thermal_range_C: ArrayLike | None = None,
    daq_gauge_factor: ArrayLike | None = None,
    gf_tc: ArrayLike | None = None,
    reference_C: ArrayLike = 24.0,
) -> Float:
    """Make the raw readings a channel would show for true strains (the chain run forward).

    Parameters
    ----------
    true_ue : array_like, shape (steps, channels)
        Mechanical strain since the tare. [microstrain]
    gauges, gf_ratio, lead_factor, shunt_gain, nonlinear, gauge_factor, temperature, \
temperature_tare, thermal_coefficients, thermal_range_C, daq_gauge_factor, gf_tc, reference_C
        As in :func:`correct_channels`.

    Returns
    -------
    ndarray, shape (steps, channels)
        Raw readings that :func:`correct_channels` turns back into ``true_ue``. [microstrain]

    Raises
    ------
    ReadingsFormatError, GaugeError
        As :func:`correct_channels`.

    Notes
    -----
    ``e3 = e GF(T)/GF``, ``e2 = e3 + (TO(T) - TO(T_tare)) 2.00/GF``, ``e1 = 2 e2 / (2 + GF d
    e2)`` (Vishay TN-507) and ``raw = e1 d / gf_ratio``: the forward relations of the steps.
    """
    settings = {k: v for k, v in locals().items() if k != "true_ue"}  # the keyword arguments
    true = readings_array(true_ue)
    c = _prepare(true.shape, **settings)
    e = true / np.where(np.isnan(c.gf_temperature_factor), 1.0, c.gf_temperature_factor)
    e = e + np.where(np.isnan(c.thermal_ue), 0.0, c.thermal_ue)
    on = ~np.isnan(c.bridge_gf)
    e[:, on] = quarter_bridge_indicated_strain(e[:, on], c.bridge_gf[on])
    return e / c.factors.multiplier


# --- private helpers ------------------------------------------------------------------------------


def _prepare(
    shape,
    *,
    gauges,
    gf_ratio,
    lead_factor,
    shunt_gain,
    nonlinear,
    gauge_factor,
    temperature,
    temperature_tare,
    thermal_coefficients,
    thermal_range_C,
    daq_gauge_factor,
    gf_tc,
    reference_C,
) -> _Chain:
    """Check the chain's per-channel parameters together and evaluate the per-row terms."""
    steps, n = shape
    names = names_for(gauges, n)
    step1 = [
        channel_array(v, n, k)
        for v, k in (
            (gf_ratio, "gf_ratio"),
            (lead_factor, "lead_factor"),
            (shunt_gain, "shunt_gain"),
        )
    ]
    try:
        factors, problems = channel_factor(*step1, gauges=names), []
    except GaugeError as err:  # reported with the other problems below
        factors, problems = None, list(err.problems)
    on_nl = channel_flags(nonlinear, n, "nonlinear")
    gf, more = _reference_gf(names, gf_ratio, gauge_factor, daq_gauge_factor)
    problems += more
    problems += [
        f"gauge '{names[i]}': non-linearity correction needs the gauge factor; give gauge_factor"
        for i in np.flatnonzero(on_nl & np.isnan(gf))
    ]
    coeffs = _coefficients(thermal_coefficients, n)
    on_th = ~np.all(np.isnan(coeffs), axis=1)
    tc = channel_array(gf_tc, n, "gf_tc")
    t, t0, more = _temperatures(
        names, steps, temperature, temperature_tare, on_th, ~np.isnan(tc), thermal_range_C, gf
    )
    problems += more
    if problems or factors is None:
        raise GaugeError(*problems)
    thermal = np.full(shape, np.nan)
    if on_th.any():
        thermal[:, on_th] = thermal_correction(t[:, on_th], t0[on_th], coeffs[on_th], gf[on_th])
    ref = channel_array(reference_C, n, "reference_C")
    on_tc = ~np.isnan(tc)
    factor = np.full(shape, np.nan)
    factor[:, on_tc] = 1.0 / gauge_factor_at(t[:, on_tc], 1.0, tc[on_tc], ref[on_tc])
    bridge_gf = np.where(on_nl, gf * factors.desensitisation, np.nan)
    return _Chain(tuple(names), factors, bridge_gf, thermal, factor)


def _coefficients(thermal_coefficients: ArrayLike | None, n: int) -> Float:
    """Thermal-output coefficients as (channels, k); an all-NaN row means step 3 is off."""
    if thermal_coefficients is None:
        return np.full((n, 1), np.nan)
    c = np.asarray(thermal_coefficients, dtype=float)
    c = c[None, :] if c.ndim == 1 else c
    if c.ndim != 2 or c.shape[0] not in (1, n):
        msg = f"thermal_coefficients: shape {c.shape} for {n} channels; expected (channels, k) or (k,), a0 first"
        raise GaugeError(msg)
    return np.broadcast_to(c, (n, c.shape[-1]))


def _reference_gf(names, gf_ratio, gauge_factor, daq_gauge_factor) -> tuple[Float, list[str]]:
    """Gauge factor a reading carries after step 1, and disagreements between the sources."""
    n = len(names)
    gauge = channel_array(gauge_factor, n, "gauge_factor")
    daq = channel_array(daq_gauge_factor, n, "daq_gauge_factor")
    ratio = channel_array(gf_ratio, n, "gf_ratio")
    carried = daq / np.where(np.isnan(ratio), 1.0, ratio)
    problems = [
        f"gauge '{names[i]}': gauge factor {v} is not positive; expected the data-sheet value (about 2)"
        for arr in (gauge, daq)
        for i in np.flatnonzero(~np.isnan(arr) & ~(arr > 0))
        for v in [arr[i]]
    ]
    both = ~np.isnan(gauge) & ~np.isnan(carried) & (gauge > 0)
    for i in np.flatnonzero(both & (np.abs(carried / gauge - 1.0) > _GF_AGREEMENT)):
        problems.append(
            f"gauge '{names[i]}': daq_gauge_factor / gf_ratio = {carried[i]:.6g} but gauge_factor = {gauge[i]:.6g}; "
            f"expected them equal within 0.1 %, set gf_ratio = daq_gauge_factor / gauge_factor"
        )
    return np.where(np.isnan(gauge), carried, gauge), problems


def _temperatures(names, steps, temperature, temperature_tare, on_th, on_tc, range_C, gf):
    """Temperatures as (steps, channels) and (channels,), with the problems of steps 3 and 4."""
    n = len(names)
    t = np.full((steps, n), np.nan) if temperature is None else np.asarray(temperature, dtype=float)
    if t.ndim == 1 and t.shape[0] == steps:
        t = t[:, None]
    try:
        t = np.broadcast_to(t, (steps, n))
    except ValueError:
        msg = f"temperature: shape {t.shape} for {steps} steps and {n} channels; expected (steps, channels) or (steps,)"
        raise GaugeError(msg) from None
    t0 = channel_array(temperature_tare, n, "temperature_tare")
    problems = [
        f"gauge '{names[i]}': gauge-factor temperature correction needs a temperature at every step; found {int(np.isnan(t[:, i]).sum())} missing"
        for i in np.flatnonzero(on_tc & np.isnan(t).any(axis=0))
    ]
    if not on_th.any():
        return t, t0, problems
    problems += [
        f"gauge '{names[i]}': thermal correction needs a gauge factor; give gauge_factor or daq_gauge_factor"
        for i in np.flatnonzero(on_th & np.isnan(gf))
    ]
    if range_C is None:
        problems += [
            f"gauge '{names[i]}': thermal correction needs the polynomial's temperature range; give thermal_range_C"
            for i in np.flatnonzero(on_th)
        ]
        return t, t0, problems
    r = np.broadcast_to(np.asarray(range_C, dtype=float), (n, 2))
    bad = out_of_range(t, r) & on_th
    for i in np.flatnonzero(bad.any(axis=0)):
        k = int(np.flatnonzero(bad[:, i])[0])
        problems.append(
            f"gauge '{names[i]}': temperature {t[k, i]} degC at step {k} ({int(bad[:, i].sum())} steps in all) is outside the thermal range {r[i].tolist()} degC; not extrapolated, check the temperature or the range"
        )
    for i in np.flatnonzero(on_th & out_of_range(t0, r)):
        problems.append(
            f"gauge '{names[i]}': tare temperature {t0[i]} degC is outside the thermal range {r[i].tolist()} degC; give temperature_tare within it"
        )
    return t, t0, problems
