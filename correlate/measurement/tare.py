"""Correlation: pair the test readings with the model readings for the test loads.

Stage: comparison. In: readings per step (tared here), the load mapping, and the model's
operator rows per case. Out: per gauge and step the predicted and measured readings, the placement
band, and the status under the analyst's criteria.

Tare: the tare row of each sequence is subtracted from the gauge readings AND from the load
columns, and the prediction uses the tared loads, so a seating preload does not bias every step.
Later zero-load rows are never tared away: they measure the return to zero.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core.errors import ReadingsFormatError
from correlate.readers.study import Criteria, Load


@dataclass(frozen=True)
class Steps:
    """The load steps after taring: one entry per readings row."""

    step: NDArray[np.int64]
    sequence: NDArray[np.int64]
    loads: NDArray[np.float64]        # (s, L) tared
    load_names: tuple[str, ...]
    tare: NDArray[np.bool_]           # the tare row of its sequence
    zero_load: NDArray[np.bool_]      # later rows with every load within zero_tol of zero
    factors: NDArray[np.float64]      # (s, C) multiplier of each FE case

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


def case_factors(loads: NDArray, load_names: tuple[str, ...], mapping: tuple[Load, ...],
                 cases: list[str]) -> NDArray[np.float64]:
    """Multiplier of each FE case per step: sum over [[load]] of value / reference."""
    factors = np.zeros((len(loads), len(cases)))
    for ld in mapping:
        j = load_names.index(ld.column)
        factors[:, cases.index(ld.case)] += loads[:, j] / ld.reference
    return factors


def make_steps(table: pd.DataFrame, load_names: tuple[str, ...], mapping: tuple[Load, ...],
               cases: list[str], *, rule: str, zero_tol: float, source: str) -> Steps:
    raw = table[list(load_names)].to_numpy(dtype=float)
    if np.isnan(raw).any():
        rows = np.flatnonzero(np.isnan(raw).any(axis=1))
        raise ReadingsFormatError(f"{source}: load value missing at step(s) "
                                  f"{', '.join(str(s) for s in table['step'].to_numpy()[rows][:10])}; "
                                  "every row needs its loads")
    sequence = table["sequence"].to_numpy(dtype=np.int64)
    tare = tare_rows(raw, sequence, rule=rule, zero_tol=zero_tol, source=source)
    loads = apply_tare(raw, tare, sequence)
    zero = _near_zero(loads, zero_tol) & ~tare
    return Steps(step=table["step"].to_numpy(dtype=np.int64), sequence=sequence, loads=loads,
                 load_names=load_names, tare=tare, zero_load=zero,
                 factors=case_factors(loads, load_names, mapping, cases))


def status_table(measured: NDArray, predicted: NDArray, criteria: Criteria, steps: Steps,
                 dropped_steps: NDArray[np.bool_], dropped_gauges: NDArray[np.bool_],
                 flag_text: NDArray) -> dict[str, NDArray]:
    """Per gauge-step differences and statuses (all arrays (s, g)).

    status: ``pass`` / ``fail`` for healthy active steps; ``tare``; ``zero-load``; ``missing``;
    otherwise the flag that removed the step or the gauge.
    """
    diff = measured - predicted
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(predicted != 0, measured / predicted, np.nan)
        relative = diff / np.abs(predicted)
    # relative only where the relative term can govern: |predicted| >= absolute_ue / relative
    rel_floor = criteria.absolute_ue / criteria.relative if criteria.relative > 0 else np.inf
    relative = np.where(np.abs(predicted) >= rel_floor, relative, np.nan)
    allowed = np.maximum(criteria.relative * np.abs(predicted), criteria.absolute_ue)
    basis = np.where(criteria.relative * np.abs(predicted) > criteria.absolute_ue, "relative", "floor")
    ok = np.abs(diff) <= allowed
    status = np.where(ok, "pass", "fail").astype(object)
    unconservative = (~ok) & (np.abs(measured) > np.abs(predicted))
    healthy = ~dropped_steps & ~dropped_gauges[None, :]
    status = np.where(np.isnan(measured), "missing", status)
    status = np.where(healthy, status, flag_text)
    status = np.where(steps.zero_load[:, None], "zero-load", status)
    status = np.where(steps.tare[:, None], "tare", status)
    evaluated = (status == "pass") | (status == "fail")
    unconservative = unconservative & evaluated
    return {"difference": diff, "ratio": ratio, "relative": relative, "allowed": allowed,
            "basis": np.where(evaluated, basis, ""), "status": status,
            "unconservative": unconservative, "evaluated": evaluated}


def reference_step(predicted: NDArray, steps: Steps) -> int:
    """Index of the step with the largest RMS predicted reading (the reference step)."""
    rms = np.sqrt(np.nanmean(predicted ** 2, axis=1))
    rms = np.where(steps.active, rms, -1.0)
    return int(np.argmax(rms))
