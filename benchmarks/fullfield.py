"""Benchmark of the full-field (DIC) comparison, beside a straightforward baseline in the same run.

    python benchmarks/fullfield.py --points 500000 --frames 50 [--own-points]

Model: the demo bracket (about 40,000 tetra10 cells). DIC points: a grid on the arm's top face
(x 40..130, y -19..19 mm), fixed in the reference configuration as grid-based exports give them,
in camera axes turned and shifted from the model's. Per frame a strain field (the model's at
that frame's load, plus noise). Stages timed after reading: registration (landmarks + ICP),
locating the points once (zero-length gauge operator), and per frame: evaluation, Gaussian
levelling (on the points' grid when they form one, else on a voxel grid; built once for shared
points, per frame over the frame's own points with ``--own-points``),
statistics (blocked slope, metrics). ``--own-points`` gives every
frame its own point set (jittered), so the points are located per distinct point.

Baseline: per frame, probe the model with PyVista's ``sample`` at the registered points (no
levelling, no tangent axes: the global xx component) and take the RMS difference.
"""

from __future__ import annotations

import argparse
import resource
import time

import numpy as np
from scipy.spatial.transform import Rotation

from correlate.commands.demo import demo_folder
from correlate.comparison.criteria import allowed_difference
from correlate.fullfield.levelling import apply_weights, gaussian_weights, grid_filter
from correlate.fullfield.points import frame_points, locate_points
from correlate.fullfield.scattered import PairFilter, splat_filter
from correlate.fullfield.statistics import blocked_slope, field_metrics
from correlate.fullfield.strain import equivalent_strain, tensor_in_axes
from correlate.model_readings.evaluate import centre_strain
from correlate.model_readings.locator import Locator
from correlate.model_readings.surface import build_surface
from correlate.readers.dic_frames import Landmarks
from correlate.readers.fields import read_field
from correlate.readers.fullfield_study import FullFieldSettings
from correlate.readers.model import open_model
from correlate.readers.study import read_study

R = Rotation.from_euler("zx", [1.5, 0.4], degrees=True).as_matrix()
T = np.array([85.0, 0.0, 12.0])


def _grid(n: int) -> np.ndarray:
    ny = max(int(np.sqrt(n * 38.0 / 90.0)), 2)
    nx = max(n // ny, 2)
    x, y = np.meshgrid(np.linspace(40.0, 130.0, nx), np.linspace(-19.0, 19.0, ny))
    return np.c_[x.ravel(), y.ravel(), np.full(x.size, 12.0)]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--points", type=int, default=50_000)
    ap.add_argument("--frames", type=int, default=10)
    ap.add_argument("--own-points", action="store_true")
    ap.add_argument("--pairs", action="store_true",
                    help="scattered points: the whole pairwise weight matrix (the rule before "
                         "the voxel grid), for comparison")
    a = ap.parse_args()
    study = read_study(demo_folder() / "study.toml")
    t0 = time.perf_counter()
    src = open_model(study.model_file)
    pull = read_field(src, study.cases[0], study.materials, None)
    t_read = time.perf_counter() - t0
    rng = np.random.default_rng(0)
    truth = _grid(a.points)
    if a.own_points:
        cam = [(truth + rng.normal(0, 0.05, truth.shape) * [1, 1, 0] - T) @ R
               for _ in range(a.frames)]
    else:   # one array for every frame: the points are the same (no copies in the input)
        cam = [(truth - T) @ R] * a.frames
    marks = np.array([[40.0, -20, 12], [130, -20, 12], [130, 20, 12], [40, 20, 12]])
    lm = Landmarks(("a", "b", "c", "d"), (marks - T) @ R, marks)
    ff = FullFieldSettings(files=(), columns={}, register="landmarks", landmarks=None,
                           refine="icp", filter_size=1.0, snap_tol=0.5)
    times: dict[str, float] = {}

    peaks: dict[str, float] = {}

    def lap(name: str, start: float) -> float:
        now = time.perf_counter()
        times[name] = times.get(name, 0.0) + now - start
        peaks[name] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        return now

    allp = np.concatenate(cam)   # the frames' table as read: every frame's rows
    print(f"input read: {allp.nbytes / 2**20:.0f} MB of coordinates; peak memory "
          f"{resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024:.0f} MB")
    t = time.perf_counter()
    offsets = np.cumsum([0] + [len(c) for c in cam])
    # the frames' table repeats each point per frame: as correlate.fullfield.comparison does
    distinct, inverse = frame_points(allp, [np.arange(offsets[f], offsets[f + 1])
                                            for f in range(a.frames)])
    t = lap("distinct points", t)
    locator = Locator(src.mesh, build_surface(src.mesh, near=truth, reach=2.0))
    t = lap("surface", t)
    _, pm = locate_points(distinct, ff, locator, lm, scale=1.0)
    t = lap("register + locate + operator", t)
    tensors = centre_strain(pm.operator, pull)
    t = lap("evaluate (one case, all points)", t)
    def weights(xyz: np.ndarray):   # the rule of correlate.fullfield.comparison._levelling
        g = grid_filter(xyz, sigma=1.0)
        if g is not None:
            return g, "grid convolution"
        if a.pairs:
            return gaussian_weights(xyz, sigma=1.0), "pairwise weights, whole matrix"
        s = splat_filter(xyz, 1.0)
        return (s, "voxel grid (splatting)") if s is not None else (
            PairFilter(xyz, 3.0, 1.0), "pairwise weights by blocks")

    if not a.own_points:   # shared points: one operator; own points: one per frame
        W, path = weights(pm.position)
    t = lap("levelling weights (once)", t)
    slot = np.full(len(distinct), -1)
    slot[pm.kept] = np.arange(len(pm.kept))
    for f in range(a.frames):
        k = slot[inverse[offsets[f]:offsets[f + 1]]]
        k = k[k >= 0]
        scale = (f + 1) / a.frames
        exx, eyy, exy = tensor_in_axes(scale * tensors[k], pm.ex[k], pm.ey[k])
        t = lap("per frame: tangent axes", t)
        if a.own_points:
            W, path = weights(pm.position[k])
        lev = apply_weights(W, np.column_stack([exx, eyy, exy]))
        t = lap("per frame: levelling", t)
        meas = lev[:, 0] * 1e6 + rng.normal(0, 40, len(k))
        p = lev[:, 0] * 1e6
        field_metrics(meas, p, allowed_difference(p, 0.1, 50.0))
        blocked_slope(meas, p, pm.position[k], 6.0)
        equivalent_strain(lev[:, 0], lev[:, 1], lev[:, 2])
        t = lap("per frame: statistics", t)
    total = sum(times.values())
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    # baseline: PyVista sample per frame at the registered points, global xx, RMS difference
    import pyvista as pv

    grid = pv.read(str(study.model_file))
    t = time.perf_counter()
    xyz = pm.position
    for f in range(a.frames):
        probe = pv.PolyData(xyz).sample(grid)
        exx_b = np.asarray(probe["E_pull"])[:, 0] * (f + 1) / a.frames
        np.sqrt(np.mean((exx_b - exx_b.mean()) ** 2))
    base = time.perf_counter() - t
    print(f"{a.points} points x {a.frames} frames{' (own points per frame)' if a.own_points else ''}"
          f"; {len(distinct)} distinct, {len(pm.kept)} kept; levelling: {path}; "
          f"read {t_read:.2f} s")
    for name, v in times.items():
        print(f"  {name:34s} {v:7.2f} s   (peak memory so far {peaks[name]:5.0f} MB)")
    print(f"  {'total after reading':34s} {total:7.2f} s; peak memory {peak:.0f} MB")
    print(f"  {'baseline (sample per frame)':34s} {base:7.2f} s")


if __name__ == "__main__":
    main()
