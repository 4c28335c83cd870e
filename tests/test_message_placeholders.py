"""No message prints a placeholder instead of its value.

A message continued over lines joins an f-string with plain strings; a ``{name}`` in a plain part
is printed as written ("add base = {{ {held[0]} = ... }}" reached users that way). This scans every
f-string of the package (Python's own parser, ``ast``) for a literal part that reads as a
placeholder.
"""

from __future__ import annotations

import ast
import re
from pathlib import Path

import correlate

PLACEHOLDER = re.compile(r"\{[A-Za-z_][\w.\[\]'\"]*(![rsa])?(:[^{}]*)?\}")


def unexpanded(source: str) -> list[tuple[int, str]]:
    """(line, text) of each literal part of an f-string that looks like a placeholder."""
    out = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.JoinedStr):
            out += [(node.lineno, v.value) for v in node.values
                    if isinstance(v, ast.Constant) and PLACEHOLDER.search(v.value)]
    return out


def test_the_scan_finds_a_placeholder_left_in_a_plain_part():
    assert unexpanded('x = (f"{a} holds " "add {b} = ...")\n') == [(1, " holds add {b} = ...")]
    assert unexpanded('x = (f"{a} holds " f"add {{ {b} }}")\n') == []


def test_no_f_string_of_the_package_prints_a_placeholder():
    root = Path(correlate.__file__).parent
    found = [f"{path.relative_to(root)}:{line}: {text!r}"
             for path in sorted(root.rglob("*.py"))
             for line, text in unexpanded(path.read_text(encoding="utf-8"))]
    assert found == []
