"""Grouped robust straight-line fits of source tracks, with standard errors.

A batch of pulses is a flat table of sources with the row (pulse, "group") each
belongs to; every statistic here is a grouped sum (``numpy.bincount``) or a
grouped median, so there is no Python loop over pulses.

The fit is least squares re-weighted with Huber weights on the residual
*vector*: ``w = min(1, c s / |r|)`` with ``c = 1.345`` and ``s`` the robust sigma
``1.4826 x median |r|``, four iterations (Huber 1964; common practice for
robust regression). Its covariance is Huber's asymptotic one for an
M-estimator of a straight line (Huber 1981, Robust Statistics, ch. 7; from
memory)::

    Cov(b_j, b_k) = kappa^2 / mean(psi')^2 * sum(psi_j psi_k) / (n - 2) / S_tt
    kappa = 1 + 2 var(psi') / (n mean(psi')^2),   S_tt = sum (t - mean t)^2

with ``psi = w r`` the Huber-weighted residuals and ``psi' = 1`` where a source
kept full weight, 0 where it was down-weighted. For clean Gaussian residuals
every weight is 1 and this is the ordinary least-squares slope variance
``s^2 / S_tt`` (Draper & Smith, Applied Regression Analysis, ch. 1; from
memory); a gross outlier enters it at most as ``(c s)^2``.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

#: Fewest sources for a speed, an angular rate or a track shape (a line has
#: two parameters; three sources leave one degree of freedom for the scatter).
MIN_SOURCES_FOR_SPEED = 3
HUBER_C = 1.345
IRLS_ITERATIONS = 4
#: Relative floor of the residual scale, so that noise-free tracks keep a finite
#: (tiny) standard error; in units of the positions' magnitude + 1.
SCALE_FLOOR = 1e-9


class TrackFit(NamedTuple):
    """Robust straight-line fit of each group's positions against time.

    Attributes
    ----------
    velocity : ndarray, shape (n_groups, k)
        Slopes (units of the positions per second); NaN where the fit failed.
    covariance : ndarray, shape (n_groups, k, k)
        Covariance of the slopes ((units per second)^2); NaN where the fit failed.
    """

    velocity: np.ndarray
    covariance: np.ndarray


def group_order(values, groups):
    """The permutation ``numpy.lexsort((values, groups))``: by group, then by value.

    Two stable sorts (by value, then by group) give the same permutation (ties keep
    their order in both), in a third of the time: the group sort is a radix sort on
    16-bit keys when there are fewer than 32,768 groups.
    """
    groups = np.asarray(groups)
    by_value = np.argsort(values, kind="stable")
    g = groups[by_value]
    if g.size and 0 <= g.min() and g.max() < 2 ** 15:
        g = g.astype(np.int16)
    return by_value[np.argsort(g, kind="stable")]


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

    Notes
    -----
    Values sorted by group (as the source tables are) with groups of similar sizes are
    sorted in one (groups, largest group) block, padded with infinity; otherwise, or when
    a middle value is a zero and the values hold a -0.0 (the order of equal values then
    decides the median's sign), the values are ordered by :func:`group_order`. Both give
    the same order statistics.
    """
    values = np.asarray(values, dtype=np.float64)
    keep = np.isfinite(values)
    v, g = values[keep], np.asarray(groups)[keep]
    counts = np.bincount(g, minlength=n_groups)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    out = np.full(n_groups, np.nan)
    has = np.flatnonzero(counts > 0)
    lo = (counts[has] - 1) // 2
    hi = counts[has] // 2
    width = int(counts.max(initial=0))
    if (v.size and n_groups * width <= 4 * v.size + 4096
            and (g.size < 2 or bool((g[1:] >= g[:-1]).all()))):
        block = np.full((n_groups, width), np.inf)
        block[g, np.arange(v.size) - starts[g]] = v
        block.sort(axis=1)
        a, b = block[has, lo], block[has, hi]
        if not (((a == 0) | (b == 0)).any() and (np.signbit(v) & (v == 0)).any()):
            out[has] = 0.5 * (a + b)
            return out
    v = v[group_order(v, g)]
    out[has] = 0.5 * (v[starts[has] + lo] + v[starts[has] + hi])
    return out


def _gsum(g, values, n):
    """Grouped sum of each column of ``values`` (n_sources, k) -> (n, k)."""
    return np.stack([np.bincount(g, values[:, i], minlength=n)
                     for i in range(values.shape[1])], axis=1)


def _line_fit(t, y, w, g, n):
    """Weighted slope and intercept (at t = 0) of y against t within each group.

    ``y`` is (n_sources, k); returns (slope (n, k), intercept (n, k), ok (n,)).
    """
    W = np.bincount(g, w, minlength=n)
    T = np.bincount(g, w * t, minlength=n)
    TT = np.bincount(g, w * t * t, minlength=n)
    Y = _gsum(g, w[:, None] * y, n)
    TY = _gsum(g, (w * t)[:, None] * y, n)
    den = W * TT - T * T
    ok = den > 1e-12 * np.maximum(W * TT, 1e-300)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = (W[:, None] * TY - T[:, None] * Y) / den[:, None]
        icpt = (Y - slope * T[:, None]) / W[:, None]
    return slope, icpt, ok


def _residuals(tc, pc, w, valid, g, n):
    slope, icpt, ok = _line_fit(tc, pc, w, g, n)
    r = pc - (icpt[g] + slope[g] * tc[:, None])
    r[~valid] = 0.0
    norm = np.where(valid, np.sqrt((r ** 2).sum(axis=1)), np.nan)
    return slope, ok, r, norm


def robust_velocity(t_s, pos, groups, n_groups) -> TrackFit:
    """Robust straight-line velocity of each group's positions, with its covariance.

    Parameters
    ----------
    t_s : ndarray, shape (n_sources,)
        Times in seconds.
    pos : ndarray, shape (n_sources, k)
        Positions (metres, or degrees for angular fits); rows with NaN are ignored.
    groups : ndarray of int, shape (n_sources,)
        Group (pulse) of each source, in ``[0, n_groups)``.
    n_groups : int

    Returns
    -------
    TrackFit
        Velocity (units of ``pos`` per second) and its covariance; NaN for
        groups with fewer than :data:`MIN_SOURCES_FOR_SPEED` usable sources or
        no time spread.
    """
    pos = np.asarray(pos, dtype=np.float64)
    t_s = np.asarray(t_s, dtype=np.float64)
    g = np.asarray(groups)
    n, k = n_groups, pos.shape[1]
    valid = np.isfinite(pos).all(axis=1) & np.isfinite(t_s)
    n_valid = np.bincount(g, valid, minlength=n).astype(np.float64)
    w = valid.astype(np.float64)
    p = np.where(valid[:, None], pos, 0.0)
    # centre time and position per group for numerical stability
    tmean = np.bincount(g, w * np.nan_to_num(t_s), minlength=n) / np.maximum(n_valid, 1)
    tc = np.where(valid, np.nan_to_num(t_s) - tmean[g], 0.0)
    pmean = _gsum(g, w[:, None] * p, n) / np.maximum(n_valid, 1)[:, None]
    pc = np.where(valid[:, None], p - pmean[g], 0.0)
    floor = SCALE_FLOOR * (np.abs(pmean).max(axis=1) + 1.0)

    def huber_weights(norm):
        scale = np.maximum(np.nan_to_num(1.4826 * grouped_median(norm, g, n)), floor)
        with np.errstate(divide="ignore", invalid="ignore"):
            ww = np.where(valid, np.minimum(1.0, HUBER_C * scale[g] / norm), 0.0)
        return np.nan_to_num(ww, nan=1.0)

    for _ in range(IRLS_ITERATIONS):
        slope, ok, r, norm = _residuals(tc, pc, w, valid, g, n)
        w = huber_weights(norm)
    # the reported fit is the one made with the last weights; its covariance
    # uses that fit's residuals and the Huber weights they give
    slope, ok, r, norm = _residuals(tc, pc, w, valid, g, n)
    w = huber_weights(norm)
    psi = w[:, None] * r
    kept = (valid & (w >= 1.0)).astype(np.float64)
    mn = np.bincount(g, kept, minlength=n) / np.maximum(n_valid, 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        kappa = 1.0 + 2.0 * mn * (1.0 - mn) / (n_valid * mn * mn)
        tv = np.where(valid, tc, 0.0)
        # S_tt about the mean time of the sources (the fit's own centre)
        stt = np.bincount(g, tv * tv, minlength=n)
        cross = np.stack([np.stack([np.bincount(g, psi[:, i] * psi[:, j], minlength=n)
                                    for j in range(k)], axis=1) for i in range(k)], axis=1)
        s2 = cross / np.maximum(n_valid - 2.0, 1.0)[:, None, None]
        idx = np.arange(k)
        s2[:, idx, idx] = np.maximum(s2[:, idx, idx], (floor ** 2)[:, None])
        cov = s2 * ((kappa / mn) ** 2 / stt)[:, None, None]
    bad = ~ok | (n_valid < MIN_SOURCES_FOR_SPEED)
    slope[bad] = np.nan
    cov[bad] = np.nan
    return TrackFit(slope, cov)


def chord_offsets_sq(t_s, pos, groups):
    """Squared offset of each source from the chord of its two neighbours in time, scaled
    to the noise: a measure of the position noise that a track's turns barely touch.

    For a source between neighbours at fractions ``a`` and ``1 - a`` of the time between
    them, the offset ``r = p_i - (a p_{i-1} + (1 - a) p_{i+1})`` of a straight, evenly
    moving track is pure noise with variance ``(1 + a^2 + (1 - a)^2) sigma^2`` per axis,
    so ``z^2 = |r|^2 / (1 + a^2 + (1 - a)^2)`` is ``sigma^2`` times a chi-square with d
    degrees of freedom; a median of ``z^2`` over that chi-square's median estimates
    ``sigma^2``, and a few turns of a long track move it little.

    Parameters
    ----------
    t_s : ndarray, shape (n_sources,)
        Times in seconds, sorted within each group.
    pos : ndarray, shape (n_sources, d)
        Positions (any unit), rows sorted as ``t_s``.
    groups : ndarray of int, shape (n_sources,)
        Group of each source, groups contiguous.

    Returns
    -------
    z2 : ndarray, shape (n_sources,)
        ``z^2`` (unit of ``pos`` squared); NaN for the first and last source of each
        group.
    med_chi2 : float
        Median of chi-square with d degrees of freedom: ``2 ln 2`` for d = 2, the
        Wilson-Hilferty approximation ``d (1 - 2 / (9 d))^3`` otherwise (Wilson &
        Hilferty 1931; from memory).
    """
    t = np.asarray(t_s, dtype=np.float64)
    pos = np.asarray(pos, dtype=np.float64)
    g = np.asarray(groups)
    d = pos.shape[1]
    med_chi2 = 2.0 * np.log(2.0) if d == 2 else d * (1.0 - 2.0 / (9.0 * d)) ** 3
    z2 = np.full(len(t), np.nan)
    if len(t) < 3:
        return z2, med_chi2
    inner = (g[1:-1] == g[:-2]) & (g[1:-1] == g[2:])
    span = t[2:] - t[:-2]
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.where(span > 0, (t[2:] - t[1:-1]) / span, 0.5)
        r = pos[1:-1] - (a[:, None] * pos[:-2] + (1.0 - a)[:, None] * pos[2:])
        z2[1:-1] = np.where(inner, (r ** 2).sum(axis=1) / (1.0 + a * a + (1.0 - a) ** 2),
                            np.nan)
    return z2, med_chi2


def debiased_norm(velocity, covariance):
    """Length of a fitted velocity vector with the noise bias removed, and its SE.

    ``E|v_hat|^2 = |v|^2 + trace(Cov)``, so the squared length less the trace is
    unbiased; the length reported is ``sqrt(max(|v_hat|^2 - trace(Cov), 0))``.
    Its standard error is the delta method's ``sqrt(u' Cov u)`` with
    ``u = v_hat / |v_hat|`` (the scatter of the estimate along its direction).

    Parameters
    ----------
    velocity : ndarray, shape (n, k)
        Fitted velocity (any unit per second).
    covariance : ndarray, shape (n, k, k)
        Its covariance (that unit per second, squared).

    Returns
    -------
    norm, se : ndarray, shape (n,)
        Debiased length and its standard error, in the unit of ``velocity``;
        NaN where the velocity is NaN.

    Notes
    -----
    At high significance the truncated square root is low by about
    ``SE^2 / (2 |v|)`` (second order); at low significance it is far less
    biased than ``|v_hat|``, which reads ``sqrt(|v|^2 + trace)``.
    """
    v2 = (velocity ** 2).sum(axis=1)
    trace = np.trace(covariance, axis1=1, axis2=2)
    norm = np.sqrt(np.maximum(v2 - trace, 0.0))
    norm[~np.isfinite(v2)] = np.nan
    length = np.sqrt(v2)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = velocity / length[:, None]
        along = np.einsum("ni,nij,nj->n", u, covariance, u)
    k = velocity.shape[1]
    # a zero-length estimate has no direction: the mean variance per axis
    along = np.where(length > 0, along, trace / k)
    return norm, np.sqrt(np.maximum(along, 0.0))
