"""Render one block of a season: record windows, instrument effects and sources.

Instrument model, applied to each window (physics sign, V/m) in this order: white
Gaussian noise (``field_noise_v_per_m``), digitizer quantisation (one count of ``scale``
for ``units="counts"``, ``full_scale / 2**(field_bits - 1)`` for calibrated ``"V/m"``
files), clipping
at ``+-full_scale``, then the stored sign convention. VHF: received power times
``vhf_gain`` plus the noise floor, with the fluctuation of a detected noise-like signal
(power x Gamma(4)/4 for ``vhf_kind="power"``); ``"voltage"`` is a Gaussian carrier
band-limited to ``band_hz`` (raised-cosine edges 3 MHz wide inside the band) whose
analytic-signal power has that mean.
"""

from __future__ import annotations

import numpy as np
from scipy import fft as sp_fft

from ._earth import apparent_elevation_deg, azimuth_deg, local_xyz_m
from ._fields import (
    PAD,
    Supports,
    assemble_windows,
    field_support_samples,
    field_supports,
    find_pairs,
    fine_rate_hz,
    static_change_v_per_m,
    support_rate_hz,
    vhf_support_samples,
    vhf_supports,
)
from ._flashes import FRONT_FIELDS, SFERIC
from .dipole import SPEED_OF_LIGHT_M_PER_S

__all__ = ["BlockRenderer", "clip_counts", "digitize_field", "digitize_vhf", "sources_table"]


class BlockRenderer:
    """Record windows of one block's catalogued pulses (events), rows on demand.

    The constructor orders the events (by flash, then trigger time), pairs every window
    with the pulses of its flash that reach into it and computes those pulses' supports;
    :meth:`field_rows` and :meth:`vhf_rows` then assemble any range of rows.

    Parameters
    ----------
    p : dict of ndarray
        The block's pulses.
    s : Settings
        The settings to render with (rates, windows, RC decay).
    known : Supports or None
        Field supports of pulses ``0..known.n.size-1``, already computed with ``s``
        (the trigger's); only the other pulses' are computed.
    own_only : bool
        Each window holds only its own event's pulse (the truth twin): no neighbours,
        sferics or strokes of other pulses.
    """

    def __init__(self, p, s, known=None, own_only=False):
        self.p, self.s = p, s
        self.known, self.own_only = known, own_only
        ev = np.flatnonzero(p["catalogued"])
        self.ev_idx = ev[np.lexsort((p["trigger_s"][ev], p["flash"][ev]))]
        self._setup_field()
        if s.with_vhf:
            self._setup_vhf()

    @property
    def n_rows(self) -> int:
        return int(self.ev_idx.size)

    def _pairs(self, win_start, win_len, start, end, lookback):
        p = self.p
        order = np.lexsort((start, p["flash"]))
        e, k = find_pairs(p["flash"][self.ev_idx], win_start, win_len, p["flash"][order],
                          start[order], end[order], lookback)
        q = order[k]
        if self.own_only:
            keep = q == self.ev_idx[e]
            e, q = e[keep], q[keep]
        return e, q

    def _field_supports(self, pulses):
        if self.known is None:
            return field_supports(self.p, pulses, self.s)
        n_known = self.known.n.size
        old, new = pulses[pulses < n_known], pulses[pulses >= n_known]
        parts = [(self.known, old)]
        if new.size:
            parts.append((field_supports(self.p, new, self.s), np.arange(new.size)))
        return Supports.join(parts)

    def _setup_field(self):
        p, s = self.p, self.s
        self.win_start = p["trigger_s"][self.ev_idx] - s.pretrigger_s - s.field_delay_s
        win_len = (s.field_samples - 1) / s.field_rate_hz
        rate = support_rate_hz(p, s.field_rate_hz)
        start = p["arrival_s"] - PAD / rate
        end = start + (field_support_samples(p, rate) - 1) / rate
        tau = s.decay_time_s
        e, q = self._pairs(self.win_start, win_len, start, end,
                           1e4 if tau is None else 5.0 * tau)
        overlap = (end[q] >= self.win_start[e]) & (start[q] <= self.win_start[e] + win_len)
        pulses = np.unique(q[overlap])
        self.sup = self._field_supports(pulses)
        slot = np.full(p["t_s"].size, -1)
        slot[pulses] = np.arange(pulses.size)
        end_value = np.zeros(p["t_s"].size)
        end_value[pulses] = self.sup.end_value
        tail_only = np.setdiff1d(np.unique(q), pulses)
        end_value[tail_only] = static_change_v_per_m(p, tail_only)
        ends = end[q] < self.win_start[e] + win_len
        self.f_ev, self.f_slot = e[overlap], slot[q[overlap]]
        self.t_ev, self.t_end, self.t_val = e[ends], end[q[ends]], end_value[q[ends]]

    def _setup_vhf(self):
        p, s = self.p, self.s
        self.vwin_start = p["trigger_s"][self.ev_idx] - s.vhf_pretrigger_s - s.vhf_delay_s
        win_len = (s.vhf_samples - 1) / s.vhf_rate_hz
        fine = fine_rate_hz(s.vhf_rate_hz, 50e6)
        start = p["arrival_s"] - PAD / fine
        end = start + (vhf_support_samples(p, fine) - 1) / fine
        e, q = self._pairs(self.vwin_start, win_len, start, end, 0.0)
        keep = (end[q] >= self.vwin_start[e]) & (p["class_index"][q] != SFERIC)  # no VHF
        e, q = e[keep], q[keep]
        pulses = np.unique(q)
        self.vsup = vhf_supports(p, pulses, s)
        slot = np.full(p["t_s"].size, -1)
        slot[pulses] = np.arange(pulses.size)
        self.v_ev, self.v_slot = e, slot[q]

    def field_rows(self, a: int, b: int) -> np.ndarray:
        """Noise-free recorded field of rows a..b-1 (physics sign, V/m), (b-a, n_samples)."""
        s = self.s
        m = (self.f_ev >= a) & (self.f_ev < b)
        out = assemble_windows(b - a, s.field_rate_hz, s.field_samples, self.win_start[a:b],
                               self.f_ev[m] - a, self.sup, self.f_slot[m])
        m = (self.t_ev >= a) & (self.t_ev < b)
        out += assemble_windows(b - a, s.field_rate_hz, s.field_samples, self.win_start[a:b],
                                self.t_ev[m] - a, self.sup, np.full(int(m.sum()), -1),
                                tail=(self.t_end[m], self.t_val[m], s.decay_time_s))
        return out

    def vhf_rows(self, a: int, b: int) -> np.ndarray:
        """Noise-free VHF received power (gain 1) of rows a..b-1, (b-a, vhf_samples)."""
        s = self.s
        m = (self.v_ev >= a) & (self.v_ev < b)
        return assemble_windows(b - a, s.vhf_rate_hz, s.vhf_samples, self.vwin_start[a:b],
                                self.v_ev[m] - a, self.vsup, self.v_slot[m])

    def row_chunks(self):
        """(a, b) row ranges small enough to stay in cache (and at most chunk_size)."""
        s = self.s
        rows = max(1, min(s.chunk_size, 1_000_000 // max(s.field_samples, s.vhf_samples)))
        for a in range(0, self.n_rows, rows):
            yield a, min(self.n_rows, a + rows)


# ------------------------------------------------------------ instrument effects
def clip_counts(s, full_scale):
    """Clip level in counts (int16 files) and the exact full scale it gives, in V/m."""
    n = min(32767, int(np.floor(full_scale / s.scale + 1e-9)))
    return n, n * s.scale


def digitize_field(x, s, full_scale, rng):
    """Noise, quantisation, clipping and sign: the stored field rows."""
    if s.field_noise_v_per_m > 0:
        x = x + s.field_noise_v_per_m * rng.standard_normal(x.shape)
    sign = -1.0 if s.sign_convention == "atmospheric" else 1.0
    if s.units == "counts":
        n_clip, _ = clip_counts(s, full_scale)
        c = np.clip(np.round(x / s.scale), -n_clip, n_clip)
        return (sign * c).astype(np.int16)
    lsb = full_scale / 2.0 ** (s.field_bits - 1)
    v = np.clip(np.round(x / lsb) * lsb, -full_scale, full_scale)
    return (sign * v).astype(np.float32)


def _band_response(n, rate_hz, band_hz, taper_hz=3e6):
    """Band-pass gain on the rfft bins: 1 inside ``band_hz``, raised-cosine edges of
    ``taper_hz`` just inside it (a short impulse response: no leakage across a row)."""
    f = sp_fft.rfftfreq(n, 1.0 / rate_hz)
    lo, hi = band_hz
    taper = min(taper_hz, 0.25 * (hi - lo))
    x = np.clip(np.minimum(f - lo, hi - f) / taper, 0.0, 1.0)
    return np.sin(0.5 * np.pi * x) ** 2


def digitize_vhf(power, s, rng, missing):
    """VHF rows as stored: gain, noise floor, detection statistics, missing rows."""
    total = s.vhf_gain * power + s.vhf_noise_floor
    if s.vhf_kind == "power":
        out = total * (rng.standard_gamma(4.0, total.shape, dtype=np.float32) / 4.0)
    else:
        gain = _band_response(total.shape[1], s.vhf_rate_hz, s.band_hz)
        # white noise of variance total / (2 mean|H|^2): the band-passed carrier then has
        # variance total/2, i.e. a mean analytic-signal power |v + i H(v)|^2 = total
        white = rng.standard_normal(total.shape) * np.sqrt(total / (2.0 * np.mean(gain**2)))
        spec = sp_fft.rfft(white, axis=1) * gain  # row by row: chunk-proof
        out = sp_fft.irfft(spec, total.shape[1], axis=1)
    if s.vhf_full_scale is not None:  # the digitizer's clip level
        out = np.clip(out, -s.vhf_full_scale, s.vhf_full_scale)
    out = out.astype(np.float32)
    out[missing] = np.nan
    return out


def sources_table(p, ev_idx, s, rng):
    """Mapped VHF sources of events ``ev_idx`` (one dict of columns; row = event row)."""
    c = SPEED_OF_LIGHT_M_PER_S
    trig = p["trigger_s"][ev_idx]
    lo = trig - s.vhf_pretrigger_s
    hi = lo + s.vhf_samples / s.vhf_rate_hz
    counts = rng.poisson(p["n_src_mean"][ev_idx])
    row = np.repeat(np.arange(ev_idx.size), counts)
    q = ev_idx[row]
    branch = ~np.isnan(p["branch_t0_s"][q]) & (rng.random(q.size) < p["branch_share"][q])
    geo = {k: np.where(branch, p["branch_" + k][q], p["front_" + k][q]) for k in FRONT_FIELDS}
    travel = p["slant_m"][q] / c  # emission-to-arrival time, nearly constant in a window
    t_a = np.maximum(geo["t0_s"], lo[row] - travel)
    t_b = np.minimum(geo["t1_s"], hi[row] - travel)
    ok = t_b > t_a
    t_e = t_a + rng.random(q.size) * (t_b - t_a)
    path_m = (t_e - geo["t0_s"]) * geo["speed_m_per_s"]  # distance along the front
    # the simulator's frame: ground-arc x, y and altitude z; the instrument's: a curved
    # Earth (true radius for x/y/z, 4/3 effective radius for the elevation; _earth)
    arc = np.stack([geo[f"{k}0_m"] + geo[f"u{k}"] * path_m for k in "xyz"], axis=1)
    xyz = local_xyz_m(arc[:, 0], arc[:, 1], arc[:, 2])
    arrival = t_e + np.linalg.norm(xyz, axis=1) / c
    el = apparent_elevation_deg(np.hypot(arc[:, 0], arc[:, 1]), arc[:, 2])
    ok &= el >= 0.0  # below the radio horizon: not seen
    az = azimuth_deg(arc[:, 0], arc[:, 1])
    sig = s.angle_noise_deg
    el_n = np.clip(el + sig * rng.standard_normal(q.size), 0.0, 90.0)
    az_n = np.mod(az + sig / np.maximum(np.cos(np.radians(el)), 0.1)
                  * rng.standard_normal(q.size), 360.0)
    az_n = np.where(az_n >= 360.0, 0.0, az_n)
    received = 10.0 ** (p["vhf_peak_db"][q] / 10.0) * (1e5 / p["slant_m"][q]) ** 2
    power_db = (10.0 * np.log10(s.vhf_gain * received) - rng.exponential(6.0, q.size)
                + rng.standard_normal(q.size))
    xyz_n = xyz + s.xyz_noise_m * rng.standard_normal(xyz.shape)
    out = {"row": row, "t_s": arrival - trig[row], "azimuth_deg": az_n,
           "elevation_deg": el_n, "x_m": xyz_n[:, 0], "y_m": xyz_n[:, 1],
           "z_m": xyz_n[:, 2], "power_db": power_db}
    out = {k: v[ok] for k, v in out.items()}
    order = np.lexsort((out["t_s"], out["row"]))
    return {k: v[order] for k, v in out.items()}
