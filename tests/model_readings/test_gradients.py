"""Displacement checks: the nodal-averaged strain and the rotation at each gauge centre."""

from __future__ import annotations

import numpy as np
from builders import gauge_frame, solid_mesh

from correlate.model_readings.gradients import nodal_strain, rotation_at_points
from correlate.model_readings.operator import build_operator

# u = A x: a homogeneous deformation. Its small strain is (A + A^T)/2 and its infinitesimal
# rotation (A - A^T)/2 everywhere (continuum mechanics, e.g. Timoshenko and Goodier, Theory of
# Elasticity, section 5, from memory). Every element reproduces a linear field exactly.
A = np.array([[4e-4, 2e-4, -1e-4], [-3e-4, -1e-4, 5e-5], [2e-4, 1e-4, 3e-4]])


def _op(ctype: str):
    mesh = solid_mesh(ctype, n=(8, 6, 4))
    g = gauge_frame([dict(gauge="G", x=1.5, y=1.2, z=2.0, dir_x=1, dir_y=0, dir_z=0, length=0.4)])
    return mesh, build_operator(mesh, g, snap_tol=1e-6)


def test_nodal_strain_of_a_homogeneous_deformation_is_exact():
    for ctype in ("tetra", "tetra10", "hexahedron20"):
        mesh, op = _op(ctype)
        got = nodal_strain(op, mesh.points @ A.T)
        near = np.isfinite(got).all(axis=(1, 2))
        assert near.any() and not near.all()          # only around the gauge's cells
        expected = 0.5 * (A + A.T)
        # exact arithmetic up to rounding of the shape-function gradients
        np.testing.assert_allclose(got[near], np.broadcast_to(expected, got[near].shape),
                                   rtol=0, atol=1e-15)


def test_rotation_magnitude_of_a_homogeneous_deformation():
    W = 0.5 * (A - A.T)
    expected = np.sqrt(W[0, 1] ** 2 + W[0, 2] ** 2 + W[1, 2] ** 2)
    mesh, op = _op("tetra10")
    got = rotation_at_points(op, mesh.points @ A.T)
    np.testing.assert_allclose(got, [expected], rtol=1e-12, atol=0)
