"""The report's "Measurement chain" section: present with the chain's keys, absent without."""

from __future__ import annotations

import json
import re

import pandas as pd
from builders import CHAIN_GF as GF
from builders import CHAIN_TEMPS as TEMPS
from builders import chain_study, default_gauges, write_small_study
from builders import chain_thermal_output as thermal_output

from correlate.commands.cli import main


def test_report_names_each_corrected_channel_and_its_thermal_output(tmp_path):
    gauges = default_gauges().iloc[[0, 1, 2]].reset_index(drop=True)
    study, _, raw = chain_study(tmp_path, gauges, shunt=True)
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "run")]) == 0
    html = (tmp_path / "run" / "report.html").read_text(encoding="utf-8")
    section = html.split('<section class="major" id="measurement-chain">', 1)[1].split("</section>")[0]
    assert "<h2>Measurement chain</h2>" in section
    corrections = pd.read_csv(tmp_path / "run" / "corrections.csv").set_index("gauge")
    for g in gauges["gauge"]:
        assert f'<td class="id">{g}</td>' in section
    # the thermal output removed at the reference step, (TO(T) - TO(T_tare)) 2.00/GF (TN-504,
    # from memory), shown to 0.01 ue as corrections.csv holds it
    ref = json.loads((tmp_path / "run" / "summary.json").read_text("utf-8"))["reference_step"]
    t = float(raw.loc[raw["step"] == ref["step"], "temp_C"].iloc[0])
    shown = f"{(thermal_output(t) - thermal_output(TEMPS[0])) * 2.0 / GF:.2f}"
    assert shown == f"{corrections.loc['S00', 'thermal_ue']:.2f}"
    assert f'<td class="num">{shown}</td>' in section
    # the shunt channel's note, listed once with the channel it applies to
    assert '<span class="id">S02</span>: ' in section
    assert "lead-wire factor not applied" in section


def test_report_has_no_chain_section_without_the_keys(tmp_path):
    study = write_small_study(tmp_path)
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "run")]) == 0
    html = (tmp_path / "run" / "report.html").read_text(encoding="utf-8")
    assert not re.search("measurement-chain|Measurement chain", html)
