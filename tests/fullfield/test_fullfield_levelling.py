"""Levelling (spatial filtering) of fields at scattered points."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, ndimage
from scipy.spatial.transform import Rotation

from correlate.core.errors import StudyError
from correlate.fullfield.levelling import (
    apply_weights,
    gaussian_level,
    gaussian_second_moment,
    gaussian_weights,
    grid_filter,
    mean_level,
    window_weights,
)

A, B, C = 0.7, -0.3, 0.45  # quadratic field coefficients (our own example)


def _grid(n, h=1.0):
    g = (np.arange(n) - (n - 1) / 2) * h
    X, Y = np.meshgrid(g, g, indexing="ij")
    return X.ravel(), Y.ravel()


def _in_3d(x, y):
    """Place plane coordinates on a tilted plane in 3D (a rigid motion: distances kept)."""
    R = Rotation.from_rotvec([0.4, -0.7, 0.2]).as_matrix()
    return np.c_[x, y, np.zeros_like(x)] @ R.T + [10.0, -3.0, 250.0]


def _quadratic(x, y):
    return A * x**2 + B * y**2 + C * x * y + 0.2 * x - 0.1 * y + 3.0


def _continuous_moment(sigma, radius):
    """E[x^2] of a 2D Gaussian truncated to a disc, by numerical quadrature (scipy.integrate)."""
    pdf = lambda r: r * np.exp(-r * r / (2 * sigma**2))  # noqa: E731  (radial density, unnormalised)
    m = integrate.quad(lambda r: 0.5 * r * r * pdf(r), 0, radius, epsabs=0, epsrel=1e-13)[0]
    return m / integrate.quad(pdf, 0, radius, epsabs=0, epsrel=1e-13)[0]


@pytest.mark.parametrize("factor", [1.0, 2.0, 3.0, 5.0])
def test_second_moment_closed_form_matches_quadrature(factor):
    # quadrature of the truncated Gaussian (scipy.integrate.quad); rtol: quad's 1e-13 target
    np.testing.assert_allclose(gaussian_second_moment(2.0, factor * 2.0),
                               _continuous_moment(2.0, factor * 2.0), rtol=1e-11)
    assert gaussian_second_moment(2.0, np.inf) == 4.0  # no truncation: sigma^2 exactly


def test_quadratic_field_is_shifted_by_the_second_moment_of_the_kernel():
    # Smoothing a quadratic by a symmetric kernel of per-axis second moment m2 adds
    # m2 (a + b): E[(x + u)^2] = x^2 + m2, E[u] = E[u v] = 0 (moments of a symmetric kernel).
    # h = 0.17 sigma: 9 sigma^2 / h^2 is no integer, so no lattice offset lies on the rim of
    # the 3-sigma disc, where the rounding of the tilted coordinates could move it in or out
    sigma, h = 1.0, 0.17
    x, y = _grid(61, h)  # 10.2 sigma square
    f = _quadratic(x, y)
    out = gaussian_level(_in_3d(x, y), f, sigma=sigma)  # radius 3 sigma by default
    inner = (np.abs(x) <= 2.0) & (np.abs(y) <= 2.0)  # at least 3 sigma from every edge
    shift = (out - f)[inner] / (A + B)
    # exact: the lattice's own truncated moment, summed directly over offsets in the disc
    k = np.arange(-18, 19) * h
    KX, KY = np.meshgrid(k, k, indexing="ij")
    r2, rim2 = KX**2 + KY**2, (3 * sigma) ** 2
    w = np.exp(-r2 / (2 * sigma**2)) * (r2 <= rim2)
    lattice_m2 = np.sum(w * KX**2) / np.sum(w)
    np.testing.assert_allclose(shift, lattice_m2, rtol=1e-9)  # round-off of ~1000-term sums
    # the continuous truncated moment, 0.9494 sigma^2: the lattice differs by a few 0.1 % at
    # h = 0.17 sigma (points enter the 3-sigma disc one ring at a time), so rtol 0.5 %
    np.testing.assert_allclose(shift, _continuous_moment(sigma, 3 * sigma), rtol=5e-3)
    # and the untruncated sigma^2 is 5 % away: the truncation is not negligible
    assert np.all(np.abs(shift - sigma**2) > 0.04)


def test_gaussian_level_matches_scipy_ndimage_on_a_grid():
    # scipy.ndimage.gaussian_filter is the reference Gaussian smoothing on a regular grid; with
    # both kernels cut at 8 sigma (disc here, square there) the weights left out are < 1e-13.
    rng = np.random.default_rng(1)
    n, s = 60, 1.5
    img = rng.normal(size=(n, n))
    x, y = _grid(n)
    out = gaussian_level(np.c_[x, y], img.ravel(), sigma=s, radius=8 * s).reshape(n, n)
    ref = ndimage.gaussian_filter(img, sigma=s, truncate=8.0)
    c = slice(12, n - 12)  # 8 sigma from the edges
    np.testing.assert_allclose(out[c, c], ref[c, c], rtol=0, atol=1e-12)  # round-off


def test_mean_level_matches_scipy_uniform_and_disc_filters():
    rng = np.random.default_rng(2)
    n = 40
    img = rng.normal(size=(n, n))
    x, y = _grid(n)
    c = slice(3, n - 3)
    # square of side 5 spacings = scipy.ndimage.uniform_filter(size=5)
    sq = mean_level(np.c_[x, y], img.ravel(), size=5.0, shape="square").reshape(n, n)
    np.testing.assert_allclose(sq[c, c], ndimage.uniform_filter(img, size=5)[c, c], rtol=0,
                               atol=1e-13)  # round-off of 25-term means
    # disc of diameter 6.2: offsets with i^2 + j^2 <= 9.61 (no offset on the rim, so rounding
    # of the tilted coordinates cannot move one in or out), as a normalised ndimage.correlate
    i, j = np.mgrid[-3:4, -3:4]
    foot = (i**2 + j**2 <= 9).astype(float)
    disc = mean_level(_in_3d(x, y), img.ravel(), size=6.2).reshape(n, n)
    ref = ndimage.correlate(img, foot / foot.sum())
    np.testing.assert_allclose(disc[c, c], ref[c, c], rtol=0, atol=1e-13)  # round-off


def test_missing_values_carry_no_weight():
    # Normalised convolution (Knutsson & Westin 1993): filter(v * ok) / filter(ok), checked
    # against scipy.ndimage on a grid with 20 % of the values missing.
    rng = np.random.default_rng(3)
    n, s = 50, 1.2
    img = rng.normal(size=(n, n))
    ok = rng.random((n, n)) > 0.2
    x, y = _grid(n)
    out = gaussian_level(np.c_[x, y], np.where(ok, img, np.nan).ravel(), sigma=s,
                         radius=8 * s).reshape(n, n)
    ref = (ndimage.gaussian_filter(np.where(ok, img, 0.0), s, truncate=8.0)
           / ndimage.gaussian_filter(ok.astype(float), s, truncate=8.0))
    c = slice(10, n - 10)
    assert np.isnan(out[~ok]).all()  # no hole filled
    np.testing.assert_allclose(out[c, c][ok[c, c]], ref[c, c][ok[c, c]], rtol=0, atol=1e-12)
    # a constant field stays exactly constant whatever is missing (normalised weights)
    const = gaussian_level(np.c_[x, y], np.where(ok, 7.5e-4, np.nan).ravel(), sigma=s)
    np.testing.assert_allclose(const[ok.ravel()], 7.5e-4, rtol=1e-14, atol=0)


def test_several_columns_and_one_operator_for_many_fields():
    rng = np.random.default_rng(4)
    p = rng.uniform(0, 30, (2000, 3))
    v = rng.normal(size=(2000, 3))
    W = gaussian_weights(p, sigma=2.0)
    both = apply_weights(W, v)
    for k in range(3):  # column by column gives the same (the filter is linear per column)
        np.testing.assert_allclose(both[:, k], gaussian_level(p, v[:, k], sigma=2.0),
                                   rtol=1e-13, atol=1e-15)
    assert (W != W.T).nnz == 0 and np.all(W.diagonal() == 1.0)
    assert window_weights(p, size=4.0).max() == 1.0


@pytest.mark.parametrize("bad", [{"sigma": 0.0}, {"sigma": -1.0}, {"sigma": 1.0, "radius": 0.0},
                                 {"sigma": np.nan}])
def test_bad_filter_sizes_raise_one_line(bad):
    with pytest.raises(StudyError) as err:
        gaussian_level(np.zeros((3, 3)) + np.arange(3)[:, None], np.ones(3), **bad)
    assert "\n" not in str(err.value)


def test_values_must_match_the_points():
    with pytest.raises(StudyError, match="expected shape"):
        gaussian_level(np.eye(3), np.ones(4), sigma=1.0)
    with pytest.raises(StudyError, match="'disc' or 'square'"):
        mean_level(np.eye(3), np.ones(3), size=1.0, shape="hexagon")


# --- levelling on the points' own grid (normalised convolution) ---------------------------


def _rim_kernel(sigma, ha, hb):
    na, nb = int(3 * sigma // ha), int(3 * sigma // hb)
    KA, KB = np.meshgrid(np.arange(-na, na + 1) * ha, np.arange(-nb, nb + 1) * hb, indexing="ij")
    r2 = KA**2 + KB**2
    return np.exp(-r2 / (2 * sigma**2)) * (r2 <= 9 * sigma**2)


def test_grid_levelling_of_a_quadratic_matches_the_closed_form_shift():
    # the closed form of the pairwise test above: a quadratic gains m2 (a + b), m2 the
    # lattice's truncated second moment (rtol 1e-9: round-off of the FFT sums of ~1000 terms)
    # and within 0.5 % the continuous truncated moment (the lattice's rings, as above)
    sigma, h = 1.0, 0.17
    x, y = _grid(61, h)
    f = _quadratic(x, y)
    g = grid_filter(_in_3d(x, y), sigma=sigma)
    assert g is not None
    out = apply_weights(g, f)
    inner = (np.abs(x) <= 2.0) & (np.abs(y) <= 2.0)
    shift = (out - f)[inner] / (A + B)
    k = np.arange(-18, 19) * h
    KX, KY = np.meshgrid(k, k, indexing="ij")
    r2 = KX**2 + KY**2
    w = np.exp(-r2 / (2 * sigma**2)) * (r2 <= 9 * sigma**2)
    np.testing.assert_allclose(shift, np.sum(w * KX**2) / np.sum(w), rtol=1e-9)
    np.testing.assert_allclose(shift, _continuous_moment(sigma, 3 * sigma), rtol=5e-3)


def test_grid_levelling_equals_the_pairwise_rule_and_scipy_normalised_convolution():
    # A turned, tilted rectangular grid (spacings 0.3 x 0.27, sigma 0.73: no offset on the
    # 3-sigma rim) with 10 % of the points missing and 5 % NaN values. References: the pairwise
    # weights (the fallback rule) and scipy.ndimage.correlate of values x mask and of the mask
    # with the same kernel (normalised convolution). Tolerance 1e-9 of the field's size: the
    # grid's spacings are fitted from coordinates rounded at 1e-15 relative, the FFT rounds.
    rng = np.random.default_rng(3)
    a, b = np.meshgrid(np.arange(50) * 0.3, np.arange(40) * 0.27, indexing="ij")
    keep = rng.random(a.size) > 0.1
    xa, yb = a.ravel()[keep], b.ravel()[keep]
    v = np.c_[np.sin(xa) + yb, yb**2 - xa]
    v[rng.random(len(v)) < 0.05, 0] = np.nan
    pts = _in_3d(xa, yb)
    g = grid_filter(pts, sigma=0.73)
    assert g is not None and g.shape == (50, 40)
    out = apply_weights(g, v)
    pair = apply_weights(gaussian_weights(pts, sigma=0.73), v)
    np.testing.assert_array_equal(np.isnan(out), np.isnan(pair))
    np.testing.assert_allclose(out, pair, rtol=0, atol=1e-9 * np.nanmax(np.abs(v)))
    grid = np.zeros((50, 40))
    mask = np.zeros((50, 40))
    ok = np.isfinite(v[:, 0])
    grid[(a.ravel()[keep] / 0.3).round().astype(int)[ok],
         (b.ravel()[keep] / 0.27).round().astype(int)[ok]] = v[ok, 0]
    mask[(a.ravel()[keep] / 0.3).round().astype(int)[ok],
         (b.ravel()[keep] / 0.27).round().astype(int)[ok]] = 1.0
    K = _rim_kernel(0.73, 0.3, 0.27)
    ref = (ndimage.correlate(grid, K, mode="constant") / ndimage.correlate(mask, K, mode="constant"))
    ia = (a.ravel()[keep] / 0.3).round().astype(int)
    ib = (b.ravel()[keep] / 0.27).round().astype(int)
    np.testing.assert_allclose(out[ok, 0], ref[ia[ok], ib[ok]], rtol=0,
                               atol=1e-9 * np.nanmax(np.abs(v)))


def test_points_near_their_grid_nodes_level_as_if_on_them():
    # Points off their nodes by up to 1.7 % of a spacing (within GRID_TOL, 2 %): the grid
    # filter levels them as if on the nodes. The stated tolerance against the pairwise rule
    # (the reference): the change of the field over the largest offset, sqrt(2) x offset x
    # largest gradient (measured 0.69-0.77 of it over offsets of 0.5-4 % and two spacings).
    rng = np.random.default_rng(5)
    a, b = np.meshgrid(np.arange(50) * 0.3, np.arange(44) * 0.27, indexing="ij")
    jit = rng.uniform(-0.012 * 0.27, 0.012 * 0.27, (a.size, 2))
    q = np.c_[a.ravel(), b.ravel()] + jit
    f = np.sin(q[:, 0]) + q[:, 1] ** 2 / 24
    g = grid_filter(q, sigma=0.73)
    assert g is not None
    grad = np.hypot(np.cos(q[:, 0]), q[:, 1] / 12).max()
    bound = np.sqrt(2) * np.abs(jit).max() * grad
    diff = np.abs(apply_weights(g, f) - gaussian_level(q, f, sigma=0.73))
    assert diff.max() <= bound
    assert diff.max() > 0.3 * bound   # and the offsets do count: not a vacuous bound


def test_points_off_a_grid_fall_back_to_the_pairwise_rule():
    # jitter of 5 % of a spacing (beyond GRID_TOL), or a curved surface: no grid
    x, y = _grid(30, 0.5)
    rng = np.random.default_rng(4)
    assert grid_filter(np.c_[x, y] + rng.uniform(-0.025, 0.025, (len(x), 2)) + [0.0, 0.0],
                       sigma=1.0) is None
    bent = np.c_[x, y, 0.05 * x**2]
    assert grid_filter(bent, sigma=1.0) is None
    assert grid_filter(np.c_[x, y], size=1.2) is not None  # the exact grid is found
