"""Level a model field to the spatial resolution of a full-field (DIC) measurement.

DIC strains are spatially filtered (subset size, step, strain window), so a point-wise model
value is not what the measurement saw. Levelling passes the model field, sampled at the DIC
points, through a comparable filter before the two are compared. Two filters are offered on
scattered points: a truncated, normalised Gaussian and a plain window mean. Each is a sparse
weight matrix W built once from the points; applying it to any number of fields is one sparse
product, so the same operator levels the model field and, if wanted, the measured one.

Conventions
-----------
Points are (n, 3) on a surface, or (n, 2) in tangent-plane coordinates. Distances are straight
(chord) distances; on a surface of curvature radius R they differ from distances along the
surface by a relative O((r / R)^2), negligible for filter radii r much smaller than R. Values are
(n,) or (n, k); NaN values carry no weight, and a point whose own value is NaN stays NaN (the
filter fills no holes). Filters are normalised row by row, so near an edge the average is over
the neighbours that exist (a constant field is kept exactly; a gradient is biased there, since
the weights' centroid moves inward).

Points on a regular grid (what grid-based DIC exports give on a flat region) are levelled by
normalised convolution on that grid instead (:func:`grid_filter`): the same kernel, the same
truncation and normalisation, computed by FFT (``scipy.signal.fftconvolve`` of values x mask and
of the mask), so the cost is proportional to the grid's size and independent of the window. On
points exactly on the grid it equals the pairwise rule to round-off; the grid is accepted only
when the points sit within :data:`GRID_TOL` of a spacing from their nodes and from one plane
(the difference from the pairwise rule is then bounded, see :func:`grid_filter`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from correlate.core.errors import StudyError

__all__ = [
    "GRID_TOL",
    "GridFilter",
    "apply_weights",
    "gaussian_level",
    "gaussian_second_moment",
    "gaussian_weights",
    "grid_filter",
    "mean_level",
    "window_weights",
]

Array = NDArray[np.float64]
GRID_TOL = 0.02    # largest offset of a point from its grid node or the plane, in grid spacings
GRID_FILL = 0.25   # the points must fill at least this share of the grid's bounding box


@dataclass(frozen=True)
class GridFilter:
    """A levelling filter on the points' own regular grid (see :func:`grid_filter`)."""

    cell: NDArray[np.intp]   # (n,) flat index of each point's grid cell
    shape: tuple[int, int]   # grid rows, columns
    kernel: Array            # (2 a + 1, 2 b + 1) weights at the grid offsets
    spacing: tuple[float, float]


def _points(points: ArrayLike) -> Array:
    p = np.asarray(points, dtype=float)
    if p.ndim != 2 or p.shape[1] not in (2, 3) or len(p) == 0:
        raise StudyError(f"levelling points: expected shape (n, 2) or (n, 3) with n >= 1, "
                         f"found {p.shape}; pass one row of coordinates per DIC point")
    if not np.all(np.isfinite(p)):
        raise StudyError(f"levelling points: {int((~np.isfinite(p)).any(axis=1).sum())} rows are "
                         "not finite; drop points without coordinates before levelling")
    return p


def _positive(name: str, value: float) -> float:
    v = float(value)
    if not (np.isfinite(v) and v > 0):
        raise StudyError(f"levelling: {name} must be a positive length, found {value!r}")
    return v


def _symmetric(n: int, i: NDArray[np.intp], j: NDArray[np.intp], w: Array) -> sp.csr_array:
    """Return the symmetric n x n matrix with w at (i, j) and (j, i) and ones on the diagonal."""
    d = np.arange(n)
    rows = np.concatenate([i, j, d])
    cols = np.concatenate([j, i, d])
    data = np.concatenate([w, w, np.ones(n)])
    return sp.coo_array((data, (rows, cols)), shape=(n, n)).tocsr()


def gaussian_weights(points: ArrayLike, *, sigma: float, radius: float | None = None
                     ) -> sp.csr_array:
    """Build the (unnormalised) truncated Gaussian weight matrix of scattered points.

    Parameters
    ----------
    points : array_like, shape (n, 3) or (n, 2)
        Point coordinates. [length]
    sigma : float
        Standard deviation of the Gaussian. [length]
    radius : float, optional
        Truncation radius; neighbours farther away get no weight. Default ``3 * sigma``. [length]

    Returns
    -------
    scipy.sparse.csr_array, shape (n, n)
        ``W_ij = exp(-d_ij^2 / (2 sigma^2))`` for ``d_ij <= radius``, symmetric, ones on the
        diagonal. Pass it to :func:`apply_weights`.

    Raises
    ------
    StudyError
        Bad points or a non-positive sigma or radius.

    Notes
    -----
    Neighbour pairs come from ``scipy.spatial.cKDTree.query_pairs`` (each pair once), so the
    cost is proportional to the number of pairs: about ``n * pi * (radius / spacing)^2 / 2``.
    """
    p = _points(points)
    s = _positive("sigma", sigma)
    r = 3.0 * s if radius is None else _positive("radius", radius)
    pairs = cKDTree(p).query_pairs(r, output_type="ndarray")
    i, j = pairs[:, 0], pairs[:, 1]
    d2 = np.zeros(len(pairs))
    for k in range(p.shape[1]):  # one contiguous coordinate at a time: faster than p[i] - p[j]
        x = np.ascontiguousarray(p[:, k])
        dk = x.take(i) - x.take(j)
        d2 += dk * dk
    return _symmetric(len(p), i, j, np.exp(d2 * (-0.5 / (s * s))))


def window_weights(points: ArrayLike, *, size: float,
                   shape: Literal["disc", "square"] = "disc") -> sp.csr_array:
    """Build the 0/1 weight matrix of a window mean on scattered points.

    Parameters
    ----------
    points : array_like, shape (n, 3) or (n, 2)
        Point coordinates. [length]
    size : float
        Window width: the diameter of the disc, or the side of the square. [length]
    shape : {"disc", "square"}
        ``"disc"``: neighbours with Euclidean distance ``<= size / 2`` (a ball on a surface,
        coordinate free). ``"square"``: neighbours with every coordinate difference
        ``<= size / 2`` (Chebyshev distance); meant for (n, 2) tangent-plane coordinates, where it
        is a square window aligned with the axes.

    Returns
    -------
    scipy.sparse.csr_array, shape (n, n)
        1 for each neighbour in the window (the point itself included), else 0.
    """
    p = _points(points)
    half = _positive("size", size) / 2.0
    if shape not in ("disc", "square"):
        raise StudyError(f"levelling: window shape must be 'disc' or 'square', found {shape!r}")
    norm = 2.0 if shape == "disc" else np.inf
    pairs = cKDTree(p).query_pairs(half, p=norm, output_type="ndarray")
    return _symmetric(len(p), pairs[:, 0], pairs[:, 1], np.ones(len(pairs)))


def apply_weights(weights: sp.sparray | sp.spmatrix, values: ArrayLike) -> Array:
    """Return the normalised weighted average of values, NaN values excluded.

    Parameters
    ----------
    weights : sparse matrix, shape (n, n)
        From :func:`gaussian_weights` or :func:`window_weights`.
    values : array_like, shape (n,) or (n, k)
        Field values at the points (any unit; strain in m/m).

    Returns
    -------
    ndarray, same shape as values
        ``sum_j W_ij v_j [v_j finite] / sum_j W_ij [v_j finite]``, per column; NaN where the
        point's own value is NaN.

    Raises
    ------
    StudyError
        If the values do not have one row per point.
    """
    v = np.asarray(values, dtype=float)
    if isinstance(weights, GridFilter):
        return _apply_grid(weights, v)
    if callable(getattr(weights, "apply", None)):   # correlate.fullfield.scattered's filters
        return weights.apply(v)
    n = weights.shape[0]
    if v.ndim not in (1, 2) or v.shape[0] != n:
        raise StudyError(f"levelling values: expected shape ({n},) or ({n}, k) for {n} points, "
                         f"found {v.shape}")
    col = v.reshape(n, -1)
    ok = np.isfinite(col)
    num = weights @ np.where(ok, col, 0.0)
    den = weights @ ok.astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    out[~ok] = np.nan
    return out.reshape(v.shape)


def gaussian_level(points: ArrayLike, values: ArrayLike, *, sigma: float,
                   radius: float | None = None) -> Array:
    """Filter values at scattered points by a normalised, truncated Gaussian average.

    Parameters
    ----------
    points : array_like, shape (n, 3) or (n, 2)
        Point coordinates. [length]
    values : array_like, shape (n,) or (n, k)
        Field values; NaN excluded from the weights.
    sigma : float
        Standard deviation of the Gaussian. [length]
    radius : float, optional
        Truncation radius, default ``3 * sigma``. [length]

    Returns
    -------
    ndarray, same shape as values
        Levelled values.

    Notes
    -----
    ``v_i' = sum_j w_ij v_j / sum_j w_ij`` with ``w_ij = exp(-d_ij^2 / (2 sigma^2))``,
    ``d_ij <= radius``. On a dense planar sampling, away from the edges, a quadratic field
    ``f = a x^2 + b y^2 + c x y + d x + e y + g`` becomes ``f + m2 (a + b)`` with ``m2`` the
    per-axis second moment of the truncated kernel, :func:`gaussian_second_moment`: ``sigma^2``
    untruncated, 0.9495 ``sigma^2`` at ``radius = 3 sigma`` (the 3-sigma disc drops 1.1 % of the
    weight but 5.1 % of the second moment). Strain filtering of DIC data is described in the
    iDICs guide and the levelling comparison in Lava et al. (2020).

    References
    ----------
    International Digital Image Correlation Society, Jones E.M.C., Iadicola M.A. (eds.) (2018)
    A Good Practices Guide for Digital Image Correlation. doi:10.32720/idics/gpg.ed1
    Lava P., Jones E.M.C., Wittevrongel L., Pierron F. (2020) Validation of finite-element
    models using full-field experimental data: levelling finite-element analysis data through a
    digital image correlation engine. Strain 56:e12350 (volume and article number from memory).
    """
    return apply_weights(gaussian_weights(points, sigma=sigma, radius=radius), values)


def mean_level(points: ArrayLike, values: ArrayLike, *, size: float,
               shape: Literal["disc", "square"] = "disc") -> Array:
    """Filter values at scattered points by the plain mean over a window.

    Parameters
    ----------
    points : array_like, shape (n, 3) or (n, 2)
        Point coordinates. [length]
    values : array_like, shape (n,) or (n, k)
        Field values; NaN excluded.
    size : float
        Window width: disc diameter or square side (see :func:`window_weights`). [length]
    shape : {"disc", "square"}
        Window rule, see :func:`window_weights`.

    Returns
    -------
    ndarray, same shape as values
        Mean of the finite values of the points inside the window centred on each point
        (boundary included); NaN where the point's own value is NaN.

    Notes
    -----
    On a regular grid of spacing h, a square window of side ``(2 m + 1) h`` is the moving
    average of ``(2 m + 1)^2`` points, the same as ``scipy.ndimage.uniform_filter`` away from
    edges; its per-axis second moment is ``m (m + 1) h^2 / 3``.
    """
    return apply_weights(window_weights(points, size=size, shape=shape), values)


def gaussian_second_moment(sigma: float, radius: float | None = None) -> float:
    """Return the per-axis second moment of a 2D Gaussian truncated to a disc and renormalised.

    Parameters
    ----------
    sigma : float
        Standard deviation. [length]
    radius : float, optional
        Truncation radius, default ``3 * sigma``; ``inf`` for no truncation. [length]

    Returns
    -------
    float
        ``E[x^2]`` of the truncated kernel. [length^2]

    Notes
    -----
    With ``S = radius^2 / (2 sigma^2)``, the squared radius of a 2D Gaussian point is
    ``2 sigma^2`` times an Exp(1) variable, so ``E[x^2] = E[rho^2] / 2 =
    sigma^2 (1 - (1 + S) e^-S) / (1 - e^-S)``. This is the smoothing that levelling adds to a
    quadratic field per unit of its Laplacian / 2.
    """
    s = _positive("sigma", sigma)
    r = 3.0 * s if radius is None else float(radius)
    if not r > 0:
        raise StudyError(f"levelling: radius must be positive, found {radius!r}")
    if np.isinf(r):
        return s * s
    S = r * r / (2.0 * s * s)
    kept = -np.expm1(-S)  # 1 - e^-S, the weight inside the disc
    return float(s * s * (1.0 - (1.0 + S) * np.exp(-S)) / kept)


def _plane_coordinates(p: Array) -> tuple[Array, Array]:
    """In-plane coordinates (n, 2) of the best plane of p and the distances from it."""
    if p.shape[1] == 2:
        return p, np.zeros(len(p))
    c = p - p.mean(axis=0)
    _, _, vt = np.linalg.svd(c[:: max(len(c) // 20000, 1)], full_matrices=False)
    return c @ vt[:2].T, c @ vt[2]


def _lattice(uv: Array) -> tuple[NDArray[np.intp], NDArray[np.intp], Array, Array] | None:
    """Integer grid indices and the two lattice vectors of in-plane points on a regular grid."""
    tree = cKDTree(uv)
    d, j = tree.query(uv, k=5)   # a grid node's four neighbours
    if not np.all(np.isfinite(d)) or not np.median(d[:, 1]) > 0:
        return None
    step = (uv[j[:, 1:]] - uv[:, None, :]).reshape(-1, 2)
    near = uv[j[:, 1]] - uv                     # the nearest neighbour: along a grid line
    phi = np.arctan2(near[:, 1], near[:, 0])    # the grid's direction, modulo 90 degrees:
    theta = float(np.angle(np.mean(np.exp(4j * phi)))) / 4   # the mean on a circle of 4 phi
    c, s = np.cos(theta), np.sin(theta)
    turn = np.array([[c, -s], [s, c]])
    ab, st = uv @ turn, step @ turn
    out = []
    for k in range(2):
        along = np.abs(st[:, k]) > 0.95 * np.hypot(st[:, 0], st[:, 1])
        if not along.any():
            return None
        x = ab[:, k] - ab[:, k].min()
        hk, x0 = float(np.median(np.abs(st[along, k]))), 0.0
        if not hk > 0:
            return None
        for span in (8.0, 64.0, 512.0, np.inf):   # fit spacing and origin over a growing span
            near = x <= span * hk
            idx = np.rint((x[near] - x0) / hk)
            if np.ptp(idx) < 1:
                continue
            hk, x0 = (float(v) for v in np.polyfit(idx, x[near], 1))
        idx = np.rint((x - x0) / hk).astype(np.intp)
        out.append(idx - idx.min())
    # one least-squares fit of the lattice, origin + ia va + ib vb, to every point: it takes up
    # what the direction from the neighbour steps left over, and the test is against it
    design = np.c_[np.ones(len(uv)), out[0], out[1]]
    coef = np.linalg.lstsq(design, uv, rcond=None)[0]
    va, vb = coef[1], coef[2]
    offset = np.linalg.norm(uv - design @ coef, axis=1)
    if np.max(offset) > GRID_TOL * min(np.linalg.norm(va), np.linalg.norm(vb)):
        return None
    return out[0], out[1], va, vb


def grid_filter(points: ArrayLike, *, sigma: float | None = None, size: float | None = None
                ) -> GridFilter | None:
    """The Gaussian (``sigma``) or disc-mean (``size``) filter on the points' own grid, or None.

    Parameters
    ----------
    points : array_like, shape (n, 3) or (n, 2)
        Point coordinates. [length]
    sigma : float, optional
        Gaussian standard deviation, truncated at ``3 sigma`` as :func:`gaussian_weights`. [length]
    size : float, optional
        Disc diameter of a window mean as :func:`window_weights` ``shape="disc"``. [length]

    Returns
    -------
    GridFilter or None
        None when the points are not on one regular rectangular grid in one plane (each point
        within ``GRID_TOL`` of a spacing of its node and of the plane, one point per node, the
        nodes filling at least ``GRID_FILL`` of the box): use the pairwise weights then.

    Notes
    -----
    The grid is found in the points' best plane: its direction from the nearest-neighbour
    steps, its node indices from the steps along each direction (spacing and origin refitted
    over a growing span), then one least-squares fit ``origin + i va + j vb`` to every point,
    against which the offsets are tested. The kernel is the pairwise weight at each node offset
    (``exp(-d^2 / (2 sigma^2))`` for ``d <= 3 sigma``, or 1 for ``d <= size / 2``), so on points
    exactly on the grid the levelled values equal :func:`apply_weights` with the pairwise
    matrix to round-off. Points off their nodes are levelled as if on them: the difference from
    the pairwise rule is then about the field's change over the largest offset, and the tests
    hold it below ``sqrt(2) x offset x largest gradient`` (measured 0.69 to 0.77 of that for
    offsets of 0.5 to 4 % of a spacing). Distances are in the plane, so the surface must be flat
    within ``GRID_TOL`` of a spacing over the whole set (else None: curved parts keep the
    pairwise rule, which uses straight distances between the points).
    """
    p = _points(points)
    if (sigma is None) == (size is None):
        raise StudyError("levelling: give either sigma (Gaussian) or size (window mean)")
    if len(p) < 9:
        return None
    uv, off = _plane_coordinates(p)
    found = _lattice(uv)
    if found is None:
        return None
    ia, ib, va, vb = found
    ha, hb = float(np.linalg.norm(va)), float(np.linalg.norm(vb))
    if np.max(np.abs(off)) > GRID_TOL * min(ha, hb):
        return None
    shape = (int(ia.max()) + 1, int(ib.max()) + 1)
    cell = ia * shape[1] + ib
    if len(np.unique(cell)) != len(p) or len(p) < GRID_FILL * shape[0] * shape[1]:
        return None
    if sigma is not None:
        radius = 3.0 * _positive("sigma", sigma)
    else:
        radius = _positive("size", size) / 2.0
    sine = abs(va[0] * vb[1] - va[1] * vb[0]) / (ha * hb)   # the lattice's angle
    na, nb = int(radius / (ha * sine)) + 1, int(radius / (hb * sine)) + 1
    a, b = np.meshgrid(np.arange(-na, na + 1), np.arange(-nb, nb + 1), indexing="ij")
    off2 = a[..., None] * va + b[..., None] * vb
    d2 = np.sum(off2 * off2, axis=-1)
    inside = d2 <= radius * radius
    kernel = (np.exp(d2 * (-0.5 / (sigma * sigma))) if sigma is not None
              else np.ones_like(d2)) * inside
    return GridFilter(cell=cell, shape=shape, kernel=kernel, spacing=(ha, hb))


def _apply_grid(g: GridFilter, v: Array) -> Array:
    """Normalised convolution on the grid: conv(values x mask) / conv(mask), NaN kept NaN."""
    from scipy.signal import fftconvolve

    n = len(g.cell)
    if v.ndim not in (1, 2) or v.shape[0] != n:
        raise StudyError(f"levelling values: expected shape ({n},) or ({n}, k) for {n} points, "
                         f"found {v.shape}")
    col = v.reshape(n, -1)
    ok = np.isfinite(col)
    k = col.shape[1]
    grid = np.zeros((2 * k, g.shape[0] * g.shape[1]))
    grid[:k, g.cell] = np.where(ok, col, 0.0).T
    grid[k:, g.cell] = ok.T
    conv = fftconvolve(grid.reshape(2 * k, *g.shape), g.kernel[None], mode="same", axes=(1, 2))
    conv = conv.reshape(2 * k, -1)[:, g.cell]
    with np.errstate(invalid="ignore", divide="ignore"):
        out = (conv[:k] / conv[k:]).T
    out[~ok] = np.nan
    return out.reshape(v.shape)
