"""Tables written at a fixed precision, with text cells safe for spreadsheets."""

from __future__ import annotations

import csv

import pandas as pd

from correlate.core.tables import write_csv


def test_formula_like_ids_get_an_apostrophe_and_numbers_do_not(tmp_path):
    # The usual mitigation of CSV injection (OWASP, "CSV Injection"): a text cell starting with
    # = + - @ tab or carriage return is prefixed with an apostrophe; numbers stay numbers.
    df = pd.DataFrame({"gauge": ["=G02", "+G03", "-G04", "@G05", "G06", "-5"],
                       "case": pd.Categorical(["=1+1", "a", "a", "a", "a", "a"]),
                       "measured_ue": [1.0, -2.0, 3.0, 4.0, 5.0, 6.0]})
    write_csv(df, tmp_path / "t.csv")
    with open(tmp_path / "t.csv", newline="") as f:
        rows = list(csv.DictReader(f))
    assert [r["gauge"] for r in rows] == ["'=G02", "'+G03", "'-G04", "'@G05", "G06", "-5"]
    assert rows[0]["case"] == "'=1+1" and rows[1]["measured_ue"] == "-2"


def test_toml_dates_in_the_summary_are_written_as_iso_text(tmp_path):
    # TOML 1.0 (toml.io) local dates and date-times become datetime objects in tomllib;
    # the summary must hold them as ISO 8601 text, not crash json.dumps
    import datetime
    import json
    import tomllib

    from correlate.core.tables import write_json

    raw = tomllib.loads('[document]\nprepared_date = 2026-11-30\nissued = 2026-12-01T09:30:00\n')
    write_json({"document": raw["document"]}, tmp_path / "s.json")
    back = json.loads((tmp_path / "s.json").read_text(encoding="utf-8"))
    assert back["document"] == {"prepared_date": "2026-11-30", "issued": "2026-12-01T09:30:00"}
    assert isinstance(raw["document"]["prepared_date"], datetime.date)


def test_round_off_is_written_as_zero_and_no_negative_zero(tmp_path):
    # 6.5e-17 beside 45 is the round-off of a double (machine epsilon 2.2e-16 times the
    # operands, IEEE 754 binary64), not a figure; -0 is a sign of round-off too. A column whose
    # values are all tiny keeps them: it is their own scale.
    df = pd.DataFrame({"angle_deg": [6.5e-17, 45.0, -1e-15], "ratio": [1e-30, 2e-30, 3e-30],
                       "delta_ue": [-6.5e-17, 12.0, -0.0004]})
    write_csv(df, tmp_path / "t.csv")
    lines = (tmp_path / "t.csv").read_text().splitlines()
    assert lines[1:] == ["0,1e-30,0", "45,2e-30,12", "0,3e-30,0"]
