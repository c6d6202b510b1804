"""Baseline, noise and lobes of each record, vectorised over a batch of rows.

The first half of :mod:`features.pulses`, which re-exports these names and states their
definitions (baseline, noise sigma, lobe): a robust straight-line baseline and the noise
sigma of the stretch before a pulse (:func:`baseline_fit`), and every lobe of every row
(:func:`find_lobes`, :class:`LobeTable`). Grouping lobes into pulses, the catalogued
pulse and its neighbours stay in :mod:`features.pulses`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from ._rowops import median_rows, nanmedian_rows

__all__ = [
    "BASELINE_MAX_S",
    "BASELINE_MIN_S",
    "LobeTable",
    "baseline_fit",
    "find_lobes",
    "robust_sigma_diff",
]

#: Longest stretch of record before a pulse used for its baseline, s.
BASELINE_MAX_S = 40e-6
#: Shortest stretch for a sloping baseline (shorter: a level only), s.
BASELINE_MIN_S = 10e-6
#: Sub-blocks of the baseline stretch whose noise is compared (the quietest wins), s.
BLOCK_S = 10e-6
#: A baseline slope is kept when it exceeds this many standard errors.
SLOPE_SIGNIFICANCE = 4.0
#: Samples below which there is no usable baseline stretch at all.
BASELINE_MIN_SAMPLES = 8
#: Hysteresis levels of the lobe detector, in noise sigmas (common practice, no source:
#: 5 sigma keeps false detections below ~1e-6 per sample of Gaussian noise).
LOBE_LOW_SIGMA = 2.0
LOBE_HIGH_SIGMA = 5.0
#: A valley splits a lobe when it lies this far below the smaller of the peaks on its
#: two sides (as a fraction of that peak) and at least VALLEY_SIGMA sigma (a minimum
#: prominence; common practice, no source).
VALLEY_FRACTION = 0.3
VALLEY_SIGMA = 5.0
#: Length of the moving average under the lobe detector, s (a fraction of a leader
#: step's width; common practice, no source).
DETECT_SMOOTH_S = 0.25e-6


def _row_median(a: np.ndarray) -> np.ndarray:
    """Median of each row (rows may be empty: NaN)."""
    if a.shape[1] == 0:
        return np.full(a.shape[0], np.nan)
    return np.median(a, axis=1)


def _block_sigma(block, valid, block_len, quantum):
    """Noise sigma of each row (its quietest sub-block's), and the median of that
    sub-block (the record's level where nothing happens).

    Each sub-block of ``block_len`` samples gives 1.4826 x MAD about its own median; a
    sub-block holding a pulse or a steep tail is loud, so the noise of the quiet record is
    the mean over the blocks within 1.5 x the quietest. On a quantised record (``quantum``
    > 0) the MAD snaps to multiples of half a step (1.4826 steps for any noise between
    about 0.7 and 1.7 counts), so there each sub-block gives instead the standard
    deviation of its samples within 5 x max(MAD, step) of the median: the spread of the
    quantised noise, sqrt(sigma^2 + step^2 / 12) by Sheppard's correction (Widrow & Kollar
    2008, ch. 4; from memory), which is what the record's noise is.
    """
    n, width = block.shape
    nb = max(width // block_len, 1)
    use = nb * block_len if width >= block_len else width
    b = np.where(valid[:, :use], block[:, :use], np.nan).reshape(n, nb, -1)
    flat = b.reshape(n * nb, -1)
    # (a median of 0 of either sign: |x - med| is the same; the level taken below has
    # its sign settled)
    med = nanmedian_rows(flat, signed_zero=False)
    dev = np.abs(flat - med[:, None])
    mad = 1.4826 * nanmedian_rows(dev)
    cnt = np.isfinite(flat).sum(axis=1)
    if quantum > 0:
        with np.errstate(invalid="ignore", divide="ignore"):
            kept = np.where(dev <= 5 * np.maximum(mad, quantum)[:, None], flat, np.nan)
            k = np.isfinite(kept).sum(axis=1)
            mean = np.nansum(kept, axis=1) / np.maximum(k, 1)
            mad = np.sqrt(np.nansum((kept - mean[:, None]) ** 2, axis=1)
                          / np.maximum(k - 1, 1))
    mad = np.where(cnt >= BASELINE_MIN_SAMPLES, mad, np.nan).reshape(n, nb)
    order = np.argsort(mad, axis=1)                     # NaN last
    good = np.isfinite(mad).sum(axis=1)
    low = mad[np.arange(n), order[:, 0]]
    # the quiet blocks: within 1.5 x the quietest (their mean: less biased than the min)
    quiet = np.isfinite(mad) & (mad <= 1.5 * low[:, None])
    out = np.where(quiet, mad, 0.0).sum(axis=1) / np.maximum(quiet.sum(axis=1), 1)
    level = med.reshape(n, nb)[np.arange(n), order[:, 0]]
    zero = np.flatnonzero(level == 0)
    if zero.size:
        level[zero] = nanmedian_rows(flat[zero * nb + order[zero, 0]])
    return np.where(good > 0, out, np.nan), np.where(good > 0, level, np.nan)


def baseline_fit(e: np.ndarray, stop: np.ndarray, sample_rate_hz: float, quantum: float = 0.0,
                 *, max_s: float = BASELINE_MAX_S, min_slope_s: float = BASELINE_MIN_S,
                 quiet_level: bool = False, start_min=None):
    """Robust straight-line baseline and noise of the stretch before ``stop`` in each row.

    Parameters
    ----------
    e : ndarray, shape (n, w)
        Decay-compensated field, V/m (no NaN).
    stop : ndarray of int, shape (n,)
        The stretch ends just before this column (the pulse's start).
    sample_rate_hz : float
    quantum : float, default=0.0
        One digitizer step, V/m (0: none).
    max_s, min_slope_s : float
        Longest stretch used, and the shortest that gets a slope (``numpy.inf``: a level
        only), s.
    quiet_level : bool, default=False
        Take the level from the stretch's quietest sub-block (the record before an
        earlier pulse and its tail) instead of a line through the whole stretch.
    start_min : ndarray of int, shape (n,), optional
        The stretch begins no earlier than this column (e.g. after an earlier lobe).

    Returns
    -------
    level : ndarray, shape (n,)
        Baseline value at column 0, V/m (the line is ``level + slope * column``).
    slope : ndarray, shape (n,)
        V/m per sample (0 unless significant).
    sigma : ndarray, shape (n,)
        Noise sigma, V/m (quantisation included; :func:`_block_sigma`).
    start : ndarray of int, shape (n,)
        First column of the stretch.
    n_used : ndarray of int, shape (n,)
        Samples of the stretch (0: no baseline; the level is 0 then).
    """
    n, w = e.shape
    fs = float(sample_rate_hz)
    stop = np.clip(np.asarray(stop, dtype=np.intp), 0, w)
    length = np.minimum(stop, max(int(round(max_s * fs)), BASELINE_MIN_SAMPLES))
    if start_min is not None:
        length = np.clip(stop - np.asarray(start_min, dtype=np.intp), 0, length)
    start = stop - length
    # one gather of a fixed-width block per row (rows shorter than it are masked)
    width = int(length.max(initial=0))
    level = np.zeros(n)
    slope = np.zeros(n)
    if width < BASELINE_MIN_SAMPLES:
        return (level, slope, _noise_floor(np.full(n, np.nan), quantum), start,
                np.zeros(n, dtype=np.intp))
    cols = start[:, None] + np.arange(width)[None, :]
    valid = np.arange(width)[None, :] < length[:, None]
    if n and (start == start[0]).all() and 0 <= start[0] and start[0] + width <= w:
        block = e[:, start[0]:start[0] + width]        # one stretch for all rows: a slice
    else:
        block = np.take_along_axis(e, np.clip(cols, 0, w - 1), axis=1)
    block = np.where(valid, block, np.nan)
    usable = length >= BASELINE_MIN_SAMPLES
    sigma, quiet = _block_sigma(block, valid,
                                max(int(round(BLOCK_S * fs)), BASELINE_MIN_SAMPLES), quantum)
    sloped = usable & (length >= max(min(min_slope_s * fs, 1e18), BASELINE_MIN_SAMPLES))
    if sloped.any():
        slope = _two_half_slope(block, valid, start, length, sigma, sloped)
    level = quiet if quiet_level else nanmedian_rows(block - slope[:, None] * cols)
    level = np.where(usable & np.isfinite(level), level, 0.0)
    sigma = np.where(usable, sigma, np.nan)
    return level, slope, _noise_floor(sigma, quantum), start, np.where(usable, length, 0)


def _two_half_slope(block, valid, start, length, sigma, sloped):
    """Slope of each row's stretch (V/m per sample) from the medians of its two halves;
    0 where not ``sloped`` or not significant."""
    width = block.shape[1]
    half = length // 2
    if length.size and (length == width).all():
        # every row's stretch is the whole block (one stop for all rows): its halves are
        # plain column ranges, without the NaN of the other half to sort. The medians
        # are those of the same values (rows free of NaN take (a + b) / 2 for
        # 0.5 (a + b): the same number); only a median of 0 could differ, in its sign,
        # which no slope below keeps (m2 - m1 is the same number, or a zero, which is
        # no significant slope)
        m1 = nanmedian_rows(block[:, :width // 2], signed_zero=False)
        m2 = nanmedian_rows(block[:, width // 2:], signed_zero=False)
    else:
        first = np.where(np.arange(width)[None, :] < half[:, None], block, np.nan)
        second = np.where((np.arange(width)[None, :] >= half[:, None]) & valid, block,
                          np.nan)
        m1 = nanmedian_rows(first)
        m2 = nanmedian_rows(second)
    # centres of the two halves, in columns of e
    c1 = start + (half - 1) / 2.0
    c2 = start + half + (length - half - 1) / 2.0
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.where(sloped, (m2 - m1) / (c2 - c1), 0.0)
        # a slope is kept only when significant: extrapolated, a slope of noise becomes
        # a drift. The median of L/2 Gaussian samples has a variance of (pi/2) sigma^2 /
        # (L/2) (Kendall & Stuart, from memory): the two-half slope's standard error is
        # sqrt(2 pi / L) sigma / (c2 - c1).
        se = np.sqrt(2 * np.pi / length) * sigma / np.maximum(c2 - c1, 1.0)
    return np.where(np.isfinite(slope) & (np.abs(slope) > SLOPE_SIGNIFICANCE
                                          * np.nan_to_num(se, nan=np.inf)), slope, 0.0)


def _noise_floor(sigma, quantum):
    """Noise sigma of a record, never below its digitizer's quantisation noise.

    ``sigma`` is measured on the quantised record, so it already holds the quantisation
    noise (step^2 / 12 in variance; Widrow & Kollar 2008, ch. 4; from memory); adding it
    again would count it twice. Only noise well below one step, which leaves a quiet
    record constant, measures less than step / sqrt(12): that is the floor. NaN stays NaN.
    """
    floor = quantum / np.sqrt(12.0) if quantum > 0 else 0.0
    with np.errstate(invalid="ignore"):
        return np.where(np.isnan(sigma), np.nan, np.maximum(sigma, floor))


def robust_sigma_diff(e: np.ndarray, valid: np.ndarray | None = None) -> np.ndarray:
    """Noise sigma of each row from its first differences (insensitive to slow trends).

    For white noise the differences have sigma * sqrt(2); 1.4826 x MAD estimates their
    sigma robustly (pulses occupy a small part of a record). ``valid`` (same shape as
    ``e``, optional) marks the samples of ragged rows: only differences of two valid
    neighbours count (NaN for a row with none).
    """
    d = np.diff(e, axis=1)
    if valid is None:
        med = median_rows(d)
        return 1.4826 * median_rows(np.abs(d - med[:, None])) / np.sqrt(2.0)
    d = np.where(valid[:, 1:] & valid[:, :-1], d, np.nan)
    med = nanmedian_rows(d)
    return 1.4826 * nanmedian_rows(np.abs(d - med[:, None])) / np.sqrt(2.0)


@dataclass(frozen=True)
class LobeTable:
    """Lobes of a batch of rows, one entry per lobe, sorted by (row, start).

    Attributes
    ----------
    row, start, stop, peak_col : ndarray of int
        Row, first column, one past the last column, column of the largest |e|.
    peak : ndarray of float
        Largest |e| of the lobe, V/m.
    sign : ndarray of int8
        +1 or -1.
    after_valley : ndarray of bool
        The lobe was split from the one before it at a deep valley (it rides on its tail).
    """

    row: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    peak_col: np.ndarray
    peak: np.ndarray
    sign: np.ndarray
    after_valley: np.ndarray

    def __len__(self) -> int:
        return int(self.row.size)


def _run_starts(sorted_ids):
    """Positions where a new value starts in a sorted array (``np.unique``'s first
    indices, without its sort)."""
    new = np.ones(sorted_ids.size, dtype=bool)
    new[1:] = sorted_ids[1:] != sorted_ids[:-1]
    return np.flatnonzero(new)


def _segmented_cummax(values, seg, reverse=False):
    """Running maximum of non-negative ``values`` restarting at every new ``seg`` id."""
    if values.size == 0:
        return values.copy()
    v, g = (values[::-1], seg[::-1]) if reverse else (values, seg)
    g = g - g.min() if not reverse else g.max() - g
    big = 2.0 * float(v.max()) + 1.0
    gb = g * big
    out = np.maximum.accumulate(gb + v) - gb
    return out[::-1] if reverse else out


def find_lobes(e: np.ndarray, sigma: np.ndarray, *, smooth: int = 1,
               low_sigma: float = LOBE_LOW_SIGMA, high_sigma: float = LOBE_HIGH_SIGMA,
               valley_fraction: float = VALLEY_FRACTION) -> LobeTable:
    """Every lobe of every row: runs of one sign beyond ``low`` that reach ``high`` sigma.

    A run holding two peaks with a deep valley between them (the valley at least
    max(``VALLEY_SIGMA`` sigma, ``valley_fraction`` x the smaller peak) below it: a
    minimum prominence) is split at the valley's lowest sample, so a pulse riding on the
    tail of an earlier one is a lobe of its own.

    Parameters
    ----------
    e : ndarray, shape (n, w)
        Baseline-removed field, V/m.
    sigma : ndarray, shape (n,)
        Noise sigma of each row, V/m (NaN or 0: the row has no lobes).
    smooth : int, default=1
        Samples of a centred moving average applied first (the levels are then in
        sigma / sqrt(smooth), the noise of white noise so averaged): a slow pulse's
        edge in noise does not break into fragments.

    Returns
    -------
    LobeTable
        Peaks (``peak``, ``peak_col``) are those of the smoothed record.
        ``after_valley`` marks lobes split from the one before them at a valley.
    """
    return smoothed_lobes(e, sigma, smooth=smooth, low_sigma=low_sigma,
                          high_sigma=high_sigma, valley_fraction=valley_fraction)[0]


def smoothed_lobes(e: np.ndarray, sigma: np.ndarray, *, smooth: int = 1,
                   low_sigma: float = LOBE_LOW_SIGMA, high_sigma: float = LOBE_HIGH_SIGMA,
                   valley_fraction: float = VALLEY_FRACTION):
    """:func:`find_lobes`, and the smoothed record it searched.

    Returns
    -------
    lobes : LobeTable
    smoothed : ndarray, shape (n, w)
        ``e`` after the centred moving average of ``smooth`` samples (``e`` itself when
        ``smooth`` is 1), for callers that need the record the lobes were found on
        without smoothing it a second time.
    """
    n, w = e.shape
    smooth = max(int(smooth), 1)
    if smooth > 1:
        e = ndimage.uniform_filter1d(e, smooth, axis=1, mode="nearest")
    sig = np.where(np.isfinite(sigma) & (sigma > 0), sigma, np.inf) / np.sqrt(smooth)
    lo = (low_sigma * sig)[:, None]
    state = (e >= lo).view(np.int8) - (e <= -lo).view(np.int8)      # +1, -1 or 0
    change = np.empty((n, w), dtype=bool)
    change[:, 0] = True
    np.not_equal(state[:, 1:], state[:, :-1], out=change[:, 1:])
    starts = np.flatnonzero(change.ravel())
    run_state = state.ravel()[starts]
    a = np.abs(e).ravel()
    run_max = np.maximum.reduceat(a, starts) if starts.size else np.zeros(0)
    row = starts // w
    keep = (run_state != 0) & (run_max >= high_sigma * sig[row])
    stops = np.append(starts[1:], n * w)
    k_start, k_stop = starts[keep], stops[keep]
    z = np.zeros(0, np.intp)
    if not k_start.size:
        return LobeTable(z, z, z, z, np.zeros(0), np.zeros(0, np.int8), np.zeros(0, bool)), e
    # the samples of the kept runs, flat, with their run number
    lengths = k_stop - k_start
    owner = np.repeat(np.arange(k_start.size), lengths)
    flat = np.arange(lengths.sum()) - np.repeat(np.cumsum(lengths) - lengths, lengths)
    flat = flat + np.repeat(k_start, lengths)
    vals = a[flat]
    # split runs at prominent valleys
    a_s = vals
    left = _segmented_cummax(a_s, owner)
    right = _segmented_cummax(a_s, owner, reverse=True)
    side = np.minimum(left, right)
    s_row = sig[flat // w]
    deep = side - a_s >= np.maximum(VALLEY_SIGMA * s_row, valley_fraction * side)
    if deep.any():
        # the lowest sample of each stretch of deep samples becomes a boundary
        d_idx = np.flatnonzero(deep)
        new_stretch = np.ones(d_idx.size, dtype=bool)
        new_stretch[1:] = (np.diff(d_idx) != 1) | (owner[d_idx[1:]] != owner[d_idx[:-1]])
        stretch = np.cumsum(new_stretch) - 1
        key = np.lexsort((a_s[d_idx], stretch))
        first = _run_starts(stretch[key])
        cut = d_idx[key[first]]                       # positions in the flat sample list
        boundary = np.zeros(flat.size, dtype=bool)
        boundary[cut] = True
        piece = owner + np.cumsum(boundary)             # new run ids, increasing
        # the cut sample itself starts the later piece
        new_piece = np.ones(piece.size, dtype=bool)
        new_piece[1:] = piece[1:] != piece[:-1]
        p_first = np.flatnonzero(new_piece)
        piece_start = flat[p_first]
        piece_stop = np.append(flat[p_first[1:] - 1] + 1, flat[-1] + 1)
        after = boundary[p_first]
        owner = np.cumsum(new_piece) - 1
        piece_max = np.maximum.reduceat(vals, p_first)
        big_enough = piece_max >= high_sigma * sig[piece_start // w]
        k_start, k_stop, run_peak = piece_start, piece_stop, piece_max
        piece_sign = np.sign(e.ravel()[flat[p_first]]).astype(np.int8)
    else:
        after = np.zeros(k_start.size, dtype=bool)
        run_peak = run_max[keep]
        big_enough = np.ones(k_start.size, dtype=bool)
        piece_sign = run_state[keep].astype(np.int8)
    # column of the maximum inside each run
    is_max = vals == run_peak[owner]
    hit = np.flatnonzero(is_max)
    first_hit = _run_starts(owner[hit])
    peak_flat = np.full(k_start.size, -1, dtype=np.intp)
    peak_flat[owner[hit[first_hit]]] = flat[hit[first_hit]]
    sel = big_enough
    r = k_start[sel] // w
    return LobeTable(row=r, start=k_start[sel] - r * w, stop=k_stop[sel] - r * w,
                     peak_col=peak_flat[sel] - r * w, peak=run_peak[sel],
                     sign=piece_sign[sel], after_valley=after[sel]), e
