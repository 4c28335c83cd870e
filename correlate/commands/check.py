"""`correlate check STUDY`: read everything, report every problem, show where each gauge landed."""

from __future__ import annotations

import argparse
import sys
import warnings

import pandas as pd

from correlate.comparison.pairing import read_test_data
from correlate.core.errors import CorrelateError
from correlate.model_readings.conventions import convention_warnings
from correlate.model_readings.model import Model, case_rows, case_steps, prepare
from correlate.readers.study import Study, read_study


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
            try:
                read_test_data(study, model.gauges)
            except CorrelateError as exc:
                problems.extend(exc.problems)
        if problems:
            raise CorrelateError(*problems)
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
