"""Output folders: write everything into a temporary folder beside DIR, then move it into place.

A run that fails or is interrupted leaves any previous DIR as it was; an existing DIR is replaced
only with ``force``. Writers of the files themselves are in :mod:`correlate.core.tables`.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from correlate.core.errors import OutputError


def sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def check_target(out: Path, *, force: bool) -> None:
    """Refuse an existing output folder unless forced (checked before any work is done)."""
    if out.exists() and not force:
        raise OutputError(f"output folder '{out}' exists; add --force to replace it or choose "
                          "another --out")
    if out.exists() and not out.is_dir():
        raise OutputError(f"'{out}' exists and is not a folder; choose another --out")


@contextmanager
def staged_folder(out: Path, *, force: bool) -> Iterator[Path]:
    """Yield a temporary folder beside ``out``; on success move it to ``out``.

    The old folder is moved aside first and deleted only after the new one is in place.
    """
    out = out.resolve()
    check_target(out, force=force)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        yield tmp
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    old = None
    if out.exists():
        old = out.parent / f".{out.name}.old-{os.getpid()}"
        os.replace(out, old)
    os.replace(tmp, out)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
