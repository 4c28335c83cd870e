"""The bad-input catalogue: hostile and careless mutations of the demo study, run end to end.

Every case starts from a copy of the packaged demo inputs (study.toml, gauges.csv, readings.csv,
bracket.vtu: an invented part and invented data), breaks or bends one thing (or, in the class
"several", several), runs the command line in this process (``correlate.commands.cli.main``, the
same code the executable runs) and asserts the expected behaviour:

* refused: exit code 2, exactly one stderr line (one per problem in the class "several"), which
  matches the case's culprit pattern (the file, row, gauge, table key or array at fault), no
  "Traceback", no output folder created, no ``.partial-`` / ``.old-`` folder left behind, and every
  input file byte-identical (SHA-256 before and after);
* accepted (the mutated input is legitimate): the expected exit code (0, or 3 for a gate that
  must fail), the same numbers as the unmutated study, the inputs unchanged, nothing left behind;
* either: the tool may refuse (as above) or accept (as above); both are fine, a third way is not.

Classes (the id's first word): control (the harness itself), loss (data loss), silent (silent
wrong results), crash (internal errors and unsafe outputs), several (several problems in one
``check``). The rules asserted are the tool's documented interface (README.md "Exit codes" and
"Commands and outputs": inputs are never changed, an output folder is staged beside its target, one
line per problem). "The same numbers" is a metamorphic check (common practice): a reformatting or
reordering of an input that keeps its meaning must not change the result, so the reference is the
run of the unmutated demo study, itself checked against the readings file by pandas
(``test_reference``).
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import io
import json
import math
import re
import shutil
import subprocess
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from correlate.commands.cli import main
from correlate.commands.demo import demo_folder

INPUTS = ("study.toml", "gauges.csv", "readings.csv", "bracket.vtu", "bracket_coarse.vtu",
          "dic_frames.parquet", "dic_landmarks.csv")
# one unit of the written precision: README "microstrain to 0.001"
UE_ATOL = 1e-3


# --------------------------------------------------------------------------------------------
# running the executable


def correlate(args: list[str] | tuple[str, ...], cwd: Path) -> subprocess.CompletedProcess:
    """Run ``correlate --quiet ARGS`` in ``cwd`` (in this process); capture its text output."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.chdir(cwd), contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["--quiet", *args])
    return subprocess.CompletedProcess(list(args), code, out.getvalue(), err.getvalue())


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def hashes(files: tuple[Path, ...]) -> dict[str, str | None]:
    """SHA-256 of every input, or None for one that no longer exists (or is no longer a file)."""
    return {str(f): sha256(f) if f.is_file() else None for f in files}


def leftovers(root: Path) -> list[str]:
    """Staging folders left behind anywhere under ``root``."""
    return sorted(str(p.relative_to(root)) for p in root.rglob("*")
                  if ".partial-" in p.name or ".old-" in p.name)


# --------------------------------------------------------------------------------------------
# fixtures: the demo once per session, and the reference runs


@dataclass(frozen=True)
class Demo:
    base: Path        # the four input files of the demo study
    run: Path         # run --no-report of the unmutated study (the reference numbers)
    worse: Path       # run of the same test with a worse model (pull reference 10 -> 8 kN)


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Demo:
    root = tmp_path_factory.mktemp("demo")
    base = root / "base"
    base.mkdir()
    for name in INPUTS:
        shutil.copy2(demo_folder() / name, base / name)
    run = correlate(["run", str(base / "study.toml"), "--out", str(root / "run"), "--no-report"],
                    root)
    assert run.returncode == 0, run.stderr
    worse_study = root / "worse"
    shutil.copytree(base, worse_study)
    edit(worse_study / "study.toml", "reference = 10.0", "reference = 8.0")
    worse = correlate(["run", str(worse_study / "study.toml"), "--out", str(root / "worse_run"),
                       "--no-report"], root)
    assert worse.returncode == 0, worse.stderr
    return Demo(base=base, run=root / "run", worse=root / "worse_run")


@dataclass(frozen=True)
class Ctx:
    """Where one case is built: ``study`` is a fresh copy of the demo inputs in tmp_path."""

    tmp: Path
    demo: Demo

    @property
    def study(self) -> Path:
        return self.tmp / "study"

    def fresh(self, where: Path | None = None) -> Path:
        target = where or self.study
        shutil.copytree(self.demo.base, target)
        return target


@dataclass(frozen=True)
class Call:
    """One command line: arguments, working folder, the output folder it names, its inputs."""

    args: tuple[str, ...]
    cwd: Path
    out: Path | None
    inputs: tuple[Path, ...]


# --------------------------------------------------------------------------------------------
# builders: edits of the copied study


def edit(path: Path, old: str, new: str) -> None:
    """Replace text the demo is known to write (fails loudly if the demo changes)."""
    text = path.read_text(encoding="utf-8")
    assert old in text, f"{old!r} not in {path.name}"
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


def study_edit(ctx: Ctx, old: str, new: str) -> None:
    edit(ctx.study / "study.toml", old, new)


def append_study(ctx: Ctx, text: str) -> None:
    path = ctx.study / "study.toml"
    path.write_text(path.read_text(encoding="utf-8") + text, encoding="utf-8")


def set_gauges(ctx: Ctx, gauge: str, /, **values: str) -> None:
    """Set cells of the gauge map row of ``gauge`` (adding columns as needed)."""
    path = ctx.study / "gauges.csv"
    df = pd.read_csv(path, dtype=str, keep_default_na=False)
    assert gauge in set(df["gauge"]), gauge
    for col, value in values.items():
        if col not in df.columns:
            df[col] = ""
        df.loc[df["gauge"] == gauge, col] = value
    df.to_csv(path, index=False)


def readings_lines(ctx: Ctx) -> list[str]:
    return (ctx.study / "readings.csv").read_text(encoding="utf-8").splitlines()


def write_readings(ctx: Ctx, lines: list[str]) -> None:
    (ctx.study / "readings.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")


def set_readings(ctx: Ctx, step: int | None, column: str, value: str) -> None:
    """Set ``column`` on the data row of ``step`` (every data row when None)."""
    lines = readings_lines(ctx)
    header = lines[0].split(",")
    k = header.index(column)
    for i in range(2, len(lines)):  # line 0 header, line 1 units row
        cells = lines[i].split(",")
        if step is None or cells[0] == str(step):
            cells[k] = value
            lines[i] = ",".join(cells)
    write_readings(ctx, lines)


def rename_gauge(ctx: Ctx, old: str, new: str) -> None:
    set_gauges(ctx, old, gauge=new)
    lines = readings_lines(ctx)
    header = lines[0].split(",")
    header[header.index(old)] = new
    write_readings(ctx, [",".join(header), *lines[1:]])


def files_in(*folders: Path) -> tuple[Path, ...]:
    return tuple(sorted(p for f in folders for p in f.rglob("*") if p.is_file()))


def run_call(ctx: Ctx, *extra: str, out: str = "out", cmd: str = "run") -> Call:
    """``correlate run study.toml --out OUT --no-report`` in the study folder."""
    args = [cmd, "study.toml", "--out", out, *extra]
    if cmd == "run":
        args.append("--no-report")
    target = (ctx.study / out) if out else ctx.study
    inside = target.resolve() != ctx.study.resolve() and ctx.study.resolve() in target.resolve().parents
    # a folder the command writes inside the study folder (a previous run) is output, not input
    inputs = tuple(f for f in files_in(ctx.study)
                   if not (inside and target.resolve() in f.resolve().parents))
    return Call(tuple(args), ctx.study, target, inputs)


def check_call(ctx: Ctx) -> Call:
    return Call(("check", "study.toml"), ctx.study, None, files_in(ctx.study))


def runs_for_compare(ctx: Ctx, new_from: Path | None = None) -> tuple[Path, Path]:
    old, new = ctx.tmp / "old", ctx.tmp / "new"
    shutil.copytree(ctx.demo.run, old)
    shutil.copytree(new_from or ctx.demo.run, new)
    return old, new


def compare_call(ctx: Ctx, old: Path, new: Path, *extra: str, out: Path | None = None) -> Call:
    args = ["compare", str(old), str(new), *extra]
    if out is not None:
        args += ["--out", str(out)]
    return Call(tuple(args), ctx.tmp, out, files_in(old, new))


def tamper_summary(path: Path, change: Callable[[dict], object]) -> None:
    data = json.loads(path.read_text(encoding="utf-8"))
    change(data)  # edits in place
    path.write_text(json.dumps(data), encoding="utf-8")


# --------------------------------------------------------------------------------------------
# verifiers for accepted inputs


def same_numbers(call: Call, ctx: Ctx) -> list[str]:
    """The run's gauges.csv and verdict equal the reference run's (metamorphic, common practice)."""
    problems = []
    path = call.out / "gauges.csv" if call.out else None
    if path is None or not path.is_file():
        return [f"no gauges.csv in {call.out}"]
    keys = ["gauge", "sequence", "step"]
    got = pd.read_csv(path).sort_values(keys).reset_index(drop=True)
    ref = pd.read_csv(ctx.demo.run / "gauges.csv").sort_values(keys).reset_index(drop=True)
    if got[keys].astype(str).values.tolist() != ref[keys].astype(str).values.tolist():
        return [f"gauge/step rows differ: {len(got)} rows against {len(ref)} in the reference"]
    for col in ("predicted_ue", "measured_ue"):
        # tolerance: one unit of the written precision (0.001 ue); reordered sums may round apart
        if not np.allclose(got[col], ref[col], rtol=0, atol=UE_ATOL, equal_nan=True):
            worst = np.nanmax(np.abs(got[col].to_numpy() - ref[col].to_numpy()))
            problems.append(f"{col} differs from the reference by up to {worst:.4g} ue")
    if got["status"].astype(str).tolist() != ref["status"].astype(str).tolist():
        bad = got.loc[got["status"] != ref["status"], "gauge"].unique()[:5]
        problems.append(f"status differs for {', '.join(map(str, bad))}")
    s_got = json.loads((call.out / "summary.json").read_text(encoding="utf-8"))
    s_ref = json.loads((ctx.demo.run / "summary.json").read_text(encoding="utf-8"))
    if s_got["verdict"]["result"] != s_ref["verdict"]["result"]:
        problems.append(f"verdict {s_got['verdict']['result']!r} != {s_ref['verdict']['result']!r}")
    return problems


def written(call: Call, ctx: Ctx) -> list[str]:
    return [] if call.out and (call.out / "summary.json").is_file() else [f"nothing in {call.out}"]


FORMULA_START = ("=", "+", "-", "@")


def no_raw_formula_cells(call: Call, ctx: Ctx) -> list[str]:
    """No CSV cell starts with = + - @ unless it is a number (spreadsheet formula injection,
    OWASP "CSV Injection"; common practice: prefix such text with a quote)."""
    found = []
    for path in sorted(call.out.glob("*.csv")):
        with path.open(newline="", encoding="utf-8") as f:
            for row in csv.reader(f):
                for cell in row:
                    if cell.startswith(FORMULA_START):
                        try:
                            float(cell)
                        except ValueError:
                            found.append(f"{path.name}: {cell!r}")
    return [f"raw formula-like cells: {', '.join(sorted(set(found))[:6])}"] if found else []


def not_evaluated(gauge: str, step: int) -> Callable[[Call, Ctx], list[str]]:
    def verify(call: Call, ctx: Ctx) -> list[str]:
        df = pd.read_csv(call.out / "gauges.csv")
        row = df[(df["gauge"] == gauge) & (df["step"] == step)]
        if len(row) != 1:
            return [f"{gauge} step {step}: {len(row)} rows"]
        r = row.iloc[0]
        if r["status"] in ("pass", "fail") or math.isfinite(float(r["measured_ue"])):
            return [f"{gauge} step {step} evaluated: status {r['status']}, "
                    f"measured {r['measured_ue']}"]
        return []
    return verify


# --------------------------------------------------------------------------------------------
# the catalogue


@dataclass(frozen=True)
class Mutation:
    """One mutation: its class, how to build it, what the tool must do.

    ``accept``: "refuse" (exit 2, one line per pattern in ``culprit``), "ok" (exit ``code`` and
    ``verify`` finds nothing wrong) or "either".
    """

    kind: str
    build: Callable[[Ctx], Call]
    culprit: tuple[str, ...] = ()
    accept: str = "refuse"
    verify: Callable[[Call, Ctx], list[str]] | None = None
    code: int = 0
    note: str = ""


CATALOGUE: dict[str, Mutation] = {}


def case(name: str, kind: str, culprit: str | tuple[str, ...] = (), **kw) -> Callable:
    def register(build: Callable[[Ctx], Call]) -> Callable[[Ctx], Call]:
        pattern = (culprit,) if isinstance(culprit, str) else culprit
        CATALOGUE[f"{kind}-{name}"] = Mutation(kind, build, pattern, **kw)
        return build
    return register


# ---- control: the harness itself


@case("valid-study", "control", accept="ok", verify=same_numbers)
def _valid(ctx):
    ctx.fresh()
    return run_call(ctx)


@case("rerun-into-own-subfolder-force", "control", accept="ok", verify=same_numbers)
def _rerun(ctx):
    # a run folder inside the study folder, replaced with --force: the documented use
    ctx.fresh()
    assert correlate(["run", "study.toml", "--out", "run", "--no-report"], ctx.study).returncode == 0
    return run_call(ctx, "--force", out="run")


@case("compare-worse-model-gates", "control", accept="ok", code=3)
def _compare_worse(ctx):
    old, new = runs_for_compare(ctx, ctx.demo.worse)
    return compare_call(ctx, old, new, "--fail-if-worse")


# ---- 1. data loss


@case("out-dot-force", "loss", r"(?i)(out|output).*(input|study|contains|inside)")
def _out_dot(ctx):
    ctx.fresh()
    return run_call(ctx, "--force", out=".")


@case("out-empty", "loss", r"(?i)--out.*(empty|blank|'')")
def _out_empty(ctx):
    ctx.fresh()
    return run_call(ctx, out="")


@case("out-empty-force", "loss", r"(?i)--out.*(empty|blank|'')")
def _out_empty_force(ctx):
    ctx.fresh()
    return run_call(ctx, "--force", out="")


@case("out-symlink-to-study-force", "loss", r"(?i)(link|study|input|contains)")
def _out_link(ctx):
    ctx.fresh()
    (ctx.tmp / "link").symlink_to(ctx.study, target_is_directory=True)
    call = run_call(ctx, "--force", out="../link")
    return Call(call.args, call.cwd, ctx.study, call.inputs)


@case("out-is-study-file-force", "loss", r"study\.toml")
def _out_study(ctx):
    ctx.fresh()
    return run_call(ctx, "--force", out="study.toml")


@case("out-above-input-force", "loss", r"(?i)(input|study|contains|inside)")
def _out_above(ctx):
    proj = ctx.tmp / "proj"
    where = ctx.fresh(proj / "study")
    return Call(("run", "study.toml", "--out", "..", "--force", "--no-report"), where, proj,
                files_in(proj))


@case("out-is-readings-file-force", "loss", r"readings\.csv")
def _out_readings(ctx):
    ctx.fresh()
    return run_call(ctx, "--force", out="readings.csv")


@case("out-dotdot-back-to-study-force", "loss", r"(?i)(out|output).*(input|study|contains)")
def _out_dotdot(ctx):
    ctx.fresh()
    return run_call(ctx, "--force", out="../study")


@case("predict-out-dot-force", "loss", r"(?i)(out|output).*(input|study|contains|inside)")
def _predict_dot(ctx):
    ctx.fresh()
    return run_call(ctx, "--force", out=".", cmd="predict")


@case("predict-out-is-model-force", "loss", r"bracket\.vtu")
def _predict_model(ctx):
    ctx.fresh()
    return run_call(ctx, "--force", out="bracket.vtu", cmd="predict")


@case("out-is-model-folder-outside-study-force", "loss", r"(?i)(input|model|bracket|contains)")
def _out_model_dir(ctx):
    # the model lives in a sibling folder; --out names that folder
    ctx.fresh()
    model = ctx.tmp / "model"
    model.mkdir()
    shutil.move(ctx.study / "bracket.vtu", model / "bracket.vtu")
    study_edit(ctx, 'file = "bracket.vtu"', 'file = "../model/bracket.vtu"')
    return Call(("run", "study.toml", "--out", "../model", "--force", "--no-report"), ctx.study,
                model, files_in(ctx.study, model))


@case("compare-out-is-old-run-force", "loss", r"(?i)(old|input|run folder|compare)")
def _compare_out_old(ctx):
    old, new = runs_for_compare(ctx)
    return compare_call(ctx, old, new, "--force", out=old)


@case("compare-out-is-new-run-force", "loss", r"(?i)(new|input|run folder|compare)")
def _compare_out_new(ctx):
    old, new = runs_for_compare(ctx)
    return compare_call(ctx, old, new, "--force", out=new)


# ---- 2. silent wrong results


PULL = 'column = "F_pull_kN"\ncase = "pull"\nreference = 10.0\n'
SIDE = '[[load]]\ncolumn = "F_side_kN"\ncase = "side"\nreference = 2.0\n'


@case("load-pasted-twice", "silent",
      r"(?i)F_pull_kN.*(twice|two|2 times|more than once|duplicate|repeat)")
def _load_twice(ctx):
    ctx.fresh()
    study_edit(ctx, PULL, PULL + "\n[[load]]\n" + PULL)
    return run_call(ctx)


@case("case-with-no-load", "silent", r"(?i)(case 'side'|F_side_kN)")
def _case_no_load(ctx):
    # the side load's block deleted: case 'side' and readings column F_side_kN are left unused
    ctx.fresh()
    study_edit(ctx, SIDE, "")
    return run_call(ctx)


@case("components-repeated-name", "silent", r"(?i)(components.*'?xy'?|'?xy'?.*components)")
def _components_twice(ctx):
    ctx.fresh()
    study_edit(ctx, 'strain = "E_side"\ncomponents = ["xx", "yy", "zz", "xy", "yz", "xz"]',
               'strain = "E_side"\ncomponents = ["xx", "yy", "zz", "xy", "xy", "xz"]')
    return run_call(ctx)


@case("kt-corrected-string-false", "silent", r"kt_corrected")
def _kt_corrected(ctx):
    ctx.fresh()
    study_edit(ctx, "zero_tol = 0.01", 'zero_tol = 0.01\nkt_corrected = "false"')
    return run_call(ctx)


@case("band-string-no", "silent", r"\bband\b")
def _band_no(ctx):
    ctx.fresh()
    study_edit(ctx, "calibration_poisson = 0.285", 'calibration_poisson = 0.285\nband = "no"')
    return run_call(ctx)


@case("grid-points-boolean", "silent", r"grid_points")
def _grid_points(ctx):
    # true is an int in Python: grid_points = true would silently mean 1 point
    ctx.fresh()
    study_edit(ctx, "calibration_poisson = 0.285", "calibration_poisson = 0.285\ngrid_points = true")
    return run_call(ctx)


@case("calibration-poisson-2.85", "silent", r"calibration_poisson.*2\.85")
def _nu0_study(ctx):
    ctx.fresh()
    study_edit(ctx, "calibration_poisson = 0.285", "calibration_poisson = 2.85")
    return run_call(ctx)


@case("gauge-nu0-28.5", "silent", r"G02.*nu0|nu0.*G02")
def _nu0_gauge(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", nu0="28.5")
    return run_call(ctx)


@case("gauge-factor-zero", "silent", r"G02.*gauge_factor|gauge_factor.*G02")
def _gf_zero(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", gauge_factor="0", daq_gauge_factor="2.0")
    return run_call(ctx)


@case("daq-gauge-factor-negative", "silent", r"G02.*daq_gauge_factor|daq_gauge_factor.*G02")
def _daq_gf(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", gauge_factor="2.1", daq_gauge_factor="-2")
    return run_call(ctx)


@case("range-ue-negative", "silent", r"G02.*range_ue|range_ue.*G02")
def _range(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", range_ue="-5000")
    return run_call(ctx)


@case("kt-5", "silent", r"G02.*\bkt\b|\bkt\b.*G02")
def _kt5(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", kt="5")
    return run_call(ctx)


@case("gauge-length-negative", "silent", r"G02.*length|length.*G02")
def _length_neg(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", length="-3")
    return run_call(ctx)


@case("gauge-angle-tol-negative", "silent", r"G02.*angle_tol|angle_tol.*G02")
def _angle_tol_neg(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", angle_tol="-2")
    return run_call(ctx)


@case("readings-newest-first", "silent", r"(?i)readings\.csv.*step", accept="either",
      verify=same_numbers)
def _newest_first(ctx):
    ctx.fresh()
    lines = readings_lines(ctx)
    write_readings(ctx, lines[:2] + lines[:1:-1])
    return run_call(ctx)


def _german(text: str) -> str:
    """1512.5 -> 1.512,5 ; -0.4 -> -0,4 (decimal comma and thousands dot)."""
    try:
        value = float(text)
    except ValueError:
        return text
    whole, _, frac = text.lstrip("-").partition(".")
    grouped = f"{int(whole):,}".replace(",", ".")
    sign = "-" if text.startswith("-") and value != 0 else ""
    return sign + grouped + ("," + frac if frac else "")


@case("readings-semicolon-thousands-dots", "silent",
      r"(?i)readings\.csv.*(line|row).*(thousand|1\.512|separator)", accept="either",
      verify=same_numbers)
def _thousands(ctx):
    ctx.fresh()
    lines = readings_lines(ctx)
    out = [lines[0].replace(",", ";"), lines[1].replace(",", ";")]
    out += [";".join(_german(c) for c in line.split(",")) for line in lines[2:]]
    # the file really has thousands dots (a value of 1,000 or more, written 1.234,5)
    assert any(re.search(r"\d\.\d{3},\d", line) for line in out)
    write_readings(ctx, out)
    return run_call(ctx)


@case("two-gauges-one-channel", "silent", r"(?i)channel.*G03|G03.*channel")
def _one_channel(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", channel="G03")  # G03 reads column G03 by its id
    return run_call(ctx)


@case("readings-duplicate-gauge-column", "silent", r"(?i)readings\.csv.*G02")
def _dup_column(ctx):
    ctx.fresh()
    lines = readings_lines(ctx)
    header = lines[0].split(",")
    header[header.index("G03")] = "G02"
    write_readings(ctx, [",".join(header), *lines[1:]])  # G03 has no column of its own now
    return run_call(ctx)


OVERRIDES = "".join(f'\n[[override]]\ngauge = "G07"\naction = "{a}"\nreason = "rig note {a}"\n'
                    for a in ("keep", "exclude", "reverse"))


@case("overrides-keep-exclude-reverse-one-gauge", "silent",
      r"(?i)G07.*override|override.*G07")
def _overrides(ctx):
    ctx.fresh()
    append_study(ctx, OVERRIDES)
    return run_call(ctx)


@case("compare-slope-tol-nan", "silent", r"--slope-tol")
def _slope_nan(ctx):
    old, new = runs_for_compare(ctx, ctx.demo.worse)
    return compare_call(ctx, old, new, "--fail-if-worse", "--slope-tol", "nan")


@case("compare-rms-tol-negative", "silent", r"--rms-tol")
def _rms_neg(ctx):
    old, new = runs_for_compare(ctx)
    return compare_call(ctx, old, new, "--fail-if-worse", "--rms-tol", "-1")


@case("compare-slope-tol-inf", "silent", r"--slope-tol")
def _slope_inf(ctx):
    old, new = runs_for_compare(ctx, ctx.demo.worse)
    return compare_call(ctx, old, new, "--fail-if-worse", "--slope-tol", "inf")


@case("all-loads-zero", "silent", r"(?i)(F_pull_kN|F_side_kN|load)")
def _loads_zero(ctx):
    ctx.fresh()
    set_readings(ctx, None, "F_pull_kN", "0.0")
    set_readings(ctx, None, "F_side_kN", "0.0")
    return run_call(ctx)


@case("readings-one-data-row", "silent", r"readings\.csv")
def _one_row(ctx):
    ctx.fresh()
    write_readings(ctx, readings_lines(ctx)[:3])
    return run_call(ctx)


@case("readings-every-gauge-blank", "silent", r"readings\.csv")
def _all_blank(ctx):
    ctx.fresh()
    header = readings_lines(ctx)[0].split(",")
    for col in header[6:]:
        set_readings(ctx, None, col, "")
    return run_call(ctx)


@case("position-tol-inf", "silent", r"position_tol")
def _pos_inf(ctx):
    ctx.fresh()
    study_edit(ctx, "position_tol = 1.0", "position_tol = inf")
    return run_call(ctx)


@case("snap-tol-minus-inf", "silent", r"snap_tol")
def _snap_inf(ctx):
    ctx.fresh()
    study_edit(ctx, "snap_tol = 0.5", "snap_tol = -inf")
    return run_call(ctx)


@case("criteria-relative-nan", "silent", r"relative")
def _rel_nan(ctx):
    ctx.fresh()
    study_edit(ctx, "relative = 0.10", "relative = nan")
    return run_call(ctx)


@case("criteria-relative-10", "silent", r"relative.*10")
def _rel_10(ctx):
    ctx.fresh()
    study_edit(ctx, "relative = 0.10", "relative = 10")
    return run_call(ctx)


@case("criteria-absolute-ue-huge", "silent", r"absolute_ue")
def _abs_huge(ctx):
    # a floor of 1e6 microstrain (100 % strain): every gauge passes whatever it reads
    ctx.fresh()
    study_edit(ctx, "absolute_ue = 50.0", "absolute_ue = 1e6")
    return run_call(ctx)


@case("load-reference-inf", "silent", r"(?i)reference")
def _ref_inf(ctx):
    ctx.fresh()
    study_edit(ctx, "reference = 10.0", "reference = inf")
    return run_call(ctx)


@case("material-nu-as-percent", "silent", r"\bnu\b")
def _nu_pct(ctx):
    ctx.fresh()
    study_edit(ctx, "\nnu = 0.33", "\nnu = 33")  # [material], not the free text in [model]
    return run_call(ctx)


# ---- 3. crashes


@case("model-file-is-folder", "crash", r"(?i)bracket\.vtu.*(folder|director)")
def _model_dir(ctx):
    ctx.fresh()
    (ctx.study / "bracket.vtu").unlink()
    (ctx.study / "bracket.vtu").mkdir()
    return run_call(ctx)


@case("gauges-file-is-folder", "crash", r"(?i)gauges\.csv.*(folder|director)")
def _gauges_dir(ctx):
    ctx.fresh()
    (ctx.study / "gauges.csv").unlink()
    (ctx.study / "gauges.csv").mkdir()
    return run_call(ctx)


@case("readings-file-is-folder", "crash", r"(?i)readings\.csv.*(folder|director)")
def _readings_dir(ctx):
    ctx.fresh()
    (ctx.study / "readings.csv").unlink()
    (ctx.study / "readings.csv").mkdir()
    return run_call(ctx)


@case("study-path-is-folder", "crash", r"(?i)(folder|director)")
def _study_dir(ctx):
    ctx.fresh()
    return Call(("check", "."), ctx.study, None, files_in(ctx.study))


@case("out-name-245-chars", "crash", r"(?i)(--out|name|long)", accept="either", verify=written)
def _long_name(ctx):
    # 245 characters: a legal file name (NAME_MAX is 255 on Linux file systems)
    ctx.fresh()
    return run_call(ctx, out="r" * 245)


@case("out-parent-is-a-file", "crash", r"readings\.csv")
def _out_under_file(ctx):
    ctx.fresh()
    return run_call(ctx, out="readings.csv/run")


@case("out-parent-read-only", "crash", r"(?i)(permission|read-only|cannot write|not writable)",
      accept="either", verify=written,
      note="run as root: chmod 555 does not stop root, so exit 0 is the expected result here")
def _read_only(ctx):
    ctx.fresh()
    ro = ctx.tmp / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    call = run_call(ctx, out="../ro/out")
    return Call(call.args, call.cwd, ro / "out", call.inputs)


@case("gauge-coordinate-nan", "crash", r"G02.*\bx\b")
def _coord_nan(ctx):
    ctx.fresh()
    set_gauges(ctx, "G02", x="nan")
    return run_call(ctx)


@case("readings-load-nan", "crash", r"(?i)F_pull_kN")
def _load_nan(ctx):
    ctx.fresh()
    set_readings(ctx, 5, "F_pull_kN", "nan")
    return run_call(ctx)


@case("readings-gauge-inf", "crash", r"(?i)readings\.csv.*G02", accept="either",
      verify=not_evaluated("G02", 5))
def _gauge_inf(ctx):
    ctx.fresh()
    set_readings(ctx, 5, "G02", "inf")
    return run_call(ctx)


@case("summary-keys-removed", "crash", r"summary\.json.*(fit|verdict)")
def _summary_removed(ctx):
    old, new = runs_for_compare(ctx)
    tamper_summary(new / "summary.json", lambda d: (d.pop("fit"), d.pop("verdict")))
    return compare_call(ctx, old, new, "--fail-if-worse")


@case("summary-wrong-types", "crash", r"summary\.json.*(slope_origin|rms_ue|failing)")
def _summary_types(ctx):
    old, new = runs_for_compare(ctx)

    def change(d):
        d["fit"]["slope_origin"] = "1.05"
        d["fit"]["rms_ue"] = [23.6]
        d["verdict"]["failing"] = "none"
    tamper_summary(new / "summary.json", change)
    return compare_call(ctx, old, new, "--fail-if-worse")


@case("summary-fit-null", "crash", r"summary\.json.*fit")
def _summary_null(ctx):
    old, new = runs_for_compare(ctx)
    tamper_summary(new / "summary.json", lambda d: d.update(fit=None))
    return compare_call(ctx, old, new, "--fail-if-worse")


@case("summary-is-a-list", "crash", r"summary\.json")
def _summary_list(ctx):
    old, new = runs_for_compare(ctx)
    (new / "summary.json").write_text("[1, 2, 3]", encoding="utf-8")
    return compare_call(ctx, old, new, "--fail-if-worse")


@case("summary-reference-step-wrong-type", "crash", r"summary\.json.*reference_step")
def _summary_ref(ctx):
    old, new = runs_for_compare(ctx)
    tamper_summary(new / "summary.json", lambda d: d.update(reference_step="last"))
    return compare_call(ctx, old, new, "--fail-if-worse")


@case("gauge-ids-formula-like", "crash", r"(?i)gauge.*'?[=+@-]G0", accept="either",
      verify=no_raw_formula_cells)
def _formula_ids(ctx):
    ctx.fresh()
    for old, new in (("G02", "=G02"), ("G03", "+G03"), ("G04", "-G04"), ("G05", "@G05")):
        rename_gauge(ctx, old, new)
    return run_call(ctx)


@case("study-utf8-bom", "crash", r"(?i)study\.toml.*(BOM|byte.order)", accept="either",
      verify=same_numbers)
def _study_bom(ctx):
    ctx.fresh()
    path = ctx.study / "study.toml"
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    return run_call(ctx)


@case("readings-utf8-bom", "crash", r"(?i)readings\.csv.*(BOM|byte.order)", accept="either",
      verify=same_numbers)
def _readings_bom(ctx):
    ctx.fresh()
    path = ctx.study / "readings.csv"
    path.write_bytes(b"\xef\xbb\xbf" + path.read_bytes())
    return run_call(ctx)


@case("readings-utf16", "crash", r"(?i)readings\.csv.*(UTF-16|UTF-8|encoding)", accept="either",
      verify=same_numbers)
def _readings_utf16(ctx):
    # a spreadsheet's "Unicode text" export
    ctx.fresh()
    path = ctx.study / "readings.csv"
    path.write_bytes(path.read_text(encoding="utf-8").encode("utf-16"))
    return run_call(ctx)


@case("readings-crlf", "crash", r"readings\.csv", accept="ok", verify=same_numbers)
def _readings_crlf(ctx):
    ctx.fresh()
    path = ctx.study / "readings.csv"
    path.write_bytes(path.read_bytes().replace(b"\n", b"\r\n"))
    return run_call(ctx)


@case("readings-trailing-comment-line", "crash", r"(?i)readings\.csv.*(line 25|row 2[45])")
def _readings_comment(ctx):
    ctx.fresh()
    write_readings(ctx, [*readings_lines(ctx), "# end of log, operator AB"])
    return run_call(ctx)


@case("readings-header-only", "crash", r"readings\.csv")
def _readings_header(ctx):
    ctx.fresh()
    write_readings(ctx, readings_lines(ctx)[:2])
    return run_call(ctx)


@case("gauges-header-only", "crash", r"gauges\.csv")
def _gauges_header(ctx):
    ctx.fresh()
    path = ctx.study / "gauges.csv"
    path.write_text(path.read_text(encoding="utf-8").splitlines()[0] + "\n", encoding="utf-8")
    return run_call(ctx)


@case("gauges-semicolon", "crash", r"(?i)gauges\.csv.*(semicolon|;|separat)", accept="either",
      verify=same_numbers)
def _gauges_semicolon(ctx):
    ctx.fresh()
    path = ctx.study / "gauges.csv"
    path.write_text(path.read_text(encoding="utf-8").replace(",", ";"), encoding="utf-8")
    return run_call(ctx)


@case("readings-file-is-the-gauge-map", "crash", r"(?i)gauges\.csv")
def _readings_is_gauges(ctx):
    ctx.fresh()
    study_edit(ctx, 'file = "readings.csv"', 'file = "gauges.csv"')
    return run_call(ctx)


@case("model-file-is-the-readings", "crash", r"(?i)readings\.csv")
def _model_is_readings(ctx):
    ctx.fresh()
    study_edit(ctx, 'file = "bracket.vtu"', 'file = "readings.csv"')
    return run_call(ctx)


@case("model-file-symlink-loop", "crash", r"(?i)bracket\.vtu")
def _model_loop(ctx):
    ctx.fresh()
    (ctx.study / "bracket.vtu").unlink()
    (ctx.study / "bracket.vtu").symlink_to(ctx.study / "bracket.vtu")
    return run_call(ctx)


# ---- 4. several problems at once in check


@case("off-model-and-missing-array", "several",
      (r"G03.*(15|surface|model)", r"(?i)E_sidee"))
def _two(ctx):
    ctx.fresh()
    set_gauges(ctx, "G03", z="-15.0000")  # G03 sits on the face z = 0: now 15 mm below it
    study_edit(ctx, 'strain = "E_side"', 'strain = "E_sidee"')
    return check_call(ctx)


@case("two-gauges-off-model", "several", (r"G03.*(15|surface|model)", r"G05.*(15|surface|model)"))
def _two_off(ctx):
    ctx.fresh()
    set_gauges(ctx, "G03", z="-15.0000")
    set_gauges(ctx, "G05", z="21.0000")  # G05 sits on z = 6: now 15 mm above it
    return check_call(ctx)


@case("study-gauges-readings-one-each", "several",
      (r"snap_toll", r"G02.*\bkt\b|\bkt\b.*G02", r"(?i)readings\.csv.*G04"))
def _three_files(ctx):
    ctx.fresh()
    study_edit(ctx, "snap_tol = 0.5", "snap_toll = 0.5")
    set_gauges(ctx, "G02", kt="5")
    set_readings(ctx, 5, "G04", "12.5x")
    return check_call(ctx)


@case("off-model-and-bad-reading", "several",
      (r"G03.*(15|surface|model)", r"(?i)readings\.csv.*(line 6|step 5).*G05|G05.*12\.5x"))
def _gauge_and_reading(ctx):
    ctx.fresh()
    set_gauges(ctx, "G03", z="-15.0000")
    set_readings(ctx, 5, "G05", "12.5x")
    return check_call(ctx)


# --------------------------------------------------------------------------------------------
# the test


def judge(m: Mutation, call: Call, proc: subprocess.CompletedProcess, before: dict,
          after: dict, out_existed: bool, tmp: Path, ctx: Ctx) -> list[str]:
    """Every way the outcome departs from the expectation (empty: as expected)."""
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    problems = []
    if "Traceback" in proc.stderr:
        problems.append("traceback on stderr")
    changed = [Path(k).name for k in before if before[k] != after[k]]
    if changed:
        problems.append(f"inputs changed or gone: {', '.join(changed[:5])}")
    if left := leftovers(tmp):
        problems.append(f"left behind: {', '.join(left[:3])}")
    refuse = m.accept == "refuse" or (m.accept == "either" and proc.returncode != m.code)
    if not refuse:
        if proc.returncode != m.code:
            problems.append(f"exit {proc.returncode}, expected {m.code}")
        elif m.verify is not None:
            problems += m.verify(call, ctx)
        return problems
    if proc.returncode != 2:
        problems.append(f"exit {proc.returncode}, expected 2"
                        + (f" or {m.code}" if m.accept == "either" else ""))
    want = max(1, len(m.culprit))
    if len(lines) != want:
        problems.append(f"{len(lines)} stderr line(s), expected {want}")
    for pattern in m.culprit:
        if not any(re.search(pattern, ln) for ln in lines):
            problems.append(f"no line matches /{pattern}/")
    if call.out is not None and not out_existed and call.out.exists():
        problems.append(f"output folder {call.out.name[:40]} was written")
    return problems


def _writable(root: Path) -> None:
    for p in [root, *root.rglob("*")]:
        if p.is_dir() and not p.is_symlink():
            p.chmod(0o755)


@pytest.mark.parametrize("name", list(CATALOGUE), ids=list(CATALOGUE))
def test_mutation(name, tmp_path, demo, record_property):
    m = CATALOGUE[name]
    ctx = Ctx(tmp_path, demo)
    call = m.build(ctx)
    before = hashes(call.inputs)
    out_existed = call.out is None or call.out.exists()
    try:
        proc = correlate(call.args, call.cwd)
        after = hashes(call.inputs)
        problems = judge(m, call, proc, before, after, out_existed, tmp_path, ctx)
    finally:
        _writable(tmp_path)
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    record_property("exit_code", proc.returncode)
    record_property("stderr_first", (lines[0] if lines else "").replace(str(tmp_path), "<tmp>"))
    record_property("stderr_lines", len(lines))
    record_property("deviation", "; ".join(problems))
    record_property("note", m.note)
    assert not problems, "; ".join(problems) + "\nstderr:\n" + proc.stderr[-2000:]


def test_reference(demo):
    """The reference run's readings as read (``raw_ue``, before the measurement chain's lead-wire
    and thermal corrections) are the readings file tared by the first row of each sequence
    (README: zero = "first"), recomputed here with pandas."""
    raw = pd.read_csv(demo.base / "readings.csv", skiprows=[1])
    tare = raw.groupby("sequence").transform("first")
    got = pd.read_csv(demo.run / "gauges.csv")
    gauges = [c for c in raw.columns[6:] if c != "G07"]  # G07 is flagged reversed (sign shown)
    for g in gauges:
        mine = got[got["gauge"] == g].sort_values("step")["raw_ue"].to_numpy()
        expect = (raw[g] - tare[g]).to_numpy()
        # tolerance: readings have 0.1 ue, outputs 0.001 ue; the difference is exact arithmetic
        np.testing.assert_allclose(mine, expect, rtol=0, atol=UE_ATOL, err_msg=g)
