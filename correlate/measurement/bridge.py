"""Wheatstone-bridge relations of strain-gauge channels: arms, circuit, leads, non-linearity.

Stage: measurement. Inputs are arm strains [microstrain], arm resistances [ohm] and the gauge
map's bridge, arm and wiring columns; outputs are channel indications [microstrain], output
ratios [V/V], lead-wire factors and validated bridge layouts. :mod:`correlate.measurement.chain`
applies them to readings.

Arm numbering: ``Vo/Vex = R1/(R1+R2) - R4/(R3+R4)``. R1 and R2 form one half of the bridge,
R4 and R3 the other; R1 and R3 are opposite arms. A rise of R1 or R3 raises the output and a rise
of R2 or R4 lowers it: arms 1 and 3 add, arms 2 and 4 subtract (the numbering of Hoffmann 1989
and of Vishay TN-507).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import GaugeError
from correlate.measurement._validate import names_for
from correlate.mechanics.gauge import BRIDGE_ARM_SIGNS
from correlate.readers.bridge_map import validate_bridges

__all__ = [
    "bridge_output",
    "bridge_ratio_exact",
    "lead_wire_factor",
    "quarter_bridge_indicated_strain",
    "quarter_bridge_true_strain",
    "validate_bridges",
]

Float = NDArray[np.float64]

_ARM_SIGNS = BRIDGE_ARM_SIGNS
_LEADS_IN_GAUGE_ARM = {"2-wire": 2.0, "3-wire": 1.0}
_UE = 1e-6  # m/m per microstrain


def bridge_output(
    arms_ue: ArrayLike, signs: Sequence[float] = _ARM_SIGNS, factor: ArrayLike = 1.0
) -> Float:
    """Compute a Wheatstone-bridge channel's indicated strain from its arms' strains.

    Parameters
    ----------
    arms_ue : array_like, shape (..., n), n <= 4
        Strain each active arm's gauge indicates, arms 1..n in order. NaN, or an arm beyond
        ``n``, is a completion resistor and contributes nothing. [microstrain; any strain unit
        works, the relation is linear]
    signs : sequence of 4 floats
        +1 or -1 per arm; the default is the standard bridge (1 and 3 add, 2 and 4 subtract).
    factor : array_like, broadcastable to ``arms_ue.shape[:-1]``
        Bridge factor the sum is divided by (1 gives the channel's indication; 2 for a
        bending half bridge, 4 for a bending full bridge, 2(1 + nu) for a Poisson full bridge
        give the surface strain). [-]

    Returns
    -------
    ndarray, shape (...)
        ``(e1 - e2 + e3 - e4) / factor``; NaN where every arm is NaN. [unit of ``arms_ue``]

    Raises
    ------
    GaugeError
        More than four arms, a sign other than +1 or -1, or a zero or non-finite factor.

    Notes
    -----
    Small-signal relation ``Vo/Vex = (k/4)(e1 - e2 + e3 - e4)`` of a bridge of equal arms, with
    the channel reading ``4 (Vo/Vex) / k`` (Hoffmann 1989, ch. on the Wheatstone bridge;
    Vishay TN-507). :func:`bridge_ratio_exact` gives the circuit without linearisation.

    References
    ----------
    K. Hoffmann, An Introduction to Measurements using Strain Gages, HBM, Darmstadt, 1989.
    Vishay Micro-Measurements, Tech Note TN-507, Errors Due to Wheatstone Bridge Nonlinearity.

    Examples
    --------
    >>> float(bridge_output([500.0, -500.0, np.nan, np.nan]))
    1000.0
    """
    e = np.asarray(arms_ue, dtype=float)
    if e.ndim == 0 or not 1 <= e.shape[-1] <= 4:
        msg = f"bridge arms: last axis holds {e.shape[-1:] or 'no'} arms; expected 1 to 4 (NaN for a completion resistor)"
        raise GaugeError(msg)
    s = np.asarray(signs, dtype=float)
    if s.shape != (4,) or not np.all(np.isin(s, (1.0, -1.0))):
        msg = f"bridge signs: found {s.tolist()}; expected four values of +1 or -1, one per arm"
        raise GaugeError(msg)
    f = np.asarray(factor, dtype=float)
    if not np.all(np.isfinite(f)) or np.any(f == 0):
        msg = f"bridge factor: found {f.tolist()}; expected a finite non-zero number (1 for the channel's indication)"
        raise GaugeError(msg)
    active = ~np.isnan(e)
    total = np.sum(np.where(active, e, 0.0) * s[: e.shape[-1]], axis=-1)
    return np.where(active.any(axis=-1), total, np.nan) / f


def bridge_ratio_exact(r1: ArrayLike, r2: ArrayLike, r3: ArrayLike, r4: ArrayLike) -> Float:
    """Compute the exact output ratio Vo/Vex of a Wheatstone bridge from its four arms.

    Parameters
    ----------
    r1, r2, r3, r4 : array_like, broadcastable
        Resistance of arms 1 to 4 (numbering in the module docstring). [ohm]

    Returns
    -------
    ndarray
        ``R1/(R1+R2) - R4/(R3+R4)`` under constant-voltage excitation. [V/V]

    Raises
    ------
    GaugeError
        A resistance that is not a positive number, one line per arm.

    Notes
    -----
    Two voltage dividers across the same excitation (Hoffmann 1989; Vishay TN-507, the
    bridge output equation); no linearisation.

    Examples
    --------
    >>> float(bridge_ratio_exact(350.0, 350.0, 350.0, 350.0))
    0.0
    """
    arms = np.broadcast_arrays(*(np.asarray(r, dtype=float) for r in (r1, r2, r3, r4)))
    problems = [
        f"bridge arm R{i}: resistance {r[~(r > 0)].ravel()[0]} ohm is not positive; expected the arm's resistance in ohm, > 0"
        for i, r in enumerate(arms, start=1)
        if np.any(~(r > 0))
    ]
    if problems:
        raise GaugeError(*problems)
    a1, a2, a3, a4 = arms
    return a1 / (a1 + a2) - a4 / (a3 + a4)


def lead_wire_factor(
    gauge_ohm: ArrayLike,
    lead_ohm: ArrayLike,
    wiring: str | Sequence[str | None],
    *,
    gauges: Sequence[str] | None = None,
) -> Float:
    """Compute the lead-wire desensitisation of quarter-bridge channels.

    Parameters
    ----------
    gauge_ohm : array_like, shape (channels,) or scalar
        Gauge resistance RG. [ohm]
    lead_ohm : array_like, shape (channels,) or scalar
        Resistance of one lead wire RL; NaN where no lead correction applies. Zero is accepted
        (factor 1). [ohm]
    wiring : str or sequence of str, length channels
        ``"2-wire"`` (both leads in the gauge arm) or ``"3-wire"`` (one lead in the gauge arm,
        one in the adjacent arm, one in the sense line).
    gauges : sequence of str, optional
        Gauge ids for the messages.

    Returns
    -------
    ndarray, shape (channels,)
        ``RG/(RG + 2 RL)`` (2-wire) or ``RG/(RG + RL)`` (3-wire); NaN where ``lead_ohm`` is
        NaN. The reading is divided by it. [-]

    Raises
    ------
    GaugeError
        Where ``lead_ohm`` is given: a gauge resistance that is not positive, a negative lead
        resistance or an unknown wiring name, one line each naming the gauge.

    Notes
    -----
    The leads in series with the gauge make the arm RG + n RL while only RG changes with strain,
    so the bridge sees ``dR/R`` reduced by ``RG/(RG + n RL)`` (Vishay Micro-Measurements,
    "Errors Due to Leadwire Resistance"; Tech Tip TT-612, The Three-Wire Quarter-Bridge
    Circuit; TN-514, Shunt Calibration of Strain Gage Instrumentation, compensates it by
    shunt calibration). For the 3-wire circuit, and for the 2-wire circuit with a completion arm
    equal to the gauge arm, the circuit is then exactly a quarter bridge of gauge factor
    ``GF RG/(RG + n RL)``; with a completion resistor of RG the 2-wire factor holds to first
    order in RL/RG.

    References
    ----------
    Vishay Micro-Measurements, Errors Due to Leadwire Resistance (technical article);
    Tech Tip TT-612, The Three-Wire Quarter-Bridge Circuit; Tech Note TN-514.

    Examples
    --------
    >>> lead_wire_factor(350.0, 1.75, "2-wire").round(6).tolist()
    [0.990099]
    """
    rg, rl = np.broadcast_arrays(
        np.atleast_1d(np.asarray(gauge_ohm, dtype=float)),
        np.atleast_1d(np.asarray(lead_ohm, dtype=float)),
    )
    n = rg.size
    wires = [wiring] * n if isinstance(wiring, str) or wiring is None else list(wiring)
    names = names_for(gauges, n)
    if len(wires) != n:
        msg = f"lead wiring: {len(wires)} wiring names for {n} channels; expected one per channel"
        raise GaugeError(msg)
    problems: list[str] = []
    leads = np.full(n, np.nan)
    for i in np.flatnonzero(~np.isnan(rl)):
        kind = str(wires[i]).strip().lower() if wires[i] is not None else ""
        if not rg[i] > 0:
            problems.append(
                f"gauge '{names[i]}': gauge resistance {rg[i]} ohm is not positive; expected RG from the data sheet (e.g. 120 or 350 ohm)"
            )
        if not 0 <= rl[i] < np.inf:
            problems.append(
                f"gauge '{names[i]}': lead resistance {rl[i]} ohm is negative or infinite; expected one lead's resistance, >= 0 ohm"
            )
        if kind not in _LEADS_IN_GAUGE_ARM:
            problems.append(
                f"gauge '{names[i]}': wiring {wires[i]!r} is unknown; expected '2-wire' or '3-wire'"
            )
        else:
            leads[i] = _LEADS_IN_GAUGE_ARM[kind]
    if problems:
        raise GaugeError(*problems)
    return rg / (rg + leads * rl)


def quarter_bridge_true_strain(indicated_ue: ArrayLike, gauge_factor: ArrayLike) -> Float:
    """Correct a constant-voltage quarter bridge's indicated strain for bridge non-linearity.

    Parameters
    ----------
    indicated_ue : array_like
        Strain indicated at the gauge's own gauge factor (``4 (Vo/Vex) / GF``). [microstrain]
    gauge_factor : array_like, broadcastable
        Gauge factor of the active arm (times any lead desensitisation of that arm). [-]

    Returns
    -------
    ndarray
        True strain ``2 e / (2 - GF e)``, e the indicated strain as a fraction. [microstrain]

    Notes
    -----
    Inverse of the quarter-bridge output ``Vo/Vex = GF e / (4 + 2 GF e)`` (Vishay TN-507,
    quarter-bridge row of its bridge-arrangement table; the closed form is quoted from memory
    and checked in the tests against the circuit). Leads in the arm change the non-linearity
    (TN-514): with a lead-wire factor L pass ``GF * L``, which is exact for the 3-wire circuit
    and the balanced 2-wire circuit.

    References
    ----------
    Vishay Micro-Measurements, Tech Note TN-507, Errors Due to Wheatstone Bridge Nonlinearity.

    Examples
    --------
    >>> round(float(quarter_bridge_true_strain(999.000999000999, 2.0)), 9)
    1000.0
    """
    e = np.asarray(indicated_ue, dtype=float) * _UE
    return 2.0 * e / (2.0 - np.asarray(gauge_factor, dtype=float) * e) / _UE


def quarter_bridge_indicated_strain(true_ue: ArrayLike, gauge_factor: ArrayLike) -> Float:
    """Compute what a constant-voltage quarter bridge indicates for a true strain.

    Parameters
    ----------
    true_ue : array_like
        True strain of the active arm. [microstrain]
    gauge_factor : array_like, broadcastable
        Gauge factor of the active arm. [-]

    Returns
    -------
    ndarray
        Indicated strain ``2 e / (2 + GF e)``. [microstrain]

    Notes
    -----
    ``4 (Vo/Vex) / GF`` with ``Vo/Vex = GF e / (4 + 2 GF e)`` (Vishay TN-507); the inverse of
    :func:`quarter_bridge_true_strain`.
    """
    e = np.asarray(true_ue, dtype=float) * _UE
    return 2.0 * e / (2.0 + np.asarray(gauge_factor, dtype=float) * e) / _UE
