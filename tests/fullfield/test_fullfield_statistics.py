"""Agreement statistics of a measured field against the model field."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage, stats
from scipy.spatial.transform import Rotation

from correlate.core.errors import StudyError
from correlate.fullfield.statistics import block_ids, blocked_slope, field_metrics, hot_spot

N = 64  # grid points per side, spacing 1 mm
TRUE_SLOPE = 1.05


def _field():
    g = np.arange(N, dtype=float)
    X, Y = np.meshgrid(g, g, indexing="ij")
    model = 1e-3 * (1.0 + 0.5 * np.sin(X / 15.0) + 0.3 * np.cos(Y / 11.0))  # m/m
    return np.c_[X.ravel(), Y.ravel()], model.ravel()


def _correlated_noise(rng, filter_sigma=2.0, sd=1e-4):
    """White noise through a Gaussian strain filter: correlation exp(-d^2 / (4 sigma^2)),
    below 2 % beyond 4 sigma = 8 mm, half the 16 mm block."""
    w = ndimage.gaussian_filter(rng.normal(size=(N, N)), filter_sigma, mode="wrap")
    return (w * (sd / w.std())).ravel()


def test_slope_and_interval_are_the_through_origin_fit_with_cr1_covariance():
    rng = np.random.default_rng(21)
    pts, p = _field()
    m = TRUE_SLOPE * p + _correlated_noise(rng)
    fit = blocked_slope(m, p, pts, 16.0)
    k = np.sum(m * p) / np.sum(p * p)  # least squares through the origin, by definition
    np.testing.assert_allclose(fit.slope, k, rtol=1e-12)
    # CR1 sandwich written out (Cameron & Miller 2015, eq. for V_CR1 with K = 1)
    g = (pts // 16.0).astype(int) @ [1000, 1]
    u = m - k * p
    G = np.unique(g).size
    meat = sum(np.sum(p[g == c] * u[g == c]) ** 2 for c in np.unique(g))
    var = G / (G - 1) * (len(m) - 1) / (len(m) - 1) * meat / np.sum(p * p) ** 2
    np.testing.assert_allclose(fit.stderr, np.sqrt(var), rtol=1e-10)  # summation order only
    half = stats.t.ppf(0.975, G - 1) * fit.stderr  # Student t, G - 1 degrees of freedom
    np.testing.assert_allclose([fit.ci_low, fit.ci_high], [k - half, k + half], rtol=1e-10)
    assert fit.n_blocks == G == 16 and fit.n_points == N * N


def test_blocked_interval_is_wider_and_covers_under_correlated_noise():
    # Monte Carlo coverage (JCGM 101 style check of an interval procedure): with errors
    # correlated over a filter length, the naive interval covers the true slope far less often
    # than 95 %; the blocked one comes near it. 150 seeded repeats: binomial sd ~2 %.
    rng = np.random.default_rng(22)
    pts, p = _field()
    hits_blocked = hits_naive = 0
    for _ in range(150):
        fit = blocked_slope(TRUE_SLOPE * p + _correlated_noise(rng), p, pts, 16.0)
        assert fit.ci_high - fit.ci_low > 2.5 * (fit.naive_ci_high - fit.naive_ci_low)
        hits_blocked += fit.ci_low <= TRUE_SLOPE <= fit.ci_high
        hits_naive += fit.naive_ci_low <= TRUE_SLOPE <= fit.naive_ci_high
    assert hits_blocked / 150 >= 0.85  # nominal 0.95; blocks slightly share edge errors
    assert hits_naive / 150 <= 0.35


def test_blocked_interval_keeps_its_coverage_under_white_noise():
    # with independent errors both intervals are valid (Cameron & Miller 2015): no penalty
    rng = np.random.default_rng(23)
    pts, p = _field()
    hits = 0
    for _ in range(100):
        fit = blocked_slope(TRUE_SLOPE * p + rng.normal(0, 1e-4, p.size), p, pts, 16.0)
        hits += fit.ci_low <= TRUE_SLOPE <= fit.ci_high
    assert hits / 100 >= 0.85  # nominal 0.95, binomial sd ~2 %


def test_block_ids_in_plane_and_on_a_tilted_rectangle():
    x, y = np.meshgrid(np.arange(20.0), np.arange(10.0), indexing="ij")
    pts2 = np.c_[x.ravel(), y.ravel()]
    # cells of 2.3 mm anchored at the first point: floor(19 / 2.3) + 1 = 9 by floor(9 / 2.3) + 1
    # = 4 (2.3 k is no integer below 20, so no point sits on a cell edge)
    ids = block_ids(pts2, 2.3)
    assert ids.max() + 1 == 36
    np.testing.assert_array_equal(ids, np.unique((pts2 // 2.3) @ [100, 1], return_inverse=True)[1])
    # the same rectangle turned into 3D: the best-fit plane's axes are the rectangle's own axes
    # (up to sign), so there are as many cells and each spans less than 2.3 mm along each side
    R = Rotation.from_rotvec([0.3, 0.5, -0.2]).as_matrix()
    pts3 = np.c_[pts2 - pts2.mean(0), np.zeros(len(pts2))] @ R.T + [5.0, 1.0, 400.0]
    ids3 = block_ids(pts3, 2.3)
    assert ids3.max() + 1 == 36
    for b in range(36):
        span = np.ptp(pts2[ids3 == b], axis=0)
        assert np.all(span < 2.3)


def test_field_metrics_closed_forms():
    # Lin (1989): a pure shift c of a series with variance s^2 gives rho_c = 2 s^2/(2 s^2 + c^2)
    rng = np.random.default_rng(24)
    p = rng.normal(1e-3, 2e-4, 5000)
    c = 1e-4
    fm = field_metrics(p + c, p, allowed=1.5e-4)
    s2 = np.var(p)
    np.testing.assert_allclose(fm.ccc, 2 * s2 / (2 * s2 + c * c), rtol=1e-10)
    np.testing.assert_allclose([fm.mean, fm.rms, fm.p05, fm.p50, fm.p95, fm.max_abs],
                               c, rtol=1e-9)  # constant difference: every statistic is c
    assert fm.share_within == 1.0 and fm.n == 5000
    # differences 1..100 (numpy percentile, linear interpolation = Hyndman & Fan type 7)
    d = np.arange(1.0, 101.0)
    fm = field_metrics(d, np.zeros(100), allowed=np.where(d <= 30, 40.0, 10.0))
    np.testing.assert_allclose([fm.p05, fm.p50, fm.p95], [5.95, 50.5, 95.05], rtol=1e-12)
    np.testing.assert_allclose(fm.rms, np.sqrt(np.sum(d**2) / 100), rtol=1e-14)
    assert fm.share_within == 0.30  # per-point allowance: rows 1..30 only
    m = np.array([1.0, np.nan, 2.0, 3.0])
    assert field_metrics(m, np.array([1.0, 5.0, np.nan, 3.0]), 0.0).n == 2  # NaN pairs dropped


def test_hot_spot_signed_and_absolute():
    pts = np.array([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [3.0, 0.0]])
    v = np.array([1e-4, np.nan, -9e-4, 5e-4])
    hs = hot_spot(pts, v)
    assert hs.index == 3 and hs.value == 5e-4 and hs.point.tolist() == [3.0, 0.0]
    hs = hot_spot(pts, v, absolute=True)
    assert hs.index == 2 and hs.value == -9e-4
    with pytest.raises(StudyError, match="none of the 4 values"):
        hot_spot(pts, np.full(4, np.nan))


def test_bad_inputs_raise_one_line():
    pts, p = _field()
    for call in (lambda: blocked_slope(p, p, pts, 1e6),  # one block
                 lambda: blocked_slope(p, np.zeros_like(p), pts, 24.0),  # zero model
                 lambda: blocked_slope(p[:10], p, pts, 24.0),
                 lambda: blocked_slope(p, p, pts, 24.0, confidence=95.0),
                 lambda: block_ids(pts, -1.0)):
        with pytest.raises(StudyError) as err:
            call()
        assert "\n" not in str(err.value)
