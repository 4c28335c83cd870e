"""Benchmark of the validation budget: its cost in `run`, and memory with coarser meshes.

Generates its cases in a scratch folder (deleted afterwards) and prints, from the same run:

u) 1,000 gauges x 1,000 steps (two runs of 500 steps, so the Type A term is computed), one
   case on a linear tetrahedral block: `correlate run --no-report` without and with an
   `[uncertainty]` table (every measurement term, the placement band, an exponent input), each
   in a fresh process, best of REPEAT; the `validation budget` stage of `--timings`; and a
   baseline: the same budget's arithmetic written as plain numpy expressions over the (g, s)
   arrays (no checks, no tables), the floor of what the budget must compute.
m) three quadratic tetrahedral meshes of 1,000,000 x scale cells each (the study's model and two
   coarser ones of `[numerical]`; same size here, different fields): peak memory of the whole
   correlation in a fresh process with and without `[numerical]`. The meshes are read and
   evaluated one after the other, so the peak with them should exceed the peak without by about
   one mesh's footprint, not two.

Run:  python benchmarks/budget.py --scale 0.05   (about a minute; --scale 1.0 is the full size)
"""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from run import start_up, strain_field, tet_block, timed_command, top_gauges

REPEAT = 3
UNCERTAINTY = """
[uncertainty]
coverage = 2.0
gauge_factor = 0.0058
transverse = 0.0012
daq_ue = 2.0
daq_relative = 0.00058
load = 0.0025
placement = true
[[uncertainty.input]]
name = "E"
relative = 0.02
exponent = -1.0
"""


def write_mesh(path: Path, mesh, factor: float = 1.0) -> None:
    import meshio

    ctype, cells = mesh.blocks[0]
    meshio.write(path, meshio.Mesh(mesh.points, [(ctype, cells)],
                                   point_data={"E": strain_field(mesh.points, factor)}))


def study_text(model: str) -> str:
    return (f'title = "budget benchmark (generated)"\n[model]\nfile = "{model}"\n'
            'length_unit = "mm"\n[[case]]\nname = "c"\nstrain = "E"\n'
            'components = ["xx", "yy", "zz", "xy", "yz", "xz"]\n'
            '[material]\nE = 70000.0\nnu = 0.33\n'
            '[gauges]\nfile = "gauges.csv"\nposition_tol = 1.0\nangle_tol = 2.0\nsnap_tol = 1.0\n'
            '[readings]\nfile = "readings.csv"\nzero = "first"\n'
            '[[load]]\ncolumn = "F_kN"\ncase = "c"\nreference = 10.0\n'
            '[criteria]\nrelative = 0.10\nabsolute_ue = 20.0\n')


def model_readings(study: Path) -> pd.Series:
    """The model's reading of every gauge at the reference load (what `predict` writes); the
    readings file the study names is written afterwards (a header stands in for it here)."""
    from correlate.model_readings.model import prepare
    from correlate.model_readings.table import predict_table
    from correlate.readers.study import read_study

    (study.parent / "readings.csv").write_text("step,F_kN\n")
    table = predict_table(prepare(read_study(study)))
    return table.set_index("gauge")["predicted_ue"]


def readings(gauges: pd.DataFrame, predicted: pd.Series, steps: int, rng) -> pd.DataFrame:
    """Two runs of steps/2 steps each, the same ramp of loads: readings 1.02 x the model plus
    3 ue of noise, so that every gauge passes (no diagnosis search)."""
    half = steps // 2
    load = np.r_[0.0, np.linspace(0.5, 10.0, half - 1)]
    frames = []
    for run in (1, 2):
        data = np.outer(load / 10.0, predicted.loc[gauges["gauge"]].to_numpy()) * 1.02
        frame = pd.DataFrame(np.round(data + rng.normal(0, 3, data.shape), 2),
                             columns=list(gauges["gauge"]))
        frame.insert(0, "F_kN", load)
        frame.insert(0, "sequence", run)
        frame.insert(0, "step", np.arange(half) + 1)
        frames.append(frame)
    return pd.concat(frames, ignore_index=True)


def baseline_budget(g: int, s: int, rng) -> float:
    """The budget's arithmetic as plain numpy over (g, s): seconds, best of REPEAT."""
    D, S = rng.normal(0, 500, (g, s)), rng.normal(0, 500, (g, s))
    e_a, e_t, low, high = S, -0.3 * S, S - 20, S + 20
    kt, nu0 = rng.uniform(0, 0.02, (g, 1)), 0.285
    best = np.inf
    for _ in range(REPEAT):
        t = time.perf_counter()
        slope = (e_t + nu0 * e_a) / (1 - nu0 * kt) ** 2
        u_d2 = ((0.0058 * D) ** 2 + (slope * 0.0012) ** 2 + 2.0**2 + (0.00058 * D) ** 2
                + ((high - low) / (2 * np.sqrt(3))) ** 2)
        u_in2 = (0.02 * S) ** 2 + (0.0025 * S) ** 2
        u_val = np.sqrt(u_d2 + u_in2)
        E = S - D
        allowed = np.maximum(0.1 * np.abs(S), 20.0)
        np.where(np.abs(E) > 2 * u_val, 0, np.where(2 * u_val > allowed, 1, 2))
        best = min(best, time.perf_counter() - t)
    return best


def stage(rows: list[tuple[int, str, float]], label: str) -> float:
    return sum(sec for _, name, sec in rows if name.startswith(label))


def case_u(folder: Path, rng, repeat: int) -> list[str]:
    g, s = 1000, 1000
    mesh = tet_block(60_000, quadratic=False)
    write_mesh(folder / "block.vtu", mesh)
    gauges = top_gauges(g, rng)
    gauges.to_csv(folder / "gauges.csv", index=False)
    (folder / "plain.toml").write_text(study_text("block.vtu"))
    predicted = model_readings(folder / "plain.toml")
    readings(gauges, predicted, s, rng).to_csv(folder / "readings.csv", index=False)
    (folder / "budget.toml").write_text(study_text("block.vtu") + UNCERTAINTY)
    times: dict[str, list[float]] = {"plain": [], "budget": []}
    budget_stage: list[float] = []
    written: list[float] = []
    gauges_csv: dict[str, list[float]] = {"plain": [], "budget": []}
    for k in range(repeat):
        for name in ("plain", "budget"):
            wall, rows = timed_command(["run", str(folder / f"{name}.toml"), "--out",
                                        str(folder / f"out_{name}_{k}"), "--no-report"])
            times[name].append(wall)
            if name == "budget":
                budget_stage.append(stage(rows, "validation budget"))
                written.append(stage(rows, "writing uncertainty.csv"))
            gauges_csv[name].append(stage(rows, "writing gauges.csv"))
    up = start_up()
    plain, budget = min(times["plain"]) - up, min(times["budget"]) - up
    base = baseline_budget(g, s, rng)
    return [f"u  {g} gauges x {s} steps, run --no-report without [uncertainty]: "
            f"{plain:.2f} s (best of {repeat}; runs {', '.join(f'{t - up:.2f}' for t in times['plain'])})",
            f"u  with [uncertainty]: {budget:.2f} s (runs "
            f"{', '.join(f'{t - up:.2f}' for t in times['budget'])}); "
            f"added {budget - plain:+.2f} s = {100 * (budget - plain) / plain:+.1f} % of run",
            f"u  validation budget stage: {min(budget_stage):.2f} s (of {', '.join(f'{v:.2f}' for v in budget_stage)}); "
            f"baseline (the arithmetic alone, plain numpy): {base:.3f} s",
            f"u  writing gauges.csv: {min(gauges_csv['plain']):.2f} s without, "
            f"{min(gauges_csv['budget']):.2f} s with the five budget columns; uncertainty.csv "
            f"{min(written):.2f} s",
            f"u  process start-up excluded: {up:.2f} s"]


CHILD = """
from correlate.readers.study import read_study
from correlate.comparison.correlation import correlate_study
def hwm():
    for line in open("/proc/self/status"):
        if line.startswith("VmHWM:"):
            return float(line.split()[1]) / 1024
base = hwm()
import time
t = time.perf_counter()
corr = correlate_study(read_study({study!r}))
print(f"{{base:.0f}} {{hwm():.0f}} {{time.perf_counter() - t:.1f}}")
"""


def child(study: Path) -> tuple[float, float, float]:
    out = subprocess.run([sys.executable, "-c", CHILD.format(study=str(study))],
                         capture_output=True, text=True, check=True)
    start, peak, seconds = (float(v) for v in out.stdout.split()[-3:])
    return start, peak, seconds


def case_m(folder: Path, scale: float, rng) -> list[str]:
    mesh = tet_block(int(1_000_000 * scale), quadratic=True)
    for name, factor in (("fine.vtu", 1.0), ("medium.vtu", 1.01), ("coarse.vtu", 1.03)):
        write_mesh(folder / name, mesh, factor)
    gauges = top_gauges(1000, rng)
    gauges.to_csv(folder / "gauges.csv", index=False)
    base = study_text("fine.vtu").replace("snap_tol = 1.0\n", "snap_tol = 1.0\nband = false\n")
    (folder / "one.toml").write_text(base)
    predicted = model_readings(folder / "one.toml")
    readings(gauges, predicted, 20, rng).to_csv(folder / "readings.csv", index=False)
    (folder / "one.toml").write_text(base + "[uncertainty]\n")
    (folder / "three.toml").write_text(
        base + '[uncertainty]\n[numerical]\nh = 1.0\nmeshes = [ { file = "medium.vtu", h = 2.0 },'
        ' { file = "coarse.vtu", h = 4.0 } ]\n')
    cells = sum(len(c) for _, c in mesh.blocks)
    one, three = child(folder / "one.toml"), child(folder / "three.toml")
    return [f"m  {cells:,} tetra10 cells per mesh, 1,000 gauges: peak memory (after imports "
            f"{one[0]:.0f} MB) with the study's mesh alone {one[1]:.0f} MB ({one[2]:.1f} s), with "
            f"two coarser meshes of the same size {three[1]:.0f} MB ({three[2]:.1f} s): "
            f"+{three[1] - one[1]:.0f} MB for two more meshes; one mesh's own footprint is about "
            f"{one[1] - one[0]:.0f} MB"]


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--scale", type=float, default=0.05, help="mesh size of case m (1.0: 1M cells)")
    p.add_argument("--cases", default="um")
    p.add_argument("--repeat", type=int, default=REPEAT, help="runs of each case-u command")
    args = p.parse_args()
    rng = np.random.default_rng(13)
    folder = Path(tempfile.mkdtemp(prefix="correlate-budget-"))
    lines: list[str] = []
    try:
        if "u" in args.cases:
            (folder / "u").mkdir()
            lines += case_u(folder / "u", rng, args.repeat)
        if "m" in args.cases:
            (folder / "m").mkdir()
            lines += case_m(folder / "m", args.scale, rng)
    finally:
        shutil.rmtree(folder, ignore_errors=True)
    print("\n".join(lines))


if __name__ == "__main__":
    main()
