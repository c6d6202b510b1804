"""Whole-catalog feature extraction: invariance to how the same pulses are stored."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from classify.cli import main
from features import open_catalog, schema
from features.extract import extract_features, write_features
from tests.conftest import bipolar_field

N = 12
SHAPE_COLS = ["peak_field_v_per_m", "polarity", "rise_time_s", "fwhm_s",
              "initial_half_cycle_s", "zero_crossing_s", "width_s", "bipolarity",
              "range_normalized_peak_v_per_m", "current_moment_peak_a_m", "peak_current_a"]


def _pulses(fs, m=8000, pre=1e-4):
    t = np.arange(m) / fs - pre
    rng = np.random.default_rng(1)
    rows = []
    for i in range(N):
        amp = rng.uniform(2, 20) * (-1) ** i
        rows.append(bipolar_field(t, rng.uniform(-1e-6, 1e-6), 0.3e-6 + 0.1e-6 * i,
                                  1e-6 + 0.3e-6 * i, 0.1 + 0.05 * i, 8e-6, amp))
    return np.array(rows)


def _events():
    t0 = pd.Timestamp("2040-07-01T10:00:00Z")
    return {"event_id": [f"p{i}" for i in range(N)],
            "time_utc": [(t0 + pd.Timedelta(milliseconds=3 * i)).strftime(
                "%Y-%m-%dT%H:%M:%S.%fZ") for i in range(N)],
            "flash_id": ["f1"] * 6 + ["f2"] * 6,
            "range_m": np.linspace(20e3, 120e3, N)}


def test_conventions_units_and_rates_give_the_same_features(make_catalog):
    """physics V/m float32 @20 MS/s == atmospheric int16 counts @10 MS/s (within a sample)."""
    ref = make_catalog("ref", _pulses(20e6).astype(np.float32), events=_events())
    scale = 0.002
    counts = np.round(-_pulses(10e6, m=4000) / scale).astype(np.int16)
    other = make_catalog("other", counts, events=_events(),
                         field_meta={"sample_rate_hz": 10e6, "units": "counts",
                                     "scale": scale, "sign_convention": "atmospheric"})
    a = extract_features(open_catalog(ref)).set_index("event_id")
    b = extract_features(open_catalog(other)).set_index("event_id")
    for col in ("rise_time_s", "fwhm_s", "initial_half_cycle_s", "zero_crossing_s",
                "width_s"):
        assert (np.abs(a[col] - b[col]) <= 1 / 10e6).all(), col
    for col in ("peak_field_v_per_m", "range_normalized_peak_v_per_m", "peak_current_a",
                "current_moment_peak_a_m"):
        assert_allclose(a[col], b[col], rtol=0.03, err_msg=col)
    assert (a["polarity"] == b["polarity"]).all()
    assert_allclose(a["bipolarity"], b["bipolarity"], atol=0.03)
    assert_allclose(a["isolation_s"], 3e-3, rtol=1e-9)


def test_output_columns_follow_the_schema(make_catalog):
    """Every schema column is present, in order, after event_id, time_utc and flash_id."""
    df = extract_features(open_catalog(make_catalog("cols", _pulses(20e6), events=_events())))
    names = schema.feature_names()
    assert list(df.columns[:3]) == ["event_id", "time_utc", "flash_id"]
    assert [c for c in df.columns if c in names] == names
    assert len(df) == N


def test_jobs_and_chunks_do_not_change_the_csv(make_catalog, tmp_path):
    """Serial, 2 joblib workers and another chunk size write byte-identical CSV."""
    cat = open_catalog(make_catalog("par", _pulses(20e6), events=_events()))
    a = write_features(cat, tmp_path / "a.csv", chunk_size=5)
    b = write_features(cat, tmp_path / "b.csv", chunk_size=5, n_jobs=2)
    assert a.read_bytes() == b.read_bytes()
    c = write_features(cat, tmp_path / "c.csv", chunk_size=64)
    assert a.read_bytes() == c.read_bytes()
    assert not list(tmp_path.glob("*.partial"))


def test_row_blocks_within_a_chunk_do_not_change_the_rows(make_catalog, monkeypatch):
    """Invented pulses (self-consistency): a chunk computed in blocks of 5 rows equals it
    computed at once, as recorded and as a variant station (training augmentation)."""
    from features import extract

    cat = open_catalog(make_catalog("blocks", _pulses(20e6), events=_events()))
    for seed in (None, 3):
        monkeypatch.setattr(extract, "ROWS_AT_ONCE", N)
        whole = extract_features(cat, chunk_size=N, variant_seed=seed)
        monkeypatch.setattr(extract, "ROWS_AT_ONCE", 5)
        pd.testing.assert_frame_equal(extract_features(cat, chunk_size=N, variant_seed=seed),
                                      whole)


def _thread_pools(_job):
    """The thread pools (BLAS, OpenMP) loaded in the process that runs a job, and their
    thread counts."""
    import scipy.linalg  # noqa: F401 - loads the BLAS of a worker
    import threadpoolctl

    return [(p["user_api"], p["num_threads"]) for p in threadpoolctl.threadpool_info()]


def test_joblib_workers_limit_their_thread_pools(monkeypatch):
    """With --jobs 2 every worker's BLAS/OpenMP pools use cores // 2 threads (at least 1),
    also when the environment sets no limit."""
    import os

    from features.extract import run_jobs

    for name in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        monkeypatch.delenv(name, raising=False)
    limit = max((os.cpu_count() or 1) // 2, 1)
    pools = [p for r in run_jobs(_thread_pools, range(4), n_jobs=2) for p in r]
    assert any(api == "blas" for api, _ in pools)
    assert all(n <= limit for _, n in pools), pools


def test_features_cli(make_catalog, tmp_path, capsys):
    """`pulsesort features` writes one row per event; --list prints the schema."""
    path = make_catalog("cli", _pulses(20e6), events=_events())
    out = tmp_path / "f.csv"
    assert main(["features", str(path), "--out", str(out)]) == 0
    df = pd.read_csv(out, keep_default_na=False, na_values=[""])
    assert df["event_id"].tolist() == _events()["event_id"]
    assert set(df["clipped"]) == {False}
    assert df["time_utc"][0] == "2040-07-01T10:00:00.000000000Z"
    assert main(["features", "--list"]) == 0
    assert "bipolarity" in capsys.readouterr().out


@pytest.mark.parametrize("decay", [None, 1e-3])
def test_nan_samples_do_not_break_a_row(make_catalog, decay):
    """A few NaN samples inside the pulse leave the row usable and finite."""
    x = _pulses(20e6)
    x[0, 2000:2003] = np.nan
    path = make_catalog(f"nan{decay}", x, events=_events(), field_meta={"decay_time_s": decay})
    df = extract_features(open_catalog(path))
    assert df["field_ok"].all()
    assert np.isfinite(df.loc[0, SHAPE_COLS].astype(float)).all()


def test_spec_literal_catalog_with_unusual_settings(make_catalog):
    """A catalog written to the letter with valid but unusual choices still works.

    5 MS/s int16 counts, atmospheric sign, no pre-trigger, VHF as a band-limited
    voltage at 200 MS/s with a 1 us delay, no sources, no flash ids, no range.
    The pulse (invented, for self-consistency) is a half-sine of 6 us.
    """
    fs, m = 5e6, 1000
    t = np.arange(m) / fs
    rng = np.random.default_rng(3)
    half = 6e-6
    x = np.where((t >= 2e-6) & (t < 2e-6 + half), np.sin(np.pi * (t - 2e-6) / half), 0.0)
    field = np.stack([-np.round((4.0 * x + rng.normal(0, 0.01, m)) / 0.01)] * 3).astype(np.int16)
    tv = np.arange(40000) / 200e6
    env = 0.01 + np.exp(-0.5 * ((tv - 3e-6 - 1e-6) / 0.3e-6) ** 2)
    vhf = np.stack([np.sqrt(env) * np.cos(2 * np.pi * 55e6 * tv)] * 3).astype(np.float32)
    ev = {"event_id": ["a", "b", "c"], "time_utc": ["2040-01-01T00:00:00.000000000Z"] * 3}
    path = make_catalog("odd", field, events=ev, vhf=vhf,
                        field_meta={"sample_rate_hz": fs, "pretrigger_s": 0.0, "units": "counts",
                                    "scale": 0.01, "sign_convention": "atmospheric"},
                        vhf_meta={"sample_rate_hz": 200e6, "pretrigger_s": 0.0,
                                  "kind": "voltage", "band_hz": [30e6, 80e6], "delay_s": 1e-6})
    df = extract_features(open_catalog(path))
    assert (df["polarity"] == 1).all()              # stored atmospheric, read physics
    assert_allclose(df["peak_field_v_per_m"], 4.0, rtol=0.02)
    # a unipolar half-sine: no zero crossing; width = the span above 10 % of the peak,
    # half x (1 - 2 asin(0.1) / pi) (closed form)
    assert df["zero_crossing_s"].isna().all() and (df["bipolarity"] == 0).all()
    assert_allclose(df["width_s"], half * (1 - 2 * np.arcsin(0.1) / np.pi), atol=1 / fs)
    assert df["baseline_short"].all()           # no pre-trigger: no baseline stretch
    # field peak at 5 us, VHF peak at 3 us physical (recorded 4 us minus 1 us delay)
    assert_allclose(df["vhf_field_lag_s"], 2e-6, atol=0.1e-6)
    # no flash ids: flashes are grouped in time (all three share one trigger time)
    assert df["n_sources"].isna().all() and (df["isolation_s"] == 0).all()
    assert (df["flash_n_pulses"] == 3).all()
    assert df["has_vhf"].all() and not df["clipped"].any()


def test_extra_event_columns_are_carried_and_never_clash(make_catalog):
    """Other events.csv columns come through unchanged; names used by outputs get a prefix."""
    ev = _events()
    ev["operator_note"] = ["ok"] * N
    ev["label"] = ["station-tag"] * N
    ev["bipolarity"] = ["x"] * N
    df = extract_features(open_catalog(make_catalog("extra", _pulses(20e6), events=ev)))
    assert (df["operator_note"] == "ok").all()
    assert (df["events_label"] == "station-tag").all() and "label" not in df
    assert (df["events_bipolarity"] == "x").all()
    assert df["bipolarity"].dtype.kind == "f"


def test_vhf_voltage_features_do_not_depend_on_chunks(make_catalog, tmp_path):
    """With an analytic-signal VHF, the rows a chunk holds do not change a pulse's values."""
    rng = np.random.default_rng(5)
    fs_v = 200e6
    tv = np.arange(int(200e-6 * fs_v)) / fs_v - 50e-6
    rows = []
    for i in range(6):   # bursts at different times: chunks span different peak times
        env = 0.01 + np.exp(-0.5 * ((tv - (i * 4e-6 - 2e-6)) / 0.3e-6) ** 2)
        rows.append(np.sqrt(env) * np.cos(2 * np.pi * 55e6 * tv + rng.uniform(0, 6)))
    vhf = np.array(rows, dtype=np.float32)
    field = _pulses(20e6, m=4000, pre=50e-6)[:6].astype(np.float32)
    ev = {"event_id": [f"v{i}" for i in range(6)],
          "time_utc": ["2040-01-01T00:00:00.000000000Z"] * 6}
    path = make_catalog("vv", field, events=ev, vhf=vhf,
                        field_meta={"pretrigger_s": 50e-6},
                        vhf_meta={"sample_rate_hz": fs_v, "pretrigger_s": 50e-6,
                                  "kind": "voltage"})
    cat = open_catalog(path)
    a = write_features(cat, tmp_path / "one.csv", chunk_size=1)
    b = write_features(cat, tmp_path / "all.csv", chunk_size=6)
    assert a.read_bytes() == b.read_bytes()
