"""Atomic file writes: the one writer every file people keep goes through (results, checkpoints, pages,
sheets, DXF).

A file is written to a temp file in the same folder, flushed and fsynced, given the mode an ordinary
``open()`` would give it, then moved over the target with ``os.replace``: a reader (or a run killed
half-way, or a full disk) sees either the old file or the whole new one, never a part.
"""
from __future__ import annotations

import os
import tempfile
from pathlib import Path
from typing import BinaryIO, Callable


def _file_mode() -> int:
    old = os.umask(0)
    os.umask(old)
    return 0o666 & ~old


FILE_MODE = _file_mode()   # the mode an ordinary open() would give (mkstemp makes 0600 files)


def atomic_write(path: str | Path, write: Callable[[BinaryIO], object]) -> Path:
    """Write ``path`` atomically; ``write(fh)`` writes the content to a binary file object."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, FILE_MODE)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


def atomic_write_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically."""
    return atomic_write(path, lambda fh: fh.write(data))


def atomic_write_text(path: str | Path, text: str, encoding: str = "utf-8") -> Path:
    """Write ``text`` to ``path`` atomically."""
    return atomic_write(path, lambda fh: fh.write(text.encode(encoding)))
