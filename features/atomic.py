"""Atomic file writes: a reader sees the old file or the new one, never half of one.

The data go to a temporary file beside the target, are flushed to disk, get the
permissions a normal file would get (``0o666`` minus the umask; the temporary
file is private while it is written) and are renamed over the target. On any
error the temporary file is removed and the target is untouched.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from pathlib import Path

__all__ = ["atomic_open", "atomic_write"]


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


@contextlib.contextmanager
def atomic_open(path, mode: str = "w", *, encoding: str | None = "utf-8",
                newline: str | None = "\n"):
    """Open a temporary file to write; it replaces ``path`` when the block succeeds.

    Parameters
    ----------
    path : path
        The final file.
    mode : {"w", "wb"}
    encoding, newline
        As for :func:`open` (ignored in binary mode).
    """
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        kw = {} if "b" in mode else {"encoding": encoding, "newline": newline}
        with os.fdopen(fd, mode, **kw) as fh:
            yield fh
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, 0o666 & ~_umask())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise


def atomic_write(path, data, *, encoding: str = "utf-8", newline: str | None = "\n") -> Path:
    """Write ``data`` (str or bytes) to ``path`` atomically; return the path."""
    mode = "wb" if isinstance(data, (bytes, bytearray)) else "w"
    with atomic_open(path, mode, encoding=encoding, newline=newline) as fh:
        fh.write(data)
    return Path(path)
