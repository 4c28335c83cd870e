"""Thermo-mechanical cases: the mechanical strain that a self-compensated gauge reads.

Stage: model readings. In: the gauge operator, one case's operator rows [m/m] and the case's
temperature array (``[[case]] thermal = { temperature, alpha, reference_C }``). Out: the rows with
the free thermal strain alpha (T - reference) removed from the normal components, so the axial,
transverse and indicated readings are mechanical. A gauge self-compensated for its matched
material reads (nearly) the mechanical strain only: its own thermal output is removed on the
test side (:mod:`correlate.measurement.channels`).
"""

from __future__ import annotations

import warnings

import numpy as np
from numpy.typing import NDArray

from correlate.core.errors import CorrelateWarning, ModelError
from correlate.mechanics.gauge import indicated_strain
from correlate.model_readings.operator import GaugeOperator
from correlate.readers.model import ModelSource, find_array
from correlate.readers.records import Case

# Array names that hold a temperature field in common solver exports (common practice)
TEMPERATURE_NAMES = frozenset({"t", "temp", "temperature", "nt11", "ntemp", "nt", "temp_c"})


def temperature_at_points(op: GaugeOperator, source: ModelSource, case: Case,
                          fe_index: int | None) -> NDArray[np.float64]:
    """The case's temperature at the operator's sample points (p,). [degC]

    Raises
    ------
    ModelError
        The array is missing, not a scalar, or not finite at a gauge.
    """
    assert case.thermal is not None
    name = case.thermal.temperature
    location, values = find_array(source, name, fe_index, case=case.name)
    if values.shape[1] != 1:
        msg = (f"{source.path.name}: case '{case.name}' thermal temperature = '{name}' has "
               f"{values.shape[1]} components; expected a scalar temperature field")
        raise ModelError(msg)
    t = op.interpolation() @ values[:, 0] if location == "point" else values[op.cell, 0]
    if not np.isfinite(t).all():
        bad = sorted({op.gauges[g] for g in op.row_gauge[np.unique(
            op.weights[:, np.flatnonzero(~np.isfinite(t))].nonzero()[0])]})
        msg = (f"{source.path.name}: case '{case.name}' temperature '{name}' is not finite under "
               f"gauge(s) {', '.join(bad)}; check the array")
        raise ModelError(msg)
    return t


def mechanical_rows(op: GaugeOperator, rows: dict[str, NDArray[np.float64]],
                    temperature: NDArray[np.float64], alpha: float,
                    reference_C: float) -> dict[str, NDArray[np.float64]]:
    """Remove the free thermal strain from a case's operator rows.

    Parameters
    ----------
    op : GaugeOperator
    rows : dict
        ``axial``, ``transverse`` and ``indicated`` per operator row [m/m] (and optionally
        ``averaged_indicated``), from the total strain.
    temperature : ndarray (p,)
        Temperature at the sample points. [degC]
    alpha : float
        Coefficient of thermal expansion of the gauged material. [1/degC]
    reference_C : float
        The model's stress-free temperature. [degC]

    Returns
    -------
    dict
        The same keys, mechanical: ``e_mech = e_total - alpha (T - reference) I``.

    Notes
    -----
    The free thermal strain is isotropic, so along any unit direction d it is
    ``d . (alpha dT I) . d = alpha dT``: the axial and transverse strains lose the same
    row-averaged term and the indicated reading is recomputed with the transverse-sensitivity
    relation (:func:`correlate.mechanics.gauge.indicated_strain`).
    """
    free = op.weights @ (alpha * (np.asarray(temperature, dtype=float) - reference_C))
    kt, nu0 = op.kt[op.row_gauge], op.nu0[op.row_gauge]
    out = dict(rows)
    out["axial"] = rows["axial"] - free
    out["transverse"] = rows["transverse"] - free
    out["indicated"] = indicated_strain(out["axial"], out["transverse"], kt, nu0)
    if "averaged_indicated" in rows:  # the displacement mesh check, on the same footing
        out["averaged_indicated"] = rows["averaged_indicated"] - indicated_strain(free, free, kt,
                                                                                 nu0)
    return out


def warn_unused_temperature(cases: tuple[Case, ...], sources: dict, model_file: object) -> None:
    """Warn about a case without ``thermal`` whose file carries a temperature field."""
    for case in cases:
        if case.thermal is not None:
            continue
        src = sources.get(case.file or model_file)
        if src is None or src.times:
            continue  # a time series' arrays are read per step; not looked into here
        names = [n for n in src.array_names()
                 if n.strip().casefold() in TEMPERATURE_NAMES]
        if names:
            warnings.warn(f"case '{case.name}': {src.path.name} carries a temperature field "
                          f"({', '.join(names)}) but the case gives no thermal = {{ temperature, "
                          "alpha, reference_C }; its total strain includes the thermal "
                          "expansion, which a self-compensated gauge does not read",
                          CorrelateWarning, stacklevel=3)


__all__ = ["TEMPERATURE_NAMES", "mechanical_rows", "temperature_at_points",
           "warn_unused_temperature"]
