"""Tests of correlate.readers.readings: gauge readings per load step from data-acquisition CSV files.

All files are invented examples written to tmp_path. Expected numbers come from Python's built-in
float() applied to the same decimal text (a correctly rounded decimal-to-binary conversion, IEEE 754
round-to-nearest), never from the reader itself.
"""

from __future__ import annotations

import hashlib
import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from correlate.core.errors import CorrelateWarning, ReadingsFormatError
from correlate.readers import readings as readings_module
from correlate.readers.readings import Readings, read_readings

GAUGES = {"SG-01": "SG-01", "SG-02": "SG-02", "SG-03": "SG-03"}
HEADER = ("step", "load_kN", "SG-01", "SG-02", "SG-03")
# Invented readings as decimal text: step, load [kN], three gauges [µε].
ROWS = [
    ("1", "0", "0.0", "-0.25", "1.5"),
    ("2", "12.5", "101.37", "-48.125", "250.0"),
    ("3", "25", "203.9", "-97.003", "499.875"),
    ("4", "37.5", "1.0e3", "-1.5E2", "7.31e-1"),
]
BOM = b"\xef\xbb\xbf"


def _reference() -> tuple[np.ndarray, np.ndarray]:
    # Python float() is the outside reference for what each decimal text means
    return (np.array([float(r[1]) for r in ROWS]),
            np.array([[float(x) for x in r[2:]] for r in ROWS]))


def _write(path, lines, *, newline="\n", encoding="utf-8", bom=b""):
    path.write_bytes(bom + newline.join(lines).encode(encoding) + newline.encode(encoding))
    return path


def _read(tmp_path, lines, *, gauges=None, loads=("load_kN",), **options):
    """Write ``lines`` to readings.csv (``options`` go to _write or read_readings) and read it."""
    write = {k: options.pop(k) for k in ("newline", "encoding", "bom") if k in options}
    path = _write(tmp_path / "readings.csv", lines, **write)
    return read_readings(path, gauges=GAUGES if gauges is None else gauges, loads=loads, **options)


@pytest.fixture(params=["c", "pyarrow"], ids=["c-engine", "pyarrow-engine"])
def engine(request, monkeypatch):
    """Run a test with each reading path: small files (pandas' C engine, text) and large ones
    (pyarrow, numbers parsed by type inference, other columns again as text)."""
    if request.param == "pyarrow":
        monkeypatch.setattr(readings_module, "_PYARROW_MIN_BYTES", 0)
    else:
        monkeypatch.setattr(readings_module, "_pyarrow_available", lambda: False)
    return request.param


def _comma_lines():
    return [",".join(HEADER)] + [",".join(r) for r in ROWS]


def _semicolon_lines():
    return [";".join(HEADER)] + [";".join(x.replace(".", ",") for x in r) for r in ROWS]


def _assert_reference(result: Readings):
    loads, gauges = _reference()
    # exact: the reader and float() must both round the same decimal text to the nearest double
    np.testing.assert_allclose(result.table["load_kN"].to_numpy(), loads, rtol=0, atol=0)
    np.testing.assert_allclose(result.table[list(GAUGES)].to_numpy(), gauges, rtol=0, atol=0)
    assert result.table["step"].tolist() == [1, 2, 3, 4]
    assert result.table["sequence"].tolist() == [0, 0, 0, 0]


def test_comma_file_values_equal_python_float(tmp_path, engine):
    result = _read(tmp_path, _comma_lines())
    _assert_reference(result)
    assert list(result.table.columns) == ["step", "sequence", "load_kN", *GAUGES]
    assert result.table["step"].dtype == np.int64
    assert result.lines.tolist() == [2, 3, 4, 5]
    assert result.flags.empty
    assert result.load_units == {"load_kN": ""}


def test_semicolon_file_with_decimal_commas_equals_point_values(tmp_path, engine):
    _assert_reference(_read(tmp_path, _semicolon_lines()))


def test_semicolon_decimal_commas_random_values(tmp_path):
    rng = np.random.default_rng(20240611)
    values = rng.normal(0.0, 800.0, size=(30, 3))
    texts = [[f"{v:.{int(rng.integers(0, 9))}f}" for v in row] for row in values]
    lines = ["step;load;A;B;C"] + [f"{i};{i};" + ";".join(t.replace(".", ",") for t in row)
                                    for i, row in enumerate(texts)]
    result = _read(tmp_path, lines, gauges={g: g for g in "ABC"}, loads=["load"])
    # exact: same decimal text, both conversions correctly rounded (Python float() reference)
    np.testing.assert_allclose(result.table[list("ABC")].to_numpy(),
                               [[float(t) for t in row] for row in texts], rtol=0, atol=0)


@pytest.mark.parametrize("engine", ["c", "pyarrow"], ids=["c-engine", "pyarrow-engine"])
def test_both_pandas_engines_give_reference_values(tmp_path, monkeypatch, engine):
    if engine == "pyarrow":
        pytest.importorskip("pyarrow")
        monkeypatch.setattr(readings_module, "_PYARROW_MIN_BYTES", 0)
    else:  # as on a machine without pyarrow
        monkeypatch.setattr(readings_module, "_pyarrow_available", lambda: False)
    lines = _semicolon_lines()
    lines[2] = lines[2].replace("-48,125", "OVER")
    lines[3] = lines[3].rsplit(";", 1)[0]  # a short row: its last cell is missing
    result = _read(tmp_path, lines)
    gauges = _reference()[1]
    gauges[1, 1] = gauges[2, 2] = np.nan
    # exact, NaN where the sentinel and the missing cell were: Python float() reference as above
    np.testing.assert_allclose(result.table[list(GAUGES)].to_numpy(), gauges, rtol=0, atol=0)
    assert result.flags[["gauge", "step", "value"]].values.tolist() == [["SG-02", 2, "OVER"]]


@pytest.mark.parametrize("unit", ["µε", "με", "ue", "uE", "um/m", "µm/m", "microstrain",
                                  "Micro-Strain", "ustrain", "µstrain", "[µε]", "UE"])
def test_units_row_with_microstrain_is_accepted(tmp_path, unit):
    # µm/m is 1e-6 m/m by the SI prefix micro (SI Brochure, 9th ed., table 7)
    lines = _comma_lines()
    lines.insert(1, f"-,kN,{unit},{unit},{unit}")
    result = _read(tmp_path, lines)
    _assert_reference(result)
    assert result.load_units == {"load_kN": "kN"}
    assert result.lines.tolist() == [3, 4, 5, 6]


@pytest.mark.parametrize("unit", ["mV/V", "m/m", "V", "%"],
                         ids=["mV-per-V", "strain", "volt", "percent"])
def test_units_row_with_other_unit_is_refused(tmp_path, unit):
    lines = _comma_lines()
    lines.insert(1, f",kN,µε,{unit},µε")
    expected = r"readings\.csv line 2, column SG-02: unit"
    with pytest.raises(ReadingsFormatError, match=expected) as err:
        _read(tmp_path, lines)
    assert repr(unit) in str(err.value)


def test_windows_line_endings(tmp_path):
    result = _read(tmp_path, _comma_lines(), newline="\r\n")
    _assert_reference(result)
    assert result.lines.tolist() == [2, 3, 4, 5]


def test_utf8_bom_is_not_part_of_first_column_name(tmp_path):
    _assert_reference(_read(tmp_path, _semicolon_lines(), bom=BOM))


def test_latin1_file_is_read(tmp_path):
    lines = _semicolon_lines()
    lines.insert(1, "-;kN·m;µe;µm/m;ue")  # 'µ' and '·' are single latin-1 bytes, invalid UTF-8
    result = _read(tmp_path, lines, encoding="latin-1")
    _assert_reference(result)
    assert result.load_units == {"load_kN": "kN·m"}


@pytest.mark.parametrize("text", ["-999999", "999999", "1E30", "-1e+30", "OVER", "ovr", "Open",
                                  "####", "NaN", "inf"])
def test_sentinel_becomes_nan_with_flag(tmp_path, text, engine):
    # common practice: data-acquisition systems write such codes for open or overranged channels
    lines = _comma_lines()
    lines[3] = f"3,25,203.9,{text},499.875"
    result = _read(tmp_path, lines)
    assert np.isnan(result.table.loc[2, "SG-02"])
    assert np.isfinite(result.table.drop(index=2)[list(GAUGES)].to_numpy()).all()
    assert result.flags.values.tolist() == [["SG-02", 3, 0, text, "sentinel"]]


def test_custom_sentinels_replace_the_defaults(tmp_path, engine):
    lines = _comma_lines()
    lines[3] = "3,25,-9999,-999999,499.875"
    result = _read(tmp_path, lines, sentinels=[-9999])
    assert np.isnan(result.table.loc[2, "SG-01"])
    # -999999 is no longer a sentinel: it is read as a number, exactly as float() reads it
    np.testing.assert_allclose(result.table.loc[2, "SG-02"], float("-999999"), rtol=0, atol=0)
    assert result.flags["value"].tolist() == ["-9999"]


def test_a_reading_no_strain_gauge_can_give_is_refused(tmp_path, engine):
    # 1e6 µε is 100 % strain: foil gauges are rated to a few percent (common practice) and a
    # constant-voltage quarter bridge cannot indicate 2/GF = 1e6 µε at GF 2 (Vishay TN-507's
    # output GF e / (4 + 2 GF e) < 1/2). Such a cell is an instrument code the sentinels do not
    # list, or not microstrain; passed on, the quarter-bridge correction turned 1e300 into a
    # plausible 272 µε. A load of 2e6 (newtons, say) is not a strain and is read.
    lines = _comma_lines()
    lines[2] = "2,2e6,1e300,-48.125,250.0"
    lines[4] = "4,37.5,1.0e3,-1.5e6,7.31e-1"
    with pytest.raises(ReadingsFormatError) as err:
        _read(tmp_path, lines)
    assert list(err.value.problems) == [
        "readings.csv line 3, column SG-01: 1e+300 µε is beyond any strain gauge's range "
        "(1e+06 µε is 100 % strain): an instrument's overrange code or not microstrain; list the "
        "value in [readings] sentinels or correct the cell",
        "readings.csv line 5, column SG-02: -1.5e+06 µε is beyond any strain gauge's range "
        "(1e+06 µε is 100 % strain): an instrument's overrange code or not microstrain; list the "
        "value in [readings] sentinels or correct the cell"]
    lines[2], lines[4] = "2,2e6,999999.5,-48.125,250.0", _comma_lines()[4]
    assert _read(tmp_path, lines).table.loc[1, "SG-01"] == 999999.5   # just inside: read
    result = _read(tmp_path, lines[:2] + ["2,12.5,1e300,-48.125,250.0"] + lines[3:],
                   sentinels=[1e300])
    assert np.isnan(result.table.loc[1, "SG-01"])   # listed as a sentinel: flagged, not refused


def test_blank_cell_is_nan_without_flag(tmp_path, engine):
    lines = _comma_lines()
    lines[2] = "2,12.5,101.37,,250.0"
    result = _read(tmp_path, lines)
    assert np.isnan(result.table.loc[1, "SG-02"])
    assert np.isfinite(result.table["SG-01"]).all()
    assert result.flags.empty


def test_ignored_columns_are_listed_once_in_file_order(tmp_path, engine):
    lines = ["time_s,step,temp_C,load_kN,SG-01,disp_mm,SG-02,SG-03"]
    lines += [f"{10 * i},{r[0]},21.5,{r[1]},{r[2]},0.{i},{r[3]},{r[4]}" for i, r in enumerate(ROWS)]
    result = _read(tmp_path, lines)
    _assert_reference(result)
    assert result.ignored == ("time_s", "temp_C", "disp_mm")


def test_gauge_ids_are_mapped_from_channel_columns(tmp_path, engine):
    lines = ["step,load_kN,CH1,CH2,CH3"] + [",".join(r) for r in ROWS]
    result = _read(tmp_path, lines, gauges={"SG-03": "CH1", "SG-01": "CH3"})
    gauges = _reference()[1]
    assert result.gauges == ("SG-03", "SG-01")
    # exact, float() reference: SG-03 holds channel CH1 (first gauge column), SG-01 holds CH3
    np.testing.assert_allclose(result.table["SG-03"].to_numpy(), gauges[:, 0], rtol=0, atol=0)
    np.testing.assert_allclose(result.table["SG-01"].to_numpy(), gauges[:, 2], rtol=0, atol=0)
    assert result.ignored == ("CH2",)


def test_sequence_column_allows_repeated_steps_across_runs(tmp_path):
    lines = ["sequence,step,load_kN,SG-01"]
    lines += [f"{s},{r[0]},{r[1]},{r[2]}" for s in (1, 2) for r in ROWS]
    result = _read(tmp_path, lines, gauges={"SG-01": "SG-01"})
    assert result.table["sequence"].tolist() == [1] * 4 + [2] * 4
    assert result.table["step"].tolist() == [1, 2, 3, 4] * 2


def test_comma_file_with_decimal_commas_is_refused_naming_the_row(tmp_path):
    lines = _comma_lines()
    lines[3] = "3,25,203,9,-97.003,499.875"  # 203,9 written with a decimal comma
    with pytest.raises(ReadingsFormatError, match=r"readings.csv line 4: 6 fields but the header "
                       r"has 5.*semicolons or decimal points"):
        _read(tmp_path, lines)


def test_non_numeric_cells_name_line_and_column(tmp_path):
    lines = _comma_lines()
    lines[3] = "3,25,203.9,-97.003,abc"
    lines[4] = "4,37.5,1.0e3,12..5,7.31e-1"
    with pytest.raises(ReadingsFormatError) as err:
        _read(tmp_path, lines)
    problems = err.value.problems
    assert problems[0].startswith("readings.csv line 4, column SG-03: 'abc' is not a number")
    assert problems[1].startswith("readings.csv line 5, column SG-02: '12..5' is not a number")


def test_duplicate_steps_name_steps_and_lines(tmp_path):
    with pytest.raises(ReadingsFormatError, match=r"step 2 appears 2 times \(lines 3, 6\)"):
        _read(tmp_path, [*_comma_lines(), ",".join(ROWS[1])])


def test_missing_gauge_columns_are_all_listed_with_closest_name(tmp_path):
    with pytest.raises(ReadingsFormatError) as err:
        _read(tmp_path, _comma_lines(), gauges={"SG-1": "SG-1", "SG-02": "SG-02", "G9": "SG-3"})
    problems = err.value.problems
    assert len(problems) == 2
    assert "no column 'SG-1' for gauge 'SG-1'; closest name: 'SG-01'" in problems[0]
    assert "no column 'SG-3' for gauge 'G9'; closest name: 'SG-03'" in problems[1]
    assert "the file has columns: step, load_kN, SG-01, SG-02, SG-03" in problems[1]


@pytest.mark.parametrize(("header", "expected"), [
    ("nr,load_kN,SG-01,SG-02,SG-03", "no column 'step'"),
    ("step,load,SG-01,SG-02,SG-03", "no column 'load_kN' for load 'load_kN'"),
], ids=["no-step", "no-load"])
def test_missing_step_or_load_column_is_refused(tmp_path, header, expected):
    with pytest.raises(ReadingsFormatError, match=expected):
        _read(tmp_path, [header] + [",".join(r) for r in ROWS])


def test_readings_in_strain_instead_of_microstrain_warn(tmp_path):
    # common practice: foil gauges read at most a few percent strain, so µε values all below 0.05
    # while the load changes mean the export is in m/m
    lines = ["step,load_kN,SG-01"]
    lines += [f"{i},{10 * i},{v}" for i, v in enumerate(["0", "4.2e-4", "-0.0012"])]
    with pytest.warns(CorrelateWarning, match=r"largest \|value\| 0\.0012"):
        _read(tmp_path, lines, gauges={"SG-01": "SG-01"})


def test_readings_in_percent_instead_of_microstrain_warn(tmp_path):
    # 1 % is 10,000 µε (the units' definition): percent readings of an elastic test stay below
    # 1 in magnitude while the loads change, which no gauge read in µε does outside the noise
    lines = ["step,load_kN,SG-01"]
    lines += [f"{i},{10 * i},{v}" for i, v in enumerate(["0", "0.042", "-0.12"])]
    with pytest.warns(CorrelateWarning, match=r"largest \|value\| 0\.12\) while the loads "
                      r"vary; the channels look like percent strain"):
        _read(tmp_path, lines, gauges={"SG-01": "SG-01"})
    lines = ["step,load_kN,SG-01"] + [f"{i},{10 * i},{v}" for i, v in enumerate(["0", "4.2", "-12"])]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _read(tmp_path, lines, gauges={"SG-01": "SG-01"})   # microstrain: no warning


def test_small_microstrain_readings_without_load_change_do_not_warn(tmp_path):
    lines = ["step,load_kN,SG-01"] + [f"{i},5,{v}" for i, v in enumerate(["0.01", "-0.02"])]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        _read(tmp_path, lines, gauges={"SG-01": "SG-01"})


@pytest.mark.parametrize("variant", ["comma", "semicolon-crlf-bom"])
def test_input_file_is_byte_identical_after_reading(tmp_path, variant):
    if variant == "comma":
        path = _write(tmp_path / "readings.csv", _comma_lines())
    else:
        path = _write(tmp_path / "readings.csv", _semicolon_lines(), newline="\r\n", bom=BOM)
    before = hashlib.sha256(path.read_bytes()).hexdigest()
    read_readings(path, gauges=GAUGES, loads=["load_kN"])
    assert hashlib.sha256(path.read_bytes()).hexdigest() == before


_JUNK = st.sampled_from(["", "OVER", "####", "1e400", "nan", "abc", '"', '"x;y"', "µε", " ",
                         "9" * 30, "3,5", "-2.5", "+.5e-3", "1_000", "٣"])
_NUMBER = st.one_of(st.integers(-10**7, 10**7).map(str), st.floats().map(repr))
_SAFE = st.one_of(_NUMBER, st.sampled_from(["", "OVER", "####", "nan", "-999999", "1e400"]))
_CELL = st.one_of(_NUMBER, _NUMBER, _NUMBER, _JUNK,
                  st.text(alphabet="0123456789.,;-+eE \"\t#\r\n", max_size=8))


@st.composite
def _csv_like(draw):
    sep = draw(st.sampled_from([",", ";", "\t"]))
    names = draw(st.permutations(["step", "load", "SG1", "x"]))
    cell = draw(st.sampled_from([_CELL, _SAFE]))  # _SAFE files mostly parse: later checks run
    step = st.just("") if cell is _SAFE else st.one_of(st.integers(0, 6).map(str), cell)
    rows = [[(draw(step) or str(k)) if n == "step" else draw(cell) for n in names]
            for k in range(draw(st.integers(1, 6)))]
    newline = draw(st.sampled_from(["\n", "\r\n", "\r"]))
    text = newline.join([sep.join(names)] + [sep.join(r) for r in rows])
    encoding = draw(st.sampled_from(["utf-8", "utf-8-sig", "latin-1", "utf-16"]))
    return text.encode(encoding, "replace")


@settings(derandomize=True, max_examples=200, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.one_of(st.binary(max_size=200), st.text(max_size=200).map(str.encode), _csv_like()))
def test_fuzz_returns_readings_or_raises_format_error(tmp_path, data):
    path = tmp_path / "fuzz.csv"  # one file, overwritten by each example
    path.write_bytes(data)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            outcome: Readings | ReadingsFormatError = read_readings(
                path, gauges={"SG1": "SG1"}, loads=["load"])
        except ReadingsFormatError as exc:  # any other exception fails the test
            outcome = exc
    if isinstance(outcome, ReadingsFormatError):
        assert all(line.startswith("fuzz.csv") for line in outcome.problems)
    else:
        assert len(outcome.lines) == len(outcome.table)
        assert list(outcome.table.columns) == ["step", "sequence", "load", "SG1"]
    assert all(issubclass(w.category, CorrelateWarning) for w in caught)


def test_parquet_file_gives_the_reference_values(tmp_path):
    # Reference: Python float() of the decimal texts (as for CSV), stored as doubles by pyarrow;
    # exact (tolerance 0): Parquet keeps the doubles bit for bit.
    import pyarrow as pa
    import pyarrow.parquet as pq

    loads, gauges = _reference()
    columns = {"step": pa.array([int(r[0]) for r in ROWS]), "load_kN": pa.array(loads),
               "note": pa.array(["a", "b", "c", "d"])}
    columns.update({g: pa.array(gauges[:, j]) for j, g in enumerate(GAUGES)})
    pq.write_table(pa.table(columns), tmp_path / "readings.parquet")
    result = read_readings(tmp_path / "readings.parquet", gauges=GAUGES, loads=("load_kN",))
    _assert_reference(result)
    assert result.ignored == ("note",)


def test_parquet_sentinels_and_bad_cells(tmp_path):
    # A numeric sentinel (common practice: -999999 for an open channel) and a text one in a text
    # column become NaN with a flag; a text cell that is no number is refused with its row.
    import pyarrow as pa
    import pyarrow.parquet as pq

    def write(sg2):
        pq.write_table(pa.table({"step": [1, 2, 3], "load_kN": [0.0, 1.0, 2.0],
                                 "SG-01": [0.0, -999999.0, 20.0], "SG-02": sg2}),
                       tmp_path / "r.pq")
        return read_readings(tmp_path / "r.pq", gauges={"SG-01": "SG-01", "SG-02": "SG-02"},
                             loads=("load_kN",))

    result = write(["0", "OVER", "31.5"])
    assert np.isnan(result.table["SG-01"][1]) and np.isnan(result.table["SG-02"][1])
    assert result.table["SG-02"][2] == 31.5
    assert sorted(zip(result.flags["gauge"], result.flags["value"], strict=True)) == [
        ("SG-01", "-999999"), ("SG-02", "OVER")]
    with pytest.raises(ReadingsFormatError, match=r"r\.pq line 3, column SG-02: 'x31' is not a"):
        write(["0", "1", "x31"])


def test_unreadable_parquet_is_one_clear_line(tmp_path):
    path = tmp_path / "readings.parquet"
    path.write_text("step,load\n1,2\n")
    with pytest.raises(ReadingsFormatError, match=r"readings\.parquet: cannot read it as Parquet"):
        read_readings(path, gauges=GAUGES, loads=("load_kN",))
