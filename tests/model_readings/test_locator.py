"""Boundary faces of a solid, whole or near the gauges, and closest points on them."""

from __future__ import annotations

import numpy as np
from builders import SOLID_TYPES, solid_mesh

from correlate.mechanics import elements
from correlate.model_readings.locator import Locator
from correlate.model_readings.surface import _boundary_faces, build_surface, cell_size, nodes_near


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


SIZE = np.array([30.0, 20.0, 3.0])


def box_closest(p: np.ndarray) -> np.ndarray:
    """Closest point on the boundary of the box [0, SIZE] (closed form, common geometry).

    Outside: clamp to the box. Inside: move to the nearest wall along its axis.
    """
    out = np.clip(p, 0.0, SIZE)
    inside = np.all((p > 0) & (p < SIZE), axis=1)
    gaps = np.concatenate([p, SIZE - p], axis=1)[inside]
    k = np.argmin(gaps, axis=1)
    q = p[inside].copy()
    axis = k % 3
    q[np.arange(len(q)), axis] = np.where(k < 3, 0.0, SIZE[axis])
    out[inside] = q
    return out


def test_partial_surface_finds_the_closest_points_of_a_box_and_grows_when_needed():
    # Reference: the closed-form closest point on a box's boundary (box_closest). A surface built
    # only near three gauges must give it for points near them (tolerance 1e-9 of the box size:
    # the projection on the flat tet10 faces converges to about 1e-12), and a point far from
    # them must make the locator take the whole surface and still give it.
    mesh = solid_mesh("tetra10", n=(30, 20, 3), size=tuple(SIZE))
    seeds = np.array([[2.0, 2.0, 3.05], [4.3, 3.1, 2.98], [0.03, 5.2, 1.5]])
    part = build_surface(mesh, near=seeds, reach=0.4)
    whole = build_surface(mesh)
    assert part.region is not None and part.n_faces < whole.n_faces / 4
    rng = np.random.default_rng(3)
    near = seeds[rng.integers(0, 3, 200)] + rng.uniform(-0.3, 0.3, (200, 3))
    loc = Locator(mesh, part)
    got = loc.project(near)
    assert loc.surface is part  # all inside the region: no growth
    np.testing.assert_allclose(got.point, box_closest(near), rtol=0, atol=1e-9 * SIZE.max())
    far = np.array([[25.0, 15.0, 0.2], [29.9, 2.0, 1.5]])
    got = loc.project(far)
    assert loc.surface.region is None
    np.testing.assert_allclose(got.point, box_closest(far), rtol=0, atol=1e-9 * SIZE.max())


def test_nodes_near_flags_every_node_within_the_radius():
    # Reference: scipy's KD-tree ball query lists the nodes within the radius; every one of them
    # must be flagged (more may be: whole voxels are flagged).
    from scipy.spatial import cKDTree

    mesh = solid_mesh("hexahedron20", n=(10, 6, 5), size=(10.0, 6.0, 5.0))
    seeds = np.array([[1.0, 1.0, 5.0], [7.5, 3.3, 2.0], [12.0, 3.0, 2.5]])  # the last one outside
    for radius in (0.4, 1.3, 3.0):
        flagged = nodes_near(mesh, seeds, radius)
        want = sorted(set().union(*cKDTree(mesh.points).query_ball_point(seeds, radius)))
        assert flagged[want].all() and flagged.sum() < len(mesh.points)


def test_cell_size_bounds_the_distance_between_any_two_corners():
    # Reference: the largest distance between two corners of one cell, by brute force over every
    # pair (numpy). The bound may exceed it by the bounding-box diagonal factor (at most sqrt 3)
    # and its 1 % pad, never fall short.
    for ctype in SOLID_TYPES:
        mesh = solid_mesh(ctype, curve=0.1)
        conn = mesh.blocks[0][1][:, :elements.ELEMENTS[ctype].n_corners]
        p = mesh.points[conn]
        longest = np.linalg.norm(p[:, :, None] - p[:, None, :], axis=3).max()
        assert longest <= cell_size(mesh) <= 1.01 * np.sqrt(3) * longest * 1.0001, ctype


def test_passes_in_blocks_give_what_one_pass_gives(monkeypatch):
    # The whole-mesh passes run in blocks of CELL_BLOCK cells or nodes. With blocks of 7 (a mesh
    # of 300 cells and 2,000-odd nodes: many blocks, a short last one) the cell-size bound and
    # the flagged nodes must equal those of one block (exact: max, min and flags do not round),
    # and the references of the two tests above still hold.
    from scipy.spatial import cKDTree

    from correlate.model_readings import surface

    mesh = solid_mesh("hexahedron20", n=(10, 6, 5), size=(10.0, 6.0, 5.0), curve=0.1)
    seeds = np.array([[1.0, 1.0, 5.0], [7.5, 3.3, 2.0]])
    monkeypatch.setattr(surface, "CELL_BLOCK", 10**9)
    whole = cell_size(mesh), nodes_near(mesh, seeds, 1.3)
    monkeypatch.setattr(surface, "CELL_BLOCK", 7)
    blocked = cell_size(mesh), nodes_near(mesh, seeds, 1.3)
    assert blocked[0] == whole[0]
    np.testing.assert_array_equal(blocked[1], whole[1])
    want = sorted(set().union(*cKDTree(mesh.points).query_ball_point(seeds, 1.3)))
    assert blocked[1][want].all()


def test_partial_shell_surface_gives_the_closest_points_of_a_flat_panel():
    # Reference: the closest point of a flat rectangle [0, 40] x [0, 30] at z = 2 is the point
    # clamped into it (closed form). Shell cells are their own faces; near two gauges only a few
    # of them are kept, and a far point makes the locator take them all (tolerance 1e-9 of the
    # panel size, as for the box).
    from correlate.readers.model import Mesh

    X, Y = np.meshgrid(np.linspace(0, 40, 81), np.linspace(0, 30, 61), indexing="ij")
    pts = np.c_[X.ravel(), Y.ravel(), np.full(X.size, 2.0)]
    nid = np.arange(len(pts)).reshape(X.shape)
    quads = np.stack([nid[:-1, :-1].ravel(), nid[1:, :-1].ravel(), nid[1:, 1:].ravel(),
                      nid[:-1, 1:].ravel()], axis=1)
    mesh = Mesh(points=pts, blocks=(("quad", quads),), block_ids=(0,), family="shell",
                source="panel")

    def clamp(p):
        return np.c_[np.clip(p[:, 0], 0, 40), np.clip(p[:, 1], 0, 30), np.full(len(p), 2.0)]

    seeds = np.array([[5.0, 5.0, 2.1], [0.2, 8.0, 1.9]])
    part = build_surface(mesh, near=seeds, reach=1.0)
    assert part.region is not None and part.n_faces < len(quads) / 4
    rng = np.random.default_rng(5)
    near = seeds[rng.integers(0, 2, 100)] + rng.uniform(-0.4, 0.4, (100, 3))
    loc = Locator(mesh, part)
    np.testing.assert_allclose(loc.project(near).point, clamp(near), rtol=0, atol=4e-8)
    assert loc.surface is part
    far = np.array([[35.0, 25.0, 2.5]])
    np.testing.assert_allclose(loc.project(far).point, clamp(far), rtol=0, atol=4e-8)
    assert loc.surface.region is None
