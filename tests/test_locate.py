"""Boundary faces of a solid."""

from __future__ import annotations

import numpy as np
from conftest import solid_mesh

from correlate.locate import _used_once, build_surface


def test_faces_used_once_agree_with_numpy_unique():
    # Reference: numpy.unique on rows (counts == 1), for both the hashed and the sorted path.
    rng = np.random.default_rng(0)
    k = np.sort(rng.integers(0, 1000, (5000, 3)), axis=1)
    k = np.c_[k, -np.ones(len(k), dtype=np.int64)]
    k = np.r_[k, k[:2000]]
    _, inv, cnt = np.unique(k, axis=0, return_inverse=True, return_counts=True)
    ref = cnt[inv.ravel()] == 1
    assert (_used_once(k, 1000) == ref).all()
    assert (_used_once(k, 3_000_000) == ref).all()


def test_surface_area_of_a_box():
    # Reference: a 4 x 3 x 2 box has surface area 2 (12 + 8 + 6) = 52; the boundary faces must
    # tile it exactly (summed face areas by the shoelace/cross-product formula).
    for ctype in ("tetra", "hexahedron", "wedge"):
        mesh = solid_mesh(ctype)
        s = build_surface(mesh)
        corners = s.corner_conn
        p = mesh.points
        area = 0.0
        for row in corners:
            ids = row[row >= 0]
            v = p[ids]
            for i in range(1, len(ids) - 1):
                area += 0.5 * np.linalg.norm(np.cross(v[i] - v[0], v[i + 1] - v[0]))
        assert abs(area - 52.0) < 1e-9
