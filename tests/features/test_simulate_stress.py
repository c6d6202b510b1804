"""Tests of the simulator's stress family, trigger, extra classes, curved Earth and twin.

The catalogs here are invented (simulated) data, used for self-consistency checks: the
settings are honoured, the truth twin is the same season, the records hold what the
model puts in them. The checks against the outside world are the curved-Earth formulas
(a hand-computed value, the radar horizon, the flat limit), the current and charge
moments (closed forms and the dipole module's direct integration) and the return
stroke's polarity (textbook sign).
"""

import json
import math

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from classify.cli import main
from features import open_catalog
from features.simulate import (
    ALL_CLASSES,
    CLASSES,
    EFFECTIVE_EARTH_RADIUS_M,
    apparent_elevation_deg,
    draw_season,
    labels_path,
    local_xyz_m,
    resolve_settings,
    simulate_season,
    slant_distance_m,
    stress_settings,
)
from features.simulate._currents import HeidlerCurrent
from features.simulate._flashes import RS, SL
from features.simulate._render import BlockRenderer
from features.simulate._station import MappingDown
from features.simulate._truth import charge_moment_change_c_m, current_moment_peak_a_m
from features.simulate._writer import iter_blocks
from features.simulate.dipole import current_moment_a_m

#: Short records keep the tests fast: 50 us of field, 50 us of VHF power.
SHORT = dict(field_samples=1000, pretrigger_s=2e-5, vhf_samples=1250)
MEMBERS = range(5)


def _times_s(events):
    t = pd.to_datetime(events["time_utc"]).astype("int64").to_numpy()
    return (t - t[0]) * 1e-9


@pytest.fixture(scope="module")
def members(tmp_path_factory):
    """Catalogs of stress members 0-4 (60 events each) and their labels."""
    root = tmp_path_factory.mktemp("stress")
    return {m: simulate_season(root / f"m{m}", 60, 1, preset="stress", member=m)
            for m in MEMBERS}


# ------------------------------------------------------------------ the family
def test_stress_members_are_reproducible_differ_and_stay_in_their_ranges():
    """The same member gives the same station; members differ; draws stay in range."""
    drawn = [stress_settings(m) for m in range(40)]
    assert drawn == [stress_settings(m) for m in range(40)]
    for i in MEMBERS:
        for j in MEMBERS:
            assert (drawn[i] == drawn[j]) == (i == j)
    for s in drawn:  # the ranges of the brief
        record_s = s["field_samples"] / s["field_rate_hz"]
        assert 5e6 <= s["field_rate_hz"] <= 20e6 and 200e-6 <= record_s <= 800e-6
        assert 30e-6 <= s["pretrigger_s"] <= 100e-6 and s["units"] == "counts"
        assert 0.3 <= s["field_noise_v_per_m"] / s["scale"] <= 1.0 + 1e-3
        assert 180e6 <= s["vhf_rate_hz"] <= 250e6 and 2 * s["band_hz"][1] < s["vhf_rate_hz"]
        assert 5.0 <= s["range_km"][0] < s["range_km"][1] <= 200.0
        assert s["decay_time_s"] is None or 1e-4 <= s["decay_time_s"] <= 1e-3
        if s["catalog_practice"] == "one_per_trigger":
            assert s["dead_time_s"] >= record_s - s["pretrigger_s"] - 1e-9
        assert set(s["class_mix"]) <= set(ALL_CLASSES)
    for key, values in (("catalog_practice", {"every_pulse", "one_per_trigger"}),
                        ("vhf_kind", {"power", "voltage"}),
                        ("sign_convention", {"physics", "atmospheric"})):
        assert {s[key] for s in drawn} == values, key
    assert any(s["decay_time_s"] is None for s in drawn)
    assert any("return_stroke" in s["class_mix"] for s in drawn)
    with pytest.raises(ValueError, match="'member' must be an integer >= 0"):
        stress_settings(-1)


def test_a_stress_season_is_byte_identical_when_written_again(members, tmp_path):
    """The same member and seed write the same bytes; another member does not."""
    again = simulate_season(tmp_path / "again", 60, 1, preset="stress", member=2)
    for name in ("field.npy", "vhf.npy", "events.csv", "sources.csv", "catalog.json"):
        assert (again / name).read_bytes() == (members[2] / name).read_bytes(), name
    assert (members[3] / "field.npy").read_bytes() != (members[2] / "field.npy").read_bytes()


def test_chunk_size_does_not_change_a_stress_season(members, tmp_path):
    """Trigger, sferics and a voltage VHF channel written 7 rows at a time: same bytes."""
    assert stress_settings(4)["catalog_practice"] == "one_per_trigger"
    assert stress_settings(4)["sferic_rate_hz"] > 0
    small = simulate_season(tmp_path / "small", 60, 1, preset="stress", member=4,
                            chunk_size=7)
    for name in ("field.npy", "vhf.npy", "events.csv", "sources.csv"):
        assert (small / name).read_bytes() == (members[4] / name).read_bytes(), name


def test_every_stress_catalog_opens_and_records_its_station(members):
    """open_catalog validates every member's catalog; the manifest holds the draws."""
    for m, out in members.items():
        drawn = stress_settings(m)
        cat = open_catalog(out)
        assert cat.n_events == 60
        man = json.loads((out / "catalog.json").read_text())
        f, v = man["field"], man["vhf"]
        assert f["units"] == "counts" and f["scale"] == drawn["scale"]
        assert f["sample_rate_hz"] == drawn["field_rate_hz"]
        assert f["pretrigger_s"] == drawn["pretrigger_s"]
        assert f["decay_time_s"] == drawn["decay_time_s"]
        assert_allclose(f["full_scale"], drawn["full_scale"], rtol=1e-9)
        assert v["kind"] == drawn["vhf_kind"] and v["full_scale"] == drawn["vhf_full_scale"]
        assert man["simulation"]["settings"]["member"] == m
        assert np.load(out / "field.npy").shape == (60, drawn["field_samples"])
        labels = pd.read_csv(labels_path(out))["label"]
        assert set(labels) <= {k for k, x in drawn["class_mix"].items() if x > 0}


def test_vhf_full_scale_is_written_and_narrow_bipolar_events_reach_it(members):
    """Every member clips its VHF at vhf.full_scale, and its NBEs saturate there."""
    for m, out in members.items():
        fs = json.loads((out / "catalog.json").read_text())["vhf"]["full_scale"]
        vhf = np.load(out / "vhf.npy")
        ok = ~np.isnan(vhf).all(axis=1)
        assert np.nanmax(np.abs(vhf)) <= np.float32(fs)
        labels = pd.read_csv(labels_path(out))["label"].to_numpy()
        sat = (np.abs(np.nan_to_num(vhf)) >= np.float32(fs)).any(axis=1)
        nbe = (labels == "narrow_bipolar") & ok
        assert nbe.sum() >= 2 and sat[nbe].mean() >= 0.5, m
        assert sat[~nbe & ok].mean() <= 0.1, m  # the weaker emitters stay below it


# ------------------------------------------------------------ one record per trigger
def test_one_per_trigger_events_are_at_least_a_dead_time_apart(members, tmp_path):
    """In one_per_trigger catalogs consecutive events of a flash are >= dead time apart."""
    kw = dict(SHORT, catalog_practice="one_per_trigger", dead_time_s=300e-6,
              class_mix={"stepped_leader": 1.0}, with_vhf=False, with_sources=False)
    out = simulate_season(tmp_path / "opt", 80, 2, **kw)
    every = simulate_season(tmp_path / "every", 80, 2, **dict(kw, catalog_practice="every_pulse"))
    cases = [(out, 300e-6)] + [(members[m], stress_settings(m)["dead_time_s"])
                               for m in MEMBERS if stress_settings(m)["dead_time_s"]]
    assert len(cases) >= 3
    for folder, dead in cases:
        ev = pd.read_csv(folder / "events.csv")
        gap = np.diff(_times_s(ev))
        same = (ev["flash_id"].to_numpy()[1:] == ev["flash_id"].to_numpy()[:-1])
        assert same.sum() >= 5, folder
        assert gap[same].min() >= dead - 1e-9, folder
    # the next pulse over the level after the dead time triggers: leader steps come
    # 10-30 us apart, so some triggers follow the dead time closely
    gap = np.diff(_times_s(pd.read_csv(out / "events.csv")))
    assert np.sum((gap >= 300e-6) & (gap < 340e-6)) >= 3
    # every_pulse catalogues steps of one train, closer than any dead time
    ev = pd.read_csv(every / "events.csv")
    assert np.diff(_times_s(ev)).min() < 40e-6


# ------------------------------------------------------------ extra classes
def test_return_strokes_and_initial_breakdown_are_catalogued_with_the_class_mix(tmp_path):
    """The extra classes appear with class_mix, in exact counts, with their physics."""
    mix = {"stepped_leader": 0.5, "return_stroke": 0.3, "initial_breakdown": 0.2}
    kw = dict(SHORT, class_mix=mix, decay_time_s=None, field_noise_v_per_m=0.0,
              range_km=(40.0, 80.0), with_vhf=False)
    out = simulate_season(tmp_path / "rs", 50, 4, **kw)
    lab = pd.read_csv(labels_path(out))
    assert lab["label"].value_counts().to_dict() == {"stepped_leader": 25,
                                                     "return_stroke": 15,
                                                     "initial_breakdown": 10}
    truth = draw_season(50, 4, **kw)
    rs = truth[truth["label"] == "return_stroke"]
    assert (rs["altitude_start_m"] == 0).all() and (rs["channel_direction"] == 1).all()
    assert rs["wave_speed_m_per_s"].between(8e7, 2e8).all()  # ~1e8 m/s
    assert rs["peak_current_a"].between(5e3, 50e3).all()
    # a negative return stroke lowers negative charge: its current is upward-directed and
    # its radiation field is negative in the physics convention (positive in the
    # atmospheric one; Rakov & Uman 2003, ch. 4, from memory); initial-breakdown pulses
    # share that initial polarity
    field = np.load(out / "field.npy").astype(float)
    k0 = int(round(2e-5 * 20e6))
    for label in ("return_stroke", "initial_breakdown"):
        rows = np.flatnonzero(lab["label"] == label)
        assert (truth["current_direction"].to_numpy()[rows] == 1).all()
        dip = field[rows, k0:k0 + 60] - field[rows, k0 - 40:k0 - 30].mean(axis=1)[:, None]
        assert (dip.min(axis=1) < -np.abs(dip.max(axis=1))).mean() >= 0.9, label


def test_the_last_leader_step_record_shows_the_return_stroke_after_it():
    """A record of a CG flash's last leader step holds the first return stroke ~25 us on.

    Return strokes are in the records even when they are not catalogued (class mix of
    stepped-leader pulses only): the records are rendered here for the last step of
    every CG flash, with the writer's renderer.
    """
    kw = dict(field_samples=2000, pretrigger_s=2e-5, class_mix={"stepped_leader": 1.0},
              decay_time_s=None, field_noise_v_per_m=0.0, range_km=(30.0, 60.0))
    s = resolve_settings(**kw)
    p = next(iter_blocks(s, 300, 7, sferics=False)).pulses
    steps, strokes = [], []
    for f in np.unique(p["flash"][p["class_index"] == RS]):
        rs = np.flatnonzero((p["flash"] == f) & (p["class_index"] == RS))
        first = rs[np.argmin(p["t_s"][rs])]
        sl = np.flatnonzero((p["flash"] == f) & (p["class_index"] == SL)
                            & (p["t_s"] < p["t_s"][first]))
        last = sl[np.argmax(p["t_s"][sl])]
        # the last step 15-35 us before the stroke (source times; ~25 us)
        assert 15e-6 <= p["t_s"][first] - p["t_s"][last] <= 35e-6
        steps.append(last)
        strokes.append(first)
    assert len(steps) >= 5
    records, own = [], []
    for idx, only in ((steps, False), (strokes, True)):
        p["catalogued"][:] = False
        p["catalogued"][idx] = True
        r = BlockRenderer(p, s, own_only=only)
        order = np.argsort(np.argsort(p["flash"][idx]))  # rows are in flash order
        (records if not only else own).append(r.field_rows(0, r.n_rows)[order])
    fs = s.field_rate_hz
    for k, (step, stroke) in enumerate(zip(steps, strokes, strict=True)):
        lag = p["trigger_s"][stroke] - p["trigger_s"][step]
        at = int(round((s.pretrigger_s + lag) * fs))
        # the step's record (DC: it also holds the flash's accumulated static change)
        # changes by the stroke's own peak where the stroke arrives
        change = records[0][k, at - 60:at + 200] - records[0][k, at - 80]
        assert_allclose(np.abs(change).max(), np.abs(own[0][k]).max(), rtol=0.2)


# ------------------------------------------------------------------ curved Earth
def test_apparent_elevation_matches_a_hand_computed_value():
    """el = atan2((a+h) cos(D/a) - a, (a+h) sin(D/a)) at D = 100 km, h = 10 km: 5.370 deg."""
    # 4/3 effective Earth radius: common radar practice (from memory); by hand:
    # a = 4/3 x 6.371e6 = 8 494 666.7 m, theta = 1e5/a = 0.011 772 09 rad,
    # (a+h) cos(theta) - a = 9 410.7 m, (a+h) sin(theta) = 100 115.4 m,
    # atan(9 410.7 / 100 115.4) = 5.3699 deg
    assert_allclose(EFFECTIVE_EARTH_RADIUS_M, 8_494_666.7, rtol=1e-8)
    assert_allclose(apparent_elevation_deg(100e3, 10e3), 5.3699, atol=5e-5)
    # the same by plain math, over a grid
    for d, h in ((5e3, 2e3), (60e3, 8e3), (200e3, 15e3)):
        a = EFFECTIVE_EARTH_RADIUS_M
        want = math.degrees(math.atan2((a + h) * math.cos(d / a) - a, (a + h) * math.sin(d / a)))
        assert_allclose(apparent_elevation_deg(d, h), want, atol=1e-9)


def test_elevation_has_the_flat_earth_limit_and_the_radar_horizon():
    """Small D and h give atan2(h, D); el = 0 at the radio horizon sqrt(2 a h)."""
    d = np.array([10.0, 50.0, 200.0, 500.0])
    h = np.array([100.0, 40.0, 300.0, 150.0])
    # the curvature drops a source by about D^2 / 2a: 0.015 m at 500 m, 0.002 deg here
    assert_allclose(apparent_elevation_deg(d, h), np.degrees(np.arctan2(h, d)), atol=2e-3)
    # radio horizon with the 4/3 radius, d = sqrt(2 k R h): about 4.12 km x sqrt(h / m)
    # (common radar practice; from memory)
    for height in (1e3, 5e3, 12e3):
        horizon = 4.12e3 * np.sqrt(height)
        assert apparent_elevation_deg(0.99 * horizon, height) > 0
        assert apparent_elevation_deg(1.01 * horizon, height) < 0


def test_local_positions_on_a_sphere_of_the_true_radius():
    """x/y/z: horizontal (R+h) sin(D/R) along the azimuth, z = (R+h) cos(D/R) - R."""
    # R = 6.371e6 m; D = 100 km at azimuth 36.87 deg (x:y = 3:4), h = 10 km: by hand,
    # D/R = 0.015 696 12 rad, horizontal = 6.381e6 x 0.015 695 48 = 100 153.0 m,
    # z = 6.381e6 x 0.999 876 82 - 6.371e6 = 9 214.0 m
    xyz = local_xyz_m(60e3, 80e3, 10e3)
    assert_allclose(np.hypot(xyz[0], xyz[1]), 100_153.0, atol=0.5)
    assert_allclose(xyz[2], 9_214.0, atol=0.5)
    assert_allclose(xyz[0] / xyz[1], 0.75, rtol=1e-12)
    assert_allclose(np.linalg.norm(xyz), slant_distance_m(100e3, 10e3), rtol=1e-12)
    # flat limit (D, h << R): a nearby low source is where a flat Earth puts it
    assert_allclose(local_xyz_m(300.0, -400.0, 50.0), [300.0, -400.0, 50.0], atol=0.05)
    assert_allclose(slant_distance_m(500.0, 50.0), np.hypot(500.0, 50.0), rtol=1e-5)


def test_mapped_elevations_use_the_effective_radius(tmp_path):
    """Without noise, each source's elevation is the 4/3-radius elevation of its position."""
    kw = dict(SHORT, angle_noise_deg=0.0, xyz_noise_m=0.0, range_km=(100.0, 200.0),
              with_vhf=False)
    out = simulate_season(tmp_path / "el", 40, 3, **kw)
    src = pd.read_csv(out / "sources.csv")
    assert len(src) > 100
    # invert x/y/z (true radius) to ground arc and altitude, then the elevation
    r = 6.371e6
    horiz = np.hypot(src["x_m"], src["y_m"])
    theta = np.arctan2(horiz, r + src["z_m"])
    h = np.hypot(horiz, r + src["z_m"]) - r
    want = apparent_elevation_deg(r * theta, h)
    assert_allclose(src["elevation_deg"], want, atol=2e-3)  # 4 decimals, 0.1 m in x/y/z
    # a flat Earth would put them visibly higher at these ranges
    assert (np.degrees(np.arctan2(src["z_m"], horiz)) - src["elevation_deg"]).mean() < -0.1


# ------------------------------------------------------------------ truth twin
def test_the_truth_twin_is_the_same_season(tmp_path):
    """Same ids, times, labels, flashes; a twin's manifest describes no instrument."""
    normal = simulate_season(tmp_path / "n", 60, 5, preset="stress", member=4)
    twin = simulate_season(tmp_path / "t", 60, 5, preset="stress", member=4, truth_twin=True)
    assert (pd.read_csv(normal / "events.csv")).equals(pd.read_csv(twin / "events.csv"))
    assert pd.read_csv(labels_path(normal)).equals(pd.read_csv(labels_path(twin)))
    m, mt = (json.loads((x / "catalog.json").read_text()) for x in (normal, twin))
    assert mt["field"] == {"file": "field.npy", "sample_rate_hz": m["field"]["sample_rate_hz"],
                           "pretrigger_s": m["field"]["pretrigger_s"], "units": "V/m",
                           "scale": 1.0, "sign_convention": "physics", "decay_time_s": None,
                           "delay_s": m["field"]["delay_s"]}
    assert mt["vhf"]["kind"] == "power" and "full_scale" not in mt["vhf"]
    for key in ("sample_rate_hz", "pretrigger_s", "delay_s"):
        assert mt["vhf"][key] == m["vhf"][key]
    assert mt["simulation"]["truth_twin"] and not m["simulation"]["truth_twin"]
    ft = np.load(twin / "field.npy")
    assert ft.dtype == np.float64 and np.load(twin / "vhf.npy").min() >= 0
    open_catalog(twin)
    # sources: the same draws without outages or noise
    src, srct = (pd.read_csv(x / "sources.csv") for x in (normal, twin))
    assert set(src["event_id"]) < set(srct["event_id"])
    assert len(srct) > len(src)


def test_twin_field_equals_the_records_noise_free_part_for_isolated_pulses(tmp_path):
    """DC records of isolated NBEs: the twin is the record less noise and quantisation."""
    kw = dict(SHORT, field_samples=3000, class_mix={"narrow_bipolar": 1.0},
              range_km=(10.0, 12.0), decay_time_s=None, with_vhf=False,
              with_sources=False, sferic_rate_hz=0.0)
    exact = dict(kw, field_noise_v_per_m=0.0, full_scale=1000.0, field_bits=24)
    normal = np.load(simulate_season(tmp_path / "n", 40, 2, **exact) / "field.npy")
    twin = np.load(simulate_season(tmp_path / "t", 40, 2, truth_twin=True, **exact)
                   / "field.npy")
    truth = draw_season(40, 2, **kw)
    alone = truth.groupby("flash_id")["event_id"].transform("size") == 1
    rows = np.flatnonzero(alone & ~truth["margin"])
    assert rows.size >= 20
    lsb = 1000.0 / 2**23
    assert_allclose(twin[rows], normal[rows], atol=lsb + 1e-6 * np.abs(twin[rows]).max())
    assert np.abs(twin[rows]).max() > 50.0  # the pulses are there
    # an int16, noisy station: the record less the twin is noise plus quantisation
    noisy = dict(kw, units="counts", scale=0.05, field_noise_v_per_m=0.04, full_scale=1500.0)
    counts = np.load(simulate_season(tmp_path / "c", 40, 2, **noisy) / "field.npy")
    resid = counts[rows] * 0.05 - twin[rows]
    want = np.sqrt(0.04**2 + 0.05**2 / 12)  # white noise plus uniform rounding error
    assert_allclose(resid.std(axis=1).mean(), want, rtol=0.1)
    assert abs(resid.mean()) < 0.01


def test_twin_records_hold_only_their_own_pulse(tmp_path):
    """In a leader train the twin's pre-trigger is empty; the station's record is not."""
    kw = dict(SHORT, class_mix={"stepped_leader": 1.0}, with_vhf=False, with_sources=False,
              decay_time_s=None, field_noise_v_per_m=0.0)
    normal = np.load(simulate_season(tmp_path / "n", 60, 3, **kw) / "field.npy")
    twin = np.load(simulate_season(tmp_path / "t", 60, 3, truth_twin=True, **kw)
                   / "field.npy")
    before = int(round(1.5e-5 * 20e6))  # 15 us of pre-trigger, before the pulse arrives
    assert (twin[:, :before] == 0).all()
    assert (np.abs(normal[:, :before]).max(axis=1) > 1e-3).mean() > 0.3


# ------------------------------------------------------------------ channel truth
def test_current_moment_peak_matches_direct_integration():
    """The truth's peak current moment is that of dipole.current_moment_a_m."""
    truth = draw_season(300, 6, class_mix={c: 1.0 for c in ALL_CLASSES}, **SHORT)
    rows = truth.groupby("label").head(2)
    assert len(rows) == 12
    for _, r in rows.iterrows():
        cur = HeidlerCurrent(r["peak_current_a"], r["rise_s"], r["decay_s"])
        z0 = r["altitude_start_m"]
        z1 = z0 + r["channel_direction"] * r["channel_length_m"]
        span = cur.peak_time_s + r["channel_length_m"] / r["wave_speed_m_per_s"]
        t = np.linspace(0.0, 1.2 * span + r["rise_s"], 1500)
        m = current_moment_a_m(t, cur, z0, z1, r["wave_speed_m_per_s"], r["decay_length_m"],
                               n_segments=1500)
        assert_allclose(r["current_moment_peak_a_m"], m[np.argmax(np.abs(m))], rtol=2e-3)
        # integral M dt over the pulse, numerically (trapezoid on a long grid)
        t = np.linspace(0.0, span + 30 * r["decay_s"], 6000)
        m = current_moment_a_m(t, cur, z0, z1, r["wave_speed_m_per_s"], r["decay_length_m"],
                               n_segments=600)
        assert_allclose(r["charge_moment_change_c_m"], np.trapezoid(m, t), rtol=3e-3)
    assert (truth["current_direction"] == np.sign(truth["peak_current_a"])).all()
    mid = truth["altitude_start_m"] + 0.5 * truth["channel_direction"] * truth["channel_length_m"]
    assert_allclose(truth["source_altitude_m"], mid)


def test_current_moment_has_its_closed_form_limits():
    """Short channel: M = I L_eff; long TL channel: M peaks at v Q; Q L_eff for the CMC."""
    i0, t1, t2 = 20e3, 1e-6, 5e-6
    total_q = HeidlerCurrent(i0, t1, t2).charge_c(2e-3)
    lam, length = 4.0, 10.0  # L / v = 0.1 ns << rise: the current fills the channel at once
    l_eff = lam * (1 - np.exp(-length / lam))  # integral of exp(-z/lambda) over the channel
    got = current_moment_peak_a_m([i0], [t1], [t2], [length], [1e8], [lam])
    assert_allclose(got, i0 * l_eff, rtol=1e-3)
    assert_allclose(charge_moment_change_c_m([i0], [t1], [t2], [length], [lam]),
                    total_q * l_eff, rtol=1e-9)
    # TL on a channel longer than the current lasts: M(t) = v q(t), peak v Q
    got = current_moment_peak_a_m([-i0], [t1], [t2], [1e6], [1e8], [np.inf])
    assert_allclose(got, -1e8 * total_q, rtol=1e-3)
    assert_allclose(charge_moment_change_c_m([i0], [t1], [t2], [3e3], [np.inf]),
                    total_q * 3e3, rtol=1e-12)


# ------------------------------------------------------------------ sferics, mapping
def test_sferics_change_records_but_not_the_catalogue(tmp_path):
    """Sferics add distant pulses to records; events, labels and times stay the same."""
    kw = dict(SHORT, with_sources=False, with_vhf=False, field_noise_v_per_m=0.0)
    quiet = simulate_season(tmp_path / "q", 80, 3, **kw)
    noisy = simulate_season(tmp_path / "s", 80, 3, sferic_rate_hz=3000.0, **kw)
    assert pd.read_csv(quiet / "events.csv").equals(pd.read_csv(noisy / "events.csv"))
    assert pd.read_csv(labels_path(quiet)).equals(pd.read_csv(labels_path(noisy)))
    diff = np.abs(np.load(noisy / "field.npy") - np.load(quiet / "field.npy")).max(axis=1)
    changed = diff > 1e-3
    assert 0.2 <= changed.mean() <= 0.95
    # distant strokes: at most a few V/m (a 50 kA stroke at 200 km gives ~5 V/m)
    assert diff.max() < 10.0


def test_mapping_outages_remove_sources(tmp_path):
    """A fraction of events, and the events of down stretches, lose their sources."""
    kw = dict(SHORT, with_vhf=False)
    base = pd.read_csv(simulate_season(tmp_path / "b", 300, 2, **kw) / "sources.csv")
    cut = pd.read_csv(simulate_season(tmp_path / "c", 300, 2, mapping_outage_fraction=0.3,
                                      **kw) / "sources.csv")
    mapped, left = set(base["event_id"]), set(cut["event_id"])
    assert left < mapped  # the same sources, fewer events keep them
    kept = base[base["event_id"].isin(left)].reset_index(drop=True)
    assert kept.equals(cut)
    assert 0.2 <= 1 - len(left) / len(mapped) <= 0.4
    down = pd.read_csv(simulate_season(tmp_path / "d", 300, 2, mapping_down_fraction=0.99,
                                       **kw) / "sources.csv")
    assert down["event_id"].nunique() < 0.3 * len(mapped)


def test_mapping_down_stretches_cover_their_fraction_of_time():
    """Down stretches last Exp(6 h) and cover the asked fraction of a long season."""
    down = MappingDown(0.3, 0, np.random.default_rng(0))
    t = np.arange(0, 20_000 * 3600, 60) * 1_000_000_000  # 20,000 h, one sample a minute
    is_down = down.is_down(t)
    assert_allclose(is_down.mean(), 0.3, atol=0.05)
    starts = np.flatnonzero(np.diff(is_down.astype(int)) == 1)
    assert_allclose(is_down.sum() / starts.size / 60, 6.0, rtol=0.15)  # hours
    assert not MappingDown(0.0, 0, np.random.default_rng(0)).is_down(t).any()


# ------------------------------------------------------------------ settings, CLI
@pytest.mark.parametrize(("kw", "match"), [
    ({"member": 3}, "'member' applies to preset 'stress' only"),
    ({"preset": "stress", "member": -2}, "'member' must be an integer >= 0"),
    ({"catalog_practice": "sometimes"}, "'catalog_practice' must be one of"),
    ({"sferic_rate_hz": -1.0}, "'sferic_rate_hz' must be"),
    ({"vhf_full_scale": 0.0}, "'vhf_full_scale' must be"),
    ({"mapping_down_fraction": 1.0}, "'mapping_down_fraction' must be a number in"),
    ({"class_mix": {"sferic": 1.0}}, "'class_mix' key must be one of"),
    ({"truth_twin": "yes"}, "'truth_twin' must be True or False"),
])
def test_bad_stress_settings_name_the_setting(kw, match):
    """Bad new settings raise ValueError naming the setting."""
    with pytest.raises(ValueError, match=match):
        resolve_settings(**kw)


def test_stress_keywords_override_the_draws():
    """Explicit keywords win over a member's draws; the other draws stay."""
    s = resolve_settings("stress", member=1, decay_time_s=None, sferic_rate_hz=0.0)
    drawn = stress_settings(1)
    assert s.decay_time_s is None and s.sferic_rate_hz == 0.0
    assert s.field_rate_hz == drawn["field_rate_hz"] and s.member == 1
    assert resolve_settings("stress").member == 0
    assert set(CLASSES) < set(ALL_CLASSES) and len(ALL_CLASSES) == 6


def test_cli_stress_member_and_twin(tmp_path, capsys):
    """`pulsesort simulate OUT --preset stress --member K [--truth-twin]` writes both."""
    args = ["--events", "20", "--seed", "1", "--preset", "stress", "--member", "2"]
    assert main(["simulate", str(tmp_path / "s"), *args]) == 0
    assert "preset stress member 2" in capsys.readouterr().out
    assert main(["simulate", str(tmp_path / "t"), *args, "--truth-twin"]) == 0
    assert "truth twin" in capsys.readouterr().out
    m = json.loads((tmp_path / "t" / "catalog.json").read_text())
    assert m["field"]["decay_time_s"] is None and m["simulation"]["settings"]["member"] == 2
    assert main(["simulate", str(tmp_path / "x"), "--events", "5", "--seed", "1",
                 "--member", "2"]) == 2
    assert "--member" in capsys.readouterr().err
    assert main(["simulate", str(tmp_path / "y"), "--events", "5", "--seed", "1",
                 "--catalog-practice", "never"]) == 2
    assert "--catalog-practice" in capsys.readouterr().err
