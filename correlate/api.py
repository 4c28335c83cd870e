"""The library entry points: a whole correlation (``run_study``) and model readings from Python
objects (``predict_readings``: a meshio or pyvista mesh, a DataFrame of gauges).

``run_study`` is ``correlate run`` returning its tables; ``predict_readings`` is the computation of
``correlate predict`` without files.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from correlate.commands.run import write_outputs
from correlate.comparison.correlation import Correlation, correlate_study
from correlate.core.folders import output_path
from correlate.model_readings.model import Model
from correlate.model_readings.operator import build_operator, gauge_locator
from correlate.model_readings.table import predict_table
from correlate.readers.gauges import validate_gauges
from correlate.readers.model import from_meshio
from correlate.readers.study import Case, Material, Study, read_study


def _as_meshio(mesh: Any) -> Any:
    if hasattr(mesh, "cells") and hasattr(mesh, "point_data") and hasattr(mesh, "cell_data") \
            and not hasattr(mesh, "n_cells"):
        return mesh
    import pyvista as pv

    if isinstance(mesh, pv.DataSet):
        return pv.to_meshio(mesh)
    raise TypeError(f"mesh must be a meshio.Mesh or a pyvista dataset, not {type(mesh).__name__}")


def predict_readings(mesh: Any, gauges: pd.DataFrame, cases: Mapping[str, str | dict[str, Any]], *,
                     material: tuple[float, float] | None = None, position_tol: float = 0.0,
                     angle_tol: float = 0.0, snap_tol: float = 1.0,
                     calibration_poisson: float = 0.285, grid_points: int = 5) -> pd.DataFrame:
    """Model readings of every gauge and case, as ``correlate predict`` writes them.

    Parameters
    ----------
    mesh : meshio.Mesh or pyvista.DataSet
        The model result with its arrays.
    gauges : DataFrame
        Gauge map with the columns of the gauge-map CSV (``gauge, x, y, z, dir_x, dir_y, dir_z``,
        optional ``length, kt, rosette, face, ...``).
    cases : mapping
        Case name -> strain array name, or -> a dict of ``[[case]]`` keys (``strain`` /
        ``displacement`` / ``stress``, ``components``, ``shear``, ``average``, ``axes``).
    material : (E, nu), optional
        Needed for stress input.

    Returns
    -------
    DataFrame
        One row per gauge and case: ``predicted_ue, axial_ue, transverse_ue, point_ue,
        band_low_ue, band_high_ue, snap_distance, ...`` (microstrain; lengths in the mesh's unit).
        The text columns ``gauge, case, cell_type, field_location`` are pandas categories (in
        gauge-map order for ``gauge``).

    Examples
    --------
    >>> import meshio, numpy as np, pandas as pd
    >>> pts = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1.0]])
    >>> strain = np.tile([1e-3, 0, 0, 0, 0, 0], (4, 1))
    >>> m = meshio.Mesh(pts, [("tetra", np.array([[0, 1, 2, 3]]))], point_data={"E": strain})
    >>> g = pd.DataFrame([dict(gauge="G1", x=0.3, y=0.3, z=0.0, dir_x=1, dir_y=0, dir_z=0)])
    >>> round(float(predict_readings(m, g, {"c": "E"})["predicted_ue"][0]), 3)
    1000.0
    """
    source = from_meshio(_as_meshio(mesh))
    text = gauges.astype(object).where(gauges.notna(), "").astype(str)
    gdf = validate_gauges(text, source="gauges")
    case_list = []
    for name, spec in cases.items():
        spec = {"strain": spec} if isinstance(spec, str) else dict(spec)
        kind = next(k for k in ("strain", "displacement", "stress") if k in spec)
        comps = spec.get("components")
        case_list.append(Case(name=name, kind=kind, array=spec[kind],
                              components=tuple(comps) if comps else None,
                              shear=spec.get("shear", "engineering"),
                              average=spec.get("average", "cell"), axes=spec.get("axes")))
    materials = (Material(E=material[0], nu=material[1]),) if material else ()
    mesh_ = source.mesh
    locator = gauge_locator(mesh_, gdf, snap_tol=snap_tol, position_tol=position_tol)
    op = build_operator(mesh_, gdf, position_tol=position_tol, angle_tol=angle_tol,
                        snap_tol=snap_tol, calibration_poisson=calibration_poisson,
                        grid_points=grid_points, locator=locator)
    study = Study(path=Path("library-call"), title="library call", model_file=source.path,
                  length_unit="", stress_unit=None, plane=None, model_info={},
                  cases=tuple(case_list), materials=materials, gauges_file=Path("gauges"),
                  position_tol=position_tol, angle_tol=angle_tol, snap_tol=snap_tol,
                  calibration_poisson=calibration_poisson, grid_points=grid_points, band=True)
    model = Model(study=study, sources={source.path: source}, gauges=gdf, operator=op,
                  locator=locator)
    return predict_table(model)


@dataclass(frozen=True)
class StudyResult:
    """The whole correlation of a study, as tables: what ``correlate run`` writes, in memory.

    ``gauges`` (gauges.csv), ``per_gauge`` (gauge_stats.csv), ``flags`` (flags.csv),
    ``rosettes`` (rosettes.csv) and ``diagnoses`` are DataFrames; ``summary`` is the content of
    summary.json and ``verdict`` its verdict. ``correlation`` holds every array of the run.
    """

    gauges: pd.DataFrame
    per_gauge: pd.DataFrame
    flags: pd.DataFrame
    rosettes: pd.DataFrame
    diagnoses: pd.DataFrame
    summary: dict[str, Any]
    correlation: Correlation = field(repr=False)

    @property
    def verdict(self) -> dict[str, Any]:
        return self.summary["verdict"]

    def __repr__(self) -> str:
        v, fit = self.verdict, self.summary["fit"]
        ratio = fit.get("slope_origin")
        ratio_text = "n/a" if ratio is None else f"{ratio:.3f}"
        return (f"<StudyResult {self.summary['title']!r}: {v['state']} "
                f"(criteria alone: {v['result']}); measured/predicted {ratio_text}; "
                f"{v['passing']} of {v['healthy']} healthy gauges pass, {v['flagged']} flagged>")


def run_study(study_or_path: Study | str | Path, out: str | Path | None = None, *,
              force: bool = False, report: bool = True) -> StudyResult:
    """Correlate a study, as ``correlate run`` does; write the output folder only when ``out``
    is given.

    Parameters
    ----------
    study_or_path : Study or path
        A study read with :func:`correlate.read_study`, or the path of its TOML file.
    out : path, optional
        Output folder (the same files as ``correlate run --out``); nothing is written without it.
    force : bool
        Replace an existing output folder that the tool wrote.
    report : bool
        Write report.html and its pictures into ``out``.

    Returns
    -------
    StudyResult
        The tables, the summary and the verdict.

    Raises
    ------
    CorrelateError
        With one line per problem of the study's inputs.
    """
    study = study_or_path if isinstance(study_or_path, Study) else read_study(study_or_path)
    corr = correlate_study(study)
    if out is not None:
        write_outputs(corr, output_path(out), force=force, report=report)
    return StudyResult(gauges=corr.gauge_table, per_gauge=corr.per_gauge, flags=corr.flags,
                       rosettes=corr.rosettes, diagnoses=corr.diagnoses, summary=corr.summary,
                       correlation=corr)
