"""The content hash of a catalog (manifest, events table, sampled data files).

Private to :mod:`features.catalog`, which re-exports :func:`catalog_hash`.
"""

from __future__ import annotations

import hashlib
import os
from pathlib import Path

import numpy as np

__all__ = ["HASH_BLOCK", "HASH_BLOCKS", "catalog_hash"]

#: Sampled hash of the data files: blocks of this many bytes...
HASH_BLOCK = 1 << 16
#: ...this many of them evenly spaced, plus the first and the last block.
HASH_BLOCKS = 64
_HASH_TAG = b"pulsesort catalog hash 2\0"


def catalog_hash(manifest_bytes: bytes, events_path, data_files) -> tuple[str, str]:
    """The content hash of a catalog and the hash of earlier versions.

    The hash covers the manifest bytes, the whole events table, and of every
    other data file (``field.npy``, ``vhf.npy``, ``sources.csv`` when used) its
    name, its size and a sample of its bytes: the first 64 KiB block (the
    ``.npy`` header and first rows), 64 evenly spaced 64 KiB blocks and the last
    block; a file of at most 66 blocks (4.1 MiB) is hashed whole. A sample reads
    about 4 MiB per file however big the season, and any change of size, header,
    dtype, shape or of a sampled block changes the hash; a change confined to
    bytes between two sampled blocks of a big file does not.

    Parameters
    ----------
    manifest_bytes : bytes
        ``catalog.json`` as read.
    events_path : path
    data_files : list of path

    Returns
    -------
    (content_hash, legacy_hash) : tuple of str
        ``"sha256:<hex>"`` each. ``legacy_hash`` covers the manifest and the
        events table only (the hash of pulsesort before the data files were
        included); label stores written then recorded it.
    """
    legacy = hashlib.sha256()
    legacy.update(manifest_bytes)
    legacy.update(b"\0")
    with open(events_path, "rb") as fh:  # in blocks: a big events table is not held
        for block in iter(lambda: fh.read(1 << 20), b""):
            legacy.update(block)
    h = hashlib.sha256(_HASH_TAG)
    h.update(legacy.digest())
    for path in data_files:
        path = Path(path)
        size = path.stat().st_size
        h.update(f"\0{path.name}\0{size}\0".encode())
        n_blocks = -(-size // HASH_BLOCK)
        if n_blocks <= HASH_BLOCKS + 2:
            starts = range(0, size, HASH_BLOCK)
        else:
            middle = np.linspace(0, size - HASH_BLOCK, HASH_BLOCKS + 2).astype(np.int64)
            starts = sorted({0, size - HASH_BLOCK, *map(int, middle)})
        fd = os.open(path, os.O_RDONLY)
        try:
            for start in starts:
                h.update(os.pread(fd, HASH_BLOCK, start))
        finally:
            os.close(fd)
    return "sha256:" + h.hexdigest(), "sha256:" + legacy.hexdigest()
