"""Tensor conventions: Voigt vectors to full symmetric tensors and back, Hooke's law.

Inside the package a strain tensor is a full symmetric (..., 3, 3) array in m/m with tensor shear
(eps_xy = gamma_xy / 2). Voigt vectors and engineering shear exist only at the boundaries, through
these named conversions.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

AXES = {"x": 0, "y": 1, "z": 2}
DEFAULT_ORDER = ("xx", "yy", "zz", "xy", "yz", "xz")
PLANE_ORDER = ("xx", "yy", "xy")


def _pair(name: str) -> tuple[int, int]:
    if len(name) != 2 or name[0] not in AXES or name[1] not in AXES:
        raise ValueError(f"component name {name!r} is not one of xx, yy, zz, xy, yz, xz (or yx, zy, zx)")
    return AXES[name[0]], AXES[name[1]]


def from_voigt(values: NDArray[np.float64], components: tuple[str, ...] | list[str], *,
               shear: str = "engineering") -> NDArray[np.float64]:
    """Build full symmetric tensors from component arrays.

    Parameters
    ----------
    values : ndarray, shape (..., k)
        Components in the order named by ``components`` (k = 3, 6 or 9).
    components : sequence of str
        Names such as ``"xx"``, ``"xy"``; for k = 9, all nine in row-major order.
    shear : {"engineering", "tensor"}
        Whether off-diagonal values are engineering shear (gamma = 2 eps) or tensor shear.
        Ignored for k = 9, where both off-diagonal entries are given.

    Returns
    -------
    ndarray, shape (..., 3, 3)
        Tensor with tensor shear.
    """
    values = np.asarray(values, dtype=float)
    if values.shape[-1] != len(components):
        raise ValueError(f"{values.shape[-1]} components given but {len(components)} names")
    out = np.zeros(values.shape[:-1] + (3, 3))
    full = len(components) == 9
    factor = 1.0 if full or shear == "tensor" else 0.5
    for k, name in enumerate(components):
        i, j = _pair(name)
        if i == j:
            out[..., i, i] = values[..., k]
        elif full:
            out[..., i, j] = values[..., k]
        else:
            out[..., i, j] = factor * values[..., k]
            out[..., j, i] = factor * values[..., k]
    if full:
        out = 0.5 * (out + np.swapaxes(out, -1, -2))
    return out


def to_voigt(tensor: NDArray[np.float64], components: tuple[str, ...] | list[str] = DEFAULT_ORDER, *,
             shear: str = "engineering") -> NDArray[np.float64]:
    """Return the components of symmetric tensors in a Voigt order (inverse of :func:`from_voigt`)."""
    tensor = np.asarray(tensor, dtype=float)
    factor = 2.0 if shear == "engineering" and len(components) != 9 else 1.0
    cols = []
    for name in components:
        i, j = _pair(name)
        cols.append(tensor[..., i, j] * (1.0 if i == j else factor))
    return np.stack(cols, axis=-1)


def strain_from_stress(stress: NDArray[np.float64], E: float, nu: float) -> NDArray[np.float64]:
    """Isotropic Hooke's law: eps = ((1 + nu) sigma - nu tr(sigma) I) / E.

    Parameters
    ----------
    stress : ndarray, shape (..., 3, 3)
        Stress tensor. [stress unit]
    E, nu : float
        Young's modulus [stress unit] and Poisson's ratio.
    """
    stress = np.asarray(stress, dtype=float)
    trace = np.trace(stress, axis1=-2, axis2=-1)[..., None, None]
    return ((1.0 + nu) * stress - nu * trace * np.eye(3)) / E


def stress_from_strain(strain: NDArray[np.float64], E: float, nu: float) -> NDArray[np.float64]:
    """Isotropic Hooke's law, the inverse of :func:`strain_from_stress`."""
    strain = np.asarray(strain, dtype=float)
    lam = E * nu / ((1 + nu) * (1 - 2 * nu))
    mu = E / (2 * (1 + nu))
    trace = np.trace(strain, axis1=-2, axis2=-1)[..., None, None]
    return lam * trace * np.eye(3) + 2 * mu * strain


def small_strain(gradient: NDArray[np.float64]) -> NDArray[np.float64]:
    """Small-strain tensor from a displacement gradient: eps = (H + H^T) / 2.

    Parameters
    ----------
    gradient : ndarray, shape (..., 3, 3)
        H[..., i, j] = du_i / dx_j. [m/m]
    """
    return 0.5 * (gradient + np.swapaxes(gradient, -1, -2))


def rotation_magnitude(gradient: NDArray[np.float64]) -> NDArray[np.float64]:
    """Magnitude |w| of the infinitesimal rotation W = (H - H^T) / 2 of a displacement gradient.

    Parameters
    ----------
    gradient : ndarray, shape (..., 3, 3)
        H[..., i, j] = du_i / dx_j.

    Returns
    -------
    ndarray, shape (...)
        sqrt(W01^2 + W02^2 + W12^2). [rad]
    """
    W = 0.5 * (gradient - np.swapaxes(gradient, -1, -2))
    return np.sqrt(W[..., 0, 1] ** 2 + W[..., 0, 2] ** 2 + W[..., 1, 2] ** 2)
