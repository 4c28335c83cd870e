"""Rosette stage: reduce rosette grid strains to in-plane strain, principal strains and stress.

Inputs are the grid readings of a rosette (measured, or the model's predicted grid strains) and the
grid angles; outputs are the in-plane strain state (ex, ey, gxy), the principal strains and their
direction, the maximum in-plane shear strain and, given E and nu, plane-stress principal stresses
and the von Mises stress.

Conventions
-----------
- Frame: x along grid A (the rosette's first grid) in the tangent plane of the gauged face; z along
  the outward normal of that face; y = z cross x.
- Angles are in degrees, counterclockwise about the outward normal as seen from outside the part.
- Shear is engineering shear, gxy = 2 eps_xy.
- Units: the functions are unit-agnostic. Strain comes out in the unit it goes in (microstrain in,
  microstrain out). Stress is E times strain, so with microstrain readings pass E per microstrain
  (e.g. E [MPa] * 1e-6) or divide the stresses by 1e6.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import GaugeError

__all__ = [
    "MAX_CONDITION",
    "check_angles",
    "grid_angles",
    "plane_stress",
    "principal",
    "reduce_grids",
    "reduce_rosette",
    "von_mises",
]

#: Largest condition number accepted for the grid design written in the basis [1, cos 2t, sin 2t]
#: (the same equations as [cos^2 t, sin^2 t, sin t cos t], but its condition number does not depend
#: on which grid is A). 0/45/90 gives 2.4, 0/60/120 gives 1.4, 0/3/90 gives 27 and 0/2/90 gives 41.
MAX_CONDITION = 35.0


def grid_angles(directions: ArrayLike, normal: ArrayLike) -> NDArray[np.float64]:
    """Return each grid's angle from grid A, counterclockwise about the outward normal.

    Parameters
    ----------
    directions : array_like, shape (..., m, 3)
        Grid directions; the first is grid A. They are projected into the plane normal to
        ``normal`` first, so they need be neither unit nor exactly tangent.
    normal : array_like, shape (..., 3)
        Outward normal of the gauged face (any length).

    Returns
    -------
    ndarray, shape (..., m)
        Angles in [0, 360) degrees; grid A is 0.

    Raises
    ------
    GaugeError
        If the normal is zero or a grid direction is parallel to it.

    Examples
    --------
    >>> grid_angles([[1, 0, 0], [1, 1, 0], [0, 1, 0]], [0, 0, 1]).round(6).tolist()
    [0.0, 45.0, 90.0]
    """
    d = np.asarray(directions, dtype=float)
    n = np.asarray(normal, dtype=float)
    n_len = np.linalg.norm(n, axis=-1, keepdims=True)
    if np.any(~(n_len > 0)):
        msg = "rosette normal has zero length; give the outward normal of the gauged face"
        raise GaugeError(msg)
    n = (n / n_len)[..., None, :]
    p = d - np.sum(d * n, axis=-1, keepdims=True) * n
    if np.any(~(np.linalg.norm(p, axis=-1) > 1e-9 * np.linalg.norm(d, axis=-1))):
        msg = "a rosette grid direction is zero or parallel to the normal; check grid directions"
        raise GaugeError(msg)
    a = p[..., :1, :]
    sin = np.sum(np.cross(a, p) * n, axis=-1)
    cos = np.sum(a * p, axis=-1)
    deg = np.degrees(np.arctan2(sin, cos)) % 360.0
    return np.where(deg >= 360.0, 0.0, deg)  # -1e-15 % 360 rounds to 360


def _grid_rows(t: NDArray[np.float64]) -> NDArray[np.float64]:
    c, s = np.cos(t), np.sin(t)
    return np.stack([c * c, s * s, s * c], axis=-1)


def check_angles(angles_deg: ArrayLike, *, name: str,
                 max_condition: float = MAX_CONDITION) -> NDArray[np.float64]:
    """Check that the grid angles determine the in-plane strain state; return them as floats.

    Parameters
    ----------
    angles_deg : array_like, shape (m,)
        Grid angles from grid A, counterclockwise. [deg]
    name : str
        Rosette id, used in the error message.
    max_condition : float
        Largest accepted condition number of the (m, 3) grid design matrix.

    Returns
    -------
    ndarray, shape (m,)
        The angles. [deg]

    Raises
    ------
    GaugeError
        If there are fewer than three finite angles or the design matrix is ill-conditioned (two
        grids within a few degrees, or grids 180 deg apart repeating a direction).
    """
    angles = np.asarray(angles_deg, dtype=float)
    if angles.ndim != 1 or angles.size < 3 or not np.all(np.isfinite(angles)):
        msg = (f"rosette {name!r}: grid angles {angles.tolist()} deg; need at least three finite "
               "angles in a 1-D list")
        raise GaugeError(msg)
    t = np.radians(angles)
    sv = np.linalg.svd(np.c_[np.ones_like(t), np.cos(2 * t), np.sin(2 * t)], compute_uv=False)
    cond = sv[0] / sv[-1] if sv[-1] > 0 else np.inf
    if not cond <= max_condition:
        msg = (f"rosette {name!r}: grid angles {angles.tolist()} deg are degenerate (condition "
               f"number {cond:.3g} > {max_condition:g}); grids must not repeat a direction "
               "(0 or 180 deg apart) - check the grid angles in the gauge map")
        raise GaugeError(msg)
    return angles


def reduce_grids(readings: ArrayLike, angles_deg: ArrayLike, *, kt: ArrayLike | None = None,
                 nu0: ArrayLike = 0.285, name: str = "rosette") -> dict[str, NDArray[np.float64]]:
    """Solve the grid equations for the in-plane strain state.

    Parameters
    ----------
    readings : array_like, shape (..., m)
        Grid strains (with ``kt``: the strains the gauges indicate). [strain unit]
    angles_deg : array_like, shape (m,)
        Grid angles from grid A, counterclockwise about the outward normal. [deg]
    kt : array_like, shape (m,) or scalar, optional
        Transverse sensitivity coefficient of each grid; None skips the correction.
    nu0 : float or array_like, shape (m,)
        Poisson's ratio of the gauge-factor calibration beam (0.285 is common practice).
    name : str
        Rosette id used in error messages.

    Returns
    -------
    dict of ndarray, each shape (...)
        ``ex``, ``ey``, ``gxy`` and ``residual``, the RMS over the m grids of the least-squares
        misfit (0 for three grids).

    Raises
    ------
    GaugeError
        Degenerate angles (see :func:`check_angles`) or readings that do not match the angles.

    Notes
    -----
    Grid i at angle t_i reads e_i = ex cos^2 t_i + ey sin^2 t_i + gxy sin t_i cos t_i, solved
    exactly for three grids and by least squares for more. With ``kt`` the indicated reading is
    (e_a,i + Kt_i e_t,i) / (1 - nu0_i Kt_i), e_t,i the normal strain at t_i + 90 deg; the same
    linear solve then yields the corrected state for any angles.

    References
    ----------
    ASTM E1561, Standard Practice for Analysis of Strain Gage Rosette Data.
    Vishay Micro-Measurements Tech Note TN-509, Errors Due to Transverse Sensitivity in Strain
    Gages.

    Examples
    --------
    >>> out = reduce_grids([200.0, 550.0, 500.0], [0, 45, 90])
    >>> [round(float(out[k]), 9) for k in ("ex", "ey", "gxy")]
    [200.0, 500.0, 400.0]
    """
    angles = check_angles(angles_deg, name=name)
    m = angles.size
    r = np.asarray(readings, dtype=float)
    if r.ndim < 1 or r.shape[-1] != m:
        msg = (f"rosette {name!r}: readings have shape {r.shape} but there are {m} grid angles; "
               "the last axis must hold one reading per grid")
        raise GaugeError(msg)
    t = np.radians(angles)
    design = _grid_rows(t)
    if kt is not None:
        try:
            k = np.broadcast_to(np.asarray(kt, dtype=float), (m,))
            v = np.broadcast_to(np.asarray(nu0, dtype=float), (m,))
        except ValueError as exc:
            msg = f"rosette {name!r}: kt and nu0 must be scalars or have one value per grid ({m})"
            raise GaugeError(msg) from exc
        design = (design + k[:, None] * _grid_rows(t + np.pi / 2)) / (1.0 - v * k)[:, None]
    x = r @ np.linalg.pinv(design).T
    if m > 3:
        residual = np.sqrt(np.mean((x @ design.T - r) ** 2, axis=-1))
    else:
        residual = np.where(np.all(np.isfinite(r), axis=-1), 0.0, np.nan)
    return {"ex": x[..., 0], "ey": x[..., 1], "gxy": x[..., 2], "residual": residual}


def principal(ex: ArrayLike, ey: ArrayLike, gxy: ArrayLike, *,
              noise: float = 0.0) -> dict[str, NDArray[np.float64]]:
    """Return principal strains, the e1 direction and the maximum in-plane shear strain.

    Parameters
    ----------
    ex, ey, gxy : array_like, broadcastable
        In-plane strain state, engineering shear. [strain unit]
    noise : float
        Where e1 - e2 <= noise the direction is undefined and ``angle_deg`` is NaN. [strain unit]

    Returns
    -------
    dict of ndarray
        ``e1`` >= ``e2``; ``angle_deg`` from x (grid A) to the e1 direction, counterclockwise, in
        (-90, 90]; ``shear_max`` = e1 - e2, the maximum in-plane engineering shear strain.

    Notes
    -----
    Mohr's circle: e1,2 = (ex + ey)/2 +/- sqrt(((ex - ey)/2)^2 + (gxy/2)^2) and
    angle = atan2(gxy, ex - ey) / 2.

    Examples
    --------
    >>> out = principal(200.0, 500.0, 400.0)
    >>> [round(float(out[k]), 6) for k in ("e1", "e2", "angle_deg", "shear_max")]
    [600.0, 100.0, 63.434949, 500.0]
    """
    ex, ey, gxy = np.broadcast_arrays(*(np.asarray(a, dtype=float) for a in (ex, ey, gxy)))
    centre = 0.5 * (ex + ey)
    radius = np.hypot(0.5 * (ex - ey), 0.5 * gxy)
    angle = 0.5 * np.degrees(np.arctan2(gxy, ex - ey))
    angle = np.where(angle <= -90.0, angle + 180.0, angle)  # atan2(-0.0, <0) gives -180
    angle = np.where(2.0 * radius > noise, angle, np.nan)
    return {"e1": centre + radius, "e2": centre - radius, "angle_deg": angle,
            "shear_max": 2.0 * radius}


def plane_stress(e1: ArrayLike, e2: ArrayLike, E: float, nu: float,
                 ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Return principal stresses from principal strains by plane-stress Hooke's law.

    Parameters
    ----------
    e1, e2 : array_like
        Principal strains. [strain unit]
    E : float
        Young's modulus. [stress unit per strain unit]
    nu : float
        Poisson's ratio.

    Returns
    -------
    s1, s2 : ndarray
        s1 = E (e1 + nu e2) / (1 - nu^2), s2 = E (e2 + nu e1) / (1 - nu^2). [stress unit]
    """
    e1, e2 = np.asarray(e1, dtype=float), np.asarray(e2, dtype=float)
    factor = E / (1.0 - nu * nu)
    return factor * (e1 + nu * e2), factor * (e2 + nu * e1)


def von_mises(s1: ArrayLike, s2: ArrayLike) -> NDArray[np.float64]:
    """Return the plane-stress von Mises stress sqrt(s1^2 - s1 s2 + s2^2). [stress unit]"""
    s1, s2 = np.asarray(s1, dtype=float), np.asarray(s2, dtype=float)
    return np.sqrt(s1 * s1 - s1 * s2 + s2 * s2)


def reduce_rosette(readings: ArrayLike, angles_deg: ArrayLike, *, kt: ArrayLike | None = None,
                   nu0: ArrayLike = 0.285, E: float | None = None, nu: float | None = None,
                   noise: float = 0.0, name: str = "rosette") -> pd.DataFrame:
    """Reduce rosette reading vectors to a table of strain state, principal values and stresses.

    Parameters
    ----------
    readings : array_like, shape (n, m)
        One reading vector per row (load step). [strain unit]
    angles_deg, kt, nu0, name
        As in :func:`reduce_grids`.
    E, nu : float, optional
        Elastic constants for the stresses; without both, s1, s2 and von_mises are NaN.
        [stress unit per strain unit]
    noise : float
        As in :func:`principal`.

    Returns
    -------
    pandas.DataFrame
        n rows; columns ex, ey, gxy, e1, e2, angle_deg, shear_max, s1, s2, von_mises, residual.
    """
    r = np.asarray(readings, dtype=float)
    if r.ndim != 2:
        msg = f"rosette {name!r}: readings have shape {r.shape}; give a 2-D array (steps, grids)"
        raise GaugeError(msg)
    state = reduce_grids(r, angles_deg, kt=kt, nu0=nu0, name=name)
    main = principal(state["ex"], state["ey"], state["gxy"], noise=noise)
    if E is None or nu is None:
        s1 = s2 = vm = np.full(r.shape[0], np.nan)
    else:
        s1, s2 = plane_stress(main["e1"], main["e2"], E, nu)
        vm = von_mises(s1, s2)
    return pd.DataFrame({
        "ex": state["ex"], "ey": state["ey"], "gxy": state["gxy"], "e1": main["e1"],
        "e2": main["e2"], "angle_deg": main["angle_deg"], "shear_max": main["shear_max"],
        "s1": s1, "s2": s2, "von_mises": vm, "residual": state["residual"],
    })
