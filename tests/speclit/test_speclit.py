"""Tests of tests.speclit, the independent season writer.

The field model is checked against closed forms (transmission-line radiation
field, Coulomb's law with an image charge, the vertical-dipole formula, the
vector dipole field); the written seasons against the catalog reader, the
label importer and the cataloguing rules they promise. Seasons here are
invented data: they are checked for self-consistency, not against nature.
"""

from __future__ import annotations

import hashlib
import os
from collections import Counter
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import constants, integrate

import features
from classify.cli import main as pulsesort
from classify.labels import LabelStore
from tests.speclit import PROFILES, TRUTH_COLUMNS, write_season
from tests.speclit import _physics as ph
from tests.speclit.__main__ import main as speclit_main
from tests.speclit._instrument import Stream, Windows
from tests.speclit._season import quotas
from tests.speclit._vhf import EARTH_RADIUS_M, to_sky

EPS0 = constants.epsilon_0      # CODATA, via scipy
C = constants.c
US = 1e-6


def _segment(**kw):
    base = dict(x0_m=1e4, y0_m=0.0, z0_m=5e3, ux=0.0, uy=0.0, uz=1.0, length_m=1e3,
                speed_m_per_s=5e7, atten_m=np.inf, polarity=1.0, current_a=3e4,
                tau1_s=1 * US, tau2_s=3 * US, t0_s=0.0)
    base.update(kw)
    return ph.Segments(**base)


def _current(seg, t):
    g_max, _ = ph.shape_peak(seg.tau1_s, seg.tau2_s)
    return seg.current_a[0] * ph.shape(t, seg.tau1_s[0], seg.tau2_s[0])[0] / g_max[0]


def _charge(seg):
    """Charge carried by the wave: I / g_max times the shape's time integral."""
    g_max, _ = ph.shape_peak(seg.tau1_s, seg.tau2_s)
    return seg.current_a[0] / g_max[0] * ph.shape(1.0, seg.tau1_s[0], seg.tau2_s[0])[1]


# -- the field model against closed forms ------------------------------------------------

def test_radiation_term_is_the_transmission_line_formula():
    """Ground-level TL channel, far away: E_rad = -v I(t - D/c) / (2 pi eps0 c^2 D)."""
    # Rakov & Uman 2003, ch. 4 (from memory); upward current, physics sign.
    d, v = 5e5, 1.3e8
    seg = _segment(x0_m=d, z0_m=0.0, length_m=8e3, speed_m_per_s=v, tau1_s=1 * US,
                   tau2_s=50 * US)
    nodes = ph.segment_nodes(seg, terms=("radiation",))
    t = np.linspace(0.0, 10 * US, 201)
    e = ph.evaluate(nodes, np.zeros(t.size, int), t)
    ref = -v * _current(seg, t) / (2 * np.pi * EPS0 * C ** 2 * d)
    # tolerance: the channel's growing height changes the retardation by < 1.2e-3
    assert_allclose(e, ref, rtol=2e-3, atol=2e-3 * np.abs(ref).max())
    assert e.min() < -1.0                       # ~ -1.5 V/m: the check is not vacuous


@pytest.mark.parametrize("x0, z0, ux, uz, length", [
    (1e4, 5e3, 0.0, 1.0, 2e3), (1e4, 8e3, 0.6, -0.8, 1e3), (6e3, 9e3, -0.8, 0.6, 1.5e3),
    (3e3, 0.0, 0.0, 1.0, 6e3)])
def test_static_field_is_coulomb_with_image_charges(x0, z0, ux, uz, length):
    """After the wave, the field is that of +Q at the far end and -Q at the start."""
    # Point charge q at height h over a conducting plane, image -q at -h:
    # E_z = -2 q h / (4 pi eps0 (D^2 + h^2)^1.5) (Griffiths, sec. 3.2, from memory).
    seg = _segment(x0_m=x0, z0_m=z0, ux=ux, uz=uz, length_m=length)
    q = _charge(seg)
    x1, z1 = x0 + length * ux, z0 + length * uz

    def point(charge, x, z):
        return -2 * charge * z / (4 * np.pi * EPS0 * (x * x + z * z) ** 1.5)

    ref = point(q, x1, z1) + point(-q, x0, z0)
    nodes = ph.segment_nodes(seg)
    assert_allclose(ph.final_value(nodes)[0], ref, rtol=1e-4)
    late = nodes["tau_s"][0, -1] + 40 * seg.tau2_s[0]
    assert_allclose(ph.evaluate(nodes, np.zeros(1, int), np.array([late]))[0], ref, rtol=1e-4)


@pytest.mark.parametrize("d", [2e3, np.sqrt(2) * 8e3 * 0.999, np.sqrt(2) * 8e3 * 1.001, 3e4])
def test_static_term_is_the_vertical_dipole_formula(d):
    """A short element at height H: E = p (2H^2 - D^2) / (2 pi eps0 R^5), sign flip at sqrt2 H."""
    # Derived from two image pairs (Uman, McLain & Krider 1975; from memory).
    h = 8e3
    seg = _segment(x0_m=d, z0_m=h - 0.5, length_m=1.0)     # centred on H
    p = _charge(seg) * 1.0
    r = np.hypot(d, h)
    ref = p * (2 * h * h - d * d) / (2 * np.pi * EPS0 * r ** 5)
    got = ph.final_value(ph.segment_nodes(seg))[0]
    assert_allclose(got, ref, rtol=1e-6, atol=1e-8 * p / (2 * np.pi * EPS0 * r ** 3))
    assert np.sign(got) == np.sign(2 * h * h - d * d)


def test_elevated_radiation_follows_d2_over_r3():
    """Radiation of an element at height H scales as D^2 / R^3 with ground distance D."""
    # Vertical dipole over a conducting plane, far field (Rakov & Uman 2003, ch. 4).
    h = 10e3
    ds = np.array([3e3, 1e4, 3e4, 1e5, 3e5])
    peaks = []
    for d in ds:
        seg = _segment(x0_m=d, z0_m=h, length_m=0.01)          # a short dipole
        nodes = ph.segment_nodes(seg, terms=("radiation",))
        t = np.linspace(0, 10 * US, 2001)
        peaks.append(np.abs(ph.evaluate(nodes, np.zeros(t.size, int), t)).max())
    geom = ds ** 2 / np.hypot(ds, h) ** 3
    assert_allclose(np.array(peaks) / geom, peaks[-1] / geom[-1], rtol=1e-5)  # 1 cm transit
    assert peaks[0] < peaks[1]                 # near the axis the radiation term fades


def test_geometry_is_the_vector_dipole_field_with_its_image():
    """Our E_z factors equal the free-space dipole fields of element plus image."""
    # Jackson 1999, sec. 9.2 (from memory); the total field on a perfect
    # conductor is normal to it, so its horizontal components must vanish.
    rng = np.random.default_rng(0)
    for _ in range(20):
        x, y = rng.uniform(-3e4, 3e4, 2)
        z = rng.uniform(0.5e3, 1.5e4)
        u = rng.normal(size=3)
        u /= np.linalg.norm(u)
        factors = ph.geometry(np.array(x), np.array(y), np.array(z), *u)
        for k, f in enumerate(factors):
            moments = np.eye(3)[k]
            e = ph.dipole_ez(x, y, z, *u, *moments)
            assert_allclose(e[2], f, rtol=1e-9)
            assert np.abs(e[:2]).max() < 1e-9 * np.abs(e[2]) + 1e-30


def test_shape_integrals_match_numerical_integration():
    """J0 and J1 are the first and second time integrals of g (scipy quadrature)."""
    t1, t2 = 0.7 * US, 4.0 * US
    t = np.linspace(0, 80 * US, 400001)
    g, j0, j1 = ph.shape(t, t1, t2)
    assert_allclose(integrate.cumulative_trapezoid(g, t, initial=0), j0, atol=1e-9 * j0.max())
    assert_allclose(integrate.cumulative_trapezoid(j0, t, initial=0), j1,
                    atol=1e-9 * j1.max())
    assert g[0] == 0.0 and (g[1] - g[0]) / (t[1] - t[0]) < 1e-3 * g.max() / t1  # smooth start
    assert g.min() >= 0.0


def test_shape_peak_table_matches_bisection():
    """The tabulated peak (scale-free in tau1/tau2) agrees with a direct search."""
    rng = np.random.default_rng(1)
    t1 = rng.uniform(0.05, 4, 500) * US
    t2 = t1 * rng.uniform(1.5, 100, 500)
    a, ta = ph.shape_peak(t1, t2)
    b, tb = ph._peak_by_bisection(t1, t2)
    assert_allclose(a, b, rtol=1e-5)
    assert_allclose(ta, tb, rtol=1e-5)


@pytest.mark.parametrize("length, speed, atten, tau1, tau2", [
    (900.0, 8e7, 400.0, 0.4 * US, 2 * US),        # cumulative sums
    (3000.0, 1e7, 1000.0, 0.2 * US, 1 * US)])     # transit/tau1 > 600: node-by-node path
def test_piecewise_sum_equals_direct_element_sum(length, speed, atten, tau1, tau2):
    """Self-consistency: the collapsed coefficients reproduce the element-by-element sum."""
    u = np.array([0.48, 0.0, -0.8772])
    seg = _segment(x0_m=7e3, y0_m=2e3, z0_m=6e3, ux=u[0], uy=u[1], uz=u[2], length_m=length,
                   atten_m=atten, speed_m_per_s=speed, tau1_s=tau1, tau2_s=tau2)
    nodes = ph.segment_nodes(seg)
    k = ph.n_elements(seg)[0]
    s = np.linspace(0, length, k + 1)
    px, py, pz = 7e3 + u[0] * s, 2e3 + u[1] * s, 6e3 + u[2] * s
    tau = s / speed + np.sqrt(px ** 2 + py ** 2 + pz ** 2) / C
    tau -= tau[0]
    gs, gi, gr = ph.geometry((px[1:] + px[:-1]) / 2, (py[1:] + py[:-1]) / 2,
                             (pz[1:] + pz[:-1]) / 2, *u)
    w = atten / np.diff(s) * (np.exp(-s[:-1] / atten) - np.exp(-s[1:] / atten))
    g_max, _ = ph.shape_peak(seg.tau1_s, seg.tau2_s)
    coef = 3e4 / g_max[0] * w * np.diff(s) / np.diff(tau)
    t = np.linspace(-1 * US, tau[-1] + 20 * tau2, 777)
    direct = np.zeros_like(t)
    for i in range(k):
        a = ph.shape(t - tau[i], tau1, tau2)
        b = ph.shape(t - tau[i + 1], tau1, tau2)
        direct += coef[i] * (gs[i] * (a[2] - b[2]) + gi[i] * (a[1] - b[1])
                             + gr[i] * (a[0] - b[0]))
    got = ph.evaluate(nodes, np.zeros(t.size, int), t)
    assert_allclose(got, direct, rtol=1e-9, atol=1e-11 * np.abs(direct).max())
    nw = ph.node_weights(seg)
    loop, _ = ph._piecewise_loop(nw["tau_s"], nw["a"], nw["b"], nw["d"], seg.tau1_s,
                                 seg.tau2_s)
    assert_allclose(nodes["coef"], loop, rtol=1e-9, atol=1e-12 * np.abs(loop).max())


def test_rc_decay_is_exponential_across_gaps():
    """A held step through the RC high-pass decays as exp(-t / RC), also across a gap."""
    # Step response of a first-order high-pass (circuit theory).
    fs, tau_rc = 1e6, 2e-4
    w = Windows.steps(np.array([100]), np.array([5.0]))
    rec = np.array([90, 700])                          # two records, a gap between them
    stream = Stream(w, rec, 50)
    y = stream.rc_highpass(stream.sum_windows(with_final=True), tau_rc, fs)
    rows = stream.records(y)
    n = rec[:, None] + np.arange(50)[None, :]
    expect = np.where(n >= 100, 5.0 * np.exp(-(n - 100) / (tau_rc * fs)), 0.0)
    assert_allclose(rows, expect, rtol=1e-12, atol=1e-12)


def test_apparent_elevation_uses_the_four_thirds_earth():
    """h = d tan(el) + d^2 / (2 k R) for a ray over an Earth of radius k R, k = 4/3."""
    # The standard-refraction ray height (common practice in radar siting; from memory).
    d = np.array([2e4, 5e4, 1e5, 2e5])
    z = np.full(4, 10e3)
    az, el, ground, xt, yt, zt = to_sky(d, 0 * d, z)
    k, r = 4 / 3, EARTH_RADIUS_M
    assert_allclose(d * np.tan(np.radians(el)) + d ** 2 / (2 * k * r), z, rtol=3e-3)
    assert_allclose(az, 90.0)
    # the tangent-frame point lies at radius R + z (exact spherical geometry)
    assert_allclose(np.sqrt(xt ** 2 + yt ** 2 + (zt + r) ** 2), r + z, rtol=1e-12)


# -- written seasons ---------------------------------------------------------------------

N = 24


@pytest.fixture(scope="module")
def seasons(tmp_path_factory):
    """One small season per profile (invented data; self-consistency only)."""
    root = tmp_path_factory.mktemp("speclit")
    return {p: write_season(root / p, n_events=N, seed=7, profile=p) for p in PROFILES}


@pytest.mark.parametrize("profile", sorted(PROFILES))
def test_every_profile_writes_a_valid_catalog(seasons, profile):
    """The reader opens each season without notes, with the promised channels and columns."""
    path, labels = seasons[profile]
    s = PROFILES[profile]
    cat = features.open_catalog(path)
    assert cat.n_events == N and not cat.notes
    assert list(cat.event_ids) == list(labels["event_id"])
    assert (cat.field.dtype == np.int16) == (s["field_units"] == "counts")
    assert cat.manifest["field"]["sign_convention"] == s["field_sign"]
    assert (cat.vhf is not None) == bool(s["vhf_kind"])
    assert cat.has_sources == s["sources"] and cat.has_xyz == s["sources_xyz"]
    events = pd.read_csv(path / "events.csv")
    assert ("range_m" in events) == s["range_column"]
    assert ("flash_id" in events) == s["flash_ids"]
    assert np.all(np.diff(cat.time_ns) >= 0)
    field, _ = cat.read_field(0, N)
    assert np.isfinite(field).all() and np.abs(field).max() > s["trigger_v_per_m"]


def test_seasons_reproduce_byte_for_byte(tmp_path):
    """The same seed writes identical files; another seed does not."""
    def digest(folder):
        roles = {f.name: f for f in folder.iterdir()}
        roles["labels"] = folder.with_name(folder.name + ".labels.csv")
        roles["truth"] = folder.with_name(folder.name + ".truth.csv")
        return {k: hashlib.sha256(f.read_bytes()).hexdigest() for k, f in roles.items()}

    a = write_season(tmp_path / "a", n_events=12, seed=3, profile="harder")[0]
    b = write_season(tmp_path / "b", n_events=12, seed=3, profile="harder")[0]
    c = write_season(tmp_path / "c", n_events=12, seed=4, profile="harder")[0]
    da, db, dc = digest(a), digest(b), digest(c)
    assert len(da) == 7 and da == db                # 5 catalog files, labels, truth
    assert da["field.npy"] != dc["field.npy"]


def test_sign_convention_and_counts_store_the_same_field(tmp_path):
    """Physics, atmospheric and int16-count storage read back as the same V/m."""
    kw = dict(n_events=10, seed=2, profile="plain", vhf_kind=None, sources=False)
    fields = {}
    for name, over in {"phys": {}, "atmo": {"field_sign": "atmospheric"},
                       "counts": {"field_units": "counts", "field_scale_v_per_m": 0.01}}.items():
        path, _ = write_season(tmp_path / name, **kw, **over)
        fields[name] = features.open_catalog(path).read_field(0, 10)[0]
    assert_allclose(fields["atmo"], fields["phys"], rtol=0, atol=0)
    assert_allclose(fields["counts"], fields["phys"], rtol=0, atol=0.005 + 1e-6)
    raw = np.load(tmp_path / "atmo" / "field.npy")
    assert_allclose(raw, -np.load(tmp_path / "phys" / "field.npy"))


def test_class_counts_follow_the_requested_mix(seasons):
    """Equal shares by default, the profile's mix otherwise, all six classes when asked."""
    for profile in ("plain", "shifted", "near"):
        s = PROFILES[profile]
        got = Counter(seasons[profile][1]["label"])
        want = Counter()
        for (cls, _), n in quotas(N, s["classes"], s["mix"]).items():
            want[cls] += n
        assert got == want and sum(got.values()) == N
        share = {c: 1.0 for c in s["classes"]} if s["mix"] is None else s["mix"]
        tot = sum(share.values())
        for c in s["classes"]:
            assert abs(got[c] - N * share[c] / tot) < 2      # at most the strata's rounding


def test_records_practice_keeps_the_dead_time(seasons):
    """One record per trigger: catalogued triggers are at least the dead time apart."""
    path, _ = seasons["records"]
    t = features.open_catalog(path).time_ns
    assert np.diff(t).min() >= PROFILES["records"]["dead_time_s"] * 1e9


def test_labels_import_into_the_label_store(seasons, tmp_path, capsys):
    """pulsesort labels import accepts the labels file (real SQLite store)."""
    path, labels = seasons["plain"]
    store = tmp_path / "labels.sqlite"
    code = pulsesort(["labels", "import", str(path.with_name(path.name + ".labels.csv")),
                      "--catalog", str(path), "--store", str(store)])
    out = capsys.readouterr().out
    assert code == 0, out
    with LabelStore(store, create=False) as s:
        got = s.current_labels()
    assert sorted(zip(got["event_id"], got["label"])) == \
        sorted(zip(labels["event_id"], labels["label"]))


def test_truth_table_is_consistent_with_the_physics(seasons):
    """Truth rows match the events; signs and ranges follow the world's construction."""
    path, labels = seasons["near"]
    truth = pd.read_csv(path.with_name(path.name + ".truth.csv"))
    assert tuple(truth.columns) == TRUTH_COLUMNS
    assert list(truth["event_id"]) == list(labels["event_id"])
    rs = truth[truth["label"] == "return_stroke"]
    # negative CG strokes: upward-directed current from the ground, charge moved down
    assert (rs["source_altitude_m"] == 0).all() and (rs["peak_current_a"] > 0).all()
    assert (rs["charge_moment_change_c_m"] > 0).all()
    sl = truth[(truth["label"] == "stepped_leader") & (truth["flash_type"] == "cg")]
    assert (sl["velocity_up_m_per_s"] < 0).all()
    speed = np.hypot(np.hypot(sl["velocity_east_m_per_s"], sl["velocity_north_m_per_s"]),
                     sl["velocity_up_m_per_s"])
    assert ((speed > 5e4) & (speed < 4e6)).all()          # leaders, dart-stepped included
    nbe = truth[truth["label"] == "narrow_bipolar"]
    assert nbe["source_altitude_m"].between(7e3, 20e3).all()


def test_bad_input_names_the_problem(tmp_path):
    """Unknown profile, setting or class, or an existing folder: InputError saying which."""
    with pytest.raises(features.InputError, match="profile 'nope' is not known"):
        write_season(tmp_path / "a", n_events=5, profile="nope")
    with pytest.raises(features.InputError, match="setting 'field_rate' is not known"):
        write_season(tmp_path / "a", n_events=5, profile="plain", field_rate=5e6)
    with pytest.raises(features.InputError, match=r"unknown class\(es\) \['leader'\]"):
        write_season(tmp_path / "a", n_events=5, profile="plain", classes=["leader"])
    with pytest.raises(features.InputError, match="'field_sign' must be one of"):
        write_season(tmp_path / "a", n_events=5, profile="plain", field_sign="up")
    (tmp_path / "b").mkdir()
    with pytest.raises(features.InputError, match="already exists"):
        write_season(tmp_path / "b", n_events=5, profile="plain")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b"]


def test_unreachable_mix_leaves_nothing_behind(tmp_path):
    """A trigger level no pulse reaches fails cleanly, without partial output."""
    with pytest.raises(features.InputError, match="could not reach the requested mix"):
        write_season(tmp_path / "x", n_events=3, seed=1, profile="plain",
                     classes=["narrow_bipolar"], trigger_v_per_m=1e6)
    assert os.listdir(tmp_path) == []


def test_command_line_writes_and_overwrites(tmp_path, capsys):
    """python -m tests.speclit writes a season, refuses to clobber, and exits 2 on bad input."""
    out = tmp_path / "cli"
    argv = [str(out), "--events", "6", "--seed", "2", "--profile", "near",
            "--classes", "return_stroke", "initial_breakdown"]
    assert speclit_main(argv) == 0
    labels = pd.read_csv(Path(str(out) + ".labels.csv"))
    assert Counter(labels["label"]) == {"return_stroke": 3, "initial_breakdown": 3}
    assert speclit_main(argv) == 2
    assert "already exists" in capsys.readouterr().err
    assert speclit_main(argv + ["--overwrite", "--seed", "3"]) == 0
    assert speclit_main([str(tmp_path / "y"), "--set", "field_rate_hz"]) == 2
