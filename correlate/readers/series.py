"""A time series' arrays in HDF5: where an XDMF attribute's step lives, and only the rows wanted.

Stage: readers. In: meshio's XDMF ``TimeSeriesReader`` (the parsed light data), a step and an
attribute name. Out: the attribute's HDF5 dataset and step (a :class:`Slab`), the rows of it that
the gauges touch (:func:`read_rows`), or a whole step's arrays (:func:`read_step`).

Three layouts are read:

- one dataset per step, as meshio's ``TimeSeriesWriter`` writes it: the attribute holds
  ``<DataItem Format="HDF" Dimensions="N C">file.h5:/data3</DataItem>``;
- one dataset of all steps (steps x rows x components), each step's attribute a HyperSlab of it
  (XDMF model and format, "DataItem", ItemType HyperSlab: a first item of start, stride and count
  per dimension, then the source): ``<DataItem ItemType="HyperSlab" Dimensions="1 N C">
  <DataItem Dimensions="3 3" Format="XML">k 0 0 1 1 1 1 N C</DataItem>
  <DataItem Format="HDF" Dimensions="S N C">file.h5:/E</DataItem></DataItem>``;
- either one chunked and compressed.

Rows are read in as few h5py calls as the layout allows. A contiguous dataset is read as a few
slices of neighbouring rows (h5py selects a list of rows one by one, about 1 us a row). A chunked
dataset is read in runs of consecutive touched chunks, so that each chunk is decompressed once.
A dataset of all steps is read for a block of steps at once (its first call reads the rows of the
next steps too), so that a 1,000-step series costs a few calls per block, not per step.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

GAP_BYTES = 1 << 18     # rows closer than this are read through, not skipped (one slice)
SLICE_BYTES = 1 << 25   # no single slice of a contiguous dataset larger than this (memory)
BLOCK_BYTES = 1 << 26   # the steps read at once from a dataset of all steps hold about this much


@dataclass(frozen=True)
class Slab:
    """Where one step of an attribute lives: a per-step dataset, or a step of a dataset of all."""

    dataset: Any               # h5py.Dataset: (rows[, components]) or (steps, rows[, components])
    step: int | None           # the step along the first axis of a dataset of all steps
    location: str              # "point" (XDMF Center "Node") or "cell"


def _hdf_dataset(item: Any, base: Path, files: dict[Any, Any]) -> Any | None:
    """The h5py dataset an XDMF ``Format="HDF"`` item names; files and datasets opened once.

    Opening a dataset by its path through h5py's groups costs about 0.2 ms (more than reading a
    step's rows from the page cache): the per-step layout opens a new one every step, so it is
    opened by h5py's low-level ``h5d.open`` and the file's path resolved once.
    """
    if item.attrib.get("Format") != "HDF" or item.text is None or ":" not in item.text:
        return None
    key = (base, item.text)
    if key not in files:
        filename, h5path = item.text.strip().rsplit(":", 1)
        if (base, filename) not in files:
            path = (base / filename).resolve()
            if path not in files:
                import h5py

                files[path] = h5py.File(path, "r")
            files[(base, filename)] = files[path]
        import h5py

        h5 = files[(base, filename)]
        try:
            files[key] = h5py.Dataset(h5py.h5d.open(h5.id, h5path.encode()))
        except (KeyError, TypeError, ValueError):
            files[key] = h5[h5path]       # not a dataset: h5py's own error, or a group's
    return files[key]


def _base(reader: Any, files: dict[Any, Any]) -> Path:
    """The folder of the XDMF file, which its HDF5 names are relative to (resolved once)."""
    key = ("base", reader.filename)
    if key not in files:
        files[key] = Path(reader.filename).resolve().parent
    return files[key]


def _hyperslab(item: Any) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.int64]] | None:
    """Start, stride and count of a HyperSlab item (None if it is not one this reader reads)."""
    if item.attrib.get("ItemType") != "HyperSlab" or len(list(item)) != 2:
        return None
    selection = next(iter(item))
    if selection.attrib.get("Format", "XML") != "XML":
        return None
    numbers = np.array((selection.text or "").split(), dtype=np.int64)
    if numbers.size == 0 or numbers.size % 3:
        return None
    start, stride, count = numbers.reshape(3, -1)
    return start, stride, count


def _attribute(reader: Any, k: int, name: str) -> Any | None:
    for c in list(reader.collection[k]):
        if c.tag == "Attribute" and c.get("Name") == name and len(list(c)) == 1:
            return c
    return None


def locate(reader: Any, k: int, name: str, files: dict[Any, Any]) -> Slab | None:
    """Return where step ``k`` of attribute ``name`` lives, or None where rows cannot be read
    alone (an XML or binary item, a hyperslab that is not one whole step of its dataset)."""
    c = _attribute(reader, k, name)
    if c is None:
        return None
    item = next(iter(c))
    base = _base(reader, files)
    location = "point" if c.get("Center") == "Node" else "cell"
    slab = _hyperslab(item)
    if slab is None:
        dset = _hdf_dataset(item, base, files)
        return None if dset is None else Slab(dset, None, location)
    dset = _hdf_dataset(list(item)[1], base, files)
    if dset is None or dset.ndim < 2 or len(slab[0]) != dset.ndim:
        return None
    start, stride, count = slab
    whole_step = (count[0] == 1 and (start[1:] == 0).all() and (stride[1:] == 1).all()
                  and tuple(count[1:]) == dset.shape[1:])
    return Slab(dset, int(start[0]), location) if whole_step else None


def read_step(reader: Any, k: int, files: dict[Any, Any]) -> tuple[dict[str, Any], dict[str, Any]]:
    """Point and cell data of step ``k``, each cell array split over meshio's cell blocks.

    meshio's own ``read_data`` reads the per-step layout; attributes that are hyperslabs are read
    here, by the start, stride and count they give.
    """
    attributes = [c for c in list(reader.collection[k]) if c.tag == "Attribute"]
    if not any(_hyperslab(next(iter(c))) is not None for c in attributes if len(list(c)) == 1):
        _, point_data, cell_data = reader.read_data(k)
        return dict(point_data), dict(cell_data)
    base = _base(reader, files)
    point_data, cell_data = {}, {}
    sizes = np.cumsum([len(b.data) for b in reader.cells])[:-1]
    for c in attributes:
        item = next(iter(c))
        slab = _hyperslab(item)
        if slab is None:
            values = reader._read_data_item(item)
        else:
            dset = _hdf_dataset(list(item)[1], base, files)
            start, stride, count = slab
            values = dset[tuple(slice(int(a), int(a + n * s), int(s))
                                for a, s, n in zip(start, stride, count, strict=True))]
            dims = [int(d) for d in item.attrib.get("Dimensions", "").split()] or values.shape
            values = values.reshape(dims)
            if values.ndim > 1 and values.shape[0] == 1:
                values = values[0]            # one step of a dataset of all steps
        if c.get("Center") == "Node":
            point_data[c.get("Name")] = values
        else:
            cell_data[c.get("Name")] = np.split(values, sizes)
    return point_data, cell_data


def _ranges(dset: Any, want: NDArray[np.int64], axis: int,
            held: dict[Any, Any] | None = None) -> list[tuple[int, int, int, int]]:
    """Runs (i, j, lo, hi): rows want[i:j] read as the slice lo:hi of the rows axis.

    The runs depend on the rows and the dataset's shape, type and chunks only; every step of a
    series asks for the same, so the last answer is kept in ``held`` when given.
    """
    if held is None:
        return _runs(dset, want, axis)
    key = (want.tobytes(), dset.shape[axis:], dset.dtype.str, dset.chunks and dset.chunks[axis:],
           axis, GAP_BYTES, SLICE_BYTES)
    if held.get("runs", (None,))[0] != key:
        held["runs"] = (key, _runs(dset, want, axis))
    return held["runs"][1]


def _runs(dset: Any, want: NDArray[np.int64], axis: int) -> list[tuple[int, int, int, int]]:
    n = dset.shape[axis]
    if dset.chunks is not None:
        # runs of consecutive touched chunks: each chunk read, and decompressed, once
        size = dset.chunks[axis]
        chunk = want // size
        breaks = np.flatnonzero(np.diff(chunk) > 1) + 1
        return [(int(i), int(j), int(chunk[i]) * size, min((int(chunk[j - 1]) + 1) * size, n))
                for i, j in zip(np.r_[0, breaks], np.r_[breaks, len(want)], strict=True)]
    # the bytes of a row in one step: a block of steps reads the same slices in each step
    row_bytes = dset.dtype.itemsize * int(np.prod(dset.shape[axis + 1:], dtype=np.int64))
    gap = max(1, GAP_BYTES // row_bytes)
    longest = max(1, SLICE_BYTES // row_bytes)
    out = []
    breaks = np.flatnonzero(np.diff(want) > gap) + 1
    for start, stop in zip(np.r_[0, breaks], np.r_[breaks, len(want)], strict=True):
        i = int(start)
        while i < stop:
            j = int(min(max(np.searchsorted(want, want[i] + longest), i + 1), stop))
            out.append((i, j, int(want[i]), int(want[j - 1]) + 1))
            i = j
    return out


def read_rows_of(dset: Any, want: NDArray[np.int64], held: dict[Any, Any] | None = None
                 ) -> NDArray:
    """Rows ``want`` (sorted, unique) of a per-step dataset, in a few slices (see the module)."""
    out = np.empty((len(want),) + dset.shape[1:], dtype=dset.dtype)
    for i, j, lo, hi in _ranges(dset, want, 0, held):
        out[i:j] = dset[lo:hi][want[i:j] - lo]
    return out


def read_steps_of(dset: Any, steps: slice, want: NDArray[np.int64]) -> NDArray:
    """Rows ``want`` of the steps ``steps`` of a dataset of all steps: (steps, rows, ...)."""
    count = len(range(*steps.indices(dset.shape[0])))
    out = np.empty((count, len(want)) + dset.shape[2:], dtype=dset.dtype)
    for i, j, lo, hi in _ranges(dset, want, 1):
        out[:, i:j] = dset[steps, lo:hi][:, want[i:j] - lo]
    return out


def read_rows(slab: Slab, want: NDArray[np.int64], blocks: dict[Any, Any]) -> NDArray:
    """Rows ``want`` (sorted, unique) of one step; ``blocks`` keeps the last block of steps read
    and the last runs of rows.

    A dataset of all steps is read a block of steps at a time (aligned with its chunks, about
    BLOCK_BYTES of rows read); the next steps of the block then cost no HDF5 call.
    """
    dset = slab.dataset
    if len(want) == 0:
        return np.zeros((0,) + dset.shape[1 + (slab.step is not None):], dtype=dset.dtype)
    if slab.step is None:
        return read_rows_of(dset, want, blocks)
    key = (dset.file.filename, dset.name, want.tobytes())
    held = blocks.get("steps", (None,))[0] == key and blocks["steps"][1:]
    if not held or not held[0] <= slab.step < held[1]:
        per_step = sum(hi - lo for _, _, lo, hi in _ranges(dset, want, 1))
        per_step *= dset.dtype.itemsize * int(np.prod(dset.shape[2:], dtype=np.int64))
        align = dset.chunks[0] if dset.chunks is not None else 1
        count = max(align, BLOCK_BYTES // max(per_step, 1) // align * align)
        first = slab.step - slab.step % align
        last = min(first + count, dset.shape[0])
        held = (first, last, read_steps_of(dset, slice(first, last), want))
        blocks["steps"] = (key, *held)
    return held[2][slab.step - held[0]]
