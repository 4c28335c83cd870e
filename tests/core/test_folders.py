"""Output folders: written beside the target and moved into place only when complete."""

from __future__ import annotations

import pytest

from correlate.core.errors import OutputError
from correlate.core.folders import MARKER, check_target, sha256, staged_folder


def test_complete_folder_is_moved_into_place(tmp_path):
    out = tmp_path / "run"
    with staged_folder(out, force=False) as tmp:
        assert tmp.parent == out.parent and tmp != out
        (tmp / "a.csv").write_text("x\n")
    assert (out / "a.csv").read_text() == "x\n"
    assert (out / MARKER).is_file()                              # recognised as the tool's own
    assert [p.name for p in tmp_path.iterdir()] == ["run"]      # no partial folder or lock left


def test_failure_leaves_the_previous_folder_as_it_was(tmp_path):
    out = tmp_path / "run"
    out.mkdir()
    (out / "gauges.csv").write_text("old\n")  # a file the tool writes: its own folder
    with pytest.raises(RuntimeError), staged_folder(out, force=True) as tmp:
        (tmp / "new.csv").write_text("new\n")
        raise RuntimeError("interrupted")
    assert [p.name for p in out.iterdir()] == ["gauges.csv"]
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


def test_force_never_replaces_a_folder_the_tool_did_not_write(tmp_path):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("the analyst's own notes\n")
    with pytest.raises(OutputError, match="not written by correlate"):
        check_target(out, force=True)
    assert (out / "notes.txt").read_text() == "the analyst's own notes\n"


@pytest.mark.parametrize("where", ["the input", "its folder", "a folder above"])
def test_an_output_never_is_or_holds_an_input(tmp_path, where):
    study = tmp_path / "campaign" / "study.toml"
    study.parent.mkdir()
    study.write_text("title = 'x'\n")
    out = {"the input": study, "its folder": study.parent, "a folder above": tmp_path}[where]
    with pytest.raises(OutputError, match="input"):
        check_target(out, force=True, inputs=[study])


def test_a_link_to_the_input_folder_is_refused(tmp_path):
    (tmp_path / "campaign").mkdir()
    study = tmp_path / "campaign" / "study.toml"
    study.write_text("")
    (tmp_path / "link").symlink_to(tmp_path / "campaign")
    with pytest.raises(OutputError, match="holds the input"):
        check_target(tmp_path / "link", force=True, inputs=[study])


def test_a_second_writer_of_the_same_folder_is_refused(tmp_path):
    out = tmp_path / "run"
    with staged_folder(out, force=False), pytest.raises(OutputError, match="another correlate"), \
            staged_folder(out, force=False):
        pass
    assert not out.exists() or (out / MARKER).is_file()


def test_folders_get_the_users_umask(tmp_path):
    import os
    import stat

    old = os.umask(0o022)
    try:
        with staged_folder(tmp_path / "run", force=False) as tmp:
            (tmp / "x.csv").write_text("1\n")
    finally:
        os.umask(old)
    mode = stat.S_IMODE((tmp_path / "run").stat().st_mode)
    assert mode == 0o755          # 0o777 less the umask, not mkdtemp's 0o700


def test_a_long_name_keeps_the_temporary_name_within_the_limit(tmp_path):
    out = tmp_path / ("r" * 245)                      # legal: 245 < 255
    with staged_folder(out, force=False) as tmp:
        assert len(tmp.name) <= 255
    assert out.is_dir()
