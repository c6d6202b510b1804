"""Write a pulse catalog (format: catalog v1, ``docs/catalog-v1.md``) from arrays.

:func:`write_catalog` writes a whole catalog from arrays held in memory (or
memory-mapped). :func:`staged_folder` is the all-or-nothing mechanism under it,
also used by the station builder (:mod:`features.assemble`) which streams its
arrays: files go to a hidden temporary folder beside the target, the result is
opened with :func:`features.open_catalog` (the project's one validation layer)
and only then renamed into place. On any error the temporary folder is removed
and an existing target is untouched.
"""

from __future__ import annotations

import contextlib
import json
import shutil
from collections.abc import Iterator, Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from ._checks import InputError, is_real_number
from ._manifest import ALLOWED_DTYPES, FORMAT_NAME, FORMAT_VERSION
from .atomic import atomic_write
from .catalog import open_catalog
from .csvio import csv_text

__all__ = ["format_time_utc", "staged_folder", "write_catalog", "write_events",
           "write_manifest", "write_sources"]

FIELD_KEYS = ("sample_rate_hz", "pretrigger_s", "units", "scale", "sign_convention",
              "decay_time_s", "delay_s", "full_scale")
VHF_KEYS = ("sample_rate_hz", "pretrigger_s", "kind", "band_hz", "delay_s", "full_scale")
SOURCE_COLUMNS = ("event_id", "t_s", "azimuth_deg", "elevation_deg")


def format_time_utc(time_ns) -> np.ndarray:
    """ISO-8601 UTC strings with nanoseconds, e.g. ``2031-07-14T21:03:55.123456789Z``.

    Parameters
    ----------
    time_ns : array_like of int64
        Nanoseconds since 1970-01-01 UTC.

    Examples
    --------
    >>> str(format_time_utc([0])[0])
    '1970-01-01T00:00:00.000000000Z'
    """
    t = np.asarray(time_ns, dtype=np.int64).astype("datetime64[ns]")
    return np.char.add(np.datetime_as_string(t, unit="ns"), "Z")


def _times_ns(values, where: str) -> np.ndarray:
    """Trigger times (strings, datetimes or int64 ns) -> int64 ns, or InputError."""
    arr = np.asarray(values)
    if arr.dtype.kind in "iu":
        return arr.astype(np.int64)
    t = pd.to_datetime(pd.Series(arr), format="ISO8601", utc=True, errors="coerce") \
        if arr.dtype.kind in "OUS" else pd.to_datetime(pd.Series(arr), utc=True,
                                                        errors="coerce")
    bad = np.flatnonzero(t.isna().to_numpy())
    if bad.size:
        raise InputError([f"{where}: row {i}: 'time_utc' must be an ISO-8601 UTC time, got "
                          f"{arr[i]!r}" for i in bad[:10]])
    return t.astype("datetime64[ns, UTC]").astype("int64").to_numpy()


@contextlib.contextmanager
def staged_folder(folder, *, overwrite: bool = False) -> Iterator[Path]:
    """A temporary folder that replaces ``folder`` when the block succeeds.

    The block writes the catalog's files into the yielded folder. At the end the
    folder is opened with :func:`features.open_catalog`; if it validates it is
    renamed to ``folder`` (an existing ``folder`` is moved aside first and removed
    after), otherwise, or on any exception in the block, it is deleted and
    ``folder`` is left as it was.

    Parameters
    ----------
    folder : path
        The catalog folder to create.
    overwrite : bool, default=False
        Replace an existing non-empty ``folder``.

    Raises
    ------
    FileExistsError
        ``folder`` exists, is not empty, and ``overwrite`` is False.
    InputError
        The written catalog does not validate (the message lists every problem).
    """
    out = Path(folder).expanduser()
    if out.exists() and not out.is_dir():
        raise InputError(f"{out}: exists and is not a folder")
    if out.exists() and any(out.iterdir()) and not overwrite:
        raise InputError(f"{out}: folder exists and is not empty (pass overwrite=True, "
                              "or --overwrite on the command line, to replace it)")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.parent / f".{out.name}.partial"
    if tmp.exists():
        shutil.rmtree(tmp)
    tmp.mkdir()
    try:
        yield tmp
        try:
            open_catalog(tmp)
        except InputError as exc:
            raise InputError([f"{out}: the catalog written does not validate:"]
                             + exc.problems) from exc
        old = None
        if out.exists():
            old = out.parent / f".{out.name}.old"
            if old.exists():
                shutil.rmtree(old)
            out.rename(old)
        tmp.rename(out)
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def _channel_meta(name: str, meta, allowed: tuple[str, ...], required: tuple[str, ...]
                  ) -> dict:
    arg = f"{name}_meta"
    if not isinstance(meta, Mapping):
        raise InputError(f"write_catalog: '{arg}' must be a dict of the '{name}' manifest "
                         f"keys, got {type(meta).__name__}")
    problems = [f"write_catalog: '{arg}' is missing key '{k}'" for k in required
                if k not in meta]
    problems += [f"write_catalog: '{arg}' has unknown key '{k}' (allowed: "
                 f"{', '.join(allowed)})" for k in meta if k not in allowed and k != "file"]
    if problems:
        raise InputError(problems)
    out = {"file": f"{name}.npy"}
    for k in allowed:
        if k in meta:
            v = meta[k]
            out[k] = [float(b) for b in v] if k == "band_hz" and v is not None else (
                float(v) if is_real_number(v) else v)
    return out


def _array(arr, name: str, n_events: int) -> np.ndarray:
    a = np.asanyarray(arr)
    if a.ndim != 2:
        raise InputError(f"write_catalog: '{name}' must be 2-D (n_events, n_samples), got "
                         f"shape {a.shape}")
    if a.dtype.newbyteorder("=") not in ALLOWED_DTYPES:
        raise InputError(f"write_catalog: '{name}' dtype must be float32, float64 or int16, "
                         f"got {a.dtype}")
    if a.shape[0] != n_events:
        raise InputError(f"write_catalog: '{name}' has {a.shape[0]} rows but 'events' has "
                         f"{n_events} (row i of the array belongs to row i of events)")
    return a


def write_events(path, events: pd.DataFrame) -> None:
    """Write events.csv (``time_utc`` as int64 ns or strings) in pulsesort's CSV dialect."""
    df = events.copy()
    if df["time_utc"].dtype.kind in "iu":
        df["time_utc"] = format_time_utc(df["time_utc"].to_numpy())
    atomic_write(path, csv_text(df, header=True))


def write_sources(path, sources: pd.DataFrame) -> None:
    """Write sources.csv (columns as given; floats with full precision)."""
    atomic_write(path, csv_text(sources, header=True))


def write_manifest(path, manifest: dict) -> None:
    """Write catalog.json (indented, UTF-8)."""
    atomic_write(path, json.dumps(manifest, indent=2, allow_nan=False) + "\n")


def write_catalog(folder, events, field, *, field_meta, vhf=None, vhf_meta=None,
                  sources=None, catalog_id, station=None, season=None, extra=None,
                  overwrite=False) -> Path:
    """Write a catalog v1 folder, all or nothing, and check it by reading it back.

    Parameters
    ----------
    folder : str or Path
        The catalog folder to create.
    events : pandas.DataFrame or dict of columns
        One row per pulse: ``event_id`` (unique strings) and ``time_utc`` (the
        trigger time: ISO-8601 UTC strings, datetimes, or int64 ns since 1970 UTC);
        optional ``flash_id`` (str) and ``range_m`` (horizontal distance, m, NaN
        unknown); other columns are carried through unchanged.
    field : ndarray, shape (n_events, n_field_samples)
        Fast-antenna field change, float32, float64 or int16, stored as given.
    field_meta : dict
        The ``field`` manifest keys: ``sample_rate_hz`` (Hz), ``units`` ("V/m" or
        "counts"), ``sign_convention`` ("physics" or "atmospheric") and
        ``decay_time_s`` (s, or None when DC-coupled) are required;
        ``pretrigger_s`` (s, default 0), ``scale`` (V/m per file unit, default 1),
        ``delay_s`` (s, default 0), ``full_scale`` (file units after scale) optional.
    vhf : ndarray, shape (n_events, n_vhf_samples), optional
        VHF channel (antenna voltage or linear power).
    vhf_meta : dict, optional
        Required with ``vhf``: ``sample_rate_hz`` (Hz) and ``kind`` ("voltage" or
        "power"); optional ``pretrigger_s`` (s), ``band_hz`` ([low, high], Hz),
        ``delay_s`` (s), ``full_scale``.
    sources : pandas.DataFrame, optional
        Mapped sources: ``event_id``, ``t_s`` (s from the trigger), ``azimuth_deg``
        (clockwise from north), ``elevation_deg``; optional ``x_m, y_m, z_m`` (m,
        east/north/up from the station) and ``power_db``.
    catalog_id : str
        Non-empty name of the catalog.
    station, season : str, optional
        Written to the manifest when given.
    extra : dict, optional
        Further top-level manifest keys (readers keep unknown keys), e.g. how the
        catalog was assembled.
    overwrite : bool, default=False
        Replace an existing non-empty folder.

    Returns
    -------
    Path
        The catalog folder.

    Raises
    ------
    InputError
        A bad argument (named in the message), or a catalog that does not validate.
    FileExistsError
        ``folder`` is not empty and ``overwrite`` is False.

    Examples
    --------
    >>> import tempfile, numpy as np
    >>> from features import open_catalog, write_catalog
    >>> out = write_catalog(
    ...     tempfile.mkdtemp() + "/hollowmere-demo",
    ...     {"event_id": ["a", "b"], "time_utc": ["2031-07-14T21:03:55.000001Z",
    ...                                           "2031-07-14T21:03:55.250000Z"]},
    ...     np.zeros((2, 400), np.float32),
    ...     field_meta={"sample_rate_hz": 20e6, "pretrigger_s": 5e-6, "units": "V/m",
    ...                 "sign_convention": "physics", "decay_time_s": 1e-3},
    ...     catalog_id="hollowmere-demo", station="hollowmere")
    >>> open_catalog(out).n_events
    2
    """
    if not isinstance(catalog_id, str) or not catalog_id.strip():
        raise InputError(f"write_catalog: 'catalog_id' must be a non-empty string, got "
                         f"{catalog_id!r}")
    try:
        ev = pd.DataFrame(events).reset_index(drop=True)
    except (ValueError, TypeError) as exc:
        raise InputError(f"write_catalog: 'events' must be a table of columns ({exc})"
                         ) from exc
    missing = [c for c in ("event_id", "time_utc") if c not in ev.columns]
    if missing:
        raise InputError(f"write_catalog: 'events' lacks column(s) {missing}")
    ev["event_id"] = ev["event_id"].astype(str)
    dup = ev["event_id"][ev["event_id"].duplicated()].unique()
    if dup.size:
        raise InputError(f"write_catalog: 'events' repeats event_id(s) {list(dup[:5])}")
    ev["time_utc"] = _times_ns(ev["time_utc"].to_numpy(), "write_catalog: 'events'")
    n = len(ev)
    field = _array(field, "field", n)
    fmeta = _channel_meta("field", field_meta, FIELD_KEYS,
                          ("sample_rate_hz", "units", "sign_convention", "decay_time_s"))
    manifest = {"format": FORMAT_NAME, "version": FORMAT_VERSION, "catalog_id": catalog_id}
    if station is not None:
        manifest["station"] = str(station)
    if season is not None:
        manifest["season"] = str(season)
    manifest["events"] = "events.csv"
    manifest["field"] = fmeta
    if (vhf is None) != (vhf_meta is None):
        raise InputError("write_catalog: 'vhf' and 'vhf_meta' go together (give both or "
                         "neither)")
    if vhf is not None:
        vhf = _array(vhf, "vhf", n)
        manifest["vhf"] = _channel_meta("vhf", vhf_meta, VHF_KEYS, ("sample_rate_hz", "kind"))
    src = None
    if sources is not None:
        src = pd.DataFrame(sources)
        missing = [c for c in SOURCE_COLUMNS if c not in src.columns]
        if missing:
            raise InputError(f"write_catalog: 'sources' lacks column(s) {missing}")
        manifest["sources"] = {"file": "sources.csv"}
    for k, v in (extra or {}).items():
        if k in manifest:
            raise InputError(f"write_catalog: 'extra' key {k!r} is a catalog v1 key; pass it "
                             "as its own argument")
        manifest[k] = v
    with staged_folder(folder, overwrite=overwrite) as tmp:
        write_events(tmp / "events.csv", ev)
        np.save(tmp / "field.npy", np.ascontiguousarray(field))
        if vhf is not None:
            np.save(tmp / "vhf.npy", np.ascontiguousarray(vhf))
        if src is not None:
            write_sources(tmp / "sources.csv", src)
        write_manifest(tmp / "catalog.json", manifest)
    return Path(folder).expanduser()

