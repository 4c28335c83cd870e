"""Column names of every table the tool writes, and the caution text, defined once.

These names are an interface: other tools read the CSV and JSON outputs by them.
"""

from __future__ import annotations

# gauge map (input)
GAUGE = "gauge"
ROSETTE = "rosette"

# model_readings.csv
MODEL_READINGS_COLUMNS = (
    "gauge", "case", "predicted_ue", "axial_ue", "transverse_ue", "point_ue",
    "band_low_ue", "band_high_ue", "snap_distance", "element", "cell_type", "field_location",
    "sens_position_ue_per_unit", "sens_angle_ue_per_deg", "mesh_check_ue", "rotation_rad",
)

# gauges.csv (correlation)
GAUGES_COLUMNS = (
    "gauge", "step", "sequence", "predicted_ue", "measured_ue", "difference_ue", "ratio", "relative",
    "band_low_ue", "band_high_ue", "in_band", "status", "basis", "unconservative", "flag",
)

# rosettes.csv
ROSETTES_COLUMNS = (
    "rosette", "step", "source", "ex_ue", "ey_ue", "gxy_ue", "e1_ue", "e2_ue", "angle_deg",
    "shear_max_ue", "s1", "s2", "von_mises", "residual_ue", "note",
)

# the caution every output carries (terminal, summary.json, report, compare page)
CAUTION = ("These results support, but do not replace, engineering judgement, the applicable codes "
           "and licensed practice.")
