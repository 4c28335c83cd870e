"""Tests of correlate.comparison.statistics against scipy, numpy, statsmodels and hand-worked data sets."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats as sps
from statsmodels.stats.outliers_influence import OLSInfluence

from correlate.comparison.statistics import (
    area_metric,
    bland_altman,
    concordance,
    fit_pairs,
    influence_by_gauge,
    per_gauge_fits,
)
from correlate.core.errors import ReadingsFormatError


def _gauge_data(seed: int, n_gauges: int = 12, n_steps: int = 6, ratio: float = 1.0,
                gauge_sd: float = 8.0, noise_sd: float = 3.0):
    """Synthetic repeated measures: each gauge read at every load step of a linear load ramp.

    A per-gauge offset (sd ``gauge_sd``) makes pairs of one gauge correlated, so clustering matters.
    """
    rng = np.random.default_rng(seed)
    sens = rng.uniform(50.0, 600.0, n_gauges) * rng.choice([-1.0, 1.0], n_gauges)
    load = np.arange(1, n_steps + 1) / n_steps
    predicted = (sens[:, None] * load[None, :]).ravel()
    offset = np.repeat(rng.normal(0.0, gauge_sd, n_gauges), n_steps)
    measured = ratio * predicted + offset + rng.normal(0.0, noise_sd, predicted.size)
    groups = np.repeat([f"SG-{i + 1}" for i in range(n_gauges)], n_steps)
    return measured, predicted, groups


def _hand_cr1(y, X, groups):
    """V_CR1 of Cameron & Miller (2015), eqs. (11)-(12) with c = G/(G-1) (N-1)/(N-K).

    V = c (X'X)^-1 [sum_g X_g' u_g u_g' X_g] (X'X)^-1, u the OLS residuals.
    """
    n, k = X.shape
    bread = np.linalg.inv(X.T @ X)
    u = y - X @ (bread @ X.T @ y)
    names = np.unique(groups)
    meat = np.zeros((k, k))
    for name in names:
        s = X[groups == name].T @ u[groups == name]
        meat += np.outer(s, s)
    G = names.size
    c = G / (G - 1) * (n - 1) / (n - k)
    return c * bread @ meat @ bread


def test_fit_pairs_line_matches_scipy_linregress():
    m, p, g = _gauge_data(seed=1)
    r = fit_pairs(m, p, g)
    ref = sps.linregress(p, m)  # reference: scipy.stats.linregress
    # rtol 1e-10: two least-squares solvers on well-conditioned data agree to ~1e-13
    assert r["slope"] == pytest.approx(ref.slope, rel=1e-10, abs=0)
    assert r["intercept"] == pytest.approx(ref.intercept, rel=1e-10, abs=0)
    assert r["r2"] == pytest.approx(ref.rvalue**2, rel=1e-10, abs=0)
    assert (r["n"], r["n_gauges"]) == (72, 12)
    assert "reason" not in r


def test_fit_pairs_slope_origin_matches_numpy_lstsq():
    m, p, g = _gauge_data(seed=2)
    r = fit_pairs(m, p, g)
    ref = np.linalg.lstsq(p[:, None], m, rcond=None)[0][0]  # reference: numpy least squares
    # rtol 1e-10: same least-squares problem, different solver; agreement to rounding
    assert r["slope_origin"] == pytest.approx(ref, rel=1e-10, abs=0)


def test_fit_pairs_cluster_se_matches_statsmodels():
    m, p, g = _gauge_data(seed=3)
    codes = np.unique(g, return_inverse=True)[1]
    r = fit_pairs(m, p, g)
    assert r["ci_method"] == "cluster-robust by gauge (statsmodels OLS, cov_type 'cluster')"
    # reference: statsmodels OLS with cluster covariance, fitted here independently
    line = sm.OLS(m, sm.add_constant(p)).fit(cov_type="cluster", cov_kwds={"groups": codes})
    origin = sm.OLS(m, p[:, None]).fit(cov_type="cluster", cov_kwds={"groups": codes})
    # rtol 1e-10: same estimator, rounding differences only
    assert r["se_intercept"] == pytest.approx(line.bse[0], rel=1e-10, abs=0)
    assert r["se_slope"] == pytest.approx(line.bse[1], rel=1e-10, abs=0)
    assert r["se_slope_origin"] == pytest.approx(origin.bse[0], rel=1e-10, abs=0)


def test_fit_pairs_cluster_se_matches_hand_sandwich_cr1():
    m, p, g = _gauge_data(seed=4, n_gauges=9, n_steps=5)
    r = fit_pairs(m, p, g)
    # reference: hand-written V_CR1 (Cameron & Miller 2015); statsmodels' default use_correction
    # applies exactly this G/(G-1)*(N-1)/(N-K) factor (checked in sandwich_covariance.cov_cluster)
    v_line = _hand_cr1(m, np.column_stack([np.ones(p.size), p]), g)
    v_origin = _hand_cr1(m, p[:, None], g)
    # rtol 1e-10: exact linear algebra on a 2x2 system, rounding only
    assert r["se_intercept"] == pytest.approx(math.sqrt(v_line[0, 0]), rel=1e-10, abs=0)
    assert r["se_slope"] == pytest.approx(math.sqrt(v_line[1, 1]), rel=1e-10, abs=0)
    assert r["se_slope_origin"] == pytest.approx(math.sqrt(v_origin[0, 0]), rel=1e-10, abs=0)


def test_fit_pairs_cluster_intervals_use_t_with_g_minus_1_df():
    m, p, g = _gauge_data(seed=5, n_gauges=10)
    r = fit_pairs(m, p, g, level=0.90)
    # Cameron & Miller (2015, sec. VI) recommend t(G - 1) critical values with few clusters
    t = sps.t.ppf(0.95, 10 - 1)
    for key, se in (("slope", "se_slope"), ("intercept", "se_intercept"),
                    ("slope_origin", "se_slope_origin")):
        expected = [r[key] - t * r[se], r[key] + t * r[se]]
        # rtol 1e-10: same arithmetic through a different code path
        np.testing.assert_allclose(r[f"{key}_ci"], expected, rtol=1e-10, atol=0)


def test_fit_pairs_single_gauge_uses_classical_ols():
    m, p, g = _gauge_data(seed=6, n_gauges=1, n_steps=10)
    r = fit_pairs(m, p, g)
    assert r["ci_method"].startswith("classical OLS")
    ref = sps.linregress(p, m)  # reference: scipy's classical standard errors
    # rtol 1e-10: closed-form and QR standard errors agree to rounding
    assert r["se_slope"] == pytest.approx(ref.stderr, rel=1e-10, abs=0)
    assert r["se_intercept"] == pytest.approx(ref.intercept_stderr, rel=1e-10, abs=0)
    t = sps.t.ppf(0.975, 10 - 2)  # classical t interval with n - 2 degrees of freedom
    np.testing.assert_allclose(r["slope_ci"], [ref.slope - t * ref.stderr,
                                               ref.slope + t * ref.stderr], rtol=1e-10, atol=0)


def test_fit_pairs_known_ratio_within_interval():
    # measured = 1.053 * predicted + noise(sd 2) over 15 gauges x 8 steps, seeded
    m, p, g = _gauge_data(seed=7, n_gauges=15, n_steps=8, ratio=1.053, gauge_sd=0.0,
                          noise_sd=2.0)
    r = fit_pairs(m, p, g)
    low, high = r["slope_origin_ci"]
    # tolerance: the 95 % interval itself must cover the true ratio
    assert low <= 1.053 <= high
    # atol 0.005: with sd 2 ue against readings of 50-600 ue the ratio is known to about 0.001
    assert r["slope_origin"] == pytest.approx(1.053, abs=0.005)
    assert high - low < 0.01


def test_fit_pairs_difference_metrics_hand_worked():
    # m - p = [3, -4]: rms = sqrt((9 + 16) / 2), max |d| = 4, mean |d| = 3.5 (hand-worked)
    r = fit_pairs([103.0, 196.0], [100.0, 200.0], ["a", "b"])
    # rel 1e-12: exact arithmetic on small integers
    assert r["rms_ue"] == pytest.approx(math.sqrt(12.5), rel=1e-12, abs=0)
    assert r["max_abs_ue"] == pytest.approx(4.0, rel=1e-12, abs=0)
    assert r["mean_abs_ue"] == pytest.approx(3.5, rel=1e-12, abs=0)


def test_per_gauge_fits_match_scipy_linregress():
    m, p, g = _gauge_data(seed=8, n_gauges=4, n_steps=6)
    df = per_gauge_fits(m, p, g)
    assert list(df["gauge"]) == ["SG-1", "SG-2", "SG-3", "SG-4"]
    for row in df.itertuples():
        sel = g == row.gauge
        ref = sps.linregress(p[sel], m[sel])  # reference: scipy.stats.linregress per gauge
        t = sps.t.ppf(0.975, sel.sum() - 2)
        origin = np.linalg.lstsq(p[sel][:, None], m[sel], rcond=None)[0][0]
        d = m[sel] - p[sel]
        # rtol 1e-9: closed-form sums versus scipy's; six points, rounding only
        np.testing.assert_allclose(
            [row.slope, row.intercept, row.r2, row.slope_ci_low, row.slope_ci_high,
             row.slope_origin, row.max_abs_ue, row.rms_ue],
            [ref.slope, ref.intercept, ref.rvalue**2, ref.slope - t * ref.stderr,
             ref.slope + t * ref.stderr, origin, np.abs(d).max(), np.sqrt(np.mean(d**2))],
            rtol=1e-9, atol=0)
        assert row.n == 6


def test_concordance_hand_worked_lin_1989():
    # Lin (1989): rho_c = 2 s_xy / (s_x^2 + s_y^2 + (xbar - ybar)^2), moments with 1/n.
    # x = [1, 2, 3, 4], y = [2, 2, 4, 5]: xbar = 2.5, ybar = 3.25, s_x^2 = 5/4, s_y^2 = 27/16,
    # s_xy = 11/8, (xbar - ybar)^2 = 9/16  ->  rho_c = (11/4) / (56/16) = 11/14.
    # rel 1e-12: exact arithmetic on small integers
    assert concordance([1.0, 2.0, 3.0, 4.0], [2.0, 2.0, 4.0, 5.0]) == pytest.approx(
        11 / 14, rel=1e-12, abs=0)


def test_concordance_perfect_agreement_is_one_and_shift_lowers_it():
    rng = np.random.default_rng(9)
    x = rng.normal(300.0, 100.0, 50)
    # rel 1e-12: identical series give exactly 2 s^2 / 2 s^2
    assert concordance(x, x) == pytest.approx(1.0, rel=1e-12, abs=0)
    y = x + 40.0 + rng.normal(0.0, 5.0, 50)
    # Lin (1989): rho_c = r * C_b with C_b < 1 under a location shift, so rho_c < pearson r
    assert concordance(y, x) < sps.pearsonr(y, x).statistic


def test_bland_altman_hand_worked():
    # d = [2, -2, 5, 1]: bias = 3/2, sum (d - bias)^2 = 25, sd = sqrt(25/3) (n - 1 = 3)
    r = bland_altman([102.0, 98.0, 105.0, 101.0], [100.0, 100.0, 100.0, 100.0])
    sd = math.sqrt(25 / 3)
    # rel 1e-12: exact arithmetic; limits bias -/+ 1.96 sd as in Bland & Altman (1986)
    assert r["bias"] == pytest.approx(1.5, rel=1e-12, abs=0)
    assert r["sd"] == pytest.approx(sd, rel=1e-12, abs=0)
    assert r["loa_low"] == pytest.approx(1.5 - 1.96 * sd, rel=1e-12, abs=0)
    assert r["loa_high"] == pytest.approx(1.5 + 1.96 * sd, rel=1e-12, abs=0)
    assert r["n"] == 4


def test_bland_altman_relative_skips_zero_prediction():
    # (m - p)/|p| over p != 0 only: [2/100, -2/100, 10/200] = [0.02, -0.02, 0.05]
    r = bland_altman([102.0, 98.0, 210.0, 5.0], [100.0, 100.0, 200.0, 0.0], relative=True)
    # d = [2, -2, 5] / 100, mean 1/60; deviations x100 = [1/3, -11/3, 10/3], sum sq 222/9,
    # variance (n - 1 = 2) 37/3 -> sd = sqrt(37/3) / 100 (hand-worked)
    # rel 1e-12: exact arithmetic
    assert r["n"] == 3
    assert r["bias"] == pytest.approx(1 / 60, rel=1e-12, abs=0)
    assert r["sd"] == pytest.approx(math.sqrt(37 / 3) / 100, rel=1e-12, abs=0)


@pytest.mark.parametrize("predicted", [250.0, 100.0, 400.0], ids=["inside", "below", "above"])
def test_area_metric_equals_mean_abs_difference(predicted):
    # Closed form for a deterministic prediction p (H the unit step at p):
    #   for x < p the integrand is F_n(x) = (1/k) sum 1[x_i <= x], whose integral over (-inf, p)
    #   is (1/k) sum max(p - x_i, 0); for x >= p it is 1 - F_n(x) = (1/k) sum 1[x_i > x],
    #   whose integral over [p, inf) is (1/k) sum max(x_i - p, 0). Sum: mean |x_i - p|.
    rng = np.random.default_rng(10)
    x = rng.normal(250.0, 30.0, 17)
    # rel 1e-12: a sum of 18 interval areas against a sum of 17 terms, rounding only
    assert area_metric(x, predicted) == pytest.approx(
        np.mean(np.abs(x - predicted)), rel=1e-12, abs=0)


def test_area_metric_zero_when_replicates_equal_prediction():
    # F_n and H are the same step function (Ferson et al. 2008): no area between them
    assert area_metric(np.full(5, 123.0), 123.0) == pytest.approx(0.0, rel=0, abs=0)


def test_influence_wrong_ratio_gauge_ranks_first():
    rng = np.random.default_rng(11)
    m, p, g = _gauge_data(seed=11, n_gauges=10, n_steps=6, gauge_sd=0.0, noise_sd=2.0)
    bad = g == "SG-4"
    m[bad] = 1.5 * p[bad] + rng.normal(0.0, 2.0, bad.sum())  # others at ratio 1.0
    df = influence_by_gauge(m, p, g)
    assert list(df.columns) == ["gauge", "cooks_d", "max_abs_student", "rank"]
    assert df.loc[0, "gauge"] == "SG-4"
    assert df.loc[0, "rank"] == 1
    assert df["cooks_d"].is_monotonic_decreasing


def test_influence_single_pair_group_equals_statsmodels_cooks_distance():
    m, p, g = _gauge_data(seed=12, n_gauges=6, n_steps=4)
    m, p, g = m[:-3], p[:-3], g[:-3]  # the last gauge keeps one pair
    df = influence_by_gauge(m, p, g).set_index("gauge")
    ref = OLSInfluence(sm.OLS(m, sm.add_constant(p)).fit())  # reference: statsmodels
    # rtol 1e-10: the group formula reduces to Cook's distance for one pair; rounding only
    assert df.loc["SG-6", "cooks_d"] == pytest.approx(ref.cooks_distance[0][-1], rel=1e-10, abs=0)
    assert df.loc["SG-6", "max_abs_student"] == pytest.approx(
        abs(ref.resid_studentized_external[-1]), rel=1e-10, abs=0)


def test_influence_studentized_residuals_equal_statsmodels_refits():
    # Reference: statsmodels' OLSInfluence.resid_studentized_external, which refits the model
    # without each pair; ours uses the closed-form deleted-pair variance. rtol 1e-9: the two
    # differ by rounding only (the refits solve 30 small least-squares problems).
    m, p, g = _gauge_data(seed=14, n_gauges=6, n_steps=5)
    ref = np.abs(OLSInfluence(sm.OLS(m, sm.add_constant(p)).fit()).resid_studentized_external)
    df = influence_by_gauge(m, p, g).set_index("gauge")
    for name in np.unique(g):
        assert df.loc[name, "max_abs_student"] == pytest.approx(ref[g == name].max(), rel=1e-9,
                                                                abs=0)


def test_influence_group_cooks_distance_matches_hat_matrix_form():
    # Cook & Weisberg (1982), sec. 3.5 (from memory): for deleting the set I,
    # D_I = e_I' (I - H_I)^-1 H_I (I - H_I)^-1 e_I / (p s^2), H_I the block of the hat matrix.
    m, p, g = _gauge_data(seed=13, n_gauges=7, n_steps=5)
    X = sm.add_constant(p)
    H = X @ np.linalg.inv(X.T @ X) @ X.T
    e = m - H @ m
    s2 = e @ e / (p.size - 2)
    df = influence_by_gauge(m, p, g).set_index("gauge")
    for name in np.unique(g):
        idx = np.flatnonzero(g == name)
        Hi = H[np.ix_(idx, idx)]
        A = np.linalg.solve(np.eye(idx.size) - Hi, e[idx])
        # rtol 1e-9: refit-based and hat-matrix forms, both well conditioned
        assert df.loc[name, "cooks_d"] == pytest.approx(A @ Hi @ A / (2 * s2), rel=1e-9, abs=0)


def test_fit_pairs_one_pair_gives_nan_with_reason():
    r = fit_pairs([105.0], [100.0], ["SG-1"])
    assert math.isnan(r["slope"])
    assert math.isnan(r["se_slope_origin"])
    assert "2 or more pairs" in r["reason"]
    # rel 1e-12: k = 105/100 exactly by the normal equation sum(mp)/sum(p^2)
    assert r["slope_origin"] == pytest.approx(1.05, rel=1e-12, abs=0)


def test_fit_pairs_two_pairs_gives_slope_but_no_standard_error():
    r = fit_pairs([105.0, 190.0], [100.0, 200.0], ["SG-1", "SG-2"])
    # rel 1e-12: two points define the line exactly, slope = 85/100
    assert r["slope"] == pytest.approx(0.85, rel=1e-12, abs=0)
    assert math.isnan(r["se_slope"])
    assert all(math.isnan(v) for v in r["slope_ci"])
    assert "3 or more pairs" in r["reason"]


def test_fit_pairs_constant_prediction_or_empty_gives_nan_with_reason():
    r = fit_pairs([10.0, 12.0, 11.0], [5.0, 5.0, 5.0], ["a", "b", "c"])
    assert math.isnan(r["slope"])
    assert "different predicted" in r["reason"]
    r = fit_pairs(np.array([]), np.array([]), np.array([], dtype=str))
    assert r["n"] == 0
    assert math.isnan(r["rms_ue"])
    assert "no pairs" in r["reason"]


def test_other_functions_with_too_few_points_give_nan():
    df = per_gauge_fits([1.0, 2.0, 3.0], [1.0, 2.0, 4.0], ["a", "b", "b"])
    assert math.isnan(df.loc[0, "slope"])  # one point: no slope
    assert not math.isnan(df.loc[1, "slope"])
    assert math.isnan(df.loc[1, "slope_ci_low"])
    ba = bland_altman([1.0], [2.0])
    assert math.isnan(ba["sd"])
    assert "2 or more" in ba["reason"]
    assert math.isnan(concordance([1.0], [1.0]))
    assert math.isnan(area_metric(np.array([]), 1.0))
    inf = influence_by_gauge([1.0, 2.0, 3.0], [1.0, 2.0, 3.5], ["a", "b", "c"])
    assert inf["cooks_d"].isna().all()
    assert "4 or more" in inf.attrs["reason"]


def test_mismatched_or_non_finite_input_raises_naming_the_array():
    with pytest.raises(ReadingsFormatError, match="predicted has shape"):
        fit_pairs([1.0, 2.0], [1.0], ["a", "b"])
    with pytest.raises(ReadingsFormatError, match=r"measured\[1\] \(gauge 'SG-2'\)"):
        fit_pairs([1.0, np.nan], [1.0, 2.0], ["SG-1", "SG-2"])
