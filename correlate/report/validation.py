"""The report's validation-uncertainty section: its figure, its table and its sentences.

Stage: report. In: a :class:`~correlate.comparison.correlation.Correlation` whose study has an
``[uncertainty]`` table (its ``validation`` budget) and the output folder. Out: the context of the
``validation.html`` template block (None without a budget) and ``validation.png``: the comparison
error E = S - D of every gauge at the reference step with its E -/+ k u_val bar against the
criteria band -/+ allowed. It reads the budget and draws it; it computes no physics.
"""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

import correlate.report.figures as figures
from correlate.comparison.correlation import Correlation
from correlate.report.tables import num

STATE_COLOURS = {"model error": "#b2182b", "uncertainty dominated": "#c25a00",
                 "consistent": "#1f4e99"}
MEANING = {
    "model error": ("|E| is larger than k u_val: the difference between model and test is larger "
                    "than every listed uncertainty together, so a model error of at least "
                    "|E| - k u_val (with the sign of E) is resolved"),
    "uncertainty dominated": ("k u_val is larger than the criteria's allowed difference: at this "
                              "level of uncertainty the comparison cannot decide the criterion; "
                              "the dominant term says what would sharpen it (measurement terms: "
                              "more or better test; numerical: a finer mesh; input terms: better "
                              "known inputs)"),
    "consistent": ("no model error is resolved at this level of uncertainty, and the "
                   "uncertainty is small enough to decide the criterion"),
}


@figures._quiet
def plot_validation(table: pd.DataFrame, path: Path, *, k: float, ref_label: str) -> Path:
    """E with its -/+ k u_val bar per gauge against the criteria band -/+ allowed.

    Parameters
    ----------
    table : DataFrame
        ``uncertainty.csv`` rows of the evaluated gauges (``gauge``, ``comparison_error_ue``,
        ``expanded_ue``, ``allowed_ue``, ``state``).
    path : Path
        PNG file to write.
    k : float
        Coverage factor, for the legend.
    """
    n = len(table)
    fig = figures._figure(max(6.5, min(16.0, 2.0 + 0.42 * n)), 5.4)
    ax = fig.add_subplot(1, 1, 1)
    x = np.arange(n)
    allowed = table["allowed_ue"].to_numpy(dtype=float)
    ax.bar(x, 2 * allowed, bottom=-allowed, width=0.8, color="#d9d9d9", alpha=0.6, lw=0,
           label="criteria band: -/+ allowed difference", zorder=0)
    ax.axhline(0.0, color=figures.PREDICTED, lw=0.8, zorder=1)
    E = table["comparison_error_ue"].to_numpy(dtype=float)
    bar = table["expanded_ue"].to_numpy(dtype=float)
    for state, colour in STATE_COLOURS.items():
        sel = (table["state"] == state).to_numpy()
        if sel.any():
            ax.errorbar(x[sel], E[sel], yerr=bar[sel], fmt="o", color=colour, ms=5, capsize=3,
                        lw=1.3, label=f"{state}: E -/+ {k:g} u_val", zorder=3)
    ax.set_xticks(x, [figures.plain(figures.short(g, 12)) for g in table["gauge"]],
                  rotation=60 if n > 8 else 0, ha="right" if n > 8 else "center", fontsize=8)
    ax.set_xlim(-0.7, n - 0.3)
    ax.set_ylabel("comparison error E = predicted - measured [ue]")
    ax.set_title(figures.plain(f"Validation comparison at {ref_label}"), fontsize=10)
    ax.grid(axis="y", color="#e6e6e6", lw=0.6, zorder=0)
    ax.legend(loc="best", fontsize=8, frameon=False)
    fig.tight_layout()
    return figures._save(fig, path)


def _ratio(ratio: dict[str, Any]) -> dict[str, Any]:
    parts = ", ".join(f"{k} {v:.4f}" for k, v in ratio["systematic_terms"].items())
    return {"ratio": num(ratio["ratio"], ".4f"), "stat": num(ratio["u_statistical"], ".4f"),
            "sys": num(ratio["u_systematic"], ".4f"), "parts": parts or "none",
            "combined": num(ratio["u_combined"], ".4f"), "low": num(ratio["lower"], ".3f"),
            "high": num(ratio["upper"], ".3f"), "n": ratio["n"]}


def _sentences(table: pd.DataFrame) -> list[dict[str, Any]]:
    out = []
    for state, meaning in MEANING.items():
        gauges = table.loc[table["state"] == state, "gauge"].tolist()
        if gauges:
            out.append({"state": state, "gauges": gauges, "meaning": meaning})
    return out


def _rows(table: pd.DataFrame) -> list[dict[str, str]]:
    share_cols = [c for c in table.columns if c.startswith("share_")]
    rows = []
    for _, r in table.sort_values("u_val_ue", ascending=False, kind="stable").iterrows():
        share = max((float(r[c]) for c in share_cols), default=np.nan)
        numerical = "" if "gci_ue" not in table else (
            f"p {num(r['order'], '.2f')}, Fs {num(r['factor'], 'g')}, GCI "
            f"{num(r['gci_ue'], '.1f')}" + (f" ({r['convergence']})" if r["convergence"] else ""))
        rows.append({"gauge": str(r["gauge"]), "E": num(r["comparison_error_ue"]),
                     "u_d": num(r["u_d_ue"]), "u_input": num(r["u_input_ue"]),
                     "u_num": num(r["u_num_ue"]), "u_val": num(r["u_val_ue"]),
                     "expanded": num(r["expanded_ue"]), "allowed": num(r["allowed_ue"]),
                     "state": str(r["state"]), "css": str(r["state"]).replace(" ", "-"),
                     "model_error": num(r["model_error_ue"]),
                     "dominant": f"{r['dominant']} ({share:.0%} of u_val²)",
                     "numerical": numerical})
    return rows


def validation_context(corr: Correlation, folder: Path, ref_label: str,
                       as_uri: Callable[[Path], dict[str, Any]]) -> dict[str, Any] | None:
    """The template's ``validation`` block, or None when the study has no ``[uncertainty]``.

    ``as_uri`` turns the figure's PNG into the template's figure record (the report's own
    helper, so the figure is inlined like every other).
    """
    budget = corr.validation
    if budget is None:
        return None
    s = budget.summary
    table = budget.table
    evaluated = table[table["state"] != "not evaluated"]
    result = budget.result
    picture = plot_validation(evaluated, folder / "validation.png", k=result.k,
                              ref_label=ref_label)
    ratio = s["ratio"]
    return {
        "figure": as_uri(picture),
        "k": f"{result.k:g}",
        "counts": s["states"],
        "not_evaluated": s["not_evaluated"],
        "sentences": _sentences(evaluated),
        "rows": _rows(evaluated),
        "numerical": "gci_ue" in table,
        "ratio": _ratio(ratio) if ratio is not None else None,
    }


__all__ = ["plot_validation", "validation_context"]
