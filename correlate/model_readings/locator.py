"""Locate: put gauge points on the model surface (or inside it) and find their cells.

Stage: location. In: a :class:`~correlate.readers.model.Mesh` and points. Out: for every point, the
surface face it lies on, the closest point on that (possibly curved) face, the outward normal there,
the cell that owns the face and the natural coordinates in that cell.

The surface comes from :mod:`correlate.model_readings.surface`. VTK's static cell locator on the
faces' corner triangles finds a first candidate; the face and its neighbours are then projected on
exactly with the face's own shape functions (mapping.closest_point_on_face), so curved quadratic
faces are handled and a point near an edge lands on the face it is really closest to. Normals are the
faces' own (split at every edge), never averaged across an edge.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import GaugeError
from correlate.mechanics import elements, mapping
from correlate.model_readings.surface import Surface, build_surface
from correlate.readers.model import Mesh


@dataclass(frozen=True)
class SurfacePoints:
    """Points projected onto the surface, one entry per query point."""

    face: NDArray[np.int64]
    xi: NDArray[np.float64]          # (n, 2) natural coordinates on the face
    point: NDArray[np.float64]       # (n, 3) closest point on the face
    distance: NDArray[np.float64]    # (n,) distance from the query point
    normal: NDArray[np.float64]      # (n, 3) outward unit normal of the face there
    cell: NDArray[np.int64]          # (n,) global id of the owning cell
    local: NDArray[np.int64]         # (n,) face number within that cell (-1: the cell itself)


class Locator:
    """Closest points on a surface: VTK finds a candidate facet, our projection makes it exact."""

    def __init__(self, mesh: Mesh, surface: Surface) -> None:
        self.mesh = mesh
        self._use(surface)

    def __reduce__(self) -> tuple[type, tuple[Mesh, Surface]]:
        # VTK's locator cannot be serialised: a copy (a Dask worker's) rebuilds it
        return (Locator, (self.mesh, self.surface))

    def _use(self, surface: Surface) -> None:
        # vtkmodules directly: `import vtk` or pyvista would add ~2 s of imports
        from vtkmodules.util.numpy_support import numpy_to_vtk, numpy_to_vtkIdTypeArray
        from vtkmodules.vtkCommonCore import vtkPoints
        from vtkmodules.vtkCommonDataModel import vtkCellArray, vtkPolyData, vtkStaticCellLocator

        mesh = self.mesh
        self.surface = surface
        corner = surface.corner_conn
        n_corner = (corner >= 0).sum(axis=1)
        # VTK cell array [n, ids...] per face, without a Python loop: drop the -1 padding
        flat = np.c_[n_corner, corner]
        cells = np.ascontiguousarray(flat[flat >= 0], dtype=np.int64)
        points = vtkPoints()
        self._pts = np.ascontiguousarray(mesh.points, dtype=float)
        points.SetData(numpy_to_vtk(self._pts, deep=False))
        self._ids = numpy_to_vtkIdTypeArray(cells, deep=True)
        polys = vtkCellArray()
        polys.ImportLegacyFormat(self._ids)
        poly = vtkPolyData()
        poly.SetPoints(points)
        poly.SetPolys(polys)
        self._loc = vtkStaticCellLocator()
        self._loc.SetNumberOfCellsPerNode(2)  # finer buckets: faster queries, measured
        self._loc.SetDataSet(poly)
        self._loc.BuildLocator()
        self._poly = poly

    def candidates(self, points: NDArray[np.float64]) -> NDArray[np.int64]:
        """Nearest facet of each point by VTK's locator."""
        from vtkmodules.vtkCommonCore import reference

        out = np.empty(len(points), dtype=np.int64)
        closest = [0.0, 0.0, 0.0]
        cid, sub, d2 = reference(0), reference(0), reference(0.0)
        find = self._loc.FindClosestPoint
        for i, p in enumerate(points.tolist()):
            find(p, closest, cid, sub, d2)
            out[i] = int(cid)
        return out

    def project(self, points: NDArray[np.float64], *,
                prefer: NDArray[np.float64] | None = None) -> SurfacePoints:
        """Project points onto the surface exactly, choosing among the candidate's neighbours.

        Parameters
        ----------
        points : ndarray, shape (n, 3)
        prefer : ndarray, shape (n, 3), optional
            A normal per point (NaN rows: none). Where several faces are equally close (an edge),
            the face whose normal is nearest to it wins.
        """
        points = np.asarray(points, dtype=float)
        out = self._project(points, prefer)
        region = self.surface.region
        if region is not None and not region.covers(points, out.distance).all():
            # a point beyond the partial surface: collect the whole boundary once, and redo
            self._use(build_surface(self.mesh))
            out = self._project(points, prefer)
        return out

    def _project(self, points: NDArray[np.float64], prefer: NDArray[np.float64] | None
                 ) -> SurfacePoints:
        surf = self.surface
        first = self.candidates(points)
        # Fast path: the exact projection on VTK's nearest facet lands strictly inside that face.
        # Only points on a face's boundary (edges, corners) need the neighbouring faces.
        fx, fp, fd, fn = self._project_pairs(points, np.arange(len(points)), first)
        inside = np.zeros(len(points), dtype=bool)
        for t, ftype in enumerate(surf.types):
            sel = surf.type_of[first] == t
            inside[sel] = elements.inside_reference(ftype, fx[sel], tol=-1e-7)  # strictly inside
        out = SurfacePoints(face=first.copy(), xi=fx, point=fp, distance=fd, normal=fn,
                            cell=surf.parent[first], local=surf.local[first])
        edge = np.flatnonzero(~inside)
        if edge.size == 0:
            return out
        # candidate faces: every face sharing a corner node with the first candidate
        corner = surf.corner_conn[first[edge]]
        q_idx, f_idx = [], []
        nf = surf.node_faces
        for k in range(4):
            nodes = corner[:, k]
            has = nodes >= 0
            sub = nf[nodes[has]]
            counts = np.diff(sub.indptr)
            q_idx.append(np.repeat(np.flatnonzero(has), counts))
            f_idx.append(sub.indices)
        pairs = np.unique(np.c_[np.concatenate(q_idx), np.concatenate(f_idx)], axis=0)
        q, f = pairs[:, 0], pairs[:, 1]
        xi, x, dist, normal = self._project_pairs(points[edge], q, f)
        # choose per point: smallest distance; near-ties (an edge) by the preferred normal
        tol = 1e-9 * surf.scale
        best = np.full(len(edge), np.inf)
        np.minimum.at(best, q, dist)
        score = np.where(dist <= best[q] + tol, 0.0, np.inf)
        if prefer is not None:
            pref = prefer[edge][q]
            use = ~np.isnan(pref).any(axis=1)
            score[use] = score[use] - np.einsum("ij,ij->i", normal[use], pref[use])
        order = np.lexsort((f, score, q))  # ties: lowest face id, so the result is reproducible
        q_sorted = q[order]
        firsts = order[np.r_[True, q_sorted[1:] != q_sorted[:-1]]]
        out.face[edge] = f[firsts]
        out.xi[edge], out.point[edge] = xi[firsts], x[firsts]
        out.distance[edge], out.normal[edge] = dist[firsts], normal[firsts]
        out.cell[edge] = surf.parent[f[firsts]]
        out.local[edge] = surf.local[f[firsts]]
        return out

    def _project_pairs(self, points: NDArray[np.float64], q: NDArray[np.int64],
                       f: NDArray[np.int64]) -> tuple[NDArray, NDArray, NDArray, NDArray]:
        """Exact closest points of points[q] on faces f (natural coords, point, distance, normal)."""
        surf = self.surface
        xi = np.zeros((len(q), 2))
        x = np.zeros((len(q), 3))
        dist = np.zeros(len(q))
        normal = np.zeros((len(q), 3))
        for t, ftype in enumerate(surf.types):
            sel = surf.type_of[f] == t
            if not sel.any():
                continue
            nodes = self.mesh.points[surf.conn[t][surf.row[f[sel]]]]
            xi[sel], x[sel], dist[sel] = mapping.closest_point_on_face(ftype, nodes, points[q[sel]])
            normal[sel] = mapping.face_normals(ftype, nodes, xi[sel]) * surf.sign[f[sel], None]
        return xi, x, dist, normal


def parent_coordinates(mesh: Mesh, sp: SurfacePoints) -> NDArray[np.float64]:
    """Natural coordinates of surface points in their owning cells (2 columns for shells)."""
    if mesh.family != "solid":
        return sp.xi
    out = np.zeros((len(sp.face), 3))
    ctypes = mesh.cell_types(sp.cell)
    for ctype in np.unique(ctypes):
        for k in np.unique(sp.local[ctypes == ctype]):
            sel = (ctypes == ctype) & (sp.local == k)
            out[sel] = mapping.face_to_parent(str(ctype), int(k), sp.xi[sel])
    return out


def locate_inside(mesh: Mesh, points: NDArray[np.float64], names: list[str],
                  ) -> tuple[NDArray[np.int64], NDArray[np.float64]]:
    """Cells and natural coordinates of interior points (embedded gauges).

    Raises
    ------
    GaugeError
        Naming each point that no cell contains.
    """
    import pyvista as pv

    grid = pv.from_meshio(_as_meshio(mesh))
    ids = grid.find_containing_cell(points)
    ids = np.atleast_1d(ids)
    bad = [names[i] for i in np.flatnonzero(ids < 0)]
    if bad:
        raise GaugeError(*[f"embedded gauge '{n}' is not inside any element; check its coordinates "
                           "or mount it on the surface" for n in bad])
    xi = np.zeros((len(points), 3))
    types = mesh.cell_types(ids)
    block, row = mesh.block_rows(ids)
    for ctype in np.unique(types):
        sel = types == ctype
        conn = np.stack([mesh.blocks[b][1][r] for b, r in zip(block[sel], row[sel], strict=True)])
        xi[sel], _ = mapping.natural_coordinates(str(ctype), mesh.points[conn], points[sel])
    return ids, xi


def _as_meshio(mesh: Mesh):
    import meshio

    return meshio.Mesh(mesh.points, [(t, c) for t, c in mesh.blocks])
