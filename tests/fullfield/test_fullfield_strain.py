"""Surface strain measures: Green-Lagrange to Biot, principal values, equivalent strain, axes."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.linalg import sqrtm

from correlate.core.errors import ReadingsFormatError, StudyError
from correlate.fullfield.strain import (
    equivalent_strain,
    in_plane_principal,
    small_from_green_lagrange,
    tangent_axes,
    tensor_in_axes,
)


def _rot2(deg):
    t = np.radians(deg)
    return np.array([[np.cos(t), -np.sin(t)], [np.sin(t), np.cos(t)]])


def test_uniaxial_stretch_closed_form():
    # Holzapfel (2000): stretch lambda = 1 + e gives E = ((1 + e)^2 - 1) / 2 and U - I = e.
    e = np.array([-0.3, -0.02, -1e-6, 0.0, 1e-6, 2e-3, 0.02, 0.5])
    E = np.zeros((len(e), 2, 2))
    E[:, 0, 0] = e + e**2 / 2  # = ((1 + e)^2 - 1) / 2 without the cancellation for small e
    B = small_from_green_lagrange(E)
    # rtol 1e-12 for e >= 1e-6 (the 2e/(sqrt(1+2e)+1) form keeps small strains' digits),
    # atol 1e-18 m/m for the zero entries
    np.testing.assert_allclose(B[:, 0, 0], e, rtol=1e-12, atol=1e-18)
    np.testing.assert_allclose(B[:, 1, 1], 0.0, rtol=0, atol=1e-18)
    np.testing.assert_allclose(B[:, 0, 1], 0.0, rtol=0, atol=1e-18)


def test_difference_is_second_order_as_stated():
    # E = B + B^2 / 2 (polar decomposition, Holzapfel 2000): (E - B) / B = e / 2,
    # the docstring's "1 % at 2 % strain"
    e = 0.02
    E = np.diag([((1 + e) ** 2 - 1) / 2, 0.0])
    B = small_from_green_lagrange(E)
    np.testing.assert_allclose((E[0, 0] - B[0, 0]) / B[0, 0], 0.01, rtol=1e-10)


def test_stretch_along_rotated_principal_axes():
    # U = Q diag(l1, l2) Q^T, E = (U^2 - I) / 2 (definition of E with F = U): U - I recovered
    Q = _rot2(27.0)
    U = Q @ np.diag([1.031, 0.987]) @ Q.T
    E = (U @ U - np.eye(2)) / 2
    np.testing.assert_allclose(small_from_green_lagrange(E), U - np.eye(2), rtol=0, atol=1e-15)
    # a rigid rotation on top (F = R U) changes nothing: E depends on U only
    F = _rot2(40.0) @ U
    E_rot = (F.T @ F - np.eye(2)) / 2
    np.testing.assert_allclose(small_from_green_lagrange(E_rot), U - np.eye(2), rtol=0, atol=1e-15)


def test_three_by_three_against_scipy_sqrtm():
    # scipy.linalg.sqrtm is the reference principal square root of I + 2E
    rng = np.random.default_rng(6)
    M = rng.normal(0.0, 0.05, (5, 3, 3))
    E = (M + np.swapaxes(M, 1, 2)) / 2
    B = small_from_green_lagrange(E)
    for k in range(5):
        ref = np.real(sqrtm(np.eye(3) + 2 * E[k])) - np.eye(3)
        np.testing.assert_allclose(B[k], ref, rtol=0, atol=1e-13)  # two solvers' round-off


def test_impossible_or_asymmetric_strain_is_refused_and_nan_passes():
    with pytest.raises(ReadingsFormatError, match="not positive definite") as err:
        small_from_green_lagrange(np.diag([-0.6, 0.0]))  # a stretch of sqrt(-0.2)
    assert "\n" not in str(err.value)
    with pytest.raises(ReadingsFormatError, match="not symmetric"):
        small_from_green_lagrange(np.array([[0.0, 1e-3], [0.0, 0.0]]))
    E = np.zeros((2, 2, 2))
    E[1] = np.nan
    out = small_from_green_lagrange(E)
    assert np.isnan(out[1]).all() and np.all(out[0] == 0.0)


def test_principal_values_match_numpy_eigh():
    # numpy.linalg.eigh is the reference eigen-solver for the symmetric 2x2 tensor
    rng = np.random.default_rng(7)
    xx, yy, xy = rng.normal(0, 1e-3, (3, 50))
    e1, e2, ang = in_plane_principal(xx, yy, xy)
    for k in range(50):
        w, v = np.linalg.eigh([[xx[k], xy[k]], [xy[k], yy[k]]])
        np.testing.assert_allclose([e1[k], e2[k]], w[::-1], rtol=0, atol=1e-18)  # round-off
        d = np.array([np.cos(np.radians(ang[k])), np.sin(np.radians(ang[k]))])
        np.testing.assert_allclose(abs(d @ v[:, 1]), 1.0, rtol=1e-12)  # e1's direction
    assert np.all((ang > -90) & (ang <= 90))
    np.testing.assert_allclose(in_plane_principal(0.0, 0.0, 1e-3)[2], 45.0, rtol=1e-14)
    np.testing.assert_allclose(in_plane_principal(-1e-3, 1e-3, 0.0)[2], 90.0, rtol=1e-14)


@pytest.mark.parametrize("eps", [1e-3, 0.05])
def test_equivalent_strain_reference_cases(eps):
    # von Mises equivalent strain sqrt(2/3 e':e') (Dunne & Petrinic 2005), incompressible:
    # uniaxial (eps, -eps/2) -> eps; pure shear exy = gamma/2 -> gamma/sqrt(3);
    # equal biaxial (eps, eps) with ezz = -2 eps -> 2 eps. rtol: closed forms, round-off only.
    np.testing.assert_allclose(equivalent_strain(eps, -eps / 2, 0.0), eps, rtol=1e-14)
    gamma = 2 * eps
    np.testing.assert_allclose(equivalent_strain(0.0, 0.0, gamma / 2), gamma / np.sqrt(3),
                               rtol=1e-14)
    np.testing.assert_allclose(equivalent_strain(eps, eps, 0.0), 2 * eps, rtol=1e-14)
    # pure shear in principal axes (eps, -eps) is the same state turned 45 deg: gamma = 2 eps
    np.testing.assert_allclose(equivalent_strain(eps, -eps, 0.0), 2 * eps / np.sqrt(3),
                               rtol=1e-14)
    # elastic uniaxial stress, nu = 0.3: strains (eps, -0.3 eps, -0.3 eps) -> 2 (1.3) / 3 eps
    np.testing.assert_allclose(equivalent_strain(eps, -0.3 * eps, 0.0, nu=0.3),
                               2 * 1.3 / 3 * eps, rtol=1e-14)


def test_equivalent_strain_does_not_depend_on_the_in_plane_axes():
    # an invariant: rotate the tensor (strain transformation) and get the same value
    T = np.array([[1.2e-3, 0.4e-3], [0.4e-3, -0.3e-3]])
    Q = _rot2(33.0)
    Tr = Q @ T @ Q.T
    np.testing.assert_allclose(equivalent_strain(Tr[0, 0], Tr[1, 1], Tr[0, 1]),
                               equivalent_strain(T[0, 0], T[1, 1], T[0, 1]), rtol=1e-13)
    with pytest.raises(StudyError, match="nu"):
        equivalent_strain(0.0, 0.0, 0.0, nu=0.7)


def test_tangent_axes_on_a_cylinder():
    th = np.radians(np.arange(-40.0, 41.0, 10.0))
    n = np.stack([np.cos(th), np.sin(th), 0 * th], axis=-1)
    ex, ey = tangent_axes(n, [0.0, 0.0, 1.0])  # the axis direction lies in every tangent plane
    np.testing.assert_allclose(ex, np.tile([0.0, 0.0, 1.0], (len(th), 1)), rtol=0, atol=1e-15)
    np.testing.assert_allclose(ey, np.cross(n, ex), rtol=0, atol=1e-15)
    ex, ey = tangent_axes(n * 3.0, [1.0, 1.0, 1.0])  # oblique axis, non-unit normals
    np.testing.assert_allclose(np.sum(ex * n, 1), 0.0, rtol=0, atol=1e-15)  # tangent
    np.testing.assert_allclose(np.linalg.norm(ex, axis=1), 1.0, rtol=1e-15)
    dets = np.linalg.det(np.stack([ex, ey, n], axis=1))
    np.testing.assert_allclose(dets, 1.0, rtol=1e-14)  # right-handed (ex, ey, n)
    with pytest.raises(StudyError, match="of the normal") as err:
        tangent_axes(n, [1.0, 0.05, 0.0])  # within 5.7 deg of the normal at theta = 0
    assert "\n" not in str(err.value)


def test_tensor_in_axes_against_the_strain_transformation():
    # uniaxial strain e along d = cos(a) ex + sin(a) ey: exx = e cos^2 a, eyy = e sin^2 a,
    # exy = e sin a cos a (strain transformation law, tensor shear)
    ex = np.array([0.0, 0.6, 0.8])
    ey = np.array([1.0, 0.0, 0.0])
    a = np.radians(25.0)
    d = np.cos(a) * ex + np.sin(a) * ey
    e = 1.5e-3
    T = e * np.outer(d, d)[None]
    xx, yy, xy = tensor_in_axes(T, ex, ey)
    # atol 1e-18 m/m: round-off of products of size 1e-3
    np.testing.assert_allclose([xx[0], yy[0], xy[0]],
                               [e * np.cos(a) ** 2, e * np.sin(a) ** 2, e * np.sin(a) * np.cos(a)],
                               rtol=0, atol=1e-18)
