"""Levelling of scattered points in bounded memory: blocked pairs, and splatting onto a voxel grid.

Stage: fullfield. In: scattered DIC points (n, 3) or (n, 2) and the filter's size. Out: a filter
object whose ``apply(values)`` gives the normalised weighted average of
:func:`correlate.fullfield.levelling.apply_weights` (NaN values carry no weight, a NaN point stays
NaN). Points on a regular grid are levelled on that grid instead
(:func:`correlate.fullfield.levelling.grid_filter`).

- :class:`PairFilter` is the pairwise rule itself (the truncated Gaussian or the disc mean over
  straight distances) applied a block of rows at a time, so its memory is that of one block's
  neighbour pairs, not of the whole weight matrix (about 80 million pairs for 100,000 points at
  830 neighbours each). The result equals the matrix of
  :func:`~correlate.fullfield.levelling.gaussian_weights` applied at once, to round-off.
- :class:`SplatFilter` is the Gaussian by normalised convolution on a voxel grid (values and
  their count spread onto the grid's nodes by trilinear weights, "splatting", each blurred by a
  separable Gaussian, ``scipy.ndimage.gaussian_filter``, and read back by the same trilinear
  weights; Knutsson and Westin, Normalized and differential convolution, CVPR 1993, for the
  normalised convolution). Splatting and reading back each add a tent kernel of variance
  ``h^2 / 6`` per axis (node spacing h), so the grid Gaussian's variance is ``m2 - h^2 / 3``
  and the whole chain has the per-axis second moment ``m2`` of the pairwise rule's Gaussian
  truncated at 3 sigma (:func:`~correlate.fullfield.levelling.gaussian_second_moment`,
  0.949 sigma^2), so that both smooth a quadratic field by the same amount. Its
  cost is that of the grid (linear in the voxels and the points), independent of the
  neighbours per point; the tests bound its difference from the pairwise rule.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray
from scipy.spatial import cKDTree

from correlate.fullfield.levelling import gaussian_second_moment

Array = NDArray[np.float64]
PAIR_BLOCK_PAIRS = 20_000_000   # neighbour pairs held at once by PairFilter (about 500 MB)
SPLAT_STEP = 0.5                # voxel spacing in standard deviations
SPLAT_MAX_VOXELS = 30_000_000   # larger boxes (large regions, small windows): the pairs


def _columns(v: Array, n: int) -> tuple[Array, NDArray[np.bool_]]:
    from correlate.core.errors import StudyError

    if v.ndim not in (1, 2) or v.shape[0] != n:
        raise StudyError(f"levelling values: expected shape ({n},) or ({n}, k) for {n} points, "
                         f"found {v.shape}")
    col = v.reshape(n, -1)
    return col, np.isfinite(col)


@dataclass(frozen=True)
class PairFilter:
    """The pairwise truncated Gaussian (``sigma``) or disc mean (``size``), applied by blocks."""

    points: Array
    radius: float
    sigma: float | None = None          # None: the disc mean of diameter 2 radius
    tree: cKDTree = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "tree", cKDTree(self.points))

    def apply(self, values: Array) -> Array:
        v = np.asarray(values, dtype=float)
        n = len(self.points)
        col, ok = _columns(v, n)
        clean = np.where(ok, col, 0.0)
        okf = ok.astype(float)
        num = np.zeros_like(clean)
        den = np.zeros_like(clean)
        # neighbours per point from a sample, to size the blocks
        probe = self.points[:: max(n // 200, 1)]
        per = max(float(np.mean(self.tree.query_ball_point(probe, self.radius,
                                                           return_length=True))), 1.0)
        step = max(int(PAIR_BLOCK_PAIRS / per), 1)
        for lo in range(0, n, step):
            hi = min(lo + step, n)
            pairs = cKDTree(self.points[lo:hi]).sparse_distance_matrix(
                self.tree, self.radius, output_type="ndarray")
            i, j, d = pairs["i"], pairs["j"], pairs["v"]
            w = np.ones(len(d)) if self.sigma is None else np.exp(d * d * (-0.5 / self.sigma**2))
            for c in range(col.shape[1]):
                num[lo:hi, c] = np.bincount(i, w * clean[j, c], minlength=hi - lo)
                den[lo:hi, c] = np.bincount(i, w * okf[j, c], minlength=hi - lo)
        with np.errstate(invalid="ignore", divide="ignore"):
            out = num / den
        out[~ok] = np.nan
        return out.reshape(v.shape)


@dataclass(frozen=True)
class SplatFilter:
    """The Gaussian of standard deviation ``sigma`` by normalised convolution on a voxel grid."""

    corner: NDArray[np.intp]    # (n, 8) flat voxel index of each point's 8 surrounding nodes
    weight: Array               # (n, 8) their trilinear weights (sum 1)
    shape: tuple[int, int, int]
    sigma_voxels: float         # the grid Gaussian's standard deviation in voxels
    spacing: float

    def apply(self, values: Array) -> Array:
        from scipy.ndimage import gaussian_filter

        v = np.asarray(values, dtype=float)
        n = len(self.corner)
        col, ok = _columns(v, n)
        size = int(np.prod(self.shape))
        out = np.empty_like(col)

        def blur(w: Array) -> Array:
            grid = np.bincount(self.corner.ravel(), (self.weight * w[:, None]).ravel(),
                               minlength=size).reshape(self.shape)
            grid = gaussian_filter(grid, self.sigma_voxels, mode="constant", truncate=3.0)
            return np.sum(grid.ravel()[self.corner] * self.weight, axis=1)

        for c in range(col.shape[1]):
            okf = ok[:, c].astype(float)
            with np.errstate(invalid="ignore", divide="ignore"):
                out[:, c] = blur(np.where(ok[:, c], col[:, c], 0.0)) / blur(okf)
        out[~ok] = np.nan
        return out.reshape(v.shape)


def splat_filter(points: Array, sigma: float) -> SplatFilter | None:
    """The voxel-grid Gaussian of ``points`` (see the module docstring), or None when the box
    around them would need more than :data:`SPLAT_MAX_VOXELS` voxels of ``SPLAT_STEP sigma``
    (use :class:`PairFilter` then)."""
    p = np.asarray(points, dtype=float)
    if p.shape[1] == 2:
        p = np.c_[p, np.zeros(len(p))]
    h = SPLAT_STEP * sigma
    pad = 3.0 * sigma + 2.0 * h           # the blur's reach beyond the points, and a node
    lo = p.min(axis=0) - pad
    shape = tuple(int(s) for s in np.ceil((p.max(axis=0) + pad - lo) / h) + 1)
    if float(np.prod(np.asarray(shape, dtype=float))) > SPLAT_MAX_VOXELS:
        return None
    u = (p - lo) / h
    base = np.floor(u).astype(np.intp)
    f = u - base
    corner = np.empty((len(p), 8), dtype=np.intp)
    weight = np.empty((len(p), 8))
    for k in range(8):
        bit = np.array([(k >> 2) & 1, (k >> 1) & 1, k & 1])
        idx = base + bit
        corner[:, k] = np.ravel_multi_index(idx.T, shape)
        weight[:, k] = np.prod(np.where(bit, f, 1.0 - f), axis=1)
    # the chain's variance per axis is that of the pairwise rule's kernel, truncated at 3 sigma
    # (levelling.gaussian_second_moment): then both smooth a quadratic field alike
    sigma_grid = np.sqrt(gaussian_second_moment(sigma) - h * h / 3.0)
    return SplatFilter(corner=corner, weight=weight, shape=shape,
                       sigma_voxels=float(sigma_grid / h), spacing=h)


__all__ = ["PAIR_BLOCK_PAIRS", "SPLAT_MAX_VOXELS", "SPLAT_STEP", "PairFilter", "SplatFilter",
           "splat_filter"]
