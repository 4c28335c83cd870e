"""A 1,000-step series in each of the three HDF5 layouts, whole `correlate predict` command,
beside a probe-per-step baseline measured in the same run.

Layouts (written by tests/series_files.py): one dataset per step (meshio's TimeSeriesWriter), one
contiguous dataset of all steps (steps x nodes x components, XDMF hyperslabs), the same chunked
and gzip-compressed. Each is timed as `correlate --timings predict` in a fresh process (the whole
command: start-up, reading, evaluation, writing model_readings.csv); the baseline is the
analyst's script of benchmarks/run.py (per step: read the step with meshio, attach it, probe the
gauge centres with PyVista's `sample`, project), on the per-step file, which is the only layout
meshio reads. Invented model and field.

Disk: about 2.6 GB per uncompressed layout at scale 1 (300,000 cells, 1,000 steps); one layout
at a time is kept. Run:  python benchmarks/layouts.py --scale 1.0   (default 0.05, quick)
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from run import baseline_probe, strain_field, tet_block, timed_command, top_gauges, validate
from series_files import LAYOUTS, write_series


def write_study(folder: Path) -> Path:
    path = folder / "study.toml"
    path.write_text('title = "layout benchmark (generated, invented field)"\n'
                    '[model]\nfile = "series.xdmf"\nlength_unit = "mm"\n'
                    '[[case]]\nname = "c"\nstrain = "E"\ntime_index = "all"\n'
                    'components = ["xx", "yy", "zz", "xy", "yz", "xz"]\n'
                    '[material]\nE = 70000.0\nnu = 0.33\n'
                    '[gauges]\nfile = "gauges.csv"\nposition_tol = 1.0\nangle_tol = 2.0\n'
                    'snap_tol = 1.0\nband = false\n')
    return path


def baseline(xdmf: Path, gauges) -> float:
    import meshio
    import pyvista as pv

    t = time.perf_counter()
    r = meshio.xdmf.TimeSeriesReader(str(xdmf))
    pts, cells = r.read_points_cells()
    grid = pv.from_meshio(meshio.Mesh(pts, cells))
    g = validate(gauges)
    for k in range(r.num_steps):
        _, pdata, _ = r.read_data(k)
        baseline_probe(grid, [pdata["E"]], g)
    return time.perf_counter() - t


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--scale", type=float, default=0.05)
    p.add_argument("--gauges", type=int, default=500)
    args = p.parse_args()
    mesh = tet_block(int(300_000 * args.scale), quadratic=False)
    n_steps = max(10, int(1000 * args.scale))
    base = strain_field(mesh.points)
    need = 1.1 * base.nbytes * n_steps
    root = Path(tempfile.mkdtemp(prefix="correlate-layouts-"))
    free = shutil.disk_usage(root).free
    print(f"{mesh.n_cells} tetra cells, {len(mesh.points)} nodes, {n_steps} steps, "
          f"{args.gauges} gauges; scratch {root}: needs about {need / 1e9:.1f} GB, "
          f"{free / 1e9:.0f} GB free")
    if free < 1.5 * need:
        shutil.rmtree(root, ignore_errors=True)
        sys.exit("not enough free disk for this scale: skipped; lower --scale or free space")
    gauges = top_gauges(args.gauges, np.random.default_rng(1))
    times = np.arange(n_steps, dtype=float)
    rows = []
    try:
        for layout in LAYOUTS:
            folder = root / layout
            t = time.perf_counter()
            write_series(folder, mesh.points, [("tetra", mesh.blocks[0][1])], "E",
                         lambda k: base * (1 + 0.001 * k), times, layout)
            written = time.perf_counter() - t
            size = sum(f.stat().st_size for f in folder.iterdir()) / 1e6
            gauges.to_csv(folder / "gauges.csv", index=False)
            study = write_study(folder)
            wall, stages = timed_command(["predict", str(study), "--out", str(folder / "out")])
            top = {s: v for d, s, v in stages if d <= 1}
            evaluate = next(v for _, s, v in stages if s == "evaluating the cases")
            write = next(v for _, s, v in stages if s == "writing model_readings.csv")
            rows.append((layout, size, written, wall, top.get("start-up (interpreter and imports)"),
                         evaluate, write))
            base_s = baseline(folder / "series.xdmf", gauges) if layout == "per-step" else None
            if base_s is not None:
                rows.append(("baseline (per-step file)", size, 0.0, base_s, None, None, None))
            shutil.rmtree(folder, ignore_errors=True)
    finally:
        shutil.rmtree(root, ignore_errors=True)
    baseline_s = next(r[3] for r in rows if r[0].startswith("baseline"))
    print(f"{'layout':<26}{'MB':>8}{'write s':>9}{'command s':>11}{'start-up':>10}"
          f"{'evaluate':>10}{'csv':>7}{'x baseline':>12}")
    for name, size, written, wall, startup, evaluate, write in rows:
        def f(v):
            return "-" if v is None else f"{v:.2f}"
        print(f"{name:<26}{size:>8.0f}{written:>9.1f}{wall:>11.2f}{f(startup):>10}"
              f"{f(evaluate):>10}{f(write):>7}{baseline_s / wall:>12.1f}")


if __name__ == "__main__":
    main()
