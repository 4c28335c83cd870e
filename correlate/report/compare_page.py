"""The revision comparison page (``compare.html``): reads the comparison and lays it out.

Stage: report. In: the comparison the ``compare`` command made (title, verdict line, the overall
and per-gauge tables) and the two run folders' ``summary.json``. Out: the HTML text, styled with
the report's own stylesheet, naming each run by its model revision (``[model] revision`` of its
study, kept in ``summary.json``) rather than by its folder.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from correlate.comparison.revisions import COLUMNS
from correlate.core.names import CAUTION

HERE = Path(__file__).parent

_HTML = """<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>{{ title }}</title>
<style>
{{ css | safe }}
tr.worse td, tr.newly-failing td { background: #fbeeed; }
tr.improved td, tr.fixed td { background: #eef7f0; }
.verdict.same { border-left-color: var(--accent); }
</style>
</head>
<body>
<header>
<h1>{{ title }}</h1>
<p class="subtitle">Comparison of two correlation runs made from the same test data</p>
</header>
<section id="verdict">
<h2>1. Verdict</h2>
<div class="box verdict {{ css_class }}" data-verdict="{{ word }}">
<div class="result">{{ verdict }}</div>
{% if reasons %}<ul class="reasons">{% for r in reasons %}<li>{{ r }}</li>{% endfor %}</ul>{% endif %}
</div>
{% for n in notes %}<p class="box caution">Note: {{ n }}</p>
{% endfor %}</section>
<section id="runs">
<h2>2. Runs</h2>
<div class="wide"><table class="runs">
<thead><tr><th>run</th><th>folder</th><th>model file</th><th>model revision</th><th>generated</th><th>verdict of the run</th></tr></thead>
<tbody>
{% for r in runs %}<tr><td class="id">{{ r.name }}</td><td class="id">{{ r.folder }}</td><td class="id">{{ r.file }}</td><td>{{ r.revision }}</td><td>{{ r.generated }}</td><td>{{ r.state }}</td></tr>
{% endfor %}
</tbody>
</table></div>
</section>
<section id="overall">
<h2>3. Overall fit</h2>
<table class="overall">
<thead><tr><th>quantity</th><th class="num">{{ old }}</th><th class="num">{{ new }}</th></tr></thead>
<tbody>
{% for k, v in overall %}<tr><td>{{ k }}</td><td class="num">{{ v[0] }}</td><td class="num">{{ v[1] }}</td></tr>
{% endfor %}
</tbody>
</table>
</section>
<section id="gauges">
<h2>4. Gauges</h2>
<p>RMS of the difference (measured - predicted) over pass/fail rows; |difference| at step {{ step }}, sequence {{ seq }}. Microstrain. "old" is {{ old }}, "new" is {{ new }}.</p>
<div class="wide"><table class="gauges">
<thead><tr>{% for c in columns %}<th{% if loop.index > 4 %} class="num"{% endif %}>{{ c }}</th>{% endfor %}</tr></thead>
<tbody>
{% for row in rows %}<tr class="{{ row[1] | replace(' ', '-') }}">{% for v in row %}<td{% if loop.index > 4 %} class="num"{% elif loop.first %} class="id"{% endif %}>{{ v }}</td>{% endfor %}</tr>
{% endfor %}
</tbody>
</table></div>
<div class="box caution">{{ caution }}</div>
</section>
<footer>{{ title }}</footer>
</body>
</html>
"""


def cell_text(v: Any) -> str:
    return v if isinstance(v, str) else "" if not np.isfinite(v) else f"{v:.1f}"


def _summary(folder: str) -> dict[str, Any]:
    """A run folder's summary.json (the command has checked it); {} when it cannot be read."""
    try:
        data = json.loads((Path(folder) / "summary.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    return data if isinstance(data, dict) else {}


def run_names(old: str, new: str, summaries: tuple[dict[str, Any], dict[str, Any]] | None = None
              ) -> tuple[str, str]:
    """Each run's name: "revision X" from its summary's model revision, else its folder name;
    the folder is added when both would read the same."""
    summaries = summaries or (_summary(old), _summary(new))
    names = []
    for folder, summary in zip((old, new), summaries, strict=True):
        model = summary.get("model", {}) if isinstance(summary.get("model"), dict) else {}
        revision = str(model.get("revision", "") or "").strip()
        names.append(f"revision {revision}" if revision else Path(folder).name or str(folder))
    if names[0] == names[1]:
        names = [f"{n} ({Path(f).name or f})" for n, f in zip(names, (old, new), strict=True)]
        if names[0] == names[1]:
            names = [f"{n[:-1]}, {p})" for n, p in zip(names, ("old", "new"), strict=True)]
    return names[0], names[1]


def _named(text: str, paths: tuple[str, str], names: tuple[str, str]) -> str:
    """``text`` with each folder path replaced by its run's name (longer path first, through
    placeholders, so that one path inside the other is not replaced twice)."""
    order = sorted(range(2), key=lambda k: -len(paths[k]))
    marks = ["\x00old\x00", "\x00new\x00"]
    for k in order:
        if paths[k]:
            text = text.replace(paths[k], marks[k])
    for k in range(2):
        text = text.replace(marks[k], names[k])
    return text.replace("revision revision ", "revision ")


def _run_row(name: str, folder: str, summary: dict[str, Any]) -> dict[str, str]:
    model = summary.get("model", {}) if isinstance(summary.get("model"), dict) else {}
    verdict = summary.get("verdict", {}) if isinstance(summary.get("verdict"), dict) else {}
    provenance = summary.get("provenance", {}) if isinstance(summary.get("provenance"), dict) else {}
    return {"name": name, "folder": str(folder), "file": str(model.get("file", "") or "\u2013"),
            "revision": str(model.get("revision", "") or "not given"),
            "generated": str(provenance.get("generated", "") or "\u2013"),
            "state": str(verdict.get("state", verdict.get("result", "")) or "\u2013")}


def render_compare_page(*, title: str, verdict: str, reasons: list[str], old: str, new: str,
                        reference: dict[str, Any], overall: dict[str, tuple[float, float]],
                        table: pd.DataFrame, notes: list[str] | None = None) -> str:
    """The HTML text of ``compare.html``.

    ``old`` and ``new`` are the run folders; the page names each run by its model revision, and
    the folder paths in ``title``, ``verdict`` and ``reasons`` are replaced by those names.
    """
    from jinja2 import Environment

    summaries = (_summary(old), _summary(new))
    names = run_names(old, new, summaries)
    paths = (str(old), str(new))
    line = _named(verdict, paths, names)
    word = next((w for w in ("worse", "better", "about the same") if f" is {w} " in line), "")
    css_class = {"worse": "not-ok", "better": "ok"}.get(word, "same")
    return Environment(autoescape=True).from_string(_HTML).render(
        title=_named(title, paths, names), verdict=line, word=word, css_class=css_class,
        reasons=[_named(r, paths, names) for r in reasons], old=names[0], new=names[1],
        notes=[_named(n, paths, names) for n in notes or []],
        runs=[_run_row(n, f, s) for n, f, s in zip(names, paths, summaries, strict=True)],
        step=reference["step"], seq=reference["sequence"], columns=COLUMNS,
        css=(HERE / "report.css").read_text(encoding="utf-8"),
        overall=[(k, (f"{o:.4g}", f"{n:.4g}")) for k, (o, n) in overall.items()],
        rows=[[cell_text(v) for v in r] for r in table.itertuples(index=False)], caution=CAUTION)
