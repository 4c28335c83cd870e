"""Builders shared by the tests: tiny meshes of every cell type, gauge maps and small studies.

Quadratic cells get their extra nodes by mapping the linear cell's corners with the quadratic
element's own reference nodes, so straight-sided cells are affine; `curve` then bends the whole
mesh by a smooth map (which keeps linear fields in physical coordinates exactly representable,
the isoparametric property).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from correlate.mechanics import elements, mapping
from correlate.readers.gauges import validate_gauges
from correlate.readers.model import Mesh

KUHN = ((0, 1, 3, 7), (0, 1, 5, 7), (0, 2, 3, 7), (0, 2, 6, 7), (0, 4, 5, 7), (0, 4, 6, 7))


def box_points(nx: int, ny: int, nz: int, size=(4.0, 3.0, 2.0)) -> tuple[np.ndarray, np.ndarray]:
    xs, ys, zs = (np.linspace(0, s, n + 1) for s, n in zip(size, (nx, ny, nz), strict=True))
    X, Y, Z = np.meshgrid(xs, ys, zs, indexing="ij")
    pts = np.c_[X.ravel(), Y.ravel(), Z.ravel()]
    nid = np.arange(len(pts)).reshape(X.shape)
    hexes = []
    for i in range(nx):
        for j in range(ny):
            for k in range(nz):
                c = [nid[i + a, j + b, k + d] for (a, b, d) in
                     ((0, 0, 0), (1, 0, 0), (1, 1, 0), (0, 1, 0),
                      (0, 0, 1), (1, 0, 1), (1, 1, 1), (0, 1, 1))]
                hexes.append(c)
    return pts, np.array(hexes)


def _linear_cells(kind: str, hexes: np.ndarray) -> tuple[str, np.ndarray]:
    if kind == "hexahedron":
        return kind, hexes
    if kind == "tetra":
        # Kuhn split uses the lexicographic corner order (x fastest)
        lex = hexes[:, [0, 1, 3, 2, 4, 5, 7, 6]]
        return kind, np.concatenate([lex[:, list(t)] for t in KUHN])
    if kind == "wedge":
        return kind, np.concatenate([hexes[:, [0, 1, 2, 4, 5, 6]], hexes[:, [0, 2, 3, 4, 6, 7]]])
    raise ValueError(kind)


def _orient(points: np.ndarray, ctype: str, conn: np.ndarray) -> np.ndarray:
    """Flip cells with a negative Jacobian at their centre (swap two corners consistently)."""
    el = elements.ELEMENTS[ctype]
    xi = np.tile(el.reference_nodes.mean(axis=0), (len(conn), 1))
    _, det = mapping.physical_gradients(ctype, points[conn], xi)
    bad = det < 0
    if ctype == "tetra":
        conn[bad] = conn[bad][:, [0, 2, 1, 3]]
    elif ctype == "wedge":
        conn[bad] = conn[bad][:, [0, 2, 1, 3, 5, 4]]
    return conn


QUADRATIC = {"tetra10": "tetra", "hexahedron20": "hexahedron", "hexahedron27": "hexahedron"}
SOLID_TYPES = ["tetra", "tetra10", "hexahedron", "hexahedron20", "hexahedron27", "wedge"]


def solid_mesh(ctype: str, n=(3, 2, 2), size=(4.0, 3.0, 2.0), curve: float = 0.0,
               warp=None) -> Mesh:
    """A box of cells of one type; quadratic nodes merged by position; optionally bent.

    ``warp`` maps the box's points (n, 3) to new positions after the quadratic nodes are made;
    points that land on each other (a seam) are merged.
    """
    pts, hexes = box_points(*n, size=size)
    lin = QUADRATIC.get(ctype, ctype)
    _, conn = _linear_cells(lin, hexes)
    conn = _orient(pts, lin, conn.copy())
    if ctype in QUADRATIC:
        ref = elements.ELEMENTS[ctype].reference_nodes
        xi = np.tile(ref, (len(conn), 1))
        corners = np.repeat(pts[conn], len(ref), axis=0)
        new = mapping.map_to_physical(lin, corners, xi)
        key = np.round(new, 9)
        uniq, inv = np.unique(key, axis=0, return_inverse=True)
        pts = uniq.astype(float)
        conn = inv.reshape(len(conn), len(ref))
    if curve:
        x, y, z = pts.T
        pts = np.c_[x + curve * np.sin(y) * np.sin(z), y + curve * np.sin(x) * z, z + curve * np.sin(x)]
    if warp is not None:
        pts = warp(pts)
        uniq, inv = np.unique(np.round(pts, 9), axis=0, return_inverse=True)
        pts, conn = uniq.astype(float), inv.ravel()[conn]
    return Mesh(points=pts, blocks=((ctype, np.asarray(conn, dtype=np.int64)),), block_ids=(0,),
                family="solid", source=f"{ctype} box")


def gauge_frame(rows: list[dict]) -> pd.DataFrame:
    """A validated gauge map from a list of partial rows."""
    base = {"rosette": "", "face": "", "length": "", "kt": ""}
    df = pd.DataFrame([{**base, **{k: str(v) for k, v in r.items()}} for r in rows]).astype(str)
    return validate_gauges(df, source="test gauges")


def write_block_study(folder, *, readings_rows=None, extra_toml: str = "", gauges=None,
                      ctype: str = "hexahedron20"):
    """A 4 x 3 x 2 (mm) block with two linear strain cases and a gauge map, written to ``folder``.

    Case 'pull' is a linear field along x, case 'side' a shear-dominated one; both are analytic, so
    the model readings that tests compare against come from the fields, not from the tool.
    Returns the study path.
    """
    import meshio

    mesh = solid_mesh(ctype, n=(4, 3, 2))
    x = mesh.points
    pull = np.zeros((len(x), 6))
    pull[:, 0] = 1e-3 * (1.0 + 0.1 * x[:, 0])
    pull[:, 1] = pull[:, 2] = -0.3 * pull[:, 0]
    side = np.zeros((len(x), 6))
    side[:, 0] = 2e-4 * (1.0 + 0.2 * x[:, 1])
    side[:, 1] = 4e-4
    side[:, 2] = -0.3 / 0.7 * (side[:, 0] + side[:, 1])  # traction-free top face, nu = 0.3
    side[:, 3] = 6e-4                      # engineering shear xy
    meshio.write(folder / "block.vtu", meshio.Mesh(x, [(ctype, mesh.blocks[0][1])],
                                                   point_data={"E_pull": pull, "E_side": side}))
    if gauges is None:
        gauges = default_gauges()
    gauges.to_csv(folder / "gauges.csv", index=False)
    if readings_rows is not None:
        readings_rows.to_csv(folder / "readings.csv", index=False)
    study = folder / "study.toml"
    study.write_text(
        'title = "Synthetic block"\n'
        '[model]\nfile = "block.vtu"\nlength_unit = "mm"\nstress_unit = "MPa"\n'
        '[[case]]\nname = "pull"\nstrain = "E_pull"\n'
        '[[case]]\nname = "side"\nstrain = "E_side"\n'
        "[material]\nE = 70000.0\nnu = 0.3\n"
        '[gauges]\nfile = "gauges.csv"\nposition_tol = 0.2\nangle_tol = 2.0\n'
        + ('[readings]\nfile = "readings.csv"\nzero = "first"\n'
           '[[load]]\ncolumn = "P_kN"\ncase = "pull"\nreference = 10.0\n'
           '[[load]]\ncolumn = "S_kN"\ncase = "side"\nreference = 2.0\n'
           "[criteria]\nrelative = 0.10\nabsolute_ue = 20.0\n" if readings_rows is not None else "")
        + extra_toml)
    return study


def default_gauges() -> pd.DataFrame:
    """Ten single gauges on the top face and a 0/45/90 rosette; directions vary."""
    rows = []
    for i in range(10):
        th = np.radians(18.0 * i)
        rows.append(dict(gauge=f"S{i:02d}", x=0.6 + 0.3 * i, y=0.8 + 0.15 * (i % 4), z=2.0,
                         dir_x=round(np.cos(th), 6), dir_y=round(np.sin(th), 6), dir_z=0,
                         length=0.3, kt=0.01, rosette=""))
    for k, th in enumerate((0, 45, 90)):
        t = np.radians(th)
        rows.append(dict(gauge=f"R-{'abc'[k]}", x=2.0, y=2.2, z=2.0, dir_x=round(np.cos(t), 6),
                         dir_y=round(np.sin(t), 6), dir_z=0, length=0.3, kt=0.005, rosette="R"))
    return pd.DataFrame(rows)


# ---------------------------------------------------------------------------------------------
# Added for the bad-input, interrupt and property tests: readings that agree with the block's
# analytic fields, so a run on them passes every criterion (and needs no diagnosis search).

BLOCK_LOADS = ((0.0, 0.0), (2.5, 0.5), (5.0, 1.0), (10.0, 2.0), (0.0, 0.0))  # (P_kN, S_kN) per step


def block_strain(case: str, x: np.ndarray) -> np.ndarray:
    """Tensor strain (n, 3, 3) [m/m] of write_block_study's analytic cases at points x (n, 3)."""
    e = np.zeros((len(x), 3, 3))
    if case == "pull":
        exx = 1e-3 * (1.0 + 0.1 * x[:, 0])
        e[:, 0, 0], e[:, 1, 1], e[:, 2, 2] = exx, -0.3 * exx, -0.3 * exx
    else:
        exx, eyy = 2e-4 * (1.0 + 0.2 * x[:, 1]), np.full(len(x), 4e-4)
        e[:, 0, 0], e[:, 1, 1], e[:, 2, 2] = exx, eyy, -0.3 / 0.7 * (exx + eyy)
        e[:, 0, 1] = e[:, 1, 0] = 3e-4  # engineering shear 6e-4 in the file
    return e


def block_indicated(gauges: pd.DataFrame, case: str, nu0: float = 0.285) -> np.ndarray:
    """What each top-face gauge indicates for one block case [microstrain].

    Strain transformation along the grid d and across it t = n x d (n = +z on the top face), and
    the transverse-sensitivity relation e_ind = (e_a + Kt e_t) / (1 - nu0 Kt) (Vishay
    Micro-Measurements Tech Note TN-509). The fields are linear, so the grid average is the
    centre value.
    """
    x = gauges[["x", "y", "z"]].to_numpy(dtype=float)
    d = gauges[["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float)
    d = d / np.linalg.norm(d, axis=1, keepdims=True)
    t = np.cross([0.0, 0.0, 1.0], d)
    e = block_strain(case, x)
    ea = np.einsum("gi,gij,gj->g", d, e, d)
    et = np.einsum("gi,gij,gj->g", t, e, t)
    kt = pd.to_numeric(gauges.get("kt", 0.0), errors="coerce")
    kt = np.broadcast_to(np.nan_to_num(np.asarray(kt, dtype=float)), ea.shape)
    return (ea + kt * et) / (1.0 - nu0 * kt) * 1e6


def block_readings(gauges: pd.DataFrame, loads=BLOCK_LOADS, offset: float = 0.0) -> pd.DataFrame:
    """Readings per step [microstrain] equal to the analytic model readings, plus an offset."""
    loads = np.asarray(loads, dtype=float)
    f = np.c_[loads[:, 0] / 10.0, loads[:, 1] / 2.0]  # the references of write_block_study
    data = f @ np.vstack([block_indicated(gauges, "pull"), block_indicated(gauges, "side")])
    df = pd.DataFrame(np.round(data + offset, 3), columns=list(gauges["gauge"]))
    df.insert(0, "S_kN", loads[:, 1])
    df.insert(0, "P_kN", loads[:, 0])
    df.insert(0, "step", np.arange(len(loads)))
    return df


def write_small_study(folder, *, gauges=None, readings: bool = True, extra_toml: str = ""):
    """write_block_study on linear hexahedra with a few gauges and agreeing readings (fast)."""
    if gauges is None:
        gauges = default_gauges().iloc[[0, 1, 2]].reset_index(drop=True)
    rows = block_readings(gauges) if readings else None
    return write_block_study(folder, readings_rows=rows, gauges=gauges, ctype="hexahedron",
                             extra_toml=extra_toml)


def flat_panel(z0: float = 5.0) -> tuple[np.ndarray, np.ndarray]:
    """Points and quads of a flat 6 x 4 panel of unit quads at height z0 (normal +z)."""
    xs, ys = np.linspace(0, 6, 7), np.linspace(0, 4, 5)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    pts = np.c_[X.ravel(), Y.ravel(), np.full(X.size, z0)]
    nid = np.arange(len(pts)).reshape(X.shape)
    quads = np.array([[nid[i, j], nid[i + 1, j], nid[i + 1, j + 1], nid[i, j + 1]]
                      for i in range(6) for j in range(4)])
    return pts, quads


# ---------------------------------------------------------------------------------------------
# Added for the measurement-chain tests (issue 14): the block study with leads, a gauge lot and a
# thermocouple column, and raw readings made by the Wheatstone circuit (two voltage dividers;
# Hoffmann, An Introduction to Measurements using Strain Gages, HBM 1989) with the thermal output
# since the tare as a resistance change 2.00 x (TO(T) - TO(T_tare)) and GF(T) = GF (1 + tc/100
# (T - 24)/100) (Vishay Micro-Measurements TN-504, from memory). Every value is invented.

CHAIN_RG = 350.0                      # ohm, gauge and completion resistors
CHAIN_GF, CHAIN_GF_DAQ, CHAIN_TC = 2.11, 2.00, 1.2  # lot's gauge factor, acquisition setting, % per 100 degC
CHAIN_TO = (-28.0, 2.2, -0.055, 3.0e-4, -5.0e-7)  # invented thermal output a0..a4 [ue / degC^j]
CHAIN_TEMPS = (23.0, 35.0, 50.0, 80.0, 95.0)      # degC per step of BLOCK_LOADS (a heated test)
CHAIN_PRESTRAIN = (420.0, -260.0, 150.0)          # ue in each grid at the tare (bonding, preload)
CHAIN_LEADS = {"S00": ("3-wire", 4.0), "S01": ("2-wire", 2.5), "S02": ("3-wire", 6.0)}
CHAIN_STUDY = ('[[gauge_lot]]\nname = "L1"\nthermal_output = [-28.0, 2.2, -0.055, 3.0e-4, -5.0e-7]\n'
         'gauge_factor = 2.11\ngauge_factor_tc = 1.2\nrange_C = [-50.0, 150.0]\n'
         '[thermal]\ncolumn = "temp_C"\n')


def chain_thermal_output(t):
    return sum(a * np.asarray(t, dtype=float) ** j for j, a in enumerate(CHAIN_TO))


def chain_indicated(true_ue, t, wiring, rl):
    """What a constant-voltage quarter bridge shows at CHAIN_GF_DAQ, from the circuit.

    Arm 1 is the gauge with its lead(s), arm 2 the completion resistor with the second lead of a
    3-wire circuit (TT-612, from memory), arms 3 and 4 the instrument's half bridge. A 2-wire
    circuit is taken balanced (completion arm equal to the gauge arm at zero strain, as the
    bridge balance leaves it; common practice), where CHAIN_RG/(CHAIN_RG + 2 RL) is exact.
    """
    x = CHAIN_GF * (1 + CHAIN_TC / 100 * (np.asarray(t) - 24.0) / 100) * true_ue * 1e-6 \
        + 2.0 * (chain_thermal_output(t) - chain_thermal_output(CHAIN_TEMPS[0])) * 1e-6    # dR/R of the grid
    leads_in_gauge_arm = 2.0 if wiring == "2-wire" else 1.0
    r1 = CHAIN_RG * (1 + x) + leads_in_gauge_arm * rl
    r2 = CHAIN_RG + leads_in_gauge_arm * rl
    ratio = r1 / (r1 + r2) - CHAIN_RG / (CHAIN_RG + CHAIN_RG)
    return 4.0 * ratio / CHAIN_GF_DAQ * 1e6


def chain_study(folder, gauges, *, shunt=False, wiring_rows=CHAIN_LEADS):
    """The block study with the chain's columns and tables, and readings made by the circuit."""
    g = gauges.copy()
    g["gauge_ohm"] = CHAIN_RG
    g["wiring"] = [wiring_rows[n][0] for n in g["gauge"]]
    g["lead_ohm"] = [wiring_rows[n][1] for n in g["gauge"]]
    g["daq_gauge_factor"] = CHAIN_GF_DAQ
    g["lot"] = "L1"
    if shunt:
        # the shunt across the gauge, at the gauge end of the 3-wire leads, sees CHAIN_RG/(CHAIN_RG + RL)
        # (TN-514, from memory): a measured over expected response of exactly that
        g["shunt_gain"] = [CHAIN_RG / (CHAIN_RG + CHAIN_LEADS[n][1]) if n == "S02" else "" for n in g["gauge"]]
    truth = block_readings(gauges)                        # the model's readings: the truth
    names = list(gauges["gauge"])
    raw = pd.DataFrame({"step": truth["step"], "P_kN": truth["P_kN"], "S_kN": truth["S_kN"],
                        "temp_C": CHAIN_TEMPS})
    for j, n in enumerate(names):
        wiring, rl = CHAIN_LEADS[n]
        raw[n] = chain_indicated(truth[n].to_numpy() + CHAIN_PRESTRAIN[j], np.array(CHAIN_TEMPS), wiring, rl)
    study = write_small_study(folder, gauges=g, extra_toml=CHAIN_STUDY)
    study.write_text(study.read_text(encoding="utf-8").replace(
        "[gauges]\n", '[gauges]\nnonlinearity = "quarter-bridge"\n'), encoding="utf-8")
    with open(folder / "readings.csv", "w", encoding="utf-8", newline="\n") as fh:
        fh.write(",".join(raw.columns) + "\n" + ",".join(["", "kN", "kN", "degC"]
                                                         + ["ue"] * len(names)) + "\n")
        raw.to_csv(fh, index=False, header=False, lineterminator="\n", float_format="%.12g")
    return study, truth, raw


def renumbered(mesh):
    """The same meshio mesh with its points numbered backwards (cells and point data follow):
    another mesh to a comparison of arrays, the same part to the physics."""
    import meshio

    order = np.arange(len(mesh.points))[::-1]
    return meshio.Mesh(mesh.points[::-1].copy(),
                       [meshio.CellBlock(c.type, order[c.data]) for c in mesh.cells],
                       point_data={k: v[::-1].copy() for k, v in mesh.point_data.items()},
                       cell_data=mesh.cell_data)
