"""Parsing and validation of the catalog's CSV tables: events.csv, the shared CSV
checks, and :class:`SourceTable` (sources.csv is parsed in :mod:`features._sources`).

Private to :mod:`features.catalog`. Every problem is collected in a
:class:`~features._checks.Problems` list with the file name and the CSV line
(line 1 is the header, so data row ``i`` is line ``i + 2``).
"""

from __future__ import annotations

import csv
import os
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from ._checks import Plausible, Problems

__all__ = ["SourceTable", "read_events", "TABLE_PLAUSIBLE"]

EVENT_COLUMNS = ("event_id", "time_utc", "flash_id", "range_m")
SOURCE_REQUIRED = ("event_id", "t_s", "azimuth_deg", "elevation_deg")
SOURCE_XYZ = ("x_m", "y_m", "z_m")

#: Accepted range of the number columns of events.csv and sources.csv
#: (inclusive; generous on purpose, like the manifest's ranges).
TABLE_PLAUSIBLE = {
    "range_m": Plausible(
        1.0, 2e6, "m", "a single station records discharge pulses out to a few hundred "
        "km; 2,000 km is beyond any of them, and a source closer than a metre is inside "
        "the antenna; common practice, no source"),
    "t_s": Plausible(
        -10.0, 10.0, "s", "a source belongs to a pulse of a flash, and a flash lasts at most "
        "a few seconds; common practice, no source"),
    "x_m": Plausible(-2e6, 2e6, "m", "the same 2,000 km as range_m"),
    "y_m": Plausible(-2e6, 2e6, "m", "the same 2,000 km as range_m"),
    "z_m": Plausible(
        -1e5, 1e5, "m", "discharges lie below the ionosphere, about 90 km up; common "
        "practice, no source"),
    "power_db": Plausible(
        -1000.0, 1000.0, "dB", "no source power is a thousand orders of magnitude from its "
        "reference; common practice, no source"),
}

#: An explicit ISO-8601 date *and* time, extended (2031-07-14T21:03:55.123Z) or
#: basic (20310714T210355Z) form, with an optional zone. Words such as "now"
#: or "today", and dates without a time, are refused.
ISO_TIME = re.compile(
    r"(?:\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?"
    r"|\d{8}T\d{4}(?:\d{2}(?:[.,]\d+)?)?)"
    r"(?:Z|[+-]\d{2}(?::?\d{2})?)?")

_CSV_CHUNK_ROWS = 100_000


def _line(i) -> str:
    return f"line {int(i) + 2}"


def _raw_header(path: Path) -> tuple[list[str], int]:
    """The header row as written (pandas renames a repeated name to ``name.1``) and
    the number of fields of the first data row (0 when there is none)."""
    with open(path, encoding="utf-8-sig", newline="") as fh:
        reader = csv.reader(iter(lambda: fh.readline(1 << 20), ""))
        header = [c.strip() for c in next(reader, [])]
        first = next(reader, [])
    return header, len(first)


def _repeated(header: list[str]) -> list[str]:
    return sorted({c for c in header if header.count(c) > 1})


def _long_row(path: Path, fname: str, n_columns: int) -> str:
    """Name the first row with more fields than the header (read only on that error)."""
    with open(path, encoding="utf-8-sig", newline="") as fh:
        reader = csv.reader(fh)
        next(reader, None)
        for row in reader:
            if len(row) > n_columns:
                hint = ("a trailing comma" if len(row) == n_columns + 1 and row[-1] == ""
                        else "a comma inside an unquoted value?")
                return (f"{fname} line {reader.line_num}: {len(row)} fields but the header "
                        f"has {n_columns} columns ({hint})")
    return f"{fname}: a row has more fields than the header's {n_columns} columns"


def _read_csv_chunks(path: Path, **kwargs):
    """pandas' chunked reader, with ``index_col=False``.

    Without it pandas silently takes the first column as the index when the
    first data row carries one field more than the header (a trailing comma);
    the caller checks that row, and pandas refuses any later row with more
    fields than the first (``ParserError``, naming the line).
    """
    return pd.read_csv(path, index_col=False, chunksize=_CSV_CHUNK_ROWS, encoding="utf-8",
                       **kwargs)


def _extra_fields(exc: Exception) -> bool:
    text = str(exc)
    return "Expected" in text and "fields" in text


def _check_range(values: np.ndarray, raw: pd.Series, fname: str, column: str,
                 problems: Problems, line_offset: int) -> None:
    """Report finite values outside :data:`TABLE_PLAUSIBLE` and set them to NaN."""
    rng = TABLE_PLAUSIBLE[column]
    with np.errstate(invalid="ignore"):
        out = (values < rng.low) | (values > rng.high)
    for i in np.flatnonzero(out):
        problems.add(f"{fname} {_line(i + line_offset)}: column '{column}' is "
                     f"{raw.iloc[i]!r}, outside the accepted range {rng.describe()} "
                     f"({rng.why})", key=f"{fname}:{column}:range")
    values[out] = np.nan


def _parse_float_column(values: pd.Series, fname: str, column: str, problems: Problems,
                        *, allow_empty: bool, line_offset: int = 0) -> np.ndarray:
    """Strings -> float64; empty (and 'nan') -> NaN when allowed, else a problem.

    The common case (every cell a plain number) is parsed in one C-level pass;
    only the cells that do not parse are looked at one by one.
    """
    out = np.array(pd.to_numeric(values, errors="coerce"), dtype=np.float64)
    odd = np.flatnonzero(np.isnan(out))
    if odd.size:
        text = values.iloc[odd].astype(str).str.strip()
        empty = (text.eq("") | text.str.lower().isin(("nan", "na", "null", "none"))).to_numpy()
        again = np.array(pd.to_numeric(text.where(~empty, "nan"), errors="coerce"),
                         dtype=np.float64)
        out[odd] = again
        bad = np.isnan(again) & ~empty
        if not allow_empty:
            bad |= empty
        for i in odd[bad]:
            problems.add(f"{fname} {_line(i + line_offset)}: column '{column}' must be a "
                         f"number, got {values.iloc[i]!r}", key=f"{fname}:{column}:number")
    inf = np.isinf(out)
    for i in np.flatnonzero(inf):
        problems.add(f"{fname} {_line(i + line_offset)}: column '{column}' must be finite, "
                     f"got {values.iloc[i]!r}", key=f"{fname}:{column}:finite")
    out[inf] = np.nan
    return out


def _event_chunk(raw: pd.DataFrame, fname: str, offset: int, problems: Problems,
                 counts: dict) -> pd.DataFrame:
    """Parse and check one chunk of events.csv (rows ``offset`` on)."""
    event_id = raw["event_id"].astype(str)
    for i in np.flatnonzero(event_id.str.strip().eq("").to_numpy()):
        problems.add(f"{fname} {_line(i + offset)}: column 'event_id' is empty",
                     key=f"{fname}:id-empty")
    text = raw["time_utc"].astype(str).str.strip()
    explicit = text.str.fullmatch(ISO_TIME).fillna(False).to_numpy(dtype=bool)
    times = pd.to_datetime(text.where(explicit, ""), format="ISO8601", utc=True,
                           errors="coerce")
    bad_time = times.isna().to_numpy() | ~explicit
    for i in np.flatnonzero(bad_time):
        problems.add(f"{fname} {_line(i + offset)}: column 'time_utc' must be an ISO-8601 UTC "
                     f"time like 2031-07-14T21:03:55.123456Z, got {raw['time_utc'].iloc[i]!r}",
                     key=f"{fname}:time")
    if len(text) and not bad_time.all():
        has_zone = text.str.contains(r"(?:Z|[+-]\d\d:?\d\d)$", regex=True)
        counts["no_zone"] += int((~has_zone).sum())
        frac = text.str.extract(r"\.(\d+)", expand=False).str.len().fillna(0)
        counts["coarse"] += int((frac < 6).sum())
    out = pd.DataFrame({"event_id": event_id,
                        "time_utc": times.astype("datetime64[ns, UTC]")})
    if "flash_id" in raw.columns:
        flash = raw["flash_id"].astype(str)
        spaced = flash.str.len() != flash.str.strip().str.len()
        out["flash_id"] = flash.str.strip() if spaced.any() else flash
    else:
        out["flash_id"] = ""
    if "range_m" in raw.columns:
        rng = _parse_float_column(raw["range_m"], fname, "range_m", problems, allow_empty=True,
                                  line_offset=offset)
        for i in np.flatnonzero(rng <= 0):
            problems.add(f"{fname} {_line(i + offset)}: column 'range_m' must be > 0 (metres), "
                         f"got {raw['range_m'].iloc[i]!r}", key=f"{fname}:range")
        rng[rng <= 0] = np.nan
        _check_range(rng, raw["range_m"], fname, "range_m", problems, offset)
        out["range_m"] = rng
    else:
        out["range_m"] = np.full(len(raw), np.nan)
    for col in raw.columns:
        if col not in EVENT_COLUMNS:
            out[col] = raw[col]
    return out


def read_events(path: Path, problems: Problems, notes: list[str]) -> pd.DataFrame | None:
    """Read and validate events.csv (in chunks, so only the parsed table stays in memory).

    Returns a DataFrame with ``event_id`` (str), ``time_utc`` (datetime64[ns, UTC]),
    ``flash_id`` (str, "" for none), ``range_m`` (float64 m, NaN unknown) and any
    other columns as strings, or None when the file cannot be used at all.
    """
    fname = path.name
    header = None
    try:
        header, first_len = _raw_header(path)
        dup_cols = _repeated(header)
        if dup_cols:
            problems.add(f"{fname}: the header repeats column(s) {dup_cols}; every column "
                         "name must appear once")
            return None
        if first_len > len(header):
            problems.add(_long_row(path, fname, len(header)))
            return None
        reader = _read_csv_chunks(path, dtype=str, keep_default_na=False, na_filter=False,
                                  skipinitialspace=False)
        parts, offset, seen = [], 0, False
        counts = {"no_zone": 0, "coarse": 0}
        for raw in reader:
            raw.columns = [str(c).strip() for c in raw.columns]
            if not seen:
                seen = True
                missing = [c for c in ("event_id", "time_utc") if c not in raw.columns]
                if missing:
                    problems.add(f"{fname}: required column(s) {missing} missing; header has "
                                 f"{list(raw.columns)}")
                    return None
            parts.append(_event_chunk(raw, fname, offset, problems, counts))
            offset += len(raw)
    except FileNotFoundError:
        problems.add(f"{fname}: file not found at {path}")
        return None
    except UnicodeDecodeError as exc:
        problems.add(f"{fname}: not valid UTF-8 text ({exc.reason} at byte {exc.start})")
        return None
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as exc:
        if header and _extra_fields(exc):
            problems.add(_long_row(path, fname, len(header)))
        else:
            problems.add(f"{fname}: not a readable CSV with a header row ({exc})")
        return None
    if not parts:
        problems.add(f"{fname}: no event rows after the header")
        return None
    out = pd.concat(parts, ignore_index=True) if len(parts) > 1 else parts[0]
    del parts
    if len(out) == 0:
        problems.add(f"{fname}: no event rows after the header")
    if counts["no_zone"]:
        notes.append(f"{fname}: {counts['no_zone']} time_utc value(s) carry no time zone; "
                     "read as UTC")
    if counts["coarse"]:
        notes.append(f"{fname}: {counts['coarse']} time_utc value(s) have less than "
                     "microsecond precision")
    event_id = out["event_id"]
    dup = event_id.duplicated(keep="first").to_numpy()
    if dup.any():
        first = {}
        for i, e in enumerate(event_id):
            first.setdefault(e, i)
        for i in np.flatnonzero(dup):
            problems.add(f"{fname} {_line(i)}: event_id {event_id.iloc[i]!r} is not unique "
                         f"(first seen on {_line(first[event_id.iloc[i]])})",
                         key=f"{fname}:id-dup")
    return out


@dataclass(frozen=True)
class SourceTable:
    """Mapped VHF sources of a catalog, sorted by event row, as flat arrays.

    Attributes
    ----------
    event_index : ndarray of int64, shape (n_sources,)
        Row of events.csv the source belongs to (non-decreasing).
    t_s : ndarray of float64, shape (n_sources,)
        Time relative to the event's trigger, in seconds.
    azimuth_deg, elevation_deg : ndarray of float64, shape (n_sources,)
        Direction from the station, in degrees.
    xyz_m : ndarray of float64, shape (n_sources, 3), or None
        East, north, up positions in metres (NaN where a row left them empty).
    power_db : ndarray of float64, shape (n_sources,), or None
        Source power in dB.
    offsets : ndarray of int64, shape (n_events + 1,)
        Sources of event ``i`` are ``offsets[i]:offsets[i + 1]``.
    """

    event_index: np.ndarray
    t_s: np.ndarray
    azimuth_deg: np.ndarray
    elevation_deg: np.ndarray
    xyz_m: np.ndarray | None
    power_db: np.ndarray | None
    offsets: np.ndarray

    @property
    def n_sources(self) -> int:
        return int(self.event_index.shape[0])

    @property
    def has_xyz(self) -> bool:
        return self.xyz_m is not None

    def counts(self) -> np.ndarray:
        """Number of sources of each event, shape (n_events,)."""
        return np.diff(self.offsets)

    def without_events(self, drop) -> SourceTable:
        """The table with the sources of the events where ``drop`` (bool, shape
        (n_events,)) is True left out; event rows keep their numbers."""
        drop = np.asarray(drop, dtype=bool)
        counts = self.counts()
        keep = ~np.repeat(drop, counts)

        def take(a):
            return None if a is None else np.asarray(a)[keep]

        return SourceTable(event_index=take(self.event_index), t_s=take(self.t_s),
                           azimuth_deg=take(self.azimuth_deg),
                           elevation_deg=take(self.elevation_deg), xyz_m=take(self.xyz_m),
                           power_db=take(self.power_db),
                           offsets=np.concatenate([[0], np.cumsum(np.where(drop, 0, counts))]
                                                  ).astype(np.int64))

    def rows(self, start: int, stop: int) -> SourceTable:
        """The sources of events ``start:stop``, with ``event_index`` relative to ``start``.

        Columns come back as float64 / int64 copies (a spilled table is read
        with plain file reads, so memory stays flat).
        """
        lo, hi = int(self.offsets[start]), int(self.offsets[stop])
        return SourceTable(
            event_index=_take(self.event_index, lo, hi).astype(np.int64) - start,
            t_s=_take(self.t_s, lo, hi).astype(np.float64),
            azimuth_deg=_take(self.azimuth_deg, lo, hi).astype(np.float64),
            elevation_deg=_take(self.elevation_deg, lo, hi).astype(np.float64),
            xyz_m=None if self.xyz_m is None else _take(self.xyz_m, lo, hi).astype(np.float64),
            power_db=(None if self.power_db is None
                      else _take(self.power_db, lo, hi).astype(np.float64)),
            offsets=np.asarray(self.offsets[start:stop + 1]) - lo,
        )


    def subset(self, rows) -> SourceTable:
        """The sources of the events ``rows`` (ascending row numbers), renumbered 0..k-1."""
        rows = np.asarray(rows, dtype=np.int64)
        counts = self.counts()[rows]
        offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
        starts = np.asarray(self.offsets[rows], dtype=np.int64)
        idx = (np.repeat(starts - offsets[:-1], counts) + np.arange(offsets[-1])).astype(np.int64)

        def take(a):
            return None if a is None else np.asarray(a)[idx].astype(np.float64)

        return SourceTable(event_index=np.repeat(np.arange(rows.size), counts).astype(np.int64),
                           t_s=take(self.t_s), azimuth_deg=take(self.azimuth_deg),
                           elevation_deg=take(self.elevation_deg), xyz_m=take(self.xyz_m),
                           power_db=take(self.power_db), offsets=offsets)


def _take(arr: np.ndarray, lo: int, hi: int) -> np.ndarray:
    """``arr[lo:hi]`` as a new array; a memory-mapped column is read with ``os.pread``."""
    if isinstance(arr, np.memmap) and arr.filename:
        width = int(np.prod(arr.shape[1:], dtype=np.int64))
        item = arr.dtype.itemsize * width
        fd = os.open(arr.filename, os.O_RDONLY)
        try:
            data = os.pread(fd, (hi - lo) * item, arr.offset + lo * item)
        finally:
            os.close(fd)
        return np.frombuffer(data, dtype=arr.dtype).reshape((hi - lo,) + arr.shape[1:]).copy()
    return np.array(arr[lo:hi])
