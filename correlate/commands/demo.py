"""`correlate demo`: copy the invented demo campaign to a working folder, check it, run it.

The demo's model (a real FE solution of an invented bracket), gauge map and test log ship as package
data, so it works after a plain ``pip install .`` with no solver.
"""

from __future__ import annotations

import argparse
import shutil
from importlib import resources
from pathlib import Path

from correlate.commands.check import check_study
from correlate.commands.run import print_summary, write_outputs
from correlate.comparison.correlation import correlate_study
from correlate.core.errors import OutputError
from correlate.readers.study import read_study

DEMO_FILES = ("study.toml", "gauges.csv", "readings.csv", "bracket.vtu", "README.txt")


def demo_folder() -> Path:
    """The packaged demo data (a real folder for a normal install)."""
    return Path(str(resources.files("correlate") / "data" / "demo"))


def run(args: argparse.Namespace) -> int:
    """Copy the demo campaign to ``--out``, check it and run it."""
    out = Path(args.out)
    if out.exists() and not args.force:
        raise OutputError(f"'{out}' exists; add --force to replace it or give another --out")
    src = demo_folder()
    if out.exists():
        shutil.rmtree(out)
    out.mkdir(parents=True)
    for name in DEMO_FILES:
        if (src / name).exists():
            shutil.copy2(src / name, out / name)
    study = read_study(out / "study.toml")
    print(f"demo campaign copied to {out} (an invented part and invented test data)")
    model, placement, notes = check_study(study)
    print(f"check: {len(placement)} gauges located on {study.model_file.name}; "
          f"{len(notes)} warning(s)")
    for n in notes:
        print(f"  warning: {n}")
    corr = correlate_study(study, model)
    write_outputs(corr, out / "run", force=True)
    print_summary(corr)
    print(f"report: {(out / 'run' / 'report.html').resolve()}")
    return 0
