"""Atomic text writes: a reader sees the old file or the new one, never half of either."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

__all__ = ["write_text_atomic"]


def write_text_atomic(path: str | Path, text: str) -> Path:
    """Write ``text`` (UTF-8, LF) to a temporary file in the same folder, fsync it, then rename it over ``path``.

    The file gets the usual permissions (0666 less the umask), not the private mode of a temporary file.
    """
    p = Path(path)
    p.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{p.name}.", suffix=".tmp", dir=p.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)
        os.replace(tmp, p)
        _fsync_folder(p.parent)  # the rename itself survives a power cut
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return p


def _fsync_folder(folder: Path) -> None:
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:  # a platform or file system without directory handles
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)
