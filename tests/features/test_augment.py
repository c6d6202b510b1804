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


def _train(fs, pre_s, m, onsets_s, rise_s=0.5e-6, fall_s=3e-6):
    """One row of a leader-step-like train: unit double-exponential pulses, V/m."""
    t = np.arange(m) / fs - pre_s
    x = np.zeros(m)
    for t0 in onsets_s:
        u = np.clip(t - t0, 0, None)
        x += np.where(t >= t0, np.exp(-u / fall_s) - np.exp(-u / rise_s), 0.0)
    return x[None, :]


def test_a_shorter_record_after_the_trigger_leaves_the_later_steps_out():
    """A station recording less after the trigger sees fewer of a train's later pulses:
    the variant keeps ``pre + post`` of the record (ceil of its samples) and nothing
    else changes. Steps 60 us apart (leader steps 10-50+ us apart, Rakov & Uman 2003,
    ch. 4; from memory); the neighbour count is the schema's (features.pulses)."""
    from features._manifest import Channel
    from features.augment import StationVariant, apply_field
    from features.waveform import field_features

    fs, pre, m = 20e6, 50e-6, 8000
    x = _train(fs, pre, m, [0.0, 60e-6]) + np.random.default_rng(1).normal(0, 1e-3, (1, m))
    ch = Channel("field", None, fs, pre, 0.0, None, m, np.dtype(np.float32))
    full, ch_full = apply_field(x, ch, StationVariant())
    short, ch_short = apply_field(x, ch, StationVariant(posttrigger_s=40e-6))
    n = int(np.ceil((pre + 40e-6) * fs))
    assert short.shape == (1, n) and ch_short.n_samples == n
    assert ch_short.pretrigger_s == pre and ch_full.n_samples == m
    assert_allclose(short, x[:, :n])
    after_full = field_features(full, fs, pretrigger_s=pre)["neighbours_after"]
    after_short = field_features(short, fs, pretrigger_s=pre)["neighbours_after"]
    assert after_full[0] == 1 and after_short[0] == 0


def test_drawn_stations_shorten_the_record_after_the_trigger_at_times():
    from features.augment import VARIANT_RANGES, draw_variant

    rng = np.random.default_rng(5)
    post = np.array([draw_variant(rng).posttrigger_s for _ in range(2000)], dtype=float)
    lo, hi = VARIANT_RANGES["posttrigger_s"]
    used = post[np.isfinite(post)]
    assert 0.25 < used.size / post.size < 0.35                 # 30 % of the stations
    assert (used >= lo).all() and (used <= hi).all()
    # log-uniform: the median is the geometric mean of the ends
    assert_allclose(np.median(used), np.sqrt(lo * hi), rtol=0.1)


def test_unmapped_view_leaves_out_the_sources_of_the_dropped_pulses(tmp_path):
    """A station whose mapper located none of some pulses: their mapping features are
    those of a pulse without sources (n_sources 0, NaN speed and altitude), their range
    unknown only with ``drop_range``; every other pulse and the catalog on disk as they
    were (self-consistency on a simulated season)."""
    from features import extract_features
    from features.augment import unmapped_view
    from features.simulate import simulate_season

    cat = open_catalog(simulate_season(tmp_path / "hollowmere-map", 60, seed=5))
    drop = np.zeros(cat.n_events, dtype=bool)
    drop[::3] = True
    before = extract_features(cat)
    for drop_range in (False, True):
        view = unmapped_view(cat, drop, drop_range=drop_range)
        after = extract_features(view)
        assert (after["n_sources"][drop] == 0).all()
        assert after.loc[drop, ["speed_m_per_s", "altitude_m", "source_range_m"]].isna().all(
            axis=None)
        assert np.isnan(after["range_m"][drop]).all() == drop_range
        assert_allclose(after["range_m"][~drop], before["range_m"][~drop])
        for col in ("n_sources", "speed_m_per_s", "altitude_m", "peak_field_v_per_m"):
            assert_allclose(after[col][~drop], before[col][~drop], equal_nan=True)
    assert cat.sources.counts()[drop].sum() > 0          # the catalog itself is untouched
    with pytest.raises(ValueError, match="shape"):
        unmapped_view(cat, drop[:-1])
