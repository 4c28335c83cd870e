"""Output folders: written beside the target and moved into place only when complete."""

from __future__ import annotations

import pytest

from correlate.core.errors import OutputError
from correlate.core.folders import check_target, sha256, staged_folder


def test_complete_folder_is_moved_into_place(tmp_path):
    out = tmp_path / "run"
    with staged_folder(out, force=False) as tmp:
        assert tmp.parent == out.parent and tmp != out
        (tmp / "a.csv").write_text("x\n")
    assert (out / "a.csv").read_text() == "x\n"
    assert [p.name for p in tmp_path.iterdir()] == ["run"]      # no partial folder left


def test_failure_leaves_the_previous_folder_as_it_was(tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / "old.csv").write_text("old\n")
    with pytest.raises(RuntimeError), staged_folder(out, force=True) as tmp:
        (tmp / "new.csv").write_text("new\n")
        raise RuntimeError("interrupted")
    assert [p.name for p in out.iterdir()] == ["old.csv"]
    assert [p.name for p in tmp_path.iterdir()] == ["run"]


def test_existing_folder_needs_force(tmp_path):
    (tmp_path / "run").mkdir()
    with pytest.raises(OutputError, match="add --force"):
        check_target(tmp_path / "run", force=False)
    (tmp_path / "file").write_text("")
    with pytest.raises(OutputError, match="not a folder"):
        check_target(tmp_path / "file", force=True)


def test_sha256_matches_hashlib(tmp_path):
    import hashlib

    data = bytes(range(256)) * 5000
    (tmp_path / "f").write_bytes(data)
    assert sha256(tmp_path / "f") == hashlib.sha256(data).hexdigest()   # reference: hashlib
