"""The sweep page (``sweep.html``) and its figures: the variants ranked, the parameters identified.

Stage: report. In: the rows of ``variants.csv`` and the content of ``identified.json`` (or None
without ``[identify]``), as the sweep command made them. Out: ``sweep.html`` and PNG figures in
``sweep_figures/`` beside it: the RMS difference against each parameter, the readings at the
estimate against the measured ones, and the residual per gauge, each with the best variant beside
the estimate. It reads the results and draws them; it computes no physics.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from correlate.core.names import CAUTION
from correlate.report.figures import FIT, MEASURED, PREDICTED, REFERENCE, _figure, _quiet, _save

__all__ = ["FIGURES", "render_sweep_page"]

HERE = Path(__file__).parent
FIGURES = "sweep_figures"
TOP = 30   # variants listed in the page's table (all are in variants.csv)

_HTML = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{{ title }}</title>
<meta name="viewport" content="width=device-width, initial-scale=1">
<style>{{ css | safe }}
img.figure { max-width: 100%; }
td.failure { color: #8a1c1c; }
table.variants { font-size: 0.75rem; }
@media print {
  table.variants { font-size: 6.5pt; }
  /* a figure shrinks to fit beside its text, and a section's lead stays with its figure */
  img.figure { display: block; max-height: 95mm; width: auto; max-width: 100%; }
  #variants > p { break-after: avoid; }
}
</style>
</head>
<body>
<header>
<h1>{{ title }}</h1>
<p class="subtitle">{{ subtitle }}</p>
</header>
<div class="box caution">{{ caution }}</div>
<section id="identified">
<h2>1. Parameters identified from the readings</h2>
{% if ident %}
<p>{{ ident.method }}; {{ ident.response }} response surface over {{ ident.variants_used }}
variants{% if ident.log %} (log scale: {{ ident.log | join(', ') }}){% endif %}; weights
{{ ident.weights }}{% if ident.held %}; held at base values: {% for k, v in ident.held.items() %}{{ k }} = {{ fmt(v) }}{% if not loop.last %}, {% endif %}{% endfor %}{% endif %}.</p>
<table class="identified">
<thead><tr><th>parameter</th><th>estimate</th><th>standard error</th><th>searched within</th><th>best variant ({{ ident.best_variant.variant }})</th></tr></thead>
<tbody>
{% for p in ident.parameters %}<tr><td class="id">{{ p }}</td><td>{{ fmt(ident.estimate[p]) }}</td><td>{{ fmt(ident.standard_error[p]) }}</td><td>{{ fmt(ident.bounds.lower[loop.index0]) }} to {{ fmt(ident.bounds.upper[loop.index0]) }}</td><td>{{ fmt(ident.best_variant[p]) }}</td></tr>
{% endfor %}
</tbody>
</table>
<p>RMS of measured minus predicted over the {{ n_readings }} gauge-steps used: {{ fmt(rms_estimate) }} µε at
the estimate, {{ fmt(rms_best) }} µε for the best variant. Condition number of the scaled
Jacobian {{ fmt(ident.condition_number) }}; the response surface's leave-one-out error is up to
{{ fmt(ident.surface_loo_rms_ue_max) }} µε (RMS over the gauge-steps of the variant left out).</p>
{% if ident.parameters | length > 1 %}<p>Correlation of the estimates:
{% for row in ident.correlation %}[{% for v in row %}{{ fmt(v) }}{% if not loop.last %}, {% endif %}{% endfor %}]{% endfor %}</p>{% endif %}
{% if ident.warnings %}<div class="box verdict not-ok"><ul>{% for w in ident.warnings %}<li>{{ w }}</li>{% endfor %}</ul></div>
{% else %}<p>No identifiability warning.</p>{% endif %}
<img class="figure" src="{{ figures }}/response.png" alt="readings at the estimate and of the best variant against the measured readings">
<img class="figure" src="{{ figures }}/residuals.png" alt="residual per gauge at the estimate and for the best variant">
{% else %}<p>The sweep file has no [identify] table: the variants are ranked only.</p>{% endif %}
</section>
<section id="variants">
<h2>2. Variants ranked</h2>
<p>Ranked by the RMS difference of the healthy gauges, then by pass fraction; each variant is
the base study's whole comparison run on its model result. {{ n_ok }} of {{ n_all }} variants
were correlated{% if n_all > top %}; the first {{ top }} are listed (all are in variants.csv){% endif %}.</p>
<img class="figure" src="{{ figures }}/metric.png" alt="RMS difference against each parameter">
<div class="wide"><table class="variants">
<thead><tr>{% for c in columns %}<th>{% for part in c.split('_') %}{{ part }}{% if not loop.last %}_<wbr>{% endif %}{% endfor %}</th>{% endfor %}</tr></thead>
<tbody>
{% for r in rows %}<tr>{% for c in columns %}<td{% if c == 'failure' %} class="failure"{% endif %}>{{ r[c] }}</td>{% endfor %}</tr>
{% endfor %}
</tbody>
</table></div>
</section>
<footer><p class="caution">{{ caution }}</p></footer>
</body>
</html>
"""


def _fmt(value: Any) -> str:
    if value is None or (isinstance(value, float) and not np.isfinite(value)):
        return "n/a"
    if isinstance(value, int | float | np.floating | np.integer):
        return f"{float(value):.4g}"
    return str(value)


def render_sweep_page(table: pd.DataFrame, identified: dict[str, Any] | None,
                      parameters: list[str], figures: Path, *, title: str) -> str:
    """Draw the figures into the folder ``figures`` and return the page's HTML.

    The page refers to the figures as ``sweep_figures/<name>.png``: the caller moves the folder
    there, beside the page.
    """
    from jinja2 import Environment

    ok = table[table["failure"].fillna("") == ""]
    plot_metric(ok, parameters, identified, figures / "metric.png")
    rms_estimate = rms_best = np.nan
    n_readings = 0
    if identified is not None:
        readings = pd.DataFrame(identified["readings"])
        n_readings = len(readings)
        rms_estimate = float(np.sqrt(np.mean(readings["residual_ue"] ** 2)))
        rms_best = float(np.sqrt(np.mean((readings["measured_ue"]
                                          - readings["best_variant_ue"]) ** 2)))
        plot_response(readings, identified["best_variant"]["variant"], figures / "response.png")
        plot_residuals(readings, identified["best_variant"]["variant"], figures / "residuals.png")
    columns = [c for c in table.columns if c != "file"]
    rows = [{c: _fmt(v) if not (isinstance(v, str) or pd.isna(v)) else ("" if pd.isna(v) else v)
             for c, v in r.items()} for r in table.head(TOP)[columns].to_dict("records")]
    css = (HERE / "report.css").read_text(encoding="utf-8")
    html = Environment(autoescape=True).from_string(_HTML).render(
        title=title, subtitle="Sweep of model variants against one test", css=css,
        ident=identified, fmt=_fmt, figures=FIGURES, n_readings=n_readings,
        rms_estimate=rms_estimate, rms_best=rms_best, n_ok=len(ok), n_all=len(table),
        top=TOP, columns=columns, rows=rows, caution=CAUTION)
    return html


@_quiet
def plot_metric(ok: pd.DataFrame, parameters: list[str], identified: dict[str, Any] | None,
                path: Path) -> Path:
    """RMS difference of each variant against each parameter; best variant and estimate marked."""
    n = len(parameters)
    fig = _figure(min(4.2 * n, 12.0), 3.4)
    best = ok.iloc[0] if len(ok) else None
    for k, p in enumerate(parameters):
        ax = fig.add_subplot(1, n, k + 1)
        ax.plot(ok[p], ok["rms_ue"], "o", color=PREDICTED, label="variant")
        if best is not None:
            ax.plot([best[p]], [best["rms_ue"]], "o", ms=10, mfc="none", mec=REFERENCE, mew=2,
                    label=f"best: {best['variant']}")
        if identified is not None and p in identified["estimate"]:
            ax.axvline(identified["estimate"][p], color=FIT, lw=1.2, label="estimate")
        if identified is not None and p in identified.get("log", []):
            ax.set_xscale("log")
        ax.set_xlabel(p)
        ax.set_ylabel("RMS difference of healthy gauges [µε]" if k == 0 else "")
        ax.grid(True, alpha=0.3)
        if k == 0:
            ax.legend(fontsize=8)
    fig.tight_layout()
    return _save(fig, path)


@_quiet
def plot_response(readings: pd.DataFrame, best: str, path: Path) -> Path:
    """Readings at the estimate and of the best variant against the measured ones."""
    fig = _figure(5.0, 4.6)
    ax = fig.add_subplot(1, 1, 1)
    m = readings["measured_ue"].to_numpy()
    ax.plot(m, readings["best_variant_ue"], "s", mfc="none", color=PREDICTED,
            label=f"best variant ({best})")
    ax.plot(m, readings["at_estimate_ue"], "o", color=MEASURED, ms=4, label="at the estimate")
    lo, hi = np.nanmin(m), np.nanmax(m)
    pad = 0.05 * (hi - lo or 1.0)
    ax.plot([lo - pad, hi + pad], [lo - pad, hi + pad], color=FIT, lw=1, label="predicted = measured")
    ax.set_xlabel("measured [µε]")
    ax.set_ylabel("predicted [µε]")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return _save(fig, path)


@_quiet
def plot_residuals(readings: pd.DataFrame, best: str, path: Path) -> Path:
    """RMS over the steps of measured minus predicted, per gauge: estimate and best variant."""
    r = readings.assign(best_residual=readings["measured_ue"] - readings["best_variant_ue"])
    order = list(dict.fromkeys(r["gauge"]))
    per = r.groupby("gauge", sort=False)[["residual_ue", "best_residual"]].apply(
        lambda g: np.sqrt((g**2).mean())).reindex(order)
    fig = _figure(max(5.0, 0.45 * len(order) + 2.0), 3.6)
    ax = fig.add_subplot(1, 1, 1)
    x = np.arange(len(order))
    ax.bar(x - 0.2, per["residual_ue"], 0.4, color=MEASURED, label="at the estimate")
    ax.bar(x + 0.2, per["best_residual"], 0.4, color=PREDICTED, label=f"best variant ({best})")
    ax.set_xticks(x, [str(g) for g in order], rotation=60 if len(order) > 8 else 0, fontsize=8)
    ax.set_ylabel("RMS of measured - predicted [µε]")
    ax.grid(True, axis="y", alpha=0.3)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return _save(fig, path)
