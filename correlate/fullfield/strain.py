"""Surface strain measures for comparing full-field (DIC) strains with a model.

DIC software usually reports Green-Lagrange strain in a local tangent frame of the surface; a
linear FE model gives small strain in global axes. These functions bring both to the same
measure and frame: the Green-Lagrange to Biot (small-strain equivalent) conversion, the local
tangent axes and the in-plane components of a 3D tensor in them, principal values and a von
Mises equivalent strain.

Conventions
-----------
Strains are in m/m with tensor shear (``exy = gamma_xy / 2``). Angles are in degrees,
counterclockwise from the x axis towards the y axis (about the normal ``n = ex x ey``).
NaN in, NaN out, point by point.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from correlate.core.errors import ReadingsFormatError, StudyError

__all__ = [
    "equivalent_strain",
    "in_plane_principal",
    "small_from_green_lagrange",
    "tangent_axes",
    "tensor_in_axes",
]

Array = NDArray[np.float64]


def small_from_green_lagrange(E: ArrayLike) -> Array:
    """Convert Green-Lagrange strain tensors to Biot strain ``U - I`` (small-strain equivalent).

    Parameters
    ----------
    E : array_like, shape (..., 2, 2) or (..., 3, 3)
        Symmetric Green-Lagrange strain tensors (in-plane ones are 2x2). [m/m]

    Returns
    -------
    ndarray, same shape as E
        Biot strain ``U - I``, where ``U = sqrt(I + 2 E)`` is the right stretch tensor. [m/m]

    Raises
    ------
    ReadingsFormatError
        If a tensor is not symmetric or ``I + 2 E`` is not positive definite (an impossible
        strain: a stretch would be imaginary).

    Notes
    -----
    With ``F = R U`` (polar decomposition), ``E = (F^T F - I) / 2 = (U^2 - I) / 2`` whatever the
    rotation R, so ``U = sqrt(I + 2 E)`` follows from E alone, here from the eigen-decomposition
    ``E = Q diag(e_k) Q^T``: ``U - I = Q diag(sqrt(1 + 2 e_k) - 1) Q^T`` (evaluated as
    ``2 e_k / (sqrt(1 + 2 e_k) + 1)`` to keep the digits of small strains). Biot strain is the
    small strain ``sym(F - I)`` of a deformation without rigid rotation, and the measure a
    linear model's small strain approximates. ``E = B + B^2 / 2``, so the two differ by order
    ``|E|^2``: 2e-4 at 2 % strain, a 1 % relative difference (0.1 % at 0.2 %). A uniaxial stretch
    ``lambda = 1 + e`` has ``E = ((1 + e)^2 - 1) / 2`` and ``U - I = e`` exactly.

    References
    ----------
    Holzapfel G.A. (2000) Nonlinear Solid Mechanics. Wiley. Sec. 2.6 (polar decomposition,
    right stretch tensor, Green-Lagrange and Biot strain; section number from memory).
    """
    a = np.asarray(E, dtype=float)
    if a.ndim < 2 or a.shape[-1] != a.shape[-2] or a.shape[-1] not in (2, 3):
        raise ReadingsFormatError(f"Green-Lagrange strain: expected shape (..., 2, 2) or "
                                  f"(..., 3, 3), found {a.shape}")
    flat = a.reshape(-1, a.shape[-1], a.shape[-1])
    ok = np.all(np.isfinite(flat), axis=(1, 2))
    asym = np.abs(flat - np.swapaxes(flat, 1, 2)).max(axis=(1, 2), initial=0.0)
    bad = ok & (asym > 1e-12 + 1e-9 * np.abs(flat).max(axis=(1, 2), initial=0.0))
    if bad.any():
        raise ReadingsFormatError(f"Green-Lagrange strain: {int(bad.sum())} tensors are not "
                                  f"symmetric (first at {int(np.flatnonzero(bad)[0])}, asymmetry "
                                  f"{asym[bad].max():.2e}); give tensor shear exy = eyx")
    out = np.full_like(flat, np.nan)
    e, Q = np.linalg.eigh(flat[ok])
    low = e.min(axis=1, initial=np.inf) <= -0.5
    if low.any():
        first = int(np.flatnonzero(ok)[np.flatnonzero(low)[0]])
        raise ReadingsFormatError(f"Green-Lagrange strain: {int(low.sum())} tensors have a "
                                  f"principal value <= -0.5 (first at {first}: "
                                  f"{e[low].min():.4g}), so I + 2E is not positive definite; "
                                  "check the strain unit (m/m expected) and the export")
    b = 2.0 * e / (np.sqrt(1.0 + 2.0 * e) + 1.0)
    out[ok] = np.einsum("nik,nk,njk->nij", Q, b, Q)
    return out.reshape(a.shape)


def in_plane_principal(exx: ArrayLike, eyy: ArrayLike, exy: ArrayLike
                       ) -> tuple[Array, Array, Array]:
    """Return in-plane principal strains and the direction of the major one.

    Parameters
    ----------
    exx, eyy, exy : array_like, broadcastable
        In-plane strain components, tensor shear. [m/m]

    Returns
    -------
    e1, e2 : ndarray
        Major and minor principal strains, ``e1 >= e2``. [m/m]
    angle : ndarray
        Direction of e1 from the x axis, counterclockwise, in (-90, 90]; 0 where e1 = e2. [deg]

    Notes
    -----
    ``e1,2 = (exx + eyy) / 2 +- sqrt(((exx - eyy) / 2)^2 + exy^2)`` and
    ``angle = atan2(2 exy, exx - eyy) / 2`` (Mohr's circle; e.g. Timoshenko S.P., Goodier J.N.
    (1970) Theory of Elasticity, 3rd ed., McGraw-Hill, sec. 76 (from memory)).
    """
    xx, yy, xy = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (exx, eyy, exy)))
    mean = 0.5 * (xx + yy)
    radius = np.hypot(0.5 * (xx - yy), xy)
    angle = np.degrees(0.5 * np.arctan2(2.0 * xy, xx - yy))
    angle = np.where(angle <= -90.0, angle + 180.0, angle)
    return mean + radius, mean - radius, angle


def equivalent_strain(exx: ArrayLike, eyy: ArrayLike, exy: ArrayLike, *, nu: float = 0.5
                      ) -> Array:
    """Return the von Mises equivalent strain of a plane-stress surface strain state.

    Parameters
    ----------
    exx, eyy, exy : array_like, broadcastable
        In-plane strain components, tensor shear. [m/m]
    nu : float
        Ratio fixing the through-thickness strain ``ezz = -nu / (1 - nu) (exx + eyy)`` of a
        plane-stress surface. The default 0.5 is incompressibility, ``ezz = -(exx + eyy)``, the
        usual choice of DIC software (common practice). Must lie in [0, 0.5].

    Returns
    -------
    ndarray
        ``eps_eq = sqrt(2/3 e' : e')``, with ``e'`` the deviatoric part of the 3D strain
        ``[[exx, exy, 0], [exy, eyy, 0], [0, 0, ezz]]``. [m/m]

    Notes
    -----
    The definition is the work-conjugate of the von Mises stress for an incompressible material
    (``sigma_eq eps_eq = sigma : eps``), written ``(2/3) sqrt(3/2 e' : e')`` in some texts. With
    nu = 0.5 it gives ``eps`` for uniaxial strain ``(eps, -eps/2, -eps/2)``, ``gamma / sqrt(3)``
    for pure shear ``exy = gamma / 2`` and ``2 eps`` for equal biaxial strain. For nu < 0.5
    (elastic surface strain) the same formula gives ``2 (1 + nu) / 3`` times the uniaxial strain.

    References
    ----------
    Dunne F., Petrinic N. (2005) Introduction to Computational Plasticity. Oxford University
    Press. Ch. 2 (effective plastic strain ``p = sqrt(2/3 eps_p : eps_p)``; chapter from memory).
    """
    if not 0.0 <= float(nu) <= 0.5:
        raise StudyError(f"equivalent strain: nu must lie in [0, 0.5], found {nu!r}")
    xx, yy, xy = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (exx, eyy, exy)))
    zz = -float(nu) / (1.0 - float(nu)) * (xx + yy)
    m = (xx + yy + zz) / 3.0
    dev2 = (xx - m) ** 2 + (yy - m) ** 2 + (zz - m) ** 2 + 2.0 * xy**2
    return np.sqrt(2.0 / 3.0 * dev2)


def tangent_axes(normals: ArrayLike, x_axis: ArrayLike, *, min_sine: float = 0.1
                 ) -> tuple[Array, Array]:
    """Return per-point tangent axes: the x axis projected on the tangent plane, and n x ex.

    Parameters
    ----------
    normals : array_like, shape (n, 3)
        Surface normals (need not be unit). [-]
    x_axis : array_like, shape (3,) or (n, 3)
        Reference x direction, e.g. the DIC x axis or the gauge-frame x axis in model
        coordinates. [-]
    min_sine : float
        Refuse points where the sine of the angle between x axis and normal is below this: the
        projection is then dominated by normal errors (a normal off by 1 deg turns ex by about
        1 deg / min_sine). Default 0.1 (within 5.7 deg of the normal).

    Returns
    -------
    ex, ey : ndarray, shape (n, 3)
        Unit tangent axes; ``ey = n x ex``, so (ex, ey, n) is right-handed.

    Raises
    ------
    StudyError
        Non-finite or zero vectors, or an x axis too close to a normal.

    Notes
    -----
    ``ex = (x - (x.n) n) / |x - (x.n) n|``, ``ey = n x ex``, with n normalised.
    """
    n = np.asarray(normals, dtype=float)
    if n.ndim != 2 or n.shape[1] != 3:
        raise StudyError(f"tangent axes: normals must have shape (n, 3), found {n.shape}")
    x = np.broadcast_to(np.asarray(x_axis, dtype=float), n.shape)
    ln, lx = np.linalg.norm(n, axis=1), np.linalg.norm(x, axis=1)
    bad = ~(np.isfinite(ln) & np.isfinite(lx) & (ln > 0) & (lx > 0))
    if bad.any():
        raise StudyError(f"tangent axes: {int(bad.sum())} normals or x axes are zero or not "
                         f"finite (first at {int(np.flatnonzero(bad)[0])})")
    n = n / ln[:, None]
    x = x / lx[:, None]
    ex = x - np.sum(x * n, axis=1)[:, None] * n
    sine = np.linalg.norm(ex, axis=1)
    close = sine < min_sine
    if close.any():
        i = int(np.flatnonzero(close)[0])
        raise StudyError(f"tangent axes: the x axis is within {np.degrees(np.arcsin(min_sine)):.1f}"
                         f" deg of the normal at {int(close.sum())} points (first at {i}, "
                         f"{np.degrees(np.arcsin(min(sine[i], 1.0))):.2f} deg); choose an x axis "
                         "that lies along the surface")
    ex = ex / sine[:, None]
    return ex, np.cross(n, ex)


def tensor_in_axes(T: ArrayLike, ex: ArrayLike, ey: ArrayLike) -> tuple[Array, Array, Array]:
    """Return the in-plane components of 3D strain tensors in given tangent axes.

    Parameters
    ----------
    T : array_like, shape (n, 3, 3)
        Symmetric strain tensors in global axes, tensor shear. [m/m]
    ex, ey : array_like, shape (n, 3) or (3,)
        Unit axes, e.g. from :func:`tangent_axes`.

    Returns
    -------
    exx, eyy, exy : ndarray, shape (n,)
        ``ex.T.ex``, ``ey.T.ey`` and ``ex.T.ey`` (tensor shear). [m/m]
    """
    t = np.asarray(T, dtype=float)
    if t.ndim != 3 or t.shape[1:] != (3, 3):
        raise StudyError(f"tensor in axes: tensors must have shape (n, 3, 3), found {t.shape}")
    a = np.broadcast_to(np.asarray(ex, dtype=float), (len(t), 3))
    b = np.broadcast_to(np.asarray(ey, dtype=float), (len(t), 3))
    return (np.einsum("ni,nij,nj->n", a, t, a), np.einsum("ni,nij,nj->n", b, t, b),
            np.einsum("ni,nij,nj->n", a, t, b))
