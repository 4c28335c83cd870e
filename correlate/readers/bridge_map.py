"""Bridges of a study: the gauge map's ``bridge`` and ``arm`` columns and the ``[[bridge]]`` tables.

Stage: readers. In: the validated gauge map and the study as parsed TOML. Out: one
:class:`Bridge` record per bridge channel (its arms in order 1..4, None for a completion
resistor, the readings column it is read from, its bridge factor); one problem line per bad
value naming the gauge, the bridge or the table. A gauge map without a ``bridge`` column and a
study without ``[[bridge]]`` give no bridges, and everything reads as before.

Arm numbering: ``Vo/Vex = R1/(R1+R2) - R4/(R3+R4)``; arms 1 and 3 add, 2 and 4 subtract
(Hoffmann 1989; :data:`correlate.mechanics.gauge.BRIDGE_ARM_SIGNS`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from correlate.core.errors import GaugeError, ReadingsFormatError

BRIDGE_COLUMNS = ("bridge", "arm")
BRIDGE_KEYS = {"name", "channel", "factor", "shunt_gain"}


@dataclass(frozen=True)
class Bridge:
    """One bridge channel: its id, the gauge in each arm (None: completion resistor), the
    readings column it is read from and the factor its arm sum is divided by."""

    name: str
    arms: tuple[str | None, str | None, str | None, str | None]
    factor: float = 1.0
    channel: str = ""
    shunt_gain: float = math.nan   # [[bridge]] shunt_gain: the channel's shunt calibration

    @property
    def column(self) -> str:
        """The readings column of the channel (the bridge id when no channel is given)."""
        return self.channel or self.name


def parse_bridge_tables(raw: dict[str, Any], name: str,
                        problems: list[str]) -> dict[str, tuple[str, float, float]]:
    """Read the study's ``[[bridge]]`` tables: bridge id -> (channel, factor, shunt_gain).

    ``name`` is the bridge id of the gauge map's ``bridge`` column; ``channel`` (default: the
    id) the readings column; ``factor`` (default 1) divides ``e1 - e2 + e3 - e4``;
    ``shunt_gain`` (default NaN: none) the channel's measured over expected shunt response,
    which divides the channel's reading. One problem line per bad table, appended to
    ``problems``.
    """
    items = raw.get("bridge", [])
    out: dict[str, tuple[str, float, float]] = {}
    for i, item in enumerate(items if isinstance(items, list) else [items]):
        if not isinstance(item, dict):
            continue  # reported with the study's table shapes
        bid = item.get("name")
        if not isinstance(bid, str) or not bid.strip():
            problems.append(f"{name}: [[bridge]] #{i + 1} has no name; add name = \"...\", the "
                            "bridge id of the gauge map's bridge column")
            continue
        where = f"[[bridge]] '{bid.strip()}'"
        channel = item.get("channel", "")
        if not isinstance(channel, str):
            problems.append(f"{name}: {where} channel = {channel!r}; expected the readings "
                            "column's name in quotes")
            channel = ""
        factor = item.get("factor", 1.0)
        if isinstance(factor, bool) or not isinstance(factor, int | float) or \
                not math.isfinite(factor) or factor == 0:
            quoted = "; write it without quotes" if isinstance(factor, str) else ""
            problems.append(f"{name}: {where} factor = {factor!r} is not a finite non-zero "
                            f"number{quoted} (1 for the channel's indication, 2 for a bending "
                            "half bridge read as surface strain)")
            factor = 1.0
        shunt = item.get("shunt_gain", math.nan)
        if isinstance(shunt, bool) or not isinstance(shunt, int | float) or \
                ("shunt_gain" in item and not (math.isfinite(shunt) and shunt > 0)):
            quoted = "; write it without quotes" if isinstance(shunt, str) else ""
            problems.append(f"{name}: {where} shunt_gain = {shunt!r} is not a positive "
                            f"number{quoted} (the measured over the expected shunt-calibration "
                            "response of the channel, near 1)")
            shunt = math.nan
        if bid.strip() in out:
            problems.append(f"{name}: {where} is given twice; give each bridge one table")
        out[bid.strip()] = (channel.strip(), float(factor), float(shunt))
    return out


def validate_bridges(
    gauge: Sequence[object], bridge: Sequence[object], arm: Sequence[object]
) -> dict[str, tuple[str | None, str | None, str | None, str | None]]:
    """Check the ``bridge`` and ``arm`` columns of a gauge map and return each bridge's arms.

    Parameters
    ----------
    gauge : sequence of str, length n
        Gauge ids.
    bridge : sequence, length n
        Bridge id per gauge; None, NaN or an empty string for a gauge not in a bridge.
    arm : sequence, length n
        Arm number (1 to 4) of each gauge that is in a bridge; ignored for the others.

    Returns
    -------
    dict
        Bridge id -> gauge ids in arms 1 to 4, None for a completion resistor.

    Raises
    ------
    GaugeError
        Every problem found, one line each naming the gauge and bridge: an arm outside 1..4,
        two grids on one arm, a bridge with a single arm (that is a quarter bridge).
    """
    if not len(gauge) == len(bridge) == len(arm):
        msg = f"gauge map: columns gauge, bridge and arm have {len(gauge)}, {len(bridge)} and {len(arm)} rows; expected the same number"
        raise GaugeError(msg)
    problems: list[str] = []
    members: dict[str, dict[int, list[str]]] = {}
    reported: set[str] = set()  # bridges with a bad arm: no second line for the same bridge
    for g, b, a in zip(gauge, bridge, arm, strict=True):
        name = _blank_to_none(b)
        if name is None:
            continue
        number = _arm_number(a)
        if number is None:
            problems.append(
                f"gauge '{g}' in bridge '{name}': arm {a!r} is not 1, 2, 3 or 4; give the arm it is wired into (1 and 3 add, 2 and 4 subtract)"
            )
            reported.add(name)
            continue
        members.setdefault(name, {}).setdefault(number, []).append(str(g))
    arms_of: dict[str, tuple[str | None, str | None, str | None, str | None]] = {}
    for name, by_arm in members.items():
        for number, grids in sorted(by_arm.items()):
            if len(grids) > 1:
                listed = ", ".join(f"'{g}'" for g in grids)
                problems.append(
                    f"gauges {listed} in bridge '{name}' share arm {number}; expected one grid per arm, check the arm column"
                )
                reported.add(name)
        if len(by_arm) == 1 and name not in reported:
            listed = ", ".join(f"'{g}'" for grids in by_arm.values() for g in grids)
            problems.append(
                f"gauge {listed} is the only arm of bridge '{name}'; one active arm is a quarter bridge: leave its bridge column blank"
            )
        a1, a2, a3, a4 = (by_arm.get(k, [None])[0] for k in (1, 2, 3, 4))
        arms_of[name] = (a1, a2, a3, a4)
    if problems:
        raise GaugeError(*problems)
    return arms_of




def _blank_to_none(value: object) -> str | None:
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return None
    text = str(value).strip()
    return text or None


def _arm_number(value: object) -> int | None:
    """1..4 from an int, an integral float or a numeric string; None otherwise."""
    if isinstance(value, bool):
        return None
    try:
        number = float(str(value).strip())
    except ValueError:
        return None
    return int(number) if number in (1.0, 2.0, 3.0, 4.0) else None


def bridges_of(gauges: pd.DataFrame, tables: dict[str, tuple[str, float, float]], *,
               source: str = "gauge map", study: str = "study") -> tuple[Bridge, ...]:
    """The bridges of a gauge map with their ``[[bridge]]`` settings, in gauge-map order.

    Parameters
    ----------
    gauges : DataFrame
        The validated gauge map; without a ``bridge`` column there are no bridges.
    tables : dict
        :func:`parse_bridge_tables`' result.
    source, study : str
        The gauge map's and the study file's names, for the messages.

    Raises
    ------
    GaugeError
        Every problem, one line each: an arm outside 1..4, two grids on one arm, a bridge with
        one arm, a ``[[bridge]]`` naming no bridge of the gauge map, a bridge arm that is also a
        rosette grid.
    """
    if "bridge" not in gauges and not tables:
        return ()
    column = gauges["bridge"] if "bridge" in gauges else pd.Series([""] * len(gauges))
    arm = gauges["arm"] if "arm" in gauges else pd.Series([""] * len(gauges))
    problems: list[str] = []
    try:
        arms = validate_bridges(gauges["gauge"].tolist(), column.tolist(), arm.tolist())
    except GaugeError as exc:
        problems += [f"{source}: {line}" for line in exc.problems]
        arms = {}
    for bid in tables:
        if bid not in arms and not problems:
            known = ", ".join(f"'{b}'" for b in arms) or "none"
            problems.append(f"{study}: [[bridge]] '{bid}' names no bridge of {source} (its "
                            f"bridges: {known}); use a bridge id of the gauge map's bridge column")
    if "rosette" in gauges:
        in_bridge = column.astype(str).str.strip() != ""
        both = gauges.loc[in_bridge & (gauges["rosette"] != ""), "gauge"].tolist()
        problems += [f"{source}: gauge '{g}' is both a rosette grid and a bridge arm; a grid "
                     "wired into a bridge has no reading of its own: leave one of the columns "
                     "blank" for g in both]
    problems += _chain_problems(gauges, column, source)
    if problems:
        raise GaugeError(*problems)
    none = ("", 1.0, math.nan)
    return tuple(Bridge(name=b, arms=a, factor=tables.get(b, none)[1],
                        channel=tables.get(b, none)[0], shunt_gain=tables.get(b, none)[2])
                 for b, a in arms.items())


def _chain_problems(gauges: pd.DataFrame, column: pd.Series, source: str) -> list[str]:
    """Quarter-bridge and per-grid corrections given on a bridge arm, one line each.

    The lead-wire factors RG/(RG + n RL) and the non-linearity 2 e / (2 - GF e) are relations of
    a quarter bridge (Vishay TT-612, TN-507). In a half or full bridge the leads sit in the
    excitation and sense lines or in both adjacent arms, and a bending or push-pull bridge of
    equal and opposite arms is linear; the channel's desensitisation is taken out by its shunt
    calibration (Vishay TN-514), given for the channel in its ``[[bridge]]`` table. The thermal
    output of arms from one lot at one temperature cancels in ``e1 - e2 + e3 - e4`` to first
    order (as many arms add as subtract: the reason for wiring a half or full bridge), so a
    gauge lot on an arm is refused rather than corrected per grid.
    """
    arm = column.astype(str).str.strip() != ""
    out = []
    for col, what, fix in (
            ("lead_ohm", "a lead-wire correction", "leave lead_ohm blank for bridge arms"),
            ("wiring", "a wiring", "leave wiring blank for bridge arms"),
            ("shunt_gain", "a shunt gain", "give the channel's shunt gain as shunt_gain in the "
                                           "bridge's [[bridge]] table and leave the arm's blank"),
            ("lot", "a gauge lot", "the arms' thermal output cancels in the bridge to first "
                                   "order: leave lot blank for bridge arms"),
            ("temperature", "a thermocouple column", "the arms' thermal output cancels in the "
                                                     "bridge: leave temperature blank for "
                                                     "bridge arms")):
        if col in gauges:
            values = gauges[col]
            given = values.notna() if values.dtype.kind == "f" else values.astype(str) != ""
            reason = ("lead-wire corrections apply to quarter bridges only: "
                      if col in ("lead_ohm", "wiring") else "")
            out += [f"{source}: gauge '{g}' is an arm of a bridge and has {what} ({col}); "
                    f"{reason}{fix}" for g in gauges.loc[arm & given, "gauge"]]
    if "nonlinearity" in gauges:
        quarter = gauges["nonlinearity"].astype(str).str.lower() == "quarter-bridge"
        out += [f"{source}: gauge '{g}' is an arm of a bridge and has nonlinearity "
                "'quarter-bridge'; that relation holds for quarter bridges only: leave it blank "
                "or write none" for g in gauges.loc[arm & quarter, "gauge"]]
    return out


def missing_channels(bridges: Sequence[Bridge], columns: Sequence[str], source: str) -> None:
    """Refuse bridge channels the readings file has no column for (one line each)."""
    have = set(columns)
    problems = [f"{source}: bridge '{b.name}' is read from column '{b.column}', which the "
                "readings have not; add the column or set channel in its [[bridge]] table"
                for b in bridges if b.column not in have]
    if problems:
        raise ReadingsFormatError(*problems)


__all__ = ["BRIDGE_COLUMNS", "BRIDGE_KEYS", "Bridge", "bridges_of", "missing_channels",
           "parse_bridge_tables", "validate_bridges"]
