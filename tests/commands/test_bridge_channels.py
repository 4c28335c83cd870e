"""Bridge channels through predict and check (run: tests/commands/test_bridge_run.py) (gauge-map bridge and arm, [[bridge]]).

The block of tests/builders.write_block_study carries case 'pull': e_xx = 1e-3 (1 + 0.1 x),
e_yy = e_zz = -0.3 e_xx (an analytic field the tests set, not the tool's). A Poisson half bridge
(arm 1 along x, arm 2 along y at one point, Kt = 0) reads e_xx - e_yy = 1.3 e_xx (Hoffmann 1989,
the Poisson half bridge; from memory); at x = 2: 1.3 x 1.2e-3 = 1560 microstrain. The field is
linear along each grid, so the grid average is the centre value (elementary calculus).
"""

from __future__ import annotations

import pandas as pd
import pytest
from builders import write_block_study

from correlate.commands.cli import main
from correlate.measurement.bridge import bridge_output

ARMS = [dict(gauge="PA", x=2.0, y=1.5, z=2.0, dir_x=1, dir_y=0, dir_z=0, length=0.3, kt=0.0),
        dict(gauge="PT", x=2.0, y=1.5, z=2.0, dir_x=0, dir_y=1, dir_z=0, length=0.3, kt=0.0),
        dict(gauge="Q1", x=1.0, y=1.0, z=2.0, dir_x=1, dir_y=0, dir_z=0, length=0.3, kt=0.0)]


def _predict(folder, gauges, extra=""):
    folder.mkdir()
    study = write_block_study(folder, gauges=pd.DataFrame(gauges), extra_toml=extra)
    assert main(["--quiet", "predict", str(study), "--out", str(folder / "out")]) == 0
    return (folder / "out" / "model_readings.csv").read_bytes()


def test_poisson_half_bridge_is_predicted_beside_its_arms(tmp_path):
    plain = _predict(tmp_path / "plain", ARMS)
    bridged = [dict(a, bridge="PB" if a["gauge"] != "Q1" else "",
                    arm={"PA": 1, "PT": 2}.get(a["gauge"], "")) for a in ARMS]
    text = _predict(tmp_path / "bridge", bridged, '[[bridge]]\nname = "PB"\nfactor = 1\n')
    table = pd.read_csv(tmp_path / "bridge" / "out" / "model_readings.csv")
    row = table[(table["gauge"] == "PB") & (table["case"] == "pull")].iloc[0]
    # tolerance 1e-9 microstrain: exact closed form, round-off only
    assert row["predicted_ue"] == pytest.approx(1560.0, abs=1e-9)
    assert row["point_ue"] == pytest.approx(1560.0, abs=1e-9)
    assert row["band_low_ue"] <= row["predicted_ue"] <= row["band_high_ue"]
    assert row["band_low_ue"] < row["band_high_ue"]  # the study's position and angle tolerances
    assert (row["element"], row["cell_type"]) == (-1, "bridge")
    # the arms keep their own rows, unchanged: only the bridge's rows are added
    old = pd.read_csv(tmp_path / "plain" / "out" / "model_readings.csv")
    pd.testing.assert_frame_equal(table[table["gauge"] != "PB"].reset_index(drop=True), old,
                                  check_dtype=False)  # snap_distance 0 reads as int without NaN
    assert text != plain


def test_blank_bridge_columns_give_byte_identical_outputs(tmp_path):
    # Interface stability (the project's rule): a map whose bridge and arm columns are blank
    # reads as one without them.
    plain = _predict(tmp_path / "plain", ARMS)
    blank = _predict(tmp_path / "blank", [dict(a, bridge="", arm="") for a in ARMS])
    assert blank == plain


def test_check_reports_a_bridge_table_naming_no_bridge(tmp_path, capsys):
    study = write_block_study(tmp_path, gauges=pd.DataFrame(ARMS),
                              extra_toml='[[bridge]]\nname = "HX"\n')
    assert main(["--quiet", "check", str(study)]) == 2
    err = capsys.readouterr().err
    assert "[[bridge]] 'HX' names no bridge" in err


def test_round_trip_arms_through_the_test_side_relation_give_the_bridge(tmp_path):
    # Round trip: the arms' predicted readings put through the test side's bridge relation
    # (measurement.bridge.bridge_output, (e1 - e2 + e3 - e4)/factor, Hoffmann 1989) give the
    # model side's bridge reading for every case; factor 2 here. Round-off tolerance 1e-9 ue.
    bridged = [dict(a, bridge="PB" if a["gauge"] != "Q1" else "",
                    arm={"PA": 1, "PT": 2}.get(a["gauge"], "")) for a in ARMS]
    _predict(tmp_path / "rt", bridged, '[[bridge]]\nname = "PB"\nfactor = 2\n')
    table = pd.read_csv(tmp_path / "rt" / "out" / "model_readings.csv").set_index(["case", "gauge"])
    for case in ("pull", "side"):
        arms = [table.loc[(case, g), "predicted_ue"] for g in ("PA", "PT")]
        assert float(bridge_output(arms, factor=2.0)) == pytest.approx(
            table.loc[(case, "PB"), "predicted_ue"], abs=1e-9)


def test_each_channel_has_one_centre_point_at_its_first_arm(tmp_path):
    # Two bridges and a single grid between them: the channel operator (a bridge read as its
    # one channel) gives one centre sample point per channel, a bridge's at its first arm (where
    # the gauge map places it). It used to list every arm's centre, so the second bridge took
    # the first bridge's second arm. The rotation at the gauge centres is read through it.
    from correlate.model_readings.channels import compared_model
    from correlate.model_readings.model import prepare
    from correlate.readers.study import read_study

    arms = [dict(ARMS[1], bridge="PB", arm=2), dict(ARMS[0], bridge="PB", arm=1),
            dict(ARMS[2], bridge="", arm=""),
            dict(ARMS[0], gauge="RA", x=3.0, y=0.5, bridge="RB", arm=1),
            dict(ARMS[1], gauge="RT", x=3.0, y=0.5, bridge="RB", arm=2)]
    study = write_block_study(tmp_path, gauges=pd.DataFrame(arms), extra_toml=(
        '[[bridge]]\nname = "PB"\nfactor = 1\n[[bridge]]\nname = "RB"\nfactor = 1\n'))
    model = prepare(read_study(study))
    grid = dict(zip(model.operator.gauges, model.operator.centre_points, strict=True))
    channels = compared_model(model).operator
    assert channels.gauges == ["Q1", "PB", "RB"]
    assert list(channels.centre_points) == [grid["Q1"], grid["PA"], grid["RA"]]
