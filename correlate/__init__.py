"""correlate: how well does a finite-element model predict the strain gauges on a tested part.

Heavy modules are imported lazily so that ``import correlate`` stays fast.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from correlate._version import __version__

__all__ = ["__version__", "predict_readings", "read_study", "run_study"]

if TYPE_CHECKING:  # pragma: no cover
    from correlate.api import predict_readings, run_study
    from correlate.readers.study import read_study


def __getattr__(name: str) -> Any:
    if name in ("predict_readings", "run_study"):
        from correlate import api

        return getattr(api, name)
    if name == "read_study":
        from correlate.readers.study import read_study

        return read_study
    raise AttributeError(f"module 'correlate' has no attribute {name!r}")
