"""DIC points on the model: registration, location, edge mask and the model strain there.

Stage: fullfield. In: the DIC points (camera axes, model length unit), the ``[fullfield]``
settings, the study's opened model (its locator). Out: a :class:`Registration` (the transform and
its residuals) and a :class:`PointModel`: each kept point's position on the surface, its tangent
axes (the DIC's x axis projected onto the tangent plane, ``ey = n x ex``) and the gauge operator
that reads the model tensor there. A point is a gauge of zero length (one sample, no band), so
location and evaluation are those of the gauges (:mod:`correlate.model_readings.operator`).
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np
import pandas as pd
from numpy.typing import NDArray
from scipy import sparse

from correlate.core.errors import ModelError, StudyError
from correlate.fullfield.registration import (
    apply,
    icp_point_to_plane,
    rigid_from_landmarks,
    rotation_angle_deg,
)
from correlate.fullfield.strain import tangent_axes
from correlate.model_readings.cell_checks import bad_cells
from correlate.model_readings.locator import Locator, SurfacePoints, parent_coordinates
from correlate.model_readings.operator import GaugeOperator, Placement
from correlate.readers.dic_frames import Landmarks
from correlate.readers.fullfield_study import FullFieldSettings
from correlate.readers.model import Mesh

EDGE_ANGLE = 30.0   # degrees: a normal turning more than this within `edge` is a part edge
EDGE_ON_SINE = 0.1  # sine of the angle between the DIC's x axis and a face normal, below: edge-on
ICP_PASSES = 3      # re-project the cloud onto the faces between ICP runs (closest points move)
ICP_SAMPLE = 50_000  # ICP pairs at most this many points, taken evenly through the cloud


@dataclass(frozen=True)
class Registration:
    """The DIC-to-model transform and how well the points sit on the surface."""

    method: str                      # how the transform was found, in words
    matrix: NDArray[np.float64]      # (4, 4): x_model = R x_dic + t
    landmark_rms: float | None       # RMS landmark residual [model length unit]
    rms: float                       # RMS distance of the points to the surface
    p95: float                       # 95th percentile of that distance
    n_points: int                    # distinct points read
    dropped_snap: int                # beyond snap_tol from the surface, or on a face seen edge-on
    dropped_edge: int                # within `edge` of the region's or the part's edges
    snap_tol: float

    @property
    def rotation_deg(self) -> float:
        return rotation_angle_deg(self.matrix[:3, :3])


@dataclass(frozen=True)
class PointModel:
    """The kept points: index into the distinct points, position, tangent axes, operator."""

    kept: NDArray[np.int64]          # (k,) rows of the distinct points kept
    position: NDArray[np.float64]    # (k, 3) on the model surface
    ex: NDArray[np.float64]          # (k, 3)
    ey: NDArray[np.float64]          # (k, 3)
    operator: GaugeOperator


# the distances between landmarks agree within this factor in DIC and model (a rigid transform
# keeps them; picking errors are a small part of their spread): beyond it a unit is wrong
LANDMARK_SCALE = 1.25


def landmark_scale(dic: NDArray[np.float64], model: NDArray[np.float64]) -> float:
    """The median ratio of the distances between landmarks, DIC (in model units) over model."""
    i, j = np.triu_indices(len(dic), k=1)
    d_dic = np.linalg.norm(dic[i] - dic[j], axis=1)
    d_model = np.linalg.norm(model[i] - model[j], axis=1)
    keep = d_model > 0
    return float(np.median(d_dic[keep] / d_model[keep])) if keep.any() else float("nan")


def _landmark_start(lm: Landmarks, scale: float, source: str = "landmarks"
                    ) -> tuple[NDArray, float]:
    ratio = landmark_scale(lm.dic * scale, lm.model)
    if np.isfinite(ratio) and not 1 / LANDMARK_SCALE <= ratio <= LANDMARK_SCALE:
        raise StudyError(f"{source}: the distances between the DIC landmarks are {ratio:.2g} x "
                         "those between their model points, and a rigid registration keeps "
                         "distances: the [fullfield] length_unit of the DIC export is probably "
                         "wrong (or the landmarks do not match their model points); correct it")
    fit = rigid_from_landmarks(lm.dic * scale, lm.model)
    return np.asarray(fit.matrix), float(fit.rms_residual)


def register(points: NDArray[np.float64], ff: FullFieldSettings, locator: Locator,
             landmarks: Landmarks | None, *, scale: float) -> tuple[NDArray, float | None, str]:
    """The transform DIC -> model for ``points`` (camera axes, model unit).

    Landmarks give the least-squares rigid transform (Kabsch / Horn), optionally refined by
    point-to-plane ICP onto the faces the locator finds closest; ``matrix`` is applied as given
    (its translation scaled to the model unit); ``model`` is the identity.
    """
    if ff.register == "model":
        return np.eye(4), None, "none: the points are in model axes (register = \"model\")"
    if ff.register == "matrix":
        M = np.array(ff.matrix, dtype=float)
        M[:3, 3] *= scale
        R = M[:3, :3]
        if not np.allclose(R.T @ R, np.eye(3), atol=1e-6) or np.linalg.det(R) < 0:
            raise StudyError("[fullfield] register matrix: its 3x3 part is not a rotation "
                             "(orthonormal, determinant +1); give a rigid transform")
        return M, None, "the study's matrix"
    assert landmarks is not None
    M, lm_rms = _landmark_start(landmarks, scale,
                                ff.landmarks.name if ff.landmarks is not None else "landmarks")
    method = (f"least-squares rigid fit to {len(landmarks.names)} landmarks (Kabsch / Horn, "
              "closed form)")
    if ff.refine != "icp":
        return M, lm_rms, method
    start = M
    # A rigid transform has six unknowns: an even subsample of the cloud fixes it as well as
    # the whole (the fit's scatter falls as 1 / sqrt(points)), at a fraction of the projections.
    sample = points[:: max(len(points) // ICP_SAMPLE, 1)]
    for _ in range(ICP_PASSES):
        on = locator.project(apply(M, sample))
        near = on.distance <= ff.snap_tol
        if near.sum() < 6:
            raise StudyError(f"[fullfield] register: only {int(near.sum())} DIC points lie within "
                             f"snap_tol {ff.snap_tol:g} of the model after the landmark fit; "
                             "check the landmarks and length_unit")
        M = np.asarray(icp_point_to_plane(sample[near], on.point[near], on.normal[near], M,
                                          tol=ff.icp_tol, max_move=ff.icp_max_move).matrix)
    moved = float(np.max(np.linalg.norm(apply(M, points) - apply(start, points), axis=1)))
    if moved > ff.icp_max_move:
        raise StudyError(f"[fullfield] register: ICP moved a point {moved:.3g} from the landmark "
                         f"solution, more than max_move {ff.icp_max_move:g}; check the landmarks")
    return M, lm_rms, method + (f", refined by point-to-plane ICP (stop below {ff.icp_tol:g} "
                                f"per step, at most {ff.icp_max_move:g} from the landmark fit)")


def distinct_rows(xyz: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.intp]]:
    """The distinct rows of ``xyz`` in lexicographic order and each row's index among them.

    The result of ``numpy.unique(xyz, axis=0, return_inverse=True)``, found by hashing each
    column (``pandas.factorize``, linear in the rows) and sorting only the distinct rows: frames
    that share their points (grid-based exports) repeat each point once per frame, so the table
    has frames x points rows and far fewer distinct ones.
    """
    n = len(xyz)
    code = np.zeros(n, dtype=np.int64)
    for k in range(xyz.shape[1]):
        c, _ = pd.factorize(xyz[:, k])
        code, _ = pd.factorize(code * (int(c.max()) + 2) + c)
    if n == 0:
        return xyz[:0].copy(), np.zeros(0, dtype=np.intp)
    # codes are numbered in order of first appearance: the running maximum steps up there
    first = np.flatnonzero(np.diff(np.maximum.accumulate(code), prepend=-1) > 0)
    rows = xyz[first]
    order = np.lexsort(rows.T[::-1])
    rank = np.empty(len(rows), dtype=np.intp)
    rank[order] = np.arange(len(rows))
    return rows[order], rank[code]


def frame_points(xyz: NDArray[np.float64], frame_rows: list[NDArray[np.intp]]
                 ) -> tuple[NDArray[np.float64], NDArray[np.intp]]:
    """:func:`distinct_rows` of ``xyz``, found from the first frame alone when every frame has
    exactly its points in its order (grid-based exports: points fixed in the reference
    configuration), else from all rows. ``frame_rows`` lists each frame's rows of ``xyz``."""
    if frame_rows:
        first = xyz[frame_rows[0]]
        if all(len(r) == len(first) and np.array_equal(xyz[r], first) for r in frame_rows[1:]):
            distinct, once = distinct_rows(first)
            inverse = np.zeros(len(xyz), dtype=np.intp)
            for r in frame_rows:
                inverse[r] = once
            if sum(len(r) for r in frame_rows) == len(xyz):
                return distinct, inverse
    return distinct_rows(xyz)


def region_distance(plane_xy: NDArray[np.float64]) -> NDArray[np.float64]:
    """Distance of each point to the boundary of the region the points cover [their unit].

    A point is on the boundary when the centroid of its neighbours within 1.6 point spacings
    (the median nearest-neighbour distance h: the 8 neighbours of a square grid) lies more than
    0.3 h from it: 0 inside a regular grid, 0.6 h on a straight edge of one (three of five
    neighbours lean inward by h), more at corners and around holes. The region's boundary lies
    half a spacing beyond its boundary points, so the distance is the distance to the nearest
    boundary point plus h / 2. It does not depend on how the grid is turned.
    """
    from scipy.spatial import cKDTree

    if len(plane_xy) < 4:
        return np.full(len(plane_xy), np.inf)
    tree = cKDTree(plane_xy)
    d, _ = tree.query(plane_xy, k=2)
    h = float(np.median(d[:, 1]))
    if not h > 0:
        return np.full(len(plane_xy), np.inf)
    dist, idx = tree.query(plane_xy, k=9, distance_upper_bound=1.6 * h)
    found = np.isfinite(dist[:, 1:])
    safe = np.where(found, idx[:, 1:], 0)
    offset = np.where(found[..., None], plane_xy[safe] - plane_xy[:, None, :], 0.0)
    count = np.maximum(found.sum(axis=1), 1)
    shift = np.linalg.norm(offset.sum(axis=1), axis=1) / count
    boundary = (shift > 0.3 * h) | (found.sum(axis=1) < 3)
    if not boundary.any():
        return np.full(len(plane_xy), np.inf)
    edge_tree = cKDTree(plane_xy[boundary])
    near, _ = edge_tree.query(plane_xy)
    return near + 0.5 * h


def near_part_edge(locator: Locator, position: NDArray, normal: NDArray, ex: NDArray,
                   ey: NDArray, edge: float) -> NDArray[np.bool_]:
    """Points within ``edge`` of a part edge: a step of ``edge`` along +-ex or +-ey lands on a
    face whose normal turns more than :data:`EDGE_ANGLE` (a feature edge, common practice), or
    off the part, more than ``edge / 2`` from its surface (beyond a free edge, the closest point
    is on the edge line itself; on a surface of radius R the step leaves it by only
    ``edge^2 / (2 R)``)."""
    out = np.zeros(len(position), dtype=bool)
    cos_limit = np.cos(np.radians(EDGE_ANGLE))
    for d in (ex, -ex, ey, -ey):
        on = locator.project(position + edge * d)
        out |= (np.sum(on.normal * normal, axis=1) < cos_limit) | (on.distance > edge / 2)
    return out


def point_operator(mesh: Mesh, on: SurfacePoints, ex: NDArray[np.float64],
                   ey: NDArray[np.float64]) -> GaugeOperator:
    """The zero-length gauge operator at surface points, built straight from their projection.

    A point is a gauge of zero length with no band: one sample (its cell and natural
    coordinates), one centre row of weight 1, the grid along ``ex`` and the transverse along
    ``ey``, so that :func:`~correlate.model_readings.evaluate.centre_strain` reads the model
    tensor there exactly as for a gauge. Built from the arrays alone, without the gauge map's
    placement table and per-row sample frames of
    :func:`~correlate.model_readings.operator.build_operator` (a gigabyte at 500,000 points).
    """
    n = len(on.cell)
    ident = sparse.csr_matrix((np.ones(n), np.arange(n), np.arange(n + 1)), shape=(n, n))
    names = pd.DataFrame({"gauge": pd.array(np.char.add("P", np.arange(n).astype(str)),
                                            dtype="string[pyarrow]")})
    placement = Placement(table=names, normal=on.normal, direction=ex, centre=on.point)
    return GaugeOperator(mesh=mesh, placement=placement, cell=on.cell.astype(np.int64),
                         xi=parent_coordinates(mesh, on), direction=ex, transverse=ey,
                         face=np.full(n, "", dtype="<U1"), weights=ident,
                         row_gauge=np.arange(n, dtype=np.int64),
                         row_kind=np.ones(n, dtype=np.int64), row_offset=np.zeros((n, 3)),
                         kt=np.zeros(n), nu0=np.zeros(n), height=np.zeros(n),
                         invalid=np.zeros(n, dtype=bool),
                         centre_points=np.arange(n, dtype=np.int64))


def refuse_bad_cells(op: GaugeOperator, listed: int = 5) -> None:
    """Refuse points on inverted or collapsed elements, as a gauge on one is refused
    (:func:`~correlate.model_readings.cell_checks.check_cells`): one line, the number of points
    and the first elements."""
    what = bad_cells(op.mesh, op.cell, op.xi)
    bad = np.flatnonzero(what != "")
    if not len(bad):
        return
    cells, first = np.unique(op.cell[bad], return_index=True)
    named = ", ".join(f"element {int(c)} {what[bad[i]]}"
                      for c, i in list(zip(cells, first, strict=True))[:listed])
    more = f" and {len(cells) - listed} more" if len(cells) > listed else ""
    raise ModelError(f"[fullfield]: {len(bad)} of the {len(op.cell)} DIC points on the model lie "
                     f"on elements that are inverted or collapsed ({named}{more}); fix the mesh "
                     "there before correlating")


def _rows_of(on: SurfacePoints, rows: NDArray[np.intp]) -> SurfacePoints:
    return SurfacePoints(**{f.name: getattr(on, f.name)[rows] for f in fields(on)})


def locate_points(points: NDArray[np.float64], ff: FullFieldSettings, locator: Locator, landmarks: Landmarks | None, *,
                  scale: float) -> tuple[Registration, PointModel]:
    """Register the distinct DIC points, drop those off the surface or near an edge, and build
    the zero-length gauge operator at the rest (see the module docstring).

    ``points`` are in camera axes and the model's length unit (``scale`` converted them). The
    region's boundary depends on each frame's own points and is applied per frame
    (:func:`region_distance`); here the part's edges.

    Raises
    ------
    StudyError
        No point within ``snap_tol`` of the model; registration failures.
    """
    M, lm_rms, method = register(points, ff, locator, landmarks, scale=scale)
    on = locator.project(apply(M, points))
    x_axis = M[:3, :3] @ np.array([1.0, 0.0, 0.0])
    # a face the camera's x axis runs into (within 5.7 deg of its normal) is seen edge-on: no
    # DIC measures there, and the tangent axes would be undefined (strain.tangent_axes)
    edge_on = np.linalg.norm(np.cross(on.normal, x_axis), axis=1) < EDGE_ON_SINE
    snap = (on.distance <= ff.snap_tol * scale) & ~edge_on
    if not snap.any():
        raise StudyError(f"[fullfield]: none of the {len(points)} DIC points lies within snap_tol "
                         f"{ff.snap_tol:g} {ff.length_unit} of the model surface (closest "
                         f"{on.distance.min() / scale:.3g}); check register, the landmarks and "
                         "length_unit")
    dist = on.distance[snap]
    ex, ey = tangent_axes(on.normal[snap], x_axis)
    keep = np.ones(int(snap.sum()), dtype=bool)
    if ff.edge > 0:
        keep &= ~near_part_edge(locator, on.point[snap], on.normal[snap], ex, ey,
                                ff.edge * scale)
    if not keep.any():
        raise StudyError(f"[fullfield] edge = {ff.edge:g}: every point on the model lies within "
                         "it of an edge; lower edge")
    kept = np.flatnonzero(snap)[keep]
    position = on.point[kept]
    op = point_operator(locator.mesh, _rows_of(on, kept), ex[keep], ey[keep])
    refuse_bad_cells(op)
    reg = Registration(method=method, matrix=M, landmark_rms=lm_rms,
                       rms=float(np.sqrt(np.mean(dist**2))), p95=float(np.percentile(dist, 95)),
                       n_points=len(points), dropped_snap=int((~snap).sum()),
                       dropped_edge=int((~keep).sum()), snap_tol=ff.snap_tol * scale)
    return reg, PointModel(kept=kept, position=position, ex=ex[keep], ey=ey[keep], operator=op)


__all__ = ["EDGE_ANGLE", "PointModel", "Registration", "distinct_rows", "frame_points",
           "locate_points", "near_part_edge", "point_operator", "refuse_bad_cells",
           "region_distance", "register"]
