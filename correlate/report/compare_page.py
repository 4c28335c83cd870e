"""The revision comparison page (``compare.html``): reads the comparison and lays it out."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from correlate.comparison.revisions import COLUMNS
from correlate.core.names import CAUTION

_HTML = """<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><title>{{ title }}</title>
<style>body{font-family:sans-serif;margin:2em;max-width:70em}table{border-collapse:collapse}
td,th{border:1px solid #bbb;padding:.25em .6em;text-align:right}td:first-child,td:nth-child(2)
{text-align:left}.worse,.newly-failing{background:#fde2e2}.improved,.fixed{background:#e2f5e2}
.caution{font-style:italic;margin-top:2em}</style></head><body><h1>{{ title }}</h1>
<p><strong>{{ verdict }}</strong></p><ul>{% for r in reasons %}<li>{{ r }}</li>{% endfor %}</ul>
<h2>Overall fit</h2><table><tr><th>quantity</th><th>{{ old }}</th><th>{{ new }}</th></tr>
{% for k, v in overall %}<tr><td>{{ k }}</td><td>{{ v[0] }}</td><td>{{ v[1] }}</td></tr>{% endfor %}
</table><h2>Gauges</h2><p>RMS of the difference (measured - predicted) over pass/fail rows;
|difference| at step {{ step }}, sequence {{ seq }}. Microstrain.</p><table><tr>
{% for c in columns %}<th>{{ c }}</th>{% endfor %}</tr>{% for row in rows %}
<tr class="{{ row[1] | replace(' ', '-') }}">{% for v in row %}<td>{{ v }}</td>{% endfor %}</tr>
{% endfor %}</table><p class="caution">{{ caution }}</p></body></html>
"""



def cell_text(v: Any) -> str:
    return v if isinstance(v, str) else "" if not np.isfinite(v) else f"{v:.1f}"




def render_compare_page(*, title: str, verdict: str, reasons: list[str], old: str, new: str,
                        reference: dict[str, Any], overall: dict[str, tuple[float, float]],
                        table: pd.DataFrame) -> str:
    """The HTML text of ``compare.html``."""
    from jinja2 import Environment

    return Environment(autoescape=True).from_string(_HTML).render(
        title=title, verdict=verdict, reasons=reasons, old=old, new=new,
        step=reference["step"], seq=reference["sequence"], columns=COLUMNS,
        overall=[(k, (f"{o:.4g}", f"{n:.4g}")) for k, (o, n) in overall.items()],
        rows=[[cell_text(v) for v in r] for r in table.itertuples(index=False)], caution=CAUTION)
