"""Pairing test rows with model states: load superposition and series matching, written once.

Stage: comparison. In: the readings table, the study's load mapping and the model. Out: the tared
steps with the factor of every FE case per step (:class:`Steps`), and for series cases the weights
of the FE states at each row.

Superposition: predicted(step) = sum over [[load]] of value(step) / reference x case.

Series cases: when superposition does not hold, a case with ``time_index = "all"`` holds every step
of a load history. ``match = { column = "F_kN", value_at_time_1 = 10.0 }`` says the FE load at
time t is t x value_at_time_1 of that column. Each readings row is paired with the FE state at its
tared load by linear interpolation between neighbouring FE steps, within monotonic segments of the
FE load (loading rows with loading segments, unloading with unloading). Rows outside the series'
range, or unloading rows when the series never unloads, are not modelled.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core.errors import ReadingsFormatError, StudyError
from correlate.measurement.channels import temperature_columns
from correlate.measurement.health import load_direction
from correlate.measurement.tare import TaredSteps, tare_steps
from correlate.model_readings.model import Model, case_steps
from correlate.readers.readings import read_readings
from correlate.readers.study import Case, Load, Study


@dataclass(frozen=True)
class Steps(TaredSteps):
    """The tared load steps with the multiplier of each FE case per step."""

    factors: NDArray[np.float64] = None  # type: ignore[assignment]  # (s, C)


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
    """Tare the readings table's loads and give every FE case its factor per step."""
    tared = tare_steps(table, load_names, rule=rule, zero_tol=zero_tol, source=source)
    return Steps(**vars(tared), factors=case_factors(tared.loads, load_names, mapping, cases))


def load_columns(study: Study) -> tuple[str, ...]:
    """The readings columns the study uses as loads: the [[load]] columns, then match columns."""
    matched = [c.match["column"] for c in study.cases if c.match and "column" in c.match]
    return tuple(dict.fromkeys([ld.column for ld in study.loads] + matched))


def gauge_channels(gauges: pd.DataFrame) -> dict[str, str]:
    """Readings column of every gauge: its ``channel``, or its own id."""
    return {g: (c or g) for g, c in zip(gauges["gauge"], gauges["channel"], strict=True)}


def read_test_data(study: Study, gauges_df: pd.DataFrame) -> tuple[Any, Steps, tuple[str, ...]]:
    """Read the readings file and tare the steps (also used by `check`)."""
    names = gauges_df["gauge"].tolist()
    for o in study.overrides:
        if o.gauge not in names:
            raise StudyError(f"{study.path.name}: [[override]] names gauge '{o.gauge}', which is not "
                             "in the gauge map")
    load_cols = load_columns(study)
    thermocouples = tuple(c for c in temperature_columns(gauges_df, study.chain)
                          if c not in load_cols)  # read beside the loads, never tared as one
    readings = read_readings(study.readings_file, gauges=gauge_channels(gauges_df),
                             loads=load_cols + thermocouples, sentinels=study.sentinels)
    readings = in_step_order(readings, newest_first=study.newest_first)
    steps = make_steps(readings.table, load_cols, study.loads, [c.name for c in study.cases],
                       rule=study.zero, zero_tol=study.zero_tol,
                       source=Path(readings.path).name)
    return readings, steps, load_cols


def in_step_order(readings: Any, *, newest_first: bool) -> Any:
    """The readings with their rows in step order within each sequence.

    A file written newest first would be tared on its last step: it is refused unless the study
    says ``[readings] order = "newest-first"``, and then its rows are turned round.
    """
    table = readings.table
    if newest_first:
        table = table.iloc[::-1].reset_index(drop=True)
    name = Path(readings.path).name
    for seq, rows in table.groupby("sequence", sort=False):
        step = rows["step"].to_numpy()
        down = np.flatnonzero(np.diff(step) < 0)
        if len(down):
            i = down[0]
            raise ReadingsFormatError(
                f"{name}: in sequence {seq} step {step[i + 1]} follows step {step[i]}; rows must "
                "be in step order (the first row is the tare): if the file lists the newest step "
                "first, say [readings] order = \"newest-first\"")
    return replace(readings, table=table) if newest_first else readings


@dataclass(frozen=True, eq=False)
class SeriesPairing:
    """How a series case's FE states pair with the readings rows (see the module docstring).

    ``fe_load[k]``: FE load of state ``fe_index[k]``; ``load``, ``direction``: each readings
    row's tared load in the match column and its direction (+1 loading, -1 unloading, 0 neither).
    """

    fe_index: tuple[int | None, ...]
    fe_load: NDArray[np.float64]     # (K,)
    load: NDArray[np.float64]        # (s,)
    direction: NDArray[np.int64]     # (s,)

    def apply(self, rows: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
        """Rows (R, K) of every state -> rows (R, s) at every readings row, and which are
        modelled (NaN where not)."""
        return interpolate_series(self.fe_load, rows, self.load, self.direction)

    def weights(self, row: int) -> dict[int | None, float] | None:
        """Weight of each FE state at readings row ``row`` (None: not modelled there); the rule
        is linear in the rows, so applied to the identity it gives each state's weight."""
        w, modelled = self.apply(np.eye(len(self.fe_index)))
        if not modelled[row]:
            return None
        return {self.fe_index[k]: float(w[k, row]) for k in range(len(self.fe_index))
                if w[k, row] != 0}


def pair_series(study: Study, model: Model, case: Case, steps: TaredSteps) -> SeriesPairing:
    """Pair a series case's FE states with every readings row by its tared load.

    Raises
    ------
    StudyError
        When the case has no usable ``match`` naming one of the load columns.
    """
    match = case.match or {}
    column, scale = match.get("column"), match.get("value_at_time_1")
    if column not in steps.load_names or not isinstance(scale, int | float) or scale == 0:
        raise StudyError(f"case '{case.name}' is a series (time_index = {case.time_index!r}); run "
                         "needs match = { column = \"<load column>\", value_at_time_1 = <value> } "
                         f"naming one of the [[load]] columns ({', '.join(steps.load_names)})")
    states = case_steps(model, case)
    load = steps.loads[:, steps.load_names.index(column)]
    return SeriesPairing(fe_index=tuple(k for k, _ in states),
                         fe_load=np.array([t * scale for _, t in states]), load=load,
                         direction=load_direction(load[:, None], steps.sequence,
                                                  tol=study.zero_tol))


def monotonic_segments(load: NDArray[np.float64]) -> list[tuple[int, int, int]]:
    """(first, last, direction) of each monotonic run of the FE load (+1 rising, -1 falling)."""
    out = []
    start = 0
    for k in range(1, len(load)):
        d = np.sign(load[k] - load[k - 1])
        if k == start + 1:
            direction = d
        elif d != direction and d != 0:
            out.append((start, k - 1, int(direction)))
            start, direction = k - 1, d
    if len(load) >= 2:
        out.append((start, len(load) - 1, int(direction)))
    return out


def interpolate_series(fe_load: NDArray[np.float64], rows: NDArray[np.float64],
                       load: NDArray[np.float64], direction: NDArray[np.int64]
                       ) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Operator rows at each readings row's load.

    Parameters
    ----------
    fe_load : ndarray, shape (K,)
        FE load of each series step (t x value_at_time_1). An unloaded state (load 0, rows 0) is
        put in front when the series does not start at zero.
    rows : ndarray, shape (R, K)
        Operator rows (readings) of each step.
    load : ndarray, shape (s,)
        Tared load of each readings row in the match column.
    direction : ndarray, shape (s,)
        +1 loading, -1 unloading, 0 neither (tare, holds): matched with rising segments.

    Returns
    -------
    interp : ndarray, shape (R, s)
        NaN where not modelled.
    modelled : ndarray, shape (s,) of bool
    """
    fe_load = np.asarray(fe_load, dtype=float)
    rows = np.asarray(rows, dtype=float)
    if fe_load[0] != 0:
        fe_load = np.r_[0.0, fe_load]
        rows = np.c_[np.zeros(len(rows)), rows]
    out = np.full((len(rows), len(load)), np.nan)
    modelled = np.zeros(len(load), dtype=bool)
    segments = monotonic_segments(fe_load)
    for i, (L, d) in enumerate(zip(load, direction, strict=True)):
        want = -1 if d < 0 else 1
        for first, last, seg_dir in segments:
            if seg_dir != want:
                continue
            lo, hi = sorted((fe_load[first], fe_load[last]))
            tol = 1e-9 * max(abs(hi), 1.0)
            if not lo - tol <= L <= hi + tol:
                continue
            xs = fe_load[first:last + 1]
            order = np.argsort(xs) if seg_dir < 0 else np.arange(len(xs))
            xs = xs[order]
            k = int(np.clip(np.searchsorted(xs, L) - 1, 0, len(xs) - 2))
            w = 0.0 if xs[k + 1] == xs[k] else (L - xs[k]) / (xs[k + 1] - xs[k])
            cols = np.arange(first, last + 1)[order]
            out[:, i] = (1 - w) * rows[:, cols[k]] + w * rows[:, cols[k + 1]]
            modelled[i] = True
            break
        if abs(L) <= 1e-12 and not modelled[i]:
            out[:, i] = 0.0
            modelled[i] = True
    return out, modelled
