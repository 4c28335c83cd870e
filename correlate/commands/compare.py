"""`correlate compare OLD NEW`: a model revision against the previous one, same test data."""

from __future__ import annotations

import argparse
from pathlib import Path

from correlate.comparison.revisions import compare_gauges, judge, overall_change
from correlate.core.errors import OutputError, RunFolderError
from correlate.core.folders import check_target, output_path, staged_folder
from correlate.core.names import CAUTION
from correlate.core.tables import write_csv
from correlate.readers.run_folder import RunFolder, input_hash, read_run, readings_hash
from correlate.report.compare_page import cell_text, render_compare_page


def _check_out(out: Path, runs: tuple[Path, ...], *, force: bool) -> None:
    o = out.resolve()
    for r in (p.resolve() for p in runs):
        if o == r or r in o.parents or o in r.parents:
            raise OutputError(f"--out '{out}' is, lies inside or contains the run folder '{r}'; "
                              "compare never writes into run folders: choose another --out")
    check_target(out, force=force, inputs=runs)


def _same_model(a: RunFolder, b: RunFolder, old: Path, new: Path) -> str | None:
    """A note when the two runs cannot show a model revision: one folder twice, or the same
    model result files (by their sha256) in both runs."""
    if old.resolve() == new.resolve():
        return f"OLD and NEW are the same folder '{old}': compare a run with an earlier one"
    names = [k for k in a.summary.get("provenance", {}).get("inputs", {})
             if k == "model" or k.startswith("case ")]
    hashes = [(input_hash(a, k), input_hash(b, k)) for k in names]
    if hashes and all(x is not None and x == y for x, y in hashes):
        return ("both runs were made from the same model result file(s) (same sha256): their "
                "differences come from the study or the gauge map, not from a model revision")
    return None


def run(args: argparse.Namespace) -> int:
    """Compare two run folders; print the table and verdict; write outputs with --out."""
    old, new = Path(args.old), Path(args.new)
    out = output_path(args.out) if args.out is not None else None
    if out is not None:
        _check_out(out, (old, new), force=args.force)
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
    print(shown.to_string(index=False, formatters={c: cell_text for c in ("old_rms_ue", "new_rms_ue")}))
    rows = [(k, f"{o:.4g} -> {n:.4g}") for k, (o, n) in overall.items()]
    print("overall: " + "; ".join(f"{k} {t}" for k, t in rows))
    ref = b.summary["reference_step"]
    notes = []
    if [a.summary["reference_step"][k] for k in ("step", "sequence")] != [ref["step"],
                                                                          ref["sequence"]]:
        notes.append(f"the reference steps differ; both runs are read at NEW's step "
                     f"{ref['step']} (sequence {ref['sequence']})")
    ga, gb = input_hash(a, "gauges"), input_hash(b, "gauges")
    if ga and gb and ga != gb:   # runs made before the hash was kept say nothing
        notes.append(f"the gauge maps differ (sha256 {str(ga)[:12]}... in '{old}', "
                     f"{str(gb)[:12]}... in '{new}'): gauge positions, directions, properties "
                     "or the gauge set changed between the runs, so their differences are not "
                     "the model's alone")
    same = _same_model(a, b, old, new)
    if same:
        notes.append(same)
    for note in notes:
        print(f"note: {note}")
    print(line + (": " + "; ".join(reasons) if reasons else ""))
    print(CAUTION)
    if out is not None:
        html = render_compare_page(title=f"Comparison of {new} with {old}", verdict=line,
                                   reasons=reasons, old=str(old), new=str(new), reference=ref,
                                   overall=overall, table=table, notes=notes)
        with staged_folder(out, force=args.force, inputs=(old, new)) as tmp:
            write_csv(table, tmp / "compare.csv")
            (tmp / "compare.html").write_text(html, encoding="utf-8")
        print(f"comparison written to {out / 'compare.csv'} and compare.html")
    return 3 if args.fail_if_worse and verdict == "worse" else 0
