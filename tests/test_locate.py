"""Boundary faces of a solid."""

from __future__ import annotations

import numpy as np
from conftest import SOLID_TYPES, solid_mesh

from correlate import elements
from correlate.locate import _boundary_faces, build_surface


def test_boundary_faces_agree_with_counting_shared_faces():
    # Reference: a face is on the boundary when exactly one cell uses it (numpy.unique counts of
    # the sorted corner ids of every cell face).
    for ctype in SOLID_TYPES:
        mesh = solid_mesh(ctype)
        conn = mesh.blocks[0][1]
        keys, owner = [], []
        for k, (ftype, ids) in enumerate(elements.ELEMENTS[ctype].faces):
            nc = elements.ELEMENTS[ftype].n_corners
            key = np.full((len(conn), 4), -1)
            key[:, :nc] = np.sort(conn[:, list(ids[:nc])], axis=1)
            keys.append(key)
            owner.append(np.c_[np.arange(len(conn)), np.full(len(conn), k)])
        keys, owner = np.concatenate(keys), np.concatenate(owner)
        _, inv, cnt = np.unique(keys, axis=0, return_inverse=True, return_counts=True)
        ref = {tuple(o) for o in owner[cnt[inv.ravel()] == 1]}
        parent, local = _boundary_faces(mesh)
        assert {(int(p), int(k)) for p, k in zip(parent, local, strict=True)} == ref, ctype


def test_surface_area_of_a_box():
    # Reference: a 4 x 3 x 2 box has surface area 2 (12 + 8 + 6) = 52; the boundary faces must
    # tile it exactly (summed face areas by the cross-product formula).
    for ctype in ("tetra", "hexahedron", "wedge"):
        mesh = solid_mesh(ctype)
        s = build_surface(mesh)
        p = mesh.points
        area = 0.0
        for row in s.corner_conn:
            ids = row[row >= 0]
            v = p[ids]
            for i in range(1, len(ids) - 1):
                area += 0.5 * np.linalg.norm(np.cross(v[i] - v[0], v[i + 1] - v[0]))
        assert abs(area - 52.0) < 1e-9
