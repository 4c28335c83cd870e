"""`correlate demo`: copy the invented demo campaign to a working folder, check it, run it, and
sweep a few invented clamp-stiffness variants of its model (:mod:`correlate.commands.demo_sweep`).

The demo's model (a real FE solution of an invented bracket), gauge map and test log ship as package
data, so it works after a plain ``pip install .`` with no solver.
"""

from __future__ import annotations

import argparse
import os
import shutil
from importlib import resources
from pathlib import Path

from correlate.commands.check import check_study
from correlate.commands.demo_sweep import SWEEP_FILES, run_demo_sweep
from correlate.commands.run import print_summary, write_outputs
from correlate.comparison.correlation import correlate_study
from correlate.core.folders import check_target, output_path, staged_folder
from correlate.readers.study import read_study

DEMO_FILES = ("study.toml", "gauges.csv", "readings.csv", "bracket.vtu", "bracket_coarse.vtu",
              "dic_frames.parquet", "dic_landmarks.csv", "README.txt")


def demo_folder() -> Path:
    """The packaged demo data (a real folder for a normal install)."""
    return Path(str(resources.files("correlate") / "data" / "demo"))


def run(args: argparse.Namespace) -> int:
    """Copy the demo campaign to ``--out``, check it and run it (staged: nothing half-written)."""
    out = Path(os.path.abspath(output_path(args.out)))
    own = (*DEMO_FILES, "run", "sweep", *SWEEP_FILES)
    check_target(out, force=args.force, own=own)
    src = demo_folder()
    with staged_folder(out, force=args.force, own=own) as tmp:
        for name in DEMO_FILES:
            if (src / name).exists():
                shutil.copy2(src / name, tmp / name)
        study = read_study(tmp / "study.toml")
        print(f"demo campaign copied to {out} (an invented part and invented test data)")
        model, placement, notes = check_study(study)
        print(f"check: {len(placement)} gauges located on {study.model_file.name}; "
              f"{len(notes)} warning(s)")
        for n in notes:
            print(f"  warning: {n}")
        corr = correlate_study(study, model)
        write_outputs(corr, tmp / "run", force=True)
        print_summary(corr)
        print("\nsweep of invented clamp-stiffness variants (sweep.toml):")
        run_demo_sweep(tmp, src, out)
    print(f"report: {out / 'run' / 'report.html'}; sweep: {out / 'sweep' / 'sweep.html'}")
    return 0
