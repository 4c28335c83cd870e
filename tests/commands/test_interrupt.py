"""Output folders are staged, never half-written, and reproducible.

The promise (README.md, "Commands and outputs"): a run writes into a temporary folder beside DIR
and moves it into place only when complete; an existing DIR is replaced only with --force; inputs
are never changed; the same inputs give byte-identical CSV and JSON apart from the `generated`
timestamp in summary.json.

Interrupted runs use the test hook CORRELATE_PAUSE_AT=<stage> (run.py `_pause`): a subprocess
`python -m correlate run ... --force` is held at a named stage and sent SIGINT or SIGKILL. The
process is known to be held when its main thread sleeps in the kernel's nanosleep (Linux
/proc/<pid>/wchan; elsewhere these tests skip). The interrupted runs start together, so the slow
imports overlap on the two cores.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from builders import block_readings, default_gauges, write_small_study

from correlate.commands.cli import main

pytestmark = pytest.mark.skipif(not Path(f"/proc/{os.getpid()}/wchan").exists(),
                                reason="needs Linux /proc/<pid>/wchan to see the paused run")

# (stage, signal): every stage with SIGINT (the run must clean up after itself), and SIGKILL while
# the outputs sit in the staging folder (nothing can clean up; the previous folder must be intact).
# A SIGKILL before the write adds nothing a SIGINT there does not show, and costs an interpreter.
# SIGTERM (what `kill` and service managers send) is handled as SIGINT: shown at the write stage.
SCENARIOS = [("readings", "SIGINT"), ("model", "SIGINT"), ("health", "SIGINT"), ("write", "SIGINT"),
             ("write", "SIGTERM"), ("write", "SIGKILL")]
IDS = [f"{sig.lower()}-at-{stage}" for stage, sig in SCENARIOS]
WAIT = 90.0  # seconds: generous for five interpreters importing numpy, scipy, pandas on 2 cores


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` by relative path, with its bytes."""
    return {str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file()}


def digests(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())
            if p.is_file()}


def leftovers(out: Path) -> list[str]:
    """Staging folders of ``out`` left beside it (.NAME.partial-*, .NAME.old-*)."""
    return sorted(p.name for p in out.parent.iterdir() if p.name.startswith(f".{out.name}."))


def _paused(pid: int) -> bool:
    try:
        return "nanosleep" in Path(f"/proc/{pid}/wchan").read_text()
    except OSError:
        return False


def _default_sigint() -> None:
    # a suite started as a background job of a non-interactive shell inherits SIGINT ignored
    # (POSIX shells do that to background jobs), and Python keeps an ignored SIGINT ignored: the
    # child would sleep through the signal. Ctrl-C reaches an interactive run; so must the test's.
    signal.signal(signal.SIGINT, signal.SIG_DFL)


@pytest.fixture(scope="module")
def campaign(tmp_path_factory):
    """A small study, and one completed run folder of it to copy as the 'previous' DIR."""
    folder = tmp_path_factory.mktemp("campaign")
    gauges = default_gauges().iloc[[0, 1, 2, 10, 11, 12]].reset_index(drop=True)  # 3 + a rosette
    inputs = folder / "inputs"
    inputs.mkdir()
    study = write_small_study(inputs, gauges=gauges)
    previous = folder / "previous"
    assert main(["--quiet", "run", str(study), "--out", str(previous), "--no-report"]) == 0
    return {"folder": folder, "study": study, "inputs": inputs, "previous": previous,
            "gauges": gauges}


@pytest.fixture(scope="module")
def interrupted(campaign):
    """Start every scenario's run at once, hold each at its stage, signal it, collect results."""
    before = digests(campaign["inputs"])
    runs = []
    for (stage, sig), name in zip(SCENARIOS, IDS, strict=True):
        work = campaign["folder"] / name
        work.mkdir()
        out = work / "out"
        shutil.copytree(campaign["previous"], out)  # the previous DIR, byte for byte
        env = dict(os.environ, CORRELATE_PAUSE_AT=stage, CORRELATE_PAUSE_SECONDS="300",
                   OMP_NUM_THREADS="1", OPENBLAS_NUM_THREADS="1")  # five runs share two cores
        proc = subprocess.Popen(
            [sys.executable, "-m", "correlate", "--quiet", "run", str(campaign["study"]),
             "--out", str(out), "--force", "--no-report"],
            cwd=work, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
            preexec_fn=_default_sigint)
        runs.append({"stage": stage, "signal": sig, "name": name, "out": out, "proc": proc,
                     "before": snapshot(out), "held": False, "staged_seen": False})
    deadline = time.monotonic() + WAIT
    pending = list(runs)
    while pending and time.monotonic() < deadline:
        for run in list(pending):
            proc = run["proc"]
            if proc.poll() is not None:  # finished or failed on its own: a finding
                pending.remove(run)
                continue
            staged = [p for p in run["out"].parent.glob(".out.partial-*")
                      if (p / "summary.json").exists()]
            ready = _paused(proc.pid) and (run["stage"] != "write" or staged)
            if ready:
                time.sleep(0.05)
                if not _paused(proc.pid):
                    continue
                run["held"] = True
                run["staged_seen"] = bool(staged)
                proc.send_signal(getattr(signal, run["signal"]))
                pending.remove(run)
        time.sleep(0.02)
    for run in runs:
        if run["proc"].poll() is None and not run["held"]:
            run["proc"].kill()
        try:
            run["stdout"], run["stderr"] = run["proc"].communicate(timeout=30)
        except subprocess.TimeoutExpired:
            run["proc"].kill()
            run["stdout"], run["stderr"] = run["proc"].communicate()
        run["code"] = run["proc"].returncode
    return {"runs": {r["name"]: r for r in runs}, "inputs_before": before,
            "inputs_after": digests(campaign["inputs"])}


@pytest.mark.parametrize("name", IDS, ids=IDS)
def test_interrupted_run_leaves_the_previous_folder_intact(interrupted, name):
    run = interrupted["runs"][name]
    assert run["held"], f"the run never reached stage {run['stage']}: {run['stderr'][-500:]}"
    if run["stage"] == "write":
        assert run["staged_seen"]  # it was killed while its outputs sat in the staging folder
    assert run["out"].is_dir()
    assert snapshot(run["out"]) == run["before"]  # byte-identical, nothing added or removed


@pytest.mark.parametrize("name", [n for n in IDS if n.startswith(("sigint", "sigterm"))],
                         ids=[n for n in IDS if n.startswith(("sigint", "sigterm"))])
def test_sigint_and_sigterm_clean_up_and_say_so(interrupted, name):
    run = interrupted["runs"][name]
    assert run["held"]
    assert run["code"] == 130, run["stderr"]
    assert "interrupted" in run["stderr"] and "Traceback" not in run["stderr"]
    assert leftovers(run["out"]) == []


@pytest.mark.parametrize("name", [n for n in IDS if n.startswith("sigkill")],
                         ids=[n for n in IDS if n.startswith("sigkill")])
def test_sigkill_leaves_at_most_a_staging_folder(interrupted, name):
    # A killed process cannot clean up: a .out.partial-* folder and the lock file .out.lock may
    # remain once the write began (acceptable, since DIR itself is intact; see the test above;
    # the lock is released by the kernel and the next run takes it), and none before it.
    run = interrupted["runs"][name]
    assert run["held"]
    assert run["code"] == -signal.SIGKILL
    left = leftovers(run["out"])
    assert all(n.startswith(".out.partial-") or n == ".out.lock" for n in left), left
    if run["stage"] != "write":
        assert left == []


def test_interrupted_runs_never_touch_the_inputs(interrupted):
    assert interrupted["inputs_after"] == interrupted["inputs_before"]


def test_existing_folder_is_not_replaced_without_force(campaign, tmp_path, capsys):
    for command in ("run", "predict"):
        out = tmp_path / command
        shutil.copytree(campaign["previous"], out)
        before = snapshot(out)
        capsys.readouterr()
        assert main(["--quiet", command, str(campaign["study"]), "--out", str(out)]) == 2
        err = capsys.readouterr().err
        assert "--force" in err and str(out) in err
        assert snapshot(out) == before
        assert leftovers(out) == []


def test_forced_run_replaces_the_whole_folder(campaign, tmp_path, capsys):
    # Nothing of the previous folder survives (no stale file from an older version), and no
    # staging or old folder is left beside it.
    out = tmp_path / "out"
    shutil.copytree(campaign["previous"], out)
    (out / "stale.txt").write_text("from an older run")
    before = digests(campaign["inputs"])
    assert main(["--quiet", "run", str(campaign["study"]), "--out", str(out), "--force",
                 "--no-report"]) == 0
    assert not (out / "stale.txt").exists()
    assert (out / "summary.json").is_file()
    assert leftovers(out) == []
    assert digests(campaign["inputs"]) == before


def test_failed_run_leaves_the_previous_folder_and_no_staging(campaign, tmp_path, capsys):
    # An input problem found after the output check (a bad reading) must not touch DIR.
    inputs = tmp_path / "inputs"
    inputs.mkdir()
    study = write_small_study(inputs, gauges=campaign["gauges"])
    df = block_readings(campaign["gauges"]).astype({"S01": object})
    df.loc[2, "S01"] = "12.5x"
    df.to_csv(inputs / "readings.csv", index=False)
    out = tmp_path / "out"
    shutil.copytree(campaign["previous"], out)
    before = snapshot(out)
    assert main(["--quiet", "run", str(study), "--out", str(out), "--force", "--no-report"]) == 2
    assert snapshot(out) == before
    assert leftovers(out) == []


def test_same_inputs_give_byte_identical_tables_and_summary(campaign, tmp_path):
    # Two runs and two predictions of the same study: every CSV
    # and JSON file is byte-identical, except summary.json's provenance.generated timestamp.
    study = campaign["study"]
    for k in ("a", "b"):
        assert main(["--quiet", "run", str(study), "--out", str(tmp_path / f"run_{k}"),
                     "--no-report"]) == 0
        assert main(["--quiet", "predict", str(study), "--out", str(tmp_path / f"pred_{k}")]) == 0
    for kind in ("run", "pred"):
        a, b = tmp_path / f"{kind}_a", tmp_path / f"{kind}_b"
        files = sorted(str(p.relative_to(a)) for p in a.rglob("*") if p.suffix in (".csv", ".json"))
        assert files == sorted(str(p.relative_to(b)) for p in b.rglob("*")
                               if p.suffix in (".csv", ".json"))
        assert files, f"no CSV or JSON written by {kind}"
        for rel in files:
            if rel == "summary.json":
                ja, jb = (json.loads((d / rel).read_text(encoding="utf-8")) for d in (a, b))
                ga, gb = ja["provenance"].pop("generated"), jb["provenance"].pop("generated")
                assert ga and gb
                assert ja == jb
                # and the rest of the text is identical byte for byte, not only equal as data
                ta = (a / rel).read_text(encoding="utf-8").replace(ga, "")
                tb = (b / rel).read_text(encoding="utf-8").replace(gb, "")
                assert ta == tb
            else:
                assert (a / rel).read_bytes() == (b / rel).read_bytes(), rel
