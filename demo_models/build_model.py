"""Build the finite-element model of the invented DEMO bracket.

Stage: demo data generator (not part of the ``correlate`` package). It meshes the bracket with gmsh
(quadratic tetrahedra), solves linear elasticity with scikit-fem for two unit load cases and writes,
into ``correlate/data/demo/``:

- ``bracket.vtu``: tet10 mesh (VTK node order) with point data ``U_pull``, ``U_side`` [mm],
  ``E_pull``, ``E_side`` [m/m, Voigt xx, yy, zz, xy, yz, xz, engineering shear] and ``S_pull``,
  ``S_side`` [MPa, same order];
- ``bracket_series.xdmf`` + ``bracket_series.h5``: the same fields as a time series, t = 0 pull,
  t = 1 side, named ``U``, ``E``, ``S``;
- ``bracket_coarse.vtu``: the same part and cases meshed with every element size doubled
  (``COARSE_FACTOR``), the coarser mesh of the demo's grid-convergence study (``[numerical]``);
- ``bracket_clamp_variants.h5``: the strains of a few invented clamp-stiffness variants (the root
  held by an elastic support instead of a rigid clamp) on bracket.vtu's mesh, for the demo's
  sweep (``--clamp-variants``);
- ``gauges.csv``: candidate gauge map on the model surface;
- ``demo_models/geometry.json``: dimensions, features, faces and the gauge candidates.

The scenario, the part and every number here are invented; they describe no real company, product
or test. Usage::

    python demo_models/build_model.py            # rebuild the shipped files
    python demo_models/build_model.py --check    # rebuild into a temporary folder and compare
    python demo_models/build_model.py --clamp-variants   # the sweep's clamp variants only
"""

from __future__ import annotations

import argparse
import contextlib
import csv
import json
import os
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

HERE = Path(__file__).resolve().parent
DEFAULT_OUT = HERE.parent / "correlate" / "data" / "demo"
GEOMETRY_JSON = HERE / "geometry.json"

# ---------------------------------------------------------------------------------------------
# Material and geometry [mm, N, MPa]. x along the arm (root face x = 0), y across the width,
# z through the thickness (bottom face z = 0, top face z = T).
E_MODULUS = 70000.0
POISSON = 0.33
T = 12.0  # thickness
FLANGE_LENGTH = 20.0  # x extent of the bolted root flange
FLANGE_HALF_WIDTH = 35.0
ARM_HALF_WIDTH = 20.0  # arm width 40
FILLET_RADIUS = 10.0  # flange-to-arm shoulder fillet (vertical edges at x = 20, y = +-20)
PIN_CENTRE = (180.0, 0.0)
PIN_RADIUS = 8.0  # pin hole, diameter 16
LUG_RADIUS = 20.0  # round lug end, concentric with the pin hole
HOLE_CENTRE = (140.0, 0.0)
HOLE_RADIUS = 6.0  # lightening hole, diameter 12
STRETCH = (30.0, 134.0)  # prismatic arm between the fillet end and the lightening hole
BEAM_SECTION_X = 82.0  # 52 mm (> arm width 40) from both ends of the stretch: St-Venant distance

# Unit load cases: total pin load applied as a cosine bearing pressure on the pin-hole bore.
CASES = {"pull": (10000.0, 0.0), "side": (0.0, 2000.0)}  # (Fx, Fy) [N]

# Mesh sizes [mm]: fine at the holes and fillets, coarse elsewhere.
SIZE_HOLE = 1.5
SIZE_FILLET = 2.0
SIZE_MAX = 7.0
SIZE_DIST_MIN = 0.5  # fine size held up to this distance from the feature
SIZE_DIST_MAX = 10.0  # coarse size reached at this distance
# The coarser mesh of the grid study: every size above times this factor (refinement ratio r = 2).
COARSE_FACTOR = 2.0

# gmsh stores the tet10 edge nodes as (0-1, 1-2, 2-0, 0-3, 2-3, 1-3); VTK (and meshio) as
# (0-1, 1-2, 2-0, 0-3, 1-3, 2-3): the last two edge nodes are swapped.
GMSH_TO_VTK_TET10 = np.array([0, 1, 2, 3, 4, 5, 6, 7, 9, 8])
VTK_TET10_EDGES = np.array([[0, 1], [1, 2], [2, 0], [0, 3], [1, 3], [2, 3]])

VOIGT = ("xx", "yy", "zz", "xy", "yz", "xz")

# Tolerances used by the --check comparison: meshes from the same gmsh version are identical,
# so fields differ only by solver round-off; another gmsh version meshes differently.
CHECK_RTOL_SAME_VERSION = 1e-6
CHECK_RTOL_OTHER_VERSION = 0.05


# ---------------------------------------------------------------------------------------------
# Geometry and mesh (gmsh)

def _surfaces_in_box(gmsh, box: tuple[float, ...]) -> list[int]:
    eps = 1e-3
    lo = [b - eps for b in box[:3]]
    hi = [b + eps for b in box[3:]]
    return [tag for _, tag in gmsh.model.getEntitiesInBoundingBox(*lo, *hi, dim=2)]


def mesh_bracket(factor: float = 1.0
                 ) -> tuple[NDArray[np.float64], NDArray[np.int64], dict[str, NDArray[np.int64]]]:
    """Mesh the bracket with quadratic tetrahedra, every element size times ``factor``.

    Returns
    -------
    points : ndarray, shape (n, 3)
        Node coordinates. [mm]
    tet10 : ndarray, shape (m, 10)
        Connectivity in VTK node order.
    faces : dict of str to ndarray, shape (k, 3)
        Vertex triplets of the boundary triangles of the root face (``"root"``) and the pin-hole
        bore (``"pin_bore"``), as indices into ``points``.
    """
    import gmsh

    gmsh.initialize(readConfigFiles=False, interruptible=False)
    try:
        for name, value in {
            "General.Terminal": 0,
            "General.NumThreads": 1,
            "Mesh.MaxNumThreads1D": 1,
            "Mesh.MaxNumThreads2D": 1,
            "Mesh.MaxNumThreads3D": 1,
            "Mesh.Algorithm": 6,  # Frontal-Delaunay surfaces
            "Mesh.Algorithm3D": 1,  # Delaunay volume
            "Mesh.RandomFactor": 1e-9,
            "Mesh.RandomSeed": 1,
            "Mesh.ElementOrder": 2,
            "Mesh.SecondOrderLinear": 0,  # mid-edge nodes on the true (curved) geometry
            "Mesh.HighOrderOptimize": 0,
            "Mesh.Optimize": 1,
            "Mesh.MeshSizeFromPoints": 0,
            "Mesh.MeshSizeFromCurvature": 0,
            "Mesh.MeshSizeExtendFromBoundary": 0,
            "Mesh.MeshSizeMax": SIZE_MAX * factor,
        }.items():
            gmsh.option.setNumber(name, value)
        gmsh.model.add("bracket")
        occ = gmsh.model.occ
        cx, cy = PIN_CENTRE
        flange = occ.addBox(0, -FLANGE_HALF_WIDTH, 0, FLANGE_LENGTH, 2 * FLANGE_HALF_WIDTH, T)
        arm = occ.addBox(FLANGE_LENGTH, -ARM_HALF_WIDTH, 0, cx - FLANGE_LENGTH,
                         2 * ARM_HALF_WIDTH, T)
        lug = occ.addCylinder(cx, cy, 0, 0, 0, T, LUG_RADIUS)
        body, _ = occ.fuse([(3, flange)], [(3, arm), (3, lug)])
        occ.synchronize()
        shoulders = []
        for sign in (1, -1):
            y = sign * ARM_HALF_WIDTH
            shoulders += [tag for _, tag in gmsh.model.getEntitiesInBoundingBox(
                FLANGE_LENGTH - 1e-3, y - 1e-3, -1e-3, FLANGE_LENGTH + 1e-3, y + 1e-3, T + 1e-3,
                dim=1)]
        if len(shoulders) != 2:
            raise RuntimeError(f"expected 2 shoulder edges to fillet, found {len(shoulders)}")
        body = occ.fillet([body[0][1]], shoulders, [FILLET_RADIUS])
        pin = occ.addCylinder(cx, cy, -1, 0, 0, T + 2, PIN_RADIUS)
        hole = occ.addCylinder(*HOLE_CENTRE, -1, 0, 0, T + 2, HOLE_RADIUS)
        body, _ = occ.cut(body, [(3, pin), (3, hole)])
        occ.synchronize()
        if len(body) != 1:
            raise RuntimeError(f"expected one solid after the boolean operations, got {body}")

        pin_bore = _surfaces_in_box(gmsh, (cx - PIN_RADIUS, cy - PIN_RADIUS, 0,
                                           cx + PIN_RADIUS, cy + PIN_RADIUS, T))
        hole_bore = _surfaces_in_box(gmsh, (HOLE_CENTRE[0] - HOLE_RADIUS,
                                            HOLE_CENTRE[1] - HOLE_RADIUS, 0,
                                            HOLE_CENTRE[0] + HOLE_RADIUS,
                                            HOLE_CENTRE[1] + HOLE_RADIUS, T))
        fillets = []
        for sign in (1, -1):
            y0, y1 = sorted((sign * ARM_HALF_WIDTH, sign * (ARM_HALF_WIDTH + FILLET_RADIUS)))
            fillets += _surfaces_in_box(gmsh, (FLANGE_LENGTH, y0, 0,
                                               FLANGE_LENGTH + FILLET_RADIUS, y1, T))
        root = _surfaces_in_box(gmsh, (0, -FLANGE_HALF_WIDTH, 0, 0, FLANGE_HALF_WIDTH, T))
        for name, tags in {"pin bore": pin_bore, "hole bore": hole_bore, "fillets": fillets,
                           "root": root}.items():
            if not tags:
                raise RuntimeError(f"no surface found for the {name}")

        field = gmsh.model.mesh.field
        thresholds = []
        for tags, size in ((pin_bore + hole_bore, SIZE_HOLE * factor),
                           (fillets, SIZE_FILLET * factor)):
            dist = field.add("Distance")
            field.setNumbers(dist, "SurfacesList", tags)
            field.setNumber(dist, "Sampling", 40)
            thr = field.add("Threshold")
            field.setNumber(thr, "InField", dist)
            field.setNumber(thr, "SizeMin", size)
            field.setNumber(thr, "SizeMax", SIZE_MAX * factor)
            field.setNumber(thr, "DistMin", SIZE_DIST_MIN)
            field.setNumber(thr, "DistMax", SIZE_DIST_MAX)
            thresholds.append(thr)
        fmin = field.add("Min")
        field.setNumbers(fmin, "FieldsList", thresholds)
        field.setAsBackgroundMesh(fmin)

        gmsh.model.mesh.generate(3)

        node_tags, coords, _ = gmsh.model.mesh.getNodes()
        coords = coords.reshape(-1, 3)
        _, elem_nodes = gmsh.model.mesh.getElementsByType(11)  # 11: 10-node tetrahedron
        elem_nodes = elem_nodes.reshape(-1, 10)
        face_nodes = {}
        for name, tags in (("root", root), ("pin_bore", pin_bore)):
            tri = [gmsh.model.mesh.getElementsByType(9, tag)[1].reshape(-1, 6)[:, :3]
                   for tag in tags]  # 9: 6-node triangle
            face_nodes[name] = np.vstack(tri)
    finally:
        gmsh.finalize()

    # Keep only the nodes used by the tetrahedra, numbered in gmsh tag order.
    used = np.unique(elem_nodes)
    index = np.full(int(max(node_tags.max(), used.max())) + 1, -1, dtype=np.int64)
    index[used] = np.arange(used.size)
    position = np.full(index.size, -1, dtype=np.int64)
    position[node_tags.astype(np.int64)] = np.arange(node_tags.size)
    points = coords[position[used]]
    tet10 = index[elem_nodes.astype(np.int64)][:, GMSH_TO_VTK_TET10]
    faces = {name: index[tri.astype(np.int64)] for name, tri in face_nodes.items()}

    # VTK wants (p1 - p0) x (p2 - p0) . (p3 - p0) > 0; swap vertices 1 and 2 where it is not.
    p = points[tet10[:, :4]]
    vol = np.einsum("ij,ij->i", np.cross(p[:, 1] - p[:, 0], p[:, 2] - p[:, 0]), p[:, 3] - p[:, 0])
    flip = vol < 0
    tet10[flip] = tet10[flip][:, [0, 2, 1, 3, 6, 5, 4, 7, 9, 8]]
    check_tet10_order(points, tet10)
    return points, tet10, faces


def check_tet10_order(points: NDArray[np.float64], tet10: NDArray[np.int64]) -> float:
    """Check that every mid-edge node sits at the midpoint of its VTK edge.

    Parameters
    ----------
    points : ndarray, shape (n, 3)
        Node coordinates. [mm]
    tet10 : ndarray, shape (m, 10)
        Connectivity in VTK node order.

    Returns
    -------
    float
        Largest distance from a mid-edge node to its edge's chord midpoint, divided by the edge
        length (zero on straight edges, the sagitta ratio on curved boundary edges).

    Raises
    ------
    RuntimeError
        If a mid-edge node lies closer to another edge's midpoint than to its own, or the
        largest ratio exceeds 0.1 (a wrong node order gives about 0.5), or a tetrahedron has
        a non-positive volume.
    """
    p = points[tet10]
    mids = 0.5 * (p[:, VTK_TET10_EDGES[:, 0]] + p[:, VTK_TET10_EDGES[:, 1]])  # (m, 6, 3)
    length = np.linalg.norm(p[:, VTK_TET10_EDGES[:, 0]] - p[:, VTK_TET10_EDGES[:, 1]], axis=2)
    dist = np.linalg.norm(p[:, 4:, None, :] - mids[:, None, :, :], axis=3)  # node k vs edge j
    own = np.einsum("mkk->mk", dist)
    ratio = float((own / length).max())
    if not np.all(dist.argmin(axis=2) == np.arange(6)) or ratio > 0.1:
        raise RuntimeError(f"tet10 mid-edge nodes do not match the VTK edges (ratio {ratio:.3g})")
    v = p[:, :4]
    vol = np.einsum("ij,ij->i", np.cross(v[:, 1] - v[:, 0], v[:, 2] - v[:, 0]), v[:, 3] - v[:, 0])
    if vol.min() <= 0:
        raise RuntimeError("a tetrahedron has a non-positive volume")
    return ratio


# ---------------------------------------------------------------------------------------------
# Solution (scikit-fem)

def _edge_keys(a: NDArray[np.int64], b: NDArray[np.int64], n: int) -> NDArray[np.int64]:
    return np.minimum(a, b) * n + np.maximum(a, b)


class _SkfemMesh:
    """The tet10 mesh as a scikit-fem isoparametric P2 mesh, with the node maps both ways."""

    def __init__(self, points: NDArray[np.float64], tet10: NDArray[np.int64]) -> None:
        from skfem import MeshTet1, MeshTet2

        n = points.shape[0]
        self.vertex_ids = np.unique(tet10[:, :4])
        self.vertex_index = np.full(n, -1, dtype=np.int64)
        self.vertex_index[self.vertex_ids] = np.arange(self.vertex_ids.size)
        mesh1 = MeshTet1(np.ascontiguousarray(points[self.vertex_ids].T),
                         np.ascontiguousarray(self.vertex_index[tet10[:, :4]].T))
        self.nv = nv = mesh1.p.shape[1]

        # Our mid-edge node of every scikit-fem edge.
        edge_key = _edge_keys(*mesh1.edges.astype(np.int64), nv)
        order = np.argsort(edge_key)
        key = _edge_keys(self.vertex_index[tet10[:, VTK_TET10_EDGES[:, 0]]].ravel(),
                         self.vertex_index[tet10[:, VTK_TET10_EDGES[:, 1]]].ravel(), nv)
        skfem_edge = order[np.searchsorted(edge_key[order], key)]
        if not np.array_equal(edge_key[skfem_edge], key):
            raise RuntimeError("an edge of the tet10 mesh is missing in the scikit-fem mesh")
        self.edge_node = np.empty(mesh1.edges.shape[1], dtype=np.int64)
        self.edge_node[skfem_edge] = tet10[:, 4:].ravel()

        mesh = MeshTet2.from_mesh(mesh1)
        doflocs = mesh.doflocs.copy()
        doflocs[:, mesh.dofs.nodal_dofs[0]] = points[self.vertex_ids].T
        doflocs[:, mesh.dofs.edge_dofs[0]] = points[self.edge_node].T  # curved boundary edges
        self.mesh = MeshTet2(doflocs, mesh.t)

    def facets_of(self, tri: NDArray[np.int64]) -> NDArray[np.int64]:
        """Return the scikit-fem facet numbers of triangles given by their vertex nodes."""
        nv = self.nv
        fkey = np.sort(self.mesh.facets.astype(np.int64), axis=0)
        fkey = (fkey[0] * nv + fkey[1]) * nv + fkey[2]
        forder = np.argsort(fkey)
        t = np.sort(self.vertex_index[tri], axis=1)
        key = (t[:, 0] * nv + t[:, 1]) * nv + t[:, 2]
        found = forder[np.searchsorted(fkey[forder], key)]
        if not np.array_equal(fkey[found], key):
            raise RuntimeError("a boundary triangle is missing in the scikit-fem mesh")
        return found

    def node_dofs(self, basis) -> NDArray[np.int64]:
        """Return the basis DOF of every tet10 node, shape (n, components)."""
        ncomp = basis.nodal_dofs.shape[0]
        dofs = np.empty((self.vertex_index.size, ncomp), dtype=np.int64)
        for c in range(ncomp):
            dofs[self.vertex_ids, c] = basis.nodal_dofs[c]
            dofs[self.edge_node, c] = basis.edge_dofs[c]
        return dofs


def solve_cases(points: NDArray[np.float64], tet10: NDArray[np.int64],
                faces: dict[str, NDArray[np.int64]], *, root_spring: float | None = None
                ) -> dict[str, dict[str, NDArray[np.float64]]]:
    """Solve the load cases and return nodal displacement, strain and stress.

    Parameters
    ----------
    points : ndarray, shape (n, 3)
        Node coordinates. [mm]
    tet10 : ndarray, shape (m, 10)
        Connectivity in VTK node order.
    faces : dict of str to ndarray, shape (k, 3)
        Vertex triplets of the root face (clamped) and the pin-hole bore (loaded).
    root_spring : float, optional
        Instead of clamping the root face, hold it by a distributed elastic support of this
        stiffness per unit area in every direction (traction = -k u, a Winkler foundation), the
        invented clamp stiffness of the demo's sweep. [N/mm^3]

    Returns
    -------
    dict
        For each case in :data:`CASES`: ``"U"`` (n, 3) [mm], ``"E"`` (n, 6) [m/m, engineering
        shear] and ``"S"`` (n, 6) [MPa], Voigt order xx, yy, zz, xy, yz, xz.

    Notes
    -----
    Isoparametric P2 elements: the gmsh mid-edge nodes define the curved geometry. The load is a
    cosine bearing pressure p0 max(cos(theta - theta_F), 0) on the pin-hole bore, acting radially
    outwards, scaled so that its resultant equals the case load exactly. The root face x = 0 is
    clamped (all displacements zero).

    The strain of the P2 displacement is linear and discontinuous from element to element; it
    is carried to the P2 nodes by a global L2 projection (consistent mass matrix), component by
    component. The nodal stress is Hooke's law applied to the projected strain, which is the
    same as projecting the element stress because both operations are linear.
    """
    from scipy.sparse.csgraph import reverse_cuthill_mckee
    from scipy.sparse.linalg import splu
    from skfem import Basis, BilinearForm, ElementTetP2, ElementVector, FacetBasis, LinearForm, asm
    from skfem.helpers import ddot, div, dot, sym_grad

    sk = _SkfemMesh(points, tet10)
    element = ElementVector(ElementTetP2())
    basis = Basis(sk.mesh, element, intorder=4)
    lam, mu = _lame()

    @BilinearForm
    def elasticity(u, v, w):
        return lam * div(u) * div(v) + 2.0 * mu * ddot(sym_grad(u), sym_grad(v))

    stiffness = asm(elasticity, basis)
    if root_spring is None:
        clamped = basis.get_dofs(facets=sk.facets_of(faces["root"])).all()
    else:
        root = FacetBasis(sk.mesh, element, facets=sk.facets_of(faces["root"]), intorder=4)
        stiffness = stiffness + asm(BilinearForm(lambda u, v, w: root_spring * dot(u, v)), root)
        clamped = np.zeros(0, dtype=np.int64)
    free = np.setdiff1d(np.arange(basis.N), clamped)
    kff = stiffness[free][:, free].tocsr()
    # A bandwidth-reducing order and no further pivoting order: fastest SuperLU set-up here.
    perm = reverse_cuthill_mckee(kff, symmetric_mode=True)
    lu = splu(kff[perm][:, perm].tocsc(), permc_spec="NATURAL")

    bore = FacetBasis(sk.mesh, element, facets=sk.facets_of(faces["pin_bore"]), intorder=6)
    cx, cy = PIN_CENTRE

    def bearing(direction: NDArray[np.float64]) -> LinearForm:
        @LinearForm
        def form(v, w):
            rx, ry = w.x[0] - cx, w.x[1] - cy
            r = np.sqrt(rx**2 + ry**2)
            er = np.array([rx / r, ry / r, 0 * r])
            cos = np.maximum(er[0] * direction[0] + er[1] * direction[1], 0.0)
            return dot(cos * er, v)

        return form

    scalar = basis.with_element(ElementTetP2())
    mass_lu = splu(asm(BilinearForm(lambda u, v, w: u * v), scalar).tocsc(),
                   permc_spec="MMD_AT_PLUS_A")

    @LinearForm
    def moment(v, w):
        return w.f * v

    node_dof = sk.node_dofs(basis)
    node_sdof = sk.node_dofs(scalar)[:, 0]
    results = {}
    for case, (fx, fy) in CASES.items():
        direction = np.array([fx, fy]) / np.hypot(fx, fy)
        load = asm(bearing(direction), bore)
        # The P2 basis sums to one, so the component sums of the load vector are the resultant.
        resultant = np.array([load[basis.nodal_dofs[c]].sum() + load[basis.edge_dofs[c]].sum()
                              for c in range(2)])
        load *= np.hypot(fx, fy) / (resultant @ direction)
        u = np.zeros(basis.N)
        u_free = np.empty(free.size)
        u_free[perm] = lu.solve(load[free][perm])
        u[free] = u_free
        grad = basis.interpolate(u).grad  # (3, 3, elements, points): du_i / dx_j
        strain = np.empty((points.shape[0], 6))
        for k, name in enumerate(VOIGT):
            i, j = "xyz".index(name[0]), "xyz".index(name[1])
            values = grad[i, j] if i == j else grad[i, j] + grad[j, i]  # engineering shear
            strain[:, k] = mass_lu.solve(asm(moment, scalar, f=values))[node_sdof]
        results[case] = {"U": u[node_dof], "E": strain, "S": _stress(strain)}
    return results


def tet10_shape(xi: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Return the VTK tet10 shape functions and their natural derivatives at one point.

    Parameters
    ----------
    xi : ndarray, shape (3,)
        Natural coordinates (r, s, t); vertex 1 at r = 1, 2 at s = 1, 3 at t = 1.

    Returns
    -------
    N : ndarray, shape (10,)
    dN : ndarray, shape (10, 3)
    """
    lam = np.array([1.0 - xi.sum(), xi[0], xi[1], xi[2]])
    dlam = np.array([[-1.0, -1.0, -1.0], [1, 0, 0], [0, 1, 0], [0, 0, 1]])
    i, j = VTK_TET10_EDGES.T
    N = np.concatenate([lam * (2 * lam - 1), 4 * lam[i] * lam[j]])
    dN = np.concatenate([(4 * lam - 1)[:, None] * dlam,
                         4 * (lam[i, None] * dlam[j] + lam[j, None] * dlam[i])])
    return N, dN


def probe_nodal(points: NDArray[np.float64], tet10: NDArray[np.int64],
                values: NDArray[np.float64], xyz: NDArray[np.float64]) -> NDArray[np.float64]:
    """Interpolate nodal values at points inside the mesh with the tet10 shape functions.

    Parameters
    ----------
    points, tet10 : ndarray
        The tet10 mesh (VTK node order).
    values : ndarray, shape (n, k)
        Nodal values.
    xyz : ndarray, shape (p, 3)
        Points inside the mesh. [mm]

    Returns
    -------
    ndarray, shape (p, k)

    Raises
    ------
    RuntimeError
        If a point lies in no element.

    Notes
    -----
    Candidate elements are those whose corner bounding box (grown by 0.1 mm) holds the point;
    the natural coordinates come from Newton's method on the curved tet10 map.
    """
    corners = points[tet10[:, :4]]
    lo, hi = corners.min(axis=1) - 0.1, corners.max(axis=1) + 0.1
    out = np.empty((len(xyz), values.shape[1]))
    for k, p in enumerate(xyz):
        for cell in np.flatnonzero(np.all((lo <= p) & (p <= hi), axis=1)):
            x = points[tet10[cell]]
            xi = np.full(3, 0.25)
            for _ in range(20):
                N, dN = tet10_shape(xi)
                step = np.linalg.solve(x.T @ dN, p - N @ x)
                xi += step
                if np.abs(step).max() < 1e-13:
                    break
            if min(xi.min(), 1.0 - xi.sum()) >= -1e-9:
                out[k] = tet10_shape(xi)[0] @ values[tet10[cell]]
                break
        else:
            raise RuntimeError(f"point {p} lies in no element of the mesh")
    return out


def _lame() -> tuple[float, float]:
    lam = E_MODULUS * POISSON / ((1 + POISSON) * (1 - 2 * POISSON))
    mu = E_MODULUS / (2 * (1 + POISSON))
    return lam, mu


def _stress(strain: NDArray[np.float64]) -> NDArray[np.float64]:
    """Return Voigt stress [MPa] from Voigt strain with engineering shear (isotropic Hooke)."""
    lam, mu = _lame()
    trace = strain[:, :3].sum(axis=1, keepdims=True)
    return np.hstack([lam * trace + 2 * mu * strain[:, :3], mu * strain[:, 3:]])


# ---------------------------------------------------------------------------------------------
# Output files

def _point_data(results: dict[str, dict[str, NDArray[np.float64]]]
                ) -> dict[str, NDArray[np.float32]]:
    # Single precision keeps the shipped files small: 7 significant digits are 1e-5 microstrain
    # at these strain levels, far below any gauge resolution.
    return {f"{field}_{case}": values.astype(np.float32)
            for field in ("U", "E", "S") for case, fields in results.items()
            for name, values in fields.items() if name == field}


def write_coarse(out_dir: Path) -> dict[str, int]:
    """Mesh with every size times ``COARSE_FACTOR``, solve both cases, write bracket_coarse.vtu.

    Returns the node and cell counts.
    """
    import meshio

    points, tet10, faces = mesh_bracket(COARSE_FACTOR)
    results = solve_cases(points, tet10, faces)
    meshio.write(out_dir / "bracket_coarse.vtu",
                 meshio.Mesh(points, [("tetra10", tet10.astype(np.int32))],
                             point_data=_point_data(results)), binary=True, compression="zlib")
    return {"nodes": int(points.shape[0]), "cells": int(tet10.shape[0])}


def write_results(out_dir: Path, points: NDArray[np.float64], tet10: NDArray[np.int64],
                  results: dict[str, dict[str, NDArray[np.float64]]]) -> None:
    """Write ``bracket.vtu`` and the time series ``bracket_series.xdmf`` / ``.h5``.

    Parameters
    ----------
    out_dir : Path
        Target folder (created if missing).
    points : ndarray, shape (n, 3)
        Node coordinates. [mm]
    tet10 : ndarray, shape (m, 10)
        Connectivity in VTK node order.
    results : dict
        Output of :func:`solve_cases`.
    """
    import meshio

    out_dir.mkdir(parents=True, exist_ok=True)
    cells = [("tetra10", tet10.astype(np.int32))]
    point_data = _point_data(results)
    meshio.write(out_dir / "bracket.vtu", meshio.Mesh(points, cells, point_data=point_data),
                 binary=True, compression="zlib")
    # meshio's TimeSeriesWriter puts the .h5 in the current directory (meshio issue 1442).
    with _working_directory(out_dir), meshio.xdmf.TimeSeriesWriter("bracket_series.xdmf") as writer:
        writer.write_points_cells(points, cells)
        for t, case in enumerate(CASES):
            writer.write_data(float(t), point_data={name: values.astype(np.float32)
                                                   for name, values in results[case].items()})
    # meshio tags six-component arrays "Tensor6", which XDMF defines as xx, xy, xz, yy, yz, zz:
    # VTK's XDMF reader then expands E and S into 3x3 tensors with the components in the wrong
    # places. "Vector" keeps the six values, in our Voigt order, for meshio and VTK alike.
    xdmf = out_dir / "bracket_series.xdmf"
    xdmf.write_text(xdmf.read_text().replace('AttributeType="Tensor6"', 'AttributeType="Vector"'))


@contextlib.contextmanager
def _working_directory(path: Path):
    previous = Path.cwd()
    os.chdir(path)
    try:
        yield
    finally:
        os.chdir(previous)


# ---------------------------------------------------------------------------------------------
# Candidate gauges. Each: id, centre, grid direction, outward surface normal, active grid length
# [mm], transverse sensitivity [fraction], rosette group, face, note.
_R2 = np.sqrt(0.5)
_FILLET_45 = FLANGE_LENGTH + FILLET_RADIUS - FILLET_RADIUS * _R2  # 22.9289 mm
_C60, _S60 = 0.5, np.sqrt(3.0) / 2.0
GAUGES = [
    ("G01", (82.0, 0.0, T), (1, 0, 0), (0, 0, 1), 3.0, 0.005, "", "top",
     "prismatic stretch, centreline (beam section)"),
    ("G02", (82.0, 16.0, T), (1, 0, 0), (0, 0, 1), 3.0, 0.005, "", "top",
     "prismatic stretch, 4 mm from the +y edge"),
    ("G03", (82.0, -16.0, 0.0), (1, 0, 0), (0, 0, -1), 3.0, 0.006, "", "bottom",
     "prismatic stretch, 4 mm from the -y edge"),
    ("G04", (60.0, ARM_HALF_WIDTH, T / 2), (1, 0, 0), (0, 1, 0), 6.0, 0.004, "", "side +y",
     "arm side, mid-thickness, long grid in the uniform bending region"),
    ("G05", (60.0, -ARM_HALF_WIDTH, T / 2), (1, 0, 0), (0, -1, 0), 3.0, 0.004, "", "side -y",
     "arm side, mid-thickness, opposite G04"),
    ("G06", (82.0, -ARM_HALF_WIDTH, T / 2), (0, 0, 1), (0, -1, 0), 3.0, 0.008, "", "side -y",
     "arm side, grid through the thickness (Poisson strain)"),
    ("G07", (PIN_CENTRE[0], PIN_RADIUS + 1.5, T), (1, 0, 0), (0, 0, 1), 0.8, 0.015, "", "top",
     "lug net section, 1.5 mm from the pin-hole edge"),
    ("G08", (PIN_CENTRE[0], -PIN_RADIUS - 1.5, T), (1, 0, 0), (0, 0, 1), 1.0, 0.012, "", "top",
     "lug net section, 1.5 mm from the pin-hole edge, opposite G07"),
    ("G09", (HOLE_CENTRE[0], HOLE_RADIUS, T / 2), (1, 0, 0), (0, -1, 0), 1.5, 0.010, "",
     "hole bore", "lightening-hole bore at 90 degrees to the arm axis, hoop direction"),
    ("G10", (HOLE_CENTRE[0], -HOLE_RADIUS - 1.5, T), (1, 0, 0), (0, 0, 1), 0.8, 0.015, "", "top",
     "1.5 mm from the lightening-hole edge"),
    ("G11", (_FILLET_45, _FILLET_45, T / 2), (_R2, -_R2, 0), (_R2, _R2, 0), 1.5, 0.010, "",
     "fillet +y", "root fillet at 45 degrees, mid-thickness, along the arc"),
    ("G12", (_FILLET_45, -_FILLET_45, T / 2), (_R2, _R2, 0), (_R2, -_R2, 0), 1.5, 0.010, "",
     "fillet -y", "root fillet at 45 degrees, mid-thickness, along the arc"),
    ("G13", (33.0, 18.0, T), (1, 0, 0), (0, 0, 1), 1.5, 0.008, "", "top",
     "3 mm past the fillet end, 2 mm from the +y edge"),
    ("G14", (PIN_CENTRE[0] + 12.0, 0.0, T), (0, 1, 0), (0, 0, 1), 2.0, 0.006, "", "top",
     "lug crown beyond the pin hole, across the arm axis"),
    ("G15", (PIN_CENTRE[0], -14.0, 0.0), (1, 0, 0), (0, 0, -1), 2.0, 0.006, "", "bottom",
     "lug net section, middle of the -y ligament"),
    ("RA-a", (90.0, 3.0, 0.0), (1, 0, 0), (0, 0, -1), 2.0, 0.008, "RA", "bottom",
     "0/45/90 rosette, prismatic stretch"),
    ("RA-b", (90.0, 3.0, 0.0), (_R2, _R2, 0), (0, 0, -1), 2.0, 0.008, "RA", "bottom",
     "0/45/90 rosette, grid at 45 degrees"),
    ("RA-c", (90.0, 3.0, 0.0), (0, 1, 0), (0, 0, -1), 2.0, 0.008, "RA", "bottom",
     "0/45/90 rosette, grid at 90 degrees"),
    ("RB-a", (191.0, 7.0, T), (1, 0, 0), (0, 0, 1), 1.5, 0.010, "RB", "top",
     "0/60/120 rosette, lug beside the pin hole"),
    ("RB-b", (191.0, 7.0, T), (_C60, _S60, 0), (0, 0, 1), 1.5, 0.010, "RB", "top",
     "0/60/120 rosette, grid at 60 degrees"),
    ("RB-c", (191.0, 7.0, T), (-_C60, _S60, 0), (0, 0, 1), 1.5, 0.010, "RB", "top",
     "0/60/120 rosette, grid at 120 degrees"),
]
# One invented bending half bridge (a bridge channel, not two quarter bridges): two grids on the
# arm's opposite side faces at mid-thickness, wired as arms 1 and 2 of one channel "HB" (the
# [[bridge]] table of study.toml sets its factor and shunt gain). Same row layout as GAUGES.
BRIDGE_ARMS = [
    ("HB1", (100.0, ARM_HALF_WIDTH, T / 2), (1, 0, 0), (0, 1, 0), 3.0, 0.004, "", "side +y",
     "bending half bridge HB, arm 1 (in compression under the side load)"),
    ("HB2", (100.0, -ARM_HALF_WIDTH, T / 2), (1, 0, 0), (0, -1, 0), 3.0, 0.004, "", "side -y",
     "bending half bridge HB, arm 2, opposite HB1"),
]
# One gauge carries its own placement tolerances (a bore installation is less precise).
GAUGE_TOLERANCES = {"G09": (0.5, 3.0)}  # (position_tol [mm], angle_tol [deg])
GAUGE_COLUMNS = ("gauge", "x", "y", "z", "dir_x", "dir_y", "dir_z", "length", "kt", "rosette",
                 "face", "position_tol", "angle_tol", "gauge_ohm", "lead_ohm", "wiring",
                 "daq_gauge_factor", "lot", "bridge", "arm")
# The invented measurement chain of every channel (make_test_log.py uses the same values):
# 350 ohm grids on 3-wire leads of 1.2 ohm each, read at gauge factor 2.00, one gauge lot.
CHAIN_COLUMNS = {"gauge_ohm": "350", "lead_ohm": "1.2", "wiring": "3-wire",
                 "daq_gauge_factor": "2.00", "lot": "DEMO-LOT-A"}
SURFACE_TOL = 0.01  # a gauge centre must lie this close to the mesh surface [mm]


def boundary_triangles(points: NDArray[np.float64],
                       tet10: NDArray[np.int64]) -> NDArray[np.float64]:
    """Return the mesh surface as flat triangles, each quadratic face split into four.

    Parameters
    ----------
    points, tet10 : ndarray
        The tet10 mesh (VTK node order).

    Returns
    -------
    ndarray, shape (t, 3, 3)
        Corner coordinates of the flat triangles. [mm]
    """
    # Local tet10 node numbers of each face: corners a, b, c and mid-nodes ab, bc, ca.
    local = np.array([[0, 1, 3, 4, 8, 7], [1, 2, 3, 5, 9, 8], [2, 0, 3, 6, 7, 9],
                      [0, 2, 1, 6, 5, 4]])
    faces = tet10[:, local].reshape(-1, 6)
    key = np.sort(faces[:, :3], axis=1)
    _, inverse, counts = np.unique(key, axis=0, return_inverse=True, return_counts=True)
    outer = faces[counts[inverse.ravel()] == 1]
    a, b, c, ab, bc, ca = outer.T
    sub = np.concatenate([np.stack(t, axis=1) for t in
                          ((a, ab, ca), (ab, b, bc), (ca, bc, c), (ab, bc, ca))])
    return points[sub]


def distance_to_triangles(query: NDArray[np.float64],
                          triangles: NDArray[np.float64]) -> NDArray[np.float64]:
    """Return the distance from each query point to the nearest triangle.

    Parameters
    ----------
    query : ndarray, shape (p, 3)
    triangles : ndarray, shape (t, 3, 3)

    Returns
    -------
    ndarray, shape (p,)

    Notes
    -----
    Closest point on a triangle by its Voronoi regions (vertex, edge, face), after C. Ericson,
    Real-Time Collision Detection (2005), section 5.1.5, vectorised over the triangles.
    """
    a, b, c = triangles[:, 0], triangles[:, 1], triangles[:, 2]
    ab, ac = b - a, c - a
    out = np.empty(len(query))
    for k, p in enumerate(query):
        ap, bp, cp = p - a, p - b, p - c
        d1, d2 = np.einsum("ij,ij->i", ab, ap), np.einsum("ij,ij->i", ac, ap)
        d3, d4 = np.einsum("ij,ij->i", ab, bp), np.einsum("ij,ij->i", ac, bp)
        d5, d6 = np.einsum("ij,ij->i", ab, cp), np.einsum("ij,ij->i", ac, cp)
        va, vb, vc = d3 * d6 - d5 * d4, d5 * d2 - d1 * d6, d1 * d4 - d3 * d2
        with np.errstate(divide="ignore", invalid="ignore"):
            denom = va + vb + vc
            closest = a + (vb / denom)[:, None] * ab + (vc / denom)[:, None] * ac  # face
            regions = [
                (d1 <= 0) & (d2 <= 0), (d3 >= 0) & (d4 <= d3), (d6 >= 0) & (d5 <= d6),
                (vc <= 0) & (d1 >= 0) & (d3 <= 0), (vb <= 0) & (d2 >= 0) & (d6 <= 0),
                (va <= 0) & (d4 - d3 >= 0) & (d5 - d6 >= 0),
            ]
            candidates = [
                a, b, c,
                a + (d1 / (d1 - d3))[:, None] * ab,
                a + (d2 / (d2 - d6))[:, None] * ac,
                b + ((d4 - d3) / ((d4 - d3) + (d5 - d6)))[:, None] * (c - b),
            ]
        # Later regions are checked first so that the earlier (vertex) tests take precedence.
        for region, point in zip(reversed(regions), reversed(candidates), strict=True):
            closest = np.where(region[:, None], point, closest)
        out[k] = np.sqrt(((closest - p) ** 2).sum(axis=1).min())
    return out


def gauge_rows() -> list[dict[str, object]]:
    """Return the gauge map rows in the column order of ``gauges.csv``."""
    rows = []
    for gid, centre, direction, _, length, kt, rosette, _, _ in GAUGES:
        d = np.asarray(direction, dtype=float)
        d /= np.linalg.norm(d)
        pos_tol, ang_tol = GAUGE_TOLERANCES.get(gid, ("", ""))
        rows.append({"gauge": gid, "x": f"{centre[0]:.4f}", "y": f"{centre[1]:.4f}",
                     "z": f"{centre[2]:.4f}", "dir_x": f"{d[0]:.6f}", "dir_y": f"{d[1]:.6f}",
                     "dir_z": f"{d[2]:.6f}", "length": f"{length:g}", "kt": f"{kt:g}",
                     "rosette": rosette, "face": "", "position_tol": pos_tol,
                     "angle_tol": ang_tol, **CHAIN_COLUMNS, "bridge": "", "arm": ""})
    for k, (gid, centre, direction, _, length, kt, _, _, _) in enumerate(BRIDGE_ARMS):
        d = np.asarray(direction, dtype=float)
        d /= np.linalg.norm(d)
        # a bridge arm: no quarter-bridge leads, wiring or gauge lot (refused on arms)
        rows.append({"gauge": gid, "x": f"{centre[0]:.4f}", "y": f"{centre[1]:.4f}",
                     "z": f"{centre[2]:.4f}", "dir_x": f"{d[0]:.6f}", "dir_y": f"{d[1]:.6f}",
                     "dir_z": f"{d[2]:.6f}", "length": f"{length:g}", "kt": f"{kt:g}",
                     "rosette": "", "face": "", "position_tol": "", "angle_tol": "",
                     "gauge_ohm": "350", "lead_ohm": "", "wiring": "",
                     "daq_gauge_factor": "", "lot": "",  # the channel set to the grids' GF
                     "bridge": "HB", "arm": str(k + 1)})
    return rows


def gauge_states(points: NDArray[np.float64], tet10: NDArray[np.int64],
                 results: dict[str, dict[str, NDArray[np.float64]]]) -> list[dict[str, object]]:
    """Describe the strain state at every candidate gauge, for the notes.

    The nodal strain is interpolated 0.02 mm below the surface (along the inward normal), at the
    grid centre, at both grid ends and 1 mm to either side of the grid.

    Returns
    -------
    list of dict
        Per gauge and case: the strain along the grid [microstrain], the in-plane principal
        strains e1, e2 (|e1| >= |e2|) [microstrain], the angle of e1 from the grid [deg], and
        the largest change of the grid strain per mm between the centre and the four offset
        points, as a fraction of the larger of |e1| and the grid strain at the centre
        (``gradient_per_mm``), and the difference between the grid average and the centre
        value of a parabola through the grid ends and centre, (e(-L/2) + e(L/2) - 2 e(0)) / 6,
        as a fraction of the same scale (``grid_averaging``).
    """
    notes = []
    centres, frames, offsets = [], [], []
    for _gid, centre, direction, normal, length, *_ in GAUGES:
        d = np.asarray(direction, dtype=float)
        d /= np.linalg.norm(d)
        n = np.asarray(normal, dtype=float)
        n /= np.linalg.norm(n)
        t = np.cross(n, d)
        base = np.asarray(centre, dtype=float) - 0.02 * n
        centres.append(base)
        frames.append((d, t))
        offsets.append([(base + s * d, abs(s)) for s in (-length / 2, length / 2)]
                       + [(base + s * t, 1.0) for s in (-1.0, 1.0)])
    xyz = np.vstack([np.array(centres)] + [np.array([p for p, _ in o]) for o in offsets])
    for case, fields in results.items():
        values = probe_nodal(points, tet10, fields["E"], xyz)
        tensors = _voigt_to_tensor(values)
        ng = len(GAUGES)
        for k, (gid, *_rest) in enumerate(GAUGES):
            d, t = frames[k]
            eps = tensors[k]
            e_dd, e_tt, e_dt = d @ eps @ d, t @ eps @ t, d @ eps @ t
            mean, radius = 0.5 * (e_dd + e_tt), np.hypot(0.5 * (e_dd - e_tt), e_dt)
            e1, e2 = mean + radius, mean - radius
            angle = 0.5 * np.degrees(np.arctan2(2 * e_dt, e_dd - e_tt))
            if abs(e2) > abs(e1):
                e1, e2, angle = e2, e1, angle + 90.0 if angle < 0 else angle - 90.0
            e_off = [d @ tensors[ng + 4 * k + j] @ d for j in range(4)]
            grads = [abs(e - e_dd) / dist for e, (_, dist) in zip(e_off, offsets[k], strict=True)]
            scale = max(abs(e1), abs(e_dd), 1e-12)
            notes.append({"gauge": gid, "case": case, "grid_ue": 1e6 * e_dd, "e1_ue": 1e6 * e1,
                          "e2_ue": 1e6 * e2, "angle_e1_deg": angle,
                          "gradient_per_mm": max(grads) / scale,
                          "grid_averaging": (e_off[0] + e_off[1] - 2 * e_dd) / 6 / scale})
    return notes


def _voigt_to_tensor(values: NDArray[np.float64]) -> NDArray[np.float64]:
    xx, yy, zz, xy, yz, xz = values.T
    return np.stack([np.stack([xx, xy / 2, xz / 2], -1), np.stack([xy / 2, yy, yz / 2], -1),
                     np.stack([xz / 2, yz / 2, zz], -1)], -2)


# ---------------------------------------------------------------------------------------------
# Build, check, command line

def geometry_record() -> dict[str, object]:
    """Return the key dimensions, features, faces and load cases of the bracket."""
    x_pin, y_pin = PIN_CENTRE
    area = 2 * ARM_HALF_WIDTH * T
    return {
        "note": "Invented demo part: the scenario, the part and all data are invented and "
                "describe no real company, product or test.",
        "units": {"length": "mm", "force": "N", "stress": "MPa", "strain": "m/m"},
        "axes": "x along the arm from the clamped root face (x = 0) to the lug; y across the "
                "width; z through the thickness (bottom face z = 0, top face z = 12)",
        "material": {"name": "aluminium alloy", "E": E_MODULUS, "nu": POISSON},
        "dimensions": {
            "thickness": T, "overall_length": x_pin + LUG_RADIUS,
            "flange": {"x": [0.0, FLANGE_LENGTH], "y": [-FLANGE_HALF_WIDTH, FLANGE_HALF_WIDTH]},
            "arm": {"x": [FLANGE_LENGTH, x_pin], "y": [-ARM_HALF_WIDTH, ARM_HALF_WIDTH]},
            "lug_end": {"centre": [x_pin, y_pin], "radius": LUG_RADIUS},
        },
        "features": {
            "pin_hole": {"centre": [x_pin, y_pin], "radius": PIN_RADIUS, "axis": [0, 0, 1]},
            "lightening_hole": {"centre": list(HOLE_CENTRE), "radius": HOLE_RADIUS,
                                "axis": [0, 0, 1]},
            "root_fillets": [
                {"centre": [FLANGE_LENGTH + FILLET_RADIUS, s * (ARM_HALF_WIDTH + FILLET_RADIUS)],
                 "radius": FILLET_RADIUS, "axis": [0, 0, 1],
                 "arc_from": [FLANGE_LENGTH, s * (ARM_HALF_WIDTH + FILLET_RADIUS)],
                 "arc_to": [FLANGE_LENGTH + FILLET_RADIUS, s * ARM_HALF_WIDTH]}
                for s in (1, -1)],
        },
        "faces": {
            "root": "x = 0, |y| <= 35 (clamped)",
            "top": "z = 12", "bottom": "z = 0",
            "side +y": "y = 20, 30 <= x <= 180", "side -y": "y = -20, 30 <= x <= 180",
            "flange front": "x = 20, 30 <= |y| <= 35",
            "fillet +y": "cylinder r = 10 about (30, 30), 20 <= x <= 30",
            "fillet -y": "cylinder r = 10 about (30, -30), 20 <= x <= 30",
            "lug end": "cylinder r = 20 about (180, 0), x >= 180",
            "pin bore": "cylinder r = 8 about (180, 0) (loaded)",
            "hole bore": "cylinder r = 6 about (140, 0)",
        },
        "prismatic_stretch": {
            "x": list(STRETCH), "section_x": BEAM_SECTION_X, "area": area,
            "I_bending_y": 2 * ARM_HALF_WIDTH * T**3 / 12,
            "I_bending_z": T * (2 * ARM_HALF_WIDTH) ** 3 / 12,
            "load_line_x": x_pin,
        },
        "load_cases": {
            "pull": {"channel": "F_pull_kN", "reference": CASES["pull"][0] / 1000,
                     "unit": "kN", "direction": [1, 0, 0], "time": 0.0},
            "side": {"channel": "F_side_kN", "reference": CASES["side"][1] / 1000,
                     "unit": "kN", "direction": [0, 1, 0], "time": 1.0},
            "application": "cosine bearing pressure on the pin bore, radial, resultant "
                           "through the pin centre; root face x = 0 clamped",
        },
        "fields": {
            "U": "displacement [mm]",
            "E": "strain [m/m], Voigt xx, yy, zz, xy, yz, xz, engineering shear, nodal values "
                 "by L2 projection of the P2 element strain",
            "S": "stress [MPa], same order (tensor components)",
            "vtu_names": "U_pull, U_side, E_pull, E_side, S_pull, S_side",
            "xdmf_names": "U, E, S at t = 0 (pull) and t = 1 (side)",
        },
        "gauges": [
            {"gauge": gid, "centre": list(map(float, centre)),
             "direction": [float(v) for v in np.asarray(direction) / np.linalg.norm(direction)],
             "normal": [float(v) for v in normal], "length": length, "kt": kt,
             "rosette": rosette, "face": face, "note": note}
            for gid, centre, direction, normal, length, kt, rosette, face, note in GAUGES
        ],
    }


def build(out_dir: Path = DEFAULT_OUT, geometry_path: Path | None = GEOMETRY_JSON
          ) -> dict[str, object]:
    """Mesh, solve and write every demo model file.

    Parameters
    ----------
    out_dir : Path
        Folder for ``bracket.vtu``, ``bracket_series.xdmf`` / ``.h5`` and ``gauges.csv``.
    geometry_path : Path or None
        Where to write ``geometry.json`` (None: beside the other outputs).

    Returns
    -------
    dict
        Build summary: node and cell counts, library versions, file sizes [bytes], run time
        [s], largest gauge distance from the surface [mm] and the gauge notes.

    Raises
    ------
    RuntimeError
        If the mesh node order is wrong or a gauge lies off the mesh surface.
    """
    import gmsh
    import skfem

    start = time.perf_counter()
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    points, tet10, faces = mesh_bracket()
    results = solve_cases(points, tet10, faces)
    write_results(out_dir, points, tet10, results)
    coarse = write_coarse(out_dir)

    centres = np.array([g[1] for g in GAUGES + BRIDGE_ARMS], dtype=float)
    distance = distance_to_triangles(centres, boundary_triangles(points, tet10))
    if distance.max() > SURFACE_TOL:
        far = (GAUGES + BRIDGE_ARMS)[int(distance.argmax())][0]
        raise RuntimeError(f"gauge {far} is {distance.max():.4f} mm from the mesh surface")
    with open(out_dir / "gauges.csv", "w", newline="") as handle:
        writer = csv.DictWriter(handle, fieldnames=GAUGE_COLUMNS, lineterminator="\n")
        writer.writeheader()
        writer.writerows(gauge_rows())

    notes = gauge_states(points, tet10, results)
    record = geometry_record()
    summary = {
        "gmsh": gmsh.__version__, "scikit-fem": skfem.__version__,
        "nodes": int(points.shape[0]), "cells": int(tet10.shape[0]),
        "coarse": {**coarse, "factor": COARSE_FACTOR},
        "max_gauge_surface_distance_mm": float(distance.max()),
        "sizes_bytes": {p.name: p.stat().st_size for p in sorted(out_dir.iterdir())
                        if p.name.startswith("bracket")},
    }
    record["build"] = summary
    record["gauge_states"] = [{k: (round(v, 4) if isinstance(v, float) else v)
                               for k, v in note.items()} for note in notes]
    geometry_path = out_dir / "geometry.json" if geometry_path is None else Path(geometry_path)
    geometry_path.write_text(json.dumps(record, indent=1) + "\n")
    summary["seconds"] = time.perf_counter() - start
    summary["notes"] = notes
    return summary


# The demo's sweep: the bracket held at its root by an elastic clamp instead of a rigid one, for
# a few invented clamp stiffnesses (N/mm^3, per unit area of the root face), log-spaced.
CLAMP_STIFFNESS = (300.0, 1000.0, 3000.0, 10000.0, 30000.0)
CLAMP_FILE = "bracket_clamp_variants.h5"


def build_clamp_variants(out_dir: Path = DEFAULT_OUT) -> dict[str, object]:
    """Solve the clamp-stiffness variants on the shipped mesh and write ``CLAMP_FILE``.

    The file holds ``clamp_stiffness`` (V,) [N/mm^3] and the nodal strains ``E_pull``,
    ``E_side`` (V, n, 6) [m/m, Voigt order and engineering shear as in bracket.vtu], float32,
    compressed; the mesh is bracket.vtu's (the same gmsh run), checked point by point.

    Raises
    ------
    RuntimeError
        The mesh made now differs from bracket.vtu's (another gmsh version): rebuild both.
    """
    import h5py
    import meshio

    start = time.perf_counter()
    points, tet10, faces = mesh_bracket()
    shipped = meshio.read(Path(out_dir) / "bracket.vtu")
    if shipped.points.shape != points.shape or not np.array_equal(shipped.points, points):
        raise RuntimeError("the mesh differs from bracket.vtu's; rebuild bracket.vtu first")
    strains = {case: [] for case in CASES}
    for k in CLAMP_STIFFNESS:
        results = solve_cases(points, tet10, faces, root_spring=k)
        for case in CASES:
            strains[case].append(results[case]["E"])
    path = Path(out_dir) / CLAMP_FILE
    with h5py.File(path, "w") as f:
        f.attrs["note"] = ("invented demo data: the bracket of bracket.vtu with its root held by "
                           "an elastic clamp of stiffness clamp_stiffness (N/mm^3) per unit area "
                           "instead of a rigid one; strains at bracket.vtu's nodes")
        f.create_dataset("clamp_stiffness", data=np.array(CLAMP_STIFFNESS))
        for case in CASES:
            f.create_dataset(f"E_{case}", data=np.array(strains[case], dtype=np.float32),
                             compression="gzip", compression_opts=9, shuffle=True)
    return {"variants": len(CLAMP_STIFFNESS), "bytes": path.stat().st_size,
            "seconds": time.perf_counter() - start}


def compare_builds(reference_dir: Path, new_dir: Path, *, same_mesher: bool) -> list[str]:
    """Compare the bracket files of two builds (``bracket.vtu`` and ``bracket_coarse.vtu``)."""
    problems = []
    for name in ("bracket.vtu", "bracket_coarse.vtu"):
        problems += [f"{name}: {line}" for line in
                     compare_files(Path(reference_dir) / name, Path(new_dir) / name,
                                   same_mesher=same_mesher)]
    return problems


def compare_files(reference: Path, new: Path, *, same_mesher: bool) -> list[str]:
    """Compare two builds of one bracket file.

    Parameters
    ----------
    reference, new : Path
        The two files.
    same_mesher : bool
        True when both builds used the same gmsh version: then node and cell counts must match
        exactly and every field within ``CHECK_RTOL_SAME_VERSION`` of its largest magnitude
        (solver round-off and single precision). Otherwise the peak magnitude of each field
        component must agree within ``CHECK_RTOL_OTHER_VERSION`` (a different mesh).

    Returns
    -------
    list of str
        One line per difference; empty when the builds agree.
    """
    import meshio

    ref, built = meshio.read(reference), meshio.read(new)
    problems = []
    if same_mesher:
        if len(ref.points) != len(built.points) or len(ref.cells[0]) != len(built.cells[0]):
            return [(f"mesh differs: {len(ref.points)} / {len(built.points)} nodes, "
                     f"{len(ref.cells[0])} / {len(built.cells[0])} cells")]
        if not np.array_equal(ref.cells[0].data, built.cells[0].data):
            problems.append("connectivity differs")
    for name, values in ref.point_data.items():
        other = built.point_data[name]
        scale = np.abs(values).max(axis=0)
        if same_mesher:
            err = (np.abs(other - values) / scale).max()
            limit = CHECK_RTOL_SAME_VERSION
        else:
            err = (np.abs(np.abs(other).max(axis=0) - scale) / scale).max()
            limit = CHECK_RTOL_OTHER_VERSION
        if err > limit:
            problems.append(f"{name}: relative difference {err:.2e} > {limit:g}")
    return problems


def main(argv: list[str] | None = None) -> int:
    """Rebuild the demo model files, or check them (``--check``)."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=DEFAULT_OUT, help="output folder")
    parser.add_argument("--check", action="store_true",
                        help="rebuild into a temporary folder and compare with --out")
    parser.add_argument("--clamp-variants", action="store_true",
                        help=f"solve the clamp-stiffness variants only, into {CLAMP_FILE}")
    args = parser.parse_args(argv)
    if args.clamp_variants:
        done = build_clamp_variants(args.out)
        print(f"{done['variants']} clamp variants, {done['bytes'] / 1e6:.2f} MB, "
              f"{done['seconds']:.1f} s")
        return 0
    if args.check:
        import gmsh

        shipped = json.loads(GEOMETRY_JSON.read_text())["build"]
        with tempfile.TemporaryDirectory() as tmp:
            summary = build(Path(tmp), Path(tmp) / "geometry.json")
            problems = compare_builds(args.out, Path(tmp),
                                      same_mesher=shipped["gmsh"] == gmsh.__version__)
        for line in problems:
            print(line, file=sys.stderr)
        print(f"{'FAILED' if problems else 'OK'}: {summary['nodes']} nodes, "
              f"{summary['cells']} cells, {summary['seconds']:.1f} s")
        return 1 if problems else 0
    # geometry.json belongs beside this script only for the shipped build.
    summary = build(args.out, GEOMETRY_JSON if args.out.resolve() == DEFAULT_OUT else None)
    print(f"{summary['nodes']} nodes, {summary['cells']} tet10 cells, "
          f"{summary['seconds']:.1f} s; gauge centres within "
          f"{summary['max_gauge_surface_distance_mm']:.4f} mm of the surface")
    for name, size in summary["sizes_bytes"].items():
        print(f"  {name}: {size / 1e6:.2f} MB")
    for note in summary["notes"]:
        uniaxial = "uniaxial" if abs(note["e1_ue"]) >= 2 * abs(note["e2_ue"]) else "biaxial"
        print(f"  {note['gauge']:5s} {note['case']:4s} grid {note['grid_ue']:8.1f} ue  "
              f"e1 {note['e1_ue']:8.1f}  e2 {note['e2_ue']:8.1f}  "
              f"angle {note['angle_e1_deg']:6.1f}  {uniaxial:8s} "
              f"gradient {100 * note['gradient_per_mm']:5.1f} %/mm  "
              f"averaging {100 * note['grid_averaging']:5.2f} %")
    return 0


if __name__ == "__main__":
    sys.exit(main())
