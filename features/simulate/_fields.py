"""From pulses to record windows: each pulse's field once, then added into windows.

Every pulse's field is computed once on its own short support, on a fine time grid
(:func:`fine_rate_hz`, an integer multiple of the record's rate): the dipole field of its
TL/MTLE channel (:func:`.dipole.sampled_vertical_field_v_per_m`), the digitizer's
averaging over one sample interval (a centred trapezoid of one sample period, the
anti-alias filter) and the fast antenna's RC decay (first-order high-pass, time constant
``decay_time_s``). After its support a
pulse leaves a constant electrostatic change, which the RC circuit lets decay as
``exp(-t/decay_time_s)``; windows get these tails through a one-pole recursion. Pulses
that end more than ``5 decay_time_s`` before a window are left out of it (the whole flash
for a DC-coupled record). A window then holds every pulse of the same flash that falls
in it, interpolated linearly from the fine grid.

The VHF power envelope of a pulse is tied to the breakdown: proportional to ``|di/dt|`` of
its current (normalised to 1 at its largest), plus a plateau while a recoil or narrow
bipolar front moves, scaled to the pulse's VHF peak power at 100 km and by
``(100 km / R)^2``.
"""

from __future__ import annotations

import numpy as np

from .dipole import (
    SPEED_OF_LIGHT_M_PER_S,
    HeidlerCurrent,
    element_field_factors,
    sampled_vertical_field_v_per_m,
)

__all__ = ["PAD", "Supports", "assemble_windows", "field_support_samples", "field_supports",
           "find_pairs", "fine_rate_hz", "static_change_v_per_m", "support_rate_hz",
           "vhf_support_samples", "vhf_supports"]

#: Fine samples of zeros before each pulse's first arrival.
PAD = 64
_MAX_BATCH = 1 << 18  # fine samples per batch of pulse fields (cache-sized)


def fine_rate_hz(rate_hz: float, at_least_hz: float) -> float:
    """The smallest integer multiple of ``rate_hz`` that is >= ``at_least_hz``, in Hz."""
    return rate_hz * max(1, int(np.ceil(at_least_hz / rate_hz - 1e-9)))


def support_rate_hz(p, rate_hz):
    """Fine rate of each pulse's support (Hz): >= 80 MHz for the sharp stepped-leader
    pulses, >= 40 MHz for the others; always an integer multiple of the record rate."""
    sharp = p["rise_s"] < 0.25e-6
    return np.where(sharp, fine_rate_hz(rate_hz, 80e6), fine_rate_hz(rate_hz, 40e6))


class Supports:
    """Pulse waveforms on their supports, flat: pulse k is ``data[offset[k]:offset[k]+n[k]]``.

    ``start_s`` is the time (relative to the flash start) of each support's first fine
    sample, ``rate_hz`` its sample rate, ``end_value`` the waveform's last value (where
    its tail starts).
    """

    def __init__(self, rate_hz, start_s, n):
        self.rate_hz = np.asarray(rate_hz, float)
        self.start_s = np.asarray(start_s, float)
        self.n = np.asarray(n, np.int64)
        self.offset = np.cumsum(self.n) - self.n
        self.data = np.zeros(int(self.n.sum()) + 1, np.float32)  # a spare zero at the end
        self.end_value = np.zeros(self.n.size)

    @property
    def end_s(self):
        return self.start_s + (self.n - 1) / self.rate_hz

    @classmethod
    def join(cls, parts):
        """New supports holding pulses ``k`` of each ``(supports, k)`` in ``parts``, in order."""
        rate = np.concatenate([sup.rate_hz[k] for sup, k in parts])
        start = np.concatenate([sup.start_s[k] for sup, k in parts])
        n = np.concatenate([sup.n[k] for sup, k in parts])
        out = cls(rate, start, n)
        o = 0
        for sup, k in parts:
            for kk in np.asarray(k).tolist():  # one copy per pulse
                length = int(sup.n[kk])
                out.data[out.offset[o]:out.offset[o] + length] = \
                    sup.data[sup.offset[kk]:sup.offset[kk] + length]
                out.end_value[o] = sup.end_value[kk]
                o += 1
        return out

    def put(self, k, rows):
        """Store rows (2-D, equal lengths) as the supports of pulses ``k``."""
        for row, kk in zip(rows, k, strict=True):
            o = self.offset[kk]
            self.data[o:o + row.size] = row
            self.end_value[kk] = row[-1]


def _heidler(p, idx):
    return HeidlerCurrent(p["peak_a"][idx, None], p["rise_s"][idx, None],
                          p["decay_s"][idx, None])


def field_support_samples(p, fine_hz):
    """Fine samples each pulse's field needs (its current, channel transit and settling)."""
    c = SPEED_OF_LIGHT_M_PER_S
    peak_t = HeidlerCurrent(1.0, p["rise_s"], p["decay_s"]).peak_time_s
    dur = peak_t + 7.0 * p["decay_s"] + p["length_m"] * (1 / p["speed_m_per_s"] + 1 / c)
    n = PAD + np.ceil(dur * fine_hz).astype(np.int64)
    return np.maximum(256, 256 * np.ceil(n / 256)).astype(np.int64)  # a few lengths


def _batches(rate, n):
    """Indices (into ``rate``/``n``) of equal rate and length, at most _MAX_BATCH samples."""
    key = np.stack([rate, n.astype(float)], axis=1)
    groups, inverse = np.unique(key, axis=0, return_inverse=True)
    inverse = inverse.ravel()
    for g, (r, length) in enumerate(groups):
        sel = np.flatnonzero(inverse == g)
        step = max(1, _MAX_BATCH // int(length))
        for a in range(0, sel.size, step):
            yield sel[a:a + step], float(r), int(length)


def field_supports(p, idx, s) -> Supports:
    """Recorded field (physics sign, V/m, before noise) of pulses ``idx`` on supports."""
    from scipy import ndimage, signal  # here, not at import: the CLI starts faster

    idx = np.asarray(idx)
    rate = support_rate_hz(p, s.field_rate_hz)[idx]
    n = field_support_samples({k: v[idx] for k, v in p.items()}, rate)
    sup = Supports(rate, p["arrival_s"][idx] - PAD / rate, n)
    for k, fine_hz, length in _batches(rate, n):
        sel = idx[k]
        ratio = int(round(fine_hz / s.field_rate_hz))
        t = (np.arange(length) - PAD) / fine_hz
        cur = _heidler(p, sel)
        z0 = p["z0_m"][sel]
        e = sampled_vertical_field_v_per_m(
            *cur.current_and_derivative(t), fine_hz,
            np.hypot(p["x_m"][sel], p["y_m"][sel]), z0, z0 + p["channel_direction"][sel] * p["length_m"][sel],
            p["speed_m_per_s"][sel], p["decay_length_m"][sel])
        if ratio > 1:  # the digitizer's average over one sample period
            box = np.ones(ratio + 1)
            box[[0, -1]] = 0.5
            from scipy import ndimage  # scipy.ndimage/signal imported when used (CLI start-up)

            e = ndimage.convolve1d(e, box / ratio, axis=1, mode="nearest")
        if s.decay_time_s is not None:
            a_rc = np.exp(-1.0 / (fine_hz * s.decay_time_s))
            e = signal.lfilter([1.0, -1.0], [1.0, -a_rc], e, axis=1)
        sup.put(k, e)
    return sup


def static_change_v_per_m(p, idx, n_elements=48):
    """Final electrostatic field change (V/m) of pulses ``idx`` once their current is over.

    Midpoint sum over channel elements of ``(2 z^2 - D^2)/(2 pi eps0 R^5) q(z) dz`` with
    ``q(z) = exp(-s/lambda) Q`` and ``Q`` the total charge of the source current.
    """
    idx = np.asarray(idx)
    if idx.size == 0:
        return np.zeros(0)
    cur = HeidlerCurrent(p["peak_a"][idx], p["rise_s"][idx], p["decay_s"][idx])
    total_q = cur.charge_c(cur.peak_time_s + 40.0 * p["decay_s"][idx])
    length = p["length_m"][idx]
    s_el = (np.arange(n_elements) + 0.5) / n_elements * length[:, None]
    z = p["z0_m"][idx, None] + p["channel_direction"][idx, None] * s_el
    f_es, _, _, _ = element_field_factors(z, np.hypot(p["x_m"][idx], p["y_m"][idx])[:, None])
    w = np.exp(-s_el / p["decay_length_m"][idx, None]) * (length / n_elements)[:, None]
    return total_q * np.sum(f_es * w, axis=1)


def vhf_support_samples(p, fine_hz):
    """Fine samples each pulse's VHF envelope needs (burst and plateau)."""
    peak_t = HeidlerCurrent(1.0, p["rise_s"], p["decay_s"]).peak_time_s
    dur = np.maximum(peak_t + 5.0 * p["decay_s"], p["plateau_s"] + 0.3e-6)
    n = PAD + np.ceil(dur * fine_hz).astype(np.int64)
    return np.maximum(256, 256 * np.ceil(n / 256)).astype(np.int64)


def vhf_supports(p, idx, s) -> Supports:
    """VHF received power envelope (gain 1, no noise) of pulses ``idx`` on supports."""
    idx = np.asarray(idx)
    fine = fine_rate_hz(s.vhf_rate_hz, 50e6)
    rate = np.full(idx.size, fine)
    n = vhf_support_samples({k: v[idx] for k, v in p.items()}, fine)
    sup = Supports(rate, p["arrival_s"][idx] - PAD / fine, n)
    received = 10.0 ** (p["vhf_peak_db"] / 10.0) * (1e5 / p["slant_m"]) ** 2
    for k, _, length in _batches(rate, n):
        sel = idx[k]
        t = (np.arange(length) - PAD) / fine
        burst = np.abs(_heidler(p, sel).derivative_a_per_s(t))
        burst /= burst.max(axis=1, keepdims=True)
        dur_p = p["plateau_s"][sel, None]
        edge = 0.1e-6
        ramp = np.clip(np.minimum(t / edge, (dur_p - t) / edge + 1.0), 0.0, 1.0)
        env = burst + 10.0 ** (p["plateau_db"][sel, None] / 10.0) * ramp
        sup.put(k, env * received[sel, None])
    return sup


def find_pairs(ev_flash, win_start_s, win_len_s, pl_flash, pl_start_s, pl_end_s, lookback_s):
    """(event, pulse) pairs of the same flash where the pulse reaches into the window.

    A pulse pairs with an event when its support overlaps the window, or ends before the
    window end but less than ``lookback_s`` before its start (its tail). Pulses must be
    sorted by (flash, start time).

    Returns
    -------
    ev, pl : ndarray of int64
        Paired event and pulse indices.
    """
    key = pl_flash * 1e4 + pl_start_s
    max_len = float(np.max(pl_end_s - pl_start_s, initial=0.0))
    lo = np.searchsorted(key, ev_flash * 1e4 + win_start_s - lookback_s - max_len, "left")
    hi = np.searchsorted(key, ev_flash * 1e4 + win_start_s + win_len_s, "right")
    counts = np.maximum(hi - lo, 0)
    ev = np.repeat(np.arange(ev_flash.size), counts)
    pl = np.arange(counts.sum()) - np.repeat(np.cumsum(counts) - counts, counts)
    pl = pl + np.repeat(lo, counts)
    keep = ((pl_flash[pl] == ev_flash[ev]) & (pl_start_s[pl] <= win_start_s[ev] + win_len_s)
            & (pl_end_s[pl] >= win_start_s[ev] - lookback_s))
    return ev[keep], pl[keep]


def assemble_windows(n_rows, rate_hz, n_samples, win_start_s, ev, sup, sup_index,
                     tail=None):
    """Sum pulse supports (and their decaying tails) into record windows.

    Parameters
    ----------
    n_rows, rate_hz, n_samples
        Number of windows, their sample rate (Hz) and length (samples); ``sup.rate_hz``
        must be an integer multiple of ``rate_hz``.
    win_start_s : ndarray, shape (n_rows,)
        Time of each window's sample 0 (arrival time at the antenna, flash-relative).
    ev, sup_index : ndarray of int64
        Pairs: window row and the index of the pulse in ``sup`` (-1: no support part).
    sup : Supports
    tail : tuple (end_s, end_value, decay_time_s) or None
        Per pair: the time a pulse's support ends, its value there and the RC constant
        (None: DC-coupled); the tail is added from the first window sample after it.

    Returns
    -------
    ndarray, shape (n_rows, n_samples), float64
    """
    from scipy import signal  # here, not at import: the CLI starts faster

    out = np.zeros((n_rows, n_samples))
    fs = float(rate_hz)
    has = sup_index >= 0
    e, q = ev[has], sup_index[has]
    if e.size:
        ratio = np.round(sup.rate_hz[q] / fs).astype(np.int64)
        u0 = (win_start_s[e] - sup.start_s[q]) * sup.rate_hz[q]  # fine index of sample 0
        k_lo = np.maximum(0, np.ceil(-u0 / ratio)).astype(np.int64)
        k_hi = np.minimum(n_samples - 1,
                          np.floor((sup.n[q] - 1 - u0) / ratio)).astype(np.int64)
        u = u0 + k_lo * ratio
        i0 = np.floor(u).astype(np.int64)
        frac = u - i0
        base = sup.offset[q] + i0
        data = sup.data
        for row, k1, k2, b, f, r in zip(e.tolist(), k_lo.tolist(), k_hi.tolist(),
                                        base.tolist(), frac.tolist(), ratio.tolist(),
                                        strict=True):
            if k2 < k1:
                continue
            stop = b + r * (k2 - k1 + 1)
            lo = data[b:stop:r]
            hi = data[b + 1:stop + 1:r]
            out[row, k1:k2 + 1] += lo + f * (hi - lo)
    if tail is not None:
        end_s, end_value, tau = tail
        k0 = np.maximum(0, np.floor((end_s - win_start_s[ev]) * fs).astype(np.int64) + 1)
        inside = k0 < n_samples
        gap = win_start_s[ev] + k0 / fs - end_s
        amp = end_value if tau is None else end_value * np.exp(-gap / tau)
        rate = 0.0 if tau is None else 1.0 / (fs * tau)  # decay per sample
        if rate * n_samples < 500:  # tail(k) = a^k cumsum(amp a^-k0): no overflow here
            w = amp[inside] * np.exp(rate * k0[inside])
            dep = np.bincount(ev[inside] * n_samples + k0[inside], w,
                              minlength=n_rows * n_samples).reshape(n_rows, n_samples)
            out += np.cumsum(dep, axis=1) * np.exp(-rate * np.arange(n_samples))
        else:
            dep = np.bincount(ev[inside] * n_samples + k0[inside], amp[inside],
                              minlength=n_rows * n_samples).reshape(n_rows, n_samples)
            out += signal.lfilter([1.0], [1.0, -np.exp(-rate)], dep, axis=1)
    return out
