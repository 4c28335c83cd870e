"""The compared channels of a study: every gauge that is not a bridge arm, then each bridge.

Stage: model readings. In: a prepared :class:`~correlate.model_readings.model.Model` with
bridges. Out: a :class:`ChannelModel`, a model whose gauge table, operator layout and case rows
are those of the channels a test reads: the gauges that are no bridge's arm in gauge-map order,
then one channel per bridge (its id, read from its readings column). A bridge's rows are the
combination ``(e1 - e2 + e3 - e4) / factor`` of its arms' rows
(:func:`correlate.model_readings.bridges.combine_bridges`), so the comparison, statistics,
placement band and budget read a bridge channel as one gauge. A model without bridges is
returned as it is.

A bridge channel's row of the gauge table: the place, direction, normal, grid length and mount
of its first active arm (the views draw every arm from ``arms``); its ``arms`` column lists the
arm grids as ``1:G1 2:G2 ...``; the gauge factor, acquisition gauge factor, polarity and range
are the values its arms share (a channel has one of each); the shunt gain is the
``[[bridge]]`` table's; no lead-wire factor, non-linearity, lot or height applies (refused on
arms by :func:`correlate.readers.bridge_map.bridges_of`); position and angle tolerances are the
largest of its arms' (the diagnosis moves the arms together, each by its own tolerance in the
band).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field, fields
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import sparse

from correlate.core.errors import GaugeError
from correlate.mechanics.gauge import BRIDGE_ARM_SIGNS
from correlate.model_readings.bridges import combine_bridges
from correlate.model_readings.model import Model, case_rows
from correlate.model_readings.operator import GaugeOperator, Placement
from correlate.model_readings.other_models import open_variant
from correlate.readers.bridge_map import Bridge
from correlate.readers.study import Case, Study

# gauge-map columns a channel has once: its arms must agree (NaN on every arm is agreement)
SHARED = ("gauge_factor", "daq_gauge_factor", "polarity", "range_ue")
TEXT_BLANK = ("rosette", "face", "grid", "lot", "temperature", "wiring")


@dataclass
class ChannelModel(Model):
    """A model read channel by channel: gauges that are no bridge's arm, then the bridges.

    ``base`` is the model of the gauge map (every arm a gauge); ``combination`` maps its
    operator rows to the channels' rows; ``arm_weights[j]`` lists (gauge index in ``base``,
    sign / factor) of channel j (one entry of weight 1 for a gauge).
    """

    base: Model | None = None
    combination: sparse.csr_matrix | None = None
    arm_weights: list[list[tuple[int, float]]] = field(default_factory=list)

    def channel_rows(self, case: Case, fe_index: int | None
                     ) -> dict[str, NDArray[np.float64]] | None:
        """The case's rows of the channels: the base rows, combined (per-gauge arrays such as
        the rotation take the largest magnitude over a bridge's arms)."""
        assert self.base is not None and self.combination is not None
        rows = case_rows(self.base, case, fe_index)
        n = self.combination.shape[1]
        out: dict[str, NDArray[np.float64]] = {}
        for key, value in rows.items():
            if isinstance(value, np.ndarray) and value.dtype.kind == "f" and len(value) == n:
                out[key] = self.combination @ value
            elif isinstance(value, np.ndarray) and len(value) == len(self.base.operator.gauges):
                out[key] = np.array([np.max(np.abs(value[[k for k, _ in arms]]))
                                     for arms in self.arm_weights])
            else:
                out[key] = value
        return out

    def is_bridge(self, j: int) -> bool:
        """Whether channel j is a bridge (more than one arm, or a weight other than 1)."""
        arms = self.arm_weights[j]
        return len(arms) != 1 or arms[0][1] != 1.0


def compared_model(model: Model) -> Model:
    """The model read channel by channel (the model itself when it has no bridges).

    Raises
    ------
    GaugeError
        Arms of one bridge that disagree on a value the channel has once (gauge factor,
        acquisition gauge factor, polarity, range), one line per bridge and column.
    """
    if not model.bridges:
        return model
    op, gauges = model.operator, model.gauges
    bridges = list(model.bridges)
    index = {g: i for i, g in enumerate(op.gauges)}
    in_bridge = {a for b in bridges for a in b.arms if a is not None}
    keep = [i for i, g in enumerate(op.gauges) if g not in in_bridge]
    combo = combine_bridges(op, bridges)
    keep_rows = np.flatnonzero(np.isin(op.row_gauge, keep))
    renumber = np.full(len(op.gauges), -1)
    renumber[keep] = np.arange(len(keep))
    select = sparse.csr_matrix((np.ones(len(keep_rows)), (np.arange(len(keep_rows)), keep_rows)),
                               shape=(len(keep_rows), len(op.row_kind)))
    combination = sparse.vstack([select, combo.matrix]).tocsr()
    first = [index[next(a for a in b.arms if a is not None)] for b in bridges]
    members = [[index[a] for a in b.arms if a is not None] for b in bridges]
    weights = (combination @ op.weights).tocsr()
    weights.sort_indices()  # sorted column indices, as the operator's products expect
    channel_op = GaugeOperator(
        mesh=op.mesh, placement=_placement(op.placement, keep, first, members, bridges),
        cell=op.cell, xi=op.xi, direction=op.direction, transverse=op.transverse, face=op.face,
        weights=weights,
        row_gauge=np.r_[renumber[op.row_gauge[keep_rows]], len(keep) + combo.row_gauge],
        row_kind=np.r_[op.row_kind[keep_rows], combo.row_kind],
        row_offset=np.vstack([op.row_offset[keep_rows], combo.row_offset]),
        kt=np.r_[op.kt[keep], op.kt[first]], nu0=np.r_[op.nu0[keep], op.nu0[first]],
        height=np.r_[op.height[keep], op.height[first]],
        invalid=np.r_[op.invalid[keep], [op.invalid[m].any() for m in members]],
        centre_points=np.r_[op.centre_points[keep], op.centre_points[first]])
    arm_weights = [[(i, 1.0)] for i in keep] + [
        [(index[a], BRIDGE_ARM_SIGNS[k] / b.factor) for k, a in enumerate(b.arms) if a is not None]
        for b in bridges]
    table = channel_gauges(gauges, bridges, model.study.chain.nonlinearity)
    shared = {f.name: getattr(model, f.name) for f in fields(Model) if f.name != "gauges"
              and f.name != "operator"}
    return ChannelModel(**shared, gauges=table, operator=channel_op, base=model,
                        combination=combination, arm_weights=arm_weights)


def channel_gauges(gauges: pd.DataFrame, bridges: list[Bridge] | tuple[Bridge, ...],
                   nonlinearity: str = "") -> pd.DataFrame:
    """The gauge table of the compared channels (see the module docstring); needs no model, so
    ``check`` reads the readings of the channels a test has.

    ``nonlinearity`` is the study-wide setting ([gauges] nonlinearity), which a bridge channel
    does not take.
    """
    if not bridges:
        return gauges
    index = {g: i for i, g in enumerate(gauges["gauge"])}
    in_bridge = {a for b in bridges for a in b.arms if a is not None}
    keep = [i for i, g in enumerate(gauges["gauge"]) if g not in in_bridge]
    first = [index[next(a for a in b.arms if a is not None)] for b in bridges]
    members = [[index[a] for a in b.arms if a is not None] for b in bridges]
    table = pd.concat([gauges.iloc[keep], _bridge_rows(gauges, list(bridges), first, members)],
                      ignore_index=True)
    if "nonlinearity" not in gauges and not nonlinearity:
        table = table.drop(columns="nonlinearity")  # nothing to switch off
    elif "nonlinearity" not in gauges:
        table["nonlinearity"] = table["nonlinearity"].fillna("")  # the study-wide setting
    return table


def open_channels(study: Study, file: Path, model: Model) -> Model:
    """Another mesh or input variant read channel by channel like ``model`` (its gauge map's
    gauges located on ``file``, then the same bridges)."""
    base = model.base if isinstance(model, ChannelModel) and model.base is not None else model
    other = open_variant(study, file, base.gauges)
    other.bridges = base.bridges
    return compared_model(other)


def arms_text(bridge: Bridge) -> str:
    """The arm grids of a bridge as ``1:G1 2:G2 ...`` (active arms only)."""
    return " ".join(f"{k + 1}:{a}" for k, a in enumerate(bridge.arms) if a is not None)


def _bridge_rows(gauges: pd.DataFrame, bridges: list[Bridge], first: list[int],
                 members: list[list[int]]) -> pd.DataFrame:
    """One gauge-table row per bridge channel (see the module docstring)."""
    rows = gauges.iloc[first].copy().reset_index(drop=True)
    problems = []
    for j, (b, arms) in enumerate(zip(bridges, members, strict=True)):
        for col in SHARED:
            values = gauges[col].iloc[arms].to_numpy(dtype=float)
            given = np.unique(values[np.isfinite(values)])
            if len(given) > 1 or (len(given) == 1 and np.isnan(values).any()):
                listed = ", ".join(f"'{g}' {v:g}" for g, v in
                                   zip(gauges["gauge"].iloc[arms], values, strict=True))
                problems.append(f"bridge '{b.name}': its arms give {col} {listed}; a bridge is "
                                f"one channel with one {col}: give the same value on every arm "
                                "(or on none)")
            rows.loc[j, col] = given[0] if len(given) else np.nan
        for col in ("position_tol", "angle_tol"):
            values = gauges[col].iloc[arms].to_numpy(dtype=float)
            rows.loc[j, col] = np.nanmax(values) if np.isfinite(values).any() else np.nan
    if problems:
        raise GaugeError(*problems)
    rows["gauge"] = [b.name for b in bridges]
    rows["channel"] = [b.column for b in bridges]
    for col in TEXT_BLANK:
        if col in rows:
            rows[col] = ""
    for col in ("bridge", "arm"):
        if col in rows:
            rows[col] = ""
    if "height" in rows:
        rows["height"] = np.nan
    # a quarter-bridge non-linearity (per gauge or study-wide) is not a bridge's
    rows["nonlinearity"] = "none"
    if any(np.isfinite(b.shunt_gain) for b in bridges) or "shunt_gain" in rows:
        rows["shunt_gain"] = [b.shunt_gain for b in bridges]
    rows["arms"] = [arms_text(b) for b in bridges]
    return rows


def _placement(place: Placement, keep: list[int], first: list[int], members: list[list[int]],
               bridges: list[Bridge]) -> Placement:
    """The channels' placement: the kept gauges', then each bridge at its first arm."""
    table = place.table
    rows = table.iloc[first].copy().reset_index(drop=True)
    rows["gauge"] = [b.name for b in bridges]
    rows["element"] = -1
    rows["cell_type"] = "bridge"
    rows["snap_distance"] = [table["snap_distance"].iloc[m].max() for m in members]
    order = keep + first
    return Placement(table=pd.concat([table.iloc[keep], rows], ignore_index=True),
                     normal=place.normal[order], direction=place.direction[order],
                     centre=place.centre[order])


def bridge_evaluator(model: ChannelModel, j: int,
                     evaluator: Callable[[Model, int], Callable[[NDArray, NDArray], NDArray]]
                     ) -> Callable[[NDArray, NDArray], NDArray]:
    """The readings of channel j with its arms moved and turned together.

    ``evaluator(base, i)`` gives gauge i's readings at offsets (along, across its own grid) and
    angles (about its own normal); the bridge's are those combined with its arms' signs and
    factor, every arm moved by the same offsets and angles in its own frame (as the placement
    band of :func:`~correlate.model_readings.bridges.combine_bridges` moves them).
    """
    assert model.base is not None
    parts = [(w, evaluator(model.base, i)) for i, w in model.arm_weights[j]]

    def evaluate(offsets: NDArray, angles: NDArray) -> NDArray:
        return sum(w * e(offsets, angles) for w, e in parts)

    return evaluate


__all__ = ["ChannelModel", "arms_text", "bridge_evaluator", "channel_gauges", "compared_model",
           "open_channels"]
