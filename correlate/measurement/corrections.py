"""Channel corrections on the test side: the gauge-factor ratio and the polarity as wired.

Stage: measurement. In: the gauge map. Out: one multiplier per channel that turns the readings as
the acquisition indicated them into the strain the grid indicated. A channel whose acquisition
gauge factor (``daq_gauge_factor``) differs from the grid's own (``gauge_factor``) read
daq/gauge times the grid's strain (common practice: indicated strain scales inversely with the gauge
factor set); ``polarity`` (+1 or -1) records a channel wired reversed.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import NDArray


def channel_scale(gauges: pd.DataFrame) -> NDArray[np.float64]:
    """Per-channel multiplier (g,): ``daq_gauge_factor / gauge_factor`` where both are given,
    times the polarity (1 where not given)."""
    gf = gauges["gauge_factor"].to_numpy(dtype=float)
    daq = gauges["daq_gauge_factor"].to_numpy(dtype=float)
    scale = np.where(np.isfinite(gf) & np.isfinite(daq), daq / gf, 1.0)
    return scale * gauges["polarity"].fillna(1.0).to_numpy(dtype=float)


__all__ = ["channel_scale"]
