"""Tests of the strain-gauge measurement chain (bridge, leads, non-linearity, temperature).

References are the Wheatstone circuit itself (two voltage dividers, Hoffmann 1989), the
published relations of Vishay Micro-Measurements Tech Notes TN-504 and TN-507 and Tech Tip
TT-612, and hand-worked values. The scenarios (gauges, leads, coefficients) are invented.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from correlate.core.errors import GaugeError, ReadingsFormatError
from correlate.measurement import chain
from correlate.measurement.chain import (
    bridge_output,
    bridge_ratio_exact,
    channel_factor,
    correct_channels,
    gauge_factor_at,
    lead_wire_factor,
    out_of_range,
    quarter_bridge_indicated_strain,
    quarter_bridge_true_strain,
    raw_from_true,
    thermal_correction,
    thermal_output,
    validate_bridges,
)

R0 = 350.0  # ohm, gauge and completion resistance
NU = 0.3  # Poisson's ratio of the invented steel cantilever
E_UE = 800.0  # microstrain at the top gauge
NAN = np.nan
# Invented thermal-output polynomial a0..a4 [microstrain / degC^j] and its range [degC].
TO_COEFFS = np.array([-30.0, 2.5, -0.05, 2e-4, -2e-7])
TO_RANGE = (-30.0, 150.0)


def divider_output(r1, r2, r3, r4):
    """Vo/Vex of the Wheatstone circuit, written out here (Hoffmann 1989, voltage dividers)."""
    return r1 / (r1 + r2) - r4 / (r3 + r4)


def arm_resistances(arms_ue, gauge_factor):
    """R = R0 (1 + GF e) for active arms, R0 for a completion resistor (NaN arm)."""
    e = np.nan_to_num(np.asarray(arms_ue, dtype=float), nan=0.0) * 1e-6
    return [R0 * (1.0 + gauge_factor * e[..., i]) for i in range(4)]


def second_order_term(x):
    """Second-order term of Vo/Vex in x_i = GF e_i.

    Expanding each divider, (1 + x1)/(2 + x1 + x2) = 1/2 + (x1 - x2)/4 + (x2^2 - x1^2)/8 + O(x^3),
    so Vo/Vex = sum(+-x_i)/4 + (x2^2 - x1^2 + x4^2 - x3^2)/8 + O(x^3). The quarter-bridge case
    gives the familiar relative non-linearity -GF e/2 of Vishay TN-507.
    """
    return (x[..., 1] ** 2 - x[..., 0] ** 2 + x[..., 3] ** 2 - x[..., 2] ** 2) / 8.0


def third_order_bound(x):
    """Bound on the neglected third-order rest: each divider's cubic term is s^2 (x_a - x_b)/16
    with s = x_a + x_b, at most (|x_a| + |x_b|)^3 / 16; twice the sum covers the fourth order."""
    return 2.0 * np.sum(np.abs(x), axis=-1) ** 3 / 16.0


ARRANGEMENTS = {
    # Hoffmann 1989 and Vishay TN-507 (bridge arrangement table): cantilever in bending with
    # gauges top (+e) and bottom (-e); bar in tension with axial (+e) and Poisson (-nu e) gauges.
    "half-bending": ([E_UE, -E_UE, NAN, NAN], 2.0 * E_UE),
    "full-bending": ([E_UE, -E_UE, E_UE, -E_UE], 4.0 * E_UE),
    "half-poisson-tension": ([E_UE, -NU * E_UE, NAN, NAN], E_UE * (1.0 + NU)),
    "full-poisson-tension": ([E_UE, -NU * E_UE, E_UE, -NU * E_UE], 2.0 * E_UE * (1.0 + NU)),
}


def test_every_name_in_all_exists():
    missing = [name for name in chain.__all__ if not hasattr(chain, name)]
    assert missing == []


# --- bridges ----------------------------------------------------------------------------------


@pytest.mark.parametrize(("arms", "expected"), ARRANGEMENTS.values(), ids=ARRANGEMENTS.keys())
def test_bridge_output_of_standard_arrangements(arms, expected):
    # Hoffmann 1989 / TN-507: indication e1 - e2 + e3 - e4; rtol 1e-12: a sum of four terms.
    assert_allclose(bridge_output(arms), expected, rtol=1e-12, atol=0)
    # Dividing by the arrangement's bridge factor gives back the surface strain.
    assert_allclose(bridge_output(arms, factor=expected / E_UE), E_UE, rtol=1e-12, atol=0)


@pytest.mark.parametrize(("arms", "expected"), ARRANGEMENTS.values(), ids=ARRANGEMENTS.keys())
def test_linear_bridge_matches_exact_circuit_to_second_order(arms, expected):
    gf = 2.1
    exact = bridge_ratio_exact(*arm_resistances(arms, gf))
    linear = gf / 4.0 * bridge_output(arms) * 1e-6
    x = gf * np.nan_to_num(np.array(arms), nan=0.0) * 1e-6
    # Circuit (Hoffmann 1989) versus the small-signal relation: they differ by the
    # second-order term; atol is the bound on the neglected third-order rest.
    assert_allclose(exact, linear + second_order_term(x), rtol=0, atol=third_order_bound(x))


def test_linear_bridge_matches_exact_circuit_for_random_arms():
    rng = np.random.default_rng(20240611)
    arms = rng.uniform(-3000.0, 3000.0, size=(200, 4))
    arms[rng.random(arms.shape) < 0.3] = np.nan  # completion resistors
    gf = 2.05
    exact = bridge_ratio_exact(*arm_resistances(arms, gf))
    linear = gf / 4.0 * bridge_output(arms) * 1e-6
    x = gf * np.nan_to_num(arms, nan=0.0) * 1e-6
    # Same expansion as above; atol per row is the third-order bound of that row.
    assert np.all(np.abs(exact - linear - second_order_term(x)) <= third_order_bound(x))
    # Without the second-order term most rows would fail: the check can fail.
    assert np.mean(np.abs(exact - linear) > third_order_bound(x)) > 0.5


@pytest.mark.parametrize("arrangement", ["half-bending", "full-bending"])
def test_bending_bridges_are_exactly_linear(arrangement):
    # TN-507: with equal and opposite arm changes the arm currents stay constant and the
    # output is linear. atol 1e-15 V/V: rounding of ratios near 0.5 is about 1e-16.
    arms, _ = ARRANGEMENTS[arrangement]
    gf = 2.0
    exact = bridge_ratio_exact(*arm_resistances(arms, gf))
    assert_allclose(exact, gf / 4.0 * bridge_output(arms) * 1e-6, rtol=0, atol=1e-15)


def test_bridge_ratio_exact_hand_values():
    # Hand arithmetic on the divider equation: 351/701 - 350/700 = 1/1402;
    # 120/240 - 119/240 = 1/240. rtol 1e-12: exact arithmetic up to rounding.
    assert_allclose(bridge_ratio_exact(351.0, 350.0, 350.0, 350.0), 1 / 1402, rtol=1e-12, atol=0)
    assert_allclose(bridge_ratio_exact(120.0, 120.0, 121.0, 119.0), 1 / 240, rtol=1e-12, atol=0)


def test_missing_arm_as_nan_equals_absent_arm_and_all_missing_is_nan():
    # Common practice: a completion resistor contributes no strain.
    assert bridge_output([300.0, -100.0]) == bridge_output([300.0, -100.0, NAN, NAN])
    assert np.isnan(bridge_output([NAN, NAN, NAN, NAN]))
    stacked = np.broadcast_to([300.0, -100.0, 50.0, NAN], (5, 3, 4))
    assert_allclose(bridge_output(stacked), np.full((5, 3), 450.0), rtol=1e-12, atol=0)


def test_validate_bridges_returns_arms_in_order():
    arms = validate_bridges(
        ["T1", "B1", "Q1", "T2", "B2", "T3", "B3"],
        ["BR1", "BR1", "", "BR2", "BR2", "BR2", "BR2"],
        [1, 2.0, NAN, "1", 2, 3, 4],
    )
    assert arms == {"BR1": ("T1", "B1", None, None), "BR2": ("T2", "B2", "T3", "B3")}


# --- non-linearity ----------------------------------------------------------------------------


def test_quarter_bridge_true_strain_matches_exact_circuit():
    gf = 2.1
    true_ue = np.linspace(-5000.0, 5000.0, 41)
    vo = divider_output(R0 * (1 + gf * true_ue * 1e-6), R0, R0, R0)
    indicated_ue = 4.0 * vo / gf * 1e6  # what a linear instrument set at gf shows
    # TN-507 correction against the circuit; atol 1e-6 ue: float64 rounding of the divider
    # (about 1e-16 V/V) is 2e-10 ue, while the effect corrected reaches 26 ue here.
    assert_allclose(quarter_bridge_true_strain(indicated_ue, gf), true_ue, rtol=0, atol=1e-6)
    assert_allclose(quarter_bridge_indicated_strain(true_ue, gf), indicated_ue, rtol=0, atol=1e-6)
    assert np.max(np.abs(indicated_ue - true_ue)) > 20.0


def test_quarter_bridge_hand_values():
    # TN-507 quarter bridge at GF 2: 1000 ue indicates 2000/2.002 = 999.000999... (0.1 % low),
    # -1000 ue indicates -2000/1.998. rtol 1e-12: exact arithmetic up to rounding.
    assert_allclose(quarter_bridge_indicated_strain(1000.0, 2.0), 2000 / 2.002, rtol=1e-12, atol=0)
    assert_allclose(
        quarter_bridge_indicated_strain(-1000.0, 2.0), -2000 / 1.998, rtol=1e-12, atol=0
    )


# --- leads ------------------------------------------------------------------------------------


def test_lead_wire_factor_hand_values():
    # RG/(RG + 2 RL) and RG/(RG + RL) by hand; rtol 1e-12: one division.
    f = lead_wire_factor([350.0, 350.0], [1.75, 1.75], ["2-wire", "3-wire"])
    assert_allclose(f, [350 / 353.5, 350 / 351.75], rtol=1e-12, atol=0)
    assert np.isnan(lead_wire_factor(350.0, NAN, "2-wire")[0])  # not applied


def test_lead_wire_factor_against_tech_tip_example():
    # TT-612 worked example: 120 ohm gauge, 1.7 ohm of leads in series (two-wire), "about
    # 1.5 %" loss of sensitivity; abs 0.002 because the note rounds its figure.
    loss = 1.0 - lead_wire_factor(120.0, 0.85, "2-wire")[0]
    assert abs(loss - 0.015) < 0.002


def _sensitivity(arms_at, gf, h_ue=10.0):
    """d(Vo/Vex)/de at zero strain over the ideal GF/4, by central difference."""
    return (arms_at(h_ue * 1e-6) - arms_at(-h_ue * 1e-6)) / (2 * h_ue * 1e-6) / (gf / 4.0)


@pytest.mark.parametrize("rl", [0.5, 2.0, 10.0], ids=["0.5ohm", "2ohm", "10ohm"])
def test_lead_wire_factor_matches_circuit_sensitivity(rl):
    gf = 2.0

    def three_wire(e):  # lead 1 in the gauge arm, lead 2 in the adjacent dummy arm
        return divider_output(R0 * (1 + gf * e) + rl, R0 + rl, R0, R0)

    def two_wire_balanced(e):  # both leads in the gauge arm, completion matched to it
        return divider_output(R0 * (1 + gf * e) + 2 * rl, R0 + 2 * rl, R0, R0)

    # Circuit sensitivity versus the lead-wire factor; rtol 1e-8: the central difference
    # truncation is about 1e-10 and the rounding about 1e-11, relative.
    assert_allclose(_sensitivity(three_wire, gf), lead_wire_factor(R0, rl, "3-wire"), rtol=1e-8)
    assert_allclose(
        _sensitivity(two_wire_balanced, gf), lead_wire_factor(R0, rl, "2-wire"), rtol=1e-8
    )


def test_two_wire_factor_is_first_order_for_unbalanced_completion():
    gf, rl = 2.0, 3.5
    r = rl / R0

    def two_wire(e):  # completion resistor R0, so the leads unbalance the bridge (tared out)
        return divider_output(R0 * (1 + gf * e) + 2 * rl, R0, R0, R0)

    # The circuit gives (RG/(RG + RL))^2, the factor RG/(RG + 2 RL): they agree to first order
    # in r = RL/RG; rtol r^2 is the neglected term (exact difference r^2/(1 + r)^2).
    assert_allclose(_sensitivity(two_wire, gf), lead_wire_factor(R0, rl, "2-wire"), rtol=r**2)


def test_shunt_gain_replaces_lead_factor():
    f = channel_factor(
        [0.95, 0.95, NAN], [0.99, 0.99, NAN], [0.98, NAN, NAN], gauges=["A", "B", "C"]
    )
    # Hand values: 0.95/0.98, 0.95/0.99 and 1; rtol 1e-12: one division.
    assert_allclose(f.multiplier, [0.95 / 0.98, 0.95 / 0.99, 1.0], rtol=1e-12, atol=0)
    assert "shunt gain" in f.notes[0] and "lead-wire factor not applied" in f.notes[0]
    assert "lead-wire factor 0.99 divided" in f.notes[1]
    assert f.notes[2] == "no factor applied"


# --- temperature ------------------------------------------------------------------------------


def test_thermal_output_polynomial_hand_values():
    # Hand arithmetic: T=0: -30; T=50: -30 + 125 - 125 + 25 - 1.25 = -6.25;
    # T=100: -30 + 250 - 500 + 200 - 20 = -100. rtol 1e-12: rounding of five terms.
    assert_allclose(
        thermal_output([0.0, 50.0, 100.0], TO_COEFFS), [-30.0, -6.25, -100.0], rtol=1e-12
    )
    per_channel = thermal_output(np.array([[0.0, 100.0]]), np.stack([TO_COEFFS, 2 * TO_COEFFS]))
    assert_allclose(per_channel, [[-30.0, -200.0]], rtol=1e-12)


def test_thermal_correction_scales_to_instrument_gauge_factor():
    # TN-504 Eq. (504.4): TO at GF 2.00 times 2.00/GF; (-100 - (-30)) * 2/2.1 by hand.
    assert_allclose(thermal_correction(100.0, 0.0, TO_COEFFS, 2.1), -70 * 2 / 2.1, rtol=1e-12)
    assert_allclose(thermal_correction(100.0, 0.0, TO_COEFFS, 2.0), -70.0, rtol=1e-12)


def test_gauge_factor_at_hand_values():
    # Linear variation in %/100 degC about 24 degC (TN-504 sec. 3; 24 degC reference of the
    # data sheets from memory): 2.10 (1 +- 0.01). rtol 1e-12: exact arithmetic.
    assert_allclose(gauge_factor_at([124.0, -76.0], 2.10, 1.0), [2.121, 2.079], rtol=1e-12)


def test_out_of_range_flags_outside_and_missing():
    t = [-50.0, -30.0, 0.0, 150.0, 151.0, NAN]
    assert out_of_range(t, TO_RANGE).tolist() == [True, False, False, False, True, True]


# --- the whole chain --------------------------------------------------------------------------


def test_chain_recovers_strain_from_three_wire_circuit_with_heat():
    # Physical model: the gauge's dR/R = GF(T) e + 2.00 (TO(T) - TO(T_tare)) 1e-6 (TN-504: thermal
    # output is stated at an instrument gauge factor of 2.00, GF varies linearly with T); the
    # 3-wire quarter bridge with leads is the circuit; the instrument shows 4 (Vo/Vex)/GF_daq.
    gf, gf_daq, tc, rl = 2.11, 2.00, 1.2, 2.0
    rng = np.random.default_rng(7)
    true_ue = rng.uniform(-4000.0, 4000.0, size=(30, 1))
    temp = np.linspace(24.0, 140.0, 30)[:, None]
    to = (thermal_output(temp, TO_COEFFS) - thermal_output(24.0, TO_COEFFS)) * 1e-6
    drr = gf * (1 + tc / 100 * (temp - 24.0) / 100) * true_ue * 1e-6 + 2.00 * to
    vo = divider_output(R0 * (1 + drr) + rl, R0 + rl, R0, R0)
    raw_ue = 4.0 * vo / gf_daq * 1e6
    result = correct_channels(
        raw_ue,
        gauges=["SG-1"],
        gf_ratio=[gf_daq / gf],
        lead_factor=lead_wire_factor(R0, rl, "3-wire"),
        nonlinear=[True],
        gauge_factor=[gf],
        temperature=temp,
        temperature_tare=[24.0],
        thermal_coefficients=TO_COEFFS,
        thermal_range_C=TO_RANGE,
        daq_gauge_factor=[gf_daq],
        gf_tc=[tc],
    )
    # atol 1e-6 ue: the chain inverts the circuit exactly; float64 rounding is ~1e-9 ue.
    assert_allclose(result.corrected_ue, true_ue, rtol=0, atol=1e-6)
    assert np.max(np.abs(raw_ue - true_ue)) > 50.0  # the corrections matter here


ROUND_TRIP = dict(
    gauges=["Q2W", "Q3W", "SHUNT", "FULL", "HEAT"],
    gf_ratio=[2.00 / 2.09, 2.00 / 2.13, 2.00 / 2.05, NAN, NAN],
    lead_factor=[350 / 353.0, 120 / 121.2, 0.99, NAN, NAN],
    shunt_gain=[NAN, NAN, 0.985, NAN, NAN],
    nonlinear=[True, True, True, False, None],
    gauge_factor=[2.09, 2.13, 2.05, NAN, 2.00],
    temperature_tare=[20.0, 20.0, 20.0, 20.0, 22.0],
    thermal_coefficients=np.array([TO_COEFFS, [NAN] * 5, [NAN] * 5, [NAN] * 5, 0.5 * TO_COEFFS]),
    thermal_range_C=TO_RANGE,
    daq_gauge_factor=[2.00, 2.00, 2.00, NAN, 2.00],
    gf_tc=[0.9, NAN, NAN, NAN, -1.1],
)


def _round_trip_case():
    rng = np.random.default_rng(314)
    true_ue = rng.uniform(-3000.0, 3000.0, size=(25, 5))
    true_ue[3, 2] = NAN  # a missing reading stays missing
    temperature = rng.uniform(-20.0, 120.0, size=(25, 5))
    return true_ue, temperature


def test_round_trip_raw_to_corrected_recovers_true_strain():
    true_ue, temperature = _round_trip_case()
    raw_ue = raw_from_true(true_ue, temperature=temperature, **ROUND_TRIP)
    result = correct_channels(raw_ue, temperature=temperature, **ROUND_TRIP)
    # The brief asks for 0.01 ue; atol 1e-6 ue is tighter, float64 rounding is ~1e-9 ue.
    assert_allclose(result.corrected_ue, true_ue, rtol=0, atol=1e-6, equal_nan=True)
    assert np.nanmax(np.abs(raw_ue - true_ue)) > 10.0  # the round trip is not trivial


def test_record_holds_every_term():
    true_ue, temperature = _round_trip_case()
    raw_ue = raw_from_true(true_ue, temperature=temperature, **ROUND_TRIP)
    r = correct_channels(raw_ue, temperature=temperature, **ROUND_TRIP)
    rebuilt = (
        raw_ue * r.multiplier + np.nan_to_num(r.nonlinearity_ue) - np.nan_to_num(r.thermal_ue)
    ) * np.where(np.isnan(r.gf_temperature_factor), 1.0, r.gf_temperature_factor)
    # The record reproduces the result; rtol 1e-12: the same arithmetic in another order.
    assert_allclose(rebuilt, r.corrected_ue, rtol=1e-12, atol=1e-9, equal_nan=True)
    applied = (
        ~np.isnan(r.nonlinearity_ue[0]),
        ~np.isnan(r.thermal_ue[0]),
        ~np.isnan(r.gf_temperature_factor[0]),
    )
    assert [a.tolist() for a in applied] == [
        [True, True, True, False, False],
        [True, False, False, False, True],
        [True, False, False, False, True],
    ]
    columns = r.as_columns()
    assert all(len(v) == 25 * 5 for v in columns.values())
    assert columns["gauge"][:5].tolist() == ROUND_TRIP["gauges"]
    assert "lead-wire factor not applied" in r.notes[2]


# --- bad values -------------------------------------------------------------------------------


def test_negative_and_zero_resistance_and_unknown_wiring_are_one_line_each():
    with pytest.raises(GaugeError) as err:
        lead_wire_factor(
            [350.0, 0.0, 120.0],
            [-0.4, 1.0, 1.0],
            ["2-wire", "3-wire", "4-wire"],
            gauges=["SG-1", "SG-2", "SG-3"],
        )
    lines = err.value.problems
    assert len(lines) == 3
    assert "SG-1" in lines[0] and "negative" in lines[0]
    assert "SG-2" in lines[1] and "not positive" in lines[1]
    assert "SG-3" in lines[2] and "'4-wire' is unknown" in lines[2]
    assert all("\n" not in line for line in lines)


def test_bridge_problems_are_raised_together():
    with pytest.raises(GaugeError) as err:
        validate_bridges(
            ["A1", "A2", "B1", "B2", "B3", "C1"],
            ["BA", "BA", "BB", "BB", "BB", "BC"],
            [1, 5, 1, 2, 2, 3],
        )
    lines = err.value.problems
    # a bridge with a bad arm is reported for that arm only, not also as a one-arm bridge
    assert len(lines) == 3
    assert "'A2'" in lines[0] and "'BA'" in lines[0] and "arm 5" in lines[0]
    assert "'B2', 'B3'" in lines[1] and "share arm 2" in lines[1]
    assert "'C1'" in lines[2] and "quarter bridge" in lines[2]
    assert not any("only arm of bridge 'BA'" in line for line in lines)


def test_bridge_ratio_exact_refuses_negative_resistance():
    with pytest.raises(GaugeError, match="R3"):
        bridge_ratio_exact(350.0, 350.0, -350.0, 350.0)


def test_thermal_correction_outside_range_is_refused():
    with pytest.raises(GaugeError, match=r"'SG-9'.*step 2.*outside the thermal range"):
        correct_channels(
            np.zeros((3, 1)),
            gauges=["SG-9"],
            gauge_factor=[2.0],
            temperature=[[20.0], [100.0], [160.0]],
            temperature_tare=[20.0],
            thermal_coefficients=TO_COEFFS,
            thermal_range_C=TO_RANGE,
        )


def test_thermal_correction_without_range_is_refused():
    with pytest.raises(GaugeError, match=r"'SG-9'.*thermal_range_C"):
        correct_channels(
            np.zeros((1, 1)),
            gauges=["SG-9"],
            gauge_factor=[2.0],
            temperature=[[20.0]],
            temperature_tare=[20.0],
            thermal_coefficients=TO_COEFFS,
        )


def test_inconsistent_gauge_factors_are_refused():
    with pytest.raises(GaugeError, match=r"'SG-4'.*gf_ratio = daq_gauge_factor / gauge_factor"):
        correct_channels(
            np.zeros((1, 1)),
            gauges=["SG-4"],
            gauge_factor=[2.10],
            daq_gauge_factor=[2.00],
            nonlinear=[True],
        )


def test_chain_problems_are_raised_together():
    with pytest.raises(GaugeError) as err:
        correct_channels(
            np.zeros((2, 2)), gauges=["SG-6", "SG-7"], gf_ratio=[-1.0, 1.0], nonlinear=[False, True]
        )
    lines = err.value.problems
    assert len(lines) == 2
    assert "'SG-6'" in lines[0] and "gf_ratio" in lines[0]
    assert "'SG-7'" in lines[1] and "needs the gauge factor" in lines[1]


def test_nonlinearity_without_gauge_factor_is_refused():
    with pytest.raises(GaugeError, match=r"'SG-5'.*needs the gauge factor"):
        correct_channels(np.zeros((1, 1)), gauges=["SG-5"], nonlinear=[True])


def test_a_quarter_bridge_reading_at_the_pole_of_its_correction_is_refused():
    # Vishay TN-507: a constant-voltage quarter bridge gives Vo/Vex = GF e / (4 + 2 GF e) < 1/2,
    # so it never indicates 2/GF or more; at GF 2.1, 952,381 µε. The inversion 2 e / (2 - GF e)
    # there is meaningless (negative or infinite), and must not become a number.
    raw = np.array([[0.0, 0.0], [900_000.0, 960_000.0]])
    with pytest.raises(GaugeError) as err:
        correct_channels(raw, gauges=["SG-1", "SG-2"], nonlinear=[True, True],
                         gauge_factor=[2.1, 2.1])
    assert list(err.value.problems) == [
        "gauge 'SG-2': reading 960000 µε is at or beyond what a constant-voltage quarter bridge "
        "can indicate (952381 µε at its gauge factor and leads); it is an overrange code, or the "
        "channel is not a quarter bridge: list the value in [readings] sentinels or set the "
        "channel's nonlinearity to none in the gauge map"]
    ok = correct_channels(raw[:, :1], gauges=["SG-1"], nonlinear=[True], gauge_factor=[2.1])
    e = 0.9   # the closed form of TN-507 at 900,000 µε indicated
    # rtol 1e-12: the same few operations in double precision, round-off only
    assert_allclose(ok.corrected_ue[1, 0], 2 * e / (2 - 2.1 * e) * 1e6, rtol=1e-12)


def test_readings_must_be_two_dimensional():
    with pytest.raises(ReadingsFormatError, match="steps, channels"):
        correct_channels(np.zeros(3))
