"""Handlers of the subcommands: call the pipeline, write outputs, print short tables."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

EXIT_OK = 0


def _echo(text: str = "") -> None:
    print(text)


def cmd_check(args: argparse.Namespace) -> int:
    from correlate.model_readings.model import check_study
    from correlate.readers.study import read_study

    study = read_study(args.study)
    model, placement, notes = check_study(study)
    mesh = model.operator.mesh
    _echo(f"model: {study.model_file.name}: {len(mesh.points)} nodes, {mesh.n_cells} cells "
          f"({', '.join(sorted({t for t, _ in mesh.blocks}))}), {mesh.family}")
    _echo(f"cases: {', '.join(c.name for c in study.cases)}")
    cols = ["gauge", "element", "cell_type", "snap_distance", "out_of_plane_deg"]
    table = placement[cols].copy()
    table["snap_distance"] = table["snap_distance"].map(lambda v: f"{v:.4f}")
    table["out_of_plane_deg"] = table["out_of_plane_deg"].map(lambda v: f"{v:.1f}")
    _echo(table.to_string(index=False))
    for n in notes:
        print(f"warning: {n}", file=sys.stderr)
    _echo(f"study is usable: {len(placement)} gauges located ({study.length_unit})")
    return EXIT_OK


def cmd_predict(args: argparse.Namespace) -> int:
    from correlate.core.folders import check_target, staged_folder, write_csv
    from correlate.model_readings.model import predict_table, prepare
    from correlate.readers.study import read_study

    study = read_study(args.study)
    check_target(Path(args.out), force=args.force)
    model = prepare(study)
    table = predict_table(model)
    with staged_folder(Path(args.out), force=args.force) as tmp:
        write_csv(table, tmp / "model_readings.csv")
        write_csv(model.operator.placement.table, tmp / "placement.csv")
    _echo(f"model readings of {len(model.gauges)} gauges x {len(study.cases)} case(s) written "
          f"to {Path(args.out) / 'model_readings.csv'}")
    return EXIT_OK


def cmd_run(args: argparse.Namespace) -> int:
    from correlate.comparison.correlation import run_command

    return run_command(args)


def cmd_demo(args: argparse.Namespace) -> int:
    from correlate.commands.demo import demo_command

    return demo_command(args)


def cmd_compare(args: argparse.Namespace) -> int:
    from correlate.comparison.revisions import compare_command

    return compare_command(args)
