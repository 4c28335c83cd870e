"""Benchmark of `correlate sweep`: variants on a shared mesh, one worker against two.

Generates its own cases in a scratch folder (deleted afterwards): a linear tetrahedral block of
300,000 x scale cells with one strain array, 50 surface gauges and 11 steps of readings, and
``--variants`` copies of it whose strain is scaled by a parameter k (the same mesh). Measured in
the same run, side by side:

1. floor      - meshio reading one variant file (geometry and its array), the read every task
                cannot avoid; the median over the variants' files; and the tool's partial read,
                in this process and in a worker process of a local cluster (the task's
                conditions: this process's heap is warm from building the files);
2. sweep      - `correlate sweep` in a fresh process with 1 and with 2 local workers (cluster
                start-up included; the per-variant time is the sweep's "correlating the variants"
                stage divided by the variants), ``--repeats`` alternating pairs, the median shown
                (these runs are not watched: the memory scan shares the two cores);
3. baseline   - the straightforward way: `correlate run --no-report` on each variant, one after
                another, each in a fresh process;
4. memory     - the peak resident memory of one worker process (read from /proc while a 1-
                and a 2-worker sweep of their own run: the largest worker); and one worker
                sampled every millisecond from inside (resident, private = resident less
                file-backed pages, and the file-backed libraries' pages), beside the target's
                one variant's arrays + the operator + 200 MB.
   plain        - the same task (``correlate_variant``) in 1 and 2 plain processes
                (``multiprocessing``, no Dask): what the two cores allow without a cluster.

5. other meshes - with ``--other-meshes N``: N variants each on a slightly different mesh (the
                gauges located per variant), swept with 1 worker, beside the same-mesh figure;
                and one variant's task called in this process for both kinds (no cluster).

Run:  python benchmarks/sweep.py --scale 0.1 --variants 16   (about a minute)
     python benchmarks/sweep.py --scale 1.0 --variants 32 --other-arrays --no-serial
                (variant files as a solver writes them: 12 arrays, the study uses 1; 2 GB of files)
The machine is shared with other developers: figures vary from run to run with their load.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from run import start_up, strain_field, tet_block, top_gauges, write_study

CORRELATE = [sys.executable, "-m", "correlate"]


def build(folder: Path, cells: int, n_variants: int, rng: np.random.Generator,
          other_arrays: bool = False) -> Path:
    """The base model, its study and readings, the variants and the sweep file.

    ``other_arrays``: every variant file also holds 11 arrays the study does not use (6 point
    arrays of 6, 6, 3, 3, 1, 1 components and 4 cell arrays of 6, 6, 3, 1), as a solver's result
    holds stresses, displacements and the like beside the strain: 12 arrays, 1 used.
    """
    import meshio

    from correlate.api import predict_readings

    mesh = tet_block(cells, quadratic=False)
    cells_ = [(t, c) for t, c in mesh.blocks]
    e = strain_field(mesh.points)
    base = meshio.Mesh(mesh.points, cells_, point_data={"E": e})
    meshio.write(folder / "base.vtu", base)
    gauges = top_gauges(50, rng)
    gauges.to_csv(folder / "gauges.csv", index=False)
    table = predict_readings(base, gauges, {"c": {"strain": "E", "components": [
        "xx", "yy", "zz", "xy", "yz", "xz"]}}, snap_tol=1.0)
    pred = table.set_index("gauge")["predicted_ue"]
    load = np.linspace(0.0, 10.0, 11)
    data = np.outer(load / 10.0, pred.to_numpy()) * 1.02 + rng.normal(0, 2.0, (11, len(pred)))
    readings = pd.DataFrame(np.round(data, 2), columns=pred.index)
    readings.insert(0, "F_kN", load)
    readings.insert(0, "step", np.arange(11))
    readings.to_csv(folder / "readings.csv", index=False)
    write_study(folder, "study.toml", "base.vtu", band=False, readings=True)
    extra_p, extra_c = {}, {}
    if other_arrays:
        extra_p = {f"other_p{j}": rng.normal(size=(len(mesh.points), w))
                   for j, w in enumerate((6, 6, 3, 3, 1, 1))}
        extra_c = {f"other_c{j}": [rng.normal(size=(mesh.n_cells, w))]
                   for j, w in enumerate((6, 6, 3, 1))}
    rows = ["name,file,k"]
    # k within 5 % of the readings (the model x 1.02): every gauge passes, no failure diagnosis
    for i, k in enumerate(np.linspace(0.97, 1.07, n_variants)):
        meshio.write(folder / f"v{i:03d}.vtu",
                     meshio.Mesh(mesh.points, cells_, point_data={"E": e * k, **extra_p},
                                 cell_data=extra_c))
        rows.append(f"v{i:03d},v{i:03d}.vtu,{k:.6g}")
    (folder / "variants.csv").write_text("\n".join(rows) + "\n")
    sweep = folder / "sweep.toml"
    sweep.write_text('study = "study.toml"\ntable = "variants.csv"\nparameters = ["k"]\n'
                     '[identify]\nparameters = ["k"]\nresponse = "linear"\n')
    return sweep


def build_other_meshes(folder: Path, cells: int, n_variants: int) -> Path:
    """Variants each on a slightly different mesh: the block stretched along x by 1 + 1e-4 i.

    The points differ, so each variant's mesh hash differs and its gauges are located anew; the
    gauges (5 to 195 mm along the 200 mm block) stay on the top face.
    """
    import meshio

    mesh = tet_block(cells, quadratic=False)
    cells_ = [(t, c) for t, c in mesh.blocks]
    rows = ["name,file,k"]
    for i, k in enumerate(np.linspace(0.97, 1.07, n_variants)):
        points = mesh.points * [1.0 + 1e-4 * (i + 1), 1.0, 1.0]
        meshio.write(folder / f"m{i:03d}.vtu", meshio.Mesh(points, cells_, point_data={
            "E": strain_field(points) * k}))
        rows.append(f"m{i:03d},m{i:03d}.vtu,{k:.6g}")
    (folder / "other_meshes.csv").write_text("\n".join(rows) + "\n")
    sweep = folder / "other_meshes.toml"
    sweep.write_text('study = "study.toml"\ntable = "other_meshes.csv"\nparameters = ["k"]\n')
    return sweep


def in_process(folder: Path, sweeps: list[str], n: int = 4) -> list[float]:
    """Median seconds of one variant's task, called in this process (no cluster), per sweep file.

    The same function a worker runs (``correlate_variant``), after the base model's gauges are
    located once: the same-mesh variants reuse them, the other-mesh ones locate their own.
    """
    import warnings

    from correlate.readers.study import read_study
    from correlate.variants.evaluate import correlate_variant, locate_base
    from correlate.variants.sweep_file import read_sweep

    study = read_study(folder / "study.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        located = locate_base(study)
        correlate_variant(study, read_sweep(folder / sweeps[0]).variants[0], located)  # warm-up
        out = []
        for name in sweeps:
            times = []
            for variant in read_sweep(folder / name).variants[:n]:
                t = time.perf_counter()
                result = correlate_variant(study, variant, located)
                times.append(time.perf_counter() - t)
                assert not result.failure, result.failure
            out.append(statistics.median(times))
    return out


def floor(folder: Path, n: int) -> tuple[float, float]:
    """Median seconds to read one variant file: with meshio (the whole file), and with the
    tool's own partial reader (geometry + the one array the study names, VTK's XML reader)."""
    import meshio

    from correlate.readers.named_arrays import read_named

    whole, named = [], []
    for i in range(n):
        t = time.perf_counter()
        meshio.read(folder / f"v{i:03d}.vtu")
        whole.append(time.perf_counter() - t)
        t = time.perf_counter()
        assert read_named(folder / f"v{i:03d}.vtu", {"E"}) is not None
        named.append(time.perf_counter() - t)
    return statistics.median(whole), statistics.median(named)


def _read_named_median(folder: str, n: int) -> float:
    """Median seconds of the tool's partial read over the variant files (run on a worker)."""
    from correlate.readers.named_arrays import read_named

    times = []
    for i in range(n):
        t = time.perf_counter()
        assert read_named(Path(folder) / f"v{i:03d}.vtu", {"E"}) is not None
        times.append(time.perf_counter() - t)
    return statistics.median(times)


def worker_floor(folder: Path, n: int) -> float:
    """The partial read's median in a worker process of a local cluster started as the sweep
    starts its own (``local_cluster``): the read in the task's conditions, where the
    benchmark's own process has a heap already warmed by building."""
    from dask.distributed import Client

    from correlate.variants.cluster import local_cluster

    cluster = local_cluster(1)
    client = Client(cluster)
    try:
        return float(client.submit(_read_named_median, str(folder), n, pure=False).result())
    finally:
        client.close()
        cluster.close()


def _start_sampler(dask_worker: object) -> None:
    """On a worker: sample its resident memory every millisecond from /proc/self/statm
    (resident and file-backed pages; their difference is the process's private memory)."""
    page = os.sysconf("SC_PAGE_SIZE") / 1e6
    peak = {"rss": 0.0, "private": 0.0, "shared_at_end": 0.0}
    stop = threading.Event()

    def sample() -> None:
        while not stop.wait(0.001):
            resident, shared = (int(v) for v in Path("/proc/self/statm").read_text().split()[1:3])
            peak["rss"] = max(peak["rss"], resident * page)
            peak["private"] = max(peak["private"], (resident - shared) * page)
            peak["shared_at_end"] = shared * page

    thread = threading.Thread(target=sample, daemon=True)
    dask_worker.memory_sampler = (peak, stop, thread)   # kept on the worker between calls
    thread.start()


def _stop_sampler(dask_worker: object) -> dict:
    peak, stop, thread = dask_worker.memory_sampler
    stop.set()
    thread.join()
    return dict(peak)


def worker_memory(folder: Path, n: int) -> dict[str, float]:
    """Peak memory [MB] of one worker of a local cluster started as the sweep starts its own,
    sampled every millisecond inside the worker from before its imports to after n variants
    run through the sweep's own ``compute_variants``: resident (as /proc's VmHWM counts it),
    private (resident less file-backed pages: what the process allocated itself) and the
    file-backed part at the end (the libraries' code and data mapped from their files, the same
    pages for every worker on a machine). Beside them what the target counts: one variant's
    decoded arrays and the located operator (pickled, as it is scattered)."""
    import pickle
    import warnings

    from dask.distributed import Client

    from correlate.readers.named_arrays import read_named
    from correlate.variants.cluster import compute_variants, local_cluster
    from correlate.variants.evaluate import locate_base
    from correlate.variants.sweep_file import read_sweep

    sweep = read_sweep(folder / "sweep.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        located = locate_base(sweep.study)
    part = read_named(folder / "v000.vtu", {"E"})
    arrays = (part.points.nbytes + sum(c.nbytes for _, c in part.cells)
              + sum(a.nbytes for a in part.point_data.values())) / 1e6
    operator = len(pickle.dumps(located, protocol=5)) / 1e6
    cluster = local_cluster(1)
    client = Client(cluster)
    try:
        client.run(_start_sampler)
        failed: list[str] = []
        compute_variants(sweep.study, sweep.variants[:n], located,
                         lambda v, r: failed.append(r.failure) if r.failure else None,
                         scheduler=cluster.scheduler_address)
        peak = next(iter(client.run(_stop_sampler).values()))
    finally:
        client.close()
        cluster.close()
    if failed:
        raise RuntimeError(f"a variant failed in the memory measurement: {failed[0]}")
    return {**peak, "arrays": arrays, "operator": operator}


_PLAIN: dict = {}


def _plain_init(folder: str) -> None:
    """A plain process's set-up: the base model's gauges located, the test read, one warm-up."""
    import warnings

    from correlate.variants.evaluate import correlate_variant, locate_base
    from correlate.variants.sweep_file import read_sweep

    warnings.simplefilter("ignore")
    sweep = read_sweep(Path(folder) / "sweep.toml")
    _PLAIN.update(sweep=sweep, located=locate_base(sweep.study))
    correlate_variant(sweep.study, sweep.variants[0], _PLAIN["located"])


def _plain_task(i: int) -> str:
    from correlate.variants.evaluate import correlate_variant

    sweep = _PLAIN["sweep"]
    return correlate_variant(sweep.study, sweep.variants[i], _PLAIN["located"]).failure


def plain_processes(folder: Path, n: int) -> tuple[float, float]:
    """Seconds for the n variants' tasks in 1 and in 2 plain processes (``multiprocessing``, no
    Dask), after each process's set-up: what the two cores allow without a cluster's traffic."""
    from multiprocessing import get_context

    out = []
    for procs in (1, 2):
        with get_context("spawn").Pool(procs, initializer=_plain_init,
                                       initargs=(str(folder),)) as pool:
            pool.map(_plain_task, range(procs))
            t = time.perf_counter()
            failures = pool.map(_plain_task, range(n), chunksize=1)
            out.append(time.perf_counter() - t)
        if any(failures):
            raise RuntimeError(f"a variant failed in a plain process: {next(filter(None, failures))}")
    return out[0], out[1]


def _children_rss(pid: int) -> dict[int, float]:
    """Peak resident memory [MB] of every descendant process of ``pid`` (from /proc)."""
    parent, peak = {}, {}
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            parent[int(entry.name)] = int((entry / "stat").read_text().rsplit(")", 1)[1].split()[1])
            hwm = [ln for ln in (entry / "status").read_text().splitlines()
                   if ln.startswith("VmHWM:")]
        except (OSError, IndexError, ValueError):
            continue
        if hwm:
            peak[int(entry.name)] = int(hwm[0].split()[1]) / 1024.0
    out = {}
    for p in peak:
        q = parent.get(p)
        while q is not None and q != pid:
            q = parent.get(q)
        if q == pid:
            out[p] = peak[p]
    return out


def timed_sweep(sweep: Path, out: Path, workers: int, watch: bool = True
                ) -> tuple[float, float, float]:
    """Wall time, the 'correlating the variants' stage and the largest worker peak [MB] (NaN
    unless ``watch``: the /proc scan every 0.2 s runs on the same two cores as the workers)."""
    cmd = CORRELATE + ["--quiet", "--timings", "sweep", str(sweep), "--out", str(out),
                       "--workers", str(workers), "--force"]
    t = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True)
    peaks: dict[int, float] = {}

    def scan() -> None:
        while watch and proc.poll() is None:
            for p, mb in _children_rss(proc.pid).items():
                peaks[p] = max(peaks.get(p, 0.0), mb)
            time.sleep(0.2)

    watcher = threading.Thread(target=scan)
    watcher.start()
    _, err = proc.communicate()
    watcher.join()
    wall = time.perf_counter() - t
    if proc.returncode != 0:
        raise RuntimeError(f"sweep failed: {err[-2000:]}")
    stage = next(float(line.split()[-1]) for line in err.splitlines()
                 if line.strip().startswith("correlating the variants"))
    return wall, stage, max(peaks.values(), default=float("nan"))


def serial_runs(folder: Path, n: int) -> float:
    text = (folder / "study.toml").read_text()
    t = time.perf_counter()
    for i in range(n):
        one = folder / f"study_v{i:03d}.toml"
        one.write_text(text.replace('file = "base.vtu"', f'file = "v{i:03d}.vtu"'))
        subprocess.run(CORRELATE + ["--quiet", "run", str(one), "--out", str(folder / f"r{i}"),
                                    "--no-report", "--force"], check=False,
                       stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    return time.perf_counter() - t


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--scale", type=float, default=0.1, help="cells = 300,000 x scale")
    parser.add_argument("--variants", type=int, default=16)
    parser.add_argument("--other-meshes", type=int, default=0,
                        help="also sweep this many variants each on a slightly different mesh")
    parser.add_argument("--other-arrays", action="store_true",
                        help="variant files hold 11 arrays the study does not use beside its one")
    parser.add_argument("--repeats", type=int, default=3,
                        help="alternating pairs of 1- and 2-worker sweeps for the throughput")
    parser.add_argument("--no-serial", action="store_true",
                        help="skip the baseline of one `correlate run` per variant")
    args = parser.parse_args()
    rng = np.random.default_rng(16)
    scratch = Path(tempfile.mkdtemp(prefix="correlate-sweep-bench-"))
    try:
        cells = int(300_000 * args.scale)
        sweep = build(scratch, cells, args.variants, rng, args.other_arrays)
        n = args.variants
        size = (scratch / "v000.vtu").stat().st_size / 1e6
        read, read_named = floor(scratch, n)
        in_worker = worker_floor(scratch, n)
        # throughput: 1 and 2 workers alternately, unwatched; the median run of each
        pairs = [(timed_sweep(sweep, scratch / "out1", 1, watch=False),
                  timed_sweep(sweep, scratch / "out2", 2, watch=False))
                 for _ in range(args.repeats)]
        ratios = [a[1] / b[1] for a, b in pairs]
        one = min((a for a, _ in pairs), key=lambda r: abs(r[1] - statistics.median(
            x[1] for x, _ in pairs)))
        two = min((b for _, b in pairs), key=lambda r: abs(r[1] - statistics.median(
            y[1] for _, y in pairs)))
        peaks = (timed_sweep(sweep, scratch / "out1", 1)[2],
                 timed_sweep(sweep, scratch / "out2", 2)[2])
        plain = plain_processes(scratch, n)
        memory = worker_memory(scratch, min(n, 16))
        other = None
        if args.other_meshes:
            other_sweep = build_other_meshes(scratch, cells, args.other_meshes)
            other = timed_sweep(other_sweep, scratch / "out3", 1)
            direct = in_process(scratch, ["sweep.toml", "other_meshes.toml"])
            table = pd.read_csv(scratch / "out3" / "variants.csv", keep_default_na=False)
            failed = int((table["failure"] != "").sum())
            if failed:
                raise RuntimeError(f"{failed} variants on other meshes failed: "
                                   f"{table['failure'].iloc[0]}")
        serial = float("nan") if args.no_serial else serial_runs(scratch, n)
        boot = start_up()
        print(f"sweep benchmark: {cells} cells requested, {n} variants on one mesh, "
              f"{size:.1f} MB per variant file; process start-up {boot:.2f} s")
        print(f"machine: {os.cpu_count()} cores, shared with other developers (load average "
              f"{os.getloadavg()[0]:.2f} at the end)")
        print(f"{'what':58s} {'seconds':>9s}")
        rows = [
            ("floor: meshio read of one variant file (median)", read),
            ("floor: geometry + the study's array, partial reader (median)", read_named),
            ("the same partial read in a worker process of a local cluster", in_worker),
            ("sweep, 1 worker: whole command", one[0]),
            ("sweep, 1 worker: correlating the variants", one[1]),
            ("sweep, 2 workers: whole command", two[0]),
            ("sweep, 2 workers: correlating the variants", two[1]),
            (f"baseline: {n} x correlate run --no-report, one after another", serial),
        ]
        for what, value in rows:
            print(f"{what:58s} {value:9.2f}")
        print(f"throughput 2 workers / 1 worker (correlating stage, {args.repeats} alternating "
              f"pairs of runs): median {statistics.median(ratios):.2f} x, each "
              f"{', '.join(f'{r:.2f}' for r in ratios)}")
        print(f"the same tasks in plain processes (no Dask): {plain[0] / n:.3f} s per variant "
              f"in 1, {plain[1] / n:.3f} s in 2: throughput {plain[0] / plain[1]:.2f} x")
        print(f"cost per variant, 1 worker: {one[1] / n:.3f} s = {one[1] / n / read:.2f} x "
              f"meshio's read of its file, {one[1] / n / read_named:.2f} x the partial read, "
              f"{one[1] / n / in_worker:.2f} x the partial read in a worker")
        print(f"peak memory of one worker: {peaks[0]:.0f} MB (1 worker), {peaks[1]:.0f} MB "
              "(2 workers; runs of their own, watched)")
        target = memory["arrays"] + memory["operator"] + 200.0
        print(f"one worker sampled every ms over {min(n, 16)} variants: peak resident "
              f"{memory['rss']:.0f} MB, peak private (resident less file-backed) "
              f"{memory['private']:.0f} MB, file-backed at the end {memory['shared_at_end']:.0f} MB "
              f"(libraries' code and data, shared by the workers of a machine); target: one "
              f"variant's arrays {memory['arrays']:.1f} MB + the operator "
              f"{memory['operator']:.1f} MB + 200 MB = {target:.0f} MB")
        print(f"sweep with 2 workers against the baseline: {serial / two[0]:.2f} x faster")
        if other is not None:
            m = args.other_meshes
            print(f"{m} variants each on its own mesh, 1 worker: whole command {other[0]:.2f} s, "
                  f"correlating the variants {other[1]:.2f} s = {other[1] / m:.3f} s per variant "
                  f"(gauges located per variant) against {one[1] / n:.3f} s on the same mesh; "
                  f"peak memory of the worker {other[2]:.0f} MB")
            print(f"one variant's task in this process (median of 4, no cluster): same mesh "
                  f"{direct[0]:.3f} s, own mesh {direct[1]:.3f} s (gauges located anew)")
    finally:
        shutil.rmtree(scratch, ignore_errors=True)


if __name__ == "__main__":
    main()
