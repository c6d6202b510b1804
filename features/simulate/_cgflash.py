"""Cloud-to-ground flashes: initial breakdown, stepped leader, return strokes, recoils.

Times from the flash start, geometry as in :mod:`._flashes`. A negative CG flash here:

- **initial breakdown** (Rakov & Uman 2003, ch. 4; from memory): a train of 3-12
  bipolar pulses 70-130 us apart in the first ~1.5 ms, at the tip of the starting leader
  (4-7 km), their current upward-directed (negative charge moving down), so their initial
  polarity is the return stroke's;
- **stepped leader** down to the ground (tilted up to 30 degrees, one or two branches):
  trains of steps from the end of the initial breakdown, and a last train of steps that
  reaches the ground, its last step 15-35 us (~25 us) before the first return stroke;
- **return strokes** (Rakov & Uman 2003, ch. 4 and 6; from memory): the first when the
  leader reaches the ground, TL/MTLE from the ground up the channel; then subsequent
  strokes 20-150 ms apart (interstroke intervals of tens of ms), one after the
  dart-stepped leader when the flash has one;
- **recoils** 20-300 ms after the first stroke along the leader channel, and margin
  stepped-leader pulses from a dart-stepped leader retracing the channel 20-150 ms after
  the first stroke at 6e5-2e6 m/s (dart-stepped leaders ~1e6 m/s; from memory).
"""

from __future__ import annotations

import numpy as np

from ._classes import SUBSEQUENT_STROKE, leader_speed_m_per_s
from ._flashes import (
    IB,
    RS,
    SL,
    Track,
    choose_catalogued,
    flash_xy,
    leader_pulses,
    pulse_rows,
    recoil_times,
    recoils,
    set_front,
    trains,
    unit_vector,
)

__all__ = ["cg_flash", "final_steps", "return_strokes"]

#: Interval between initial-breakdown pulses, s (Rakov & Uman 2003, ch. 4; from memory).
IB_INTERVAL_S = (70e-6, 130e-6)
#: Time from the last leader step to the first return stroke, s (~25 us).
LAST_STEP_S = (15e-6, 35e-6)
#: Interval between return strokes, s (tens of ms; Rakov & Uman 2003, ch. 4; from memory).
INTERSTROKE_S = (20e-3, 150e-3)


def _pick(rng, n, k):
    """Catalogue ``k`` of ``n`` pulses at random (a boolean mask)."""
    cat = np.zeros(n, bool)
    cat[rng.permutation(n)[:k]] = True
    return cat


def final_steps(rng, t_stroke, after):
    """Times (s) of the last train of leader steps, the last one ~25 us before the stroke.

    Steps 10-30 us apart (Rakov & Uman 2003, ch. 4; from memory), none earlier than
    ``after`` + 10 us.
    """
    n = int(rng.integers(5, 21))
    last = t_stroke - rng.uniform(*LAST_STEP_S)
    back = np.concatenate([[0.0], np.cumsum(rng.uniform(10e-6, 30e-6, n - 1))])
    times = (last - back)[::-1]
    return times[times > after + 10e-6]


def return_strokes(rng, track, times, first):
    """Return strokes at ``times`` (s) at the foot of ``track`` (its last vertex).

    ``first`` (bool array) marks first strokes (the others draw the subsequent-stroke
    ranges). The channel is vertical from the ground up to the leader's start height;
    the current is upward-directed (a negative CG flash lowers negative charge); the
    sources run back up the leader track at the stroke's speed.
    """
    n = times.size
    rows, _ = pulse_rows(n, RS, rng, t_s=times)
    sub = ~np.asarray(first, bool)
    for key, rng_range in SUBSEQUENT_STROKE.items():
        drawn = rng_range.draw(rng, n)
        rows[key] = np.where(sub, drawn, rows[key])
    ratio = rows["decay_length_m"] / rows["length_m"]
    height = float(track.v[0, 2])
    ground = track.v[-1]
    rows.update(x_m=np.full(n, ground[0]), y_m=np.full(n, ground[1]), z0_m=np.zeros(n),
                channel_direction=np.ones(n), length_m=np.full(n, height),
                decay_length_m=ratio * height)
    rows["peak_a"] = np.abs(rows["peak_a"])
    up = -(track.v[-1] - track.v[-2]) / np.linalg.norm(track.v[-1] - track.v[-2])
    speed = rows["speed_m_per_s"]
    set_front(rows, np.arange(n), np.broadcast_to(ground, (n, 3)),
              np.broadcast_to(up, (n, 3)), speed, times, times + track.s[-1] / speed)
    return rows


def _initial_breakdown(rng, track, times):
    rows = leader_pulses(rng, IB, track, times, -1.0)  # the channel grows down from the tip
    rows["peak_a"] = np.abs(rows["peak_a"])  # upward-directed: the stroke's polarity
    return rows


def cg_flash(rng, s, sp):
    """A cloud-to-ground flash holding the catalogued pulses asked for in ``sp``.

    ``sp`` keys used: ``k_sl``, ``k_sl_dart``, ``k_ib``, ``k_rs`` (catalogued pulses of
    each kind), ``n_rec``, ``n_rec_margin``.
    """
    xy = flash_xy(rng, s.range_km)
    v = float(leader_speed_m_per_s(rng, 1)[0])
    z0 = rng.uniform(4e3, 7e3)
    down = unit_vector(np.pi - np.radians(rng.uniform(0, 30)), rng.uniform(0, 2 * np.pi))
    p0 = np.array([xy[0], xy[1], z0])
    track = Track([p0, p0 + down * z0 / -down[2]], v, 0.0)
    branches = []
    for _ in range(int(rng.integers(1, 3))):
        frac = rng.uniform(0.2, 0.7)
        start = track.at(frac * track.s[-1])
        bdir = unit_vector(np.pi - np.radians(rng.uniform(30, 65)), rng.uniform(0, 2 * np.pi))
        blen = max((start[2] - 200.0) / -bdir[2] * rng.uniform(0.3, 0.9), 100.0)
        t0 = frac * track.s[-1] / v + rng.uniform(0, 0.5e-3)
        branches.append(Track([start, start + bdir * blen], v, t0))
    pieces = []
    k_ib = sp.get("k_ib", 0)
    n_ib = max(k_ib, int(rng.integers(3, 13)))
    t_ib = rng.uniform(20e-6, 100e-6) + np.concatenate(
        [[0.0], np.cumsum(rng.uniform(*IB_INTERVAL_S, n_ib - 1))])
    ib = _initial_breakdown(rng, track, t_ib)
    ib["catalogued"] = _pick(rng, n_ib, k_ib)
    pieces.append(ib)

    t_rs = track.t_end
    times, ids = trains(rng, t_ib[-1], t_rs - 0.3e-3)
    last = final_steps(rng, t_rs, times[-1] if times.size else t_ib[-1])
    ids = np.concatenate([ids, np.full(last.size, ids.max() + 1 if ids.size else 0)])
    times = np.concatenate([times, last])
    if times.size:
        sl = leader_pulses(rng, SL, track, times, "up-channel", branches)
        sl["catalogued"] = choose_catalogued(rng, ids, sp["k_sl"])
        pieces.append(sl)
    strokes = [t_rs]
    if sp["k_sl_dart"]:  # a dart-stepped leader down the old channel before a later stroke
        v_d = float(np.exp(rng.uniform(np.log(6e5), np.log(2e6))))
        dart = Track(track.v, v_d, t_rs + rng.uniform(*INTERSTROKE_S))
        times, ids = trains(rng, dart.t0 + 0.05e-3, dart.t_end - 0.1e-3, 0.3e-3)
        k = min(sp["k_sl_dart"], times.size)
        if k:
            margin = np.ones(times.size, bool)
            dsl = leader_pulses(rng, SL, dart, times, "up-channel", margin=margin)
            dsl["catalogued"] = choose_catalogued(rng, ids, k)
            pieces.append(dsl)
        strokes.append(dart.t_end)
    k_rs = sp.get("k_rs", 0)
    n_more = max(k_rs - len(strokes), int(rng.choice(4, p=[0.3, 0.3, 0.25, 0.15])))
    for _ in range(n_more):
        strokes.append(strokes[-1] + rng.uniform(*INTERSTROKE_S))
    first = np.arange(len(strokes)) == 0
    rs = return_strokes(rng, track, np.array(strokes), first)
    rs["catalogued"] = _pick(rng, len(strokes), k_rs)
    pieces.append(rs)
    n_rec = sp["n_rec"] + sp["n_rec_margin"]
    if n_rec:
        cat_sl = [p for p in pieces if p["class_index"][0] == SL]
        anchors = (cat_sl[0]["t_s"][cat_sl[0]["catalogued"]] * v) if cat_sl else np.zeros(0)
        margin = rng.permutation(np.arange(n_rec) < sp["n_rec_margin"])
        pieces.append(recoils(rng, track, recoil_times(rng, n_rec, t_rs + 20e-3, t_rs + 300e-3),
                              anchors, margin))
    return pieces
