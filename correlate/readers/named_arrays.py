"""Only the arrays a study names, from a VTU or a static XDMF/HDF5 model file.

Stage: readers. In: a model file path and the array names a study uses. Out: a
:class:`PartialRead` (the points, meshio's cell blocks, the named arrays as meshio would hold
them, and the listing of every array in the file), or None when the file is better read whole.

A VTU is read with VTK's XML reader, the arrays not named disabled in its point- and cell-data
array selections, so their bytes are skipped rather than decoded; the cells are split into blocks
by meshio's own function for VTK cells (``meshio._vtk_common.vtk_cells_from_data``), so the mesh
is the one a whole read gives. A static XDMF is read by meshio's XDMF reader after the attributes
not named are taken out of its parsed light data, so their HDF5 datasets are never opened.
A VTU of several pieces is read here too, VTK joining the pieces (meshio 5.3's whole read keeps
only the last piece's cells: meshio issue 1444). Anything else unusual (polyhedra, cells meshio
skips, a file VTK cannot parse) returns None: the caller reads the whole file with meshio, which
refuses such files in its own words; a VTU of several pieces that cannot be read here is refused
(:class:`~correlate.core.errors.ModelError`) rather than read with a piece missing.
"""

from __future__ import annotations

from collections.abc import Collection
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import ModelError
from correlate.readers.records import Case


@dataclass(frozen=True)
class Listed:
    """One array the file holds: its name, location (point or cell) and component count."""

    name: str
    location: str
    components: int


@dataclass(frozen=True)
class PartialRead:
    """The geometry and the named arrays of a model file, and the names of all its arrays.

    ``cell_data`` holds one array per cell block, as ``meshio.Mesh.cell_data`` does;
    ``component_names`` the VTU's ComponentName attributes (None when the format has none).
    """

    points: NDArray[Any]
    cells: tuple[tuple[str, NDArray[Any]], ...]
    point_data: dict[str, NDArray[Any]]
    cell_data: dict[str, list[NDArray[Any]]]
    listing: tuple[Listed, ...]
    component_names: dict[str, tuple[str, ...]] | None = None


def arrays_of_cases(cases: Collection[Case], model_file: Path) -> dict[Path, frozenset[str]]:
    """The array names the cases read, per model file: the case arrays (each face of a shell),
    the material axes, the arrays of ``check_stress`` and ``check_displacement`` and the
    temperature of a thermal case."""
    named: dict[Path, set[str]] = {model_file: set()}
    for case in cases:
        names = named.setdefault(case.file or model_file, set())
        names.update(case.array.values() if isinstance(case.array, dict) else [case.array])
        names.update(n for n in (case.axes, case.check_stress, case.check_displacement) if n)
        if case.thermal is not None:
            names.add(case.thermal.temperature)
    return {path: frozenset(names) for path, names in named.items()}


def read_named(path: Path, names: Collection[str]) -> PartialRead | None:
    """The geometry and the named arrays of a VTU or static XDMF (None: read the file whole)."""
    suffix = path.suffix.lower()
    if suffix == ".vtu":
        return read_vtu(path, names)
    if suffix in (".xdmf", ".xmf"):
        return read_xdmf(path, names)
    return None


# ---------------------------------------------------------------------------------------- VTU

def vtu_structure(parser: Any) -> tuple[int, tuple[Listed, ...], dict[str, tuple[str, ...]]]:
    """Pieces, arrays and component names from a parsed VTU's structure (point data first).

    A name is listed once, where it first appears; component names are kept when any is given.
    """
    root = parser.GetRootElement()
    listing: dict[str, Listed] = {}
    found: dict[str, tuple[str, ...]] = {}
    pieces = len(elements(root, "Piece"))
    for section, location in (("PointData", "point"), ("CellData", "cell")):
        for element in elements(root, section):
            for k in range(element.GetNumberOfNestedElements()):
                da = element.GetNestedElement(k)
                name = da.GetAttribute("Name")
                count = da.GetAttribute("NumberOfComponents")
                if da.GetName() != "DataArray" or name is None or name in listing:
                    continue
                n = int(count) if count and count.isdigit() else 1
                listing[name] = Listed(name, location, n)
                names = tuple(da.GetAttribute(f"ComponentName{i}") or "" for i in range(n))
                if any(names):
                    found[name] = names
    return pieces, tuple(listing.values()), found


def elements(root: Any, name: str) -> list[Any]:
    """Every VTK XML element called ``name`` under ``root`` (depth first)."""
    out, stack = [], [root]
    while stack:
        element = stack.pop()
        if element is None:
            continue
        if element.GetName() == name:
            out.append(element)
        stack.extend(element.GetNestedElement(k) for k in range(element.GetNumberOfNestedElements()))
    return out


def read_vtu(path: Path, names: Collection[str]) -> PartialRead | None:
    """Points, cells and the named arrays of a VTU through VTK, its pieces joined (None: read it
    whole; a VTU of several pieces that VTK cannot give is refused, never read whole)."""
    from meshio._vtk_common import vtk_cells_from_data, vtk_to_meshio_type
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkCommonCore import vtkObject
    from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridReader

    reader = vtkXMLUnstructuredGridReader()
    reader.SetFileName(str(path))
    quiet = vtkObject.GetGlobalWarningDisplay()
    vtkObject.GlobalWarningDisplayOff()  # VTK's complaints about a damaged file: meshio says them
    try:
        reader.UpdateInformation()
        parser = reader.GetXMLParser()
        if parser is None or parser.GetRootElement() is None:
            return None
        pieces, listing, component_names = vtu_structure(parser)
        for selection, location in ((reader.GetPointDataArraySelection(), "point"),
                                    (reader.GetCellDataArraySelection(), "cell")):
            selection.DisableAllArrays()
            for item in listing:
                if item.location == location and item.name in names:
                    selection.EnableArray(item.name)
        reader.Update()
        grid = reader.GetOutput()
    finally:
        vtkObject.SetGlobalWarningDisplay(quiet)
    if grid is None or grid.GetPoints() is None or grid.GetNumberOfCells() == 0:
        return _whole(path, pieces)
    types = vtk_to_numpy(grid.GetCellTypes()).astype(np.int64)
    uniform = not (types != types[0]).any()
    kinds = types[:1] if uniform else np.unique(types)
    if any(int(t) not in vtk_to_meshio_type or t == 42 for t in kinds):
        return _whole(path, pieces)
    cell_array = grid.GetCells()
    connectivity = vtk_to_numpy(cell_array.GetConnectivityArray())
    offsets = vtk_to_numpy(cell_array.GetOffsetsArray())[1:]   # each cell's end, as VTU stores
    try:
        point_data = _vtk_arrays(grid.GetPointData(), listing, "point", vtk_to_numpy)
        raw = _vtk_arrays(grid.GetCellData(), listing, "cell", vtk_to_numpy)
        one = _one_block(connectivity, offsets, types, raw) if uniform else None
        cells, cell_data = one or _blocks(vtk_cells_from_data(connectivity, offsets, types, raw))
    except (ValueError, TypeError, IndexError, KeyError):
        return _whole(path, pieces)   # an array of another size or kind than its header says
    return PartialRead(points=vtk_to_numpy(grid.GetPoints().GetData()), cells=cells,
                       point_data=point_data, cell_data=cell_data, listing=listing,
                       component_names=component_names)


Blocks = tuple[tuple[tuple[str, NDArray[Any]], ...], dict[str, list[NDArray[Any]]]]


def _blocks(split: tuple[list[Any], dict[str, list[NDArray[Any]]]]) -> Blocks:
    """meshio's cell blocks and cell data as (type, connectivity) pairs."""
    blocks, cell_data = split
    return tuple((b.type, b.data) for b in blocks), cell_data


def _one_block(connectivity: NDArray[Any], offsets: NDArray[Any], types: NDArray[np.int64],
               raw: dict[str, NDArray[Any]]) -> Blocks | None:
    """The cells of a mesh of one cell type (``types`` all equal) of fixed size that meshio
    keeps in VTK's node order (most solver results): the connectivity cut into rows of the
    cell's node count, the block meshio's ``vtk_cells_from_data`` gives, without gathering every
    cell's indices (5 ms at 300,000 cells). None otherwise (meshio's function is used)."""
    from meshio._common import num_nodes_per_cell
    from meshio._vtk_common import vtk_to_meshio_order, vtk_to_meshio_type

    kind = vtk_to_meshio_type[int(types[0])]
    n = num_nodes_per_cell.get(kind)
    if (n is None or vtk_to_meshio_order(int(types[0])) is not None or kind == "polygon"
            or kind.startswith("VTK_LAGRANGE") or connectivity.size != n * len(types)
            or not np.array_equal(offsets, np.arange(n, connectivity.size + 1, n))):
        return None
    return ((kind, connectivity.reshape(len(types), n)),), {k: [v] for k, v in raw.items()}


def _whole(path: Path, pieces: int) -> None:
    """None (read the file whole) for a one-piece VTU; a VTU of several pieces is refused, since
    the whole read would keep only its last piece's cells (meshio issue 1444)."""
    if pieces > 1:
        raise ModelError(f"{path.name}: holds {pieces} pieces with cells VTK's reader does not "
                         "give here (polyhedra, cells of an unsupported type, or an array of "
                         "another size than its header says), and the whole-file reader would "
                         "keep only the last piece; write the model as one piece of supported "
                         "cells (merge the pieces in the solver's export)")
    return None


def _vtk_arrays(data: Any, listing: tuple[Listed, ...], location: str,
                to_numpy: Any) -> dict[str, NDArray[Any]]:
    """The enabled arrays of a VTK point or cell data, shaped (n, components) as meshio reads."""
    out = {}
    for item in listing:
        if item.location != location or not data.HasArray(item.name):
            continue
        values = to_numpy(data.GetArray(item.name))
        out[item.name] = values.reshape(len(values), item.components)
    return out


# --------------------------------------------------------------------------------------- XDMF

def read_xdmf(path: Path, names: Collection[str]) -> PartialRead | None:
    """Points, cells and the named attributes of a static XDMF (None: read it whole)."""
    from meshio.xdmf.main import XdmfReader

    listing: list[Listed] = []

    class NamedReader(XdmfReader):  # type: ignore[misc]
        def read_xdmf2(self, root: Any) -> Any:
            return super().read_xdmf2(_pruned(root, names, listing))

        def read_xdmf3(self, root: Any) -> Any:
            return super().read_xdmf3(_pruned(root, names, listing))

    try:
        mesh = NamedReader(str(path)).read()
    except Exception:   # the whole read says what is wrong in its own words
        return None
    return PartialRead(points=mesh.points, cells=tuple((c.type, c.data) for c in mesh.cells),
                       point_data=dict(mesh.point_data),
                       cell_data={k: list(v) for k, v in mesh.cell_data.items()},
                       listing=tuple(listing))


def _pruned(root: Any, names: Collection[str], listing: list[Listed]) -> Any:
    """The parsed light data without the attributes not named (each listed first)."""
    for grid in root.iter("Grid"):
        for attribute in [c for c in grid if c.tag == "Attribute"]:
            name = attribute.get("Name")
            items = list(attribute)
            dims = items[0].get("Dimensions", "").split() if items else []
            location = "point" if attribute.get("Center") == "Node" else "cell"
            if name is not None and name not in {item.name for item in listing}:
                listing.append(Listed(name, location, int(np.prod([int(d) for d in dims[1:]]))))
            if name not in names:
                grid.remove(attribute)
    listing.sort(key=lambda item: item.location != "point")   # point data first, as read
    return root
