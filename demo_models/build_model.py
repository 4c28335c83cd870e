"""Build the finite-element model of the invented DEMO bracket.

Stage: demo data generator (not part of the ``correlate`` package). It meshes the bracket with gmsh
(quadratic tetrahedra), solves linear elasticity with scikit-fem for two unit load cases and writes,
into ``correlate/data/demo/``:

- ``bracket.vtu``: tet10 mesh (VTK node order) with point data ``U_pull``, ``U_side`` [mm],
  ``E_pull``, ``E_side`` [m/m, Voigt xx, yy, zz, xy, yz, xz, engineering shear] and ``S_pull``,
  ``S_side`` [MPa, same order];
- ``bracket_series.xdmf`` + ``bracket_series.h5``: the same fields as a time series, t = 0 pull,
  t = 1 side, named ``U``, ``E``, ``S``;
- ``gauges.csv``: candidate gauge map on the model surface;
- ``demo_models/geometry.json``: dimensions, features, faces and the gauge candidates.

The scenario, the part and every number here are invented; they describe no real company, product
or test. Usage::

    python demo_models/build_model.py            # rebuild the shipped files
    python demo_models/build_model.py --check    # rebuild into a temporary folder and compare
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
SIZE_HOLE = 0.8
SIZE_FILLET = 1.2
SIZE_MAX = 5.0
SIZE_DIST_MIN = 1.0  # fine size held up to this distance from the feature
SIZE_DIST_MAX = 22.0  # coarse size reached at this distance

# gmsh stores the tet10 edge nodes as (0-1, 1-2, 2-0, 0-3, 2-3, 1-3); VTK (and meshio) as
# (0-1, 1-2, 2-0, 0-3, 1-3, 2-3): the last two edge nodes are swapped.
GMSH_TO_VTK_TET10 = np.array([0, 1, 2, 3, 4, 5, 6, 7, 9, 8])
VTK_TET10_EDGES = np.array([[0, 1], [1, 2], [2, 0], [0, 3], [1, 3], [2, 3]])
# Faces of a tetrahedron in VTK numbering, each with its three edge numbers in VTK_TET10_EDGES.
VTK_TET_FACES = np.array([[0, 1, 3], [1, 2, 3], [2, 0, 3], [0, 2, 1]])

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


def mesh_bracket() -> tuple[NDArray[np.float64], NDArray[np.int64], dict[str, NDArray[np.int64]]]:
    """Mesh the bracket with quadratic tetrahedra.

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
            "Mesh.MeshSizeMax": SIZE_MAX,
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
        for tags, size in ((pin_bore + hole_bore, SIZE_HOLE), (fillets, SIZE_FILLET)):
            dist = field.add("Distance")
            field.setNumbers(dist, "SurfacesList", tags)
            field.setNumber(dist, "Sampling", 40)
            thr = field.add("Threshold")
            field.setNumber(thr, "InField", dist)
            field.setNumber(thr, "SizeMin", size)
            field.setNumber(thr, "SizeMax", SIZE_MAX)
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


def solve_cases(points: NDArray[np.float64], tet10: NDArray[np.int64],
                faces: dict[str, NDArray[np.int64]]) -> dict[str, dict[str, NDArray[np.float64]]]:
    """Solve the load cases and return nodal displacement, strain and stress.

    Parameters
    ----------
    points : ndarray, shape (n, 3)
        Node coordinates. [mm]
    tet10 : ndarray, shape (m, 10)
        Connectivity in VTK node order.
    faces : dict of str to ndarray, shape (k, 3)
        Vertex triplets of the root face (clamped) and the pin-hole bore (loaded).

    Returns
    -------
    dict
        For each case in :data:`CASES`: ``"U"`` (n, 3) [mm], ``"E"`` (n, 6) [m/m, engineering
        shear] and ``"S"`` (n, 6) [MPa], Voigt order xx, yy, zz, xy, yz, xz.

    Notes
    -----
    Isoparametric P2 elements (the gmsh mid-edge nodes define the curved geometry). The strain
    of the P2 displacement is linear and discontinuous per element; it is carried to the P2 nodes
    by a global L2 projection (consistent mass matrix), component by component. The stress is the
    same projection of the element stress, which equals Hooke's law applied to the projected
    strain because both the projection and Hooke's law are linear.
    """
    from scipy.sparse.linalg import splu
    from skfem import (Basis, BilinearForm, ElementTetP2, ElementVector, FacetBasis, LinearForm,
                       MeshTet1, MeshTet2, asm)
    from skfem.helpers import ddot, div, dot, sym_grad

    n = points.shape[0]
    vertex_ids = np.unique(tet10[:, :4])
    vertex_index = np.full(n, -1, dtype=np.int64)
    vertex_index[vertex_ids] = np.arange(vertex_ids.size)
    mesh1 = MeshTet1(np.ascontiguousarray(points[vertex_ids].T),
                     np.ascontiguousarray(vertex_index[tet10[:, :4]].T))
    nv = mesh1.p.shape[1]

    # Our mid-edge node of every skfem edge.
    edge_key = _edge_keys(*mesh1.edges.astype(np.int64), nv)
    order = np.argsort(edge_key)
    a = vertex_index[tet10[:, VTK_TET10_EDGES[:, 0]]].ravel()
    b = vertex_index[tet10[:, VTK_TET10_EDGES[:, 1]]].ravel()
    pos = np.searchsorted(edge_key[order], _edge_keys(a, b, nv))
    skfem_edge = order[pos]
    if not np.array_equal(edge_key[skfem_edge], _edge_keys(a, b, nv)):
        raise RuntimeError("an edge of the tet10 mesh is missing in the scikit-fem mesh")
    edge_node = np.empty(mesh1.edges.shape[1], dtype=np.int64)
    edge_node[skfem_edge] = tet10[:, 4:].ravel()

    mesh = MeshTet2.from_mesh(mesh1)
    doflocs = mesh.doflocs.copy()
    doflocs[:, mesh.dofs.edge_dofs[0]] = points[edge_node].T
    doflocs[:, mesh.dofs.nodal_dofs[0]] = points[vertex_ids].T
    mesh = MeshTet2(doflocs, mesh.t)

    def facets_of(tri: NDArray[np.int64]) -> NDArray[np.int64]:
        fkey = np.sort(mesh.facets.astype(np.int64), axis=0)
        fkey = (fkey[0] * nv + fkey[1]) * nv + fkey[2]
        forder = np.argsort(fkey)
        t = np.sort(vertex_index[tri], axis=1)
        key = (t[:, 0] * nv + t[:, 1]) * nv + t[:, 2]
        found = forder[np.searchsorted(fkey[forder], key)]
        if not np.array_equal(fkey[found], key):
            raise RuntimeError("a boundary triangle is missing in the scikit-fem mesh")
        return found

    element = ElementVector(ElementTetP2())
    basis = Basis(mesh, element, intorder=4)
    lam, mu = _lame()

    @BilinearForm
    def elasticity(u, v, w):
        return lam * div(u) * div(v) + 2.0 * mu * ddot(sym_grad(u), sym_grad(v))

    stiffness = asm(elasticity, basis)
    clamped = basis.get_dofs(facets=facets_of(faces["root"])).all()

    bore = FacetBasis(mesh, element, facets=facets_of(faces["pin_bore"]), intorder=6)
    cx, cy = PIN_CENTRE

    def bearing(direction: NDArray[np.float64]) -> LinearForm:
        @LinearForm
        def form(v, w):
            # Cosine bearing pressure of a pin pulled along `direction`: radial, peak on the
            # loaded side, zero on the unloaded half of the bore.
            rx, ry = w.x[0] - cx, w.x[1] - cy
            r = np.sqrt(rx**2 + ry**2)
            er = np.array([rx / r, ry / r, 0 * r])
            cos = np.maximum(er[0] * direction[0] + er[1] * direction[1], 0.0)
            return dot(cos * er, v)

        return form

    free = np.setdiff1d(np.arange(basis.N), clamped)
    kff = stiffness[free][:, free].tocsc()
    lu = splu(kff, permc_spec="MMD_AT_PLUS_A")  # symmetric pattern: much less fill than COLAMD

    scalar = basis.with_element(ElementTetP2())
    mass = asm(BilinearForm(lambda u, v, w: u * v), scalar).tocsc()
    mass_lu = splu(mass, permc_spec="MMD_AT_PLUS_A")

    @LinearForm
    def moment(v, w):
        return w.f * v

    dof_of_node = np.empty((n, 3), dtype=np.int64)
    sdof_of_node = np.empty(n, dtype=np.int64)
    for c in range(3):
        dof_of_node[vertex_ids, c] = basis.nodal_dofs[c]
        dof_of_node[edge_node, c] = basis.edge_dofs[c]
    sdof_of_node[vertex_ids] = scalar.nodal_dofs[0]
    sdof_of_node[edge_node] = scalar.edge_dofs[0]

    results = {}
    for case, (fx, fy) in CASES.items():
        direction = np.array([fx, fy]) / np.hypot(fx, fy)
        load = asm(bearing(direction), bore)
        # The P2 basis sums to one, so the component sums of the load vector are the resultant.
        resultant = np.array([load[basis.nodal_dofs[c]].sum() + load[basis.edge_dofs[c]].sum()
                              for c in range(3)])
        load *= np.hypot(fx, fy) / (resultant[:2] @ direction)
        u = np.zeros(basis.N)
        u[free] = lu.solve(load[free])
        grad = basis.interpolate(u).grad  # (3, 3, elements, points): du_i / dx_j
        eps_t = 0.5 * (grad + grad.transpose(1, 0, 2, 3))
        strain = np.empty((n, 6))
        for k, name in enumerate(VOIGT):
            i, j = "xyz".index(name[0]), "xyz".index(name[1])
            values = eps_t[i, j] * (1.0 if i == j else 2.0)  # engineering shear
            projected = mass_lu.solve(asm(moment, scalar, f=values))
            strain[:, k] = projected[sdof_of_node]
        results[case] = {"U": u[dof_of_node], "E": strain, "S": _stress(strain)}
    return results


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
    # Single precision keeps the shipped files small: 7 significant digits are 1e-5 microstrain
    # at these strain levels, far below any gauge resolution.
    cells = [("tetra10", tet10.astype(np.int32))]
    point_data = {f"{field}_{case}": values.astype(np.float32)
                  for field in ("U", "E", "S") for case, fields in results.items()
                  for name, values in fields.items() if name == field}
    meshio.write(out_dir / "bracket.vtu", meshio.Mesh(points, cells, point_data=point_data),
                 binary=True, compression="zlib")
    # meshio's TimeSeriesWriter puts the .h5 in the current directory (meshio issue 1442).
    with _working_directory(out_dir):
        with meshio.xdmf.TimeSeriesWriter("bracket_series.xdmf") as writer:
            writer.write_points_cells(points, cells)
            for t, case in enumerate(CASES):
                writer.write_data(float(t), point_data={name: values.astype(np.float32)
                                                       for name, values in results[case].items()})


@contextlib.contextmanager
def _working_directory(path: Path):
    previous = Path.cwd()
    os.chdir(path)
    try:
        yield
    finally:
        os.chdir(previous)
