"""Files written through a temporary file and a rename, so that a reader never sees one half-written."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path


def _current_umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


_UMASK = _current_umask()


def atomic_write_bytes(path: Path, data: bytes) -> None:
    """Write a file through a temporary file and a rename (never half-written)."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", dir=path.parent)
    except OSError as exc:    # named after the file meant, not the temporary one
        raise type(exc)(exc.errno, exc.strerror, str(path)) from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
        # mkstemp makes the file private (0600); give it the mode a plain open() would
        os.chmod(tmp, 0o666 & ~_UMASK)
        os.replace(tmp, path)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError) and exc.errno is not None:
            raise type(exc)(exc.errno, exc.strerror, str(path)) from None
        raise


def atomic_write_text(path: Path, text: str) -> None:
    """Write a UTF-8 text file atomically (see :func:`atomic_write_bytes`)."""
    atomic_write_bytes(path, text.encode("utf-8"))
