"""Regression statistics and validation metrics on measured/predicted gauge pairs.

Stage: statistics. Inputs are numpy arrays in microstrain, one entry per gauge and load step:
``measured`` (n,), ``predicted`` (n,) and ``groups`` (n,), the gauge id (str) of each pair. The
pairs are repeated measures of the same gauges, so intervals on the pooled fit cluster by gauge.
Outputs are plain dicts of Python floats and ints, or DataFrames with one row per gauge.

A statistic that needs more points than there are is NaN, and the dict says why under ``reason``.
"""

from __future__ import annotations

import functools
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import stats as sps

from correlate.core.errors import ReadingsFormatError, StudyError

NAN = float("nan")
CLUSTER_METHOD = "cluster-robust by gauge (statsmodels OLS, cov_type 'cluster')"
CLASSICAL_METHOD = "classical OLS (a single gauge, so no clustering by gauge)"


def _pairs(measured: ArrayLike, predicted: ArrayLike, groups: ArrayLike | None = None
           ) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.str_]]:
    """Check and convert the paired arrays; raise ReadingsFormatError naming the bad array."""
    m = np.asarray(measured, dtype=float)
    p = np.asarray(predicted, dtype=float)
    g = np.asarray(groups if groups is not None else np.full(m.shape, ""), dtype=str)
    for name, a in (("measured", m), ("predicted", p), ("groups", g)):
        if a.ndim != 1 or a.shape != m.shape:
            msg = (f"{name} has shape {a.shape} but measured has shape {m.shape}; pass one value "
                   "per gauge and load step in 1-D arrays of the same length")
            raise ReadingsFormatError(msg)
    for name, a in (("measured", m), ("predicted", p)):
        bad = np.flatnonzero(~np.isfinite(a))
        if bad.size:
            i = int(bad[0])
            msg = (f"{name}[{i}] (gauge {str(g[i])!r}) is {a[i]}, and {bad.size} value(s) in "
                   "all are not finite; drop or repair those pairs before computing statistics")
            raise ReadingsFormatError(msg)
    return m, p, g


def _alpha(level: float) -> float:
    if not 0.0 < level < 1.0:
        msg = f"confidence level is {level}; give it as a fraction between 0 and 1, such as 0.95"
        raise StudyError(msg)
    return 1.0 - level


def _differences(d: NDArray[np.float64]) -> dict[str, float]:
    if d.size == 0:
        return {"rms_ue": NAN, "max_abs_ue": NAN, "mean_abs_ue": NAN}
    return {"rms_ue": float(np.sqrt(np.mean(d**2))), "max_abs_ue": float(np.max(np.abs(d))),
            "mean_abs_ue": float(np.mean(np.abs(d)))}


@functools.lru_cache(maxsize=256)
def _t_quantile(q: float, df: int) -> float:
    """Student's t quantile (scipy's ``t.ppf``), remembered: a study asks for the same few
    (level, degrees of freedom) pairs once per gauge, and each scipy call costs about 70 us."""
    return float(sps.t.ppf(q, df))


def _ols_class() -> type:
    """statsmodels' OLS, imported on first use (``import correlate`` stays light; not
    statsmodels.api, which takes 2 s to import)."""
    from statsmodels.regression.linear_model import OLS

    return OLS


def _ols(y: NDArray[np.float64], X: NDArray[np.float64], codes: NDArray[np.intp], alpha: float
         ) -> tuple[Any, NDArray[np.float64], NDArray[np.float64]]:
    """Fit y = X b; clustered covariance when there are >= 2 groups and > k points, else classical.

    Returns the results, the standard errors and the (k, 2) intervals; NaN where n <= k, because
    with no residual degrees of freedom neither covariance exists.
    """
    n, k = X.shape
    if n <= k:
        return _ols_class()(y, X).fit(), np.full(k, NAN), np.full((k, 2), NAN)
    if codes.max() >= 1:
        # use_t: t with G - 1 degrees of freedom (statsmodels' df_resid_inference), the critical
        # value Cameron & Miller (2015, sec. VI) recommend when there are few clusters.
        res = _ols_class()(y, X).fit(cov_type="cluster", cov_kwds={"groups": codes}, use_t=True)
    else:
        res = _ols_class()(y, X).fit()
    return res, np.asarray(res.bse), np.asarray(res.conf_int(alpha))


def fit_pairs(measured: ArrayLike, predicted: ArrayLike, groups: ArrayLike, *,
              level: float = 0.95) -> dict[str, Any]:
    """Fit measured = a + b * predicted and measured = k * predicted over all pairs.

    Parameters
    ----------
    measured, predicted : ndarray, shape (n,)
        Measured and model-predicted gauge readings, pair by pair. [microstrain]
    groups : ndarray of str, shape (n,)
        Gauge id of each pair; the clusters of the robust covariance.
    level : float
        Confidence level of the intervals.

    Returns
    -------
    dict
        ``n``, ``n_gauges``; ``slope``, ``intercept`` [microstrain], ``r2``; ``slope_origin``, the
        measured/predicted strain ratio; ``se_*`` and ``*_ci`` ([low, high]) of the three
        coefficients; ``ci_method``; ``rms_ue``, ``max_abs_ue``, ``mean_abs_ue`` of measured -
        predicted; and ``reason`` when any value is NaN.

    Raises
    ------
    ReadingsFormatError
        Arrays of different shapes, or a reading that is not finite.
    StudyError
        ``level`` not strictly between 0 and 1.

    Notes
    -----
    ``slope_origin`` k minimises sum (m - k p)^2, so k = sum(m p) / sum(p^2): the measured/predicted
    strain ratio. Above 1 the part strains more than the model says, i.e. the model is too stiff
    along that load path. Each gauge is read at every load step, so its pairs are not independent;
    with two or more gauges the covariance is the cluster-robust sandwich V_CR1 with the factor
    G/(G-1) (N-1)/(N-K) and intervals use t with G-1 degrees of freedom. With few gauges (say
    under 20) those intervals are themselves uncertain (Cameron & Miller 2015, sec. VI).

    References
    ----------
    Cameron A.C., Miller D.L. (2015) A practitioner's guide to cluster-robust inference.
    J. Human Resources 50(2):317-372.

    Examples
    --------
    >>> r = fit_pairs([101.0, 205.0, 298.0, 52.0], [100.0, 200.0, 300.0, 50.0],
    ...               ["a", "a", "b", "b"])
    >>> round(r["slope_origin"], 4), r["n_gauges"]
    (1.0042, 2)
    """
    m, p, g = _pairs(measured, predicted, groups)
    alpha = _alpha(level)
    names, codes = np.unique(g, return_inverse=True)
    n, n_gauges = int(m.size), int(names.size)
    out: dict[str, Any] = {"n": n, "n_gauges": n_gauges}
    out["ci_method"] = CLUSTER_METHOD if n_gauges >= 2 else CLASSICAL_METHOD
    reasons = []
    blank = {"slope": NAN, "intercept": NAN, "r2": NAN, "se_slope": NAN, "se_intercept": NAN,
             "slope_ci": [NAN, NAN], "intercept_ci": [NAN, NAN]}
    out.update(blank)
    if n < 2 or np.ptp(p) == 0:
        reasons.append(f"slope and intercept need 2 or more pairs with different predicted "
                       f"readings; found {n} pair(s)")
    else:
        res, se, ci = _ols(m, np.column_stack([np.ones(n), p]), codes, alpha)
        out.update(intercept=float(res.params[0]), slope=float(res.params[1]),
                   se_intercept=float(se[0]), se_slope=float(se[1]),
                   intercept_ci=[float(v) for v in ci[0]], slope_ci=[float(v) for v in ci[1]])
        if n < 3:
            reasons.append("standard errors of slope and intercept need 3 or more pairs")
        if np.ptp(m) == 0:
            reasons.append("r2 is undefined when all measured readings are equal")
        else:
            out["r2"] = float(res.rsquared)
    out.update(slope_origin=NAN, se_slope_origin=NAN, slope_origin_ci=[NAN, NAN])
    if not np.any(p != 0):
        reasons.append("slope_origin needs at least one non-zero predicted reading")
    else:
        res, se, ci = _ols(m, p[:, None], codes, alpha)
        out.update(slope_origin=float(res.params[0]), se_slope_origin=float(se[0]),
                   slope_origin_ci=[float(v) for v in ci[0]])
        if n < 2:
            reasons.append("the standard error of slope_origin needs 2 or more pairs")
    out.update(_differences(m - p))
    if n == 0:
        reasons.append("no pairs given")
    if reasons:
        out["reason"] = "; ".join(reasons)
    return out


def per_gauge_fits(measured: ArrayLike, predicted: ArrayLike, groups: ArrayLike, *,
                   level: float = 0.95) -> pd.DataFrame:
    """Fit each gauge's readings over its load steps on their own.

    Parameters are those of :func:`fit_pairs`; ``level`` sets the classical t interval on the slope.

    Returns
    -------
    pandas.DataFrame
        One row per gauge in order of first appearance: ``gauge, n, slope, slope_ci_low,
        slope_ci_high, intercept, r2, slope_origin, max_abs_ue, rms_ue``. The slope needs 2 points
        with different predicted readings and its interval 3; otherwise NaN.

    Notes
    -----
    The classical least-squares line y = a + b x of each gauge (x predicted, y measured), in
    closed form from its centred sums, every gauge at once: b = Sxy / Sxx, a = ybar - b xbar,
    r2 = Sxy^2 / (Sxx Syy), the interval b -/+ t(n-2) sqrt(SSE / (n-2) / Sxx) with
    SSE = Syy - b Sxy; the line through the origin Sum(xy) / Sum(x^2).
    """
    m, p, g = _pairs(measured, predicted, groups)
    codes, names = pd.factorize(g)             # gauges in order of first appearance
    k = len(names)
    n = np.bincount(codes, minlength=k)

    def total(v: NDArray[np.float64]) -> NDArray[np.float64]:
        return np.bincount(codes, weights=v, minlength=k)

    with np.errstate(invalid="ignore", divide="ignore"):
        mx, my = total(p) / n, total(m) / n
        dx, dy = p - mx[codes], m - my[codes]
        sxx, sxy, syy = total(dx * dx), total(dx * dy), total(dy * dy)
        line = (n >= 2) & (sxx > 0.0)
        b = np.where(line, sxy / sxx, NAN)
        sse = np.maximum(syy - b * sxy, 0.0)  # rounding can make a perfect fit slightly negative
        t = np.array([_t_quantile(1.0 - _alpha(level) / 2.0, int(v - 2)) if v >= 3 else NAN
                      for v in n])
        half = np.where(line & (n >= 3), t * np.sqrt(sse / (n - 2) / sxx), NAN)
        sxx0 = total(p * p)
        d = m - p
        max_abs = np.zeros(k)
        np.maximum.at(max_abs, codes, np.abs(d))
        return pd.DataFrame({
            "gauge": [str(v) for v in names], "n": n.astype(int), "slope": b,
            "slope_ci_low": b - half, "slope_ci_high": b + half,
            "intercept": np.where(line, my - b * mx, NAN),
            "r2": np.where(line & (syy > 0.0), sxy**2 / (sxx * syy), NAN),
            "slope_origin": np.where(sxx0 > 0.0, total(p * m) / sxx0, NAN),
            "max_abs_ue": max_abs, "rms_ue": np.sqrt(total(d * d) / n)})


def concordance(measured: ArrayLike, predicted: ArrayLike) -> float:
    """Return Lin's concordance correlation coefficient of measured and predicted readings.

    Notes
    -----
    rho_c = 2 s_mp / (s_m^2 + s_p^2 + (mean_m - mean_p)^2), with population (1/n) moments as in
    Lin's definition. NaN with fewer than 2 pairs or when both series are one constant.

    References
    ----------
    Lin L.I.-K. (1989) A concordance correlation coefficient to evaluate reproducibility.
    Biometrics 45(1):255-268.
    """
    m, p, _ = _pairs(measured, predicted)
    if m.size < 2:
        return NAN
    dm, dp = m - m.mean(), p - p.mean()
    denom = float(np.mean(dm**2) + np.mean(dp**2) + (m.mean() - p.mean()) ** 2)
    return 2.0 * float(np.mean(dm * dp)) / denom if denom > 0 else NAN


def bland_altman(measured: ArrayLike, predicted: ArrayLike, *, relative: bool = False
                 ) -> dict[str, Any]:
    """Return the bias and 95 % limits of agreement of measured - predicted.

    Parameters
    ----------
    measured, predicted : ndarray, shape (n,)
        Readings. [microstrain]
    relative : bool
        Use (m - p) / |p| (a fraction, not percent), over the pairs with p != 0 only.

    Returns
    -------
    dict
        ``bias`` (mean difference), ``sd`` (n - 1 denominator), ``loa_low``/``loa_high`` =
        bias -/+ 1.96 sd, ``n`` (pairs used); ``reason`` when a value is NaN.

    References
    ----------
    Bland J.M., Altman D.G. (1986) Statistical methods for assessing agreement between two
    methods of clinical measurement. Lancet i:307-310.
    """
    m, p, _ = _pairs(measured, predicted)
    d = m - p
    if relative:
        keep = p != 0
        d = d[keep] / np.abs(p[keep])
    n = int(d.size)
    bias = float(np.mean(d)) if n else NAN
    sd = float(np.std(d, ddof=1)) if n >= 2 else NAN
    out: dict[str, Any] = {"bias": bias, "sd": sd, "loa_low": bias - 1.96 * sd,
                           "loa_high": bias + 1.96 * sd, "n": n}
    if n < 2:
        used = "pairs with non-zero predicted readings" if relative else "pairs"
        out["reason"] = f"limits of agreement need 2 or more {used}; found {n}"
    return out


def area_metric(replicates: ArrayLike, predicted: float) -> float:
    """Return the area validation metric between replicate readings and a deterministic prediction.

    Parameters
    ----------
    replicates : ndarray, shape (k,)
        Repeated measurements of one reading. [microstrain]
    predicted : float
        The model's value for that reading. [microstrain]

    Returns
    -------
    float
        Area between the empirical CDF F_n of the replicates and the step H(x - p), in the
        readings' unit. NaN for no replicates.

    Notes
    -----
    Both CDFs are piecewise constant between the sorted breakpoints {x_i} U {p}, so the integral
    of |F_n(x) - H(x - p)| is the exact sum of |F_n - H| times the interval widths; outside the
    breakpoints both are 0 or both are 1.

    References
    ----------
    Ferson S., Oberkampf W.L., Ginzburg L. (2008) Model validation and predictive capability for
    the thermal challenge problem. Comput. Methods Appl. Mech. Engrg. 197:2408-2430.
    """
    x = np.sort(np.asarray(replicates, dtype=float).ravel())
    if not (np.all(np.isfinite(x)) and np.isfinite(predicted)):
        msg = (f"replicates or predicted value ({predicted}) hold a value that is not finite; "
               "drop or repair those readings first")
        raise ReadingsFormatError(msg)
    if x.size == 0:
        return NAN
    t = np.union1d(x, [float(predicted)])
    F = np.searchsorted(x, t[:-1], side="right") / x.size  # F_n on [t_j, t_j+1)
    H = (t[:-1] >= predicted).astype(float)
    return float(np.sum(np.abs(F - H) * np.diff(t)))


def influence_by_gauge(measured: ArrayLike, predicted: ArrayLike, groups: ArrayLike
                       ) -> pd.DataFrame:
    """Rank gauges by their influence on the pooled fit measured = a + b * predicted.

    Returns
    -------
    pandas.DataFrame
        ``gauge, cooks_d, max_abs_student, rank``, worst (largest Cook's distance) first. With
        fewer than 4 pairs or equal predicted readings the values are NaN and
        ``DataFrame.attrs["reason"]`` says why.

    Notes
    -----
    Deleting gauge g's pairs moves the coefficients from b to b_(g):
    D_g = (b - b_(g))' X'X (b - b_(g)) / (p s^2), p = 2 and s^2 the full fit's residual variance;
    for a single pair it is Cook's distance. ``max_abs_student`` is the largest |externally
    studentized residual| of the gauge's pairs (statsmodels ``OLSInfluence``, with the deleted-pair
    variance in closed form instead of its refit per pair).

    References
    ----------
    Cook R.D., Weisberg S. (1982) Residuals and Influence in Regression. Chapman and Hall.
    """
    m, p, g = _pairs(measured, predicted, groups)
    names = [str(v) for v in pd.unique(g)]
    cooks = np.full(len(names), NAN)
    student = np.full(len(names), NAN)
    reason = None
    if m.size < 4 or np.ptp(p) == 0:
        reason = (f"influence needs 4 or more pairs with different predicted readings; "
                  f"found {m.size} pair(s)")
    else:
        X = np.column_stack([np.ones(m.size), p])
        res = _ols_class()(m, X).fit()
        xtx, s2 = X.T @ X, float(res.scale)
        # statsmodels' resid_studentized_external refits the model once per pair (10,000 fits
        # for 1,000 gauges x 10 steps); the deleted-pair variance has a closed form (Cook and
        # Weisberg 1982, ch. 2, from memory; checked against the refits in the tests):
        # s_(i)^2 = ((n - p) s^2 - r_i^2 / (1 - h_i)) / (n - p - 1).
        # A pair with leverage 1 divides by zero; that residual is undefined.
        from statsmodels.stats.outliers_influence import OLSInfluence

        infl = OLSInfluence(res)
        h, r, dof = infl.hat_matrix_diag, np.asarray(res.resid), m.size - 2
        with np.errstate(divide="ignore", invalid="ignore"):
            s2_del = (dof * s2 - r**2 / (1 - h)) / (dof - 1)
            ext = np.abs(np.asarray(infl.get_resid_studentized_external(
                sigma=np.sqrt(np.maximum(s2_del, 0.0)))))
        for i, name in enumerate(names):
            keep = g != name
            e = ext[~keep][np.isfinite(ext[~keep])]
            student[i] = e.max() if e.size else NAN
            if keep.sum() >= 2 and np.ptp(p[keep]) > 0 and s2 > 0:
                delta = res.params - np.linalg.lstsq(X[keep], m[keep], rcond=None)[0]
                cooks[i] = float(delta @ xtx @ delta) / (2.0 * s2)
    df = pd.DataFrame({"gauge": names, "cooks_d": cooks, "max_abs_student": student})
    df = df.sort_values(["cooks_d", "max_abs_student"], ascending=False, na_position="last",
                        kind="stable").reset_index(drop=True)
    df["rank"] = np.arange(1, len(df) + 1)
    if reason:
        df.attrs["reason"] = reason
    return df
