"""The station description: how a station's own recordings become a catalog.

A small TOML (or JSON) file, documented with a full example in
``docs/station-description.md``. :func:`load_station` reads and checks all of it at
once and raises :class:`~features.InputError` listing every problem, each naming
the file, the table and the key. Paths in it are relative to the file.
"""

from __future__ import annotations

import glob
import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

from ._checks import InputError, Problems, is_real_number
from .flashes import FlashSettings
from .trigger import TriggerSettings

__all__ = ["ChannelSpec", "SourceSpec", "StationDescription", "TriggerSpec", "load_station"]

FORMATS = {".npy": "npy", ".npz": "npz", ".h5": "hdf5", ".hdf5": "hdf5", ".hdf": "hdf5",
           ".csv": "csv", ".txt": "csv"}
ATTR = "attr:"


@dataclass(frozen=True)
class ChannelSpec:
    """One channel's recordings (``[field]`` or ``[vhf]``).

    ``sample_rate_hz``, ``start_utc``, ``trigger_utc`` and ``pretrigger_s`` may be
    ``"attr:NAME"``: read from the record's attribute (HDF5) or key (npz) NAME.
    """

    name: str
    files: tuple[Path, ...]
    layout: str                       # "continuous" | "triggered"
    format: str                       # "npy" | "npz" | "hdf5" | "csv"
    dataset: str | None               # npz key, HDF5 dataset (may hold *), CSV column
    sample_rate_hz: float | str
    start_utc: object = None          # continuous: ISO text, "attr:NAME" or index table
    trigger_utc: str | None = None    # triggered: "attr:NAME" (one trigger per record)
    pretrigger_s: float | str | None = None  # triggered records' own pre-trigger time
    event_attributes: dict = field(default_factory=dict)  # events.csv column -> attribute
    meta: dict = field(default_factory=dict)  # the catalog channel keys (units, kind, ...)


@dataclass(frozen=True)
class TriggerSpec:
    """``[triggers]``: a CSV of given trigger times."""

    file: Path
    time_column: str
    time: str                          # "utc" | "relative"
    record_column: str | None
    event_id_column: str | None
    range_column: str | None


@dataclass(frozen=True)
class SourceSpec:
    """``[sources]``: the mapped-source list and how to read it."""

    file: Path
    angles: str                        # "azimuth_elevation_deg" | "direction_cosines"
    azimuth_reference: str             # "north_clockwise" | "east_counterclockwise"
    time: str                          # "utc" | "relative"
    columns: dict


@dataclass(frozen=True)
class StationDescription:
    """A checked station description (build it with :func:`load_station`)."""

    path: Path
    sha256: str
    catalog_id: str
    station: str | None
    season: str | None
    field: ChannelSpec
    vhf: ChannelSpec | None
    pretrigger_s: float
    length_s: float
    vhf_pretrigger_s: float
    vhf_length_s: float
    triggers: TriggerSpec | None
    detect: TriggerSettings
    sources: SourceSpec | None
    flashes: FlashSettings | None


def _parse(path: Path) -> dict:
    data = path.read_bytes()
    if path.suffix.lower() == ".json":
        try:
            return json.loads(data.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise InputError(f"{path}: not valid JSON ({exc})") from exc
    try:
        import tomllib
    except ImportError:  # Python 3.10
        try:
            import tomli as tomllib
        except ImportError:
            raise InputError(f"{path}: reading TOML on Python 3.10 needs 'tomli' (pip install "
                             "tomli), or write the description as JSON") from None
    try:
        return tomllib.loads(data.decode("utf-8"))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"{path}: not valid TOML ({exc})") from exc


class _Table:
    """A table of the description: typed getters that record problems with their place."""

    def __init__(self, d, where: str, problems: Problems, known: tuple[str, ...]):
        self.d = d if isinstance(d, dict) else {}
        self.where, self.p = where, problems
        if not isinstance(d, dict):
            problems.add(f"{where} must be a table, got {type(d).__name__}")
        for k in self.d:
            if k not in known:
                problems.add(f"{where}: unknown key '{k}' (known: {', '.join(known)})")

    def num(self, key, default=None, *, required=False, positive=False, nullable=False,
            attr=False):
        if key not in self.d:
            if required:
                self.p.add(f"{self.where}: key '{key}' is required")
            return default
        v = self.d[key]
        if attr and isinstance(v, str) and v.startswith(ATTR) and len(v) > len(ATTR):
            return v
        if nullable and v in (None, "none"):
            return None
        if not is_real_number(v) or (positive and v <= 0) or v < 0:
            self.p.add(f"{self.where}: '{key}' must be a number {'> 0' if positive else '>= 0'}"
                       f"{' or attr:NAME' if attr else ''}, got {v!r}")
            return default
        return float(v)

    def text(self, key, default=None, *, required=False, choices=None):
        if key not in self.d:
            if required:
                self.p.add(f"{self.where}: key '{key}' is required")
            return default
        v = self.d[key]
        if not isinstance(v, str) or not v.strip():
            self.p.add(f"{self.where}: '{key}' must be a non-empty string, got {v!r}")
            return default
        if choices and v not in choices:
            self.p.add(f"{self.where}: '{key}' must be one of "
                       f"{', '.join(repr(c) for c in choices)}, got {v!r}")
            return default
        return v


def _files(tbl: _Table, base: Path) -> tuple[Path, ...]:
    pats = tbl.d.get("files")
    if isinstance(pats, str):
        pats = [pats]
    if not isinstance(pats, list) or not pats or not all(isinstance(p, str) for p in pats):
        tbl.p.add(f"{tbl.where}: 'files' must be a file name, a glob or a list of them, got "
                  f"{pats!r}")
        return ()
    out = []
    for pat in pats:
        full = pat if Path(pat).is_absolute() else str(base / pat)
        hits = sorted(glob.glob(full))
        if not hits:
            tbl.p.add(f"{tbl.where}: 'files' entry {pat!r} matches no file (relative to "
                      f"{base})")
        out += [Path(h) for h in hits]
    return tuple(out)


_CHANNEL_KEYS = ("files", "layout", "format", "dataset", "sample_rate_hz", "start_utc",
                 "trigger_utc", "pretrigger_s", "event_attributes", "delay_s", "full_scale")
_FIELD_KEYS = ("units", "scale", "sign_convention", "decay_time_s")
_VHF_KEYS = ("kind", "band_hz")


def _channel(name: str, d, base: Path, fname: str, problems: Problems) -> ChannelSpec | None:
    extra = _FIELD_KEYS if name == "field" else _VHF_KEYS
    t = _Table(d, f"{fname} [{name}]", problems, _CHANNEL_KEYS + extra)
    n0 = len(problems)
    files = _files(t, base)
    layout = t.text("layout", "continuous", choices=("continuous", "triggered"))
    kinds = {FORMATS.get(f.suffix.lower()) for f in files}
    fmt = t.text("format", None, choices=tuple(sorted(set(FORMATS.values()))))
    if fmt is None and files:
        if None in kinds or len(kinds) > 1:
            problems.add(f"{t.where}: 'format' is required: the files' suffixes do not say "
                         f"one format ({sorted(str(k) for k in kinds)})")
        else:
            fmt = kinds.pop()
    dataset = t.text("dataset", None)
    if fmt in ("hdf5", "csv", "npz") and dataset is None:
        problems.add(f"{t.where}: 'dataset' is required for {fmt} files (the HDF5 dataset, "
                     "npz key or CSV column holding the samples)")
    rate = t.num("sample_rate_hz", required=True, positive=True, attr=True)
    start = t.d.get("start_utc")
    if layout == "continuous":
        if start is None:
            problems.add(f"{t.where}: 'start_utc' is required for continuous records (ISO "
                         "time, attr:NAME, or {index = \"records.csv\", ...})")
        elif isinstance(start, dict):
            it = _Table(start, f"{t.where} start_utc", problems,
                        ("index", "file_column", "time_column"))
            idx = it.text("index", required=True)
            start = {"index": base / idx if idx else None,
                     "file_column": it.text("file_column", "file"),
                     "time_column": it.text("time_column", "start_utc")}
            if start["index"] is not None and not start["index"].is_file():
                problems.add(f"{t.where}: start_utc index {idx!r} not found")
        elif not isinstance(start, str):
            problems.add(f"{t.where}: 'start_utc' must be text or a table, got {start!r}")
        elif not start.startswith(ATTR) and len(files) > 1:
            problems.add(f"{t.where}: one 'start_utc' time fits one file, but 'files' gives "
                         f"{len(files)}: use attr:NAME or an index table")
    trig = t.text("trigger_utc", None)
    if trig is not None and not trig.startswith(ATTR):
        problems.add(f"{t.where}: 'trigger_utc' must be attr:NAME, got {trig!r}")
    pre = t.num("pretrigger_s", None, attr=True)
    ev_attrs = t.d.get("event_attributes", {})
    if not isinstance(ev_attrs, dict) or not all(isinstance(v, str) for v in ev_attrs.values()):
        problems.add(f"{t.where}: 'event_attributes' must map events.csv columns to attribute "
                     f"names, got {ev_attrs!r}")
        ev_attrs = {}
    if ev_attrs and layout != "triggered":
        problems.add(f"{t.where}: 'event_attributes' is for triggered records only")
    meta = {}
    for k in ("delay_s", "full_scale"):
        if k in t.d:
            meta[k] = t.num(k, positive=(k == "full_scale"))
    if name == "field":
        meta["units"] = t.text("units", "V/m", choices=("V/m", "counts"))
        meta["scale"] = t.num("scale", 1.0, positive=True)
        if meta["units"] == "counts" and "scale" not in t.d:
            problems.add(f"{t.where}: 'scale' (V/m per count) is required with units = "
                         "\"counts\"")
        meta["sign_convention"] = t.text("sign_convention", required=True,
                                         choices=("physics", "atmospheric"))
        if "decay_time_s" not in t.d:
            problems.add(f"{t.where}: key 'decay_time_s' is required (the fast antenna's RC "
                         "decay constant in s, or \"none\" when DC-coupled)")
        meta["decay_time_s"] = t.num("decay_time_s", positive=True, nullable=True)
    else:
        meta["kind"] = t.text("kind", required=True, choices=("voltage", "power"))
        band = t.d.get("band_hz")
        if band is not None:
            if not (isinstance(band, list) and len(band) == 2 and all(is_real_number(b)
                                                                      for b in band)):
                problems.add(f"{t.where}: 'band_hz' must be [low, high] in Hz, got {band!r}")
            else:
                meta["band_hz"] = [float(b) for b in band]
    if len(problems) > n0:
        return None
    return ChannelSpec(name=name, files=files, layout=layout, format=fmt, dataset=dataset,
                       sample_rate_hz=rate, start_utc=start, trigger_utc=trig,
                       pretrigger_s=pre, event_attributes=dict(ev_attrs), meta=meta)


def _sources(d, base: Path, fname: str, problems: Problems) -> SourceSpec | None:
    t = _Table(d, f"{fname} [sources]", problems,
               ("file", "angles", "azimuth_reference", "time", "columns"))
    name = t.text("file", required=True)
    path = None if name is None else base / name
    if path is not None and not path.is_file():
        problems.add(f"{t.where}: 'file' {name!r} not found (relative to {base})")
    angles = t.text("angles", "azimuth_elevation_deg",
                    choices=("azimuth_elevation_deg", "direction_cosines"))
    ref = t.text("azimuth_reference", "north_clockwise",
                 choices=("north_clockwise", "east_counterclockwise"))
    time = t.text("time", "relative", choices=("utc", "relative"))
    cols = t.d.get("columns", {})
    if not isinstance(cols, dict) or not all(isinstance(v, str) for v in cols.values()):
        problems.add(f"{t.where}: 'columns' must map our names to the file's column names")
        cols = {}
    need = ["time"] + (["azimuth", "elevation"] if angles == "azimuth_elevation_deg"
                       else ["cos_east", "cos_north"]) + (["event_id"] if time == "relative"
                                                          else [])
    known = set(need) | {"x", "y", "z", "power_db", "event_id"}
    for k in cols:
        if k not in known:
            problems.add(f"{t.where}: 'columns' has unknown name '{k}' (known: "
                         f"{', '.join(sorted(known))})")
    cols = {k: cols.get(k, k) for k in need} | {k: v for k, v in cols.items() if k in known}
    return SourceSpec(file=path, angles=angles, azimuth_reference=ref, time=time,
                      columns=cols)


def load_station(path) -> StationDescription:
    """Read and check a station description (TOML, or JSON by the ``.json`` suffix).

    Raises
    ------
    FileNotFoundError
        ``path`` does not exist.
    InputError
        Every problem found, each naming the file, table and key.
    """
    path = Path(path).expanduser().resolve()
    if not path.is_file():
        raise InputError(f"{path}: no such station description")
    raw = _parse(path)
    base, fname = path.parent, path.name
    problems = Problems()
    top = _Table(raw, fname, problems, ("catalog", "window", "field", "vhf", "triggers",
                                        "detect", "sources", "flashes"))
    cat = _Table(raw.get("catalog", {}), f"{fname} [catalog]", problems,
                 ("catalog_id", "station", "season"))
    if "season" in cat.d and not isinstance(cat.d["season"], (str, int)):
        problems.add(f"{fname} [catalog]: 'season' must be text, got {cat.d['season']!r}")
    catalog_id = cat.text("catalog_id", required=True)
    win = _Table(raw.get("window", {}), f"{fname} [window]", problems,
                 ("pretrigger_s", "length_s", "vhf_pretrigger_s", "vhf_length_s"))
    pre = win.num("pretrigger_s", 1e-4)
    length = win.num("length_s", 4e-4, positive=True)
    if "field" not in top.d:
        problems.add(f"{fname}: table [field] is required (the fast-antenna recordings)")
        fld = None
    else:
        fld = _channel("field", top.d["field"], base, fname, problems)
    vhf = _channel("vhf", top.d["vhf"], base, fname, problems) if "vhf" in top.d else None
    trig = None
    if "triggers" in top.d:
        tt = _Table(top.d["triggers"], f"{fname} [triggers]", problems,
                    ("file", "time_column", "time", "record_column", "event_id_column",
                     "range_column"))
        tname = tt.text("file", required=True)
        tfile = None if tname is None else base / tname
        if tfile is not None and not tfile.is_file():
            problems.add(f"{tt.where}: 'file' {tname!r} not found (relative to {base})")
        ttime = tt.text("time", "utc", choices=("utc", "relative"))
        rec = tt.text("record_column", None)
        if ttime == "relative" and rec is None:
            problems.add(f"{tt.where}: 'record_column' is required with time = \"relative\" "
                         "(times count from the start of that record, in s)")
        trig = TriggerSpec(file=tfile, time_column=tt.text("time_column", "time_utc"),
                           time=ttime, record_column=rec,
                           event_id_column=tt.text("event_id_column", None),
                           range_column=tt.text("range_column", None))
    detect = TriggerSettings()
    if "detect" in top.d:
        try:
            detect = TriggerSettings.from_dict(top.d["detect"] if isinstance(
                top.d["detect"], dict) else {}, f"{fname} [detect]")
        except InputError as exc:
            for p in exc.problems:
                problems.add(p)
    src = _sources(top.d["sources"], base, fname, problems) if "sources" in top.d else None
    flashes = None
    if "flashes" in top.d:
        ft = _Table(top.d["flashes"], f"{fname} [flashes]", problems,
                    ("group", "gap_s", "distance_m"))
        if ft.d.get("group", True) not in (True, False):
            problems.add(f"{ft.where}: 'group' must be true or false")
        gap, dist = ft.num("gap_s", 0.5, positive=True), ft.num("distance_m", 10e3,
                                                                positive=True)
        if ft.d.get("group", True) is True and gap and dist:
            flashes = FlashSettings(gap_s=gap, distance_m=dist)
    if fld is not None and fld.layout == "triggered" and fld.trigger_utc is None and \
            trig is None:
        problems.add(f"{fname}: triggered records need their trigger times: [field] "
                     "trigger_utc = \"attr:NAME\" or a [triggers] table")
    if fld is not None and fld.layout == "triggered" and fld.pretrigger_s is None:
        problems.add(f"{fname} [field]: 'pretrigger_s' is required for triggered records "
                     "(a number in s, or attr:NAME)")
    if vhf is not None and fld is not None and vhf.layout != fld.layout:
        problems.add(f"{fname} [vhf]: 'layout' must match [field] ({fld.layout!r})")
    problems.raise_if_any()
    season = cat.d.get("season")
    season = None if season is None else str(season)
    return StationDescription(
        path=path, sha256=hashlib.sha256(path.read_bytes()).hexdigest(),
        catalog_id=catalog_id, station=cat.text("station", None), season=season,
        field=fld, vhf=vhf, pretrigger_s=pre, length_s=length,
        vhf_pretrigger_s=win.num("vhf_pretrigger_s", pre),
        vhf_length_s=win.num("vhf_length_s", length, positive=True),
        triggers=trig, detect=detect, sources=src, flashes=flashes)
