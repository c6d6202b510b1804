"""Pulse detection in continuous records: recall and false triggers against known times.

The pulses are the simulator's physical fields (``features.simulate.pulse_fields``:
dipole field terms of drawn season rows, invented data) through a fast antenna's RC
decay (``scipy.signal.lfilter`` as the reference filter), in Gaussian noise, at known
onset times; so the truth is known exactly.
"""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.signal import lfilter

from features import InputError
from features.simulate import draw_season, pulse_fields
from features.trigger import TriggerSettings, detect_pulses, merge_trigger_times

RATE = 20e6
TAU = 1e-3


def pulse_shapes(n=60, seed=0, rate=RATE, tau=TAU, n_samples=2000):
    """Unit-peak fast-antenna pulses (simulated fields through an RC high-pass) and onsets.

    Returns ``(shapes (n, n_samples), onset sample of each)``.
    """
    truth = draw_season(max(n, 40), seed).iloc[:n]
    _, terms, _ = pulse_fields(truth, sample_rate_hz=rate, n_samples=n_samples,
                               with_moment=False)
    e = terms.total_v_per_m
    a = 1.0 / (tau * rate)
    # RC high-pass, y[k] = y[k-1] (1 - a) + x[k] - x[k-1] (backward-Euler form of
    # dy/dt = dx/dt - y / tau; textbook first-order filter)
    rc = lfilter([1.0, -1.0], [1.0, -(1.0 - a)], e, axis=1)
    rc /= np.abs(rc).max(axis=1, keepdims=True)
    onset = np.argmax(np.abs(e) > 1e-3 * np.abs(e).max(axis=1, keepdims=True), axis=1)
    return rc, onset


def synthetic_stream(snr_db, n_pulses, seed, shapes=None, rate=RATE, tau=TAU,
                     gap_s=(2e-3, 4e-3)):
    """Unit-sigma Gaussian noise with pulses of peak ``10**(snr_db/20)`` at known onsets.

    Returns ``(stream, onset sample of every pulse)``.
    """
    rc, onset = shapes if shapes is not None else pulse_shapes(rate=rate, tau=tau)
    rng = np.random.default_rng(seed)
    pos = (np.cumsum(rng.uniform(*gap_s, n_pulses)) * rate).astype(np.int64)
    m = rc.shape[1]
    tail_n = int(3 * tau * rate)
    x = rng.normal(0.0, 1.0, int(pos[-1] + m + tail_n))
    amp = 10 ** (snr_db / 20) * rng.choice([-1.0, 1.0], n_pulses)
    k = np.arange(n_pulses) % rc.shape[0]
    for i in range(n_pulses):  # test data only: a loop over pulses is fine here
        seg = rc[k[i]] * amp[i]
        x[pos[i]:pos[i] + m] += seg
        x[pos[i] + m:pos[i] + m + tail_n] += seg[-1] * np.exp(-np.arange(tail_n) / (tau * rate))
    return x, pos + onset[k]


def score(trig, true_idx, rate=RATE, early_s=2e-6, late_s=40e-6):
    """Recall and false triggers (as a fraction of true pulses) with a match window."""
    j = np.searchsorted(trig, true_idx - round(early_s * rate))
    jj = np.minimum(j, max(trig.size - 1, 0))
    hit = (j < trig.size) & (trig[jj] <= true_idx + round(late_s * rate)) if trig.size else \
        np.zeros(true_idx.size, bool)
    n_false = trig.size - np.unique(j[hit]).size
    return float(hit.mean()), n_false / true_idx.size


@pytest.fixture(scope="module")
def shapes():
    return pulse_shapes()


@pytest.mark.parametrize("snr_db", [20, 40])
def test_recall_and_false_triggers_at_20_db_and_above(shapes, snr_db):
    """>= 99 % of pulses found and <= 1 % false triggers for pulses >= 20 dB over the noise
    (the project's detection target; SNR = 20 log10(peak / noise rms))."""
    x, true_idx = synthetic_stream(snr_db, 300, seed=snr_db, shapes=shapes)
    det = detect_pulses(x, RATE, kind="field", decay_time_s=TAU)
    recall, false = score(det.trigger_index, true_idx)
    assert recall >= 0.99
    assert false <= 0.01


def test_noise_level_is_the_gaussian_sigma(shapes):
    """The robust noise level of unit Gaussian noise with sparse pulses is 1 (MAD x 1.4826
    estimates a Gaussian's sigma; textbook), within 2 %."""
    x, _ = synthetic_stream(30, 100, seed=3, shapes=shapes)
    det = detect_pulses(3.5 * x, RATE, decay_time_s=TAU)
    # the statistic is the sample minus a 40 us mean: its sigma is sqrt(1 + 1/800) ~ 1
    assert_allclose(det.noise_level, 3.5, rtol=0.02)


def test_weak_pulses_are_not_found(shapes):
    """At 6 dB (peak 2 sigma, below the 6-sigma threshold) almost nothing triggers."""
    x, true_idx = synthetic_stream(6, 200, seed=4, shapes=shapes)
    recall, false = score(detect_pulses(x, RATE, decay_time_s=TAU).trigger_index, true_idx)
    assert recall < 0.05 and false < 0.02


def test_block_size_does_not_change_the_triggers(shapes):
    """Reading the record in small blocks gives the same triggers as in one piece."""
    x, _ = synthetic_stream(25, 60, seed=5, shapes=shapes)
    a = detect_pulses(x, RATE, decay_time_s=TAU, block_samples=1 << 24).trigger_index
    b = detect_pulses(x, RATE, decay_time_s=TAU, block_samples=20_000).trigger_index
    assert a.size >= 59
    # block edges move the per-window noise estimate slightly: a trigger may shift by a
    # sample or two, none may appear or vanish
    assert a.size == b.size and np.abs(a - b).max() <= 2


def test_hold_off_and_dead_time():
    """Gaussian bumps (0.2 us wide, 50 sigma) 8 us apart: one trigger with the default
    10 us hold-off, two with 5 us; a 1 ms dead time after a 0.3 ms window keeps one
    trigger where bumps come 0.5 ms apart (self-consistency, invented data)."""
    rng = np.random.default_rng(6)
    x = rng.normal(0, 1, 60_000)
    t = np.arange(x.size)
    bump = lambda k: 50 * np.exp(-0.5 * ((t - k) / 4.0) ** 2)  # noqa: E731
    x += bump(10_000) + bump(10_160)                            # 160 samples = 8 us
    assert detect_pulses(x, RATE).trigger_index.size == 1
    two = detect_pulses(x, RATE, TriggerSettings(holdoff_s=5e-6)).trigger_index
    assert two.size == 2 and abs(int(two[1] - two[0]) - 160) <= 3
    x += bump(20_000)                                           # 0.5 ms later
    assert detect_pulses(x, RATE).trigger_index.size == 2
    dead = TriggerSettings(dead_time_s=1e-3)
    assert detect_pulses(x, RATE, dead, post_trigger_s=3e-4).trigger_index.size == 1


def test_vhf_power_trigger():
    """Bursts on a VHF power floor (exponential noise, mean 1) trigger at their onsets."""
    rate = 25e6
    rng = np.random.default_rng(7)
    p = rng.exponential(1.0, 500_000)
    starts = np.arange(20_000, 480_000, 40_000)
    for s0 in starts:
        p[s0:s0 + 50] += 60.0
    det = detect_pulses(p, rate, kind="power")
    recall, false = score(det.trigger_index, starts, rate=rate)
    assert recall == 1.0 and false == 0.0


def test_merge_of_two_channels():
    """Triggers of two channels closer than the hold-off count once."""
    out = merge_trigger_times([np.array([1e-3, 2e-3]), np.array([1.004e-3, 3e-3])], 10e-6)
    assert_allclose(out, [1e-3, 2e-3, 3e-3])


@pytest.mark.parametrize("d, match", [
    ({"threshold_sigma": -1}, "'threshold_sigma' must be a number > 0"),
    ({"channel": "uv"}, "'channel' must be"),
    ({"rearm_sigma": 7}, "'rearm_sigma' .* must be below"),
    ({"k": 5}, "unknown key 'k'"),
])
def test_bad_settings_name_the_key(d, match):
    """A bad [detect] table raises InputError naming the key."""
    with pytest.raises(InputError, match=match):
        TriggerSettings.from_dict(d, "station.toml [detect]")
