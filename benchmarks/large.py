"""A 10,000,000-cell linear tetrahedral model with 1,000 gauges: `correlate predict` beside the read
floor, peak memory beside the mesh arrays, each stage's growth from 1,000,000 cells; and a
cold-cache read of the file.

Disk: the 10M-cell model is written as XDMF/HDF5 by meshio's own writer (gzip-compressed HDF5,
meshio's default; about 60 MB for this regular block), and the script reserves and checks for
about 0.7 GB of scratch (at most the 10 GB the issue allows) and skips with a message when there is
less. Memory: about 1.5 GB at the peak (the generator's mesh, then the command's).

Each size runs `correlate --timings predict` ONCE, in a fresh process (the machine is shared:
the figures of one run, not the best of several). Peak memory is that process's maximum resident
size (VmHWM of the child's own process image). The floor is meshio reading the file (geometry, cells and the
strain array) in a fresh process, warm cache, measured just before.

Cold cache: /proc/sys/vm/drop_caches needs root, which this machine does not give; instead the
file's own pages are evicted with posix_fadvise(POSIX_FADV_DONTNEED) after an fsync (Linux drops
clean cached pages of that file only, leaving other users' cache alone), and the floor read is
timed again. Invented model and field. Run:  python benchmarks/large.py [--cells 10000000]
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from run import strain_field, tet_block, top_gauges

SCRATCH_LIMIT = 10e9      # the most this script writes, as the issue allows; checked up front

FLOOR = """
import sys, time, meshio
t = time.perf_counter()
m = meshio.read(sys.argv[1])
assert "E" in m.point_data
print(time.perf_counter() - t)
"""


def write_study(folder: Path) -> Path:
    path = folder / "study.toml"
    path.write_text('title = "scale benchmark (generated, invented field)"\n'
                    '[model]\nfile = "model.xdmf"\nlength_unit = "mm"\n'
                    '[[case]]\nname = "c"\nstrain = "E"\n'
                    'components = ["xx", "yy", "zz", "xy", "yz", "xz"]\n'
                    '[material]\nE = 70000.0\nnu = 0.33\n'
                    '[gauges]\nfile = "gauges.csv"\nposition_tol = 1.0\nangle_tol = 2.0\n'
                    'snap_tol = 1.0\nband = false\n')
    return path


def floor(path: Path) -> float:
    out = subprocess.run([sys.executable, "-c", FLOOR, str(path)], capture_output=True,
                         text=True, check=True)
    return float(out.stdout.split()[-1])


def evict(folder: Path) -> None:
    """Drop this folder's files from the page cache (POSIX_FADV_DONTNEED, Linux)."""
    for f in folder.iterdir():
        if not f.is_file():
            continue
        with open(f, "rb") as h:
            os.fsync(h.fileno())
            os.posix_fadvise(h.fileno(), 0, 0, os.POSIX_FADV_DONTNEED)


PREDICT = """
import sys
from correlate.commands.cli import main
rc = main(sys.argv[1:])
# VmHWM of this process image: ru_maxrss survives exec on Linux and would carry the parent's
# resident size (this script holds the generated mesh when it starts the child)
hwm = [line.split()[1] for line in open("/proc/self/status") if line.startswith("VmHWM:")]
sys.stderr.write(f"\\npeak-kB {hwm[0]}\\n")
sys.exit(rc)
"""


def predict_once(study: Path) -> tuple[float, float, list[tuple[int, str, float]]]:
    """Wall seconds, peak MB and the --timings rows of one fresh `correlate predict`."""
    t = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", PREDICT, "--quiet", "--timings", "predict",
                          str(study), "--out", str(study.parent / "out")],
                         capture_output=True, text=True)
    wall = time.perf_counter() - t
    if out.returncode != 0:
        raise RuntimeError(out.stderr[-2000:])
    lines = out.stderr.splitlines()
    peak = float(lines[-1].split()[1]) / 1024.0
    lines = lines[:-1]
    while lines and not lines[-1].strip():
        lines = lines[:-1]
    rows = [((len(line) - len(line.lstrip())) // 2 - 1, line.rsplit(None, 1)[0].strip(),
             float(line.rsplit(None, 1)[1]))
            for line in lines[lines.index("stage times (seconds):") + 1:]]
    return wall, peak, rows


def one_size(root: Path, n_cells: int, gauges) -> dict:
    import meshio

    folder = root / f"m{n_cells}"
    folder.mkdir()
    t = time.perf_counter()
    mesh = tet_block(n_cells, quadratic=False)
    conn = mesh.blocks[0][1]
    arrays_mb = (mesh.points.nbytes + conn.nbytes) / 2**20
    cwd = os.getcwd()
    os.chdir(folder)    # meshio writes the .h5 into the current folder (meshio issue 1442)
    try:
        meshio.write("model.xdmf", meshio.Mesh(mesh.points, [("tetra", conn)],
                                               point_data={"E": strain_field(mesh.points)}))
    finally:
        os.chdir(cwd)
    made = time.perf_counter() - t
    n_real = len(conn)
    del mesh, conn
    gauges.to_csv(folder / "gauges.csv", index=False)
    study = write_study(folder)
    size = sum(f.stat().st_size for f in folder.iterdir()) / 1e6
    warm = floor(folder / "model.xdmf")
    wall, peak, rows = predict_once(study)
    evict(folder)
    cold = floor(folder / "model.xdmf")
    return {"cells": n_real, "MB": size, "made": made, "floor": warm, "cold floor": cold,
            "predict": wall, "peak MB": peak, "mesh MB": arrays_mb, "rows": rows}


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--cells", type=int, default=10_000_000)
    p.add_argument("--small", type=int, default=1_000_000, help="the size growth is measured from")
    args = p.parse_args()
    root = Path(tempfile.mkdtemp(prefix="correlate-large-"))
    need = 60.0 * (args.cells + args.small)        # bytes: about 45 per cell written, with room
    free = shutil.disk_usage(root).free
    print(f"scratch {root}: this run writes about {need / 1e9:.1f} GB (at most "
          f"{SCRATCH_LIMIT / 1e9:.0f} GB allowed), {free / 1e9:.0f} GB free")
    if need > SCRATCH_LIMIT or free < max(need * 1.5, 1e9):
        shutil.rmtree(root, ignore_errors=True)
        sys.exit("not enough free scratch disk for this model: skipped")
    gauges = top_gauges(1000, np.random.default_rng(3))
    results = []
    try:
        for n in (args.small, args.cells):
            results.append(one_size(root, n, gauges))
            shutil.rmtree(root / f"m{n}", ignore_errors=True)
    finally:
        shutil.rmtree(root, ignore_errors=True)
    for r in results:
        print(f"\n{r['cells']:,} cells, {r['MB']:.0f} MB on disk (generated in {r['made']:.0f} s): "
              f"floor {r['floor']:.2f} s warm, {r['cold floor']:.2f} s cold; predict (whole "
              f"command) {r['predict']:.2f} s = {r['predict'] / r['floor']:.2f} x floor; peak "
              f"{r['peak MB']:.0f} MB, mesh arrays {r['mesh MB']:.0f} MB")
    small, large = results
    print(f"\n{'stage':<60}{small['cells']:>12,}{large['cells']:>12,}{'growth':>8}")
    big = {(d, s): t for d, s, t in large["rows"]}
    for d, s, t in small["rows"]:
        t2 = big.get((d, s))
        grow = f"{t2 / t:.1f}" if t2 is not None and t > 0.005 else "-"
        print(f"{'  ' * max(d, 0) + s:<60}{t:>12.2f}{(t2 if t2 is not None else float('nan')):>12.2f}"
              f"{grow:>8}")
    extra = [(d, s, t) for d, s, t in large["rows"] if (d, s) not in
             {(d0, s0) for d0, s0, _ in small["rows"]}]
    for d, s, t in extra:
        print(f"{'  ' * max(d, 0) + s:<60}{'':>12}{t:>12.2f}")


if __name__ == "__main__":
    main()
