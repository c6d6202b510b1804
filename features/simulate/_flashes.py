"""Flash builders: the pulses of one flash, their channels, fronts and times.

Geometry from the station at the origin (x east, y north, z up); times from the flash
start. Each builder returns "pieces": dicts of equal-length arrays, one entry per
:data:`PULSE_COLUMNS`, one row per pulse (catalogued or not). See :mod:`._season` for
the flash types and their timing, :mod:`._classes` for the class parameters.

Pulse columns: ``class_index`` (index into ``ALL_CLASSES``), ``catalogued``, ``margin``;
``t_s`` (source time the current front starts); the field channel ``x_m, y_m`` (its
horizontal position), ``z0_m`` (start height), ``channel_direction`` (+1 up, -1 down),
``length_m``, ``speed_m_per_s`` (its current wave), ``decay_length_m`` (MTLE); the Heidler
current ``peak_a`` (signed, positive upward-directed), ``rise_s``, ``decay_s``; the VHF
``vhf_peak_db`` (at 100 km), ``plateau_db`` and ``plateau_s``; the sources' front
``front_{x,y,z}0_m`` at ``front_t0_s``, unit direction ``front_u{x,y,z}``, speed
``front_speed_m_per_s``, active until ``front_t1_s``; an optional second front
``branch_...`` (a leader branch, or the leader around an embedded narrow bipolar event)
that holds ``branch_share`` of the sources; ``src_weight`` scales the number of sources.
"""

from __future__ import annotations

import numpy as np

from ._classes import ALL_CLASSES, EIP_LEADER_SPEED, draw_class_params

__all__ = ["EIP", "FRONT_FIELDS", "IB", "NBE", "PULSE_COLUMNS", "REC", "RS", "SFERIC", "SL",
           "SOURCE_WEIGHT", "Track", "choose_catalogued", "concat", "flash_xy", "ic_flash",
           "leader_pulses", "nbe_pulse", "pulse_rows", "recoil_times", "recoils",
           "set_front", "trains", "unit_vector"]

#: Class indices (into ``ALL_CLASSES``); ``SFERIC`` marks distant pulses of other storms,
#: never catalogued.
NBE, SL, REC, EIP, RS, IB = range(len(ALL_CLASSES))
SFERIC = len(ALL_CLASSES)
#: Relative number of mapped sources per catalogued pulse, by class index.
SOURCE_WEIGHT = np.array([0.15, 1.25, 1.2, 1.0, 0.3, 1.0, 0.0])

#: The columns of a straight front, after the prefix "front_" or "branch_".
FRONT_FIELDS = ("x0_m", "y0_m", "z0_m", "ux", "uy", "uz", "speed_m_per_s", "t0_s", "t1_s")

PULSE_COLUMNS = (
    "flash", "class_index", "catalogued", "margin", "t_s", "x_m", "y_m", "z0_m",
    "channel_direction", "length_m", "speed_m_per_s", "decay_length_m", "peak_a", "rise_s",
    "decay_s", "vhf_peak_db", "plateau_db", "plateau_s",
    *(f"front_{k}" for k in FRONT_FIELDS), *(f"branch_{k}" for k in FRONT_FIELDS),
    "branch_share", "src_weight",
)


def unit_vector(theta, phi):
    """Unit vector at polar angle ``theta`` from +z and azimuth ``phi`` (radians)."""
    return np.array([np.sin(theta) * np.sin(phi), np.sin(theta) * np.cos(phi), np.cos(theta)])


class Track:
    """A leader track: a polyline traversed at constant speed from time ``t0``."""

    def __init__(self, vertices, speed, t0):
        self.v = np.asarray(vertices, float)
        seg = np.linalg.norm(np.diff(self.v, axis=0), axis=1)
        self.s = np.concatenate([[0.0], np.cumsum(seg)])
        self.speed = float(speed)
        self.t0 = float(t0)

    @property
    def t_end(self):
        return self.t0 + self.s[-1] / self.speed

    def at(self, arc):
        arc = np.clip(arc, 0.0, self.s[-1])
        return np.stack([np.interp(arc, self.s, self.v[:, k]) for k in range(3)], axis=-1)

    def leg(self, arc):
        """Index of the leg holding each arc length, its direction and arc interval."""
        j = np.clip(np.searchsorted(self.s, arc, side="right") - 1, 0, len(self.s) - 2)
        d = self.v[j + 1] - self.v[j]
        return j, d / np.linalg.norm(d, axis=-1, keepdims=True)


def trains(rng, t_start, t_end, mean_gap_s=1.0e-3):
    """Pulse times of leader trains between two times (s); returns (times, train index)."""
    times, ids = [], []
    t, k = t_start, 0
    while True:
        t += 0.2e-3 + rng.exponential(mean_gap_s)
        if t >= t_end:
            break
        n = int(rng.integers(5, 21))
        tt = t + np.concatenate([[0.0], np.cumsum(rng.uniform(10e-6, 30e-6, n - 1))])
        tt = tt[tt < t_end]
        times.append(tt)
        ids.append(np.full(tt.size, k))
        t, k = tt[-1], k + 1
    if not times:
        return np.zeros(0), np.zeros(0, int)
    return np.concatenate(times), np.concatenate(ids)


def choose_catalogued(rng, ids, k):
    """Catalogue ``k`` pulses, train by train (about 60 % of a chosen train's pulses)."""
    cat = np.zeros(ids.size, bool)
    if k <= 0 or ids.size == 0:
        return cat
    for train in rng.permutation(np.unique(ids)):
        idx = np.flatnonzero(ids == train)
        pick = idx[rng.random(idx.size) < 0.6]
        if pick.size == 0:
            pick = idx[:1]
        pick = pick[: k - cat.sum()]
        cat[pick] = True
        if cat.sum() >= k:
            break
    if cat.sum() < k:  # short leader: take the rest in time order
        rest = np.flatnonzero(~cat)[: k - cat.sum()]
        cat[rest] = True
    return cat


# ------------------------------------------------------------------ pulse rows
def pulse_rows(n, cls, rng, margin=None, **cols):
    """Pulse rows of one class: class parameters drawn, then the given columns set."""
    p = draw_class_params(ALL_CLASSES[cls], n, rng, margin)
    out = {name: np.full(n, np.nan) for name in PULSE_COLUMNS}
    out["class_index"] = np.full(n, cls, np.int8)
    out["catalogued"] = np.zeros(n, bool)
    out["margin"] = p["margin"]
    for key in ("rise_s", "decay_s", "length_m", "speed_m_per_s", "vhf_peak_db"):
        out[key] = p[key]
    out["decay_length_m"] = p["length_m"] * p["decay_ratio"]
    out["peak_a"] = p["peak_a"]
    if "plateau_db" in p:
        out["plateau_db"] = p["plateau_db"]
    out["plateau_s"] = np.zeros(n)
    out["branch_share"] = np.full(n, 0.3)  # share of sources on the second front, if any
    out["src_weight"] = np.full(n, SOURCE_WEIGHT[cls])
    extra = {k: p[k] for k in ("front_speed_m_per_s", "path_m") if k in p}
    for key, val in cols.items():
        out[key] = np.broadcast_to(val, (n,)).copy() if np.ndim(val) < 2 else val
    return out, extra


def set_front(rows, idx, start, unit, speed, t0, t1, prefix="front"):
    """Set a straight front (``prefix`` "front" or "branch"): start point (m), unit
    direction, speed (m/s; None keeps it) and active interval (s)."""
    for k, axis in enumerate("xyz"):
        rows[f"{prefix}_{axis}0_m"][idx] = start[..., k]
        rows[f"{prefix}_u{axis}"][idx] = unit[..., k]
    if speed is not None:
        rows[f"{prefix}_speed_m_per_s"][idx] = speed
    rows[f"{prefix}_t0_s"][idx] = t0
    rows[f"{prefix}_t1_s"][idx] = t1


def leader_pulses(rng, cls, track, times, zdir_rule, branches=(), margin=None):
    """Pulses at a leader tip at ``times``: field channel at the tip, front = the leg."""
    n = times.size
    arc = (times - track.t0) * track.speed
    tip = track.at(arc)
    j, unit = track.leg(arc)
    rows, _ = pulse_rows(n, cls, rng, margin=margin, t_s=times)
    if zdir_rule == "up-channel":  # the wave runs back along the channel behind the tip
        zdir = np.where(unit[:, 2] < -0.2, 1.0, np.where(unit[:, 2] > 0.2, -1.0, 0.0))
        zdir = np.where(zdir == 0, np.where(rng.random(n) < 0.5, 1.0, -1.0), zdir)
    else:
        zdir = np.full(n, float(zdir_rule))
    zdir = np.where(tip[:, 2] - rows["length_m"] < 100.0, 1.0, zdir)  # stay above ground
    rows.update(x_m=tip[:, 0], y_m=tip[:, 1], z0_m=tip[:, 2], channel_direction=zdir)
    rows["peak_a"] = rows["peak_a"] * zdir  # negative leader: current back along channel
    leg_t0 = track.t0 + track.s[j] / track.speed
    leg_t1 = track.t0 + track.s[j + 1] / track.speed
    set_front(rows, np.arange(n), tip, unit, track.speed, times,
               np.minimum(leg_t1, times + 1e-3))
    rows["front_t0_s"] = np.maximum(leg_t0, times - 1e-3)
    rows["front_x0_m"], rows["front_y0_m"], rows["front_z0_m"] = (tip - unit * (times - rows["front_t0_s"])[:, None]
                                             * track.speed).T
    for btrack in branches:  # an active branch tip at the same time
        on = (times > btrack.t0) & (times < btrack.t_end) & np.isnan(rows["branch_t0_s"])
        if on.any():
            b_arc = (times[on] - btrack.t0) * btrack.speed
            _, b_unit = btrack.leg(b_arc)
            b_tip = btrack.at(b_arc)
            t0 = np.maximum(btrack.t0, times[on] - 1e-3)
            start = b_tip - b_unit * ((times[on] - t0) * btrack.speed)[:, None]
            set_front(rows, np.flatnonzero(on), start, b_unit, btrack.speed, t0,
                       np.minimum(btrack.t_end, times[on] + 1e-3), prefix="branch")
    return rows


def nbe_pulse(rng, xy, t, positive, margin=False, zc=None):
    rows, _ = pulse_rows(1, NBE, rng, margin=margin, t_s=t)
    length = rows["length_m"][0]
    if positive:  # lower, downward fast positive breakdown, downward current
        zc, zdir = (rng.uniform(7e3, 15e3) if zc is None else zc), -1.0
    else:
        zc, zdir = rng.uniform(14e3, 20e3), 1.0
    z0 = zc - zdir * length / 2
    rows.update(x_m=np.array([xy[0]]), y_m=np.array([xy[1]]), z0_m=np.array([z0]),
                channel_direction=np.array([zdir]))
    rows["peak_a"] = rows["peak_a"] * zdir
    v = rows["speed_m_per_s"][0]
    rows["plateau_s"] = np.array([length / v])
    set_front(rows, [0], np.array([[xy[0], xy[1], z0]]), np.array([[0.0, 0.0, zdir]]),
               v, t, t + length / v)
    return rows


def flash_xy(rng, range_km):
    r1, r2 = range_km
    r = 1e3 * np.sqrt(rng.uniform(r1 * r1, r2 * r2))
    phi = rng.uniform(0, 2 * np.pi)
    return np.array([r * np.sin(phi), r * np.cos(phi)])


def recoils(rng, track, times, anchors_arc, margin):
    """Recoil pulses at ``times`` retracing straight pieces of ``track``'s legs.

    Margin recoils come with a regular train of uncatalogued pulses 5-25 us apart along
    the same front (returned after the catalogued pulses, ``cat`` False).
    """
    n = times.size
    rows, extra = pulse_rows(n, REC, rng, margin=margin, t_s=times)
    total = track.s[-1]
    if anchors_arc.size:
        arc = rng.choice(anchors_arc, n) + rng.normal(0, 200.0, n)
    else:
        arc = rng.uniform(0.1, 0.9, n) * total
    arc = np.clip(arc, 0.0, total)
    j, unit = track.leg(arc)
    back = rng.random(n) < 0.7  # mostly back towards the flash origin
    room_back, room_fwd = arc - track.s[j], track.s[j + 1] - arc
    back = np.where(back & (room_back < 100), False, back)
    back = np.where(~back & (room_fwd < 100), room_back >= room_fwd, back)
    sign = np.where(back, -1.0, 1.0)
    path = np.minimum(extra["path_m"], np.where(back, room_back, room_fwd))
    path = np.maximum(path, 50.0)
    u = unit * sign[:, None]
    start = track.at(arc)
    vf = extra["front_speed_m_per_s"]
    zdir = np.where(np.abs(u[:, 2]) > 0.3, np.sign(u[:, 2]),
                    np.where(rng.random(n) < 0.5, 1.0, -1.0))
    zdir = np.where(start[:, 2] - rows["length_m"] < 100.0, 1.0, zdir)
    rows.update(x_m=start[:, 0], y_m=start[:, 1], z0_m=start[:, 2], channel_direction=zdir)
    rows["peak_a"] = -rows["peak_a"] * zdir  # negative recoil leader: current opposes it
    rows["plateau_s"] = np.minimum(path / vf, 300e-6)
    set_front(rows, np.arange(n), start, u, vf, times, times + path / vf)
    rows["catalogued"][:] = True
    out = [rows]
    for k in np.flatnonzero(rows["margin"]):
        gaps = rng.uniform(5e-6, 25e-6, int(rng.integers(4, 15)))
        dt = np.cumsum(gaps) - gaps.sum() * rng.uniform(0.2, 0.8)
        dt = dt[(np.abs(dt) > 1e-6) & (times[k] + dt - times[k] < path[k] / vf[k])
                & (dt > -1e-3)]
        if dt.size == 0:
            continue
        more, _ = pulse_rows(dt.size, REC, rng, margin=True, t_s=times[k] + dt)
        pos = start[k] + u[k] * (vf[k] * dt)[:, None]
        more.update(x_m=pos[:, 0], y_m=pos[:, 1], z0_m=pos[:, 2],
                    channel_direction=np.full(dt.size, zdir[k]))
        more["z0_m"] = np.maximum(more["z0_m"], more["length_m"] + 100.0)
        more["peak_a"] = np.sign(rows["peak_a"][k]) * more["peak_a"]
        for key in FRONT_FIELDS:
            more["front_" + key][:] = rows["front_" + key][k]
        out.append(more)
    return concat(out)


def recoil_times(rng, n, lo, hi):
    t = np.sort(rng.uniform(lo, hi, n))
    return t + 1e-3 * np.arange(n)  # at least 1 ms apart


def _embedded_nbe(rng, track, t):
    """A margin narrow bipolar event at the tip of an upward leader at time ``t``."""
    arc = (t - track.t0) * track.speed
    tip = track.at(arc)
    j, unit = track.leg(np.array([arc]))
    xy = tip[:2] + rng.uniform(-300.0, 300.0, 2)
    rows = nbe_pulse(rng, xy, t, positive=True, margin=True, zc=float(tip[2]))
    t0 = max(track.t0 + track.s[j[0]] / track.speed, t - 1e-3)
    t1 = min(track.t0 + track.s[j[0] + 1] / track.speed, t + 1e-3)
    start = tip - unit[0] * (t - t0) * track.speed
    set_front(rows, [0], start[None], unit, None, t0, t1, prefix="branch")
    rows["branch_speed_m_per_s"][:] = track.speed
    rows["branch_share"][:] = 0.8  # the leader's sources dominate the window
    rows["src_weight"][:] = SOURCE_WEIGHT[EIP]
    return rows


def ic_flash(rng, s, sp):
    """An intracloud flash holding the catalogued pulses asked for in ``sp``."""
    xy = flash_xy(rng, s.range_km)
    pieces = []
    t_lead = 0.0
    if sp["nbe_first"]:
        nbe = nbe_pulse(rng, xy, 0.0, positive=True, margin=False)
        nbe["catalogued"][:] = True
        pieces.append(nbe)
        t_lead = rng.uniform(0.5e-3, 2e-3)
    v = float(EIP_LEADER_SPEED.draw(rng, 1)[0])
    tilt, az = np.radians(rng.uniform(0, 25)), rng.uniform(0, 2 * np.pi)
    up = unit_vector(tilt, az)
    inner = np.array([EIP] * sp["n_eip"] + [NBE] * sp["n_nbe_in"])
    if inner.size:  # the first of them at 8-13 km, 0.5-5 ms into the leader
        z_e, tau_e = rng.uniform(8e3, 13e3), rng.uniform(0.5e-3, 5e-3)
        tau_e = min(tau_e, (z_e - 5e3) / (up[2] * v))
        z0 = z_e - up[2] * v * tau_e
    elif sp["nbe_first"]:
        z0 = pieces[0]["z0_m"][0] - pieces[0]["length_m"][0]
    else:
        z0 = rng.uniform(6e3, 9.5e3)
    z_top = max(rng.uniform(11e3, 14e3), z0 + 1.5e3)
    p0 = np.array([xy[0], xy[1], z0])
    p1 = p0 + up * (z_top - z0) / up[2]
    horiz = unit_vector(np.pi / 2, rng.uniform(0, 2 * np.pi))
    t_total = rng.uniform(30e-3, 150e-3)
    p2 = p1 + horiz * max(v * t_total - (z_top - z0) / up[2], 500.0)
    track = Track([p0, p1, p2], v, t_lead)
    t_up = (z_top - z0) / up[2] / v
    times, ids = trains(rng, t_lead + 0.2e-3, t_lead + min(t_up + 5e-3, 15e-3), 2.0e-3)
    if times.size:
        sl = leader_pulses(rng, SL, track, times, "up-channel")
        sl["catalogued"] = choose_catalogued(rng, ids, sp["k_sl"])
        pieces.append(sl)
    if inner.size:
        inner = rng.permutation(inner)
        t_max = (min(z_top, 13.5e3) - z0) / up[2] / v  # stay below ~13.5 km
        later = tau_e + np.cumsum(rng.uniform(0.3e-3, 2e-3, inner.size - 1))
        te = t_lead + np.minimum(np.concatenate([[tau_e], later]), t_max)
        if (inner == EIP).any():
            eip = leader_pulses(rng, EIP, track, te[inner == EIP], -1.0)
            eip["catalogued"][:] = True
            pieces.append(eip)
        for t in te[inner == NBE]:
            nbe = _embedded_nbe(rng, track, t)
            nbe["catalogued"][:] = True
            pieces.append(nbe)
    anchors = [(p["t_s"][p["catalogued"] & (p["class_index"] != NBE)] - t_lead) * v for p in pieces]
    n_rec = sp["n_rec"] + sp["n_rec_margin"]
    if n_rec:
        margin = rng.permutation(np.arange(n_rec) < sp["n_rec_margin"])
        pieces.append(recoils(rng, track, recoil_times(rng, n_rec, 30e-3, 400e-3),
                               np.concatenate(anchors) if anchors else np.zeros(0), margin))
    return pieces


def concat(pieces):
    """Join pieces (dicts of equal-length arrays) into one."""
    return {k: np.concatenate([p[k] for p in pieces]) for k in PULSE_COLUMNS}
