"""`correlate predict STUDY --out DIR`: model readings before the test."""

from __future__ import annotations

import argparse

from correlate.commands.outputs import study_inputs
from correlate.core import progress
from correlate.core.folders import check_target, output_path, staged_folder
from correlate.core.tables import write_csv, write_parquet
from correlate.model_readings.model import prepare
from correlate.model_readings.table import predict_table
from correlate.readers.study import read_study


def run(args: argparse.Namespace) -> int:
    """Write ``model_readings.csv`` (or ``.parquet``) and ``placement.csv``."""
    with progress.step("reading the study"):
        study = read_study(args.study)
    out = output_path(args.out)
    check_target(out, force=args.force, inputs=study_inputs(study))
    model = prepare(study)
    with progress.step("model readings of every case"):
        table = predict_table(model)
    with staged_folder(out, force=args.force, inputs=study_inputs(study)) as tmp:
        if args.table_format == "parquet":
            name = "model_readings.parquet"
            write_parquet(table, tmp / name)
        else:
            name = "model_readings.csv"
            write_csv(table, tmp / name)
        write_csv(model.operator.placement.table, tmp / "placement.csv")
    print(f"model readings of {len(model.gauges)} gauges x {len(study.cases)} case(s) written "
          f"to {out / name}")
    return 0
