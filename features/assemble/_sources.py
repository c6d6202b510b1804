"""A station's mapped-source list -> the catalog's sources.csv columns.

Angles: azimuth/elevation in degrees (azimuth clockwise from north, or counter-
clockwise from east when the description says so), or direction cosines
``cos_east = cos(el) sin(az)``, ``cos_north = cos(el) cos(az)`` (the usual
interferometer output; elevation from ``arccos(hypot(cos_east, cos_north))``, above the
horizon). Times: seconds relative to an event's trigger (with an event id column),
or UTC, in which case each source goes to the event whose field window holds it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .._checks import InputError
from ..station import SourceSpec

__all__ = ["read_station_sources"]

#: A direction-cosine pair may exceed 1 in length by rounding; beyond this it is an error.
COSINE_TOLERANCE = 1e-6


def _column(df, spec: SourceSpec, key: str, where: str) -> np.ndarray:
    name = spec.columns[key]
    vals = pd.to_numeric(df[name], errors="coerce").to_numpy(np.float64)
    bad = np.flatnonzero(~np.isfinite(vals))
    if bad.size:
        raise InputError([f"{where} line {int(df.index[i]) + 2}: column {name!r} must be a "
                          f"number, got {df[name].iloc[i]!r}" for i in bad[:10]])
    return vals


def read_station_sources(spec: SourceSpec, event_ids: np.ndarray, trigger_ns: np.ndarray,
                         pretrigger_s: float, length_s: float) -> tuple[pd.DataFrame, dict]:
    """Read, convert and assign the sources; return (sources.csv table, counts).

    Parameters
    ----------
    spec : SourceSpec
    event_ids : ndarray of str, shape (n_events,)
    trigger_ns : ndarray of int64, shape (n_events,)
        Trigger times, ns since 1970 UTC.
    pretrigger_s, length_s : float
        The field window (s), used to assign UTC-timed sources.

    Returns
    -------
    table : DataFrame
        ``event_id, t_s, azimuth_deg, elevation_deg`` (+ ``x_m, y_m, z_m``, ``power_db``).
    counts : dict
        ``n_read``, ``n_kept``, ``n_outside_windows`` (UTC sources in no window).
    """
    where = spec.file.name
    try:
        df = pd.read_csv(spec.file, dtype=str, keep_default_na=False)
    except (ValueError, OSError, UnicodeDecodeError) as exc:
        raise InputError(f"{where}: not a readable CSV file ({exc})") from exc
    df.columns = [str(c).strip() for c in df.columns]
    missing = [v for v in spec.columns.values() if v not in df.columns]
    if missing:
        raise InputError(f"{where}: column(s) {missing} named in the station description "
                         f"[sources] columns are not in its header {list(df.columns)}")
    if spec.angles == "direction_cosines":
        ce = _column(df, spec, "cos_east", where)
        cn = _column(df, spec, "cos_north", where)
        h = np.hypot(ce, cn)
        bad = np.flatnonzero(h > 1 + COSINE_TOLERANCE)
        if bad.size:
            raise InputError([f"{where} line {i + 2}: direction cosines ({ce[i]:g}, {cn[i]:g}) "
                              "have length > 1" for i in bad[:10]])
        az = np.degrees(np.arctan2(ce, cn)) % 360.0
        el = np.degrees(np.arccos(np.minimum(h, 1.0)))
    else:
        az = _column(df, spec, "azimuth", where)
        el = _column(df, spec, "elevation", where)
        if spec.azimuth_reference == "east_counterclockwise":
            az = 90.0 - az
        az = az % 360.0
        bad = np.flatnonzero((el < 0) | (el > 90))
        if bad.size:
            raise InputError([f"{where} line {i + 2}: elevation must be in [0, 90] degrees, "
                              f"got {el[i]:g}" for i in bad[:10]])
    az = np.where(az >= 360.0, 0.0, az)  # a rounding of 359.99999... to 360
    order = np.argsort(trigger_ns, kind="stable")
    if spec.time == "relative":
        t_s = _column(df, spec, "time", where)
        ids = df[spec.columns["event_id"]].astype(str).str.strip().to_numpy()
        pos = pd.Index(event_ids).get_indexer(ids)
        unknown = np.flatnonzero(pos < 0)
        if unknown.size:
            raise InputError([f"{where} line {i + 2}: event id {ids[i]!r} is not an event of "
                              "the catalog" for i in unknown[:10]])
        keep = np.ones(len(df), bool)
    else:
        text = df[spec.columns["time"]].astype(str).str.strip()
        t = pd.to_datetime(text, format="ISO8601", utc=True, errors="coerce")
        bad = np.flatnonzero(t.isna().to_numpy())
        if bad.size:
            raise InputError([f"{where} line {i + 2}: column {spec.columns['time']!r} must be "
                              f"an ISO-8601 UTC time, got {text.iloc[i]!r}" for i in bad[:10]])
        ns = t.astype("datetime64[ns, UTC]").astype("int64").to_numpy()
        pre_ns = round(pretrigger_s * 1e9)
        sorted_t = trigger_ns[order]
        k = np.searchsorted(sorted_t, ns + pre_ns, side="right") - 1
        ok = k >= 0
        kk = np.maximum(k, 0)
        keep = ok & (ns < sorted_t[kk] - pre_ns + round(length_s * 1e9))
        pos = order[kk]
        t_s = (ns - trigger_ns[pos]) / 1e9
    table = {"event_id": np.asarray(event_ids, dtype=object)[pos], "t_s": t_s,
             "azimuth_deg": az, "elevation_deg": el}
    for key, col in (("x", "x_m"), ("y", "y_m"), ("z", "z_m"), ("power_db", "power_db")):
        if key in spec.columns:
            table[col] = _column(df, spec, key, where)
    out = pd.DataFrame(table)[keep]
    out["_row"] = pos[keep]
    out = out.sort_values(["_row", "t_s"], kind="stable").drop(columns="_row")
    return out.reset_index(drop=True), {"n_read": len(df), "n_kept": int(keep.sum()),
                                        "n_outside_windows": int((~keep).sum())}
