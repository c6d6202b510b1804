"""The manifest (catalog.json) and its channels: parsing and validation.

Private to :mod:`features.catalog`; every problem is collected in a
:class:`~features._checks.Problems` list naming the key and what was expected.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ._checks import Plausible, Problems, describe_path_kind, is_real_number

FORMAT_NAME = "pulse-catalog"
FORMAT_VERSION = 1
ALLOWED_DTYPES = (np.dtype(np.float32), np.dtype(np.float64), np.dtype(np.int16))
MIN_SAMPLES = 8
SIGN = {"physics": 1, "atmospheric": -1}
INT16_LIMITS = (-32768, 32767)
#: Longest catalog_id accepted (it names output files and label-store rows).
MAX_ID_LENGTH = 200
#: Integers with more digits than this are not read as numbers (a float holds
#: about 17 significant digits; a longer literal is a corrupted file).
MAX_INT_DIGITS = 40
#: Deepest nesting of JSON objects and arrays read (the spec needs 3 levels).
MAX_JSON_DEPTH = 64

#: Accepted range of every number of the manifest, by key ("field." or "vhf."
#: prefix where the two channels differ). The bounds are generous on purpose:
#: they refuse what no lightning instrument records, which would otherwise
#: overflow or empty an array deep in the feature code, and let every real
#: station through. Values are inclusive.
PLAUSIBLE = {
    "sample_rate_hz": Plausible(
        1e3, 1e11, "Hz", "from a slow electric-field record to beyond any digitizer of "
        "lightning VHF; common practice, no source"),
    "pretrigger_s": Plausible(
        0.0, 10.0, "s", "a lightning flash lasts at most a few seconds; common practice, "
        "no source"),
    "delay_s": Plausible(
        -1e-3, 1e-3, "s", "cable and electronics delays are nanoseconds to microseconds; "
        "1 ms is about 200 km of cable; common practice, no source"),
    "decay_time_s": Plausible(
        1e-6, 100.0, "s", "fast antennas decay in about 0.1-10 ms and slow antennas in "
        "seconds; common practice, no source"),
    "field.scale": Plausible(
        1e-12, 1e6, "V/m per file unit", "a digitizer step finer than 1 pV/m or coarser "
        "than 1 MV/m measures nothing; common practice, no source"),
    "field.full_scale": Plausible(
        1e-6, 1e7, "V/m", "air breaks down near 3 MV/m, so no field beyond 10 MV/m is "
        "recorded; below 1 uV/m every record is clipped; from memory"),
    "vhf.full_scale": Plausible(
        1e-12, 1e12, "file units", "VHF records are in uncalibrated units; only absurd "
        "values are refused; common practice, no source"),
    "vhf.band_hz": Plausible(
        0.0, 1e11, "Hz", "the VHF pass band lies below 100 GHz; common practice, no source"),
}


def _plausible(where: str, key: str) -> Plausible | None:
    return PLAUSIBLE.get(f"{where}.{key}", PLAUSIBLE.get(key))


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
        """Rows ``start:stop`` in file units, read without a lasting memory map.

        ``columns=(c0, c1)`` reads only those samples of each row. An infinite
        sample of a float file (an overflow, no measurement) is returned as NaN,
        the spec's missing sample, so no later step sees an infinity.
        """
        from ._rowio import NpyRows

        rows = NpyRows(self.file)
        raw = rows.read(start, stop) if columns is None else rows.read_columns(start, stop,
                                                                               *columns)
        if raw.dtype.kind == "f":
            inf = np.isinf(raw)
            if inf.any():
                raw[inf] = np.nan
        return raw

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
        problems.add(f"catalog.json: '{where}.{key}' must be a finite number, "
                     f"got {_short(repr(v))}")
        return default
    v = float(v)
    if positive and v <= 0:
        problems.add(f"catalog.json: '{where}.{key}' must be > 0, got {v!r}")
        return default
    if nonnegative and v < 0:
        problems.add(f"catalog.json: '{where}.{key}' must be >= 0, got {v!r}")
        return default
    rng = _plausible(where, key)
    if rng is not None and not rng.contains(v):
        problems.add(f"catalog.json: '{where}.{key}' is {v!r}, outside the accepted range "
                     f"{rng.describe()} ({rng.why})")
        return default
    return v


def _file_in(folder: Path, d: dict, where: str, problems: Problems,
             default: str | None = None) -> Path | None:
    name = d.get("file", default) if isinstance(d, dict) else None
    if not isinstance(name, str) or not name.strip():
        problems.add(f"catalog.json: '{where}.file' must be a file name in the catalog folder, "
                     f"got {_short(repr(name))}")
        return None
    p = Path(name)
    if p.is_absolute() or ".." in p.parts:
        problems.add(f"catalog.json: '{where}.file' must be a relative path inside the catalog "
                     f"folder, got {name!r}")
        return None
    full = folder / p
    kind = describe_path_kind(full)
    if kind == "missing":
        problems.add(f"{name}: file not found in {folder} (declared in catalog.json "
                     f"'{where}.file')")
        return None
    if kind is not None:
        problems.add(f"{name}: is {kind}, not a regular file (declared in catalog.json "
                     f"'{where}.file' in {folder})")
        return None
    return full


def _open_array(path: Path, problems: Problems, n_events: int | None):
    try:
        arr = np.load(path, mmap_mode="r", allow_pickle=False)
    except Exception as exc:  # noqa: BLE001 - a user's file: any failure to parse it
        # (a corrupted or negative shape in the header, a truncated file...) is bad input
        problems.add(f"{path.name}: not a readable NumPy .npy file "
                     f"({type(exc).__name__}: {_short(str(exc))})")
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
                         f"got {_short(repr(units))}")
        scale = _number(spec, "scale", where, problems, default=1.0, positive=True)
        if units == "counts" and "scale" not in spec:
            problems.add("catalog.json: 'field.scale' (V/m per count) is required when "
                         "'field.units' is \"counts\"")
        conv = spec.get("sign_convention")
        if not isinstance(conv, str) or conv not in SIGN:
            problems.add(f"catalog.json: 'field.sign_convention' must be \"physics\" or "
                         f"\"atmospheric\", got {_short(repr(conv))}")
            conv = "physics"
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
                         f"got {_short(repr(kind))}")
        band = spec.get("band_hz")
        band_t = None
        if band is not None:
            rng = PLAUSIBLE["vhf.band_hz"]
            if (not isinstance(band, (list, tuple)) or len(band) != 2
                    or not all(is_real_number(b) for b in band)
                    or not 0 <= float(band[0]) < float(band[1])):
                problems.add(f"catalog.json: 'vhf.band_hz' must be [low, high] in Hz with "
                             f"0 <= low < high, got {_short(repr(band))}")
            elif not (rng.contains(float(band[0])) and rng.contains(float(band[1]))):
                problems.add(f"catalog.json: 'vhf.band_hz' is {band!r}, outside the accepted "
                             f"range {rng.describe()} ({rng.why})")
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


def _short(text: str, n: int = 80) -> str:
    """``text`` cut to ``n`` characters for a message."""
    return text if len(text) <= n else text[:n - 3] + "..."


class _LongInteger:
    """An integer literal too long to be a number of a catalog; kept for the message."""

    def __init__(self, text: str):
        self.digits = len(text.lstrip("-"))

    def __repr__(self) -> str:
        return f"<an integer of {self.digits} digits>"


def _parse_int(text: str):
    return int(text) if len(text.lstrip("-")) <= MAX_INT_DIGITS else _LongInteger(text)


def _json_depth(text: str) -> int:
    """Deepest nesting of objects and arrays in JSON text, computed without recursion.

    String literals are removed first, then the brackets are counted with a
    running sum, so a hostile file cannot exhaust the interpreter's stack.
    """
    brackets = _NOT_BRACKET.sub("", _JSON_STRING.sub("", text)).encode("ascii")
    if not brackets:
        return 0
    steps = np.frombuffer(brackets.translate(_STEPS), dtype=np.uint8).astype(np.int64) - 1
    return int(np.cumsum(steps).max())


_JSON_STRING = re.compile(r'"(?:[^"\\]|\\.)*"', re.DOTALL)
_NOT_BRACKET = re.compile(r"[^\[\]{}]+")
_STEPS = bytes.maketrans(b"[{]}", b"\x02\x02\x00\x00")   # opening +1, closing -1


def _read_manifest(folder: Path, problems: Problems) -> tuple[dict | None, bytes]:
    mpath = folder / "catalog.json"
    kind = describe_path_kind(mpath)
    if kind == "missing":
        problems.add(f"catalog.json: not found in {folder} (is this a catalog folder?)")
        return None, b""
    if kind is not None:  # never read a FIFO or a device: it may block or never end
        problems.add(f"catalog.json: is {kind} in {folder}, not a regular file")
        return None, b""
    try:
        data = mpath.read_bytes()
    except OSError as exc:
        problems.add(f"catalog.json: cannot be read in {folder} ({exc.strerror or exc})")
        return None, b""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        problems.add(f"catalog.json: not valid UTF-8 ({exc.reason} at byte {exc.start})")
        return None, data
    if _json_depth(text) > MAX_JSON_DEPTH:
        problems.add(f"catalog.json: objects and arrays nested more than {MAX_JSON_DEPTH} "
                     "levels deep; a catalog manifest needs 3")
        return None, data
    try:
        manifest = json.loads(text, parse_int=_parse_int)
    except json.JSONDecodeError as exc:
        problems.add(f"catalog.json: invalid JSON at line {exc.lineno} column {exc.colno}: "
                     f"{exc.msg}")
        return None, data
    except (ValueError, RecursionError) as exc:  # e.g. a number the decoder cannot hold
        problems.add(f"catalog.json: cannot be read as JSON ({_short(str(exc))})")
        return None, data
    if not isinstance(manifest, dict):
        problems.add(f"catalog.json: must hold a JSON object, got {type(manifest).__name__}")
        return None, data
    if manifest.get("format") != FORMAT_NAME:
        problems.add(f"catalog.json: 'format' must be \"{FORMAT_NAME}\", "
                     f"got {_short(repr(manifest.get('format')))}")
    version = manifest.get("version")
    if not (is_real_number(version) and float(version) == FORMAT_VERSION):
        problems.add(f"catalog.json: 'version' must be {FORMAT_VERSION}, "
                     f"got {_short(repr(version))}")
    cid = manifest.get("catalog_id")
    if not isinstance(cid, str) or not cid.strip():
        problems.add(f"catalog.json: 'catalog_id' must be a non-empty string, "
                     f"got {_short(repr(cid))}")
    elif len(cid) > MAX_ID_LENGTH or any(ord(c) < 32 or ord(c) == 127 for c in cid):
        problems.add(f"catalog.json: 'catalog_id' must be at most {MAX_ID_LENGTH} characters "
                     f"without control characters, got {_short(repr(cid))}")
    return manifest, data


