"""The report as a browser shows it: Debian's headless Chromium loads report.html from disk.

Checks that every picture decodes (in Chromium, through a copy of the page with a probe script,
and again with matplotlib's PNG reader), that the gauge table holds every gauge after load, and
saves a screenshot to test-output/report.png at the repository root for a person to look at.
The study is the hostile one of test_document (HTML, quotes, Unicode and a 500-character id).
"""

from __future__ import annotations

import base64
import io
import json
import os
import re
import subprocess
from pathlib import Path

import numpy as np
import pytest

# pytest puts this folder on sys.path (rootdir conftest, no __init__.py): share the study builder
from test_document import _Page, _tables, build_correlation

pytestmark = pytest.mark.browser

CHROMIUM = Path("/usr/bin/chromium")
REPO = Path(__file__).resolve().parents[2]
PROBE = """<pre id="probe"></pre><script>
window.addEventListener("load", function () {
  var out = [];
  for (var i = 0; i < document.images.length; i++) {
    var im = document.images[i];
    out.push([im.complete, im.naturalWidth, im.naturalHeight]);
  }
  document.getElementById("probe").textContent = JSON.stringify(out);
});
</script>"""


def _chromium(tmp: Path, *args: str) -> str:
    cmd = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
           "--no-first-run", "--disable-background-networking", "--disable-component-update",
           "--disable-sync", f"--user-data-dir={tmp / 'chromium-profile'}", *args]
    done = subprocess.run(cmd, capture_output=True, text=True, timeout=120, check=False,
                          env={**os.environ, "HOME": str(tmp)})
    assert done.returncode == 0, done.stderr[-2000:]
    return done.stdout


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory):
    if not CHROMIUM.exists():
        pytest.skip("chromium not installed: apt-get install chromium")
    from correlate.report import write_report

    folder = tmp_path_factory.mktemp("browser")
    corr = build_correlation(folder)
    out = folder / "out"
    out.mkdir()
    write_report(corr, out)
    return corr, out, folder


def test_tables_hold_every_gauge_after_load(report) -> None:
    corr, out, tmp = report
    dom = _chromium(tmp, "--dump-dom", (out / "report.html").as_uri())
    page = _Page()
    page.feed(dom)
    tables = _tables(page, "gauge", "predicted [ue]")
    assert tables, "no gauge table in the loaded page"
    for table in tables:
        assert sorted(r[0] for r in table[1:]) == sorted(corr.gauges)
    assert not any(tag == "script" for tag, _ in page.tags)


def test_every_picture_decodes(report) -> None:
    from matplotlib.image import imread

    _, out, tmp = report
    html = (out / "report.html").read_text(encoding="utf-8")
    sizes = [(int(w), int(h)) for w, h in re.findall(r'<img [^>]*width="(\d+)" height="(\d+)"',
                                                     html)]
    sources = re.findall(r'<img src="data:image/png;base64,([^"]+)"', html)
    assert sources and len(sources) == len(sizes)
    # matplotlib's PNG reader (libpng through Pillow) on each inline picture
    for data, (w, h) in zip(sources, sizes, strict=True):
        img = imread(io.BytesIO(base64.b64decode(data)), format="png")
        assert img.shape[:2] == (h, w)
        assert float(np.ptp(img[..., :3])) > 0
    # Chromium's own decoder: a copy of the page with a probe script reports each image
    probe = out / "probe.html"
    probe.write_text(html.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    dom = _chromium(tmp, "--virtual-time-budget=10000", "--dump-dom", probe.as_uri())
    found = re.search(r'<pre id="probe">([^<]*)</pre>', dom)
    assert found and found.group(1), "the probe script did not run"
    states = json.loads(found.group(1))
    assert [(ok, w, h) for ok, w, h in states] == [(True, w, h) for w, h in sizes]


def test_screenshot_for_a_person(report) -> None:
    from matplotlib.image import imread

    _, out, tmp = report
    target = REPO / "test-output" / "report.png"
    target.parent.mkdir(exist_ok=True)
    target.unlink(missing_ok=True)
    _chromium(tmp, f"--screenshot={target}", "--window-size=1400,3000",
              "--hide-scrollbars", (out / "report.html").as_uri())
    img = imread(target)
    assert img.shape[:2] == (3000, 1400)
    # the page is drawn: dark text and coloured pictures cover part of the white page
    assert (img[..., :3] < 0.8).any(axis=2).mean() > 0.02
