"""`correlate run` end to end on synthetic readings whose expected values are built in.

The readings are the model readings (computed from the analytic fields by `predict`, whose own
accuracy is tested against closed forms in test_predict.py) times a known ratio, plus a known
offset and noise, with a preload in the tare row and invented faults on named channels.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from builders import renumbered, write_block_study
from scipy import stats as sps

from correlate.commands.cli import main
from correlate.model_readings.model import prepare
from correlate.model_readings.table import predict_table
from correlate.readers.study import read_study

RATIO = 1.05
LOADS = [(0.3, 0.05), (2.5, 0.0), (5.0, 0.0), (7.5, 0.0), (10.0, 0.0), (10.0, 1.0), (10.0, 2.0),
         (5.0, 2.0), (0.3, 2.0), (0.3, 0.05)]


def synthetic_readings(folder, rng, *, faults=True):
    study_path = write_block_study(folder)
    model = prepare(read_study(study_path))
    table = predict_table(model)
    pred = table.pivot(index="gauge", columns="case", values="predicted_ue")
    names = list(model.gauges["gauge"])
    loads = np.array(LOADS)
    f = np.c_[loads[:, 0] / 10.0, loads[:, 1] / 2.0]
    truth = f @ pred.loc[names, ["pull", "side"]].to_numpy().T * RATIO     # (steps, gauges)
    offsets = rng.uniform(-150, 150, len(names))
    data = truth + offsets + rng.normal(0, 1.0, truth.shape)
    col = {g: j for j, g in enumerate(names)}
    if faults:
        data[:, col["S02"]] *= -1                                  # wired reversed
        data[:, col["S04"]] = 7.0 + rng.normal(0, 0.2, len(loads))  # dead
        data[:, col["S06"]] += 15.0 * np.arange(len(loads))          # drifts 15 ue per step
        data[:, [col["S07"], col["S08"]]] = data[:, [col["S08"], col["S07"]]]  # swapped
    df = pd.DataFrame(np.round(data, 2), columns=names)
    df.insert(0, "S_kN", loads[:, 1])
    df.insert(0, "P_kN", loads[:, 0])
    df.insert(0, "step", np.arange(len(loads)))
    df.to_csv(folder / "readings.csv", index=False)
    (folder / "study.toml").write_text(
        (folder / "study.toml").read_text()
        + '[readings]\nfile = "readings.csv"\nzero = "first"\n'
        '[[load]]\ncolumn = "P_kN"\ncase = "pull"\nreference = 10.0\n'
        '[[load]]\ncolumn = "S_kN"\ncase = "side"\nreference = 2.0\n'
        "[criteria]\nrelative = 0.10\nabsolute_ue = 20.0\n")
    return study_path, names


@pytest.fixture(scope="module")
def faulty_run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("faulty")
    rng = np.random.default_rng(7)
    study, names = synthetic_readings(folder, rng)
    assert main(["--quiet", "run", str(study), "--out", str(folder / "out"), "--no-report"]) == 0
    out = folder / "out"
    return {"gauges": pd.read_csv(out / "gauges.csv"), "summary": json.loads((out / "summary.json").read_text()),
            "flags": pd.read_csv(out / "flags.csv"), "names": names, "folder": folder}


def test_ratio_is_recovered_with_a_cluster_robust_interval(tmp_path):
    # Built in: measured = 1.05 x predicted + noise (sd 1 ue) after the tare removes offsets.
    study, _ = synthetic_readings(tmp_path, np.random.default_rng(9), faults=False)
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "out"), "--no-report"]) == 0
    summary = json.loads((tmp_path / "out" / "summary.json").read_text())
    fit = summary["fit"]
    lo, hi = fit["slope_origin_ci"]
    assert lo <= RATIO <= hi
    assert fit["slope_origin"] == pytest.approx(RATIO, abs=0.005)  # noise of 1 ue on ~1000 ue
    assert "cluster" in fit["ci_method"]
    assert summary["verdict"]["failing"] == 0 and summary["verdict"]["flagged"] == 0


def test_ratio_through_origin_agrees_with_least_squares(faulty_run):
    # Reference: numpy.linalg.lstsq of measured on predicted without intercept, healthy pairs.
    g = faulty_run["gauges"]
    pairs = g[g["status"].isin(["pass", "fail"])]
    k = np.linalg.lstsq(pairs[["predicted_ue"]].to_numpy(), pairs["measured_ue"].to_numpy(),
                        rcond=None)[0][0]
    # tolerance: gauges.csv rounds microstrain to 0.001, summary.json ratios to 6 significant digits
    assert faulty_run["summary"]["fit"]["slope_origin"] == pytest.approx(k, rel=1e-5)


def test_fit_agrees_with_scipy_on_the_healthy_pairs(faulty_run):
    # Reference: scipy.stats.linregress on the pass/fail rows of gauges.csv (the healthy pairs).
    g = faulty_run["gauges"]
    pairs = g[g["status"].isin(["pass", "fail"])]
    ref = sps.linregress(pairs["predicted_ue"], pairs["measured_ue"])
    fit = faulty_run["summary"]["fit"]
    # tolerance: gauges.csv rounds microstrain to 0.001, summary.json to 6 significant digits
    assert fit["slope"] == pytest.approx(ref.slope, rel=1e-5)
    assert fit["intercept"] == pytest.approx(ref.intercept, abs=1e-3)
    assert fit["r2"] == pytest.approx(ref.rvalue ** 2, rel=1e-5)
    assert fit["n"] == len(pairs)


def test_each_invented_fault_is_flagged_and_no_other(faulty_run):
    flags = faulty_run["flags"]
    gauge_flags = flags[flags["scope"] == "gauge"]
    found = {(r.gauge, r.flag) for r in gauge_flags.itertuples()}
    assert ("S02", "reversed") in found
    assert ("S04", "dead") in found
    assert ("S06", "drift") in found
    # the swapped pair fails, is diagnosed, and is held out of the fit as an installation fault
    assert ("S07", "installation") in found and ("S08", "installation") in found
    assert {g for g, _ in found} == {"S02", "S04", "S06", "S07", "S08"}


def test_swapped_channels_are_diagnosed(faulty_run):
    diag = pd.DataFrame(faulty_run["summary"]["diagnoses"])
    swaps = diag[diag["explanation"] == "channels swapped"]
    assert set(swaps["gauge"]) == {"S07", "S08"}


def test_tare_removes_offsets_and_preload(faulty_run):
    # The tare row (step 0) carries the 0.3 kN preload and the zero offsets; the last row returns to
    # the same loads, so it is a zero-load row whose healthy readings are back near zero.
    g = faulty_run["gauges"]
    assert set(g.loc[g["step"] == 0, "status"]) == {"tare"}
    last = g[(g["step"] == 9) & ~g["gauge"].isin(["S02", "S04", "S06"])]
    assert set(last["status"]) == {"zero-load"}
    assert last["measured_ue"].abs().max() < 6.0  # noise of 1 ue, sd; 6 sd
    assert last["predicted_ue"].abs().max() < 1e-9


def test_statuses_follow_the_criterion(faulty_run):
    g = faulty_run["gauges"]
    ev = g[g["status"].isin(["pass", "fail"])]
    allowed = np.maximum(0.10 * ev["predicted_ue"].abs(), 20.0)
    expect = np.where(ev["difference_ue"].abs() <= allowed, "pass", "fail")
    assert (ev["status"].to_numpy() == expect).all()
    rel = ev["relative"].dropna()
    assert (ev.loc[rel.index, "predicted_ue"].abs() >= 200.0).all()


def test_outputs_are_byte_identical_between_runs(tmp_path):
    rng = np.random.default_rng(3)
    study, _ = synthetic_readings(tmp_path, rng, faults=False)
    for out in ("a", "b"):
        assert main(["--quiet", "run", str(study), "--out", str(tmp_path / out), "--no-report"]) == 0
    for name in ("gauges.csv", "rosettes.csv", "gauge_stats.csv", "flags.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes()
    a = json.loads((tmp_path / "a" / "summary.json").read_text())
    b = json.loads((tmp_path / "b" / "summary.json").read_text())
    a["provenance"].pop("generated"), b["provenance"].pop("generated")
    assert a == b


def test_existing_output_needs_force_and_inputs_are_untouched(tmp_path, capsys):
    rng = np.random.default_rng(5)
    study, _ = synthetic_readings(tmp_path, rng, faults=False)
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    out = tmp_path / "out"
    out.mkdir()
    (out / "report.html").write_text("previous run")   # a file of the tool's own: its folder
    assert main(["--quiet", "run", str(study), "--out", str(out), "--no-report"]) == 2
    assert "--force" in capsys.readouterr().err
    assert (out / "report.html").read_text() == "previous run"
    assert main(["--quiet", "run", str(study), "--out", str(out), "--no-report", "--force"]) == 0
    assert not (out / "report.html").exists()
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    assert before == after


def test_timings_give_each_stage_once_and_nest_within_their_parent(tmp_path, capsys):
    # --timings prints one line per stage, indented under the stage that holds it; a parent's
    # time holds its children's (allowing 0.01 s for the two-decimal rounding of each line).
    study, _ = synthetic_readings(tmp_path, np.random.default_rng(9), faults=False)
    capsys.readouterr()
    assert main(["--quiet", "--timings", "run", str(study), "--out", str(tmp_path / "out"),
                 "--no-report"]) == 0
    err = capsys.readouterr().err.splitlines()
    table = err[err.index("stage times (seconds):") + 1:]
    rows = [(len(line) - len(line.lstrip()), line.rsplit(None, 1)[0].strip(),
             float(line.rsplit(None, 1)[1])) for line in table]
    names = [name for _, name, _ in rows]
    for stage in ("reading the model", "reading the test data", "diagnosing the failing gauges"):
        assert names.count(stage) == 1, names
    parent = names.index("correlating (statistics, health, rosettes)")
    children = [t for indent, _, t in rows[parent + 1:] if indent > rows[parent][0]]
    assert children and all(t >= 0 for _, _, t in rows)
    assert sum(children) <= rows[parent][2] + 0.01 * len(children)


DEMO_STUDY = Path(__file__).resolve().parents[2] / "correlate" / "data" / "demo" / "study.toml"


@pytest.mark.parametrize("which", ["faulty", "demo"])
def test_a_variants_ranking_gives_the_runs_figures_exactly(which, faulty_run):
    # rank_study (what a sweep's worker runs) stops before the report's figures; the figures it
    # gives must be a run's, exactly: the same functions on the same arrays, so compared for
    # equality (through JSON, where NaN equals NaN), no tolerance. The faulty study has a
    # reversed, a dead and a drifting gauge and a swapped pair the diagnosis holds out of the
    # fit (the second pass); the demo has bridges, the measurement chain and [uncertainty].
    from correlate.comparison.correlation import correlate_study, rank_study

    study = read_study(faulty_run["folder"] / "study.toml" if which == "faulty" else DEMO_STUDY)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run, ranked = correlate_study(study), rank_study(study)

    def same(a, b):
        return json.dumps(a, sort_keys=True, default=str) == json.dumps(b, sort_keys=True,
                                                                          default=str)

    assert same(ranked.summary["fit"], run.summary["fit"])
    assert ranked.summary["metrics"]["concordance"] == run.summary["metrics"]["concordance"]
    assert same(ranked.summary["verdict"],
                {k: v for k, v in run.summary["verdict"].items() if k not in ("worst", "note")})
    assert same(ranked.summary.get("validation"), run.summary.get("validation"))
    assert (which == "demo") == ("validation" in ranked.summary)
    for name in ("status", "evaluated", "difference", "basis"):
        np.testing.assert_array_equal(getattr(ranked.status, name), getattr(run.status, name))
    np.testing.assert_array_equal(ranked.predicted, run.predicted)
    np.testing.assert_array_equal(ranked.measured, run.measured)
    assert ranked.gauges == run.gauges
    if which == "faulty":   # the second pass happened: the swapped pair is out of the fit
        assert {"S07", "S08"} <= set(run.flags.loc[run.flags["flag"] == "installation", "gauge"])


def test_a_sweeps_test_side_made_once_serves_every_variant_unchanged(faulty_run):
    # A sweep reads the test and judges its channels once (measured_side) and gives every
    # variant a copy: the comparison adds installation flags and exclusions to it in place, so
    # a shared one would carry the first variant's flags into the next. Two variants on the
    # base model in a row must each give the run's figures (compared for equality through
    # JSON, no tolerance: the same functions on the same arrays), and the shared side must
    # come out as it went in.
    import copy

    from correlate.comparison.correlation import correlate_study
    from correlate.variants.evaluate import correlate_variant, locate_base
    from correlate.variants.sweep_file import Variant

    study = read_study(faulty_run["folder"] / "study.toml")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        run = correlate_study(study)
        located = locate_base(study)
        before = copy.deepcopy(located.measured)
        base = Variant(name="base", row=2, file=study.model_file, case_files={}, parameters={})
        first, second = (correlate_variant(study, base, located) for _ in range(2))
    assert not first.failure and not second.failure
    for result in (first, second):
        assert result.metrics["rms_ue"] == run.summary["fit"]["rms_ue"]
        assert result.metrics["flagged"] == run.summary["verdict"]["flagged"]
        np.testing.assert_array_equal(result.evaluated, run.status.evaluated)
    assert len(run.flags[run.flags["flag"] == "installation"]) > 0   # the in-place additions
    pd.testing.assert_frame_equal(located.measured.flags, before.flags)
    for name in ("steps", "gauges", "text"):
        np.testing.assert_array_equal(getattr(located.measured.excl, name),
                                      getattr(before.excl, name))


def test_a_variant_on_another_mesh_pairs_its_bridge_channels_with_the_tests(tmp_path):
    # The demo (two bridges, the measurement chain, [uncertainty]) with its model renumbered
    # (the points reversed: another mesh to the sweep, so its gauges are located anew) gives the
    # base model's readings channel for channel: the test's half, made once with the base
    # model's channels, pairs with the new model's channels (rtol 1e-9: the same interpolation
    # in another order of nodes; the located points agree to the Newton tolerance).
    import shutil

    import meshio

    from correlate.comparison.correlation import rank_study
    from correlate.variants.evaluate import correlate_variant, locate_base
    from correlate.variants.sweep_file import Variant

    study = read_study(DEMO_STUDY)
    meshio.write(tmp_path / "renumbered.vtu", renumbered(meshio.read(study.model_file)))
    shutil.copy(study.model_file, tmp_path / "same.vtu")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        located = locate_base(study)
        base = rank_study(study)
        results = {name: correlate_variant(study, Variant(name=name, row=2, file=tmp_path / name,
                                                          case_files={}, parameters={}), located)
                   for name in ("same.vtu", "renumbered.vtu")}
    assert located.bridges, "the demo has bridge channels"
    for name, result in results.items():
        assert not result.failure, result.failure
        assert result.same_mesh == (name == "same.vtu")
        assert result.gauges == tuple(base.gauges)
        np.testing.assert_allclose(result.predicted, base.predicted, rtol=1e-9, atol=1e-9)
        np.testing.assert_array_equal(result.measured, base.measured)
        np.testing.assert_array_equal(result.evaluated, base.status.evaluated)
