"""The review page's data model: the record, the extent, the sources and the queue's words.

The catalogs are simulated (invented data); the checks compare with the catalog
spec's formulas, closed forms and reference implementations, each named.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import integrate, signal

from classify.cli import main
from classify.report import REASONS
from classify.review import REVIEW_REASONS, lookalike_classes, pulse_view, record_trace
from classify.review._help import priority_parts
from classify.review._sources import flash_codes, source_view
from classify.review._trace import MAX_VHF_POINTS, reduce_points, trace_json, with_extent
from classify.triage import read_results
from features import open_catalog

from ._review_testkit import SIMULATE_SHORT


def _simulate(path, *extra, events=60, seed=5):
    assert main(["-q", "simulate", str(path), "--events", str(events), "--seed", str(seed),
                 *SIMULATE_SHORT, *extra]) == 0
    return open_catalog(path)


@pytest.fixture(scope="module")
def catalog(tmp_path_factory):
    """A small simulated catalog with VHF power records and x/y/z sources."""
    return _simulate(tmp_path_factory.mktemp("view") / "hollowmere-2031")


def test_record_time_axis_is_the_specs_physical_time(catalog):
    """time_s of sample k is k / rate - pretrigger - delay (catalog v1 spec), field and VHF."""
    manifest = json.loads((catalog.path / "catalog.json").read_text())
    tr = record_trace(catalog, 3)
    for key, ch in (("time_s", manifest["field"]), ("vhf_time_s", manifest["vhf"])):
        n = len(tr[key])
        k = np.arange(n)
        expect = k / ch["sample_rate_hz"] - ch["pretrigger_s"] - ch.get("delay_s", 0.0)
        assert_allclose(tr[key], expect, rtol=0, atol=1e-12)
    assert len(tr["time_s"]) == np.load(catalog.path / "field.npy", mmap_mode="r").shape[1]


def test_record_field_is_baseline_removed_and_decay_compensated(catalog):
    """E = y + (1/tau) * integral of y dt (the inverse of the antenna's RC decay; closed form).

    Recomputed here from field.npy with scipy's trapezoid integral: agreement to
    1e-4 of the peak, where the compensation itself changes the record by over 1e-3.
    """
    manifest = json.loads((catalog.path / "catalog.json").read_text())
    f = manifest["field"]
    row = 7
    raw = np.load(catalog.path / "field.npy", mmap_mode="r")[row].astype(float)
    sign = 1.0 if f["sign_convention"] == "physics" else -1.0
    y = raw * f.get("scale", 1.0) * sign
    t_rec = np.arange(len(y)) / f["sample_rate_hz"] - f["pretrigger_s"]
    y = y - np.median(y[t_rec < -40e-6])          # the features' analysis window starts at -40 us
    e = y + integrate.cumulative_trapezoid(y, dx=1 / f["sample_rate_hz"], initial=0) / \
        f["decay_time_s"]
    tr = record_trace(catalog, row)
    peak = np.max(np.abs(e))
    assert np.max(np.abs(e - y)) > 1e-3 * peak          # the test can tell a missing compensation
    assert_allclose(tr["field_v_per_m"], e, atol=1e-4 * peak)
    assert abs(np.median(tr["field_v_per_m"][t_rec < -40e-6])) < 1e-3 * peak


def test_vhf_power_record_is_the_stored_envelope(catalog):
    """A 'power' VHF channel is already a linear power envelope (spec): sent as stored."""
    tr = record_trace(catalog, 2)
    stored = np.load(catalog.path / "vhf.npy", mmap_mode="r")[2].astype(float)
    assert len(stored) <= MAX_VHF_POINTS
    assert_allclose(tr["vhf_envelope"], np.clip(stored, 0, None), rtol=1e-12)


def test_vhf_voltage_record_is_hilbert_power_in_block_maxima(tmp_path):
    """Voltage VHF: |analytic signal|^2 (scipy.signal.hilbert), longer records as block maxima."""
    cat = _simulate(tmp_path / "volt", "--vhf-kind", "voltage", "--vhf-rate-hz", "250e6",
                    "--vhf-samples", "20000", events=20)
    tr = record_trace(cat, 4)
    v = np.load(cat.path / "vhf.npy", mmap_mode="r")[4].astype(float)
    p = np.abs(signal.hilbert(v - v.mean())) ** 2
    k = int(np.ceil(len(p) / MAX_VHF_POINTS))
    assert k == 3
    n = len(p) // k * k
    assert_allclose(tr["vhf_envelope"], p[:n].reshape(-1, k).max(axis=1),
                    rtol=1e-6, atol=1e-9 * p.max())
    t = np.arange(len(p)) / 250e6 - cat.vhf.pretrigger_s - cat.vhf.delay_s
    assert_allclose(tr["vhf_time_s"], t[:n].reshape(-1, k).mean(axis=1), atol=1e-12)


def test_extent_comes_from_the_results_columns_when_the_trace_has_none():
    """pulse_start_s / pulse_end_s fill extent_s; missing, NaN or reversed leave it None."""
    base = {"time_s": [0.0, 1e-6], "field_v_per_m": [0.0, 1.0], "extent_s": None}
    assert with_extent(base, {"pulse_start_s": -1e-6, "pulse_end_s": 3e-6})["extent_s"] == \
        (-1e-6, 3e-6)
    for res in ({}, {"pulse_start_s": np.nan, "pulse_end_s": 3e-6},
                {"pulse_start_s": 4e-6, "pulse_end_s": 3e-6}):
        assert with_extent(base, res)["extent_s"] is None
    own = dict(base, extent_s=(0.0, 1e-6))
    assert with_extent(own, {"pulse_start_s": -1e-6, "pulse_end_s": 3e-6}) is own
    out = trace_json(dict(base, extent_s=(0.0, 1e-6), neighbours_s=[2e-6]))
    assert out["extent_s"] == [0.0, 1e-6] and out["neighbours_s"] == [2e-6]
    assert out["neighbour_peaks_v_per_m"] == [None]     # times without peaks
    assert out["vhf_time_s"] is None and out["vhf_envelope"] is None
    with pytest.raises(ValueError, match="'time_s' has shape"):
        trace_json(dict(base, field_v_per_m=[1.0]))


def test_pulse_view_shows_the_extent_and_neighbours_the_features_measured(catalog, tmp_path):
    """The pulse JSON carries the features' own extent and neighbours (not a results row's)."""
    from features.trace import pulse_trace

    res = pd.Series({"event_id": catalog.event_ids[5], "pulse_start_s": -2e-6,
                     "pulse_end_s": 5e-6, "prediction_set": "recoil", "p_recoil": 1.0})
    view = pulse_view(catalog, 5, res)
    ref = pulse_trace(catalog, 5)
    assert view["trace"]["extent_s"] == pytest.approx(list(ref["extent_s"]), abs=1e-12)
    assert view["trace"]["neighbours_s"] == pytest.approx(list(ref["neighbours_s"]), abs=1e-11)


def test_sources_are_those_of_sources_csv_with_the_earlier_flash_channel(catalog):
    """The pulse's sources (time order, x/y/z) and the earlier pulses' of its flash, from the CSVs."""
    ev = pd.read_csv(catalog.path / "events.csv", dtype={"flash_id": str})
    src = pd.read_csv(catalog.path / "sources.csv")
    t_ns = pd.to_datetime(ev["time_utc"]).astype("int64").to_numpy()
    codes = flash_codes(catalog)
    checked = 0
    for row in range(catalog.n_events):
        view = source_view(catalog, row, codes)
        mine = src[src["event_id"] == ev["event_id"][row]].sort_values("t_s", kind="stable")
        if mine.empty:
            assert view is None
            continue
        assert view["position"] == "xyz"
        assert_allclose(view["t_s"], mine["t_s"], rtol=1e-6)
        assert_allclose(view["east_m"], mine["x_m"], rtol=1e-5)
        assert_allclose(view["north_m"], mine["y_m"], rtol=1e-5)
        # altitude above the curved Earth from the local east/north/up frame:
        # h = sqrt(x^2 + y^2 + (R + z)^2) - R (geometry; R = 6.371e6 m, mean Earth radius)
        r_e = 6.371e6
        h = np.sqrt(mine["x_m"] ** 2 + mine["y_m"] ** 2 + (r_e + mine["z_m"]) ** 2) - r_e
        assert_allclose(view["up_m"], h, rtol=1e-5)
        fid = ev["flash_id"][row]
        before = ev[(ev["flash_id"] == fid) & (t_ns < t_ns[row])]["event_id"]
        early = src[src["event_id"].isin(before)]
        if early.empty:
            assert view["earlier"] is None
            continue
        e = view["earlier"]
        assert e["n_sources"] == len(early) and e["n_pulses"] == early["event_id"].nunique()
        assert_allclose(sorted(e["east_m"]), sorted(early["x_m"]), rtol=1e-5)
        trig = dict(zip(ev["event_id"], t_ns))
        age = np.array([(t_ns[row] - trig[i]) * 1e-9 - t for i, t in
                        zip(early["event_id"], early["t_s"])])
        assert_allclose(sorted(e["age_s"]), sorted(age), rtol=1e-5, atol=1e-9)
        checked += 1
    assert checked >= 5


def test_positions_from_range_and_angles_without_xyz(tmp_path):
    """Without x/y/z: east = r sin(az), north = r cos(az); the altitude over a 4/3 Earth,
    h = a / (cos(r/a) - tan(el) sin(r/a)) - a (common radar practice), is r tan(el) plus
    about r^2 / 2a (second order in r/a)."""
    cat = _simulate(tmp_path / "angles", "--no-xyz", events=30)
    ev = pd.read_csv(cat.path / "events.csv")
    src = pd.read_csv(cat.path / "sources.csv")
    row = int(np.flatnonzero(ev["event_id"].isin(src["event_id"]))[0])
    view = source_view(cat, row)
    mine = src[src["event_id"] == ev["event_id"][row]].sort_values("t_s", kind="stable")
    r = ev["range_m"][row]
    az, el = np.radians(mine["azimuth_deg"]), np.radians(mine["elevation_deg"])
    assert view["position"] == "range"
    assert_allclose(view["east_m"], r * np.sin(az), rtol=1e-5)
    assert_allclose(view["north_m"], r * np.cos(az), rtol=1e-5)
    a = 4 / 3 * 6.371e6
    theta = r / a
    assert_allclose(view["up_m"], a / (np.cos(theta) - np.tan(el) * np.sin(theta)) - a,
                    rtol=1e-6)
    assert_allclose(view["up_m"], r * np.tan(el) + r * r / (2 * a), rtol=0.02, atol=50)
    bare = _simulate(tmp_path / "bare", "--no-xyz", "--no-range", events=30)
    row = int(np.flatnonzero(pd.read_csv(bare.path / "events.csv")["event_id"].isin(
        pd.read_csv(bare.path / "sources.csv")["event_id"]))[0])
    view = source_view(bare, row)
    assert view["position"] is None and view["up_m"] is None and len(view["azimuth_deg"]) > 0


def test_reduce_points_keeps_every_blocks_extremes():
    """Block minima and maxima: a one-sample spike survives a 100-fold reduction (brute force)."""
    rng = np.random.default_rng(0)
    t = np.arange(100_000) * 1e-8
    y = rng.normal(size=t.size)
    y[54_321] = 50.0
    y[10_000:10_050] = np.nan
    tt, yy = reduce_points(t, y, 2000)
    assert len(yy) <= 2000 and np.nanmax(yy) == 50.0
    k = int(np.ceil(t.size / 1000))
    blocks = y[: t.size // k * k].reshape(-1, k)
    lo, hi = np.minimum(yy[0::2], yy[1::2]), np.maximum(yy[0::2], yy[1::2])
    assert_allclose(lo, np.nanmin(blocks, axis=1), equal_nan=True)
    assert_allclose(hi, np.nanmax(blocks, axis=1), equal_nan=True)
    assert np.all(np.diff(tt) > 0)
    same_t, same_y = reduce_points(t[:100], y[:100], 2000)
    assert_allclose(same_y, y[:100])


def test_lookalike_classes_are_the_set_or_the_two_most_probable():
    """Two classes or more in the set: those; else the two of highest probability."""
    probs = [("energetic_in_cloud", 0.05), ("narrow_bipolar", 0.33), ("recoil", 0.52),
             ("stepped_leader", 0.10)]
    assert lookalike_classes(["recoil", "stepped_leader", "narrow_bipolar"], probs) == [
        "recoil", "stepped_leader", "narrow_bipolar"]
    assert lookalike_classes([], probs) == ["recoil", "narrow_bipolar"]
    assert lookalike_classes(["stepped_leader"], probs) == ["recoil", "narrow_bipolar"]
    assert lookalike_classes([], [("a", None), ("b", None)]) == ["a", "b"]


def test_every_review_reason_has_words_and_the_priority_parts_add_up(tmp_path):
    """The help explains each reason triage writes; the priority's parts are the queue's."""
    assert set(REVIEW_REASONS) == set(REASONS)
    assert all(len(w) > 30 for w in REVIEW_REASONS.values())
    cat = _simulate(tmp_path / "q", events=120)
    out = tmp_path / "r.csv"
    assert main(["-q", "triage", str(cat.path), "--rules", "--out", str(out)]) == 0
    from classify.review import build_queue

    q = build_queue(read_results(out))
    assert len(q) > 0
    for _, r in q.iterrows():
        parts = priority_parts(r["priority"], r["uncertainty"], r["novelty_rank"])
        assert_allclose(parts["uncertainty"] + parts["novelty_part"], r["priority"],
                        rtol=1e-12, atol=1e-12)
        assert parts["novelty_weight"] == 0.5
