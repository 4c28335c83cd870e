"""The measurement chain wired into `correlate run`: leads, shunt, non-linearity, thermal output.

The raw readings are made here from the Wheatstone circuit itself (two voltage dividers, written
out below; Hoffmann, An Introduction to Measurements using Strain Gages, HBM 1989) with the
leads in the arms, the thermal output since the tare as a resistance change of 2.00 x (TO(T) -
TO(T_tare)) (thermal output is stated at an instrument gauge factor of 2.00 and referred to the
temperature of bridge balance: Vishay Micro-Measurements TN-504, from memory) and the gauge factor at temperature
GF(T) = GF (1 + tc/100 (T - 24)/100) (TN-504 sec. 3, from memory). `run` must recover the true
strains, which are the block's analytic model readings. Gauges, leads and coefficients are
invented.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from builders import BLOCK_LOADS, block_readings, default_gauges, write_small_study

from correlate.commands.cli import main

RG = 350.0                      # ohm, gauge and completion resistors
GF, GF_DAQ, TC = 2.11, 2.00, 1.2  # lot's gauge factor, acquisition setting, % per 100 degC
TO = (-28.0, 2.2, -0.055, 3.0e-4, -5.0e-7)  # invented thermal output a0..a4 [ue / degC^j]
TEMPS = (23.0, 35.0, 50.0, 80.0, 95.0)      # degC per step of BLOCK_LOADS (a heated test)
PRESTRAIN = (420.0, -260.0, 150.0)          # ue in each grid at the tare (bonding, preload)
LEADS = {"S00": ("3-wire", 4.0), "S01": ("2-wire", 2.5), "S02": ("3-wire", 6.0)}
STUDY = ('[[gauge_lot]]\nname = "L1"\nthermal_output = [-28.0, 2.2, -0.055, 3.0e-4, -5.0e-7]\n'
         'gauge_factor = 2.11\ngauge_factor_tc = 1.2\nrange_C = [-50.0, 150.0]\n'
         '[thermal]\ncolumn = "temp_C"\n')


def thermal_output(t):
    return sum(a * np.asarray(t, dtype=float) ** j for j, a in enumerate(TO))


def indicated(true_ue, t, wiring, rl):
    """What a constant-voltage quarter bridge shows at GF_DAQ, from the circuit.

    Arm 1 is the gauge with its lead(s), arm 2 the completion resistor with the second lead of a
    3-wire circuit (TT-612, from memory), arms 3 and 4 the instrument's half bridge. A 2-wire
    circuit is taken balanced (completion arm equal to the gauge arm at zero strain, as the
    bridge balance leaves it; common practice), where RG/(RG + 2 RL) is exact.
    """
    x = GF * (1 + TC / 100 * (np.asarray(t) - 24.0) / 100) * true_ue * 1e-6 \
        + 2.0 * (thermal_output(t) - thermal_output(TEMPS[0])) * 1e-6    # dR/R of the grid
    leads_in_gauge_arm = 2.0 if wiring == "2-wire" else 1.0
    r1 = RG * (1 + x) + leads_in_gauge_arm * rl
    r2 = RG + leads_in_gauge_arm * rl
    ratio = r1 / (r1 + r2) - RG / (RG + RG)
    return 4.0 * ratio / GF_DAQ * 1e6


def chain_study(folder, gauges, *, shunt=False, wiring_rows=LEADS):
    """The block study with the chain's columns and tables, and readings made by the circuit."""
    g = gauges.copy()
    g["gauge_ohm"] = RG
    g["wiring"] = [wiring_rows[n][0] for n in g["gauge"]]
    g["lead_ohm"] = [wiring_rows[n][1] for n in g["gauge"]]
    g["daq_gauge_factor"] = GF_DAQ
    g["lot"] = "L1"
    if shunt:
        # the shunt across the gauge, at the gauge end of the 3-wire leads, sees RG/(RG + RL)
        # (TN-514, from memory): a measured over expected response of exactly that
        g["shunt_gain"] = [RG / (RG + LEADS[n][1]) if n == "S02" else "" for n in g["gauge"]]
    truth = block_readings(gauges)                        # the model's readings: the truth
    names = list(gauges["gauge"])
    raw = pd.DataFrame({"step": truth["step"], "P_kN": truth["P_kN"], "S_kN": truth["S_kN"],
                        "temp_C": TEMPS})
    for j, n in enumerate(names):
        wiring, rl = LEADS[n]
        raw[n] = indicated(truth[n].to_numpy() + PRESTRAIN[j], np.array(TEMPS), wiring, rl)
    study = write_small_study(folder, gauges=g, extra_toml=STUDY)
    study.write_text(study.read_text(encoding="utf-8").replace(
        "[gauges]\n", '[gauges]\nnonlinearity = "quarter-bridge"\n'), encoding="utf-8")
    with open(folder / "readings.csv", "w", encoding="utf-8", newline="\n") as fh:
        fh.write(",".join(raw.columns) + "\n" + ",".join(["", "kN", "kN", "degC"]
                                                         + ["ue"] * len(names)) + "\n")
        raw.to_csv(fh, index=False, header=False, lineterminator="\n", float_format="%.12g")
    return study, truth, raw


@pytest.fixture
def gauges():
    return default_gauges().iloc[[0, 1, 2]].reset_index(drop=True)


def run_study(study, out):
    assert main(["--quiet", "run", str(study), "--out", str(out), "--no-report"]) == 0
    return (pd.read_csv(out / "gauges.csv"), pd.read_csv(out / "corrections.csv"),
            json.loads((out / "summary.json").read_text(encoding="utf-8")))


def test_run_recovers_true_strain_through_leads_nonlinearity_and_heat(tmp_path, gauges):
    study, truth, _ = chain_study(tmp_path, gauges)
    table, corrections, summary = run_study(study, tmp_path / "run")
    names = list(gauges["gauge"])
    measured = table.pivot(index="step", columns="gauge", values="measured_ue")[names]
    expected = truth.set_index("step")[names] - truth.set_index("step")[names].iloc[0]
    # 0.01 ue: the round-trip tolerance; the relations invert these circuits exactly and
    # the readings file carries 12 significant digits.
    assert np.allclose(measured, expected, rtol=0, atol=0.01)
    raw = table.pivot(index="step", columns="gauge", values="raw_ue")[names]
    assert np.abs(raw - expected).to_numpy().max() > 50.0     # the corrections matter here
    # the thermal output is large here: tens to hundreds of ue, the reason for the correction
    assert corrections["thermal_ue"].abs().min() > 50.0
    assert set(summary["measurement_chain"]["channels"][0]) >= {"gf_ratio", "lead_wire_factor"}
    assert "raw_ue" in table.columns


def test_corrections_table_holds_the_factors_applied(tmp_path, gauges):
    study, _, raw = chain_study(tmp_path, gauges, shunt=True)
    table, corrections, summary = run_study(study, tmp_path / "run")
    c = corrections.set_index("gauge")
    # gauge-factor ratio 2.00/2.11; 3-wire factor RG/(RG + RL) (TT-612, from memory); the CSV
    # writes factors to 6 significant digits (core/tables.FLOAT_DIGITS), so rel 1e-6
    assert c.loc["S00", "gf_ratio"] == pytest.approx(GF_DAQ / GF, rel=1e-6)
    assert c.loc["S00", "lead_wire_factor"] == pytest.approx(RG / (RG + 4.0), rel=1e-6)
    assert c.loc["S01", "lead_wire_factor"] == pytest.approx(RG / (RG + 2 * 2.5), rel=1e-6)
    assert np.isnan(c.loc["S02", "lead_wire_factor"])          # the shunt includes the leads
    assert "shunt" in c.loc["S02", "note"] and "lead-wire factor not applied" in c.loc["S02", "note"]
    ref = summary["reference_step"]["step"]
    # thermal output since the tare at the reference step, scaled to GF 2.11 (TN-504 Eq. 504.4,
    # from memory): 2.00/2.11 (TO(T_ref) - TO(T_tare))
    t_ref = float(raw.loc[raw["step"] == ref, "temp_C"].iloc[0])
    expected = (thermal_output(t_ref) - thermal_output(TEMPS[0])) * 2.0 / GF
    # microstrain columns are written to 0.001 ue
    assert c.loc["S00", "thermal_ue"] == pytest.approx(expected, rel=0, abs=5e-4)
    got = table.pivot(index="step", columns="gauge", values="raw_ue")
    tared = raw.set_index("step")[list(gauges["gauge"])]
    # raw_ue: as read, tared; written to 0.001 ue
    assert np.allclose(got, tared - tared.iloc[0], rtol=0, atol=5e-4)


def test_study_without_chain_keys_gives_the_outputs_of_before(tmp_path, gauges):
    # Without any chain key the old path runs: no raw_ue, no corrections.csv, no summary key;
    # a gauge map with the chain's columns left blank takes the chain path and must give the
    # same measured readings to the last digit written (nothing is applied).
    (tmp_path / "a").mkdir()
    plain = write_small_study(tmp_path / "a", gauges=gauges)
    out = tmp_path / "a" / "run"
    assert main(["--quiet", "run", str(plain), "--out", str(out), "--no-report"]) == 0
    assert not (out / "corrections.csv").exists()
    before = pd.read_csv(out / "gauges.csv")
    assert "raw_ue" not in before.columns
    assert "measurement_chain" not in json.loads((out / "summary.json").read_text("utf-8"))
    blank = gauges.copy()
    for col in ("gauge_ohm", "lead_ohm", "wiring", "shunt_gain", "lot", "nonlinearity"):
        blank[col] = ""
    (tmp_path / "b").mkdir()
    study = write_small_study(tmp_path / "b", gauges=blank)
    table, corrections, _ = run_study(study, tmp_path / "b" / "run")
    assert table["measured_ue"].tolist() == before["measured_ue"].tolist()
    assert (corrections["multiplier"] == 1.0).all()
    assert table.drop(columns="raw_ue").equals(before)


@pytest.mark.parametrize(("change", "expected"), [
    (lambda g, s: (g.assign(lead_ohm=-1.0), s), "lead_ohm = -1 is negative"),
    (lambda g, s: (g.assign(gauge_ohm=0.0), s), "gauge_ohm = 0 is zero"),
    (lambda g, s: (g.assign(wiring="4-wire"), s), "wiring '4-wire' is not known"),
    (lambda g, s: (g.assign(lot="L9"), s), "lot 'L9' is not defined"),
    (lambda g, s: (g, s.replace('[thermal]\ncolumn = "temp_C"\n', "")), "needs the gauge temperature"),
    (lambda g, s: (g, s.replace("range_C = [-50.0, 150.0]", "range_C = [150.0, -50.0]")),
     "range_C = [150.0, -50.0]"),
    (lambda g, s: (g, s.replace("gauge_factor = 2.11", 'gauge_factor = "2.11"')),
     "write it without quotes"),
    (lambda g, s: (g, s.replace('"quarter-bridge"', '"half"')), "nonlinearity = 'half'"),
], ids=["negative-lead", "zero-gauge", "wiring", "undefined-lot", "no-thermocouple",
        "range-reversed", "quoted-number", "nonlinearity-name"])
def test_bad_chain_values_are_one_clear_line(tmp_path, gauges, capsys, change, expected):
    study, _, _ = chain_study(tmp_path, gauges)
    g = pd.read_csv(tmp_path / "gauges.csv", dtype=str, keep_default_na=False)
    text = study.read_text(encoding="utf-8")
    g, text = change(g, text)
    g.to_csv(tmp_path / "gauges.csv", index=False)
    study.write_text(text, encoding="utf-8")
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    assert main(["run", str(study), "--out", str(tmp_path / "run"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert any(expected in line for line in err), err
    assert not (tmp_path / "run").exists()                      # nothing half-written
    assert before == {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}


@pytest.mark.parametrize(("unit", "hint"), [("degF", "(F - 32) / 1.8"), ("", "no unit")],
                         ids=["fahrenheit", "blank"])
def test_temperature_column_not_in_celsius_is_refused(tmp_path, gauges, capsys, unit, hint):
    study, _, _ = chain_study(tmp_path, gauges)
    path = tmp_path / "readings.csv"
    lines = path.read_text(encoding="utf-8").splitlines(keepends=True)
    lines[1] = lines[1].replace("degC", unit)
    path.write_text("".join(lines), encoding="utf-8")
    assert main(["run", str(study), "--out", str(tmp_path / "run"), "--no-report"]) == 2
    err = capsys.readouterr().err
    assert "column temp_C" in err and hint in err and "degC" in err


def test_temperature_outside_the_lot_range_is_refused_not_extrapolated(tmp_path, gauges, capsys):
    study, _, _ = chain_study(tmp_path, gauges)
    study.write_text(study.read_text(encoding="utf-8").replace("[-50.0, 150.0]", "[-50.0, 90.0]"),
                     encoding="utf-8")
    assert main(["run", str(study), "--out", str(tmp_path / "run"), "--no-report"]) == 2
    err = capsys.readouterr().err
    assert f"temperature 95 degC at step {len(BLOCK_LOADS) - 1}" in err and "not extrapolated" in err
