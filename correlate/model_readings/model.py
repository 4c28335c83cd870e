"""The model of a study: its result files opened, every gauge located, and each case's readings.

Stage: model readings. In: a :class:`~correlate.readers.study.Study`. Out: a :class:`Model` (the
opened sources, the gauge map and its operator) and the operator rows of any case and FE state.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core import progress
from correlate.core.errors import (
    CorrelateError,
    CorrelateWarning,
    GaugeError,
    ModelError,
)
from correlate.core.units import FULL_STRAIN
from correlate.model_readings.conventions import convention_warnings
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.gradients import nodal_strain, rotation_at_points
from correlate.model_readings.height import height_strain, raised_rows
from correlate.model_readings.locator import Locator
from correlate.model_readings.operator import GaugeOperator, build_operator, gauge_locator
from correlate.model_readings.thermal_strain import (
    mechanical_rows,
    temperature_at_points,
    warn_unused_temperature,
)
from correlate.readers.bridge_map import Bridge, bridges_of
from correlate.readers.fields import read_field
from correlate.readers.gauges import read_gauges
from correlate.readers.model import Mesh, ModelSource, find_array, open_model
from correlate.readers.named_arrays import arrays_of_cases
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
    conventions: list[str] | None = None   # the convention checks' findings, once made
    bridges: tuple[Bridge, ...] = ()        # bridge channels of the gauge map and [[bridge]]

    def case_field(self, case: Case, fe_index: int | None,
                   operator: GaugeOperator | None = None) -> Any:
        """The case's field in the package convention, read once.

        Given an operator, a step of a time series reads only the rows that operator's gauges
        touch and is not kept (a long series is never held in memory at once); without one the
        whole field is read.
        """
        src = self.source(case)
        if src.times and operator is not None:
            touched = operator.touched()
            return read_field(src, case, self.study.materials, fe_index,
                              rows={"point": touched.point, "cell": touched.cell})
        key = (case.name, fe_index)
        if key not in self.fields:
            self.fields[key] = read_field(src, case, self.study.materials, fe_index)
        return self.fields[key]

    def source(self, case: Case) -> ModelSource:
        return self.sources[case.file or self.study.model_file]

    def channel_rows(self, case: Case, fe_index: int | None
                     ) -> dict[str, NDArray[np.float64]] | None:
        """A case's rows when the compared channels are not the operator's gauges (a bridge is
        a combination of its arms: :mod:`correlate.model_readings.channels`); None here."""
        return None


def open_sources(study: Study) -> dict[Path, ModelSource]:
    """Open the model file and any per-case files; they must share one mesh.

    Each file is read for its geometry and the arrays its cases name (a VTU or static XDMF: the
    other arrays are listed, not read).
    """
    sources: dict[Path, ModelSource] = {}
    named = arrays_of_cases(study.cases, study.model_file)
    for path in [study.model_file] + [c.file for c in study.cases if c.file is not None]:
        if path not in sources:
            sources[path] = open_model(path, named[path])
    main = sources[study.model_file].mesh
    for path, src in sources.items():
        if len(src.mesh.points) != len(main.points) or src.mesh.n_cells != main.n_cells:
            raise ModelError(f"{path.name}: its mesh ({len(src.mesh.points)} points, "
                             f"{src.mesh.n_cells} cells) differs from {study.model_file.name} "
                             f"({len(main.points)} points, {main.n_cells} cells); every case must "
                             "be on the same mesh")
    return sources


def prepare(study: Study) -> Model:
    """Read the gauge map and the model, locate every gauge, build the operator.

    The steps :func:`open_sources`, :func:`read_gauges`, :func:`settle_family` and
    :func:`locate` in turn; then the convention checks, whose findings are warnings
    (:func:`~correlate.model_readings.conventions.convention_warnings`).
    """
    with progress.step("reading the model"):
        sources = open_sources(study)
    with progress.step("reading the gauge map"):
        gauges = read_gauges(study.gauges_file)
        bridges = bridges_of(gauges, study.bridge_tables, source=study.gauges_file.name,
                             study=study.path.name)
    settle_family(study, sources, gauges)
    model = locate(study, sources, gauges)
    model.bridges = bridges
    with progress.step("checking the model's conventions"):
        model.conventions = convention_warnings(model)
    for line in model.conventions:
        warnings.warn(line, CorrelateWarning, stacklevel=2)
    warn_unused_temperature(study.cases, sources, study.model_file)
    return model


def model_family(study: Study, mesh: Mesh, gauges: pd.DataFrame | None) -> str:
    """Solid, shell or plane: the mesh's cells and, for a flat 2D mesh in z = 0, what the study says.

    A flat mesh of 2D cells in the plane z = 0 is a shell when the study says so in any way (a
    case with top and bottom arrays, a gauge map ``face`` column with values, a ``[model]
    thickness``, or ``[model] kind = "shell"``) and a 2D plane model only when it says
    ``[model] plane = ...`` (or ``kind = "plane"``); saying neither, or both, is refused.
    """
    name = study.model_file.name
    kind = study.model_info.get("kind")
    types = ", ".join(sorted({t for t, _ in mesh.blocks}))
    if mesh.family == "solid":
        if kind in ("shell", "plane"):
            raise ModelError(f"{name}: [model] kind = \"{kind}\", but the model holds solid cells "
                             f"({types}); remove kind or give the {kind} model's file")
        return "solid"
    if kind == "solid":
        raise ModelError(f"{name}: [model] kind = \"solid\", but the model holds only 2D cells "
                         f"({types}); say kind = \"shell\" (or \"plane\" for a 2D plane model)")
    shell = _shell_evidence(study, gauges)
    if mesh.family == "shell":   # 2D cells off the plane z = 0: a shell in space
        if kind == "plane":
            raise ModelError(f"{name}: [model] kind = \"plane\", but the mesh does not lie in the "
                             "plane z = 0 (a 2D plane model must); say kind = \"shell\"")
        return "shell"
    plane_said = study.plane is not None or kind == "plane"
    if plane_said and (shell or kind == "shell"):
        said = f"plane = \"{study.plane}\"" if study.plane is not None else "kind = \"plane\""
        why = shell[0] if shell else "kind = \"shell\""
        raise ModelError(f"{name}: the study says [model] {said} (a 2D plane model) but also "
                         f"{why} (a shell); keep one: [model] plane = ... for a plane model, or "
                         "[model] kind = \"shell\" without plane for a shell")
    if kind == "plane" and study.plane is None:
        raise ModelError(f"{name}: [model] kind = \"plane\"; say also plane = \"stress\" or "
                         "\"strain\"")
    if plane_said:
        return "plane"
    if shell or kind == "shell":
        return "shell"
    raise ModelError(f"{name} is a flat 2D mesh in z = 0: a 2D plane model or a flat shell, and the "
                     "study says neither; say [model] plane = \"stress\" or \"strain\" for a 2D "
                     "plane model, or [model] kind = \"shell\" for a shell")


def _shell_evidence(study: Study, gauges: pd.DataFrame | None) -> list[str]:
    """What in the study says the model is a shell (one phrase each)."""
    out = [f"case '{c.name}' gives top and bottom arrays" for c in study.cases
           if isinstance(c.array, dict)]
    if gauges is not None and "face" in gauges and (gauges["face"] != "").any():
        out.append("the gauge map gives a face column")
    thickness = study.model_info.get("thickness")
    if isinstance(thickness, int | float) and not isinstance(thickness, bool) and thickness > 0:
        out.append("[model] thickness is given")
    return out


def settle_family(study: Study, sources: dict[Path, ModelSource],
                  gauges: pd.DataFrame | None) -> None:
    """Give every opened source's mesh the family the study settles (see :func:`model_family`)."""
    family = model_family(study, sources[study.model_file].mesh, gauges)
    for src in sources.values():
        if src.mesh.family != family:
            src.mesh = replace(src.mesh, family=family)


def locate(study: Study, sources: dict[Path, ModelSource], gauges: pd.DataFrame) -> Model:
    """Locate every gauge on the model and build the operator.

    Raises
    ------
    GaugeError
        The gauge map fits the model only after a unit factor (25.4 or 1000, or their inverses).
    GaugeOutsideMeshError
        Gauges farther than ``snap_tol`` from the surface (every such gauge, one line each).
    """
    mesh = sources[study.model_file].mesh
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
        line = unit_mismatch(study, mesh, locator, gauges, snap_tol)
        if line is not None:
            raise GaugeError(line)
        op = build_operator(mesh, gauges, position_tol=study.position_tol,
                            angle_tol=study.angle_tol, snap_tol=snap_tol,
                            calibration_poisson=study.calibration_poisson,
                            grid_points=study.grid_points, band=study.band, locator=locator,
                            length_unit=study.length_unit)
    return Model(study=study, sources=sources, gauges=gauges, operator=op, locator=locator)


# Unit factors a gauge map is tried at when it does not fit the model: (factor, what it means)
UNIT_FACTORS = ((25.4, "a gauge map in inches against a model in millimetres"),
                (1 / 25.4, "a gauge map in millimetres against a model in inches"),
                (1000.0, "a gauge map in metres against a model in millimetres"),
                (1e-3, "a gauge map in millimetres against a model in metres"))
ON_MODEL_SHARE = 0.5   # below this share of gauges on the surface, a unit factor is looked for
CLOSER_BY = 10.0       # gauges that snap, but sit this many times closer once scaled up
MIN_GAUGES = 3         # ... and are at least this many


def unit_mismatch(study: Study, mesh: Mesh, locator: Locator, gauges: pd.DataFrame,
                  snap_tol: float) -> str | None:
    """One line when the gauge map fits the model only after a unit factor, else None.

    Two signs, each with every surface gauge within ``snap_tol`` of the model once the
    coordinates are multiplied by the factor (25.4 or 1000, or their inverses): most gauges lie
    off the model as given; or, for the enlarging factors (a gauge map in inches or metres
    crowded near the origin of a model in millimetres, where it may snap to some face), at least
    MIN_GAUGES snap as given but lie CLOSER_BY times closer to the surface once scaled (scaling
    a gauge map that is right moves its gauges off the surface instead). The scaled points are
    projected only when they all lie in the model's bounding box.
    """
    surface = (gauges["mount"] != "embedded").to_numpy()
    xyz = gauges[["x", "y", "z"]].to_numpy(dtype=float)[surface]
    prefer = gauges[["normal_x", "normal_y", "normal_z"]].to_numpy(dtype=float)[surface]
    if not len(xyz):
        return None
    lo, hi = mesh.bounds[0] - snap_tol, mesh.bounds[1] + snap_tol
    given = locator.project(xyz, prefer=prefer).distance
    snapped = float(np.mean(given <= snap_tol)) >= ON_MODEL_SHARE
    if snapped and (len(xyz) < MIN_GAUGES or not np.median(given) > 0):
        return None
    fits = []   # (median distance once scaled, factor, meaning)
    for factor, meaning in UNIT_FACTORS:
        scaled = xyz * factor
        if (snapped and factor < 1) or not ((scaled >= lo) & (scaled <= hi)).all():
            continue
        distance = locator.project(scaled, prefer=prefer).distance
        if not (distance <= snap_tol).all():
            continue
        if snapped and not np.median(distance) * CLOSER_BY <= np.median(given):
            continue
        fits.append((float(np.median(distance)), factor, meaning))
    if not fits:
        return None
    _, factor, meaning = min(fits)  # on a small model several may fit: the closest wins
    unit = study.length_unit
    where = "lie off the model" if not snapped else "snap to the model only loosely"
    return (f"{study.gauges_file.name}: the gauge coordinates ({_span(xyz)}) {where} "
            f"({_span(mesh.bounds)} {unit}), but every gauge lies on the model surface once "
            f"they are multiplied by {factor:.6g}: that is {meaning}; the study says "
            f"length_unit = \"{unit}\" for both, so convert the gauge map (or the model) to {unit}")


def _span(points: NDArray[np.float64]) -> str:
    lo, hi = points.min(axis=0), points.max(axis=0)
    return ", ".join(f"{a} {lo[k]:.4g} to {hi[k]:.4g}" for k, a in enumerate("xyz"))


def case_steps(model: Model, case: Case) -> list[tuple[int | None, float | None]]:
    """The (fe_index, fe_time) states a case stands for: one, or every step of a series."""
    return source_steps(model.source(case), case)


def source_steps(src: ModelSource, case: Case) -> list[tuple[int | None, float | None]]:
    """The (fe_index, fe_time) states of a case in its opened source (see :func:`case_steps`)."""
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


def case_problems(study: Study, sources: dict[Path, ModelSource], case: Case) -> list[str]:
    """Every problem with the arrays a case names, found without the gauges (one line each).

    Each named array (per face, the axes, those of ``check_stress`` and ``check_displacement``)
    is looked up in the case's first FE state; when all are there, the field is read as a run
    would read it (component count and names, shear, axes, material).
    """
    src = sources[case.file or study.model_file]
    try:
        fe_index = source_steps(src, case)[0][0]
    except CorrelateError as exc:
        return list(exc.problems)
    names = list(case.array.values()) if isinstance(case.array, dict) else [case.array]
    names += [n for n in (case.axes, case.check_stress, case.check_displacement) if n]
    problems: list[str] = []
    for name in names:
        try:
            find_array(src, name, fe_index, case=case.name)
        except CorrelateError as exc:
            problems.extend(exc.problems)
    if not problems:
        try:
            read_field(src, case, study.materials, fe_index)
        except CorrelateError as exc:
            problems.extend(exc.problems)
    return problems


def case_rows(model: Model, case: Case, fe_index: int | None,
              operator: GaugeOperator | None = None) -> dict[str, NDArray[np.float64]]:
    """Operator rows of one case (one FE state), in m/m; mechanical for a thermal case; read at
    each grid's height when the operator's gauges have one (gauge-map column ``height``).

    ``operator``: another operator on the model's mesh (a search's moved grids).
    """
    if operator is None:
        combined = model.channel_rows(case, fe_index)
        if combined is not None:
            return combined
    op = operator or model.operator
    fld = model.case_field(case, fe_index, op)
    rows = evaluate_rows(op, fld, strict=operator is None)
    if operator is None:   # the gauges themselves (a search's moved grids may pass a singularity)
        check_range(op, fld, rows)
    if operator is None and fld.kind == "displacement":
        if fld.index is not None:  # the checks average over whole cells: read the whole step
            fld = model.case_field(case, fe_index)
        rows.update(_displacement_checks(model, case, fld))
    if np.nan_to_num(op.height).any():
        whole = fld if fld.index is None else model.case_field(case, fe_index)
        delta = height_strain(op, whole, op.height, thickness=model.study.model_info.get(
            "thickness"), warn=operator is None)
        rows = raised_rows(op, rows, delta)
    if case.thermal is not None:
        rows = mechanical_rows(op, rows, temperature_at_points(op, model.source(case), case,
                                                               fe_index),
                               case.thermal.alpha, case.thermal.reference_C)
    if operator is not None:
        return rows
    rows["location"] = fld.location  # type: ignore[assignment]
    return rows


def check_range(op: GaugeOperator, fld: Any, rows: dict[str, NDArray[np.float64]]) -> None:
    """Refuse model strains of 100 % (``core.units.FULL_STRAIN``) or more along or across a
    gauge's grid: no gauge reads them, so the array is in other units."""
    own = op.row_kind != 2
    size = np.fmax(np.abs(rows["axial"]), np.abs(rows["transverse"]))
    big = own & (size >= FULL_STRAIN)
    if big.any():
        gauges = [op.gauges[g] for g in np.unique(op.row_gauge[big])]   # in the map's order
        shown = ", ".join(gauges[:8]) + (f" and {len(gauges) - 8} more" if len(gauges) > 8 else "")
        raise ModelError(f"case '{fld.case}': array '{fld.array}' gives strains up to "
                         f"{np.nanmax(size[big]):.3g} at {len(gauges)} gauge(s): {shown}; the "
                         "model's strain is read in m/m, and 1 is 100 % strain, beyond any strain "
                         "gauge: the array looks like microstrain or percent, or is not a strain "
                         "(a stress?); write the strain in m/m")



def _displacement_checks(model: Model, case: Case, fld: Any) -> dict[str, Any]:
    """Nodal-averaged gradient reading (mesh check) and rotation at each gauge centre."""
    op = model.operator
    nodal = nodal_strain(op, fld.values)
    avg = evaluate_rows(op, type(fld)(case=fld.case, kind="strain", location="point", data=nodal,
                                      source_kind="displacement", array=fld.array))
    return {"averaged_indicated": avg["indicated"], "rotation": rotation_at_points(op, fld.values)}
