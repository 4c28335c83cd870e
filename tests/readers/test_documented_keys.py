"""Every study key the reader accepts is documented in the README (issue: every study key)."""

from __future__ import annotations

from pathlib import Path

from correlate.readers.study import FREE_TEXT, SCHEMA

README = Path(__file__).resolve().parents[2] / "README.md"


def test_every_study_table_and_key_is_in_the_readme():
    text = README.read_text(encoding="utf-8")
    missing = []
    tables = (set(SCHEMA) | FREE_TEXT) - {""}
    for table, keys in SCHEMA.items():
        keys = keys - tables   # the top level's keys are the tables themselves
        if table and f"[{table}]" not in text and f"[[{table}]]" not in text:
            missing.append(f"[{table}]")
        missing += [f"[{table}] {k}" for k in sorted(keys)
                    if f"`{k}`" not in text and f"\n{k} =" not in text and f" {k} = " not in text]
    assert not missing, f"README.md does not document: {', '.join(missing)}"
