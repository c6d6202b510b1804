"""Cataloguing-practice variants (features.augment.practice_context) on hand-made catalogs.

Every expected value follows from the definitions in ``features.context`` (time in flash:
time since the flash's first catalogued pulse; isolation: time to the nearest other
catalogued pulse of the flash) applied by hand to the kept, stretched times.
"""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from features import open_catalog, write_catalog
from features.augment import practice_context

RATE_HZ = 10e6


def _catalog(tmp_path, times_ms, flash_ids):
    n = len(times_ms)
    t0 = pd.Timestamp("2031-07-14T21:00:00Z")
    stamps = [(t0 + pd.Timedelta(milliseconds=float(t))).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
              for t in times_ms]
    field = np.zeros((n, 200), dtype=np.float32)
    field[:, 100] = 1.0                                          # V/m, invented pulses
    folder = write_catalog(
        tmp_path / "hollowmere-ctx", {"event_id": [f"e{i}" for i in range(n)],
                                      "time_utc": stamps, "flash_id": list(flash_ids)},
        field, field_meta={"sample_rate_hz": RATE_HZ, "pretrigger_s": 10e-6, "units": "V/m",
                           "sign_convention": "physics", "decay_time_s": None},
        catalog_id="hollowmere-ctx", station="hollowmere")
    return open_catalog(folder)


def test_time_scale_stretches_each_flash_about_its_first_pulse(tmp_path):
    """Flash A at 0, 1, 4 ms stretched x2, flash B at 10, 12 ms x0.5, one flash-less pulse."""
    cat = _catalog(tmp_path, [0.0, 1.0, 4.0, 10.0, 12.0, 20.0], ["A", "A", "A", "B", "B", ""])
    keep, ctx = practice_context(cat, time_scale=np.array([2, 2, 2, 0.5, 0.5, 1.0]))
    assert keep.all()
    assert_allclose(ctx["time_in_flash_s"][:5], [0, 2e-3, 8e-3, 0, 1e-3], atol=1e-9)
    assert_allclose(ctx["isolation_s"][:5], [2e-3, 2e-3, 6e-3, 1e-3, 1e-3], atol=1e-9)
    assert np.isnan(ctx["time_in_flash_s"][5])
    # one factor for the whole catalog is the same as that factor for every pulse
    _, same = practice_context(cat, time_scale=2.0)
    assert_allclose(same["time_in_flash_s"][:3], [0, 2e-3, 8e-3], atol=1e-9)


def test_thinned_catalog_counts_time_from_the_first_kept_pulse(tmp_path):
    rng = np.random.default_rng(3)
    n = 400
    flash = np.repeat([f"f{k}" for k in range(40)], 10)
    times = np.sort(rng.uniform(0, 60_000, n))                  # ms, one minute
    cat = _catalog(tmp_path, times, flash)
    keep, ctx = practice_context(cat, keep_fraction=0.5, rng=np.random.default_rng(7))
    # the kept share is binomial(400, 0.5): within 4 standard deviations (sd = 10)
    assert abs(keep.sum() - 200) <= 40
    assert np.isnan(ctx["time_in_flash_s"][~keep]).all()
    kept = pd.DataFrame({"flash": flash[keep], "t": cat.time_ns[keep]})
    first = kept.groupby("flash")["t"].transform("min")
    size = kept.groupby("flash")["t"].transform("size")
    expect = np.where(size > 1, (kept["t"] - first) * 1e-9, np.nan)
    assert_allclose(ctx["time_in_flash_s"][keep], expect, atol=1e-9)


def test_dead_time_applies_to_the_pulses_the_thinning_left(tmp_path):
    times = np.arange(0.0, 50.0, 0.25)                          # ms, a pulse every 250 us
    cat = _catalog(tmp_path, times, ["A"] * len(times))
    keep, _ = practice_context(cat, keep_fraction=0.6, dead_time_s=1e-3,
                               rng=np.random.default_rng(11))
    candidates = np.random.default_rng(11).random(len(times)) < 0.6
    assert not (keep & ~candidates).any()
    kept_t = cat.time_ns[keep]
    assert np.diff(kept_t).min() >= 1_000_000
    # no candidate after a dead time is skipped: each next kept pulse is the first
    # candidate at or after the previous kept one plus the dead time
    t_cand = cat.time_ns[candidates]
    for a, b in zip(kept_t[:-1], kept_t[1:]):
        assert b == t_cand[np.searchsorted(t_cand, a + 1_000_000)]


@pytest.mark.parametrize("kw", [{"keep_fraction": 0.0}, {"keep_fraction": 1.5},
                                {"time_scale": 0.0}])
def test_bad_practice_settings_are_refused(tmp_path, kw):
    cat = _catalog(tmp_path, [0.0, 1.0], ["A", "A"])
    with pytest.raises(ValueError):
        practice_context(cat, **kw)
