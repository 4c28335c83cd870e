"""`correlate sweep`: variants on Dask (local and a real scheduler), ranking, cache, bad input.

The variants are the synthetic block of tests/builders.py with its 'pull' field scaled by a
factor k (and, for the identifiability check, by a second factor c acting exactly like k). The
block's fields are analytic, so every gauge reading is linear in k (Hooke's law and the
strain-gauge relation are linear) and the truth of an identification is known.
"""

from __future__ import annotations

import dataclasses
import json
import shutil
import socket
import subprocess
import sys
from pathlib import Path

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import block_readings, default_gauges, renumbered, write_small_study

from correlate.commands import sweep as sweep_command
from correlate.commands.cli import main

K_VALUES = (0.96, 0.99, 1.02, 1.07, 1.10)
GAUGES = default_gauges().iloc[[0, 1, 2, 3, 4]].reset_index(drop=True)


def write_variants(folder: Path, rows: list[tuple[str, dict[str, float]]], *,
                   scale=lambda p: p["k"]) -> Path:
    """Variant files of the block (pull field times ``scale(params)``) and their table."""
    block = meshio.read(folder / "block.vtu")
    lines = ["name,file," + ",".join(rows[0][1])]
    for name, params in rows:
        data = {n: v * (scale(params) if n == "E_pull" else 1.0)
                for n, v in block.point_data.items()}
        meshio.write(folder / f"{name}.vtu", meshio.Mesh(block.points, block.cells,
                                                          point_data=data))
        lines.append(f"{name},{name}.vtu," + ",".join(str(v) for v in params.values()))
    (folder / "variants.csv").write_text("\n".join(lines) + "\n")
    return folder / "variants.csv"


def write_sweep(folder: Path, identify: str = "", parameters='["k"]') -> Path:
    path = folder / "sweep.toml"
    path.write_text(f'study = "study.toml"\ntable = "variants.csv"\nparameters = {parameters}\n'
                    + identify)
    return path


def k_study(folder: Path, *, k_true: float = 1.0, noise: float = 0.0) -> Path:
    """The block study with readings of a model whose pull field is k_true times the block's."""
    study = write_small_study(folder, gauges=GAUGES)
    rows = block_readings(GAUGES)
    pull_only = block_readings(GAUGES, loads=[(p, 0.0) for p, _ in
                                              rows[["P_kN", "S_kN"]].to_numpy()])
    names = list(GAUGES["gauge"])
    rng = np.random.default_rng(16)
    extra = (k_true - 1.0) * pull_only[names].to_numpy()
    rows[names] = np.round(rows[names].to_numpy() + extra
                           + rng.normal(0.0, noise, extra.shape), 3)
    rows.to_csv(folder / "readings.csv", index=False)
    return study


@pytest.fixture(scope="module")
def local_sweep(tmp_path_factory):
    """One local-cluster sweep of five k variants (k = 1 is not among them), identified."""
    folder = tmp_path_factory.mktemp("sweep")
    k_study(folder, k_true=1.04, noise=2.0)
    write_variants(folder, [(f"k{i}", {"k": k}) for i, k in enumerate(K_VALUES)])
    path = write_sweep(folder, '[identify]\nparameters = ["k"]\nresponse = "quadratic"\n')
    code = main(["--quiet", "sweep", str(path), "--out", str(folder / "out"), "--workers", "2"])
    assert code == 0
    return folder


def test_variants_csv_equals_serial_runs_of_each_variant(local_sweep, capsys):
    table = pd.read_csv(local_sweep / "out" / "variants.csv")
    assert list(table["rank"]) == [1, 2, 3, 4, 5]
    study_text = (local_sweep / "study.toml").read_text()
    for row in table.itertuples():
        # a plain `correlate run` on the variant: the same study with its file as [model] file
        one = local_sweep / f"study_{row.variant}.toml"
        one.write_text(study_text.replace('file = "block.vtu"', f'file = "{row.variant}.vtu"'))
        out = local_sweep / f"run_{row.variant}"
        assert main(["--quiet", "run", str(one), "--out", str(out), "--no-report"]) in (0, 3)
        s = json.loads((out / "summary.json").read_text())
        # tolerance: variants.csv and summary.json are both written to about 6 significant
        # digits (core.tables.round_table), so they agree to that
        np.testing.assert_allclose(
            [row.rms_ue, row.slope_origin, row.r2, row.pass_fraction, row.concordance],
            [s["fit"]["rms_ue"], s["fit"]["slope_origin"], s["fit"]["r2"],
             s["verdict"]["pass_fraction"], s["metrics"]["concordance"]], rtol=2e-6, atol=0)
        assert row.verdict == s["verdict"]["state"]
    # ranked by RMS difference: the variants closest to the test's k = 1.04 first
    ks = table["k"].to_numpy()
    assert list(ks[:2]) == [1.02, 1.07]
    capsys.readouterr()


def test_identified_k_lies_within_two_standard_errors_of_the_truth(local_sweep):
    ident = json.loads((local_sweep / "out" / "identified.json").read_text())
    k, se = ident["estimate"]["k"], ident["standard_error"]["k"]
    # readings made from k = 1.04 plus 2 ue normal noise; the gauges read linearly in k, so the
    # linearised standard error is exact here (Seber and Wild, Nonlinear Regression, sec. 2.1)
    assert abs(k - 1.04) <= 2 * se
    assert 0 < se < 0.02
    assert ident["identifiable"] and ident["warnings"] == []
    # the quadratic surface reproduces readings that are linear in k: leave-one-out error at
    # round-off (1e-6 ue covers the 6 significant digits of the variant files' float64 fields)
    assert ident["surface_loo_rms_ue_max"] < 1e-6
    assert ident["weights"] == "equal"
    residual = np.array([r["residual_ue"] for r in ident["readings"]])
    # the residuals at the estimate are the noise: RMS within 50 % of its 2 ue (n = 20 gauge-
    # steps; the sample standard deviation's spread at n = 20 is about 16 %, JCGM 100 G.3)
    assert 1.0 < np.sqrt(np.mean(residual**2)) < 3.0


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.mark.slow
def test_distributed_run_gives_the_local_clusters_variants_csv(local_sweep, tmp_path):
    # a real cluster: `dask scheduler` and two `dask worker` processes (distributed's own tools)
    port = _free_port()
    dask = str(Path(sys.executable).with_name("dask"))
    address = f"tcp://127.0.0.1:{port}"
    procs = [subprocess.Popen([dask, "scheduler", "--host", "127.0.0.1", "--port", str(port),
                               "--no-dashboard"], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL)]
    try:
        for _ in range(2):
            procs.append(subprocess.Popen([dask, "worker", address, "--nthreads", "1",
                                           "--no-dashboard", "--no-nanny"],
                                          stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL))
        # both workers up before the sweep: on a loaded 2-core machine their start (imports)
        # can take longer than the 30 s distributed allows a scatter to find workers
        from dask.distributed import Client

        with Client(address, timeout=120) as probe:
            probe.wait_for_workers(2, timeout=180)
        out = tmp_path / "dist"
        code = main(["--quiet", "sweep", str(local_sweep / "sweep.toml"), "--out", str(out),
                     "--scheduler", address])
        assert code == 0
        assert (out / "variants.csv").read_text() == \
            (local_sweep / "out" / "variants.csv").read_text()
    finally:
        # workers first, then the scheduler: a worker stopped together with its scheduler can
        # spend its whole shutdown retrying the closed connection (seen: > 30 s), so it is
        # killed after 20 s; the cluster's shutdown is distributed's, not the sweep's
        for p in reversed(procs):
            p.terminate()
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait(timeout=20)


def test_rerun_into_the_same_folder_takes_every_variant_from_the_cache(local_sweep, capsys):
    before = (local_sweep / "out" / "variants.csv").read_text()
    capsys.readouterr()
    assert main(["--quiet", "sweep", str(local_sweep / "sweep.toml"), "--out",
                 str(local_sweep / "out")]) == 0
    assert "5 variants: 0 computed, 5 from the cache, 0 failed" in capsys.readouterr().out
    assert (local_sweep / "out" / "variants.csv").read_text() == before


def test_interrupted_sweep_resumes_with_only_the_rest(tmp_path, monkeypatch, capsys):
    k_study(tmp_path)
    write_variants(tmp_path, [(f"k{i}", {"k": k}) for i, k in enumerate(K_VALUES)])
    path = write_sweep(tmp_path)
    saved = []
    real_save = sweep_command.save_result

    def save_then_stop(folder, key, result):
        real_save(folder, key, result)
        saved.append(result.name)
        if len(saved) == 2:   # as a Ctrl-C (or a kill: SIGTERM is handled alike) would
            raise KeyboardInterrupt

    monkeypatch.setattr(sweep_command, "save_result", save_then_stop)
    out = tmp_path / "out"
    assert main(["--quiet", "sweep", str(path), "--out", str(out), "--workers", "1"]) == 130
    assert len(list((out / "variants").glob("*.npz"))) == 2
    assert not (out / "variants.csv").exists()
    monkeypatch.setattr(sweep_command, "save_result", real_save)
    capsys.readouterr()
    assert main(["--quiet", "sweep", str(path), "--out", str(out), "--workers", "1"]) == 0
    assert "5 variants: 3 computed, 2 from the cache, 0 failed" in capsys.readouterr().out
    # --force starts afresh
    assert main(["--quiet", "sweep", str(path), "--out", str(out), "--workers", "1",
                 "--force"]) == 0
    assert "5 variants: 5 computed, 0 from the cache" in capsys.readouterr().out


def test_bad_variants_are_recorded_and_the_sweep_goes_on(tmp_path, capsys):
    k_study(tmp_path)
    write_variants(tmp_path, [(f"k{i}", {"k": k}) for i, k in enumerate(K_VALUES[:3])])
    # a mesh the gauges fall off: the block moved 10 mm along x (the gauges sit at x < 2 mm)
    block = meshio.read(tmp_path / "block.vtu")
    small = block.points + [10.0, 0.0, 0.0]
    meshio.write(tmp_path / "short.vtu", meshio.Mesh(small, block.cells,
                                                     point_data=block.point_data))
    table = tmp_path / "variants.csv"
    table.write_text(table.read_text() + "gone,missing.vtu,1.0\nwords,k0.vtu,stiff\n"
                     "short,short.vtu,1.0\nnoarray,k0.vtu,1.0\nblank,,2.0\n")
    # the array-less variant: a file without E_side
    meshio.write(tmp_path / "noarray.vtu", meshio.Mesh(block.points, block.cells,
                                                       point_data={"E_pull": block.point_data[
                                                           "E_pull"]}))
    table.write_text(table.read_text().replace("noarray,k0.vtu", "noarray,noarray.vtu"))
    path = write_sweep(tmp_path)
    inputs = {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()}
    out = tmp_path / "out"
    code = main(["--quiet", "sweep", str(path), "--out", str(out),
                 "--workers", "1"])   # one worker process to start: the test stays cheap
    captured = capsys.readouterr()
    assert code == 0
    df = pd.read_csv(out / "variants.csv", keep_default_na=False).set_index("variant")
    assert df.loc["gone", "failure"].startswith("missing.vtu: the variant's model result does "
                                                "not exist")
    assert df.loc["words", "failure"] == ("variants.csv: row 6, column k: 'stiff' is not a "
                                          "number; parameter columns hold numbers only")
    assert "S00" in df.loc["short", "failure"]
    assert "E_side" in df.loc["noarray", "failure"]
    # an empty file cell fails its row only, as a missing file does (it stopped the sweep)
    assert df.loc["blank", "failure"] == ("variants.csv: row 9, column file: empty; give the "
                                          "variant's model result file (relative to the table)")
    assert df.loc["blank", "file"] == ""
    assert list(df.loc[["gone", "words", "short", "noarray", "blank"], "rank"]) == [""] * 5
    assert sorted(df.loc[["k0", "k1", "k2"], "rank"]) == ["1", "2", "3"]
    for name in ("gone", "words", "short", "noarray", "blank"):
        assert f"error: variant '{name}'" in captured.err
    assert "8 variants: 5 computed, 0 from the cache, 5 failed" in captured.out
    assert {p.name: p.read_bytes() for p in tmp_path.iterdir() if p.is_file()} == inputs


def test_rows_naming_the_same_model_result_are_refused_with_their_reason(tmp_path, capsys):
    # Two rows whose files have the same bytes (the same SHA-256) are the same model: with other
    # parameters one row must be wrong (a copy-paste slip in the file column), and fitting both
    # would bend the response surface; with the same parameters the second row would count the
    # result twice (double weight, and a leave-one-out that leaves out only one copy).
    k_study(tmp_path)
    write_variants(tmp_path, [(f"k{i}", {"k": k}) for i, k in enumerate(K_VALUES[:3])])
    shutil.copyfile(tmp_path / "k1.vtu", tmp_path / "k1_copy.vtu")   # other name, same bytes
    table = tmp_path / "variants.csv"
    table.write_text(table.read_text() + f"copy,k1_copy.vtu,{K_VALUES[1]}\nslip,k2.vtu,9.5\n")
    out = tmp_path / "out"
    code = main(["--quiet", "sweep", str(write_sweep(tmp_path)), "--out", str(out),
                 "--workers", "1"])
    captured = capsys.readouterr()
    assert code == 0
    df = pd.read_csv(out / "variants.csv", keep_default_na=False).set_index("variant")
    assert df.loc["copy", "failure"] == (
        "the same model result (file contents) and parameters as variant 'k1' (row 3); left "
        "out so that it is not counted twice; remove the row")
    assert df.loc["slip", "failure"].startswith(
        "the same model result (file contents) as variant 'k2' (row 4) but other parameters "
        f"(k 9.5 against {K_VALUES[2]:g})")
    assert df.loc["k2", "failure"].startswith("the same model result (file contents) as "
                                              "variant 'slip' (row 6)")
    assert df.loc["k1", "failure"] == "" and df.loc["k0", "failure"] == ""
    assert sorted(df.loc[["k0", "k1"], "rank"]) == ["1", "2"]
    assert list(df.loc[["copy", "slip", "k2"], "rank"]) == [""] * 3
    assert "5 variants: 2 computed, 0 from the cache, 3 failed" in captured.out
    assert "error: variant 'slip' (row 6)" in captured.err


def test_variants_with_the_same_parameters_but_other_readings_are_warned(tmp_path, capsys):
    # Two variants with the same k whose readings differ (here by a factor c the table does not
    # list as a parameter): the difference cannot come from k, so the response surface fits
    # their mean; the identification says so (stderr, identified.json, sweep.html).
    k_study(tmp_path, k_true=1.04, noise=1.0)
    rows = [(f"k{i}", {"k": k, "c": 1.0}) for i, k in enumerate(K_VALUES)]
    rows.append(("hidden", {"k": K_VALUES[2], "c": 1.05}))
    write_variants(tmp_path, rows, scale=lambda p: p["k"] * p["c"])
    path = write_sweep(tmp_path, '[identify]\nparameters = ["k"]\nresponse = "quadratic"\n')
    assert main(["--quiet", "sweep", str(path), "--out", str(tmp_path / "o"),
                 "--workers", "1"]) == 0
    ident = json.loads((tmp_path / "o" / "identified.json").read_text())
    said = [w for w in ident["warnings"] if "have the same parameters" in w]
    assert len(said) == 1 and "'k2' (row 4), 'hidden' (row 7)" in said[0]
    assert said[0] in capsys.readouterr().err
    assert ident["identifiable"]   # a warning about the table, not about identifiability
    assert "have the same parameters" in (tmp_path / "o" / "sweep.html").read_text()


def test_readings_within_the_csv_precision_count_as_the_same_model():
    # 0.01 ue, the precision readings are written to: a re-export of the same result with other
    # bytes reads within it and gets no warning; beyond it, the readings differ
    from correlate.variants.results import same_parameters
    from correlate.variants.sweep_file import Variant

    variants = [Variant(name=n, row=r, file=Path("x.vtu"), case_files={}, parameters={"k": 1.0})
                for n, r in (("a", 2), ("b", 3))]
    P = np.array([[1.0], [1.0]])
    assert same_parameters(variants, P, np.array([[100.0, 5.0], [100.005, 5.0]]), "t.csv") == []
    lines = same_parameters(variants, P, np.array([[100.0, 5.0], [100.02, 5.0]]), "t.csv")
    assert len(lines) == 1 and "'a' (row 2), 'b' (row 3)" in lines[0]


def test_every_variant_failing_exits_2(tmp_path, capsys):
    k_study(tmp_path)
    (tmp_path / "variants.csv").write_text("name,file,k\na,none.vtu,1\nb,nothing.vtu,2\n")
    code = main(["--quiet", "sweep", str(write_sweep(tmp_path)), "--out", str(tmp_path / "o"),
                 "--workers", "1"])
    err = capsys.readouterr().err
    assert code == 2
    assert "every variant failed" in err and "none.vtu" in err and "nothing.vtu" in err
    (tmp_path / "variants.csv").write_text("name,file,k\na,none.vtu,1\n")
    assert main(["--quiet", "sweep", str(write_sweep(tmp_path)), "--out", str(tmp_path / "o"),
                 "--workers", "1"]) == 2
    assert "1 variant: 0 computed, 0 from the cache, 1 failed" in capsys.readouterr().out


def test_a_folder_of_another_sweep_is_refused_without_force(tmp_path, capsys):
    # the tool's own folder, but another sweep's (its marker names another sweep file)
    from correlate.commands.sweep import SWEEP_MARKER
    from correlate.core.folders import MARKER

    k_study(tmp_path)
    (tmp_path / "variants.csv").write_text("name,file,k\na,none.vtu,1\n")
    out = tmp_path / "o"
    out.mkdir()
    (out / MARKER).write_text("")
    (out / SWEEP_MARKER).write_text("../elsewhere/sweep.toml\n")
    code = main(["--quiet", "sweep", str(write_sweep(tmp_path)), "--out", str(out)])
    assert code == 2
    assert "is not this sweep's folder; add --force" in capsys.readouterr().err
    assert (out / SWEEP_MARKER).read_text() == "../elsewhere/sweep.toml\n"


def test_a_folder_the_tool_did_not_write_or_holding_an_input_is_refused_as_such(tmp_path, capsys):
    # "add --force" would be wrong advice for these: --force replaces only the tool's own folders
    # and never one that holds an input (common practice of the tool's output rules, README)
    k_study(tmp_path)
    (tmp_path / "variants.csv").write_text("name,file,k\na,none.vtu,1\n")
    sweep = write_sweep(tmp_path)
    out = tmp_path / "o"
    out.mkdir()
    (out / "notes.txt").write_text("mine")
    assert main(["--quiet", "sweep", str(sweep), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert "was not written by correlate" in err and "--force" not in err.split(";")[0]
    assert (out / "notes.txt").read_text() == "mine"
    assert main(["--quiet", "sweep", str(sweep), "--out", str(tmp_path)]) == 2
    err = capsys.readouterr().err
    assert "holds the input" in err and "add --force" not in err
    assert sweep.is_file()


def test_parameters_that_act_alike_raise_the_identifiability_warning(tmp_path, capsys):
    # k and c both scale the same field (reading proportional to k c): no set of readings can
    # tell them apart, so the scaled Jacobian is singular (Friswell and Mottershead 1995, ch. 7:
    # an ill-conditioned sensitivity matrix)
    k_study(tmp_path, k_true=1.04, noise=1.0)
    grid = [(f"v{i}{j}", {"k": k, "c": c}) for i, k in enumerate((0.98, 1.04, 1.1))
            for j, c in enumerate((0.97, 1.0, 1.03))]
    write_variants(tmp_path, grid, scale=lambda p: p["k"] * p["c"])
    path = write_sweep(tmp_path, '[identify]\nparameters = ["k", "c"]\nresponse = "linear"\n',
                       parameters='["k", "c"]')
    assert main(["--quiet", "sweep", str(path), "--out", str(tmp_path / "o"),
                 "--workers", "1"]) == 0
    ident = json.loads((tmp_path / "o" / "identified.json").read_text())
    assert not ident["identifiable"]
    assert ident["condition_number"] > 1e3
    assert any("act alike" in w for w in ident["warnings"])
    assert "act alike" in capsys.readouterr().err


def test_sweep_file_errors_name_the_file_and_key(tmp_path, capsys):
    k_study(tmp_path)
    (tmp_path / "variants.csv").write_text("name,file,k\na,a.vtu,1\na,b.vtu,2\n")
    path = write_sweep(tmp_path)
    assert main(["--quiet", "sweep", str(path), "--out", str(tmp_path / "o")]) == 2
    assert capsys.readouterr().err.strip() == (
        "error: variants.csv: row 3, column name: variant 'a' is also on row 2; names must be "
        "unique")
    (tmp_path / "variants.csv").write_text("name,file,k\na,a.vtu,1\nb,b.vtu,2\n")
    path.write_text(path.read_text() + '[identify]\nparameters = ["E"]\n')
    assert main(["--quiet", "sweep", str(path), "--out", str(tmp_path / "o")]) == 2
    assert "[identify] parameters E are not sweep parameters" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()
    (tmp_path / "variants.csv").write_text("name,file,k,t\na,a.vtu,1,2\nb,b.vtu,2,2\n")
    path = write_sweep(tmp_path, '[identify]\nparameters = ["k"]\n', parameters='["k", "t"]')
    assert main(["--quiet", "sweep", str(path), "--out", str(tmp_path / "o")]) == 2
    assert capsys.readouterr().err.strip() == (
        "error: sweep.toml: [identify] holds t fixed but [base] gives no value for them; add "
        "base = { t = ... } or list them in [identify] parameters")
    (tmp_path / "variants.csv").write_text("name,file,stiffness\na,a.vtu,1\n")
    assert main(["--quiet", "sweep", str(write_sweep(tmp_path)), "--out", str(tmp_path / "o")]) == 2
    assert capsys.readouterr().err.strip() == (
        "error: variants.csv: column(s) k missing; found name, file, stiffness; add the column, "
        "or correct the names in the sweep file's parameters")


def test_a_parameter_column_given_twice_is_refused(tmp_path, capsys):
    # pandas renames a repeated header 'k' to 'k.1' and the first column would be used silently
    k_study(tmp_path)
    (tmp_path / "variants.csv").write_text("name,file,k,k\na,a.vtu,1,2\n")
    assert main(["--quiet", "sweep", str(write_sweep(tmp_path)), "--out", str(tmp_path / "o")]) == 2
    assert capsys.readouterr().err.strip() == (
        "error: variants.csv: column 'k' appears 2 times in the header (columns 3, 4); rename "
        "or remove the others")
    assert not (tmp_path / "o").exists()


def test_a_table_saved_with_semicolons_and_decimal_commas_reads_as_the_comma_one(tmp_path):
    # a spreadsheet in a locale whose decimal mark is the comma saves ';'-separated text, often
    # with a byte-order mark: the same variants, values and files as the plain CSV
    from correlate.variants.sweep_file import read_sweep

    k_study(tmp_path)
    (tmp_path / "variants.csv").write_text("name,file,k\na,a.vtu,1.25\nb,b.vtu,0.5\n")
    plain = read_sweep(write_sweep(tmp_path)).variants
    (tmp_path / "variants.csv").write_bytes(
        "\ufeffname;file;k\na;a.vtu;1,25\nb;b.vtu;0,5\n".encode("utf-8"))
    local = read_sweep(write_sweep(tmp_path)).variants
    assert [(v.name, v.file, v.parameters, v.problem) for v in local] == \
        [(v.name, v.file, v.parameters, v.problem) for v in plain]
    assert [v.parameters["k"] for v in local] == [1.25, 0.5]


def test_uncertainty_budget_weights_the_identification_by_u_val(tmp_path, capsys):
    study = k_study(tmp_path, k_true=1.04, noise=2.0)
    study.write_text(study.read_text() + "[uncertainty]\ncoverage = 2.0\n"
                     "gauge_factor = 0.02\ndaq_ue = 2.0\n")
    write_variants(tmp_path, [(f"k{i}", {"k": k}) for i, k in enumerate(K_VALUES)])
    path = write_sweep(tmp_path, '[identify]\nparameters = ["k"]\nresponse = "linear"\n')
    assert main(["--quiet", "sweep", str(path), "--out", str(tmp_path / "o"),
                 "--workers", "1"]) == 0
    table = pd.read_csv(tmp_path / "o" / "variants.csv")
    states = table[["validation_model_error", "validation_uncertainty_dominated",
                    "validation_consistent"]].sum(axis=1)
    assert (states == table["healthy"]).all()   # each healthy gauge is in one state
    ident = json.loads((tmp_path / "o" / "identified.json").read_text())
    assert ident["weights"].startswith("1/u_val^2")
    # reference: weighted least squares in closed form. The readings are linear in k,
    # p(k) = a + k b per gauge-step, so k = sum w b (m - a) / sum w b^2 with w = 1 / u_val^2
    # (Seber and Wild, Nonlinear Regression, 1989, sec. 2.1), from two serial runs' gauges.csv
    text = study.read_text()
    frames = {}
    for name in ("k1", "k3"):
        one = tmp_path / f"study_{name}.toml"
        one.write_text(text.replace('file = "block.vtu"', f'file = "{name}.vtu"'))
        assert main(["--quiet", "run", str(one), "--out", str(tmp_path / name),
                     "--no-report"]) in (0, 3)
        frames[name] = pd.read_csv(tmp_path / name / "gauges.csv")
    capsys.readouterr()
    used = frames["k1"]["status"].isin(["pass", "fail"]).to_numpy()
    p1, p3 = (frames[n]["predicted_ue"].to_numpy()[used] for n in ("k1", "k3"))
    k1, k3 = K_VALUES[1], K_VALUES[3]
    b = (p3 - p1) / (k3 - k1)
    a = p1 - k1 * b
    m = frames["k1"]["measured_ue"].to_numpy()[used]
    # u_val holds only the gauge-factor and acquisition terms here, which depend on the measured
    # readings alone: the same in every variant's run
    u = frames["k1"]["u_val_ue"].to_numpy()[used]
    w = 1.0 / u**2
    k_wls = np.sum(w * b * (m - a)) / np.sum(w * b**2)
    # tolerance: gauges.csv keeps about 6 significant digits of each reading and u_val
    assert ident["estimate"]["k"] == pytest.approx(k_wls, rel=1e-4)
    assert abs(ident["estimate"]["k"] - 1.04) <= 2 * ident["standard_error"]["k"]


def test_sweep_page_shows_the_estimate_beside_the_best_variant(local_sweep):
    from PIL import Image

    out = local_sweep / "out"
    ident = json.loads((out / "identified.json").read_text())
    html = (out / "sweep.html").read_text()
    assert f"{ident['estimate']['k']:.4g}" in html
    assert f"best variant ({ident['best_variant']['variant']})" in html
    assert "These results support" in html
    # also outside the footer: the print stylesheet hides the page's footer, and a printed sweep
    # page must still carry the caution
    body = html.split("<footer>")[0].split("</header>")[1]
    assert "These results support" in body
    for name in ("metric", "response", "residuals"):
        assert f'src="sweep_figures/{name}.png"' in html
        image = np.asarray(Image.open(out / "sweep_figures" / f"{name}.png").convert("L"))
        # a drawn figure: at least a few percent of its pixels are ink, not background
        assert image.shape[0] > 300 and np.mean(image < 200) > 0.01


def test_an_unreachable_scheduler_gets_one_line_and_exit_2(local_sweep, tmp_path, capsys,
                                                           monkeypatch):
    """A free local port nobody listens on: the address named, what to do, nothing written.

    The connection timeout is shortened from the command's 10 s to keep the test cheap.
    """
    from correlate.variants import cluster

    monkeypatch.setattr(cluster, "CONNECT_TIMEOUT", "1s")
    address = f"tcp://127.0.0.1:{_free_port()}"
    capsys.readouterr()
    out = tmp_path / "nowhere"
    code = main(["--quiet", "sweep", str(local_sweep / "sweep.toml"), "--out", str(out),
                 "--scheduler", address])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2
    assert len(err) == 1 and address in err[0] and "dask scheduler" in err[0], err
    assert not (out / "variants.csv").exists()


def test_the_worker_neither_hashes_files_nor_reads_the_test_again(tmp_path, monkeypatch):
    """A variant's task hashes no file (the client hashed the variant's for the cache key; the
    worker writes no provenance) and does not read the readings file again (the base's test
    data is passed); a variant on the base mesh reuses the located gauges, and its readings and
    metrics equal, bit for bit, those of the same variant on a copy of the mesh located anew."""
    from correlate.comparison import pairing, verdict
    from correlate.readers import model as model_reader
    from correlate.variants.evaluate import correlate_variant, locate_base, same_mesh
    from correlate.variants.sweep_file import read_sweep

    k_study(tmp_path)
    write_variants(tmp_path, [("a", {"k": 1.02})])
    sweep = read_sweep(write_sweep(tmp_path))
    located = locate_base(sweep.study)
    variant = sweep.variants[0]
    hashed, read = [], []
    real_sha, real_read = verdict.sha256, pairing.read_readings
    monkeypatch.setattr(verdict, "sha256", lambda p: hashed.append(Path(p)) or real_sha(p))
    monkeypatch.setattr(pairing, "read_readings", lambda *a, **k: read.append(a) or
                        real_read(*a, **k))
    reused = correlate_variant(sweep.study, variant, located)
    assert hashed == [] and read == []
    assert not reused.failure and reused.same_mesh
    # the same mesh with one point moved by 1e-12 mm is another mesh: located anew
    mesh = model_reader.open_model(variant.file).mesh
    moved = mesh.points.copy()
    moved[0, 0] += 1e-12
    assert same_mesh(mesh, located.operator.mesh)
    assert not same_mesh(dataclasses.replace(mesh, points=moved), located.operator.mesh)
    meshio.write(tmp_path / "a.vtu", renumbered(meshio.read(variant.file)))
    anew = correlate_variant(sweep.study, variant, located)
    assert not anew.failure and not anew.same_mesh
    # tolerance: located anew on renumbered points, the interpolation sums the same terms in
    # another order; 1e-9 relative is far below the 6 significant digits variants.csv keeps
    np.testing.assert_allclose(anew.predicted, reused.predicted, rtol=1e-9, atol=1e-9)
    np.testing.assert_array_equal(anew.measured, reused.measured)
    assert anew.metrics["verdict"] == reused.metrics["verdict"]


def test_a_sweeps_cluster_leaves_port_8787_alone(recwarn):
    # Dask's scheduler starts an HTTP server even without a dashboard, on 8787 by default; with
    # another Dask dashboard on the machine the sweep printed "Port 8787 is already in use" and
    # an unclosed-socket warning (distributed.node.start_http_server, read in site-packages)
    from correlate.variants.cluster import local_cluster

    holder = socket.socket()
    try:
        holder.bind(("0.0.0.0", 8787))   # when it is free; taken by another process is the same
        holder.listen()
    except OSError:
        pass
    try:
        cluster = local_cluster(1)
        try:
            http = cluster.scheduler.http_server
            ports = {s.getsockname()[:2] for s in http._sockets.values()}
        finally:
            cluster.close()
    finally:
        holder.close()
    assert all(host == "127.0.0.1" and port != 8787 for host, port in ports), ports
    said = [str(w.message) for w in recwarn.list]
    assert not [m for m in said if "8787" in m or "unclosed" in m], said
