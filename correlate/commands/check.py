"""`correlate check STUDY`: read everything, report every problem, show where each gauge landed."""

from __future__ import annotations

import argparse
import sys
import tomllib
import warnings
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pandas as pd

from correlate.comparison.correlation import chain_readings, require_loads
from correlate.comparison.pairing import load_columns
from correlate.core.errors import CorrelateError, StudyError
from correlate.model_readings.channels import channel_gauges
from correlate.model_readings.conventions import convention_warnings
from correlate.model_readings.model import (
    Model,
    case_problems,
    case_rows,
    case_steps,
    locate,
    open_sources,
    settle_family,
)
from correlate.readers.bridge_map import bridges_of
from correlate.readers.gauges import read_gauges
from correlate.readers.readings import read_readings
from correlate.readers.study import Study, read_study


def _attempt(problems: list[str], step: Callable[..., Any], *args: Any) -> tuple[bool, Any]:
    """Run one step; on an input problem keep its lines and say it failed."""
    try:
        return True, step(*args)
    except CorrelateError as exc:
        problems.extend(exc.problems)
        return False, None


def check_study(study: Study) -> tuple[Model, pd.DataFrame, list[str]]:
    """Read everything; return the model, the placement table and the warnings raised.

    Every problem is collected before anything is refused: the model file, the gauge map, each
    case's arrays (read without the gauges, so that a gauge off the model does not hide them),
    each gauge's location, each case's readings at the gauges, and the readings file.

    Raises
    ------
    CorrelateError
        One line per problem found, all of them.
    """
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        problems: list[str] = []
        opened, sources = _attempt(problems, open_sources, study)
        _, gauges = _attempt(problems, read_gauges, study.gauges_file)
        channels, bridges = gauges, None
        if gauges is not None:  # the bridges' columns and [[bridge]] tables, one line each
            _, bridges = _attempt(problems, lambda: bridges_of(gauges, study.bridge_tables,
                                                               source=study.gauges_file.name,
                                                               study=study.path.name))
            if bridges:  # the readings hold the channels: a bridge's, not its arms'
                _, channels = _attempt(problems, channel_gauges, gauges, bridges,
                                       study.chain.nonlinearity)
        settled = opened and _attempt(problems, settle_family, study, sources, gauges)[0]
        bad_cases = set()
        for case in study.cases if settled else ():
            lines = case_problems(study, sources, case)
            if lines:
                bad_cases.add(case.name)
                problems.extend(lines)
        model = None
        if settled and gauges is not None:
            _, model = _attempt(problems, locate, study, sources, gauges)
            if model is not None and bridges:
                model.bridges = bridges  # as prepare() gives them
        for case in study.cases if model is not None else ():
            if case.name not in bad_cases:
                for fe_index, _ in case_steps(model, case)[:1]:
                    _attempt(problems, case_rows, model, case, fe_index)
        if study.readings_file is not None and study.loads:   # a study `run` can take
            _attempt(problems, require_loads, study)
        if study.readings_file is not None and channels is not None:
            _attempt(problems, chain_readings, study, channels)  # the chain's inputs too
        elif study.readings_file is not None and (channels := _raw_channels(study.gauges_file)):
            _attempt(problems, lambda: read_readings(study.readings_file, gauges=channels,
                                                     loads=load_columns(study),
                                                     sentinels=study.sentinels))
        if problems or model is None:
            raise CorrelateError(*dict.fromkeys(problems))
        notes = convention_warnings(model)
    return model, model.operator.placement.table, [str(w.message) for w in caught] + notes


def _beside_the_study(path: Path) -> list[str]:
    """Problems of the gauge map and the readings a study names, when the study itself is bad.

    The files are taken from the study's raw tables (the study could not be validated), so
    that one ``check`` reports the study's problems and theirs together.
    """
    try:
        raw = tomllib.loads(Path(path).read_text(encoding="utf-8-sig"))
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return []
    base = Path(path).resolve().parent

    def named(table: str) -> Path | None:
        value = raw.get(table, {}).get("file") if isinstance(raw.get(table), dict) else None
        if not isinstance(value, str) or not value:
            return None
        try:
            file = (base / value).resolve()
        except (RuntimeError, OSError):
            return None
        return file if file.is_file() else None

    problems: list[str] = []
    gauges_file, readings_file = named("gauges"), named("readings")
    if gauges_file is None:
        return problems
    _, gauges = _attempt(problems, read_gauges, gauges_file)
    tables = raw.get("bridge", [])
    named_channels = {t["name"]: t["channel"] for t in (tables if isinstance(tables, list) else [])
                      if isinstance(t, dict) and isinstance(t.get("name"), str)
                      and isinstance(t.get("channel"), str) and t["channel"]}
    channels = (_raw_channels(gauges_file, named_channels) if gauges is None else
                _channels(gauges["gauge"], gauges["channel"],
                          gauges["bridge"] if "bridge" in gauges else [""] * len(gauges),
                          named_channels))
    if not channels or readings_file is None:
        return problems
    loads = raw.get("load", [])
    columns = tuple(dict.fromkeys(ld["column"] for ld in (loads if isinstance(loads, list) else [])
                                  if isinstance(ld, dict) and isinstance(ld.get("column"), str)))
    readings = raw.get("readings", {})
    sentinels = readings.get("sentinels")
    if not (isinstance(sentinels, list) and all(isinstance(v, int | float | str)
                                                 and not isinstance(v, bool) for v in sentinels)):
        sentinels = None
    _attempt(problems, lambda: read_readings(readings_file, gauges=channels, loads=columns,
                                             sentinels=sentinels))
    return problems


def _raw_channels(gauges_file: Path, bridge_channels: dict[str, str] | None = None
                  ) -> dict[str, str]:
    """Readings column of each gauge id of a gauge map that failed validation ({}: unreadable)."""
    try:
        raw = pd.read_csv(gauges_file, dtype=str, keep_default_na=False, skipinitialspace=True,
                          encoding="utf-8-sig", index_col=False)
    except (ValueError, OSError, UnicodeDecodeError):
        return {}
    if "gauge" not in raw:
        return {}
    ids = raw["gauge"].str.strip()
    channel = raw["channel"].str.strip() if "channel" in raw else ids
    bridge = raw["bridge"].str.strip() if "bridge" in raw else pd.Series("", index=raw.index)
    return _channels(ids, channel, bridge, bridge_channels or {})


def _channels(ids: Any, channel: Any, bridge: Any, bridge_channels: dict[str, str]
              ) -> dict[str, str]:
    """Readings column of each channel: a gauge's ``channel`` (or its id); a bridge arm has no
    column of its own, its bridge's channel (the ``[[bridge]]`` table's, or the bridge's id)
    stands for it."""
    out = {g: (c or g) for g, c, b in zip(ids, channel, bridge, strict=True) if g and not b}
    out.update({b: bridge_channels.get(b, b) for b in dict.fromkeys(bridge) if b})
    return out


def run(args: argparse.Namespace) -> int:
    """Check the study and print where each gauge landed."""
    try:
        study = read_study(args.study)
    except StudyError as exc:
        more = [line for line in _beside_the_study(args.study) if line not in exc.problems]
        raise StudyError(*exc.problems, *more) from None
    model, placement, notes = check_study(study)
    mesh = model.operator.mesh
    print(f"model: {study.model_file.name}: {len(mesh.points)} nodes, {mesh.n_cells} cells "
          f"({', '.join(sorted({t for t, _ in mesh.blocks}))}), {mesh.family}")
    print(f"cases: {', '.join(c.name for c in study.cases)}")
    cols = ["gauge", "element", "cell_type", "snap_distance", "out_of_plane_deg"]
    table = placement[cols].copy()
    table["snap_distance"] = table["snap_distance"].map(lambda v: f"{v:.4f}")
    table["out_of_plane_deg"] = table["out_of_plane_deg"].map(lambda v: f"{v:.1f}")
    print(table.to_string(index=False))
    for n in notes:
        print(f"warning: {n}", file=sys.stderr)
    print(f"study is usable: {len(placement)} gauges located ({study.length_unit})")
    return 0
