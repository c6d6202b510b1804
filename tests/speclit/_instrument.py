"""The fast antenna: each pulse's field on the digitizer's sample grid, and records
cut from one continuous stream per scene.

A scene has one sample clock per channel (sample ``n`` at ``n / rate`` seconds
after the scene starts). Every pulse's field is computed once, on that clock,
over a window from its arrival until its current has died away; after the
window the field stays at the static value of the charge it moved. Records are
slices of the stream, so overlapping records share their samples, their noise
and the neighbouring pulses in them, as two triggers of one digitizer would.

The stream is computed only over "spans": the union of the records and the
pulse windows. Outside the spans no pulse is active, so the DC-coupled field is
constant there and the RC high-pass output just decays, which lets the RC
state be carried across the gaps exactly.
"""

from __future__ import annotations

import numpy as np
from scipy.signal import lfilter

from . import _physics as ph

__all__ = ["Windows", "field_windows", "coarse", "extent", "merge_spans", "Stream", "digitize"]

#: A window ends this many decay constants after the last node's arrival; the
#: change still to come is then ~1e-4 of the static value or less (tested).
TAIL_TAUS = 12.0
_MAX_SAMPLES = 1_500_000      # sub-samples evaluated per chunk (memory bound)


class Windows:
    """Ragged per-pulse waveforms on a channel's sample grid.

    Attributes
    ----------
    start : ndarray of int64 (n,)
        Global sample index of each window's first sample.
    offsets : ndarray of int64 (n + 1,)
        ``values[offsets[i]:offsets[i + 1]]`` is pulse i's window.
    values : ndarray of float64
        Field in V/m (physics sign, DC-coupled) or VHF power (file units).
    final : ndarray (n,)
        Value held after the window (the static field; 0 for VHF).
    """

    def __init__(self, start, offsets, values, final):
        self.start = np.asarray(start, np.int64)
        self.offsets = np.asarray(offsets, np.int64)
        self.values = values
        self.final = final

    @property
    def length(self):
        return np.diff(self.offsets)

    @property
    def stop(self):
        return self.start + self.length

    def peak_abs(self):
        """Largest |value| of each window (0 for empty ones)."""
        out = np.zeros(len(self.start))
        ok = self.length > 0
        if ok.any():
            red = np.maximum.reduceat(np.abs(self.values), self.offsets[:-1][ok])
            out[ok] = red
        return out

    def first_above(self, level):
        """Global index of the first sample with |value| >= level[i] (or -1)."""
        n = len(self.start)
        row = np.repeat(np.arange(n), self.length)
        local = np.arange(self.values.size) - np.repeat(self.offsets[:-1], self.length)
        hit = np.abs(self.values) >= level[row]
        big = np.iinfo(np.int64).max
        cand = np.where(hit, local, big)
        out = np.full(n, -1, np.int64)
        ok = self.length > 0
        if ok.any():
            red = np.minimum.reduceat(cand, self.offsets[:-1][ok])
            out[ok] = np.where(red < big, self.start[ok] + red, -1)
        return out

    def subset(self, idx):
        idx = np.asarray(idx, np.int64)
        lens = self.length[idx]
        offs = np.concatenate([[0], np.cumsum(lens)])
        src = np.repeat(self.offsets[:-1][idx] - offs[:-1], lens) + np.arange(offs[-1])
        return Windows(self.start[idx], offs, self.values[src], self.final[idx])

    def truncate(self, stop):
        """Windows cut before the global samples ``stop`` (n,)."""
        keep = np.clip(np.minimum(self.stop, stop) - self.start, 0, None)
        offs = np.concatenate([[0], np.cumsum(keep)])
        src = np.repeat(self.offsets[:-1] - offs[:-1], keep) + np.arange(offs[-1])
        return Windows(self.start, offs, self.values[src], self.final)

    @staticmethod
    def steps(start, final):
        """Empty windows: only a held value from ``start`` on."""
        return Windows(start, np.zeros(len(start) + 1, np.int64), np.zeros(0),
                       np.asarray(final, float))

    @staticmethod
    def join(parts):
        parts = [p for p in parts if len(p.start)]
        if not parts:
            return Windows(np.zeros(0), np.zeros(1), np.zeros(0), np.zeros(0))
        offs, base = [np.zeros(1, np.int64)], 0
        for p in parts:
            offs.append(p.offsets[1:] + base)
            base += p.offsets[-1]
        return Windows(np.concatenate([p.start for p in parts]), np.concatenate(offs),
                       np.concatenate([p.values for p in parts]),
                       np.concatenate([p.final for p in parts]))


def oversampling(seg: ph.Segments, rate_hz: float, most: int):
    """Sub-samples per sample: enough for three per rise constant, at most ``most``."""
    return np.clip(np.ceil(3.0 / (seg.tau1_s * rate_hz)), 1, most).astype(int)


def extent(nodes, rate_hz):
    """First and one-past-last sample of each pulse's window on the grid."""
    dur = nodes["tau_s"][:, -1] + TAIL_TAUS * nodes["tau2_s"]
    first = np.floor(nodes["tau0_s"] * rate_hz).astype(np.int64)
    last = np.ceil((nodes["tau0_s"] + dur) * rate_hz).astype(np.int64) + 1
    return first, last


def field_windows(seg: ph.Segments, rate_hz: float, oversample: int, stop=None) -> Windows:
    """Each segment's vertical field at the station, on the grid ``n / rate_hz``.

    Each output sample is the mean of sub-samples spread over its sample
    interval (an integrating digitizer standing in for the anti-alias filter;
    our choice): three per rise constant ``tau1_s``, at most ``oversample``.

    Parameters
    ----------
    seg : Segments
        Times ``t0_s`` on the channel's clock (seconds).
    rate_hz : float
    oversample : int
    stop : ndarray of int64, optional
        Cut each window before this global sample (nothing later is recorded).

    Returns
    -------
    Windows
        Field in V/m, physics sign, no RC decay; in input order.
    """
    n = seg.n
    if n == 0:
        return Windows.join([])
    over = oversampling(seg, rate_hz, oversample)
    parts, order = [], []
    for q_over in np.unique(over):
        rows = np.flatnonzero(over == q_over)
        i = 0
        while i < rows.size:
            idx = rows[i:i + 1000]
            nodes = ph.segment_nodes(seg.take(idx))
            first, last = extent(nodes, rate_hz)
            if stop is not None:
                last = np.maximum(np.minimum(last, stop[idx]), first)
            lens = last - first
            cum = np.cumsum(lens) * q_over
            k = idx.size
            if cum[-1] > _MAX_SAMPLES and k > 1:
                k = max(1, int(np.searchsorted(cum, _MAX_SAMPLES)))
                idx, first, lens = idx[:k], first[:k], lens[:k]
                nodes = {key: (v[:k] if isinstance(v, np.ndarray) else v)
                         for key, v in nodes.items()}
            m = int(lens.sum())
            row = np.repeat(np.arange(k), lens)
            n_glob = first[row] + np.arange(m) - np.repeat(np.cumsum(lens) - lens, lens)
            acc = np.zeros(m)
            t_base = n_glob / rate_hz - nodes["tau0_s"][row]
            for q in range(q_over):
                acc += ph.evaluate(nodes, row, t_base + ((q + 0.5) / q_over - 0.5) / rate_hz)
            parts.append(Windows(first, np.concatenate([[0], np.cumsum(lens)]),
                                 acc / q_over, nodes["final"].copy()))
            order.append(idx)
            i += k
    w = Windows.join(parts)
    inv = np.empty(n, np.int64)
    inv[np.concatenate(order)] = np.arange(n)
    return w.subset(inv)


def coarse(seg: ph.Segments, rate_hz: float, look=None, n_points: int = 32):
    """A cheap look at each pulse: window extent, static value, estimated peak |E|.

    The field is computed with at most 8 elements; for the pulses ``look``
    (boolean, default all) it is also evaluated at ``n_points`` times spaced
    geometrically from a tenth of the rise constant to the window's end, for an
    estimated peak (a screen; exact waveforms come from :func:`field_windows`).

    Returns
    -------
    dict of ndarray (n,)
        ``peak`` (V/m; 0 where not looked at), ``first``, ``last`` (samples),
        ``final`` (V/m).
    """
    n = seg.n
    if n == 0:
        z = np.zeros(0)
        return {"peak": z, "first": z.astype(np.int64), "last": z.astype(np.int64),
                "final": z}
    nodes = ph.segment_nodes(seg, kmax=8)
    first, last = extent(nodes, rate_hz)
    peak = np.zeros(n)
    rows = np.arange(n) if look is None else np.flatnonzero(look)
    if rows.size:
        dur = nodes["tau_s"][rows, -1] + TAIL_TAUS * nodes["tau2_s"][rows]
        lo = 0.1 * seg.tau1_s[rows]
        frac = np.linspace(0.0, 1.0, n_points)[None, :]
        t = lo[:, None] * (dur / lo)[:, None] ** frac
        row = np.repeat(rows, n_points)
        v = ph.evaluate(nodes, row, t.ravel()).reshape(rows.size, n_points)
        peak[rows] = np.maximum(np.abs(v).max(axis=1), np.abs(nodes["final"][rows]))
    return {"peak": peak, "first": first, "last": last, "final": nodes["final"]}


def merge_spans(starts, stops, gap=64):
    """Union of intervals ``[start, stop)``; intervals closer than ``gap`` merge."""
    order = np.argsort(starts, kind="stable")
    s, e = np.asarray(starts)[order], np.asarray(stops)[order]
    run_end = np.maximum.accumulate(e)
    new = np.r_[True, s[1:] > run_end[:-1] + gap]
    grp = np.cumsum(new) - 1
    span_s = s[new]
    span_e = np.maximum.reduceat(e, np.flatnonzero(new))
    return span_s, span_e, grp


class Stream:
    """The continuous stream of one channel over a scene's spans.

    Parameters
    ----------
    windows : Windows
    rec_start : ndarray of int64
        First global sample of each record.
    rec_len : int
        Samples per record.
    """

    def __init__(self, windows: Windows, rec_start, rec_len: int):
        busy = windows.length > 0
        ws, we = windows.start[busy], windows.stop[busy]
        starts = np.concatenate([ws, rec_start])
        stops = np.concatenate([we, np.asarray(rec_start) + rec_len])
        self.span_start, self.span_stop, _ = merge_spans(starts, stops)
        lens = self.span_stop - self.span_start
        self.span_off = np.concatenate([[0], np.cumsum(lens)])
        self.size = int(self.span_off[-1])
        self.windows = windows
        self.rec_start = np.asarray(rec_start, np.int64)
        self.rec_len = rec_len

    def position(self, n):
        """Buffer position of global samples ``n`` (the next span's start in a gap)."""
        k = np.searchsorted(self.span_stop, n, side="right")
        k = np.minimum(k, len(self.span_start) - 1)
        inside = np.clip(n - self.span_start[k], 0, None)
        pos = self.span_off[k] + inside
        return np.where(n >= self.span_stop[-1], self.size, pos)

    def sum_windows(self, with_final: bool):
        """The sum of the windows (and their held final values) over the spans."""
        w = self.windows
        if self.size == 0:
            return np.zeros(0)
        pos0 = self.position(w.start)
        idx = np.repeat(pos0 - w.offsets[:-1], w.length) + np.arange(w.values.size)
        buf = np.bincount(idx, weights=w.values, minlength=self.size)[: self.size].astype(
            np.float64, copy=False)            # (an empty bincount comes back as int)
        if with_final:
            step = np.bincount(self.position(w.stop), weights=w.final,
                               minlength=self.size + 1)[: self.size]
            buf += np.cumsum(step)
        return buf

    def rc_highpass(self, x, decay_s, rate_hz):
        """RC high-pass ``y' = x' - y / decay_s``, exact for a held input between spans."""
        a = np.exp(-1.0 / (decay_s * rate_hz))
        y = np.empty_like(x)
        y_prev = x_prev = 0.0
        prev_stop = None
        for k in range(len(self.span_start)):
            lo, hi = self.span_off[k], self.span_off[k + 1]
            if prev_stop is not None:
                y_prev *= a ** (self.span_start[k] - prev_stop)
            seg = x[lo:hi]
            d = np.diff(seg, prepend=x_prev)
            y[lo:hi], _ = lfilter([1.0], [1.0, -a], d, zi=[a * y_prev])
            y_prev, x_prev, prev_stop = y[hi - 1], seg[-1], self.span_stop[k]
        return y

    def record_spans(self):
        """Buffer slices ``(lo, hi)`` covering the records (merged where they overlap)."""
        lo, hi, _ = merge_spans(self.rec_start, self.rec_start + self.rec_len, gap=0)
        p = self.position(lo)
        return list(zip(p.tolist(), (p + (hi - lo)).tolist()))

    def records(self, buf):
        """Rows of ``buf`` for each record, shape (n_records, rec_len)."""
        pos = self.position(self.rec_start)
        return buf[pos[:, None] + np.arange(self.rec_len)[None, :]]


def digitize(x_v_per_m, *, units, scale, full_scale, sign):
    """Physics-convention V/m to stored values (sign flip, counts, clipping).

    Parameters
    ----------
    x_v_per_m : ndarray
    units : {"V/m", "counts"}
    scale : float
        V/m per count.
    full_scale : float or None
        Clip level in V/m.
    sign : {"physics", "atmospheric"}

    Returns
    -------
    ndarray of float32 or int16
    """
    y = -x_v_per_m if sign == "atmospheric" else x_v_per_m
    if full_scale is not None:
        y = np.clip(y, -full_scale, full_scale)
    if units == "counts":
        return np.clip(np.round(y / scale), -32768, 32767).astype(np.int16)
    return y.astype(np.float32)
