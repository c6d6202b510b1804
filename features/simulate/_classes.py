"""Physical parameters of the pulse classes (four standard, two extra), drawn per pulse.

Every pulse is a Heidler current (steepness 2) launched on a short vertical channel as a
TL/MTLE current wave (:mod:`.dipole`), seen at the ground. Where the VHF
sources of a pulse come from a different, slower front (a leader tip), its speed is
``front_speed_m_per_s``. The ranges below are starting points recalled from the
literature and then tuned so that the simulated observables (last column) fall in the
published ranges; "from memory" means recalled, not looked up.

==================  =====================================  ==================================
class               drawn parameters (uniform, or log-     observables of the far field at
                    uniform where marked "log")            100 km (measured on the simulator,
                                                           2nd-50th-98th percentiles)
==================  =====================================  ==================================
narrow_bipolar      peak current 35-140 kA (log); rise     bipolar; initial half-cycle
                    0.4-1.5 us (log), decay 1.5-4 us       2.2-3.5-5.5 us, full width
                    (log); channel 300-1000 m at           9-15-24 us; peak 4-9-22 V/m; VHF
                    5e7-1.5e8 m/s (log); MTLE lambda       peak 25-40 dB (range-normalised,
                    0.25-0.6 x channel; altitude +NBE      10-30 dB above other in-cloud
                    7-15 km (70 %, downward current),      pulses); a few sources on the
                    -NBE 14-20 km (upward current)         fast channel
stepped_leader      peak current 1.5-10 kA (log); rise     mostly unipolar, half-cycle
                    0.1-0.4 us (log), decay 0.3-1.2 us     0.6-1.2-2.2 us, 10-90 % rise
                    (log); step wave 50-300 m at           0.09-0.16-0.27 us, peak
                    5e7-1.5e8 m/s (log), lambda 0.5-1.5    0.18-0.7-2.1 V/m; trains 10-30 us
                    x channel; leader tip 1e5-1e6 m/s      apart; VHF 0-12 dB; ~25 sources
                    (log-normal, median 2.5e5)             along a branching leader track
recoil              peak current 8-40 kA (log); rise       half-cycle 2.0-3.3-6.1 us, peak
                    0.3-1 us (log), decay 1-3 us (log);    0.4-1.3-4.1 V/m; VHF 6-16 dB with
                    wave 300-1000 m at 2e7-8e7 m/s (log),  a plateau while the tip moves;
                    lambda 0.2-0.5 x channel; recoil tip   straight sources along a channel
                    1e6-2e7 m/s (log) over 0.5-3 km        mapped earlier in the flash
energetic_in_cloud  peak current 100-400 kA (log),         bipolar; half-cycle 12-19-32 us,
                    downward-directed; rise 4-14 us        full width 48-75-107 us; peak
                    (log), decay 10-30 us (log); wave      16-40-92 V/m; VHF 4-14 dB (weak
                    1-3 km at 8e7-2e8 m/s (log), lambda    for the size); sources on the
                    0.8-2 x channel; altitude 8-13 km;     upward negative leader
                    leader tip 1e5-1e6 m/s (log)
return_stroke       first: 10-50 kA (log), rise 1-4 us     mostly unipolar (opposite
(extra class)       (log), decay 40-100 us (log), TL/MTLE  overshoot 10-18-28 %), 10-90 %
                    from the ground up the leader's        rise 0.4-0.75-3.8 us, zero
                    height at 8e7-1.6e8 m/s (log), lambda  crossing 15-27-54 us after the
                    0.25-0.55 x height; subsequent: 5-30   onset, peak 1.3-3.3-9.6 V/m
                    kA, rise 0.2-0.6 us, decay 20-40 us,   (first and subsequent strokes
                    1e8-2e8 m/s (all log)                  together); VHF 0-8 dB; sources
                                                           up the leader channel
initial_breakdown   10-60 kA (log), upward-directed;       bipolar, the return stroke's
(extra class)       rise 0.8-2 us, decay 3-6 us (log);     initial polarity; total width
                    wave 600-1200 m down from the          18-27-39 us above 5 % of the
                    leader tip at 4e7-1e8 m/s (log),       peak, first half-cycle 6-8.5-12
                    lambda 0.7-1.3 x channel; trains of    us, peak 0.9-2.6-8.3 V/m; VHF
                    3-12 pulses 70-130 us apart in the     10-22 dB
                    first ~1.5 ms of CG flashes
==================  =====================================  ==================================

Sources of the ranges (from memory): narrow bipolar events: Smith et al. (1999), Nag &
Rakov (2010), Rison et al. (2016) for fast positive breakdown at ~1e7-1e8 m/s over a few
hundred metres, polarity/altitude split (positive NBEs lower, 7-15 km; negative ones
higher, 14-20 km). Stepped leader: Rakov & Uman 2003, ch. 4 and 7 (pulse width ~1 us,
interpulse interval 10-30 us, average speed 2e5 m/s, range 1e5-1e6 m/s). Recoil leaders
and K-changes: Rakov & Uman 2003, ch. 9 (K-change pulses, recoil/dart leader speeds
1e6-2e7 m/s). Energetic in-cloud pulses: Lyu et al. (2016), Cummer et al. (2017) (TL peak
current 100-400 kA, 8-13 km, during upward negative leader progression, early in IC
flashes). Return strokes: Rakov & Uman 2003, ch. 4 and 6 (first strokes 10-50 kA, slow
front then a fast transition, mostly unipolar fields with a zero crossing tens of us
after the onset at 50-200 km, speed ~1e8 m/s; subsequent strokes smaller and sharper;
MTLE lambda ~2 km, Nucci et al. 1988). Initial breakdown: Rakov & Uman 2003, ch. 4
(bipolar pulses 20-40 us in total, intervals 70-130 us, at the start of CG flashes, with
the return stroke's initial polarity). All from memory. The field-pulse current waves faster than the sources' fronts (stepped leader,
recoil, EIP) are a modelling choice: the field pulse is radiated by a fast current wave
on a short channel segment at the front, while the front itself advances slowly.

Separating features (what a classifier can use): initial half-cycle and full width
(stepped leader < recoil < narrow bipolar < energetic in-cloud), the range-normalised
peak (stepped leader, recoil << narrow bipolar < energetic in-cloud), VHF power relative
to the field peak (very high for narrow bipolar, low for energetic in-cloud), source speed
(stepped leader and energetic in-cloud 1e5-1e6 m/s, recoil 1e6-2e7 m/s, narrow bipolar
faster still over a few sources), timing and context in the flash (trains of pulses
10-30 us apart for stepped leaders; isolation for narrow bipolar events; the first few ms
of intracloud flashes for energetic in-cloud pulses; tens to hundreds of ms and sources on
earlier channels for recoils).

Overlap at the margins: a fraction ``MARGIN_FRACTION`` (1-2 %) of each class draws
its shape parameters from ``MARGIN`` instead, between the class and its nearest
neighbour (a big slow narrow bipolar event vs a small fast energetic in-cloud pulse, a
wide stepped-leader pulse vs a narrow slow recoil). Margin narrow bipolar events also
take the context of an energetic in-cloud pulse (inside the upward leader of an IC flash,
its leader sources in the window), margin recoils come in regular trains 5-25 us apart
and margin stepped-leader pulses come from dart-stepped leaders late in CG flashes along
the old channel (Rakov & Uman 2003, ch. 4; from memory), so a classifier
on these features cannot be perfect but can reach macro-F1 ~0.99.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["ALL_CLASSES", "CLASSES", "EXTRA_CLASSES", "MARGIN", "MARGIN_FRACTION", "PARAMS",
           "SUBSEQUENT_STROKE", "Range", "draw_class_params"]

#: The four standard classes.
CLASSES = ("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud")
#: Classes the simulator can add to a catalog (``class_mix``); their pulses are in the
#: records of cloud-to-ground flashes whether catalogued or not.
EXTRA_CLASSES = ("return_stroke", "initial_breakdown")
#: Every class the simulator can catalogue; ``class_index`` of a pulse indexes it.
ALL_CLASSES = CLASSES + EXTRA_CLASSES


@dataclass(frozen=True)
class Range:
    """A parameter range: ``lo``..``hi`` drawn uniformly (``log=False``) or log-uniformly."""

    lo: float
    hi: float
    log: bool = False

    def draw(self, rng: np.random.Generator, n: int) -> np.ndarray:
        """``n`` draws in the range."""
        if self.log:
            return np.exp(rng.uniform(np.log(self.lo), np.log(self.hi), n))
        return rng.uniform(self.lo, self.hi, n)


def _log(lo, hi):
    return Range(lo, hi, True)


#: Drawn parameters per class. Units: A, s, m, m/s, dB; ``decay_ratio`` = MTLE lambda
#: divided by the channel length; ``vhf_peak_db`` = VHF peak power at 100 km (gain 1).
PARAMS: dict[str, dict[str, Range]] = {
    "narrow_bipolar": {
        "peak_a": _log(35e3, 140e3), "rise_s": _log(0.4e-6, 1.5e-6),
        "decay_s": _log(1.5e-6, 4e-6), "length_m": Range(300.0, 1000.0),
        "speed_m_per_s": _log(5e7, 1.5e8), "decay_ratio": Range(0.25, 0.6),
        "vhf_peak_db": Range(25.0, 40.0), "plateau_db": Range(-10.0, -6.0),
    },
    "stepped_leader": {
        "peak_a": _log(1.5e3, 10e3), "rise_s": _log(0.1e-6, 0.4e-6),
        "decay_s": _log(0.3e-6, 1.2e-6), "length_m": Range(50.0, 300.0),
        "speed_m_per_s": _log(5e7, 1.5e8), "decay_ratio": Range(0.5, 1.5),
        "vhf_peak_db": Range(0.0, 12.0),
    },
    "recoil": {
        "peak_a": _log(8e3, 40e3), "rise_s": _log(0.3e-6, 1.0e-6),
        "decay_s": _log(1.0e-6, 3.0e-6), "length_m": Range(300.0, 1000.0),
        "speed_m_per_s": _log(2e7, 8e7), "decay_ratio": Range(0.2, 0.5),
        "vhf_peak_db": Range(6.0, 16.0), "plateau_db": Range(-9.0, -5.0),
        "front_speed_m_per_s": _log(1e6, 2e7), "path_m": Range(500.0, 3000.0),
    },
    "energetic_in_cloud": {
        "peak_a": _log(100e3, 400e3), "rise_s": _log(4e-6, 14e-6),
        "decay_s": _log(10e-6, 30e-6), "length_m": Range(1000.0, 3000.0),
        "speed_m_per_s": _log(8e7, 2e8), "decay_ratio": Range(0.8, 2.0),
        "vhf_peak_db": Range(4.0, 14.0),
    },
    # first return strokes; the channel height is the leader's start height and
    # ``decay_ratio`` gives the MTLE lambda from it (1-4 km)
    "return_stroke": {
        "peak_a": _log(10e3, 50e3), "rise_s": _log(1e-6, 4e-6),
        "decay_s": _log(40e-6, 100e-6), "length_m": Range(4e3, 7e3),
        "speed_m_per_s": _log(8e7, 1.6e8), "decay_ratio": Range(0.25, 0.55),
        "vhf_peak_db": Range(0.0, 8.0),
    },
    "initial_breakdown": {
        "peak_a": _log(10e3, 60e3), "rise_s": _log(0.8e-6, 2e-6),
        "decay_s": _log(3e-6, 6e-6), "length_m": Range(600.0, 1200.0),
        "speed_m_per_s": _log(4e7, 1e8), "decay_ratio": Range(0.7, 1.3),
        "vhf_peak_db": Range(10.0, 22.0),
    },
}

#: Subsequent return strokes (after dart or dart-stepped leaders): smaller, sharper.
SUBSEQUENT_STROKE: dict[str, Range] = {
    "peak_a": _log(5e3, 30e3), "rise_s": _log(0.2e-6, 0.6e-6),
    "decay_s": _log(20e-6, 40e-6), "speed_m_per_s": _log(1e8, 2e8),
}

#: Overrides for margin pulses, between a class and its nearest neighbour.
MARGIN: dict[str, dict[str, Range]] = {
    "narrow_bipolar": {  # towards a small energetic in-cloud pulse
        "peak_a": _log(80e3, 150e3), "rise_s": _log(1.5e-6, 3e-6),
        "decay_s": _log(4e-6, 8e-6), "vhf_peak_db": Range(12.0, 22.0),
    },
    "energetic_in_cloud": {  # towards a big narrow bipolar event
        "peak_a": _log(60e3, 120e3), "rise_s": _log(1.5e-6, 3.5e-6),
        "decay_s": _log(4e-6, 9e-6), "vhf_peak_db": Range(12.0, 24.0),
    },
    "stepped_leader": {  # towards a narrow recoil
        "peak_a": _log(5e3, 15e3), "rise_s": _log(0.3e-6, 0.6e-6),
        "decay_s": _log(1.0e-6, 2.2e-6), "vhf_peak_db": Range(6.0, 14.0),
    },
    "recoil": {  # towards a wide stepped-leader pulse
        "peak_a": _log(3e3, 10e3), "rise_s": _log(0.15e-6, 0.4e-6),
        "decay_s": _log(0.5e-6, 1.2e-6), "vhf_peak_db": Range(2.0, 10.0),
        "front_speed_m_per_s": _log(6e5, 1.5e6), "plateau_db": Range(-18.0, -12.0),
    },
}

#: Fraction of each class drawn from ``MARGIN``.
MARGIN_FRACTION = {"narrow_bipolar": 0.02, "stepped_leader": 0.01, "recoil": 0.02,
                   "energetic_in_cloud": 0.02, "return_stroke": 0.0, "initial_breakdown": 0.0}

#: Stepped-leader tip speed: log-normal, median 2.5e5 m/s, truncated to 1e5-1e6 m/s
#: (Rakov & Uman 2003, ch. 4: average 2e5 m/s; from memory). Energetic in-cloud pulses
#: ride on upward negative leaders at 1e5-1e6 m/s (log-uniform).
LEADER_SPEED_MEDIAN_M_PER_S = 2.5e5
LEADER_SPEED_RANGE_M_PER_S = (1e5, 1e6)
EIP_LEADER_SPEED = _log(1e5, 1e6)


def leader_speed_m_per_s(rng: np.random.Generator, n: int) -> np.ndarray:
    """Stepped-leader tip speeds in m/s (truncated log-normal, see module notes)."""
    lo, hi = LEADER_SPEED_RANGE_M_PER_S
    out = np.empty(n)
    todo = np.arange(n)
    while todo.size:
        v = LEADER_SPEED_MEDIAN_M_PER_S * np.exp(0.6 * rng.standard_normal(todo.size))
        ok = (v >= lo) & (v <= hi)
        out[todo[ok]] = v[ok]
        todo = todo[~ok]
    return out


def draw_class_params(name: str, n: int, rng: np.random.Generator,
                      margin=None) -> dict[str, np.ndarray]:
    """Draw the class parameters of ``n`` pulses of class ``name``.

    Parameters
    ----------
    margin : bool or ndarray of bool, optional
        Which pulses are margin pulses; by default a random ``MARGIN_FRACTION[name]``.

    Returns
    -------
    dict of str to ndarray, shape (n,)
        Every key of ``PARAMS[name]`` (units in the key names; ``peak_a`` is the
        magnitude, the flash context sets its sign) plus ``margin`` (bool).
    """
    table = PARAMS[name]
    if margin is None:
        margin = rng.random(n) < MARGIN_FRACTION[name]
    margin = np.broadcast_to(np.asarray(margin, bool), (n,)).copy()
    out = {key: rng_range.draw(rng, n) for key, rng_range in table.items()}
    for key, rng_range in MARGIN.get(name, {}).items():
        out[key] = np.where(margin, rng_range.draw(rng, n), out[key])
    out["margin"] = margin
    return out
