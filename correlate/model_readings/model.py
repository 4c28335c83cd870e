"""Pipeline: wire the stages for `check`, `predict` and `run`. No maths here.

In: a :class:`~correlate.readers.study.Study`. Out: tables and records that the command line writes.
"""

from __future__ import annotations

import warnings
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core import progress
from correlate.core.errors import CorrelateError, ModelError
from correlate.core.units import MICROSTRAIN
from correlate.model_readings.locator import Locator
from correlate.model_readings.operator import (
    GaugeOperator,
    build_operator,
    evaluate_rows,
    gauge_locator,
)
from correlate.readers.fields import read_field
from correlate.readers.gauges import read_gauges
from correlate.readers.model import ModelSource, open_model
from correlate.readers.study import Case, Study


@dataclass
class Model:
    """The opened model files of a study and its gauge operator."""

    study: Study
    sources: dict[Path, ModelSource]
    gauges: pd.DataFrame
    operator: GaugeOperator
    locator: Locator
    warnings: list[str] = field(default_factory=list)
    fields: dict[tuple[str, int | None], Any] = field(default_factory=dict)

    def case_field(self, case: Case, fe_index: int | None,
                   operator: GaugeOperator | None = None) -> Any:
        """The case's field in the package convention, read once.

        Given an operator, a step of a time series reads only the rows that operator's gauges
        touch and is not kept (a long series is never held in memory at once); without one the
        whole field is read.
        """
        src = self.source(case)
        if src.times and operator is not None:
            from correlate.model_readings.operator import touched_rows

            return read_field(src, case, self.study.materials, fe_index,
                              rows=touched_rows(operator))
        key = (case.name, fe_index)
        if key not in self.fields:
            self.fields[key] = read_field(src, case, self.study.materials, fe_index)
        return self.fields[key]

    def source(self, case: Case) -> ModelSource:
        return self.sources[case.file or self.study.model_file]


def open_sources(study: Study) -> dict[Path, ModelSource]:
    """Open the model file and any per-case files; they must share one mesh."""
    sources: dict[Path, ModelSource] = {}
    for path in [study.model_file] + [c.file for c in study.cases if c.file is not None]:
        if path not in sources:
            sources[path] = open_model(path)
    main = sources[study.model_file].mesh
    for path, src in sources.items():
        if len(src.mesh.points) != len(main.points) or src.mesh.n_cells != main.n_cells:
            raise ModelError(f"{path.name}: its mesh ({len(src.mesh.points)} points, "
                             f"{src.mesh.n_cells} cells) differs from {study.model_file.name} "
                             f"({len(main.points)} points, {main.n_cells} cells); every case must "
                             "be on the same mesh")
    return sources


def prepare(study: Study) -> Model:
    """Read the gauge map and the model, locate every gauge, build the operator."""
    with progress.step("reading the model"):
        sources = open_sources(study)
    with progress.step("reading the gauge map"):
        gauges = read_gauges(study.gauges_file)
    mesh = sources[study.model_file].mesh
    if mesh.family == "plane" and study.plane is None:
        raise ModelError(f"{study.model_file.name} is a 2D plane model (all z = 0); say "
                         "[model] plane = \"stress\" or \"strain\" in the study")
    snap_tol = study.snap_tol
    if snap_tol is None:  # neither snap_tol nor position_tol given: 1 % of the model size
        snap_tol = 0.01 * float(np.linalg.norm(np.diff(mesh.bounds, axis=0)))
    thickness = study.model_info.get("thickness")
    if mesh.family == "shell" and isinstance(thickness, int | float) and thickness > 0:
        # a gauge on a shell face sits half the thickness from the mid-surface
        snap_tol = snap_tol + thickness / 2
    with progress.step(f"finding the model surface near {len(gauges)} gauges"):
        locator = gauge_locator(mesh, gauges, snap_tol=snap_tol, position_tol=study.position_tol,
                                band=study.band)
    with progress.step(f"locating {len(gauges)} gauges and building their operator"):
        op = build_operator(mesh, gauges, position_tol=study.position_tol,
                            angle_tol=study.angle_tol, snap_tol=snap_tol,
                            calibration_poisson=study.calibration_poisson,
                            grid_points=study.grid_points, band=study.band, locator=locator,
                            length_unit=study.length_unit)
    return Model(study=study, sources=sources, gauges=gauges, operator=op, locator=locator)


def case_steps(model: Model, case: Case) -> list[tuple[int | None, float | None]]:
    """The (fe_index, fe_time) states a case stands for: one, or every step of a series."""
    src = model.source(case)
    ti = case.time_index
    if ti == "all" or isinstance(ti, tuple):
        if not src.times:
            raise ModelError(f"case '{case.name}': time_index = {ti!r} needs a time series, but "
                             f"{src.path.name} holds a single state")
        first, last = (0, len(src.times) - 1) if ti == "all" else ti
        if not 0 <= first <= last < len(src.times):
            raise ModelError(f"case '{case.name}': time_index {ti!r} is outside the series "
                             f"(steps 0 to {len(src.times) - 1})")
        return [(k, src.times[k]) for k in range(first, last + 1)]
    if isinstance(ti, int):
        return [(ti, src.times[ti] if src.times and ti < len(src.times) else None)]
    return [(None, None)]


def case_rows(model: Model, case: Case, fe_index: int | None,
              operator: GaugeOperator | None = None) -> dict[str, NDArray[np.float64]]:
    """Operator rows of one case (one FE state), in m/m."""
    fld = model.case_field(case, fe_index, operator or model.operator)
    rows = evaluate_rows(operator or model.operator, fld)
    if operator is not None:
        return rows
    if fld.kind == "displacement":
        if fld.index is not None:  # the checks average over whole cells: read the whole step
            fld = model.case_field(case, fe_index)
        rows.update(_displacement_checks(model, case, fld))
    rows["location"] = fld.location  # type: ignore[assignment]
    return rows


def _displacement_checks(model: Model, case: Case, fld: Any) -> dict[str, Any]:
    """Nodal-averaged gradient reading (mesh check) and rotation at each gauge centre."""
    from correlate.model_readings.gradients import nodal_strain, rotation_at_points

    op = model.operator
    nodal = nodal_strain(op, fld.values)
    avg = evaluate_rows(op, type(fld)(case=fld.case, kind="strain", location="point", data=nodal,
                                      source_kind="displacement", array=fld.array))
    return {"averaged_indicated": avg["indicated"], "rotation": rotation_at_points(op, fld.values)}


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


def predict_table(model: Model) -> pd.DataFrame:
    """Model readings of every gauge and case (the content of model_readings.csv)."""
    op = model.operator
    place = op.placement.table
    nominal, point = op.row_kind == 0, op.row_kind == 1
    g = len(place)
    states = [(case, k, t) for case in model.study.cases for k, t in case_steps(model, case)]
    count = Counter(case.name for case, _, _ in states)  # FE states per case
    columns: dict[str, dict[str, NDArray]] = {}  # per case: column, filled state by state
    locations: dict[str, list[str]] = {}           # per case: "point" or "cell", state by state
    for case, fe_index, fe_time in progress.bar(states, desc="evaluating the cases"):
        rows = case_rows(model, case, fe_index)
        ind = rows["indicated"]
        low, high = band_limits(op, ind)
        sens_pos, sens_ang = _sensitivities(op, ind)
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
        if "averaged_indicated" in rows:
            state["mesh_check_ue"] = (rows["averaged_indicated"][nominal] - ind[nominal]) * MICROSTRAIN
            state["rotation_rad"] = rows["rotation"]
        if fe_index is not None and (case.time_index == "all" or isinstance(case.time_index, tuple)):
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
    for line in convention_warnings(model):
        warnings.warn(line, _warning(), stacklevel=2)
    return table


def _warn_displacement(model: Model, table: pd.DataFrame) -> None:
    if "rotation_rad" in table:
        big = table[table["rotation_rad"] > 0.01]
        if len(big):
            warnings.warn(
                "rotation above 0.01 rad at gauge(s) "
                f"{', '.join(sorted(set(big['gauge'])))}: the small-strain tensor from total "
                "displacement is wrong there; give the solver's strain instead", stacklevel=2,
                category=_warning())
    if "mesh_check_ue" in table:
        floor = model.study.criteria.absolute_ue
        coarse = table[table["mesh_check_ue"].abs() > floor]
        if len(coarse):
            warnings.warn(
                f"element and nodal-averaged strain differ by more than {floor:g} microstrain at "
                f"gauge(s) {', '.join(sorted(set(coarse['gauge'])))}: the mesh may be too coarse "
                "there (see mesh_check_ue)", stacklevel=2, category=_warning())


def _warning() -> type[Warning]:
    from correlate.core.errors import CorrelateWarning

    return CorrelateWarning


def check_study(study: Study) -> tuple[Model, pd.DataFrame, list[str]]:
    """Read everything; return the model, the placement table and the warnings raised."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        model = prepare(study)
        problems = []
        for case in study.cases:
            try:
                for fe_index, _ in case_steps(model, case)[:1]:
                    case_rows(model, case, fe_index)
            except CorrelateError as exc:
                problems.extend(exc.problems)
        if study.readings_file is not None:
            from correlate.comparison.correlation import read_test_data

            try:
                read_test_data(study, model.gauges)
            except CorrelateError as exc:
                problems.extend(exc.problems)
        if problems:
            raise CorrelateError(*problems)
        notes = convention_warnings(model)
    return model, model.operator.placement.table, [str(w.message) for w in caught] + notes


def convention_warnings(model: Model) -> list[str]:
    """Warnings from the order/convention checks (traction-free surface, Hooke against stress)."""
    from correlate.mechanics.tensors import from_voigt, strain_from_stress
    from correlate.model_readings.conventions import convention_evidence, describe
    from correlate.model_readings.operator import _interpolation
    from correlate.readers.model import find_array

    study, op = model.study, model.operator
    mat = study.material
    if op.mesh.family != "solid" or mat is None:
        return []
    surface = (op.placement.table["mount"] == "surface").to_numpy()
    point_rows = np.flatnonzero(op.row_kind == 1)
    pts = op.weights[point_rows].indices
    out = []
    for case in study.cases:
        if case.kind != "strain" or isinstance(case.array, dict):
            continue
        fe_index = case.time_index if isinstance(case.time_index, int) else None
        if case.time_index == "all" or isinstance(case.time_index, tuple):
            fe_index = case_steps(model, case)[0][0]
        src = model.source(case)
        location, raw = find_array(src, case.array, fe_index, case=case.name)
        if raw.shape[1] != 6:
            continue

        def at_gauges(values: NDArray, location: str = location) -> NDArray:
            if location == "cell":
                return values[op.cell[pts]]
            (N,) = _interpolation(op, gradient=False)
            return (N @ values)[pts]

        raw_g = at_gauges(raw)[surface]
        stress_strain = None
        if case.check_stress:
            s_loc, s_raw = find_array(src, case.check_stress, fe_index, case=case.name)
            if s_raw.shape[1] == 6:
                sig = from_voigt(at_gauges(s_raw, s_loc)[surface], DEFAULT_STRESS, shear="tensor")
                stress_strain = strain_from_stress(sig, mat.E, mat.nu)
        ev = convention_evidence(raw_g, case.components, case.shear, op.placement.normal[surface],
                                 op.placement.direction[surface], mat.nu,
                                 stress_strain=stress_strain)
        line = describe(case.name, ev)
        if line:
            out.append(line)
    return out


DEFAULT_STRESS = ("xx", "yy", "zz", "xy", "yz", "xz")
