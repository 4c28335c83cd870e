"""The demo's invented [uncertainty] and [numerical] tables: what the budget says about them.

Outside facts: the invented truth built into the test log (demo_models/make_test_log.py: the part's
modulus is 0.95 times the analysis value, so measured/predicted = 1/0.95), and the mesh study of
demo_models/README.md (the shipped mesh against a finer reference: within 0.1 % in the prismatic
stretch, G02-G05; 1.5-3.9 % at the fillets G11, G12).
"""

from __future__ import annotations

import importlib.util
import json
from pathlib import Path

import pandas as pd
import pytest

from correlate.commands.cli import main

ROOT = Path(__file__).resolve().parents[2]
spec = importlib.util.spec_from_file_location("make_test_log", ROOT / "demo_models" / "make_test_log.py")
LOG = importlib.util.module_from_spec(spec)
spec.loader.exec_module(LOG)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "work"
    assert main(["--quiet", "demo", "--out", str(out)]) == 0
    run = out / "run"
    return {"run": run, "summary": json.loads((run / "summary.json").read_text()),
            "table": pd.read_csv(run / "uncertainty.csv").set_index("gauge")}


def test_systematic_part_brings_the_invented_truth_into_the_ratio_interval(demo):
    truth = 1 / LOG.STIFFNESS
    fit, ratio = demo["summary"]["fit"], demo["summary"]["validation"]["ratio"]
    low, high = fit["slope_origin_ci"]
    # The regression interval alone (scatter between gauges) misses the built-in truth ...
    assert not low <= truth <= high
    # ... the interval with the fully correlated terms (gauge-factor lot, load cell, modulus)
    # holds it: those errors act on every gauge at once and do not average out.
    assert ratio["lower"] <= truth <= ratio["upper"]
    assert ratio["u_systematic"] > 10 * ratio["u_statistical"]


def test_coarser_mesh_gives_u_num_where_the_mesh_study_found_it(demo):
    t = demo["table"]
    rel = t["u_num_ue"] / t["predicted_ue"].abs()
    # Prismatic stretch (mesh within 0.1 % of the finer one) against the fillets (1.5-3.9 %).
    assert rel[["G11", "G12"]].min() > 3 * rel[["G02", "G03", "G04", "G05"]].max()
    assert (t["factor"].dropna() == 3.0).all()   # two meshes: Roache's factor 3
    assert demo["summary"]["validation"]["inputs"]["numerical"]["meshes"][0]["file"]["path"] \
        == "bracket_coarse.vtu"


def test_the_report_shows_the_section(demo):
    html = (demo["run"] / "report.html").read_text(encoding="utf-8")
    assert "11. Validation uncertainty" in html and "Validation statement beside the verdict" in html
    assert (demo["run"] / "validation.png").exists()
