"""Rosette outputs: reduce each rosette, measured and predicted, at every step.

Stage: comparison (rosettes). In: the gauge map's rosette groups, the located grid directions and
normals, the tared measured readings and the predicted grid-averaged true strains. Out: the rows of
rosettes.csv. The frame: x along grid A in the tangent plane, z along the outward normal of the
gauged face; angles counterclockwise about that normal seen from outside. The measured side is
corrected for transverse sensitivity by the joint solve over the group's grids; the predicted side
reduces the true grid strains (no transverse sensitivity).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.pairing import Steps
from correlate.core.names import ROSETTES_COLUMNS
from correlate.mechanics.rosette import check_angles, grid_angles, reduce_rosette
from correlate.readers.study import Study

NOISE_UE = 10.0  # below this e1 - e2 the principal direction is not reported (common practice)


def rosette_groups(gauges: pd.DataFrame) -> dict[str, list[int]]:
    """Row indices of each rosette's grids, grid A first (the `grid` column, if given, orders)."""
    groups: dict[str, list[int]] = {}
    grids = gauges["rosette"] != ""
    if not grids.any():   # no rosette: skip pandas' grouping of nothing (1 ms a call)
        return groups
    for rid, grp in gauges[grids].groupby("rosette", sort=False):
        idx = list(grp.index)
        if (grp["grid"] != "").all():
            idx = list(grp.sort_values("grid", kind="stable").index)
        groups[str(rid)] = idx
    return groups


def rosette_angles(model, gauges: pd.DataFrame) -> dict[str, NDArray[np.float64]]:
    """Grid angles of each rosette from grid A, counterclockwise about the outward normal."""
    place = model.operator.placement
    out = {}
    for rid, idx in rosette_groups(gauges).items():
        angles = grid_angles(place.direction[idx], place.normal[idx[0]])
        out[rid] = check_angles(angles, name=rid)
    return out


def rosette_grids(study: Study, model, gauges: pd.DataFrame
                  ) -> list[tuple[str, NDArray, list[int], NDArray | None, NDArray]]:
    """Per rosette: id, grid angles, the grids' rows, their Kt (None when the readings are
    already corrected) and their calibration Poisson's ratio."""
    out = []
    for rid, angles in rosette_angles(model, gauges).items():
        idx = rosette_groups(gauges)[rid]
        kt = None if study.kt_corrected else gauges["kt"].to_numpy(dtype=float)[idx]
        nu0 = gauges["nu0"].fillna(study.calibration_poisson).to_numpy(dtype=float)[idx]
        out.append((rid, angles, idx, kt, nu0))
    return out


def rosette_table(study: Study, model, gauges: pd.DataFrame, steps: Steps,
                  measured: NDArray, predicted_axial: NDArray, evaluated: NDArray) -> pd.DataFrame:
    """Rows of rosettes.csv for every rosette and active step, measured and predicted."""
    mat = study.material
    E = mat.E * 1e-6 if mat else None      # readings are microstrain: stress = E * ue * 1e-6
    nu = mat.nu if mat else None
    parts = []
    for rid, angles, idx, kt, nu0 in rosette_grids(study, model, gauges):
        active = np.flatnonzero(steps.active)
        for source, data, use_kt in (("measured", measured, kt), ("predicted", predicted_axial,
                                                                   None)):
            rows = active
            if source == "measured":
                rows = active[evaluated[np.ix_(active, idx)].all(axis=1)]
            if not len(rows):
                continue
            df = reduce_rosette(data[np.ix_(rows, idx)], angles, kt=use_kt, nu0=nu0, E=E, nu=nu,
                                noise=NOISE_UE, name=rid)
            df = df.rename(columns={c: f"{c}_ue" for c in ("ex", "ey", "gxy", "e1", "e2",
                                                           "shear_max", "residual")})
            df.insert(0, "source", source)
            df.insert(0, "step", steps.step[rows])
            df.insert(0, "rosette", rid)
            df["sequence"] = steps.sequence[rows]
            df["note"] = np.where(np.isnan(df["angle_deg"]),
                                  f"e1 - e2 below {NOISE_UE:g} ue: direction not defined", "")
            parts.append(df)
    cols = list(ROSETTES_COLUMNS) + ["sequence"]
    if not parts:
        return pd.DataFrame(columns=cols)
    out = pd.concat(parts, ignore_index=True)
    return out[cols].sort_values(["rosette", "sequence", "step", "source"], kind="stable",
                                 ignore_index=True)
