"""Atomic replacement of a small text file: readers see the old file or the new one, whole.

The text goes to a temporary file in the same folder (same file system, so the rename is
atomic), is flushed and fsynced, then ``os.replace`` puts it in place and the folder is
fsynced so the rename itself survives a power cut. If anything fails before the rename,
the temporary file is removed and the old file is untouched.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

__all__ = ["write_text_atomic"]


def write_text_atomic(path: str | Path, text: str, *, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically; returns the path. Keeps an existing file's mode."""
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    data = text.encode(encoding)
    try:
        mode = path.stat().st_mode & 0o7777
    except FileNotFoundError:
        umask = os.umask(0)
        os.umask(umask)
        mode = 0o666 & ~umask
    fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    _fsync_folder(folder)
    return path


def _fsync_folder(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # some systems do not let a folder be opened; the rename is done anyway
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
