"""Tests of parameter identification from a study of model variants.

The model whose variants are "solved" is an Euler-Bernoulli beam in closed form, so every
prediction comes from a handbook formula and not from the code under test.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import scipy.differentiate
import scipy.integrate

from correlate.core.errors import StudyError
from correlate.variants import identify as ident
from correlate.variants import surface as surf
from correlate.variants.identify import (
    fit_response,
    identify,
    leave_one_out_error,
    rank_variants,
)

# -- the beam -------------------------------------------------------------------------------------
# Steel strip 1 m long, 40 mm wide, 10 mm thick; five gauges on the tension-side surface; three load
# steps. Invented for these tests.
L, B, T = 1.0, 0.040, 0.010  # [m]
I_AREA = B * T**3 / 12  # second moment of area [m^4]
C = T / 2  # distance of the gauged surface from the neutral axis [m]
GAUGE_X = np.array([0.05, 0.25, 0.45, 0.70, 0.90]) * L  # [m] from the spring-supported end
LOADS = np.array([100.0, 200.0, 300.0])  # [N] load steps
SIGMA = 2e-6  # gauge noise, 2 microstrain [m/m]


def propped_strain(k: float, E: float) -> np.ndarray:
    """Surface strain (steps x gauges, flattened) of a propped beam with a spring-held end.

    Euler-Bernoulli beam of length L: at x = 0 a rotational spring of stiffness k [N m/rad] (no
    deflection), at x = L a simple prop, a point load F at mid-span. Derivation (superposition,
    downward deflection positive): remove the prop and call its reaction R. At x = L the load gives
    5 F L^3 / (48 E I) (cantilever deflection F a^2 (3L - a) / (6 E I) with a = L/2), the prop
    -R L^3 / (3 E I), and the spring's rigid rotation theta_0 = M_0 / k with root moment
    M_0 = F L/2 - R L adds theta_0 L. Zero deflection at the prop, with phi = E I / (k L):

        5 F - 16 R + 48 phi (F/2 - R) = 0   =>   R = F (5 + 24 phi) / (16 + 48 phi),
        M_0 = F L / 2 - R L = 3 F L / (16 (1 + 3 phi)).

    The limits are the handbook cases (Roark's Formulas for Stress and Strain, table of beams
    with a central load, from memory): phi = 0 is the propped cantilever, R = 5F/16,
    M_0 = 3FL/16; phi -> infinity is the simply supported beam, R = F/2, M(L/2) = FL/4. The
    bending moment (sagging positive) taken from the prop side is M(x) = R (L - x) - F <L/2 - x>,
    and the surface strain is e = M c / (E I). The spring changes R, hence every gauge's strain.
    """
    phi = E * I_AREA / (k * L)
    R = LOADS[:, None] * (5 + 24 * phi) / (16 + 48 * phi)
    M = R * (L - GAUGE_X) - LOADS[:, None] * np.clip(L / 2 - GAUGE_X, 0, None)
    return (M * C / (E * I_AREA)).ravel()


def cantilever_strain(E: float, load_scale: float) -> np.ndarray:
    """Surface strain of a clamped cantilever with tip load s F: e(a) = s F (L - a) c / (E I).

    Euler-Bernoulli, statically determinate (Roark, cantilever with end load, from memory): every
    reading is proportional to s / E, so E and the load scale act identically on these gauges.
    """
    return (load_scale * LOADS[:, None] * (L - GAUGE_X) * C / (E * I_AREA)).ravel()


K_LEVELS = np.geomspace(2e3, 8e3, 5)  # [N m/rad]
E_LEVELS = np.array([190e9, 200e9, 210e9])  # [Pa]
TRUTH = np.array([4.5e3, 203e9])  # k not among the variants' levels


@pytest.fixture(scope="module")
def study():
    """A 5 x 3 factorial study in (k, E) and its quadratic surface (k log-scaled)."""
    params = np.array([[k, E] for k in K_LEVELS for E in E_LEVELS])
    predictions = np.array([propped_strain(*p) for p in params])
    surface = fit_response(params, predictions, kind="quadratic", log=[True, False],
                           names=["k", "E"])
    return params, predictions, surface


# -- the beam reference itself ------------------------------------------------------------------


def _moment(k: float, E: float) -> np.ndarray:
    """Bending moment (steps x gauges) behind propped_strain: strain times E I / c."""
    return propped_strain(k, E).reshape(LOADS.size, -1) * E * I_AREA / C


def test_beam_reference_reaches_the_handbook_limits():
    F, x = LOADS[:, None], GAUGE_X[None, :]
    # Rigid end: propped cantilever with a central load (Roark, from memory), taken from the
    # clamped side: M(x) = -3FL/16 + 11F/16 x left of the load, 5F/16 (L - x) right of it
    rigid = np.where(x < L / 2, -3 * F * L / 16 + 11 * F / 16 * x, 5 * F / 16 * (L - x))
    # 1e30 N m/rad leaves phi ~ 1e-28: rounding only; moments are O(10) N m
    np.testing.assert_allclose(_moment(1e30, 200e9), rigid, rtol=1e-12, atol=1e-12)
    # Pinned end: simply supported beam, M(x) = F/2 min(x, L - x) (Roark)
    pinned = F / 2 * np.minimum(x, L - x)
    np.testing.assert_allclose(_moment(1e-30, 200e9), pinned, rtol=1e-12, atol=1e-12)


def test_beam_reference_closes_the_prop_gap():
    # Independent of the algebra in propped_strain: with v'' = M / (E I) (Euler-Bernoulli,
    # sagging positive, upward v) and the spring's rotation v'(0) = M(0) / k, the deflection at
    # the prop v(L) = v'(0) L + int_0^L (L - x) M(x) / (E I) dx must vanish. The prop reaction
    # is read back from the helper's gauge right of the load, where M(x) = R (L - x)
    k, E, F = 4.5e3, 203e9, LOADS[0]
    j = 3  # the gauge at 0.7 L
    R = _moment(k, E)[0, j] / (L - GAUGE_X[j])

    def moment(x: float) -> float:
        return R * (L - x) - F * max(L / 2 - x, 0.0)

    bending, _ = scipy.integrate.quad(lambda x: (L - x) * moment(x) / (E * I_AREA), 0, L,
                                      points=[L / 2])
    gap = moment(0.0) / k * L + bending
    # each term is ~2e-3 m; quad (reference library) integrates this piecewise quadratic to
    # rounding, so 1e-12 m is 5e-10 of the terms
    assert abs(bending) > 1e-4 and abs(gap) < 1e-12


# -- fit_response ------------------------------------------------------------------------------


def _quadratic_truth(theta: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """An exactly quadratic response in u = (log10 k, E [GPa], t [mm]) and its d/dtheta."""
    k, E, t = theta.T
    u = np.c_[np.log10(k), E / 1e9, t * 1e3]
    A = np.array([[0.3, -1.2, 2.0], [0.7, 0.1, -0.4]])  # two outputs, linear part
    Q = np.array([[[0.5, 0.2, -0.1], [0.2, 0.03, 0.05], [-0.1, 0.05, 0.8]],
                  [[-0.2, 0.0, 0.3], [0.0, 0.01, -0.02], [0.3, -0.02, 0.1]]])
    y = 1.5 + u @ A.T + np.einsum("mi,nij,mj->mn", u, Q, u)
    dy_du = A[None] + 2 * np.einsum("nij,mj->mni", Q, u)  # Q symmetric
    du_dtheta = np.c_[1 / (k * np.log(10)), np.full_like(E, 1e-9), np.full_like(t, 1e3)]
    return y, dy_du * du_dtheta[:, None, :]


def _random_points(rng: np.random.Generator, n: int) -> np.ndarray:
    return np.c_[10 ** rng.uniform(3, 5, n), rng.uniform(180e9, 220e9, n),
                 rng.uniform(0.008, 0.012, n)]


def test_quadratic_surface_reproduces_an_exact_quadratic():
    rng = np.random.default_rng(11)
    params = _random_points(rng, 20)
    surface = fit_response(params, _quadratic_truth(params)[0], kind="quadratic",
                           log=[True, False, False])
    # Inside the hull, so no coding range is exceeded
    probe = np.c_[10 ** rng.uniform(3.2, 4.8, 7), rng.uniform(185e9, 215e9, 7),
                  rng.uniform(0.0085, 0.0115, 7)]
    y, dy = _quadratic_truth(probe)
    # A full quadratic in the coded variables spans every quadratic in u (Myers et al., Response
    # Surface Methodology, ch. 6): only rounding remains; values are O(1e3), so 1e-8 absolute is
    # ~1e-11 relative
    np.testing.assert_allclose(surface.predict(probe), y, rtol=0, atol=1e-8)
    np.testing.assert_allclose(surface.jacobian(probe), dy, rtol=1e-9, atol=0)  # calculus, rounding


def test_jacobian_agrees_with_scipy_differentiate(study):
    _, _, surface = study
    theta = TRUTH

    def f(xi: np.ndarray) -> np.ndarray:
        pts = xi.reshape(2, -1).T
        return surface.predict(pts).T.reshape((surface.n_outputs, *xi.shape[1:]))

    ref = scipy.differentiate.jacobian(f, theta, initial_step=0.02 * theta)
    assert np.all(ref.success)
    # scipy's adaptive finite differences (reference library) converge to about sqrt(eps)
    np.testing.assert_allclose(surface.jacobian(theta[None])[0], ref.df, rtol=1e-7, atol=0)


def test_linear_surface_counts_terms_and_coding():
    params = np.array([[1.0, 10.0], [3.0, 10.0], [1.0, 1000.0], [3.0, 1000.0]])
    surface = fit_response(params, np.ones((4, 3)), kind="linear", log=[False, True])
    assert surface.coefficients.shape == (3, 3)  # 1 + P terms
    # The variants' range maps to [-1, 1] after log10 where asked (coded variables, Myers et al.)
    np.testing.assert_allclose(surface.scale(params), [[-1, -1], [1, -1], [-1, 1], [1, 1]],
                               rtol=0, atol=1e-15)  # exact but for log10 rounding
    np.testing.assert_allclose(surface.unscale(surface.scale(params)), params, rtol=1e-14, atol=0)


def test_too_few_variants_for_the_terms_is_refused():
    params = np.array([[1.0, 1.0], [2.0, 1.0], [1.0, 2.0], [2.0, 2.0], [1.5, 1.5]])
    with pytest.raises(StudyError, match=r"5 variants cannot fit the 6 terms of a quadratic"):
        fit_response(params, np.zeros((5, 2)), kind="quadratic")


def test_design_that_confounds_terms_is_refused():
    # Six variants on a line: enough in number for a quadratic in 2 parameters, not in spread
    s = np.linspace(1.0, 2.0, 6)
    with pytest.raises(StudyError, match=r"determine only 3 of the 6 terms"):
        fit_response(np.c_[s, 2 * s], np.zeros((6, 1)), kind="quadratic")


def test_non_positive_log_parameter_is_refused():
    with pytest.raises(StudyError, match=r"log-scaled parameter\(s\) k \(minimum 0\) must be positive"):
        fit_response(np.array([[0.0], [1.0], [2.0]]), np.zeros((3, 1)), log=[True], names=["k"])


# -- leave_one_out_error ------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["linear", "quadratic"], ids=["linear", "quadratic"])
def test_leave_one_out_closed_form_equals_explicit_refits(study, kind):
    params, predictions, _ = study
    loo = leave_one_out_error(params, predictions, kind=kind, log=[True, False])
    refit = []
    for i in range(len(params)):
        keep = np.arange(len(params)) != i
        s = fit_response(params[keep], predictions[keep], kind=kind, log=[True, False])
        refit.append(np.sqrt(np.mean((predictions[i] - s.predict(params[i : i + 1])[0]) ** 2)))
    # e_i / (1 - h_ii) is exact for linear least squares (Hastie, Tibshirani and Friedman,
    # Elements of Statistical Learning, eq. 7.52; Cook and Weisberg 1982); only rounding differs.
    # Strains are ~1e-4, so 1e-13 m/m absolute is far below rounding of the refits' solves
    np.testing.assert_allclose(loo, refit, rtol=1e-8, atol=1e-13)


def test_leave_one_out_agrees_with_statsmodels_press_residuals(study):
    sm = pytest.importorskip("statsmodels.api")
    params, predictions, _ = study
    u = np.c_[np.log10(params[:, 0]), params[:, 1] / 1e9]  # any affine coding spans the same space
    X = np.c_[np.ones(len(u)), u, u[:, 0] ** 2, u[:, 0] * u[:, 1], u[:, 1] ** 2]
    press = np.column_stack([sm.OLS(y, X).fit().get_influence().resid_press
                             for y in predictions.T])
    ours = leave_one_out_error(params, predictions, kind="quadratic", log=[True, False])
    # statsmodels OLSInfluence.resid_press (reference library); 1e-13 m/m is below rounding
    np.testing.assert_allclose(ours, np.sqrt(np.mean(press**2, axis=1)), rtol=1e-7, atol=1e-13)


def test_leave_one_out_refuses_a_variant_the_surface_cannot_do_without():
    params = np.array([[1.0], [2.0], [3.0]])  # a quadratic in one parameter: 3 terms, 3 variants
    with pytest.raises(StudyError, match=r"without variant\(s\) 0, 1, 2"):
        leave_one_out_error(params, np.zeros((3, 1)), kind="quadratic")


# -- identify -----------------------------------------------------------------------------------


def test_surface_is_adequate_for_the_identification_tests(study):
    params, predictions, _ = study
    # The identification tests assume the surface error is small against the 2 ue noise
    # (common practice: check the response surface before using it); 0.2 ue is a tenth of it
    loo = leave_one_out_error(params, predictions, kind="quadratic", log=[True, False])
    assert loo.max() < 1e-6


def test_estimate_lies_within_two_standard_errors_of_the_truth(study):
    _, _, surface = study
    rng = np.random.default_rng(2024)
    measured = propped_strain(*TRUTH) + rng.normal(0.0, SIGMA, surface.n_outputs)
    res = identify(surface, measured, bounds=(surface.lower, surface.upper),
                   weights=np.full(surface.n_outputs, SIGMA**-2))
    assert res.warnings == ()
    assert not res.extrapolated
    # Gauss-Newton confidence statement (Seber and Wild, Nonlinear Regression, sec. 5.1): for a
    # well-fitting model the truth lies within 2 standard errors with ~95 % probability
    assert np.all(np.abs(res.estimate - TRUTH) < 2 * res.standard_error)
    # With weights 1/sigma^2 the weighted residual variance estimates 1 (chi-square over dof);
    # its 99.9 % range for 13 dof is about 0.27..2.7
    assert res.dof == 13 and 0.27 < res.residual_variance < 2.7
    np.testing.assert_allclose(np.diag(res.correlation), 1.0, rtol=1e-12, atol=0)  # definition


def test_standard_error_agrees_with_monte_carlo(study):
    _, _, surface = study
    rng = np.random.default_rng(7)
    clean = propped_strain(*TRUTH)
    n_draws = 400
    runs = [identify(surface, clean + rng.normal(0.0, SIGMA, clean.size),
                     bounds=(surface.lower, surface.upper)) for _ in range(n_draws)]
    estimates = np.array([r.estimate for r in runs])
    reported = np.sqrt(np.mean([r.standard_error**2 for r in runs], axis=0))
    # Monte Carlo propagation of the gauge noise (JCGM 101:2008, GUM Supplement 1) against the
    # linearised covariance s^2 (J^T W J)^-1 (Seber and Wild 1989, sec. 2.1). Averaging s^2 over
    # the draws removes its own scatter. The sample standard deviation of 400 normal draws has a
    # relative standard error of 1/sqrt(2 * 399) = 3.5 %; 12 % allows 3.4 of those plus
    # linearisation and surface error
    np.testing.assert_allclose(estimates.std(axis=0, ddof=1), reported, rtol=0.12, atol=0)
    mc_corr = np.corrcoef(estimates.T)[0, 1]
    mean_corr = np.mean([r.correlation[0, 1] for r in runs])
    # Standard error of a sample correlation is (1 - rho^2)/sqrt(n) <= 0.05 for n = 400
    assert abs(mc_corr - mean_corr) < 0.15


def test_identical_parameters_raise_the_identifiability_warning():
    # E and a load scale on a determinate cantilever's bending gauges: every reading is s/E times a
    # constant (Euler-Bernoulli), so only their ratio can be identified
    params = np.array([[E, s] for E in (190e9, 200e9, 210e9) for s in (0.9, 1.0, 1.1)])
    predictions = np.array([cantilever_strain(*p) for p in params])
    surface = fit_response(params, predictions, kind="quadratic", names=["E", "load_scale"])
    rng = np.random.default_rng(5)
    measured = cantilever_strain(203e9, 1.04) + rng.normal(0.0, SIGMA, surface.n_outputs)
    res = identify(surface, measured, bounds=(surface.lower, surface.upper))
    assert res.condition_number > 1e3  # the rule's threshold
    assert any("'E', 'load_scale' act alike" in w for w in res.warnings)
    assert any("'E': standard error" in w for w in res.warnings)


def test_separable_parameters_raise_no_identifiability_warning(study):
    _, _, surface = study
    measured = propped_strain(*TRUTH)
    res = identify(surface, measured, bounds=(surface.lower, surface.upper))
    # The spring changes the shape of the moment line, E only its size: they separate
    assert res.condition_number < 1e3 and res.warnings == ()


def test_linear_identification_matches_statsmodels_wls():
    sm = pytest.importorskip("statsmodels.api")
    params = np.array([[k, E] for k in K_LEVELS for E in E_LEVELS])
    predictions = np.array([propped_strain(*p) for p in params])
    surface = fit_response(params, predictions, kind="linear", log=[True, False])
    rng = np.random.default_rng(9)
    measured = propped_strain(*TRUTH) + rng.normal(0.0, SIGMA, surface.n_outputs)
    weights = rng.uniform(0.5, 2.0, surface.n_outputs) / SIGMA**2
    res = identify(surface, measured, bounds=(surface.lower, surface.upper), weights=weights)
    # A linear surface makes the problem a weighted linear regression of the readings less the
    # constant term on the slope terms; statsmodels WLS (reference library) gives its estimate,
    # scale s^2 and bse. The solver stops at xtol 1e-12, so 1e-7 relative is ample
    wls = sm.WLS(measured - surface.coefficients[0], surface.coefficients[1:].T,
                 weights=weights).fit()
    np.testing.assert_allclose(res.estimate_scaled, wls.params, rtol=1e-7, atol=0)
    np.testing.assert_allclose(res.residual_variance, wls.scale, rtol=1e-7, atol=0)
    np.testing.assert_allclose(res.standard_error_scaled, wls.bse, rtol=1e-7, atol=0)


def test_missing_readings_are_left_out(study):
    params, predictions, surface = study
    rng = np.random.default_rng(3)
    measured = propped_strain(*TRUTH) + rng.normal(0.0, SIGMA, surface.n_outputs)
    gap = np.zeros(surface.n_outputs, bool)
    gap[[2, 7, 11]] = True
    res = identify(surface, np.where(gap, np.nan, measured), bounds=(surface.lower, surface.upper))
    # Reference: the same study with those outputs never recorded. Least squares fits each output's
    # coefficients independently, so the reduced surface is the full one less those columns
    reduced = fit_response(params, predictions[:, ~gap], kind="quadratic", log=[True, False])
    ref = identify(reduced, measured[~gap], bounds=(reduced.lower, reduced.upper))
    np.testing.assert_allclose(res.estimate, ref.estimate, rtol=1e-9, atol=0)  # solver tolerance
    np.testing.assert_allclose(res.standard_error, ref.standard_error, rtol=1e-6, atol=0)
    assert res.dof == ref.dof == surface.n_outputs - 3 - 2
    assert np.all(np.isnan(res.residuals[gap])) and np.all(np.isfinite(res.residuals[~gap]))


def test_readings_beyond_the_hull_are_flagged_not_extrapolated(study):
    _, _, surface = study
    stiff = np.array([1.2e4, 203e9])  # k above the stiffest variant (8e3)
    res = identify(surface, propped_strain(*stiff), bounds=([1e2, 1e11], [1e6, 3e11]))
    # Common practice: a response surface is not trusted beyond its variants; the bounds are
    # clipped to the hull and the estimate held at its face
    assert res.extrapolated
    assert res.at_hull.tolist() == [1, 0]
    assert res.upper[0] == K_LEVELS[-1]  # clipped to the hull
    # on the face: the trust-region iterates stay strictly inside the bounds (scipy docs), within
    # the 1e-4 (scaled) that the module counts as resting on a bound, ~3e-4 relative in k
    np.testing.assert_allclose(res.estimate[0], K_LEVELS[-1], rtol=3e-4, atol=0)
    assert any("'k': the readings pull the estimate beyond the variants' highest" in w
               for w in res.warnings)


def test_estimate_held_by_a_given_bound_is_flagged_but_not_extrapolated(study):
    _, _, surface = study
    # k = 4.5e3 measured, but the analyst bounds k to 2e3..4e3, inside the hull
    res = identify(surface, propped_strain(*TRUTH), bounds=([2e3, 1.9e11], [4e3, 2.1e11]))
    assert not res.extrapolated and res.at_hull.tolist() == [0, 0]
    assert any("'k': the estimate rests on a given bound" in w for w in res.warnings)


def test_bounds_outside_the_hull_are_refused(study):
    _, _, surface = study
    with pytest.raises(StudyError, match=r"'k': bounds 10000\.\.100000 leave nothing inside the variants' hull 2000\.\.8000"):
        identify(surface, propped_strain(*TRUTH), bounds=([1e4, 1e11], [1e5, 3e11]))


def test_too_few_readings_are_refused(study):
    _, _, surface = study
    measured = np.full(surface.n_outputs, np.nan)
    measured[:2] = 1e-4
    with pytest.raises(StudyError, match=r"2 usable measured outputs for 2 parameters"):
        identify(surface, measured, bounds=(surface.lower, surface.upper))


# -- rank_variants ------------------------------------------------------------------------------


def test_rank_variants_sorts_by_rms_then_pass_fraction_with_stable_ties():
    metrics = pd.DataFrame({
        "variant": ["a", "b", "c", "d", "e", "f"],
        "rms_ue": [12.0, 8.0, 8.0, np.nan, 8.0, 3.0],
        "pass_fraction": [0.9, 0.7, 0.8, 1.0, 0.7, 0.5],
    })
    ranked = rank_variants(metrics)
    # Hand-ordered: f (3), then the 8.0 ties by pass fraction c (0.8), b and e (0.7, input order),
    # then a; the variant without an RMS last (common practice: missing never ranks first)
    assert ranked["variant"].tolist() == ["f", "c", "b", "e", "a", "d"]
    assert ranked["rank"].tolist() == [1, 2, 3, 4, 5, 6]
    assert metrics["variant"].tolist() == ["a", "b", "c", "d", "e", "f"]  # input untouched


def test_rank_variants_names_a_missing_column():
    with pytest.raises(StudyError, match=r"no column 'pass_fraction'"):
        rank_variants(pd.DataFrame({"rms_ue": [1.0]}))


@pytest.mark.parametrize("module", [ident, surf], ids=["identify", "surface"])
def test_every_public_name_exists(module):
    assert all(hasattr(module, name) for name in module.__all__)


def test_malformed_bounds_are_refused(study):
    _, _, surface = study
    with pytest.raises(StudyError, match=r"bounds must be a pair \(lower, upper\) of 2 values"):
        identify(surface, propped_strain(*TRUTH), bounds=([1.0, 2.0, 3.0], [4.0, 5.0, 6.0]))
