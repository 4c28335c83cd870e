"""Tests of the comparison stage's uncertainty budget against sources outside the project.

Sources: JCGM 100:2008 (GUM) eq. 10 and clauses 4.2.3, 4.3.7, 5.1.3; JCGM 101:2008 (Monte Carlo
supplement); ASME V&V 20-2009 sections 1 and 2; P. J. Roache's grid convergence index;
Celik et al., J. Fluids Eng. 130(7) 078001 (2008); Vishay Micro-Measurements Tech Note TN-509;
the rectangular-rosette closed form (Dally & Riley, Experimental Stress Analysis; Window, Strain
Gauge Technology); the plate-bending strain 6M/(E b t^2) (Roark's Formulas for Stress and
Strain); scipy and numpy as reference libraries. All scenarios are invented for these tests.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import differentiate

from correlate.comparison import uncertainty as unc
from correlate.comparison.uncertainty import (
    Budget,
    ModelInput,
    grid_convergence,
    input_uncertainty,
    measurement_uncertainty,
    propagate_function,
    propagate_linear,
    ratio_interval,
    transverse_derivative,
    validation,
)
from correlate.core.errors import GaugeError, ModelError, StudyError

# Standard error of a standard deviation estimated from M normal samples is about
# sigma / sqrt(2 (M - 1)) (normal theory; JCGM 101:2008 uses the sample standard deviation as the
# Monte Carlo estimate of u). Budgets with rectangular parts are platykurtic, which makes this
# bound conservative. Monte Carlo checks allow four such standard errors.
N_SE = 4.0


def mc_rtol(m: int) -> float:
    return N_SE / np.sqrt(2.0 * (m - 1))


def indicated(e_a, e_t, kt, nu0):
    """Indicated strain of a gauge with transverse sensitivity (Vishay TN-509)."""
    return (e_a + kt * e_t) / (1.0 - nu0 * kt)


def principal_rectangular(x):
    """Principal strains of a 0/45/90 rosette, x = (..., [ea, eb, ec]) -> (..., [e1, e2]).

    Handbook closed form (Dally & Riley, Experimental Stress Analysis; Window, Strain Gauge
    Technology): e1,2 = (ea+ec)/2 +/- sqrt(((ea-ec)/2)**2 + ((2 eb - ea - ec)/2)**2).
    """
    ea, eb, ec = x[..., 0], x[..., 1], x[..., 2]
    centre = (ea + ec) / 2.0
    radius = np.sqrt(((ea - ec) / 2.0) ** 2 + ((2.0 * eb - ea - ec) / 2.0) ** 2)
    return np.stack([centre + radius, centre - radius], axis=-1)


def principal_jacobian_by_hand(ea, eb, ec):
    """d(e1, e2)/d(ea, eb, ec) of the closed form, differentiated by hand.

    With a = (ea-ec)/2, b = eb - (ea+ec)/2, R = sqrt(a^2 + b^2):
    dR/dea = (a - b)/(2R), dR/deb = b/R, dR/dec = -(a + b)/(2R); e1,2 = (ea+ec)/2 +/- R.
    """
    a, b = (ea - ec) / 2.0, eb - (ea + ec) / 2.0
    R = np.hypot(a, b)
    dR = np.array([(a - b) / (2 * R), b / R, -(a + b) / (2 * R)])
    half = np.array([0.5, 0.0, 0.5])
    return np.stack([half + dR, half - dR])


def test_every_public_name_exists():
    for name in unc.__all__:
        assert hasattr(unc, name), name


# --------------------------------------------------------------------------------------------
# Transverse sensitivity (Vishay Micro-Measurements TN-509)


@pytest.mark.parametrize(
    ("e_a", "e_t", "kt", "nu0"),
    [(1000.0, -300.0, 0.02, 0.285), (-450.0, 800.0, -0.015, 0.30), (120.0, 35.0, 0.06, 0.285)],
    ids=["tension", "compression-kt-negative", "large-kt"],
)
def test_transverse_derivative_matches_numerical_derivative_of_tn509(e_a, e_t, kt, nu0):
    # Reference: scipy.differentiate.derivative of the TN-509 relation in Kt (Richardson-
    # extrapolated finite differences, asked for 1e-12 relative).
    ref = differentiate.derivative(
        lambda k: indicated(e_a, e_t, k, nu0), kt, tolerances={"rtol": 1e-12, "atol": 0}
    )
    assert ref.success
    # rtol 1e-9: the reference's own achieved error is far below that on a rational function.
    np.testing.assert_allclose(transverse_derivative(e_a, e_t, kt, nu0), ref.df, rtol=1e-9, atol=0)


def test_transverse_derivative_at_zero_kt_is_e_t_plus_nu0_e_a():
    # TN-509 at Kt = 0: e_ind = e_a + Kt (e_t + nu0 e_a) + O(Kt^2); exact arithmetic on these values.
    got = transverse_derivative(np.array([1000.0, -200.0]), np.array([-300.0, 50.0]), 0.0, 0.25)
    np.testing.assert_allclose(got, [-300.0 + 250.0, 50.0 - 50.0], rtol=1e-12, atol=0)


def test_transverse_derivative_rejects_the_pole():
    with pytest.raises(GaugeError, match="1 - nu0\\*Kt"):
        transverse_derivative(100.0, 0.0, 4.0, 0.25)


# --------------------------------------------------------------------------------------------
# Measurement budget u_D (JCGM 100:2008)


def _budget(**extra):
    base = dict(gauge_factor=0.003, transverse=0.0, daq_ue=4.0, daq_relative=0.012)
    base.update(extra)
    return measurement_uncertainty(1000.0, 1000.0, -300.0, 0.0, 0.285, **base)


def test_measurement_budget_combines_by_gum_eq10_by_hand():
    # GUM eq. 10 with unit sensitivities: u_D = sqrt(3^2 + 4^2 + 12^2) = 13 exactly.
    b = _budget()
    assert list(b.terms) == ["gauge_factor", "transverse", "daq", "daq_relative"]
    np.testing.assert_allclose(
        [b.terms[k] for k in b.terms], [3.0, 0.0, 4.0, 12.0], rtol=1e-12, atol=0
    )
    np.testing.assert_allclose(b.combined, 13.0, rtol=1e-12, atol=0)  # exact arithmetic


def test_type_a_and_rectangular_placement_terms():
    b = _budget(repeat_sd=6.0, repeat_n=4, band_low=100.0, band_high=110.0)
    # GUM 4.2.3: standard uncertainty of the mean of n repeats is s/sqrt(n) = 6/2 = 3.
    np.testing.assert_allclose(b.terms["repeatability"], 3.0, rtol=1e-12, atol=0)
    # GUM 4.3.7: rectangular distribution of half-width a = 5 has u = a/sqrt(3).
    np.testing.assert_allclose(b.terms["placement"], 5.0 / np.sqrt(3.0), rtol=1e-12, atol=0)
    np.testing.assert_allclose(
        b.combined, np.sqrt(169.0 + 9.0 + 25.0 / 3.0), rtol=1e-12, atol=0
    )  # GUM eq. 10 by hand


def test_transverse_term_is_slope_times_u_kt():
    # TN-509 slope at e_a = 1000, e_t = -300, Kt = 0.02, nu0 = 0.285: (-300 + 285) / 0.9943^2.
    b = measurement_uncertainty(
        1000.0,
        1000.0,
        -300.0,
        0.02,
        0.285,
        gauge_factor=0.0,
        transverse=0.004,
        daq_ue=0.0,
        daq_relative=0.0,
    )
    np.testing.assert_allclose(b.terms["transverse"], 15.0 / 0.9943**2 * 0.004, rtol=1e-12, atol=0)


def test_measurement_budget_broadcasts_over_gauges_and_steps():
    rng = np.random.default_rng(11)
    measured = rng.uniform(-800, 800, size=(3, 4))
    e_a, e_t = measured, -0.3 * measured
    kt = np.array([[0.01], [0.0], [-0.02]])  # per gauge
    b = measurement_uncertainty(
        measured,
        e_a,
        e_t,
        kt,
        0.285,
        gauge_factor=0.005,
        transverse=0.003,
        daq_ue=np.array([[1.0], [2.0], [3.0]]),
        daq_relative=0.001,
        band_low=measured - 5,
        band_high=measured + 7,
    )
    assert all(t.shape == (3, 4) for t in b.terms.values())
    one = measurement_uncertainty(
        measured[2, 1],
        e_a[2, 1],
        e_t[2, 1],
        -0.02,
        0.285,
        gauge_factor=0.005,
        transverse=0.003,
        daq_ue=3.0,
        daq_relative=0.001,
        band_low=measured[2, 1] - 5,
        band_high=measured[2, 1] + 7,
    )
    # Same arithmetic element by element.
    np.testing.assert_allclose(b.combined[2, 1], one.combined, rtol=1e-12, atol=0)


def test_measurement_budget_agrees_with_monte_carlo():
    # JCGM 101:2008: propagate the distributions themselves and compare the standard deviation
    # of the reading with the GUM budget. M = 400,000; tolerance 4 standard errors of a standard
    # deviation estimate (0.45 %); the model's nonlinearity (products of small relative errors,
    # Kt in 1/(1 - nu0 Kt)) is below 1e-4 relative here.
    rng = np.random.default_rng(20240611)
    M, n_rep = 400_000, 4
    e_a, e_t, kt, nu0 = 900.0, -270.0, 0.015, 0.285
    u_gf, u_kt, u_daq, u_rel, sd, low, high = 0.004, 0.005, 2.0, 0.002, 8.0, -6.0, 10.0
    nominal = indicated(e_a, e_t, kt, nu0)
    kt_s = rng.normal(kt, u_kt, M)
    placement = rng.uniform(low, high, M) - (low + high) / 2  # strain offset over the zone
    repeats = rng.normal(0.0, sd, (M, n_rep)).mean(axis=1)
    reading = (
        (indicated(e_a, e_t, kt_s, nu0) + placement)
        * (1 + rng.normal(0, u_gf, M))
        * (1 + rng.normal(0, u_rel, M))
        + rng.normal(0, u_daq, M)
        + repeats
    )
    b = measurement_uncertainty(
        nominal,
        e_a,
        e_t,
        kt,
        nu0,
        gauge_factor=u_gf,
        transverse=u_kt,
        daq_ue=u_daq,
        daq_relative=u_rel,
        repeat_sd=sd,
        repeat_n=n_rep,
        band_low=low,
        band_high=high,
    )
    np.testing.assert_allclose(reading.std(ddof=1), b.combined, rtol=mc_rtol(M), atol=0)


@pytest.mark.parametrize(
    ("extra", "match"),
    [
        ({"gauge_factor": -0.01}, "gauge_factor"),
        ({"repeat_sd": 3.0}, "repeat_sd and repeat_n"),
        ({"repeat_sd": 3.0, "repeat_n": 1}, "repeat_n"),
        ({"band_low": 5.0, "band_high": 1.0}, "band_high < band_low"),
        ({"daq_ue": np.nan}, "daq_ue"),
    ],
    ids=["negative", "unpaired-repeats", "one-repeat", "reversed-band", "nan"],
)
def test_measurement_budget_rejects_bad_inputs(extra, match):
    with pytest.raises(StudyError, match=match):
        _budget(**extra)


# --------------------------------------------------------------------------------------------
# Model-input budget u_input (sensitivity coefficients, JCGM 100:2008 5.1.3)


def _plate_strain(t, E=70e3, M=2.0e4, b=20.0):
    """Surface bending strain of a plate strip, 6 M / (E b t^2) (Roark), in microstrain."""
    return 6.0 * M / (E * b * t**2) * 1e6


def test_input_exponent_and_variant_agree_with_plate_bending():
    t0, u_t, u_E, u_load, step = 4.0, 0.01, 0.02, 0.005, 1e-6
    S = _plate_strain(t0)
    b = input_uncertainty(
        S,
        {
            "thickness": ModelInput(relative=u_t, exponent=-2.0),  # strain ~ t^-2 (Roark)
            "thickness_run": {
                "relative": u_t,
                "variant": _plate_strain(t0 * (1 + step)),
                "step": step,
            },
            "modulus": ModelInput(relative=u_E, exponent=-1.0),  # strain ~ 1/E under a set load
        },
        load=u_load,
    )
    np.testing.assert_allclose(b.terms["thickness"], 2 * u_t * S, rtol=1e-12, atol=0)  # exact
    # The one-sided difference with a 1e-6 step carries an O(step) = 3e-6 relative error.
    np.testing.assert_allclose(b.terms["thickness_run"], 2 * u_t * S, rtol=1e-5, atol=0)
    np.testing.assert_allclose(b.terms["modulus"], u_E * S, rtol=1e-12, atol=0)
    np.testing.assert_allclose(b.terms["load"], u_load * S, rtol=1e-12, atol=0)
    hand = S * np.sqrt(2 * (2 * u_t) ** 2 + u_E**2 + u_load**2)  # GUM eq. 10 by hand
    np.testing.assert_allclose(b.combined, hand, rtol=1e-5, atol=0)  # the variant term's O(step)


@pytest.mark.parametrize(
    ("spec", "match"),
    [
        ({"relative": 0.01}, "either exponent"),
        ({"relative": 0.01, "exponent": -1.0, "variant": 10.0, "step": 0.1}, "either exponent"),
        ({"relative": 0.01, "variant": 10.0}, "either exponent"),
        ({"relative": 0.01, "variant": 10.0, "step": 0.0}, "non-zero"),
        ({"relative": 0.01, "power": 2}, "use the keys"),
    ],
    ids=["neither", "both", "no-step", "zero-step", "unknown-key"],
)
def test_input_budget_rejects_bad_specs(spec, match):
    with pytest.raises(StudyError, match=match):
        input_uncertainty(100.0, {"E": spec})


# --------------------------------------------------------------------------------------------
# Grid convergence index (Roache; ASME V&V 20-2009 section 2; Celik et al. 2008)


def test_gci_recovers_order_and_richardson_value_on_constant_r():
    # S_h = S_exact + c h^p on h = 1, 2, 4: the observed order is p and Richardson extrapolation
    # returns S_exact; GCI = 1.25 |S1 - S_exact| because (S2 - S1)/(r^p - 1) = c h1^p exactly.
    rng = np.random.default_rng(3)
    exact = rng.uniform(-600, 600, size=(3, 4))
    c, p = rng.uniform(5, 40, size=(3, 4)) * rng.choice([-1, 1], size=(3, 4)), 1.7
    S1, S2, S3 = (exact + c * h**p for h in (1.0, 2.0, 4.0))
    g = grid_convergence(S1, S2, S3, r21=2.0)
    # Logs of differences of values ~600 lose about 1e-13 relative.
    np.testing.assert_allclose(g.order, p, rtol=1e-10, atol=0)
    np.testing.assert_allclose(g.extrapolated, exact, rtol=0, atol=1e-9)  # 0.001 µε at most
    np.testing.assert_allclose(g.gci, 1.25 * np.abs(c), rtol=1e-10, atol=0)
    np.testing.assert_allclose(g.u_num, g.gci / 1.15, rtol=1e-12, atol=0)  # V&V 20, from memory
    assert (g.factor == 1.25).all()
    assert not (g.fell_back | g.oscillatory | g.nonconstant_r | g.negligible).any()


def test_gci_recovers_order_on_nonconstant_r():
    # h = 1, 1.5, 2.7 (r21 = 1.5, r32 = 1.8): Celik's fixed-point iteration must find p = 1.6.
    exact, c, p = np.array([410.0, -95.0]), np.array([-22.0, 3.5]), 1.6
    S1, S2, S3 = (exact + c * h**p for h in (1.0, 1.5, 2.7))
    g = grid_convergence(S1, S2, S3, r21=1.5, r32=1.8)
    np.testing.assert_allclose(g.order, p, rtol=1e-9, atol=0)  # iteration stopped at 1e-12
    np.testing.assert_allclose(g.extrapolated, exact, rtol=0, atol=1e-9)  # 0.001 µε
    assert g.nonconstant_r.all() and not g.fell_back.any()


def test_gci_reproduces_celik_worked_example():
    # Celik et al. (2008) Table 1, first column (values from memory): r21 = 1.5, r32 = 1.336,
    # phi = 6.063, 5.972, 5.863 -> p = 1.53, phi_ext = 6.1685, GCI_fine = 2.2 %. The phis are
    # given to 4 figures, so e21 and e32 are known to about 1 %: p to about 0.05 and phi_ext to
    # about 0.006.
    g = grid_convergence(6.063, 5.972, 5.863, r21=1.5, r32=1.336, formal_order=2.0)
    np.testing.assert_allclose(g.order, 1.53, rtol=0, atol=0.05)
    np.testing.assert_allclose(g.extrapolated, 6.1685, rtol=0, atol=0.006)
    np.testing.assert_allclose(g.gci / 6.063, 0.022, rtol=0, atol=0.001)  # published to 0.1 %


def test_gci_two_meshes_take_formal_order_and_factor_three():
    # Roache: with two grids p is the formal order and Fs = 3.
    g = grid_convergence(100.0, 103.0, r21=1.5, formal_order=2.0)
    np.testing.assert_allclose(g.gci, 3.0 * 3.0 / (1.5**2 - 1), rtol=1e-12, atol=0)  # = 7.2
    np.testing.assert_allclose(g.extrapolated, 100.0 - 3.0 / 1.25, rtol=1e-12, atol=0)
    assert g.order == 2.0 and g.factor == 3.0 and g.fell_back and np.isnan(g.observed_order)


@pytest.mark.parametrize(
    ("S3", "oscillatory"),
    [(101.0, True), (103.0 + 3.0 * 2.0**5, False), (103.0 + 3.0 * 2.0**0.3, False)],
    ids=["oscillatory", "order-5-above-range", "order-0.3-below-range"],
)
def test_gci_falls_back_on_oscillation_or_unreasonable_order(S3, oscillatory):
    g = grid_convergence(100.0, 103.0, S3, r21=2.0, formal_order=2.0)
    assert g.fell_back and g.oscillatory == oscillatory
    # Fall-back GCI: 3 |e21| / (r^2 - 1) = 9 / 3 by hand.
    np.testing.assert_allclose(g.gci, 3.0, rtol=1e-12, atol=0)
    assert g.order == 2.0 and g.factor == 3.0


def test_gci_negligible_change_gives_zero_u_num():
    g = grid_convergence([50.0, 50.0], [50.004, 52.0], [50.3, 60.0], r21=2.0)
    assert g.negligible.tolist() == [True, False]
    assert g.u_num[0] == 0.0 and np.isnan(g.order[0]) and g.u_num[1] > 0


def test_gci_elements_are_independent():
    # One array holding a converging, an oscillating and a negligible element gives, element by
    # element, what each gives alone.
    S1, S2, S3 = (
        np.array([100.0, 100.0, 7.0]),
        np.array([101.0, 103.0, 7.001]),
        np.array([105.0, 101.0, 8.0]),
    )
    g = grid_convergence(S1, S2, S3, r21=2.0)
    for i in range(3):
        one = grid_convergence(S1[i], S2[i], S3[i], r21=2.0)
        np.testing.assert_allclose(g.u_num[i], one.u_num, rtol=1e-12, atol=0)
        assert g.fell_back[i] == one.fell_back


@pytest.mark.parametrize(
    ("kwargs", "error", "match"),
    [
        ({"S3": None, "r21": 1.0}, StudyError, "r21"),
        ({"S3": None, "r21": 2.0, "r32": 2.0}, StudyError, "r32 is given"),
        ({"S3": np.nan, "r21": 2.0}, ModelError, "S3"),
    ],
    ids=["r-not-above-one", "r32-without-S3", "nan-prediction"],
)
def test_gci_rejects_bad_inputs(kwargs, error, match):
    with pytest.raises(error, match=match):
        grid_convergence(1.0, 2.0, **kwargs)


# --------------------------------------------------------------------------------------------
# Validation states (ASME V&V 20-2009 section 1)

# u_num = 3, u_input = 0, u_D = 4 give u_val = 5 exactly (GUM eq. 10), so k u_val = 10 with k = 2.
BOUNDARY_CASES = [
    (10.0, 10.0, "consistent", 0.0, 0.0),  # |E| = k u_val and k u_val = allowed: both equalities
    (-10.5, 10.0, "model error", 0.5, -1.0),  # |E| > k u_val: model error resolved, reads low
    (10.0, 9.5, "uncertainty dominated", 0.0, 0.0),  # k u_val > allowed, |E| not resolved
    (10.5, 9.5, "model error", 0.5, 1.0),  # a resolved error outranks the dominated state
    (0.0, 20.0, "consistent", 0.0, 0.0),
]


@pytest.mark.parametrize(
    ("E", "allowed", "state", "resolved", "sign"),
    BOUNDARY_CASES,
    ids=["both-equalities", "model-error-low", "dominated", "model-error-first", "inside"],
)
def test_validation_state_at_each_boundary(E, allowed, state, resolved, sign):
    v = validation(E, 3.0, 0.0, 4.0, k=2.0, allowed=allowed)
    assert v.state == state
    np.testing.assert_allclose(v.u_val, 5.0, rtol=1e-12, atol=0)  # exact arithmetic
    np.testing.assert_allclose([v.lower, v.upper], [E - 10.0, E + 10.0], rtol=1e-12, atol=0)
    np.testing.assert_allclose(v.model_error, resolved, rtol=1e-12, atol=0)
    assert v.sign == sign


def test_validation_broadcasts_the_cases_together():
    E = np.array([c[0] for c in BOUNDARY_CASES])
    allowed = np.array([c[1] for c in BOUNDARY_CASES])
    v = validation(E, 3.0, 0.0, 4.0, k=2.0, allowed=allowed)
    assert v.state.tolist() == [c[2] for c in BOUNDARY_CASES]


def test_dominant_term_prefers_individual_terms_when_given():
    # u_num = 3 (variance 9); u_D = two terms of 2.5 (6.25 each, 12.5 together). As groups the
    # measurement dominates; term by term the numerical uncertainty is the largest single one.
    budget = Budget(
        terms={"gauge_factor": np.array(2.5), "daq": np.array(2.5)},
        combined=np.array(np.sqrt(12.5)),
    )
    by_group = validation(1.0, 3.0, 0.0, budget.combined, k=2.0, allowed=100.0)
    by_term = validation(1.0, 3.0, {"load": 1.0}, budget, k=2.0, allowed=100.0)
    assert by_group.dominant == "measurement"
    assert by_term.dominant == "numerical"
    np.testing.assert_allclose(by_term.u_val, np.sqrt(9 + 1 + 12.5), rtol=1e-12, atol=0)
    assert validation(0.0, 0.0, 0.0, 0.0, k=2.0, allowed=1.0).dominant == "none"


@pytest.mark.parametrize(
    ("E", "k", "match"),
    [(np.nan, 2.0, "validation: E"), (1.0, 0.0, "coverage factor")],
    ids=["nan-error", "zero-k"],
)
def test_validation_rejects_bad_inputs(E, k, match):
    with pytest.raises(StudyError, match=match):
        validation(E, 1.0, 1.0, 1.0, k=k, allowed=5.0)


# --------------------------------------------------------------------------------------------
# Overall ratio: statistical and fully correlated systematic parts


def test_ratio_is_the_through_origin_least_squares_slope():
    rng = np.random.default_rng(7)
    p = rng.uniform(-900, 900, size=(6, 5))
    m = 1.04 * p + rng.normal(0, 12, size=p.shape)
    r = ratio_interval(m, p, statistical_se=0.01, systematic={"gauge_factor": 0.003, "load": 0.004})
    ref = np.linalg.lstsq(p.reshape(-1, 1), m.ravel(), rcond=None)[0][0]  # numpy reference
    np.testing.assert_allclose(r.ratio, ref, rtol=1e-12, atol=0)
    # Systematic part: ratio * sqrt(0.003^2 + 0.004^2) = 0.005 ratio; combined by GUM eq. 10.
    np.testing.assert_allclose(r.u_systematic, 0.005 * ref, rtol=1e-12, atol=0)
    np.testing.assert_allclose(r.u_combined, np.hypot(0.01, 0.005 * ref), rtol=1e-12, atol=0)
    np.testing.assert_allclose(
        [r.lower, r.upper], ref + np.array([-2, 2]) * r.u_combined, rtol=1e-12, atol=0
    )
    assert r.n == 30


def test_ratio_systematic_part_does_not_shrink_with_gauge_count():
    # JCGM 101:2008 Monte Carlo: every trial draws one gauge-factor-lot and one load-cell error
    # shared by all 40 gauges, plus independent scatter of sigma per gauge. The spread of the
    # slope must match sqrt(se^2 + (ratio u_rel)^2), not the value with u_rel / sqrt(40).
    # T = 20,000 trials: tolerance 4 standard errors of a standard deviation estimate (2.8 %).
    rng = np.random.default_rng(99)
    n, T, sigma, true_ratio, u_gf, u_load = 40, 20_000, 15.0, 1.05, 0.01, 0.008
    p = rng.uniform(100, 1200, n)
    common = (1 + rng.normal(0, u_gf, (T, 1))) * (1 + rng.normal(0, u_load, (T, 1)))
    m = true_ratio * p * common + rng.normal(0, sigma, (T, n))
    slopes = (m @ p) / (p @ p)
    se = sigma / np.sqrt(p @ p)  # OLS through the origin with known sigma
    r = ratio_interval(
        true_ratio * p, p, statistical_se=se, systematic={"gauge_factor": u_gf, "load": u_load}
    )
    np.testing.assert_allclose(slopes.std(ddof=1), r.u_combined, rtol=mc_rtol(T), atol=0)
    divided = np.hypot(se, r.u_systematic / np.sqrt(n))
    assert abs(slopes.std(ddof=1) / divided - 1) > 10 * mc_rtol(T)  # the test can tell them apart


def test_ratio_rejects_zero_predictions_and_unpaired_data():
    with pytest.raises(ModelError, match="every prediction is zero"):
        ratio_interval([1.0, 2.0], [0.0, 0.0], statistical_se=0.0, systematic={})
    with pytest.raises(StudyError, match="pair them"):
        ratio_interval([1.0, 2.0], [1.0], statistical_se=0.0, systematic={})


# --------------------------------------------------------------------------------------------
# Propagation through a data reduction (GUM eq. 10; JCGM 101:2008)


def test_propagate_linear_matches_gum_eq10_by_hand():
    # y1 = x1 + 2 x2, y2 = 3 x1 - x2 with u = (0.5, 2): u(y1)^2 = 0.25 + 16, u(y2)^2 = 2.25 + 4,
    # cov(y1, y2) = 1*3*0.25 + 2*(-1)*4 = -7.25.
    got = propagate_linear([[1.0, 2.0], [3.0, -1.0]], [0.5, 2.0])
    np.testing.assert_allclose(got.u, [np.sqrt(16.25), 2.5], rtol=1e-12, atol=0)
    np.testing.assert_allclose(got.covariance, [[16.25, -7.25], [-7.25, 6.25]], rtol=1e-12, atol=0)


def test_closed_form_rosette_matches_eigenvalues_of_the_strain_tensor():
    # Checks the test's own handbook formula against numpy: exx = ea, eyy = ec, gxy = 2eb-ea-ec.
    ea, eb, ec = 620.0, 180.0, -240.0
    tensor = np.array([[ea, (2 * eb - ea - ec) / 2], [(2 * eb - ea - ec) / 2, ec]])
    np.testing.assert_allclose(
        principal_rectangular(np.array([ea, eb, ec])),
        np.linalg.eigvalsh(tensor)[::-1],
        rtol=1e-12,
        atol=0,
    )


def test_rosette_principal_strain_uncertainty_matches_hand_jacobian():
    x, u = np.array([620.0, 180.0, -240.0]), np.array([4.0, 5.0, 3.0])
    got = propagate_function(principal_rectangular, x, u)
    J = principal_jacobian_by_hand(*x)
    # Central differences with h ~ 4e-3 µε: truncation and rounding below 1e-9 relative here.
    np.testing.assert_allclose(got.jacobian, J, rtol=0, atol=1e-8)
    np.testing.assert_allclose(got.u, np.sqrt((J**2 * u**2).sum(axis=1)), rtol=1e-8, atol=0)
    # scipy wants the variables on the first axis of its argument and of the result.
    ref = differentiate.jacobian(
        lambda z: np.moveaxis(principal_rectangular(np.moveaxis(z, 0, -1)), -1, 0), x
    )
    np.testing.assert_allclose(got.jacobian, ref.df, rtol=0, atol=1e-8)  # scipy reference


def test_rosette_propagation_is_vectorised_over_gauges_and_steps():
    rng = np.random.default_rng(5)
    x = rng.uniform(-700, 700, size=(2, 3, 3))
    u = rng.uniform(1, 6, size=(2, 3, 3))
    got = propagate_function(principal_rectangular, x, u)
    assert got.u.shape == (2, 3, 2) and got.covariance.shape == (2, 3, 2, 2)
    J = principal_jacobian_by_hand(*x[1, 2])
    np.testing.assert_allclose(
        got.u[1, 2], np.sqrt((J**2 * u[1, 2] ** 2).sum(axis=1)), rtol=1e-7, atol=0
    )  # central differences, see above


def test_rosette_propagation_agrees_with_monte_carlo():
    # Grid readings' u_D from the measurement budget, propagated to the principal strains, against
    # JCGM 101:2008 sampling of the readings (normal, M = 200,000). Tolerance 4 standard errors of
    # a standard deviation estimate (0.63 %); the linearisation error is O((u/R)^2) ~ 1e-4 here.
    rng = np.random.default_rng(2008)
    x = np.array([620.0, 180.0, -240.0])
    u_D = measurement_uncertainty(
        x, x, -0.3 * x, 0.0, 0.285, gauge_factor=0.005, transverse=0.0, daq_ue=2.0, daq_relative=0.0
    ).combined
    got = propagate_function(principal_rectangular, x, u_D)
    M = 200_000
    samples = principal_rectangular(rng.normal(x, u_D, size=(M, 3)))
    np.testing.assert_allclose(samples.std(axis=0, ddof=1), got.u, rtol=mc_rtol(M), atol=0)
    np.testing.assert_allclose(
        np.corrcoef(samples.T)[0, 1], got.covariance[0, 1] / np.prod(got.u), rtol=0, atol=0.01
    )


@pytest.mark.parametrize(
    ("call", "match"),
    [
        (lambda: propagate_linear([[1.0, 2.0]], [1.0, 2.0, 3.0]), "J must be"),
        (lambda: propagate_linear([[1.0]], [-1.0]), "uncertainty >= 0"),
        (lambda: propagate_function(lambda z: z.sum(axis=-1), [1.0, 2.0], [1.0, 1.0]), "f\\(x\\)"),
        (
            lambda: propagate_function(principal_rectangular, [1.0, 2.0, 3.0], [1.0] * 3, step=0.0),
            "step",
        ),
    ],
    ids=["mismatched-n", "negative-u", "f-not-vector", "zero-step"],
)
def test_propagation_rejects_bad_inputs(call, match):
    with pytest.raises(StudyError, match=match):
        call()
