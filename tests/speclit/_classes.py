"""Physical parameters of each pulse class, drawn from published ranges.

Every range below is written from memory of the literature named beside it; the
numbers are the order of magnitude the papers report, not fits. Where we had
to choose a value that no paper fixes (a distribution's shape, a spread), the
comment says "our choice".

A pulse is a current wave on a straight segment (see ``_physics``); this module
draws the wave (current, rise and decay constants, speed, length, attenuation)
and the VHF emission of each class. Where the segment sits and where it points
is decided by the flash that holds it (``_flashes``).

Polarity is physical, not drawn: ``polarity = +1`` means the current flows
along the direction the wave travels (positive breakdown, return strokes),
``-1`` against it (negative breakdown: a negative leader moving up carries a
downward-directed current).
"""

from __future__ import annotations

import numpy as np

__all__ = ["CLASSES", "STANDARD", "OPTIONAL", "KIND", "KINDS", "draw", "logu"]

STANDARD = ("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud")
OPTIONAL = ("return_stroke", "initial_breakdown")
CLASSES = STANDARD + OPTIONAL
#: Pulse kinds in a scene: the classes, plus sub-pulses riding on a bigger pulse
#: ("part", never catalogued on their own) and distant sferics ("sferic").
KINDS = CLASSES + ("part", "sferic")
KIND = {name: i for i, name in enumerate(KINDS)}

US = 1e-6


def logu(rng, lo, hi, n):
    """Log-uniform draws in [lo, hi]."""
    return np.exp(rng.uniform(np.log(lo), np.log(hi), n))


def _wave(rng, n, *, current_a, tau1_s, tau2_s, transit_s=None, speed_m_per_s=None,
          length_m=None, atten_over_length=None, atten_m=None):
    """Assemble the wave parameters; give two of transit, speed and length."""
    cur = current_a(n)
    t1 = tau1_s(n)
    t2 = np.maximum(tau2_s(n), 1.5 * t1)
    if length_m is None:
        v = speed_m_per_s(n)
        length = v * transit_s(n)
    elif speed_m_per_s is None:
        length = length_m(n)
        v = length / transit_s(n)
    else:
        length, v = length_m(n), speed_m_per_s(n)
    lam = atten_m(n) if atten_m is not None else length * atten_over_length(n)
    return {"current_a": cur, "tau1_s": t1, "tau2_s": t2, "speed_m_per_s": v,
            "length_m": length, "atten_m": lam}


def draw(kind: str, rng, n: int, *, first=None) -> dict:
    """Wave and VHF parameters of ``n`` pulses of one kind.

    Parameters
    ----------
    kind : str
        A name of :data:`KINDS`.
    rng : numpy.random.Generator
    n : int
    first : ndarray of bool, optional
        Return strokes only: first strokes (True) or subsequent ones.

    Returns
    -------
    dict of ndarray (n,)
        ``current_a`` (A), ``tau1_s``, ``tau2_s`` (s), ``speed_m_per_s``,
        ``length_m``, ``atten_m`` (m), ``vhf_dbw`` (emitted VHF power, dB re 1 W),
        ``n_bursts``, ``burst_tau_s`` (s), ``vhf_span_s`` (s: bursts fall in
        ``[0, vhf_span_s]`` after the wave starts); recoils also
        ``lead_speed_m_per_s`` (the recoil leader's speed).
    """
    u = rng.uniform
    if kind == "narrow_bipolar":
        # Smith et al. 1999; Nag & Rakov 2010; Rison et al. 2016 (from memory):
        # initial half-cycle ~2-8 us, total 10-30 us, TL currents tens of kA,
        # fast breakdown 1e7-1e8 m/s over a few hundred metres; range-normalised
        # peaks ~10 V/m at 100 km.
        w = _wave(rng, n, current_a=lambda k: logu(rng, 25e3, 150e3, k),
                  tau1_s=lambda k: u(0.3, 1.0, k) * US, tau2_s=lambda k: u(1.0, 3.0, k) * US,
                  length_m=lambda k: logu(rng, 200.0, 1000.0, k),
                  speed_m_per_s=lambda k: logu(rng, 3e7, 1.2e8, k),
                  atten_over_length=lambda k: u(0.4, 1.5, k))       # our choice
        # NBEs are the strongest VHF emitters of a storm: tens of kW (from memory).
        w.update(vhf_dbw=u(30.0, 48.0, n), n_bursts=rng.integers(6, 20, n),
                 burst_tau_s=u(0.3, 1.0, n) * US, vhf_span_s=w["length_m"] / w["speed_m_per_s"])
    elif kind == "energetic_in_cloud":
        # Lyu et al. 2015, 2016; Cummer et al. 2017 (from memory): TL peak currents
        # ~100-400 kA, bipolar, wider than NBEs, on upward negative leaders at
        # 8-13 km, relatively weak VHF for their size.
        w = _wave(rng, n, current_a=lambda k: logu(rng, 100e3, 400e3, k),
                  tau1_s=lambda k: u(1.5, 4.0, k) * US, tau2_s=lambda k: u(4.0, 10.0, k) * US,
                  speed_m_per_s=lambda k: logu(rng, 5e7, 1.5e8, k),
                  transit_s=lambda k: u(10.0, 30.0, k) * US,
                  atten_over_length=lambda k: u(0.5, 2.0, k))       # our choice
        w.update(vhf_dbw=u(8.0, 25.0, n), n_bursts=rng.integers(3, 10, n),
                 burst_tau_s=u(0.2, 0.6, n) * US, vhf_span_s=u(2.0, 8.0, n) * US)
    elif kind == "stepped_leader":
        # Rakov & Uman 2003, ch. 4 (from memory): step pulses ~1 us wide, rise
        # ~0.1 us, step currents of a few kA, the step current wave running back
        # up the leader channel and dying out within a few hundred metres.
        w = _wave(rng, n, current_a=lambda k: logu(rng, 1e3, 8e3, k),
                  tau1_s=lambda k: u(0.05, 0.2, k) * US, tau2_s=lambda k: u(0.2, 0.8, k) * US,
                  speed_m_per_s=lambda k: u(0.5e8, 1.5e8, k),
                  length_m=lambda k: np.zeros(k), atten_m=lambda k: u(50.0, 300.0, k))
        w["length_m"] = 3.0 * w["atten_m"]               # the wave dies out (our choice)
        w.update(vhf_dbw=u(0.0, 20.0, n), n_bursts=rng.integers(1, 3, n),
                 burst_tau_s=u(0.1, 0.3, n) * US, vhf_span_s=u(0.1, 0.6, n) * US)
    elif kind == "recoil":
        # Recoil leaders / K-changes (Rakov & Uman 2003, ch. 9; Mazur 2002, from
        # memory): the leader retraces an old channel at 1e6-2e7 m/s with strong
        # VHF; its field pulse, a few us wide, comes from a fast current wave
        # on the conducting channel (1e7-1e8 m/s, a few kA; our reading).
        w = _wave(rng, n, current_a=lambda k: logu(rng, 2e3, 20e3, k),
                  tau1_s=lambda k: u(0.2, 1.0, k) * US, tau2_s=lambda k: u(0.8, 3.0, k) * US,
                  speed_m_per_s=lambda k: logu(rng, 3e7, 1e8, k),
                  length_m=lambda k: np.zeros(k), atten_m=lambda k: u(200.0, 800.0, k))
        w["length_m"] = 3.0 * w["atten_m"]
        w.update(vhf_dbw=u(10.0, 30.0, n), n_bursts=rng.integers(8, 30, n),
                 burst_tau_s=u(0.2, 0.5, n) * US, vhf_span_s=np.full(n, 100 * US),
                 lead_speed_m_per_s=logu(rng, 1e6, 2e7, n))
    elif kind == "return_stroke":
        # Berger et al. 1975 via Rakov & Uman 2003, ch. 4 and 5 (from memory):
        # peak current median ~30 kA first, ~12 kA subsequent (log-normal);
        # speed 1/3-1/2 c; MTLE attenuation length ~2 km (Nucci et al. 1988).
        first = np.ones(n, bool) if first is None else np.asarray(first, bool)
        med = np.where(first, 30e3, 12e3)
        cur = med * np.exp(rng.normal(0.0, np.where(first, 0.6, 0.5), n))
        w = {"current_a": np.clip(cur, 2e3, 250e3),
             "tau1_s": np.where(first, u(1.5, 4.0, n), u(0.2, 0.8, n)) * US,
             "tau2_s": np.where(first, u(40.0, 100.0, n), u(20.0, 50.0, n)) * US,
             "speed_m_per_s": u(1.0e8, 1.5e8, n),
             "atten_m": u(1500.0, 2500.0, n),
             "length_m": np.zeros(n)}                     # the flash sets it (to the cloud)
        # Return strokes radiate little VHF (Rakov & Uman 2003, ch. 4, from memory).
        w.update(vhf_dbw=u(-10.0, 8.0, n), n_bursts=rng.integers(1, 4, n),
                 burst_tau_s=u(0.3, 1.0, n) * US, vhf_span_s=u(1.0, 10.0, n) * US)
    elif kind == "initial_breakdown":
        # Nag & Rakov 2009; Marshall et al. 2014 (from memory): bipolar, 20-40 us
        # in all, tens of kA in TL models, in trains during the first
        # milliseconds of a flash, with faster sub-pulses on them.
        w = _wave(rng, n, current_a=lambda k: logu(rng, 10e3, 80e3, k),
                  tau1_s=lambda k: u(0.8, 2.5, k) * US, tau2_s=lambda k: u(2.0, 6.0, k) * US,
                  speed_m_per_s=lambda k: logu(rng, 2e7, 1e8, k),
                  transit_s=lambda k: u(6.0, 15.0, k) * US,
                  atten_over_length=lambda k: u(0.5, 2.0, k))       # our choice
        w.update(vhf_dbw=u(15.0, 32.0, n), n_bursts=rng.integers(4, 12, n),
                 burst_tau_s=u(0.2, 0.6, n) * US, vhf_span_s=u(5.0, 20.0, n) * US)
    elif kind == "part":
        # Fast sub-pulses on initial-breakdown pulses (from memory: ~1 us wide);
        # amplitudes are set by the flash relative to the parent.
        w = _wave(rng, n, current_a=lambda k: np.ones(k),
                  tau1_s=lambda k: u(0.05, 0.2, k) * US, tau2_s=lambda k: u(0.2, 0.6, k) * US,
                  speed_m_per_s=lambda k: u(0.5e8, 1.5e8, k),
                  length_m=lambda k: u(50.0, 200.0, k), atten_m=lambda k: u(50.0, 200.0, k))
        w.update(vhf_dbw=u(10.0, 25.0, n), n_bursts=np.ones(n, int),
                 burst_tau_s=u(0.1, 0.3, n) * US, vhf_span_s=np.full(n, 0.1 * US))
    elif kind == "sferic":
        # A distant return stroke; the slower rise stands for the loss of high
        # frequencies over finitely conducting ground (our choice).
        w = {"current_a": 30e3 * np.exp(rng.normal(0.0, 0.6, n)),
             "tau1_s": u(3.0, 8.0, n) * US, "tau2_s": u(40.0, 80.0, n) * US,
             "speed_m_per_s": u(1.0e8, 1.5e8, n), "atten_m": np.full(n, 2000.0),
             "length_m": np.full(n, 6000.0)}
        w.update(vhf_dbw=np.full(n, -np.inf), n_bursts=np.zeros(n, int),
                 burst_tau_s=np.full(n, US), vhf_span_s=np.zeros(n))
    else:
        raise ValueError(f"unknown pulse kind {kind!r}")
    w["n_bursts"] = np.asarray(w["n_bursts"], int)
    return w
