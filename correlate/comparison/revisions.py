"""Revision against revision: did a model revision correlate better with the same test than the last one?

Stage: comparison of two run folders written by `correlate run` (OLD, NEW) made from the same
readings file. In: each folder's ``gauges.csv`` and ``summary.json``. Out: one row per gauge (its
class, pass/fail status, RMS of the difference over the pass/fail rows, and |difference| at the
reference step), the change in the overall fit, and a verdict: better, worse or about the same.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from correlate.readers.run_folder import RunFolder

CHANGE_FRACTION, CHANGE_FLOOR_UE = 0.05, 1.0   # a gauge's RMS change that counts (common practice)
OVERALL = ("slope_origin", "r2", "rms_ue", "max_abs_ue")
COLUMNS = ["gauge", "class", "old_status", "new_status", "old_rms_ue", "new_rms_ue", "change_ue",
           "old_reference_difference_ue", "new_reference_difference_ue"]


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


__all__ = ["classify", "compare_gauges", "gauge_summary", "judge", "overall_change"]
