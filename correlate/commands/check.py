"""`correlate check STUDY`: read everything, report every problem, show where each gauge landed."""

from __future__ import annotations

import argparse
import sys
import warnings
from collections.abc import Callable
from typing import Any

import pandas as pd

from correlate.comparison.correlation import chain_readings
from correlate.core.errors import CorrelateError
from correlate.model_readings.conventions import convention_warnings
from correlate.model_readings.model import (
    Model,
    case_problems,
    case_rows,
    case_steps,
    locate,
    open_sources,
    settle_family,
)
from correlate.readers.gauges import read_gauges
from correlate.readers.study import Study, read_study


def _attempt(problems: list[str], step: Callable[..., Any], *args: Any) -> tuple[bool, Any]:
    """Run one step; on an input problem keep its lines and say it failed."""
    try:
        return True, step(*args)
    except CorrelateError as exc:
        problems.extend(exc.problems)
        return False, None


def check_study(study: Study) -> tuple[Model, pd.DataFrame, list[str]]:
    """Read everything; return the model, the placement table and the warnings raised.

    Every problem is collected before anything is refused: the model file, the gauge map, each
    case's arrays (read without the gauges, so that a gauge off the model does not hide them),
    each gauge's location, each case's readings at the gauges, and the readings file.

    Raises
    ------
    CorrelateError
        One line per problem found, all of them.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        problems: list[str] = []
        opened, sources = _attempt(problems, open_sources, study)
        _, gauges = _attempt(problems, read_gauges, study.gauges_file)
        settled = opened and _attempt(problems, settle_family, study, sources, gauges)[0]
        bad_cases = set()
        for case in study.cases if settled else ():
            lines = case_problems(study, sources, case)
            if lines:
                bad_cases.add(case.name)
                problems.extend(lines)
        model = None
        if settled and gauges is not None:
            _, model = _attempt(problems, locate, study, sources, gauges)
        for case in study.cases if model is not None else ():
            if case.name not in bad_cases:
                for fe_index, _ in case_steps(model, case)[:1]:
                    _attempt(problems, case_rows, model, case, fe_index)
        if study.readings_file is not None and gauges is not None:
            _attempt(problems, chain_readings, study, gauges)  # the chain's inputs too
        if problems or model is None:
            raise CorrelateError(*dict.fromkeys(problems))
        notes = convention_warnings(model)
    return model, model.operator.placement.table, [str(w.message) for w in caught] + notes


def run(args: argparse.Namespace) -> int:
    """Check the study and print where each gauge landed."""
    study = read_study(args.study)
    model, placement, notes = check_study(study)
    mesh = model.operator.mesh
    print(f"model: {study.model_file.name}: {len(mesh.points)} nodes, {mesh.n_cells} cells "
          f"({', '.join(sorted({t for t, _ in mesh.blocks}))}), {mesh.family}")
    print(f"cases: {', '.join(c.name for c in study.cases)}")
    cols = ["gauge", "element", "cell_type", "snap_distance", "out_of_plane_deg"]
    table = placement[cols].copy()
    table["snap_distance"] = table["snap_distance"].map(lambda v: f"{v:.4f}")
    table["out_of_plane_deg"] = table["out_of_plane_deg"].map(lambda v: f"{v:.1f}")
    print(table.to_string(index=False))
    for n in notes:
        print(f"warning: {n}", file=sys.stderr)
    print(f"study is usable: {len(placement)} gauges located ({study.length_unit})")
    return 0
