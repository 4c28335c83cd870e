"""Units: the length units a model may use and strain scale factors."""

from __future__ import annotations

LENGTH_UNITS: dict[str, float] = {"mm": 1e-3, "m": 1.0, "in": 0.0254}  # metres per unit
MICROSTRAIN = 1e6  # microstrain per m/m
