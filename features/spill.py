"""A catalog's features on disk, written once chunk by chunk, read back flat in memory.

Triage computes every pulse's features once (the expensive part: reading and
processing the waveforms), then adapts to the season, classifies and writes from them.
:class:`FeatureSpill` holds them in a folder:

* ``numeric.npy``: the numeric feature columns as a float64 array (n_pulses, n_columns),
  memory-mapped (booleans as 0/1); rows are written where they belong, so a resumed run
  writes the same bytes;
* ``text.csv``: the CSV record of every feature column but ``event_id``, in pulsesort's
  dialect (:mod:`features.csvio`), one per pulse, chunk after chunk, so the results file
  can carry the features exactly as ``pulsesort features`` writes them; and
  ``row_end.npy``, the byte offset in ``text.csv`` where each pulse's record ends (a
  record may hold a line break inside a quoted field);
* ``chunks.json``: the chunks written, with the columns and the byte offset of
  ``text.csv`` after each.

The folder is temporary: triage removes it when the results file is complete.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.lib.format import open_memmap

from .csvio import csv_rows

__all__ = ["FeatureSpill"]


class FeatureSpill:
    """Features of the pulses of a catalog, spilled to a folder (see the module notes).

    Parameters
    ----------
    folder : path
    n_events : int
    columns : list of str
        Numeric columns kept in ``numeric.npy``.
    key : str
        Identifies the run (catalog, settings); a folder holding another key is
        started again.
    """

    def __init__(self, folder, n_events: int, columns, key: str):
        self.folder = Path(folder)
        self.n_events = int(n_events)
        self.columns = list(columns)
        self.key = key
        meta = self.folder / "chunks.json"
        state = None
        if meta.is_file():
            try:
                state = json.loads(meta.read_text())
            except (OSError, ValueError):
                state = None
        if not state or state.get("key") != key or state.get("columns") != self.columns:
            shutil.rmtree(self.folder, ignore_errors=True)
            self.folder.mkdir(parents=True)
            open_memmap(self.folder / "numeric.npy", mode="w+", dtype=np.float64,
                        shape=(self.n_events, len(self.columns))).flush()
            open_memmap(self.folder / "row_end.npy", mode="w+", dtype=np.int64,
                        shape=(self.n_events,)).flush()
            (self.folder / "text.csv").write_bytes(b"")
            state = {"key": key, "columns": self.columns, "offsets": [], "stops": [],
                     "feature_columns": None}
            self._save(state)
        self.state = state
        # a run killed between the text write and the journal: cut the text back
        with open(self.folder / "text.csv", "r+b") as fh:
            fh.truncate(self.state["offsets"][-1] if self.state["offsets"] else 0)

    # ------------------------------------------------------------------ writing
    def _save(self, state) -> None:
        tmp = self.folder / "chunks.json.tmp"
        with open(tmp, "w") as fh:
            json.dump(state, fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, self.folder / "chunks.json")

    @property
    def n_chunks_done(self) -> int:
        return len(self.state["offsets"])

    def write_chunk(self, start: int, feats: pd.DataFrame) -> None:
        """Append one chunk's features (rows ``start:start+len``), in catalog order."""
        stop = start + len(feats)
        numeric = np.column_stack([feats[c].to_numpy(dtype=np.float64) for c in self.columns]
                                  ) if len(feats) else np.zeros((0, len(self.columns)))
        arr = np.load(self.folder / "numeric.npy", mmap_mode="r+")
        arr[start:stop] = numeric
        arr.flush()
        del arr
        records = [(r + "\n").encode("utf-8") for r in csv_rows(feats.drop(columns=["event_id"]))]
        base = self.state["offsets"][-1] if self.state["offsets"] else 0
        ends = base + np.cumsum([len(r) for r in records], dtype=np.int64)
        idx = np.load(self.folder / "row_end.npy", mmap_mode="r+")
        idx[start:stop] = ends
        idx.flush()
        del idx
        with open(self.folder / "text.csv", "ab") as fh:
            fh.write(b"".join(records))
            fh.flush()
            os.fsync(fh.fileno())
            end = fh.tell()
        if self.state["feature_columns"] is None:
            self.state["feature_columns"] = [str(c) for c in feats.columns]
        self.state["offsets"].append(end)
        self.state["stops"].append(stop)
        self._save(self.state)

    # ------------------------------------------------------------------ reading
    def numeric(self) -> np.ndarray:
        """All numeric columns, memory-mapped read-only, shape (n_events, n_columns)."""
        return np.load(self.folder / "numeric.npy", mmap_mode="r")

    def frame(self, start: int, stop: int) -> pd.DataFrame:
        """Rows ``start:stop`` of the numeric columns as a DataFrame (a copy)."""
        return pd.DataFrame(np.array(self.numeric()[start:stop]), columns=self.columns)

    @property
    def feature_columns(self) -> list[str]:
        """The feature table's columns (``event_id`` first), as the chunks wrote them."""
        return list(self.state["feature_columns"] or [])

    def records(self, start: int, stop: int) -> list[str]:
        """The feature CSV records (no ``event_id``, no line end) of rows ``start:stop``."""
        ends = np.load(self.folder / "row_end.npy", mmap_mode="r")
        first = int(ends[start - 1]) if start > 0 else 0
        last = int(ends[stop - 1]) if stop > start else first
        bounds = np.concatenate([[first], np.asarray(ends[start:stop], dtype=np.int64)])
        with open(self.folder / "text.csv", "rb") as fh:
            fh.seek(first)
            data = fh.read(last - first)
        rel = bounds - first
        return [data[rel[i]:rel[i + 1] - 1].decode("utf-8") for i in range(stop - start)]

    def remove(self) -> None:
        shutil.rmtree(self.folder, ignore_errors=True)
