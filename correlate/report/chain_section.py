"""The report's "Measurement chain" section: which channels were corrected, and by how much.

Stage: report. In: the run's ``corrections.csv`` table (:attr:`Correlation.corrections`). Out:
rows of text for ``chain_section.html``; nothing is computed beyond formatting.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from correlate.report.tables import DASH, num


def chain_rows(corrections: Any) -> list[dict[str, str]]:
    """One row per channel that any step of the chain changed (empty when none did).

    Parameters
    ----------
    corrections : DataFrame or None
        ``corrections.csv`` as the run made it, at the reference step.

    Returns
    -------
    list of dict
        ``gauge``, the factors and terms as text (a dash where not applied).
    """
    if corrections is None:
        return []
    rows = []
    for r in corrections.itertuples(index=False):
        height = getattr(r, "height_ue", np.nan)
        terms = (r.gf_ratio, r.lead_wire_factor, r.shunt_gain, r.nonlinearity_ue, r.thermal_ue,
                 r.gf_temperature_factor, height if height != 0 else np.nan)
        if all(not np.isfinite(v) for v in terms) and r.multiplier == 1.0:
            continue

        def shown(value: float, fmt: str) -> str:
            return DASH if not np.isfinite(value) else num(value, fmt)

        rows.append({
            "gauge": str(r.gauge), "gf_ratio": shown(r.gf_ratio, ".5f"),
            "lead": shown(r.lead_wire_factor, ".5f"), "shunt": shown(r.shunt_gain, ".5f"),
            "nonlinearity": shown(r.nonlinearity_ue, ".2f"),
            "thermal": shown(r.thermal_ue, ".2f"),
            "gf_t": shown(r.gf_temperature_factor, ".5f"),
            "temperature": shown(r.temperature_C, ".1f"),
            "raw": shown(r.raw_ue, ".1f"), "measured": shown(r.measured_ue, ".1f"),
            "change": shown(r.change_ue, "+.2f"), "height": shown(height, "+.2f")})
    return rows


def chain_notes(corrections: Any) -> list[dict[str, str]]:
    """Step 1 of the chain in words and the gauge lot, each distinct note once with the channels
    it applies to."""
    if corrections is None:
        return []
    groups: dict[str, list[str]] = {}
    for gauge, note, lot in zip(corrections["gauge"], corrections["note"], corrections["lot"],
                                strict=True):
        text = f"{note}; gauge lot {lot}" if lot else str(note)
        groups.setdefault(text, []).append(str(gauge))
    return [{"note": note, "gauges": ", ".join(gauges)} for note, gauges in groups.items()]


__all__ = ["chain_notes", "chain_rows"]
