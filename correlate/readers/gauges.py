"""Gauge map reader: one row per grid, validated into a tidy DataFrame.

Stage: input. In: a CSV path (or a DataFrame). Out: a DataFrame with the columns below, typed,
with gauge ids as strings. Coordinates and lengths stay in the model's length unit.
"""

from __future__ import annotations

import difflib
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from correlate.core.errors import CorrelateWarning, GaugeError
from correlate.core.headers import read_csv_table
from correlate.readers.bridge_map import BRIDGE_COLUMNS
from correlate.readers.gauge_chain import CHAIN_COLUMNS, CHAIN_NUMERIC, CHAIN_TEXT, chain_problems

REQUIRED = ("gauge", "x", "y", "z", "dir_x", "dir_y", "dir_z")
NUMERIC_OPTIONAL = ("length", "kt", "position_tol", "angle_tol", "nu0", "normal_x", "normal_y",
                    "normal_z", "gauge_factor", "daq_gauge_factor", "polarity", "range_ue")
TEXT_OPTIONAL = ("rosette", "face", "mount", "grid", "channel")
KNOWN = REQUIRED + NUMERIC_OPTIONAL + TEXT_OPTIONAL + CHAIN_COLUMNS + BRIDGE_COLUMNS
NUMERIC = REQUIRED[1:] + NUMERIC_OPTIONAL + CHAIN_NUMERIC + ("arm",)
FACES = ("", "top", "bottom")
MOUNTS = ("", "surface", "embedded")
KT_LIMIT = 0.1  # |kt| above this is almost surely a percentage


def read_gauges(path: str | Path) -> pd.DataFrame:
    """Read and validate a gauge map CSV. See :func:`validate_gauges` for the result."""
    path = Path(path)
    if path.is_dir():
        raise GaugeError(f"gauge map '{path}' is a folder, not a file; give the path of the gauge "
                         "map CSV in [gauges] file")
    try:
        raw, sep, problems = read_csv_table(path, path.name, dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, UnicodeDecodeError, pd.errors.EmptyDataError) as exc:
        raise GaugeError(f"{path.name}: cannot be read as CSV ({exc}); save the gauge map as "
                         "comma-separated UTF-8 text with a header row") from None
    if problems:
        raise GaugeError(*problems)
    if sep == ";":   # decimal commas
        for col in NUMERIC:
            if col in raw.columns:
                raw[col] = raw[col].str.replace(",", ".", regex=False)
    return validate_gauges(raw, source=path.name)


def _numeric(raw: pd.DataFrame, col: str, source: str, problems: list[str]) -> np.ndarray:
    texts = raw[col].astype(str).str.strip()
    # pandas parses the plain numbers at once; the rest (blank, text, odd spellings) cell by cell
    out = pd.to_numeric(texts, errors="coerce").to_numpy(dtype=float, na_value=np.nan, copy=True)
    out[~np.isfinite(out)] = np.nan
    for i in np.flatnonzero(np.isnan(out)):
        text = texts.iloc[i]
        if not text:
            continue
        try:
            value = float(text)
        except ValueError:
            value = None
        if value is None or not np.isfinite(value):  # 'nan', 'inf' and 1e999 are no coordinates
            hint = ("write decimal points, not decimal commas" if "," in text
                    else "give a number or leave the cell blank")
            problems.append(f"{source} row {i + 2} (gauge '{raw['gauge'].iloc[i]}'), column {col}: "
                            f"'{text}' is not a {'number' if value is None else 'finite number'}; "
                            f"{hint}")
            continue
        out[i] = value
    return out


# (column, lowest, highest, whether the lowest is allowed, what it is): physical ranges per grid
RANGES = (
    ("nu0", 0.0, 0.5, True, "Poisson's ratio of the calibration material (0.285 is usual)"),
    ("gauge_factor", 0.0, np.inf, False, "the grid's gauge factor (about 2 for foil gauges)"),
    ("daq_gauge_factor", 0.0, np.inf, False, "the gauge factor the acquisition was set to"),
    ("range_ue", 0.0, np.inf, False, "the channel's range in microstrain"),
    ("position_tol", 0.0, np.inf, True, "a placement tolerance (length unit)"),
    ("angle_tol", 0.0, np.inf, True, "an angle tolerance in degrees"),
)


def _check_ranges(out: pd.DataFrame, source: str, problems: list[str]) -> None:
    """One line per grid whose value lies outside its physical range, and channels read twice."""
    for col, low, high, closed, what in RANGES:
        values = out[col].to_numpy(dtype=float)
        bad = np.isfinite(values) & ((values < low if closed else values <= low) | (values >= high))
        for i in np.flatnonzero(bad):
            bound = f"is outside [{low:g}, {high:g})" if np.isfinite(high) else \
                f"must be {'at least' if closed else 'above'} {low:g}"
            problems.append(f"{source} row {out['row'].iloc[i]} (gauge '{out['gauge'].iloc[i]}'): "
                            f"{col} = {values[i]:g} {bound}, the range of {what}")
    gf, daq = out["gauge_factor"].to_numpy(dtype=float), out["daq_gauge_factor"].to_numpy(dtype=float)
    alone = [str(g) for g, a, b in zip(out["gauge"], gf, daq, strict=True)
             if np.isfinite(a) and not np.isfinite(b)]
    if alone and not problems:  # a refused map needs no warning beside its errors
        warnings.warn(f"{source}: gauge_factor is given without daq_gauge_factor for "
                      f"{', '.join(alone)}: no gauge-factor correction is applied to them (give "
                      "the factor the acquisition was set to)", CorrelateWarning, stacklevel=3)
    channel = [c or g for g, c in zip(out["gauge"], out["channel"], strict=True)]
    seen: dict[str, str] = {}
    for g, c in zip(out["gauge"], channel, strict=True):
        if c in seen:
            problems.append(f"{source}: gauges '{seen[c]}' and '{g}' both read channel '{c}'; "
                            "each readings column belongs to one gauge: correct the channel column")
        seen.setdefault(c, g)


def validate_gauges(raw: pd.DataFrame, *, source: str = "gauge map") -> pd.DataFrame:
    """Check a gauge map and return it typed.

    Returns
    -------
    DataFrame
        ``gauge`` (str), ``x, y, z, dir_x, dir_y, dir_z`` (float), ``length`` (0 = point reading),
        ``kt`` (fraction, 0 when blank), ``rosette``, ``face``, ``mount``, ``grid`` (str, '' when
        blank), the optional numeric columns (NaN when blank), and ``row`` (1-based line in the file).

    Raises
    ------
    GaugeError
        One line per problem: missing columns, duplicate ids, non-numbers, zero-length directions,
        Kt given in percent, unknown face, rosettes with fewer than three grids
        or with grids too close in angle to determine the strain state.
    """
    raw = raw.copy()
    raw.columns = [str(c).strip() for c in raw.columns]
    problems: list[str] = []
    missing = [c for c in REQUIRED if c not in raw.columns]
    if missing:
        raise GaugeError(f"{source}: columns {', '.join(missing)} are missing; a gauge map needs "
                         f"{', '.join(REQUIRED)} (found {', '.join(raw.columns)})")
    if len(raw) == 0:
        raise GaugeError(f"{source}: no gauges listed; add one row per grid")
    for col in raw.columns:
        if col not in KNOWN:
            near = difflib.get_close_matches(col, KNOWN, n=1)
            if near:
                problems.append(f"{source}: unknown column '{col}'; did you mean '{near[0]}'?")
    out = pd.DataFrame({"gauge": raw["gauge"].astype(str).str.strip()})
    out["row"] = np.arange(len(raw)) + 2
    for col in REQUIRED[1:] + NUMERIC_OPTIONAL:
        out[col] = _numeric(raw, col, source, problems) if col in raw.columns else np.nan
    for col in TEXT_OPTIONAL:
        out[col] = raw[col].astype(str).str.strip() if col in raw.columns else ""
    if any(c in raw.columns for c in CHAIN_COLUMNS):  # else the map reads exactly as before
        for col in CHAIN_NUMERIC:
            out[col] = _numeric(raw, col, source, problems) if col in raw.columns else np.nan
        for col in CHAIN_TEXT:
            out[col] = raw[col].astype(str).str.strip() if col in raw.columns else ""
        problems += chain_problems(out, source)
    for col in BRIDGE_COLUMNS:  # only when the file has them: else the map reads as before
        if col in raw.columns:
            out[col] = raw[col].astype(str).str.strip()
    out["length"] = out["length"].fillna(0.0)
    out["kt"] = out["kt"].fillna(0.0)

    empty = out["gauge"] == ""
    for row in out.loc[empty, "row"]:
        problems.append(f"{source} row {row}: gauge id is blank; give every grid an id")
    dup = out["gauge"][out["gauge"].duplicated(keep=False) & ~empty]
    for gid in dict.fromkeys(dup):
        rows = out.loc[out["gauge"] == gid, "row"].tolist()
        problems.append(f"{source}: gauge id '{gid}' appears on rows {rows}; ids must be unique "
                        "(give each rosette grid its own id)")
    for col in REQUIRED[1:]:
        for _, r in out[out[col].isna() & ~empty].iterrows():
            if f"column {col}:" not in " ".join(problems):
                problems.append(f"{source} row {r['row']} (gauge '{r['gauge']}'): {col} is blank")
    d = out[["dir_x", "dir_y", "dir_z"]].to_numpy()
    for i in np.flatnonzero(np.all(np.nan_to_num(d) == 0, axis=1)):
        problems.append(f"{source} row {out['row'].iloc[i]} (gauge '{out['gauge'].iloc[i]}'): grid "
                        "direction dir_x, dir_y, dir_z has zero length; give the grid axis")
    if (out["length"] < 0).any():
        for _, r in out[out["length"] < 0].iterrows():
            problems.append(f"{source} row {r['row']} (gauge '{r['gauge']}'): length {r['length']} "
                            "is negative")
    _check_ranges(out, source, problems)
    for _, r in out[out["kt"].abs() > KT_LIMIT].iterrows():
        problems.append(f"{source} row {r['row']} (gauge '{r['gauge']}'): kt = {r['kt']} is too "
                        f"large for a fraction; if it is a percentage, write {r['kt'] / 100:g}")
    for _, r in out[~out["face"].isin(FACES)].iterrows():
        problems.append(f"{source} row {r['row']} (gauge '{r['gauge']}'): face '{r['face']}' is not "
                        "known; use top or bottom (shell models), or leave it blank")
    for _, r in out[~out["mount"].isin(MOUNTS)].iterrows():
        problems.append(f"{source} row {r['row']} (gauge '{r['gauge']}'): mount '{r['mount']}' is "
                        "not known; use surface or embedded")
    pol = out["polarity"].dropna()
    for _, r in out.loc[pol.index[~pol.isin([1.0, -1.0])]].iterrows():
        problems.append(f"{source} row {r['row']} (gauge '{r['gauge']}'): polarity "
                        f"{r['polarity']:g}; expected +1 or -1 (or blank)")
    for rid, group in out[out["rosette"] != ""].groupby("rosette", sort=False):
        if len(group) < 3:
            problems.append(f"{source}: rosette '{rid}' has {len(group)} grid(s) "
                            f"({', '.join(group['gauge'])}); a rosette needs at least three")
        else:
            gd = group[["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float)
            if np.isfinite(gd).all() and np.any(gd != 0, axis=1).all():  # else reported above
                problems += _rosette_angle_problems(str(rid), group, source)
    if problems:
        raise GaugeError(*problems)
    out[["dir_x", "dir_y", "dir_z"]] = _unit_rows(d)
    return out


def _unit_rows(d: np.ndarray) -> np.ndarray:
    """Rows scaled to unit length; scaled by their largest entry first, so 1e200 cannot overflow."""
    d = d / np.max(np.abs(d), axis=1, keepdims=True)
    return d / np.linalg.norm(d, axis=1, keepdims=True)


def _rosette_angle_problems(rid: str, group: pd.DataFrame, source: str) -> list[str]:
    """Refuse rosette grids whose directions cannot determine the in-plane strain state.

    The grid map does not know the face yet, so the grids' plane is the one their directions
    span (the eigenvector of the smallest eigenvalue of sum d d^T is its normal); the angles in
    it go through the same condition-number test the reduction applies once the gauges are
    located (:func:`correlate.mechanics.rosette.check_angles`).
    """
    from correlate.mechanics.rosette import check_angles, grid_angles

    if (group["grid"] != "").all():
        group = group.sort_values("grid", kind="stable")
    d = _unit_rows(group[["dir_x", "dir_y", "dir_z"]].to_numpy(dtype=float))
    w, v = np.linalg.eigh(d.T @ d)
    ids = ", ".join(group["gauge"])
    if w[1] <= 1e-12 * w[2]:
        msg = (f"{source}: rosette '{rid}' grids ({ids}) all lie along one direction; a rosette "
               "needs grids at three different angles - check dir_x, dir_y, dir_z")
        return [msg]
    try:
        # angles to 0.001 deg: the message shows them, and float noise would only obscure them
        check_angles(np.round(grid_angles(d, v[:, 0]), 3), name=rid)
    except GaugeError as exc:
        return [f"{source}: {line} (grids {ids})" for line in exc.problems]
    return []
