"""Untrusted text in the report is escaped, and no input is ever evaluated as code.

A study whose title, free-text entries, model file name and gauge ids carry HTML, quotes, Unicode
and a very long string is run end to end; report.html is parsed with the standard library's
html.parser (the outside reference for what a browser builds from the bytes): no element or
attribute may come from the inputs, and the text a reader sees must be the original strings.
The static check greps the package source for the ways Python evaluates text as code.
"""

from __future__ import annotations

import json
import re
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from builders import block_readings, write_block_study

report = pytest.importorskip("correlate.report", reason="the report package does not import yet")
from correlate.commands.cli import main  # noqa: E402 - after the import guard above

PACKAGE = Path(__file__).resolve().parents[2] / "correlate"

TITLE = '<script>alert("title")</script> & "double" \'single\' Prüfkörper'
LONG = "G-" + "long" * 60  # 242 characters
IDS = ["<b>G1</b>", 'G2" onmouseover="alert(2)', "G3 'x' & <i>", "Dehnung µε → 应变 ✓",
       LONG]
ROSETTE = "<u>R</u>&amp;"
ARTICLE = "<img src=x onerror=alert(3)>"
REVISION = "</td></tr><tr><td>injected"
MODEL_FILE = 'blo<c>k & "q".vtu'
DOC_NUMBER = '"; } body { display: none } </style><script>alert(4)</script> \\0041 ü'


def _toml(value: str) -> str:
    # a JSON string literal is a valid TOML basic string (its escapes are TOML's)
    return json.dumps(value)


class _Collect(HTMLParser):
    """Tags, attributes and the decoded text of a document, as a browser would build them."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, list[tuple[str, str | None]]]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, attrs))

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, attrs))

    def handle_data(self, data):
        self.text.append(data)


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    folder = tmp_path_factory.mktemp("hostile")
    rows = []
    for i, gid in enumerate(IDS):
        th = np.radians(25.0 * i)
        rows.append({"gauge": gid, "x": 0.7 + 0.6 * i, "y": 0.9, "z": 2.0,
                     "dir_x": round(np.cos(th), 6), "dir_y": round(np.sin(th), 6), "dir_z": 0,
                     "length": 0.3, "kt": 0.01, "rosette": ""})
    for k, th in enumerate((0, 45, 90)):
        t = np.radians(th)
        rows.append({"gauge": f"{ROSETTE}-{'abc'[k]}", "x": 2.0, "y": 2.2, "z": 2.0,
                     "dir_x": round(np.cos(t), 6), "dir_y": round(np.sin(t), 6), "dir_z": 0,
                     "length": 0.3, "kt": 0.005, "rosette": ROSETTE})
    gauges = pd.DataFrame(rows)
    study = write_block_study(folder, readings_rows=block_readings(gauges),
                              gauges=gauges, ctype="hexahedron",
                              extra_toml=f"[test]\narticle = {_toml(ARTICLE)}\n"
                              f"[document]\nnumber = {_toml(DOC_NUMBER)}\n")
    (folder / "block.vtu").rename(folder / MODEL_FILE)
    text = study.read_text(encoding="utf-8")
    text = text.replace('title = "Synthetic block"', f"title = {_toml(TITLE)}")
    text = text.replace('file = "block.vtu"', f"file = {_toml(MODEL_FILE)}\n"
                        f"revision = {_toml(REVISION)}")
    study.write_text(text, encoding="utf-8")
    out = folder / "out"
    code = main(["--quiet", "run", str(study), "--out", str(out)])
    assert code == 0
    html = (out / "report.html").read_text(encoding="utf-8")
    parsed = _Collect()
    parsed.feed(html)
    parsed.close()
    return {"html": html, "tags": parsed.tags, "text": "".join(parsed.text), "out": out}


def test_no_element_or_attribute_comes_from_the_inputs(hostile):
    tags = hostile["tags"]
    names = {t for t, _ in tags}
    assert "script" not in names
    assert not [t for t, a in tags if t == "img" and any(k == "onerror" for k, _ in a)]
    handlers = [(t, k) for t, a in tags for k, _ in a if k.startswith("on")]
    assert handlers == []
    # the closing tags in the revision text must not have opened a row of their own
    assert "injected" not in [v for _, a in tags for _, v in a]


@pytest.mark.parametrize("value", [TITLE, ARTICLE, REVISION, MODEL_FILE, ROSETTE, *IDS[:4],
                                   DOC_NUMBER],
                         ids=["title", "article", "revision", "model-file", "rosette-id", "html-id",
                              "quote-id", "amp-id", "unicode-id", "document-number"])
def test_input_text_reads_back_unchanged(hostile, value):
    # what the reader sees (the decoded text) is the original string, character for character
    assert value in hostile["text"]


def test_raw_markup_never_reaches_the_file(hostile):
    html = hostile["html"]
    for raw in ("<script>alert", "<img src=x", "<b>G1</b>", 'onmouseover="alert',
                "</td></tr><tr><td>injected", "<u>R</u>", 'blo<c>k'):
        assert raw not in html


def test_running_header_is_one_css_string_that_reads_back(hostile):
    # The document number goes into the page's running header: a CSS string in a style element.
    # Two style elements, each closed once (the text cannot end one), and the string, unescaped
    # as CSS Syntax Level 3 section 4.3.7 says (up to six hex digits, one space after them
    # dropped), is the header text with the number as given (shortened to 90 characters).
    html = hostile["html"]
    styles = re.findall(r"<style>(.*?)</style>", html, flags=re.DOTALL)
    assert len(styles) == 2 and html.count("</style>") == 2
    found = re.search(r'@top-left \{ content: "([^"]*)"; \}', styles[1])
    assert found

    def unescape(text: str) -> str:
        return re.sub(r"\\([0-9a-fA-F]{1,6}) ?", lambda m: chr(int(m.group(1), 16)), text)

    header = f"Document {' '.join(DOC_NUMBER.split())}, revision not given"
    # a running header holds at most 90 characters: longer text ends in "..."
    assert len(header) > 90
    assert unescape(found.group(1)) == header[:87] + "..."


def test_long_gauge_id_is_shown_whole_or_visibly_shortened(hostile):
    # A 242-character id either appears whole, or shortened with an ellipsis from its start.
    text = hostile["text"]
    assert LONG in text or re.search(re.escape(LONG[:20]) + r"[^\s]*\u2026", text)


def test_the_report_is_utf8_and_says_so(hostile):
    assert re.search(r'<meta charset="utf-8"', hostile["html"], flags=re.IGNORECASE)
    assert "应变" in hostile["text"] and "µε" in hostile["text"]


CODE_FROM_TEXT = {
    "eval": r"(?<![\w.])eval\(",
    "exec": r"(?<![\w.])exec\(",
    "pickle": r"\bpickle\b|read_pickle|allow_pickle\s*=\s*True",
    "yaml.load": r"yaml\.(unsafe_)?load\(",
    "marshal/shelve": r"\b(marshal|shelve)\b",
    # a KD-tree's ``tree.query`` is a nearest-neighbour search, not text evaluation
    "pandas eval/query": r"(?<!tree)\.(eval|query)\(",
    "__import__": r"__import__\(",
}


@pytest.mark.parametrize("pattern", list(CODE_FROM_TEXT.values()), ids=list(CODE_FROM_TEXT))
def test_no_input_is_evaluated_as_code(pattern):
    hits = [f"{p.relative_to(PACKAGE.parent)}:{n}" for p in sorted(PACKAGE.rglob("*.py"))
            for n, line in enumerate(p.read_text(encoding="utf-8").splitlines(), 1)
            if re.search(pattern, line)]
    assert hits == []


def test_study_and_tables_are_read_by_data_parsers_only():
    # TOML through tomllib, CSV through pandas or the csv module; no other study parser.
    config = (PACKAGE / "readers" / "study.py").read_text(encoding="utf-8")
    assert "tomllib.loads" in config
    for p in sorted(PACKAGE.rglob("*.py")):
        src = p.read_text(encoding="utf-8")
        assert not re.search(r"^\s*import (toml|yaml|json5)\b|^\s*from (toml|yaml) import", src,
                             flags=re.MULTILINE), p.name
