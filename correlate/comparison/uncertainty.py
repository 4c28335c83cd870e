"""Comparison stage: the validation uncertainty budget of every gauge and load step.

Inputs are arrays in microstrain that broadcast over gauges x steps: the simulation ``S``, the
data ``D`` (or the comparison error ``E = S - D``), the grid-study predictions and the
uncertainty inputs of the study. Outputs are small frozen records of arrays: the measurement
budget and ``u_D``, the model-input budget and ``u_input``, the grid convergence index and
``u_num``, the validation state of each comparison, the overall measured/predicted ratio with
its statistical and systematic parts, and uncertainties propagated through a data reduction
(such as a rosette's principal strains).

Standard uncertainties are combined as in the GUM (JCGM 100:2008): independent contributions
add in quadrature, fully correlated ones add linearly. The comparison follows ASME V&V 20-2009:
``E = S - D`` and ``u_val = sqrt(u_num**2 + u_input**2 + u_D**2)`` (its section 1; section
numbers of V&V 20 quoted here are from memory). The grid study (`convergence`) and the
propagation through a reduction (`propagation`) live in sibling modules and are re-exported
here, so the whole budget is one import.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.comparison._checks import (
    FloatArray,
    common_shape,
    finite,
    first_bad,
    nonnegative,
    rss,
)
from correlate.comparison.convergence import GridConvergence, grid_convergence
from correlate.comparison.propagation import Propagation, propagate_function, propagate_linear
from correlate.core.errors import GaugeError, ModelError, StudyError

__all__ = [
    "Budget",
    "GridConvergence",
    "ModelInput",
    "Propagation",
    "RatioInterval",
    "Validation",
    "grid_convergence",
    "input_uncertainty",
    "measurement_uncertainty",
    "propagate_function",
    "propagate_linear",
    "ratio_interval",
    "transverse_derivative",
    "validation",
]


# ---------------------------------------------------------------------------------------------
# Records


@dataclass(frozen=True)
class Budget:
    """Standard uncertainty terms and their root-sum-square.

    Attributes
    ----------
    terms : dict of str to ndarray
        Each contribution as a standard uncertainty, in budget order. [µε]
    combined : ndarray
        ``sqrt(sum(term**2))``, the combined standard uncertainty (GUM eq. 10). [µε]
    """

    terms: dict[str, FloatArray]
    combined: FloatArray


@dataclass(frozen=True)
class ModelInput:
    """How one uncertain model input moves the prediction.

    Give either ``exponent`` (the prediction scales as input**exponent) or ``variant`` and
    ``step`` (a prediction with the input changed by ``step``, in the same measure as
    ``relative``: both relative, or both in the input's unit).

    Attributes
    ----------
    relative : float
        Standard uncertainty of the input, relative to its value (or in its unit, see above).
    exponent : float or None
        Power of the input in the prediction, e.g. -1 for Young's modulus under a given load.
    variant : array_like or None
        Prediction with the input changed by ``step``; broadcasts with ``S``. [µε]
    step : float or None
        The change of the input in the variant run.
    """

    relative: float
    exponent: float | None = None
    variant: ArrayLike | None = None
    step: float | None = None


@dataclass(frozen=True)
class Validation:
    """Validation comparison per element (ASME V&V 20 style).

    Attributes
    ----------
    error : ndarray
        Comparison error ``E = S - D``. [µε]
    u_val : ndarray
        Validation standard uncertainty. [µε]
    k : float
        Coverage factor of the interval.
    lower, upper : ndarray
        ``E -/+ k u_val``. [µε]
    state : ndarray of str
        "model error", "uncertainty dominated" or "consistent".
    model_error : ndarray
        Resolved model error ``max(|E| - k u_val, 0)``. [µε]
    sign : ndarray
        Sign of E where a model error is resolved (+1: the model reads high), else 0.
    dominant : ndarray of str
        Name of the largest contribution to ``u_val**2`` ("none" where u_val is 0).
    """

    error: FloatArray
    u_val: FloatArray
    k: float
    lower: FloatArray
    upper: FloatArray
    state: NDArray[np.str_]
    model_error: FloatArray
    sign: FloatArray
    dominant: NDArray[np.str_]


@dataclass(frozen=True)
class RatioInterval:
    """Overall measured/predicted ratio with its two uncertainty parts side by side.

    Attributes
    ----------
    ratio : float
        Through-origin least-squares slope of measured on predicted.
    n : int
        Number of pairs used.
    u_statistical : float
        Standard error of the slope from the regression (scatter between gauges).
    u_systematic : float
        ``ratio * sqrt(sum(rel_i**2))`` from the fully correlated relative terms.
    systematic_terms : dict of str to float
        Each systematic term as a standard uncertainty of the ratio.
    u_combined : float
        ``sqrt(u_statistical**2 + u_systematic**2)``.
    k : float
        Coverage factor.
    lower, upper : float
        ``ratio -/+ k u_combined``.
    """

    ratio: float
    n: int
    u_statistical: float
    u_systematic: float
    systematic_terms: dict[str, float]
    u_combined: float
    k: float
    lower: float
    upper: float


# ---------------------------------------------------------------------------------------------
# Measurement and model-input budgets


def transverse_derivative(
    e_a: ArrayLike, e_t: ArrayLike, kt: ArrayLike, nu0: ArrayLike
) -> FloatArray:
    """Return the derivative of the indicated strain with respect to Kt.

    Parameters
    ----------
    e_a, e_t : array_like
        Strain along and across the grid. [µε] (any strain unit; the result has the same)
    kt : array_like
        Transverse sensitivity coefficient of the gauge. [-]
    nu0 : array_like
        Poisson's ratio of the manufacturer's calibration beam. [-]

    Returns
    -------
    ndarray
        ``d e_ind / d Kt`` in the unit of ``e_a`` per unit Kt.

    Raises
    ------
    GaugeError
        Where ``1 - nu0 Kt <= 0`` (the relation has a pole there).

    Notes
    -----
    Indicated strain (Vishay Micro-Measurements Tech Note TN-509):
    ``e_ind = (e_a + Kt e_t) / (1 - nu0 Kt)``. Quotient rule:
    ``d/dKt = [e_t (1 - nu0 Kt) + nu0 (e_a + Kt e_t)] / (1 - nu0 Kt)**2``; the ``Kt e_t nu0``
    terms cancel, leaving ``(e_t + nu0 e_a) / (1 - nu0 Kt)**2``.

    References
    ----------
    Vishay Precision Group, Micro-Measurements Tech Note TN-509, "Transverse Sensitivity Errors".

    Examples
    --------
    >>> float(transverse_derivative(1000.0, -300.0, 0.0, 0.285))
    -15.0
    """
    e_a, e_t = np.asarray(e_a, dtype=float), np.asarray(e_t, dtype=float)
    kt, nu0 = np.asarray(kt, dtype=float), np.asarray(nu0, dtype=float)
    denominator = 1.0 - nu0 * kt
    bad = ~(denominator > 0)
    if bad.any():
        msg = (
            f"transverse sensitivity: 1 - nu0*Kt must be > 0, found {denominator[bad].flat[0]!r} "
            f"at index {first_bad(bad)}; check the gauge's kt and nu0"
        )
        raise GaugeError(msg)
    return (e_t + nu0 * e_a) / denominator**2


def measurement_uncertainty(
    measured: ArrayLike,
    e_a: ArrayLike,
    e_t: ArrayLike,
    kt: ArrayLike,
    nu0: ArrayLike,
    *,
    gauge_factor: ArrayLike,
    transverse: ArrayLike,
    daq_ue: ArrayLike,
    daq_relative: ArrayLike,
    repeat_sd: ArrayLike | None = None,
    repeat_n: ArrayLike | None = None,
    band_low: ArrayLike | None = None,
    band_high: ArrayLike | None = None,
) -> Budget:
    """Build the measurement budget ``u_D`` of every reading.

    Parameters
    ----------
    measured : array_like, shape (g, s) or broadcastable
        Reading. [µε]
    e_a, e_t : array_like
        Strain along and across the grid used for the transverse term. [µε]
    kt, nu0 : array_like
        Transverse sensitivity and calibration Poisson's ratio (per gauge: shape (g, 1)). [-]
    gauge_factor : array_like
        Relative standard uncertainty of the gauge factor. [-]
    transverse : array_like
        Standard uncertainty of Kt. [-]
    daq_ue : array_like
        Standard uncertainty of the acquisition, absolute. [µε]
    daq_relative : array_like
        Standard uncertainty of the acquisition, relative to the reading. [-]
    repeat_sd, repeat_n : array_like, optional
        Standard deviation of repeated loadings [µε] and their number (>= 2); both or neither.
    band_low, band_high : array_like, optional
        Range of strain over the placement tolerance zone [µε]; both or neither.

    Returns
    -------
    Budget
        Terms "gauge_factor", "transverse", "daq", "daq_relative", then "repeatability" and
        "placement" when given; ``combined`` is u_D.

    Raises
    ------
    StudyError
        A negative or non-finite uncertainty, an unpaired option, ``band_high < band_low``.
    GaugeError
        ``1 - nu0 Kt <= 0``.

    Notes
    -----
    Each term is a standard uncertainty with unit sensitivity on the reading and the terms are
    independent, so ``u_D = sqrt(sum u_i**2)`` (JCGM 100:2008 eq. 10). Type A term from n
    repeats: ``s / sqrt(n)`` (JCGM 100:2008 4.2.3). Placement: a rectangular distribution of
    half-width ``a = (high - low) / 2`` has ``u = a / sqrt(3)`` (JCGM 100:2008 4.3.7).
    Transverse: ``|d e_ind / d Kt| u(Kt)`` (TN-509 relation, see `transverse_derivative`).
    """
    measured = finite("measurement: reading", measured, StudyError, "microstrain")
    e_a = finite("measurement: e_a", e_a, StudyError, "microstrain")
    e_t = finite("measurement: e_t", e_t, StudyError, "microstrain")
    gf, tr = nonnegative("gauge_factor", gauge_factor), nonnegative("transverse", transverse)
    daq, rel = nonnegative("daq_ue", daq_ue), nonnegative("daq_relative", daq_relative)
    slope = transverse_derivative(e_a, e_t, kt, nu0)
    terms: dict[str, FloatArray] = {
        "gauge_factor": gf * np.abs(measured),
        "transverse": np.abs(slope) * tr,
        "daq": daq,
        "daq_relative": rel * np.abs(measured),
    }
    if (repeat_sd is None) != (repeat_n is None):
        raise StudyError("measurement: repeat_sd and repeat_n go together; give both or neither")
    if repeat_sd is not None and repeat_n is not None:
        sd = nonnegative("repeat_sd", repeat_sd)
        n = finite("repeat_n", repeat_n, StudyError, "count")
        bad = (n < 2) | (n != np.round(n))
        if bad.any():
            msg = (
                f"repeat_n: expected whole numbers >= 2, found {n[bad].flat[0]!r} at index "
                f"{first_bad(bad)}; a single loading has no Type A standard deviation"
            )
            raise StudyError(msg)
        terms["repeatability"] = sd / np.sqrt(n)
    if (band_low is None) != (band_high is None):
        raise StudyError("measurement: band_low and band_high go together; give both or neither")
    if band_low is not None and band_high is not None:
        low = finite("band_low", band_low, StudyError, "microstrain")
        high = finite("band_high", band_high, StudyError, "microstrain")
        bad = high < low
        if bad.any():
            msg = f"placement band: band_high < band_low at index {first_bad(bad)}; swap the bounds"
            raise StudyError(msg)
        terms["placement"] = (high - low) / (2.0 * np.sqrt(3.0))
    shape = common_shape("measurement_uncertainty", measured=measured, **terms)
    terms = {k: np.broadcast_to(v, shape).copy() for k, v in terms.items()}
    return Budget(terms=terms, combined=rss(terms))


def _input_term(name: str, item: ModelInput, S: FloatArray) -> FloatArray:
    relative = nonnegative(f"input '{name}': relative", item.relative)
    if item.exponent is not None and item.variant is None and item.step is None:
        return abs(float(item.exponent)) * relative * np.abs(S)
    if item.exponent is None and item.variant is not None and item.step is not None:
        step = float(item.step)
        if step == 0 or not np.isfinite(step):
            raise StudyError(f"input '{name}': step must be finite and non-zero, found {step!r}")
        variant = finite(f"input '{name}': variant", item.variant, ModelError, "microstrain")
        common_shape(f"input '{name}'", S=S, variant=variant)
        return np.abs(variant - S) / abs(step) * relative
    msg = (
        f"input '{name}': give either exponent, or variant and step; found "
        f"exponent={item.exponent!r}, variant given={item.variant is not None}, step={item.step!r}"
    )
    raise StudyError(msg)


def input_uncertainty(
    S: ArrayLike, inputs: Mapping[str, ModelInput | Mapping], *, load: float | None = None
) -> Budget:
    """Build the model-input budget ``u_input`` of every prediction.

    Parameters
    ----------
    S : array_like, shape (g, s) or broadcastable
        Prediction. [µε]
    inputs : mapping of str to ModelInput (or to a mapping of its fields)
        Uncertain inputs by name.
    load : float, optional
        Relative standard uncertainty of the applied load (prediction linear in load). [-]

    Returns
    -------
    Budget
        One term per input, in the given order, then "load"; ``combined`` is u_input.

    Raises
    ------
    StudyError
        An input with both or neither of ``exponent`` and ``variant``/``step``, a zero step,
        a negative uncertainty, or an input named "load" when ``load`` is given.

    Notes
    -----
    Sensitivity coefficients (JCGM 100:2008 5.1.3): with ``S ~ x**a`` the relative sensitivity is
    ``a``, so ``u = |a| u_rel(x) |S|``; from a variant run, the one-sided difference
    ``|S_var - S| / |step|`` times ``u(x)`` (JCGM 100:2008 5.1.4 allows numerical coefficients).
    Terms are independent and add in quadrature (JCGM 100:2008 eq. 10).
    """
    S = finite("input_uncertainty: S", S, ModelError, "microstrain")
    terms: dict[str, FloatArray] = {}
    for name, spec in inputs.items():
        try:
            item = spec if isinstance(spec, ModelInput) else ModelInput(**spec)
        except TypeError as exc:
            msg = f"input '{name}': {exc}; use the keys relative, exponent, variant, step"
            raise StudyError(msg) from None
        terms[name] = _input_term(name, item, S)
    if load is not None:
        if "load" in terms:
            raise StudyError(
                "input_uncertainty: an input is named 'load' and load= is given; rename it"
            )
        terms["load"] = nonnegative("load", load) * np.abs(S)
    shape = common_shape("input_uncertainty", S=S, **terms)
    terms = {k: np.broadcast_to(v, shape).copy() for k, v in terms.items()}
    combined = rss(terms) if terms else np.zeros(shape)
    return Budget(terms=terms, combined=combined)


# ---------------------------------------------------------------------------------------------
# The comparison


def _group_terms(group: str, value: ArrayLike | Mapping | Budget) -> dict[str, FloatArray]:
    if isinstance(value, Budget):
        value = value.terms
    if isinstance(value, Mapping):
        return {f"{group}.{name}": nonnegative(f"{group}.{name}", v) for name, v in value.items()}
    return {group: nonnegative(f"u of {group}", value)}


def validation(
    E: ArrayLike,
    u_num: ArrayLike | Mapping | Budget,
    u_input: ArrayLike | Mapping | Budget,
    u_D: ArrayLike | Mapping | Budget,
    *,
    k: float,
    allowed: ArrayLike,
) -> Validation:
    """Compare the model with the data for every gauge and step.

    Parameters
    ----------
    E : array_like
        Comparison error ``S - D``. [µε]
    u_num, u_input, u_D : array_like, Budget, or mapping of str to array_like
        Numerical, model-input and measurement standard uncertainty; a Budget or mapping is
        combined in quadrature and lets the dominant term be named individually. [µε]
    k : float
        Coverage factor (> 0).
    allowed : array_like
        Allowed magnitude of model error, the acceptance criterion (>= 0). [µε]

    Returns
    -------
    Validation

    Raises
    ------
    StudyError
        Non-finite E, a negative uncertainty, ``k <= 0``, ``allowed < 0``, shapes that do not
        broadcast.

    Notes
    -----
    ``u_val = sqrt(u_num**2 + u_input**2 + u_D**2)`` and the model error lies in
    ``E -/+ k u_val`` (ASME V&V 20-2009, section 1). States, checked in this order:
    ``|E| > k u_val``: "model error" (resolved part ``|E| - k u_val``); ``k u_val > allowed``:
    "uncertainty dominated" (the comparison cannot decide the criterion); else "consistent".
    Equality falls to the later state.
    """
    E = finite("validation: E", E, StudyError, "microstrain")
    if not (np.isfinite(k) and k > 0):
        raise StudyError(f"validation: coverage factor k must be > 0, found {k!r}")
    allowed = nonnegative("validation: allowed", allowed)
    terms = {
        **_group_terms("numerical", u_num),
        **_group_terms("input", u_input),
        **_group_terms("measurement", u_D),
    }
    if not terms:
        raise StudyError("validation: no uncertainty term given; pass u_num, u_input and u_D")
    shape = common_shape("validation", E=E, allowed=allowed, **terms)
    variances = np.stack([np.broadcast_to(np.square(t), shape) for t in terms.values()])
    u_val = np.sqrt(variances.sum(axis=0))
    E, allowed, expanded = np.broadcast_to(E, shape), np.broadcast_to(allowed, shape), k * u_val
    resolved = np.abs(E) > expanded
    state = np.where(
        resolved, "model error", np.where(expanded > allowed, "uncertainty dominated", "consistent")
    )
    names = np.array(list(terms))
    dominant = np.where(u_val > 0, names[np.argmax(variances, axis=0)], "none")
    return Validation(
        error=E.copy(),
        u_val=u_val,
        k=float(k),
        lower=E - expanded,
        upper=E + expanded,
        state=state,
        model_error=np.maximum(np.abs(E) - expanded, 0.0),
        sign=np.where(resolved, np.sign(E), 0.0),
        dominant=dominant,
    )


def ratio_interval(
    measured: ArrayLike,
    predicted: ArrayLike,
    *,
    statistical_se: float,
    systematic: Mapping[str, float],
    k: float = 2.0,
) -> RatioInterval:
    """Return the overall measured/predicted ratio with statistical and systematic parts.

    Parameters
    ----------
    measured, predicted : array_like
        Paired readings and predictions, any shape (flattened). [µε]
    statistical_se : float
        Standard error of the slope from the regression (independent scatter).
    systematic : mapping of str to float
        Relative standard uncertainties acting on every gauge at once: gauge-factor lot,
        load cell, model inputs. [-]
    k : float
        Coverage factor of the combined interval.

    Returns
    -------
    RatioInterval

    Raises
    ------
    StudyError
        Non-finite or unpaired data, a negative uncertainty, ``k <= 0``.
    ModelError
        Every prediction is zero.

    Notes
    -----
    Slope through the origin: ``ratio = sum(m p) / sum(p p)``. A common relative error
    ``delta`` scales every reading, hence the slope, by ``1 + delta``: it is fully correlated
    between gauges (JCGM 100:2008 5.2.2 with r = 1) and so does not shrink with their number:
    ``u_sys = ratio sqrt(sum rel_i**2)``. ``u = sqrt(se**2 + u_sys**2)``; interval
    ``ratio -/+ k u``.
    """
    m = finite("ratio: measured", measured, StudyError, "microstrain").ravel()
    p = finite("ratio: predicted", predicted, StudyError, "microstrain").ravel()
    if m.shape != p.shape:
        raise StudyError(f"ratio: {m.size} readings but {p.size} predictions; pair them one to one")
    if not (np.isfinite(k) and k > 0):
        raise StudyError(f"ratio: coverage factor k must be > 0, found {k!r}")
    pp = float(p @ p)
    if pp == 0:
        raise ModelError(
            "ratio: every prediction is zero; the ratio is undefined, check the load case"
        )
    ratio = float(m @ p) / pp
    se = float(nonnegative("ratio: statistical_se", statistical_se))
    parts = {
        name: abs(ratio) * float(nonnegative(f"ratio: {name}", rel))
        for name, rel in systematic.items()
    }
    u_sys = float(np.sqrt(sum(v * v for v in parts.values())))
    u = float(np.hypot(se, u_sys))
    return RatioInterval(
        ratio=ratio,
        n=int(m.size),
        u_statistical=se,
        u_systematic=u_sys,
        systematic_terms=parts,
        u_combined=u,
        k=float(k),
        lower=ratio - k * u,
        upper=ratio + k * u,
    )
