"""Tests of `correlate compare`: two run folders of the same test, model revisions OLD and NEW.

One end-to-end test runs the tiny interface study twice with a changed model; the others write
minimal run folders (gauges.csv + summary.json) whose expected classes follow from how they are
built. RMS values are recomputed here with numpy from the rows written.
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from correlate.commands.cli import main
from correlate.comparison.revisions import classify

CHECK_INTERFACE = Path("/work/shared/conformance/check_interface.py")
CAUTION = ("These results support, but do not replace, engineering judgement, the applicable codes "
           "and licensed practice.")
FLOOR_UE = 50.0    # synthetic runs: a step fails when |difference| > 50 ue (the study's floor)
HASH = "ab" * 32
# values in compare.csv are written to 0.001 ue, so recomputed values agree within half of that
CSV_ATOL = 5e-4 + 1e-9


def write_run(folder: Path, diffs: dict[str, list[float]], *, sha: str = HASH,
              fit: dict | None = None, failing: int | None = None,
              flagged: frozenset[str] = frozenset()) -> pd.DataFrame:
    """A minimal run folder: a tare step, then steps 1..k with the given differences.

    A step passes when |difference| <= FLOOR_UE; gauges in ``flagged`` carry a flag on step 1.
    Returns the gauges.csv rows.
    """
    folder.mkdir(parents=True)
    rows = []
    for g, d in diffs.items():
        rows.append({"gauge": g, "step": 0, "sequence": 0, "difference_ue": 0.0, "status": "tare"})
        for i, v in enumerate(d, start=1):
            status = "drift" if (g in flagged and i == 1) else \
                "pass" if abs(v) <= FLOOR_UE else "fail"
            rows.append({"gauge": g, "step": i, "sequence": 0, "difference_ue": v,
                         "status": status})
    table = pd.DataFrame(rows)
    table.to_csv(folder / "gauges.csv", index=False)
    n_fail = sum(any(abs(v) > FLOOR_UE for v in d) for d in diffs.values())
    summary = {
        "verdict": {"result": "x", "failing": n_fail if failing is None else failing},
        "fit": fit or {"n": 9, "slope_origin": 1.0, "r2": 0.99, "rms_ue": 100.0,
                       "max_abs_ue": 200.0},
        "reference_step": {"step": 2, "sequence": 0, "rule": "largest RMS predicted reading"},
        "provenance": {"inputs": {"readings": {"path": "readings.csv", "sha256": sha}}},
        "model": {"file": "block.vtu"},
    }
    (folder / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    return table


def read_compare(folder: Path) -> pd.DataFrame:
    return pd.read_csv(folder / "compare.csv", dtype={"gauge": str, "old_status": str,
                                                     "new_status": str}, keep_default_na=False,
                       na_values={c: [""] for c in ("old_rms_ue", "new_rms_ue", "change_ue")})


def rms_by_gauge(rows: pd.DataFrame) -> dict[str, float]:
    """Root mean square of difference_ue over the pass/fail rows, with plain numpy."""
    ev = rows[rows["status"].isin(["pass", "fail"])]
    return {g: float(np.sqrt(np.mean(np.square(ev.loc[ev["gauge"] == g, "difference_ue"]
                                                .to_numpy(dtype=float)))))
            for g in ev["gauge"].unique()}


# ------------------------------------------------------------------------------ end to end


@pytest.fixture(scope="module")
def real_runs(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The interface study run twice: revB lowers eps_yy on the x = 40 node plane (A2 reads eps_yy
    there, so it fails), revC restores it and lowers eps_xx on the x = 20 plane (A1 fails)."""
    import meshio

    spec = importlib.util.spec_from_file_location("check_interface", CHECK_INTERFACE)
    ci = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(ci)
    work = tmp_path_factory.mktemp("study")
    ci.write_inputs(work)

    def model(plane_yy: float | None, plane_xx: float | None) -> None:
        m = meshio.read(work / "block.vtu")
        x = m.points[:, 0]
        strain = np.zeros((len(x), 6))
        # equal-biaxial 1000 ue in the top plane: every in-plane grid reads 1000 ue at the
        # reference load, i.e. 100 ue/kN, the trend of the invented readings
        strain[:, 0], strain[:, 1], strain[:, 2] = 1e-3, 1e-3, -0.5e-3
        if plane_yy is not None:
            strain[np.isclose(x, plane_yy), 1] = 0.6e-3
        if plane_xx is not None:
            strain[np.isclose(x, plane_xx), 0] = 0.6e-3
        meshio.write(work / "block.vtu", meshio.Mesh(m.points, m.cells,
                                                     point_data={"E_pull": strain}))

    mp = pytest.MonkeyPatch()
    # the failure diagnosis is not read by compare and costs seconds per failing gauge
    mp.setattr("correlate.comparison.correlation.diagnose_failures",
               lambda *a, **k: pd.DataFrame(columns=["gauge", "explanation", "detail",
                                                     "rms_before_ue", "rms_after_ue",
                                                     "plausible", "parameter"]))
    try:
        model(plane_yy=40.0, plane_xx=None)
        assert main(["--quiet", "run", str(work / "study.toml"), "--out", str(work / "revB"),
                     "--no-report"]) == 0
        model(plane_yy=None, plane_xx=20.0)
        assert main(["--quiet", "run", str(work / "study.toml"), "--out", str(work / "revC"),
                     "--no-report"]) == 0
    finally:
        mp.undo()
    return work


def test_real_runs_report_the_fixed_and_the_broken_gauge(real_runs: Path, capsys) -> None:
    work = real_runs
    assert main(["compare", str(work / "revB"), str(work / "revC"), "--out",
                 str(work / "cmp")]) == 0
    out = capsys.readouterr().out
    table = read_compare(work / "cmp")
    changed = {g: c for g, c in zip(table["gauge"], table["class"], strict=True)
               if c in ("fixed", "newly failing")}
    assert changed == {"A2": "fixed", "A1": "newly failing"}
    assert "revision" in out and CAUTION in out

    # RMS values against the run folders' own rows, recomputed with numpy
    for col, run in (("old_rms_ue", "revB"), ("new_rms_ue", "revC")):
        rows = pd.read_csv(work / run / "gauges.csv", dtype={"gauge": str})
        expected = rms_by_gauge(rows)
        got = dict(zip(table["gauge"], table[col], strict=True))
        for g, v in expected.items():
            np.testing.assert_allclose(got[g], v, rtol=0, atol=CSV_ATOL)

    # closed form: in revC the field under A2 is uniform, eps_yy = 1000 ue at 10 kN, so the model
    # reads 100 ue/kN and A2's difference is the tared reading minus 100 ue/kN x load
    readings = pd.read_csv(work / "readings.csv")
    tared = readings["A2"] - readings["A2"].iloc[0]
    loaded = readings["F_kN"] != 0
    diff = (tared - 100.0 * readings["F_kN"])[loaded].to_numpy()
    new_a2 = table.loc[table["gauge"] == "A2", "new_rms_ue"].iloc[0]
    # readings carry 0.01 ue and the run's table 0.001 ue: 2e-3 ue covers both roundings
    np.testing.assert_allclose(new_a2, np.sqrt(np.mean(diff ** 2)), rtol=0, atol=2e-3)


# ------------------------------------------------------------------------------ synthetic


def two_runs(tmp_path: Path) -> tuple[Path, Path, pd.DataFrame, pd.DataFrame]:
    """G1 fails in OLD and passes in NEW; G2 the reverse; G3..G5 move by well under 1 ue."""
    rng = np.random.default_rng(7)
    base = {f"G{k}": list(rng.uniform(-30, 30, 3)) for k in (3, 4, 5)}
    old = {"G1": [20.0, 80.0, 30.0], "G2": [10.0, -20.0, 5.0], **base}
    new = {"G1": [15.0, 25.0, 10.0], "G2": [10.0, -90.0, 40.0],
           **{g: [v + 0.2 for v in d] for g, d in base.items()}}
    a, b = tmp_path / "revB", tmp_path / "revC"
    return a, b, write_run(a, old), write_run(b, new)


def test_runs_with_other_gauge_maps_are_compared_with_a_note(real_runs: Path, tmp_path: Path,
                                                             capsys) -> None:
    # the same test data, but NEW was run with another gauge map (its sha256 in the
    # provenance): a gauge moved or added changes the readings too, so the page and the
    # terminal say that the differences are not the model's alone
    import json
    import shutil

    other = tmp_path / "revC-moved"
    shutil.copytree(real_runs / "revC", other)
    summary = json.loads((other / "summary.json").read_text())
    summary["provenance"]["inputs"]["gauges"]["sha256"] = "0" * 64
    (other / "summary.json").write_text(json.dumps(summary))
    assert main(["--quiet", "compare", str(real_runs / "revB"), str(real_runs / "revC")]) == 0
    assert "gauge maps differ" not in capsys.readouterr().out
    assert main(["--quiet", "compare", str(real_runs / "revB"), str(other), "--out",
                 str(tmp_path / "cmp")]) == 0
    out = capsys.readouterr().out
    assert "note: the gauge maps differ (sha256 " in out and "000000000000... in" in out
    html = (tmp_path / "cmp" / "compare.html").read_text(encoding="utf-8")
    assert '<p class="box caution">Note: the gauge maps differ' in html


def test_a_run_compared_with_itself_or_its_own_model_says_so(real_runs: Path, tmp_path: Path,
                                                                capsys) -> None:
    # 'about the same' of one folder twice, or of two runs of one model file, reads as a model
    # revision that changed nothing; the note says what was compared (provenance sha256)
    import shutil

    assert main(["--quiet", "compare", str(real_runs / "revB"), str(real_runs / "revB")]) == 0
    out = capsys.readouterr().out
    assert f"note: OLD and NEW are the same folder '{real_runs / 'revB'}'" in out
    assert "about the same" in out
    again = tmp_path / "revB-again"
    shutil.copytree(real_runs / "revB", again)
    assert main(["--quiet", "compare", str(real_runs / "revB"), str(again)]) == 0
    out = capsys.readouterr().out
    assert "note: both runs were made from the same model result file(s)" in out
    assert main(["--quiet", "compare", str(real_runs / "revB"), str(real_runs / "revC")]) == 0
    out = capsys.readouterr().out
    assert "same folder" not in out and "same model result" not in out


def test_synthetic_runs_report_exactly_the_fixed_and_the_broken_gauge(tmp_path: Path) -> None:
    a, b, _, _ = two_runs(tmp_path)
    assert main(["compare", str(a), str(b), "--out", str(tmp_path / "cmp")]) == 0
    table = read_compare(tmp_path / "cmp")
    classes = dict(zip(table["gauge"], table["class"], strict=True))
    # by construction: one fixed, one newly failing, and the rest within the 1 ue floor
    assert classes == {"G1": "fixed", "G2": "newly failing", "G3": "unchanged",
                       "G4": "unchanged", "G5": "unchanged"}


def test_compare_csv_columns_and_values(tmp_path: Path) -> None:
    a, b, old_rows, new_rows = two_runs(tmp_path)
    assert main(["compare", str(a), str(b), "--out", str(tmp_path / "cmp")]) == 0
    table = read_compare(tmp_path / "cmp").set_index("gauge")
    assert list(table.reset_index().columns) == [
        "gauge", "class", "old_status", "new_status", "old_rms_ue", "new_rms_ue", "change_ue",
        "old_reference_difference_ue", "new_reference_difference_ue"]
    old_rms, new_rms = rms_by_gauge(old_rows), rms_by_gauge(new_rows)
    for g in old_rms:
        np.testing.assert_allclose(table.at[g, "old_rms_ue"], old_rms[g], rtol=0, atol=CSV_ATOL)
        np.testing.assert_allclose(table.at[g, "new_rms_ue"], new_rms[g], rtol=0, atol=CSV_ATOL)
        np.testing.assert_allclose(table.at[g, "change_ue"], new_rms[g] - old_rms[g], rtol=0,
                                   atol=2 * CSV_ATOL)   # two rounded values subtracted
        for col, rows in (("old_reference_difference_ue", old_rows),
                          ("new_reference_difference_ue", new_rows)):
            at_ref = rows[(rows["gauge"] == g) & (rows["step"] == 2)]["difference_ue"].iloc[0]
            np.testing.assert_allclose(table.at[g, col], abs(at_ref), rtol=0, atol=CSV_ATOL)
    assert table.loc["G1", ["old_status", "new_status"]].tolist() == ["fail", "pass"]
    assert table.loc["G2", ["old_status", "new_status"]].tolist() == ["pass", "fail"]


def test_new_removed_and_unevaluated_gauges(tmp_path: Path) -> None:
    write_run(tmp_path / "o", {"G1": [1.0, 2.0], "OLDONLY": [3.0, 4.0], "G3": [5.0, 6.0]})
    write_run(tmp_path / "n", {"G1": [1.0, 2.0], "NEWONLY": [3.0, 4.0], "G3": [5.0, 6.0]},
              flagged=frozenset({"G3"}))
    assert main(["compare", str(tmp_path / "o"), str(tmp_path / "n"), "--out",
                 str(tmp_path / "cmp")]) == 0
    table = read_compare(tmp_path / "cmp").set_index("gauge")
    assert table["class"].to_dict() == {"G1": "unchanged", "OLDONLY": "removed",
                                        "G3": "unchanged", "NEWONLY": "new"}
    # G3's flagged step 1 leaves one pass/fail row in NEW: RMS = |6| (definition of RMS)
    np.testing.assert_allclose(table.at["G3", "new_rms_ue"], 6.0, rtol=0, atol=CSV_ATOL)


# the thresholds are the brief's: a change counts beyond 5 % and at least 1 ue (common practice)
@pytest.mark.parametrize(("old", "new", "expected"), [
    (100.0, 94.0, "improved"), (100.0, 96.0, "unchanged"), (100.0, 106.0, "worse"),
    (10.0, 10.9, "unchanged"), (10.0, 11.2, "worse"), (10.0, 8.8, "improved")],
    ids=["minus6pct", "minus4pct", "plus6pct", "under-1ue", "over-1ue", "down-1.2ue"])
def test_classify_applies_the_relative_and_absolute_threshold(old, new, expected) -> None:
    assert classify("pass", "pass", old, new) == expected


# --------------------------------------------------------------------------------- gate


FIT = {"n": 9, "slope_origin": 1.0, "r2": 0.99, "rms_ue": 100.0, "max_abs_ue": 200.0}


@pytest.mark.parametrize(("change", "failing", "verdict"), [
    ({}, 1, "worse"),
    ({"slope_origin": 0.98}, 0, "worse"),           # |k - 1| grows by 0.02 > 0.01
    ({"slope_origin": 1.005}, 0, "about the same"),  # grows by 0.005 < 0.01
    ({"rms_ue": 110.0}, 0, "worse"),                 # +10 % > 5 %
    ({"rms_ue": 103.0}, 0, "about the same"),        # +3 % < 5 %
    ({"rms_ue": 80.0}, 0, "better")],                # -20 %
    ids=["more-failing", "slope-worse", "slope-same", "rms-worse", "rms-same", "rms-better"])
@pytest.mark.parametrize("gate", [False, True], ids=["no-gate", "gate"])
def test_gate_exits_3_only_when_asked_and_worse(tmp_path: Path, capsys, change, failing, verdict,
                                                gate) -> None:
    write_run(tmp_path / "o", {"G1": [1.0]}, fit=FIT, failing=0)
    write_run(tmp_path / "n", {"G1": [1.0]}, fit={**FIT, **change}, failing=failing)
    code = main(["compare", str(tmp_path / "o"), str(tmp_path / "n"),
                 *(["--fail-if-worse"] if gate else [])])
    assert code == (3 if gate and verdict == "worse" else 0)
    assert f"is {verdict} " in capsys.readouterr().out


# ------------------------------------------------------------------------------ refusals


def test_different_readings_are_refused_naming_both_hashes(tmp_path: Path, capsys) -> None:
    other = "cd" * 32
    write_run(tmp_path / "o", {"G1": [1.0]})
    write_run(tmp_path / "n", {"G1": [1.0]}, sha=other)
    assert main(["compare", str(tmp_path / "o"), str(tmp_path / "n")]) == 2
    err = capsys.readouterr().err
    assert HASH in err and other in err


def test_missing_summary_is_not_a_run_folder(tmp_path: Path, capsys) -> None:
    write_run(tmp_path / "o", {"G1": [1.0]})
    write_run(tmp_path / "n", {"G1": [1.0]})
    (tmp_path / "n" / "summary.json").unlink()
    assert main(["compare", str(tmp_path / "o"), str(tmp_path / "n")]) == 2
    assert "summary.json" in capsys.readouterr().err


@pytest.mark.parametrize("where", ["inside", "same", "parent"])
def test_out_in_or_around_a_run_folder_is_refused(tmp_path: Path, capsys, where) -> None:
    a, b, _, _ = two_runs(tmp_path)
    out = {"inside": a / "cmp", "same": b, "parent": tmp_path}[where]
    before = sorted(p.name for p in tmp_path.rglob("*"))
    assert main(["compare", str(a), str(b), "--out", str(out), "--force"]) == 2
    assert "run folder" in capsys.readouterr().err
    assert sorted(p.name for p in tmp_path.rglob("*")) == before


def test_existing_out_needs_force(tmp_path: Path) -> None:
    a, b, _, _ = two_runs(tmp_path)
    out = tmp_path / "cmp"
    out.mkdir()
    (out / "old.txt").write_text("x")
    assert main(["compare", str(a), str(b), "--out", str(out)]) == 2
    assert (out / "old.txt").exists()
    # --force replaces only a folder the tool wrote (issue 15): a foreign file stays
    assert main(["compare", str(a), str(b), "--out", str(out), "--force"]) == 2
    assert (out / "old.txt").exists()
    (out / "old.txt").unlink()
    (out / "compare.csv").write_text("an earlier comparison\n")
    assert main(["compare", str(a), str(b), "--out", str(out), "--force"]) == 0
    assert (out / "compare.csv").read_text() != "an earlier comparison\n"


def test_html_is_self_contained_escaped_and_cautioned(tmp_path: Path) -> None:
    write_run(tmp_path / "o", {"<i>G&1</i>": [1.0, 2.0]})
    write_run(tmp_path / "n", {"<i>G&1</i>": [1.0, 2.0]})
    assert main(["compare", str(tmp_path / "o"), str(tmp_path / "n"), "--out",
                 str(tmp_path / "cmp")]) == 0
    html = (tmp_path / "cmp" / "compare.html").read_text(encoding="utf-8")
    assert "&lt;i&gt;G&amp;1&lt;/i&gt;" in html and "<i>G&1</i>" not in html
    assert CAUTION in html
    assert "http" not in html and "src=" not in html and "<link" not in html
