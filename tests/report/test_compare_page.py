"""compare.html: styled like the report, naming each run by its model revision.

Two run folders hold only the ``summary.json`` the page reads (the comparison itself is tested in
tests/comparison/test_revisions.py); the page is parsed with the standard library's html.parser.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pandas as pd
import pytest

# pytest puts this folder on sys.path (rootdir conftest, no __init__.py): share the page parser
from test_document import _Page

from correlate.comparison.revisions import COLUMNS
from correlate.report.compare_page import render_compare_page, run_names


def _run(folder: Path, revision: str | None) -> str:
    folder.mkdir(parents=True)
    model = {"file": "bracket.vtu", **({"revision": revision} if revision is not None else {})}
    summary = {"model": model, "verdict": {"state": "meets"},
               "provenance": {"generated": "2026-12-03T10:00:00Z"}}
    (folder / "summary.json").write_text(json.dumps(summary), encoding="utf-8")
    return str(folder)


def _page(old: str, new: str) -> tuple[str, _Page]:
    table = pd.DataFrame([["G1", "improved", "fail", "pass", 80.0, 20.0, -60.0, 90.0, 25.0]],
                         columns=COLUMNS)
    html = render_compare_page(
        title=f"Comparison of {new} with {old}", verdict=f"revision {new} is better than {old}",
        reasons=[f"RMS difference fell from 80 to 20 ue ({old} to {new})"], old=old, new=new,
        reference={"step": 7, "sequence": 1}, overall={"ratio": (1.2, 1.01)}, table=table)
    page = _Page()
    page.feed(html)
    return html, page


def test_runs_are_named_by_their_model_revision(tmp_path: Path) -> None:
    old = _run(tmp_path / "runs" / "first", "A")
    new = _run(tmp_path / "runs" / "first-again", "B <rev>")
    html, page = _page(old, new)
    assert page.h1.strip() == "Comparison of revision B <rev> with revision A"
    text = " ".join(" ".join(page.text).split())
    assert "revision B <rev> is better than revision A" in text
    assert "RMS difference fell from 80 to 20 ue (revision A to revision B <rev>)" in text
    # the folders appear once each, in the runs table, and nowhere in the headline
    assert old not in page.h1 and sum(c == old for t in page.tables for r in t for c in r) == 1
    runs = next(t for t in page.tables if t and t[0][:2] == ["run", "folder"])
    assert [r[:2] for r in runs[1:]] == [["revision A", old], ["revision B <rev>", new]]
    verdict = [a for tag, a in page.tags if tag == "div" and "verdict" in (a.get("class") or "")]
    assert verdict[0]["data-verdict"] == "better" and "ok" in verdict[0]["class"].split()
    assert "<rev>" not in html          # escaped


def test_page_uses_the_report_stylesheet(tmp_path: Path) -> None:
    html, page = _page(_run(tmp_path / "a", "A"), _run(tmp_path / "b", "B"))
    css = (Path(__file__).resolve().parents[2] / "correlate" / "report" / "report.css").read_text(
        encoding="utf-8")
    assert css.strip() in html
    assert not any(tag in ("link", "script", "img") for tag, _ in page.tags)


@pytest.mark.parametrize(("old_rev", "new_rev", "expected"), [
    (None, None, ("a", "b")),
    ("A", None, ("revision A", "b")),
    ("C", "C", ("revision C (a)", "revision C (b)")),
], ids=["no-revision", "one-revision", "same-revision"])
def test_names_fall_back_to_the_folder(tmp_path: Path, old_rev, new_rev, expected) -> None:
    assert run_names(_run(tmp_path / "a", old_rev), _run(tmp_path / "b", new_rev)) == expected


@pytest.mark.browser
def test_a_tablet_window_needs_no_sideways_scrolling(tmp_path: Path) -> None:
    # Run folders with long paths (as on a shared drive) and the gauges table's long headings:
    # at 800 px the runs and gauges tables scroll in their own box, not the page (headless
    # Chromium lays the page out; a script writes the document's scroll and client widths).
    from test_print import _chromium

    deep = tmp_path / "projects" / "bracket-proof-test-campaign-2026" / "correlation-runs"
    html, _ = _page(_run(deep / "model-revision-A-baseline", "A"),
                    _run(deep / "model-revision-B-clamp-update", "B"))
    probe = tmp_path / "compare_probe.html"
    probe.write_text(html.replace("</body>", (
        "<script>window.addEventListener('load', () => { const d = document.documentElement;"
        " const p = document.createElement('pre'); p.id = 'widths';"
        " p.textContent = d.scrollWidth + ' ' + d.clientWidth; document.body.appendChild(p);"
        " });</script></body>")), encoding="utf-8")
    dom = _chromium(tmp_path, "--window-size=800,900", "--virtual-time-budget=3000",
                    "--dump-dom", probe.as_uri())
    scroll, client = map(int, re.search(r'<pre id="widths">(\d+) (\d+)</pre>', dom).groups())
    assert 720 <= client <= 800
    assert scroll <= client, f"the page is {scroll - client} px wider than the window"
