"""Series cases: readings rows matched to FE steps by load (nonlinear models)."""

from __future__ import annotations

import os

import meshio
import numpy as np
import pandas as pd
from builders import default_gauges, solid_mesh

from correlate.commands.cli import main
from correlate.comparison.pairing import interpolate_series, monotonic_segments


def test_interpolation_matches_numpy_interp():
    # Reference: numpy.interp, piecewise-linear interpolation on a rising table.
    rng = np.random.default_rng(8)
    fe_load = np.array([2.0, 4.0, 6.0, 10.0])
    rows = rng.normal(size=(5, 4))
    load = np.array([0.0, 1.0, 3.0, 5.5, 10.0, 12.0, 5.0])
    direction = np.array([0, 1, 1, 1, 1, 1, -1])
    out, modelled = interpolate_series(fe_load, rows, load, direction)
    xs = np.r_[0.0, fe_load]
    for r in range(5):
        ys = np.r_[0.0, rows[r]]
        np.testing.assert_allclose(out[r, :5], np.interp(load[:5], xs, ys), rtol=1e-12, atol=1e-15)
    # beyond the series and unloading without an FE unload path: not modelled
    assert modelled.tolist() == [True, True, True, True, True, False, False]
    assert np.isnan(out[:, 5:]).all()


def test_unloading_rows_use_the_falling_segment():
    # a load history up to 10 and back to 4: an unloading row at 7 interpolates the way down
    fe_load = np.array([5.0, 10.0, 7.0, 4.0])
    rows = np.array([[5.0, 10.0, 9.0, 6.0]])          # residual strain on the way down
    out, modelled = interpolate_series(fe_load, rows, np.array([7.0, 8.5, 7.0]),
                                       np.array([1, -1, -1]))
    assert modelled.all()
    np.testing.assert_allclose(out[0], [7.0, 9.5, 9.0], rtol=1e-12, atol=0)
    assert [s[2] for s in monotonic_segments(np.r_[0.0, fe_load])] == [1, -1]


def test_run_with_a_series_case(tmp_path):
    # A "nonlinear" history: the strain at time t is t^1.5 times a linear field, at t = 0.25..1.
    # Reference for the predicted reading at load L: the field at t = L / 10 interpolated linearly
    # between the neighbouring FE steps (the rule stated in the issue), computed here by hand.
    mesh = solid_mesh("hexahedron20", n=(4, 3, 2))
    x = mesh.points
    base = np.zeros((len(x), 6))
    base[:, 0] = 1e-3
    base[:, 1] = base[:, 2] = -0.3e-3
    times = [0.25, 0.5, 0.75, 1.0]
    cwd = os.getcwd()
    os.chdir(tmp_path)
    try:
        with meshio.xdmf.TimeSeriesWriter("series.xdmf") as w:
            w.write_points_cells(x, [("hexahedron20", mesh.blocks[0][1])])
            for t in times:
                w.write_data(t, point_data={"E": base * t ** 1.5})
    finally:
        os.chdir(cwd)
    g = default_gauges().iloc[:3].copy()
    g["kt"] = 0.0
    g.to_csv(tmp_path / "gauges.csv", index=False)
    loads = np.array([0.0, 3.0, 6.0, 9.0, 12.0, 6.0, 0.0])
    fe_t = np.r_[0.0, times]
    fe_v = np.r_[0.0, [t ** 1.5 for t in times]] * 1000.0        # microstrain along x
    cos2 = np.cos(np.radians(18.0 * np.arange(3))) ** 2
    sin2 = 1 - cos2
    along = np.interp(loads / 10.0, fe_t, fe_v)
    reading = along[:, None] * (cos2 - 0.3 * sin2)[None, :]
    df = pd.DataFrame(np.round(reading, 4), columns=g["gauge"])
    df.insert(0, "F_kN", loads)
    df.insert(0, "step", np.arange(len(loads)))
    df.to_csv(tmp_path / "readings.csv", index=False)
    (tmp_path / "study.toml").write_text(
        'title = "series"\n[model]\nfile = "series.xdmf"\nlength_unit = "mm"\n'
        '[[case]]\nname = "ramp"\nstrain = "E"\ntime_index = "all"\n'
        'match = { column = "F_kN", value_at_time_1 = 10.0 }\n'
        '[material]\nE = 70000.0\nnu = 0.3\n[gauges]\nfile = "gauges.csv"\nposition_tol = 0.0\n'
        'angle_tol = 0.0\n[readings]\nfile = "readings.csv"\n[criteria]\nrelative = 0.1\n'
        "absolute_ue = 10.0\n")
    assert main(["--quiet", "run", str(tmp_path / "study.toml"), "--out", str(tmp_path / "out"),
                 "--no-report"]) == 0
    out = pd.read_csv(tmp_path / "out" / "gauges.csv")
    first = out[out["gauge"] == g["gauge"].iloc[0]].set_index("step")
    # loading rows at 3, 6, 9 kN: interpolated between FE steps (tolerance: CSV rounding 0.001 ue)
    np.testing.assert_allclose(first.loc[[1, 2, 3], "predicted_ue"], reading[1:4, 0], rtol=0, atol=2e-3)
    assert set(first.loc[[1, 2, 3], "status"]) == {"pass"}
    # 12 kN is beyond the series; the 6 kN unloading row has no FE unload path
    assert first.loc[4, "status"] == "not-modelled" and first.loc[5, "status"] == "not-modelled"


def test_touched_rows_read_in_slices_equal_h5pys_own_selection(tmp_path, monkeypatch):
    # Reference: h5py's list indexing of the same sorted rows. Small gap and slice limits force
    # many slices, long runs split at the slice limit, and single rows; exact (tolerance 0):
    # the same bytes are read.
    import h5py

    from correlate.readers import series

    rng = np.random.default_rng(4)
    data = rng.normal(size=(5000, 6))
    with h5py.File(tmp_path / "d.h5", "w") as f:
        f["E"] = data
    want = np.unique(np.r_[rng.integers(0, 5000, 300), np.arange(1000, 1400), [0, 4999]])
    with h5py.File(tmp_path / "d.h5", "r") as f:
        dset = f["E"]
        for gap, largest in ((1 << 18, 1 << 25), (48 * 3, 48 * 50), (1, 48)):
            monkeypatch.setattr(series, "GAP_BYTES", gap)
            monkeypatch.setattr(series, "SLICE_BYTES", largest)
            np.testing.assert_array_equal(series.read_rows_of(dset, want), dset[want])
