"""Tests of the season simulator (features.simulate) and ``pulsesort simulate``.

The catalogs here are invented (simulated) data, used only for self-consistency checks:
the spec's rules, determinism, the instrument model against its analytic forms, and the
physics against the dipole equations (the published-value checks are in test_dipole.py).
"""

import json
import re

import numpy as np
import pandas as pd
import pytest
import scipy.constants
from numpy.testing import assert_allclose
from scipy import signal

from classify.cli import main
from features import InputError, open_catalog
from features.simulate import (
    CLASSES,
    draw_season,
    labels_path,
    local_xyz_m,
    pulse_fields,
    resolve_settings,
    simulate_season,
)

C = scipy.constants.c
EPS0 = scipy.constants.epsilon_0
#: Short records keep the tests fast: 50 us of field, 50 us of VHF power.
SHORT = dict(field_samples=1000, pretrigger_s=2e-5, vhf_samples=1250)
ISO_NS = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{9}Z$")


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    """A small reference-shape catalog (short records) and its settings."""
    out = tmp_path_factory.mktemp("sim") / "hollowmere-2031"
    simulate_season(out, 160, 5, **SHORT)
    return out


def _files(folder):
    return sorted(p for p in folder.iterdir())


def test_same_seed_gives_identical_bytes(base, tmp_path):
    """The same seed and settings write byte-identical files; another seed does not."""
    again = simulate_season(tmp_path / "again", 160, 5, **SHORT)
    for a, b in zip(_files(base), _files(again), strict=True):
        assert a.name == b.name
        assert a.read_bytes() == b.read_bytes(), a.name
    assert labels_path(base).read_bytes() == labels_path(again).read_bytes()
    other = simulate_season(tmp_path / "other", 160, 6, **SHORT)
    assert (other / "field.npy").read_bytes() != (base / "field.npy").read_bytes()


def test_chunk_size_does_not_change_the_files(base, tmp_path):
    """Writing in chunks of 7 rows gives the same bytes as the default chunks."""
    small = simulate_season(tmp_path / "small", 160, 5, chunk_size=7, **SHORT)
    for name in ("field.npy", "vhf.npy", "events.csv", "sources.csv"):
        assert (small / name).read_bytes() == (base / name).read_bytes(), name


def test_manifest_arrays_and_tables_follow_the_spec(base):
    """catalog.json, the arrays and the CSV files are what catalog v1 asks for."""
    m = json.loads((base / "catalog.json").read_text())
    assert m["format"] == "pulse-catalog" and m["version"] == 1
    assert m["catalog_id"] == "hollowmere-2031" and m["station"] == "hollowmere"
    assert m["season"] == "2031" and m["events"] == "events.csv"
    f = m["field"]
    assert f == {"file": "field.npy", "sample_rate_hz": 20e6, "pretrigger_s": 2e-5,
                 "units": "V/m", "scale": 1.0, "sign_convention": "physics",
                 "decay_time_s": 1e-3, "delay_s": 0.0, "full_scale": 250.0}
    assert m["vhf"]["kind"] == "power" and m["vhf"]["delay_s"] == 4e-7
    assert m["sources"] == {"file": "sources.csv"}
    field = np.load(base / "field.npy", mmap_mode="r")
    vhf = np.load(base / "vhf.npy", mmap_mode="r")
    assert field.shape == (160, 1000) and field.dtype == np.float32
    assert vhf.shape == (160, 1250) and vhf.dtype == np.float32
    assert np.isfinite(field).all() and (np.asarray(vhf) >= 0).all()
    ev = pd.read_csv(base / "events.csv", dtype={"event_id": str, "flash_id": str})
    assert list(ev.columns) == ["event_id", "time_utc", "flash_id", "range_m"]
    assert ev["event_id"].is_unique and len(ev) == 160
    assert ev["time_utc"].map(ISO_NS.match).notna().all()
    t = pd.to_datetime(ev["time_utc"]).astype("int64")
    assert (np.diff(t) > 0).all()  # rows in time order
    assert ev["range_m"].between(10e3, 150e3).all()
    src = pd.read_csv(base / "sources.csv")
    assert list(src.columns) == ["event_id", "t_s", "azimuth_deg", "elevation_deg", "x_m",
                                 "y_m", "z_m", "power_db"]
    assert src["event_id"].isin(ev["event_id"]).all()
    assert src["azimuth_deg"].between(0, 360, inclusive="left").all()
    assert src["elevation_deg"].between(0, 90).all()
    lab = pd.read_csv(labels_path(base))
    assert list(lab.columns) == ["event_id", "label", "analyst", "decided_at", "note"]
    assert (lab["event_id"] == ev["event_id"]).all() and lab["label"].isin(CLASSES).all()
    assert (lab["analyst"] == "truth").all()
    assert lab["decided_at"].eq("2031-12-01T00:00:00Z").all()


def test_the_catalog_reader_opens_it(base):
    """features.catalog.open_catalog validates and opens the simulated catalog."""
    cat = open_catalog(base)
    assert cat.catalog_id == "hollowmere-2031" and cat.n_events == 160
    assert cat.has_sources and cat.has_xyz
    field, _ = cat.read_field(0, 5)
    assert_allclose(field, np.load(base / "field.npy")[:5], rtol=0, atol=0)


def test_class_mix_is_honoured_exactly(tmp_path):
    """The event counts per class are the largest-remainder split of the class mix."""
    mix = {"narrow_bipolar": 0.3, "stepped_leader": 0.1, "recoil": 0.2,
           "energetic_in_cloud": 0.4}
    out = simulate_season(tmp_path / "mix", 97, 1, class_mix=mix, with_vhf=False, **SHORT)
    counts = pd.read_csv(labels_path(out))["label"].value_counts().to_dict()
    assert counts == {"narrow_bipolar": 29, "stepped_leader": 10, "recoil": 19,
                      "energetic_in_cloud": 39}


def test_draw_season_is_the_written_season(base):
    """draw_season gives the events, times and labels that simulate_season wrote."""
    truth = draw_season(160, 5, **SHORT)
    ev = pd.read_csv(base / "events.csv")
    lab = pd.read_csv(labels_path(base))
    assert (truth["event_id"] == ev["event_id"]).all()
    assert (truth["time_utc"] == ev["time_utc"]).all()
    assert (truth["label"] == lab["label"]).all()
    assert_allclose(truth["range_m"], ev["range_m"], atol=0.05)


def test_sign_convention_flips_the_stored_sign(base, tmp_path):
    """The atmospheric convention stores exactly the negated field."""
    atm = simulate_season(tmp_path / "atm", 160, 5, sign_convention="atmospheric", **SHORT)
    assert json.loads((atm / "catalog.json").read_text())["field"]["sign_convention"] == (
        "atmospheric")
    assert_allclose(np.load(atm / "field.npy"), -np.load(base / "field.npy"), rtol=0, atol=0)


def test_counts_and_scale_reproduce_the_field_within_one_count(base, tmp_path):
    """int16 counts times scale give the V/m record within one count."""
    out = simulate_season(tmp_path / "counts", 160, 5, units="counts", scale=2.0**-6,
                          **SHORT)
    m = json.loads((out / "catalog.json").read_text())["field"]
    counts = np.load(out / "field.npy")
    assert counts.dtype == np.int16 and m["units"] == "counts" and m["scale"] == 2.0**-6
    volts = np.load(base / "field.npy").astype(float)
    assert np.abs(counts * m["scale"] - volts).max() <= m["scale"]


def test_clipping_at_full_scale(tmp_path):
    """Samples never pass full_scale, and big pulses stop exactly at it."""
    out = simulate_season(tmp_path / "clip", 120, 3, full_scale=3.0, **SHORT)
    field = np.load(out / "field.npy")
    assert np.abs(field).max() == np.float32(3.0)
    clipped = (np.abs(field) >= 3.0).any(axis=1)
    assert 0 < clipped.sum() < 120
    m = json.loads((out / "catalog.json").read_text())
    assert m["field"]["full_scale"] == 3.0
    assert m["simulation"]["summary"]["n_rows_clipped"] == clipped.sum()
    assert open_catalog(out).field.clipped_rows(field).sum() == clipped.sum()


def test_clip_fraction_sets_the_clip_level(tmp_path):
    """With clip_fraction, about that fraction of rows clip at the chosen level."""
    out = simulate_season(tmp_path / "frac", 300, 4, clip_fraction=0.1, units="counts",
                          **SHORT)
    m = json.loads((out / "catalog.json").read_text())["field"]
    counts = np.load(out / "field.npy")
    limit = int(round(m["full_scale"] / m["scale"]))
    assert np.abs(counts).max() == limit
    frac = (np.abs(counts) >= limit).any(axis=1).mean()
    assert 0.07 <= frac <= 0.13


def _isolated_nbe_rows(truth):
    """Rows of narrow bipolar events alone in their flash (no other pulse nearby)."""
    alone = truth.groupby("flash_id")["event_id"].transform("size") == 1
    return np.flatnonzero(((truth["label"] == "narrow_bipolar") & ~truth["margin"]
                           & alone).to_numpy())


def test_rc_decay_is_a_first_order_high_pass(tmp_path):
    """The RC-coupled record is the DC record high-passed, decaying as exp(-t/tau)."""
    tau = 5e-5
    kw = dict(SHORT, field_samples=3000, class_mix={"narrow_bipolar": 1.0},
              range_km=(10.0, 12.0), field_noise_v_per_m=0.0, full_scale=1000.0,
              field_bits=24, with_vhf=False, with_sources=False)
    dc = np.load(simulate_season(tmp_path / "dc", 40, 2, decay_time_s=None, **kw)
                 / "field.npy").astype(float)
    ac = np.load(simulate_season(tmp_path / "ac", 40, 2, decay_time_s=tau, **kw)
                 / "field.npy").astype(float)
    rows = _isolated_nbe_rows(draw_season(40, 2, decay_time_s=tau, **kw))
    assert rows.size >= 20
    lsb = 1000.0 / 2**23
    fs = 20e6
    a = np.exp(-1 / (fs * tau))
    for r in rows:
        # a first-order RC high-pass: y[n] = a y[n-1] + x[n] - x[n-1]
        want = signal.lfilter([1.0, -1.0], [1.0, -a], dc[r])
        assert_allclose(ac[r], want, atol=3e-3 * np.abs(dc[r]).max() + 3 * lsb)
    # after the pulse the DC record holds its static change and the RC one decays
    t = np.arange(3000) / fs - 2e-5
    i1, i2 = np.searchsorted(t, [60e-6, 110e-6])  # the currents are over by then
    checked = 0
    for r in rows:
        level = dc[r, i1:].mean()
        assert np.abs(dc[r, i1:] - level).max() <= 2 * lsb + 1e-3 * abs(level)
        if abs(ac[r, i1]) > 1000 * lsb:  # y(t2) = y(t1) exp(-(t2 - t1)/tau)
            want = ac[r, i1] * np.exp(-(t[i2] - t[i1]) / tau)
            assert abs(ac[r, i2] - want) <= 2 * lsb + 1e-3 * abs(ac[r, i1])
            checked += 1
    assert checked >= 5


def test_radiation_term_is_minus_dm_dt_over_2_pi_eps0_c2_d():
    """Far away, a simulated pulse's radiation term is -dM/dt / (2 pi eps0 c^2 D)."""
    truth = draw_season(80, 9, **SHORT)
    rows = truth[truth["label"].isin(["narrow_bipolar", "stepped_leader"])].head(6).copy()
    # lower the channels to the ground: the retardation differences along the channel,
    # z L / (R c), are then below 1 ns at 1000 km (at 10 km altitude they shift sharp
    # features by several ns: physics, but not the far-field formula)
    length = rows["channel_length_m"]
    rows["altitude_start_m"] = np.where(rows["channel_direction"] > 0, 10.0, length + 10.0)
    fs, d = 200e6, 1e6
    t, terms, moment = pulse_fields(rows, fs, 3000, distance_m=d)
    want = -np.gradient(moment, 1 / fs, axis=1) / (2 * np.pi * EPS0 * C**2 * d)
    for got, exp in zip(terms.radiation_v_per_m, want, strict=True):
        assert_allclose(got, exp, atol=3e-3 * np.abs(exp).max())
    assert np.abs(terms.electrostatic_v_per_m).max() < 1e-3 * np.abs(want).max()


def test_sources_lie_on_the_front_and_give_its_speed(tmp_path):
    """Sources lie on each straight front (seen over a curved Earth) and give its speed."""
    kw = dict(SHORT, class_mix={"narrow_bipolar": 0.5, "recoil": 0.5}, xyz_noise_m=1.0,
              angle_noise_deg=0.02, with_vhf=False)
    out = simulate_season(tmp_path / "src", 60, 8, **kw)
    truth = draw_season(60, 8, **kw).set_index("event_id")
    src = pd.read_csv(out / "sources.csv")
    checked = 0
    for event_id, grp in src.groupby("event_id"):
        row = truth.loc[event_id]
        if row["margin"] or len(grp) < 4:
            continue
        xyz = grp[["x_m", "y_m", "z_m"]].to_numpy()
        t_emit = grp["t_s"].to_numpy() - np.linalg.norm(xyz, axis=1) / C
        coef = np.polyfit(t_emit - t_emit.mean(), xyz, 1)
        speed = np.linalg.norm(coef[0])
        # the local frame stretches horizontal lengths by (R + h)/R < 1.003 here
        assert_allclose(speed, row["front_speed_m_per_s"], rtol=0.05)
        # the front in the simulator's frame (ground arc, altitude), then seen locally
        start = np.array([row["front_x0_m"], row["front_y0_m"], row["front_z0_m"]])
        u = np.array([row["front_ux"], row["front_uy"], row["front_uz"]])
        u_local = np.diff(local_xyz_m(*np.stack([start, start + 100.0 * u]).T), axis=0)[0]
        assert abs(abs(coef[0] @ u_local) / (speed * np.linalg.norm(u_local)) - 1) < 1e-3
        path = (t_emit - row["front_t0_s"]) * row["front_speed_m_per_s"]
        want = local_xyz_m(*(start + path[:, None] * u).T)
        assert np.linalg.norm(xyz - want, axis=1).max() < 6.0  # 1 m noise per axis
        az = np.degrees(np.arctan2(xyz[:, 0], xyz[:, 1])) % 360
        assert_allclose(grp["azimuth_deg"], az, atol=0.2)
        checked += 1
    assert checked >= 20


def test_windows_hold_neighbouring_pulses(tmp_path):
    """A window shows the next pulse of its flash where that pulse's own window has it."""
    kw = dict(field_samples=2000, pretrigger_s=2e-5, with_vhf=False, with_sources=False,
              class_mix={"stepped_leader": 1.0}, field_noise_v_per_m=0.0)
    out = simulate_season(tmp_path / "nb", 60, 3, **kw)
    field = np.load(out / "field.npy").astype(float)
    ev = pd.read_csv(out / "events.csv")
    t_ns = pd.to_datetime(ev["time_utc"]).astype("int64").to_numpy()
    fs, pre = 20e6, 2e-5
    pairs = 0
    for i in range(len(ev) - 1):
        dt = (t_ns[i + 1] - t_ns[i]) * 1e-9
        if ev["flash_id"][i] != ev["flash_id"][i + 1] or not 5e-6 < dt < 60e-6:
            continue
        k = int(round((pre + dt) * fs))
        j = int(round(pre * fs))
        near_i = np.abs(field[i, k - 10:k + 20]).max()
        near_j = np.abs(field[i + 1, j - 10:j + 20]).max()
        assert_allclose(near_i, near_j, rtol=0.15)
        pairs += 1
    assert pairs >= 5


def test_no_range_no_xyz_no_vhf_no_sources(tmp_path):
    """Turning data off removes the column, the keys and the files."""
    out = simulate_season(tmp_path / "bare", 40, 1, with_range=False, with_xyz=False, **SHORT)
    assert "range_m" not in pd.read_csv(out / "events.csv").columns
    assert list(pd.read_csv(out / "sources.csv").columns) == [
        "event_id", "t_s", "azimuth_deg", "elevation_deg", "power_db"]
    out = simulate_season(tmp_path / "nothing", 40, 1, with_vhf=False, with_sources=False,
                          **SHORT)
    m = json.loads((out / "catalog.json").read_text())
    assert "vhf" not in m and "sources" not in m
    assert sorted(p.name for p in out.iterdir()) == ["catalog.json", "events.csv",
                                                     "field.npy"]
    assert open_catalog(out).n_events == 40


def test_missing_vhf_rows_are_all_nan(tmp_path):
    """missing_vhf_fraction rows hold only NaN; the others are finite power >= 0."""
    out = simulate_season(tmp_path / "miss", 200, 2, missing_vhf_fraction=0.25, **SHORT)
    vhf = np.load(out / "vhf.npy")
    gone = np.isnan(vhf).all(axis=1)
    assert 0.17 <= gone.mean() <= 0.33
    assert np.isfinite(vhf[~gone]).all() and (vhf[~gone] >= 0).all()


def test_vhf_voltage_is_band_limited_with_the_power_as_envelope(tmp_path):
    """A voltage VHF channel stays in band; its analytic-signal power averages the floor."""
    kw = dict(SHORT, vhf_kind="voltage", vhf_samples=5000, vhf_noise_floor=0.5,
              class_mix={"narrow_bipolar": 1.0}, with_sources=False)
    out = simulate_season(tmp_path / "volt", 30, 4, **kw)
    m = json.loads((out / "catalog.json").read_text())["vhf"]
    assert m["kind"] == "voltage" and m["sample_rate_hz"] == 250e6
    v = np.load(out / "vhf.npy").astype(float)
    spec = np.abs(np.fft.rfft(v, axis=1)) ** 2
    f = np.fft.rfftfreq(v.shape[1], 1 / 250e6)
    out_band = (f < 25e6) | (f > 85e6)
    assert spec[:, out_band].sum() < 1e-6 * spec.sum()
    pre = v[:, :1500]  # the first 6 us: before the (isolated) pulses
    power = np.abs(signal.hilbert(pre, axis=1)) ** 2
    assert_allclose(power[:, 200:-200].mean(), 0.5, rtol=0.08)


def test_refuses_to_overwrite_and_leaves_nothing_half_written(base, tmp_path, monkeypatch):
    """An existing catalog is kept unless overwrite=True; a failure leaves no files."""
    with pytest.raises(InputError, match="not empty"):
        simulate_season(base, 10, 1, **SHORT)
    out = simulate_season(tmp_path / "re", 10, 1, **SHORT)
    simulate_season(out, 12, 2, overwrite=True, **SHORT)
    assert len(pd.read_csv(out / "events.csv")) == 12
    import features.simulate._writer as writer

    def boom(*args, **kwargs):
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(writer, "sources_table", boom)
    with pytest.raises(RuntimeError, match="disk on fire"):
        simulate_season(tmp_path / "broken", 10, 1, **SHORT)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["re", "re.labels.csv"]


@pytest.mark.parametrize(("kw", "match"), [
    ({"field_rate_hz": -20e6}, "'field_rate_hz' must be a finite number > 0"),
    ({"field_samples": 10.5}, "'field_samples' must be an integer"),
    ({"vhf_kind": "sound"}, "'vhf_kind' must be one of"),
    ({"class_mix": {"ball_lightning": 1.0}}, "'class_mix' key must be one of"),
    ({"full_scale": 100.0, "clip_fraction": 0.1}, "exclude each other"),
    ({"vhf_kind": "voltage", "vhf_rate_hz": 100e6}, "'vhf_rate_hz'"),
    ({"pretrigger_s": 1.0}, "'pretrigger_s'"),
    ({"range_km": (50, 10)}, "'range_km' must satisfy"),
    ({"warp_drive": True}, "unknown setting"),
])
def test_bad_settings_name_the_setting(tmp_path, kw, match):
    """A bad setting raises ValueError naming it, before anything is written."""
    with pytest.raises(ValueError, match=match):
        simulate_season(tmp_path / "bad", 10, 1, **kw)
    assert not (tmp_path / "bad").exists()


def test_presets_and_explicit_overrides():
    """Presets set their defaults; explicit keywords win over them."""
    nxt = resolve_settings("next")
    assert (nxt.season, nxt.sign_convention, nxt.units, nxt.field_rate_hz) == (
        "2032", "atmospheric", "counts", 10e6)
    hard = resolve_settings("hard")
    assert not hard.with_range and not hard.with_xyz and hard.clip_fraction == 0.02
    assert hard.decay_time_s == 2e-4 and hard.full_scale is None
    mine = resolve_settings("hard", full_scale=80.0, with_range=True)
    assert mine.full_scale == 80.0 and mine.clip_fraction is None and mine.with_range
    assert resolve_settings(catalog_id=None).catalog_id == "hollowmere-2031"
    assert resolve_settings(decay_time_s=None).decay_time_s is None
    with pytest.raises(ValueError, match="'field_rate_hz' must be"):
        resolve_settings(field_rate_hz=None)


def test_overhead_preset_is_the_reference_station_with_close_flashes():
    """The overhead preset moves the flashes to 1-20 km, uniform over the area, and gives
    each class an equal share; the station is the reference one."""
    ref, over = resolve_settings(), resolve_settings("overhead")
    assert over.range_km == (1.0, 20.0) and over.catalog_id != ref.catalog_id
    shares = {k: v for k, v in over.class_mix.items() if v > 0}
    assert set(shares.values()) == {0.25} and set(shares) == {
        k for k, v in ref.class_mix.items() if v > 0}
    differ = {f for f in ref.__dataclass_fields__ if getattr(ref, f) != getattr(over, f)}
    assert differ == {"range_km", "catalog_id", "class_mix", "preset"}
    truth = draw_season(400, 3, preset="overhead", **SHORT)
    first = truth.groupby("flash_id")["distance_m"].first() / 1e3
    assert first.between(0.95, 20.5).all()  # a flash's pulses spread a few km at most
    # uniform over the annulus' area: P(D < 10 km) = (10^2 - 1^2) / (20^2 - 1^2) = 0.248;
    # binomial standard error over the flashes
    n = first.size
    p = 99.0 / 399.0
    assert abs(np.mean(first < 10.0) - p) < 3.5 * np.sqrt(p * (1 - p) / n)


def test_cli_writes_the_catalog_and_reports(tmp_path, capsys):
    """pulsesort simulate writes the catalog and labels and prints what it wrote."""
    out = tmp_path / "cli"
    assert main(["simulate", str(out), "--events", "40", "--seed", "3", "--field-samples",
                 "1000", "--pretrigger-s", "2e-5", "--vhf-samples", "1250", "--no-xyz",
                 "--class-mix", "recoil=1", "--decay-time-s", "none"]) == 0
    text = capsys.readouterr().out
    assert "simulated 40 pulses" in text and "recoil" in text and "labels.csv" in text
    m = json.loads((out / "catalog.json").read_text())
    assert m["field"]["decay_time_s"] is None
    assert set(pd.read_csv(labels_path(out))["label"]) == {"recoil"}


def test_cli_bad_option_exits_2_naming_it(tmp_path, capsys):
    """A negative rate exits 2 with a message naming the option."""
    assert main(["simulate", str(tmp_path / "x"), "--events", "5", "--seed", "1",
                 "--field-rate-hz", "-1"]) == 2
    assert "--field-rate-hz" in capsys.readouterr().err
    assert main(["simulate", str(tmp_path / "x"), "--events", "5", "--seed", "1",
                 "--class-mix", "recoil"]) == 2
    assert "--class-mix" in capsys.readouterr().err


def test_cli_decay_time_as_number_or_none(tmp_path):
    """`--decay-time-s 2e-4` and `--decay-time-s none` both work from the command line."""
    import json

    from classify.cli import main

    for text, expected in (("2e-4", 2e-4), ("none", None)):
        out = tmp_path / f"c{text}"
        assert main(["simulate", str(out), "--events", "5", "--seed", "1", "--field-samples",
                     "400", "--vhf-samples", "500", "--pretrigger-s", "1e-5",
                     "--decay-time-s", text]) == 0
        assert json.loads((out / "catalog.json").read_text())["field"]["decay_time_s"] == expected
    assert main(["simulate", str(tmp_path / "bad"), "--events", "5", "--seed", "1",
                 "--decay-time-s", "soon"]) == 2
