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

import hashlib
import json
from collections.abc import Iterator
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd

from ._checks import CatalogError, Problems, is_real_number
from ._tables import SourceTable, read_events, read_sources

__all__ = ["Catalog", "Channel", "Chunk", "open_catalog", "scan_quality", "CatalogError"]

FORMAT_NAME = "pulse-catalog"
FORMAT_VERSION = 1
ALLOWED_DTYPES = (np.dtype(np.float32), np.dtype(np.float64), np.dtype(np.int16))
MIN_SAMPLES = 8
SIGN = {"physics": 1, "atmospheric": -1}
INT16_LIMITS = (-32768, 32767)


@dataclass(frozen=True)
class Channel:
    """One waveform channel of a catalog (the fast-antenna field or the VHF).

    Attributes
    ----------
    name : {"field", "vhf"}
    file : pathlib.Path
        The ``.npy`` file.
    sample_rate_hz : float
        Samples per second.
    pretrigger_s : float
        Sample 0 lies this long before the trigger, in seconds.
    delay_s : float
        Cable and electronics delay, in seconds (physical time = recorded - delay).
    full_scale : float or None
        Clip level in file units after ``scale`` (V/m for the field).
    n_samples : int
        Samples per row.
    dtype : numpy.dtype
        On-disk dtype (float32, float64 or int16).
    scale : float
        File value times ``scale`` gives the channel's unit (V/m for the field).
    units : str or None
        ``"V/m"`` or ``"counts"`` for the field, None for the VHF.
    sign : int
        +1 for the physics convention, -1 for the atmospheric one (field only).
    decay_time_s : float or None
        RC decay constant of the fast antenna, in seconds (None: DC-coupled).
    kind : str or None
        ``"voltage"`` or ``"power"`` for the VHF.
    band_hz : tuple of float or None
        VHF pass band, in Hz.
    """

    name: str
    file: Path
    sample_rate_hz: float
    pretrigger_s: float
    delay_s: float
    full_scale: float | None
    n_samples: int
    dtype: np.dtype
    scale: float = 1.0
    units: str | None = None
    sign: int = 1
    decay_time_s: float | None = None
    kind: str | None = None
    band_hz: tuple[float, float] | None = None

    @property
    def sign_convention(self) -> str:
        return "physics" if self.sign == 1 else "atmospheric"

    @property
    def sample_interval_s(self) -> float:
        return 1.0 / self.sample_rate_hz

    @property
    def duration_s(self) -> float:
        """Length of one record, in seconds."""
        return self.n_samples / self.sample_rate_hz

    @property
    def quantum(self) -> float:
        """One digitizer step in channel units (0 for float files)."""
        return self.scale if self.dtype == np.int16 else 0.0

    def recorded_time_s(self) -> np.ndarray:
        """Recorded time of every sample relative to the trigger, in seconds."""
        return np.arange(self.n_samples) / self.sample_rate_hz - self.pretrigger_s

    def physical_time_s(self) -> np.ndarray:
        """Arrival time at the antenna of every sample, relative to the trigger, in seconds."""
        return self.recorded_time_s() - self.delay_s

    def open(self) -> np.ndarray:
        """Memory-map the channel's array (read-only)."""
        return np.load(self.file, mmap_mode="r", allow_pickle=False)

    def clipped_rows(self, raw: np.ndarray) -> np.ndarray:
        """Rows of a raw (file-unit) block with any sample at or beyond full scale."""
        out = np.zeros(raw.shape[0], dtype=bool)
        if self.dtype == np.int16:
            out |= ((raw <= INT16_LIMITS[0]) | (raw >= INT16_LIMITS[1])).any(axis=1)
        if self.full_scale is not None:
            limit = self.full_scale / self.scale * (1 - 1e-6)
            with np.errstate(invalid="ignore"):
                out |= (np.abs(raw) >= limit).any(axis=1)
        return out


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
        ``"sha256:<hex>"`` of the manifest bytes and the events.csv bytes.
    notes : tuple of str
        Things worth knowing that are not errors (e.g. undeclared files ignored).
    """

    path: Path
    manifest: dict
    events: pd.DataFrame
    field: Channel
    vhf: Channel | None
    sources: SourceTable | None
    content_hash: str
    notes: tuple[str, ...] = field(default_factory=tuple)

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

    @property
    def event_ids(self) -> np.ndarray:
        return self.events["event_id"].to_numpy(dtype=object)

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

    @cached_property
    def _field_array(self) -> np.ndarray:
        return self.field.open()

    @cached_property
    def _vhf_array(self) -> np.ndarray | None:
        return None if self.vhf is None else self.vhf.open()

    def read_field(self, start: int, stop: int) -> tuple[np.ndarray, np.ndarray]:
        """Field rows ``start:stop`` in V/m (physics convention) and their clip flags."""
        raw = np.asarray(self._field_array[start:stop])
        clipped = self.field.clipped_rows(raw)
        out = raw.astype(np.float64)
        out *= self.field.scale * self.field.sign
        return out, clipped

    def read_vhf(self, start: int, stop: int) -> tuple[np.ndarray | None, np.ndarray]:
        """VHF rows ``start:stop`` as stored (float64) and their clip flags."""
        if self.vhf is None:
            return None, np.zeros(stop - start, dtype=bool)
        raw = np.asarray(self._vhf_array[start:stop])
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


# --------------------------------------------------------------------------- manifest


def _number(d: dict, key: str, where: str, problems: Problems, *, default=None,
            positive=False, nonnegative=False, nullable=False):
    if key not in d:
        if default is None and not nullable:
            problems.add(f"catalog.json: key '{where}.{key}' is required")
        return default
    v = d[key]
    if v is None and nullable:
        return None
    if not is_real_number(v):
        problems.add(f"catalog.json: '{where}.{key}' must be a finite number, got {v!r}")
        return default
    v = float(v)
    if positive and v <= 0:
        problems.add(f"catalog.json: '{where}.{key}' must be > 0, got {v!r}")
        return default
    if nonnegative and v < 0:
        problems.add(f"catalog.json: '{where}.{key}' must be >= 0, got {v!r}")
        return default
    return v


def _file_in(folder: Path, d: dict, where: str, problems: Problems,
             default: str | None = None) -> Path | None:
    name = d.get("file", default) if isinstance(d, dict) else None
    if not isinstance(name, str) or not name.strip():
        problems.add(f"catalog.json: '{where}.file' must be a file name in the catalog folder, "
                     f"got {name!r}")
        return None
    p = Path(name)
    if p.is_absolute() or ".." in p.parts:
        problems.add(f"catalog.json: '{where}.file' must be a relative path inside the catalog "
                     f"folder, got {name!r}")
        return None
    full = folder / p
    if not full.is_file():
        problems.add(f"{name}: file not found in {folder} (declared in catalog.json "
                     f"'{where}.file')")
        return None
    return full


def _open_array(path: Path, problems: Problems, n_events: int | None):
    try:
        arr = np.load(path, mmap_mode="r", allow_pickle=False)
    except (ValueError, OSError, EOFError) as exc:
        problems.add(f"{path.name}: not a readable NumPy .npy file ({exc})")
        return None
    if not isinstance(arr, np.ndarray):
        problems.add(f"{path.name}: expected one .npy array, found {type(arr).__name__}")
        return None
    if arr.ndim != 2:
        problems.add(f"{path.name}: must be 2-D [n_events, n_samples], got shape {arr.shape}")
        return None
    if arr.dtype.newbyteorder("=") not in ALLOWED_DTYPES:
        problems.add(f"{path.name}: dtype must be float32, float64 or int16, got {arr.dtype}")
        return None
    if n_events is not None and arr.shape[0] != n_events:
        problems.add(f"{path.name}: has {arr.shape[0]} rows but events.csv has {n_events} "
                     "event rows (they must match, row i owns row i)")
    if arr.shape[1] < MIN_SAMPLES:
        problems.add(f"{path.name}: rows have {arr.shape[1]} samples; at least {MIN_SAMPLES} "
                     "are needed")
    return arr


def _channel(name: str, folder: Path, spec, problems: Problems, n_events: int | None):
    where = name
    if not isinstance(spec, dict):
        problems.add(f"catalog.json: '{name}' must be an object, got {type(spec).__name__}")
        return None
    n0 = len(problems)
    path = _file_in(folder, spec, where, problems)
    rate = _number(spec, "sample_rate_hz", where, problems, positive=True)
    pre = _number(spec, "pretrigger_s", where, problems, default=0.0, nonnegative=True)
    delay = _number(spec, "delay_s", where, problems, default=0.0)
    full_scale = _number(spec, "full_scale", where, problems, positive=True, nullable=True)
    kw: dict = {}
    if name == "field":
        units = spec.get("units")
        if units not in ("V/m", "counts"):
            problems.add(f"catalog.json: 'field.units' must be \"V/m\" or \"counts\", "
                         f"got {units!r}")
        scale = _number(spec, "scale", where, problems, default=1.0, positive=True)
        if units == "counts" and "scale" not in spec:
            problems.add("catalog.json: 'field.scale' (V/m per count) is required when "
                         "'field.units' is \"counts\"")
        conv = spec.get("sign_convention")
        if conv not in SIGN:
            problems.add(f"catalog.json: 'field.sign_convention' must be \"physics\" or "
                         f"\"atmospheric\", got {conv!r}")
        if "decay_time_s" not in spec:
            problems.add("catalog.json: 'field.decay_time_s' is required (the RC decay "
                         "constant in seconds, or null when DC-coupled or compensated)")
        decay = _number(spec, "decay_time_s", where, problems, positive=True, nullable=True)
        kw.update(units=units, scale=scale if scale else 1.0, sign=SIGN.get(conv, 1),
                  decay_time_s=decay)
    else:
        kind = spec.get("kind")
        if kind not in ("voltage", "power"):
            problems.add(f"catalog.json: 'vhf.kind' must be \"voltage\" or \"power\", "
                         f"got {kind!r}")
        band = spec.get("band_hz")
        band_t = None
        if band is not None:
            if (not isinstance(band, (list, tuple)) or len(band) != 2
                    or not all(is_real_number(b) for b in band)
                    or not 0 <= float(band[0]) < float(band[1])):
                problems.add(f"catalog.json: 'vhf.band_hz' must be [low, high] in Hz with "
                             f"0 <= low < high, got {band!r}")
            else:
                band_t = (float(band[0]), float(band[1]))
                if rate and band_t[1] > rate / 2 and kind == "voltage":
                    problems.add(f"catalog.json: 'vhf.band_hz' upper edge {band_t[1]:g} Hz is "
                                 f"above the Nyquist frequency {rate / 2:g} Hz of a voltage "
                                 "record")
        kw.update(kind=kind, band_hz=band_t)
    arr = _open_array(path, problems, n_events) if path is not None else None
    if len(problems) > n0 or arr is None:
        return None
    return Channel(name=name, file=path, sample_rate_hz=rate, pretrigger_s=pre, delay_s=delay,
                   full_scale=full_scale, n_samples=int(arr.shape[1]),
                   dtype=arr.dtype.newbyteorder("="), **kw)


def _read_manifest(folder: Path, problems: Problems) -> tuple[dict | None, bytes]:
    mpath = folder / "catalog.json"
    try:
        data = mpath.read_bytes()
    except FileNotFoundError:
        problems.add(f"catalog.json: not found in {folder} (is this a catalog folder?)")
        return None, b""
    try:
        manifest = json.loads(data.decode("utf-8"))
    except UnicodeDecodeError as exc:
        problems.add(f"catalog.json: not valid UTF-8 ({exc.reason} at byte {exc.start})")
        return None, data
    except json.JSONDecodeError as exc:
        problems.add(f"catalog.json: invalid JSON at line {exc.lineno} column {exc.colno}: "
                     f"{exc.msg}")
        return None, data
    if not isinstance(manifest, dict):
        problems.add(f"catalog.json: must hold a JSON object, got {type(manifest).__name__}")
        return None, data
    if manifest.get("format") != FORMAT_NAME:
        problems.add(f"catalog.json: 'format' must be \"{FORMAT_NAME}\", "
                     f"got {manifest.get('format')!r}")
    version = manifest.get("version")
    if not (is_real_number(version) and float(version) == FORMAT_VERSION):
        problems.add(f"catalog.json: 'version' must be {FORMAT_VERSION}, got {version!r}")
    cid = manifest.get("catalog_id")
    if not isinstance(cid, str) or not cid.strip():
        problems.add(f"catalog.json: 'catalog_id' must be a non-empty string, got {cid!r}")
    return manifest, data


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
    FileNotFoundError
        If ``path`` does not exist.
    CatalogError
        If the catalog breaks the format; ``error.problems`` lists every problem.
    """
    folder = Path(path).expanduser()
    if not folder.exists():
        raise FileNotFoundError(f"{folder}: no such catalog folder")
    if folder.is_file() and folder.name == "catalog.json":
        folder = folder.parent
    if not folder.is_dir():
        raise CatalogError([f"{folder}: a catalog is a folder holding catalog.json"])
    folder = folder.resolve()
    problems = Problems()
    notes: list[str] = []
    manifest, mbytes = _read_manifest(folder, problems)
    if manifest is None:
        problems.raise_if_any()

    ev_name = manifest.get("events", "events.csv")
    events = None
    ebytes = b""
    if not isinstance(ev_name, str) or not ev_name.strip():
        problems.add(f"catalog.json: 'events' must be the events file name, got {ev_name!r}")
    else:
        ev_path = folder / ev_name
        if Path(ev_name).is_absolute() or ".." in Path(ev_name).parts:
            problems.add(f"catalog.json: 'events' must be a file inside the catalog folder, "
                         f"got {ev_name!r}")
        elif not ev_path.is_file():
            problems.add(f"{ev_name}: file not found in {folder} (required)")
        else:
            ebytes = ev_path.read_bytes()
            events = read_events(ev_path, problems, notes)
    n_events = None if events is None else len(events)

    fld = None
    if "field" not in manifest:
        problems.add("catalog.json: key 'field' is required (the fast-antenna channel)")
    else:
        fld = _channel("field", folder, manifest["field"], problems, n_events)

    vhf = None
    if manifest.get("vhf") is not None:
        vhf = _channel("vhf", folder, manifest["vhf"], problems, n_events)
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
    h = hashlib.sha256()
    h.update(mbytes)
    h.update(b"\0")
    h.update(ebytes)
    return Catalog(path=folder, manifest=manifest, events=events, field=fld, vhf=vhf,
                   sources=sources, content_hash="sha256:" + h.hexdigest(), notes=tuple(notes))


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
    field_arr = catalog._field_array
    vhf_arr = catalog._vhf_array
    for start, stop in catalog.chunk_bounds(chunk_size):
        raw = np.asarray(field_arr[start:stop])
        fclip = catalog.field.clipped_rows(raw)
        if raw.dtype.kind == "f":
            nan = np.isnan(raw)
            out["n_rows_with_nan"] += int(nan.any(axis=1).sum())
            out["n_rows_missing_field"] += int(nan.all(axis=1).sum())
        vclip = np.zeros_like(fclip)
        if vhf_arr is not None:
            vraw = np.asarray(vhf_arr[start:stop])
            vclip = catalog.vhf.clipped_rows(vraw)
            if vraw.dtype.kind == "f":
                vnan = np.isnan(vraw)
                out["n_rows_with_vhf_nan"] += int(vnan.any(axis=1).sum())
                out["n_rows_missing_vhf"] += int(vnan.all(axis=1).sum())
        out["n_rows_field_clipped"] += int(fclip.sum())
        out["n_rows_vhf_clipped"] += int(vclip.sum())
        out["n_rows_clipped"] += int((fclip | vclip).sum())
    if vhf_arr is None:
        out["n_rows_missing_vhf"] = catalog.n_events
    return out
