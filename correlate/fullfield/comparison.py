"""The full-field comparison of a run: DIC frames against the model at the frames' steps.

Stage: fullfield. In: a :class:`~correlate.comparison.correlation.Correlation` whose study has a
``[fullfield]`` table. Out: a :class:`FullFieldResult`: the point x frame table
(``fullfield.parquet``), the statistics per frame and component (``fullfield_stats.csv``), the
registration and a short summary. Steps, each named: read the frames, register and locate the
distinct points once (:mod:`correlate.fullfield.points`), express both sides in the tangent axes
that follow the DIC's x axis, level the model field with the DIC's strain window
(:mod:`correlate.fullfield.levelling`), and compare (:mod:`correlate.fullfield.statistics`).

Conventions: strains are compared as small strain (Biot strain from the exported
Green-Lagrange, :func:`~correlate.fullfield.strain.small_from_green_lagrange`), tensor shear,
written in microstrain; the difference is measured - levelled model; the equivalent strain is the
von Mises strain of a plane-stress surface with incompressible through-thickness strain (the DIC
convention, common practice) on both sides.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.correlation import Correlation
from correlate.comparison.criteria import allowed_difference
from correlate.comparison.pairing import pair_series
from correlate.core.errors import CorrelateWarning, ReadingsFormatError
from correlate.core.units import LENGTH_UNITS, MICROSTRAIN, percent_off
from correlate.fullfield.levelling import (
    apply_weights,
    grid_filter,
)
from correlate.fullfield.points import (
    PointModel,
    Registration,
    frame_points,
    locate_points,
    region_distance,
)
from correlate.fullfield.scattered import PairFilter, splat_filter
from correlate.fullfield.statistics import blocked_slope, field_metrics, hot_spot
from correlate.fullfield.strain import (
    equivalent_strain,
    in_plane_principal,
    small_from_green_lagrange,
    tensor_in_axes,
)
from correlate.model_readings.evaluate import centre_strain
from correlate.readers.dic_frames import DicFrames, read_frames, read_landmarks

COMPONENTS = ("exx", "eyy", "exy", "e1", "e2", "eeq")
GAUSSIAN_BLOCK = 6.0   # blocks of 6 sigma: the full width of a Gaussian strain window
UNFILTERED_BLOCK = 5.0  # unfiltered: blocks of 5 point spacings (errors still correlate, subsets)


@dataclass(frozen=True)
class FullFieldResult:
    """What the full-field comparison computed; the outputs and the report read it."""

    points: pd.DataFrame         # one row per kept point: point, x, y, z (model axes)
    frames: tuple[pd.DataFrame, ...]   # each frame's rows of fullfield.parquet, in frame order
    stats: pd.DataFrame          # per frame and component (fullfield_stats.csv)
    registration: Registration
    summary: dict[str, Any]
    reference_frame: str

    @property
    def table(self) -> pd.DataFrame:
        """Point x frame, every frame (fullfield.parquet's rows): a copy made on each call."""
        return pd.concat(self.frames, ignore_index=True)

    def frame(self, name: str) -> pd.DataFrame:
        """One frame's rows."""
        return next((t for t in self.frames if str(t["frame"].iloc[0]) == str(name)),
                    self.frames[0].iloc[:0])


def _components(exx: NDArray, eyy: NDArray, exy: NDArray) -> dict[str, NDArray]:
    e1, e2, _ = in_plane_principal(exx, eyy, exy)
    return {"exx": exx, "eyy": eyy, "exy": exy, "e1": e1, "e2": e2,
            "eeq": equivalent_strain(exx, eyy, exy)}


def _measured(frames: DicFrames, rows: NDArray, R: NDArray, pm_rows: NDArray, pm: PointModel,
              measure: str, axes: str) -> tuple[NDArray, NDArray, NDArray]:
    """The exported strains of ``rows`` as small strain in the points' tangent axes."""
    t = frames.table
    E = np.zeros((len(rows), 2, 2))
    E[:, 0, 0] = t["exx"].to_numpy()[rows]
    E[:, 1, 1] = t["eyy"].to_numpy()[rows]
    E[:, 0, 1] = E[:, 1, 0] = t["exy"].to_numpy()[rows]
    ok = np.isfinite(E).all(axis=(1, 2))
    if measure == "green-lagrange" and ok.any():
        E[ok] = small_from_green_lagrange(E[ok])
    E[~ok] = np.nan
    if axes == "tangent":
        return E[:, 0, 0], E[:, 1, 1], E[:, 0, 1]
    T = np.zeros((len(rows), 3, 3))
    T[:, :2, :2] = E
    T = np.einsum("ij,njk,lk->nil", R, T, R)   # camera axes -> model axes
    return tensor_in_axes(T, pm.ex[pm_rows], pm.ey[pm_rows])


def _case_tensors(corr: Correlation, pm: PointModel) -> dict[tuple[str, Any], NDArray]:
    """The model tensor at every kept point for each FE state a frame's step may need."""
    out: dict[tuple[str, Any], NDArray] = {}
    model = corr.model
    for case in corr.study.cases:
        states = pair_series(corr.study, model, case, corr.steps).fe_index \
            if case.is_series else [case.fe_index]
        for fe in states:
            fld = model.case_field(case, fe, pm.operator)
            out[(case.name, fe)] = centre_strain(pm.operator, fld)
    return out


def _step_tensor(corr: Correlation, tensors: dict, row: int) -> NDArray | None:
    total = None
    for case, f in zip(corr.study.cases, corr.steps.factors[row], strict=True):
        if case.is_series:
            weights = pair_series(corr.study, corr.model, case, corr.steps).weights(row)
            if weights is None:
                return None
        else:
            weights = {case.fe_index: float(f)}
        for fe, w in weights.items():
            part = w * tensors[(case.name, fe)]
            total = part if total is None else total + part
    return total


def _levelling(ff: Any, xyz: NDArray, scale: float, *, build: bool = True
               ) -> tuple[Any, float, str]:
    """The levelling weights, the statistics' block size and the rule in words. Without
    ``build`` (frames with their own points, levelled one by one) no weights are made."""
    from scipy.spatial import cKDTree

    size = None if ff.filter_size is None else ff.filter_size * scale
    if size is None:
        tree = cKDTree(xyz)
        h = float(np.median(tree.query(xyz, k=2)[0][:, 1])) if len(xyz) > 1 else 1.0
        return None, UNFILTERED_BLOCK * h, "none (the model compared point by point)"
    gaussian = ff.filter_kind == "gaussian"
    if not build:
        how = ("each frame over its own points: by normalised convolution on their grid where "
               "they form one, else " + ("on a voxel grid (trilinear splatting)" if gaussian
                                         else "over neighbouring point pairs, by blocks"))
        return (None, GAUSSIAN_BLOCK * size if gaussian else size,
                _rule(ff, gaussian, how))
    W = grid_filter(xyz, sigma=size) if gaussian else grid_filter(xyz, size=size)
    how = "by normalised convolution on the points' own grid"
    if W is None and gaussian:
        W = splat_filter(xyz, size)
        how = ("by normalised convolution on a voxel grid of half a standard deviation "
               "(trilinear splatting; the points form no regular grid)")
    if W is None:
        W = PairFilter(xyz, 3.0 * size, size) if gaussian else PairFilter(xyz, size / 2.0)
        how = "over neighbouring point pairs (applied by blocks)"
    return W, GAUSSIAN_BLOCK * size if gaussian else size, _rule(ff, gaussian, how)


def _rule(ff: Any, gaussian: bool, how: str) -> str:
    if gaussian:
        return (f"Gaussian of standard deviation {ff.filter_size:g} {ff.length_unit}, truncated "
                f"at 3 standard deviations, normalised over the neighbours present ({how})")
    return f"mean over a disc of diameter {ff.filter_size:g} {ff.length_unit} ({how})"


def _frame_row(corr: Correlation, frame: str, step: float) -> int:
    hit = np.flatnonzero(corr.steps.step == step)
    if not len(hit):
        raise ReadingsFormatError(f"[fullfield] frame '{frame}' belongs to step {step:g}, which "
                                  "the readings do not have; fix the frame's step")
    return int(hit[0])


def _stats(frame: str, step: float, loads: NDArray, names: tuple[str, ...], meas: dict,
           lev: dict, xyz: NDArray, block: float, corr: Correlation) -> list[dict[str, Any]]:
    rows = []
    crit = corr.study.criteria
    for comp in COMPONENTS:
        m, p = meas[comp] * MICROSTRAIN, lev[comp] * MICROSTRAIN
        ok = np.isfinite(m) & np.isfinite(p)
        row: dict[str, Any] = {"frame": frame, "step": step,
                               **{f"load_{n}": v for n, v in zip(names, loads, strict=True)},
                               "component": comp, "points": int(ok.sum())}
        if ok.sum() >= 2 and np.any(p[ok] != 0):
            met = field_metrics(m[ok], p[ok], allowed_difference(p[ok], crit.relative,
                                                                 crit.absolute_ue))
            row.update({"mean_diff_ue": met.mean, "rms_diff_ue": met.rms,
                        "p05_diff_ue": met.p05, "p95_diff_ue": met.p95,
                        "max_abs_diff_ue": met.max_abs, "ccc": met.ccc,
                        "share_within": met.share_within})
            try:
                s = blocked_slope(m[ok], p[ok], xyz[ok], block)
                row.update({"slope_origin": s.slope, "slope_ci_low": s.ci_low,
                            "slope_ci_high": s.ci_high, "blocks": s.n_blocks,
                            "naive_ci_low": s.naive_ci_low, "naive_ci_high": s.naive_ci_high})
            except ValueError:   # StudyError: fewer than two blocks; the interval is undefined
                pass
        rows.append(row)
    return rows


def _hot(frame: str, meas: NDArray, lev: NDArray, xyz: NDArray) -> dict[str, Any]:
    ok = np.isfinite(meas) & np.isfinite(lev)
    if not ok.any():
        return {"frame": frame}
    hm, hp = hot_spot(xyz[ok], meas[ok]), hot_spot(xyz[ok], lev[ok])
    return {"frame": frame, "measured_ue": hm.value * MICROSTRAIN,
            "measured_at": np.asarray(hm.point).tolist(), "model_ue": hp.value * MICROSTRAIN,
            "model_at": np.asarray(hp.point).tolist(),
            "distance": float(np.linalg.norm(np.asarray(hm.point) - np.asarray(hp.point)))}


def correlate_fullfield(corr: Correlation) -> FullFieldResult:
    """Compare every DIC frame of the study with the model (see the module docstring)."""
    ff = corr.study.fullfield
    assert ff is not None
    scale = LENGTH_UNITS[ff.length_unit] / LENGTH_UNITS[corr.study.length_unit]
    frames = read_frames(ff)
    landmarks = read_landmarks(ff.landmarks) if ff.landmarks is not None else None
    t = frames.table
    dic = t[["x", "y", "z"]].to_numpy(dtype=float)
    code, names = pd.factorize(t["frame"].to_numpy())
    order = np.argsort(code, kind="stable")          # the rows of each frame, once
    bounds = np.searchsorted(code[order], np.arange(len(names) + 1))
    where = {str(name): order[bounds[i]:bounds[i + 1]] for i, name in enumerate(names)}
    distinct, inverse = frame_points(dic, list(where.values()))
    reg, pm = locate_points(distinct * scale, ff, corr.model.locator, landmarks, scale=scale)
    slot = np.full(len(distinct), -1)
    slot[pm.kept] = np.arange(len(pm.kept))
    tensors = _case_tensors(corr, pm)
    # frames that share their points are levelled over all kept points with one operator;
    # frames with their own point sets over their own points (cost per frame ~ its points)
    shared = len(distinct) <= max((len(r) for r in where.values()), default=0)
    W, block, rule = _levelling(ff, pm.position, scale, build=shared)
    R = reg.matrix[:3, :3]
    parts: list[pd.DataFrame] = []
    stats, hots = [], []
    emptied: list[str] = []   # frames whose every point was dropped
    lead = ["frame", "step", "point", "x", "y", "z"]
    rim = 0
    last: tuple[NDArray, NDArray] | None = None      # the previous frame's points and mask
    for frame, step in zip(frames.frames, frames.steps, strict=True):
        rows = where.get(str(frame), np.zeros(0, dtype=np.intp))
        own = slot[inverse[rows]]
        own = own[own >= 0]    # the frame's points on the model, its region's rim included
        if ff.edge > 0:   # the region's boundary: of this frame's own points
            if last is not None and np.array_equal(last[0], inverse[rows]):
                inside = last[1]                     # the same points as the frame before
            else:
                inside = region_distance(dic[rows, :2]) >= ff.edge
                last = (inverse[rows], inside)
            rim = max(rim, int((~inside).sum()))
            rows = rows[inside]
        rows = rows[slot[inverse[rows]] >= 0]
        k = slot[inverse[rows]]
        srow = _frame_row(corr, frame, step)
        T = _step_tensor(corr, tensors, srow)
        if T is None:
            continue
        model = _components(*tensor_in_axes(T, pm.ex, pm.ey))
        # the levelling window sees every kept point, the region's rim too (as with shared
        # points); the rim is dropped from the comparison only
        Wf, sel = (W, slice(None)) if shared else (_levelling(ff, pm.position[own], scale)[0],
                                                   own)
        if ff.filter_size is None:
            level = model
        else:
            stack = apply_weights(Wf, np.column_stack([model[c][sel] for c in
                                                        ("exx", "eyy", "exy")]))
            level = _components(stack[:, 0], stack[:, 1], stack[:, 2])
        meas = _components(*_measured(frames, rows, R, k, pm, ff.measure, ff.axes))
        if shared or ff.filter_size is None:
            lev_k = {c: v[k] for c, v in level.items()}
        else:   # level holds the frame's own points: find each compared point among them
            at = np.searchsorted(own, k, sorter=np.argsort(own))
            lev_k = {c: v[np.argsort(own)[at]] for c, v in level.items()}
        xyz = pm.position[k]
        stats += _stats(frame, step, corr.steps.loads[srow], corr.steps.load_names, meas, lev_k,
                        xyz, block, corr)
        if not len(k):   # every point of the frame dropped: its statistics say so (0 points)
            emptied.append(str(frame))
            continue
        hots.append(_hot(frame, meas["eeq"], lev_k["eeq"], xyz))
        part = {"frame": frame, "step": step, "point": k, "x": pm.position[k, 0],
                "y": pm.position[k, 1], "z": pm.position[k, 2]}
        for c in COMPONENTS:
            part[f"{c}_measured_ue"] = meas[c] * MICROSTRAIN
            part[f"{c}_model_ue"] = model[c][k] * MICROSTRAIN
            part[f"{c}_levelled_ue"] = lev_k[c] * MICROSTRAIN
            part[f"{c}_diff_ue"] = (meas[c] - lev_k[c]) * MICROSTRAIN
        parts.append(pd.DataFrame(part)[lead + [c for c in part if c not in lead]])
    if not parts and emptied:
        raise ReadingsFormatError(
            f"[fullfield]: no DIC point is left to compare in any frame ({reg.n_points} distinct "
            f"points read; {reg.dropped_snap} beyond snap_tol, {reg.dropped_edge} near a part "
            f"edge, up to {rim} per frame near the region's boundary, edge = {ff.edge:g}); check "
            "the registration, the DIC length_unit and edge")
    if not parts:
        raise ReadingsFormatError("[fullfield]: no frame belongs to a step the model covers; "
                                  "check the frames' steps")
    if emptied:
        warnings.warn(f"[fullfield]: frame(s) {', '.join(emptied)} have no point left to compare "
                      "(all dropped near edges or the region's boundary); the other frames are "
                      "compared", CorrelateWarning, stacklevel=2)
    points = pd.DataFrame({"point": np.arange(len(pm.kept)), "x": pm.position[:, 0],
                           "y": pm.position[:, 1], "z": pm.position[:, 2]})
    # the study's frame for the report, unless it has no point left (said above)
    ref = ff.reference_frame if ff.reference_frame in frames.frames and \
        str(ff.reference_frame) not in emptied else _reference(parts)
    notes = unit_warnings(pd.DataFrame(stats), ref, ff.strain_unit)
    for line in notes:
        warnings.warn(line, CorrelateWarning, stacklevel=2)
    summary = {"registration": {"method": reg.method, "matrix": reg.matrix.tolist(),
                                "rotation_deg": reg.rotation_deg,
                                "landmark_rms": reg.landmark_rms, "rms_distance": reg.rms,
                                "p95_distance": reg.p95, "points_read": reg.n_points,
                                "dropped_beyond_snap_tol": reg.dropped_snap,
                                "dropped_near_part_edges": reg.dropped_edge,
                                "dropped_near_region_boundary": rim,
                                "snap_tol": reg.snap_tol, "points_kept": len(pm.kept)},
               "levelling": rule, "block_size": block, "measure": ff.measure,
               "reference_frame": ref, "hot_spots": hots,
               "levelling_effect_ue": _levelling_effect(parts), "warnings": notes}
    return FullFieldResult(points=points, frames=tuple(parts), stats=pd.DataFrame(stats),
                           registration=reg, summary=summary, reference_frame=ref)


def unit_warnings(stats: pd.DataFrame, frame: str, strain_unit: str) -> list[str]:
    """A warning when the frame's measured/model slopes (median over the strain components) are
    about 100 or 1/100: the DIC export or the model's strain array in percent."""
    rows = stats[(stats["frame"].astype(str) == str(frame))
                 & stats["component"].isin(["exx", "eyy", "exy"])]
    slopes = rows["slope_origin"].dropna() if "slope_origin" in rows else pd.Series(dtype=float)
    if slopes.empty:
        return []
    f = float(np.median(np.abs(slopes)))
    said = (f"[fullfield]: at frame {frame} the DIC strains are {f:.3g} x the model's (median "
            "of the components' measured/model slopes)")
    if percent_off(f) == 1:
        return [f"{said}: the DIC export looks like percent read as strain_unit = "
                f"\"{strain_unit}\"; set strain_unit to the export's unit"]
    if percent_off(f) == -1:
        return [f"{said}: one of them looks like percent (the model's strain array is read in "
                f"m/m, the DIC export as strain_unit = \"{strain_unit}\"); check both units"]
    return []


def _reference(parts: list[pd.DataFrame]) -> str:
    """The frame whose model equivalent strain is largest (the highest load, usually)."""
    peak = pd.Series([t["eeq_model_ue"].max() for t in parts],
                     index=[str(t["frame"].iloc[0]) for t in parts])
    return str(peak.idxmax())


def _levelling_effect(parts: list[pd.DataFrame]) -> dict[str, float]:
    """How much levelling changed the model equivalent strain (large: steeper gradients than
    the DIC resolves)."""
    d = pd.concat([(t["eeq_levelled_ue"] - t["eeq_model_ue"]).abs().dropna() for t in parts])
    if d.empty:
        return {"rms": float("nan"), "max": float("nan")}
    return {"rms": float(np.sqrt(np.mean(d**2))), "max": float(d.max())}


__all__ = ["COMPONENTS", "FullFieldResult", "correlate_fullfield"]
