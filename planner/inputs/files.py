"""Output files written atomically: a temporary file in the same folder, then a rename."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def write_atomic(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` through a temporary file and a rename: no half-written output."""
    return write_atomic_bytes(path, text.encode("utf-8"))


def write_atomic_bytes(path: str | Path, data: bytes) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and a rename."""
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=p.parent, prefix=f".{p.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        _publish(tmp, p)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return p


def _publish(tmp: str, p: Path) -> None:
    # mkstemp makes 0600 files; give the output the permissions an ordinary write would
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(tmp, 0o666 & ~umask)
    os.replace(tmp, p)
