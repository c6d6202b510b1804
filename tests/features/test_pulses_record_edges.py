"""A pulse the record cuts is no neighbour: its peak lies outside the record.

Closed forms: a leader step (Gaussian, sigma 0.3 us) with its slow overshoot of the
opposite sign (depth 0.3 of the peak, rising over 2 sigma and decaying over 8 us, the
static and induction terms of a pulse's field; Uman, McLain & Krider 1975, Am. J.
Phys. 43, 33; from memory). Whether that pulse's peak lies in the record is known by
construction; the schema counts the *other pulses in the record*
(:mod:`features.schema`, ``neighbours_before``).
"""

import numpy as np

from features.waveform import field_features

FS = 20e6
PRE = 50e-6          # the record starts 50 us before the trigger
M = 3000
SIGMA = 0.01         # V/m (the catalogued pulse at 40 dB)


def _t():
    return np.arange(M) / FS - PRE


def _step(t, t0, amp, depth=0.3, width=0.3e-6, decay=8e-6):
    """A step of peak ``amp`` at ``t0`` and its overshoot (closed form, see above)."""
    u = np.clip(t - t0 - width, 0, None)
    slow = -depth * amp * (1 - np.exp(-u / (2 * width))) * np.exp(-u / decay)
    return amp * np.exp(-0.5 * ((t - t0) / width) ** 2) + slow


def _features(earlier_at):
    rng = np.random.default_rng(11)
    t = _t()
    x = _step(t, 1e-6, 1.0) + _step(t, earlier_at, 1.0)
    return field_features(x[None] + rng.normal(0, SIGMA, (100, M)), FS, pretrigger_s=PRE)


def test_overshoot_of_a_pulse_before_the_record_is_no_neighbour():
    """The record opens 2 us after an earlier step's peak (at -52 us), inside its
    overshoot (|E| 0.23 V/m at the record's start, above the 0.1 V/m level): that pulse's
    peak is not in the record, so no neighbour before; nearest and interval NaN."""
    out = _features(-52e-6)
    assert (out["neighbours_before"] == 0).mean() >= 0.95
    assert np.isnan(out["nearest_neighbour_s"]).mean() >= 0.95
    assert np.isnan(out["neighbour_interval_s"]).mean() >= 0.95


def test_the_same_pulse_inside_the_record_is_a_neighbour():
    """The same earlier step with its peak 6 us after the record's start (at -44 us) is
    one neighbour before, 45 us from the catalogued peak (10 % + 1 sample)."""
    out = _features(-44e-6)
    assert (out["neighbours_before"] == 1).mean() >= 0.95
    err = np.abs(out["nearest_neighbour_s"] - 45e-6)
    assert (err <= 0.1 * 45e-6 + 1 / FS).mean() >= 0.95


def test_pulse_still_rising_at_the_record_end_is_no_neighbour():
    """A slow pulse (Gaussian, sigma 3 us) peaking 2 us after the record's end: the
    record holds only its rise (0.8 V/m at the end); its peak is not in the record."""
    rng = np.random.default_rng(12)
    t = _t()
    end = t[-1]
    x = _step(t, 1e-6, 1.0) + np.exp(-0.5 * ((t - end - 2e-6) / 3e-6) ** 2)
    out = field_features(x[None] + rng.normal(0, SIGMA, (100, M)), FS, pretrigger_s=PRE)
    assert (out["neighbours_after"] == 0).mean() >= 0.95
    assert np.isnan(out["nearest_neighbour_s"]).mean() >= 0.95


def test_slow_pulse_rising_from_before_the_record_is_a_neighbour():
    """A slow pulse (Gaussian, sigma 3 us, 0.5 V/m) peaking 7 us after the record's
    start: the record opens on its foot (0.5 exp(-(7/3)^2 / 2) = 0.033 V/m, 3.3 sigma,
    above the lobe's low level but under the 5 sigma of a pulse under way), and its peak
    lies in the record: one neighbour before, 50 us from the catalogued peak."""
    rng = np.random.default_rng(13)
    t = _t()
    at = t[0] + 7e-6
    x = _step(t, 1e-6, 1.0) + 0.5 * np.exp(-0.5 * ((t - at) / 3e-6) ** 2)
    out = field_features(x[None] + rng.normal(0, SIGMA, (100, M)), FS, pretrigger_s=PRE)
    assert (out["neighbours_before"] == 1).mean() >= 0.95
    err = np.abs(out["nearest_neighbour_s"] - (1e-6 - at))
    assert (err <= 0.1 * (1e-6 - at) + 1 / FS).mean() >= 0.95
