"""Levelling scattered points in bounded memory: blocked pairs and the voxel-grid Gaussian."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

import correlate.fullfield.scattered as scattered
from correlate.core.errors import StudyError
from correlate.fullfield.levelling import (
    apply_weights,
    gaussian_second_moment,
    gaussian_weights,
    window_weights,
)
from correlate.fullfield.scattered import PairFilter, splat_filter

A, B, C = 0.7, -0.3, 0.45  # quadratic field coefficients (our own example)
R = Rotation.from_rotvec([0.4, -0.7, 0.2]).as_matrix()


def _scattered(n, side, seed):
    """Uniform random points on a tilted plane in 3D (a rigid motion of the xy plane)."""
    xy = np.random.default_rng(seed).uniform(-side / 2, side / 2, (n, 2))
    return xy, np.c_[xy, np.zeros(n)] @ R.T + [10.0, -3.0, 250.0]


def _quadratic(x, y):
    return A * x**2 + B * y**2 + C * x * y + 0.2 * x - 0.1 * y + 3.0


@pytest.mark.parametrize("sigma", [None, 0.8])   # None: the disc mean of diameter 1.6
def test_blocked_pairs_equal_the_whole_weight_matrix(monkeypatch, sigma):
    # the same rule applied a block of rows at a time: equal to round-off (rtol 1e-12, and
    # atol 1e-14 where sums of O(1) values cancel to near zero), with
    # blocks forced small so that many are used, and NaN values carrying no weight
    monkeypatch.setattr(scattered, "PAIR_BLOCK_PAIRS", 5_000)
    _, p = _scattered(3_000, 20.0, 1)
    v = np.c_[np.sin(p[:, 0]), p[:, 1] ** 2]
    v[::17, 0] = np.nan
    W = gaussian_weights(p, sigma=sigma) if sigma else window_weights(p, size=1.6)
    whole = apply_weights(W, v)
    blocked = PairFilter(p, 3 * sigma if sigma else 0.8, sigma).apply(v)
    assert np.isnan(blocked[::17, 0]).all()
    np.testing.assert_allclose(blocked, whole, rtol=1e-12, atol=1e-14)
    assert np.isfinite(blocked[1::17, 0]).all()


def test_voxel_gaussian_shifts_a_quadratic_by_the_truncated_second_moment():
    # Smoothing a quadratic by a symmetric kernel of per-axis second moment m2 adds m2 (a + b)
    # (moments of a symmetric kernel); the voxel chain is built to have the m2 of the pairwise
    # rule's Gaussian truncated at 3 sigma (levelling.gaussian_second_moment, itself checked
    # against quadrature). On random points each point's neighbours have their own centroid,
    # so the shift of one point scatters with the field's gradient there, and its mean is
    # biased by the sampling (4 % here), for the pairwise rule as much: the median is asserted
    # against the closed form within 2 %, the mean against the pairwise rule's on the same
    # points within 1 % (the trilinear weights' second moment depends on where a point sits
    # between nodes, f (1 - f) h^2, whose mean over positions is the h^2 / 6 allowed for).
    sigma = 1.0
    xy, p = _scattered(40_000, 30.0, 2)
    f = _quadratic(xy[:, 0], xy[:, 1])
    out = splat_filter(p, sigma).apply(f)
    inner = (np.abs(xy) <= 10.0).all(axis=1)
    shift = (out - f)[inner] / (A + B)
    m2 = gaussian_second_moment(sigma)
    assert abs(np.median(shift) - m2) < 0.02 * m2
    pairwise = (apply_weights(gaussian_weights(p, sigma=sigma), f) - f)[inner] / (A + B)
    assert abs(np.mean(shift) - np.mean(pairwise)) < 0.01 * m2
    # the untruncated sigma^2 is 5 % away: the chain follows the pairwise rule's truncation
    assert abs(np.median(shift) - sigma**2) > 0.03


def test_voxel_gaussian_is_close_to_the_pairwise_rule_on_scattered_points():
    # Both level the same points with kernels of equal second moment but other shapes (the
    # voxel chain is a Gaussian blurred by two tents): on a smooth field they differ by about
    # 1 % of (gradient x sigma), measured; the bound asserted is 3 %.
    sigma = 1.0
    xy, p = _scattered(30_000, 40.0, 3)
    v = np.c_[np.sin(xy[:, 0] / 3.0), 1e-3 * (xy[:, 0] ** 2 + 0.5 * xy[:, 1] ** 2)]
    grad = np.array([1 / 3.0, 1e-3 * 2 * 20.0])   # the largest gradient of each column
    pairwise = apply_weights(gaussian_weights(p, sigma=sigma), v)
    voxel = splat_filter(p, sigma).apply(v)
    inner = (np.abs(xy) <= 16.0).all(axis=1)
    worst = np.max(np.abs(voxel - pairwise)[inner], axis=0)
    assert np.all(worst < 0.03 * grad * sigma)
    # and the levelling itself is much larger than their difference
    assert np.all(np.max(np.abs(pairwise - v)[inner], axis=0) > 5 * worst)


def test_voxel_gaussian_keeps_nan_points_and_gives_way_on_a_large_box():
    _, p = _scattered(2_000, 10.0, 4)
    v = np.ones(len(p))
    v[5] = np.nan
    out = splat_filter(p, 0.5).apply(v)
    assert np.isnan(out[5]) and np.allclose(np.delete(out, 5), 1.0, rtol=1e-12)
    # a box of (2 km / 0.5 mm)^2 x ... voxels is beyond the cap: the pairs are used instead
    far = np.r_[p, [[2000.0, 2000.0, 2000.0]]]
    assert splat_filter(far, 1.0) is None
    with pytest.raises(StudyError, match="expected shape"):
        splat_filter(p, 0.5).apply(np.ones(3))
