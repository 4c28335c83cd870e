"""Benchmarks of correlate at scale, side by side with a floor and a straightforward baseline.

Generates its own cases in a scratch folder (deleted afterwards), runs them, and prints a table of
stage times and peak memory. Figures are measured in the same run:

1. floor      - meshio (or h5py) reading the model geometry and one result array, nothing else;
2. correlate  - locate + operator + evaluate through the library (what `predict` does);
3. baseline   - what an analyst would script: for each step read the step's array, attach it to the
                mesh, probe the gauge points with pyvista's `sample`, project in numpy.

Cases (scaled by --scale; 1.0 is the full size of the performance issue):
  a) quadratic tetrahedral solid, 1,000,000 cells x scale, one case, 1,000 surface gauges
  b) linear tetrahedral solid, 300,000 cells x scale, XDMF/HDF5 series of 1,000 x scale steps
  c) 100,000 x scale gauge points on the case (a) model, no placement band
  d) quad shell of 500,000 x scale cells with top and bottom arrays (recorded, no target)

Disk: case (b) writes about 2.7 GB at scale 1 (6 strain components per node per step, float64);
about 30 MB at the default scale 0.05. Run:  python benchmarks/run.py --scale 0.05
"""

from __future__ import annotations

import argparse
import os
import resource
import shutil
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))


def peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


class Clock:
    def __init__(self) -> None:
        self.rows: list[tuple[str, str, float, float]] = []

    def __call__(self, case: str, stage: str):
        clock = self

        class _T:
            def __enter__(self):
                self.t = time.perf_counter()

            def __exit__(self, *exc):
                clock.rows.append((case, stage, time.perf_counter() - self.t, peak_mb()))
        return _T()


def tet_block(n_cells: int, quadratic: bool):
    """A block of Kuhn tetrahedra with about n_cells cells (6 per hexahedron)."""
    from conftest import solid_mesh

    side = max(2, round((n_cells / 6 / 2) ** (1 / 3)))
    mesh = solid_mesh("tetra10" if quadratic else "tetra", n=(2 * side, side, side),
                      size=(200.0, 100.0, 100.0))
    return mesh


def strain_field(x: np.ndarray, scale: float = 1.0) -> np.ndarray:
    e = np.zeros((len(x), 6))
    e[:, 0] = 1e-3 * scale * (1 + x[:, 0] / 200)
    e[:, 1] = -0.3 * e[:, 0]
    e[:, 2] = -0.3 * e[:, 0]
    e[:, 3] = 2e-4 * scale * np.sin(x[:, 1] / 30)
    return e


def top_gauges(n: int, rng: np.random.Generator, lo=(5, 5), hi=(195, 95), z=100.0) -> pd.DataFrame:
    th = rng.uniform(0, np.pi, n)
    return pd.DataFrame({"gauge": [f"G{i}" for i in range(n)], "x": rng.uniform(lo[0], hi[0], n),
                         "y": rng.uniform(lo[1], hi[1], n), "z": z, "dir_x": np.cos(th),
                         "dir_y": np.sin(th), "dir_z": 0.0, "length": 3.0, "kt": 0.01})


def baseline_probe(grid, fields: list[np.ndarray], gauges: pd.DataFrame) -> np.ndarray:
    """The analyst's script: per step attach the array, probe the centres, project."""
    import pyvista as pv

    pts = pv.PolyData(gauges[["x", "y", "z"]].to_numpy(float) - [0, 0, 1e-6])
    d = gauges[["dir_x", "dir_y", "dir_z"]].to_numpy(float)
    out = []
    for f in fields:
        grid.point_data["E"] = f
        s = pts.sample(grid)["E"]
        e = np.zeros((len(s), 3, 3))
        e[:, 0, 0], e[:, 1, 1], e[:, 2, 2] = s[:, 0], s[:, 1], s[:, 2]
        e[:, 0, 1] = e[:, 1, 0] = s[:, 3] / 2
        out.append(np.einsum("gi,gij,gj->g", d, e, d))
    return np.array(out)


CHILD = """
import sys, numpy as np, pandas as pd
sys.path.insert(0, {bench!r})
from run import top_gauges
from correlate.config import Case
from correlate.fields import read_field
from correlate.io.gauges import validate_gauges
from correlate.io.model import open_model
from correlate.locate import Locator, build_surface
from correlate.predict import build_operator, evaluate_rows
def hwm():
    # VmHWM of this process image (ru_maxrss survives exec on Linux and would carry the parent's)
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return float(line.split()[1])
base = hwm()
src = open_model({path!r})
g = validate_gauges(top_gauges(1000, np.random.default_rng(1)).astype(str), source="bench")
op = build_operator(src.mesh, g, position_tol=1.0, angle_tol=2.0, snap_tol=1.0,
                    locator=Locator(src.mesh, build_surface(src.mesh)))
steps = {steps}
for k in (range(steps) if steps else [None]):
    evaluate_rows(op, read_field(src, Case("c", "strain", "E", None), time_index=k))
peak = hwm()
m = src.mesh
arrays = m.points.nbytes + sum(c.nbytes for _, c in m.blocks)
print(f"{{base / 1024:.0f}} {{peak / 1024:.0f}} {{arrays / 2**20:.0f}}")
"""


def child_peak(path: Path, steps: int = 0) -> tuple[float, float, float]:
    """Peak memory of correlate alone on a file, in a fresh process: (start, peak, mesh) MB."""
    import subprocess

    code = CHILD.format(bench=str(Path(__file__).resolve().parent), path=str(path), steps=steps)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    start, peak, mesh = (float(v) for v in out.stdout.split()[-3:])
    return start, peak, mesh


def case_a(clock: Clock, folder: Path, scale: float, rng) -> None:
    import meshio
    import pyvista as pv

    from correlate.config import Case
    from correlate.fields import read_field
    from correlate.io.gauges import validate_gauges
    from correlate.io.model import open_model
    from correlate.locate import Locator, build_surface
    from correlate.predict import build_operator, evaluate_rows

    mesh = tet_block(int(1_000_000 * scale), quadratic=True)
    path = folder / "a.vtu"
    meshio.write(path, meshio.Mesh(mesh.points, [("tetra10", mesh.blocks[0][1])],
                                   point_data={"E": strain_field(mesh.points)}))
    print(f"case a: {mesh.n_cells} tetra10 cells, {len(mesh.points)} nodes, "
          f"{path.stat().st_size / 1e6:.0f} MB")
    with clock("a", "floor: meshio read"):
        meshio.read(path)
    gauges = validate_gauges(top_gauges(1000, rng).astype(str), source="bench")
    for band in (False, True):
        tag = "band" if band else "no band"
        with clock("a", f"correlate read ({tag})"):
            src = open_model(path)
        with clock("a", f"correlate locate+operator ({tag})"):
            loc = Locator(src.mesh, build_surface(src.mesh))
            op = build_operator(src.mesh, gauges, position_tol=1.0 if band else 0.0,
                                angle_tol=2.0 if band else 0.0, snap_tol=1.0, band=band,
                                locator=loc)
        with clock("a", f"correlate evaluate ({tag})"):
            evaluate_rows(op, read_field(src, Case("c", "strain", "E", None)))
    with clock("a", "baseline: read + sample"):
        m = meshio.read(path)
        grid = pv.from_meshio(m)
        baseline_probe(grid, [m.point_data["E"]], gauges)
    start, peak, mesh_mb = child_peak(path)
    field_mb = m.point_data["E"].nbytes / 2**20
    print(f"case a memory (fresh process, band): start {start:.0f} MB, peak {peak:.0f} MB; mesh "
          f"arrays {mesh_mb:.0f} MB + strain array {field_mb:.0f} MB")


def case_b(clock: Clock, folder: Path, scale: float, rng) -> None:
    import meshio
    import pyvista as pv

    from correlate.config import Case
    from correlate.fields import read_field
    from correlate.io.gauges import validate_gauges
    from correlate.io.model import open_model
    from correlate.locate import Locator, build_surface
    from correlate.predict import build_operator, evaluate_rows

    mesh = tet_block(int(300_000 * scale), quadratic=False)
    n_steps = max(10, int(1000 * scale))
    base = strain_field(mesh.points)
    cwd = os.getcwd()
    os.chdir(folder)
    try:
        with meshio.xdmf.TimeSeriesWriter("b.xdmf") as w:
            w.write_points_cells(mesh.points, [("tetra", mesh.blocks[0][1])])
            for k in range(n_steps):
                w.write_data(float(k), point_data={"E": base * (1 + 0.001 * k)})
    finally:
        os.chdir(cwd)
    size = sum(p.stat().st_size for p in folder.glob("b.*")) / 1e6
    print(f"case b: {mesh.n_cells} tetra cells, {n_steps} steps, {size:.0f} MB")
    with clock("b", "floor: geometry + one step"):
        r = meshio.xdmf.TimeSeriesReader(str(folder / "b.xdmf"))
        r.read_points_cells()
        r.read_data(0)
    gauges = validate_gauges(top_gauges(1000, rng).astype(str), source="bench")
    with clock("b", "correlate all steps"):
        src = open_model(folder / "b.xdmf")
        loc = Locator(src.mesh, build_surface(src.mesh))
        op = build_operator(src.mesh, gauges, snap_tol=1.0, band=False, locator=loc)
        for k in range(n_steps):
            evaluate_rows(op, read_field(src, Case("c", "strain", "E", None), time_index=k))
    start, peak, mesh_mb = child_peak(folder / "b.xdmf", steps=n_steps)
    print(f"case b memory (fresh process, all steps): start {start:.0f} MB, peak {peak:.0f} MB; "
          f"mesh arrays {mesh_mb:.0f} MB, one step {base.nbytes / 2**20:.0f} MB")
    with clock("b", "baseline all steps"):
        r = meshio.xdmf.TimeSeriesReader(str(folder / "b.xdmf"))
        pts, cells = r.read_points_cells()
        grid = pv.from_meshio(meshio.Mesh(pts, cells))
        for k in range(n_steps):
            _, pdata, _ = r.read_data(k)
            baseline_probe(grid, [pdata["E"]], gauges)


def case_c(clock: Clock, folder: Path, scale: float, rng) -> None:
    from correlate.config import Case
    from correlate.fields import read_field
    from correlate.io.gauges import validate_gauges
    from correlate.io.model import open_model
    from correlate.locate import Locator, build_surface
    from correlate.predict import build_operator, evaluate_rows

    src = open_model(folder / "a.vtu")
    n = max(1000, int(100_000 * scale))
    gauges = top_gauges(n, rng)
    gauges["length"] = 0.0
    gauges = validate_gauges(gauges.astype(str), source="bench")
    print(f"case c: {n} gauge points on case a's model")
    with clock("c", "correlate locate+evaluate"):
        loc = Locator(src.mesh, build_surface(src.mesh))
        op = build_operator(src.mesh, gauges, snap_tol=1.0, band=False, locator=loc)
        evaluate_rows(op, read_field(src, Case("c", "strain", "E", None)))


def case_d(clock: Clock, folder: Path, scale: float, rng) -> None:
    """A flat quad shell panel at z = 5 (not a plane model) with top and bottom arrays."""
    import meshio

    from correlate.config import Case
    from correlate.fields import read_field
    from correlate.io.gauges import validate_gauges
    from correlate.io.model import open_model
    from correlate.locate import Locator, build_surface
    from correlate.predict import build_operator, evaluate_rows

    n = max(10, round((500_000 * scale / 2) ** 0.5))
    xs, ys = np.linspace(0, 400, 2 * n + 1), np.linspace(0, 200, n + 1)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    pts = np.c_[X.ravel(), Y.ravel(), np.full(X.size, 5.0)]
    nid = np.arange(len(pts)).reshape(X.shape)
    quads = np.stack([nid[:-1, :-1].ravel(), nid[1:, :-1].ravel(), nid[1:, 1:].ravel(),
                      nid[:-1, 1:].ravel()], axis=1)
    top = strain_field(pts)
    path = folder / "d.vtu"
    meshio.write(path, meshio.Mesh(pts, [("quad", quads)], point_data={"E_top": top,
                                                                       "E_bot": -top}))
    print(f"case d: {len(quads)} quad shell cells")
    with clock("d", "floor: meshio read"):
        meshio.read(path)
    g = top_gauges(1000, rng, lo=(5, 5), hi=(395, 195), z=5.0)
    g["face"] = np.where(np.arange(len(g)) % 2, "top", "bottom")
    gauges = validate_gauges(g.astype(str), source="bench")
    with clock("d", "correlate read+locate+evaluate (band)"):
        src = open_model(path)
        loc = Locator(src.mesh, build_surface(src.mesh))
        op = build_operator(src.mesh, gauges, position_tol=1.0, angle_tol=2.0, snap_tol=1.0,
                            locator=loc)
        evaluate_rows(op, read_field(src, Case("c", "strain", {"top": "E_top",
                                                               "bottom": "E_bot"}, None)))


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--scale", type=float, default=0.05)
    p.add_argument("--cases", default="abcd")
    args = p.parse_args()
    rng = np.random.default_rng(1)
    clock = Clock()
    folder = Path(tempfile.mkdtemp(prefix="correlate-bench-"))
    t0 = time.perf_counter()
    import correlate  # noqa: F401
    print(f"import correlate: {time.perf_counter() - t0:.2f} s; scratch folder {folder}")
    try:
        for name in args.cases:
            {"a": case_a, "b": case_b, "c": case_c, "d": case_d}[name](clock, folder, args.scale, rng)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    table = pd.DataFrame(clock.rows, columns=["case", "stage", "seconds", "peak_MB"])
    print(table.to_string(index=False, float_format=lambda v: f"{v:.2f}"))


if __name__ == "__main__":
    main()
