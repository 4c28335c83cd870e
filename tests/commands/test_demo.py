"""`correlate demo` end to end: the invented campaign's faults are all found, and nothing else.

The expected values are built into the invented test log (demo_models/make_test_log.py): a truth
modulus 0.95 times the analysis value (ratio 1/0.95 = 1.0526), and five named channel faults.
"""

from __future__ import annotations

import contextlib
import importlib.util
import io
import json
from pathlib import Path

import pandas as pd
import pytest

from correlate.commands.cli import main

ROOT = Path(__file__).resolve().parents[2]
spec = importlib.util.spec_from_file_location("make_test_log", ROOT / "demo_models" / "make_test_log.py")
LOG = importlib.util.module_from_spec(spec)
spec.loader.exec_module(LOG)
FAULTS = LOG.FAULTS


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "work"
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        assert main(["--quiet", "demo", "--out", str(out)]) == 0
    run = out / "run"
    return {"out": out, "run": run, "summary": json.loads((run / "summary.json").read_text()),
            "printed": printed.getvalue().splitlines(),
            "flags": pd.read_csv(run / "flags.csv"), "gauges": pd.read_csv(run / "gauges.csv")}


def test_outputs_exist_and_hold_every_gauge(demo):
    run = demo["run"]
    html = (run / "report.html").read_text(encoding="utf-8")
    gauges = pd.read_csv(demo["out"] / "gauges.csv")["gauge"]
    for g in gauges:
        assert g in html
    assert set(demo["gauges"]["gauge"]) == set(gauges)
    assert len(pd.read_csv(run / "rosettes.csv")) > 0


def test_overall_ratio_is_the_invented_stiffness_error(demo):
    # Built in: 1/0.95 = 1.0526. Tolerance 0.005: unloading steps read 0.6 % of peak high
    # (hysteresis) and channels carry 2 ue of noise.
    fit = demo["summary"]["fit"]
    assert fit["slope_origin"] == pytest.approx(1 / LOG.STIFFNESS, abs=0.005)


def test_each_invented_fault_is_found(demo):
    flags = demo["flags"]
    found = {(r.gauge, r.flag) for r in flags[flags["scope"] == "gauge"].itertuples()}
    assert (FAULTS["reversed"], "reversed") in found
    assert (FAULTS["dead"], "dead") in found
    assert (FAULTS["drift"], "drift") in found
    diag = pd.DataFrame(demo["summary"]["diagnoses"])
    by_gauge = diag.groupby("gauge")["explanation"].apply(set)
    assert "grid rotated 90 degrees" in by_gauge[FAULTS["rotated"]]
    assert "position offset" in by_gauge[FAULTS["offset"]]
    offset = diag[(diag["gauge"] == FAULTS["offset"]) & (diag["explanation"] == "position offset")]
    # the gauge was bonded 3 mm along its grid; the search reports the distance (tolerance:
    # a bore of radius 6 turns the straight offset into an arc, and the search stops at 0.5 %)
    assert offset["parameter"].iloc[0] == pytest.approx(LOG.OFFSET_MM[0], abs=0.3)
    assert offset["plausible"].iloc[0] is False


def test_no_other_gauge_is_flagged(demo):
    flagged = set(demo["flags"]["gauge"])
    assert flagged == set(FAULTS.values())


def test_terminal_names_the_corrected_channels_before_the_caution(demo):
    # The demo's quarter bridges are all corrected (3-wire leads, thermal output): the terminal
    # says how many, as many as corrections.csv has rows, and the caution stays the last word.
    from correlate.core.names import CAUTION

    lines = demo["printed"]
    corrections = pd.read_csv(demo["run"] / "corrections.csv")
    chain = [i for i, ln in enumerate(lines) if ln.startswith("measurement chain:")]
    assert len(chain) == 1
    assert f"{len(corrections)} channel(s) corrected" in lines[chain[0]]
    assert lines.index(CAUTION) == chain[0] + 1


def test_existing_demo_folder_needs_force(demo, capsys):
    assert main(["--quiet", "demo", "--out", str(demo["out"])]) == 2
    assert "--force" in capsys.readouterr().err


def test_shipped_log_is_what_the_seeded_generator_makes(tmp_path):
    # The log generator is seeded: rebuilding it must give the shipped file byte for byte.
    LOG.write_log(LOG.make_log(), tmp_path / "readings.csv")
    shipped = ROOT / "correlate" / "data" / "demo" / "readings.csv"
    assert (tmp_path / "readings.csv").read_bytes() == shipped.read_bytes()


def test_report_is_identical_between_runs_but_for_time_and_pictures(demo, tmp_path):
    # Reproducibility: the same inputs give the same HTML apart from the generation time; the
    # embedded pictures (PNG bytes from the renderer) are excluded from the comparison.
    import re

    assert main(["--quiet", "run", str(demo["out"] / "study.toml"), "--out",
                 str(tmp_path / "again")]) == 0

    def normalised(path: Path) -> str:
        text = path.read_text(encoding="utf-8")
        text = re.sub(r"data:image/png;base64,[A-Za-z0-9+/=]+", "data:image/png", text)
        return re.sub(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ", "TIME", text)

    assert normalised(tmp_path / "again" / "report.html") == normalised(demo["run"] / "report.html")


def test_verdict_is_provisional_until_the_flags_are_disposed_of(demo, tmp_path):
    # Issue 12: the shipped demo has three flags awaiting a disposition, so no verdict yet; the
    # dispositions written in demo_models/README.md (the invented analyst's) settle them.
    v = demo["summary"]["verdict"]
    assert v["state"] == "provisional"
    assert v["open_dispositions"] == ["G07", "G09", "G15"]
    assert v["result"] == "meets the criteria"      # what the criteria alone say, kept
    readme = (ROOT / "demo_models" / "README.md").read_text(encoding="utf-8")
    block = readme.split("```toml\n[[override]]", 1)[1].split("```", 1)[0]
    import shutil

    work = tmp_path / "work"
    shutil.copytree(demo["out"], work, ignore=shutil.ignore_patterns("run"))
    with open(work / "study.toml", "a", encoding="utf-8") as f:
        f.write("\n[[override]]" + block)
    assert main(["--quiet", "run", str(work / "study.toml"), "--out", str(work / "run")]) == 0
    summary = json.loads((work / "run" / "summary.json").read_text())
    assert summary["verdict"]["state"] == "meets"
    flags = pd.read_csv(work / "run" / "flags.csv", keep_default_na=False)
    for gauge, word in (("G07", "lead wires found swapped"), ("G09", "3 mm off"),
                        ("G15", "turned 90 degrees")):
        rows = flags[flags["gauge"] == gauge]
        assert rows["disposition"].str.contains(word).any(), gauge
        assert (rows["by"] == "A. Analyst (invented)").any()
    html = (work / "run" / "report.html").read_text(encoding="utf-8")
    assert "lead wires found swapped" in html
