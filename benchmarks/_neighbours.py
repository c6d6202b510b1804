"""The true neighbours of every catalogued pulse, from the simulator's own pulse list.

The truth twin holds only each record's own pulse, so the columns about the *other*
pulses of a record (``neighbours_before``, ``neighbours_after``,
``nearest_neighbour_s``, ``neighbour_interval_s``, ``largest_neighbour_ratio``) take
their truth from the season's pulses themselves: the blocks the simulator renders
(``features.simulate._writer.iter_blocks``, with the station's sferics), each pulse's
recorded field on its own support (``features.simulate._fields.field_supports``: the
noise-free field after the digitizer's average and the fast antenna's RC decay), its
peak (largest ``|E|``) and the time of that peak. For the catalogued pulse of each
record, the other pulses of its flash (and the sferics) whose peak lies in the record
are its neighbours when their peak reaches ``max(5 sigma, 10 % of its own peak)`` (the
schema's definition, with the station's true noise sigma) within 100 us of its peak.

A record cannot say more than its resolution allows, so the truth is a range: a pulse
whose peak lies within :data:`LEVEL_MARGIN` of the level, within :data:`TIME_MARGIN_S`
of the 100 us limit, or within :data:`OVERLAP_S` of the catalogued pulse's own peak (the
two are one pulse in the record) counts either way. Each column gets a *strict* truth
(only the pulses that count for sure) and a *lenient* one (every pulse that may count);
a value is right when it is within tolerance of either (a count: between them). The
median interval is not monotone in the set of pulses, so its two ends are the smallest
and the largest over every set between the strict and the lenient one (up to
:data:`MAX_UNSURE` unsure pulses; beyond, the two sets' own). These margins are our
choice (common practice, no source).

This reads the simulator's private modules (run by hand only; if they change, this
module must follow).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from features.simulate import resolve_settings
from features.simulate._fields import field_supports
from features.simulate._writer import event_order, iter_blocks

#: The schema's neighbour window and level (features.pulses: CONTEXT_S, LOBE_HIGH_SIGMA,
#: NEIGHBOUR_FRACTION).
CONTEXT_S = 100e-6
LEVEL_SIGMA = 5.0
LEVEL_FRACTION = 0.10
#: A peak within this fraction of the level counts either way.
LEVEL_MARGIN = 0.25
#: A peak within this time of the 100 us limit counts either way, s.
TIME_MARGIN_S = 1e-6
#: A pulse this close to the catalogued pulse's peak is part of it in the record, s.
OVERLAP_S = 1e-6
#: Up to this many unsure pulses, the interval's ends run over every set between.
MAX_UNSURE = 10
COLUMNS = ("neighbours_before", "neighbours_after", "nearest_neighbour_s",
           "neighbour_interval_s", "largest_neighbour_ratio")


def _peaks(sup):
    """Signed peak (largest |E|) and its time (s, flash time) of every support."""
    data = sup.data[:-1].astype(np.float64)
    mag = np.abs(data)
    top = np.maximum.reduceat(mag, sup.offset)
    seg = np.repeat(np.arange(sup.n.size), sup.n)
    hits = np.flatnonzero(mag >= top[seg])
    first = hits[np.unique(seg[hits], return_index=True)[1]]
    return data[first], sup.start_s + (first - sup.offset) / sup.rate_hz


def _train_stats(dt, peak_ratio, keep, close, own_ok):
    """Counts, nearest, interval and largest ratio of one record's kept pulses (``close``:
    those counted within the 100 us)."""
    if not own_ok:
        return np.nan, np.nan, np.nan, np.nan, np.nan
    before, after = int(np.sum(close & (dt < 0))), int(np.sum(close & (dt > 0)))
    nearest = float(np.min(np.abs(dt[keep]))) if keep.any() else np.nan
    train = np.sort(np.concatenate([[0.0], dt[close]]))
    interval = float(np.median(np.diff(train))) if train.size > 1 else np.nan
    largest = float(np.max(peak_ratio[close])) if close.any() else 0.0
    return before, after, nearest, interval, largest


def _interval_span(dt, sure, maybe):
    """Smallest and largest median interval over every set of pulses holding ``sure`` and
    held by ``maybe`` (NaN, NaN beyond :data:`MAX_UNSURE` unsure pulses)."""
    unsure = np.flatnonzero(maybe & ~sure)
    if unsure.size > MAX_UNSURE:
        return np.nan, np.nan
    values = []
    for bits in range(1 << unsure.size):
        pick = sure.copy()
        pick[unsure[[(bits >> k) & 1 == 1 for k in range(unsure.size)]]] = True
        train = np.sort(np.concatenate([[0.0], dt[pick]]))
        if train.size > 1:
            values.append(float(np.median(np.diff(train))))
    return (min(values), max(values)) if values else (np.nan, np.nan)


def record_truth(n_events, seed, preset, sigma_v_per_m, member=None) -> pd.DataFrame:
    """Strict and lenient truths of the neighbour columns, one row per event.

    Parameters
    ----------
    n_events, seed, preset, member
        The season, as given to ``simulate_season``.
    sigma_v_per_m : float
        The station's true field noise sigma, V/m.

    Returns
    -------
    DataFrame
        ``event_row`` and, for each column of :data:`COLUMNS`, ``<column>`` (strict) and
        ``<column>_lenient``; rows in catalog order.
    """
    s = resolve_settings(preset, **({"member": member} if member is not None else {}))
    dur = (s.field_samples - 1) / s.field_rate_hz
    out = []
    for blk in iter_blocks(s, n_events, seed, sferics=True):
        p = blk.pulses
        ev = event_order(p)
        peak, t_peak = _peaks(field_supports(p, np.arange(p["t_s"].size), s))
        order = np.lexsort((t_peak, p["flash"]))
        flash_sorted, t_sorted = p["flash"][order], t_peak[order]
        for i in ev:
            w0 = p["trigger_s"][i] - s.pretrigger_s - s.field_delay_s
            a = np.searchsorted(flash_sorted * 1e4 + t_sorted, p["flash"][i] * 1e4 + w0)
            b = np.searchsorted(flash_sorted * 1e4 + t_sorted, p["flash"][i] * 1e4 + w0 + dur,
                                side="right")
            q = order[a:b]
            q = q[q != i]
            own = abs(peak[i])
            level = max(LEVEL_SIGMA * sigma_v_per_m, LEVEL_FRACTION * own)
            dt = t_peak[q] - t_peak[i]
            mag = np.abs(peak[q])
            apart = np.abs(dt) > OVERLAP_S
            sure = apart & (mag >= level * (1 + LEVEL_MARGIN))
            maybe = (np.abs(dt) > 0) & (mag >= level * (1 - LEVEL_MARGIN))
            near = np.abs(dt) <= CONTEXT_S + TIME_MARGIN_S
            inner = np.abs(dt) <= CONTEXT_S - TIME_MARGIN_S
            ratio = mag / own if own > 0 else np.full(q.size, np.nan)
            strict = _train_stats(dt, ratio, sure, sure & inner, own > 0)
            lenient = _train_stats(dt, ratio, maybe, maybe & near, own > 0)
            row = {c: v for c, v in zip(COLUMNS, strict, strict=True)}
            row.update({c + "_lenient": v for c, v in zip(COLUMNS, lenient, strict=True)})
            lo, hi = _interval_span(dt, sure & inner, maybe & near) if own > 0 else (
                np.nan, np.nan)
            if np.isfinite(lo):
                row["neighbour_interval_s"], row["neighbour_interval_s_lenient"] = lo, hi
            out.append(row)
    return pd.DataFrame(out)
