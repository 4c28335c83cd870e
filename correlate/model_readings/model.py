"""The model of a study: its result files opened, every gauge located, and each case's readings.

Stage: model readings. In: a :class:`~correlate.readers.study.Study`. Out: a :class:`Model` (the
opened sources, the gauge map and its operator) and the operator rows of any case and FE state.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.core import progress
from correlate.core.errors import ModelError
from correlate.model_readings.evaluate import evaluate_rows
from correlate.model_readings.gradients import nodal_strain, rotation_at_points
from correlate.model_readings.locator import Locator
from correlate.model_readings.operator import GaugeOperator, build_operator, gauge_locator
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
            touched = operator.touched()
            return read_field(src, case, self.study.materials, fe_index,
                              rows={"point": touched.point, "cell": touched.cell})
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
    op = model.operator
    nodal = nodal_strain(op, fld.values)
    avg = evaluate_rows(op, type(fld)(case=fld.case, kind="strain", location="point", data=nodal,
                                      source_kind="displacement", array=fld.array))
    return {"averaged_indicated": avg["indicated"], "rotation": rotation_at_points(op, fld.values)}
