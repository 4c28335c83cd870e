"""The command line as a shell user meets it: option order, closed pipes."""

from __future__ import annotations

import subprocess
import sys

from builders import write_small_study

from correlate.commands.cli import main


def test_global_options_are_accepted_after_the_command(tmp_path, capsys):
    # `correlate run --quiet ...` and `correlate --quiet run ...` mean the same: no progress lines
    (tmp_path / "s").mkdir()
    study = write_small_study(tmp_path / "s")
    assert main(["run", "--quiet", str(study), "--out", str(tmp_path / "a"), "--no-report"]) == 0
    after = capsys.readouterr()
    assert main(["--quiet", "run", str(study), "--out", str(tmp_path / "b"), "--no-report"]) == 0
    before = capsys.readouterr()
    assert after.err == before.err
    assert (tmp_path / "a" / "gauges.csv").read_bytes() == (tmp_path / "b" / "gauges.csv").read_bytes()


def test_a_closed_pipe_ends_quietly(tmp_path):
    # `correlate check study.toml | head -1`: the reader leaves early; the command must not print
    # an internal error (POSIX: a write to a closed pipe fails with EPIPE). `true` reads nothing
    # and exits before the interpreter has started, so every write of the command meets a closed
    # pipe; pipefail makes the command's own exit status the pipeline's.
    (tmp_path / "s").mkdir()
    study = write_small_study(tmp_path / "s")
    for reader in ("true", "head -1"):
        cmd = f"{sys.executable} -m correlate check {study} | {reader}"
        done = subprocess.run(["bash", "-o", "pipefail", "-c", cmd], capture_output=True,
                              text=True, timeout=120)
        assert done.returncode == 0, done.stderr
        assert done.stderr.strip() == ""
    assert len(done.stdout.splitlines()) == 1
