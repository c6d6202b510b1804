"""Composing a scene's catalogued records: the field stream, VHF, mapped sources,
distant sferics and the physical truth of each catalogued pulse."""

from __future__ import annotations

import numpy as np

from . import _physics as ph
from . import _vhf
from ._classes import KINDS
from ._flashes import pulses
from ._instrument import Stream, Windows, digitize, merge_spans

__all__ = ["Composer", "segments", "take", "truth"]


def segments(p, idx=None):
    """The current segments of a pulse table (rows ``idx``)."""
    sel = (lambda a: a) if idx is None else (lambda a: a[idx])
    return ph.Segments(**{k: sel(p[k]) for k in ph.Segments.FIELDS})


def take(p, idx):
    """Rows ``idx`` of a pulse table."""
    return {k: v[idx] for k, v in p.items()}


class Composer:
    """Record composition for :class:`~._season.Season` (needs its settings,
    ``rng``, ``fs``, ``n_rec``, ``n_pre`` and for VHF ``fv``, ``nv_rec``)."""

    def _compose(self, items):
        """Records, VHF and sources of the catalogued pulses of a batch of scenes.

        ``items``: one dict per scene with ``scene, p, gi`` (catalogued rows of the
        scene's pulse table ``p``), ``base`` (offset of ``p`` in the batch),
        ``trig`` (trigger samples), ``wins`` (field windows), ``t0_ns``, ``flash``.
        The scenes share one stream, each at its own offset of 2**32 samples: in
        the gaps the RC state dies out, and for DC coupling a step after each
        scene's last record takes its held field back to zero.
        """
        s, rng, fs = self.s, self.rng, self.fs
        big = np.int64(1) << 32
        wins, recs, vstart, bursts, cand = [], [], [], [], []
        for k, it in enumerate(items):
            p, gi, trig = it["p"], it["gi"], it["trig"]
            w = it["wins"]
            if s["field_decay_s"] is None:
                end = int(trig.max()) - self.n_pre + self.n_rec + 1
                w = Windows.join([w, Windows.steps(np.array([end]), np.array([-w.final.sum()]))])
            w.start = w.start + k * big
            wins.append(w)
            recs.append(trig - self.n_pre + k * big)
            t_rel_ns = np.round(trig * (1e9 / fs) + s["field_delay_s"] * 1e9).astype(np.int64)
            t_stamp = t_rel_ns / 1e9                       # time stamp on the scene clock
            lo, hi = self._record_intervals(trig, t_stamp)
            arrive = p["t0_s"] + np.sqrt(p["x0_m"] ** 2 + p["y0_m"] ** 2
                                         + p["z0_m"] ** 2) / ph.C
            near = _inside(arrive, lo - 200e-6, hi)       # bursts come <= 150 us after
            b = _vhf.bursts(take(p, near), rng, s["vhf_gain"])
            keep = _inside(b["t_s"], lo, hi)
            b = {key: v[keep] for key, v in b.items()}
            b["offset"] = np.full(b["t_s"].size, k * big)
            bursts.append(b)
            if s["vhf_kind"]:
                vstart.append(np.round((t_stamp - s["vhf_pretrigger_s"] - s["vhf_delay_s"])
                                       * self.fv).astype(np.int64) + k * big)
            cand.append({"time_ns": it["t0_ns"] + t_rel_ns,
                         "label": np.array(KINDS)[p["kind"][gi]],
                         "ftype": self._ftype[gi + it["base"]],
                         "accept": self._accept[gi + it["base"]],
                         "scene": np.full(gi.size, it["scene"]),
                         "flash": np.full(gi.size, it["flash"]),
                         "src": self._sources(b, trig, t_stamp)})
        out = {key: np.concatenate([c[key] for c in cand]) for key in cand[0] if key != "src"}
        out["src"] = [x for c in cand for x in c["src"]]
        stream = Stream(Windows.join(wins), np.concatenate(recs), self.n_rec)
        x = stream.sum_windows(with_final=True)
        if s["field_decay_s"] is not None:
            x = stream.rc_highpass(x, s["field_decay_s"], fs)
        at = _span_index(stream.record_spans())
        x[at] += self._noise(at.size)
        stored = digitize(x, units=s["field_units"], scale=s["field_scale_v_per_m"],
                          full_scale=s["field_full_scale_v_per_m"], sign=s["field_sign"])
        out["field"] = stream.records(stored)
        if s["vhf_kind"]:
            b = {key: np.concatenate([x[key] for x in bursts]) for key in bursts[0]}
            out["vhf"] = self._vhf(b, np.concatenate(vstart))
        return out

    def _record_intervals(self, trig, t_stamp):
        """Times (scene clock) covered by the field and VHF records, 10 us earlier on."""
        s = self.s
        lo = [(trig - self.n_pre) / self.fs]
        hi = [(trig - self.n_pre + self.n_rec) / self.fs]
        if s["vhf_kind"]:
            v0 = t_stamp - s["vhf_pretrigger_s"] - s["vhf_delay_s"]
            lo.append(v0)
            hi.append(v0 + s["vhf_record_s"])
        lo, hi = np.concatenate(lo) - 10e-6, np.concatenate(hi)
        order = np.argsort(lo)
        return lo[order], np.maximum.accumulate(hi[order])

    def _noise(self, n):
        """Receiver noise, V/m: white, plus half as much slow noise (values drawn
        every 10 us and interpolated linearly; our choice)."""
        sig = self.s["field_noise_v_per_m"]
        if n == 0 or sig == 0:
            return np.zeros(n)
        rng = self.rng
        step = max(1, int(round(10e-6 * self.fs)))
        knots = rng.standard_normal(n // step + 2, dtype=np.float32)
        slow = np.interp(np.arange(n) / step, np.arange(knots.size), knots)
        return sig * rng.standard_normal(n, dtype=np.float32) + (0.5 * sig) * slow

    def _sferic_pulses(self, rec_start):
        """Distant return strokes arriving at random times in and before the records."""
        s, rng, fs = self.s, self.rng, self.fs
        lo, hi, _ = merge_spans(rec_start - self.n_rec, rec_start + self.n_rec)
        total = float((hi - lo).sum())
        n = rng.poisson(s["sferic_rate_hz"] * total / fs)
        if n == 0:
            return None
        u = np.sort(rng.uniform(0, total, n))
        cum = np.concatenate([[0], np.cumsum(hi - lo)])
        k = np.searchsorted(cum, u, side="right") - 1
        t_arr = (lo[k] + (u - cum[k])) / fs
        d = np.exp(rng.uniform(np.log(3e5), np.log(2e6), n))
        a = rng.uniform(0, 2 * np.pi, n)
        start = np.column_stack([d * np.sin(a), d * np.cos(a), np.zeros(n)])
        return pulses("sferic", rng, start, [0.0, 0.0, 1.0], t_arr - d / ph.C, 1.0)

    def _vhf(self, b, start):
        """VHF records starting at the (offset) VHF samples ``start``."""
        s, fv = self.s, self.fv
        wv = _vhf.vhf_windows(b, fv)
        wv.start = wv.start + b["offset"]
        stream = Stream(wv, start, self.nv_rec)
        sig = stream.sum_windows(with_final=False)
        out = np.zeros(sig.size, np.float32)
        kw = dict(kind=s["vhf_kind"], rate_hz=fv, band_hz=s["vhf_band_hz"],
                  floor=s["vhf_floor"], full_scale=s["vhf_full_scale"], rng=self.rng)
        spans = stream.record_spans()
        if s["vhf_kind"] == "power":                      # sample by sample: all at once
            at = _span_index(spans)
            out[at] = _vhf.detect(sig[at], **kw)
        else:                                             # band-limited: span by span
            for lo, hi in spans:
                out[lo:hi] = _vhf.detect(sig[lo:hi], **kw)
        return stream.records(out)

    def _sources(self, b, trig, t_stamp):
        s = self.s
        if not s["sources"] or self.rng.random() < s["map_outage_fraction"]:
            return [None] * trig.size
        m = _vhf.map_sources(b, self.rng, floor=s["vhf_floor"], snr=s["map_snr"],
                             max_range_m=s["map_max_range_m"],
                             angle_noise_deg=s["map_angle_noise_deg"],
                             time_noise_s=s["map_time_noise_s"])
        lo = np.searchsorted(m["t_s"], (trig - self.n_pre) / self.fs)
        hi = np.searchsorted(m["t_s"], (trig - self.n_pre + self.n_rec) / self.fs)
        out = []
        for j in range(trig.size):
            part = {k: v[lo[j]:hi[j]] for k, v in m.items()}
            part["t_s"] = part["t_s"] - t_stamp[j]
            out.append(part)
        return out


def truth(p):
    """Physical truth of the pulses ``p`` (one row each)."""
    seg = segments(p)
    nodes = ph.segment_nodes(seg, vertical_moment=True)
    span = nodes["tau_s"][:, -1] + 10 * seg.tau2_s
    grid = np.linspace(0, 1, 600)
    row = np.repeat(np.arange(seg.n), grid.size)
    t = (span[:, None] * grid[None, :]).ravel()
    m = ph.evaluate(nodes, row, t).reshape(seg.n, grid.size)
    at = np.argmax(np.abs(m), axis=1)
    g_max, _ = ph.shape_peak(seg.tau1_s, seg.tau2_s)
    q = (seg.tau2_s - seg.tau1_s) ** 2 / seg.tau2_s           # time integral of the shape
    lam = seg.atten_m
    eff = np.where(np.isfinite(lam), lam * (1 - np.exp(-seg.length_m / np.where(
        np.isfinite(lam), lam, 1.0))), seg.length_m)
    sign_up = np.sign(seg.polarity * seg.uz)
    return {"source_altitude_m": seg.z0_m,
            "horizontal_distance_m": np.hypot(seg.x0_m, seg.y0_m),
            "azimuth_deg": np.degrees(np.arctan2(seg.x0_m, seg.y0_m)) % 360.0,
            "current_moment_peak_a_m": m[np.arange(seg.n), at],
            "charge_moment_change_c_m": seg.polarity * seg.current_a / g_max * q * eff * seg.uz,
            "peak_current_a": sign_up * seg.current_a,
            "velocity_east_m_per_s": p["ve_m_per_s"], "velocity_north_m_per_s": p["vn_m_per_s"],
            "velocity_up_m_per_s": p["vu_m_per_s"]}


def _inside(t, lo, hi):
    """Whether each time lies in one of the intervals (``lo`` sorted, ``hi`` running max)."""
    k = np.searchsorted(lo, t, side="right") - 1
    return (k >= 0) & (t <= hi[np.maximum(k, 0)])


def _span_index(spans):
    """Buffer positions of all the ``(lo, hi)`` spans, concatenated."""
    lo = np.array([a for a, _ in spans], np.int64)
    n = np.array([b - a for a, b in spans], np.int64)
    return np.repeat(lo - (np.cumsum(n) - n), n) + np.arange(int(n.sum()))
