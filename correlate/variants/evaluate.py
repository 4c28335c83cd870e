"""One model variant correlated against the base study's test: the task a worker runs.

Stage: variants. In: the base :class:`~correlate.readers.records.Study`, a
:class:`~correlate.variants.sweep_file.Variant` and the base model's located gauges
(:class:`Located`, shared by every variant on the same mesh, with the test's half made
once). Out: a :class:`VariantResult` holding the variant's model readings (gauges x steps, and
the operator rows per case) and the metrics of the base study's comparison run on them (:func:`rank_study`: the statuses, health,
dispositions, diagnosis and fits of ``correlate run``, without the tables and per-step figures
only a report shows), a few kB; or the one-line reason it failed.

The comparison runs where the variant's arrays are (on the worker): the diagnosis of failing
gauges reads the field around them, and a run on the readings alone would give a different
status to a gauge it flags as misinstalled than ``correlate run`` on the same variant.
"""

from __future__ import annotations

import copy
import warnings
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.budget import STATES
from correlate.comparison.correlation import MeasuredSide, measured_side, rank_study
from correlate.core.errors import CorrelateError, CorrelateWarning
from correlate.model_readings.channels import compared_model
from correlate.model_readings.locator import Locator
from correlate.model_readings.model import Model, locate, open_sources, prepare, settle_family
from correlate.model_readings.operator import GaugeOperator
from correlate.readers.bridge_map import Bridge
from correlate.readers.model import Mesh
from correlate.readers.records import Study
from correlate.variants.sweep_file import Variant

__all__ = ["METRICS", "VALIDATION", "Located", "VariantResult", "correlate_variant", "locate_base",
           "missing_file", "same_mesh", "variant_metrics", "with_variant_files"]


@dataclass(frozen=True)
class Located:
    """The base model's gauges located once: reused by every variant on the same mesh
    (:func:`same_mesh` against ``operator.mesh``)."""

    gauges: pd.DataFrame
    operator: GaugeOperator
    locator: Locator
    measured: MeasuredSide             # the test's readings and their health, made once
    bridges: tuple[Bridge, ...] = ()   # the gauge map's bridge channels (compared as channels)


@dataclass(frozen=True)
class VariantResult:
    """What a worker returns for one variant (a few kB; no mesh, no field).

    ``predicted`` and ``evaluated`` are (steps, gauges) in microstrain, in the base study's
    gauge and step order; ``rows`` the operator rows of each superposed case [m/m];
    ``measured`` the test's readings as the comparison used them (the same for every variant)
    and ``steps`` their step numbers; ``u_val`` the validation uncertainty of each gauge-step
    when the study has ``[uncertainty]`` (ASME V&V 20, from :mod:`correlate.comparison.budget`); ``metrics`` the comparison's figures (:func:`variant_metrics`); ``failure`` the reason when
    the variant could not be correlated (then the rest is empty).
    """

    name: str
    metrics: dict[str, Any] = field(default_factory=dict)
    predicted: NDArray[np.float64] = field(default_factory=lambda: np.zeros((0, 0)))
    evaluated: NDArray[np.bool_] = field(default_factory=lambda: np.zeros((0, 0), bool))
    measured: NDArray[np.float64] = field(default_factory=lambda: np.zeros((0, 0)))
    steps: NDArray[np.int64] = field(default_factory=lambda: np.zeros(0, np.int64))
    gauges: tuple[str, ...] = ()
    u_val: NDArray[np.float64] | None = None   # (steps, gauges) [microstrain]; no [uncertainty]
    rows: dict[str, dict[str, NDArray[np.float64]]] = field(default_factory=dict)
    same_mesh: bool = False
    warnings: tuple[str, ...] = ()
    failure: str = ""


def same_mesh(mesh: Mesh, base: Mesh) -> bool:
    """Whether ``mesh`` has the points and cells of ``base``: every point coordinate and every
    cell block (type and connectivity) equal, compared array by array.

    Only then may a variant reuse the base model's located gauges exactly (same cells, natural
    coordinates, weights). The base mesh is on every worker with the located gauges, so the
    arrays are compared directly: exact, and cheaper than hashing them (0.6 against 8 ms at
    300,000 cells).
    """
    if mesh.points.shape != base.points.shape or len(mesh.blocks) != len(base.blocks):
        return False
    if not np.array_equal(mesh.points, base.points):
        return False
    return all(ta == tb and ca.shape == cb.shape and np.array_equal(ca, cb)
               for (ta, ca), (tb, cb) in zip(mesh.blocks, base.blocks, strict=True))


def locate_base(study: Study) -> Located:
    """Locate the base study's gauges on its own model (``correlate run``'s preparation), and
    read the test's data and judge its channels' health once, channel by channel as the
    comparison reads them (a bridge's arms as its one channel): they are the same for every
    variant."""
    model = prepare(study)
    return Located(gauges=model.gauges,
                   operator=model.operator, locator=model.locator, bridges=model.bridges,
                   measured=measured_side(study, compared_model(model).gauges))


def with_variant_files(study: Study, variant: Variant) -> Study:
    """The base study with the variant's result files in place of the model's (and cases')."""
    cases = tuple(replace(c, file=variant.case_files.get(c.name, c.file)) for c in study.cases)
    return replace(study, model_file=variant.file, cases=cases)


def missing_file(variant: Variant) -> str:
    """The one-line reason when a file of the variant does not exist, else an empty string."""
    for path in [variant.file, *variant.case_files.values()]:
        if path.is_dir():
            return (f"{path.name}: the variant's model result is a folder ({path}), not a file; "
                    "give the result file itself in the table's file column")
        if not path.is_file():
            return (f"{path.name}: the variant's model result does not exist ({path}); check "
                    "the table's file column or solve the variant")
    return ""


def correlate_variant(study: Study, variant: Variant, located: Located) -> VariantResult:
    """Correlate one variant: read its arrays, reuse or make the gauge operator, compare.

    Any problem with the variant's input (missing or unreadable file, missing array, a gauge off
    a different mesh) is returned as ``failure`` with its one-line reason, never raised, so that
    the sweep goes on.
    """
    if variant.problem:
        return VariantResult(name=variant.name, failure=variant.problem)
    vstudy = with_variant_files(study, variant)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", CorrelateWarning)
        try:
            if missing := missing_file(variant):
                return VariantResult(name=variant.name, failure=missing)
            sources = open_sources(vstudy)
            settle_family(vstudy, sources, located.gauges)
            same = same_mesh(sources[vstudy.model_file].mesh, located.operator.mesh)
            if same:
                model = Model(study=vstudy, sources=sources, gauges=located.gauges,
                              operator=located.operator, locator=located.locator)
            else:
                model = locate(vstudy, sources, located.gauges)
            model.bridges = located.bridges
            # the variants share the test: read and judged once on the client, copied here so
            # that no variant's comparison can change what the next one sees
            corr = rank_study(vstudy, model, side=copy.deepcopy(located.measured))
        except CorrelateError as exc:
            return VariantResult(name=variant.name, failure="; ".join(exc.problems))
    rows = {case: {k: np.asarray(v, dtype=float) for k, v in r.items()
                   if isinstance(v, np.ndarray) and v.dtype.kind == "f"}
            for case, r in corr.rows_by_case.items()}
    notes = tuple(dict.fromkeys(str(w.message) for w in caught
                                if issubclass(w.category, CorrelateWarning)))
    return VariantResult(name=variant.name, metrics=variant_metrics(corr.summary),
                         predicted=np.asarray(corr.predicted, dtype=float),
                         evaluated=np.asarray(corr.status.evaluated, dtype=bool),
                         measured=np.asarray(corr.measured, dtype=float),
                         steps=np.asarray(corr.steps.step, dtype=np.int64),
                         gauges=tuple(corr.gauges), rows=rows,
                         u_val=None if corr.validation is None else
                         np.asarray(corr.validation.result.u_val, dtype=float).T,
                         same_mesh=same, warnings=notes)


#: summary.json entries that variants.csv reports, as (column, path in the summary)
METRICS = (
    ("rms_ue", ("fit", "rms_ue")),
    ("max_abs_ue", ("fit", "max_abs_ue")),
    ("slope_origin", ("fit", "slope_origin")),
    ("slope", ("fit", "slope")),
    ("r2", ("fit", "r2")),
    ("concordance", ("metrics", "concordance")),
    ("pass_fraction", ("verdict", "pass_fraction")),
    ("passing", ("verdict", "passing")),
    ("failing", ("verdict", "failing")),
    ("flagged", ("verdict", "flagged")),
    ("healthy", ("verdict", "healthy")),
    ("verdict", ("verdict", "state")),
)


#: validation states (ASME V&V 20) counted per variant when the study has [uncertainty]
VALIDATION = tuple((f"validation_{s.replace(' ', '_')}", s) for s in STATES)


def variant_metrics(summary: dict[str, Any]) -> dict[str, Any]:
    """The figures of a run's summary that rank a variant (:data:`METRICS`), and the number of
    gauges in each validation state at the reference step (:data:`VALIDATION`) when the summary
    has them."""
    out: dict[str, Any] = {}
    for column, (table, key) in METRICS:
        out[column] = summary.get(table, {}).get(key)
    states = (summary.get("validation") or {}).get("states")
    if states is not None:
        out.update({column: states.get(state) for column, state in VALIDATION})
    return out
