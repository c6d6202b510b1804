"""Parsing and validation of sources.csv into a :class:`~features._tables.SourceTable`.

Private to :mod:`features.catalog`. Big tables are parsed chunk by chunk into
per-column files in a temporary folder (memory stays flat in table size); every
problem is collected with the file name, the CSV line and the column.
"""

from __future__ import annotations

import os
import shutil
import tempfile
import weakref
from pathlib import Path

import numpy as np
import pandas as pd

from ._checks import Problems
from ._tables import (
    SOURCE_REQUIRED,
    SOURCE_XYZ,
    SourceTable,
    _check_range,
    _extra_fields,
    _line,
    _long_row,
    _parse_float_column,
    _raw_header,
    _read_csv_chunks,
    _repeated,
    _take,
)

__all__ = ["read_sources", "SOURCES_IN_MEMORY_MAX"]

#: Above this many sources the parsed table is kept in memory-mapped files in a
#: temporary folder instead of RAM (about 40 bytes per source either way).
SOURCES_IN_MEMORY_MAX = 2_000_000


#: Storage dtype of each source column (float32 keeps angles to ~1e-5 deg and
#: positions to ~1 cm at 100 km; times stay float64).
_SOURCE_DTYPES = {"event_index": np.int32, "t_s": np.float64, "azimuth_deg": np.float32,
                  "elevation_deg": np.float32, "xyz_m": np.float32, "power_db": np.float32}


class _Columns:
    """Per-column storage: RAM for small tables, raw files in a temporary folder beyond.

    Spilled columns are appended chunk by chunk, so parsing a 20-million-source
    table never holds more than one CSV chunk in memory.
    """

    def __init__(self, spill: bool):
        self.parts: dict[str, list[np.ndarray]] = {}
        self.spill = spill
        self.tmpdir = tempfile.mkdtemp(prefix="pulsesort-sources-") if spill else None
        self.rows: dict[str, int] = {}
        self.width: dict[str, tuple] = {}

    def _file(self, key):
        return os.path.join(self.tmpdir, f"{key}.bin")

    def append(self, **arrays: np.ndarray) -> None:
        for k, v in arrays.items():
            v = np.ascontiguousarray(v, dtype=_SOURCE_DTYPES[k])
            if self.spill:
                with open(self._file(k), "ab") as fh:
                    v.tofile(fh)
                self.rows[k] = self.rows.get(k, 0) + len(v)
                self.width[k] = v.shape[1:]
            else:
                self.parts.setdefault(k, []).append(v)

    def column(self, key) -> np.ndarray:
        """The whole column (a read-only memory map when spilled)."""
        if not self.spill:
            parts = self.parts.get(key, [])
            return np.concatenate(parts) if parts else np.empty(0, _SOURCE_DTYPES[key])
        n = self.rows.get(key, 0)
        if n == 0:
            return np.empty((0,) + self.width.get(key, ()), _SOURCE_DTYPES[key])
        return np.memmap(self._file(key), dtype=_SOURCE_DTYPES[key], mode="r",
                         shape=(n,) + self.width[key])

    def finish(self, order: np.ndarray | None) -> dict[str, np.ndarray]:
        """Every column, reordered by ``order`` when given."""
        out = {}
        for k in list(self.rows) if self.spill else list(self.parts):
            col = self.column(k)
            if order is not None:
                col = np.asarray(col)[order]          # unsorted input only: one column at once
                if self.spill:
                    col.tofile(self._file(k))
                    col = self.column(k)
            out[k] = col
        self.parts = {}
        return out

    def discard(self) -> None:
        """Remove the temporary files (after a failed parse)."""
        if self.tmpdir is not None:
            shutil.rmtree(self.tmpdir, ignore_errors=True)


def _decreases(ev: np.ndarray, block: int = 1 << 22) -> bool:
    """Whether a (possibly memory-mapped) index column ever decreases, read in blocks."""
    last = None
    for lo in range(0, len(ev), block):
        part = _take(ev, lo, min(lo + block, len(ev)))
        if (np.diff(part) < 0).any() or (last is not None and part[0] < last):
            return True
        last = part[-1]
    return False


def read_sources(path: Path, event_ids: pd.Index, problems: Problems,
                 notes: list[str]) -> SourceTable | None:
    """Read and validate sources.csv in chunks; map event ids to event rows.

    A first pass lets the CSV parser read the number columns as numbers (fast);
    if any cell is not a number, or any check fails, the file is read again as
    text so that every problem is reported with its line and its exact text.
    """
    trial, trial_notes = Problems(), []
    try:
        table = _read_sources_pass(path, event_ids, trial, trial_notes, numeric=True)
    except ValueError:          # a number column holds text: the careful pass says where
        table = None
    if table is not None and not trial:
        notes.extend(trial_notes)
        return table
    return _read_sources_pass(path, event_ids, problems, notes, numeric=False)


_SOURCE_NUMBERS = ("t_s", "azimuth_deg", "elevation_deg", "x_m", "y_m", "z_m", "power_db")


def _read_sources_pass(path: Path, event_ids: pd.Index, problems: Problems,
                       notes: list[str], numeric: bool) -> SourceTable | None:
    fname = path.name
    n_events = len(event_ids)
    raw_header = None
    try:
        size = path.stat().st_size
        raw_header, first_len = _raw_header(path)
        dup_cols = _repeated(raw_header)
        if dup_cols:
            problems.add(f"{fname}: the header repeats column(s) {dup_cols}; every column "
                         "name must appear once")
            return None
        if first_len > len(raw_header):
            problems.add(_long_row(path, fname, len(raw_header)))
            return None
        if numeric:
            header = [str(c).strip() for c in pd.read_csv(path, nrows=0, encoding="utf-8")]
            dtypes = {c: np.float64 for c in header if c in _SOURCE_NUMBERS}
            reader = _read_csv_chunks(path, dtype={**{c: str for c in header}, **dtypes},
                                      keep_default_na=False,
                                      na_values={c: [""] for c in dtypes})
        else:
            reader = _read_csv_chunks(path, dtype=str, keep_default_na=False, na_filter=False)
    except FileNotFoundError:
        problems.add(f"{fname}: file not found at {path} (declared in catalog.json 'sources')")
        return None
    except UnicodeDecodeError as exc:
        problems.add(f"{fname}: not valid UTF-8 text ({exc.reason} at byte {exc.start})")
        return None
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
        problems.add(f"{fname}: not a readable CSV with a header row ({exc})")
        return None
    # ~60 bytes per CSV line: spill big tables to disk, not RAM.
    cols = _Columns(spill=size / 60 > SOURCES_IN_MEMORY_MAX)
    has_xyz = has_power = None
    offset = 0
    wrapped = 0
    try:
        for chunk in reader:
            chunk.columns = [str(c).strip() for c in chunk.columns]
            if has_xyz is None:
                missing = [c for c in SOURCE_REQUIRED if c not in chunk.columns]
                if missing:
                    problems.add(f"{fname}: required column(s) {missing} missing; header has "
                                 f"{list(chunk.columns)}")
                    cols.discard()
                    return None
                present = [c for c in SOURCE_XYZ if c in chunk.columns]
                if 0 < len(present) < 3:
                    problems.add(f"{fname}: columns x_m, y_m, z_m come together; found only "
                                 f"{present}")
                has_xyz = len(present) == 3
                has_power = "power_db" in chunk.columns
            idx = event_ids.get_indexer(chunk["event_id"].astype(str))
            for i in np.flatnonzero(idx < 0):
                problems.add(f"{fname} {_line(i + offset)}: event_id "
                             f"{chunk['event_id'].iloc[i]!r} is not in events.csv",
                             key=f"{fname}:event")
            t = _parse_float_column(chunk["t_s"], fname, "t_s", problems,
                                    allow_empty=False, line_offset=offset)
            _check_range(t, chunk["t_s"], fname, "t_s", problems, offset)
            az = _parse_float_column(chunk["azimuth_deg"], fname, "azimuth_deg", problems,
                                     allow_empty=False, line_offset=offset)
            el = _parse_float_column(chunk["elevation_deg"], fname, "elevation_deg", problems,
                                     allow_empty=False, line_offset=offset)
            full_turn = az == 360.0   # the same direction as 0 (a writer's rounding)
            if full_turn.any():
                az[full_turn] = 0.0
                wrapped += int(full_turn.sum())
            bad_az, bad_el = (az < 0) | (az >= 360), (el < 0) | (el > 90)
            for i in np.flatnonzero(bad_az):
                problems.add(f"{fname} {_line(i + offset)}: column 'azimuth_deg' must be in "
                             f"[0, 360), got {chunk['azimuth_deg'].iloc[i]!r}",
                             key=f"{fname}:az")
            for i in np.flatnonzero(bad_el):
                problems.add(f"{fname} {_line(i + offset)}: column 'elevation_deg' must be in "
                             f"[0, 90], got {chunk['elevation_deg'].iloc[i]!r}",
                             key=f"{fname}:el")
            az[bad_az], el[bad_el] = np.nan, np.nan   # never cast a refused value to float32
            arrays = dict(event_index=idx.astype(np.int64), t_s=t, azimuth_deg=az,
                          elevation_deg=el)
            if has_xyz:
                xyz = []
                for c in SOURCE_XYZ:
                    v = _parse_float_column(chunk[c], fname, c, problems, allow_empty=True,
                                            line_offset=offset)
                    _check_range(v, chunk[c], fname, c, problems, offset)
                    xyz.append(v)
                arrays["xyz_m"] = np.column_stack(xyz)
            if has_power:
                power = _parse_float_column(chunk["power_db"], fname, "power_db", problems,
                                            allow_empty=True, line_offset=offset)
                _check_range(power, chunk["power_db"], fname, "power_db", problems, offset)
                arrays["power_db"] = power
            cols.append(**arrays)
            offset += len(chunk)
    except UnicodeDecodeError as exc:
        problems.add(f"{fname}: not valid UTF-8 text ({exc.reason} at byte {exc.start})")
        cols.discard()
        return None
    except pd.errors.ParserError as exc:
        if raw_header and _extra_fields(exc):
            problems.add(_long_row(path, fname, len(raw_header)))
        else:
            problems.add(f"{fname}: malformed CSV ({exc})")
        cols.discard()
        return None
    except ValueError:
        cols.discard()
        raise
    if has_xyz is None:  # header only
        has_xyz, has_power = False, False
    has_any = offset > 0
    if wrapped:
        notes.append(f"{fname}: {wrapped} azimuth_deg value(s) of exactly 360 read as 0")
    if problems:
        cols.discard()
        return None
    ev = cols.column("event_index") if has_any else np.empty(0, np.int32)
    order = None
    if ev.size and _decreases(ev):
        order = np.argsort(np.asarray(ev), kind="stable")
        notes.append(f"{fname}: rows are not in events.csv order; sorted on load")
    del ev
    arrays = cols.finish(order)
    event_index = arrays["event_index"]
    counts = np.zeros(n_events, dtype=np.int64)
    for lo in range(0, len(event_index), 1 << 22):   # in blocks: no lasting memory map
        part = _take(event_index, lo, min(lo + (1 << 22), len(event_index)))
        counts += np.bincount(part, minlength=n_events)
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    table = SourceTable(
        event_index=event_index,
        t_s=arrays["t_s"],
        azimuth_deg=arrays["azimuth_deg"],
        elevation_deg=arrays["elevation_deg"],
        xyz_m=arrays.get("xyz_m") if has_xyz else None,
        power_db=arrays.get("power_db") if has_power else None,
        offsets=offsets,
    )
    if cols.tmpdir is not None:
        weakref.finalize(table, shutil.rmtree, cols.tmpdir, True)
    return table
