"""Atomic file writing: nothing half-written survives an interruption."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

#: Part of every temporary file's name; only a killed process (SIGKILL, power loss) can
#: leave one behind, and :func:`remove_partial_files` clears them.
PARTIAL_MARK = ".partial-"


def remove_partial_files(directory: str | os.PathLike[str]) -> int:
    """Delete temporaries a killed writer left in ``directory`` and below; their count."""
    n = 0
    for p in Path(directory).rglob(f".*{PARTIAL_MARK}*"):
        if p.is_file():
            with contextlib.suppress(FileNotFoundError):
                p.unlink()
                n += 1
    return n


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; rename it onto ``path`` on success.

    The temporary file keeps the final suffix so that writers which infer the
    format from the extension (astropy, numpy, matplotlib) still work.  On error
    the temporary file is removed and ``path`` is untouched.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.stem}{PARTIAL_MARK}",
                               suffix="".join(path.suffixes) or ".tmp", dir=path.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        # mkstemp creates 0600 files; give the result the usual umask-based mode.
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp_path, 0o666 & ~umask)
        os.replace(tmp_path, path)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def write_text_atomic(path: str | os.PathLike[str], text: str) -> None:
    """Write ``text`` to ``path`` atomically (UTF-8)."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")


def write_bytes_atomic(path: str | os.PathLike[str], data: bytes) -> None:
    """Write ``data`` to ``path`` atomically."""
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
