"""Flags and their dispositions: which gauges and steps the comparison leaves out, and why.

Stage: comparison. In: the channel-health flags (model-free), the sentinel values the readings
held, the study's overrides (keep, exclude, reverse) and the model-based evidence (a gauge that
fits the model with its sign reversed; a failing gauge explained by an installation fault). Out:
the flag table (``flags.csv``) with a disposition per flag, and the :class:`Exclusions` that the
statuses and the fits apply.

Model-based flags (``reversed``, ``installation``) are held out of the fit until the analyst
disposes of them with an ``[[override]]``: the tool shows the evidence, the analyst decides.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from correlate.comparison.pairing import Steps
from correlate.measurement.health import assess_channels, load_direction
from correlate.readers.study import Override, Study

#: columns of flags.csv after the original ten: the override that disposed of a flag (its
#: action, who and when) and, for a reversal, the gauge's ratio after it (``value`` is before)
RECORD_COLUMNS = ("action", "by", "date", "value_after")
REVERSED_RATIO = 0.5   # [health] reversed_ratio: ratios in [-(2 - r), -r] are reversed (common practice)
REVERSED_R2 = 0.9
PENDING = "needs a disposition"


@dataclass(frozen=True, eq=False)
class Exclusions:
    """What the flags and dispositions leave out, (s, g) or (g,); the arrays are filled in place
    while the flags are disposed of, then read by the statuses."""

    steps: NDArray[np.bool_]       # (s, g) gauge-steps left out
    gauges: NDArray[np.bool_]      # (g,) gauges left out
    text: NDArray                  # (s, g) the flag that left each entry out ("" where none)

    @classmethod
    def none(cls, s: int, g: int) -> Exclusions:
        return cls(steps=np.zeros((s, g), dtype=bool), gauges=np.zeros(g, dtype=bool),
                   text=np.full((s, g), "", dtype=object))

    def drop_gauge(self, j: int, flag: str, *, overwrite: bool = False) -> None:
        self.gauges[j] = True
        self.text[:, j] = flag if overwrite else np.where(self.text[:, j] == "", flag,
                                                           self.text[:, j])


def reverse_signs(gauges: pd.DataFrame, study: Study) -> NDArray[np.float64]:
    """Per-gauge sign (g,): -1 for a gauge the study reverses with an override, else 1."""
    sign = np.ones(len(gauges))
    names = gauges["gauge"].tolist()
    for o in study.overrides:
        if o.action == "reverse":
            sign[names.index(o.gauge)] *= -1.0
    return sign


def health_flags(measured: NDArray, names: list[str], steps: Steps, gauges: pd.DataFrame,
                 study: Study, sentinel_rows: pd.DataFrame, raw: NDArray | None = None,
                 chain_rows: pd.DataFrame | None = None) -> pd.DataFrame:
    """Model-free channel-health flags, sentinel values first, with an empty disposition.

    With ``raw`` (the readings as read, tared, when the measurement chain corrected them) a dead
    or railed channel is judged on what the instrument read: an open channel reads flat whatever
    the thermal-output correction adds, and the range is the instrument's. The other flags are
    judged on the corrected readings (a thermal drift removed is no drift). ``chain_rows``:
    readings the measurement chain left out (a temperature outside its lot's range).
    """
    direction = load_direction(steps.loads, steps.sequence, tol=study.zero_tol)

    def assess(values: NDArray) -> pd.DataFrame:
        return assess_channels(
            values, gauges=names, loads=steps.loads, steps=steps.step, sequence=steps.sequence,
            tare=steps.tare, zero_load=steps.zero_load, direction=direction,
            range_ue=gauges["range_ue"].to_numpy(dtype=float), thresholds={**study.health})

    flags = assess(measured)
    if raw is not None:
        as_read = assess(raw)
        as_read = as_read[as_read["flag"].isin(["dead", "rail"])]
        dead = set(as_read.loc[as_read["flag"] == "dead", "gauge"])
        flags = flags[~flags["flag"].isin(["dead", "rail"]) & ~flags["gauge"].isin(dead)]
        flags = pd.concat([as_read, flags], ignore_index=True)
        order = {g: j for j, g in enumerate(names)}
        flags = flags.sort_values("gauge", key=lambda c: c.map(order), kind="stable",
                                  ignore_index=True)
    if len(sentinel_rows):
        sent = sentinel_rows[sentinel_rows["gauge"].isin(names)]
        extra = pd.DataFrame({"gauge": sent["gauge"], "step": sent["step"],
                              "sequence": sent["sequence"], "flag": "sentinel",
                              "value": sent["value"].astype(str), "threshold": np.nan,
                              "scope": "step", "drops": "step",
                              "reason": "open or overranged channel value "
                                        + sent["value"].astype(str)})
        flags = pd.concat([extra, flags], ignore_index=True)  # a sentinel says more than "missing"
    if chain_rows is not None and len(chain_rows):  # says more than "missing" too
        flags = pd.concat([chain_rows, flags], ignore_index=True)
    flags["disposition"] = ""
    for col in RECORD_COLUMNS:
        flags[col] = np.nan if col == "value_after" else ""
    return flags


def _mark(flags: pd.DataFrame, i: int, o: Override) -> None:
    """Record the override that disposed of flag row ``i``."""
    flags.loc[i, ["action", "by", "date"]] = [o.action, o.by, o.date]


def _add(flags: pd.DataFrame, row: dict, o: Override | None = None) -> None:
    record = {"action": "", "by": "", "date": "", "value_after": np.nan, **row}
    if o is not None:
        record.update(action=o.action, by=o.by, date=o.date)
    flags.loc[len(flags)] = record


def dispose_health(flags: pd.DataFrame, study: Study, names: list[str], steps: Steps
                   ) -> Exclusions:
    """Apply the health flags and the study's keep and exclude overrides.

    A ``keep`` override keeps a gauge its flags would leave out; ``exclude`` leaves a gauge out
    and adds an ``excluded`` row to ``flags`` (modified in place).
    """
    gidx = {g: j for j, g in enumerate(names)}
    excl = Exclusions.none(len(steps.step), len(names))
    keep = {o.gauge: o for o in study.overrides if o.action == "keep"}
    exclude = {o.gauge: o for o in study.overrides if o.action == "exclude"}
    step_index = {(int(s), int(q)): i for i, (s, q) in enumerate(zip(steps.step, steps.sequence,
                                                                       strict=True))}
    for i, f in flags.iterrows():
        j = gidx[f["gauge"]]
        if f["gauge"] in keep and f["drops"] == "gauge":
            flags.at[i, "disposition"] = f"kept: {keep[f['gauge']].reason}"
            _mark(flags, i, keep[f["gauge"]])
            continue
        if f["drops"] == "gauge":
            excl.drop_gauge(j, f["flag"])
        elif f["drops"] == "step":
            k = step_index.get((int(f["step"]), int(f["sequence"])))
            if k is not None:
                excl.steps[k, j] = True
                excl.text[k, j] = excl.text[k, j] or f["flag"]
    for g, o in exclude.items():
        excl.drop_gauge(gidx[g], "excluded", overwrite=True)
        _add(flags, {"gauge": g, "step": -1, "sequence": -1, "flag": "excluded",
                     "value": np.nan, "threshold": np.nan, "scope": "gauge",
                     "drops": "gauge", "reason": "excluded by the study",
                     "disposition": f"excluded: {o.reason}"}, o)
    return excl


def reversed_band(study: Study) -> tuple[float, float]:
    """Per-gauge ratios taken as reversed polarity: [-(2 - r), -r] for ``[health]
    reversed_ratio`` r (default 0.5: -1.5 to -0.5), with R^2 at least 0.9."""
    r = float(study.health.get("reversed_ratio", REVERSED_RATIO))
    return -(2.0 - r), -r


def gauge_ratios(measured: NDArray, predicted: NDArray, ok: NDArray) -> tuple[NDArray, NDArray]:
    """Per-gauge ratio and R^2 of measured against predicted (through the origin)."""
    g = measured.shape[1]
    k = np.full(g, np.nan)
    r2 = np.full(g, np.nan)
    for j in range(g):
        m, p = measured[ok[:, j], j], predicted[ok[:, j], j]
        if len(m) >= 2 and np.dot(p, p) > 0:
            k[j] = np.dot(m, p) / np.dot(p, p)
            ss = np.sum((m - m.mean()) ** 2)
            r2[j] = 1 - np.sum((m - k[j] * p) ** 2) / ss if ss > 0 else np.nan
    return k, r2


def flag_reversed(measured: NDArray, predicted: NDArray, names: list[str], steps: Steps,
                  excl: Exclusions, flags: pd.DataFrame, study: Study) -> NDArray[np.bool_]:
    """Flag gauges that fit the model with the sign reversed (suspected reversed polarity);
    held out until kept by an override. Returns the mask of reversed gauges."""
    keep = {o.gauge: o for o in study.overrides if o.action == "keep"}
    usable = (steps.active[:, None] & ~excl.steps & ~excl.gauges[None, :]
              & np.isfinite(measured))
    k, r2 = gauge_ratios(measured, predicted, usable)
    low, high = reversed_band(study)
    reversed_ = (k >= low) & (k <= high) & (r2 >= REVERSED_R2)
    for j in np.flatnonzero(reversed_):
        g = names[j]
        disp = f"kept: {keep[g].reason}" if g in keep else PENDING
        _add(flags, {"gauge": g, "step": -1, "sequence": -1, "flag": "reversed",
                     "value": float(k[j]), "threshold": high,
                     "scope": "gauge", "drops": "gauge",
                     "reason": f"ratio {k[j]:.3f} with R^2 {r2[j]:.3f}: fits the model "
                               "with the sign reversed (suspected reversed polarity)",
                     "disposition": disp}, keep.get(g))
        if g not in keep:
            excl.drop_gauge(j, "reversed")
    for o in study.overrides:
        if o.action == "reverse":
            j = names.index(o.gauge)
            after = float(k[j]) if np.isfinite(k[j]) else np.nan
            _add(flags, {"gauge": o.gauge, "step": -1, "sequence": -1, "flag": "reversed",
                         "value": -after, "threshold": high, "scope": "gauge",
                         "drops": "none",
                         "reason": f"sign reversed by the study: ratio {-after:.3f} before, "
                                   f"{after:.3f} after",
                         "disposition": f"reversed: {o.reason}", "value_after": after}, o)
    return reversed_


def flag_installation(faults: list[tuple[str, str]], names: list[str], reversed_: NDArray,
                      excl: Exclusions, flags: pd.DataFrame, study: Study) -> NDArray[np.bool_]:
    """Flag failing gauges explained by an installation fault (turned, moved beyond tolerance,
    swapped, permuted): like a reversed gauge, held out until the analyst disposes of them.
    Returns the mask of such gauges."""
    keep = {o.gauge: o for o in study.overrides if o.action == "keep"}
    gidx = {g: j for j, g in enumerate(names)}
    suspect = np.zeros(len(names), dtype=bool)
    for gauge, explanation in faults:
        j = gidx[gauge]
        if suspect[j] or reversed_[j]:
            continue
        suspect[j] = True
        disp = f"kept: {keep[gauge].reason}" if gauge in keep else PENDING
        _add(flags, {"gauge": gauge, "step": -1, "sequence": -1,
                     "flag": "installation", "value": np.nan, "threshold": np.nan,
                     "scope": "gauge", "drops": "gauge",
                     "reason": f"failing gauge explained by: {explanation} (see the "
                               "diagnosis)", "disposition": disp}, keep.get(gauge))
        if gauge not in keep:
            excl.drop_gauge(j, "installation", overwrite=True)
    return suspect


__all__ = ["PENDING", "Exclusions", "dispose_health", "flag_installation", "flag_reversed",
           "gauge_ratios", "health_flags", "reverse_signs"]
