"""Features of the mapped VHF sources of each pulse: speed, direction, track shape.

Sources of many pulses are handled at once: a batch is a flat table of sources
with the row (pulse) each belongs to, and every statistic is a grouped sum or a
grouped median over that table (no Python loop over pulses; the fits live in
:mod:`features._trackfit`).

Positions. With the catalog's x, y, z (east, north, up in the station's local
tangent frame) a source sits at (x, y, h) with ``h`` its altitude above the
curved Earth (:func:`altitude_from_enu_m`). Otherwise, with the horizontal
range D of events.csv, a source at azimuth az and elevation el sits at
(D sin az, D cos az, h(D, el)) with ``h`` from a straight ray over a 4/3 Earth
(:func:`altitude_from_range_elevation_m`): every source of a pulse is then at
the same horizontal distance, so the track is its tangential and vertical
motion, and a radial motion leaks into the vertical one (``vertical_confounded``).
Without either, only angular quantities exist.

Velocities come from a robust (Huber) straight-line fit of position against
time, with Huber's covariance of the slopes. A speed is the length of the
fitted velocity less its noise bias, ``sqrt(max(|v|^2 - trace(Cov), 0))``:
the plain length reads high when the track is short against the position
noise (a 2.5e5 m/s leader at 100 km with 0.2 deg angle noise read about
2.9 times too fast). Each speed comes with its standard error.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from ._checks import InputError, is_real_number
from ._trackfit import (
    MIN_SOURCES_FOR_SPEED,
    chord_offsets_sq,
    debiased_norm,
    group_order,
    grouped_median,
    robust_velocity,
)

__all__ = ["COLUMNS", "EARTH_RADIUS_M", "EFFECTIVE_EARTH_RADIUS_M", "MIN_SOURCES_FOR_SPEED",
           "altitude_from_enu_m", "altitude_from_range_elevation_m", "breakdown_polarity",
           "grouped_median", "source_features", "source_positions_m"]

#: Mean Earth radius in metres (the IUGG mean radius rounded; from memory).
EARTH_RADIUS_M = 6.371e6
#: Effective Earth radius for rays bent by a standard atmosphere: 4/3 of the true
#: one, so that rays can be drawn straight (common radar practice for refraction;
#: Skolnik, Introduction to Radar Systems, from memory).
EFFECTIVE_EARTH_RADIUS_M = 4.0 / 3.0 * EARTH_RADIUS_M
MAX_ELEVATION_DEG = 89.9
#: ``motion_elevation_deg`` is claimed where the 95 % half-width of the direction is at
#: most this, degrees (our choice: a direction known no better is not a direction).
MOTION_DIRECTION_HALF_WIDTH_DEG = 10.0
#: ``net_to_path`` is claimed where the length the position noise adds to the track's
#: path, summed step by step, is at most this share of the path. A step of true length
#: L with noise of variance sigma^2 per axis per position reads on average
#: ``L + (d - 1) sigma^2 / L`` long in d dimensions (Rice 1945 at high signal-to-noise;
#: the step's noise is 2 sigma^2 per axis), with L estimated from the step's squared
#: length less the ``2 d sigma^2`` noise adds to it, and a step not longer than that
#: counted as noise whole (sigma: its upper 95 % bound from the track itself). Summing
#: step by step, not over the mean squared step, keeps a track of one long jump and
#: several noise-sized steps from being claimed (our choice: 5 %).
MAX_PATH_NOISE_SHARE = 0.05

#: Columns returned by :func:`source_features`, in schema order.
COLUMNS = ("n_sources", "speed_m_per_s", "speed_se_m_per_s", "speed_snr",
           "vertical_speed_m_per_s", "vertical_speed_se_m_per_s", "vertical_confounded",
           "motion_elevation_deg", "angular_rate_deg_per_s", "angular_rate_se_deg_per_s",
           "net_to_path", "altitude_m", "elevation_median_deg", "source_duration_s",
           "source_range_m")


def altitude_from_range_elevation_m(range_m, elevation_deg, *,
                                    effective_radius_m=EFFECTIVE_EARTH_RADIUS_M):
    """Altitude of a source seen at an elevation angle over a given ground range.

    A straight ray over a sphere of radius ``a``: with the central angle
    ``theta = D / a``, ``h = a / (cos(theta) - tan(el) sin(theta)) - a``.

    Parameters
    ----------
    range_m : float or ndarray
        Horizontal (ground) range D from the station, in metres.
    elevation_deg : float or ndarray
        Elevation of the source above the station's horizontal, in degrees.
    effective_radius_m : float, default=EFFECTIVE_EARTH_RADIUS_M
        Radius ``a`` of the sphere in metres; 4/3 of the Earth's by default to
        account for standard refraction (common radar practice).

    Returns
    -------
    ndarray
        Altitude above the surface in metres; NaN where the ray never reaches
        the range (``tan(el) sin(theta) >= cos(theta)``). Large ``a`` gives the
        flat-Earth ``D tan(el)``.

    Examples
    --------
    >>> round(float(altitude_from_range_elevation_m(100e3, 5.0)), 1)
    9347.5
    """
    a = float(effective_radius_m)
    theta = np.asarray(range_m, dtype=np.float64) / a
    tan_el = np.tan(np.radians(np.asarray(elevation_deg, dtype=np.float64)))
    # h = a (1 - c) / c with c = cos(theta) - tan(el) sin(theta); 1 - cos written
    # as 2 sin^2(theta/2) so that short ranges keep their digits
    one_minus_c = 2.0 * np.sin(0.5 * theta) ** 2 + tan_el * np.sin(theta)
    c = 1.0 - one_minus_c
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(c > 0, a * one_minus_c / c, np.nan)


def altitude_from_enu_m(x_m, y_m, z_m, *, earth_radius_m=EARTH_RADIUS_M):
    """Altitude above the Earth of a point given in the station's east/north/up frame.

    ``h = sqrt(x^2 + y^2 + (R + z)^2) - R``: the frame is tangent to a sphere
    of radius R at the station (geometric, no refraction).

    Parameters
    ----------
    x_m, y_m, z_m : float or ndarray
        East, north, up from the station, in metres.
    earth_radius_m : float, default=EARTH_RADIUS_M
        Sphere radius R in metres.

    Returns
    -------
    ndarray
        Altitude in metres (``z`` in the flat-Earth limit).

    Examples
    --------
    >>> round(float(altitude_from_enu_m(60e3, 80e3, 9e3)), 1)
    9783.7
    """
    r = float(earth_radius_m)
    x, y, z = (np.asarray(v, dtype=np.float64) for v in (x_m, y_m, z_m))
    # the difference of two near-equal numbers, rewritten without cancellation
    num = x * x + y * y + z * z + 2.0 * r * z
    return num / (np.sqrt(x * x + y * y + (r + z) ** 2) + r)


def _positions(g, az_deg, el_deg, xyz, range_m):
    """Positions (east, north, altitude) of the sources in metres (NaN: unknown)."""
    if xyz is not None:
        return np.column_stack([xyz[:, 0], xyz[:, 1],
                                altitude_from_enu_m(xyz[:, 0], xyz[:, 1], xyz[:, 2])])
    d = np.asarray(range_m, dtype=np.float64)[g]
    az = np.radians(az_deg)
    el = np.minimum(el_deg, MAX_ELEVATION_DEG)
    return np.column_stack([d * np.sin(az), d * np.cos(az),
                            altitude_from_range_elevation_m(d, el)])


def source_positions_m(sources, range_m) -> np.ndarray:
    """East, north and altitude of every source of a source table, in metres.

    From x/y/z when the table has them (altitude above the curved Earth), else from the
    event's horizontal range and the angles (4/3-Earth altitude); NaN without either.

    Parameters
    ----------
    sources : features._tables.SourceTable
        Sources; ``event_index`` indexes ``range_m``.
    range_m : ndarray, shape (n_events,)
        Horizontal range of each event, m (NaN unknown).

    Returns
    -------
    ndarray, shape (n_sources, 3)
    """
    xyz = None if sources.xyz_m is None else np.asarray(sources.xyz_m, dtype=np.float64)
    return _positions(np.asarray(sources.event_index, dtype=np.intp),
                      np.asarray(sources.azimuth_deg, dtype=np.float64),
                      np.asarray(sources.elevation_deg, dtype=np.float64), xyz, range_m)


def _local_noise_var(t, pos, g, n, confidence=0.95):
    """Upper confidence bound of the per-axis noise variance of each group's positions.

    The sum of :func:`chord_offsets_sq` over a group's k inner sources is ``sigma^2``
    times a chi-square with ``d k`` degrees of freedom for a straight, evenly moving
    track, so ``sigma^2 <= sum z^2 / chi2_{1 - confidence}(d k)`` at ``confidence``
    (a turn only raises the bound). NaN under 3 sources.
    """
    z2, _ = chord_offsets_sq(t, pos, g)
    inner = np.isfinite(z2)
    total = np.bincount(g[inner], z2[inner], minlength=n)
    dof = pos.shape[1] * np.bincount(g[inner], minlength=n).astype(np.float64)
    with np.errstate(invalid="ignore", divide="ignore"):
        q = special.chdtri(np.where(dof >= 1, dof, np.nan), confidence)
        return total / q


def _net_to_path(pos, g, n, noise_var):
    """Net displacement over path length of each group's time-ordered track.

    ``noise_var`` (n,) bounds each position's noise variance per axis (units of ``pos``
    squared); a track is claimed (else NaN) only where the length noise adds to its path
    is at most :data:`MAX_PATH_NOISE_SHARE` of it (path lengths of noise-dominated
    tracks are sums of noise).
    """
    valid = np.isfinite(pos).all(axis=1)
    pos, g = pos[valid], g[valid]
    counts = np.bincount(g, minlength=n)
    out = np.full(n, np.nan)
    if len(g) == 0:
        return out
    dim = pos.shape[1]
    d2 = (np.diff(pos, axis=0) ** 2).sum(axis=1)
    step = np.sqrt(d2)
    same = g[1:] == g[:-1]
    gs, d2s, steps = g[1:][same], d2[same], step[same]
    path = np.bincount(gs, steps, minlength=n)
    var = noise_var[gs]
    with np.errstate(invalid="ignore", divide="ignore"):
        true2 = d2s - 2.0 * dim * var
        added = np.where(true2 > 0, (dim - 1) * var / np.sqrt(true2), steps)
    added = np.bincount(gs, np.where(np.isnan(added), np.inf, added), minlength=n)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    with np.errstate(invalid="ignore"):
        clear = added <= MAX_PATH_NOISE_SHARE * path
    has = (counts >= MIN_SOURCES_FOR_SPEED) & clear & (path > 0)
    first = pos[starts[has]]
    last = pos[starts[has] + counts[has] - 1]
    out[has] = np.sqrt(((last - first) ** 2).sum(axis=1)) / path[has]
    return out


def _motion_direction(velocity, covariance, coslat, n_used):
    """Direction of the apparent motion above the horizontal, deg, NaN where unsure.

    ``velocity`` holds the rates of ``az cos(el)`` and ``el`` (deg/s). The tangential
    and vertical speeds are proportional to ``az rate`` and ``sec^2(el) el rate``; the
    direction's standard error is the delta method's ``sqrt(n' Cov n) / |w|`` (Cov:
    the two axes' slope variances pooled, the sky noise being isotropic) with
    ``n`` the unit vector across ``w`` (radians). It is claimed where its 95 % interval,
    Student's t with ``n_used - 2`` degrees of freedom times that SE, is at most
    :data:`MOTION_DIRECTION_HALF_WIDTH_DEG`.
    """
    scale = np.stack([1.0 / coslat, 1.0 / coslat ** 2], axis=1)
    w = velocity * scale
    # the angle noise is isotropic on the sky (arc on both axes): pool the two axes'
    # variances, so that an axis whose readings are clipped (elevation at 0) does not
    # pass for a noise-free one
    pooled = 0.5 * np.trace(covariance, axis1=1, axis2=2)
    cov = pooled[:, None, None] * (scale[:, :, None] * scale[:, None, :] * np.eye(2))
    norm = np.hypot(w[:, 0], w[:, 1])
    with np.errstate(divide="ignore", invalid="ignore"):
        across = np.stack([-w[:, 1], w[:, 0]], axis=1) / norm[:, None]
        se = np.degrees(np.sqrt(np.einsum("ni,nij,nj->n", across, cov, across)) / norm)
        dof = n_used - 2.0
        half = special.stdtrit(np.where(dof >= 1, dof, np.nan), 0.975) * se
    direction = np.degrees(np.arctan2(w[:, 1], np.abs(w[:, 0])))
    return np.where(half <= MOTION_DIRECTION_HALF_WIDTH_DEG, direction, np.nan)


def source_features(sources, range_m, n_events):
    """Compute the source-track features of a batch of pulses.

    Parameters
    ----------
    sources : features._tables.SourceTable or None
        Sources of the batch, ``event_index`` in ``[0, n_events)``; None when the
        catalog has no sources table (every float feature NaN).
    range_m : ndarray, shape (n_events,)
        Horizontal range of each pulse in metres, NaN unknown.
    n_events : int

    Returns
    -------
    dict of str -> ndarray, shape (n_events,)
        The :data:`COLUMNS`: ``n_sources``; ``speed_m_per_s`` (debiased, m/s),
        ``speed_se_m_per_s`` and ``speed_snr`` (speed / its SE);
        ``vertical_speed_m_per_s`` (rate of change of altitude, + up) and
        ``vertical_speed_se_m_per_s``; ``vertical_confounded`` (bool: positions
        from range and angles); ``motion_elevation_deg`` (angle of the apparent
        motion on the sky above the horizontal: tangential vs vertical, from
        angles); ``angular_rate_deg_per_s`` (debiased) and
        ``angular_rate_se_deg_per_s``; ``net_to_path``; ``altitude_m`` (median
        altitude above the curved Earth); ``elevation_median_deg``;
        ``source_duration_s``; ``source_range_m`` (median horizontal distance
        of the sources, xyz only).
    """
    nan = np.full(n_events, np.nan)
    if sources is None:
        out = {k: nan.copy() for k in COLUMNS}
        out["vertical_confounded"] = np.zeros(n_events, dtype=bool)
        return out
    g = np.asarray(sources.event_index, dtype=np.intp)
    t = np.asarray(sources.t_s, dtype=np.float64)
    order = group_order(t, g)                     # = np.lexsort((t, g))
    g, t = g[order], t[order]
    az = np.asarray(sources.azimuth_deg, dtype=np.float64)[order]
    el = np.asarray(sources.elevation_deg, dtype=np.float64)[order]
    xyz = None if sources.xyz_m is None else np.asarray(sources.xyz_m, np.float64)[order]
    counts = np.bincount(g, minlength=n_events).astype(np.float64)
    has = counts > 0

    pos = _positions(g, az, el, xyz, range_m)
    fit = robust_velocity(t, pos, g, n_events)
    speed, speed_se = debiased_norm(fit.velocity, fit.covariance)
    with np.errstate(divide="ignore", invalid="ignore"):
        speed_snr = speed / speed_se

    # angular motion on the sky: azimuth unwrapped around each pulse's first
    # source and scaled by cos(median elevation), so both axes are arc degrees
    starts = np.concatenate(([0], np.cumsum(counts.astype(np.int64))[:-1]))
    ref = np.zeros(n_events)
    ref[has] = az[starts[has]]
    az_u = ref[g] + ((az - ref[g] + 180.0) % 360.0) - 180.0
    el_med = grouped_median(el, g, n_events)
    coslat = np.cos(np.radians(np.minimum(el_med, MAX_ELEVATION_DEG)))
    ang = robust_velocity(t, np.column_stack([az_u * coslat[g], el]), g, n_events)  # deg/s
    ang_rate, ang_se = debiased_norm(ang.velocity, ang.covariance)
    # direction and straightness are measured on the sky for every catalog (the
    # interferometer's own measurement), so they mean the same with or without xyz:
    # tangential speed D * az rate vs vertical speed D sec^2(el) * el rate
    n_used = np.bincount(g, np.isfinite(az_u) & np.isfinite(el) & np.isfinite(t),
                         minlength=n_events).astype(np.float64)
    mot_el = _motion_direction(ang.velocity, ang.covariance, coslat, n_used)
    # path on the sky in degrees: az cos(median el), el (the fit's own axes)
    sky = np.column_stack([az_u * coslat[g], el])
    net_path = _net_to_path(sky, g, n_events, _local_noise_var(t, sky, g, n_events))
    if xyz is not None:
        src_range = grouped_median(np.hypot(xyz[:, 0], xyz[:, 1]), g, n_events)
    else:
        src_range = nan.copy()
    t_first = np.full(n_events, np.nan)
    t_last = np.full(n_events, np.nan)
    t_first[has] = t[starts[has]]
    t_last[has] = t[starts[has] + counts[has].astype(np.int64) - 1]
    return {
        "n_sources": counts,
        "speed_m_per_s": speed,
        "speed_se_m_per_s": speed_se,
        "speed_snr": speed_snr,
        "vertical_speed_m_per_s": fit.velocity[:, 2],
        "vertical_speed_se_m_per_s": np.sqrt(fit.covariance[:, 2, 2]),
        "vertical_confounded": has & (xyz is None),
        "motion_elevation_deg": mot_el,
        "angular_rate_deg_per_s": ang_rate,
        "angular_rate_se_deg_per_s": ang_se,
        "net_to_path": net_path,
        "altitude_m": grouped_median(pos[:, 2], g, n_events),
        "elevation_median_deg": el_med,
        "source_duration_s": t_last - t_first,
        "source_range_m": src_range,
    }


def breakdown_polarity(field_polarity, vertical_speed_m_per_s, vertical_speed_se_m_per_s,
                       confounded, *, min_snr=3.0, n_sources=None):
    """Polarity of the breakdown of each pulse from its field sign and vertical motion.

    Convention (pulsesort's; read it before comparing with a paper). The
    field is in the physics sign convention. For a radiation-dominated pulse
    ``E = -(1 / (2 pi eps0 c^2 D)) dM/dt``, so a positive initial peak means a
    growing *downward*-directed current moment: the current direction is
    ``-polarity`` (+1 up). The propagation direction is the sign of the
    sources' vertical speed, trusted when ``|v_z| / SE >= min_snr``, or
    ``>= 2 min_snr`` when ``confounded`` (vertical speed from range and
    angles, where radial motion leaks into it; a choice, common practice, no
    source). **Positive breakdown**: the current flows in the direction of
    propagation (positive charge advances, e.g. a downward current
    propagating downward). **Negative breakdown**: opposite.

    Naming in the literature, as recalled (from memory; papers name narrow
    bipolar event polarity in different sign conventions, so compare by
    current direction): the common "positive" NBEs, at about 7-15 km, have a
    downward-directed current and are produced by downward fast positive
    breakdown (Rison et al. 2016, from memory); "negative" NBEs, higher
    (about 14-20 km), have an upward-directed current.

    Parameters
    ----------
    field_polarity : array_like, shape (n,)
        Sign of the initial field peak (physics convention); only the sign is
        used, so a signed peak in V/m also works. 0 or NaN: undetermined.
    vertical_speed_m_per_s : array_like, shape (n,)
        Vertical speed of the sources in m/s, + upward (NaN: none).
    vertical_speed_se_m_per_s : array_like, shape (n,)
        Its standard error in m/s.
    confounded : array_like of bool, shape (n,)
        Whether the vertical speed comes from range and angles.
    min_snr : float, default=3.0
        Significance needed for a direction, in standard errors.
    n_sources : array_like, shape (n,), optional
        Sources behind each vertical speed. Recommended: the SE is then itself
        estimated from ``n - 2`` degrees of freedom, so ``|v_z| / SE`` follows
        Student's t, not a normal (with 3 sources a ratio of 20 happens by
        chance 3 % of the time). Given, the significance is read as the
        normal-equivalent ``z`` with the same one-sided tail probability under
        Student's t with ``n - 2`` degrees of freedom (Student 1908; from memory).

    Returns
    -------
    labels : ndarray of object, shape (n,)
        "positive", "negative" or "undetermined".
    snr : ndarray, shape (n,)
        The significance the label rests on: ``|v_z| / SE``, or its
        normal-equivalent with ``n_sources``; NaN where there is no vertical
        speed (too few or no sources).

    Raises
    ------
    InputError
        When the arrays differ in shape or ``min_snr`` is not a finite number > 0.

    Examples
    --------
    >>> labels, snr = breakdown_polarity([1, 1, -1, -1], [-2e7, -2e7, -5e4, 8e4],
    ...                                  [1e6, 1e7, 1e4, 1e4], [False, False, True, True])
    >>> labels.tolist(), snr.tolist()
    (['positive', 'undetermined', 'undetermined', 'positive'], [20.0, 2.0, 5.0, 8.0])
    >>> labels, snr = breakdown_polarity([1], [-2e7], [1e6], [False], n_sources=[3])
    >>> labels.tolist(), round(float(snr[0]), 2)
    (['undetermined'], 2.15)
    """
    if not is_real_number(min_snr) or min_snr <= 0:
        raise InputError(f"breakdown_polarity: 'min_snr' must be a finite number > 0, "
                         f"got {min_snr!r}")
    args = {"field_polarity": np.asarray(field_polarity, dtype=np.float64),
            "vertical_speed_m_per_s": np.asarray(vertical_speed_m_per_s, dtype=np.float64),
            "vertical_speed_se_m_per_s": np.asarray(vertical_speed_se_m_per_s,
                                                    dtype=np.float64),
            "confounded": np.asarray(confounded, dtype=bool)}
    if n_sources is not None:
        args["n_sources"] = np.asarray(n_sources, dtype=np.float64)
    shapes = {k: v.shape for k, v in args.items()}
    if len(set(shapes.values())) > 1 or args["field_polarity"].ndim != 1:
        raise InputError(["breakdown_polarity: the arrays must be 1-D of one length, got "
                          + ", ".join(f"'{k}' {s}" for k, s in shapes.items())])
    thr = float(min_snr)
    pol, vz, se, conf = (args[k] for k in list(args)[:4])
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = np.abs(vz) / se
    snr[~(np.isfinite(vz) & (se >= 0))] = np.nan
    if n_sources is not None:
        dof = args["n_sources"] - 2.0
        with np.errstate(invalid="ignore"):
            tail = special.stdtr(np.where(dof >= 1, dof, np.nan), -snr)
            snr = np.where(np.isnan(snr), np.nan, -special.ndtri(tail))
    need = np.where(conf, 2.0 * thr, thr)
    current = -np.sign(pol)                 # +1: upward-directed current
    moving = np.sign(vz)                    # +1: sources move up
    decided = (snr >= need) & (current != 0) & np.isfinite(current) & (moving != 0)
    labels = np.full(pol.shape, "undetermined", dtype=object)
    labels[decided & (current == moving)] = "positive"
    labels[decided & (current == -moving)] = "negative"
    return labels, snr
