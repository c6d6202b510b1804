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
  broken by noise, unless a deep valley split them. A lobe of the overshoot's sign riding
  on the overshoot (no return to the baseline in between) within :data:`REVERSAL_MAX_S`
  of the peak is the reversed field of the current stopping at its channel's end, part of
  the pulse (:func:`_rides_own_overshoot`).
* **catalogued pulse**: the pulse holding the lobe at the trigger, else (within
  :data:`TRIGGER_TOLERANCE_S`) one starting just after it, or ending just before it,
  else the lobe nearest to the trigger within :data:`TRIGGER_SEARCH_S`; never a lobe
  whose peak lies more than :data:`PEAK_BEFORE_TRIGGER_S` before the trigger (the tail
  of an earlier pulse).
* **neighbours**: the other pulses of the record whose peak reaches
  max(``LOBE_HIGH_SIGMA`` sigma, :data:`NEIGHBOUR_FRACTION` x the catalogued peak),
  counted within :data:`CONTEXT_S` before and after the catalogued pulse's peak; not a
  pulse the record cuts (the record opening inside it, at ``LOBE_HIGH_SIGMA`` sigma
  already, or still rising at its last column: its peak lies outside the record, all
  the record holds is its overshoot or rise).
  Leader steps come in trains 10-50 us apart (Rakov & Uman 2003, ch. 4; from memory),
  narrow bipolar events are isolated (no other pulse within ~100 us; common practice in
  NBE studies, no single source), so these tell them apart whatever the station's
  cataloguing practice.

The baseline, noise and lobe part lives in :mod:`features._lobes`, the level each lobe
rides on in :mod:`features._riding`, both re-exported here; this module groups lobes into pulses (:func:`group_pulses`), finds the
catalogued pulse (:func:`catalogued_pulse`) and its neighbours
(:func:`neighbour_features`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ._lobes import (
    BASELINE_MAX_S,
    BASELINE_MIN_S,
    LOBE_HIGH_SIGMA,
    LobeTable,
    _run_starts,
    baseline_fit,
)

# the rest of the lobe part's names, re-exported (`X as X`) for callers of this module
from ._lobes import BASELINE_MIN_SAMPLES as BASELINE_MIN_SAMPLES
from ._lobes import BLOCK_S as BLOCK_S
from ._lobes import DETECT_SMOOTH_S as DETECT_SMOOTH_S
from ._lobes import LOBE_LOW_SIGMA as LOBE_LOW_SIGMA
from ._lobes import SLOPE_SIGNIFICANCE as SLOPE_SIGNIFICANCE
from ._lobes import VALLEY_FRACTION as VALLEY_FRACTION
from ._lobes import VALLEY_SIGMA as VALLEY_SIGMA
from ._lobes import _noise_floor as _noise_floor
from ._lobes import robust_sigma_diff as robust_sigma_diff
from ._riding import BRIDGE_LEVEL as BRIDGE_LEVEL
from ._riding import BRIDGE_SIGMA as BRIDGE_SIGMA
from ._riding import LobeTableWithBase, find_lobes

__all__ = [
    "BASELINE_MAX_S",
    "BASELINE_MIN_S",
    "CONTEXT_S",
    "LobeTable",
    "LobeTableWithBase",
    "PulseTable",
    "baseline_fit",
    "find_lobes",
    "group_pulses",
    "catalogued_pulse",
    "neighbour_features",
]


#: Most lobes of one pulse (initial half-cycle, overshoot, one more swing).
MAX_LOBES = 3
#: An opposite-polarity lobe joins the pulse before it if it starts within this gap, s
#: (or within the previous lobe's own duration when that is longer): the reversed field
#: of the current stopping at its channel's end, L/v after the pulse (channel sections
#: up to ~500 m at 1e8 m/s), arrives after silence when the source is far (the static
#: and induction terms that fill the gap fade as 1/r^3 and 1/r^2, the radiation term as
#: 1/r; Uman, McLain & Krider 1975; Rakov & Uman 2003, ch. 3; from memory). Shorter
#: than the 10-50 us between leader steps (Rakov & Uman 2003, ch. 4), which keep the
#: sign of the train anyway.
OVERSHOOT_GAP_S = 5e-6
#: ... but a third lobe (a further swing of the initial sign) only within this gap or
#: bridged to the lobe before it, s: ringing swings on without a pause; a lobe of the
#: initial sign after a pause rises from the baseline, the next pulse of a train.
SWING_GAP_S = 2e-6
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
#: A lobe whose peak lies more than this before the trigger is not the catalogued pulse
#: (a trigger fires on the rising edge of its pulse; a trigger inside the slow tail of an
#: earlier, larger pulse is another pulse's, one lost in that tail), s. The same bound as
#: the features' peak search (features.waveform.PEAK_SEARCH_S).
PEAK_BEFORE_TRIGGER_S = 3e-6
#: Neighbours are counted within this time before and after the pulse's peak, s.
CONTEXT_S = 100e-6
#: A neighbour counts if its peak reaches this fraction of the catalogued peak.
NEIGHBOUR_FRACTION = 0.1
#: A lobe up to this far after the previous one still joins it when the record between
#: them keeps its sign: an opposite-polarity one as its overshoot (no larger than
#: OVERSHOOT_MAX_RATIO x the previous), a same-sign one after an overshoot as that lobe (a slow overshoot, or the reversed field of a
#: current pulse reaching the end of its channel a few us later, broken by noise where it
#: hovers near the detection level), s. Shorter than the 10-50 us between leader steps
#: (Rakov & Uman 2003, ch. 4; from memory).
BRIDGE_MAX_S = 10e-6
#: A lobe of the overshoot's sign riding on a pulse's overshoot (no return to the
#: baseline) and starting within this of the pulse's peak is its channel-end reversal
#: (:func:`_rides_own_overshoot`), s: L/v of a channel section of up to ~500 m for a
#: wave at ~1e7 m/s, the speed of dart and recoil leaders in a decayed channel (Rakov &
#: Uman 2003, ch. 4 and 9: 1e6-2e7 m/s; from memory), ~5 km at 1e8 m/s; longer than the
#: 10-30 us a narrow bipolar event's whole waveform lasts (Rakov & Uman 2003, ch. 8;
#: from memory). Only lobes of the overshoot's sign: a leader step keeps the train's
#: (initial) sign and stays apart at any delay. A pulse later than this on an RC
#: undershoot (a fast antenna whose decay the catalog does not give) stands alone.
REVERSAL_MAX_S = 50e-6
#: ... and rising from half its own height (above the valley it rides on) to its peak
#: over at least this fraction of the time the pulse's initial half-cycle takes to rise
#: from half its peak to its peak: the reversal is the
#: initial current wave itself, reflected, no faster (the far field of a finite channel
#: is proportional to i(t) - i(t - L/v); Uman, McLain & Krider 1975); a pulse of the
#: overshoot's sign rising twice as fast is another discharge riding there.
REVERSAL_MIN_RISE = 0.5


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
    height : ndarray
        The pulse's own height, V/m: the largest of its lobes' peaks less the level each
        rides on (the |e| of the valley it was split from an earlier lobe at,
        :class:`LobeTableWithBase`); ``peak`` for a pulse that starts from the baseline.
    cut : ndarray of bool or None
        The record opens inside the pulse's initial lobe (:class:`LobeTableWithBase`).
    """

    row: np.ndarray
    start: np.ndarray
    stop: np.ndarray
    first_lobe: np.ndarray
    peak_col: np.ndarray
    peak: np.ndarray
    sign: np.ndarray
    n_lobes: np.ndarray
    height: np.ndarray
    cut: np.ndarray = None

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
        return (PulseTable(z, z, z, z, z, np.zeros(0), np.zeros(0, np.int8), z, np.zeros(0)),
                lobes, z)
    base = getattr(lobes, "base", None)
    base = np.zeros(m) if base is None else base
    same_row = np.zeros(m, dtype=bool)
    same_row[1:] = lobes.row[1:] == lobes.row[:-1]
    gap = np.zeros(m)
    gap[1:] = lobes.start[1:] - lobes.stop[:-1]
    flip = np.zeros(m, dtype=bool)
    flip[1:] = lobes.sign[1:] != lobes.sign[:-1]
    length = lobes.stop - lobes.start
    longer = np.zeros(m)
    longer[1:] = np.maximum(length[1:], length[:-1])
    bridged = getattr(lobes, "bridged", None)
    bridged = np.zeros(m, dtype=bool) if bridged is None else bridged
    split = (same_row & ~flip & ~lobes.after_valley
             & (gap <= np.maximum(max(SAME_SIGN_GAP_S * fs, 2.0), SAME_SIGN_GAP_FRACTION * longer)))
    # an overshoot broken by noise (pieces bridged by a record that keeps their sign) is
    # one lobe; only after an overshoot proper (close after a larger swing of the other
    # sign): a pulse on the tail of an earlier one's initial half-cycle is another pulse
    raw_len = np.zeros(m)
    raw_len[1:] = length[:-1]
    raw_ratio = np.zeros(m)
    raw_ratio[1:] = lobes.peak[1:] / np.maximum(lobes.peak[:-1], 1e-300)
    is_os = (same_row & flip & (gap <= np.maximum(OVERSHOOT_GAP_S * fs, raw_len))
             & (raw_ratio <= OVERSHOOT_MAX_RATIO))
    link = same_row & ~flip & ~lobes.after_valley & bridged & (gap <= BRIDGE_MAX_S * fs)
    head = np.maximum.accumulate(np.where(link, 0, np.arange(m)))
    split |= link & is_os[head]
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
    close_small = (same_row & (gap <= np.maximum(OVERSHOOT_GAP_S * fs, prev_len))
                   & (ratio <= OVERSHOOT_MAX_RATIO))
    bridge = (same_row & bridged[~split] & (gap <= BRIDGE_MAX_S * fs)
              & (ratio <= OVERSHOOT_MAX_RATIO))
    join = (close_small | bridge) & flip
    # a further swing of the initial sign (a chain's third lobe) after silence longer
    # than SWING_GAP_S has its own rise from the baseline: another pulse (a leader step
    # after the previous one's reversal), not ringing; then at most MAX_LOBES lobes per
    # pulse (a chain broken after every MAX_LOBES joins)
    keep = bridge | (gap <= SWING_GAP_S * fs)
    if n_l:
        for _ in range(MAX_LOBES):          # a break shifts the chains after it
            run = _chain_position(join)
            new = join & (keep | (run % MAX_LOBES < 2))
            if (new == join).all():
                break
            join = new
        join &= (_chain_position(join) % MAX_LOBES) != 0
    # an overshoot (or RC undershoot) broken by noise: a same-sign lobe close after a
    # joined overshoot lobe, no larger, is its continuation (a pulse riding on the
    # overshoot's tail was split at a valley instead and stands alone, with its height)
    l_after_valley = lobes.after_valley[~split]
    after_os = np.zeros(n_l, dtype=bool)
    after_os[1:] = join[:-1]
    join |= close_small & ~flip & after_os & ~l_after_valley
    rise = getattr(lobes, "rise", None)
    if rise is None:
        rise = (l_peak_col - l_start).astype(np.float64)
    else:                       # a merged lobe's rise: that of the piece holding its peak
        top_rise = np.zeros(n_l)
        top_rise[lobe_id[is_top][::-1]] = rise[is_top][::-1]
        rise = top_rise
    join |= _rides_own_overshoot(join, same_row & ~flip & l_after_valley, l_sign, l_peak,
                                 l_start, l_peak_col, REVERSAL_MAX_S * fs,
                                 base[~split], rise)
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
    # a pulse's own height: its largest lobe above the valley that lobe rides on
    l_base = base[~split]
    p_height = np.zeros(n_p)
    np.maximum.at(p_height, pulse_of_lobe, np.maximum(l_peak - l_base, 0.0))
    l_cut = getattr(lobes, "cut", None)
    table = PulseTable(row=l_row[first], start=l_start[first], stop=p_stop,
                       first_lobe=first, peak_col=p_peak_col, peak=p_peak,
                       sign=l_sign[first], n_lobes=n_lobes,
                       height=p_height,
                       cut=None if l_cut is None else l_cut[~split][first])
    merged = LobeTableWithBase(row=l_row, start=l_start, stop=l_stop, peak_col=l_peak_col,
                               peak=l_peak, sign=l_sign,
                               after_valley=lobes.after_valley[~split], base=l_base,
                               bridged=bridged[~split])
    return table, merged, pulse_of_lobe


def _chain_position(join):
    """Position of each lobe in its chain of joined lobes (0: the chain's first)."""
    starts = np.flatnonzero(~join)
    seg = np.cumsum(~join) - 1
    return np.arange(join.size) - starts[seg]


def _rides_own_overshoot(join, ride, sign, peak, start, peak_col, max_delay, base, rise):
    """Lobes that continue a pulse's own overshoot: the reversed field at its channel end.

    A current pulse stopping at the end of its channel radiates a field of the opposite
    sign to its initial half-cycle, L/v after it (in the transmission-line model with a
    channel of finite length L the far field is proportional to i(t) - i(t - L/v):
    Uman, McLain & Krider 1975, Am. J. Phys. 43, 33; Rakov & Uman 2003, ch. 12 and, for
    the compact intracloud discharge's reflections, ch. 8; from memory). It rides on the
    pulse's overshoot, of the overshoot's sign, after a valley: part of the pulse, not
    another discharge (a leader step's own field has the initial half-cycle's sign, so a
    step riding on an overshoot is a sign flip and stays apart). The reversal is the
    initial current wave reflected (the same i(t), dispersed on the way: no faster), so
    it rises (50-100 % of its own height) no faster than :data:`REVERSAL_MIN_RISE` x
    the initial half-cycle's rise; a narrower pulse riding there is another discharge.

    Parameters
    ----------
    join : ndarray of bool, shape (n_lobes,)
        Lobe joins the pulse of the lobe before it (so far).
    ride : ndarray of bool
        Lobe is split at a valley from the lobe before it, same sign, same row (the
        field did not come back to the baseline in between).
    sign, peak : ndarray
        Sign and |e| peak of each lobe.
    start, peak_col : ndarray of int
        First column (for a riding lobe: its valley) and peak column of each lobe.
    max_delay : float
        Latest start after the pulse's peak, columns.
    base : ndarray
        |e| each lobe rides on (:class:`LobeTableWithBase`); the rise test applies to
        lobes whose own height reaches ``NEIGHBOUR_FRACTION`` of the half-cycle (the
        noise-split pieces of the overshoot itself join as they are).
    rise : ndarray
        Each lobe's rise from half its own height to its peak, columns
        (:class:`LobeTableWithBase`).

    Returns
    -------
    ndarray of bool
        Lobes to join: a chain of riding lobes whose head is a joined lobe of the sign
        opposite to its pulse's initial half-cycle, each no larger than
        ``OVERSHOOT_MAX_RATIO`` x that half-cycle (a larger pulse is another one) and
        rising no faster than ``REVERSAL_MIN_RISE`` x its rise.
    """
    idx = np.arange(join.size)
    first = np.maximum.accumulate(np.where(join, 0, idx))     # each pulse's first lobe
    head = np.maximum.accumulate(np.where(ride, 0, idx))      # each riding chain's head
    on_os = join[head] & (sign[head] != sign[first[head]])
    soon = start - peak_col[first[head]] <= max_delay
    f = first[head]
    slow = ((rise + 1 >= REVERSAL_MIN_RISE * rise[f])          # (to a sample)
            | (peak - base < NEIGHBOUR_FRACTION * peak[f]))
    return (ride & on_os & soon & slow
            & (peak <= OVERSHOOT_MAX_RATIO * peak[first[head]]))


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
    near = (d <= TRIGGER_SEARCH_S * fs) & (lobes.peak_col >= trigger_col
                                           - PEAK_BEFORE_TRIGGER_S * fs)
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
    # a pulse the record cuts (opening inside it, or still rising at its last column)
    # has its peak outside the record: of an earlier (later) discharge, whose overshoot
    # or rise is all the record holds; not a pulse in the record
    opens = (pulses.start == 0) if pulses.cut is None else pulses.cut
    cut = opens | (pulses.peak_col >= n_cols - 1)
    other = ok_row & ~self_ & ~cut
    sig = other & (pulses.height >= level[r])
    close = sig & (np.abs(dt) <= context_s)
    out["neighbours_before"] = np.where(has, np.bincount(r[close & (dt < 0)], minlength=n), np.nan)
    out["neighbours_after"] = np.where(has, np.bincount(r[close & (dt > 0)], minlength=n), np.nan)
    near = np.full(n, np.inf)
    np.minimum.at(near, r[sig], np.abs(dt[sig]))
    out["nearest_neighbour_s"] = np.where(np.isfinite(near), near, np.nan)
    big = np.zeros(n)
    np.maximum.at(big, r[close], pulses.height[close])
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
