"""The `compare` command: did a model revision correlate better with the same test than the last one?

Stage: comparison of two run folders written by `correlate run` (OLD, NEW) made from the same
readings file. In: each folder's ``gauges.csv`` and ``summary.json``. Out: one row per gauge (its
class, pass/fail status, RMS of the difference over the pass/fail rows, and |difference| at the
reference step), the change in the overall fit, and a verdict: better, worse or about the same.
"""

from __future__ import annotations

import argparse
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from correlate.core.errors import CorrelateError, OutputError
from correlate.core.folders import check_target, staged_folder, write_csv

CAUTION = ("These results support, but do not replace, engineering judgement, the applicable codes "
           "and licensed practice.")
CHANGE_FRACTION, CHANGE_FLOOR_UE = 0.05, 1.0   # a gauge's RMS change that counts (common practice)
OVERALL = ("slope_origin", "r2", "rms_ue", "max_abs_ue")
COLUMNS = ["gauge", "class", "old_status", "new_status", "old_rms_ue", "new_rms_ue", "change_ue",
           "old_reference_difference_ue", "new_reference_difference_ue"]


class RunFolderError(CorrelateError, ValueError):
    """A folder given to compare is not a run folder, or the two runs cannot be compared."""


@dataclass(frozen=True)
class RunFolder:
    """The parts of a run folder that compare reads."""

    path: Path
    rows: pd.DataFrame        # gauges.csv: gauge, step, sequence, difference_ue, status
    summary: dict[str, Any]   # summary.json


def read_run(folder: Path) -> RunFolder:
    """Read ``gauges.csv`` and ``summary.json`` of a run folder; raise RunFolderError if unusable."""
    folder = Path(folder)
    if not folder.is_dir():
        raise RunFolderError(f"run folder '{folder}' does not exist; give a folder written by "
                             "`correlate run`")
    for name in ("gauges.csv", "summary.json"):
        if not (folder / name).is_file():
            raise RunFolderError(f"'{folder}' is not a run folder: {name} is missing; give a folder "
                                 "written by `correlate run`")
    try:
        summary = json.loads((folder / "summary.json").read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise RunFolderError(f"{folder / 'summary.json'}: not valid JSON ({exc}); rerun "
                             "`correlate run`") from exc
    # gauge ids and statuses stay text ("NA" is a valid gauge id); numbers are parsed explicitly
    rows = pd.read_csv(folder / "gauges.csv", dtype=str, keep_default_na=False)
    missing = [c for c in ("gauge", "step", "sequence", "difference_ue", "status")
               if c not in rows.columns]
    if missing:
        raise RunFolderError(f"{folder / 'gauges.csv'}: lacks column(s) {', '.join(missing)}; "
                             "rerun `correlate run`")
    ref = summary.get("reference_step") if isinstance(summary, dict) else None
    if not isinstance(ref, dict) or not {"step", "sequence"} <= set(ref):
        raise RunFolderError(f"{folder / 'summary.json'}: reference_step {{step, sequence}} is "
                             "missing; rerun `correlate run`")
    for col in ("step", "sequence", "difference_ue"):
        rows[col] = pd.to_numeric(rows[col], errors="coerce")
    return RunFolder(path=folder, rows=rows, summary=summary)


def readings_hash(run: RunFolder) -> str:
    """The sha256 of the readings input recorded in the run's provenance."""
    try:
        return str(run.summary["provenance"]["inputs"]["readings"]["sha256"])
    except (KeyError, TypeError) as exc:
        raise RunFolderError(f"{run.path / 'summary.json'}: provenance.inputs.readings.sha256 is "
                             "missing, so the test data cannot be checked; rerun `correlate "
                             "run`") from exc


def gauge_summary(rows: pd.DataFrame, reference: tuple[int, int]) -> pd.DataFrame:
    """Per gauge: status, RMS difference over pass/fail rows, |difference| at the reference step.

    status is ``fail`` if any pass/fail row fails, ``pass`` if it has pass/fail rows and none
    fails, ``not evaluated`` otherwise; the RMS is NaN when there are no pass/fail rows.
    """
    gauges = list(dict.fromkeys(rows["gauge"]))
    ev = rows[rows["status"].isin(["pass", "fail"])]
    d = ev["difference_ue"].to_numpy(dtype=float)
    by = ev.assign(sq=d ** 2, failed=ev["status"].eq("fail")).groupby("gauge", sort=False)
    rms = np.sqrt(by["sq"].mean()).reindex(gauges)
    failed = by["failed"].any()
    at_ref = ev[(ev["step"] == reference[0]) & (ev["sequence"] == reference[1])]
    ref = at_ref.set_index("gauge")["difference_ue"].abs().reindex(gauges)
    status = np.where(~pd.Index(gauges).isin(failed.index), "not evaluated",
                      np.where(failed.reindex(gauges, fill_value=False).to_numpy(bool), "fail",
                               "pass"))
    return pd.DataFrame({"status": status, "rms_ue": rms.to_numpy(dtype=float),
                         "reference_ue": ref.to_numpy(dtype=float)}, index=pd.Index(gauges))


def classify(old_status: str, new_status: str, old_rms: float, new_rms: float) -> str:
    """Class of one gauge's change from OLD to NEW (``new``/``removed`` use an empty status)."""
    if not old_status:
        return "new"
    if not new_status:
        return "removed"
    if old_status == "pass" and new_status == "fail":
        return "newly failing"
    if old_status == "fail" and new_status == "pass":
        return "fixed"
    if not (np.isfinite(old_rms) and np.isfinite(new_rms)):
        return "not evaluated"
    change = new_rms - old_rms
    if abs(change) > max(CHANGE_FRACTION * old_rms, CHANGE_FLOOR_UE):
        return "improved" if change < 0 else "worse"
    return "unchanged"


def compare_gauges(old: RunFolder, new: RunFolder) -> pd.DataFrame:
    """One row per gauge of either run with the columns of ``compare.csv``.

    Both runs are measured at NEW's reference step so that the two |difference| values compare.
    """
    ref = new.summary["reference_step"]
    reference = (int(ref["step"]), int(ref["sequence"]))
    a, b = gauge_summary(old.rows, reference), gauge_summary(new.rows, reference)
    out = []
    absent = pd.Series({"status": "", "rms_ue": np.nan, "reference_ue": np.nan})
    for g in dict.fromkeys([*a.index, *b.index]):
        o, n = (a.loc[g] if g in a.index else absent), (b.loc[g] if g in b.index else absent)
        out.append([g, classify(o["status"], n["status"], o["rms_ue"], n["rms_ue"]), o["status"],
                    n["status"], o["rms_ue"], n["rms_ue"], n["rms_ue"] - o["rms_ue"],
                    o["reference_ue"], n["reference_ue"]])
    table = pd.DataFrame(out, columns=COLUMNS)
    for col in COLUMNS[4:]:
        table[col] = table[col].astype(float)
    return table


def _number(value: Any) -> float:
    return float(value) if isinstance(value, int | float) else np.nan


def overall_change(old: RunFolder, new: RunFolder) -> dict[str, tuple[float, float]]:
    """(old, new) of the fit's slope_origin, r2, rms_ue, max_abs_ue and the failing gauge count."""
    pairs = {k: (_number(old.summary.get("fit", {}).get(k)),
                 _number(new.summary.get("fit", {}).get(k))) for k in OVERALL}
    pairs["failing"] = (_number(old.summary.get("verdict", {}).get("failing")),
                        _number(new.summary.get("verdict", {}).get("failing")))
    return pairs


def judge(overall: dict[str, tuple[float, float]], *, slope_tol: float,
          rms_tol: float) -> tuple[str, list[str], list[str]]:
    """Verdict ``better``/``worse``/``about the same`` with the reasons worse and better.

    Worse if any of: more failing gauges; |slope_origin - 1| larger by more than ``slope_tol``;
    RMS difference larger by more than the fraction ``rms_tol``. Better if none of these and the
    mirror of any. Comparisons with a missing value on either side are skipped.
    """
    worse, better = [], []
    f0, f1 = overall["failing"]
    if f1 > f0:
        worse.append(f"more failing gauges ({f0:.0f} -> {f1:.0f})")
    elif f1 < f0:
        better.append(f"fewer failing gauges ({f0:.0f} -> {f1:.0f})")
    s0, s1 = (abs(v - 1.0) for v in overall["slope_origin"])
    text = "measured/predicted ratio {:.3f} -> {:.3f}".format(*overall["slope_origin"])
    if s1 - s0 > slope_tol:
        worse.append(f"{text}, farther from 1 by {s1 - s0:.3f}")
    elif s0 - s1 > slope_tol:
        better.append(f"{text}, closer to 1 by {s0 - s1:.3f}")
    r0, r1 = overall["rms_ue"]
    text = f"RMS difference {r0:.1f} -> {r1:.1f} ue"
    if r1 > r0 * (1.0 + rms_tol):
        worse.append(f"{text} ({(r1 - r0) / r0:+.0%})" if r0 > 0 else text)
    elif r1 < r0 * (1.0 - rms_tol):
        better.append(f"{text} ({(r1 - r0) / r0:+.0%})")
    verdict = "worse" if worse else "better" if better else "about the same"
    return verdict, worse, better


def _check_out(out: Path, runs: tuple[Path, ...], *, force: bool) -> None:
    o = out.resolve()
    for r in (p.resolve() for p in runs):
        if o == r or r in o.parents or o in r.parents:
            raise OutputError(f"--out '{out}' is, lies inside or contains the run folder '{r}'; "
                              "compare never writes into run folders: choose another --out")
    check_target(out, force=force)


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


def _fmt(v: Any) -> str:
    return v if isinstance(v, str) else "" if not np.isfinite(v) else f"{v:.1f}"


def compare_command(args: argparse.Namespace) -> int:
    """Compare two run folders; print the table and verdict; write outputs with --out."""
    old, new = Path(args.old), Path(args.new)
    if args.out is not None:
        _check_out(Path(args.out), (old, new), force=args.force)
    a, b = read_run(old), read_run(new)
    ha, hb = readings_hash(a), readings_hash(b)
    if ha != hb:
        raise RunFolderError(f"the runs were made from different test data: readings sha256 "
                             f"{ha} in '{old}' but {hb} in '{new}'; compare runs of the same test")
    table = compare_gauges(a, b)
    overall = overall_change(a, b)
    verdict, worse, better = judge(overall, slope_tol=args.slope_tol, rms_tol=args.rms_tol)
    line = f"revision {new} is {verdict} {'as' if verdict == 'about the same' else 'than'} {old}"
    reasons = worse or better
    shown = table[["gauge", "class", "old_rms_ue", "new_rms_ue", "old_status", "new_status"]]
    print(shown.to_string(index=False, formatters={c: _fmt for c in ("old_rms_ue", "new_rms_ue")}))
    rows = [(k, f"{o:.4g} -> {n:.4g}") for k, (o, n) in overall.items()]
    print("overall: " + "; ".join(f"{k} {t}" for k, t in rows))
    ref = b.summary["reference_step"]
    if [a.summary["reference_step"][k] for k in ("step", "sequence")] != [ref["step"],
                                                                          ref["sequence"]]:
        print(f"note: the reference steps differ; both runs are read at NEW's step {ref['step']} "
              f"(sequence {ref['sequence']})")
    print(line + (": " + "; ".join(reasons) if reasons else ""))
    print(CAUTION)
    if args.out is not None:
        from jinja2 import Environment

        html = Environment(autoescape=True).from_string(_HTML).render(
            title=f"Comparison of {new} with {old}", verdict=line, reasons=reasons,
            old=str(old), new=str(new), step=ref["step"], seq=ref["sequence"], columns=COLUMNS,
            overall=[(k, (f"{o:.4g}", f"{n:.4g}")) for k, (o, n) in overall.items()],
            rows=[[_fmt(v) for v in r] for r in table.itertuples(index=False)], caution=CAUTION)
        with staged_folder(Path(args.out), force=args.force) as tmp:
            write_csv(table, tmp / "compare.csv")
            (tmp / "compare.html").write_text(html, encoding="utf-8")
        print(f"comparison written to {Path(args.out) / 'compare.csv'} and compare.html")
    return 3 if args.fail_if_worse and verdict == "worse" else 0


__all__ = ["RunFolder", "RunFolderError", "classify", "compare_command", "compare_gauges",
           "gauge_summary", "judge", "overall_change", "read_run", "readings_hash"]
