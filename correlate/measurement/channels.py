"""The measurement chain applied to a study's channels, row by row, before the tare.

Stage: measurement. In: the gauge map (with its measurement-chain columns), the study's
:class:`ChainSettings`, the readings table (gauge and thermocouple columns) and the tared steps.
Out: :class:`ChainApplied`, the readings as read and tared (``raw_ue``), the corrected and tared
readings, and every factor and term applied per channel and row (for ``corrections.csv``).

For every row, in this order (the relations are in :mod:`correlate.measurement.chain`): the
polarity as wired, the gauge-factor ratio with the lead-wire factor or (instead) the shunt gain,
the quarter-bridge non-linearity, the thermal output since the tare temperature and the gauge
factor at temperature; then each sequence's tare row is subtracted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core.errors import GaugeError, ReadingsFormatError, StudyError
from correlate.measurement.chain import correct_channels, lead_wire_factor, out_of_range
from correlate.measurement.tare import TaredSteps, tare_readings
from correlate.readers.gauge_chain import CHAIN_COLUMNS
from correlate.readers.records import ChainSettings

Float = NDArray[np.float64]

_CELSIUS = frozenset({"degc", "°c", "ºc", "c", "celsius", "degreesc"})  # units-row spellings
_GF_AGREEMENT = 1e-3   # relative: a lot's gauge factor and the map's must agree to 0.1 %
_TERMS = 5             # thermal-output coefficients a0 .. a4


@dataclass(frozen=True)
class ChainApplied:
    """The measurement chain as applied to every channel (shapes: s steps, g gauges).

    Attributes
    ----------
    gauges : tuple of str
    raw_ue : ndarray (s, g)
        Readings as read, tared; before any correction. [microstrain]
    measured_ue : ndarray (s, g)
        Corrected, then tared. [microstrain]
    gf_ratio, lead_factor, shunt_gain : ndarray (g,)
        Step 1 factors; NaN where not applied. [-]
    multiplier : ndarray (g,)
        Polarity x gauge-factor ratio / (lead-wire factor or shunt gain). [-]
    nonlinearity_ue : ndarray (s, g)
        Non-linearity term's change of the tared reading; NaN where off. [microstrain]
    thermal_ue : ndarray (s, g)
        Apparent strain removed since the tare; NaN where off. [microstrain]
    gf_temperature_factor : ndarray (s, g)
        GF/GF(T) multiplied; NaN where off. [-]
    temperature_C : ndarray (s, g)
        Gauge temperature read; NaN where no thermocouple. [degC]
    lot, temperature_column : tuple of str
        Per gauge, '' where none.
    notes : tuple of str
        Step 1 in words (which of the lead-wire factor and the shunt gain applied).
    outside_range : ndarray of bool (s, g)
        Readings left out because the gauge temperature is outside its lot's range (or missing);
        a tare row outside it leaves its whole sequence out. Never extrapolated.
    range_C : ndarray (g, 2)
        Each lot's [low, high]; NaN without a lot. [degC]
    """

    gauges: tuple[str, ...]
    raw_ue: Float
    measured_ue: Float
    gf_ratio: Float
    lead_factor: Float
    shunt_gain: Float
    multiplier: Float
    nonlinearity_ue: Float
    thermal_ue: Float
    gf_temperature_factor: Float
    temperature_C: Float
    lot: tuple[str, ...]
    temperature_column: tuple[str, ...]
    notes: tuple[str, ...]
    outside_range: NDArray[np.bool_]
    range_C: Float


def chain_used(gauges: pd.DataFrame, chain: ChainSettings) -> bool:
    """Whether the study or its gauge map gives any measurement-chain key."""
    return chain.used or any(c in gauges.columns for c in CHAIN_COLUMNS)


def temperature_columns(gauges: pd.DataFrame, chain: ChainSettings) -> tuple[str, ...]:
    """The readings columns of the gauges' thermocouples, in gauge-map order, each once."""
    if not chain_used(gauges, chain):
        return ()
    return tuple(dict.fromkeys(c for c in _temperature_column(gauges, chain) if c))


def apply_chain(raw: Float, signs: Float, gauges: pd.DataFrame, chain: ChainSettings,
                table: pd.DataFrame, steps: TaredSteps, *, units: dict[str, str],
                source: str) -> ChainApplied:
    """Correct every row of every channel, then tare (see the module docstring).

    Parameters
    ----------
    raw : ndarray (s, g)
        Readings as read, in gauge-map order. [microstrain]
    signs : ndarray (g,)
        Polarity as wired times the analyst's reverse overrides (+1 or -1).
    gauges : DataFrame
        The gauge map.
    chain : ChainSettings
        The study's lots, default thermocouple column and non-linearity.
    table : DataFrame
        The readings table holding the thermocouple columns, rows as ``raw``.
    steps : TaredSteps
        The tare rows and sequences.
    units : dict
        Unit of each non-gauge column from the units row.
    source : str
        The readings file's name, for the messages.

    Returns
    -------
    ChainApplied

    Raises
    ------
    GaugeError
        Every problem at once: a lot that is not defined, a lot without a thermocouple column,
        disagreeing gauge factors, non-linearity without a gauge factor. A temperature outside
        a lot's range (or missing beside a reading) is not an error: that reading is left out
        and listed in ``outside_range`` (:func:`range_flags`).
    ReadingsFormatError
        A thermocouple column that is not in degrees C.
    StudyError
        A thermal-output correction with ``zero = "none"`` (there is no tare temperature).
    """
    names = [str(g) for g in gauges["gauge"]]
    n = len(names)
    lots = _text(gauges, "lot")
    columns = _temperature_column(gauges, chain)
    problems = _lot_problems(names, lots, columns, chain)
    if problems:
        raise GaugeError(*problems)
    _check_celsius(columns, units, source)
    thermal = np.array([bool(lot) for lot in lots])
    if thermal.any() and not steps.tare.any():
        raise StudyError(f"{source}: the thermal-output correction of {', '.join(np.array(names)[thermal])} "
                         "needs the tare temperature, but [readings] zero = \"none\" marks no "
                         "tare row; use zero = \"first\" or \"zero-load\"")
    temps = np.column_stack([table[c].to_numpy(dtype=float) if c else np.full(len(table), np.nan)
                             for c in columns]) if n else np.zeros((len(table), 0))
    params = _parameters(gauges, chain, names, lots)
    span = params["thermal_range_C"]
    outside = _outside_range(raw, temps, thermal, span, steps)
    signed = raw * signs[None, :]
    corrected, nl, th, gft = (np.full(raw.shape, np.nan) for _ in range(4))
    multiplier = notes = None
    middle = np.where(thermal, np.mean(np.where(thermal[:, None], span, 0.0), axis=1), np.nan)
    for seq in np.unique(steps.sequence):
        rows = np.flatnonzero(steps.sequence == seq)
        tare = rows[steps.tare[rows]]
        t0 = temps[tare[0]] if len(tare) else np.full(n, np.nan)
        if len(tare):  # a tare outside the range leaves the whole sequence out (below)
            t0 = np.where(outside[tare[0]], middle, t0)
        # beside a missing or left-out reading the temperature changes nothing: the tare's
        # stands in, so nothing is extrapolated
        unread = (np.isnan(raw[rows]) & ~steps.tare[rows, None] | outside[rows]) & thermal[None, :]
        t = np.where(unread, t0[None, :], temps[rows])
        result = correct_channels(signed[rows], gauges=names, temperature=t,
                                  temperature_tare=t0, **params)
        corrected[rows], th[rows], gft[rows] = (result.corrected_ue, result.thermal_ue,
                                                result.gf_temperature_factor)
        nl[rows] = result.nonlinearity_ue - (result.nonlinearity_ue[steps.tare[rows]][0]
                                             if len(tare) else 0.0)
        multiplier, notes = result.multiplier, result.notes
    corrected[outside] = np.nan
    th[outside] = np.nan
    if multiplier is None:  # no rows: the readings reader refuses that before this point
        multiplier, notes = np.ones(n), ("no factor applied",) * n
    return ChainApplied(
        gauges=tuple(names), raw_ue=tare_readings(raw, steps),
        measured_ue=tare_readings(corrected, steps), gf_ratio=params["gf_ratio"],
        lead_factor=params["lead_factor"], shunt_gain=params["shunt_gain"],
        multiplier=multiplier * signs, nonlinearity_ue=nl, thermal_ue=th,
        gf_temperature_factor=gft, temperature_C=np.where(thermal[None, :], temps, np.nan),
        lot=tuple(lots), temperature_column=tuple(columns), notes=tuple(notes),
        outside_range=outside, range_C=np.where(thermal[:, None], span, np.nan))


def corrections_table(chain: ChainApplied, reference: int,
                      height_ue: Float | None = None) -> pd.DataFrame:
    """The rows of ``corrections.csv``: one per channel, every factor and term at one step.

    Parameters
    ----------
    chain : ChainApplied
    reference : int
        Row index of the reference step.
    height_ue : ndarray (s, g), optional
        The grid-height correction of the model reading (model side), written as ``height_ue``.

    Returns
    -------
    DataFrame
        ``gauge``, the factors (``gf_ratio``, ``lead_wire_factor``, ``shunt_gain``,
        ``multiplier``), the terms at the reference step (``nonlinearity_ue``, ``thermal_ue``,
        ``gf_temperature_factor``, ``temperature_C``), ``raw_ue`` and ``measured_ue`` there and
        their difference ``change_ue``, the ``lot`` and ``temperature_column``, and a ``note``
        saying which of the lead-wire factor and the shunt gain applied; ``height_ue`` when given.
    """
    k = reference
    height = {} if height_ue is None else {"height_ue": height_ue[k]}
    return pd.DataFrame({
        "gauge": list(chain.gauges),
        "gf_ratio": chain.gf_ratio,
        "lead_wire_factor": np.where(np.isnan(chain.shunt_gain), chain.lead_factor, np.nan),
        "shunt_gain": chain.shunt_gain,
        "multiplier": chain.multiplier,
        "nonlinearity_ue": chain.nonlinearity_ue[k],
        "thermal_ue": chain.thermal_ue[k],
        "gf_temperature_factor": chain.gf_temperature_factor[k],
        "temperature_C": chain.temperature_C[k],
        "raw_ue": chain.raw_ue[k],
        "measured_ue": chain.measured_ue[k],
        "change_ue": chain.measured_ue[k] - chain.raw_ue[k],
        "lot": list(chain.lot),
        "temperature_column": list(chain.temperature_column),
        "note": list(chain.notes),
        **height,
    })


def _text(gauges: pd.DataFrame, col: str) -> list[str]:
    n = len(gauges)
    return [str(v).strip() for v in gauges[col]] if col in gauges else [""] * n


def _number(gauges: pd.DataFrame, col: str) -> Float:
    n = len(gauges)
    return gauges[col].to_numpy(dtype=float) if col in gauges else np.full(n, np.nan)


def _temperature_column(gauges: pd.DataFrame, chain: ChainSettings) -> list[str]:
    """Per gauge: its own thermocouple column, else the study's default for a gauge with a lot."""
    own, lots = _text(gauges, "temperature"), _text(gauges, "lot")
    default = chain.thermal_column or ""
    return [c or (default if lot else "") for c, lot in zip(own, lots, strict=True)]


def _lot_problems(names: list[str], lots: list[str], columns: list[str],
                  chain: ChainSettings) -> list[str]:
    problems = []
    for g, lot, col in zip(names, lots, columns, strict=True):
        if lot and lot not in chain.lots:
            known = ", ".join(sorted(chain.lots)) or "none"
            problems.append(f"gauge '{g}': lot '{lot}' is not defined; add a [[gauge_lot]] with "
                            f"name = \"{lot}\" to the study (defined: {known})")
        elif lot and not col:
            problems.append(f"gauge '{g}': lot '{lot}' needs the gauge temperature; give its "
                            "thermocouple column in the gauge map's temperature column or "
                            "[thermal] column in the study")
    return problems


def _check_celsius(columns: list[str], units: dict[str, str], source: str) -> None:
    problems = []
    for col in dict.fromkeys(c for c in columns if c):
        unit = units.get(col, "")
        key = "".join(unit.split()).strip("[](){}").casefold()
        if key not in _CELSIUS:
            found = f"unit '{unit}'" if unit else "no unit"
            hint = (" (for Fahrenheit: (F - 32) / 1.8)" if key in ("f", "degf", "°f") else
                    " (for kelvin: K - 273.15)" if key == "k" else "")
            problems.append(f"{source}, column {col}: {found} where the thermal-output "
                            "correction needs degrees C; convert the column to degC" + hint
                            + " and write degC in the units row under the header")
    if problems:
        raise ReadingsFormatError(*problems)


def _parameters(gauges: pd.DataFrame, chain: ChainSettings, names: list[str],
                lots: list[str]) -> dict[str, object]:
    """Keyword arguments of :func:`correct_channels` from the gauge map and the lots."""
    n = len(names)
    own_gf, daq = _number(gauges, "gauge_factor"), _number(gauges, "daq_gauge_factor")
    records = [chain.lots.get(lot) for lot in lots]
    lot_gf = np.array([r.gauge_factor if r else np.nan for r in records], dtype=float)
    problems = [
        f"gauge '{names[i]}': gauge_factor {own_gf[i]:g} in the gauge map but {lot_gf[i]:g} in "
        f"[[gauge_lot]] '{lots[i]}'; give one value (or make them agree within 0.1 %)"
        for i in np.flatnonzero(np.isfinite(own_gf) & np.isfinite(lot_gf)
                                & (np.abs(own_gf / np.where(lot_gf > 0, lot_gf, 1.0) - 1.0)
                                   > _GF_AGREEMENT))]
    gf = np.where(np.isfinite(own_gf), own_gf, lot_gf)
    rl = _number(gauges, "lead_ohm")
    lead = np.full(n, np.nan)
    if np.isfinite(rl).any():
        lead = lead_wire_factor(_number(gauges, "gauge_ohm"), rl,
                                [w or None for w in _text(gauges, "wiring")], gauges=names)
    wanted = [(v.lower() or chain.nonlinearity) == "quarter-bridge"
              for v in _text(gauges, "nonlinearity")]
    problems += [f"gauge '{g}': the quarter-bridge non-linearity needs the gauge factor; give "
                 "gauge_factor or daq_gauge_factor in the gauge map, or the gauge's lot"
                 for g, on, a, b in zip(names, wanted, gf, daq, strict=True)
                 if on and not (np.isfinite(a) or np.isfinite(b))]
    if problems:
        raise GaugeError(*problems)
    coefficients = np.full((n, _TERMS), np.nan)
    span = np.full((n, 2), np.nan)
    for i, r in enumerate(records):
        if r is not None:
            coefficients[i] = 0.0
            coefficients[i, :len(r.thermal_output)] = r.thermal_output
            span[i] = r.range_C
    return {
        "gf_ratio": np.where(np.isfinite(gf) & np.isfinite(daq), daq / gf, np.nan),
        "lead_factor": lead, "shunt_gain": _number(gauges, "shunt_gain"),
        "nonlinear": np.array(wanted, dtype=bool), "gauge_factor": gf,
        "daq_gauge_factor": daq,
        "thermal_coefficients": coefficients,
        "thermal_range_C": np.where(np.isnan(span), [-np.inf, np.inf], span),
        "gf_tc": np.array([r.gauge_factor_tc if r and r.gauge_factor_tc is not None else np.nan
                           for r in records], dtype=float),
        "reference_C": np.array([r.reference_C if r else 24.0 for r in records], dtype=float),
    }


def _outside_range(raw: Float, temps: Float, thermal: NDArray[np.bool_], span: Float,
                   steps: TaredSteps) -> NDArray[np.bool_]:
    """Readings (s, g) whose gauge temperature is outside its lot's range or missing, beside a
    reading or at a tare row; a tare row outside marks its whole sequence."""
    needed = (np.isfinite(raw) | steps.tare[:, None]) & thermal[None, :]
    bad = needed & out_of_range(temps, np.where(np.isnan(span), [-np.inf, np.inf], span))
    for seq in np.unique(steps.sequence):
        rows = steps.sequence == seq
        tare = np.flatnonzero(rows & steps.tare)
        if len(tare):
            bad[np.ix_(rows, bad[tare[0]])] = True
    return bad & thermal[None, :]


def range_flags(chain: ChainApplied, steps: TaredSteps) -> pd.DataFrame:
    """One health-flag row per reading left out for its temperature (``temperature-range``).

    Columns as the channel-health flags: ``gauge``, ``step``, ``sequence``, ``flag``, ``value``
    (the temperature, NaN when missing), ``threshold``, ``scope``, ``drops`` ("step") and
    ``reason``.
    """
    k, j = np.nonzero(chain.outside_range)
    rows = []
    for a, b in zip(k, j, strict=True):
        t = chain.temperature_C[a, b]
        low, high = chain.range_C[b]
        what = "missing" if np.isnan(t) else f"{t:g} degC"
        tare = " at the tare row, so the whole sequence is left out" if steps.tare[a] else ""
        rows.append({"gauge": chain.gauges[b], "step": int(steps.step[a]),
                     "sequence": int(steps.sequence[a]), "flag": "temperature-range",
                     "value": t, "threshold": np.nan, "scope": "step", "drops": "step",
                     "reason": f"gauge temperature {what}{tare} is outside lot "
                               f"'{chain.lot[b]}' range [{low:g}, {high:g}] degC; the thermal "
                               "output is not extrapolated and the reading is left out"})
    columns = ["gauge", "step", "sequence", "flag", "value", "threshold", "scope", "drops",
               "reason"]
    return pd.DataFrame(rows, columns=columns).astype({"step": "int64", "sequence": "int64"})


__all__ = ["ChainApplied", "apply_chain", "chain_used", "corrections_table", "range_flags",
           "temperature_columns"]
