"""The [uncertainty] and [numerical] study tables: read as written, bad values refused one line each.

Each bad value is refused with a line naming the table and the key (the project's error rule,
README "Exit codes"); the ranges are physical: a standard uncertainty is >= 0 (JCGM 100:2008
3.3.5, a standard deviation), a relative one of 50 % or more is a percentage typed as a fraction
(common practice), and the grid convergence index needs meshes coarser than the study's own
(Roache; ASME V&V 20-2009 section 2).
"""

from __future__ import annotations

import re

import pytest
from builders import write_small_study

from correlate.core.errors import StudyError
from correlate.readers.study import read_study

GOOD = """
[uncertainty]
coverage = 2.5
gauge_factor = 0.0058
transverse = 0.002
daq_ue = 2.0
daq_relative = 0.001
load = 0.003
placement = true
[[uncertainty.input]]
name = "E"
relative = 0.02
exponent = -1.0
[[uncertainty.input]]
name = "skin thickness"
relative = 0.03
variant = "block.vtu"
step = 0.05
[numerical]
h = 1.0
meshes = [ { file = "block.vtu", h = 4.0 }, { file = "block.vtu", h = 2.0 } ]
formal_order = 1
"""


def test_the_tables_are_read_as_written(tmp_path):
    study = read_study(write_small_study(tmp_path, extra_toml=GOOD))
    u, num = study.uncertainty, study.numerical
    assert (u.coverage, u.gauge_factor, u.transverse, u.daq_ue, u.daq_relative, u.load) == (
        2.5, 0.0058, 0.002, 2.0, 0.001, 0.003)
    assert u.placement is True
    assert [(i.name, i.relative, i.exponent, i.step) for i in u.inputs] == [
        ("E", 0.02, -1.0, None), ("skin thickness", 0.03, None, 0.05)]
    assert u.inputs[1].variant == (tmp_path / "block.vtu").resolve()
    assert num.h == 1.0 and num.formal_order == 1.0
    assert [m.h for m in num.meshes] == [2.0, 4.0]  # finest first, whatever the order given


def test_a_study_without_the_tables_has_none(tmp_path):
    study = read_study(write_small_study(tmp_path))
    assert study.uncertainty is None and study.numerical is None


def _refused(tmp_path, toml: str) -> list[str]:
    path = write_small_study(tmp_path, extra_toml=toml)
    with pytest.raises(StudyError) as info:
        read_study(path)
    return list(info.value.problems)


BAD = [
    ('[uncertainty]\ngauge_factor = "0.5 %"\n', r"\[uncertainty\] gauge_factor = '0.5 %' is not a number"),
    ("[uncertainty]\ngauge_factor = 0.58\n", r"gauge_factor = 0.58 is too large.*for 1 % write 0.01"),
    ("[uncertainty]\ndaq_ue = -2.0\n", r"daq_ue = -2 is negative"),
    ("[uncertainty]\ntransverse = 0.5\n", r"transverse = 0.5 is too large"),
    ("[uncertainty]\ncoverage = 0\n", r"coverage = 0 must be greater than zero"),
    ("[uncertainty]\ncoverage = 95\n", r"coverage = 95 is no coverage factor"),
    ('[uncertainty]\nplacement = "yes"\n', r"placement = 'yes' is not true or false"),
    ("[uncertainty]\ngauge_factr = 0.01\n", r"unknown key 'gauge_factr'.*did you mean 'gauge_factor'"),
    ("[uncertainty]\n[[uncertainty.input]]\nrelative = 0.02\nexponent = -1.0\n", r"#1 has no name"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "E"\nrelative = 0.02\n',
     r"'E' needs either exponent.*found neither"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "E"\nrelative = 0.02\nexponent = -1.0\n'
     'variant = "block.vtu"\nstep = 0.05\n', r"'E' needs either exponent.*found both"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "t"\nrelative = 0.02\nvariant = "block.vtu"\n',
     r"'t' gives variant without step"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "t"\nrelative = 0.02\nvariant = "nope.vtu"\n'
     "step = 0.05\n", r"variant file 'nope.vtu' does not exist"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "t"\nrelative = 0.02\nvariant = "block.vtu"\n'
     "step = 0\n", r"'t' step = 0"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "load"\nrelative = 0.02\nexponent = 1\n',
     r"'load' is the name of \[uncertainty\] load"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "E"\nrelative = 2\nexponent = -1\n',
     r"'E' relative = 2 is too large"),
    ('[uncertainty]\n[[uncertainty.input]]\nname = "E"\nrelative = 0.02\nexponent = -1\npower = 2\n',
     r"unknown key 'power' in \[\[uncertainty.input\]\] #1"),
    ('[numerical]\nh = 1.0\nmeshes = [ { file = "block.vtu", h = 2.0 } ]\n',
     r"\[numerical\] feeds the validation budget, which needs an \[uncertainty\] table"),
    ('[uncertainty]\n[numerical]\nh = 2.0\nmeshes = [ { file = "block.vtu", h = 1.0 } ]\n',
     r"meshes must be coarser than the study's model \(h = 2\)"),
    ('[uncertainty]\n[numerical]\nh = 1.0\nmeshes = []\n', r"meshes must list one or two"),
    ('[uncertainty]\n[numerical]\nmeshes = [ { file = "block.vtu", h = 2.0 } ]\n',
     r"\[numerical\] needs h"),
    ('[uncertainty]\n[numerical]\nh = 1.0\nmeshes = [ { file = "block.vtu" } ]\n',
     r"meshes #1 needs h"),
    ('[uncertainty]\n[numerical]\nh = 1.0\nmeshes = [ { file = "block.vtu", h = 2.0 }, '
     '{ file = "block.vtu", h = 2.0 } ]\n', r"the same h twice"),
    ('[uncertainty]\n[numerical]\nh = 1.0\nformal_order = -2\nmeshes = [ { file = "block.vtu", h = 2.0 } ]\n',
     r"formal_order = -2 must be greater than zero"),
]


@pytest.mark.parametrize(("toml", "match"), BAD, ids=[
    "quoted-number", "percentage", "negative", "kt-percentage", "zero-k", "k-95", "string-bool",
    "misspelt", "input-no-name", "input-neither", "input-both", "variant-no-step",
    "variant-missing", "zero-step", "input-named-load", "input-percentage", "input-unknown-key",
    "numerical-alone", "mesh-finer", "no-meshes", "no-h", "mesh-no-h", "same-h", "bad-order"])
def test_each_bad_value_is_one_line_naming_the_key(tmp_path, toml, match):
    problems = _refused(tmp_path, toml)
    assert len(problems) == 1, problems
    assert re.search(match, problems[0]), problems[0]


def test_placement_needs_the_band(tmp_path):
    toml = "[uncertainty]\nplacement = true\n"
    path = write_small_study(tmp_path, extra_toml=toml)
    path.write_text(path.read_text().replace("angle_tol = 2.0\n", "angle_tol = 2.0\nband = false\n"))
    with pytest.raises(StudyError, match=r"placement = true needs the placement band"):
        read_study(path)


def test_other_meshes_refuse_cases_with_their_own_file(tmp_path):
    path = write_small_study(tmp_path, extra_toml='[uncertainty]\n[numerical]\nh = 1.0\n'
                             'meshes = [ { file = "block.vtu", h = 2.0 } ]\n')
    path.write_text(path.read_text().replace('strain = "E_side"\n',
                                             'strain = "E_side"\nfile = "block.vtu"\n'))
    with pytest.raises(StudyError, match=r"case 'side' reads its own file"):
        read_study(path)
