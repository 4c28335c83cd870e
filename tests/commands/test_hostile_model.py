"""Model files that are odd far from the gauges: the run goes on, says so, and the numbers hold.

A NaN coordinate on a node no cell uses, and infinite strain values at a node far from every
gauge, are seen in results exported by solvers (unused nodes, a singular corner). Neither can
change a gauge's reading: the shape functions of the cells under the gauges never touch them. The
reference is the run of the same study on the clean file (metamorphic check, common practice).
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import meshio
import numpy as np
import pandas as pd
import pytest
from builders import write_small_study

from correlate.commands.cli import main


def _hashes(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in folder.iterdir() if p.is_file()}


def _run(folder: Path, *extra: str) -> tuple[int, pd.DataFrame | None]:
    out = folder.parent / f"{folder.name}-out"
    code = main(["--quiet", "run", str(folder / "study.toml"), "--out", str(out), *extra])
    return code, pd.read_csv(out / "gauges.csv") if code == 0 else None


def _nan_unused_node(mesh: meshio.Mesh) -> meshio.Mesh:
    points = np.vstack([mesh.points, [[np.nan, 0.0, 0.0]]])
    data = {k: np.vstack([v, v[:1]]) for k, v in mesh.point_data.items()}
    return meshio.Mesh(points, mesh.cells, point_data=data)


def _inf_far_corner(mesh: meshio.Mesh) -> meshio.Mesh:
    # the block's corner (4, 3, 0): the gauges sit on the top face z = 2 at x <= 3.3
    far = int(np.argmin(np.linalg.norm(mesh.points - [4.0, 3.0, 0.0], axis=1)))
    data = {k: v.copy() for k, v in mesh.point_data.items()}
    data["E_side"][far] = np.inf
    return meshio.Mesh(mesh.points, mesh.cells, point_data=data)


@pytest.mark.parametrize(("change", "warned", "report"), [
    (_nan_unused_node, "1 node(s) that no cell uses have non-finite coordinates", False),
    pytest.param(_inf_far_corner, "non-finite (NaN or infinite) values", True,
                 marks=pytest.mark.render),
], ids=["nan-coordinate-unused-node", "inf-strain-far-from-gauges"])
def test_odd_values_far_from_the_gauges_are_warned_and_change_nothing(tmp_path, capsys, change,
                                                                        warned, report):
    clean, odd = tmp_path / "clean", tmp_path / "odd"
    for folder in (clean, odd):
        folder.mkdir()
        write_small_study(folder)
    meshio.write(odd / "block.vtu", change(meshio.read(odd / "block.vtu")))
    extra = () if report else ("--no-report",)
    code, ref = _run(clean, *extra)
    assert code == 0
    capsys.readouterr()
    before = _hashes(odd)
    code, got = _run(odd, *extra)
    err = capsys.readouterr().err
    assert code == 0, err
    assert warned in err and "Traceback" not in err
    assert _hashes(odd) == before
    # the readings are the same to the written precision (0.001 ue)
    pd.testing.assert_frame_equal(got, ref, check_exact=False, atol=1e-3, rtol=0)
    if report:
        assert "<html" in (tmp_path / "odd-out" / "report.html").read_text(encoding="utf-8")


def test_a_model_strain_written_in_microstrain_is_refused_naming_case_and_array(tmp_path, capsys):
    # 1 m/m is 100 % strain: no strain gauge reads it (foil gauges are rated to a few percent,
    # common practice), so strains of hundreds at the gauges are an array in microstrain. Before,
    # the run compared them (ratio 0.000) and its failure diagnosis stopped on a moved grid.
    write_small_study(tmp_path)
    block = meshio.read(tmp_path / "block.vtu")
    meshio.write(tmp_path / "block.vtu", meshio.Mesh(block.points, block.cells, point_data={
        "E_pull": block.point_data["E_pull"] * 1e6, "E_side": block.point_data["E_side"]}))
    before = _hashes(tmp_path)
    out = tmp_path / "out"
    code = main(["--quiet", "run", str(tmp_path / "study.toml"), "--out", str(out), "--no-report"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2
    assert len(err) == 1 and err[0].startswith("error: case 'pull': array 'E_pull' gives strains "
                                               "up to ")
    assert err[0].endswith("the array looks like microstrain or percent, or is not a strain (a "
                           "stress?); write the strain in m/m")
    assert not out.exists() and _hashes(tmp_path) == before


def _explode(mesh: meshio.Mesh) -> meshio.Mesh:
    """Every cell with nodes of its own (a mesh exported without merging coincident nodes); the
    nodal values are copied, so the field is the same wherever it is read."""
    cells, data, offset = [], {k: [] for k in mesh.point_data}, 0
    for block in mesh.cells:
        flat = block.data.ravel()
        for k, v in mesh.point_data.items():
            data[k].append(v[flat])
        cells.append((block.type, offset + np.arange(flat.size).reshape(block.data.shape)))
        offset += flat.size
    points = np.vstack([mesh.points[b.data.ravel()] for b in mesh.cells])
    return meshio.Mesh(points, cells, point_data={k: np.concatenate(v) for k, v in data.items()})


def test_a_mesh_whose_elements_share_no_nodes_is_named_as_such_not_as_an_overhang(tmp_path,
                                                                                capsys):
    # Exported meshes with unmerged nodes are common (a mesh written per part or per element set,
    # common practice). Every face of every element is then an outer face, and the demo's gauge
    # G09, whose grid crosses an element boundary, was refused as overhanging an edge, which sent
    # the analyst to check its position. The reference count is the demo mesh's own: every
    # exploded node has at least one twin, so the count is the nodes near the gauge.
    import shutil

    import correlate
    shutil.copytree(Path(correlate.__file__).parent / "data" / "demo", tmp_path / "d")
    model = tmp_path / "d" / "bracket.vtu"
    meshio.write(model, _explode(meshio.read(model)))
    before = _hashes(tmp_path / "d")
    out = tmp_path / "out"
    code = main(["--quiet", "run", str(tmp_path / "d" / "study.toml"), "--out", str(out),
                 "--no-report"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert err[0].startswith("error: gauge 'G09': the elements under its grid share no nodes (")
    assert "overhangs" not in err[0] and "merge coincident nodes in the pre-processor" in err[0]
    assert not out.exists() and _hashes(tmp_path / "d") == before


def test_coincident_nodes_counts_each_node_with_a_twin_once():
    # Reference: a brute-force distance matrix (numpy) over the same points.
    from correlate.model_readings.cell_checks import coincident_nodes
    rng = np.random.default_rng(5)
    base = rng.uniform(0.0, 10.0, size=(40, 3))
    points = np.vstack([base, base[:6], base[:2], base[20:21] + 1e-3])  # 6 twins, 2 of them triple
    d = np.linalg.norm(points[:, None] - points[None], axis=2)
    near = np.linalg.norm(points - [5.0, 5.0, 5.0], axis=1) <= 20.0
    twin = ((d < 1e-8) & ~np.eye(len(points), dtype=bool))[np.ix_(near, near)].any(axis=1)
    assert coincident_nodes(points, np.array([5.0, 5.0, 5.0]), 20.0, 10.0) == int(twin.sum()) == 14
    assert coincident_nodes(base, np.array([5.0, 5.0, 5.0]), 20.0, 10.0) == 0
