"""The precision every written table and JSON file keeps (one place for the CSV, Parquet and JSON).

Stage: core (output). Microstrain to 0.001, lengths to 1e-6 of the model's unit, other floats to
six significant digits; round-off far below a column's scale is written as 0.
"""

from __future__ import annotations

FLOAT_DIGITS = 6          # significant decimals for ratios and other dimensionless numbers
UE_DECIMALS = 3           # microstrain to 0.001
LENGTH_DECIMALS = 6       # lengths (snap distances, positions) to 1e-6 of the model's unit
LENGTH_COLUMNS = frozenset({"snap_distance", "x", "y", "z"})
NOISE = 1e-12   # a value this small beside its column's largest is round-off: written as 0
CSV_FLOAT_FORMAT = "%.10g"   # what the rounded floats are printed with
