"""Features of the mapped VHF sources of each pulse: speed, direction, track shape.

Sources of many pulses are handled at once: a batch is a flat table of sources
with the row (pulse) each belongs to, and every statistic is a grouped sum or a
grouped median over that table (no Python loop over pulses).

Positions are the catalog's x, y, z (east, north, up from the station) where
given. Otherwise, with the horizontal range D of events.csv, a source at
azimuth az and elevation el sits at (D sin az, D cos az, D tan el): every
source of a pulse is then at the same horizontal distance, so the track is its
tangential and vertical motion (speed = D times the angular rate, corrected for
elevation). Without either, only angular quantities exist.

Velocities come from a robust straight-line fit of position against time: least
squares re-weighted with Huber weights (c = 1.345 robust sigmas, sigma from the
median absolute residual), four iterations (Huber 1964; common practice for
robust regression).
"""

from __future__ import annotations

import numpy as np

__all__ = ["MIN_SOURCES_FOR_SPEED", "source_features", "grouped_median"]

#: Fewest sources for a speed, an angular rate or a track shape.
MIN_SOURCES_FOR_SPEED = 3
HUBER_C = 1.345
IRLS_ITERATIONS = 4
MAX_ELEVATION_DEG = 89.9


def grouped_median(values, groups, n_groups):
    """Median of ``values`` within each group (NaN values ignored; NaN for empty groups).

    Parameters
    ----------
    values : ndarray, shape (n,)
    groups : ndarray of int, shape (n,)
        Group of each value, in ``[0, n_groups)``.
    n_groups : int

    Returns
    -------
    ndarray, shape (n_groups,)
    """
    values = np.asarray(values, dtype=np.float64)
    keep = np.isfinite(values)
    v, g = values[keep], np.asarray(groups)[keep]
    order = np.lexsort((v, g))
    v, g = v[order], g[order]
    counts = np.bincount(g, minlength=n_groups)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    out = np.full(n_groups, np.nan)
    has = counts > 0
    lo = starts[has] + (counts[has] - 1) // 2
    hi = starts[has] + counts[has] // 2
    out[has] = 0.5 * (v[lo] + v[hi])
    return out


def _line_fit(t, y, w, g, n):
    """Weighted slope and intercept (at t = 0) of y against t within each group.

    ``y`` is (n_sources, k); returns (slope (n, k), intercept (n, k), ok (n,)).
    """
    W = np.bincount(g, w, minlength=n)
    T = np.bincount(g, w * t, minlength=n)
    TT = np.bincount(g, w * t * t, minlength=n)
    k = y.shape[1]
    Y = np.stack([np.bincount(g, w * y[:, i], minlength=n) for i in range(k)], axis=1)
    TY = np.stack([np.bincount(g, w * t * y[:, i], minlength=n) for i in range(k)], axis=1)
    den = W * TT - T * T
    ok = den > 1e-12 * np.maximum(W * TT, 1e-300)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = (W[:, None] * TY - T[:, None] * Y) / den[:, None]
        icpt = (Y - slope * T[:, None]) / W[:, None]
    return slope, icpt, ok


def robust_velocity(t_s, pos, groups, n_groups):
    """Robust straight-line velocity of each group's positions against time.

    Parameters
    ----------
    t_s : ndarray, shape (n_sources,)
        Times in seconds.
    pos : ndarray, shape (n_sources, k)
        Positions (metres, or degrees for angular fits); rows with NaN are ignored.
    groups : ndarray of int, shape (n_sources,)
    n_groups : int

    Returns
    -------
    ndarray, shape (n_groups, k)
        Velocity (units of ``pos`` per second); NaN for groups with fewer than
        :data:`MIN_SOURCES_FOR_SPEED` usable sources or no time spread.
    """
    pos = np.asarray(pos, dtype=np.float64)
    g = np.asarray(groups)
    valid = np.isfinite(pos).all(axis=1) & np.isfinite(t_s)
    n_valid = np.bincount(g, valid, minlength=n_groups)
    w = valid.astype(np.float64)
    p = np.where(valid[:, None], pos, 0.0)
    # centre time and position per group for numerical stability
    tmean = np.bincount(g, w * np.nan_to_num(t_s), minlength=n_groups) / np.maximum(n_valid, 1)
    tc = np.where(valid, np.nan_to_num(t_s) - tmean[g], 0.0)
    pmean = np.stack([np.bincount(g, w * p[:, i], minlength=n_groups) for i in
                      range(p.shape[1])], axis=1) / np.maximum(n_valid, 1)[:, None]
    pc = p - pmean[g]
    slope = np.full((n_groups, p.shape[1]), np.nan)
    for _ in range(IRLS_ITERATIONS):
        slope, icpt, ok = _line_fit(tc, pc, w, g, n_groups)
        fit = icpt[g] + slope[g] * tc[:, None]
        res = np.sqrt(((pc - fit) ** 2).sum(axis=1))
        res = np.where(valid, res, np.nan)
        scale = 1.4826 * grouped_median(res, g, n_groups)
        floor = 1e-9 * (np.abs(pmean).max(axis=1) + 1.0)
        scale = np.maximum(np.nan_to_num(scale), floor)
        with np.errstate(divide="ignore", invalid="ignore"):
            w = np.where(valid, np.minimum(1.0, HUBER_C * scale[g] / res), 0.0)
        w = np.nan_to_num(w, nan=1.0)
    slope[~ok] = np.nan
    slope[n_valid < MIN_SOURCES_FOR_SPEED] = np.nan
    return slope


def _positions(sources, range_m):
    g = sources.event_index
    if sources.xyz_m is not None:
        return np.asarray(sources.xyz_m, dtype=np.float64)
    d = np.asarray(range_m, dtype=np.float64)[g]
    az = np.radians(sources.azimuth_deg)
    el = np.radians(np.minimum(sources.elevation_deg, MAX_ELEVATION_DEG))
    return np.column_stack([d * np.sin(az), d * np.cos(az), d * np.tan(el)])


def _sky_unit(az_deg, el_deg):
    az, el = np.radians(az_deg), np.radians(el_deg)
    return np.column_stack([np.cos(el) * np.sin(az), np.cos(el) * np.cos(az), np.sin(el)])


def _net_to_path(pos, g, n):
    """Net displacement over path length of each group's time-ordered track."""
    valid = np.isfinite(pos).all(axis=1)
    pos, g = pos[valid], g[valid]
    counts = np.bincount(g, minlength=n)
    out = np.full(n, np.nan)
    if len(g) == 0:
        return out
    step = np.sqrt((np.diff(pos, axis=0) ** 2).sum(axis=1))
    same = g[1:] == g[:-1]
    path = np.bincount(g[1:][same], step[same], minlength=n)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    has = counts >= MIN_SOURCES_FOR_SPEED
    first = pos[starts[has]]
    last = pos[starts[has] + counts[has] - 1]
    net = np.sqrt(((last - first) ** 2).sum(axis=1))
    with np.errstate(divide="ignore", invalid="ignore"):
        out[has] = np.where(path[has] > 0, net / path[has], np.nan)
    return out


def source_features(sources, range_m, n_events):
    """Compute the source-track features of a batch of pulses.

    Parameters
    ----------
    sources : features._tables.SourceTable or None
        Sources of the batch, ``event_index`` in ``[0, n_events)``; None when the
        catalog has no sources table (every feature NaN).
    range_m : ndarray, shape (n_events,)
        Horizontal range of each pulse in metres, NaN unknown.
    n_events : int

    Returns
    -------
    dict of str -> ndarray, shape (n_events,)
        ``n_sources``, ``speed_m_per_s``, ``vertical_speed_m_per_s`` (+ up),
        ``motion_elevation_deg`` (angle of the apparent motion on the sky above
        the horizontal: tangential vs vertical, from angles),
        ``angular_rate_deg_per_s``, ``net_to_path``, ``altitude_m``,
        ``elevation_median_deg``, ``source_duration_s``, ``source_range_m``
        (median horizontal distance of the sources, xyz only).
    """
    nan = np.full(n_events, np.nan)
    keys = ("n_sources", "speed_m_per_s", "vertical_speed_m_per_s", "motion_elevation_deg",
            "angular_rate_deg_per_s", "net_to_path", "altitude_m", "elevation_median_deg",
            "source_duration_s", "source_range_m")
    if sources is None:
        return {k: nan.copy() for k in keys}
    g = np.asarray(sources.event_index, dtype=np.intp)
    t = np.asarray(sources.t_s, dtype=np.float64)
    order = np.lexsort((t, g))
    g, t = g[order], t[order]
    az = np.asarray(sources.azimuth_deg, dtype=np.float64)[order]
    el = np.asarray(sources.elevation_deg, dtype=np.float64)[order]
    xyz = None if sources.xyz_m is None else np.asarray(sources.xyz_m, np.float64)[order]
    counts = np.bincount(g, minlength=n_events).astype(np.float64)
    sorted_src = type(sources)(event_index=g, t_s=t, azimuth_deg=az, elevation_deg=el,
                               xyz_m=xyz, power_db=None, offsets=sources.offsets)
    pos = _positions(sorted_src, range_m)
    vel = robust_velocity(t, pos, g, n_events)
    speed = np.sqrt((vel ** 2).sum(axis=1))

    # angular motion: azimuth unwrapped around each pulse's first source
    starts = np.concatenate(([0], np.cumsum(counts.astype(np.int64))[:-1]))
    ref = np.zeros(n_events)
    has = counts > 0
    ref[has] = az[starts[has]]
    az_u = ref[g] + ((az - ref[g] + 180.0) % 360.0) - 180.0
    ang = robust_velocity(t, np.column_stack([az_u, el]), g, n_events)   # deg/s
    el_med = grouped_median(el, g, n_events)
    coslat = np.cos(np.radians(el_med))
    ang_rate = np.sqrt((ang[:, 0] * coslat) ** 2 + ang[:, 1] ** 2)
    # direction and straightness are measured on the sky for every catalog (the
    # interferometer's own measurement), so they mean the same with or without xyz
    sec2 = 1.0 / np.cos(np.radians(np.minimum(el_med, MAX_ELEVATION_DEG))) ** 2
    mot_el = np.degrees(np.arctan2(np.radians(ang[:, 1]) * sec2,
                                   np.abs(np.radians(ang[:, 0]))))
    if xyz is not None:
        alt = grouped_median(xyz[:, 2], g, n_events)
        src_range = grouped_median(np.hypot(xyz[:, 0], xyz[:, 1]), g, n_events)
    else:
        alt = grouped_median(pos[:, 2], g, n_events)
        src_range = nan.copy()
    track = _sky_unit(az, el)
    t_first = np.full(n_events, np.nan)
    t_last = np.full(n_events, np.nan)
    t_first[has] = t[starts[has]]
    t_last[has] = t[starts[has] + counts[has].astype(np.int64) - 1]
    return {
        "n_sources": counts,
        "speed_m_per_s": speed,
        "vertical_speed_m_per_s": vel[:, 2],
        "motion_elevation_deg": mot_el,
        "angular_rate_deg_per_s": ang_rate,
        "net_to_path": _net_to_path(track, g, n_events),
        "altitude_m": alt,
        "elevation_median_deg": el_med,
        "source_duration_s": t_last - t_first,
        "source_range_m": src_range,
    }
