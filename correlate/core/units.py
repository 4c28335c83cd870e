"""Units: the length units a model may use and strain scale factors."""

from __future__ import annotations

LENGTH_UNITS: dict[str, float] = {"mm": 1e-3, "m": 1.0, "in": 0.0254}  # metres per unit
MICROSTRAIN = 1e6  # microstrain per m/m
# 100 % strain [m/m]: no strain gauge reads it (foil gauges are rated to a few percent and
# post-yield gauges to about 10-20 %, from memory; a constant-voltage quarter bridge cannot even
# indicate 2/GF = 1e6 µε at GF 2, Vishay TN-507), nor does a DIC of a structural test. A strain
# there, in the readings, the model or a DIC frame, is a value in other units or an instrument code.
FULL_STRAIN = 1.0
# measured/predicted ratios within these factors of 100 (or of 1/100): one side in percent
PERCENT_LIKE = (30.0, 300.0)


def percent_off(ratio: float) -> int:
    """+1 when ``ratio`` is about 100, -1 when about 1/100 (:data:`PERCENT_LIKE`), else 0: a
    strain in percent on one side of a comparison and in m/m or µε on the other."""
    r = abs(float(ratio))
    lo, hi = PERCENT_LIKE
    if lo <= r <= hi:
        return 1
    if r > 0 and lo <= 1.0 / r <= hi:
        return -1
    return 0
