"""Hostile study inputs that used to give plausible numbers: each is now refused in one line.

Each case builds the small block study (tests/builders.py), breaks one thing that changes the
numbers without a syntax error, runs the command in-process and asserts exit 2, a first error line
that names the culprit (a regex), no traceback, the inputs unchanged (sha256) and no output or
staging folder left behind. The rules are the project's interface (README "Exit codes", issue 15);
the facts of each case come from the input it builds.
"""

from __future__ import annotations

import hashlib
import re
from collections.abc import Callable
from pathlib import Path

import pandas as pd
import pytest
from builders import block_readings, default_gauges, write_small_study

from correlate.commands.cli import main


def _edit(text: str, old: str, new: str) -> str:
    assert old in text, old
    return text.replace(old, new, 1)


def _study(folder: Path) -> Path:
    return write_small_study(folder)


def _toml(old: str, new: str) -> Callable[[Path], None]:
    def change(study: Path) -> None:
        study.write_text(_edit(study.read_text(), old, new))
    return change


def _append(text: str) -> Callable[[Path], None]:
    def change(study: Path) -> None:
        study.write_text(study.read_text() + text)
    return change


def _gauge_column(column: str, value: object, row: int = 1) -> Callable[[Path], None]:
    def change(study: Path) -> None:
        g = pd.read_csv(study.parent / "gauges.csv", keep_default_na=False, dtype=str)
        g.loc[:, column] = g.get(column, "")
        g.loc[row, column] = str(value)
        g.to_csv(study.parent / "gauges.csv", index=False)
    return change


def _readings(change_rows: Callable[[pd.DataFrame], pd.DataFrame]) -> Callable[[Path], None]:
    def change(study: Path) -> None:
        r = pd.read_csv(study.parent / "readings.csv")
        change_rows(r).to_csv(study.parent / "readings.csv", index=False)
    return change


def _blank_gauges(r: pd.DataFrame) -> pd.DataFrame:
    for g in default_gauges()["gauge"].iloc[:3]:
        r[g] = float("nan")
    return r


def _raw_readings(change_lines: Callable[[list[str]], list[str]]) -> Callable[[Path], None]:
    def change(study: Path) -> None:
        path = study.parent / "readings.csv"
        path.write_text("\n".join(change_lines(path.read_text().splitlines())) + "\n")
    return change


def _header_twice(lines: list[str]) -> list[str]:
    header = lines[0].split(",")
    header[header.index("S01")] = "S00"   # two columns named S00, none named S01
    return [",".join(header), *lines[1:]]


LOAD = '[[load]]\ncolumn = "P_kN"\ncase = "pull"\nreference = 10.0\n'
CASES = {
    "load-pasted-twice": (_append("\n" + LOAD), r"P_kN.*twice"),
    "case-without-load": (_toml('[[load]]\ncolumn = "S_kN"\ncase = "side"\nreference = 2.0\n',
                                ""), r"case 'side' has no \[\[load\]\]"),
    "components-repeated": (_toml('strain = "E_pull"\n', 'strain = "E_pull"\ncomponents = '
                                  '["xx", "yy", "zz", "xy", "xy", "xz"]\n'), r"components.*xy"),
    "kt-corrected-string": (_toml('zero = "first"\n', 'zero = "first"\nkt_corrected = "false"\n'),
                            r"kt_corrected.*true or false"),
    "band-string": (_toml('angle_tol = 2.0\n', 'angle_tol = 2.0\nband = "no"\n'),
                    r"band.*true or false"),
    "grid-points-boolean": (_toml('angle_tol = 2.0\n', 'angle_tol = 2.0\ngrid_points = true\n'),
                            r"grid_points"),
    "calibration-poisson-percent": (_toml('angle_tol = 2.0\n',
                                          'angle_tol = 2.0\ncalibration_poisson = 2.85\n'),
                                    r"calibration_poisson = 2\.85.*\[0, 0\.5\)"),
    "relative-as-percent": (_toml("relative = 0.10", "relative = 10"),
                            r"\[criteria\] relative = 10.*0\.10"),
    "floor-not-in-microstrain": (_toml("absolute_ue = 20.0", "absolute_ue = 1e6"),
                                 r"absolute_ue = 1e\+06"),
    "slope-band-not-around-1": (_append("slope = [1.1, 1.3]\n"), r"slope.*does not contain 1"),
    "min-healthy-above-1": (_append("min_healthy_fraction = 80\n"), r"min_healthy_fraction"),
    "override-conflict": (_append('\n[[override]]\ngauge = "S01"\naction = "exclude"\nreason = "a"\n'
                                  '[[override]]\ngauge = "S01"\naction = "reverse"\nreason = "b"\n'),
                          r"S01.*conflict"),
    "nu0-percent": (_gauge_column("nu0", 28.5), r"S01.*nu0 = 28\.5"),
    "gauge-factor-zero": (_gauge_column("gauge_factor", 0), r"S01.*gauge_factor = 0"),
    "daq-gauge-factor-negative": (_gauge_column("daq_gauge_factor", -2),
                                  r"S01.*daq_gauge_factor = -2"),
    "range-negative": (_gauge_column("range_ue", -5000), r"S01.*range_ue = -5000"),
    "angle-tol-negative": (_gauge_column("angle_tol", -1), r"S01.*angle_tol = -1"),
    "two-gauges-one-channel": (_gauge_column("channel", "S00"), r"S00.*S01.*channel 'S00'"),
    "readings-newest-first": (_readings(lambda r: r.iloc[::-1]), r"step order.*newest-first"),
    "one-data-row": (_readings(lambda r: r.iloc[:1]), r"readings\.csv.*only one row"),
    "all-loads-zero": (_readings(lambda r: r.assign(P_kN=0.0, S_kN=0.0)),
                       r"readings\.csv.*every load is zero"),
    "every-gauge-blank": (_readings(_blank_gauges), r"readings\.csv.*no gauge has a reading"),
    # a row that fails in several cells is one problem: one line naming the row
    "trailing-comment-line": (_raw_readings(lambda ls: [*ls, "# end of log, operator AB"]),
                              r"readings\.csv line \d+: 2 cells cannot be read.*comment line"),
    # a repeated header name: the mapping is not trusted, only the repetition is reported
    "gauge-column-twice": (_raw_readings(_header_twice),
                           r"readings\.csv: column 'S00' appears 2 times"),
    # the gauge map named as the readings: one line, not one per missing channel
    "readings-are-the-gauge-map": (_toml('file = "readings.csv"', 'file = "gauges.csv"'),
                                   r"gauges\.csv: none of the \d+ gauge channels"),
}


def _hashes(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in folder.iterdir() if p.is_file()}


@pytest.mark.parametrize("case", list(CASES), ids=list(CASES))
def test_refused_in_one_line_naming_the_culprit(case, tmp_path, capsys):
    folder = tmp_path / "study"
    folder.mkdir()
    study = _study(folder)
    change, culprit = CASES[case]
    change(study)
    before = _hashes(folder)
    capsys.readouterr()
    code = main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"), "--no-report"])
    err = capsys.readouterr().err
    errors = [line for line in err.splitlines() if line.startswith("error:")]
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1, err                    # one line, no more
    assert any(re.search(culprit, line) for line in errors), err
    assert "Traceback" not in err
    assert _hashes(folder) == before                                 # inputs unchanged
    assert not (tmp_path / "out").exists()
    assert not [p for p in tmp_path.iterdir() if ".partial-" in p.name]


def test_newest_first_readings_said_so_give_the_oldest_first_numbers(tmp_path):
    # The same log written both ways round gives the same gauges.csv once the study says so.
    runs = {}
    for order in ("oldest", "newest"):
        folder = tmp_path / order
        folder.mkdir()
        study = _study(folder)
        if order == "newest":
            _readings(lambda r: r.iloc[::-1])(study)
            _toml('zero = "first"\n', 'zero = "first"\norder = "newest-first"\n')(study)
        assert main(["--quiet", "run", str(study), "--out", str(folder / "out"),
                     "--no-report"]) == 0
        runs[order] = (folder / "out" / "gauges.csv").read_bytes()
    assert runs["oldest"] == runs["newest"]


def test_a_study_with_a_byte_order_mark_is_read(tmp_path):
    study = _study(tmp_path)
    study.write_bytes(b"\xef\xbb\xbf" + study.read_bytes())
    assert main(["--quiet", "check", str(study)]) == 0


def test_a_folder_given_as_the_study_is_named(tmp_path, capsys):
    _study(tmp_path)
    assert main(["check", str(tmp_path)]) == 2
    assert "is a folder" in capsys.readouterr().err


@pytest.mark.parametrize("value", ["nan", "inf", "-1"])
def test_compare_gate_tolerance_must_be_finite_and_not_negative(value, tmp_path, capsys):
    code = main(["compare", str(tmp_path), str(tmp_path), "--slope-tol", value])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--slope-tol" in err[0]


def test_readings_of_the_block_still_pass(tmp_path):
    # control: the unbroken study runs (the cases above are refused for what they break)
    study = _study(tmp_path)
    assert block_readings(default_gauges().iloc[[0, 1, 2]]).shape[0] == 5
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"), "--no-report"]) == 0


def test_thousands_dots_beside_decimal_commas_are_refused_not_guessed(tmp_path, capsys):
    # "1.512,2" means 1512.2 in a locale that groups thousands, 1.5122 nowhere: refuse, one line.
    study = _study(tmp_path)
    r = pd.read_csv(tmp_path / "readings.csv")
    lines = [";".join(r.columns)]
    for _, row in r.iterrows():
        cells = [str(int(row["step"]))] + [f"{v:.1f}".replace(".", ",") for v in row.iloc[1:]]
        lines.append(";".join(cells))
    lines[-2] = lines[-2].rsplit(";", 1)[0] + ";1.512,2"
    (tmp_path / "readings.csv").write_text("\n".join(lines) + "\n")
    assert main(["--quiet", "check", str(study)]) == 2
    err = [line for line in capsys.readouterr().err.splitlines() if line.startswith("error:")]
    assert len(err) == 1 and "'1.512,2'" in err[0] and "thousands" in err[0]


@pytest.mark.parametrize(("factor", "meaning"), [(25.4, "inches"), (1000.0, "metres")])
def test_a_gauge_map_in_other_units_is_refused_with_the_factor(factor, meaning, tmp_path, capsys):
    # Common practice: a gauge map exported in inches (25.4 mm per inch, exact by definition,
    # NIST SP 811 appendix B) or in metres against a millimetre model. Scaled down, the gauges
    # crowd near the block's corner at the origin, where some still snap to a face: the check
    # must see that all of them land on the surface only once multiplied by the factor.
    study = _study(tmp_path)
    g = pd.read_csv(tmp_path / "gauges.csv", keep_default_na=False, dtype=str)
    for c in "xyz":
        g[c] = (g[c].astype(float) / factor).map(repr)
    g.to_csv(tmp_path / "gauges.csv", index=False)
    before = _hashes(tmp_path)
    assert main(["check", str(study)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and f"multiplied by {factor:g}" in err[0] and meaning in err[0]
    assert _hashes(tmp_path) == before


def test_check_reports_the_problems_of_study_gauge_map_and_readings_together(tmp_path, capsys):
    # README: `check` reads everything and reports every problem, one line each: a study key
    # out of range, a gauge-map value out of range and a readings cell that is not a number.
    study = _study(tmp_path)
    _toml("relative = 0.10", "relative = 10")(study)
    _gauge_column("nu0", 28.5)(study)
    r = pd.read_csv(tmp_path / "readings.csv", dtype=str)
    r.loc[2, "S00"] = "12,5x"
    r.to_csv(tmp_path / "readings.csv", index=False)
    assert main(["check", str(study)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err
    assert re.search(r"\[criteria\] relative = 10", err)
    assert re.search(r"S01.*nu0 = 28\.5", err)
    assert re.search(r"readings\.csv.*S00", err)


def test_check_reports_a_case_no_load_drives_as_run_does(tmp_path, capsys):
    # `check` reads everything and reports every problem `run` would refuse: a superposed case
    # that no [[load]] drives adds nothing to any step
    study = _study(tmp_path)
    _toml('[[load]]\ncolumn = "S_kN"\ncase = "side"\nreference = 2.0\n', "")(study)
    assert main(["--quiet", "check", str(study)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["error: study.toml: case 'side' has no [[load]], so it would add nothing to "
                   "any step; add a [[load]] naming it, or remove the case from the study"]


def test_a_case_two_load_columns_drive_is_warned(tmp_path, capsys):
    # the side load's [[load]] names case 'pull' by a slip: 'pull' is superposed once per
    # column (P_kN / 10 + S_kN / 2 of it) and 'side' not at all; run refuses the undriven case,
    # and the warning says why
    study = _study(tmp_path)
    _toml('[[load]]\ncolumn = "S_kN"\ncase = "side"', '[[load]]\ncolumn = "S_kN"\ncase = "pull"')(
        study)
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"), "--no-report"]) == 2
    err = capsys.readouterr().err
    assert ("warning: study.toml: case 'pull' is driven by 2 load columns (P_kN, S_kN), so the "
            "model readings add it once per column") in err
    assert "case 'side' has no [[load]]" in err
