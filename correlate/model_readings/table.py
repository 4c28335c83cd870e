"""The model readings table: what every gauge reads on the model, per case and FE state.

Stage: model readings. In: a prepared :class:`~correlate.model_readings.model.Model`. Out: the
rows of ``model_readings.csv`` (predicted, axial, transverse and centre readings, the placement
band, sensitivities to position and angle, and the displacement checks).
"""

from __future__ import annotations

import warnings
from collections import Counter

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core import progress
from correlate.core.errors import CorrelateWarning
from correlate.core.units import MICROSTRAIN
from correlate.model_readings.bridges import BridgeRows, bridge_rows, combine_bridges
from correlate.model_readings.conventions import convention_warnings
from correlate.model_readings.model import Model, case_rows, case_steps
from correlate.model_readings.operator import GaugeOperator


def _sensitivities(op: GaugeOperator, ind: NDArray) -> tuple[NDArray, NDArray]:
    """Largest |change| per unit offset over the position rows, and d reading / d angle."""
    g = len(op.gauges)
    sens_pos = np.full(g, -np.inf)
    sens_ang = np.full(g, np.nan)
    nominal = ind[op.row_kind == 0]
    off = op.row_offset
    band = op.row_kind == 2
    radius = np.hypot(off[:, 0], off[:, 1])
    pos = np.flatnonzero(band & (off[:, 2] == 0) & (radius > 0))
    gp = op.row_gauge[pos]
    np.maximum.at(sens_pos, gp, np.abs(ind[pos] - nominal[gp]) / radius[pos])
    sens_pos[np.isneginf(sens_pos)] = np.nan
    # the two angle-only rows of a gauge, in row order
    ang = np.flatnonzero(band & (radius == 0) & (off[:, 2] != 0))
    ang = ang[np.argsort(op.row_gauge[ang], kind="stable")]
    ang = ang[np.bincount(op.row_gauge[ang], minlength=g)[op.row_gauge[ang]] == 2]
    first, second = ang[0::2], ang[1::2]
    sens_ang[op.row_gauge[first]] = (ind[second] - ind[first]) / (off[second, 2] - off[first, 2])
    return sens_pos, sens_ang


def band_limits(op: GaugeOperator, indicated: NDArray) -> tuple[NDArray, NDArray]:
    """Lowest and highest reading over each gauge's nominal and band rows.

    ``indicated`` may be (rows,) or (rows, steps): combine cases first, then take the band.
    """
    sel = op.row_kind != 1
    g = len(op.gauges)
    shape = (g,) + indicated.shape[1:]
    low = np.full(shape, np.inf)
    high = np.full(shape, -np.inf)
    np.minimum.at(low, op.row_gauge[sel], indicated[sel])
    np.maximum.at(high, op.row_gauge[sel], indicated[sel])
    return low, high


def _state(layout: GaugeOperator | BridgeRows, rows: dict[str, NDArray]) -> dict[str, NDArray]:
    """One FE state's columns of every gauge (or bridge channel) of a row layout, microstrain."""
    ind = rows["indicated"]
    nominal, point = layout.row_kind == 0, layout.row_kind == 1
    low, high = band_limits(layout, ind)
    sens_pos, sens_ang = _sensitivities(layout, ind)
    state = {
        "predicted_ue": ind[nominal] * MICROSTRAIN,
        "axial_ue": rows["axial"][nominal] * MICROSTRAIN,
        "transverse_ue": rows["transverse"][nominal] * MICROSTRAIN,
        "point_ue": ind[point] * MICROSTRAIN,
        "band_low_ue": low * MICROSTRAIN,
        "band_high_ue": high * MICROSTRAIN,
        "sens_position_ue_per_unit": sens_pos * MICROSTRAIN,
        "sens_angle_ue_per_deg": sens_ang * MICROSTRAIN,
    }
    if "height_indicated" in rows:  # the grid-height correction, where a height is given
        state["height_ue"] = rows["height_indicated"][nominal] * MICROSTRAIN
    if "averaged_indicated" in rows:
        state["mesh_check_ue"] = (rows["averaged_indicated"][nominal] - ind[nominal]) * MICROSTRAIN
    return state


def predict_table(model: Model) -> pd.DataFrame:
    """Model readings of every gauge and case (the content of model_readings.csv)."""
    op = model.operator
    place = op.placement.table
    g = len(place)
    states = [(case, k, t) for case in model.study.cases for k, t in case_steps(model, case)]
    count = Counter(case.name for case, _, _ in states)  # FE states per case
    columns: dict[str, dict[str, NDArray]] = {}  # per case: column, filled state by state
    locations: dict[str, list[str]] = {}           # per case: "point" or "cell", state by state
    combo = combine_bridges(op, list(model.bridges)) if model.bridges else None
    if combo is not None:  # bridge channels follow the gauges, as rows of their own
        place = pd.concat([place, pd.DataFrame({"gauge": combo.gauges, "snap_distance": np.nan,
                                                "element": -1, "cell_type": "bridge"})],
                          ignore_index=True)
        g = len(place)
    for case, fe_index, fe_time in progress.bar(states, desc="evaluating the cases"):
        rows = case_rows(model, case, fe_index)
        state = _state(op, rows)
        if "averaged_indicated" in rows:
            state["rotation_rad"] = rows["rotation"]
        if combo is not None:
            extra = _state(combo, bridge_rows(combo, rows))
            state = {k: np.r_[v, extra.get(k, np.full(len(combo.gauges), np.nan))]
                     for k, v in state.items()}
        if fe_index is not None and case.is_series:
            state["fe_index"] = np.full(len(place), fe_index)
            state["fe_time"] = np.full(len(place), fe_time, dtype=float)
        cols = columns.setdefault(case.name, {})
        where = locations.setdefault(case.name, [])
        k = len(where)  # this state's place among the case's states
        where.append(rows["location"])
        for name, values in state.items():
            if name not in cols:
                cols[name] = np.empty(count[case.name] * g, dtype=values.dtype)
            cols[name][k * g:(k + 1) * g] = values
    # text columns as categories (codes into a few names): a long series has a row per gauge and
    # state, and a million strings would cost more than the numbers
    gauge_names = pd.Index(place["gauge"].astype(str))
    cell_codes, cell_names = pd.factorize(place["cell_type"].astype(str))
    parts = []
    for case_name, cols in columns.items():
        n = count[case_name]
        where, where_names = pd.factorize(pd.Index(locations[case_name]))
        data = {"gauge": pd.Categorical.from_codes(np.tile(np.arange(g), n), gauge_names),
                "case": pd.Categorical.from_codes(np.zeros(n * g, dtype=np.int8), [case_name])}
        for name in ("predicted_ue", "axial_ue", "transverse_ue", "point_ue", "band_low_ue",
                     "band_high_ue"):
            data[name] = cols.pop(name)
        data["snap_distance"] = np.tile(place["snap_distance"].to_numpy(), n)
        data["element"] = np.tile(place["element"].to_numpy(), n)
        data["cell_type"] = pd.Categorical.from_codes(np.tile(cell_codes, n), cell_names)
        data["field_location"] = pd.Categorical.from_codes(np.repeat(where, g), where_names)
        data.update(cols)  # sensitivities, then the optional columns
        parts.append(pd.DataFrame(data, copy=False))
    table = parts[0] if len(parts) == 1 else pd.concat(parts, ignore_index=True)
    _warn_displacement(model, table)
    if model.conventions is None:  # prepare() has warned already
        for line in convention_warnings(model):
            warnings.warn(line, CorrelateWarning, stacklevel=2)
    return table


def _warn_displacement(model: Model, table: pd.DataFrame) -> None:
    if "rotation_rad" in table:
        big = table[table["rotation_rad"] > 0.01]
        if len(big):
            warnings.warn(
                "rotation above 0.01 rad at gauge(s) "
                f"{', '.join(sorted(set(big['gauge'])))}: the small-strain tensor from total "
                "displacement is wrong there; give the solver's strain instead", stacklevel=2,
                category=CorrelateWarning)
    if "mesh_check_ue" in table:
        floor = model.study.criteria.absolute_ue
        coarse = table[table["mesh_check_ue"].abs() > floor]
        if len(coarse):
            warnings.warn(
                f"element and nodal-averaged strain differ by more than {floor:g} microstrain at "
                f"gauge(s) {', '.join(sorted(set(coarse['gauge'])))}: the mesh may be too coarse "
                "there (see mesh_check_ue)", stacklevel=2, category=CorrelateWarning)
