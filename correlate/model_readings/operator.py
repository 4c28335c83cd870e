"""Model readings: what each gauge would indicate on the model.

Stage: evaluation. In: a mesh, its surface locator, the gauge map and the study's placement
settings. Out: a :class:`GaugeOperator` (located sample points and the weights that turn a field
into readings), then per case the axial, transverse and indicated readings of every gauge, its
centre (point) reading and the rows of its placement band.

For every gauge the operator holds rows: 0 the nominal grid-averaged reading, 1 the reading from the
centre point alone, then the placement-band samples (the centre moved by ``position_tol`` in eight
directions on the surface, times the grid angle turned by 0 and +/- ``angle_tol``). Each row is the
mean over Gauss-Legendre points along the grid, each re-snapped to the surface with its own normal.
Because readings are linear in the field, cases are combined row by row first and the band (lowest
and highest row) is taken after: min and max do not superpose.

Evaluating the operator on a field is in :mod:`correlate.model_readings.evaluate`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import sparse

from correlate.core.errors import CorrelateWarning, GaugeError, GaugeOutsideMeshError
from correlate.mechanics import elements, mapping
from correlate.model_readings.cell_checks import bad_cells, check_cells, coincident_nodes
from correlate.model_readings.locator import Locator, locate_inside, parent_coordinates
from correlate.model_readings.surface import build_surface
from correlate.readers.model import Mesh

OUT_OF_PLANE_ERROR = 45.0    # degrees: refuse a grid direction further out of the tangent plane
OUT_OF_PLANE_WARN = 10.0     # degrees: warn beyond this
OVERHANG_COS = np.cos(np.radians(45.0))  # a grid point whose normal turns more has left the face
BAND_DIRECTIONS = 8
BAND_GRID_POINTS = 3
SLIP_FRACTION = 0.02  # a grid point that slides back more than this share of the grid left its face


@dataclass(frozen=True)
class Placement:
    """Where each gauge landed (one row per gauge, in gauge-map order)."""

    table: pd.DataFrame     # gauge, element, cell_type, snap_distance, normal_x..z, dir_x..z, ...
    normal: NDArray[np.float64]      # (g, 3) outward normal of the gauged face at the centre
    direction: NDArray[np.float64]   # (g, 3) grid direction in the tangent plane
    centre: NDArray[np.float64]      # (g, 3) the centre on the surface


@dataclass(frozen=True)
class GaugeOperator:
    """Sample points and weights: field -> per-row axial and transverse strain.

    ``row_gauge[r]``: gauge index of row r; ``row_kind[r]``: 0 nominal, 1 centre point, 2 band.
    ``centre_points[g]``: the sample at gauge g's centre (a bridge channel's: its first arm's).
    ``weights`` (rows x points) averages sample points into rows. The sparse interpolation
    matrices are made on first use and kept (:meth:`interpolation`, :meth:`gradients`,
    :meth:`touched`); nothing outside this class reads or writes that store.
    """

    mesh: Mesh
    placement: Placement
    cell: NDArray[np.int64]          # (p,) global cell of each sample point
    xi: NDArray[np.float64]          # (p, dim) natural coordinates in that cell
    direction: NDArray[np.float64]   # (p, 3) grid direction at the point
    transverse: NDArray[np.float64]  # (p, 3) in-plane transverse direction
    face: NDArray[np.str_]           # (p,) "top", "bottom" or "" (shells with per-face arrays)
    weights: sparse.csr_matrix
    row_gauge: NDArray[np.int64]
    row_kind: NDArray[np.int64]
    row_offset: NDArray[np.float64]  # (r, 3): along-grid offset, across offset, angle [deg]
    kt: NDArray[np.float64]          # (g,)
    nu0: NDArray[np.float64]         # (g,)
    height: NDArray[np.float64]      # (g,) grid height above the surface, 0 for none [length]
    invalid: NDArray[np.bool_]       # (g,) gauges whose grid left the face (non-strict builds)
    centre_points: NDArray[np.int64]  # (g,) each gauge's centre sample (a bridge: its 1st arm's)
    _store: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def gauges(self) -> list[str]:
        if "gauges" not in self._store:
            self._store["gauges"] = list(self.placement.table["gauge"])
        return self._store["gauges"]

    def interpolation(self) -> sparse.csr_matrix:
        """Shape functions at the sample points: a sparse (points x nodes) matrix."""
        if "values" not in self._store:
            self._store["values"] = _interpolation(self, gradient=False)[0]
        return self._store["values"]

    def gradients(self) -> list[sparse.csr_matrix]:
        """x, y and z derivatives of the shape functions at the sample points (points x nodes)."""
        if "grad" not in self._store:
            self._store["grad"] = _interpolation(self, gradient=True)
        return self._store["grad"]

    def touched(self) -> Touched:
        """The nodes and cells the operator reads: all that a time-series step needs."""
        if "touched" not in self._store:
            N = self.interpolation()
            mask = np.zeros(N.shape[1], dtype=bool)  # a mask, not a sort: the rows are many
            mask[N.indices] = True
            nodes = np.flatnonzero(mask)
            cols = (np.cumsum(mask) - 1)[N.indices]
            compact = sparse.csr_matrix((N.data, cols, N.indptr), shape=(N.shape[0], len(nodes)))
            self._store["touched"] = Touched(point=nodes, cell=np.unique(self.cell),
                                             compact=compact)
        return self._store["touched"]


@dataclass(frozen=True)
class Touched:
    """Nodes (``point``) and cells (``cell``) an operator reads, sorted, and its interpolation
    on those nodes only (``compact``: columns renumbered in ``point`` order)."""

    point: NDArray[np.int64]
    cell: NDArray[np.int64]
    compact: sparse.csr_matrix


def _interpolation(op: GaugeOperator, *, gradient: bool) -> list[sparse.csr_matrix]:
    """Sparse matrices (points x nodes): shape functions, or their x, y, z derivatives."""
    mesh = op.mesh
    block, row = mesh.block_rows(op.cell)
    n_pts, n_nodes = len(op.cell), len(mesh.points)
    mats: list[list] = [[], [], []] if gradient else [[]]
    for b, (ctype, conn_b) in enumerate(mesh.blocks):
        sel = np.flatnonzero(block == b)
        if not len(sel):
            continue
        conn = conn_b[row[sel]]
        rows = np.repeat(sel, conn.shape[1])
        if gradient:
            dN, _ = mapping.physical_gradients(str(ctype), mesh.points[conn], op.xi[sel])
            for j in range(3):
                mats[j].append((dN[:, :, j].ravel(), rows, conn.ravel()))
        else:
            N = elements.shape_functions(str(ctype), op.xi[sel])
            mats[0].append((N.ravel(), rows, conn.ravel()))
    out = []
    for parts in mats:
        v = np.concatenate([p[0] for p in parts])
        r = np.concatenate([p[1] for p in parts])
        c = np.concatenate([p[2] for p in parts])
        out.append(sparse.csr_matrix((v, (r, c)), shape=(n_pts, n_nodes)))
    return out


def _unit(v: NDArray) -> NDArray:
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _tangent(d: NDArray, n: NDArray, keep: NDArray | None = None) -> NDArray:
    """d projected into the plane normal to n and normalised; rows where ``keep`` stay as d."""
    t = d - np.sum(d * n, axis=-1, keepdims=True) * n
    if keep is not None:
        t = np.where(keep[:, None], d, t)
    return _unit(t)


def _face_normal_sign(mesh: Mesh, faces: NDArray[np.str_], normal: NDArray) -> NDArray:
    """Outward normal of the gauged face: shells flip it for bottom; plane models face +z."""
    if mesh.family == "shell":
        return normal * np.where(faces == "bottom", -1.0, 1.0)[:, None]
    if mesh.family == "plane":
        return normal * np.sign(normal[:, 2:3] + (normal[:, 2:3] == 0))
    return normal


def gauge_locator(mesh: Mesh, gauges: pd.DataFrame, *, snap_tol: float,
                  position_tol: float = 0.0, band: bool = True) -> Locator:
    """A surface locator with the boundary faces the gauges can reach (grid, band, snap).

    Points beyond that region (a model search moving a gauge further) make the locator collect
    the whole boundary once, so the result never depends on this choice; only the time does.
    """
    ptol = gauges["position_tol"].fillna(position_tol).to_numpy(dtype=float) if band else [0.0]
    length = gauges["length"].to_numpy(dtype=float)
    reach = snap_tol + float(np.max(ptol, initial=0.0)) + float(np.max(length, initial=0.0)) / 2
    return Locator(mesh, build_surface(mesh, near=gauges[["x", "y", "z"]].to_numpy(dtype=float),
                                       reach=reach))


@dataclass(frozen=True)
class _Centres:
    """Where each gauge centre landed, its outward normal and its grid in the tangent plane."""

    names: list[str]
    faces: NDArray[np.str_]
    embedded: NDArray[np.bool_]
    distance: NDArray[np.float64]
    cell: NDArray[np.int64]
    xi: NDArray[np.float64]
    centre: NDArray[np.float64]
    normal: NDArray[np.float64]
    direction: NDArray[np.float64]
    across: NDArray[np.float64]
    out_of_plane: NDArray[np.float64]   # degrees
    off_plane: NDArray[np.bool_]        # grid along the normal (non-strict builds: marked invalid)


@dataclass(frozen=True)
class _Samples:
    """Every sample point of every row: where it is and how it is weighted into its row."""

    row: NDArray[np.int64]
    weight: NDArray[np.float64]
    cell: NDArray[np.int64]
    xi: NDArray[np.float64]
    normal: NDArray[np.float64]
    direction: NDArray[np.float64]   # the row's grid direction, before re-projection
    valid_row: NDArray[np.bool_]
    invalid: NDArray[np.bool_]       # (g,) gauges whose nominal grid left the face


def build_operator(mesh: Mesh, gauges: pd.DataFrame, *, position_tol: float = 0.0,
                   angle_tol: float = 0.0, snap_tol: float = 1.0, calibration_poisson: float = 0.285,
                   grid_points: int = 5, band: bool = True,
                   locator: Locator | None = None, strict: bool = True,
                   length_unit: str = "") -> GaugeOperator:
    """Locate every gauge and build its sampling operator.

    The build takes four steps: locate the centres on the surface (:func:`_locate_centres`),
    lay out the rows (nominal, centre, band: :func:`_rows` and :func:`_row_frames`), place the
    Gauss points of every row's grid on the surface (:func:`_sample_points`), and weight them into
    rows (:func:`_assemble`).

    Parameters
    ----------
    mesh : Mesh
    gauges : DataFrame
        Validated gauge map (:func:`correlate.readers.gauges.validate_gauges`).
    position_tol, angle_tol : float
        Placement tolerances [length unit], [deg]; per-gauge columns override them.
    snap_tol : float
        Largest accepted distance from a gauge centre to the model surface. [length unit]
    calibration_poisson : float
        Poisson's ratio of the gauge manufacturer's calibration beam (nu0).
    grid_points : int
        Gauss-Legendre points along a grid of non-zero length, at least; a grid that spans more
        elements gets more (:func:`grid_point_count`).
    strict : bool
        Refuse a gauge whose grid overhangs an edge (default). When False (model searches), such a
        gauge is marked in ``invalid`` and its readings are NaN.

    Raises
    ------
    GaugeOutsideMeshError
        A gauge farther than ``snap_tol`` from the surface (names the gauge and the distance).
    GaugeError
        A grid direction along the normal, a grid overhanging an edge, an unknown face.
    """
    if locator is None:
        locator = gauge_locator(mesh, gauges, snap_tol=snap_tol, position_tol=position_tol,
                                band=band)
    c = _locate_centres(mesh, locator, gauges, snap_tol=snap_tol, length_unit=length_unit,
                        strict=strict)
    n = len(c.names)
    ptol = gauges["position_tol"].fillna(position_tol).to_numpy(dtype=float) if band else np.zeros(n)
    atol = gauges["angle_tol"].fillna(angle_tol).to_numpy(dtype=float) if band else np.zeros(n)
    length = gauges["length"].to_numpy(dtype=float)
    row_gauge, row_kind, row_off = _rows(ptol * ~c.embedded, atol)
    rc, rn, rd, rcell, rxi = _row_frames(mesh, locator, c, row_gauge, row_off)
    points = grid_point_count(mesh, c.cell, c.direction, length, grid_points)
    s = _sample_points(mesh, locator, c, row_gauge, row_kind, rc, rn, rd, rcell, rxi, length,
                       grid_points=grid_points, gauge_points=points, snap_tol=snap_tol,
                       strict=strict)
    kt = gauges["kt"].to_numpy(dtype=float)
    nu0 = gauges["nu0"].fillna(calibration_poisson).to_numpy(dtype=float)
    height = (gauges["height"].fillna(0.0).to_numpy(dtype=float) if "height" in gauges
              else np.zeros(n))
    return _assemble(mesh, c, s, row_gauge, row_kind, row_off, kt, nu0, height, strict=strict)


def _locate_centres(mesh: Mesh, locator: Locator, gauges: pd.DataFrame, *, snap_tol: float,
                    length_unit: str, strict: bool = True) -> _Centres:
    """Project each gauge centre onto the surface (embedded ones: inside their cell), check the
    snap distance and the grid direction, and turn the grid into the tangent plane.

    Not strict (a model search moving a grid past an edge onto a face its direction crosses), a
    grid along the normal is marked ``off_plane`` instead of refused, and given any tangent
    direction so that its (NaN) readings can be laid out."""
    names = gauges["gauge"].tolist()
    faces = gauges["face"].to_numpy(dtype=str)
    if mesh.family == "solid" and any(faces):
        raise GaugeError(*[f"gauge '{g}' has face '{f}', but the model is a solid; face applies "
                           "to shell models only: leave it blank" for g, f in
                           zip(names, faces, strict=True) if f])
    centre_in = gauges[["x", "y", "z"]].to_numpy(dtype=float)
    d_in = gauges[["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float)
    prefer = gauges[["normal_x", "normal_y", "normal_z"]].to_numpy(dtype=float)
    embedded = gauges["mount"].to_numpy(dtype=str) == "embedded"
    sp = locator.project(centre_in, prefer=prefer)
    xi_c = parent_coordinates(mesh, sp)
    unit = f" {length_unit}" if length_unit else ""
    problems = [f"gauge '{names[i]}' is {sp.distance[i]:.3g}{unit} from the model surface "
                f"(snap_tol {snap_tol:g}{unit}); check the gauge coordinates and length_unit, or "
                "raise snap_tol in [gauges]"
                for i in np.flatnonzero((sp.distance > snap_tol) & ~embedded)]
    if problems:
        raise GaugeOutsideMeshError(*problems)
    normal = _face_normal_sign(mesh, faces, sp.normal)
    centre = np.where(embedded[:, None], centre_in, sp.point)
    cell_c = sp.cell.copy()
    if embedded.any():
        if mesh.family != "solid":
            raise GaugeError("mount = embedded applies to solid models only")
        cells_e, xi_e = locate_inside(mesh, centre_in[embedded],
                                      [names[i] for i in np.flatnonzero(embedded)])
        cell_c[embedded] = cells_e
        xi_c = xi_c.copy()
        xi_c[embedded] = xi_e
    cos_out = np.abs(np.sum(d_in * normal, axis=1))
    out_deg = np.degrees(np.arcsin(np.clip(cos_out, 0, 1)))
    off_plane = ~embedded & (out_deg > OUT_OF_PLANE_ERROR)
    problems = [f"gauge '{names[i]}': grid direction is {out_deg[i]:.0f} degrees out of the "
                f"surface plane (limit {OUT_OF_PLANE_ERROR:.0f}); it points along the surface "
                "normal: check dir_x, dir_y, dir_z or the face the gauge is on"
                for i in np.flatnonzero(off_plane)]
    if problems and strict:
        raise GaugeError(*problems)
    if off_plane.any():
        d_in = d_in.copy()
        d_in[off_plane] = _any_tangent(normal[off_plane])
    warn = [names[i] for i in np.flatnonzero(~embedded & ~off_plane & (out_deg > OUT_OF_PLANE_WARN))]
    if warn:
        warnings.warn(f"grid directions more than {OUT_OF_PLANE_WARN:.0f} degrees out of the surface "
                      f"plane were projected into it: {', '.join(warn)}", CorrelateWarning,
                      stacklevel=3)
    direction = _tangent(d_in, normal, embedded)
    return _Centres(names=names, faces=faces, embedded=embedded, distance=sp.distance,
                    cell=cell_c, xi=xi_c, centre=centre, normal=normal, direction=direction,
                    across=np.cross(normal, direction), out_of_plane=out_deg,
                    off_plane=off_plane)


def _any_tangent(n: NDArray[np.float64]) -> NDArray[np.float64]:
    """A unit vector normal to each row of n (the axis least along n, made normal to it)."""
    axis = np.eye(3)[np.argmin(np.abs(n), axis=1)]
    return _tangent(axis, n)


def _row_frames(mesh: Mesh, locator: Locator, c: _Centres, row_gauge: NDArray,
                row_off: NDArray) -> tuple[NDArray, NDArray, NDArray, NDArray, NDArray]:
    """Centre, normal, grid direction, cell and natural coordinates of every row's centre
    (band rows moved on the surface and turned by their offsets)."""
    rc = (c.centre[row_gauge] + row_off[:, :1] * c.direction[row_gauge]
          + row_off[:, 1:2] * c.across[row_gauge])
    moved = (row_off[:, 0] != 0) | (row_off[:, 1] != 0)
    rn = c.normal[row_gauge].copy()
    rcell, rxi = c.cell[row_gauge], c.xi[row_gauge]  # where each row centre is
    if moved.any():
        spm = locator.project(rc[moved], prefer=c.normal[row_gauge[moved]])
        rxi[moved] = parent_coordinates(mesh, spm)
        rc[moved] = spm.point
        rcell[moved] = spm.cell
        rn[moved] = _face_normal_sign(mesh, c.faces[row_gauge[moved]], spm.normal)
    rd = _tangent(c.direction[row_gauge], rn, c.embedded[row_gauge])
    theta = np.radians(row_off[:, 2])[:, None]
    rd = np.cos(theta) * rd + np.sin(theta) * np.cross(rn, rd)
    return rc, rn, rd, rcell, rxi


MAX_GRID_POINTS = 64   # Gauss points along one grid at most (a grid over 31 elements or more)


def grid_point_count(mesh: Mesh, cells: NDArray[np.int64], direction: NDArray[np.float64],
                     length: NDArray[np.float64], grid_points: int) -> NDArray[np.int64]:
    """Gauss-Legendre points along each gauge's grid: the study's count, or more on small elements.

    Parameters
    ----------
    mesh : Mesh
    cells : ndarray, shape (g,)
        The cell under each gauge centre.
    direction : ndarray, shape (g, 3)
        Grid direction (unit).
    length : ndarray, shape (g,)
        Grid length. [length unit]
    grid_points : int
        The study's ``[gauges] grid_points`` (default 5).

    Returns
    -------
    ndarray of int, shape (g,)
        n = min(max(grid_points, ceil(2 L / h) + 1), MAX_GRID_POINTS), h the extent along the
        grid of the cell under the centre (its corners projected on the grid direction).

    Notes
    -----
    The field along a grid is smooth within an element and kinked (or, for cell data and
    element gradients, stepped) at its edges, so a Gauss rule is accurate only with a few points
    per element: two per element spanned, and one more, keeps every element sampled. A grid
    spanning up to (grid_points - 1) / 2 elements keeps the study's count (the usual case: a
    grid over one or two elements), so only long grids over small elements change.
    """
    block, row = mesh.block_rows(cells)
    extent = np.full(len(cells), np.inf)
    for b, (ctype, conn) in enumerate(mesh.blocks):
        sel = np.flatnonzero(block == b)
        if len(sel):
            corners = mesh.points[conn[row[sel], :elements.ELEMENTS[ctype].n_corners]]
            extent[sel] = np.ptp(np.einsum("gki,gi->gk", corners, direction[sel]), axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        spans = np.where(extent > 0, length / extent, 0.0)
    need = np.ceil(np.nan_to_num(2 * spans, posinf=MAX_GRID_POINTS)).astype(np.int64) + 1
    return np.minimum(np.maximum(grid_points, need), max(grid_points, MAX_GRID_POINTS))


def _gauss_points(row_kind: NDArray, row_len: NDArray, grid_points: int,
                  row_points: NDArray | None = None) -> tuple[NDArray, NDArray, NDArray]:
    """Row of each sample point, its offset along the grid and its weight.

    Gauss-Legendre points along each row's grid, or the centre alone: ``grid_points`` (the
    study's count), or ``row_points`` per row (:func:`grid_point_count`). Band rows use at most
    BAND_GRID_POINTS (3-point Gauss is exact to degree 5 along the grid): they bound a
    tolerance, and they are most of the points; a row whose grid spans more elements than the
    study's count handles takes its nominal count.
    """
    n_rows = np.full(len(row_kind), grid_points, dtype=np.int64) if row_points is None \
        else np.asarray(row_points, dtype=np.int64)
    n_band = np.where(n_rows > grid_points, n_rows, min(grid_points, BAND_GRID_POINTS))
    n_gp = np.where(row_kind == 2, n_band, n_rows)
    count = np.where(row_len > 0, n_gp, 1)
    p_row = np.repeat(np.arange(len(row_kind)), count)
    first = np.cumsum(count) - count
    k = np.arange(len(p_row)) - first[p_row]              # index of the point within its row
    p_s = np.zeros(len(p_row))
    p_w = np.ones(len(p_row))
    for m in np.unique(count[count > 1]):
        gp, gw = np.polynomial.legendre.leggauss(int(m))
        sel = count[p_row] == m
        p_s[sel] = gp[k[sel]] * row_len[p_row[sel]] / 2
        p_w[sel] = gw[k[sel]] / 2
    return p_row, p_s, p_w


def _sample_points(mesh: Mesh, locator: Locator, c: _Centres, row_gauge: NDArray,
                   row_kind: NDArray, rc: NDArray, rn: NDArray, rd: NDArray, rcell: NDArray,
                   rxi: NDArray, length: NDArray, *, grid_points: int, snap_tol: float,
                   strict: bool, gauge_points: NDArray | None = None) -> _Samples:
    """Place the Gauss points of every row's grid on the surface, each re-snapped with its own
    normal; refuse (or, not strict, mark) grids that overhang an edge."""
    row_len = np.where(row_kind != 1, length[row_gauge], 0.0)
    p_row, p_s, p_w = _gauss_points(row_kind, row_len, grid_points,
                                    None if gauge_points is None else gauge_points[row_gauge])
    p_emb = c.embedded[row_gauge[p_row]]
    p_x = rc[p_row] + p_s[:, None] * rd[p_row]
    p_cell = rcell[p_row].copy()
    p_xi = np.zeros((len(p_row), rxi.shape[1]))
    p_n = rn[p_row].copy()
    # the zero-offset point of each row is the row centre, located already
    at_centre = p_s == 0
    p_xi[at_centre] = rxi[p_row[at_centre]]
    need = ~at_centre & ~p_emb
    valid_row = np.ones(len(row_kind), dtype=bool)
    invalid = c.off_plane.copy()
    if need.any():
        spg = locator.project(p_x[need], prefer=rn[p_row[need]])
        xig = parent_coordinates(mesh, spg)
        new_n = _face_normal_sign(mesh, c.faces[row_gauge[p_row[need]]], spg.normal)
        turned = np.sum(new_n * rn[p_row[need]], axis=1) < OVERHANG_COS
        off = spg.distance > max(snap_tol, 1e-9)
        # a point past an edge snaps back along the grid; on a curved face it moves along the normal
        slip = np.abs(np.sum((spg.point - p_x[need]) * rd[p_row[need]], axis=1))
        slipped = slip > SLIP_FRACTION * length[row_gauge[p_row[need]]] \
            + 1e-9 * locator.surface.scale
        p_x[need] = spg.point
        p_cell[need] = spg.cell
        p_xi[need] = xig
        p_n[need] = new_n
        bad_rows = np.unique(p_row[need][turned | off | slipped])
        nominal_bad = bad_rows[row_kind[bad_rows] == 0]
        if len(nominal_bad) and not strict:
            invalid[row_gauge[nominal_bad]] = True
            bad_rows = bad_rows[row_kind[bad_rows] != 0]
        elif len(nominal_bad):
            flipped = set(p_row[need][turned & (np.sum(new_n * rn[p_row[need]], axis=1) < 0)])
            raise GaugeError(*[_overhang_line(mesh, c.names[row_gauge[r]], r in flipped,
                                              length[row_gauge[r]], c.centre[row_gauge[r]],
                                              locator.surface.scale) for r in nominal_bad])
        valid_row[bad_rows] = False
    if (need & p_emb).any():
        raise GaugeError("embedded gauges with a grid length are not supported; give length 0")
    return _Samples(row=p_row, weight=p_w, cell=p_cell, xi=p_xi, normal=p_n, direction=rd[p_row],
                    valid_row=valid_row, invalid=invalid)


def _overhang_line(mesh: Mesh, gauge: str, flipped: bool, length: float, centre: NDArray,
                   scale: float) -> str:
    if mesh.family == "shell" and flipped:
        return (f"gauge '{gauge}': its grid crosses shell elements with opposed normals, so top "
                "and bottom swap under it; orient the shell normals consistently in the model")
    twins = coincident_nodes(mesh.points, centre, length, scale)
    if twins:
        return (f"gauge '{gauge}': the elements under its grid share no nodes ({twins} nodes "
                "within a grid length sit where another node is), so the grid runs off an "
                "element's face; merge coincident nodes in the pre-processor or, where the split "
                "is real (a crack, a tied interface), move the gauge")
    return (f"gauge '{gauge}': its grid (length {length:g}) overhangs an edge of the face it is "
            "on; check the position, direction and length")


def _assemble(mesh: Mesh, c: _Centres, s: _Samples, row_gauge: NDArray, row_kind: NDArray,
              row_off: NDArray, kt: NDArray, nu0: NDArray, height: NDArray, *,
              strict: bool = True
              ) -> GaugeOperator:
    """Weight the sample points into rows, dropping band rows whose grid left the face (a
    misplaced gauge cannot overhang an edge either); check the cells under each gauge (not
    strict: a gauge over an inverted or collapsed element is marked invalid instead)."""
    embedded = c.embedded[row_gauge[s.row]]
    p_d = _tangent(s.direction, s.normal, embedded)
    p_t = np.cross(s.normal, p_d)
    keep_pt = s.valid_row[s.row]
    keep_rows = np.flatnonzero(s.valid_row)
    remap = -np.ones(len(row_kind), dtype=np.int64)
    remap[keep_rows] = np.arange(len(keep_rows))
    W = sparse.csr_matrix((s.weight[keep_pt], (remap[s.row[keep_pt]], np.arange(keep_pt.sum()))),
                          shape=(len(keep_rows), keep_pt.sum()))
    # cells under the gauge itself (nominal and centre rows; band samples are what-ifs)
    own = keep_pt & (row_kind[s.row] != 2)
    invalid = s.invalid
    if strict:
        check_cells(mesh, s.cell[own], s.xi[own], [c.names[g] for g in row_gauge[s.row[own]]])
    elif own.any():
        invalid = s.invalid.copy()
        invalid[row_gauge[s.row[own][bad_cells(mesh, s.cell[own], s.xi[own]) != ""]]] = True
    centre_rows = np.flatnonzero(row_kind[keep_rows] == 1)   # one per gauge, of one sample
    return GaugeOperator(mesh=mesh, placement=_placement(mesh, c), cell=s.cell[keep_pt],
                         xi=s.xi[keep_pt], direction=p_d[keep_pt], transverse=p_t[keep_pt],
                         face=c.faces[row_gauge[s.row[keep_pt]]], weights=W,
                         row_gauge=row_gauge[keep_rows], row_kind=row_kind[keep_rows],
                         row_offset=row_off[keep_rows], kt=kt, nu0=nu0, height=height,
                         invalid=invalid,
                         centre_points=W[centre_rows].indices)


def _placement(mesh: Mesh, c: _Centres) -> Placement:
    table = pd.DataFrame({
        "gauge": c.names,
        "element": c.cell,
        "cell_type": mesh.cell_types(c.cell),
        "snap_distance": np.where(c.embedded, 0.0, c.distance),
        "x": c.centre[:, 0], "y": c.centre[:, 1], "z": c.centre[:, 2],
        "normal_x": c.normal[:, 0], "normal_y": c.normal[:, 1], "normal_z": c.normal[:, 2],
        "dir_x": c.direction[:, 0], "dir_y": c.direction[:, 1], "dir_z": c.direction[:, 2],
        "out_of_plane_deg": np.where(c.embedded, 0.0, c.out_of_plane),
        "mount": np.where(c.embedded, "embedded", "surface"),
        "face": c.faces,
    })
    return Placement(table=table, normal=c.normal, direction=c.direction, centre=c.centre)


def _rows(ptol: NDArray, atol: NDArray) -> tuple[NDArray, NDArray, NDArray]:
    """Operator rows of every gauge: nominal, centre point, then the band samples.

    Band samples: the centre moved by ``ptol`` in BAND_DIRECTIONS directions (or not moved) times
    the grid turned by -atol, 0, +atol (or not turned), less the unmoved, unturned one.
    """
    phis = np.linspace(0, 2 * np.pi, BAND_DIRECTIONS, endpoint=False)
    unit = np.r_[[[0.0, 0.0]], np.c_[np.cos(phis), np.sin(phis)]]      # (1 + D, 2)
    turn = np.array([0.0, -1.0, 1.0])
    # every combination per gauge, masked by which tolerances it has
    pos = np.repeat(unit, len(turn), axis=0)                            # (3 (1 + D), 2)
    ang = np.tile(turn, len(unit))
    n = len(ptol)
    has_p = (ptol > 0)[:, None] | (np.arange(len(pos)) < len(turn))[None, :]
    has_a = (atol > 0)[:, None] | (ang == 0)[None, :]
    keep = has_p & has_a & ~((pos[:, 0] == 0) & (pos[:, 1] == 0) & (ang == 0))[None, :]
    keep &= ~((np.arange(len(pos)) >= len(turn))[None, :] & ~(ptol > 0)[:, None])
    g_band, c_band = np.nonzero(keep)
    off_band = np.c_[pos[c_band] * ptol[g_band, None], ang[c_band] * atol[g_band]]
    g_fixed = np.repeat(np.arange(n), 2)
    kind_fixed = np.tile([0, 1], n)
    gauge = np.r_[g_fixed, g_band]
    kind = np.r_[kind_fixed, np.full(len(g_band), 2)]
    off = np.r_[np.zeros((2 * n, 3)), off_band]
    order = np.lexsort((np.arange(len(gauge)), gauge))                  # gauge by gauge
    return gauge[order], kind[order], off[order]
