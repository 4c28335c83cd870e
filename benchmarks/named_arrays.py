"""Reading only the arrays a study names: `correlate predict` on a file of 12 arrays using 2.

Generates (in a scratch folder, deleted afterwards) a linear tetrahedral block of about
``--cells`` cells holding 12 point and cell arrays, of which the study's two cases use two strain
arrays, written by meshio's own writers as VTU (zlib, inline base64) and XDMF/HDF5, and by
VTK's own writer as VTU (zlib, raw appended data, as solvers write it); 50 gauges on the top face.
Measured in the same run, side by side, once each (the machine is shared):

1. floor  - the plain read of what predict needs: the geometry and the 2 arrays (VTU: VTK's XML
            reader with the other arrays disabled; XDMF: h5py reading the geometry, topology and
            the 2 datasets), in this process, warm cache;
2. meshio - meshio.read of the whole file (what every command did before), same conditions;
3. predict - `correlate --timings predict` in a fresh process: the whole command, the command
            without its start-up stage (interpreter and imports), and its "reading the model"
            stage (the part the floor measures); then the same command with the partial reader
            switched off (every array read by meshio, as before);
4. warm   - `predict` called again in this process (median of 3 after one call): the command's
            own work without imports or first-call costs.

Run:  python benchmarks/named_arrays.py [--cells 300000]     (about a minute)
Invented model and fields.
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from run import strain_field, tet_block, top_gauges

CORRELATE = [sys.executable, "-m", "correlate"]
# the same command reading every array with meshio, as before (the partial reader switched off)
WHOLE = [sys.executable, "-c", "import sys; import correlate.readers.model as m; "
         "m.read_named = lambda path, names: None; from correlate.commands.cli import main; "
         "sys.exit(main(sys.argv[1:]))"]
USED = ("E_pull", "E_bend")


def build(folder: Path, cells: int, rng: np.random.Generator) -> None:
    import meshio

    mesh = tet_block(cells, quadratic=False)
    x = mesh.points
    n_c = mesh.n_cells
    point = {"E_pull": strain_field(x), "E_bend": strain_field(x, 0.5)[:, [1, 0, 2, 3, 4, 5]]}
    for k, width in enumerate((6, 6, 3, 3, 1, 1)):
        point[f"other_p{k}"] = rng.normal(size=(len(x), width))
    cell = {f"other_c{k}": [rng.normal(size=(n_c, w))] for k, w in enumerate((6, 6, 3, 1))}
    m = meshio.Mesh(x, [(t, c) for t, c in mesh.blocks], point_data=point, cell_data=cell)
    meshio.write(folder / "model.vtu", m)
    here = os.getcwd()
    os.chdir(folder)    # meshio writes the .h5 in the working folder (meshio issue 1442)
    try:
        meshio.write("model.xdmf", m)
    finally:
        os.chdir(here)
    appended(folder / "model.vtu", folder / "raw.vtu")
    top_gauges(50, rng).to_csv(folder / "gauges.csv", index=False)
    for fmt, name in FORMATS:
        (folder / f"study_{fmt}.toml").write_text(
            f'title = "named arrays benchmark (generated)"\n[model]\nfile = "{name}"\n'
            'length_unit = "mm"\n'
            + "".join(f'[[case]]\nname = "{n}"\nstrain = "{n}"\n'
                      'components = ["xx", "yy", "zz", "xy", "yz", "xz"]\n' for n in USED)
            + '[material]\nE = 70000.0\nnu = 0.33\n'
            '[gauges]\nfile = "gauges.csv"\nposition_tol = 1.0\nangle_tol = 2.0\n'
            'snap_tol = 1.0\nband = false\n')


def appended(source: Path, target: Path) -> None:
    """The VTU rewritten by VTK's own writer: zlib blocks in raw appended data (solvers' layout).

    meshio writes each array inline in base64, which any XML parser must scan through; in an
    appended section VTK's reader seeks past the arrays it does not read.
    """
    from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridReader, vtkXMLUnstructuredGridWriter

    reader = vtkXMLUnstructuredGridReader()
    reader.SetFileName(str(source))
    reader.Update()
    writer = vtkXMLUnstructuredGridWriter()
    writer.SetFileName(str(target))
    writer.SetInputData(reader.GetOutput())
    writer.SetDataModeToAppended()
    writer.EncodeAppendedDataOff()
    writer.SetCompressorTypeToZLib()
    writer.Write()


FORMATS = (("vtu", "model.vtu"), ("vtu-raw", "raw.vtu"), ("xdmf", "model.xdmf"))


def floor_vtu(path: Path) -> float:
    from vtkmodules.util.numpy_support import vtk_to_numpy
    from vtkmodules.vtkIOXML import vtkXMLUnstructuredGridReader

    t = time.perf_counter()
    reader = vtkXMLUnstructuredGridReader()
    reader.SetFileName(str(path))
    reader.UpdateInformation()
    reader.GetPointDataArraySelection().DisableAllArrays()
    reader.GetCellDataArraySelection().DisableAllArrays()
    for name in USED:
        reader.GetPointDataArraySelection().EnableArray(name)
    reader.Update()
    grid = reader.GetOutput()
    got = [vtk_to_numpy(grid.GetPoints().GetData()),
           vtk_to_numpy(grid.GetCells().GetConnectivityArray())]
    got += [vtk_to_numpy(grid.GetPointData().GetArray(n)) for n in USED]
    assert all(len(a) for a in got)
    return time.perf_counter() - t


def floor_xdmf(path: Path) -> float:
    import h5py

    t = time.perf_counter()
    root = ET.parse(path).getroot()
    grid = next(root.iter("Grid"))
    wanted = [next(iter(c)).text.strip() for c in grid
              if c.tag in ("Geometry", "Topology")
              or (c.tag == "Attribute" and c.get("Name") in USED)]
    got = []
    for ref in wanted:
        file, dataset = ref.split(":")
        with h5py.File(path.parent / file, "r") as h5:
            got.append(h5[dataset][()])
    assert len(got) == 4
    return time.perf_counter() - t


def meshio_whole(path: Path) -> float:
    import meshio

    t = time.perf_counter()
    m = meshio.read(path)
    assert len(m.point_data) == 8
    return time.perf_counter() - t


def predict(study: Path, out: Path, command=CORRELATE) -> tuple[float, float, float]:
    """Wall seconds, the start-up stage and the 'reading the model' stage of `--timings`."""
    t = time.perf_counter()
    run = subprocess.run(command + ["--quiet", "--timings", "predict", str(study), "--out",
                                      str(out)], check=True, capture_output=True, text=True)
    wall = time.perf_counter() - t
    stages = {line.rsplit(None, 1)[0].strip(): float(line.rsplit(None, 1)[1])
              for line in run.stderr.splitlines() if line[-1:].isdigit()}
    return wall, stages["start-up (interpreter and imports)"], stages["reading the model"]


def predict_warm(study: Path, out: Path, n: int = 3) -> float:
    """Median seconds of `predict` called in this process after one call: no imports, no
    first-call costs; what is left is the command's own work (read, surface, locate, write)."""
    import contextlib
    import io
    import statistics

    from correlate.commands.cli import main as cli

    args = ["--quiet", "predict", str(study), "--out", str(out), "--force"]
    times = []
    with contextlib.redirect_stdout(io.StringIO()):   # the command's summary line
        assert cli(args) == 0
        for _ in range(n):
            t = time.perf_counter()
            assert cli(args) == 0
            times.append(time.perf_counter() - t)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cells", type=int, default=300_000)
    args = parser.parse_args()
    rng = np.random.default_rng(16)
    scratch = Path(tempfile.mkdtemp(prefix="correlate-named-bench-"))
    try:
        build(scratch, args.cells, rng)
        import meshio

        n_cells = sum(len(c.data) for c in meshio.read(scratch / "model.xdmf").cells)
        print(f"named-arrays benchmark: {n_cells} linear tetrahedra, 12 arrays (8 point, 4 cell), "
              "the study uses 2; 50 gauges")
        print(f"{'format':7s} {'MB':>6s} {'floor s':>8s} {'meshio s':>9s} {'predict s':>10s} "
              f"{'without start-up':>17s} {'x floor':>8s} {'reading stage s':>16s} {'x floor':>8s}"
              f" {'warm in-process s':>18s} {'x floor':>8s}")
        for fmt, name in FORMATS:
            path = scratch / name
            floor = floor_xdmf if fmt == "xdmf" else floor_vtu
            size = path.stat().st_size + sum(p.stat().st_size for p in scratch.glob("*.h5")
                                             if fmt == "xdmf")
            f = floor(path)
            whole = meshio_whole(path)
            wall, boot_stage, reading = predict(scratch / f"study_{fmt}.toml", scratch / f"o{fmt}")
            net = wall - boot_stage
            warm = predict_warm(scratch / f"study_{fmt}.toml", scratch / f"m{fmt}")
            print(f"{fmt:7s} {size / 1e6:6.1f} {f:8.2f} {whole:9.2f} {wall:10.2f} {net:17.2f} "
                  f"{net / f:8.2f} {reading:16.2f} {reading / f:8.2f} {warm:18.3f} "
                  f"{warm / f:8.2f}")
            wall, boot_stage, reading = predict(scratch / f"study_{fmt}.toml", scratch / f"w{fmt}",
                                                WHOLE)
            net = wall - boot_stage
            print(f"{'(whole-file read, as before)':>34s} {wall:10.2f} {net:17.2f} "
                  f"{net / f:8.2f} {reading:16.2f} {reading / f:8.2f}")
        print(f"machine: {os.cpu_count()} cores, shared with other developers (load average "
              f"{os.getloadavg()[0]:.2f} at the end)")
    finally:
        shutil.rmtree(scratch, ignore_errors=True)


if __name__ == "__main__":
    main()
