"""Bridge channels compared by run (gauge-map bridge and arm, [[bridge]] factor and shunt_gain).

The block of tests/builders.write_block_study: case 'pull' e_xx = 1e-3 (1 + 0.1 x),
e_yy = e_zz = -0.3 e_xx; case 'side' a shear-dominated field (analytic fields the tests set, not
the tool's). Every grid here has Kt = 0, so a grid indicates the strain along it. The fields are
linear along each grid, so the grid average is the centre value (elementary calculus).

Forward relations used to make the raw readings (the inverse of what run applies):
- bridge output (e1 - e2 + e3 - e4) / factor over the active arms (K. Hoffmann, An Introduction to
  Measurements using Strain Gages, HBM 1989, the Wheatstone bridge chapter; from memory);
- the acquisition reads gauge_factor / daq_gauge_factor times the strain (the indicated strain
  scales with the gauge factor: common practice), times the polarity;
- a shunt calibration that reads shunt_gain times the expected response means the channel reads
  shunt_gain times the strain (Vishay Micro-Measurements Tech Note TN-514; from memory).
"""

from __future__ import annotations

import json
import re

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import BLOCK_LOADS, block_indicated, solid_mesh, write_block_study

from correlate.commands.cli import main
from correlate.measurement.bridge import bridge_output

LOADS = np.asarray(BLOCK_LOADS, dtype=float)
FACTORS = np.c_[LOADS[:, 0] / 10.0, LOADS[:, 1] / 2.0]  # write_block_study's references


def _grid(gauge, x, y, z, d, **more):
    return dict(gauge=gauge, x=x, y=y, z=z, dir_x=d[0], dir_y=d[1], dir_z=d[2], length=0.3,
                kt=0.0, **more)


POISSON_HALF = [_grid("PA", 2.0, 1.5, 2.0, (1, 0, 0), bridge="PB", arm=1,
                      gauge_factor=2.10, daq_gauge_factor=2.00, polarity=-1),
                _grid("PT", 2.0, 1.5, 2.0, (0, 1, 0), bridge="PB", arm=2,
                      gauge_factor=2.10, daq_gauge_factor=2.00, polarity=-1),
                _grid("Q1", 1.0, 1.0, 2.0, (1, 0, 0), bridge="", arm="")]


def _true(gauges: pd.DataFrame) -> np.ndarray:
    """True (indicated, Kt = 0) strain of every grid per step [microstrain], both cases."""
    return FACTORS @ np.vstack([block_indicated(gauges, "pull"), block_indicated(gauges, "side")])


def _run(folder, gauges, readings, extra="", report=False):
    folder.mkdir(exist_ok=True)
    study = write_block_study(folder, gauges=pd.DataFrame(gauges), readings_rows=readings,
                              extra_toml=extra)
    args = ["--quiet", "run", str(study), "--out", str(folder / "out")]
    return main(args + ([] if report else ["--no-report"]))


def _readings(columns: dict, side: bool = True) -> pd.DataFrame:
    """Readings rows at LOADS (without case 'side' when ``side`` is False)."""
    return pd.DataFrame({"step": np.arange(len(LOADS)), "P_kN": LOADS[:, 0],
                         "S_kN": LOADS[:, 1] * side, **columns})


def test_round_trip_recovers_the_bridge_strain(tmp_path):
    # Invented true strains (the block's fields) -> the raw bridge channel by the forward
    # relations (module docstring), with a tare offset of 37 ue -> run recovers the bridge's
    # strain. Tolerance 0.01 ue: the round-trip requirement (CSV round-off is ~1e-12).
    g = pd.DataFrame(POISSON_HALF)
    true = _true(g)
    bridge = np.asarray(bridge_output(np.c_[true[:, 0], true[:, 1]], factor=2.0))
    raw = bridge * 0.98 * (2.10 / 2.00) * -1 + 37.0
    extra = '[[bridge]]\nname = "PB"\nchannel = "CH7"\nfactor = 2\nshunt_gain = 0.98\n'
    assert _run(tmp_path, POISSON_HALF, _readings({"CH7": raw, "Q1": true[:, 2]}), extra) == 0
    table = pd.read_csv(tmp_path / "out" / "gauges.csv")
    pb = table[table["gauge"] == "PB"]
    assert len(pb) == len(LOADS) and (table["gauge"] == "PA").sum() == 0  # one channel, no arms
    np.testing.assert_allclose(pb["measured_ue"], bridge - bridge[0], atol=0.01)
    # the model reading is the same combination of the arms' model readings
    np.testing.assert_allclose(pb["predicted_ue"], bridge, atol=0.01)
    assert set(pb["status"]) <= {"pass", "tare", "zero-load"} and set(pb["arms"]) == {"1:PA 2:PT"}
    assert set(table.loc[table["gauge"] == "Q1", "arms"].fillna("")) == {""}
    corrections = pd.read_csv(tmp_path / "out" / "corrections.csv").set_index("gauge")
    assert corrections.loc["PB", "shunt_gain"] == pytest.approx(0.98, abs=1e-12)


def test_poisson_full_bridge_reads_two_one_plus_nu_times_the_axial_strain(tmp_path):
    # Poisson full bridge in tension: arms 1 and 3 along the load on opposite faces, arms 2 and 4
    # across it; output 2 (1 + nu) e (Hoffmann 1989, the full-bridge arrangements; from memory).
    # Case 'pull' has e_yy = -0.3 e_xx everywhere, so at x = 2 the bridge reads
    # 2 x 1.3 x 1.2e-3 x load factor (case 'side' not loaded). Tolerance 0.01 ue (round-off).
    arms = [_grid("A1", 2.0, 1.5, 2.0, (1, 0, 0), bridge="FB", arm=1),
            _grid("A2", 2.0, 1.5, 2.0, (0, 1, 0), bridge="FB", arm=2),
            _grid("A3", 2.0, 1.5, 0.0, (1, 0, 0), bridge="FB", arm=3),
            _grid("A4", 2.0, 1.5, 0.0, (0, 1, 0), bridge="FB", arm=4)]
    expected = 2 * 1.3 * 1.2e3 * FACTORS[:, 0]
    assert _run(tmp_path, arms, _readings({"FB": expected}, side=False)) == 0
    fb = pd.read_csv(tmp_path / "out" / "gauges.csv")
    np.testing.assert_allclose(fb["predicted_ue"], expected, atol=0.01)
    assert set(fb["arms"]) == {"1:A1 2:A2 3:A3 4:A4"}


def _cantilever(folder, p_n: float) -> tuple[float, float]:
    """The block as a cantilever of length L = 4 mm clamped at x = 0 with a tip load P [N]:
    e_xx = M(x) (z - c) / (E I), M = P (L - x), c = h/2 = 1, I = b h^3 / 12 = 2 mm^4 (b = 3,
    h = 2), e_yy = e_zz = -nu e_xx (Euler-Bernoulli beam theory, Timoshenko & Gere, Mechanics of
    Materials). Written over the study's case 'pull'; returns the surface strain at x = 2 and
    the tip load used."""
    mesh = solid_mesh("hexahedron20", n=(4, 3, 2))
    x = mesh.points
    e, nu, length, c, inertia = 70000.0, 0.3, 4.0, 1.0, 2.0
    bend = np.zeros((len(x), 6))
    bend[:, 0] = p_n * (length - x[:, 0]) * (x[:, 2] - c) / (e * inertia)
    bend[:, 1] = bend[:, 2] = -nu * bend[:, 0]
    meshio.write(folder / "block.vtu", meshio.Mesh(x, [("hexahedron20", mesh.blocks[0][1])],
                                                   point_data={"E_pull": bend,
                                                               "E_side": np.zeros_like(bend)}))
    return p_n * (length - 2.0) * c / (e * inertia)


def test_bending_half_bridge_reads_twice_the_surface_strain(tmp_path):
    # Bending half bridge: arm 1 on the tension face, arm 2 on the compression face, factor 1:
    # e1 - e2 = 2 e_surface (Hoffmann 1989, bending half bridge; beam theory for e_surface).
    # Tolerance 0.01 ue: the bilinear field is exact on quadratic hexahedra (round-off only).
    arms = [_grid("T", 2.0, 1.5, 2.0, (1, 0, 0), bridge="HB", arm=1),
            _grid("B", 2.0, 1.5, 0.0, (1, 0, 0), bridge="HB", arm=2)]
    folder = tmp_path
    study = write_block_study(folder, gauges=pd.DataFrame(arms), readings_rows=_readings(
        {"HB": np.zeros(len(LOADS))}))
    surface = _cantilever(folder, p_n=70.0)  # 1e-3 at x = 2
    expected = 2 * surface * 1e6 * FACTORS[:, 0]
    _readings({"HB": expected}).to_csv(folder / "readings.csv", index=False)
    assert main(["--quiet", "run", str(study), "--out", str(folder / "out"), "--no-report"]) == 0
    hb = pd.read_csv(folder / "out" / "gauges.csv")
    assert surface == pytest.approx(1e-3, rel=1e-12)
    np.testing.assert_allclose(hb["predicted_ue"], expected, atol=0.01)
    np.testing.assert_allclose(hb["measured_ue"], expected, atol=0.01)
    # the arms are moved together: the band of the bridge holds the nominal reading and has width
    loaded = hb[hb["status"] == "pass"]
    assert (loaded["band_low_ue"] <= loaded["predicted_ue"] + 1e-9).all()
    assert (loaded["band_high_ue"] > loaded["band_low_ue"]).all()


@pytest.mark.parametrize("bridge, arm, expected", [
    (["PB", "PB", ""], ["1", "5", ""], "gauge 'PT'"),            # arm outside 1..4
    (["PB", "PB", ""], ["1", "1", ""], "'PB'"),                  # two grids on one arm
    (["PB", "", ""], ["1", "", ""], "'PB'"),                     # a one-arm bridge
])
def test_bad_bridge_columns_stop_run_with_one_line(tmp_path, capsys, bridge, arm, expected):
    gauges = [dict(g, bridge=b, arm=a) for g, b, a in zip(POISSON_HALF, bridge, arm, strict=True)]
    readings = _readings({"PB": np.zeros(len(LOADS)), "PA": np.zeros(len(LOADS)),
                          "PT": np.zeros(len(LOADS)), "Q1": np.zeros(len(LOADS))})
    assert _run(tmp_path, gauges, readings) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and expected in err[0] and "gauges.csv" in err[0]
    assert not (tmp_path / "out").exists()


def test_a_bridge_channel_missing_from_the_readings_is_named(tmp_path, capsys):
    extra = '[[bridge]]\nname = "PB"\nchannel = "CH7"\n'
    assert _run(tmp_path, POISSON_HALF, _readings({"Q1": np.zeros(len(LOADS))}), extra) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "CH7" in err[0] and "PB" in err[0], err
    assert not (tmp_path / "out").exists()


def test_check_of_a_bad_study_reads_a_bridge_as_its_one_channel(tmp_path, capsys):
    # With the study itself refused, `check` still reads the gauge map and the readings the raw
    # study names, to report their problems in the same pass; a bridge's arms have no readings
    # column of their own (the bridge's channel, here CH7 of its [[bridge]] table, stands for
    # them): before, each arm was reported missing from readings.csv.
    extra = ('[[bridge]]\nname = "PB"\nchannel = "CH7"\n'
             '[uncertainty]\ngauge_factor = -0.01\n')
    strain = 100.0 * np.arange(len(LOADS))   # microstrain, any values (nothing is compared)
    _run(tmp_path, POISSON_HALF, _readings({"CH7": strain, "Q1": strain}), extra)
    capsys.readouterr()
    assert main(["--quiet", "check", str(tmp_path / "study.toml")]) == 2
    assert capsys.readouterr().err.strip().splitlines() == [
        "error: study.toml: [uncertainty] gauge_factor = -0.01 is negative; a standard "
        "uncertainty is 0 or more"]
    # a readings problem beside it is still reported in the same pass
    text = (tmp_path / "readings.csv").read_text().splitlines()
    (tmp_path / "readings.csv").write_text("\n".join(
        [text[0].replace("CH7", "CH8")] + text[1:]) + "\n")
    assert main(["--quiet", "check", str(tmp_path / "study.toml")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 2 and "no column 'CH7' for gauge 'PB'" in err[1]


def test_diagnosis_moves_the_arms_of_a_bridge_together(tmp_path):
    # Readings of the bending half bridge made at x = 2 + 0.15 for both arms (beam theory, as in
    # _cantilever): the position search, which moves every arm by the same offset along its own
    # grid, finds the 0.15 mm move. Tolerance 0.005 mm: the search's own convergence
    # (rms_after about 0.01 ue on 100 ue); the criteria are tightened to 2 % so that it fails.
    arms = [_grid("T", 2.0, 1.5, 2.0, (1, 0, 0), bridge="HB", arm=1),
            _grid("B", 2.0, 1.5, 0.0, (1, 0, 0), bridge="HB", arm=2),
            _grid("Q", 1.0, 1.5, 2.0, (1, 0, 0), bridge="", arm="")]
    zeros = np.zeros(len(LOADS))
    study = write_block_study(tmp_path, gauges=pd.DataFrame(arms),
                              readings_rows=_readings({"HB": zeros, "Q": zeros}))
    study.write_text(study.read_text().replace("relative = 0.10", "relative = 0.02"))
    _cantilever(tmp_path, p_n=70.0)
    moved = 2 * 70.0 * (4.0 - 2.0 - 0.15) * 1.0 / (70000.0 * 2.0) * 1e6 * FACTORS[:, 0]
    q = 70.0 * (4.0 - 1.0) * 1.0 / (70000.0 * 2.0) * 1e6 * FACTORS[:, 0]
    _readings({"HB": moved, "Q": q}).to_csv(tmp_path / "readings.csv", index=False)
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"),
                 "--no-report"]) == 0
    diagnoses = json.loads((tmp_path / "out" / "summary.json").read_text())["diagnoses"]
    offset = [d for d in diagnoses if d["gauge"] == "HB" and d["explanation"] == "position offset"]
    assert len(offset) == 1 and offset[0]["parameter"] == pytest.approx(0.15, abs=0.005)


@pytest.mark.render
def test_report_and_gauges_vtp_show_every_arm(tmp_path):
    # The views and gauges.vtp draw each arm at its own grid: the arms' points are read back with
    # VTK's XML reader (pyvista) and compared with the gauge map's coordinates (tolerance 1e-9:
    # the points are written as given, a grid on the face it lies on).
    g = pd.DataFrame(POISSON_HALF)
    true = _true(g)
    bridge = np.asarray(bridge_output(np.c_[true[:, 0], true[:, 1]], factor=1.0))
    raw = bridge * (2.10 / 2.00) * -1
    assert _run(tmp_path, POISSON_HALF, _readings({"PB": raw, "Q1": true[:, 2]}),
                report=True) == 0
    import pyvista as pv

    vtp = pv.read(tmp_path / "out" / "gauges.vtp")
    grids = list(vtp.point_data["grid"])
    assert grids == ["Q1", "PA", "PT"]  # the single grid, then the bridge by its arms
    assert list(vtp.point_data["arm"]) == [0, 1, 2]
    assert list(vtp.point_data["gauge"]) == ["Q1", "PB", "PB"]
    np.testing.assert_allclose(vtp.points, g.loc[[2, 0, 1], ["x", "y", "z"]].to_numpy(float),
                               atol=1e-9)
    # the channel's values on every arm (one reading of the channel)
    pb = vtp.point_data["measured_ue"][1:]
    assert pb[0] == pb[1]
    html = (tmp_path / "out" / "report.html").read_text(encoding="utf-8")
    assert "PB<span class=\"sub\">bridge, arms 1:PA 2:PT</span>" in html
    # the views count what they draw: the 3 grids (2 arms and a single gauge), not 2 channels
    counts = re.findall(r'alt="[^"]* of (\d+) ([a-z ]+) visible"', html)
    assert counts and all(c == ("3", "gauge grids") for c in counts), counts


def test_a_study_without_bridges_writes_the_same_files(tmp_path):
    # Interface stability (the project's rule): blank bridge and arm columns change no output.
    plain = [{k: v for k, v in r.items() if k not in ("bridge", "arm")} for r in POISSON_HALF]
    blank = [dict(r, bridge="", arm="") for r in plain]
    g = pd.DataFrame(plain)
    true = _true(g)
    readings = _readings({"PA": true[:, 0], "PT": true[:, 1], "Q1": true[:, 2]})
    assert _run(tmp_path / "plain", plain, readings) == 0
    assert _run(tmp_path / "blank", blank, readings) == 0
    for name in ("gauges.csv", "gauge_stats.csv", "flags.csv", "rosettes.csv"):
        assert (tmp_path / "plain" / "out" / name).read_bytes() == \
            (tmp_path / "blank" / "out" / name).read_bytes(), name
    assert "arms" not in pd.read_csv(tmp_path / "plain" / "out" / "gauges.csv").columns


@pytest.mark.parametrize("kts,offered", [((0.02, 0.02), True), ((0.0, 0.02), False)],
                         ids=["arms-share-kt", "arms-differ"])
def test_a_kt_corrected_bridge_is_offered_no_kt_only_when_its_arms_share_kt(tmp_path, kts,
                                                                             offered):
    # With [readings] kt_corrected = true the diagnosis's "no Kt" alternative re-applies Kt to
    # the channel's combined rows, which carry the first arm's Kt: exact when the arms share it
    # (the reading is linear in the arms' strains; checked against the sum over the arms, each
    # with its own Kt, rtol 1e-12: the same sums in another order), not otherwise, so it is then
    # not offered (an alternative the tool cannot compute is better left out than wrong).
    from correlate.comparison import evidence
    from correlate.comparison.correlation import correlate_study
    from correlate.mechanics.gauge import indicated_strain
    from correlate.model_readings.model import case_rows
    from correlate.readers.study import read_study

    gauges = [dict(g) for g in POISSON_HALF]
    gauges[0]["kt"], gauges[1]["kt"] = kts
    zeros = np.zeros(len(LOADS))
    study = write_block_study(tmp_path, gauges=pd.DataFrame(gauges),
                              readings_rows=_readings({"PB": zeros + 1.0, "Q1": zeros + 1.0}))
    study.write_text(study.read_text().replace('zero = "first"\n',
                                               'zero = "first"\nkt_corrected = true\n'))
    s = read_study(study)
    corr = correlate_study(s)
    model, j = corr.model, corr.gauges.index("PB")
    alternatives = evidence._alternatives(s, model, corr.steps, corr.rows_by_case, j)
    assert ("no_kt" in alternatives) is offered
    if offered:
        base = model.base.operator
        nominal = np.flatnonzero(base.row_kind == 0)
        rows = {c.name: case_rows(model.base, c, c.fe_index) for c in s.cases}
        exact = 0.0
        for k, w in model.arm_weights[j]:
            ind = np.array([indicated_strain(rows[c.name]["axial"][nominal[k]],
                                             rows[c.name]["transverse"][nominal[k]],
                                             base.kt[k], base.nu0[k]) for c in s.cases])
            exact = exact + w * (corr.steps.factors * 1e6) @ ind
        np.testing.assert_allclose(alternatives["no_kt"], exact, rtol=1e-12)
