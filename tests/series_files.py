"""XDMF/HDF5 time series in the three layouts the series reader reads (for tests and benchmarks).

- "per-step": meshio's TimeSeriesWriter, one dataset per step (the layout most Python users have);
- "all-steps": one contiguous dataset of all steps (steps x nodes x components), each step's
  attribute an XDMF HyperSlab of it (XDMF model and format, DataItem ItemType "HyperSlab");
- "chunked": the same dataset of all steps, chunked and gzip-compressed (h5py).

The mesh is written by meshio in every layout, so the three files differ only in where the steps
live.
"""

from __future__ import annotations

import copy
import os
import xml.etree.ElementTree as ET
from collections.abc import Callable
from pathlib import Path

import h5py
import meshio
import numpy as np

LAYOUTS = ("per-step", "all-steps", "chunked")


def write_series(folder: Path, points: np.ndarray, cells: list[tuple[str, np.ndarray]],
                 name: str, steps: np.ndarray | Callable[[int], np.ndarray], times: np.ndarray,
                 layout: str, chunk_rows: int = 4096, chunk_steps: int = 8) -> Path:
    """Write the steps of point array ``name`` as ``folder/series.xdmf`` in ``layout``.

    ``steps`` is an array (S, nodes, components) or a function of the step index giving one
    step (nodes, components), so that a long series is never held in memory at once.
    """
    step = steps if callable(steps) else steps.__getitem__
    folder.mkdir(parents=True, exist_ok=True)
    cwd = os.getcwd()
    os.chdir(folder)   # meshio writes the .h5 into the current folder (meshio issue 1442)
    try:
        with meshio.xdmf.TimeSeriesWriter("series.xdmf") as w:
            w.write_points_cells(points, cells)
            if layout == "per-step":
                for k, t in enumerate(times):
                    w.write_data(float(t), point_data={name: step(k)})
                return folder / "series.xdmf"
            w.write_data(float(times[0]), point_data={name: step(0)})
    finally:
        os.chdir(cwd)
    if layout not in LAYOUTS:
        raise ValueError(f"layout {layout!r}; one of {LAYOUTS}")
    first = step(0)
    shape = (len(times),) + first.shape
    options = {}
    if layout == "chunked":
        options = {"chunks": (min(chunk_steps, shape[0]), min(chunk_rows, shape[1])) + shape[2:],
                   "compression": "gzip", "compression_opts": 4}
    with h5py.File(folder / "steps.h5", "w") as f:
        dset = f.create_dataset(name, shape=shape, dtype=first.dtype, **options)
        block = options.get("chunks", (1,))[0]      # whole chunks per write: each compressed once
        for k0 in range(0, shape[0], block):
            dset[k0:k0 + block] = np.stack([step(k) for k in range(k0, min(k0 + block, shape[0]))])
    _hyperslab_steps(folder / "series.xdmf", name, shape, times)
    return folder / "series.xdmf"


def _hyperslab_steps(path: Path, name: str, shape: tuple[int, ...], times: np.ndarray) -> None:
    """Rewrite the XDMF: one step grid per time, its attribute a hyperslab of steps.h5:/name."""
    tree = ET.parse(path)
    collection = next(g for g in tree.getroot()[0] if g.get("GridType") == "Collection")
    template = next(iter(collection))
    collection.remove(template)
    rank = len(shape)
    for k, t in enumerate(times):
        grid = copy.deepcopy(template)
        grid.find("Time").set("Value", repr(float(t)))
        attribute = grid.find("Attribute")
        for child in list(attribute):
            attribute.remove(child)
        slab = ET.SubElement(attribute, "DataItem", ItemType="HyperSlab",
                             Dimensions=" ".join(map(str, (1,) + shape[1:])), Type="HyperSlab")
        selection = ET.SubElement(slab, "DataItem", Dimensions=f"3 {rank}", Format="XML")
        selection.text = " ".join(map(str, [k] + [0] * (rank - 1) + [1] * rank
                                      + [1] + list(shape[1:])))
        source = ET.SubElement(slab, "DataItem", DataType="Float", Precision="8", Format="HDF",
                               Dimensions=" ".join(map(str, shape)))
        source.text = f"steps.h5:/{name}"
        collection.append(grid)
    tree.write(path)
