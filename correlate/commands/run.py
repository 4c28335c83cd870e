"""`correlate run STUDY --out DIR`: the whole correlation, written to an output folder."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

import numpy as np

from correlate.commands.outputs import study_inputs
from correlate.comparison.correlation import Correlation, correlate_study
from correlate.core import progress
from correlate.core.folders import check_target, output_path, staged_folder
from correlate.core.names import CAUTION
from correlate.core.tables import write_csv, write_json
from correlate.fullfield.comparison import FullFieldResult, correlate_fullfield
from correlate.fullfield.outputs import write_fullfield
from correlate.model_readings.model import prepare
from correlate.readers.study import read_study
from correlate.report import write_report


def write_outputs(corr: Correlation, out: Path, *, force: bool, report: bool = True,
                  fullfield: FullFieldResult | None = None) -> None:
    """Write every output into a staged folder and move it into place (with a ``[fullfield]``
    table, its outputs too: the comparison is made here when not given)."""
    if fullfield is None and corr.study.fullfield is not None:
        fullfield = correlate_fullfield(corr)
    with staged_folder(out, force=force, inputs=study_inputs(corr.study)) as tmp:
        write_csv(corr.gauge_table, tmp / "gauges.csv")
        write_csv(corr.rosettes, tmp / "rosettes.csv")
        write_csv(corr.per_gauge, tmp / "gauge_stats.csv")
        write_csv(corr.flags, tmp / "flags.csv")
        if corr.corrections is not None:
            write_csv(corr.corrections, tmp / "corrections.csv")
        if corr.validation is not None:
            write_csv(corr.validation.table, tmp / "uncertainty.csv")
        write_json(corr.summary, tmp / "summary.json")
        if fullfield is not None:
            write_fullfield(fullfield, tmp, unit=corr.study.length_unit)
        progress.pause("write")
        if report:
            with progress.step("writing the report (3D views and figures)"):
                write_report(corr, tmp, fullfield)


def verdict_line(verdict: dict[str, Any]) -> str:
    """The verdict in words: the state, and for a provisional one what the criteria alone say."""
    if verdict["state"] == "provisional":
        return f"provisional (the criteria alone: {verdict['result']}; see the reasons)"
    return verdict["result"]


def validation_line(val: dict[str, Any]) -> str:
    """The validation statement beside the verdict, in one line (see uncertainty.csv)."""
    n = val["states"]
    line = (f"validation (ASME V&V 20, k = {val['coverage']:g}) at the reference step: "
            f"{n['model error']} model error, {n['uncertainty dominated']} uncertainty "
            f"dominated, {n['consistent']} consistent")
    r = val.get("ratio")
    if r:
        line += (f"; ratio {r['ratio']:.3f}, {r['lower']:.3f} to {r['upper']:.3f} with the "
                 "systematic terms")
    return line


def print_summary(corr: Correlation) -> None:
    s = corr.summary
    v, fit = s["verdict"], s["fit"]

    def num(x: Any, fmt: str) -> str:
        return "n/a" if x is None or (isinstance(x, float) and not np.isfinite(x)) else format(x, fmt)

    print(f"{s['title']}: {verdict_line(v)}")
    for r in v["reasons"]:
        print(f"  - {r}")
    print(f"direction: {v['direction']}"
          + (f"; unconservative beyond the criterion: {', '.join(v['unconservative_gauges'])}"
             if v["unconservative_gauges"] else ""))
    print(f"criteria: {v['criteria']['source']}")
    ci = fit.get("slope_origin_ci") or [None, None]
    print(f"measured/predicted strain ratio {num(fit['slope_origin'], '.3f')} "
          f"(95% {num(ci[0], '.3f')} to {num(ci[1], '.3f')}, {fit.get('ci_method', '')})")
    print(f"fit: slope {num(fit['slope'], '.3f')}, intercept {num(fit['intercept'], '.1f')} ue, "
          f"R^2 {num(fit['r2'], '.4f')}, RMS {num(fit['rms_ue'], '.1f')} ue, "
          f"max {num(fit['max_abs_ue'], '.1f')} ue, n = {fit['n']} pairs")
    print(f"gauges: {v['passing']} pass, {v['failing']} fail, {v['unconservative']} "
          f"unconservative, {v['flagged']} flagged, of {v['gauges']}")
    if v["worst"]:
        print(f"worst at the reference step: {', '.join(v['worst'])}")
    if s.get("validation"):
        print(validation_line(s["validation"]))
    for f in s["flags"]:
        if f["step"] in (-1, None):
            print(f"flag {f['gauge']}: {f['flag']} - {f['reason']}"
                  + (f" [{f['disposition']}]" if f.get("disposition") else ""))
    for d in s["diagnoses"]:
        print(f"diagnosis {d['gauge']}: {d['explanation']} - {d['detail']}")
    if corr.corrections is not None:
        print(f"measurement chain: {len(corr.corrections)} channel(s) corrected before the tare, "
              "every factor and term in corrections.csv")
    print(CAUTION)


def run(args: argparse.Namespace) -> int:
    """Correlate the study and write every output; print the summary."""
    with progress.step("reading the study"):
        study = read_study(args.study)
    out = output_path(args.out)
    check_target(out, force=args.force, inputs=study_inputs(study))
    model = prepare(study)
    with progress.step("correlating (statistics, health, rosettes)"):
        corr = correlate_study(study, model)
    fullfield = None
    if study.fullfield is not None:
        with progress.step("comparing the DIC frames (registration, levelling, statistics)"):
            fullfield = correlate_fullfield(corr)
    write_outputs(corr, out, force=args.force, report=not args.no_report, fullfield=fullfield)
    with progress.step("printing the summary"):
        print_summary(corr)
    print(f"outputs in {out}" + ("" if args.no_report else f"; report: {out / 'report.html'}"))
    return 0
