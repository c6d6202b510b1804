"""A station's recordings as records: open them lazily and cut windows out of them.

A *record* is one array of samples: a ``.npy`` file (memory-mapped), one HDF5
dataset (sliced by h5py, never read whole), one npz key (npz members cannot be
memory-mapped: each is read whole, so use .npy or HDF5 for long records) or one
CSV column (converted once to a raw float64 file in the staging folder, then
memory-mapped). Continuous records are 1-D; triggered records are 2-D (one row
per trigger) or 1-D (one trigger per record).
"""

from __future__ import annotations

import contextlib
import fnmatch
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .._checks import InputError
from ..station import ATTR, ChannelSpec, StationDescription

__all__ = ["Record", "cut_windows", "open_records", "parse_utc_ns"]


@dataclass
class Record:
    """One record: ``data`` slices like an ndarray; ``attrs`` maps attribute names."""

    label: str
    path: Path
    data: object
    attrs: dict

    @property
    def n_samples(self) -> int:
        return int(self.data.shape[-1])

    def attribute(self, ref: str, what: str):
        """The value of ``"attr:NAME"``, or InputError naming the record and attribute."""
        name = ref[len(ATTR):]
        if name not in self.attrs:
            raise InputError(f"{self.label}: attribute {name!r} (for {what}) not found; it "
                             f"has {sorted(self.attrs) or 'no attributes'}")
        v = self.attrs[name]
        return v.item() if isinstance(v, np.ndarray) and v.size == 1 else v


def parse_utc_ns(value, where: str) -> int:
    """ISO-8601 UTC text (or bytes, or datetime64) -> int64 ns since 1970 UTC."""
    if isinstance(value, bytes):
        value = value.decode("utf-8", "replace")
    if isinstance(value, np.datetime64):
        return int(value.astype("datetime64[ns]").astype(np.int64))
    try:
        t = pd.Timestamp(str(value))
    except (ValueError, TypeError):
        raise InputError(f"{where}: expected an ISO-8601 UTC time like "
                         f"2031-07-14T21:03:55.123456789Z, got {value!r}") from None
    if t.tzinfo is None:
        t = t.tz_localize("UTC")
    return int(t.tz_convert("UTC").value)


def _hdf5_records(path: Path, pattern: str, stack: contextlib.ExitStack) -> list[Record]:
    try:
        import h5py
    except ImportError:
        raise InputError(f"{path}: reading HDF5 needs h5py: pip install 'pulsesort[hdf5]'"
                         ) from None
    try:
        h = stack.enter_context(h5py.File(path, "r"))
    except OSError as exc:
        raise InputError(f"{path}: not a readable HDF5 file ({exc})") from exc
    names: list[str] = []
    h.visititems(lambda n, o: names.append(n) if isinstance(o, h5py.Dataset) else None)
    hits = sorted(n for n in names if fnmatch.fnmatchcase(n, pattern.lstrip("/")))
    if not hits:
        raise InputError(f"{path}: no dataset matches {pattern!r}; datasets: {sorted(names)}")
    root = {k: h.attrs[k] for k in h.attrs}
    return [Record(f"{path.name}:{n}", path, h[n], {**root, **{k: h[n].attrs[k]
                                                              for k in h[n].attrs}})
            for n in hits]


def _csv_record(path: Path, column: str, stage: Path) -> Record:
    raw = stage / f".{path.stem}.{column}.f8"
    n = 0
    try:
        with open(raw, "wb") as out:
            for chunk in pd.read_csv(path, usecols=[column], chunksize=1 << 20,
                                     dtype=np.float64, engine="c"):
                out.write(np.ascontiguousarray(chunk[column].to_numpy(np.float64)).tobytes())
                n += len(chunk)
    except ValueError as exc:
        raise InputError(f"{path}: column {column!r} of samples could not be read ({exc})"
                         ) from exc
    data = np.memmap(raw, dtype=np.float64, mode="r", shape=(n,)) if n else np.empty(0)
    return Record(f"{path.name}:{column}", path, data, {})


def open_records(spec: ChannelSpec, stack: contextlib.ExitStack, stage: Path) -> list[Record]:
    """Every record of a channel, in file order (datasets sorted by name within a file)."""
    out: list[Record] = []
    for path in spec.files:
        if spec.format == "npy":
            try:
                arr = np.load(path, mmap_mode="r", allow_pickle=False)
            except (ValueError, OSError) as exc:
                raise InputError(f"{path}: not a readable .npy file ({exc})") from exc
            out.append(Record(path.name, path, arr, {}))
        elif spec.format == "npz":
            try:
                z = stack.enter_context(np.load(path, allow_pickle=False))
            except (ValueError, OSError) as exc:
                raise InputError(f"{path}: not a readable .npz file ({exc})") from exc
            keys = sorted(k for k in z.files if fnmatch.fnmatchcase(k, spec.dataset))
            if not keys:
                raise InputError(f"{path}: no key matches {spec.dataset!r}; keys: {z.files}")
            attrs = {k: z[k] for k in z.files if z[k].ndim == 0}
            out += [Record(f"{path.name}:{k}", path, z[k], attrs) for k in keys]
        elif spec.format == "hdf5":
            out += _hdf5_records(path, spec.dataset, stack)
        else:
            out.append(_csv_record(path, spec.dataset, stage))
    want = 1 if spec.layout == "continuous" else (1, 2)
    for r in out:
        nd = len(r.data.shape)
        if nd not in np.atleast_1d(want):
            raise InputError(f"{r.label}: a {spec.layout} record must be "
                             f"{'1-D' if spec.layout == 'continuous' else '1-D or 2-D'}, got "
                             f"shape {tuple(r.data.shape)}")
        if np.dtype(r.data.dtype).kind not in "fiu":
            raise InputError(f"{r.label}: samples must be numbers, got dtype {r.data.dtype}")
    return out


def cut_windows(data, starts: np.ndarray, length: int, out: np.ndarray,
                max_span: int = 1 << 22) -> int:
    """Copy ``data[s:s + length]`` for every start into the rows of ``out``.

    Windows are read in groups whose combined span is at most ``max_span`` samples
    (one slice per group, then a vectorised gather), so a group of close pulses is
    one read. Samples outside the record are NaN. Returns the number of windows
    that reached outside the record.
    """
    n = int(data.shape[0])
    starts = np.asarray(starts, dtype=np.int64)
    order = np.argsort(starts, kind="stable")
    s_sorted = starts[order]
    offsets = np.arange(length, dtype=np.int64)
    padded = int(((starts < 0) | (starts + length > n)).sum())
    i = 0
    while i < s_sorted.size:  # a loop over groups of windows, never over samples
        lo = max(0, int(s_sorted[i]))
        j = int(np.searchsorted(s_sorted, lo + max_span - length, side="right"))
        j = max(j, i + 1)
        hi = min(n, max(lo, int(s_sorted[j - 1]) + length))
        span = np.asarray(data[lo:hi], dtype=np.float64) if hi > lo else np.empty(0)
        idx = s_sorted[i:j, None] + offsets[None, :] - lo
        ok = (idx >= 0) & (idx < span.size)
        block = np.full(idx.shape, np.nan)
        if span.size:
            block[ok] = span[idx[ok]]
        out[order[i:j]] = block
        i = j
    return padded


def _given_triggers(d: StationDescription, rec_labels: list[str], starts_ns) -> pd.DataFrame:
    spec = d.triggers
    where = spec.file.name
    df = pd.read_csv(spec.file, dtype=str, keep_default_na=False)
    df.columns = [str(c).strip() for c in df.columns]
    need = [c for c in (spec.time_column, spec.record_column, spec.event_id_column,
                        spec.range_column) if c]
    missing = [c for c in need if c not in df.columns]
    if missing:
        raise InputError(f"{where}: column(s) {missing} named in [triggers] are not in its "
                         f"header {list(df.columns)}")
    if spec.time == "utc":
        t = pd.to_datetime(df[spec.time_column].str.strip(), format="ISO8601", utc=True,
                           errors="coerce")
        bad = np.flatnonzero(t.isna().to_numpy())
        if bad.size:
            raise InputError([f"{where} line {i + 2}: column {spec.time_column!r} must be an "
                              f"ISO-8601 UTC time, got {df[spec.time_column].iloc[i]!r}"
                              for i in bad[:10]])
        ns = t.astype("datetime64[ns, UTC]").astype("int64").to_numpy()
    else:
        rel = pd.to_numeric(df[spec.time_column], errors="coerce").to_numpy(np.float64)
        names = {lab: i for i, lab in enumerate(rec_labels)}
        names.update({lab.split(":")[0]: i for i, lab in enumerate(rec_labels)})
        rix = df[spec.record_column].str.strip().map(names)
        bad = np.flatnonzero(~np.isfinite(rel) | rix.isna().to_numpy())
        if bad.size:
            raise InputError([f"{where} line {i + 2}: needs a number of seconds in "
                              f"{spec.time_column!r} and a known record in "
                              f"{spec.record_column!r} (records: {rec_labels[:5]}...)"
                              for i in bad[:10]])
        ns = starts_ns[rix.to_numpy(np.int64)] + np.round(rel * 1e9).astype(np.int64)
    out = pd.DataFrame({"time_ns": ns})
    used = {spec.time_column, spec.record_column, spec.event_id_column, spec.range_column}
    for c in df.columns:  # other columns (e.g. flash_id) are carried to events.csv
        if c not in used and c not in ("event_id", "time_utc", "range_m"):
            out[c] = df[c].to_numpy()
    if spec.event_id_column:
        out["event_id"] = df[spec.event_id_column].str.strip().to_numpy()
        dup = out["event_id"][out["event_id"].duplicated()]
        if len(dup):
            raise InputError(f"{where}: event ids repeat: {list(dup.unique()[:5])}")
    if spec.range_column:
        r = pd.to_numeric(df[spec.range_column].replace("", np.nan), errors="coerce")
        out["range_m"] = r.to_numpy(np.float64)
    out["line"] = np.arange(len(df)) + 2
    return out
