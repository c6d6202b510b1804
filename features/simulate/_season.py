"""Flashes and their pulses: where and when every pulse of a season happens.

A season is generated in blocks of about :data:`BLOCK_EVENTS` catalogued pulses, each
from its own random stream (``SeedSequence(seed, spawn_key=(block,))``), so the result
does not depend on how the writer chunks its output. Every block holds whole flashes.

Flash types (times from the flash start; geometry from the station at the origin, x
east, y north, z up):

- isolated narrow bipolar event: one pulse, alone in its flash.
- intracloud (IC) flash: optionally initiated by a positive narrow bipolar event (no other
  pulse within 0.5-2 ms); an upward negative leader (tip 1e5-1e6 m/s, tilted up to 25
  degrees) climbs to 11-14 km, then turns horizontal; trains of in-cloud leader pulses
  along it (up to 15 ms, trains 0.2 ms + Exp(2 ms) apart); energetic in-cloud pulses in
  its first 0.5-5 ms at 8-13 km; recoil events 30-400 ms into the flash along channels
  mapped earlier in the flash.
- cloud-to-ground (CG) flash (:mod:`._cgflash`): a train of initial-breakdown pulses,
  then a downward stepped leader from 4-7 km (tilted up to 30 degrees, one or two
  branches) with trains of pulses until it reaches the ground, its last step ~25 us
  before the first return stroke; subsequent strokes, recoil events 20-300 ms after the
  first stroke. Return strokes and initial-breakdown pulses are in every CG flash's
  records; they are catalogued only when ``class_mix`` asks for them. Margin
  stepped-leader pulses come from a dart-stepped leader retracing the channel 20-150 ms
  after the first stroke at 6e5-2e6 m/s (Rakov & Uman 2003, ch. 4: dart-stepped leaders
  ~1e6 m/s; from memory).

Leader pulse trains: 5-20 pulses 10-30 us apart, trains 0.2 ms + Exp(1 ms) apart (Rakov
& Uman 2003, ch. 4: interstep intervals 10-30 us for stepped leaders near the ground; from
memory). Flashes are 1 s + Exp(7 s) apart in storms of 150-600 flashes, storms 6-36 h
apart. Flash positions are uniform over the area of the annulus ``range_km`` (ground-arc
distances; the propagation times use the straight-line distance over a curved Earth,
:mod:`._earth`).
"""

from __future__ import annotations

import numpy as np

from ._cgflash import cg_flash
from ._classes import ALL_CLASSES, MARGIN_FRACTION
from ._earth import slant_distance_m
from ._flashes import (
    EIP,
    IB,
    NBE,
    PULSE_COLUMNS,
    REC,
    RS,
    SL,
    SOURCE_WEIGHT,
    concat,
    flash_xy,
    ic_flash,
    nbe_pulse,
)
from .dipole import SPEED_OF_LIGHT_M_PER_S, HeidlerCurrent

__all__ = ["BLOCK_EVENTS", "PULSE_COLUMNS", "SeasonClock", "block_quotas", "generate_block",
           "season_start_ns"]

BLOCK_EVENTS = 1000


def season_start_ns(year: int) -> int:
    """Start of a season (1 May, 14:00 UTC of ``year``), in ns since the Unix epoch."""
    return int(np.datetime64(f"{year}-05-01T14:00:00", "ns").astype(np.int64))


class SeasonClock:
    """Start times of successive flashes, in ns since the Unix epoch (storm by storm)."""

    def __init__(self, year: int, rng: np.random.Generator):
        self.now_ns = season_start_ns(year)
        self.rng = rng
        self.left_in_storm = int(rng.integers(150, 601))

    def next_flash_ns(self) -> int:
        """Start time of the next flash, in ns."""
        if self.left_in_storm == 0:
            self.now_ns += int(self.rng.uniform(6, 36) * 3600e9)
            self.left_in_storm = int(self.rng.integers(150, 601))
        self.left_in_storm -= 1
        self.now_ns += int((1.0 + self.rng.exponential(7.0)) * 1e9)
        return self.now_ns


def _largest_remainder(total: int, fractions: np.ndarray) -> np.ndarray:
    raw = total * fractions
    out = np.floor(raw).astype(np.int64)
    order = np.argsort(-(raw - out), kind="stable")
    out[order[: total - out.sum()]] += 1
    return out


def block_quotas(n_events: int, class_mix: dict) -> list[np.ndarray]:
    """Catalogued pulses per class for each block; the totals follow ``class_mix`` exactly.

    Returns
    -------
    list of ndarray, shape (6,)
        Counts in the order of :data:`ALL_CLASSES`, one array per block.
    """
    totals = _largest_remainder(n_events, np.array([class_mix[c] for c in ALL_CLASSES]))
    n_blocks = max(1, -(-n_events // BLOCK_EVENTS))
    edges = np.minimum(np.arange(n_blocks + 1) * BLOCK_EVENTS, n_events)
    cum = np.floor(edges[:, None] * totals[None, :] / max(n_events, 1) + 0.5).astype(np.int64)
    return [cum[b + 1] - cum[b] for b in range(n_blocks)]


# --------------------------------------------------------------------- geometry


def generate_block(s, quotas, rng, clock: SeasonClock):
    """Flashes holding exactly ``quotas`` catalogued pulses per class.

    Returns
    -------
    pulses : dict of str to ndarray
        One entry per :data:`PULSE_COLUMNS` (plus ``trigger_s``, ``arrival_s``,
        ``slant_m``, ``n_src_mean``), sorted by flash then time; ``flash`` indexes
        ``flash_start_ns``.
    flash_start_ns : ndarray of int64
        Start time of each flash of the block, ns since the Unix epoch.
    """
    q = {c: int(n) for c, n in zip(range(len(ALL_CLASSES)), quotas, strict=True)}
    n_nbe_margin = int(rng.binomial(q[NBE], MARGIN_FRACTION["narrow_bipolar"]))
    n_rec_margin = int(rng.binomial(q[REC], MARGIN_FRACTION["recoil"]))
    n_dart = int(rng.binomial(q[SL], MARGIN_FRACTION["stepped_leader"]))

    def spec(kind, **kw):
        out = dict(kind=kind, n_eip=0, nbe_first=False, n_nbe_in=0, k_sl=0, k_sl_dart=0,
                   k_ib=0, k_rs=0, n_rec=0, n_rec_margin=0)
        out.update(kw)
        return out

    specs = []
    left = q[EIP]
    while left > 0:
        k = min(left, int(rng.choice([1, 2, 3], p=[0.6, 0.3, 0.1])))
        specs.append(spec("ic", n_eip=k))
        left -= k
    for _ in range(n_nbe_margin):  # inside an upward leader, like an energetic pulse
        if specs and rng.random() < 0.5:
            specs[int(rng.integers(len(specs)))]["n_nbe_in"] += 1
        else:
            specs.append(spec("ic", n_nbe_in=1))
    n_normal = q[NBE] - n_nbe_margin
    initiators = int((rng.random(n_normal) < 0.35).sum())
    ic_free = [sp for sp in specs if not sp["nbe_first"]]
    for i in range(initiators):
        if i < len(ic_free):
            ic_free[i]["nbe_first"] = True
        else:
            specs.append(spec("ic", nbe_first=True))
    specs += [spec("nbe") for _ in range(n_normal - initiators)]
    left = q[SL] - n_dart
    while n_dart > 0:  # margin stepped-leader pulses: dart-stepped leaders in CG flashes
        k = min(n_dart, int(rng.integers(1, 4)))
        specs.append(spec("cg", k_sl_dart=k))
        n_dart -= k
    for sp in specs:
        if sp["kind"] == "ic" and left > 0:
            sp["k_sl"] = min(left, int(rng.poisson(3.0)))
            left -= sp["k_sl"]
    while left > 0:
        k = min(left, int(rng.integers(6, 31)))
        specs.append(spec("cg", k_sl=k))
        left -= k
    for cls, key, first_k, more_k in ((RS, "k_rs", (1, 4), (1, 5)), (IB, "k_ib", (1, 6), (2, 9))):
        left = q[cls]  # extra classes: in the CG flashes there are, then in more of them
        for sp in specs:
            if sp["kind"] == "cg" and left > 0:
                sp[key] = min(left, int(rng.integers(*first_k)))
                left -= sp[key]
        while left > 0:
            k = min(left, int(rng.integers(*more_k)))
            specs.append(spec("cg", **{key: k}))
            left -= k
    hosts = [sp for sp in specs if sp["kind"] in ("ic", "cg")]
    if q[REC] and not hosts:
        hosts = [spec("ic") for _ in range(-(-q[REC] // 4))]
        specs += hosts
    if q[REC]:
        w = np.array([2.0 if sp["kind"] == "ic" else 1.0 for sp in hosts])
        w /= w.sum()
        for key, n in (("n_rec", q[REC] - n_rec_margin), ("n_rec_margin", n_rec_margin)):
            for sp, k in zip(hosts, rng.multinomial(n, w), strict=True):
                sp[key] = int(k)
    pieces, starts = [], []
    sl_short = 0
    for i in rng.permutation(len(specs)):
        sp = specs[i]
        if sp["kind"] == "nbe":
            rows = nbe_pulse(rng, flash_xy(rng, s.range_km), 0.0, rng.random() < 0.7,
                              margin=False)
            rows["catalogued"][:] = True
            got = [rows]
        elif sp["kind"] == "ic":
            got = ic_flash(rng, s, sp)
        else:
            got = cg_flash(rng, s, sp)
        n_sl = sum(int((p["catalogued"] & (p["class_index"] == SL)).sum()) for p in got)
        sl_short += sp["k_sl"] + sp["k_sl_dart"] - n_sl
        _append_flash(got, pieces, starts, clock)
    while sl_short > 0:  # leaders too short for their share: more CG flashes
        got = cg_flash(rng, s, spec("cg", k_sl=sl_short))
        sl_short -= sum(int((p["catalogued"] & (p["class_index"] == SL)).sum()) for p in got)
        _append_flash(got, pieces, starts, clock)
    pulses = concat(pieces)
    order = np.lexsort((pulses["t_s"], pulses["flash"]))
    pulses = {k: v[order] for k, v in pulses.items()}
    _add_timing(pulses, s)
    return pulses, np.array(starts, np.int64)


def _append_flash(got, pieces, starts, clock):
    if not got:
        return
    flash = len(starts)
    starts.append(clock.next_flash_ns())
    for p in got:
        p["flash"] = np.full(p["class_index"].size, flash)
        pieces.append(p)


def half_rise_s(rise_s, decay_s):
    """Time (s) at which a unit Heidler current first reaches half its peak (bisection)."""
    cur = HeidlerCurrent(1.0, rise_s, decay_s)
    lo, hi = np.zeros(np.shape(rise_s)), cur.peak_time_s
    for _ in range(40):
        mid = 0.5 * (lo + hi)
        below = cur.current_a(mid) < 0.5
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    return 0.5 * (lo + hi)


def _add_timing(p, s):
    """Arrival, trigger and the mean number of sources of each pulse.

    The station triggers on the rising edge: the trigger is the arrival of the front
    start plus the time its current takes to reach half its peak, rounded to 1 ns.
    """
    slant = slant_distance_m(np.hypot(p["x_m"], p["y_m"]), p["z0_m"])  # curved Earth
    p["slant_m"] = slant
    p["arrival_s"] = p["t_s"] + slant / SPEED_OF_LIGHT_M_PER_S
    p["trigger_s"] = np.round((p["arrival_s"] + half_rise_s(p["rise_s"], p["decay_s"]))
                              * 1e9) / 1e9
    mix = np.array([s.class_mix[c] for c in ALL_CLASSES])
    norm = s.sources_per_event / float(np.sum(mix * SOURCE_WEIGHT[:mix.size]))
    p["n_src_mean"] = p["src_weight"] * norm
    # classes without a plateau have NaN there; keep the VHF simple downstream
    p["plateau_db"] = np.where(np.isnan(p["plateau_db"]), -np.inf, p["plateau_db"])
