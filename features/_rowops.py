"""Vectorised row operations used by the waveform features.

Every function works on a 2-D batch ``(n_rows, n_samples)`` at once, with one
index or level per row; "not found" is reported as a boolean mask or NaN,
never by a Python loop over rows. Integer indices are clipped into range with
``np.minimum``/``np.maximum``: ``np.clip`` on integers with Python bounds spends
~10 us of Python per call (NumPy 2.4, measured), ~3x as long. (Floats keep
``np.clip``: ``np.maximum(-0.0, 0.0)`` is ``-0.0``, a different sign of zero.)
"""

from __future__ import annotations

import numpy as np

from ._runsum import cumsum_rows, cumtrapz_rows, running_sum

__all__ = [
    "first_true",
    "last_true",
    "crossing_after",
    "crossing_before",
    "integrate_rows",
    "interp_rows",
    "take_rows",
    "cumtrapz_rows",
    "parabolic_peak",
    "cumsum_rows",
    "running_sum",
    "moving_average_rows",
    "median_rows",
    "nanmedian_rows",
]


def first_true(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the first True in each row and whether there is one."""
    j = mask.argmax(axis=1)
    found = mask[np.arange(mask.shape[0]), j]
    return j, found


def last_true(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the last True in each row and whether there is one."""
    w = mask.shape[1]
    j = w - 1 - mask[:, ::-1].argmax(axis=1)
    found = mask[np.arange(mask.shape[0]), j]
    return j, found


def take_rows(values: np.ndarray, idx: np.ndarray) -> np.ndarray:
    """``values[i, idx[i]]`` for every row (``idx`` clipped into range)."""
    idx = np.minimum(np.maximum(idx, 0), values.shape[1] - 1).astype(np.intp)
    return values[np.arange(values.shape[0]), idx]


def interp_rows(values: np.ndarray, frac_idx: np.ndarray) -> np.ndarray:
    """Linear interpolation of each row at a fractional sample index (NaN stays NaN)."""
    ok = np.isfinite(frac_idx)
    f = np.where(ok, frac_idx, 0.0)
    f = np.clip(f, 0, values.shape[1] - 1)
    j0 = np.floor(f).astype(np.intp)
    j1 = np.minimum(j0 + 1, values.shape[1] - 1)
    r = np.arange(values.shape[0])
    a = f - j0
    out = values[r, j0] * (1 - a) + values[r, j1] * a
    return np.where(ok, out, np.nan)


def _span(w, lo, hi):
    """Column range [lo, hi) clipped to [0, w] (the part of a batch worth searching)."""
    lo, hi = max(int(lo), 0), min(int(hi), w)
    return lo, max(hi, lo)


#: Columns before each row's stop that a backward crossing search looks at first (then
#: four times as many, and so on, for the rows still without a crossing).
SEARCH_BACK_COLUMNS = 32


def crossing_before(u: np.ndarray, stop: np.ndarray, level: np.ndarray,
                    start: np.ndarray | None = None) -> np.ndarray:
    """Fractional index where each row last rises through ``level`` before ``stop``.

    The crossing lies between the last sample ``j < stop`` with ``u[j] < level``
    and ``j + 1``; it is linearly interpolated. NaN where no sample in
    ``[start, stop)`` is below the level. Only the columns between the smallest
    start and the largest stop of the batch are searched, backwards from each row's
    own stop: the :data:`SEARCH_BACK_COLUMNS` before it first (most crossings lie
    there, and the last one found there is the last one of the row), then four times
    as far, and so on, each only for the rows still without one (on the field blocks
    of the reference catalog 22.6 -> 12.5 ms per 768 pulses, the same numbers, against
    one search of the whole span for every row).
    """
    n, w = u.shape
    c0, c1 = _span(w, 0 if start is None else np.min(start, initial=w),
                   np.max(stop, initial=0))
    j, found = np.zeros(n, np.intp), np.zeros(n, bool)
    if c1 > c0:
        s = np.asarray(stop)
        if s.dtype.kind == "f":   # columns j < stop: j < ceil(stop); NaN: none
            s = np.ceil(np.where(np.isnan(s), c0, s))
        s = np.minimum(np.maximum(s, c0), c1).astype(np.intp)      # each row's stop
        rows = np.flatnonzero(s > c0)
        width = SEARCH_BACK_COLUMNS
        while rows.size:
            hi = s[rows]
            lo = np.maximum(hi - width, c0)
            span = int((hi - lo).max())
            # columns hi - span .. hi - 1 of each row; those before its lo are masked
            cols = hi[:, None] - span + np.arange(span)[None, :]
            mask = u[rows[:, None], np.maximum(cols, 0)] < level[rows, None]
            mask &= cols >= lo[:, None]
            jj, hit = last_true(mask)
            j[rows[hit]] = cols[np.flatnonzero(hit), jj[hit]]
            found[rows[hit]] = True
            s[rows] = lo
            rows = rows[~hit & (lo > c0)]
            width *= 4
        if start is not None:
            # the last sample below the level before stop lies before start: there
            # is none in [start, stop) (one comparison per row, not per column)
            found &= j >= start
    r = np.arange(n)
    j1 = np.minimum(j + 1, w - 1)
    u0, u1 = u[r, j], u[r, j1]
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.clip((level - u0) / (u1 - u0), 0.0, 1.0)
    a = np.where(np.isfinite(a), a, 0.0)
    return np.where(found, j + a, np.nan)


#: Columns of a forward crossing search looked at first, for every row at once.
SEARCH_FIRST_COLUMNS = 256


def crossing_after(u: np.ndarray, start: np.ndarray, level: np.ndarray,
                   stop: np.ndarray | None = None, *, inclusive: bool = False) -> np.ndarray:
    """Fractional index where each row first falls through ``level`` after ``start``.

    The crossing lies between the first sample ``j > start`` with ``u[j] < level``
    (``<=`` when ``inclusive``) and ``j - 1``; linearly interpolated. NaN where
    none is found in ``(start, stop)``. Only the columns between the smallest
    start and the largest stop of the batch are searched, the first
    :data:`SEARCH_FIRST_COLUMNS` of them first (then the rest for the rows without a
    crossing there).
    """
    w = u.shape[1]
    c0, c1 = _span(w, np.min(start, initial=w) + 1,
                   w if stop is None else np.max(stop, initial=0))
    rows = np.arange(u.shape[0])
    j, found = np.zeros(u.shape[0], np.intp), np.zeros(u.shape[0], bool)
    # the first SEARCH_FIRST_COLUMNS of the span first (most crossings lie there, and
    # the first one found there is the first one of the row), then four times as far,
    # then the rest of the span, each only for the rows still without one
    edges = (c0, c0 + SEARCH_FIRST_COLUMNS, c0 + 4 * SEARCH_FIRST_COLUMNS, c1)
    for a, b in zip(edges[:-1], edges[1:]):
        b = min(b, c1)
        if b <= a or not rows.size:
            break
        cols = np.arange(a, b)
        sub = u[rows, a:b] if rows.size < u.shape[0] else u[:, a:b]
        lv = level[rows, None]
        mask = (sub <= lv) if inclusive else (sub < lv)
        mask &= cols > start[rows, None]
        jj, hit = first_true(mask)
        # the first one after start at or beyond stop: none before stop (and the row
        # is not searched further); one comparison per row, not per column
        ok = hit if stop is None else hit & (jj + a < stop[rows])
        j[rows[ok]] = jj[ok] + a
        found[rows[ok]] = True
        rows = rows[~hit]
        if stop is not None:
            rows = rows[stop[rows] > b]
    r = np.arange(u.shape[0])
    j0 = np.maximum(j - 1, 0)
    u0, u1 = u[r, j0], u[r, j]
    with np.errstate(divide="ignore", invalid="ignore"):
        a = np.clip((u0 - level) / (u0 - u1), 0.0, 1.0)
    a = np.where(np.isfinite(a), a, 1.0)
    return np.where(found, j0 + a, np.nan)


def integrate_rows(y: np.ndarray, a: np.ndarray, b: np.ndarray, dt: float) -> np.ndarray:
    """Trapezoidal integral of each row from fractional index ``a`` to ``b`` (b >= a).

    Equals ``interp_rows(cumtrapz_rows(y, dt), b) - interp_rows(..., a)``, in one
    masked pass over the columns between them.
    """
    n, w = y.shape
    ok = np.isfinite(a) & np.isfinite(b)
    a = np.clip(np.where(ok, a, 0.0), 0, w - 1)
    b = np.clip(np.where(ok, b, 0.0), a, w - 1)
    ia, ib = np.floor(a).astype(np.intp), np.floor(b).astype(np.intp)
    c0, c1 = _span(w, ia.min(initial=0), ib.max(initial=0) + 1)
    cols = np.arange(c0, c1)
    sub = y[:, c0:c1]
    # whole trapezoids between samples ia .. ib (weights 1/2 at both ends)
    inside = (cols >= ia[:, None]) & (cols <= ib[:, None])
    whole = np.where(inside, sub, 0.0).sum(axis=1)
    r = np.arange(n)
    ya, yb = y[r, ia], y[r, ib]
    whole = (whole - 0.5 * (ya + yb)) * dt
    whole = np.where(ib > ia, whole, 0.0)
    # from ia to a and from ib to b: the cumulative integral interpolated linearly
    # between samples (what interp_rows(cumtrapz_rows(y), x) gives)
    ya1 = y[r, np.minimum(ia + 1, w - 1)]
    yb1 = y[r, np.minimum(ib + 1, w - 1)]
    fa, fb = a - ia, b - ib
    head = fa * dt * 0.5 * (ya + ya1)
    tail = fb * dt * 0.5 * (yb + yb1)
    return np.where(ok, whole - head + tail, np.nan)


def parabolic_peak(u: np.ndarray, j: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sub-sample position and height of a peak at sample ``j`` of each row.

    Fits a parabola through samples ``j - 1, j, j + 1``. The offset is limited
    to half a sample and the height to the range the three samples allow.
    """
    r = np.arange(u.shape[0])
    jm = np.minimum(np.maximum(j - 1, 0), u.shape[1] - 1)
    jp = np.minimum(np.maximum(j + 1, 0), u.shape[1] - 1)
    y0, y1, y2 = u[r, jm], u[r, j], u[r, jp]
    denom = y0 - 2 * y1 + y2
    with np.errstate(divide="ignore", invalid="ignore"):
        d = np.where(denom < 0, 0.5 * (y0 - y2) / denom, 0.0)
    d = np.clip(np.nan_to_num(d), -0.5, 0.5)
    d = np.where((j > 0) & (j < u.shape[1] - 1), d, 0.0)
    h = y1 - 0.25 * (y0 - y2) * d
    h = np.where(np.isfinite(h), np.maximum(h, y1), y1)
    return j + d, h


def moving_average_rows(y: np.ndarray, k: np.ndarray, *,
                        cumsum: np.ndarray | None = None) -> np.ndarray:
    """Centred moving average of each row over ``k[i]`` samples (k >= 1; edges shortened).

    One cumulative sum of all rows, then each row's window sums as one difference of
    its running sum at two column offsets (a row at a time: two NumPy calls a row cost
    less than ordering the rows by window length, gathering their running sums and
    scattering the results back, ~2x faster on the field blocks, the same numbers);
    the record's two ends, where the window is cut short, all rows at once.

    Parameters
    ----------
    y : ndarray, shape (n, w)
    k : ndarray of int, shape (n,)
        Window length of each row, samples (1: the row unchanged).
    cumsum : ndarray, shape (n, w + 1), optional
        ``cumsum_rows(y)`` if the caller has it already: the same numbers without
        summing the rows again (each row's running sum is its own sequential sum).

    Returns
    -------
    ndarray, shape (n, w), the dtype of ``y``
        Each value is ``(c[b] - c[a]) / (b - a)`` in float64 for the running sum ``c``
        and the window ``a:b`` of its column clipped into the record; rows of ``k`` 1
        are ``y``'s own.
    """
    n, w = y.shape
    k = np.minimum(np.maximum(np.asarray(k, dtype=np.intp), 1), max(w, 1))
    long = np.flatnonzero(k > 1)
    if w == 0 or not long.size:
        return y.copy()
    y64 = np.asarray(y, dtype=np.float64)
    if cumsum is not None:
        c = cumsum
    else:
        c = np.empty((n, w + 1))
        c[:, 0] = 0.0
        running_sum(y64, c[:, 1:])
    out = np.empty((n, w))
    if long.size < n:
        short = np.flatnonzero(k == 1)
        out[short] = y64[short]
    ks = k[long]
    lo = (ks - 1) // 2                  # the window is columns j - lo .. j + hi - 1
    hi = ks - lo
    j0 = np.minimum(lo, w)
    j1 = np.maximum(np.minimum(w - hi + 1, w), j0)
    # c[j + hi] - c[j - lo] inside the record (a window of k there), row by row
    for r, kk, a0, b0, a1 in zip(long.tolist(), ks.tolist(), j0.tolist(), j1.tolist(),
                                 lo.tolist()):
        d = out[r, a0:b0]
        np.subtract(c[r, a0 + kk - a1:b0 + kk - a1], c[r, a0 - a1:b0 - a1], out=d)
        d /= float(kk)
    # ... and at its two ends, where the window is cut short, all rows at once: the
    # columns before the largest j0 and from the smallest j1 on, with each row's window
    # clipped into the record (a column inside a row's own record gets the same numbers
    # again: b - a = k there, and the quotient is the same division)
    rows = long[:, None]
    for e0, e1 in ((0, int(j0.max())), (int(j1.min()), w)):
        if e1 > e0:
            j = np.arange(e0, e1)[None, :]
            a_idx = np.maximum(j - lo[:, None], 0)
            b_idx = np.minimum(j + hi[:, None], w)
            out[rows, j] = (c[rows, b_idx] - c[rows, a_idx]) / (b_idx - a_idx)
    return out if y.dtype == np.float64 else out.astype(y.dtype)


#: Rows up to this long get their median from a full sort, longer ones from
#: :func:`numpy.median`'s partition: NumPy's vectorised sort is several times faster
#: than its partition on short rows (measured), and both give the same order statistics.
SORT_MEDIAN_MAX = 512


def median_rows(a: np.ndarray, *, signed_zero: bool = True) -> np.ndarray:
    """Median of each row of a NaN-free 2-D array, exactly as :func:`numpy.median`.

    The middle value, or the mean of the two middle values, of each row (taken from a
    sort for rows of up to :data:`SORT_MEDIAN_MAX` samples), bit for bit the same,
    signed zeros included. With ``signed_zero=False`` a median of 0 may come back with
    either sign (the rest bit for bit the same), for callers whose results do not
    depend on it: quantised records hold many zeros, and settling the sign costs a
    :func:`numpy.median` of every such row.
    """
    n, w = a.shape
    if w > SORT_MEDIAN_MAX or w == 0 or n == 0:
        return np.median(a, axis=1)
    s = np.sort(a, axis=1)
    h = w // 2
    mid = s[:, h - 1 + w % 2:h + 1]
    out = mid[:, 0].copy() if w % 2 else np.mean(mid, axis=1)
    # a middle value of 0 may be -0.0 or +0.0 (they sort as equal): the partition
    # decides which one numpy.median returns, so rows holding a -0.0 take it
    zero = np.flatnonzero((mid == 0).any(axis=1)) if signed_zero else ()
    if len(zero):
        zero = zero[(np.signbit(a[zero]) & (a[zero] == 0)).any(axis=1)]
        out[zero] = np.median(a[zero], axis=1)
    return out


def nanmedian_rows(a: np.ndarray, *, signed_zero: bool = True) -> np.ndarray:
    """Median of each row ignoring NaN (NaN for an all-NaN or empty row); vectorised.

    Rows without NaN use :func:`median_rows` (``signed_zero`` as there); rows with NaN
    are sorted (NaN last) and the middle of their valid values taken, with no Python
    loop over rows (unlike :func:`numpy.nanmedian` on 2-D input).
    """
    a = np.asarray(a, dtype=np.float64)
    n, w = a.shape
    out = np.full(n, np.nan)
    if w == 0 or n == 0:
        return out
    nan = np.isnan(a)
    has_nan = nan.any(axis=1)
    clean = ~has_nan
    if clean.all():
        return median_rows(a, signed_zero=signed_zero)
    if clean.any():
        out[clean] = median_rows(a[clean], signed_zero=signed_zero)
    sub = np.sort(a[has_nan], axis=1)
    cnt = (~nan[has_nan]).sum(axis=1)
    lo = np.minimum(np.maximum((cnt - 1) // 2, 0), w - 1)
    hi = np.minimum(np.maximum(cnt // 2, 0), w - 1)
    r = np.arange(sub.shape[0])
    med = 0.5 * (sub[r, lo] + sub[r, hi])
    out[has_nan] = np.where(cnt > 0, med, np.nan)
    return out
