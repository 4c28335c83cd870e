"""The gauge map's bridge and arm columns and the study's [[bridge]] tables (readers.bridge_map).

The arm numbering checked here is Vo/Vex = R1/(R1+R2) - R4/(R3+R4), arms 1 and 3 adding
(Hoffmann 1989, An Introduction to Measurements using Strain Gages, HBM; from memory).
Bad input: one line per problem naming the gauge, bridge or table (the project's rule).
"""

from __future__ import annotations

import math

import pytest
from builders import default_gauges, write_small_study

from correlate.core.errors import GaugeError, ReadingsFormatError, StudyError
from correlate.readers.bridge_map import bridges_of, missing_channels
from correlate.readers.gauges import validate_gauges
from correlate.readers.study import read_study


def _map(bridge, arm):
    g = default_gauges().iloc[:4].copy()
    g["bridge"], g["arm"] = bridge, arm
    return validate_gauges(g.astype(str), source="gauges.csv")


def test_bridge_columns_give_arms_in_order_with_the_table_settings():
    gauges = _map(["HB", "HB", "", ""], ["2", "1", "", ""])
    (b,) = bridges_of(gauges, {"HB": ("CH7", 2.0, math.nan)})
    assert b.arms == ("S01", "S00", None, None)  # arm 1 is S01, arm 2 is S00
    assert (b.factor, b.column) == (2.0, "CH7")
    (b,) = bridges_of(gauges, {})
    assert (b.factor, b.column) == (1.0, "HB")  # defaults: factor 1, read from the id's column


def test_a_map_without_bridge_columns_reads_as_before():
    plain = validate_gauges(default_gauges().astype(str))
    assert "bridge" not in plain and bridges_of(plain, {}) == ()


@pytest.mark.parametrize(("bridge", "arm", "expected"), [
    (["HB", "HB", "HB", ""], ["1", "5", "3", ""], "gauge 'S01' in bridge 'HB': arm '5'"),
    (["HB", "HB", "HB", ""], ["1", "2", "2", ""], "'S01', 'S02' in bridge 'HB' share arm 2"),
    (["HB", "", "", ""], ["1", "", "", ""], "'S00' is the only arm of bridge 'HB'"),
])
def test_bad_bridge_columns_name_the_gauge(bridge, arm, expected):
    with pytest.raises(GaugeError) as exc:
        bridges_of(_map(bridge, arm), {})
    assert len(exc.value.problems) == 1 and expected in exc.value.problems[0]
    assert exc.value.problems[0].startswith("gauge map: ")


def test_a_bridge_table_naming_no_bridge_is_refused():
    with pytest.raises(GaugeError) as exc:
        bridges_of(_map(["HB", "HB", "", ""], ["1", "2", "", ""]), {"HX": ("", 1.0, math.nan)},
                   study="study.toml")
    (line,) = exc.value.problems
    assert line.startswith("study.toml: [[bridge]] 'HX' names no bridge") and "'HB'" in line


def test_missing_bridge_channel_in_the_readings_is_refused():
    (b,) = bridges_of(_map(["HB", "HB", "", ""], ["1", "2", "", ""]), {"HB": ("CH7", 1.0, math.nan)})
    with pytest.raises(ReadingsFormatError) as exc:
        missing_channels([b], ["step", "P_kN", "S02"], "readings.csv")
    (line,) = exc.value.problems
    assert "bridge 'HB'" in line and "'CH7'" in line
    missing_channels([b], ["CH7"], "readings.csv")  # present: accepted


def test_study_reads_bridge_tables_and_refuses_a_quoted_factor(tmp_path):
    study = read_study(write_small_study(
        tmp_path, extra_toml='[[bridge]]\nname = "HB"\nchannel = "CH7"\nfactor = 2\n'))
    (channel, factor, shunt), = study.bridge_tables.values()
    assert list(study.bridge_tables) == ["HB"] and (channel, factor) == ("CH7", 2.0)
    assert math.isnan(shunt)  # no shunt_gain given: none applies
    (tmp_path / "plain").mkdir()
    assert read_study(write_small_study(tmp_path / "plain")).bridge_tables == {}
    with pytest.raises(StudyError) as exc:
        read_study(write_small_study(tmp_path, extra_toml='[[bridge]]\nname = "HB"\nfactor = "2"\n'))
    assert any("[[bridge]] 'HB' factor = '2'" in p and "without quotes" in p
               for p in exc.value.problems)


@pytest.mark.parametrize(("column", "value"), [("lead_ohm", "1.5"), ("nonlinearity", "quarter-bridge")])
def test_quarter_bridge_corrections_on_a_bridge_arm_are_refused(column, value):
    # The lead-wire factor and the non-linearity 2 e / (2 - GF e) are quarter-bridge relations
    # (Vishay TT-612, TN-507); given on a bridge arm they would be applied to the wrong circuit.
    g = default_gauges().iloc[:4].copy()
    g["bridge"], g["arm"] = ["HB", "HB", "", ""], ["1", "2", "", ""]
    g["gauge_ohm"] = "350"
    g["wiring"] = ["3-wire" if column == "lead_ohm" else "", "", "", "3-wire"]
    g[column] = [value, "", "", "1.0" if column == "lead_ohm" else ""]
    with pytest.raises(GaugeError) as exc:
        bridges_of(validate_gauges(g.astype(str), source="gauges.csv"), {})
    lines = exc.value.problems  # lead_ohm comes with its wiring: one line for each column
    assert len(lines) == (2 if column == "lead_ohm" else 1)
    assert all("gauge 'S00' is an arm of a bridge" in line for line in lines)
    assert column in lines[0]
