"""Diagnosis of failing gauges: gather the evidence from the model, then try the explanations.

Stage: comparison (diagnosis). In: the correlation arrays and the model. Out: a table of qualified
explanations per failing gauge (see :mod:`correlate.comparison.explanations` for the tests each must pass) and the
global load checks. The model is re-evaluated at moved and turned grids for the position and angle
searches, so those explain a gauge only with the model's own gradients.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.criteria import Criterion, Statuses
from correlate.comparison.explanations import (
    GaugeEvidence,
    diagnose,
    diagnose_loads,
    diagnose_rosette,
)
from correlate.comparison.pairing import Steps
from correlate.comparison.rosettes import rosette_angles, rosette_groups
from correlate.core.errors import CorrelateWarning
from correlate.core.units import MICROSTRAIN
from correlate.mechanics.gauge import indicated_strain
from correlate.model_readings.channels import ChannelModel, bridge_evaluator
from correlate.model_readings.evaluate import centre_strain
from correlate.model_readings.model import Model, case_rows
from correlate.model_readings.operator import build_operator
from correlate.readers.study import Study


def _alternatives(study: Study, model: Model, steps: Steps, rows_by_case: dict, j: int
                  ) -> dict[str, NDArray]:
    op = model.operator
    nominal = np.flatnonzero(op.row_kind == 0)[j]
    kt, nu0 = op.kt[j], op.nu0[j]
    # series cases (matched by load, not superposed) add nothing to these alternatives
    names = [c.name for c in study.cases]
    zero = {"axial": np.zeros(len(op.row_kind)), "transverse": np.zeros(len(op.row_kind))}
    rows_by_case = {c: rows_by_case.get(c, zero) for c in names}
    ax = np.array([rows_by_case[c]["axial"][nominal] for c in names])
    tr = np.array([rows_by_case[c]["transverse"][nominal] for c in names])
    f = steps.factors * MICROSTRAIN
    bridge = isinstance(model, ChannelModel) and model.is_bridge(j)
    out = {} if bridge else {"rotated_90": f @ indicated_strain(tr, ax, kt, nu0)}
    if not (study.kt_corrected and bridge and _arms_differ_in_kt(model, j)):
        # a bridge's combined rows hold its first arm's Kt: exact only when the arms share it
        out["no_kt"] = f @ (indicated_strain(ax, tr, kt, nu0) if study.kt_corrected else ax)
    other = _other_face(study, model, steps, j)
    if other is not None:
        out["other_face"] = other
    if all("averaged_indicated" in rows_by_case[c] for c in names):
        out["nodal_average"] = f @ np.array([rows_by_case[c]["averaged_indicated"][nominal]
                                             for c in names])
    return out


def _arms_differ_in_kt(model: ChannelModel, j: int) -> bool:
    """Whether bridge channel j's arms have different transverse sensitivities or calibration
    Poisson's ratios."""
    assert model.base is not None
    arms = [k for k, _ in model.arm_weights[j]]
    op = model.base.operator
    return bool(np.ptp(op.kt[arms]) > 0 or np.ptp(op.nu0[arms]) > 0)


def _other_face(study: Study, model: Model, steps: Steps, j: int) -> NDArray | None:
    """Readings of shell gauge j as if it were bonded on the other face (per-face arrays only)."""

    face = model.gauges["face"].iloc[j]
    if model.operator.mesh.family != "shell" or face not in ("top", "bottom") or \
            not any(isinstance(c.array, dict) for c in study.cases):
        return None
    mini = model.gauges.iloc[[j]].copy()
    mini["face"] = "bottom" if face == "top" else "top"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", CorrelateWarning)
        op = build_operator(model.operator.mesh, mini, snap_tol=np.inf, band=False,
                            calibration_poisson=study.calibration_poisson,
                            grid_points=study.grid_points, locator=model.locator, strict=False)
    key = "axial" if study.kt_corrected else "indicated"
    nominal = op.row_kind == 0
    R = np.array([0.0 if c.is_series else
                  case_rows(model, c, c.fe_index, operator=op)[key][nominal][0]
                  for c in study.cases])
    return steps.factors @ R * MICROSTRAIN



def _evaluator(study: Study, model: Model, steps: Steps, j: int
               ) -> Callable[[NDArray, NDArray], NDArray]:
    """Readings of gauge j moved by (along, across) offsets and turned by angles, per step."""

    op = model.operator
    place = op.placement
    g = model.gauges.iloc[[j]]
    centre, d, n = place.centre[j], place.direction[j], place.normal[j]
    t = np.cross(n, d)

    def evaluate(offsets: NDArray, angles: NDArray) -> NDArray:
        with warnings.catch_warnings():
            # moved grids on curved faces are projected into the surface: expected in a search
            warnings.simplefilter("ignore", CorrelateWarning)
            return _evaluate(offsets, angles)

    def _evaluate(offsets: NDArray, angles: NDArray) -> NDArray:
        offsets = np.atleast_2d(np.asarray(offsets, dtype=float))
        angles = np.atleast_1d(np.asarray(angles, dtype=float))
        k = len(offsets)
        rad = np.radians(angles)[:, None]
        pos = centre + offsets[:, :1] * d + offsets[:, 1:2] * t
        dirs = np.cos(rad) * d + np.sin(rad) * t
        mini = pd.concat([g] * k, ignore_index=True)
        mini["gauge"] = [f"{g['gauge'].iloc[0]}#{i}" for i in range(k)]
        mini[["x", "y", "z"]] = pos
        mini[["dir_x", "dir_y", "dir_z"]] = dirs
        mini[["normal_x", "normal_y", "normal_z"]] = n
        mini_op = build_operator(op.mesh, mini, snap_tol=np.inf, band=False,
                                 calibration_poisson=study.calibration_poisson,
                                 grid_points=study.grid_points, locator=model.locator,
                                 strict=False)
        key = "axial" if study.kt_corrected else "indicated"
        nominal = mini_op.row_kind == 0
        R = np.stack([np.zeros(int(nominal.sum())) if c.is_series else
                      case_rows(model, c, c.fe_index, operator=mini_op)[key][nominal]
                      for c in study.cases], axis=1)
        return R @ steps.factors.T * MICROSTRAIN   # (k, s)

    return evaluate


def _moved(study: Study, model: Model, steps: Steps, j: int
           ) -> Callable[[NDArray, NDArray], NDArray]:
    """:func:`_evaluator` of channel j; a bridge's arms are moved and turned together."""
    if isinstance(model, ChannelModel) and model.is_bridge(j):
        return bridge_evaluator(model, j, lambda base, i: _evaluator(study, base, steps, i))
    return _evaluator(study, model, steps, j)


def _neighbours_pass(model: Model, j: int, passing: NDArray, healthy: NDArray) -> bool | None:
    centres = model.operator.placement.centre
    others = np.flatnonzero(healthy & (np.arange(len(passing)) != j))
    if not len(others):
        return None
    dist = np.linalg.norm(centres[others] - centres[j], axis=1)
    near = others[np.argsort(dist)[:3]]
    return bool(passing[near].mean() >= 0.5)


def diagnose_failures(study: Study, model: Model, steps: Steps, names: list[str], measured: NDArray,
                      predicted: NDArray, st: Statuses, rows_by_case: dict, contributions: NDArray,
                      per_gauge: pd.DataFrame) -> pd.DataFrame:
    """Explanations for every failing gauge (empty table when none qualifies)."""

    ev = st.evaluated
    failing = ((st.status == "fail") & ev).any(axis=0)
    healthy = ev.any(axis=0)
    passing = healthy & ~failing
    cols = ["gauge", "explanation", "detail", "rms_before_ue", "rms_after_ue", "plausible",
            "parameter"]
    if not failing.any():
        return pd.DataFrame(columns=cols)
    crit = Criterion.of(study.criteria)
    gauges = model.gauges
    evidence = []
    for j in np.flatnonzero(failing):
        m = np.where(ev[:, j], measured[:, j], np.nan)
        ptol = gauges["position_tol"].iloc[j]
        atol = gauges["angle_tol"].iloc[j]
        evidence.append(GaugeEvidence(
            gauge=names[j], measured=m, predicted=predicted[:, j], active=steps.active & ev[:, j],
            alternatives=_alternatives(study, model, steps, rows_by_case, j),
            contributions=contributions[:, j, :],
            evaluate_at=_moved(study, model, steps, j),
            position_tol=float(study.position_tol if np.isnan(ptol) else ptol),
            angle_tol=float(study.angle_tol if np.isnan(atol) else atol),
            neighbours_pass=_neighbours_pass(model, j, passing, healthy),
            rosette=gauges["rosette"].iloc[j] or None))
    table = diagnose(evidence, crit)
    return table[cols] if len(table) else pd.DataFrame(columns=cols)


INSTALLATION = ("channels swapped", "grid rotated 90 degrees", "rosette grids permuted",
                "rosette mirrored")
IMPLAUSIBLE = ("position offset", "grid angle")  # installation faults when beyond tolerance


def installation_faults(diag: pd.DataFrame) -> list[tuple[str, str]]:
    """(gauge, explanation) for diagnoses that say the gauge is not where or how the map says."""
    out = []
    for row in diag.itertuples():
        if row.explanation in INSTALLATION or (row.explanation in IMPLAUSIBLE
                                               and row.plausible is False):
            out.append((str(row.gauge), f"{row.explanation}, {row.detail}"))
    return out


def load_checks(study: Study, steps: Steps, measured: NDArray, st: Statuses,
                rows_by_case: dict, op: Any) -> dict[str, Any]:
    """Global checks: a factor per load column, swapped or sign-reversed load columns."""

    ev = st.evaluated
    nominal = op.row_kind == 0
    entries = [ld for ld in study.loads if ld.case in rows_by_case]
    if not entries:
        return {"reason": "no superposed load cases"}
    contrib = np.stack([
        (steps.loads[:, steps.load_names.index(ld.column)] / ld.reference)[:, None]
        * (rows_by_case[ld.case]["axial" if study.kt_corrected else "indicated"][nominal]
           * MICROSTRAIN)[None, :] for ld in entries], axis=2)                       # (s, g, L)
    loads = np.stack([steps.loads[:, steps.load_names.index(ld.column)] for ld in entries], axis=1)
    crit = Criterion.of(study.criteria)
    m = np.where(ev, measured, np.nan)
    out = diagnose_loads(m, contrib, steps.active, [f"{ld.column} -> {ld.case}" for ld in entries],
                         crit, loads=loads)
    out["note"] = ("measured = sum_j k_j x (contribution of load j); k_j far from the overall ratio "
                   "points at that load path or its load cell")
    return out


def rosette_diagnoses(study: Study, model: Model, steps: Steps, measured: NDArray, st: Statuses,
                      predicted: NDArray) -> pd.DataFrame:
    """Permuted or mirrored grids for every rosette with a failing grid."""

    crit = Criterion.of(study.criteria)
    ev = st.evaluated
    failing = ((st.status == "fail") & ev).any(axis=0)
    gauges = model.gauges
    op = model.operator
    place = op.placement
    parts = []
    angles = rosette_angles(model, gauges)
    for rid, idx in rosette_groups(gauges).items():
        if not failing[idx].any():
            continue
        # mirrored layout: grid i at -theta_i instead of +theta_i (centre tensor, step factors)
        n, dA = place.normal[idx[0]], place.direction[idx[0]]
        th = -np.radians(angles[rid])
        dirs = np.cos(th)[:, None] * dA + np.sin(th)[:, None] * np.cross(n, dA)
        trans = np.cross(n, dirs)
        T = np.zeros((len(steps.step), len(idx), 3, 3))
        for k, case in enumerate(study.cases):
            if case.is_series:
                continue
            fld = model.case_field(case, case.fe_index)
            Tc = centre_strain(op, fld)[idx]
            T += steps.factors[:, k, None, None, None] * Tc[None]
        ea = np.einsum("gi,sgij,gj->sg", dirs, T, dirs)
        et = np.einsum("gi,sgij,gj->sg", trans, T, trans)
        kt, nu0 = op.kt[idx], op.nu0[idx]
        mirrored = indicated_strain(ea, et, kt, nu0) * MICROSTRAIN
        active = steps.active & ev[:, idx].all(axis=1)
        grids = [gauges["gauge"].iloc[i] for i in idx]
        parts.append(diagnose_rosette(rid, grids, measured[:, idx], predicted[:, idx], mirrored,
                                      active, crit))
    parts = [p for p in parts if len(p)]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame()
