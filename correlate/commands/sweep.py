"""`correlate sweep SWEEP.toml --out DIR`: correlate many model variants on Dask, rank, identify.

The output folder keeps one cache entry per variant in ``DIR/variants/`` as each finishes, so an
interrupted sweep resumes where it stopped; rerunning into the same folder (recognised by the
marker naming the sweep file) computes only the variants not yet in the cache, and ``--force``
starts afresh. ``variants.csv``, ``identified.json`` and ``sweep.html`` are each written whole
(to a temporary name, then renamed). Exit 0 when at least one variant was correlated, 2 when
none was (every reason on stderr and in ``variants.csv``).
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

from correlate.commands.outputs import study_inputs
from correlate.core import progress
from correlate.core.errors import CorrelateError, OutputError
from correlate.core.folders import check_target, output_path
from correlate.core.names import CAUTION
from correlate.core.tables import write_csv, write_json
from correlate.report.sweep_page import FIGURES, render_sweep_page
from correlate.variants.cache import (
    load_result,
    repeated_results,
    save_result,
    study_fingerprint,
    variant_key,
)
from correlate.variants.cluster import compute_variants
from correlate.variants.evaluate import VariantResult, locate_base, missing_file
from correlate.variants.results import identify_sweep, variants_table
from correlate.variants.sweep_file import Sweep, Variant, read_sweep

SWEEP_MARKER = ".correlate-sweep"   # names the sweep file: the folder is that sweep's own
CACHE = "variants"
OWN = {SWEEP_MARKER, CACHE, "variants.csv", "identified.json", "sweep.html", FIGURES}


def sweep_inputs(sweep: Sweep) -> list[Path]:
    """Every file the sweep reads: the sweep file, its table, the study's inputs, the variants."""
    files = [sweep.path, sweep.table_file, *study_inputs(sweep.study)]
    for v in sweep.variants:
        files += [*([v.file] if v.file else []), *v.case_files.values()]
    return files


def prepare_folder(out: Path, sweep: Sweep, *, force: bool) -> bool:
    """Make ``out`` ready; return True when it is this sweep's folder and its cache is kept."""
    # the sweep file's path from the folder: kept when both move together (the demo's staging)
    own_id = os.path.relpath(sweep.path.resolve(), Path(os.path.abspath(out)))
    marker = out / SWEEP_MARKER
    inputs = sweep_inputs(sweep)
    if out.is_dir() and not force:
        # a folder holding an input, or one the tool did not write, is refused as such first:
        # "add --force" would be wrong advice there
        check_target(out, force=True, inputs=inputs, own=OWN)
        if marker.is_file() and marker.read_text(encoding="utf-8").strip() == own_id:
            return True
        raise OutputError(f"output folder '{out}' exists and is not this sweep's folder; add "
                          "--force to replace it or choose another --out")
    check_target(out, force=force, inputs=inputs, own=OWN)
    try:
        if out.exists():
            shutil.rmtree(out)
        (out / CACHE).mkdir(parents=True)
        marker.write_text(own_id + "\n", encoding="utf-8")
    except OSError as exc:
        raise OutputError(f"cannot prepare '{out}': {exc.strerror}; choose a writable folder") \
            from None
    return False


def _whole(path: Path, write: Callable[[Path], None]) -> None:
    """Write a file through a temporary name beside it, then rename (never half-written)."""
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".partial", dir=path.parent)
    os.close(fd)
    try:
        write(Path(tmp))
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def collect(sweep: Sweep, out: Path, args: argparse.Namespace) -> tuple[dict, int, int]:
    """Every variant's result: from the cache, or computed (and cached as each finishes).

    Returns the results by name, how many variants went to the workers and how many came from
    the cache; a variant whose file is missing or whose parameters are not numbers, or whose
    model result another row names too (:func:`repeated_results`), is failed here and counted
    in neither.
    """
    cache = out / CACHE
    fingerprint = study_fingerprint(sweep.study)
    results: dict[str, VariantResult] = {}
    problems = {v.name: v.problem or missing_file(v) for v in sweep.variants}
    ready = [v for v in sweep.variants if not problems[v.name]]
    # one file per thread: hashlib releases the GIL, so the variants' files (hundreds of MB
    # each) are hashed on every core at once
    with ThreadPoolExecutor(max_workers=os.cpu_count() or 1) as pool:
        hashed = pool.map(lambda v: variant_key(v, fingerprint), ready)
        keys: dict[str, str | None] = dict(zip(
            [v.name for v in ready],
            progress.bar(hashed, desc="hashing the variant files", total=len(ready)),
            strict=True))
    problems.update(repeated_results(ready, keys))
    todo: list[Variant] = []
    for v in sweep.variants:
        if problems[v.name]:   # recorded as the variant's failure; nothing to compute
            results[v.name] = VariantResult(name=v.name, failure=problems[v.name])
            keys[v.name] = None
            continue
        key = keys[v.name]
        cached = load_result(cache, key, v.name) if key is not None else None
        if cached is not None:
            results[v.name] = cached
        else:
            todo.append(v)
    n_cached = sum(not r.failure for r in results.values())

    def done(variant: Variant, result: VariantResult) -> None:
        key = keys[variant.name]
        if not result.failure and key is not None:
            save_result(cache, key, result)
        results[variant.name] = result

    if todo:
        with progress.step("locating the gauges on the base model"):
            located = locate_base(sweep.study)
        compute_variants(sweep.study, todo, located, done, workers=args.workers,
                         scheduler=args.scheduler)
    return results, len(todo), n_cached


def run(args: argparse.Namespace) -> int:
    """Correlate every variant, write variants.csv (and identified.json); print the counts."""
    with progress.step("reading the sweep"):
        sweep = read_sweep(args.sweep)
    out = output_path(args.out)
    prepare_folder(out, sweep, force=args.force)
    results, computed, cached = collect(sweep, out, args)
    table = variants_table(sweep, results)
    shown = Path(getattr(args, "shown_out", out))
    if shown != out:   # the demo: its inputs stand in a staging folder until it is moved
        table["file"] = [str(_moved(Path(f), out.parent, shown.parent)) for f in table["file"]]
    _whole(out / "variants.csv", lambda p: write_csv(table, p))
    failed = [(v, results[v.name].failure) for v in sweep.variants if results[v.name].failure]
    for v, reason in failed:
        print(f"error: variant '{v.name}' (row {v.row}): {reason}", file=sys.stderr)
    for line, names in _warnings(sweep, results).items():
        which = names[0] if len(names) == 1 else f"{len(names)} variants, e.g. {names[0]}"
        print(f"warning: ({which}) {line}", file=sys.stderr)
    n = len(sweep.variants)
    print(f"{n} variant{'s' if n != 1 else ''}: {computed} computed, {cached} from the cache, "
          f"{len(failed)} failed")
    if len(failed) == len(sweep.variants):
        print(f"error: {sweep.path.name}: every variant failed (reasons above and in "
              f"{shown / 'variants.csv'}); fix the variant files or the study", file=sys.stderr)
        return 2
    best = table.iloc[0]
    print(f"best variant: {best['variant']} (RMS {best['rms_ue']:.3g} ue, pass fraction "
          f"{best['pass_fraction']:.3g})")
    identified = _identification(sweep, results)
    if identified is not None:
        _whole(out / "identified.json", lambda p: write_json(identified, p))
        _print_identified(identified)
    with progress.step("writing sweep.html and its figures"):
        write_page(out, table, identified, sweep)
    print(CAUTION)
    print(f"outputs in {shown}")
    return 0


def _moved(path: Path, staged: Path, final: Path) -> Path:
    """``path`` as it will stand once the folder ``staged`` is moved to ``final``."""
    return final / path.relative_to(staged) if path.is_relative_to(staged) else path


def write_page(out: Path, table: Any, identified: dict[str, Any] | None, sweep: Sweep) -> None:
    """sweep.html and its figures: drawn in a temporary folder, then put in place whole."""
    tmp = Path(tempfile.mkdtemp(prefix=".sweep_figures.", dir=out))
    try:
        html = render_sweep_page(table, identified, list(sweep.parameters), tmp,
                                 title=f"{sweep.study.title}: sweep of model variants "
                                       f"({sweep.path.name})")
        final = out / FIGURES
        if final.exists():
            shutil.rmtree(final)
        os.replace(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    _whole(out / "sweep.html", lambda p: p.write_text(html, encoding="utf-8"))


def _warnings(sweep: Sweep, results: dict[str, VariantResult]) -> dict[str, list[str]]:
    """Each distinct warning of the variants' comparisons, with the variants that gave it."""
    out: dict[str, list[str]] = {}
    for v in sweep.variants:
        for line in results[v.name].warnings:
            out.setdefault(line, []).append(v.name)
    return out


def _identification(sweep: Sweep, results: dict[str, VariantResult]) -> dict[str, Any] | None:
    if sweep.identify is None:
        return None
    first = next(results[v.name] for v in sweep.variants if not results[v.name].failure)
    try:
        return identify_sweep(sweep, results, first.measured, gauges=list(first.gauges),
                              steps=first.steps)
    except CorrelateError as exc:
        for line in exc.problems:
            print(f"warning: identification not made: {line}", file=sys.stderr)
        return None


def _print_identified(ident: dict[str, Any]) -> None:
    parts = [f"{p} = {ident['estimate'][p]:.4g} +/- {ident['standard_error'][p]:.2g}"
             for p in ident["parameters"]]
    print(f"identified ({ident['response']} response, {ident['weights']} weights): "
          + ", ".join(parts))
    print(f"response surface leave-one-out error: up to {ident['surface_loo_rms_ue_max']:.3g} ue")
    for line in ident["warnings"]:
        print(f"warning: {line}", file=sys.stderr)
