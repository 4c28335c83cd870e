"""The validation budget wired into `correlate run`, checked against sources outside the project.

The block study of tests/builders.py has analytic strain fields, so the model's axial and
transverse strain at each gauge, and what the gauge indicates, come from the fields (strain
transformation and the transverse-sensitivity relation of Vishay Micro-Measurements Tech Note
TN-509), not from the tool. Against them: the GUM's law of propagation with unit and relative
sensitivities (JCGM 100:2008 eq. 10, 4.2.3 for the Type A term, 5.1.3 for sensitivity
coefficients), a Monte Carlo propagation of the same distributions (JCGM 101:2008), the validation
comparison of ASME V&V 20-2009 (E = S - D, u_val, the interval E -/+ k u_val) and the fully
correlated combination of systematic terms (JCGM 100:2008 5.2.2 with r = 1). Every scenario is
invented for these tests.
"""

from __future__ import annotations

import json

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import BLOCK_LOADS, block_readings, block_strain, default_gauges, write_block_study

from correlate.commands.cli import main

NU0 = 0.285                  # the study's calibration_poisson (the default)
GF, UKT, DAQ, REL, LOAD, UE = 0.005, 0.004, 1.5, 0.002, 0.003, 0.02
UNCERTAINTY = f"""
[uncertainty]
coverage = 2.0
gauge_factor = {GF}
transverse = {UKT}
daq_ue = {DAQ}
daq_relative = {REL}
load = {LOAD}
[[uncertainty.input]]
name = "E"
relative = {UE}
exponent = -1.0
"""
RATIO = 1.03   # the invented test reads 3 % above the model
OLD_GAUGE_COLUMNS = ["gauge", "step", "sequence", "predicted_ue", "measured_ue", "difference_ue",
                     "ratio", "relative", "band_low_ue", "band_high_ue", "in_band", "status",
                     "basis", "unconservative", "flag"]   # gauges.csv before the budget


def _gauges() -> pd.DataFrame:
    return default_gauges().iloc[[0, 2, 4, 7]].reset_index(drop=True)


def _readings(gauges: pd.DataFrame, *, runs: int = 1, seed: int = 1) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    frames = []
    for run in range(runs):
        df = block_readings(gauges)
        names = list(gauges["gauge"])
        noise = rng.normal(0.0, 4.0, (len(df), len(names))) if runs > 1 else 0.0
        df[names] = np.round(df[names].to_numpy() * RATIO + noise + 20.0 * run, 3)
        df.insert(1, "sequence", run + 1)
        frames.append(df)
    return pd.concat(frames, ignore_index=True)


def _study(folder, extra: str = "", runs: int = 1):
    gauges = _gauges()
    return write_block_study(folder, readings_rows=_readings(gauges, runs=runs), gauges=gauges,
                             ctype="hexahedron", extra_toml=extra)


def _run(study, out) -> None:
    assert main(["--quiet", "run", str(study), "--out", str(out), "--no-report"]) == 0


def _grid_strains(gauges: pd.DataFrame, steps: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Axial and transverse strain [ue] of each gauge row from the analytic fields (top face,
    normal +z, transverse direction n x d; linear fields, so the grid average is the centre)."""
    by_name = gauges.set_index("gauge")
    x = by_name.loc[steps["gauge"], ["x", "y", "z"]].to_numpy(dtype=float)
    d = by_name.loc[steps["gauge"], ["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float)
    d /= np.linalg.norm(d, axis=1, keepdims=True)
    t = np.cross([0.0, 0.0, 1.0], d)
    loads = dict(zip(range(len(BLOCK_LOADS)), BLOCK_LOADS, strict=True))
    f = np.array([[loads[s][0] / 10.0, loads[s][1] / 2.0] for s in steps["step"]])
    e = f[:, 0, None, None] * block_strain("pull", x) + f[:, 1, None, None] * block_strain("side", x)
    return (np.einsum("gi,gij,gj->g", d, e, d) * 1e6, np.einsum("gi,gij,gj->g", t, e, t) * 1e6)


@pytest.fixture(scope="module")
def budget_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("budget")
    study = _study(folder, UNCERTAINTY)
    _run(study, folder / "out")
    rows = pd.read_csv(folder / "out" / "gauges.csv")
    summary = json.loads((folder / "out" / "summary.json").read_text())
    table = pd.read_csv(folder / "out" / "uncertainty.csv")
    return rows, summary, table


def test_budget_columns_follow_gum_eq10_computed_from_the_fields(budget_run):
    rows, _, _ = budget_run
    gauges = _gauges()
    kt = gauges.set_index("gauge").loc[rows["gauge"], "kt"].to_numpy(dtype=float)
    e_a, e_t = _grid_strains(gauges, rows)
    D, S = rows["measured_ue"].to_numpy(), rows["predicted_ue"].to_numpy()
    # TN-509 derivative in Kt, (e_t + nu0 e_a) / (1 - nu0 Kt)^2, then GUM eq. 10 term by term.
    slope = (e_t + NU0 * e_a) / (1.0 - NU0 * kt) ** 2
    u_d = np.sqrt((GF * D) ** 2 + (slope * UKT) ** 2 + DAQ**2 + (REL * D) ** 2)
    u_input = np.abs(S) * np.hypot(UE * 1.0, LOAD)     # |exponent| = 1 for E, load linear
    # atol 0.002 ue: the CSV keeps 3 decimals of microstrain; the readings file 3 decimals.
    np.testing.assert_allclose(rows["u_d_ue"], u_d, rtol=0, atol=2e-3)
    np.testing.assert_allclose(rows["u_input_ue"], u_input, rtol=0, atol=2e-3)
    np.testing.assert_allclose(rows["u_num_ue"], 0.0, rtol=0, atol=0)   # no [numerical]
    np.testing.assert_allclose(rows["u_val_ue"], np.hypot(u_d, u_input), rtol=0, atol=2e-3)
    # V&V 20's comparison error is S - D, the opposite sign of the project's difference_ue.
    np.testing.assert_allclose(rows["comparison_error_ue"], S - D, rtol=0, atol=2e-3)
    np.testing.assert_allclose(rows["comparison_error_ue"], -rows["difference_ue"], rtol=0,
                               atol=2e-3)


def test_budget_agrees_with_monte_carlo_of_the_same_distributions(budget_run):
    # JCGM 101:2008: draw every input from its distribution, rebuild the comparison error
    # E = S - D, and compare its spread with u_val. M = 200,000: tolerance 4 standard errors of a
    # standard deviation estimate (0.63 %); the model's nonlinearity (1/(1 + dE), products of
    # small relative errors, Kt in 1/(1 - nu0 Kt)) is below 1e-3 relative at these sizes.
    rows, _, _ = budget_run
    rng = np.random.default_rng(101)
    M = 200_000
    row = rows[(rows["gauge"] == "S02") & (rows["step"] == 3)].iloc[0]
    gauges = _gauges()
    kt = float(gauges.set_index("gauge").loc["S02", "kt"])
    e_a, e_t = (v[0] for v in _grid_strains(gauges, row.to_frame().T))

    def indicated(k):
        return (e_a + k * e_t) / (1 - NU0 * k)    # TN-509

    D0, S0 = float(row["measured_ue"]), float(row["predicted_ue"])
    D = ((D0 + indicated(rng.normal(kt, UKT, M)) - indicated(kt))
         * (1 + rng.normal(0, GF, M)) * (1 + rng.normal(0, REL, M)) + rng.normal(0, DAQ, M))
    S = S0 / (1 + rng.normal(0, UE, M)) * (1 + rng.normal(0, LOAD, M))  # S ~ E^-1, S ~ load
    tol = 4.0 / np.sqrt(2.0 * (M - 1))
    np.testing.assert_allclose(np.std(S - D, ddof=1), row["u_val_ue"], rtol=tol + 1e-3, atol=0)


def test_reference_states_follow_vv20_in_order(budget_run):
    _, _, table = budget_run
    ev = table[table["state"] != "not evaluated"]
    assert len(ev) == 4
    k_u = ev["coverage"] * ev["u_val_ue"]
    E = ev["comparison_error_ue"]
    # ASME V&V 20-2009 section 1: the model error lies in E -/+ k u_val. Checked in this order.
    expect = np.where(E.abs() > k_u, "model error",
                      np.where(k_u > ev["allowed_ue"], "uncertainty dominated", "consistent"))
    assert ev["state"].tolist() == expect.tolist()
    resolved = np.where(E.abs() > k_u, np.sign(E) * (E.abs() - k_u), 0.0)
    np.testing.assert_allclose(ev["model_error_ue"], resolved, rtol=0, atol=2e-3)  # 3 decimals
    shares = ev[[c for c in ev.columns if c.startswith("share_")]].sum(axis=1)
    np.testing.assert_allclose(shares, 1.0, rtol=0, atol=1e-5)  # shares of u_val^2 sum to one


def test_ratio_interval_adds_the_systematic_terms_fully_correlated(budget_run):
    _, summary, _ = budget_run
    ratio, fit = summary["validation"]["ratio"], summary["fit"]
    assert ratio["ratio"] == pytest.approx(fit["slope_origin"], rel=1e-5, abs=0)  # same slope
    assert ratio["u_statistical"] == pytest.approx(fit["se_slope_origin"], rel=1e-5, abs=0)
    # JCGM 100:2008 5.2.2 with r = 1: relative terms acting on every gauge add linearly inside
    # each, in quadrature between independent ones, and are not divided by the gauge count.
    u_sys = ratio["ratio"] * np.sqrt(GF**2 + LOAD**2 + UE**2)
    assert ratio["u_systematic"] == pytest.approx(u_sys, rel=1e-5, abs=0)  # 6 digits in JSON
    assert ratio["u_combined"] == pytest.approx(np.hypot(u_sys, ratio["u_statistical"]),
                                                rel=1e-5, abs=0)
    assert ratio["lower"] == pytest.approx(ratio["ratio"] - 2 * ratio["u_combined"], rel=1e-5)


def test_a_study_without_the_tables_gives_the_outputs_as_before(tmp_path):
    (tmp_path / "a").mkdir(), (tmp_path / "b").mkdir()
    plain = _study(tmp_path / "a")
    _run(plain, tmp_path / "a" / "out")
    budget = _study(tmp_path / "b", UNCERTAINTY)
    _run(budget, tmp_path / "b" / "out")
    a, b = tmp_path / "a" / "out", tmp_path / "b" / "out"
    assert sorted(p.name for p in a.iterdir()) == [".correlate-output", "flags.csv",
                                                   "gauge_stats.csv", "gauges.csv",
                                                   "rosettes.csv", "summary.json"]
    assert (b / "uncertainty.csv").exists()
    for name in ("gauge_stats.csv", "flags.csv"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    ros_old, ros_new = pd.read_csv(a / "rosettes.csv"), pd.read_csv(b / "rosettes.csv")
    assert list(ros_new.columns) == list(ros_old.columns) + ["u_e1_ue", "u_e2_ue"]
    pd.testing.assert_frame_equal(ros_new[list(ros_old.columns)], ros_old)
    old, new = pd.read_csv(a / "gauges.csv"), pd.read_csv(b / "gauges.csv")
    assert list(old.columns) == OLD_GAUGE_COLUMNS          # no column added without the table
    header = (a / "gauges.csv").read_text().splitlines()[0]
    assert header == ",".join(OLD_GAUGE_COLUMNS)
    pd.testing.assert_frame_equal(new[OLD_GAUGE_COLUMNS], old)   # the old columns unchanged
    sa, sb = (json.loads((p / "summary.json").read_text()) for p in (a, b))
    assert "validation" not in sa and "validation" in sb
    for s in (sa, sb):
        s.pop("provenance"), s.pop("validation", None)   # the study files differ in text
    assert sa == sb


def test_repeated_runs_add_a_type_a_term(tmp_path):
    study = _study(tmp_path, "[uncertainty]\n", runs=2)  # every other term zero
    _run(study, tmp_path / "out")
    rows = pd.read_csv(tmp_path / "out" / "gauges.csv")
    loaded = rows[~rows["status"].isin(["tare", "zero-load"])]
    for _, pair in loaded.groupby(["gauge", "step"]):
        assert len(pair) == 2 and set(pair["sequence"]) == {1, 2}
        # JCGM 100:2008 4.2.3: s(q_k) / sqrt(n), with s from numpy over the two runs' readings.
        expect = np.std(pair["measured_ue"], ddof=1) / np.sqrt(2)
        np.testing.assert_allclose(pair["u_d_ue"], expect, rtol=0, atol=2e-3)  # 3 decimals


def test_an_input_variant_gives_its_sensitivity_by_difference(tmp_path):
    study = _study(tmp_path, '[uncertainty]\n[[uncertainty.input]]\nname = "E"\nrelative = 0.02\n'
                   'variant = "block_stiff.vtu"\nstep = 0.05\n')
    mesh = meshio.read(tmp_path / "block.vtu")
    stiff = {k: np.asarray(v) / 1.05 for k, v in mesh.point_data.items()}  # E raised by 5 %
    meshio.write(tmp_path / "block_stiff.vtu", meshio.Mesh(mesh.points, mesh.cells,
                                                           point_data=stiff))
    _run(study, tmp_path / "out")
    rows = pd.read_csv(tmp_path / "out" / "gauges.csv")
    S = rows["predicted_ue"].abs()
    # JCGM 100:2008 5.1.4: |S(E(1 + step)) - S(E)| / step x u_rel(E), with S(E(1+step)) = S/1.05
    # from linear elasticity under a given load.
    expect = S * (1 - 1 / 1.05) / 0.05 * 0.02
    np.testing.assert_allclose(rows["u_input_ue"], expect, rtol=0, atol=2e-3)  # 3 decimals


def test_an_input_variant_that_reads_as_the_model_itself_is_refused(tmp_path, capsys):
    # the model file named as its own variant (or a copy of it): the difference quotient of
    # JCGM 100:2008 5.1.4 is 0 at every gauge, so the input's term would silently vanish
    import shutil

    study = _study(tmp_path, '[uncertainty]\n[[uncertainty.input]]\nname = "E"\nrelative = 0.02\n'
                   'variant = "copy.vtu"\nstep = 0.05\n')
    shutil.copyfile(tmp_path / "block.vtu", tmp_path / "copy.vtu")
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"), "--no-report"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert err == ["error: study.toml: [[uncertainty.input]] 'E': its variant gives the model's "
                   "own readings at every gauge and step, so its term would be 0: the model file "
                   "or a copy of it? give the result solved with the input changed by its step"]
    assert not (tmp_path / "out").exists()


def test_the_terminal_summary_gives_the_validation_line_beside_the_verdict(tmp_path, capsys):
    study = _study(tmp_path, UNCERTAINTY)
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"), "--no-report"]) == 0
    lines = capsys.readouterr().out.splitlines()
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    n = summary["validation"]["states"]
    line = [x for x in lines if x.startswith("validation (ASME V&V 20, k = 2)")]
    assert len(line) == 1
    assert (f"{n['model error']} model error, {n['uncertainty dominated']} uncertainty "
            f"dominated, {n['consistent']} consistent") in line[0]
    assert lines[0].startswith("Synthetic block: ")     # the verdict line stays first


def test_placement_adds_the_band_as_a_rectangular_distribution(tmp_path):
    study = _study(tmp_path, "[uncertainty]\ndaq_ue = 1.0\nplacement = true\n")
    _run(study, tmp_path / "out")
    rows = pd.read_csv(tmp_path / "out" / "gauges.csv")
    width = rows["band_high_ue"] - rows["band_low_ue"]
    assert (width > 0.1).any()   # the block's fields vary over the placement zone
    # JCGM 100:2008 4.3.7: a rectangular distribution of half-width a has u = a / sqrt(3), with
    # a = (high - low) / 2 from the band written beside it; then GUM eq. 10 with daq_ue.
    expect = np.hypot(width / (2 * np.sqrt(3)), 1.0)
    np.testing.assert_allclose(rows["u_d_ue"], expect, rtol=0, atol=2e-3)  # 3 decimals
