"""A pulse's own overshoot and the reversed field at its channel end are no neighbours.

Closed forms: a Gaussian current-field pulse, its slow opposite overshoot (the static
and induction terms, an exponential) and the reversed radiation field of the current
stopping at the end of a channel of length L, L/v later (transmission-line model with a
finite channel: the far field is proportional to i(t) - i(t - L/v); Uman, McLain &
Krider 1975, Am. J. Phys. 43, 33; Rakov & Uman 2003, ch. 12; from memory). The
reversal rides on the overshoot after a valley: the field never comes back to the
baseline, so it has no fast rise of its own from a baseline, and it is part of the pulse.
"""

import numpy as np
import pytest

from features.waveform import field_features

FS = 10e6
PRE = 100e-6
M = 4000


def _t():
    return np.arange(M) / FS - PRE


def _gauss(t, t0, s, amp):
    return amp * np.exp(-0.5 * ((t - t0) / s) ** 2)


def _with_reversal(t, *, width_s, overshoot, decay_s, delay_s, reversal, step_at=None,
                   step=0.0):
    """Pulse of peak 1 at 1 us (Gaussian, sigma ``width_s``), its overshoot of depth
    ``overshoot`` (rising over 2 width_s, decaying over ``decay_s``) and the reversal
    (Gaussian of the overshoot's sign, ``reversal`` V/m, ``delay_s`` after the peak); a
    second pulse of the initial sign, ``step`` V/m at ``step_at``, if asked."""
    u = np.clip(t - 1e-6 - width_s, 0, None)
    slow = -overshoot * (1 - np.exp(-u / (2 * width_s))) * np.exp(-u / decay_s)
    x = _gauss(t, 1e-6, width_s, 1.0) + slow + _gauss(t, 1e-6 + delay_s, width_s, -reversal)
    if step_at is not None:
        x += _gauss(t, step_at, width_s, step)
    return x


# a leader step (0.3 us wide, channel end 4 us later; Rakov & Uman 2003, ch. 4: step
# pulses of ~1 us, an overshoot a few us long) and a narrow bipolar event (1 us wide,
# overshoot 0.3 of the peak over 8 us, reversal 12 us later: a channel of ~1 km at
# ~1e8 m/s; Rakov & Uman 2003, ch. 8; Nag & Rakov 2010, J. Geophys. Res. 115, D20102:
# reflections of the current wave in the channel; from memory)
# and a recoil-type pulse (0.5 us wide, a long shallow overshoot, 0.1 of the peak over
# 30 us, and the reversal 35 us later: a 350 m section at 1e7 m/s, the speed of dart and
# recoil leaders; Rakov & Uman 2003, ch. 4 and 9; from memory)
SHAPES = {
    "leader step": dict(width_s=0.3e-6, overshoot=0.15, decay_s=3e-6, delay_s=4e-6,
                        reversal=0.3),
    "narrow bipolar": dict(width_s=1e-6, overshoot=0.3, decay_s=8e-6, delay_s=12e-6,
                           reversal=0.35),
    "recoil": dict(width_s=0.5e-6, overshoot=0.1, decay_s=30e-6, delay_s=35e-6,
                   reversal=0.2),
}


@pytest.mark.parametrize("shape", list(SHAPES))
def test_reversal_riding_on_the_overshoot_is_part_of_the_pulse(shape):
    """The reversal (peak 0.3-0.35 V/m from zero, 3-4 x the 10 % level, its own height
    above the valley it rides on > 0.1) is no neighbour: counts 0, nearest and interval
    NaN, ratio 0 (noise 0.01 V/m, 40 dB)."""
    rng = np.random.default_rng(3)
    x = _with_reversal(_t(), **SHAPES[shape])[None] + rng.normal(0, 0.01, (100, M))
    out = field_features(x, FS, pretrigger_s=PRE)
    assert (out["neighbours_after"] == 0).mean() >= 0.95
    assert (out["neighbours_before"] == 0).mean() >= 0.95
    assert np.isnan(out["nearest_neighbour_s"]).mean() >= 0.95
    assert np.isnan(out["neighbour_interval_s"]).mean() >= 0.95
    assert (out["largest_neighbour_ratio"] == 0).mean() >= 0.95


@pytest.mark.parametrize("shape", list(SHAPES))
def test_a_step_riding_on_the_overshoot_is_a_neighbour(shape):
    """A second pulse of the initial sign (0.5 V/m) riding on the overshoot where the
    reversal was (2 us before its time) is another discharge (leader steps keep the sign of the
    train; Rakov & Uman 2003, ch. 4): one neighbour after, at its own peak time."""
    rng = np.random.default_rng(4)
    kw = SHAPES[shape]
    at = 1e-6 + kw["delay_s"] - 2e-6
    x = (_with_reversal(_t(), **{**kw, "reversal": 0.0}, step_at=at, step=0.5)[None]
         + rng.normal(0, 0.01, (100, M)))
    out = field_features(x, FS, pretrigger_s=PRE)
    assert (out["neighbours_after"] == 1).mean() >= 0.95
    near = out["nearest_neighbour_s"]
    assert (np.abs(near - (at - out["peak_time_s"])) <= 0.1 * (at - 1e-6) + 1 / FS).mean() >= 0.95


def _step_train(t, next_at):
    """A step (Gaussian, sigma 0.3 us, 1 V/m at 1 us), its reversal 3 us later (-0.5 V/m,
    silence in between: a distant source, see the module docstring) and the next step
    of the train (+0.55 V/m, 1.1 x the reversal) at ``next_at``."""
    return (_gauss(t, 1e-6, 0.3e-6, 1.0) + _gauss(t, 4e-6, 0.3e-6, -0.5)
            + _gauss(t, next_at, 0.3e-6, 0.55))


def test_next_step_after_the_reversal_is_a_neighbour():
    """The next step 8 us after a step (4 us of silence after its reversal: it rises from
    the baseline, Rakov & Uman 2003, ch. 4: steps 10-50 us apart, a few closer) is one
    neighbour after, at 8 us, not the step's third lobe; its own reversal is not
    another one."""
    rng = np.random.default_rng(6)
    x = _step_train(_t(), 9e-6)[None] + rng.normal(0, 0.01, (100, M))
    x += _gauss(_t(), 12e-6, 0.3e-6, -0.27)[None]   # the second step's reversal
    out = field_features(x, FS, pretrigger_s=PRE)
    assert (out["neighbours_after"] == 1).mean() >= 0.95
    near = out["nearest_neighbour_s"] - (9e-6 - out["peak_time_s"])
    assert (np.abs(near) <= 0.1 * 8e-6 + 1 / FS).mean() >= 0.95


def test_ringing_without_a_pause_is_one_pulse():
    """A damped oscillation (2 us period, amplitude e-folding in 1 us: three swings
    above the 10 % level (0.61, -0.22, 0.08 V/m, 0.06 the level) with no pause between them, the ringing of a narrow bipolar
    event's channel; Nag & Rakov 2010, J. Geophys. Res. 115, D20102; from memory) is one
    pulse: no neighbour."""
    rng = np.random.default_rng(7)
    t = _t()
    u = t - 1e-6
    ring = np.where(u >= 0, np.sin(2 * np.pi * u / 2e-6) * np.exp(-u / 1e-6), 0.0)
    x = ring[None] + rng.normal(0, 0.005, (100, M))
    out = field_features(x, FS, pretrigger_s=PRE)
    assert (out["neighbours_after"] == 0).mean() >= 0.95
    assert np.isnan(out["nearest_neighbour_s"]).mean() >= 0.95


def test_a_fast_pulse_of_the_overshoot_sign_on_the_overshoot_is_a_neighbour():
    """Where a recoil-type pulse's reversal would be (35 us later, on its overshoot), a
    pulse of the overshoot's sign ten times narrower (Gaussian sigma 0.1 us against
    1 us, 0.3 V/m) rises faster than the pulse's own current wave could come back
    (the reversal is i(t) reflected, no faster; far field proportional to
    i(t) - i(t - L/v), Uman, McLain & Krider 1975): another discharge, one neighbour
    after, at its own peak time."""
    rng = np.random.default_rng(8)
    kw = {**SHAPES["recoil"], "width_s": 1e-6, "reversal": 0.0}
    t = _t()
    at = 1e-6 + kw["delay_s"]
    x = (_with_reversal(t, **kw) + _gauss(t, at, 0.1e-6, -0.3))[None]
    out = field_features(x + rng.normal(0, 0.01, (100, M)), FS, pretrigger_s=PRE)
    assert (out["neighbours_after"] == 1).mean() >= 0.95
    err = np.abs(out["nearest_neighbour_s"] - (at - out["peak_time_s"]))
    assert (err <= 0.1 * kw["delay_s"] + 1 / FS).mean() >= 0.95


def test_reversal_broken_by_noise_keeps_the_rise_of_its_peak():
    """Lobes as the detector leaves a recoil's reversal broken by noise (columns at
    10 MHz): the initial half-cycle (+1, rising 10 columns from half height), its
    overshoot (-0.2), a piece riding on it after a valley (rising 2 columns: noise) and,
    one column later, the rest of the reversal holding its peak (-0.28, rising 8
    columns). The two pieces are one lobe whose rise is that of its peak's piece, no
    faster than half the initial rise: the reversal is the pulse's own current wave
    (far field proportional to i(t) - i(t - L/v); Uman, McLain & Krider 1975), one
    pulse."""
    from features import pulses
    from features._riding import LobeTableWithBase

    lobes = LobeTableWithBase(
        row=np.zeros(4, np.intp), start=np.array([0, 72, 370, 391]),
        stop=np.array([70, 366, 390, 470]), peak_col=np.array([12, 150, 380, 402]),
        peak=np.array([1.0, 0.2, 0.13, 0.28]), sign=np.array([1, -1, -1, -1], np.int8),
        after_valley=np.array([False, False, True, False]),
        base=np.array([0.0, 0.0, 0.06, 0.0]), bridged=np.zeros(4, bool),
        rise=np.array([10.0, 60.0, 2.0, 8.0]), cut=np.zeros(4, bool))
    table, _, _ = pulses.group_pulses(lobes, 10e6)
    assert len(table) == 1
    assert table.n_lobes[0] == 3
