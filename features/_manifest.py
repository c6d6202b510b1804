"""The manifest (catalog.json) and its channels: parsing and validation.

Private to :mod:`features.catalog`; every problem is collected in a
:class:`~features._checks.Problems` list naming the key and what was expected.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._checks import Problems, is_real_number

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

    def read_rows(self, start: int, stop: int, columns: tuple[int, int] | None = None
                  ) -> np.ndarray:
        """Rows ``start:stop`` as stored (file units), read without a lasting memory map.

        ``columns=(c0, c1)`` reads only those samples of each row.
        """
        from ._rowio import NpyRows

        rows = NpyRows(self.file)
        if columns is None:
            return rows.read(start, stop)
        return rows.read_columns(start, stop, *columns)

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


def _channel(name: str, folder: Path, spec, problems: Problems, n_events: int | None,
             notes: list[str] | None = None):
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
    if arr is not None and rate and pre is not None and pre >= arr.shape[1] / rate and notes \
            is not None:
        notes.append(f"catalog.json: '{where}.pretrigger_s' is {pre:g} s but a record lasts "
                     f"{arr.shape[1] / rate:g} s: the trigger lies after the record's end, so "
                     "pulses are searched over the whole record")
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


