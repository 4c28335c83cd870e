"""Tare: each sequence's readings and loads taken relative to its tare row.

Stage: measurement. In: the readings table (gauge readings and load columns per row) and the
study's tare rule. Out: the tare row of each sequence, the tared loads and tared readings, and the
later rows at zero load.

The tare row of each sequence is subtracted from the gauge readings AND from the load columns, and
the prediction uses the tared loads, so a seating preload does not bias every step. Later
zero-load rows are never tared away: they measure the return to zero.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core.errors import ReadingsFormatError


@dataclass(frozen=True)
class TaredSteps:
    """The load steps after taring: one entry per readings row."""

    step: NDArray[np.int64]
    sequence: NDArray[np.int64]
    loads: NDArray[np.float64]        # (s, L) tared
    load_names: tuple[str, ...]
    tare: NDArray[np.bool_]           # the tare row of its sequence
    zero_load: NDArray[np.bool_]      # later rows with every load within zero_tol of zero

    @property
    def active(self) -> NDArray[np.bool_]:
        """Steps that count for the criteria and the fits."""
        return ~self.tare & ~self.zero_load


def _near_zero(loads: NDArray, zero_tol: float) -> NDArray[np.bool_]:
    peak = np.nanmax(np.abs(loads), axis=0) if len(loads) else np.zeros(loads.shape[1])
    peak = np.where(peak > 0, peak, 1.0)
    return np.all(np.abs(loads) <= zero_tol * peak, axis=1)


def tare_rows(loads: NDArray, sequence: NDArray, *, rule: str, zero_tol: float,
              source: str) -> NDArray[np.bool_]:
    """Mark the tare row of each sequence.

    ``first``: the first row; ``zero-load``: the last row before loading whose loads are within
    ``zero_tol`` of each column's peak; ``none``: no tare.

    Raises
    ------
    ReadingsFormatError
        When the rule needs a zero-load row before loading and a sequence has none.
    """
    tare = np.zeros(len(loads), dtype=bool)
    if rule == "none":
        return tare
    for seq in np.unique(sequence):
        rows = np.flatnonzero(sequence == seq)
        if rule == "first":
            tare[rows[0]] = True
            continue
        # near zero relative to each load's peak; the last such row before the first loaded one
        near = _near_zero(loads[rows], zero_tol)
        loaded = np.flatnonzero(~near)
        first_loaded = loaded[0] if len(loaded) else len(rows)
        before = np.flatnonzero(near[:first_loaded])
        if not len(before):
            raise ReadingsFormatError(
                f"{source}: sequence {seq} has no zero-load row before loading (zero = "
                f"\"zero-load\", zero_tol {zero_tol:g} of each load's peak); add a zero reading or "
                "use zero = \"first\"")
        tare[rows[before[-1]]] = True
    return tare


def apply_tare(values: NDArray, tare: NDArray[np.bool_], sequence: NDArray) -> NDArray:
    """Subtract each sequence's tare row from every row of that sequence."""
    out = np.array(values, dtype=float, copy=True)
    for seq in np.unique(sequence):
        rows = sequence == seq
        t = np.flatnonzero(tare & rows)
        if len(t):
            out[rows] -= values[t[0]]
    return out


def tare_steps(table: pd.DataFrame, load_names: tuple[str, ...], *, rule: str, zero_tol: float,
               source: str) -> TaredSteps:
    """Tare the load columns of a readings table per sequence (see :func:`tare_rows`).

    Raises
    ------
    ReadingsFormatError
        A load value is missing on a row, or the rule finds no tare row.
    """
    raw = table[list(load_names)].to_numpy(dtype=float)
    if np.isnan(raw).any():
        rows = np.flatnonzero(np.isnan(raw).any(axis=1))
        cols = [c for c, bad in zip(load_names, np.isnan(raw).any(axis=0), strict=True) if bad]
        raise ReadingsFormatError(f"{source}: load value missing in column(s) {', '.join(cols)} "
                                  "at step(s) "
                                  f"{', '.join(str(s) for s in table['step'].to_numpy()[rows][:10])}; "
                                  "every row needs its loads")
    sequence = table["sequence"].to_numpy(dtype=np.int64)
    tare = tare_rows(raw, sequence, rule=rule, zero_tol=zero_tol, source=source)
    loads = apply_tare(raw, tare, sequence)
    zero = _near_zero(loads, zero_tol) & ~tare
    return TaredSteps(step=table["step"].to_numpy(dtype=np.int64), sequence=sequence, loads=loads,
                      load_names=load_names, tare=tare, zero_load=zero)


def tare_readings(raw: NDArray[np.float64], steps: TaredSteps) -> NDArray[np.float64]:
    """Tared gauge readings (s, g): NaN where read NaN, and a whole sequence NaN for a gauge whose
    tare value is missing (an untared sequence is refused rather than guessed)."""
    measured = apply_tare(np.where(np.isnan(raw), 0.0, raw), steps.tare, steps.sequence)
    measured[np.isnan(raw)] = np.nan
    for seq in np.unique(steps.sequence):
        t = np.flatnonzero(steps.tare & (steps.sequence == seq))
        if len(t):
            bad = np.isnan(raw[t[0]])
            measured[np.ix_(steps.sequence == seq, bad)] = np.nan
    return measured


__all__ = ["TaredSteps", "apply_tare", "tare_readings", "tare_rows", "tare_steps"]
