"""Benchmarks of correlate at scale, side by side with a floor and a straightforward baseline.

Generates its own cases in a scratch folder (deleted afterwards), runs them, and prints a table of
stage times and peak memory. Figures are measured in the same run:

1. floor      - meshio (or h5py) reading the model geometry and one result array, nothing else;
2. correlate  - `predict` (in this process: what the command does before writing, best of three
                for case a) and `run` with the report (the command line in a fresh process, with its
                --timings stage table; process start-up measured apart and excluded);
3. baseline   - what an analyst would script: for each step read the step's array, attach it to the
                mesh, probe the gauge points with pyvista's `sample`, project in numpy.

Cases (scaled by --scale; 1.0 is the full size of the performance issue):
  a) quadratic tetrahedral solid, 1,000,000 cells x scale, one case, 1,000 surface gauges
  b) linear tetrahedral solid, 300,000 cells x scale, XDMF/HDF5 series of 1,000 x scale steps
  c) 100,000 x scale gauge points on the case (a) model, no placement band
  d) quad shell of 500,000 x scale cells with top and bottom arrays (recorded, no target)
  r) a test record of 10,000 x scale steps x 1,000 channels, read from CSV and from Parquet

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
        self.notes: list[str] = []

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
    from builders import solid_mesh

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
import sys
from correlate.readers.study import read_study
from correlate.model_readings.model import prepare
from correlate.model_readings.table import predict_table
def hwm():
    # VmHWM of this process image (ru_maxrss survives exec on Linux and would carry the parent's)
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return float(line.split()[1])
base = hwm()
model = prepare(read_study({study!r}))
table = predict_table(model)
peak = hwm()
m = model.operator.mesh
arrays = m.points.nbytes + sum(c.nbytes for _, c in m.blocks)
size = table.memory_usage(deep=True).sum()
print(f"{{base / 1024:.0f}} {{peak / 1024:.0f}} {{arrays / 2**20:.0f}} {{size / 2**20:.0f}}")
"""


def child_peak(study: Path) -> tuple[float, float, float, float]:
    """Peak memory of `correlate predict`'s work on a study, in a fresh process: (start, peak,
    mesh arrays, the model_readings table) MB."""
    import subprocess

    code = CHILD.format(study=str(study))
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    start, peak, mesh, table = (float(v) for v in out.stdout.split()[-4:])
    return start, peak, mesh, table


REPEAT = 3  # case (a): floor and predict each run this many times; the table gives min and max


def write_study(folder: Path, name: str, model: str, *, band: bool, readings: bool,
                series: bool = False) -> Path:
    """A study over the benchmark model: one case 'c' (array E), gauges.csv beside it."""
    text = (f'title = "benchmark (generated)"\n[model]\nfile = "{model}"\nlength_unit = "mm"\n'
            '[[case]]\nname = "c"\nstrain = "E"\ncomponents = ["xx", "yy", "zz", "xy", "yz", "xz"]\n'
            + ('time_index = "all"\n' if series else "") +
            '[material]\nE = 70000.0\nnu = 0.33\n'
            f'[gauges]\nfile = "gauges.csv"\nposition_tol = 1.0\nangle_tol = 2.0\nsnap_tol = 1.0\n'
            f'band = {"true" if band else "false"}\n')
    if readings:
        text += ('[readings]\nfile = "readings.csv"\nzero = "first"\n'
                 '[[load]]\ncolumn = "F_kN"\ncase = "c"\nreference = 10.0\n'
                 '[criteria]\nrelative = 0.10\nabsolute_ue = 20.0\n')
    path = folder / name
    path.write_text(text)
    return path


def timed_predict(study_path: Path) -> tuple[float, list[tuple[int, str, float]], pd.DataFrame]:
    """What `correlate predict` does before writing: total seconds, stage times, the table."""
    from correlate.core import progress
    from correlate.model_readings.model import prepare
    from correlate.model_readings.table import predict_table
    from correlate.readers.study import read_study

    progress.reset_timings()
    t = time.perf_counter()
    table = predict_table(prepare(read_study(study_path)))
    return time.perf_counter() - t, progress.timings(), table


def timed_command(args: list[str]) -> tuple[float, list[tuple[int, str, float]]]:
    """Run the command line in a fresh process; wall seconds and its --timings stage table."""
    import subprocess

    t = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "correlate", "--quiet", "--timings", *args],
                         capture_output=True, text=True)
    wall = time.perf_counter() - t
    if out.returncode != 0:
        raise RuntimeError(f"correlate {' '.join(args)} failed:\n{out.stderr[-2000:]}")
    lines = out.stderr.splitlines()
    rows = []
    for line in lines[lines.index("stage times (seconds):") + 1:]:
        label, seconds = line.rsplit(None, 1)
        rows.append(((len(line) - len(line.lstrip())) // 2 - 1, label.strip(), float(seconds)))
    return wall, rows


def start_up() -> float:
    """Seconds for a fresh process to start and import the command line (reported apart)."""
    import subprocess

    t = time.perf_counter()
    subprocess.run([sys.executable, "-c", "import correlate.commands.cli"], check=True)
    return time.perf_counter() - t


def case_a(clock: Clock, folder: Path, scale: float, rng) -> None:
    import meshio
    import pyvista as pv

    mesh = tet_block(int(1_000_000 * scale), quadratic=True)
    path = folder / "a.vtu"
    meshio.write(path, meshio.Mesh(mesh.points, [("tetra10", mesh.blocks[0][1])],
                                   point_data={"E": strain_field(mesh.points)}))
    print(f"case a: {mesh.n_cells} tetra10 cells, {len(mesh.points)} nodes, "
          f"{path.stat().st_size / 1e6:.0f} MB")
    gauges = top_gauges(1000, rng)
    gauges.to_csv(folder / "gauges.csv", index=False)
    floors = []
    for _ in range(REPEAT):
        with clock("a", "floor: meshio read"):
            meshio.read(path)
        floors.append(clock.rows[-1][2])
    clock.rows[-REPEAT:] = [("a", "floor: meshio read (min, max)", min(floors), clock.rows[-1][3])]
    clock.notes.append(f"a: floor {min(floors):.2f} to {max(floors):.2f} s over {REPEAT} reads")
    table = None
    for band in (False, True):
        tag = "band" if band else "no band"
        study = write_study(folder, f"study_{tag.replace(' ', '_')}.toml", "a.vtu", band=band,
                            readings=False)
        runs = [timed_predict(study) for _ in range(REPEAT)]
        best = min(runs, key=lambda r: r[0])
        for depth, stage, seconds in best[1]:
            clock.rows.append(("a", f"predict ({tag}): {'  ' * depth}{stage}", seconds, peak_mb()))
        totals = [r[0] for r in runs]
        clock.rows.append(("a", f"predict ({tag}) total (min)", min(totals), peak_mb()))
        clock.notes.append(f"a: predict {tag} {min(totals):.2f} to {max(totals):.2f} s = "
                           f"{min(totals) / min(floors):.2f} x the fastest floor read")
        table = best[2]
    # readings for `run`: the model's own prediction x 1.02 with 2 ue of noise, 11 steps
    pred = table.set_index("gauge")["predicted_ue"]
    load = np.linspace(0.0, 10.0, 11)
    data = np.outer(load / 10.0, pred.to_numpy()) * 1.02 + rng.normal(0, 2.0, (11, len(pred)))
    readings = pd.DataFrame(np.round(data, 2), columns=pred.index)
    readings.insert(0, "F_kN", load)
    readings.insert(0, "step", np.arange(11))
    readings.to_csv(folder / "readings.csv", index=False)
    study = write_study(folder, "study_run.toml", "a.vtu", band=True, readings=True)
    boot = start_up()
    wall, stages = timed_command(["run", str(study), "--out", str(folder / "run_a")])
    for depth, stage, seconds in stages:
        clock.rows.append(("a", f"run (band, report): {'  ' * depth}{stage}", seconds, np.nan))
    clock.rows.append(("a", "run (band, report) total, start-up excluded", wall - boot, np.nan))
    clock.notes.append(f"a: process start-up (python + import correlate.commands.cli) {boot:.2f} s")
    with clock("a", "baseline: read + sample"):
        m = meshio.read(path)
        grid = pv.from_meshio(m)
        baseline_probe(grid, [m.point_data["E"]], validate(gauges))
    start, peak, mesh_mb, _ = child_peak(folder / "study_band.toml")
    field_mb = m.point_data["E"].nbytes / 2**20
    print(f"case a memory (fresh process, band): start {start:.0f} MB, peak {peak:.0f} MB; mesh "
          f"arrays {mesh_mb:.0f} MB + strain array {field_mb:.0f} MB")


def validate(gauges: pd.DataFrame) -> pd.DataFrame:
    from correlate.readers.gauges import validate_gauges

    return validate_gauges(gauges.astype(str), source="bench")


def case_b(clock: Clock, folder: Path, scale: float, rng) -> None:
    import meshio
    import pyvista as pv

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
    gauges = top_gauges(1000, rng)
    gauges.to_csv(folder / "gauges.csv", index=False)
    study = write_study(folder, "study_b.toml", "b.xdmf", band=False, readings=False, series=True)
    seconds, stages, table = timed_predict(study)
    assert table["fe_index"].nunique() == n_steps
    for depth, stage, t in stages:
        clock.rows.append(("b", f"predict, all steps: {'  ' * depth}{stage}", t, peak_mb()))
    clock.rows.append(("b", "predict, all steps: total", seconds, peak_mb()))
    start, peak, mesh_mb, table_mb = child_peak(study)
    print(f"case b memory (fresh process, all steps): start {start:.0f} MB, peak {peak:.0f} MB; "
          f"mesh arrays {mesh_mb:.0f} MB, one step {base.nbytes / 2**20:.0f} MB, the "
          f"model_readings table ({len(table)} rows) {table_mb:.0f} MB")
    with clock("b", "baseline all steps"):
        r = meshio.xdmf.TimeSeriesReader(str(folder / "b.xdmf"))
        pts, cells = r.read_points_cells()
        grid = pv.from_meshio(meshio.Mesh(pts, cells))
        for k in range(n_steps):
            _, pdata, _ = r.read_data(k)
            baseline_probe(grid, [pdata["E"]], validate(gauges))
    clock.notes.append(f"b: baseline / predict = {clock.rows[-1][2] / seconds:.1f}")


def case_c(clock: Clock, folder: Path, scale: float, rng) -> None:
    from correlate.model_readings.evaluate import evaluate_rows
    from correlate.model_readings.operator import build_operator
    from correlate.readers.fields import read_field
    from correlate.readers.gauges import validate_gauges
    from correlate.readers.model import open_model
    from correlate.readers.study import Case

    src = open_model(folder / "a.vtu")
    n = max(1000, int(100_000 * scale))
    gauges = top_gauges(n, rng)
    gauges["length"] = 0.0
    gauges = validate_gauges(gauges.astype(str), source="bench")
    print(f"case c: {n} gauge points on case a's model")
    with clock("c", "correlate locate+evaluate"):
        op = build_operator(src.mesh, gauges, snap_tol=1.0, band=False)
        evaluate_rows(op, read_field(src, Case("c", "strain", "E", None)))


def case_d(clock: Clock, folder: Path, scale: float, rng) -> None:
    """A flat quad shell panel at z = 5 (not a plane model) with top and bottom arrays."""
    import meshio

    from correlate.model_readings.evaluate import evaluate_rows
    from correlate.model_readings.operator import build_operator
    from correlate.readers.fields import read_field
    from correlate.readers.gauges import validate_gauges
    from correlate.readers.model import open_model
    from correlate.readers.study import Case

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
        op = build_operator(src.mesh, gauges, position_tol=1.0, angle_tol=2.0, snap_tol=1.0)
        evaluate_rows(op, read_field(src, Case("c", "strain", {"top": "E_top",
                                                               "bottom": "E_bot"}, None)))


def case_r(clock: Clock, folder: Path, scale: float, rng) -> None:
    """A long test record: 10,000 x scale steps x 1,000 channels, as CSV and as Parquet."""
    from correlate.readers.readings import read_readings

    n_steps, n_ch = max(100, int(10_000 * scale)), 1000
    names = [f"SG{j:04d}" for j in range(n_ch)]
    data = np.round(rng.normal(0.0, 500.0, (n_steps, n_ch)), 2)
    frame = pd.DataFrame(data, columns=names)
    frame.insert(0, "F_kN", np.round(np.linspace(0.0, 10.0, n_steps), 4))
    frame.insert(0, "step", np.arange(n_steps))
    frame.to_csv(folder / "r.csv", index=False)
    frame.to_parquet(folder / "r.parquet", index=False)
    size = (folder / "r.csv").stat().st_size / 1e6
    print(f"case r: {n_steps} steps x {n_ch} channels, CSV {size:.0f} MB")
    gauges = {g: g for g in names}
    for kind, floor in (("csv", lambda p: pd.read_csv(p, engine="pyarrow")),
                        ("parquet", pd.read_parquet)):
        path = folder / f"r.{kind}"
        with clock("r", f"floor: pandas reads the {kind}"):
            floor(path)
        with clock("r", f"correlate read_readings ({kind}, all checks)"):
            got = read_readings(path, gauges=gauges, loads=("F_kN",))
        assert got.table.shape == (n_steps, n_ch + 3)


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--scale", type=float, default=0.05)
    p.add_argument("--cases", default="abcdr")
    args = p.parse_args()
    rng = np.random.default_rng(1)
    clock = Clock()
    folder = Path(tempfile.mkdtemp(prefix="correlate-bench-"))
    # case b's series is most of it: 6 doubles per node per step; the rest (a, d, r) under 0.3 GB
    need = (2.6 * ("b" in args.cases) + 0.3) * args.scale * 1e9
    free = shutil.disk_usage(folder).free
    print(f"scratch folder {folder}: needs about {need / 1e9:.2f} GB, {free / 1e9:.0f} GB free")
    if free < 1.2 * need:
        shutil.rmtree(folder, ignore_errors=True)
        sys.exit("not enough free disk for this scale; lower --scale or free some space")
    t0 = time.perf_counter()
    import correlate  # noqa: F401
    print(f"import correlate: {time.perf_counter() - t0:.2f} s")
    try:
        for name in args.cases:
            {"a": case_a, "b": case_b, "c": case_c, "d": case_d, "r": case_r}[name](clock, folder, args.scale, rng)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    table = pd.DataFrame(clock.rows, columns=["case", "stage", "seconds", "peak_MB"])
    with pd.option_context("display.max_colwidth", 90, "display.width", 200):
        print(table.to_string(index=False, float_format=lambda v: f"{v:.2f}",
                              formatters={"stage": lambda v: f"{v:<80}"}))
    for note in clock.notes:
        print(note)


if __name__ == "__main__":
    main()
