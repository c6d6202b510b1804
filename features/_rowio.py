"""Read rows of a 2-D ``.npy`` file with plain file reads, not a memory map.

A memory map is the natural way to read a catalog larger than memory, but every
page it touches stays in the process's resident set until the kernel needs the
memory back, so a pass over a 50 GB season shows a resident set of gigabytes
(page cache, really) and looks like a leak. :class:`NpyRows` reads each block of
rows into a fresh buffer with ``os.pread``: the data still come from the page
cache when they are there, the process keeps only the rows it works on, and
memory stays flat in catalog size. Fortran-ordered files (rare) fall back to
the memory map.
"""

from __future__ import annotations

import os

import numpy as np

from ._checks import InputError

__all__ = ["NpyRows"]


class NpyRows:
    """Row access to a 2-D ``.npy`` file.

    Parameters
    ----------
    path : path
        The ``.npy`` file (already validated as 2-D).
    """

    def __init__(self, path):
        self.path = os.fspath(path)
        mm = np.load(self.path, mmap_mode="r", allow_pickle=False)
        self.shape = mm.shape
        self.dtype = mm.dtype
        self.offset = int(getattr(mm, "offset", 0))
        self.fortran = bool(mm.flags.f_contiguous and not mm.flags.c_contiguous)
        del mm
        self.row_bytes = int(self.shape[1]) * self.dtype.itemsize

    def __len__(self) -> int:
        return int(self.shape[0])

    def read(self, start: int, stop: int) -> np.ndarray:
        """Rows ``start:stop`` as a new (writeable) array of the file's dtype."""
        start, stop = max(int(start), 0), min(int(stop), self.shape[0])
        n = max(stop - start, 0)
        if self.fortran:
            return np.array(np.load(self.path, mmap_mode="r")[start:stop])
        buf = np.empty(n * self.row_bytes, dtype=np.uint8)   # no zero-fill: it is overwritten
        view = memoryview(buf)
        fd = os.open(self.path, os.O_RDONLY)
        try:
            pos, done = self.offset + start * self.row_bytes, 0
            while done < len(buf):
                got = os.preadv(fd, [view[done:]], pos + done)
                if got <= 0:
                    raise InputError(f"{self.path}: file ends before row {stop} (truncated "
                                     "after the catalog was opened?)")
                done += got
        finally:
            os.close(fd)
        return buf.view(self.dtype).reshape(n, self.shape[1])

    def read_columns(self, start: int, stop: int, c0: int, c1: int) -> np.ndarray:
        """Columns ``c0:c1`` of rows ``start:stop``, reading only those bytes.

        One ``os.pread`` per row; when the span is most of a row, whole rows are
        read in one call instead.
        """
        start, stop = max(int(start), 0), min(int(stop), self.shape[0])
        c0, c1 = max(int(c0), 0), min(int(c1), self.shape[1])
        n, width = max(stop - start, 0), max(c1 - c0, 0)
        if self.fortran or width >= 0.8 * self.shape[1]:
            return np.ascontiguousarray(self.read(start, stop)[:, c0:c1])
        item = self.dtype.itemsize
        out = np.empty((n, width), dtype=self.dtype)
        raw = out.view(np.uint8).reshape(n, width * item)
        fd = os.open(self.path, os.O_RDONLY)
        try:
            base = self.offset + c0 * item
            for i in range(n):
                pos = base + (start + i) * self.row_bytes
                got = os.preadv(fd, [raw[i]], pos)
                if got != width * item:
                    raise InputError(f"{self.path}: file ends before row {start + i} "
                                     "(truncated after the catalog was opened?)")
        finally:
            os.close(fd)
        return out
