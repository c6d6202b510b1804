"""Row helpers of :func:`features.waveform.field_features`, vectorised over a batch of rows.

Missing samples filled (:func:`_fill_missing`), a baseline line subtracted
(:func:`_subtract_baseline`), the largest value in a span of columns
(:func:`_masked_max`), the last column at or above a level (:func:`_last_at_least`),
the mean before a column (:func:`_mean_before`) and the first prominent sub-peak of a
leading edge (:func:`_first_subpeak`). Each works row by row, so a row's result does not
depend on which rows share its batch.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import ndimage

from ._rowops import first_true, last_true

#: Half-width of the local-maximum test of the first sub-peak, s.
SUBPEAK_HALF_S = 0.25e-6


def _fill_missing(x):
    """NaN samples replaced by the row's median (0 for an all-NaN row); missing mask."""
    missing = np.isnan(x)
    if not missing.any():
        return x, missing
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        med = np.nanmedian(x, axis=1)
    med = np.where(np.isfinite(med), med, 0.0)
    return np.where(missing, med[:, None], x), missing


def _masked_max(values, lo, hi, transform=None):
    """Largest value and its column within [lo, hi) of each row (-inf, lo if empty).

    ``transform`` (e.g. ``np.abs``), if given, is applied to the values first, on the
    columns searched only.
    """
    n, w = values.shape
    c0 = int(np.clip(np.nanmin(lo, initial=w), 0, w))
    c1 = int(np.clip(np.nanmax(hi, initial=0), c0, w))
    if c1 <= c0:
        return np.full(n, -np.inf), np.clip(np.nan_to_num(lo), 0, max(w - 1, 0)).astype(np.intp)
    cols = np.arange(c0, c1)
    sub = values[:, c0:c1] if transform is None else transform(values[:, c0:c1])
    v = np.where((cols >= lo[:, None]) & (cols < hi[:, None]), sub, -np.inf)
    j = v.argmax(axis=1)
    return v[np.arange(n), j], (j + c0).astype(np.intp)


def _subtract_baseline(e0, level, slope, line_lo, line_hi):
    """``e0 - (level + slope * clip(column, line_lo, line_hi))`` for every row.

    Rows without a slope subtract ``level + 0.0`` (what the line is there: the same
    numbers), and only the sloped rows build the line.
    """
    out = e0 - (level + 0.0)[:, None]
    sloped = np.flatnonzero(slope != 0)
    if sloped.size:
        cols = np.arange(e0.shape[1])[None, :]
        clamped = np.clip(cols, line_lo[sloped, None], line_hi[sloped, None])
        out[sloped] = e0[sloped] - (level[sloped, None] + slope[sloped, None] * clamped)
    return out


def _last_at_least(values, level, start, stop):
    """Last column in [start, stop) of each row where ``values >= level``, and whether
    there is one (only the batch's span of columns is looked at)."""
    n, w = values.shape
    c0 = int(np.clip(np.min(start, initial=w), 0, w))
    c1 = int(np.clip(np.max(stop, initial=0), c0, w))
    if c1 <= c0:
        return np.full(n, max(w - 1, 0), np.intp), np.zeros(n, dtype=bool)
    cols = np.arange(c0, c1)[None, :]
    mask = ((values[:, c0:c1] >= level[:, None]) & (cols >= start[:, None])
            & (cols < stop[:, None]))
    j, found = last_true(mask)
    return j + c0, found


def _mean_before(values, stop, width):
    """Mean of the ``width`` columns before ``stop`` in each row (fewer at the record's
    start; NaN with none), gathered per row so batches do not change the sum."""
    n, w = values.shape
    cols = stop[:, None] - width + np.arange(width)[None, :]
    valid = (cols >= 0) & (cols < w)
    block = np.take_along_axis(values, np.clip(cols, 0, max(w - 1, 0)), axis=1)
    cnt = valid.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(cnt > 0, np.where(valid, block, 0.0).sum(axis=1) / cnt, np.nan)


def _first_subpeak(u, s, c50, peak, sigma, fs):
    """Column of the first prominent local maximum of the leading half-cycle.

    A local maximum (over +-``SUBPEAK_HALF_S``) between the 50 % point and the peak that
    reaches half the peak and drops by max(3 sigma, 10 %) before being exceeded; the
    peak itself when there is none.
    """
    n, w = u.shape
    out = s.astype(np.float64).copy()
    lo = np.where(np.isfinite(c50), np.ceil(np.nan_to_num(c50)), s).astype(np.intp)
    c0 = int(np.clip(lo.min(initial=w), 0, w))
    c1 = int(np.clip(s.max(initial=0) + 1, c0, w))
    if c1 - c0 < 3:
        return out
    half = max(int(round(SUBPEAK_HALF_S * fs)), 1)
    # the local-maximum filter sees `half` columns beyond the batch's span, so a row's
    # result does not depend on which rows share its batch
    e0, e1 = max(c0 - half, 0), min(c1 + half, w)
    local = (u[:, e0:e1] >= ndimage.maximum_filter1d(u[:, e0:e1], 2 * half + 1, axis=1,
                                                      mode="nearest"))[:, c0 - e0:c1 - e0]
    sub = u[:, c0:c1]
    cols = np.arange(c0, c1)
    cand = (local & (sub >= 0.5 * peak[:, None]) & (cols >= lo[:, None])
            & (cols < s[:, None]))
    rows = np.arange(n)
    todo = np.ones(n, dtype=bool)
    for _ in range(3):
        j, found = first_true(cand)
        found &= todo
        if not found.any():
            break
        uj = sub[rows, j]
        after = cols[None, :] > (j + c0)[:, None]
        exceed, hit = first_true(after & (sub >= uj[:, None]) & (cols <= s[:, None]))
        k = np.where(hit, exceed + c0, s)          # never beyond the row's own peak
        between = after & (cols[None, :] < k[:, None])
        dip = np.where(between, sub, np.inf).min(axis=1)
        prominent = found & (uj - dip >= np.maximum(3 * sigma, 0.1 * uj))
        out = np.where(prominent, j + c0, out)
        todo &= ~prominent
        cand[rows[found], j[found]] = False
    return out


def _crossing_sigma(u, c, sigma, half):
    """Time uncertainty of a level crossing, in samples: sigma / |du/dt| there.

    The slope is the central difference of ``u`` over +-``half`` samples about the
    (fractional) crossing ``c``; a noise sigma moves the crossing by sigma / |slope|
    (error propagation of a threshold crossing; common practice, no source). ``inf``
    where the crossing is NaN or the slope is zero.
    """
    from ._rowops import interp_rows
    slope = np.abs(interp_rows(u, c + half) - interp_rows(u, c - half)) / (2.0 * half)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = sigma / slope
    return np.where(np.isfinite(out), out, np.inf)


#: Longest half-window of a crossing's line fit, samples (bounds the gather's width).
REFINE_MAX_HALF = 64


def _refine_crossing(u, c, level, half):
    """A crossing re-read off a least-squares line through the samples within
    +-``half`` of it.

    A crossing found as the last (or first) sample pair to pass a level is biased
    toward the search's end by noise (the last of several noise crossings wins); the
    line through the samples around it crosses the level where the signal does, its
    noise averaged over the window (least-squares line; common practice, no source).
    Kept as it was where the fit's slope is flat or moves it beyond the window.

    Parameters
    ----------
    u : ndarray, shape (n, w)
    c : ndarray, shape (n,)
        Fractional crossing columns (NaN: none).
    level : ndarray, shape (n,)
    half : ndarray, shape (n,)
        Half-window of the fit, samples (at least 1; at most :data:`REFINE_MAX_HALF`).

    Returns
    -------
    ndarray, shape (n,)
    """
    n, w = u.shape
    ok = np.isfinite(c)
    if not ok.any() or w < 3:
        return c
    h = np.clip(np.nan_to_num(half, nan=1.0), 1.0, REFINE_MAX_HALF)
    big = int(np.ceil(h.max()))
    centre = np.round(np.where(ok, c, 0.0)).astype(np.intp)
    offs = np.arange(-big, big + 1)
    cols = centre[:, None] + offs[None, :]
    x = cols - np.where(ok, c, 0.0)[:, None]               # samples from the crossing
    inside = (np.abs(x) <= h[:, None]) & (cols >= 0) & (cols < w)
    y = np.take_along_axis(u, np.clip(cols, 0, w - 1), axis=1)
    wgt = inside.astype(float)
    s0 = wgt.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        xm = (wgt * x).sum(axis=1) / s0
        ym = (wgt * y).sum(axis=1) / s0
        sxx = (wgt * (x - xm[:, None]) ** 2).sum(axis=1)
        sxy = (wgt * (x - xm[:, None]) * (y - ym[:, None])).sum(axis=1)
        b = sxy / sxx
        shift = xm + (level - ym) / b                    # where the line meets the level
    good = ok & (s0 >= 3) & np.isfinite(shift) & (np.abs(shift) <= h) & (b != 0)
    return np.where(good, c + np.where(good, shift, 0.0), c)


def _end_resolved(u_s, nu_t, sig_s, sig_t, k, k_tail, tol, end, end_w, st_w, by_back,
                  by_tail, cut, resolve_sigmas):
    """Whether the pulse's end (in samples) is resolved: its crossing's uncertainty
    (:func:`_crossing_sigma`, the slope over +-the tolerance) within the tolerance.

    The end is read off the crossing that set it: the overshoot's return through zero
    (``by_back``, on the smoothed ``u_s``), its tail's fall through 1 % of the peak
    (``by_tail``, on the tail copy ``nu_t`` of noise ``sig_t``), the width's end
    ``end_w`` (uncertainty ``st_w``) where that comes later, else the smoothed pulse's
    fall (``u_s``). A tail still above its level where the search stopped (``cut``: the
    next pulse, the record's end) shows no fall at all: never resolved. The tolerance is
    the schema's for an instant: 10 % of the width (10 % point of the leading edge to
    the end) plus one sample; :data:`RESOLVE_SIGMAS` uncertainties must fit in it (the
    rule of the other crossings in :mod:`features.waveform`).
    """
    half_s = np.fmax(tol, k / 2.0)
    st = np.where(by_back, _crossing_sigma(u_s, end, sig_s, half_s),
                  np.where(by_tail, _crossing_sigma(nu_t, end, sig_t,
                                                    np.fmax(2.0 * tol, k_tail / 2.0)),
                           _crossing_sigma(u_s, end, sig_s, half_s)))
    from_w = np.isfinite(end_w) & (end_w >= end)
    st = np.where(from_w, st_w, st)
    with np.errstate(invalid="ignore"):
        return (resolve_sigmas * st <= tol) & ~cut & np.isfinite(end)
