"""Register full-field (DIC) points given in camera coordinates onto the model surface.

Two steps: a rigid transform from picked landmark pairs (closed-form least squares), then an
iterative closest point (ICP) refinement that pulls the whole point cloud onto the model surface,
given as sample points with unit normals. Both return small frozen records; ``apply`` maps points.

Conventions
-----------
A transform maps camera coordinates to model coordinates: ``x_model = R @ x_dic + t``, held as a
4x4 homogeneous matrix ``[[R, t], [0, 0, 0, 1]]``. Lengths are in the unit of the inputs
(``tol``, ``max_move`` and ``max_pair_distance`` use the same unit). Rotations are proper
(det R = +1); a mirror image is never returned.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation

from correlate.core.errors import ModelError, StudyError

__all__ = [
    "FREE_DIRECTION_RATIO",
    "LANDMARK_RANK_TOL",
    "IcpResult",
    "RigidTransform",
    "apply",
    "icp_point_to_plane",
    "rigid_from_landmarks",
    "rotation_angle_deg",
]

Array = NDArray[np.float64]

#: Landmarks whose centred cloud has second singular value below this fraction of the first are
#: refused as collinear: with a spread ratio of 1e-3, a picking error e tilts the fitted rotation
#: about the landmark line by about e / (1e-3 * spread), which is no registration at all.
LANDMARK_RANK_TOL = 1e-3

#: An ICP step leaves unchanged (and reports as free) every rigid-body direction whose singular
#: value in the scaled point-to-plane design matrix is below this fraction of the largest: the
#: surface shape does not fix it (slide along and spin about a cylinder's axis, slide in a plane).
FREE_DIRECTION_RATIO = 1e-3


@dataclass(frozen=True, eq=False)
class RigidTransform:
    """A rigid transform from camera to model coordinates and how well it fits its pairs.

    Attributes
    ----------
    matrix : ndarray, shape (4, 4)
        Homogeneous matrix ``[[R, t], [0, 0, 0, 1]]`` (read-only).
    rotation : ndarray, shape (3, 3)
        Proper rotation R (read-only).
    translation : ndarray, shape (3,)
        Translation t. [length]
    rms_residual : float
        Root mean square of the landmark distances ``|R p_i + t - q_i|`` after the fit. [length]
    n_pairs : int
        Number of landmark pairs used.
    """

    matrix: Array
    rotation: Array
    translation: Array
    rms_residual: float
    n_pairs: int


@dataclass(frozen=True, eq=False)
class IcpResult:
    """The outcome of a point-to-plane ICP refinement.

    Attributes
    ----------
    matrix, rotation, translation : ndarray
        Final transform as in :class:`RigidTransform` (read-only).
    iterations : int
        Number of linearised steps taken (the last one's update was below ``tol``).
    rms_distance, p95_distance : float
        RMS and 95th percentile of the absolute point-to-plane distances of the paired points
        at the final transform. [length]
    distances : ndarray, shape (n,)
        Signed point-to-plane distance of each point at the final transform (positive on the
        side the normal points to); NaN where the point was not paired. [length]
    n_used : int
        Points paired at the final transform.
    largest_move : float
        Largest displacement of a point between the initial and the final transform. [length]
    free_directions : int
        Rigid-body directions (of 6) that the surface shape does not fix; they stay at the
        initial solution (2 on a cylinder: axial slide and spin about the axis).
    singular_ratios : ndarray, shape (6,)
        Singular values of the last step's scaled design matrix over the largest, descending.
        Ratios just above :data:`FREE_DIRECTION_RATIO` mark weakly fixed directions whose
        error is about noise / (ratio * largest singular value): a patch much smaller than its
        curvature radii is nearly a piece of a sphere or cylinder and registers poorly.
    """

    matrix: Array
    rotation: Array
    translation: Array
    iterations: int
    rms_distance: float
    p95_distance: float
    distances: Array
    n_used: int
    largest_move: float
    free_directions: int
    singular_ratios: Array


def _points(values: ArrayLike, name: str, error: type[Exception] = StudyError) -> Array:
    """Return ``values`` as a finite float array of shape (n, 3) or raise one line."""
    a = np.asarray(values, dtype=float)
    if a.ndim != 2 or a.shape[1] != 3:
        raise error(f"{name}: expected an array of shape (n, 3), found shape {a.shape}; "
                    "pass one row of x, y, z per point")
    bad = ~np.all(np.isfinite(a), axis=1)
    if bad.any():
        raise error(f"{name}: {int(bad.sum())} of {len(a)} rows are not finite (first row "
                    f"{int(np.flatnonzero(bad)[0])}); drop the missing points before registering")
    return a


def _frozen(a: Array) -> Array:
    a.setflags(write=False)
    return a


def _homogeneous(R: Array, t: Array) -> Array:
    M = np.eye(4)
    M[:3, :3] = R
    M[:3, 3] = t
    return M


def _as_matrix(transform: ArrayLike | RigidTransform | IcpResult, name: str) -> Array:
    """Return a checked 4x4 rigid matrix from a matrix or a record holding one."""
    M = np.asarray(getattr(transform, "matrix", transform), dtype=float)
    if M.shape != (4, 4) or not np.all(np.isfinite(M)):
        raise StudyError(f"{name}: expected a finite 4x4 homogeneous matrix, found shape "
                         f"{M.shape}; pass a RigidTransform or its .matrix")
    R = M[:3, :3]
    err = float(np.abs(R @ R.T - np.eye(3)).max())
    if err > 1e-6 or np.linalg.det(R) < 0 or np.any(M[3] != (0.0, 0.0, 0.0, 1.0)):
        raise StudyError(f"{name}: the matrix is not a proper rigid transform (|R R^T - I| = "
                         f"{err:.1e}, det R = {np.linalg.det(R):.6f}, last row {M[3].tolist()}); "
                         "expected an orthonormal R with det +1 and last row 0 0 0 1")
    return M


def apply(matrix: ArrayLike | RigidTransform | IcpResult, points: ArrayLike) -> Array:
    """Map points by a rigid transform: ``R @ x + t`` for each row.

    Parameters
    ----------
    matrix : array_like, shape (4, 4), or RigidTransform or IcpResult
        The homogeneous transform (or a record with a ``matrix`` attribute).
    points : array_like, shape (n, 3)
        Points to map. [length]

    Returns
    -------
    ndarray, shape (n, 3)
        The mapped points. [length]

    Raises
    ------
    StudyError
        If the matrix is not a proper rigid 4x4 transform or the points are not (n, 3).
    """
    M = _as_matrix(matrix, "transform")
    p = np.asarray(points, dtype=float)
    if p.ndim != 2 or p.shape[1] != 3:
        raise StudyError(f"points: expected an array of shape (n, 3), found shape {p.shape}")
    return p @ M[:3, :3].T + M[:3, 3]


def rotation_angle_deg(R: ArrayLike) -> float:
    """Return the angle of a rotation matrix about its own axis, in [0, 180] degrees.

    Parameters
    ----------
    R : array_like, shape (3, 3)
        A rotation matrix (e.g. ``R_found @ R_true.T`` to measure an error).

    Returns
    -------
    float
        The rotation angle. [deg]

    Notes
    -----
    The angle is the magnitude of the rotation vector, computed by scipy's
    ``Rotation.from_matrix(R).magnitude()`` (quaternion based), which stays accurate near 0
    where ``arccos((tr R - 1) / 2)`` loses half the digits.
    """
    a = np.asarray(R, dtype=float)
    if a.shape != (3, 3) or not np.all(np.isfinite(a)):
        raise StudyError(f"rotation: expected a finite 3x3 matrix, found shape {a.shape}")
    return float(np.degrees(Rotation.from_matrix(a).magnitude()))


def _check_spread(centred: Array, name: str, rank_tol: float) -> None:
    s = np.linalg.svd(centred, compute_uv=False)
    if s[0] == 0.0 or s[1] <= rank_tol * s[0]:
        ratio = 0.0 if s[0] == 0.0 else s[1] / s[0]
        raise StudyError(f"{name}: the {len(centred)} landmarks are collinear (second/first "
                         f"singular value of the centred points {ratio:.2e} <= {rank_tol:.0e}); "
                         "pick at least three landmarks that span an area, not a line")


def rigid_from_landmarks(dic_points: ArrayLike, model_points: ArrayLike, *,
                         rank_tol: float = LANDMARK_RANK_TOL) -> RigidTransform:
    """Fit the least-squares rigid transform that maps DIC landmarks onto model landmarks.

    Parameters
    ----------
    dic_points : array_like, shape (n, 3)
        Landmarks in camera coordinates. [length]
    model_points : array_like, shape (n, 3)
        The same landmarks, same order, in model coordinates. [length]
    rank_tol : float
        Collinearity tolerance, see :data:`LANDMARK_RANK_TOL`.

    Returns
    -------
    RigidTransform
        R, t minimising ``sum |R p_i + t - q_i|^2`` and the RMS landmark residual.

    Raises
    ------
    StudyError
        With fewer than three pairs, unequal counts, non-finite rows, or collinear landmarks.

    Notes
    -----
    Centre both sets on their centroids, then R is the Kabsch solution
    ``R = V diag(1, 1, det(V U^T)) U^T`` from the SVD ``H = sum p_c q_c^T = U S V^T``; the
    determinant factor is the reflection fix that keeps R proper when the points are coplanar or
    noisy. Then ``t = q_bar - R p_bar``. The SVD step is scipy's ``Rotation.align_vectors``
    (which implements exactly this Kabsch solution); Horn's unit-quaternion method gives the same
    minimiser. No scale is fitted.

    References
    ----------
    Kabsch W. (1976) A solution for the best rotation to relate two sets of vectors.
    Acta Cryst. A32:922-923.
    Horn B.K.P. (1987) Closed-form solution of absolute orientation using unit quaternions.
    J. Opt. Soc. Am. A 4(4):629-642.
    """
    p = _points(dic_points, "dic landmarks")
    q = _points(model_points, "model landmarks")
    if p.shape != q.shape:
        raise StudyError(f"landmarks: {len(p)} DIC points but {len(q)} model points; give the "
                         "same landmarks in the same order in both lists")
    if len(p) < 3:
        raise StudyError(f"landmarks: {len(p)} pairs given, at least 3 non-collinear pairs are "
                         "needed to fix a rigid transform; pick more landmarks")
    p_bar, q_bar = p.mean(axis=0), q.mean(axis=0)
    pc, qc = p - p_bar, q - q_bar
    _check_spread(pc, "dic landmarks", rank_tol)
    _check_spread(qc, "model landmarks", rank_tol)
    rot, _ = Rotation.align_vectors(qc, pc)  # rotation taking pc onto qc (Kabsch)
    R = rot.as_matrix()
    t = q_bar - R @ p_bar
    res = q - (p @ R.T + t)
    rms = float(np.sqrt(np.mean(np.sum(res**2, axis=1))))
    return RigidTransform(_frozen(_homogeneous(R, t)), _frozen(R), _frozen(t), rms, len(p))


def _surface(surface_points: ArrayLike, surface_normals: ArrayLike) -> tuple[Array, Array]:
    s = _points(surface_points, "surface points", ModelError)
    n = _points(surface_normals, "surface normals", ModelError)
    if n.shape != s.shape:
        raise ModelError(f"surface: {len(s)} points but {len(n)} normals; give one unit normal "
                         "per surface sample point")
    length = np.linalg.norm(n, axis=1)
    bad = length < 1e-12
    if bad.any():
        raise ModelError(f"surface normals: {int(bad.sum())} of {len(n)} have zero length (first "
                         f"row {int(np.flatnonzero(bad)[0])}); recompute the face normals")
    return s, n / length[:, None]


def _pairs(tree: cKDTree, normals: Array, cur: Array, max_pair_distance: float | None
           ) -> tuple[Array, Array, Array]:
    """Return the paired-point mask, the sample index and the sample per point."""
    dist, idx = tree.query(cur)
    keep = np.ones(len(cur), bool) if max_pair_distance is None else dist <= max_pair_distance
    if keep.sum() < 6:
        raise StudyError(f"icp: only {int(keep.sum())} of {len(cur)} points lie within "
                         f"max_pair_distance={max_pair_distance} of the surface samples, at least "
                         "6 are needed; check the initial transform or raise max_pair_distance")
    return keep, idx, normals[idx]


def _step(c: Array, q: Array, nn: Array) -> tuple[Array, Array]:
    """Return the 4x4 linearised point-to-plane update and the singular value ratios."""
    centre = c.mean(axis=0)
    r = q - centre  # lever arm to the surface sample: keeps the surface's symmetries exact
    L = float(np.sqrt(np.mean(np.sum(r**2, axis=1)))) or 1.0
    A = np.hstack([np.cross(r, nn) / L, nn])  # columns scaled to length units
    b = np.sum((q - c) * nn, axis=1)
    x, _, _, sv = np.linalg.lstsq(A, b, rcond=FREE_DIRECTION_RATIO)
    dR = Rotation.from_rotvec(x[:3] / L).as_matrix()
    # x' = dR (x - centre) + centre + dt
    return _homogeneous(dR, centre - dR @ centre + x[3:]), sv / sv[0]


def _check_icp_settings(tol: float, max_move: float, max_iter: int,
                        max_pair_distance: float | None) -> None:
    for name, value in (("tol", tol), ("max_move", max_move)):
        if not (np.isfinite(value) and value > 0):
            raise StudyError(f"icp: {name} must be a positive length, found {value!r}")
    if max_pair_distance is not None and not max_pair_distance > 0:
        raise StudyError(f"icp: max_pair_distance must be positive or None, found "
                         f"{max_pair_distance!r}")
    if int(max_iter) < 1:
        raise StudyError(f"icp: max_iter must be at least 1, found {max_iter!r}")


def icp_point_to_plane(points: ArrayLike, surface_points: ArrayLike, surface_normals: ArrayLike,
                       initial: ArrayLike | RigidTransform, *, tol: float, max_move: float,
                       max_iter: int = 50, max_pair_distance: float | None = None) -> IcpResult:
    """Refine a rigid transform so that DIC points lie on the model surface (point-to-plane ICP).

    Parameters
    ----------
    points : array_like, shape (n, 3)
        DIC points in camera coordinates. [length]
    surface_points, surface_normals : array_like, shape (m, 3)
        Model surface samples (dense compared with the point spacing) and their unit normals,
        in model coordinates. [length], [-]
    initial : array_like, shape (4, 4), or RigidTransform
        Starting transform, usually :func:`rigid_from_landmarks`.
    tol : float
        Stop when no point moves more than this in one update. [length]
    max_move : float
        Refuse a result that moves any point more than this from where ``initial`` put it. [length]
    max_iter : int
        Most linearised steps before giving up.
    max_pair_distance : float or None
        Leave out points farther than this from their nearest surface sample (points off the
        modelled surface). None pairs every point. [length]

    Returns
    -------
    IcpResult
        Final transform, iterations, distances and their RMS and 95th percentile.

    Raises
    ------
    StudyError
        Bad arguments, fewer than 6 paired points, a move beyond ``max_move`` or no convergence
        within ``max_iter``.
    ModelError
        Surface points and normals that do not match or zero normals.

    Notes
    -----
    Each step pairs every point p_i (mapped by the current transform) with its nearest surface
    sample q_i (normal n_i, via ``scipy.spatial.cKDTree``) and solves the small-angle
    linearisation of ``min sum ((R p_i + t - q_i) . n_i)^2``. With the lever arm
    ``r_i = q_i - c`` about the centroid c of the points (q_i rather than p_i: the two differ at
    second order, but only q_i keeps a symmetric surface's free directions exactly free), the
    rows are ``[(r_i x n_i) / L, n_i] . [L w, dt] = (q_i - p_i) . n_i`` (L the RMS lever arm, so
    every column is a length), solved by truncated-SVD least squares (``numpy.linalg.lstsq``,
    rcond = :data:`FREE_DIRECTION_RATIO`); the update is applied as the exact rotation by the
    rotation vector w about c, plus dt. Directions the surface does not constrain get no update,
    so they keep the value from ``initial`` (the landmarks must fix them). The residuals are the
    tangent-plane distances to the nearest samples: with sample spacing h and curvature radius
    R they overstate the true distance by up to about ``h^2 / (4 R)``.

    References
    ----------
    Chen Y., Medioni G. (1992) Object modelling by registration of multiple range images.
    Image and Vision Computing 10(3):145-155.
    Low K.-L. (2004) Linear least-squares optimization for point-to-plane ICP surface
    registration. Technical Report TR04-004, University of North Carolina at Chapel Hill.
    """
    _check_icp_settings(tol, max_move, max_iter, max_pair_distance)
    p = _points(points, "dic points")
    if len(p) < 6:
        raise StudyError(f"icp: {len(p)} DIC points given, at least 6 are needed to fix 6 "
                         "rigid-body directions")
    s, normals = _surface(surface_points, surface_normals)
    M = _as_matrix(initial, "initial transform").copy()
    tree = cKDTree(s)
    start = apply(M, p)
    cur = start
    update = np.inf
    for it in range(1, int(max_iter) + 1):
        keep, idx, nn = _pairs(tree, normals, cur, max_pair_distance)
        step, ratios = _step(cur[keep], s[idx[keep]], nn[keep])
        new = apply(step, cur)
        update = float(np.max(np.linalg.norm(new - cur, axis=1)))
        M, cur = step @ M, new
        moved = float(np.max(np.linalg.norm(cur - start, axis=1)))
        if moved > max_move:
            raise StudyError(f"icp: step {it} moved a point {moved:.4g} from the initial "
                             f"transform, more than max_move={max_move:.4g}; the landmarks are "
                             "too far off or the points do not belong to this surface")
        if update < tol:
            break
    else:
        raise StudyError(f"icp: no convergence in {int(max_iter)} steps (last update "
                         f"{update:.3g} >= tol={tol:.3g}); raise max_iter, loosen tol or set "
                         "max_pair_distance to leave out points off the surface")
    keep, idx, nn = _pairs(tree, normals, cur, max_pair_distance)
    d = np.full(len(p), np.nan)
    d[keep] = np.sum((cur[keep] - s[idx[keep]]) * nn[keep], axis=1)
    a = np.abs(d[keep])
    R = M[:3, :3].copy()
    t = M[:3, 3].copy()
    return IcpResult(_frozen(M), _frozen(R), _frozen(t), it, float(np.sqrt(np.mean(a**2))),
                     float(np.percentile(a, 95)), _frozen(d), int(keep.sum()), moved,
                     int(np.sum(ratios < FREE_DIRECTION_RATIO)), _frozen(ratios))
