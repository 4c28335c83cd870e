"""The model surface near the gauges: boundary faces, their parent cells and the region where the
collected faces are complete.

Stage: model readings. In: a :class:`~correlate.readers.model.Mesh` and the points to reach.
Out: a :class:`Surface` (faces, corner triangles for VTK's locator, parent cells) and the
:class:`Region` in which it holds every boundary face. A solid's boundary is the set of cell
faces used by one cell only.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import product

import numpy as np
from numpy.typing import NDArray
from scipy import sparse

from correlate.core.errors import ModelError
from correlate.mechanics import elements, mapping
from correlate.readers.model import Mesh


@dataclass(frozen=True)
class Surface:
    """Boundary faces of a mesh, grouped by face type, with their owning cells.

    ``conn[f]``, ``ftype[f]``: nodes and type name of face f; ``parent[f]``: global cell id;
    ``local[f]``: face number within the parent (-1 when the face is the cell itself, shells);
    ``sign[f]``: +1 or -1 so that sign times the right-hand-rule normal points out of the parent.
    """

    types: tuple[str, ...]
    type_of: NDArray[np.int64]
    conn: tuple[NDArray[np.int64], ...]   # per face: node ids (object-free: one array per type)
    row: NDArray[np.int64]                # face f is row row[f] of conn[type_of[f]]
    parent: NDArray[np.int64]
    local: NDArray[np.int64]
    sign: NDArray[np.float64]
    node_faces: sparse.csr_matrix         # node x face incidence (corners only)
    corner_conn: NDArray[np.int64]        # (F, 4) corners, -1 padded, for the locator
    scale: float                          # model size, for relative tolerances
    region: Region | None = None          # None: every boundary face; else where the faces are

    @property
    def n_faces(self) -> int:
        return len(self.parent)


@dataclass(frozen=True)
class Region:
    """Where a partial surface is complete.

    The surface holds every boundary face with a corner node within ``radius`` of a seed point (and
    some more). A face within distance d of a point p has all its corners within d + ``size`` of p
    (``size`` bounds the cells' extent), so a closest point found at distance d is exact when a seed
    lies within ``radius - d - size`` of p.
    """

    seeds: NDArray[np.float64]
    radius: float
    size: float

    def covers(self, points: NDArray[np.float64], distance: NDArray[np.float64]) -> NDArray[np.bool_]:
        """Whether the closest points found at ``distance`` from ``points`` are certainly exact."""
        from scipy.spatial import cKDTree

        room = self.radius - self.size - distance
        if not len(room):
            return np.zeros(0, dtype=bool)
        tree = cKDTree(self.seeds)
        near, _ = tree.query(points, distance_upper_bound=max(float(room.max()), 0.0))
        return near <= room


def _cell_centres(mesh: Mesh, cells: NDArray[np.int64]) -> NDArray[np.float64]:
    """Centres (mean of the nodes) of the given global cells."""
    out = np.zeros((len(cells), 3))
    block, row = mesh.block_rows(cells)
    for b, (_, conn) in enumerate(mesh.blocks):
        sel = block == b
        out[sel] = mesh.points[conn[row[sel]]].mean(axis=1)
    return out


MAX_VOXELS = 2**25   # occupancy grid for the cells near the gauges (bytes: one per voxel)
PARTIAL_SHARE = 0.5  # a partial surface over more than this share of the cells: take them all
CELL_BLOCK = 2**18   # cells (or nodes) per block of the passes over the whole mesh


def cell_size(mesh: Mesh) -> float:
    """An upper bound of every cell's extent (diagonal of its corners' bounding box, padded).

    Float32 keeps the gathers cheap; the 1 % pad covers its rounding and the bulge of curved
    quadratic edges beyond their corners is covered by the factor 1.5 the callers add. The cells
    are taken in blocks of CELL_BLOCK: a few MB of temporaries at a time, reused, instead of
    copies of the whole connectivity (a fresh allocation the size of the mesh costs more than the
    arithmetic on some machines).
    """
    axes = [np.ascontiguousarray(mesh.points[:, axis], dtype=np.float32) for axis in range(3)]
    ext = np.zeros(3)
    for ctype, conn in mesh.blocks:
        nc = elements.ELEMENTS[ctype].n_corners
        for start in range(0, len(conn), CELL_BLOCK):
            corners = np.ascontiguousarray(conn[start:start + CELL_BLOCK, :nc].T)
            for axis, x in enumerate(axes):
                lo = x[corners[0]]
                hi = lo.copy()
                for k in range(1, nc):
                    xk = x[corners[k]]
                    np.minimum(lo, xk, out=lo)
                    np.maximum(hi, xk, out=hi)
                ext[axis] = max(ext[axis], float((hi - lo).max()))
    return 1.01 * float(np.linalg.norm(ext))


def nodes_near(mesh: Mesh, seeds: NDArray[np.float64], radius: float) -> NDArray[np.bool_]:
    """Flag every node within ``radius`` of a seed (and some more: whole voxels).

    Voxels of a third of the radius (larger on a huge model, to keep the grid within
    MAX_VOXELS); a node within the radius lies at most ceil(radius / voxel) voxels away from its
    seed's along each axis, and only voxels that can hold such a node are flagged.
    """
    pts = mesh.points
    lo, hi = mesh.bounds
    span = hi - lo
    voxel = radius / 3 * max(1.0, float(np.prod(3 * span / radius + 1) / MAX_VOXELS) ** (1 / 3))
    dims = (span / voxel).astype(np.int64) + 1
    occupied = np.zeros(dims, dtype=bool)
    seed_ijk = np.floor((seeds - lo) / voxel).astype(np.int64)
    k = int(np.ceil(radius / voxel))
    for shift in product(range(-k, k + 1), repeat=3):
        gap = np.maximum(np.abs(shift) - 1, 0) * voxel  # nearest points of the two voxels
        if np.hypot.reduce(gap) > radius:
            continue
        ijk = np.clip(seed_ijk + shift, 0, dims - 1)
        occupied[ijk[:, 0], ijk[:, 1], ijk[:, 2]] = True
    out = np.empty(len(pts), dtype=bool)
    for start in range(0, len(pts), CELL_BLOCK):   # in blocks: no mesh-sized temporaries
        ijk = ((pts[start:start + CELL_BLOCK] - lo) / voxel).astype(np.int64)
        out[start:start + CELL_BLOCK] = occupied[ijk[:, 0], ijk[:, 1], ijk[:, 2]]
    return out


def cells_with(mesh: Mesh, flagged: NDArray[np.bool_]) -> NDArray[np.int64]:
    """Global ids of the cells with at least one flagged corner node."""
    out = []
    for b, (ctype, conn) in enumerate(mesh.blocks):
        hit = np.zeros(len(conn), dtype=bool)
        for k in range(elements.ELEMENTS[ctype].n_corners):
            hit |= flagged[conn[:, k]]
        out.append(mesh.offsets[b] + np.flatnonzero(hit))
    return np.concatenate(out)


def _boundary_faces(mesh: Mesh, cells: NDArray[np.int64] | None = None,
                    ) -> tuple[NDArray[np.int64], NDArray[np.int64]]:
    """Owning cell and local face number of every boundary face of a solid (or of ``cells``).

    VTK's geometry filter finds the faces used by one cell only (on the corner nodes, which decide
    the topology); each face is matched to its parent's face table by its sorted corners. Faces
    come in VTK's order, which is reproducible for the same mesh. Given a subset of the cells, the
    faces are those of the subset, including the cut through the mesh around it.
    """
    from vtkmodules.util.numpy_support import numpy_to_vtk, numpy_to_vtkIdTypeArray, vtk_to_numpy
    from vtkmodules.vtkCommonCore import vtkPoints
    from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkUnstructuredGrid
    from vtkmodules.vtkFiltersGeometry import vtkGeometryFilter

    corners, types, sizes, ids = [], [], [], []
    block_of = np.searchsorted(mesh.offsets, cells, side="right") - 1 if cells is not None else None
    for b, (ctype, conn) in enumerate(mesh.blocks):
        rows = np.arange(len(conn)) if block_of is None else cells[block_of == b] - mesh.offsets[b]
        nc = elements.ELEMENTS[ctype].n_corners
        corners.append(conn[rows, :nc].ravel())
        vtk_id = elements.ELEMENTS[elements.corner_type(ctype)].vtk_id
        types.append(np.full(len(rows), vtk_id, dtype=np.uint8))
        sizes.append(np.full(len(rows), nc))
        ids.append(mesh.offsets[b] + rows)
    sizes = np.concatenate(sizes)
    cell_ids = np.concatenate(ids)
    offsets = np.r_[0, np.cumsum(sizes)].astype(np.int64)
    grid = vtkUnstructuredGrid()
    points = vtkPoints()
    pts = np.ascontiguousarray(mesh.points, dtype=float)
    points.SetData(numpy_to_vtk(pts, deep=False))
    grid.SetPoints(points)
    cells = vtkCellArray()
    cells.SetData(numpy_to_vtkIdTypeArray(offsets, deep=True),
                  numpy_to_vtkIdTypeArray(np.concatenate(corners).astype(np.int64), deep=True))
    cell_types = np.concatenate(types)
    grid.SetCells(numpy_to_vtk(cell_types, deep=True,
                               array_type=3), cells)  # 3: VTK_UNSIGNED_CHAR
    filt = vtkGeometryFilter()
    filt.SetInputData(grid)
    filt.PassThroughCellIdsOn()
    filt.PassThroughPointIdsOn()
    filt.MergingOff()
    filt.Update()
    out = filt.GetOutput()
    parent = cell_ids[vtk_to_numpy(out.GetCellData().GetArray("vtkOriginalCellIds"))]
    ids_array = out.GetPointData().GetArray("vtkOriginalPointIds")
    # without compaction the filter keeps the input points (and writes no id array)
    point_ids = (vtk_to_numpy(ids_array).astype(np.int64) if ids_array is not None
                 else np.arange(out.GetNumberOfPoints(), dtype=np.int64))
    if ids_array is None and out.GetNumberOfPoints() != len(pts):
        raise RuntimeError("VTK's geometry filter renumbered the points without their ids")
    polys = out.GetPolys()
    face_off = vtk_to_numpy(polys.GetOffsetsArray()).astype(np.int64)
    face_ids = point_ids[vtk_to_numpy(polys.GetConnectivityArray()).astype(np.int64)]
    n_corner = np.diff(face_off)
    key = np.full((len(parent), 4), -1, dtype=np.int64)
    for nc in np.unique(n_corner):
        sel = np.flatnonzero(n_corner == nc)
        key[sel, :nc] = np.sort(face_ids[face_off[sel][:, None] + np.arange(nc)], axis=1)
    # the local face whose sorted corners are the face's
    local = np.full(len(parent), -1, dtype=np.int64)
    block, row = mesh.block_rows(parent)
    for b, (ctype, conn) in enumerate(mesh.blocks):
        on_b = np.flatnonzero(block == b)
        for k, (ftype, ids) in enumerate(elements.ELEMENTS[ctype].faces):
            nc = elements.ELEMENTS[ftype].n_corners
            cand = np.full((len(on_b), 4), -1, dtype=np.int64)
            cand[:, :nc] = np.sort(conn[row[on_b]][:, list(ids[:nc])], axis=1)
            local[on_b[(cand == key[on_b]).all(axis=1)]] = k
    if (local < 0).any():
        raise ModelError(f"{mesh.source}: {int((local < 0).sum())} boundary faces do not match a "
                         "face of their cell; the mesh is not conforming there")
    return parent, local


def build_surface(mesh: Mesh, near: NDArray[np.float64] | None = None,
                  reach: float = np.inf) -> Surface:
    """Collect the boundary faces of a solid, or the cells of a shell or plane model.

    With ``near`` points and a finite ``reach``, collect only the faces near them: every boundary
    face with a corner within reach + 2 cell sizes of a point (the surface's ``region`` says where
    it is complete; the locator falls back to the whole surface beyond it). A run then costs a
    few passes over the cell arrays instead of a boundary search through the whole mesh.
    """
    offsets = mesh.offsets
    groups: dict[str, list[tuple[NDArray, NDArray, NDArray]]] = {}
    subset, flagged, region = None, None, None
    if near is not None and len(near) and np.isfinite(reach):
        size = cell_size(mesh)
        radius = max(float(reach), 0.0) + 2.0 * size
        flagged = nodes_near(mesh, np.asarray(near, dtype=float), radius)
        subset = cells_with(mesh, flagged)
        if len(subset) > PARTIAL_SHARE * mesh.n_cells:
            subset, flagged = None, None
        else:
            region = Region(seeds=np.asarray(near, dtype=float), radius=radius, size=1.5 * size)
    if mesh.family == "solid":
        parent, local = _boundary_faces(mesh, subset)
        block, row = mesh.block_rows(parent)
        for b, (ctype, conn) in enumerate(mesh.blocks):
            for k, (ftype, ids) in enumerate(elements.ELEMENTS[ctype].faces):
                sel = np.flatnonzero((block == b) & (local == k))
                face_nodes = conn[row[sel]][:, list(ids)]
                if flagged is not None:  # drop the cut around the subset: it has no flagged corner
                    nc = elements.ELEMENTS[ftype].n_corners
                    keep = flagged[face_nodes[:, :nc]].any(axis=1)
                    sel, face_nodes = sel[keep], face_nodes[keep]
                if len(sel):
                    groups.setdefault(ftype, []).append((face_nodes, parent[sel], local[sel]))
    else:
        for b, (ctype, conn) in enumerate(mesh.blocks):
            rows = np.arange(len(conn))
            if subset is not None:
                rows = subset[(subset >= offsets[b]) & (subset < offsets[b + 1])] - offsets[b]
            groups.setdefault(ctype, []).append(
                (conn[rows], offsets[b] + rows, np.full(len(rows), -1)))
    if not groups and subset is not None:  # nothing near the points: the whole surface
        return build_surface(mesh)
    types = tuple(groups)
    conns, type_of, rows, parents, locals_ = [], [], [], [], []
    for t, ftype in enumerate(types):
        c = np.concatenate([g[0] for g in groups[ftype]])
        conns.append(c)
        type_of.append(np.full(len(c), t))
        rows.append(np.arange(len(c)))
        parents.append(np.concatenate([g[1] for g in groups[ftype]]))
        locals_.append(np.concatenate([g[2] for g in groups[ftype]]))
    type_of_a = np.concatenate(type_of)
    row = np.concatenate(rows)
    parent = np.concatenate(parents)
    local = np.concatenate(locals_)
    n_faces = len(parent)
    corner = np.full((n_faces, 4), -1, dtype=np.int64)
    sign = np.ones(n_faces)
    pts = mesh.points
    if mesh.family == "solid":
        parent_ids = np.unique(parent)
        parent_centres = _cell_centres(mesh, parent_ids)
    for t, ftype in enumerate(types):
        sel = type_of_a == t
        c = conns[t]
        nc = elements.ELEMENTS[ftype].n_corners
        corner[sel, :nc] = c[:, :nc]
        if mesh.family == "solid":
            xi = np.tile(elements.ELEMENTS[ftype].reference_nodes[:nc].mean(axis=0), (len(c), 1))
            with np.errstate(invalid="ignore", divide="ignore"):
                normal = mapping.face_normals(ftype, pts[c], xi)
            bad = ~np.isfinite(normal).all(axis=1)
            if bad.any():
                cells_bad = np.unique(parent[sel][bad])[:5]
                raise ModelError(f"{mesh.source}: boundary faces of zero area (degenerate elements "
                                 f"{', '.join(map(str, cells_bad))}"
                                 f"{' ...' if len(np.unique(parent[sel][bad])) > 5 else ''}); fix the mesh")
            centre = mapping.map_to_physical(ftype, pts[c], xi)
            own = parent_centres[np.searchsorted(parent_ids, parent[sel])]
            outward = np.einsum("ij,ij->i", normal, centre - own)
            sign[sel] = np.where(outward < 0, -1.0, 1.0)
    face_ids = np.repeat(np.arange(n_faces), 4)
    nodes = corner.ravel()
    ok = nodes >= 0
    node_faces = sparse.csr_matrix((np.ones(ok.sum()), (nodes[ok], face_ids[ok])),
                                   shape=(len(pts), n_faces))
    span = mesh.bounds[1] - mesh.bounds[0]
    return Surface(types=types, type_of=type_of_a, conn=tuple(conns), row=row, parent=parent,
                   local=local, sign=sign, node_faces=node_faces, corner_conn=corner,
                   scale=float(np.linalg.norm(span)) or 1.0, region=region)
