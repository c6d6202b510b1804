"""Source-track features against known straight tracks."""

import numpy as np
import pytest
from numpy.testing import assert_allclose

from features._tables import SourceTable
from features.mapping import grouped_median, source_features


def _table(ev, t, az, el, xyz=None):
    ev = np.asarray(ev)
    n = ev.max() + 1
    return SourceTable(event_index=ev, t_s=np.asarray(t, float), azimuth_deg=np.asarray(az),
                       elevation_deg=np.asarray(el), xyz_m=xyz, power_db=None,
                       offsets=np.searchsorted(ev, np.arange(n + 1)))


def _track(start_m, velocity_m_per_s, t_s):
    xyz = np.asarray(start_m) + np.outer(t_s, velocity_m_per_s)
    az = np.degrees(np.arctan2(xyz[:, 0], xyz[:, 1])) % 360
    el = np.degrees(np.arctan2(xyz[:, 2], np.hypot(xyz[:, 0], xyz[:, 1])))
    return xyz, az, el


def test_grouped_median_matches_numpy():
    """Grouped median equals numpy.median per group; empty groups are NaN."""
    rng = np.random.default_rng(0)
    g = np.sort(rng.integers(0, 5, 200))
    v = rng.normal(size=200)
    med = grouped_median(v, g, 6)
    for k in range(5):
        assert_allclose(med[k], np.median(v[g == k]))
    assert np.isnan(med[5])


def test_speed_and_direction_of_3d_track_with_outliers():
    """A 1e7 m/s track rising at 30 deg across the line of sight: speed within 5 %
    and direction within 1.5 deg despite 2 outliers (the apparent direction on the
    sky equals the 3-D one for motion perpendicular to the line of sight)."""
    rng = np.random.default_rng(0)
    speed = 1e7
    # station -> start is (0.6, 0.8) horizontally; (0.8, -0.6) is across it
    vel = speed * np.array([np.cos(np.radians(30)) * 0.8, -np.cos(np.radians(30)) * 0.6,
                            np.sin(np.radians(30))])
    t = np.sort(rng.uniform(0, 200e-6, 20))
    xyz, az, el = _track([30e3, 40e3, 8e3], vel, t)
    xyz = xyz + rng.normal(0, 20.0, xyz.shape)
    xyz[5] += [3000, -2000, 1500]     # two gross mapping errors
    xyz[12] += [-2500, 1000, -3000]
    out = source_features(_table(np.zeros(20, int), t, az, el, xyz), np.array([50e3]), 1)
    assert_allclose(out["speed_m_per_s"], speed, rtol=0.05)
    assert_allclose(out["vertical_speed_m_per_s"], vel[2], rtol=0.05)
    assert_allclose(out["motion_elevation_deg"], 30.0, atol=1.5)
    assert out["n_sources"][0] == 20
    assert_allclose(out["source_duration_s"], t[-1] - t[0])


def test_speed_from_range_and_angles_without_xyz():
    """Without xyz, range x angles gives the tangential + vertical speed within 5 %."""
    d = 60e3
    t = np.linspace(0, 1e-3, 15)
    # tangential (azimuthal) motion at constant horizontal range, plus a climb
    v_t, v_z = 2e5, 1e5
    az = 40.0 + np.degrees(v_t * t / d)
    z = 5e3 + v_z * t
    el = np.degrees(np.arctan(z / d))
    out = source_features(_table(np.zeros(15, int), t, az, el), np.array([d]), 1)
    assert_allclose(out["speed_m_per_s"], np.hypot(v_t, v_z), rtol=0.05)
    assert_allclose(out["vertical_speed_m_per_s"], v_z, rtol=0.05)
    assert_allclose(out["motion_elevation_deg"], np.degrees(np.arctan2(v_z, v_t)), atol=1.0)
    assert_allclose(out["altitude_m"], np.median(z), rtol=1e-3)


def test_angular_rate_without_range():
    """No xyz, no range: speed is NaN, angular rate and direction remain."""
    t = np.linspace(0, 2e-4, 10)
    az = 100.0 + 2e3 * t            # 2,000 deg/s in azimuth at elevation ~0
    el = np.full(10, 0.5)
    out = source_features(_table(np.zeros(10, int), t, az, el), np.array([np.nan]), 1)
    assert np.isnan(out["speed_m_per_s"][0])
    assert_allclose(out["angular_rate_deg_per_s"], 2e3 * np.cos(np.radians(0.5)), rtol=1e-3)
    assert_allclose(out["net_to_path"], 1.0, rtol=1e-4)  # chords of a 0.4 deg arc


def test_azimuth_wraps_through_north():
    """A track crossing azimuth 0/360 has a small, not a 360-degree, angular rate."""
    t = np.linspace(0, 1e-4, 8)
    az = (358.0 + 4e4 * t) % 360
    out = source_features(_table(np.zeros(8, int), t, az, np.full(8, 10.0)),
                          np.array([np.nan]), 1)
    assert_allclose(out["angular_rate_deg_per_s"], 4e4 * np.cos(np.radians(10)), rtol=1e-3)


def test_back_and_forth_track_and_too_few_sources():
    """A track that returns has net_to_path near 0; under 3 sources gives NaN."""
    t = np.arange(6) * 1e-5
    x = np.array([0, 100, 200, 200, 100, 0], float)
    xyz = np.column_stack([x + 10e3, np.full(6, 20e3), np.full(6, 6e3)])
    ev = np.array([0, 0, 0, 0, 0, 0, 1, 1])
    t2 = np.concatenate([t, [0, 1e-5]])
    xyz2 = np.vstack([xyz, [[1, 1, 1], [2, 2, 2]]])
    az = np.degrees(np.arctan2(xyz2[:, 0], xyz2[:, 1])) % 360
    el = np.degrees(np.arctan2(xyz2[:, 2], np.hypot(xyz2[:, 0], xyz2[:, 1])))
    out = source_features(_table(ev, t2, az, el, xyz2), np.array([np.nan, np.nan]), 2)
    assert out["net_to_path"][0] == pytest.approx(0.0, abs=1e-9)
    assert np.isnan(out["speed_m_per_s"][1]) and out["n_sources"][1] == 2


def test_no_sources_table_gives_nan():
    """A catalog without sources.csv: every mapping feature NaN (not 0)."""
    out = source_features(None, np.array([1e4, 2e4]), 2)
    assert all(np.isnan(v).all() for v in out.values())
