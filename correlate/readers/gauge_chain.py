"""Gauge-map columns of the measurement chain: resistances, wiring, shunt, lot, thermocouple.

Stage: readers. In: the gauge map's parsed columns. Out: problem lines for values outside their
physical range or that contradict each other (a lead resistance without the wiring or the gauge
resistance, an unknown wiring or non-linearity name). :func:`correlate.readers.gauges.validate_gauges`
adds these columns only when the file has at least one of them, so a gauge map without them reads
exactly as before.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

CHAIN_NUMERIC = ("gauge_ohm", "lead_ohm", "shunt_gain", "height")
CHAIN_TEXT = ("wiring", "nonlinearity", "lot", "temperature")
CHAIN_COLUMNS = CHAIN_NUMERIC + CHAIN_TEXT
WIRINGS = ("", "2-wire", "3-wire")
NONLINEARITIES = ("", "none", "quarter-bridge")
# (column, lowest, lowest allowed, what it is)
_RANGES = (
    ("gauge_ohm", 0.0, False, "the grid's resistance in ohm (120, 350 or 1000 are usual)"),
    ("lead_ohm", 0.0, True, "the resistance of one lead wire in ohm"),
    ("shunt_gain", 0.0, False, "the measured over the expected shunt-calibration response "
                               "(near 1)"),
    ("height", 0.0, True, "the grid's height above the surface (backing plus adhesive) in the "
                          "length unit"),
)


def chain_problems(out: pd.DataFrame, source: str) -> list[str]:
    """Problem lines of the measurement-chain columns, one per gauge and problem.

    Parameters
    ----------
    out : DataFrame
        The gauge map with ``gauge``, ``row`` and every column of :data:`CHAIN_COLUMNS`.
    source : str
        The file's name, for the messages.

    Returns
    -------
    list of str
        Empty when every value is in range and consistent.
    """
    problems = []

    def where(i: int) -> str:
        return f"{source} row {out['row'].iloc[i]} (gauge '{out['gauge'].iloc[i]}')"

    for col, low, closed, what in _RANGES:
        values = out[col].to_numpy(dtype=float)
        bad = np.isfinite(values) & (values < low if closed else values <= low)
        problems += [f"{where(i)}: {col} = {values[i]:g} is {'negative' if values[i] < 0 else 'zero'}"
                     f"; expected {what}, {'at least' if closed else 'above'} {low:g}"
                     for i in np.flatnonzero(bad)]
    rg, rl = out["gauge_ohm"].to_numpy(dtype=float), out["lead_ohm"].to_numpy(dtype=float)
    for i in np.flatnonzero(np.isfinite(rl) & ~np.isfinite(rg)):
        problems.append(f"{where(i)}: lead_ohm is given without gauge_ohm; give the grid's "
                        "resistance too (the lead-wire factor is RG/(RG + n RL))")
    for col, allowed, use in (("wiring", WIRINGS, "2-wire or 3-wire (quarter bridges)"),
                              ("nonlinearity", NONLINEARITIES, "quarter-bridge (constant-voltage "
                                                               "quarter bridge) or none")):
        problems += [f"{where(i)}: {col} '{v}' is not known; use {use}, or leave it blank"
                     for i, v in enumerate(out[col]) if v.lower() not in allowed]
    problems += [f"{where(i)}: lead_ohm is given without wiring; say 2-wire or 3-wire (the leads "
                 "in the gauge arm differ)"
                 for i, w in enumerate(out["wiring"]) if np.isfinite(rl[i]) and not w]
    for i in np.flatnonzero((out["temperature"] != "").to_numpy() & (out["lot"] == "").to_numpy()):
        problems.append(f"{where(i)}: temperature column '{out['temperature'].iloc[i]}' is given "
                        "without a lot; give the gauge's lot (a [[gauge_lot]] in the study) "
                        "whose thermal output it drives")
    return problems


__all__ = ["CHAIN_COLUMNS", "CHAIN_NUMERIC", "CHAIN_TEXT", "NONLINEARITIES", "WIRINGS",
           "chain_problems"]
