"""The per-variant cache of a sweep: one small file per variant, keyed by what it was made from.

Stage: variants. In: a :class:`VariantResult` and its key. Out: ``DIR/variants/<key>.npz``.

The key is a hash of the variant's result files (their bytes) and of the base study's own inputs
(the study file, gauge map, readings and every other file the study names, also inside its
tables, and the tool's version),
so an edited variant file or study is computed again and an unchanged one is taken from the
cache. Each entry is written to a temporary name and renamed, so an interrupted sweep leaves only
whole entries. Failed variants are not kept: a rerun tries them again.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import tempfile
import zipfile
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from correlate._version import __version__
from correlate.core.folders import sha256
from correlate.readers.records import Study
from correlate.variants.evaluate import VariantResult
from correlate.variants.sweep_file import Variant

__all__ = ["load_result", "repeated_results", "save_result", "study_fingerprint", "variant_key"]


def study_fingerprint(study: Study) -> str:
    """Hash of the base study's inputs other than the model results, and the tool's version."""
    h = hashlib.blake2b(digest_size=20)
    h.update(__version__.encode())
    model_files = {study.model_file, *(c.file for c in study.cases)}
    paths = sorted(p for p in set(_paths(study)) if p not in model_files)
    for path in paths:
        h.update(str(path.name).encode())
        h.update((sha256(path) if path.is_file() else "absent").encode())
    return h.hexdigest()


def _paths(value: object) -> list[Path]:
    """Every path held in a record, its nested records and containers (the files a study names:
    gauge map, readings, coarser meshes, input variants, correction tables, ...)."""
    if isinstance(value, Path):
        return [value]
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return [p for f in dataclasses.fields(value) for p in _paths(getattr(value, f.name))]
    if isinstance(value, dict):
        return [p for v in value.values() for p in _paths(v)]
    if isinstance(value, list | tuple):
        return [p for v in value for p in _paths(v)]
    return []


def variant_key(variant: Variant, fingerprint: str) -> str | None:
    """The cache key of a variant: its files' SHA-256 and the study fingerprint; None when a
    file is missing (that variant fails and is not cached)."""
    h = hashlib.blake2b(digest_size=20)
    h.update(fingerprint.encode())
    for label, path in [("", variant.file), *sorted(variant.case_files.items())]:
        if not path.is_file():
            return None
        h.update(label.encode())
        h.update(sha256(path).encode())
    return h.hexdigest()


def repeated_results(variants: Sequence[Variant], keys: dict[str, str | None]) -> dict[str, str]:
    """Why rows of the table that name the same model result (the same key: the same file
    contents) cannot all be used, by variant name; empty when no result is named twice.

    Given different parameters, every row of the group is refused: the same model cannot be two
    parameter sets, and the response surface would fit both. Given the same parameters, the
    first row is kept and the later ones are refused, so that the result is not counted twice
    (twice the weight in the identification, and a leave-one-out error that leaves out only one
    copy). The sweep goes on with the others.
    """
    groups: dict[str, list[Variant]] = {}
    for v in variants:
        if (key := keys.get(v.name)) is not None:
            groups.setdefault(key, []).append(v)
    out: dict[str, str] = {}
    for group in (g for g in groups.values() if len(g) > 1):
        first = group[0]
        if all(v.parameters == first.parameters for v in group):
            for v in group[1:]:
                out[v.name] = (f"the same model result (file contents) and parameters as "
                               f"variant '{first.name}' (row {first.row}); left out so that it "
                               "is not counted twice; remove the row")
            continue
        for v in group:
            other = group[1] if v is first else first
            differ = ", ".join(f"{k} {v.parameters[k]:g} against {other.parameters[k]:g}"
                               for k in v.parameters if v.parameters[k] != other.parameters[k])
            out[v.name] = (f"the same model result (file contents) as variant '{other.name}' "
                           f"(row {other.row}) but other parameters ({differ}); one of the rows "
                           "is wrong: check the table's file and parameter columns")
    return out


def save_result(folder: Path, key: str, result: VariantResult) -> None:
    """Write a successful variant's result as ``folder/<key>.npz`` (atomically)."""
    folder.mkdir(parents=True, exist_ok=True)
    arrays = {"predicted": result.predicted, "evaluated": result.evaluated,
              "measured": result.measured, "steps": result.steps}
    if result.u_val is not None:
        arrays["u_val"] = result.u_val
    for case, rows in result.rows.items():
        for kind, values in rows.items():
            arrays[f"rows/{case}/{kind}"] = values
    meta = {"name": result.name, "metrics": result.metrics, "same_mesh": result.same_mesh,
            "gauges": list(result.gauges),
            "warnings": list(result.warnings)}
    arrays["meta"] = np.array(json.dumps(meta))
    fd, tmp = tempfile.mkstemp(prefix=f".{key}.", suffix=".partial", dir=folder)
    try:
        with os.fdopen(fd, "wb") as f:
            np.savez(f, **arrays)
        os.replace(tmp, folder / f"{key}.npz")
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def load_result(folder: Path, key: str, name: str) -> VariantResult | None:
    """The cached result of a variant, or None when there is none (or it cannot be read)."""
    path = folder / f"{key}.npz"
    if not path.is_file():
        return None
    try:
        with np.load(path, allow_pickle=False) as z:
            meta = json.loads(str(z["meta"]))
            rows: dict[str, dict[str, np.ndarray]] = {}
            for k in z.files:
                if k.startswith("rows/"):
                    _, case, kind = k.split("/", 2)
                    rows.setdefault(case, {})[kind] = z[k]
            predicted, evaluated = z["predicted"], z["evaluated"]
            measured, steps = z["measured"], z["steps"]
            u_val = z["u_val"] if "u_val" in z.files else None
    except (OSError, ValueError, KeyError, zipfile.BadZipFile, json.JSONDecodeError):
        return None   # a damaged entry is computed again
    return VariantResult(name=name, metrics=meta["metrics"], predicted=predicted,
                         evaluated=evaluated, measured=measured, steps=steps, rows=rows,
                         u_val=u_val,
                         gauges=tuple(meta["gauges"]), same_mesh=bool(meta["same_mesh"]),
                         warnings=tuple(meta["warnings"]))
