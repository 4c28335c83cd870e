"""Output folders: written beside the target, moved into place only when complete, never over an input.

A run that fails or is interrupted leaves any previous folder as it was. An existing folder is
replaced only with ``force``, and only when the tool itself wrote it (it holds the marker file
:data:`MARKER`, or only files the tool writes). A target that is an input, holds an input (directly
or further down, after resolving symbolic links) or lies inside a file is refused whatever the
options. While a folder is written, an exclusive lock beside it makes a second command on the same
target refuse. Folders and files are made with the user's umask. Writers of the files themselves
are in :mod:`correlate.core.tables`.
"""

from __future__ import annotations

import errno
import fcntl
import hashlib
import os
import shutil
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from correlate._version import __version__
from correlate.core import progress
from correlate.core.errors import OutputError

MARKER = ".correlate-output"  # in every output folder: --force may replace a folder holding it
#: the files and folders the tool writes into an output folder (a folder holding nothing else was
#: written by the tool, also by a version that left no marker)
OWN_NAMES = frozenset({
    "gauges.csv", "rosettes.csv", "gauge_stats.csv", "flags.csv", "summary.json", "report.html",
    "gauges.vtp", "surface.vtp", "model_readings.csv", "placement.csv", "compare.csv",
    "compare.html", "scatter.png", "rosettes.png", MARKER})
NAME_ROOM = 100  # characters of the target's name kept in the temporary name (limit 255)


def sha256(path: Path) -> str:
    """SHA-256 of a file's bytes, as hex."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def output_path(text: str | os.PathLike[str], option: str = "--out") -> Path:
    """The output folder an option names; an empty value (an unset shell variable) is refused."""
    if not str(text).strip():
        raise OutputError(f"{option} is empty (an unset shell variable?); give the output folder, "
                          "for example --out results")
    return Path(text)


def _is_own(folder: Path, own: Iterable[str]) -> bool:
    names = {p.name for p in folder.iterdir()}
    mine = OWN_NAMES | set(own)
    return MARKER in names or all(n in mine or n.startswith(("view_", "load_strain_"))
                                  for n in names)


def check_target(out: Path, *, force: bool, inputs: Iterable[Path] = (),
                 own: Iterable[str] = ()) -> None:
    """Refuse an output folder that would change or remove an input, or that exists (checked
    before any work is done).

    Parameters
    ----------
    out : Path
        The output folder.
    force : bool
        Replace an existing folder that the tool wrote.
    inputs : iterable of Path
        Every input file or folder of the command; none may be, or lie inside, ``out``.
    own : iterable of str
        Further names that mark a folder as the command's own (the demo's copied inputs).
    """
    target = Path(os.path.realpath(out))
    for parent in target.parents:
        if parent.exists() and not parent.is_dir():
            raise OutputError(f"--out '{out}' lies inside '{parent}', which is a file; choose a "
                              "folder")
    for item in inputs:
        real = Path(os.path.realpath(item))
        if real == target:
            raise OutputError(f"--out '{out}' is the input '{item}'; outputs never replace an "
                              "input: choose another folder, for example --out results")
        if target in real.parents:
            raise OutputError(f"--out '{out}' holds the input '{item}'; outputs never replace "
                              "a folder that holds an input: choose a new folder, for example "
                              "--out results")
    if not target.exists():
        return
    if not target.is_dir():
        raise OutputError(f"'{out}' exists and is not a folder; choose another --out")
    if not force:
        raise OutputError(f"output folder '{out}' exists; add --force to replace it or choose "
                          "another --out")
    if not _is_own(target, own):
        raise OutputError(f"'{out}' exists and was not written by correlate (it holds other "
                          "files); --force replaces only the tool's own output folders: choose "
                          "another --out or empty it yourself")


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextmanager
def _locked(out: Path) -> Iterator[None]:
    """Hold an exclusive lock on ``out`` (a lock file beside it) or refuse at once."""
    path = out.parent / f".{out.name[:NAME_ROOM]}.lock"
    while True:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o666 & ~_umask())
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            os.close(fd)
            raise OutputError(f"another correlate command is writing '{out}' now; wait for it to "
                              "finish or choose another --out") from None
        # the file may have been removed by the holder between open and lock: retry on a new one
        if os.path.exists(path) and os.stat(path).st_ino == os.fstat(fd).st_ino:
            break
        os.close(fd)
    try:
        yield
    finally:
        os.unlink(path)
        fcntl.flock(fd, fcntl.LOCK_UN)
        os.close(fd)


def output_error(exc: OSError, path: Path) -> OutputError:
    """One line for an operating-system error on the output side."""
    what = {errno.ENOSPC: "the disk is full: free space or choose another disk",
            errno.EROFS: "the file system is read-only: choose a writable folder",
            errno.EACCES: "permission denied: choose a folder you may write to",
            errno.EPERM: "permission denied: choose a folder you may write to",
            errno.ENAMETOOLONG: "the name is too long for the file system: choose a shorter one",
            errno.EDQUOT: "the disk quota is exceeded: free space or choose another disk"}
    hint = what.get(exc.errno or -1, f"{exc.strerror or exc}; check the folder and try again")
    return OutputError(f"cannot write '{exc.filename or path}': {hint}")


@contextmanager
def staged_folder(out: Path, *, force: bool, inputs: Iterable[Path] = (),
                  own: Iterable[str] = ()) -> Iterator[Path]:
    """Yield a temporary folder beside ``out``; on success move it to ``out``.

    The temporary folder gets the marker file and the umask's permissions; the old folder is moved
    aside first and deleted only after the new one is in place. Operating-system errors become
    one-line :class:`OutputError`.
    """
    out = Path(os.path.abspath(out))
    inputs = list(inputs)
    check_target(out, force=force, inputs=inputs, own=own)
    try:
        out.parent.mkdir(parents=True, exist_ok=True, mode=0o777)
        with _locked(out):
            check_target(out, force=force, inputs=inputs, own=own)  # as it is now, under the lock
            tmp = Path(tempfile.mkdtemp(prefix=f".{out.name[:NAME_ROOM]}.partial-", dir=out.parent))
            try:
                os.chmod(tmp, 0o777 & ~_umask())
                (tmp / MARKER).write_text(f"written by correlate {__version__}; --force may "
                                          "replace this folder\n", encoding="utf-8")
                yield tmp
            except BaseException:
                shutil.rmtree(tmp, ignore_errors=True)
                raise
            with progress.step("moving the outputs into place"):
                old = None
                if out.exists():
                    old = out.parent / f".{out.name[:NAME_ROOM]}.old-{os.getpid()}"
                    os.replace(out, old)
                os.replace(tmp, out)
                if old is not None:
                    shutil.rmtree(old, ignore_errors=True)
    except OSError as exc:
        if isinstance(exc, OutputError):
            raise
        raise output_error(exc, out) from None
