"""Read and validate a pulse catalog (format: catalog v1).

A catalog is one folder: ``catalog.json`` (manifest), ``events.csv``,
``field.npy`` and optionally ``vhf.npy`` and ``sources.csv``. :func:`open_catalog`
checks every rule of the format at once and either returns a :class:`Catalog`
or raises :class:`~features.CatalogError` listing every problem found (file,
row or key, expected vs found). Nothing is half-read.

Units are converted here and nowhere else: :meth:`Catalog.read_field` returns the
field change in V/m in the physics sign convention (positive = field vector at
the ground pointing up), whatever the file's units, scale, dtype and convention.
Waveform arrays are memory-mapped, so a catalog larger than memory is read
chunk by chunk (:meth:`Catalog.iter_chunks`).

Examples
--------
>>> cat = open_catalog("hollowmere-2031")            # doctest: +SKIP
>>> for chunk in cat.iter_chunks(4096):              # doctest: +SKIP
...     e = chunk.field_v_per_m                       # (n, n_samples) float64, V/m
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from ._checks import CatalogError, InputError, Problems, describe_path_kind
from ._hash import catalog_hash
from ._manifest import Channel, _channel, _file_in, _read_manifest, _short
from ._sources import read_sources
from ._tables import SourceTable, read_events

__all__ = ["Catalog", "Channel", "Chunk", "open_catalog", "scan_quality", "catalog_hash",
           "CatalogError"]

@dataclass
class Chunk:
    """Rows ``start:stop`` of a catalog, converted to SI units.

    Attributes
    ----------
    start, stop : int
    field_v_per_m : ndarray of float64, shape (n, n_field_samples)
        Field change in V/m, physics convention, NaN where missing (not yet
        decay-compensated: that is a feature step).
    field_clipped : ndarray of bool, shape (n,)
    vhf : ndarray of float64, shape (n, n_vhf_samples), or None
        VHF as stored (antenna voltage, or linear power), NaN where missing.
    vhf_clipped : ndarray of bool, shape (n,)
    range_m : ndarray of float64, shape (n,)
    sources : SourceTable or None
        The chunk's sources, ``event_index`` relative to ``start``.
    """

    start: int
    stop: int
    field_v_per_m: np.ndarray
    field_clipped: np.ndarray
    vhf: np.ndarray | None
    vhf_clipped: np.ndarray
    range_m: np.ndarray
    sources: SourceTable | None


@dataclass(frozen=True, eq=False)
class Catalog:
    """A validated pulse catalog. Build it with :func:`open_catalog`.

    Attributes
    ----------
    path : pathlib.Path
        The catalog folder.
    manifest : dict
        ``catalog.json`` as read, unknown keys kept.
    events : pandas.DataFrame
        ``event_id`` (str), ``time_utc`` (datetime64[ns, UTC]), ``flash_id`` (str,
        "" when none), ``range_m`` (float64, m, NaN unknown), other columns as str.
    field : Channel
    vhf : Channel or None
    sources : SourceTable or None
    content_hash : str
        ``"sha256:<hex>"`` of the manifest, the whole events table and a sample of
        every other data file (see :func:`catalog_hash`).
    notes : tuple of str
        Things worth knowing that are not errors (e.g. undeclared files ignored).
    legacy_content_hash : str
        The hash of earlier pulsesort versions (manifest and events table only),
        which label stores and triage journals written by them recorded.
    """

    path: Path
    manifest: dict
    events: pd.DataFrame
    field: Channel
    vhf: Channel | None
    sources: SourceTable | None
    content_hash: str
    notes: tuple[str, ...] = field(default_factory=tuple)
    legacy_content_hash: str = ""

    def __repr__(self) -> str:
        channels = "+".join(n for n, present in (("field", True), ("vhf", self.vhf is not None),
                                                  ("sources", self.sources is not None))
                            if present)
        return (f"Catalog(catalog_id={self.catalog_id!r}, n_events={self.n_events}, "
                f"channels={channels}, path={str(self.path)!r})")

    @property
    def content_hashes(self) -> tuple[str, ...]:
        """Every hash this catalog may have been recorded under, newest first."""
        return tuple(h for h in (self.content_hash, self.legacy_content_hash) if h)

    @property
    def catalog_id(self) -> str:
        return self.manifest["catalog_id"]

    @property
    def station(self) -> str | None:
        v = self.manifest.get("station")
        return None if v is None else str(v)

    @property
    def season(self) -> str | None:
        v = self.manifest.get("season")
        return None if v is None else str(v)

    @property
    def n_events(self) -> int:
        return len(self.events)

    @cached_property
    def event_ids(self) -> np.ndarray:
        """Event ids in row order (object array, built once)."""
        ids = self.events["event_id"].to_numpy(dtype=object)
        ids.flags.writeable = False
        return ids

    @property
    def has_sources(self) -> bool:
        return self.sources is not None

    @property
    def has_xyz(self) -> bool:
        return self.sources is not None and self.sources.has_xyz

    @cached_property
    def time_ns(self) -> np.ndarray:
        """Trigger times as int64 nanoseconds since 1970-01-01 UTC."""
        return self.events["time_utc"].astype("int64").to_numpy()

    @cached_property
    def range_m(self) -> np.ndarray:
        return self.events["range_m"].to_numpy(dtype=np.float64)

    def read_field(self, start: int, stop: int) -> tuple[np.ndarray, np.ndarray]:
        """Field rows ``start:stop`` in V/m (physics convention) and their clip flags."""
        raw = self.field.read_rows(start, stop)
        clipped = self.field.clipped_rows(raw)
        out = raw.astype(np.float64)
        out *= self.field.scale * self.field.sign
        return out, clipped

    def read_vhf(self, start: int, stop: int) -> tuple[np.ndarray | None, np.ndarray]:
        """VHF rows ``start:stop`` as stored (float64) and their clip flags."""
        if self.vhf is None:
            return None, np.zeros(stop - start, dtype=bool)
        raw = self.vhf.read_rows(start, stop)
        return raw.astype(np.float64), self.vhf.clipped_rows(raw)

    def chunk(self, start: int, stop: int) -> Chunk:
        """Rows ``start:stop`` as a :class:`Chunk` in SI units."""
        field_v, fclip = self.read_field(start, stop)
        vhf, vclip = self.read_vhf(start, stop)
        return Chunk(start=start, stop=stop, field_v_per_m=field_v, field_clipped=fclip,
                     vhf=vhf, vhf_clipped=vclip, range_m=self.range_m[start:stop].copy(),
                     sources=None if self.sources is None else self.sources.rows(start, stop))

    def chunk_bounds(self, chunk_size: int) -> list[tuple[int, int]]:
        """``(start, stop)`` of every chunk of ``chunk_size`` rows (the last may be shorter)."""
        if chunk_size < 1:
            raise ValueError(f"chunk_size must be >= 1, got {chunk_size}")
        return [(s, min(s + chunk_size, self.n_events))
                for s in range(0, self.n_events, chunk_size)]

    def iter_chunks(self, chunk_size: int = 4096) -> Iterator[Chunk]:
        """Yield the catalog as consecutive :class:`Chunk` objects."""
        for start, stop in self.chunk_bounds(chunk_size):
            yield self.chunk(start, stop)

    def summary(self) -> dict:
        """Key facts for a one-screen summary (no pass over the waveforms)."""
        ev = self.events
        flash = ev["flash_id"]
        counts = None if self.sources is None else self.sources.counts()
        out = {
            "catalog_id": self.catalog_id,
            "station": self.station,
            "season": self.season,
            "path": str(self.path),
            "n_events": self.n_events,
            "n_flashes": int(flash[flash != ""].nunique()),
            "n_events_without_flash": int((flash == "").sum()),
            "first_time_utc": str(ev["time_utc"].min()) if len(ev) else None,
            "last_time_utc": str(ev["time_utc"].max()) if len(ev) else None,
            "n_events_with_range": int(np.isfinite(self.range_m).sum()),
            "field": _channel_summary(self.field),
            "vhf": None if self.vhf is None else _channel_summary(self.vhf),
            "sources": None if counts is None else {
                "n_sources": int(counts.sum()),
                "per_event_mean": float(counts.mean()) if len(counts) else 0.0,
                "per_event_max": int(counts.max()) if len(counts) else 0,
                "n_events_without_sources": int((counts == 0).sum()),
                "has_xyz": self.has_xyz,
                "has_power_db": self.sources.power_db is not None,
            },
            "content_hash": self.content_hash,
            "notes": list(self.notes),
        }
        return out


def _channel_summary(ch: Channel) -> dict:
    d = {"file": ch.file.name, "sample_rate_hz": ch.sample_rate_hz,
         "n_samples": ch.n_samples, "window_s": ch.duration_s,
         "pretrigger_s": ch.pretrigger_s, "delay_s": ch.delay_s,
         "dtype": str(ch.dtype), "full_scale": ch.full_scale}
    if ch.name == "field":
        d.update(units=ch.units, scale=ch.scale, sign_convention=ch.sign_convention,
                 decay_time_s=ch.decay_time_s)
    else:
        d.update(kind=ch.kind, band_hz=ch.band_hz)
    return d


def open_catalog(path) -> Catalog:
    """Open and validate the catalog folder at ``path``.

    Parameters
    ----------
    path : str or os.PathLike
        The catalog folder (the one holding ``catalog.json``).

    Returns
    -------
    Catalog
        The validated catalog; waveforms are memory-mapped, not loaded.

    Raises
    ------
    InputError
        (alias ``CatalogError``) If ``path`` is not a catalog folder or the catalog
        breaks the format; ``error.problems`` lists every problem.

    Examples
    --------
    A tiny invented catalog (two pulses of the fictional station hollowmere):

    >>> import tempfile, numpy as np
    >>> from features import write_catalog
    >>> t = np.arange(2000) / 20e6 - 50e-6                       # s, 20 MS/s
    >>> field = np.vstack([np.exp(-0.5 * (t / 1e-6) ** 2),        # V/m, invented pulses
    ...                    -2 * np.exp(-0.5 * (t / 2e-6) ** 2)]).astype(np.float32)
    >>> folder = write_catalog(
    ...     tempfile.mkdtemp() + "/hollowmere-demo",
    ...     {"event_id": ["a", "b"], "time_utc": ["2031-07-14T21:03:55.000001Z",
    ...                                           "2031-07-14T21:03:55.250000Z"]},
    ...     field, field_meta={"sample_rate_hz": 20e6, "pretrigger_s": 50e-6, "units": "V/m",
    ...                        "sign_convention": "physics", "decay_time_s": None},
    ...     catalog_id="hollowmere-demo", station="hollowmere")
    >>> cat = open_catalog(folder)
    >>> cat.n_events, cat.catalog_id, cat.field.sample_rate_hz
    (2, 'hollowmere-demo', 20000000.0)
    >>> field_v_per_m, _ = cat.read_field(0, 2)              # SI units, physics convention
    >>> float(field_v_per_m[1].min())
    -2.0
    """
    folder = Path(path).expanduser()
    kind = describe_path_kind(folder)
    if kind == "missing":
        raise InputError(f"{folder}: no such catalog folder")
    if kind is None and folder.name == "catalog.json":
        folder = folder.parent
    elif kind != "a folder":
        raise InputError(f"{folder}: is {kind or 'a file'}; a catalog is a folder holding "
                         "catalog.json")
    folder = folder.resolve()
    problems = Problems()
    notes: list[str] = []
    manifest, mbytes = _read_manifest(folder, problems)
    if manifest is None:
        problems.raise_if_any()

    ev_name = manifest.get("events", "events.csv")
    events = None
    if not isinstance(ev_name, str) or not ev_name.strip():
        problems.add(f"catalog.json: 'events' must be the events file name, "
                     f"got {_short(repr(ev_name))}")
    else:
        ev_path = folder / ev_name
        ev_kind = describe_path_kind(ev_path)
        if Path(ev_name).is_absolute() or ".." in Path(ev_name).parts:
            problems.add(f"catalog.json: 'events' must be a file inside the catalog folder, "
                         f"got {_short(repr(ev_name))}")
        elif ev_kind == "missing":
            problems.add(f"{ev_name}: file not found in {folder} (required; named by "
                         "catalog.json 'events')")
        elif ev_kind is not None:
            problems.add(f"{ev_name}: is {ev_kind} in {folder}, not a regular file "
                         "(catalog.json 'events')")
        else:
            events = read_events(ev_path, problems, notes)
    n_events = None if events is None else len(events)

    fld = None
    if "field" not in manifest:
        problems.add("catalog.json: key 'field' is required (the fast-antenna channel)")
    else:
        fld = _channel("field", folder, manifest["field"], problems, n_events, notes)

    vhf = None
    if manifest.get("vhf") is not None:
        vhf = _channel("vhf", folder, manifest["vhf"], problems, n_events, notes)
    elif (folder / "vhf.npy").exists():
        notes.append("vhf.npy is present but catalog.json declares no 'vhf' channel; ignored")

    sources = None
    src_spec = manifest.get("sources")
    src_path = None
    if src_spec is not None:
        src_path = _file_in(folder, src_spec, "sources", problems)
    elif (folder / "sources.csv").is_file():
        notes.append("sources.csv is present but not declared in catalog.json; read anyway")
        src_path = folder / "sources.csv"
    if src_path is not None and events is not None:
        ids = pd.Index(events["event_id"])
        if ids.is_unique:
            sources = read_sources(src_path, ids, problems, notes)

    problems.raise_if_any()
    return_freed_memory()
    data_files = [fld.file] + ([vhf.file] if vhf is not None else []) \
        + ([src_path] if sources is not None else [])
    content_hash, legacy = catalog_hash(mbytes, folder / ev_name, data_files)
    return Catalog(path=folder, manifest=manifest, events=events, field=fld, vhf=vhf,
                   sources=sources, content_hash=content_hash, notes=tuple(notes),
                   legacy_content_hash=legacy)


def return_freed_memory() -> None:
    """Give the heap freed by CSV parsing back to the operating system (glibc only).

    Parsing a big events or sources table makes and drops millions of small
    string objects; glibc keeps the freed heap for reuse, so the process would
    carry the parse's peak for the rest of a long triage. ``malloc_trim``
    returns it; elsewhere this does nothing.
    """
    import ctypes
    import ctypes.util

    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        libc.malloc_trim(0)
    except (OSError, AttributeError):  # not glibc
        pass


def scan_quality(catalog: Catalog, chunk_size: int = 4096) -> dict:
    """One pass over the waveforms: rows with NaN, clipped or missing samples.

    Returns
    -------
    dict
        ``n_rows_with_nan``, ``n_rows_missing_field`` (all NaN), ``n_rows_clipped``
        (field or VHF at full scale), ``n_rows_field_clipped``,
        ``n_rows_vhf_clipped``, ``n_rows_with_vhf_nan``, ``n_rows_missing_vhf``.
    """
    keys = ("n_rows_with_nan", "n_rows_missing_field", "n_rows_clipped",
            "n_rows_field_clipped", "n_rows_vhf_clipped", "n_rows_with_vhf_nan",
            "n_rows_missing_vhf")
    out = dict.fromkeys(keys, 0)
    has_vhf = catalog.vhf is not None
    for start, stop in catalog.chunk_bounds(chunk_size):
        raw = catalog.field.read_rows(start, stop)
        fclip = catalog.field.clipped_rows(raw)
        if raw.dtype.kind == "f":
            nan = np.isnan(raw)
            out["n_rows_with_nan"] += int(nan.any(axis=1).sum())
            out["n_rows_missing_field"] += int(nan.all(axis=1).sum())
        vclip = np.zeros_like(fclip)
        if has_vhf:
            vraw = catalog.vhf.read_rows(start, stop)
            vclip = catalog.vhf.clipped_rows(vraw)
            if vraw.dtype.kind == "f":
                vnan = np.isnan(vraw)
                out["n_rows_with_vhf_nan"] += int(vnan.any(axis=1).sum())
                out["n_rows_missing_vhf"] += int(vnan.all(axis=1).sum())
        out["n_rows_field_clipped"] += int(fclip.sum())
        out["n_rows_vhf_clipped"] += int(vclip.sum())
        out["n_rows_clipped"] += int((fclip | vclip).sum())
    if not has_vhf:
        out["n_rows_missing_vhf"] = catalog.n_events
    return out
