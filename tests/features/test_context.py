"""Flash-context features on hand-computable flashes."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from features._tables import SourceTable
from features.context import (
    REUSE_CELL_M,
    REUSE_MAX_NOISE_CELLS,
    REUSE_MIN_AGE_S,
    flash_context,
    mapping_noise_cells,
)


def _events(flash):
    return pd.DataFrame({"flash_id": flash})


def test_isolation_and_time_in_flash():
    """Times in ms: flash A at 0, 1, 4; flash B at 10; one pulse without flash at 2."""
    t_ns = (np.array([0.0, 1.0, 4.0, 10.0, 2.0]) * 1e6).astype(np.int64)
    ctx = flash_context(_events(["A", "A", "A", "B", ""]), t_ns)
    assert_allclose(ctx["time_in_flash_s"][:3], [0, 1e-3, 4e-3])
    # alone in its flash (B) or without one: no flash context
    assert np.isnan(ctx["time_in_flash_s"][3]) and np.isnan(ctx["time_in_flash_s"][4])
    assert_allclose(ctx["isolation_s"][:3], [1e-3, 1e-3, 3e-3])
    assert np.isnan(ctx["isolation_s"][3]) and np.isnan(ctx["isolation_s"][4])
    assert_allclose(ctx["isolation_any_s"], [1e-3, 1e-3, 2e-3, 6e-3, 1e-3])
    assert ctx["flash_n_pulses"].tolist() == [3, 3, 3, 1, 1]


def test_channel_reuse_counts_only_old_nearby_sources():
    """Pulse 2 retraces pulse 0's channel (old enough) but not pulse 1's (too recent)."""
    t_ns = np.array([0, 90_000_000, 100_000_000], dtype=np.int64)    # 0, 90, 100 ms
    ev = np.repeat([0, 1, 2], 4)
    base = np.array([[1000.0, 2000.0, 5000.0]] * 4) + np.arange(4)[:, None] * [50, 0, 0]
    far = base + [20_000.0, 0, 0]
    # pulse 2: two sources on pulse 0's channel, two next to pulse 1 (10 ms older only)
    p2 = np.vstack([base[:2] + 5.0, far[:2] + 5.0])
    xyz = np.vstack([base, far, p2])
    src = SourceTable(event_index=ev, t_s=np.zeros(12), azimuth_deg=np.zeros(12),
                      elevation_deg=np.zeros(12), xyz_m=xyz, power_db=None,
                      offsets=np.array([0, 4, 8, 12]))
    assert 10e-3 > REUSE_MIN_AGE_S
    ctx = flash_context(_events(["F", "F", "F"]), t_ns, src)
    assert_allclose(ctx["channel_reuse"], [0.0, 0.0, 1.0])
    t_ns2 = np.array([0, 90_000_000, 92_000_000], dtype=np.int64)      # pulse 1 only 2 ms old
    ctx2 = flash_context(_events(["F", "F", "F"]), t_ns2, src)
    assert_allclose(ctx2["channel_reuse"], [0.0, 0.0, 0.5])


def test_sorted_lookup_is_searchsorted():
    """Invented keys (self-consistency): the merge lookup of the channel-reuse probes gives
    numpy.searchsorted's positions, for sorted and unsorted probes."""
    from features.context import _sorted_lookup

    rng = np.random.default_rng(2)
    for _ in range(50):
        keys = np.unique(rng.integers(0, 1000, rng.integers(1, 300)))
        probe = rng.integers(-10, 1010, rng.integers(1, 500))
        np.testing.assert_array_equal(_sorted_lookup(keys, np.sort(probe)),
                                      np.searchsorted(keys, np.sort(probe)))
        np.testing.assert_array_equal(_sorted_lookup(keys, probe), np.searchsorted(keys, probe))


def _noisy_straight_flash(sigma_m, n_events=400, n_src=12, seed=5):
    """Straight 3-D tracks (invented) with seeded Gaussian position noise sigma_m per
    axis, all pulses of one flash 10 ms apart."""
    rng = np.random.default_rng(seed)
    t = np.tile(np.sort(rng.random(n_src)) * 1e-4, n_events)
    ev = np.repeat(np.arange(n_events), n_src)
    xyz = (np.array([10e3, 20e3, 6e3]) + np.outer(t, [2e6, -1e6, 5e5])
           + sigma_m * rng.standard_normal((t.size, 3)))
    src = SourceTable(event_index=ev, t_s=t, azimuth_deg=np.zeros(t.size),
                      elevation_deg=np.zeros(t.size), xyz_m=xyz, power_db=None,
                      offsets=np.arange(n_events + 1) * n_src)
    t_ns = np.arange(n_events, dtype=np.int64) * 10_000_000
    return src, t_ns


@pytest.mark.parametrize("sigma_m", [20.0, 150.0])
def test_mapping_noise_recovers_seeded_noise(sigma_m):
    """Straight tracks with Gaussian noise (invented data): the chord offsets are sigma^2
    times chi-square with 3 degrees of freedom, whose median (Wilson & Hilferty 1931:
    3 (1 - 2/27)^3 = 2.366, exact 2.366) makes the pooled estimate sigma within 3 % (the
    median of ~4000 values has a relative SE near 2 %)."""
    src, _ = _noisy_straight_flash(sigma_m)
    assert mapping_noise_cells(src) == pytest.approx(sigma_m / REUSE_CELL_M, rel=0.03)


def test_channel_reuse_nan_where_position_noise_exceeds_the_cell():
    """Above REUSE_MAX_NOISE_CELLS of noise, whether a source meets an earlier one is the
    noise's doing: every pulse NaN; below, the fraction is measured."""
    quiet, t_ns = _noisy_straight_flash(0.5 * REUSE_MAX_NOISE_CELLS * REUSE_CELL_M)
    loud, _ = _noisy_straight_flash(2.0 * REUSE_MAX_NOISE_CELLS * REUSE_CELL_M)
    flash = _events(["F"] * 400)
    assert np.isfinite(flash_context(flash, t_ns, quiet)["channel_reuse"]).all()
    assert np.isnan(flash_context(flash, t_ns, loud)["channel_reuse"]).all()
