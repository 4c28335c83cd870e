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
from builders import (
    BLOCK_LOADS,
    chain_study,
    default_gauges,
    write_small_study,
)
from builders import (
    CHAIN_GF as GF,
)
from builders import (
    CHAIN_GF_DAQ as GF_DAQ,
)
from builders import (
    CHAIN_RG as RG,
)
from builders import (
    CHAIN_TEMPS as TEMPS,
)
from builders import (
    chain_thermal_output as thermal_output,
)

from correlate.commands.cli import main


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


def test_temperature_outside_the_lot_range_is_flagged_not_extrapolated(tmp_path, gauges):
    # the last step (95 degC) lies beyond a range ending at 90 degC: that reading is left out
    # with a flag naming the temperature and the range; the other steps are corrected as before
    study, truth, _ = chain_study(tmp_path, gauges)
    study.write_text(study.read_text(encoding="utf-8").replace("[-50.0, 150.0]", "[-50.0, 90.0]"),
                     encoding="utf-8")
    table, _, _ = run_study(study, tmp_path / "run")
    flags = pd.read_csv(tmp_path / "run" / "flags.csv")
    hot = flags[flags["flag"] == "temperature-range"]
    last = len(BLOCK_LOADS) - 1
    assert sorted(hot["gauge"]) == sorted(gauges["gauge"]) and set(hot["step"]) == {last}
    assert hot["reason"].str.contains("95 degC is outside lot 'L1' range \\[-50, 90\\]").all()
    names = list(gauges["gauge"])
    measured = table.pivot(index="step", columns="gauge", values="measured_ue")[names]
    assert measured.loc[last].isna().all()
    expected = truth.set_index("step")[names] - truth.set_index("step")[names].iloc[0]
    # 0.01 ue as in the round trip: the steps inside the range are untouched by the flag
    assert np.allclose(measured.iloc[:last], expected.iloc[:last], rtol=0, atol=0.01)


def test_tare_temperature_outside_the_range_leaves_the_sequence_out(tmp_path, gauges, capsys):
    study, _, _ = chain_study(tmp_path, gauges)
    study.write_text(study.read_text(encoding="utf-8").replace("[-50.0, 150.0]", "[25.0, 150.0]"),
                     encoding="utf-8")
    # the tare row is at 23 degC: no tare temperature inside the range, so no reading can be
    # corrected; every loaded step is left out and the run has nothing to compare
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "run"), "--no-report"]) == 2
    assert "no gauge has a reading at a loaded step" in capsys.readouterr().err


def test_dead_channel_is_judged_as_read_not_after_the_thermal_correction(tmp_path, gauges):
    # An open channel reads flat whatever the temperature; the thermal-output correction would
    # make it vary by tens of ue, so dead (and railed) channels are judged on raw_ue (common
    # practice: channel checks are made on what the instrument read).
    study, _, raw = chain_study(tmp_path, gauges)
    raw["S01"] = -12.0
    with open(tmp_path / "readings.csv", "w", encoding="utf-8", newline="\n") as fh:
        fh.write(",".join(raw.columns) + "\n" + ",".join(["", "kN", "kN", "degC", "ue", "ue", "ue"])
                 + "\n")
        raw.to_csv(fh, index=False, header=False, lineterminator="\n", float_format="%.12g")
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "run"), "--no-report"]) == 0
    flags = pd.read_csv(tmp_path / "run" / "flags.csv")
    assert ((flags["gauge"] == "S01") & (flags["flag"] == "dead")).any()
    table = pd.read_csv(tmp_path / "run" / "gauges.csv")
    corrected = table.loc[table["gauge"] == "S01", "measured_ue"]
    assert np.ptp(corrected) > 5.0    # the corrected readings alone would not look dead


def test_check_reports_the_chain_problems_before_a_run(tmp_path, gauges, capsys):
    study, _, _ = chain_study(tmp_path, gauges)
    g = pd.read_csv(tmp_path / "gauges.csv", dtype=str, keep_default_na=False)
    g.loc[1, "lot"] = "L9"
    g.to_csv(tmp_path / "gauges.csv", index=False)
    assert main(["check", str(study)]) == 2
    assert "gauge 'S01': lot 'L9' is not defined" in capsys.readouterr().err
