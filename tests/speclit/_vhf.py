"""VHF emission: bursts along each pulse's path, the receiver's record, and the
mapped sources an interferometer or mapping array would report.

Each pulse emits ``n_bursts`` impulsive VHF bursts, the first where and when
its wave starts, the others spread over ``vhf_span_s`` along the discharge's
velocity (the leader's for leader pulses, the wave's otherwise), at most
``path_m`` from the start. A burst's received power is ``gain * P / R^2`` (file
units; ``P`` the emitted power in W) and decays as ``exp(-t / burst_tau_s)``.

Receiver, ``power`` kind: the detected power of a band-limited signal is
``(signal + noise floor)`` times speckle, the mean of two unit exponential
variates per sample (a Gamma variate of shape 2, mean 1; our choice for a
detector averaging ~2 independent looks). ``voltage`` kind: white Gaussian noise with variance
``(signal + floor) / 2`` filtered to the band, so that the squared magnitude of
its analytic signal has mean ``signal + floor`` (as the catalog spec defines
power). Both clip at ``full_scale``.

Positions: the scene's flat frame (x, y = ground distance east and north,
z = height) is put on a spherical Earth (radius 6371 km) for the mapped x/y/z
in the station's local east-north-up tangent frame, and on an Earth of 4/3
that radius for the apparent elevation (the standard-refraction effective
radius; common practice, Bean & Dutton 1966, from memory).
"""

from __future__ import annotations

import numpy as np

from . import _physics as ph
from ._instrument import Windows

__all__ = ["bursts", "vhf_windows", "detect", "map_sources", "EARTH_RADIUS_M"]

EARTH_RADIUS_M = 6.371e6          # mean radius (IUGG), from memory
REFRACTION_K = 4.0 / 3.0          # effective-radius factor (common practice)
_TAIL = 8.0                       # burst window: 8 decay constants


def bursts(p: dict, rng, gain: float) -> dict:
    """VHF bursts of a pulse table (scene times). Returns a dict of arrays (m,)."""
    nb = np.asarray(p["n_bursts"], int)
    owner = np.repeat(np.arange(nb.size), nb)
    m = owner.size
    first = np.r_[True, owner[1:] != owner[:-1]] if m else np.zeros(0, bool)
    lag = np.where(first, 0.0, rng.uniform(0.0, 1.0, m) * p["vhf_span_s"][owner])
    vel = np.column_stack([p["ve_m_per_s"], p["vn_m_per_s"], p["vu_m_per_s"]])[owner]
    speed = np.linalg.norm(vel, axis=1)
    s = np.minimum(lag * speed, p["path_m"][owner])
    unit = vel / np.maximum(speed, 1e-30)[:, None]
    x = p["x0_m"][owner] + s * unit[:, 0]
    y = p["y0_m"][owner] + s * unit[:, 1]
    z = np.maximum(p["z0_m"][owner] + s * unit[:, 2], 0.0)
    r = np.sqrt(x * x + y * y + z * z)
    dbw = p["vhf_dbw"][owner] + rng.normal(0.0, 3.0, m)        # burst-to-burst spread
    emit_w = 10.0 ** (dbw / 10.0)
    t_arr = p["t0_s"][owner] + lag + r / ph.C
    return {"owner": owner, "t_s": t_arr, "x_m": x, "y_m": y, "z_m": z, "dbw": dbw,
            "rx": gain * emit_w / np.maximum(r, 100.0) ** 2,
            "tau_s": p["burst_tau_s"][owner]}


def vhf_windows(b: dict, rate_hz: float) -> Windows:
    """Received-power envelope of each burst on the grid ``n / rate_hz``."""
    first = np.floor(b["t_s"] * rate_hz).astype(np.int64)
    last = np.ceil((b["t_s"] + _TAIL * b["tau_s"]) * rate_hz).astype(np.int64) + 1
    lens = last - first
    row = np.repeat(np.arange(lens.size), lens)
    local = np.arange(int(lens.sum())) - np.repeat(np.cumsum(lens) - lens, lens)
    t = (first[row] + local) / rate_hz - b["t_s"][row]
    val = np.where(t >= 0, b["rx"][row] * np.exp(-np.maximum(t, 0) / b["tau_s"][row]), 0.0)
    return Windows(first, np.concatenate([[0], np.cumsum(lens)]), val, np.zeros(lens.size))


def detect(signal, *, kind, rate_hz, band_hz, floor, full_scale, rng):
    """Receiver output for a contiguous stretch of received signal power."""
    total = signal + floor
    if kind == "power":
        n = signal.size
        out = total * (0.5 * (rng.standard_exponential(n, dtype=np.float32)
                              + rng.standard_exponential(n, dtype=np.float32)))
    else:
        n = signal.size
        w = rng.standard_normal(n) * np.sqrt(total / 2.0)
        spec = np.fft.rfft(w)
        f = np.fft.rfftfreq(n, 1.0 / rate_hz)
        spec[(f < band_hz[0]) | (f > band_hz[1])] = 0.0
        out = np.fft.irfft(spec, n) / np.sqrt(2.0 * (band_hz[1] - band_hz[0]) / rate_hz)
    if full_scale is not None:
        out = np.clip(out, -full_scale, full_scale)
    return out.astype(np.float32)


def to_sky(x, y, z):
    """Scene frame -> (azimuth deg, apparent elevation deg, ground distance m,
    and x, y, z in the station's tangent frame, m)."""
    d = np.hypot(x, y)
    az = np.degrees(np.arctan2(x, y)) % 360.0
    theta = d / EARTH_RADIUS_M
    r = EARTH_RADIUS_M + z
    horiz = r * np.sin(theta)
    up = r * np.cos(theta) - EARTH_RADIUS_M
    safe = np.where(d > 0, d, 1.0)
    xt, yt = horiz * x / safe, horiz * y / safe
    re = REFRACTION_K * EARTH_RADIUS_M
    th_e = d / re
    el = np.degrees(np.arctan2((re + z) * np.cos(th_e) - re, (re + z) * np.sin(th_e)))
    return az, el, d, xt, yt, up


def map_sources(b: dict, rng, *, floor, snr, max_range_m, angle_noise_deg, time_noise_s,
                min_elevation_deg=0.3):
    """The bursts a mapping system reports, with its errors.

    Returns a dict of arrays: ``t_s`` (arrival, scene time), ``azimuth_deg``,
    ``elevation_deg``, ``x_m``, ``y_m``, ``z_m`` (tangent frame), ``power_db``
    (estimated emitted power, dB re 1 W).
    """
    az, el, d, xt, yt, up = to_sky(b["x_m"], b["y_m"], b["z_m"])
    keep = (b["rx"] >= snr * floor) & (d <= max_range_m) & (el >= min_elevation_deg)
    idx = np.flatnonzero(keep)
    k = idx.size
    az_n = (az[idx] + rng.normal(0.0, angle_noise_deg, k)) % 360.0
    el_n = np.clip(el[idx] + rng.normal(0.0, angle_noise_deg, k), 0.0, 90.0)
    sig = np.maximum(30.0, 0.004 * d[idx])                       # our choice
    out = {"t_s": b["t_s"][idx] + rng.normal(0.0, time_noise_s, k),
           "azimuth_deg": az_n, "elevation_deg": el_n,
           "x_m": xt[idx] + rng.normal(0.0, 1.0, k) * sig,
           "y_m": yt[idx] + rng.normal(0.0, 1.0, k) * sig,
           "z_m": up[idx] + rng.normal(0.0, 1.0, k) * sig,
           "power_db": b["dbw"][idx] + rng.normal(0.0, 2.0, k)}
    order = np.argsort(out["t_s"], kind="stable")
    return {key: v[order] for key, v in out.items()}
