"""Series layouts: one dataset per step (meshio), one dataset of all steps (XDMF hyperslabs),
chunked and compressed; the same model readings from each, and the rows read equal h5py's own."""

from __future__ import annotations

import h5py
import numpy as np
import pandas as pd
import pytest
from builders import default_gauges, solid_mesh
from series_files import LAYOUTS, write_series

from correlate.commands.cli import main
from correlate.readers import model as model_io
from correlate.readers import series


def _history(points: np.ndarray, n_steps: int) -> tuple[np.ndarray, np.ndarray]:
    # a strain field that varies in space and step: linear in x, growing as t^1.5, with shear
    t = np.linspace(0.1, 1.0, n_steps)
    base = np.zeros((len(points), 6))
    base[:, 0] = 1e-3 * (1 + 0.1 * points[:, 0])
    base[:, 1] = -0.3e-3
    base[:, 3] = 0.2e-3 * points[:, 1]
    return t, base[None] * (t ** 1.5)[:, None, None]


@pytest.fixture(scope="module")
def series_folders(tmp_path_factory):
    mesh = solid_mesh("tetra", n=(6, 4, 3))
    times, steps = _history(mesh.points, 20)
    root = tmp_path_factory.mktemp("layouts")
    out = {}
    for layout in LAYOUTS:
        folder = root / layout
        # small chunks so that several chunks and step blocks are crossed
        write_series(folder, mesh.points, [("tetra", mesh.blocks[0][1])], "E", steps, times,
                     layout, chunk_rows=16, chunk_steps=3)
        default_gauges().iloc[:4].to_csv(folder / "gauges.csv", index=False)
        (folder / "study.toml").write_text(
            'title = "layouts"\n[model]\nfile = "series.xdmf"\nlength_unit = "mm"\n'
            '[[case]]\nname = "ramp"\nstrain = "E"\ntime_index = "all"\n'
            '[material]\nE = 70000.0\nnu = 0.3\n[gauges]\nfile = "gauges.csv"\n')
        out[layout] = folder
    return out, steps


def test_every_layout_gives_the_same_model_readings(series_folders):
    # the per-step layout (meshio's own writer and reader) is the reference; the others hold the
    # same doubles, so the files must be byte-identical
    folders, _ = series_folders
    for layout, folder in folders.items():
        assert main(["--quiet", "predict", str(folder / "study.toml"), "--out",
                     str(folder / "out")]) == 0, layout
    ref = (folders["per-step"] / "out" / "model_readings.csv").read_bytes()
    table = pd.read_csv(folders["per-step"] / "out" / "model_readings.csv")
    assert table["fe_index"].nunique() == 20 and table["predicted_ue"].abs().max() > 100
    for layout in ("all-steps", "chunked"):
        assert (folders[layout] / "out" / "model_readings.csv").read_bytes() == ref, layout


@pytest.mark.parametrize("layout", LAYOUTS)
def test_rows_of_each_step_equal_h5pys_own_selection(series_folders, layout, monkeypatch):
    # reference: h5py reading the whole step and numpy picking the rows; exact (tolerance 0):
    # the same bytes are read. A small block forces several blocks of steps.
    folders, steps = series_folders
    monkeypatch.setattr(series, "BLOCK_BYTES", 48 * 40 * 4)
    source = model_io.open_model(folders[layout] / "series.xdmf")
    rng = np.random.default_rng(5)
    want = np.unique(rng.integers(0, steps.shape[1], 40))
    for k in (0, 1, 7, 8, 19, 3):
        slab = series.locate(source._reader, k, "E", source._h5)
        assert slab is not None and slab.location == "point"
        assert (slab.step is None) == (layout == "per-step")
        np.testing.assert_array_equal(series.read_rows(slab, want, source._blocks), steps[k][want])
        point_data, _ = source.arrays(k)          # the whole step, as the report reads it
        np.testing.assert_array_equal(point_data["E"], steps[k])


def test_a_chunked_dataset_is_read_in_runs_of_touched_chunks(tmp_path):
    # each chunk is read once: the rows of one run of consecutive touched chunks in one call
    data = np.arange(100 * 6, dtype=float).reshape(100, 6)
    with h5py.File(tmp_path / "c.h5", "w") as f:
        f.create_dataset("E", data=data, chunks=(10, 6), compression="gzip")
    with h5py.File(tmp_path / "c.h5", "r") as f:
        want = np.array([0, 5, 12, 19, 45, 47, 99])
        runs = series._ranges(f["E"], want, 0)
        assert [(lo, hi) for _, _, lo, hi in runs] == [(0, 20), (40, 50), (90, 100)]
        np.testing.assert_array_equal(series.read_rows_of(f["E"], want), data[want])
