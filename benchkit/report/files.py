"""Atomic file writes: a reader never sees a half-written report file."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def write_bytes_atomic(path: Path, data: bytes) -> Path:
    """Write ``data`` to a temporary file beside ``path``, then rename it into place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def write_text_atomic(path: Path, text: str) -> Path:
    """UTF-8 text version of :func:`write_bytes_atomic`."""
    return write_bytes_atomic(path, text.encode("utf-8"))
