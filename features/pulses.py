"""Every pulse in a record: baseline, noise, lobes, pulses, the catalogued one, neighbours.

A record holds more than the catalogued pulse: other steps of a leader train, the
tail of an earlier pulse, a return stroke after the last leader step, distant sferics.
This module finds all of them, vectorised over a batch of rows, so that the catalogued
pulse is measured within its own extent and its neighbours become features.

Definitions (the contract of :mod:`features.schema`):

* **baseline**: a straight line fitted robustly to the record before the pulse (up to
  :data:`BASELINE_MAX_S`; the slope is the difference of the medians of the two halves of
  the stretch over their time separation, kept when significant; the level the median
  about it), after decay compensation; it is held constant outside the stretch and
  the pulse, never extrapolated across the record. Subtracting a line removes a DC offset (which decay compensation turns
  into a ramp), the static field of earlier pulses and the slow tail of an earlier
  pulse. A stretch shorter than :data:`BASELINE_MIN_S` gives only a level (slope 0);
  none at all (a record that starts on the pulse) gives level 0 (``baseline_short``).
* **noise** sigma: 1.4826 x the median absolute deviation of the quietest 10 us blocks of
  that stretch (on a quantised record their clipped standard deviation, which includes
  the quantisation noise and does not snap to whole steps as the MAD does), never below
  the quantisation noise of the digitizer, step / sqrt(12) (Widrow & Kollar 2008, ch. 4;
  from memory).
* **lobe**: a maximal run of samples of one sign beyond ``LOBE_LOW_SIGMA`` sigma (the
  hysteresis level) that reaches ``LOBE_HIGH_SIGMA`` sigma somewhere.
* **pulse**: a lobe and the opposite-polarity lobes that follow it at once (its
  overshoot), at most :data:`MAX_LOBES` lobes, each no more than
  :data:`OVERSHOOT_MAX_RATIO` times the previous one; lobes of the same sign separated
  by less than :data:`SAME_SIGN_GAP_S` (or half the longer one's duration) are one lobe
  broken by noise, unless a deep valley split them.
* **catalogued pulse**: the pulse holding the lobe at the trigger, else (within
  :data:`TRIGGER_TOLERANCE_S`) one starting just after it, or ending just before it,
  else the lobe nearest to the trigger within :data:`TRIGGER_SEARCH_S`.
* **neighbours**: the other pulses of the record whose peak reaches
  max(``LOBE_HIGH_SIGMA`` sigma, :data:`NEIGHBOUR_FRACTION` x the catalogued peak),
  counted within :data:`CONTEXT_S` before and after the catalogued pulse's peak.
  Leader steps come in trains 10-50 us apart (Rakov & Uman 2003, ch. 4; from memory),
  narrow bipolar events are isolated (no other pulse within ~100 us; common practice in
  NBE studies, no single source), so these tell them apart whatever the station's
  cataloguing practice.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from ._rowops import median_rows, nanmedian_rows

__all__ = [
    "BASELINE_MAX_S",
    "BASELINE_MIN_S",
    "CONTEXT_S",
    "LobeTable",
    "PulseTable",
    "baseline_fit",
    "find_lobes",
    "group_pulses",
    "catalogued_pulse",
    "neighbour_features",
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
#: Most lobes of one pulse (initial half-cycle, overshoot, one more swing).
MAX_LOBES = 3
#: An opposite-polarity lobe joins the pulse before it if it starts within this gap, s
#: (or within the previous lobe's own duration when that is longer).
OVERSHOOT_GAP_S = 2e-6
#: ... and is at most this many times the previous lobe's peak.
OVERSHOOT_MAX_RATIO = 1.2
#: Same-sign lobes closer than this, or than this fraction of the longer one's duration,
#: are one lobe broken by noise (a slow lobe's edges hover near the detection level), s.
SAME_SIGN_GAP_S = 0.3e-6
SAME_SIGN_GAP_FRACTION = 0.5
#: A lobe within this of the trigger is the catalogued one, s.
TRIGGER_TOLERANCE_S = 0.5e-6
#: Farthest from the trigger the catalogued pulse is looked for, s.
TRIGGER_SEARCH_S = 40e-6
#: Neighbours are counted within this time before and after the pulse's peak, s.
CONTEXT_S = 100e-6
#: A neighbour counts if its peak reaches this fraction of the catalogued peak.
NEIGHBOUR_FRACTION = 0.1


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
    med = nanmedian_rows(flat)
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
    return np.where(good > 0, out, np.nan), np.where(good > 0, level, np.nan)


def baseline_fit(e: np.ndarray, stop: np.ndarray, sample_rate_hz: float, quantum: float = 0.0,
                 *, max_s: float = BASELINE_MAX_S, min_slope_s: float = BASELINE_MIN_S,
                 quiet_level: bool = False):
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
    first = np.where(np.arange(width)[None, :] < half[:, None], block, np.nan)
    second = np.where((np.arange(width)[None, :] >= half[:, None]) & valid, block, np.nan)
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


def robust_sigma_diff(e: np.ndarray) -> np.ndarray:
    """Noise sigma of each row from its first differences (insensitive to slow trends).

    For white noise the differences have sigma * sqrt(2); 1.4826 x MAD estimates their
    sigma robustly (pulses occupy a small part of a record).
    """
    d = np.diff(e, axis=1)
    med = median_rows(d)
    return 1.4826 * median_rows(np.abs(d - med[:, None])) / np.sqrt(2.0)


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
        return LobeTable(z, z, z, z, np.zeros(0), np.zeros(0, np.int8), np.zeros(0, bool))
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
                     sign=piece_sign[sel], after_valley=after[sel])


@dataclass(frozen=True)
class PulseTable:
    """Pulses of a batch of rows (lobes grouped), one entry per pulse, sorted by (row, start).

    Attributes
    ----------
    row, start, stop : ndarray of int
        Row and the pulse's extent in columns [start, stop).
    first_lobe : ndarray of int
        Index into the :class:`LobeTable` of its initial half-cycle.
    peak_col, peak : ndarray
        Column and |e| of the pulse's largest lobe peak.
    sign : ndarray of int8
        Sign of the initial half-cycle.
    n_lobes : ndarray of int
    """

    row: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    first_lobe: np.ndarray
    peak_col: np.ndarray
    peak: np.ndarray
    sign: np.ndarray
    n_lobes: np.ndarray

    def __len__(self) -> int:
        return int(self.row.size)


def group_pulses(lobes: LobeTable, sample_rate_hz: float):
    """Group lobes into pulses (a half-cycle and its overshoot).

    Returns
    -------
    pulses : PulseTable
    merged : LobeTable
        The lobes after joining same-sign lobes split by noise; ``pulses.first_lobe``
        indexes it.
    lobe_pulse : ndarray of int, shape (n_merged_lobes,)
        The pulse each merged lobe belongs to.
    """
    fs = float(sample_rate_hz)
    m = len(lobes)
    if m == 0:
        z = np.zeros(0, np.intp)
        return PulseTable(z, z, z, z, z, np.zeros(0), np.zeros(0, np.int8), z), lobes, z
    same_row = np.zeros(m, dtype=bool)
    same_row[1:] = lobes.row[1:] == lobes.row[:-1]
    gap = np.zeros(m)
    gap[1:] = lobes.start[1:] - lobes.stop[:-1]
    flip = np.zeros(m, dtype=bool)
    flip[1:] = lobes.sign[1:] != lobes.sign[:-1]
    length = lobes.stop - lobes.start
    longer = np.zeros(m)
    longer[1:] = np.maximum(length[1:], length[:-1])
    split = (same_row & ~flip & ~lobes.after_valley
             & (gap <= np.maximum(max(SAME_SIGN_GAP_S * fs, 2.0), SAME_SIGN_GAP_FRACTION * longer)))
    # merge noise-split same-sign lobes first (they are one lobe)
    lobe_id = np.cumsum(~split) - 1
    n_l = int(lobe_id[-1]) + 1
    l_row = lobes.row[~split]
    l_start = lobes.start[~split]
    l_stop = np.zeros(n_l, np.intp)
    np.maximum.at(l_stop, lobe_id, lobes.stop)
    l_peak = np.zeros(n_l)
    np.maximum.at(l_peak, lobe_id, lobes.peak)
    l_sign = lobes.sign[~split]
    l_peak_col = np.zeros(n_l, np.intp)
    is_top = lobes.peak == l_peak[lobe_id]
    l_peak_col[lobe_id[is_top][::-1]] = lobes.peak_col[is_top][::-1]  # the first maximum
    # then join opposite-polarity lobes that follow at once (overshoots)
    same_row = np.zeros(n_l, dtype=bool)
    same_row[1:] = l_row[1:] == l_row[:-1]
    gap = np.zeros(n_l)
    gap[1:] = l_start[1:] - l_stop[:-1]
    prev_len = np.zeros(n_l)
    prev_len[1:] = l_stop[:-1] - l_start[:-1]
    ratio = np.zeros(n_l)
    ratio[1:] = l_peak[1:] / np.maximum(l_peak[:-1], 1e-300)
    flip = np.zeros(n_l, dtype=bool)
    flip[1:] = l_sign[1:] != l_sign[:-1]
    join = (same_row & flip & (gap <= np.maximum(OVERSHOOT_GAP_S * fs, prev_len))
            & (ratio <= OVERSHOOT_MAX_RATIO))
    # at most MAX_LOBES lobes per pulse: break a chain after every MAX_LOBES joins
    run = np.zeros(n_l, np.intp)
    if n_l:
        starts = np.flatnonzero(~join)
        seg = np.cumsum(~join) - 1
        run = np.arange(n_l) - starts[seg]
        join &= (run % MAX_LOBES) != 0
    pulse_of_lobe = np.cumsum(~join) - 1
    n_p = int(pulse_of_lobe[-1]) + 1
    first = np.flatnonzero(~join)
    p_stop = np.zeros(n_p, np.intp)
    np.maximum.at(p_stop, pulse_of_lobe, l_stop)
    p_peak = np.zeros(n_p)
    np.maximum.at(p_peak, pulse_of_lobe, l_peak)
    top = l_peak == p_peak[pulse_of_lobe]
    p_peak_col = np.zeros(n_p, np.intp)
    p_peak_col[pulse_of_lobe[top][::-1]] = l_peak_col[top][::-1]
    n_lobes = np.bincount(pulse_of_lobe, minlength=n_p)
    # first_lobe indexes the merged-lobe arrays: return them through the table's first
    # lobe columns (start/peak of the initial half-cycle)
    table = PulseTable(row=l_row[first], start=l_start[first], stop=p_stop,
                       first_lobe=first, peak_col=p_peak_col, peak=p_peak,
                       sign=l_sign[first], n_lobes=n_lobes)
    merged = LobeTable(row=l_row, start=l_start, stop=l_stop, peak_col=l_peak_col,
                       peak=l_peak, sign=l_sign, after_valley=lobes.after_valley[~split])
    return table, merged, pulse_of_lobe


def catalogued_pulse(pulses: PulseTable, lobes: LobeTable, lobe_pulse: np.ndarray,
                     n_rows: int, trigger_col: float, sample_rate_hz: float):
    """The pulse at the trigger in each row.

    Parameters
    ----------
    pulses, lobes, lobe_pulse
        From :func:`group_pulses` (its merged lobes).
    n_rows : int
    trigger_col : float
        Column of the trigger (may lie outside the record: the largest pulse is taken).
    sample_rate_hz : float

    Returns
    -------
    ndarray of int, shape (n_rows,)
        Index into ``pulses``, -1 where a row has no pulse near its trigger.
    """
    fs = float(sample_rate_hz)
    out = np.full(n_rows, -1, dtype=np.intp)
    if len(lobes) == 0:
        return out
    tol = TRIGGER_TOLERANCE_S * fs + 2.0
    d = np.maximum.reduce([lobes.start - trigger_col, trigger_col - (lobes.stop - 1),
                           np.zeros(len(lobes))])
    rel = lobes.peak / np.maximum(_row_max(lobes.row, lobes.peak, n_rows)[lobes.row], 1e-300)
    # preference: a lobe holding the trigger; one starting just after it; one ending just
    # before it; then the nearest (the largest among equals)
    contains = d == 0
    after = ~contains & (lobes.start >= trigger_col) & (d <= tol)
    before = ~contains & ~after & (d <= tol)
    rank = np.where(contains, 0, np.where(after, 1, np.where(before, 2, 3)))
    dist = np.where(rank < 3, 0.0, d)
    near = d <= TRIGGER_SEARCH_S * fs
    if not np.isfinite(trigger_col):
        near = np.ones(len(lobes), dtype=bool)
        rank = np.zeros(len(lobes), dtype=int)
        dist = np.zeros(len(lobes))
    cand = np.flatnonzero(near)
    if cand.size == 0:
        return out
    order = cand[np.lexsort((-rel[cand], dist[cand], rank[cand], lobes.row[cand]))]
    first = _run_starts(lobes.row[order])          # order is sorted by row first
    rows = lobes.row[order][first]
    out[rows] = lobe_pulse[order[first]]
    return out


def _row_max(row, values, n_rows):
    out = np.zeros(n_rows)
    np.maximum.at(out, row, values)
    return out


def neighbour_features(pulses: PulseTable, own: np.ndarray, own_peak: np.ndarray,
                       own_peak_col: np.ndarray, sigma: np.ndarray, n_rows: int,
                       n_cols: int, sample_rate_hz: float, *, context_s: float = CONTEXT_S):
    """Neighbours of each row's catalogued pulse within the record.

    Parameters
    ----------
    pulses : PulseTable
    own : ndarray of int, shape (n,)
        Index of each row's catalogued pulse (-1: none).
    own_peak : ndarray, shape (n,)
        Its peak |E| (the initial half-cycle's), V/m.
    own_peak_col : ndarray, shape (n,)
        Column of that peak.
    sigma : ndarray, shape (n,)
        Noise sigma, V/m.
    n_rows, n_cols : int
    sample_rate_hz : float
    context_s : float
        Neighbours are counted within this time of the peak, s.

    Returns
    -------
    dict of str -> ndarray, shape (n,)
        ``neighbours_before``, ``neighbours_after`` (counts within ``context_s``),
        ``nearest_neighbour_s`` (NaN: none in the record), ``neighbour_interval_s``
        (median interval of the train within ``context_s``, NaN without a neighbour),
        ``largest_neighbour_ratio`` (largest counted neighbour's peak over the pulse's
        peak; 0: none), ``record_before_s``, ``record_after_s`` (record on
        each side of the peak, s).
    """
    fs = float(sample_rate_hz)
    n = n_rows
    has = own >= 0
    out = {
        "neighbours_before": np.where(has, 0.0, np.nan),
        "neighbours_after": np.where(has, 0.0, np.nan),
        "nearest_neighbour_s": np.full(n, np.nan),
        "neighbour_interval_s": np.full(n, np.nan),
        "largest_neighbour_ratio": np.where(has, 0.0, np.nan),
        "record_before_s": np.where(has, own_peak_col / fs, np.nan),
        "record_after_s": np.where(has, (n_cols - 1 - own_peak_col) / fs, np.nan),
    }
    if len(pulses) == 0 or not has.any():
        return out
    r = pulses.row
    ok_row = has[r]
    self_ = np.zeros(len(pulses), dtype=bool)
    self_[own[has]] = True
    level = np.maximum(LOBE_HIGH_SIGMA * np.nan_to_num(sigma, nan=np.inf),
                       NEIGHBOUR_FRACTION * np.nan_to_num(own_peak))
    dt = (pulses.peak_col - own_peak_col[r]) / fs        # s, + after
    other = ok_row & ~self_
    sig = other & (pulses.peak >= level[r])
    close = sig & (np.abs(dt) <= context_s)
    out["neighbours_before"] = np.where(has, np.bincount(r[close & (dt < 0)], minlength=n), np.nan)
    out["neighbours_after"] = np.where(has, np.bincount(r[close & (dt > 0)], minlength=n), np.nan)
    near = np.full(n, np.inf)
    np.minimum.at(near, r[sig], np.abs(dt[sig]))
    out["nearest_neighbour_s"] = np.where(np.isfinite(near), near, np.nan)
    big = np.zeros(n)
    np.maximum.at(big, r[close], pulses.peak[close])
    with np.errstate(divide="ignore", invalid="ignore"):
        out["largest_neighbour_ratio"] = np.where(has, big / own_peak, np.nan)
    # the train: the significant pulses within the context, and the pulse itself
    member = close | self_
    idx = np.flatnonzero(member)
    t = pulses.peak_col[idx].astype(np.float64) / fs
    rr = r[idx]
    order = np.lexsort((t, rr))
    t, rr = t[order], rr[order]
    same = rr[1:] == rr[:-1]
    gaps = np.diff(t)[same]
    g_row = rr[1:][same]
    from .mapping import grouped_median

    med = grouped_median(gaps, g_row, n)
    n_gaps = np.bincount(g_row, minlength=n)
    out["neighbour_interval_s"] = np.where(has & (n_gaps > 0), med, np.nan)
    return out
