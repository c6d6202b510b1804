"""Scenes: an isolated narrow bipolar event, an intracloud flash or a negative
cloud-to-ground flash, as a table of pulses with times, places and directions.

Times are seconds from the scene's start; places are metres east, north and up
of the station (flat ground). The charge structure is the normal tripole
(main negative charge at ~5-7 km, upper positive above ~9 km; Williams 1989 and
Krehbiel 1986 via Rakov & Uman 2003, ch. 3, from memory).

What each scene holds (all numbers from memory unless "our choice"):

- ``nbe``: one narrow bipolar event; 80 % at 7-15 km (fast positive breakdown
  running down between the main negative and upper positive charge: a
  downward-directed current, positive in the physics convention), 20 % at
  15-20 km running up (negative in the physics convention) (Smith et al. 1999;
  Wu et al. 2012; Rison et al. 2016). 30 % of them start an intracloud flash
  0.2-2 ms later (Rison et al. 2016).
- ``ic``: intracloud flash from 6-8.5 km: a few initial-breakdown pulses, an
  upward negative leader (1e5-1e6 m/s) whose step pulses come 10-50 us apart
  during the first 1.5 ms and 50-200 us apart later, then horizontal extension
  at the upper level; optionally 1-3 energetic in-cloud pulses on the upward
  leader at 8-13 km; late recoil leaders (K-changes) running back toward the
  origin along the earlier channels, 3-12 of them, sometimes in quick
  succession.
- ``cg``: negative cloud-to-ground flash from 4.5-7 km: a train of 3-10
  initial-breakdown pulses (20-200 us apart) with fast sub-pulses, a stepped
  leader descending in 10-40 ms (sparse steps, then a 1-2 ms train 10-50 us
  apart near the ground), the first return stroke 15-35 us after the last
  step, 0-6 subsequent strokes 20-150 ms apart (some after dart-stepped
  leaders), and 4-15 recoil leaders (K-changes) in the cloud between and after
  the strokes (Rakov & Uman 2003, ch. 9: several per interstroke interval).
"""

from __future__ import annotations

import numpy as np

from ._classes import KIND, draw

__all__ = ["nbe_scene", "ic_scene", "cg_scene", "concat", "pulses", "PULSE_FIELDS", "FTYPES"]

MS = 1e-3
US = 1e-6
KM = 1e3

PULSE_FIELDS = ("kind", "x0_m", "y0_m", "z0_m", "ux", "uy", "uz", "length_m",
                "speed_m_per_s", "atten_m", "polarity", "current_a", "tau1_s", "tau2_s",
                "t0_s", "vhf_dbw", "n_bursts", "burst_tau_s", "vhf_span_s",
                "ve_m_per_s", "vn_m_per_s", "vu_m_per_s", "path_m", "ftype")

#: ``ftype`` codes: the kind of flash a pulse belongs to.
FTYPES = ("nbe", "ic", "cg")


def _unit(v):
    return v / np.linalg.norm(v, axis=-1, keepdims=True)


def _tilted(rng, n, down: bool, max_tilt_deg: float):
    """Unit vectors within ``max_tilt_deg`` of the vertical, down or up."""
    tilt = np.radians(rng.uniform(0.0, max_tilt_deg, n))
    az = rng.uniform(0.0, 2 * np.pi, n)
    uz = np.cos(tilt) * (-1.0 if down else 1.0)
    return np.column_stack([np.sin(tilt) * np.sin(az), np.sin(tilt) * np.cos(az), uz])


def _col(v, n):
    a = np.asarray(v)
    return a.astype(float) if a.shape == (n,) else np.full(n, float(a.reshape(-1)[0]))


def pulses(kind, rng, start, direction, t0, polarity, *, lead_v=None, **override):
    """A pulse table of one kind: ``start`` (n, 3) m, ``direction`` (n, 3), ``t0`` (n,) s.

    ``lead_v`` (n, 3) is the velocity reported as truth (the leader's for leader
    pulses); by default the wave's own velocity.
    """
    start = np.atleast_2d(np.asarray(start, float))
    n = start.shape[0]
    w = draw(kind, rng, n, **({"first": override.pop("first")} if "first" in override else {}))
    w.update(override)
    d = _unit(np.atleast_2d(np.asarray(direction, float)) * np.ones((n, 1)))
    out = {"kind": np.full(n, KIND[kind]),
           "x0_m": start[:, 0], "y0_m": start[:, 1], "z0_m": start[:, 2],
           "ux": d[:, 0], "uy": d[:, 1], "uz": d[:, 2],
           "polarity": _col(polarity, n), "t0_s": _col(t0, n)}
    for k in ("length_m", "speed_m_per_s", "atten_m", "current_a", "tau1_s", "tau2_s",
              "vhf_dbw", "n_bursts", "burst_tau_s", "vhf_span_s"):
        out[k] = _col(w[k], n)
    lv = d * out["speed_m_per_s"][:, None] if lead_v is None else np.broadcast_to(
        np.asarray(lead_v, float), (n, 3))
    out["ve_m_per_s"], out["vn_m_per_s"], out["vu_m_per_s"] = lv[:, 0], lv[:, 1], lv[:, 2]
    out["path_m"] = out["length_m"].copy()
    out["ftype"] = np.full(n, -1)
    if kind == "recoil":
        out["lead_speed"] = w["lead_speed_m_per_s"]
    return out


def _recoils(rng, start, origin, t0):
    """Recoil leaders from ``start`` back toward ``origin`` along an old channel."""
    dirs = _unit(origin[None, :] - start)
    rec = pulses("recoil", rng, start, dirs, t0, -1.0)
    path = np.linalg.norm(origin[None, :] - start, axis=1)
    speed = rec.pop("lead_speed")
    v = dirs * speed[:, None]
    rec["ve_m_per_s"], rec["vn_m_per_s"], rec["vu_m_per_s"] = v[:, 0], v[:, 1], v[:, 2]
    rec["path_m"] = path
    rec["length_m"] = np.minimum(rec["length_m"], path)
    rec["vhf_span_s"] = np.minimum(path / speed, 150 * US)
    return rec


def concat(tables):
    """Concatenate pulse tables and sort them by start time."""
    tables = [t for t in tables if t and len(t["kind"])]
    if not tables:
        return {k: np.zeros(0) for k in PULSE_FIELDS}
    out = {k: np.concatenate([t[k] for t in tables]) for k in PULSE_FIELDS}
    order = np.argsort(out["t0_s"], kind="stable")
    return {k: v[order] for k, v in out.items()}


def _shift(table, dt):
    table = dict(table)
    table["t0_s"] = table["t0_s"] + dt
    return table


def _parts(rng, parent):
    """1-3 fast sub-pulses riding on each initial-breakdown pulse."""
    n_each = rng.integers(1, 4, len(parent["kind"]))
    idx = np.repeat(np.arange(len(n_each)), n_each)
    transit = parent["length_m"][idx] / parent["speed_m_per_s"][idx]
    frac = rng.uniform(0.0, 0.7, idx.size)
    d = np.column_stack([parent["ux"][idx], parent["uy"][idx], parent["uz"][idx]])
    start = np.column_stack([parent["x0_m"][idx], parent["y0_m"][idx], parent["z0_m"][idx]]) \
        + d * (frac * parent["length_m"][idx])[:, None]
    return pulses("part", rng, start, d, parent["t0_s"][idx] + frac * transit,
                  parent["polarity"][idx],
                  current_a=parent["current_a"][idx] * rng.uniform(0.08, 0.3, idx.size))


def _intervals(rng, t_from, t_to, lo, hi):
    """Times from ``t_from`` (included) to before ``t_to``, gaps uniform in [lo, hi]."""
    if t_to <= t_from:
        return np.zeros(0)
    n = int((t_to - t_from) / lo) + 2
    t = t_from + np.concatenate([[0.0], np.cumsum(rng.uniform(lo, hi, n))])
    return t[t < t_to]


def _step_times(rng, t_start, t_end, train_s, dense=(10 * US, 50 * US),
                sparse=(50 * US, 200 * US), train_at_end=True):
    """Step times: sparse intervals, with a dense train at one end."""
    if train_at_end:
        cut = max(t_start, t_end - train_s)
        a = _intervals(rng, t_start, cut, *sparse)
        b = _intervals(rng, cut if a.size == 0 else max(cut, a[-1] + dense[0]), t_end, *dense)
    else:
        cut = min(t_end, t_start + train_s)
        a = _intervals(rng, t_start, cut, *dense)
        b = _intervals(rng, cut if a.size == 0 else max(cut, a[-1] + dense[0]), t_end, *sparse)
    return np.concatenate([a, b])


def _leader_steps(rng, origin, direction, speed, t_start, times, *, step_dir_sign, scale=None):
    """Step pulses of a leader moving from ``origin`` along ``direction`` at ``speed``.

    Each step launches a current wave back along the channel (``step_dir_sign``
    = -1) from the tip; the current flows along the wave (polarity +1: charge of
    the leader's sign moved toward the tip).
    """
    tip = origin[None, :] + direction[None, :] * (speed * (times - t_start))[:, None]
    back = step_dir_sign * direction
    p = pulses("stepped_leader", rng, tip, back, times, 1.0,
               lead_v=direction * speed)
    if scale is not None:
        p["current_a"] = p["current_a"] * scale
    done = speed * (times - t_start)                      # channel made so far
    p["length_m"] = np.maximum(np.minimum(p["length_m"], done), 10.0)
    return p, tip


def nbe_scene(rng, centre_xy):
    """An isolated narrow bipolar event (sometimes the start of an IC flash)."""
    xy = centre_xy + rng.normal(0.0, 3 * KM, 2)
    high = rng.random() < 0.2
    z = rng.uniform(15 * KM, 20 * KM) if high else rng.uniform(7 * KM, 15 * KM)
    d = _tilted(rng, 1, down=not high, max_tilt_deg=25.0)
    p = pulses("narrow_bipolar", rng, [[xy[0], xy[1], z]], d, [0.0], 1.0)
    p["ftype"][:] = 0
    tables = [p]
    if not high and rng.random() < 0.3 and z - p["length_m"][0] < 9.5 * KM:
        end = np.array([xy[0], xy[1], z]) + d[0] * p["length_m"][0]
        ic = ic_scene(rng, end[:2], origin_z=max(end[2], 6 * KM), exact_xy=True)
        tables.append(_shift(ic, rng.uniform(0.2 * MS, 2 * MS)))
    return concat(tables)


def ic_scene(rng, centre_xy, *, eip=False, origin_z=None, exact_xy=False):
    """An intracloud flash; ``eip`` adds 1-3 energetic in-cloud pulses."""
    xy = np.asarray(centre_xy, float) + (0.0 if exact_xy else rng.normal(0.0, 3 * KM, 2))
    z0 = origin_z if origin_z is not None else (
        rng.uniform(7.5 * KM, 9 * KM) if eip else rng.uniform(6 * KM, 8.5 * KM))
    origin = np.array([xy[0], xy[1], z0])
    tables = []
    # initial breakdown: upward negative breakdown, current downward (polarity -1)
    n_ib = rng.integers(2, 7)
    t_ib = np.cumsum(rng.uniform(40 * US, 250 * US, n_ib)) - 40 * US
    up = _tilted(rng, 1, down=False, max_tilt_deg=30.0)[0]
    v_up_time = rng.uniform(5 * MS, 20 * MS)
    z_top = max(rng.uniform(9.5 * KM, 12.5 * KM), z0 + 1.5 * KM)
    path = (z_top - z0) / up[2]
    v_lead = path / v_up_time                               # 1e5-1e6 m/s
    ib_start = origin + np.outer(v_lead * t_ib, up)
    ib = pulses("initial_breakdown", rng, ib_start, up, t_ib, -1.0, lead_v=up * v_lead)
    ib["current_a"] *= rng.uniform(0.3, 0.8, n_ib)
    tables += [ib, _parts(rng, ib)]
    # the upward negative leader's steps: a dense train in the first 1.5 ms
    times = _step_times(rng, t_ib[-1] + 20 * US, v_up_time, 1.5 * MS, train_at_end=False)
    steps, _ = _leader_steps(rng, origin, up, v_lead, 0.0, times, step_dir_sign=-1.0,
                             scale=rng.uniform(0.5, 1.2))
    tables.append(steps)
    if eip:
        n_e = rng.integers(1, 4)
        t_lo = max((8 * KM - z0) / (v_lead * up[2]), 0.3 * MS)
        t_hi = min((13 * KM - z0) / (v_lead * up[2]), 5 * MS, v_up_time)
        t_e = np.sort(rng.uniform(t_lo, max(t_hi, t_lo + 0.2 * MS), n_e))
        start = origin + np.outer(v_lead * t_e, up)
        tables.append(pulses("energetic_in_cloud", rng, start, up, t_e, -1.0))
    # horizontal extension at the upper level: sparse, weaker steps
    top = origin + up * path
    h_dir = _unit(np.append(rng.normal(size=2), 0.0))
    h_time = rng.uniform(30 * MS, 150 * MS)
    h_speed = rng.uniform(0.5e5, 2e5)
    h_times = v_up_time + _step_times(rng, 0.0, h_time, 0.0, sparse=(0.3 * MS, 1.5 * MS))
    h_steps, _ = _leader_steps(rng, top, h_dir, h_speed, v_up_time, h_times,
                               step_dir_sign=-1.0, scale=0.4)
    tables.append(h_steps)
    # positive leader in the main negative charge (mapped weakly): sources only
    p_dir = _unit(np.append(rng.normal(size=2), -rng.uniform(0.0, 0.25)))
    p_len = rng.uniform(3 * KM, 8 * KM)
    end_t = v_up_time + h_time
    n_pos = int(end_t / rng.uniform(2 * MS, 5 * MS))
    t_pos = np.sort(rng.uniform(0.5 * MS, end_t, n_pos))
    pos_pts = origin + np.outer(p_len * t_pos / end_t, p_dir)
    ghost = pulses("part", rng, pos_pts, p_dir, t_pos, 1.0, current_a=0.0,
                   vhf_dbw=rng.uniform(-5.0, 8.0, n_pos))
    tables.append(ghost)
    # recoil leaders, late, back toward the origin along earlier channels
    n_r = rng.integers(3, 13)
    t_r = np.sort(rng.uniform(v_up_time + 15 * MS, end_t, n_r))
    reps = rng.integers(1, 4, n_r)                          # quick successions
    t_r = np.repeat(t_r, reps) + np.concatenate(
        [np.cumsum(np.r_[0.0, rng.uniform(60 * US, 400 * US, k - 1)]) for k in reps])
    n_r = t_r.size
    along_pos = rng.random(n_r) < 0.7
    f = rng.uniform(0.5, 1.0, n_r)
    s_pos = origin + np.outer(f * p_len, p_dir)
    s_up = origin + np.outer(f * path, up)
    start = np.where(along_pos[:, None], s_pos, s_up)
    tables.append(_recoils(rng, start, origin, t_r))
    out = concat(tables)
    out["ftype"][:] = 1
    return out


def cg_scene(rng, centre_xy):
    """A negative cloud-to-ground flash."""
    xy = np.asarray(centre_xy, float) + rng.normal(0.0, 3 * KM, 2)
    z0 = rng.uniform(4.5 * KM, 7 * KM)
    origin = np.array([xy[0], xy[1], z0])
    down = _tilted(rng, 1, down=True, max_tilt_deg=30.0)[0]
    path = z0 / -down[2]
    t_leader = rng.uniform(10 * MS, 40 * MS)
    v_lead = path / t_leader
    tables = []
    # initial breakdown: downward negative breakdown, current upward (polarity -1)
    n_ib = rng.integers(3, 11)
    t_ib = np.cumsum(rng.uniform(20 * US, 200 * US, n_ib)) - 20 * US
    ib = pulses("initial_breakdown", rng, origin + np.outer(v_lead * t_ib, down), down, t_ib,
                -1.0, lead_v=down * v_lead)
    ib["current_a"] *= np.where(np.arange(n_ib) < 3, rng.uniform(0.6, 1.0, n_ib),
                                rng.uniform(0.2, 0.6, n_ib))
    tables += [ib, _parts(rng, ib)]
    # stepped leader: sparse steps, then a dense train over the last 1-2 ms
    t_rs = t_leader
    last_step = t_rs - rng.uniform(15 * US, 35 * US)
    times = _step_times(rng, t_ib[-1] + 100 * US, last_step, rng.uniform(1 * MS, 2 * MS))
    times = np.append(times[times < last_step], last_step)
    z_tip = z0 + down[2] * v_lead * times
    near = np.clip(1.0 - z_tip / z0, 0.0, 1.0)
    steps, _ = _leader_steps(rng, origin, down, v_lead, 0.0, times, step_dir_sign=-1.0,
                             scale=0.4 + 0.9 * near ** 2)   # larger near ground (our choice)
    tables.append(steps)
    ground = origin + down * path
    ground[2] = 0.0
    # return strokes: up the leader channel to the charge region (polarity +1)
    n_sub = min(rng.poisson(2.5), 6)
    t_strokes = t_rs + np.r_[0.0, np.cumsum(np.exp(rng.uniform(np.log(20 * MS),
                                                                 np.log(150 * MS), n_sub)))]
    first = np.arange(n_sub + 1) == 0
    g_pts = np.repeat(ground[None, :], n_sub + 1, 0)
    moved = (~first) & (rng.random(n_sub + 1) < 0.3)        # a new ground contact
    g_pts[moved, :2] += rng.normal(0.0, 1.5 * KM, (moved.sum(), 2))
    ch = origin[None, :] - g_pts
    length = np.linalg.norm(ch, axis=1)
    rs = pulses("return_stroke", rng, g_pts, ch, t_strokes, 1.0, first=first,
                length_m=length)
    tables.append(rs)
    # dart-stepped leader steps before some subsequent strokes (5-10 us apart)
    for k in np.flatnonzero(~first & (rng.random(n_sub + 1) < 0.5)):
        m = rng.integers(5, 16)
        dt = np.cumsum(rng.uniform(5 * US, 10 * US, m))[::-1]
        t_d = t_strokes[k] - rng.uniform(10 * US, 30 * US) - dt
        v_d = rng.uniform(1e6, 4e6)                          # dart-stepped leader
        d_dir = -ch[k] / length[k]
        tip0 = g_pts[k] - d_dir * (v_d * (t_strokes[k] - t_d[0]))
        d_steps, _ = _leader_steps(rng, tip0, d_dir, v_d, t_d[0], t_d, step_dir_sign=-1.0)
        tables.append(d_steps)
    # recoil leaders in the cloud: toward the origin, current upward on the way down
    n_r = rng.integers(4, 16)
    t_r = np.sort(rng.uniform(t_rs + 5 * MS, t_strokes[-1] + 100 * MS, n_r))
    off = np.column_stack([rng.normal(0.0, 3 * KM, (n_r, 2)),
                           rng.uniform(-0.5 * KM, 1.5 * KM, n_r)])
    start = origin[None, :] + off
    start[:, 2] = np.maximum(start[:, 2], 1.5 * KM)
    tables.append(_recoils(rng, start, origin - np.array([0.0, 0.0, 0.3 * KM]), t_r))
    out = concat(tables)
    out["ftype"][:] = 2
    return out
