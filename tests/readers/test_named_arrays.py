"""Only the arrays a study names are read from a VTU or XDMF/HDF5 model file.

Reference: meshio's whole-file readers (``meshio.read``, the library the tool read every model
file with before) and VTK's XML reader (``pyvista.read`` of the VTU, all arrays). The values are
compared exactly (``np.array_equal``, tolerance zero): a partial read decodes the same bytes, so
any difference is a bug, not rounding. "Did not load the others" is checked on the record the
reader returns (``ModelSource.point_data`` and ``cell_data`` hold the named arrays only).
"""

from __future__ import annotations

import os

import meshio
import numpy as np
import pytest
from builders import solid_mesh, write_small_study

from correlate.commands.cli import main
from correlate.core.errors import ModelError
from correlate.model_readings.model import open_sources
from correlate.readers import model as model_io
from correlate.readers import named_arrays
from correlate.readers.model import find_array, open_model
from correlate.readers.study import read_study

USED = ("E_pull", "E_side")


def many_arrays(mesh: meshio.Mesh) -> meshio.Mesh:
    """The mesh with 10 more arrays (point and cell, 1 to 9 components) beside the used two."""
    rng = np.random.default_rng(7)
    n_p = len(mesh.points)
    point = dict(mesh.point_data)
    for k, width in enumerate((1, 3, 6, 9, 1)):
        point[f"extra_p{k}"] = rng.normal(size=(n_p, width))
    point["temperature"] = rng.normal(size=n_p)    # listed for the unused-temperature warning
    cell = {f"extra_c{k}": [rng.normal(size=(len(c.data), w)) for c in mesh.cells]
            for k, w in enumerate((1, 6, 3, 6))}
    return meshio.Mesh(mesh.points, mesh.cells, point_data=point, cell_data=cell)


def mixed_mesh() -> meshio.Mesh:
    """Hexahedra, then tetrahedra, then hexahedra again (three cell blocks in a VTU)."""
    hexes, tets = solid_mesh("hexahedron", n=(3, 2, 2)), solid_mesh("tetra", n=(2, 2, 2))
    shift = len(hexes.points)
    points = np.vstack([hexes.points, tets.points + [5.0, 0.0, 0.0]])
    conn_h, conn_t = hexes.blocks[0][1], tets.blocks[0][1] + shift
    cells = [("hexahedron", conn_h[:6]), ("tetra", conn_t), ("hexahedron", conn_h[6:])]
    rng = np.random.default_rng(3)
    data = {name: rng.normal(size=(len(points), 6)) for name in USED}
    return many_arrays(meshio.Mesh(points, cells, point_data=data))


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("named")
    mesh = mixed_mesh()
    meshio.write(folder / "m.vtu", mesh)
    here = os.getcwd()
    os.chdir(folder)          # meshio writes the .h5 in the working folder (meshio issue 1442)
    try:
        meshio.write("m.xdmf", mesh)
    finally:
        os.chdir(here)
    return {"vtu": folder / "m.vtu", "xdmf": folder / "m.xdmf"}


@pytest.mark.parametrize("fmt", ["vtu", "xdmf"])
def test_named_arrays_are_meshios_and_the_others_are_not_loaded(files, fmt):
    path = files[fmt]
    whole = meshio.read(path)
    part = open_model(path, names={"E_side", "extra_c1"})
    assert set(part.point_data) == {"E_side"} and set(part.cell_data) == {"extra_c1"}
    ref = np.asarray(whole.point_data["E_side"])
    assert part.point_data["E_side"].dtype == ref.dtype
    assert np.array_equal(part.point_data["E_side"], ref)
    assert len(part.cell_data["extra_c1"]) == len(whole.cells) == 3
    for ours, theirs in zip(part.cell_data["extra_c1"], whole.cell_data["extra_c1"], strict=True):
        assert np.array_equal(ours, theirs)
    full = open_model(path)
    assert np.array_equal(part.mesh.points, full.mesh.points)
    assert part.mesh.block_ids == full.mesh.block_ids and part.mesh.family == full.mesh.family
    for (t1, c1), (t2, c2) in zip(part.mesh.blocks, full.mesh.blocks, strict=True):
        assert t1 == t2 and np.array_equal(c1, c2)
    # every array is listed, read or not, with its location and component count
    listed = {a.name: (a.location, a.components) for a in part.listing}
    assert listed["extra_p3"] == ("point", 9) and listed["extra_c2"] == ("cell", 3)
    assert len(listed) == 12 and part.array_names() == full.array_names()


@pytest.mark.parametrize("ctype,reshaped", [
    ("tetra", True), ("hexahedron", True), ("tetra10", True), ("hexahedron20", True),
    ("wedge", False),   # meshio reorders a wedge's nodes from VTK's: its own function is used
])
def test_a_mesh_of_one_cell_type_is_meshios(tmp_path, ctype, reshaped, monkeypatch):
    """A mesh of one cell type is cut into cells by a reshape (no index gather): the blocks and
    cell data equal meshio's whole read exactly, and meshio's splitting is skipped only there."""
    mesh = solid_mesh(ctype, n=(3, 2, 2))
    rng = np.random.default_rng(5)
    cells = [(t, c) for t, c in mesh.blocks]
    m = meshio.Mesh(mesh.points, cells, point_data={"E_pull": rng.normal(size=(len(mesh.points), 6))},
                    cell_data={"extra_c1": [rng.normal(size=(len(c), 6)) for _, c in cells]})
    meshio.write(tmp_path / "one.vtu", m)
    import meshio._vtk_common as vc
    calls = []
    monkeypatch.setattr(vc, "vtk_cells_from_data",
                        lambda *a, f=vc.vtk_cells_from_data: calls.append(1) or f(*a))
    part = named_arrays.read_named(tmp_path / "one.vtu", {"E_pull", "extra_c1"})
    whole = meshio.read(tmp_path / "one.vtu")
    assert len(part.cells) == len(whole.cells) == 1
    (kind, conn), = part.cells
    assert kind == whole.cells[0].type and conn.dtype == whole.cells[0].data.dtype
    assert np.array_equal(conn, whole.cells[0].data)
    assert np.array_equal(part.cell_data["extra_c1"][0], whole.cell_data["extra_c1"][0])
    assert np.array_equal(part.point_data["E_pull"], whole.point_data["E_pull"])
    assert bool(calls) is not reshaped


def test_the_vtu_read_agrees_with_vtks_own_whole_read(files):
    import pyvista as pv

    grid = pv.read(files["vtu"])
    part = open_model(files["vtu"], names=USED)
    assert np.array_equal(np.asarray(grid.points, dtype=float), part.mesh.points)
    for name in USED:
        assert np.array_equal(np.asarray(grid.point_data[name]), part.point_data[name])


@pytest.mark.parametrize("fmt", ["vtu", "xdmf"])
def test_a_missing_array_gets_the_whole_reads_line(files, fmt):
    """The one line names the file and the array and lists all 12 arrays present, as before."""
    part = open_model(files[fmt], names=USED)
    with pytest.raises(ModelError) as ours:
        find_array(part, "E_pul", None, case="pull")
    with pytest.raises(ModelError) as before:
        find_array(open_model(files[fmt]), "E_pul", None, case="pull")
    assert str(ours.value) == str(before.value)
    line = str(ours.value)
    assert line.startswith(f"m.{fmt}: case 'pull' names array 'E_pul'") and "\n" not in line
    assert "extra_p3 (point, 9)" in line and "extra_c3 (cell)" in line
    assert "did you mean 'E_pull'?" in line


@pytest.mark.parametrize("fmt", ["vtu", "xdmf"])
def test_an_array_not_named_is_read_when_asked_for(files, fmt):
    part = open_model(files[fmt], names=USED)
    location, values = find_array(part, "extra_c2", None, case="c")
    assert location == "cell" and "extra_c2" in part.cell_data
    whole = meshio.read(files[fmt])
    assert np.array_equal(values, np.concatenate(whole.cell_data["extra_c2"]))


def test_files_the_partial_reader_declines_are_read_whole(tmp_path):
    """A legacy .vtk is not read in part; a damaged VTU falls back to meshio's refusal."""
    mesh = mixed_mesh()
    meshio.write(tmp_path / "m.vtk", mesh)
    src = open_model(tmp_path / "m.vtk", names=USED)
    assert src.listing is None and len(src.point_data) == 8
    bad = tmp_path / "bad.vtu"
    bad.write_bytes((tmp_path / "m.vtk").read_bytes()[:400])
    with pytest.raises(ModelError, match=r"^bad\.vtu: cannot be read"):
        open_model(bad, names=USED)


def test_the_study_names_its_cases_arrays(tmp_path):
    """Arrays of the README's case keys: strain (each shell face), axes, check_stress, thermal."""
    study_path = write_small_study(tmp_path, extra_toml=(
        '[[case]]\nname = "hot"\nstrain = "E_pull"\nfile = "hot.vtu"\naxes = "dirs"\n'
        'check_stress = "S"\nthermal = { temperature = "T", alpha = 1e-5, reference_C = 20 }\n'))
    (tmp_path / "hot.vtu").write_bytes((tmp_path / "block.vtu").read_bytes())
    study = read_study(study_path)
    named = named_arrays.arrays_of_cases(study.cases, study.model_file)
    assert named[study.model_file] == {"E_pull", "E_side"}
    assert named[tmp_path / "hot.vtu"] == {"E_pull", "dirs", "S", "T"}


@pytest.mark.parametrize("fmt", ["vtu", "xdmf"])
def test_predict_is_byte_identical_to_the_whole_read(tmp_path, monkeypatch, capsys, fmt):
    study_path = write_small_study(tmp_path)
    block = many_arrays(meshio.read(tmp_path / "block.vtu"))
    here = os.getcwd()
    os.chdir(tmp_path)
    try:
        meshio.write(f"block.{fmt}", block)
    finally:
        os.chdir(here)
    study_path.write_text(study_path.read_text().replace('"block.vtu"', f'"block.{fmt}"'))
    study = read_study(study_path)
    sources = open_sources(study)
    assert set(sources[study.model_file].point_data) == set(USED)
    assert sources[study.model_file].cell_data == {}
    assert main(["--quiet", "predict", str(study_path), "--out", str(tmp_path / "part")]) == 0
    said = capsys.readouterr().err
    monkeypatch.setattr(model_io, "read_named", lambda path, names: None)  # today's whole read
    assert open_sources(study)[study.model_file].listing is None
    assert main(["--quiet", "predict", str(study_path), "--out", str(tmp_path / "whole")]) == 0
    # the same warnings, the temperature field among them (listed, though not read)
    assert capsys.readouterr().err == said and "carries a temperature field (temperature)" in said
    for name in ("model_readings.csv", "placement.csv"):
        ours, theirs = tmp_path / "part" / name, tmp_path / "whole" / name
        assert ours.read_bytes() == theirs.read_bytes(), name


def pieces_vtu(path, pieces) -> None:
    """A VTU of several pieces, written as a parallel solver's rank files are joined: each piece
    (points, cells as (VTK type, connectivity) pairs, a 6-component point array E and a cell
    array id) numbered on its own points."""
    def arr(name, values, kind, comps=1):
        text = " ".join(repr(float(v)) if kind == "Float64" else str(int(v))
                        for v in np.ravel(values))
        named = f' Name="{name}"' if name else ""
        return (f'<DataArray type="{kind}"{named} NumberOfComponents="{comps}" '
                f'format="ascii">{text}</DataArray>')
    body = []
    for points, cells, e, ids in pieces:
        conn = [i for _, c in cells for i in c]
        offsets = np.cumsum([len(c) for _, c in cells])
        body.append(
            f'<Piece NumberOfPoints="{len(points)}" NumberOfCells="{len(cells)}">'
            f'<PointData>{arr("E", e, "Float64", 6)}</PointData>'
            f'<CellData>{arr("id", ids, "Int64")}</CellData>'
            f'<Points>{arr("", points, "Float64", 3)}</Points>'
            f'<Cells>{arr("connectivity", conn, "Int64")}{arr("offsets", offsets, "Int64")}'
            f'{arr("types", [t for t, _ in cells], "UInt8")}</Cells></Piece>')
    path.write_text('<?xml version="1.0"?><VTKFile type="UnstructuredGrid" version="1.0" '
                    'byte_order="LittleEndian" header_type="UInt64"><UnstructuredGrid>'
                    + "".join(body) + "</UnstructuredGrid></VTKFile>")


def test_a_vtu_of_several_pieces_is_read_whole_as_vtk_joins_them(tmp_path):
    """Every piece's cells are kept (meshio 5.3's own VTU read keeps only the last piece's:
    meshio issue 1444). Reference: VTK's XML reader (pyvista.read), which joins the pieces;
    compared exactly (the same bytes decoded)."""
    import pyvista as pv

    rng = np.random.default_rng(3)
    tets = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1], [1, 1, 1.0]])
    hexa = np.array([[0, 0, 0], [1, 0, 0], [1, 1, 0], [0, 1, 0],
                     [0, 0, 1], [1, 0, 1], [1, 1, 1], [0, 1, 1.0]]) + [3.0, 0, 0]
    path = tmp_path / "ranks.vtu"
    pieces_vtu(path, [(tets, [(10, [0, 1, 2, 3]), (10, [1, 2, 3, 4])], rng.normal(size=(5, 6)),
                       [7, 8]),
                      (hexa, [(12, list(range(8)))], rng.normal(size=(8, 6)), [9])])
    src = open_model(path, names=["E", "id"])
    grid = pv.read(path)
    assert np.array_equal(src.mesh.points, np.asarray(grid.points, dtype=float))
    assert np.array_equal(src.point_data["E"], np.asarray(grid.point_data["E"]))
    # the cells as VTK numbers them: piece 2's hexahedron on points 5-12
    got = sorted((t, tuple(c.tolist())) for t, conn in src.mesh.blocks for c in conn)
    assert got == [("hexahedron", tuple(range(5, 13))), ("tetra", (0, 1, 2, 3)),
                   ("tetra", (1, 2, 3, 4))]
    location, ids = find_array(src, "id", None, case="c")
    assert location == "cell" and sorted(ids.ravel().tolist()) == [7, 8, 9]
    assert grid.n_cells == 3


def test_a_vtu_of_several_pieces_the_tool_cannot_read_is_refused_not_cut(tmp_path):
    """A piece holding a cell the readers do not give (a voxel) cannot be read here; the
    whole-file fallback would silently keep the last piece only, so the file is refused."""
    tet = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [0, 0, 1.0]])
    vox = np.array([[0, 0, 0], [1, 0, 0], [0, 1, 0], [1, 1, 0],
                    [0, 0, 1], [1, 0, 1], [0, 1, 1], [1, 1, 1.0]]) + [3.0, 0, 0]
    path = tmp_path / "ranks.vtu"
    pieces_vtu(path, [(tet, [(10, [0, 1, 2, 3])], np.zeros((4, 6)), [1]),
                      (vox, [(11, list(range(8)))], np.zeros((8, 6)), [2])])
    before = path.read_bytes()
    with pytest.raises(ModelError) as err:
        open_model(path, names=["E"])
    line = str(err.value)
    assert line.startswith("ranks.vtu: holds 2 pieces") and "\n" not in line
    assert "one piece" in line
    assert path.read_bytes() == before
