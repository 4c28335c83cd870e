"""The correlation report: one self-contained HTML file, its pictures and VTK files.

Stage: report. In: a :class:`~correlate.comparison.correlation.Correlation` and an output folder. Out, in that folder:
``report.html`` (every picture inline as a ``data:`` PNG, the CSS inline, no external request),
the pictures as PNG files beside it (``view_*.png``, ``scatter.png``, ``load_strain_*.png``,
``rosettes.png``), ``gauges.vtp`` and ``surface.vtp``.

Text from the inputs (titles, gauge ids, file names, reasons) is untrusted: the Jinja2 template
escapes everything except the package's own CSS.
"""

from __future__ import annotations

import base64
import json
import struct
import warnings
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from numpy.typing import NDArray

import correlate.report.figures as figures
import correlate.report.tables as tables
from correlate.comparison.correlation import Correlation
from correlate.comparison.rosettes import rosette_angles
from correlate.comparison.verdict import CRITERIA_SOURCE
from correlate.core.names import CAUTION
from correlate.fullfield.comparison import FullFieldResult
from correlate.measurement.health import load_direction
from correlate.report.chain_section import chain_notes, chain_rows
from correlate.report.fullfield_section import fullfield_context
from correlate.report.scene import Rendering, render_views
from correlate.report.validation import validation_context
from correlate.report.vtk_files import write_vtk

HERE = Path(__file__).parent
num = tables.num


def css_string(text: Any) -> str:
    """A CSS string literal holding ``text``: every character but ASCII letters and digits as a
    six-digit escape, so that no input text can end the string or the style element (a space is
    escaped too: CSS drops one space after an escape)."""
    out = []
    for ch in str(text):
        out.append(ch if ch.isascii() and ch.isalnum() else f"\\{ord(ch):06x}")
    return '"' + "".join(out) + '"'


def text(value: Any) -> str:
    """Plain text for a free-text study value (lists and tables shown compactly)."""
    if isinstance(value, dict | list | tuple):
        return json.dumps(value, ensure_ascii=False, default=str)
    return str(value)


def data_uri(path: Path) -> dict[str, Any]:
    """The PNG at ``path`` as a ``data:`` URI, with its pixel size (from the IHDR chunk)."""
    raw = path.read_bytes()
    width, height = struct.unpack(">II", raw[16:24])
    return {"uri": "data:image/png;base64," + base64.b64encode(raw).decode("ascii"),
            "width": width, "height": height}


def _step_label(corr: Correlation, i: int) -> str:
    steps = corr.steps
    label = f"step {int(steps.step[i])}"
    if len(np.unique(steps.sequence)) > 1:
        label += f", sequence {int(steps.sequence[i])}"
    return label


def report_rows(spec: Any, corr: Correlation) -> list[int]:
    """Step rows named by ``[report] steps``: step numbers, or [step, sequence] pairs."""
    if spec is None:
        return []
    steps = corr.steps
    items = spec if isinstance(spec, list | tuple) else [spec]
    rows: list[int] = []
    for item in items:
        if isinstance(item, list | tuple) and len(item) == 2:
            hit = np.flatnonzero((steps.step == item[0]) & (steps.sequence == item[1]))
        elif isinstance(item, int | np.integer) and not isinstance(item, bool):
            hit = np.flatnonzero(steps.step == item)
        else:
            continue
        rows.extend(int(h) for h in hit if int(h) not in rows)
    return rows


def diagnosis_text(diagnoses: Any) -> dict[str, str]:
    """Per gauge, its diagnoses joined with '; '."""
    out: dict[str, list[str]] = {}
    if diagnoses is None or not len(diagnoses):
        return {}
    for _, d in diagnoses.iterrows():
        detail = str(d.get("detail", "") or "")
        line = str(d["explanation"]) + (f": {detail}" if detail and detail != "nan" else "")
        out.setdefault(str(d["gauge"]), []).append(line)
    return {g: "; ".join(v) for g, v in out.items()}


def arms_of(corr: Correlation) -> list[str]:
    """Each channel's arm grids (``1:G1 2:G2``; blank for a single grid)."""
    gauges = corr.model.gauges
    if "arms" not in gauges:
        return [""] * len(corr.gauges)
    return [str(a) if isinstance(a, str) else "" for a in gauges["arms"]]


def gauge_rows(corr: Correlation, i: int) -> list[dict[str, str]]:
    """Rows of the per-gauge table at step row ``i``, worst first by |difference|."""
    st = corr.status
    diff = st.difference[i]
    order = np.argsort(np.where(np.isfinite(diff) & st.evaluated[i], -np.abs(diff), np.inf),
                       kind="stable")
    diag = diagnosis_text(corr.diagnoses)
    arms = arms_of(corr)
    rows = []
    for j in order:
        status = str(st.status[i, j])
        rows.append({
            "gauge": corr.gauges[j], "arms": arms[j],
            "predicted": num(corr.predicted[i, j]),
            "measured": num(corr.measured[i, j]),
            "difference": num(diff[j], "+.1f"),
            "allowed": num(st.allowed[i, j]),
            "ratio": num(st.ratio[i, j], ".3f"),
            "band": f"{num(corr.band_low[i, j])} to {num(corr.band_high[i, j])}",
            "status": status,
            "basis": str(st.basis[i, j]),
            "unconservative": "yes" if st.unconservative[i, j] else "",
            "diagnosis": diag.get(corr.gauges[j], ""),
            "css": status if status in ("pass", "fail") else "other",
        })
    return rows


MAX_CURVES = 96  # load-strain panels in the report (twelve figures of 8); beyond, the worst gauges


def _curve_gauges(corr: Correlation, words: list[str], ref: int) -> list[int]:
    """Gauges whose load-strain curves the report draws, in gauge order.

    All of them up to MAX_CURVES; beyond, the failing and flagged ones first, then the largest
    |difference| at the reference step, so that a thousand gauges stay a readable handful of figures.
    """
    g = len(corr.gauges)
    if g <= MAX_CURVES:
        return list(range(g))
    diff = np.abs(np.nan_to_num(corr.status.difference[ref], nan=0.0))
    priority = np.array([0 if w not in ("pass",) else 1 for w in words])
    order = np.lexsort((-diff, priority))
    return sorted(order[:MAX_CURVES].tolist())


def _gauge_status(corr: Correlation) -> list[str]:
    """One word per gauge over all steps: pass, fail, or the flag that removed it."""
    st = corr.status
    ev = st.evaluated
    out = []
    flags = corr.flags
    for j, g in enumerate(corr.gauges):
        if ((st.status[:, j] == "fail") & ev[:, j]).any():
            out.append("fail")
        elif ev[:, j].any():
            out.append("pass")
        else:
            hit = flags[(flags["gauge"] == g) & (flags["drops"] == "gauge")] if len(flags) else []
            out.append(str(hit["flag"].iloc[0]) if len(hit) else "not evaluated")
    return out


def _rosettes(corr: Correlation, ref: int) -> tuple[list[dict[str, str]], list[dict[str, Any]]]:
    """Table rows and plot records of the rosettes at the reference step."""
    table = corr.rosettes
    if table is None or not len(table):
        return [], []
    steps = corr.steps
    at = table[(table["step"] == steps.step[ref]) & (table["sequence"] == steps.sequence[ref])]
    try:
        angles = rosette_angles(corr.model, corr.model.gauges)
    except ValueError:
        angles = {}
    rows, records = [], []
    for rid in dict.fromkeys(table["rosette"].astype(str)):
        rec: dict[str, Any] = {"name": rid, "grid_angles": list(angles.get(rid, [])),
                               "measured": None, "predicted": None}
        for source in ("measured", "predicted"):
            hit = at[(at["rosette"].astype(str) == rid) & (at["source"] == source)]
            if not len(hit):
                rows.append({"rosette": rid, "source": source, "e1": "\u2013", "e2": "\u2013",
                             "angle": "\u2013", "shear": "\u2013", "s1": "\u2013",
                             "s2": "\u2013", "vm": "\u2013", "note": "not evaluated"})
                continue
            r = hit.iloc[0]
            rows.append({"rosette": rid, "source": source, "e1": num(r["e1_ue"]),
                         "e2": num(r["e2_ue"]), "angle": num(r["angle_deg"]),
                         "shear": num(r["shear_max_ue"]), "s1": num(r["s1"], ".2f"),
                         "s2": num(r["s2"], ".2f"), "vm": num(r["von_mises"], ".2f"),
                         "note": "" if str(r["note"]) == "nan" else str(r["note"])})
            rec[source] = {"e1": float(r["e1_ue"]), "e2": float(r["e2_ue"]),
                           "angle": float(r["angle_deg"])}   # NaN: direction undefined
        records.append(rec)
    return rows, records


PROPORTIONAL_TOL = 0.02   # loads rise together: each within 2 % of its peak of a multiple of the
#                          first (about the accuracy of a test rig's load cells; common practice)


@dataclass(frozen=True)
class LoadAxis:
    """The horizontal axis of the load-strain curves: one value per step, its label and a note."""

    values: NDArray[np.float64]      # (s,)
    label: str
    note: str
    steps: bool                      # True: the position of each step in the test


def _proportional(loads: NDArray, tol: float = PROPORTIONAL_TOL) -> bool:
    """Whether every load column is a multiple of the first over the steps (within ``tol`` of
    each column's peak; rows with a missing load are left out)."""
    rows = np.isfinite(loads).all(axis=1)
    x = loads[rows]
    peak = np.max(np.abs(x), axis=0) if len(x) else np.zeros(loads.shape[1])
    if not len(x) or not peak[0] > 0:
        return False
    first = x[:, 0] / peak[0]
    for k in range(1, x.shape[1]):
        if not peak[k] > 0:
            continue                 # a load that stays at zero rises with any other
        col = x[:, k] / peak[k]
        multiple = float(first @ col) / float(first @ first)
        if np.max(np.abs(col - multiple * first)) > tol:
            return False
    return True


def load_axis(corr: Correlation) -> LoadAxis:
    """What the load-strain curves are drawn against, so that no load moves unseen.

    One load column: its tared value. Several that rise together (:func:`_proportional`): the
    factor of the first FE case (tared load / reference), a combined load parameter. Otherwise the
    position of each step in the test: a load that rises while another is held then shows as
    strain changing from step to step, never as a vertical jump at a fixed value of one load.
    """
    steps = corr.steps
    loads, names = steps.loads, steps.load_names
    if loads.size and len(names) == 1:
        return LoadAxis(loads[:, 0], f"{names[0]} (tared)", "", False)
    if loads.size and steps.factors is not None and steps.factors.size and _proportional(loads):
        mapped = [ld for ld in corr.study.loads if ld.column in names]
        cases = [c.name for c in corr.study.cases]
        if mapped:
            case = mapped[0].case
            return LoadAxis(steps.factors[:, cases.index(case)],
                            f"load factor of case '{case}' (tared load / reference)",
                            " (every load rises and falls with it)", False)
    return LoadAxis(np.arange(1.0, len(steps.step) + 1.0),
                    "step in test order (1 = first row of the readings)",
                    " (the loads do not rise together, so each curve runs through the steps in "
                    "test order; the load history above shows which load moves when)", True)


def _load_history(corr: Correlation, axis: LoadAxis, folder: Path) -> Path | None:
    """The load history figure when the curves run through the steps: each [[load]] column as
    tared load / reference (its case factor), other load columns over their peak."""
    if not axis.steps or not corr.steps.loads.size:
        return None
    steps = corr.steps
    reference = {ld.column: ld.reference for ld in corr.study.loads}
    columns, names = [], []
    for k, name in enumerate(steps.load_names):
        col = steps.loads[:, k]
        if name in reference:
            columns.append(col / reference[name])
            names.append(f"{name} / {reference[name]:g}")
        else:
            peak = float(np.nanmax(np.abs(col))) if np.isfinite(col).any() else 0.0
            columns.append(col / peak if peak > 0 else col)
            names.append(f"{name} / its peak")
    return figures.plot_load_history(axis.values, np.column_stack(columns), names, steps.sequence,
                                     folder / "load_history.png",
                                     ylabel="tared load / reference")


def _render(corr: Correlation, folder: Path) -> tuple[Rendering | None, str]:
    """Render the 3D views; a machine without OpenGL gets a report without them."""
    views = corr.study.report.get("views")     # [report] views: most views besides the iso one
    kwargs = {}
    if isinstance(views, int) and not isinstance(views, bool) and views >= 0:
        kwargs["max_views"] = views
    try:
        from pyvista.core.errors import PyVistaFutureWarning

        with warnings.catch_warnings():
            # pyvista announces changes of its defaults; the calls here pass what they rely on
            warnings.filterwarnings("ignore", category=PyVistaFutureWarning)
            return render_views(corr, folder, **kwargs), ""
    except (ImportError, RuntimeError) as exc:
        return None, f"The 3D views could not be rendered on this machine ({exc})."


def _figures(corr: Correlation, folder: Path, ref: int) -> dict[str, Any]:
    """The scatter, load-strain and rosette figures and the gauge tables of the report."""
    study, steps, summary = corr.study, corr.steps, corr.summary
    st = corr.status
    crit = study.criteria
    active = steps.active[:, None]
    finite = np.isfinite(corr.measured)
    # readings of a series case outside its FE load range have no model reading: not flagged
    unmodelled = st.status == "not-modelled"
    flagged = active & finite & ~st.evaluated & ~unmodelled
    scatter = figures.plot_scatter(
        corr.measured, corr.predicted, st.evaluated, flagged, ref, fit=summary["fit"],
        relative=crit.relative, absolute_ue=crit.absolute_ue, path=folder / "scatter.png",
        ref_label=f"reference step ({_step_label(corr, ref)})", names=list(corr.gauges))

    axis = load_axis(corr)
    load, load_label, load_note = axis.values, axis.label, axis.note
    history = _load_history(corr, axis, folder)
    direction = load_direction(steps.loads, steps.sequence, tol=study.zero_tol)
    on_path = finite & (st.evaluated | steps.tare[:, None] | steps.zero_load[:, None]
                        | unmodelled)
    off_path = finite & ~on_path
    predicted = np.where(unmodelled, np.nan, corr.predicted)
    words = _gauge_status(corr)
    titles = [f"{figures.short(g)} \u00b7 {w}" for g, w in zip(corr.gauges, words, strict=True)]
    curves = _curve_gauges(corr, words, ref)
    if len(curves) < len(corr.gauges):
        load_note += (f"; curves for the {len(curves)} gauges that fail, are flagged or differ most "
                      f"at the reference step (of {len(corr.gauges)}; all are in the tables and "
                      "in gauges.csv)")
    load_files = figures.plot_load_strain(load, load_label, direction, steps.sequence,
                                          corr.measured[:, curves], predicted[:, curves],
                                          on_path[:, curves], off_path[:, curves],
                                          [corr.gauges[j] for j in curves],
                                          [titles[j] for j in curves], folder,
                                          steps_axis=axis.steps)

    rosette_rows, rosette_records = _rosettes(corr, ref)
    rosette_figure = (data_uri(figures.plot_rosettes(rosette_records, folder / "rosettes.png"))
                      if rosette_records else None)

    gauge_tables = [{"title": f"At the reference step ({_step_label(corr, ref)})",
                     "rows": gauge_rows(corr, ref)}]
    for i in report_rows(study.report.get("steps"), corr):
        if i != ref:
            gauge_tables.append({"title": f"At {_step_label(corr, i)}", "rows": gauge_rows(corr, i)})

    return {"scatter": data_uri(scatter), "relative_pct": f"{crit.relative:.0%}",
            "absolute_ue": f"{crit.absolute_ue:g}", "gauge_tables": gauge_tables,
            "load_label": load_label, "load_note": load_note,
            "load_figures": [data_uri(p) for p in load_files],
            "load_history": data_uri(history) if history else None, "rosette_rows": rosette_rows,
            "rosette_figure": rosette_figure}


def _verdict(summary: dict[str, Any]) -> dict[str, Any]:
    """The verdict box: the state, what the criteria alone say, the reasons, the direction of the
    result and the unconservative gauges, and the numbers behind them."""
    fit = summary["fit"]
    verdict = summary["verdict"]
    ci = fit.get("slope_origin_ci") or [None, None]
    numbers = [
        ("measured/predicted strain ratio", num(fit.get("slope_origin"), ".3f")),
        ("95 % interval of the ratio", f"{num(ci[0], '.3f')} to {num(ci[1], '.3f')}"),
        ("fit intercept [ue]", num(fit.get("intercept"), "+.1f")),
        ("fit slope", num(fit.get("slope"), ".3f")),
        ("R\u00b2", num(fit.get("r2"), ".4f")),
        ("RMS difference [ue]", num(fit.get("rms_ue"), ".1f")),
        ("largest |difference| [ue]", num(fit.get("max_abs_ue"), ".1f")),
        ("gauge-step pairs", str(fit.get("n", "\u2013"))),
        ("gauges passing", f"{verdict['passing']} of {verdict['healthy']} healthy"),
        ("gauges failing", str(verdict["failing"])),
        ("unconservative gauges", str(verdict["unconservative"])),
        ("flagged gauges", f"{verdict['flagged']} of {verdict['gauges']}"),
    ]
    state = verdict.get("state", "meets" if verdict["result"] == "meets the criteria"
                        else "does not meet")
    headline = {"meets": "The model meets the criteria.",
                "does not meet": "The model does not meet the criteria.",
                "provisional": "Provisional: no verdict until the reasons below are settled."
                }[state]
    css = {"meets": "ok", "does not meet": "not-ok", "provisional": "provisional"}[state]
    source = str(verdict.get("criteria", {}).get("source", CRITERIA_SOURCE))
    leaning = str(verdict.get("leaning", ""))
    return {"result": verdict["result"], "state": state, "headline": headline, "css": css,
            "ok": state == "meets", "leaning": leaning,
            "alone": f"The criteria alone: the model {verdict['result']}.",
            "source": source, "defaults": source.startswith("tool defaults"),
            "direction": str(verdict.get("direction", "")),
            "unconservative": list(verdict.get("unconservative_gauges", [])),
            "reasons": list(verdict.get("reasons", [])), "numbers": numbers,
            "excluded": num(100 * float(verdict.get("excluded_fraction", np.nan)), ".0f"),
            "open": list(verdict.get("open_dispositions", [])),
            "ci_method": str(fit.get("ci_method", ""))}


def _context(corr: Correlation, ref: int) -> dict[str, Any]:
    """Identification, inputs, criteria and conventions of the report."""
    study, summary = corr.study, corr.summary
    crit = study.criteria
    verdict = summary["verdict"]
    prov = summary.get("provenance", {})
    units = summary.get("units", {})
    tare = summary.get("tare", {})
    model_items = [("file", summary.get("model", {}).get("file", study.model_file.name))]
    model_items += [(str(k), text(v)) for k, v in study.model_info.items()]
    ref_info = summary.get("reference_step", {})
    return {
        "title": str(study.report.get("title") or summary.get("title") or study.title),
        "version": str(prov.get("version", "")),
        "generated": str(prov.get("generated", "")),
        "css": (HERE / "report.css").read_text(encoding="utf-8"),
        "test_items": [(str(k), text(v)) for k, v in study.test.items()],
        "model_items": model_items,
        "inputs": [{"name": k, "path": v.get("path", ""), "sha256": v.get("sha256", "")}
                   for k, v in prov.get("inputs", {}).items()],
        "criteria_items": [
            ("relative tolerance", f"{crit.relative:.0%} of |predicted|"),
            ("absolute floor", f"{crit.absolute_ue:g} ue"),
            ("allowed difference", "max(relative x |predicted|, floor)"),
            ("ratio range", f"{crit.slope[0]:g} to {crit.slope[1]:g}"),
            ("gauges that must pass", f"{crit.pass_fraction:.0%} of the healthy gauges"),
            ("gauges left healthy", f"at least {crit.min_healthy_fraction:.0%} of all gauges, "
                                    "else the verdict is provisional")],
        "criteria_source": verdict.get("criteria", {}).get("source", CRITERIA_SOURCE),
        "conventions": [
            ("strain", f"{units.get('strain', 'microstrain (ue)')}; 1 ue = 1e-6 m/m"),
            ("length", str(units.get("length", study.length_unit))),
            ("stress", str(units.get("stress", study.stress_unit or "unit of E"))),
            ("sign", ("tension positive; difference = measured - predicted; "
                      "ratio = measured / predicted")),
            ("shear", "engineering shear strain (gamma = 2 x tensor shear) in rosette outputs"),
            ("rosette angles", ("from grid A, counterclockwise about the outward normal, "
                                "seen from outside")),
            ("tare", (f"rule '{tare.get('rule', study.zero)}', zero tolerance "
                      f"{tare.get('zero_tol', study.zero_tol):g} of each load's peak; "
                      f"{tare.get('note', '')}"))],
        "ref_label": _step_label(corr, ref),
        "ref_rule": str(ref_info.get("rule", "")),
        "verdict": _verdict(summary),
        "stress_unit": str(study.stress_unit or "unit of E"),
        "flag_rows": tables.flag_rows(corr),
        "document": tables.document_block(corr),
        "running": {k: css_string(v) for k, v in tables.running_text(corr).items()},
        "load_rows": tables.load_mapping(corr),
        "material_rows": tables.material_rows(corr),
        "health_rows": tables.health_rows(corr),
        "map_rows": tables.gauge_map_rows(corr),
        "chain_used": corr.corrections is not None,
        "chain_rows": chain_rows(corr.corrections),
        "chain_notes": chain_notes(corr.corrections),
        "chain_height": corr.corrections is not None and "height_ue" in corr.corrections,
        "length_unit": str(study.length_unit),
        "snap_tol": num(study.snap_tol, "g"),
        "stats": tables.statistics(summary),
        "caution": str(summary.get("caution") or CAUTION),
    }


def write_report(corr: Correlation, folder: Path, fullfield: FullFieldResult | None = None
                 ) -> None:
    """Write report.html, its PNG pictures, gauges.vtp and surface.vtp into ``folder``.

    Parameters
    ----------
    corr : Correlation
        Everything the run computed (:func:`correlate.comparison.correlation.correlate_study`).
    folder : Path
        An existing folder (the run's staging folder).
    fullfield : FullFieldResult, optional
        The full-field comparison, when the study has ``[fullfield]`` (its section 12).
    """
    from jinja2 import Environment, FileSystemLoader, StrictUndefined

    folder = Path(folder)
    ref = corr.reference
    rendering, render_note = _render(corr, folder)
    write_vtk(corr, folder, rendering.surface if rendering else None)
    if rendering is not None and rendering.note:
        render_note = f"Note: {rendering.note}."
    context = {**_context(corr, ref), **_figures(corr, folder, ref),
               "views": [{**data_uri(folder / v.file), "title": v.title,
                          "visible": list(v.visible)} for v in rendering.views]
               if rendering else [],
               "not_visible": list(rendering.not_visible) if rendering else [],
               "render_note": render_note,
               "validation": validation_context(corr, folder, _step_label(corr, ref), data_uri),
               "fullfield": fullfield_context(corr, fullfield, folder, data_uri)}
    env = Environment(loader=FileSystemLoader(str(HERE)), autoescape=True,
                      undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    html = env.get_template("template.html").render(**context)
    (folder / "report.html").write_text(html, encoding="utf-8")
