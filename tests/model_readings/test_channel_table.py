"""The compared channels' gauge table (model_readings.channels.channel_gauges).

A bridge is one channel (common practice: a half or full bridge is wired to one amplifier input,
read at one gauge factor and polarity), so values a channel has once must agree on its arms, and
the quarter-bridge non-linearity 2 e / (2 - GF e) (Vishay TN-507) is not a bridge's.
"""

from __future__ import annotations

import math

import pytest
from builders import gauge_frame

from correlate.core.errors import GaugeError
from correlate.model_readings.channels import channel_gauges
from correlate.readers.bridge_map import bridges_of


def _map(**arm2):
    rows = [dict(gauge="A", x=1, y=1, z=2, dir_x=1, dir_y=0, dir_z=0, bridge="HB", arm=1,
                 gauge_factor=2.1, daq_gauge_factor=2.0),
            dict(gauge="B", x=1, y=1, z=0, dir_x=1, dir_y=0, dir_z=0, bridge="HB", arm=2,
                 gauge_factor=2.1, daq_gauge_factor=2.0),
            dict(gauge="Q", x=2, y=1, z=2, dir_x=1, dir_y=0, dir_z=0, bridge="", arm="",
                 gauge_factor=2.1, daq_gauge_factor=2.0)]
    rows[1].update(arm2)
    gauges = gauge_frame(rows)
    return gauges, bridges_of(gauges, {"HB": ("CH3", 2.0, 0.99)})


def test_channels_are_the_single_grids_then_each_bridge_once():
    gauges, bridges = _map()
    table = channel_gauges(gauges, bridges, "quarter-bridge")
    assert list(table["gauge"]) == ["Q", "HB"] and table["channel"].iloc[1] == "CH3"
    assert list(table["arms"].fillna("")) == ["", "1:A 2:B"]
    # the study-wide non-linearity stays on the quarter bridge and is switched off on the bridge
    assert list(table["nonlinearity"]) == ["", "none"]
    assert table["gauge_factor"].iloc[1] == 2.1 and table["shunt_gain"].iloc[1] == 0.99
    assert math.isnan(table["shunt_gain"].iloc[0])
    # without a study-wide setting no nonlinearity column is added (nothing to switch off)
    assert "nonlinearity" not in channel_gauges(gauges, bridges, "")


def test_arms_that_disagree_on_the_gauge_factor_are_refused_in_one_line():
    gauges, bridges = _map(gauge_factor=2.05)
    with pytest.raises(GaugeError) as exc:
        channel_gauges(gauges, bridges)
    (line,) = exc.value.problems
    assert line.startswith("bridge 'HB': its arms give gauge_factor 'A' 2.1, 'B' 2.05")
