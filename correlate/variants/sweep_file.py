"""The sweep file: a base study, a table of model variants and the parameters to identify.

Stage: variants (input). In: a sweep file (TOML) naming the base study and a variants table (CSV).
Out: :class:`Sweep`, with one :class:`Variant` per table row (absolute paths, numeric parameters).

The sweep file::

    study = "study.toml"            # the base study: gauge map, readings, loads, criteria
    table = "variants.csv"          # name, file (or file:<case> per case), parameter columns
    parameters = ["k_joint", "E"]   # the numeric columns that are parameters
    [identify]                      # optional
    parameters = ["k_joint"]        # estimated; the others held at their base values
    response = "quadratic"          # linear | quadratic
    bounds = { k_joint = [1e3, 1e6] }
    log = ["k_joint"]               # fitted on a log10 scale

Every problem is one line naming the file, and for the table the row (counted as in a
spreadsheet: the header is row 1) and the column. A problem of one row's values (a parameter
cell that is not a number) is kept on that variant as its ``problem``: the sweep records it as
that variant's failure and goes on with the others.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from correlate.core.errors import StudyError
from correlate.core.headers import read_csv_table
from correlate.readers.records import Study
from correlate.readers.study import read_study
from correlate.variants.surface import KINDS

__all__ = ["Identify", "Sweep", "Variant", "read_sweep"]

SWEEP_KEYS = {"study", "table", "parameters", "identify", "base"}
IDENTIFY_KEYS = {"parameters", "response", "bounds", "log"}
FILE_PREFIX = "file:"


@dataclass(frozen=True)
class Variant:
    """One row of the variants table."""

    name: str
    row: int                             # spreadsheet row (header = 1)
    file: Path | None                    # the model result standing for the study's [model]
                                         # file; None when the table's cell is empty
    case_files: dict[str, Path]          # per-case files (``file:<case>`` columns)
    parameters: dict[str, float]         # NaN where the table's cell is not a number
    problem: str = ""                    # why the row cannot be a variant (recorded, not raised)


@dataclass(frozen=True)
class Identify:
    """The ``[identify]`` table: which parameters are estimated and how."""

    parameters: tuple[str, ...]
    response: str
    bounds: dict[str, tuple[float, float]]
    log: tuple[str, ...]


@dataclass(frozen=True)
class Sweep:
    """A sweep file, validated."""

    path: Path
    study: Study
    table_file: Path
    parameters: tuple[str, ...]
    variants: tuple[Variant, ...]
    identify: Identify | None = None
    base: dict[str, float] = field(default_factory=dict)   # base values of held parameters


def read_sweep(path: str | Path) -> Sweep:
    """Read and validate a sweep file and its variants table.

    Raises
    ------
    StudyError
        One line per problem (unknown key, missing file, a text value in a parameter column, a
        duplicate variant name, an ``[identify]`` parameter that is not a sweep parameter, bounds
        that are not two increasing numbers, ...).
    """
    path = Path(path)
    name = path.name
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except OSError as exc:
        raise StudyError(f"{name}: cannot read the sweep file ({exc.strerror}); check the path") \
            from None
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise StudyError(f"{name}: not valid TOML: {exc}; fix the syntax at that line") from None
    unknown = sorted(set(raw) - SWEEP_KEYS)
    if unknown:
        raise StudyError(f"{name}: unknown key(s) {', '.join(unknown)}; the sweep file accepts "
                         f"{', '.join(sorted(SWEEP_KEYS))}")
    for key in ("study", "table", "parameters"):
        if key not in raw:
            raise StudyError(f"{name}: '{key}' is missing; a sweep file needs study = \"...\", "
                             "table = \"...\" and parameters = [...]")
    parameters = _names(raw["parameters"], name, "parameters")
    study_path = _existing(path.parent, raw["study"], name, "study")
    table_file = _existing(path.parent, raw["table"], name, "table")
    study = read_study(study_path)
    variants = _table(table_file, parameters, study)
    identify = _identify(raw.get("identify"), name, parameters) if "identify" in raw else None
    base = _base(raw.get("base", {}), name, parameters)
    if identify is not None:
        held = [p for p in parameters if p not in identify.parameters and p not in base]
        if held:
            raise StudyError(f"{name}: [identify] holds {', '.join(held)} fixed but [base] gives "
                             f"no value for them; add base = {{ {held[0]} = ... }} or list them "
                             "in [identify] parameters")
    return Sweep(path=path, study=study, table_file=table_file, parameters=parameters,
                 variants=variants, identify=identify, base=base)


def _names(value: object, name: str, key: str) -> tuple[str, ...]:
    if not isinstance(value, list) or not value or not all(isinstance(v, str) for v in value):
        raise StudyError(f"{name}: {key} must be a non-empty list of column names, for example "
                         f"{key} = [\"k_joint\"]; found {value!r}")
    if len(set(value)) != len(value):
        raise StudyError(f"{name}: {key} lists a name twice ({value!r}); list each once")
    return tuple(value)


def _existing(base: Path, value: object, name: str, key: str) -> Path:
    if not isinstance(value, str) or not value.strip():
        raise StudyError(f"{name}: {key} must be a file path relative to the sweep file; found "
                         f"{value!r}")
    p = (base / value).resolve()
    if not p.is_file():
        raise StudyError(f"{name}: {key} file '{value}' does not exist (looked for {p})")
    return p


def _table(table_file: Path, parameters: tuple[str, ...], study: Study) -> tuple[Variant, ...]:
    name = table_file.name
    try:
        df, sep, faults = read_csv_table(table_file, name, dtype=str, keep_default_na=False)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise StudyError(f"{name}: cannot be read as CSV ({str(exc).strip()}); one row per "
                         "variant with columns name, file and the parameters") from None
    if faults:
        raise StudyError(*faults)
    df.columns = [str(c).strip() for c in df.columns]
    cases = {c.name for c in study.cases}
    missing = [c for c in ("name", *parameters) if c not in df.columns]
    if missing:
        raise StudyError(f"{name}: column(s) {', '.join(missing)} missing; found "
                         f"{', '.join(df.columns)}; add the column, or correct the names in "
                         "the sweep file's parameters")
    per_case = [c for c in df.columns if c.startswith(FILE_PREFIX)]
    for col in per_case:
        if col[len(FILE_PREFIX):] not in cases:
            raise StudyError(f"{name}: column '{col}' names no case of the study (cases: "
                             f"{', '.join(sorted(cases))}); rename it file:<case>")
    if "file" not in df.columns:
        raise StudyError(f"{name}: column 'file' missing: each variant needs its model result "
                         "(the file that stands for the study's [model] file)")
    if df.empty:
        raise StudyError(f"{name}: the table has no variants; add one row per model variant")
    out, seen = [], {}
    for i, rec in enumerate(df.to_dict("records")):
        row = i + 2
        vname = rec["name"].strip()
        if not vname:
            raise StudyError(f"{name}: row {row}, column name: empty; give each variant a name")
        if vname in seen:
            raise StudyError(f"{name}: row {row}, column name: variant '{vname}' is also on row "
                             f"{seen[vname]}; names must be unique")
        seen[vname] = row
        values, problems = {}, []
        for p in parameters:
            text = rec[p].replace(",", ".") if sep == ";" else rec[p]   # decimal commas
            values[p], problem = _number(text, name, row, p)
            problems += [problem] if problem else []
        files = {c[len(FILE_PREFIX):]: _relative(table_file, rec[c])
                 for c in per_case if rec[c].strip()}
        file = _relative(table_file, rec["file"]) if rec["file"].strip() else None
        if file is None:   # fails this variant only, as a missing file does
            problems.insert(0, f"{name}: row {row}, column file: empty; give the variant's model "
                               "result file (relative to the table)")
        out.append(Variant(name=vname, row=row, file=file, case_files=files, parameters=values,
                           problem="; ".join(problems)))
    return tuple(out)


def _number(text: str, name: str, row: int, column: str) -> tuple[float, str]:
    """The cell's value, or NaN and the one-line reason it is not a finite number."""
    try:
        value = float(text)
    except ValueError:
        return math.nan, (f"{name}: row {row}, column {column}: '{text}' is not a number; "
                          "parameter columns hold numbers only")
    if not math.isfinite(value):
        return math.nan, (f"{name}: row {row}, column {column}: {text} is not finite; give the "
                          "variant's parameter value")
    return value, ""


def _relative(table_file: Path, text: str) -> Path:
    # not checked for existence: a missing file fails that variant only (recorded, not fatal)
    return (table_file.parent / text.strip()).resolve()


def _identify(raw: object, name: str, parameters: tuple[str, ...]) -> Identify:
    if not isinstance(raw, dict):
        raise StudyError(f"{name}: [identify] must be a table")
    unknown = sorted(set(raw) - IDENTIFY_KEYS)
    if unknown:
        raise StudyError(f"{name}: [identify] unknown key(s) {', '.join(unknown)}; it accepts "
                         f"{', '.join(sorted(IDENTIFY_KEYS))}")
    chosen = _names(raw.get("parameters", list(parameters)), name, "[identify] parameters")
    strange = [p for p in chosen if p not in parameters]
    if strange:
        raise StudyError(f"{name}: [identify] parameters {', '.join(strange)} are not sweep "
                         f"parameters ({', '.join(parameters)}); list them in parameters first")
    response = raw.get("response", "linear")
    if response not in KINDS:
        raise StudyError(f"{name}: [identify] response = {response!r}; expected one of "
                         f"{', '.join(KINDS)}")
    log = _names(raw["log"], name, "[identify] log") if raw.get("log") else ()
    bad_log = [p for p in log if p not in chosen]
    if bad_log:
        raise StudyError(f"{name}: [identify] log names {', '.join(bad_log)}, which are not "
                         "identified; list only [identify] parameters")
    bounds_raw = raw.get("bounds", {})
    if not isinstance(bounds_raw, dict):
        raise StudyError(f"{name}: [identify] bounds must be a table, for example bounds = "
                         "{ k = [1e3, 1e6] }")
    bounds = {}
    for p, b in bounds_raw.items():
        if p not in chosen:
            raise StudyError(f"{name}: [identify] bounds names '{p}', which is not identified")
        if not (isinstance(b, list) and len(b) == 2 and all(map(_finite, b)) and b[0] < b[1]):
            raise StudyError(f"{name}: [identify] bounds for '{p}' must be [lower, upper] with "
                             f"lower < upper; found {b!r}")
        bounds[p] = (float(b[0]), float(b[1]))
    return Identify(parameters=chosen, response=response, bounds=bounds, log=log)


def _base(raw: object, name: str, parameters: tuple[str, ...]) -> dict[str, float]:
    if not isinstance(raw, dict):
        raise StudyError(f"{name}: base must be a table of parameter values, for example "
                         "base = { E = 70000.0 }")
    out = {}
    for p, v in raw.items():
        if p not in parameters:
            raise StudyError(f"{name}: base names '{p}', which is not a sweep parameter")
        if not _finite(v):
            raise StudyError(f"{name}: base value of '{p}' must be a finite number; found {v!r}")
        out[p] = float(v)
    return out


def _finite(value: object) -> bool:
    """A TOML number (not a boolean) that is finite."""
    return isinstance(value, int | float) and not isinstance(value, bool) and math.isfinite(value)
