"""The report's verdict box shows the verdict state as the run decided it, in its colour.

Small studies on the analytic block of ``tests/builders.py`` whose readings equal the model's
(so every gauge passes), scaled (so every gauge fails), or thinned by an exclusion below the
healthy share the study asks for (so the verdict is provisional). The page is parsed with the
standard library's html.parser; the 3D views are left out (tested in test_render/test_views).
"""

from __future__ import annotations

from pathlib import Path

import pytest
from builders import block_readings, default_gauges, write_block_study

# pytest puts this folder on sys.path (rootdir conftest, no __init__.py): share the page parser
from test_document import _Page

from correlate.comparison.verdict import DEFAULT_CRITERIA_SOURCE

EXCLUDE = '[[override]]\ngauge = "S03"\naction = "exclude"\nreason = "debonded"\n'


BUILDER_CRITERIA = "[criteria]\nrelative = 0.10\nabsolute_ue = 20.0\n"


def _report(folder: Path, *, gain: float = 1.0, extra: str = "", criteria: str = BUILDER_CRITERIA,
            defaults: bool = False):
    from correlate.comparison.correlation import correlate_study
    from correlate.readers.study import read_study
    from correlate.report import write_report

    gauges = default_gauges().iloc[[0, 3, 6]].reset_index(drop=True)
    rows = block_readings(gauges)
    for g in gauges["gauge"]:
        rows[g] = rows[g] * gain
    study = write_block_study(folder, readings_rows=rows, gauges=gauges, ctype="hexahedron",
                              extra_toml=extra)
    text = study.read_text(encoding="utf-8")
    assert text.count(BUILDER_CRITERIA) == 1
    study.write_text(text.replace(BUILDER_CRITERIA, criteria), encoding="utf-8")
    corr = correlate_study(read_study(study))
    # a study without [criteria] is marked by the reader (Study.criteria_given) and labelled
    assert (corr.summary["verdict"]["criteria"]["source"] == DEFAULT_CRITERIA_SOURCE) == defaults
    out = folder / "out"
    out.mkdir()
    with pytest.MonkeyPatch.context() as mp:
        import correlate.report.document as document

        mp.setattr(document, "_render", lambda corr, folder: (None, "views left out"))
        write_report(corr, out)
    page = _Page()
    page.feed((out / "report.html").read_text(encoding="utf-8"))
    return corr, page


def _box(page: _Page) -> tuple[str, set[str], str]:
    hits = [a for tag, a in page.tags if tag == "div" and "verdict" in (a.get("class") or "")]
    assert len(hits) == 1
    return hits[0]["data-state"], set(hits[0]["class"].split()), " ".join(" ".join(page.text).split())


@pytest.mark.parametrize(("gain", "extra", "criteria", "state", "colour", "alone"), [
    (1.0, "", BUILDER_CRITERIA, "meets", "ok", "meets the criteria"),
    # every reading 1.15 x the model: each gauge within 20 %, the ratio outside 0.9 to 1.1
    (1.15, "", "[criteria]\nrelative = 0.20\nabsolute_ue = 20.0\n", "does not meet", "not-ok",
     "does not meet the criteria"),
    # one of three gauges excluded leaves 67 % healthy, below the 90 % this study asks for
    (1.0, EXCLUDE, BUILDER_CRITERIA + "min_healthy_fraction = 0.9\n", "provisional",
     "provisional", "meets the criteria"),
], ids=["meets", "does-not-meet", "provisional"])
def test_box_shows_the_state_in_its_colour(tmp_path: Path, gain, extra, criteria, state, colour,
                                           alone) -> None:
    corr, page = _report(tmp_path, gain=gain, extra=extra, criteria=criteria)
    found, classes, text = _box(page)
    assert found == state == corr.summary["verdict"]["state"]
    assert colour in classes
    assert f"The criteria alone: the model {alone}." in text
    for reason in corr.summary["verdict"]["reasons"]:
        assert " ".join(reason.split()) in text
    assert corr.summary["verdict"]["direction"] in text


def test_box_says_when_the_criteria_are_the_tool_defaults(tmp_path: Path) -> None:
    _, page = _report(tmp_path, criteria="", defaults=True)
    _, _, text = _box(page)
    source = "tool defaults (no criteria given in the study)"
    assert f"Criteria: {source} \u2013 the study gives no [criteria] table." in text
