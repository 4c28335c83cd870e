"""Model result reader: mesh and field arrays from any file meshio reads.

Stage: input. In: a model file path and the study's cases. Out: :class:`Mesh` (points and the
supported cell blocks) and, per case, a :class:`Field` in the package's conventions (full symmetric
strain tensors in m/m with tensor shear, or displacement vectors), at nodes or per cell.

Format notes (see the library notes): ``meshio.read`` exits the process on a file no reader takes,
so that is caught here; XDMF time series are read with meshio's time-series reader, one step on
demand; Exodus II is read through VTK's own reader because meshio misorders hex20 nodes there and
reads only the first time step.
"""

from __future__ import annotations

import contextlib
import difflib
import errno
import io
import os
import re
import stat
import warnings
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import CorrelateWarning, MissingDependencyError, ModelError
from correlate.readers import series

SUPPORTED = ("triangle", "triangle6", "quad", "quad8", "quad9", "tetra", "tetra10", "hexahedron",
             "hexahedron20", "hexahedron27", "wedge")
SOLID = {"tetra", "tetra10", "hexahedron", "hexahedron20", "hexahedron27", "wedge"}
SHELL = {"triangle", "triangle6", "quad", "quad8", "quad9"}
IGNORED = {"vertex", "line", "line3"}  # lower-dimension blocks that mesh writers add for groups
# meshio names of the same cell types from other readers
ALIASES = {"tri": "triangle", "tri6": "triangle6", "quad4": "quad", "tet": "tetra", "tet4": "tetra",
           "tet10": "tetra10", "hex": "hexahedron", "hex8": "hexahedron", "hex20": "hexahedron20",
           "hex27": "hexahedron27", "wedge6": "wedge"}
# Exodus II hexahedron20 node k as VTK expects it (meshio issue 1538)
EXODUS_HEX20 = np.array([0, 1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 16, 17, 18, 19, 12, 13, 14, 15])


@dataclass(frozen=True)
class Mesh:
    """Points and the supported cell blocks of a model, in file order.

    ``blocks`` holds (meshio cell type, connectivity) pairs; ``block_ids`` the index of each block
    in the file's own cell list (cell data follows that list); ``family`` is solid, shell or plane.
    """

    points: NDArray[np.float64]
    blocks: tuple[tuple[str, NDArray[np.int64]], ...]
    block_ids: tuple[int, ...]
    family: str
    source: str

    @property
    def n_cells(self) -> int:
        return sum(len(c) for _, c in self.blocks)

    @cached_property
    def bounds(self) -> NDArray[np.float64]:
        """(2, 3): lowest and highest coordinates of the points."""
        # column by column: ten times faster than min(axis=0) on an (n, 3) array
        return np.array([[c.min() for c in self.points.T], [c.max() for c in self.points.T]])

    @property
    def offsets(self) -> NDArray[np.int64]:
        """Global id of the first cell of each block (plus the total at the end)."""
        return np.concatenate([[0], np.cumsum([len(c) for _, c in self.blocks])]).astype(np.int64)

    def block_rows(self, cells: NDArray[np.int64]) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
        """Block index and local row of global cell ids."""
        offsets = self.offsets
        block = np.searchsorted(offsets, cells, side="right") - 1
        return block, cells - offsets[block]

    def cell_types(self, cells: NDArray[np.int64]) -> NDArray[np.str_]:
        """Type name of the given global cells."""
        block, _ = self.block_rows(np.asarray(cells, dtype=np.int64))
        return np.asarray([ctype for ctype, _ in self.blocks])[block]


@dataclass(frozen=True)
class Field:
    """One load case's field: tensors (n, 3, 3) in m/m or displacements (n, 3), at nodes or cells.

    ``data`` holds the arrays as read; ``convert(rows, ids)`` turns rows ``ids`` of them into the
    package convention (None: ``data`` already is). The conversion is row by row, so a gauge
    operator converts only the rows it touches (:meth:`at`) and the whole field is converted only
    when asked for (:attr:`values`, kept once made). For shells with one array per face, ``data``
    maps "top"/"bottom" to arrays.
    """

    case: str
    kind: str                 # "strain" (after any stress conversion) or "displacement"
    location: str             # "point" or "cell"
    data: NDArray[np.float64] | dict[str, NDArray[np.float64]]
    source_kind: str          # what the file held: strain, stress or displacement
    array: str
    notes: tuple[str, ...] = ()
    index: NDArray[np.int64] | None = None  # data hold only these nodes/cells (partial reads)
    convert: Callable[[NDArray[np.float64], NDArray[np.int64]], NDArray[np.float64]] | None = None

    def at(self, ids: NDArray[np.int64], face: str = "") -> NDArray[np.float64]:
        """Converted rows ``ids`` (positions in ``data``) of one face's array ("" if one array)."""
        raw = self.data[face] if isinstance(self.data, dict) else self.data
        return raw[ids] if self.convert is None else self.convert(raw[ids], ids)

    @cached_property
    def values(self) -> NDArray[np.float64] | dict[str, NDArray[np.float64]]:
        """The whole field converted: (n, 3, 3) tensors or (n, 3) displacements (or per face)."""
        if self.convert is None:
            return self.data

        def whole(raw: NDArray[np.float64]) -> NDArray[np.float64]:
            return self.convert(raw, np.arange(len(raw)))  # type: ignore[misc]

        if isinstance(self.data, dict):
            return {face: whole(raw) for face, raw in self.data.items()}
        return whole(self.data)


@dataclass
class ModelSource:
    """An opened model file: the mesh, and its arrays (one set, or one per time step)."""

    path: Path
    mesh: Mesh
    point_data: dict[str, NDArray[np.float64]]
    cell_data: dict[str, list[NDArray[np.float64]]]
    times: tuple[float, ...] = ()
    _reader: Any = None
    _cache: dict[int, tuple[dict, dict]] = field(default_factory=dict)
    _h5: dict[Any, Any] = field(default_factory=dict)   # HDF5 files and datasets (readers.series)
    _blocks: dict[Any, Any] = field(default_factory=dict)   # steps read ahead (readers.series)
    _names: dict[str, tuple[str, ...]] | None = None

    def arrays(self, time_index: int | None) -> tuple[dict[str, Any], dict[str, Any]]:
        """Point and cell data, of one step for a time series."""
        if not self.times:
            if time_index not in (None, 0):
                raise ModelError(f"{self.path.name}: time_index = {time_index}, but the file holds "
                                 "a single state; remove time_index or name a time-series file")
            return self.point_data, self.cell_data
        if time_index is None:
            raise ModelError(f"{self.path.name} is a time series of {len(self.times)} steps; give "
                             "time_index (counted from 0) in the [[case]]")
        if not 0 <= time_index < len(self.times):
            raise ModelError(f"{self.path.name}: time_index = {time_index} is out of range; the file "
                             f"holds steps 0 to {len(self.times) - 1}")
        if time_index not in self._cache:
            self._cache = {time_index: series.read_step(self._reader, time_index, self._h5)}
        return self._cache[time_index]


def _hdf5_rows(source: ModelSource, name: str, time_index: int,
               rows: dict[str, NDArray[np.int64]]) -> tuple[str, NDArray[np.float64]] | None:
    """Read only the given rows of a time-series array from its HDF5 file (None: not possible).

    The XDMF light data names the dataset (one per step, or a step of one dataset of all steps:
    :mod:`correlate.readers.series`); the cost of a step is proportional to the rows the gauges
    touch, not to the mesh.
    """
    slab = series.locate(source._reader, time_index, name, source._h5)
    if slab is None or (slab.location == "cell" and len(source.mesh.block_ids) != 1):
        return None
    want = rows[slab.location]
    data = series.read_rows(slab, want, source._blocks)
    return slab.location, np.asarray(data, dtype=float).reshape(len(want), -1)


def _mesh_from(points: NDArray, cells: list[tuple[str, NDArray]], source: str) -> Mesh:
    points = np.asarray(points, dtype=float)
    if points.ndim != 2 or len(points) == 0:
        raise ModelError(f"{source}: the file holds no points; is it a mesh result?")
    if points.shape[1] == 2:
        points = np.c_[points, np.zeros(len(points))]
    blocks, ids, unknown, seen_types = [], [], set(), set()
    for i, (ctype, conn) in enumerate(cells):
        ctype = ALIASES.get(ctype, ctype)
        seen_types.add(ctype)
        if ctype in SUPPORTED:
            blocks.append((ctype, np.asarray(conn, dtype=np.int64)))
            ids.append(i)
        elif ctype not in IGNORED:
            unknown.add(ctype)
    if unknown:
        raise ModelError(f"{source}: cell type(s) {', '.join(sorted(unknown))} are not supported; "
                         f"supported: {', '.join(SUPPORTED)}")
    if not blocks:
        if seen_types & {"line", "line3"}:
            raise ModelError(f"{source}: only line cells found; beam and truss models are out of "
                             "scope (a gauge needs a surface): give a shell or solid model")
        raise ModelError(f"{source}: no cells found; is it a mesh result?")
    solid = [b for b in blocks if b[0] in SOLID]
    if solid:
        keep = [k for k, b in enumerate(blocks) if b[0] in SOLID]
        blocks = [blocks[k] for k in keep]
        ids = [ids[k] for k in keep]
    for ctype, conn in blocks:
        if conn.size and (conn.min() < 0 or conn.max() >= len(points)):
            raise ModelError(f"{source}: {ctype} cells refer to points that do not exist; the file "
                             "is damaged or truncated")
    points = _finite_points(points, blocks, source)
    if solid:
        family = "solid"
    else:
        # a flat mesh in z = 0 is a plane model or a shell: the study decides (model_family)
        family = "plane" if np.allclose(points[:, 2], 0.0) else "shell"
    return Mesh(points=points, blocks=tuple(blocks), block_ids=tuple(ids), family=family,
                source=source)


def _finite_points(points: NDArray, blocks: list[tuple[str, NDArray]], source: str) -> NDArray:
    """Refuse a cell node with a non-finite coordinate; ignore (and warn of) unused ones.

    A node no cell uses enters no computation, but its NaN would spoil the model's bounds and
    the views: it is moved onto a node that cells use, which changes nothing a gauge reads.
    """
    bad = ~np.isfinite(points).all(axis=1)
    if not bad.any():
        return points
    used = np.zeros(len(points), dtype=bool)
    for _, conn in blocks:
        used[conn.ravel()] = True
    bad_used = np.flatnonzero(bad & used)
    if len(bad_used):
        k = int(bad_used[0])
        ctype = next(t for t, conn in blocks if (conn == k).any())
        more = f" (and {len(bad_used) - 1} more node(s))" if len(bad_used) > 1 else ""
        raise ModelError(f"{source}: node {k} has a non-finite coordinate "
                         f"({', '.join(f'{v:g}' for v in points[k])}) and belongs to a {ctype} "
                         f"cell{more}; fix the mesh coordinates in the model file")
    points = points.copy()
    points[bad] = points[int(np.flatnonzero(used)[0])]
    warnings.warn(f"{source}: {int(bad.sum())} node(s) that no cell uses have non-finite "
                  "coordinates; they are ignored", CorrelateWarning, stacklevel=4)
    return points


def _meshio_formats(path: Path) -> list[str]:
    """meshio's readers for the file's suffix (".vtu", or ".tar.gz"-like double suffixes)."""
    import meshio

    formats: list[str] = []
    ext = ""
    for suffix in reversed(path.suffixes):
        ext = (suffix + ext).lower()
        formats += meshio.extension_to_filetypes.get(ext, [])
    return formats


# VTK cell type ids meshio's VTK readers skip with a warning (VTK's vtkCellType.h)
VTK_SKIPPED = {2: "poly-vertex", 4: "poly-line", 6: "triangle strip", 8: "pixel", 11: "voxel",
               15: "pentagonal prism", 16: "hexagonal prism", 42: "polyhedron"}


def _refuse_dropped_cells(path: Path, complaint: str) -> None:
    """meshio drops VTK cells it cannot handle and only prints a warning: refuse instead."""
    ids = sorted({int(t) for t in re.findall(r"cannot handle \(types? \[?(\d+)", complaint)})
    if "cannot handle" not in complaint:
        return
    named = ", ".join(f"{i} ({VTK_SKIPPED.get(i, 'unknown')})" for i in ids) or "unknown"
    raise ModelError(f"{path.name}: holds cells of VTK type {named}, which the reader skips, so "
                     "part of the model would be lost; write them as supported cells (a voxel is a "
                     "hexahedron with nodes 3-4 and 7-8 swapped, a pixel a quad with nodes 3-4 "
                     f"swapped); supported: {', '.join(SUPPORTED)}")


def _meshio_read(path: Path) -> Any:
    import meshio

    formats = _meshio_formats(path)
    if not formats:
        raise ModelError(f"{path.name}: no reader recognises files ending '{path.suffix}'; give a "
                         "format meshio reads (.vtu, .vtk, .xdmf, .msh, .med, .exo, ...)")
    # meshio prints its readers' complaints (stdout) and an error line (stderr) before it exits
    # the process: keep both off the terminal, and put the complaint in our one line instead
    said, shouted = io.StringIO(), io.StringIO()
    try:
        with contextlib.redirect_stdout(said), contextlib.redirect_stderr(shouted):
            m = meshio.read(path)
    except SystemExit:
        reason = " ".join(said.getvalue().split())
        raise ModelError(f"{path.name}: cannot be read as {' or '.join(formats)}"
                         + (f" ({reason[:200]})" if reason else "")
                         + "; the file may be truncated or damaged, or of another format than "
                         "its suffix says") from None
    except (ValueError, KeyError, IndexError, OSError, EOFError, RuntimeError, TypeError,
            AttributeError, AssertionError, UnicodeDecodeError) as exc:
        raise ModelError(f"{path.name}: cannot be read ({type(exc).__name__}: {exc}); the file may "
                         "be truncated or of another format than its suffix says") from None
    except Exception as exc:
        if type(exc).__name__ == "ReadError":
            raise ModelError(f"{path.name}: cannot be read ({exc})") from None
        raise
    _refuse_dropped_cells(path, shouted.getvalue())
    return m


def _open_series(path: Path) -> ModelSource | None:
    import meshio

    try:
        reader = meshio.xdmf.TimeSeriesReader(str(path))
        points, cells = reader.read_points_cells()
        n = reader.num_steps
    except Exception:
        return None
    if n == 0:
        return None
    # the times from the light data alone (reading each step's arrays here would cost a full read)
    times = []
    for k in range(n):
        t = next((float(c.attrib["Value"]) for c in list(reader.collection[k]) if c.tag == "Time"),
                 float(k))
        times.append(t)
    cell_list = [(c.type, c.data) for c in cells]
    mesh = _mesh_from(points, cell_list, path.name)
    return ModelSource(path=path, mesh=mesh, point_data={}, cell_data={}, times=tuple(times),
                       _reader=reader)


def _open_exodus(path: Path) -> ModelSource:
    try:
        import netCDF4  # noqa: F401  - meshio needs it for Exodus; its absence says what to install
    except ImportError:
        raise MissingDependencyError(f"{path.name}: reading Exodus II needs netCDF4; "
                                     "pip install netCDF4") from None
    m = _meshio_read(path)
    cells = []
    for c in m.cells:
        data = c.data
        if c.type == "hexahedron20":
            data = data[:, EXODUS_HEX20]
        cells.append((c.type, data))
    mesh = _mesh_from(m.points, cells, path.name)
    return ModelSource(path=path, mesh=mesh, point_data=dict(m.point_data),
                       cell_data={k: list(v) for k, v in m.cell_data.items()})


def _check_file(path: Path) -> None:
    """Refuse a model path that is no regular file: missing, a folder, a looping link, a device."""
    try:
        info = path.stat()
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise ModelError(f"model file '{path}' is a symbolic link that loops back on itself; "
                             "point it at the result file or give the file's own path") from None
        if path.is_symlink():
            raise ModelError(f"model file '{path}' is a symbolic link to "
                             f"'{os.readlink(path)}', which does not exist") from None
        raise ModelError(f"model file '{path}' does not exist") from None
    if stat.S_ISDIR(info.st_mode):
        raise ModelError(f"model file '{path}' is a folder, not a file; give the path of the result "
                         "file (.vtu, .xdmf, ...) in [model] file")
    if not stat.S_ISREG(info.st_mode):
        raise ModelError(f"model file '{path}' is not a regular file (a device, pipe or socket); "
                         "give the path of the result file")


def open_model(path: str | Path) -> ModelSource:
    """Open a model result file; a time-series XDMF is read one step at a time."""
    path = Path(path)
    _check_file(path)
    if path.stat().st_size == 0:
        raise ModelError(f"{path.name}: the file is empty")
    suffix = path.suffix.lower()
    if suffix in (".xdmf", ".xmf"):
        series = _open_series(path)
        if series is not None and len(series.times) > 1:
            return series
    if suffix in (".exo", ".e", ".ex2", ".exii"):
        return _open_exodus(path)
    m = _meshio_read(path)
    mesh = _mesh_from(m.points, [(c.type, c.data) for c in m.cells], path.name)
    return ModelSource(path=path, mesh=mesh, point_data=dict(m.point_data),
                       cell_data={k: list(v) for k, v in m.cell_data.items()})


def from_meshio(mesh: Any, name: str = "mesh") -> ModelSource:
    """Wrap a ``meshio.Mesh`` (or anything with points, cells, point_data, cell_data)."""
    cells = [(c.type, c.data) for c in mesh.cells]
    m = _mesh_from(mesh.points, cells, name)
    return ModelSource(path=Path(name), mesh=m, point_data=dict(mesh.point_data),
                       cell_data={k: list(v) for k, v in mesh.cell_data.items()})


def _available(point_data: dict, cell_data: dict) -> str:
    names = [f"{k} (point, {np.asarray(v).shape[1] if np.asarray(v).ndim > 1 else 1})"
             for k, v in point_data.items()]
    names += [f"{k} (cell)" for k in cell_data]
    return ", ".join(names) if names else "none"


def find_array(source: ModelSource, name: str, time_index: int | None, *,
               case: str, rows: dict[str, NDArray[np.int64]] | None = None
               ) -> tuple[str, NDArray[np.float64]]:
    """Return ("point" | "cell", values) for an array name; cell data joined over kept blocks.

    With ``rows`` ({"point": sorted node ids, "cell": sorted cell ids}) a time series reads only
    those rows when it can; the values then hold those rows only, in that order.
    """
    if rows is not None and source.times and time_index is not None \
            and 0 <= time_index < len(source.times):
        got = _hdf5_rows(source, name, time_index, rows)
        if got is not None:
            return got
    point_data, cell_data = source.arrays(time_index)
    if name in point_data:
        values = np.asarray(point_data[name], dtype=float)
        return "point", values.reshape(len(values), -1)
    if name in cell_data:
        blocks = cell_data[name]
        parts = [np.asarray(blocks[i], dtype=float) for i in source.mesh.block_ids]
        values = np.concatenate([p.reshape(len(p), -1) for p in parts])
        return "cell", values
    near = difflib.get_close_matches(name, list(point_data) + list(cell_data), n=1)
    hint = f"; did you mean '{near[0]}'?" if near else ""
    raise ModelError(f"{source.path.name}: case '{case}' names array '{name}', which is not in the "
                     f"file; arrays found: {_available(point_data, cell_data)}{hint}")


# A component name as a VTU stores it ("XX", "Exy", "eps_zx", "S.YZ"): an optional short prefix
# (letters other than x, y, z, or anything ending in a separator) and two axis letters.
COMPONENT_NAME = re.compile(r"(?:[a-w]{0,3}|.*[_\-. :])([xyz])([xyz])")


def component_of(name: str) -> str | None:
    """Our component name ("xy") of a name a file gives a component, None if not recognised."""
    m = COMPONENT_NAME.fullmatch(name.strip().lower())
    return None if m is None else m.group(1) + m.group(2)


def component_names(source: ModelSource, array: str) -> tuple[str, ...]:
    """The component names a VTU stores for an array (ComponentName0, 1, ...), as written.

    Empty when the file stores none (meshio writes none), when the array is not in the file, or
    for formats other than VTU (XDMF has no such attribute). Point data first, as
    :func:`find_array` reads. VTK's own XML parser reads the file's structure only (the heavy
    data are skipped), once per file.
    """
    if source._names is None:
        source._names = _vtu_component_names(source.path)
    return source._names.get(array, ())


def _vtu_component_names(path: Path) -> dict[str, tuple[str, ...]]:
    if path.suffix.lower() != ".vtu" or not path.is_file():
        return {}
    from vtkmodules.vtkCommonCore import vtkObject
    from vtkmodules.vtkIOXMLParser import vtkXMLDataParser

    parser = vtkXMLDataParser()
    parser.SetFileName(str(path))
    quiet = vtkObject.GetGlobalWarningDisplay()
    vtkObject.GlobalWarningDisplayOff()  # a file meshio read but VTK's parser refuses: no names
    try:
        if not parser.Parse():
            return {}
    finally:
        vtkObject.SetGlobalWarningDisplay(quiet)
    found: dict[str, tuple[str, ...]] = {}
    for section in ("PointData", "CellData"):
        for element in _elements(parser.GetRootElement(), section):
            for k in range(element.GetNumberOfNestedElements()):
                da = element.GetNestedElement(k)
                name = da.GetAttribute("Name")
                count = da.GetAttribute("NumberOfComponents")
                if da.GetName() != "DataArray" or name is None or name in found:
                    continue
                names = tuple(da.GetAttribute(f"ComponentName{i}") or ""
                              for i in range(int(count) if count and count.isdigit() else 1))
                if any(names):
                    found[name] = names
    return found


def _elements(root: Any, name: str) -> list[Any]:
    """Every element called ``name`` under ``root`` (depth first)."""
    out, stack = [], [root]
    while stack:
        element = stack.pop()
        if element is None:
            continue
        if element.GetName() == name:
            out.append(element)
        stack.extend(element.GetNestedElement(k) for k in range(element.GetNumberOfNestedElements()))
    return out
