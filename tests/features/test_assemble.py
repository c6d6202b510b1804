"""The station builder: a simulated season (invented data) written back as a station's
own recordings and rebuilt must give the same pulses, times and features.

Tolerances are those of the sign-convention test in tests/features/test_extract.py
(times within one sample at 10 MS/s, amplitudes within 3 %, bipolarity within 0.03);
the rebuilt windows are the same samples, so the features agree far closer.
"""

import json

import h5py
import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from classify.cli import main
from features import InputError, open_catalog, write_catalog
from features.assemble import assemble_catalog
from features.extract import extract_features
from features.simulate import simulate_season
from features.writer import format_time_utc

SHORT = {"field_samples": 2000, "pretrigger_s": 2e-5, "vhf_samples": 2500}
TIME_COLS = ["rise_time_s", "fwhm_s", "initial_half_cycle_s", "zero_crossing_s", "width_s"]
AMP_COLS = ["peak_field_v_per_m", "range_normalized_peak_v_per_m", "peak_current_a",
            "current_moment_peak_a_m"]


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    return open_catalog(simulate_season(tmp_path_factory.mktemp("asm") / "sim", 400, 2,
                                        **SHORT))


def _sources_frame(cat, rows=None):
    s = cat.sources
    df = pd.DataFrame({"event_id": cat.event_ids[s.event_index], "t_s": s.t_s,
                       "azimuth_deg": s.azimuth_deg, "elevation_deg": s.elevation_deg,
                       "x_m": s.xyz_m[:, 0], "y_m": s.xyz_m[:, 1], "z_m": s.xyz_m[:, 2]})
    return df if rows is None else df[df["event_id"].isin(cat.event_ids[rows])]


def _reference(cat, rows, folder):
    """The chosen events of ``cat``, with the sources inside their field window, as a
    catalog of their own (the comparison target)."""
    m = cat.manifest
    ev = cat.events.iloc[rows][["event_id", "flash_id", "range_m"]].copy()
    ev.insert(1, "time_utc", cat.time_ns[rows])
    src = _sources_frame(cat, rows)
    pre, length = m["field"]["pretrigger_s"], cat.field.duration_s
    src = src[(src["t_s"] >= -pre) & (src["t_s"] < length - pre - 1e-9)]
    meta = {k: v for k, v in m["field"].items() if k != "file"}
    vmeta = {k: v for k, v in m["vhf"].items() if k != "file"}
    return open_catalog(write_catalog(folder, ev, cat.field.open()[rows], field_meta=meta,
                                      vhf=cat.vhf.open()[rows], vhf_meta=vmeta, sources=src,
                                      catalog_id=cat.catalog_id))


def _assert_same_features(ref, new):
    assert sorted(new.event_ids) == sorted(ref.event_ids)
    a = extract_features(ref).set_index("event_id")
    b = extract_features(new).set_index("event_id").loc[a.index]
    assert (a["time_utc"] == b["time_utc"]).all()
    for col in TIME_COLS:
        assert (np.abs(a[col] - b[col]).fillna(0) <= 1 / 10e6).all(), col
    for col in AMP_COLS:
        assert_allclose(a[col], b[col], rtol=0.03, err_msg=col)
    assert_allclose(a["polarity"], b["polarity"], equal_nan=True)
    assert_allclose(a["bipolarity"], b["bipolarity"], atol=0.03)
    return a, b


def _continuous_station(cat, folder, rng, max_records=None):
    """Write windows of non-overlapping events into continuous records (one .npy per
    record, plus records.csv with UTC start times), a UTC trigger list and a UTC source
    list in direction cosines; return the rows used."""
    folder.mkdir()
    t = cat.time_ns
    order = np.argsort(t, kind="stable")
    f_rate, v_rate = cat.field.sample_rate_hz, cat.vhf.sample_rate_hz
    pre_ns = round(cat.field.pretrigger_s * 1e9)
    win_ns = round(cat.field.duration_s * 1e9)
    rows, last_end = [], -np.inf
    for i in order:  # greedy: windows that do not overlap (with 1 us to spare)
        if t[i] - pre_ns >= last_end + 1000:
            rows.append(i)
            last_end = t[i] - pre_ns + win_ns
    rows = np.array(rows)
    groups = np.split(rows, np.flatnonzero(np.diff(t[rows]) > 5e6) + 1)  # 5 ms apart: new
    groups = sorted(groups, key=len)[:max_records]  # shortest records first when limited
    rows = np.sort(np.concatenate(groups))
    field, vhf = cat.field.open(), cat.vhf.open()
    index = []
    for g, members in enumerate(groups):
        start = int(t[members[0]]) - pre_ns - 1_000_000  # 1 ms of noise first
        length_ns = int(t[members[-1]]) - start + win_ns + 1_000_000
        for name, rate, arr, noise in (("field", f_rate, field, 0.01),
                                       ("vhf", v_rate, vhf, 0.1)):
            m = arr.shape[1]
            pre = round(cat.field.pretrigger_s * rate)
            rec = (noise * np.abs(rng.normal(size=int(length_ns * rate / 1e9)))
                   ).astype(np.float32)
            for i in members:
                k = round((int(t[i]) - start) * rate / 1e9) - pre
                rec[k:k + m] = arr[i]
            np.save(folder / f"{name}-{g:03d}.npy", rec)
        index.append({"file": f"field-{g:03d}.npy", "start_utc": format_time_utc([start])[0]})
        index.append({"file": f"vhf-{g:03d}.npy", "start_utc": format_time_utc([start])[0]})
    pd.DataFrame(index).to_csv(folder / "records.csv", index=False)
    ev = cat.events.iloc[rows]
    pd.DataFrame({"id": ev["event_id"], "when": format_time_utc(t[rows]),
                  "dist": ev["range_m"], "flash_id": ev["flash_id"]}).sample(
        frac=1, random_state=1).to_csv(folder / "triggers.csv", index=False)
    src = _sources_frame(cat, rows)
    pos = pd.Index(cat.event_ids).get_indexer(src["event_id"])
    az, el = np.radians(src["azimuth_deg"]), np.radians(src["elevation_deg"])
    pd.DataFrame({"utc": format_time_utc(t[pos] + np.round(src["t_s"] * 1e9).astype(np.int64)),
                  "ce": np.cos(el) * np.sin(az), "cn": np.cos(el) * np.cos(az),
                  "X": src["x_m"], "Y": src["y_m"], "Z": src["z_m"]}
                 ).to_csv(folder / "mapped.csv", index=False, float_format="%.12g")
    return rows


CONTINUOUS_TOML = """
[catalog]
catalog_id = "{cid}"
station = "hollowmere"
season = 2031

[window]
pretrigger_s = {pre}
length_s = {length}

[field]
files = "field-*.npy"
sample_rate_hz = {rate}
start_utc = {{ index = "records.csv" }}
units = "V/m"
sign_convention = "physics"
decay_time_s = {decay}
full_scale = {full_scale}

[vhf]
files = ["vhf-*.npy"]
sample_rate_hz = {vrate}
start_utc = {{ index = "records.csv" }}
kind = "power"
band_hz = [25e6, 85e6]
delay_s = {vdelay}

[triggers]
file = "triggers.csv"
time_column = "when"
event_id_column = "id"
range_column = "dist"

[sources]
file = "mapped.csv"
angles = "direction_cosines"
time = "utc"
columns = {{ time = "utc", cos_east = "ce", cos_north = "cn", x = "X", y = "Y", z = "Z" }}
"""


def _continuous_toml(cat, folder):
    m = cat.manifest
    text = CONTINUOUS_TOML.format(
        cid=cat.catalog_id, pre=m["field"]["pretrigger_s"], length=cat.field.duration_s,
        rate=cat.field.sample_rate_hz, decay=m["field"]["decay_time_s"],
        full_scale=m["field"]["full_scale"], vrate=cat.vhf.sample_rate_hz,
        vdelay=m["vhf"]["delay_s"])
    path = folder / "hollowmere.toml"
    path.write_text(text)
    return path


def test_round_trip_through_continuous_records(season, tmp_path, capsys):
    """Continuous records + given UTC trigger times + UTC direction-cosine sources ->
    the same event ids, times to the ns, samples and features as the original pulses."""
    st = tmp_path / "station"
    rows = _continuous_station(season, st, np.random.default_rng(0))
    assert rows.size >= 60
    ref = _reference(season, rows, tmp_path / "ref")
    desc = _continuous_toml(season, st)
    assert main(["assemble", str(desc), "--out", str(tmp_path / "new")]) == 0
    assert f"assembled {rows.size} pulses" in capsys.readouterr().out
    new = open_catalog(tmp_path / "new")
    pos = pd.Index(new.event_ids).get_indexer(ref.event_ids)
    assert_array_equal(new.time_ns[pos], ref.time_ns)
    assert_array_equal(new.field.open()[pos], ref.field.open())
    assert_array_equal(new.vhf.open()[pos], ref.vhf.open())
    assert new.sources.n_sources == ref.sources.n_sources
    _assert_same_features(ref, new)
    info = new.manifest["assembled"]
    assert info["pulses"] == "given trigger times" and info["n_windows_padded"] == 0
    assert info["sources"]["n_outside_windows"] > 0  # those outside the window were dropped
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".")]


def test_round_trip_through_one_hdf5_file_per_trigger(season, tmp_path):
    """One HDF5 file per trigger (datasets field and vhf, rates and times as attributes)
    -> the same events, times and features."""
    st = tmp_path / "h5"
    st.mkdir()
    m = season.manifest
    rows = np.arange(0, season.n_events, 3)
    field, vhf = season.field.open(), season.vhf.open()
    for i in rows:
        with h5py.File(st / f"{season.event_ids[i]}.h5", "w") as h:
            h.attrs["trigger_utc"] = str(format_time_utc([season.time_ns[i]])[0])
            h.attrs["event"] = str(season.event_ids[i])
            h.attrs["flash"] = str(season.events["flash_id"].iloc[i])
            h.attrs["range_m"] = season.range_m[i]
            for name, arr, rate in (("field", field, m["field"]["sample_rate_hz"]),
                                    ("vhf", vhf, m["vhf"]["sample_rate_hz"])):
                ds = h.create_dataset(name, data=arr[i])
                ds.attrs["sample_rate_hz"] = rate
                ds.attrs["pretrigger_s"] = m[name]["pretrigger_s"]
    (st / "station.json").write_text(json.dumps({
        "catalog": {"catalog_id": season.catalog_id, "station": "hollowmere"},
        "field": {"files": "*.h5", "layout": "triggered", "dataset": "field",
                  "sample_rate_hz": "attr:sample_rate_hz", "pretrigger_s": "attr:pretrigger_s",
                  "trigger_utc": "attr:trigger_utc", "units": "V/m",
                  "sign_convention": "physics", "decay_time_s": m["field"]["decay_time_s"],
                  "full_scale": m["field"]["full_scale"],
                  "event_attributes": {"event_id": "event", "flash_id": "flash",
                                       "range_m": "range_m"}},
        "vhf": {"files": "*.h5", "layout": "triggered", "dataset": "vhf",
                "sample_rate_hz": "attr:sample_rate_hz", "pretrigger_s": "attr:pretrigger_s",
                "kind": "power", "band_hz": [25e6, 85e6], "delay_s": m["vhf"]["delay_s"]}}))
    new = open_catalog(assemble_catalog(st / "station.json", tmp_path / "new"))
    ref = open_catalog(write_catalog(
        tmp_path / "ref", season.events.iloc[rows][["event_id", "flash_id", "range_m"]]
        .assign(time_utc=season.time_ns[rows]), field[rows],
        field_meta={k: v for k, v in m["field"].items() if k != "file"}, vhf=vhf[rows],
        vhf_meta={k: v for k, v in m["vhf"].items() if k != "file"},
        catalog_id=season.catalog_id))
    pos = pd.Index(new.event_ids).get_indexer(ref.event_ids)
    assert_array_equal(new.time_ns[pos], ref.time_ns)
    _assert_same_features(ref, new)


def test_detection_and_grouping_during_assembly(season, tmp_path):
    """Without trigger times the pulses are detected; found pulses lie at the original
    trigger times (within 5 us, the windows' onsets), counts and noise per record are in
    the manifest, and flashes are grouped."""
    st = tmp_path / "station"
    rows = _continuous_station(season, st, np.random.default_rng(1))
    desc = _continuous_toml(season, st).read_text()
    desc = desc[:desc.index("[triggers]")] + desc[desc.index("[sources]"):]
    (st / "detect.toml").write_text(desc + "\n[detect]\nthreshold_sigma = 8\n\n[flashes]\n"
                                    "gap_s = 0.5\n")
    cat = open_catalog(assemble_catalog(st / "detect.toml", tmp_path / "det"))
    info = cat.manifest["assembled"]
    assert info["pulses"] == "detected" and info["trigger"]["threshold_sigma"] == 8
    assert sum(r["n_triggers"] for r in info["records"]) == cat.n_events
    assert all(r["noise_v_per_m"] > 0 for r in info["records"])
    truth = np.sort(season.time_ns[rows])
    j = np.clip(np.searchsorted(cat.time_ns, truth), 1, cat.n_events - 1)
    near = np.minimum(np.abs(cat.time_ns[j] - truth), np.abs(cat.time_ns[j - 1] - truth))
    assert np.mean(near <= 25_000) >= 0.9  # most catalogued pulses are found near their time
    assert "flash_grouping" in cat.manifest and (cat.events["flash_id"] != "").all()


BAD = [
    ("[field]\nfiles = 'nothing-*.npy'\n", "matches no file"),
    ("[field]\nfiles = 'field-*.npy'\nsample_rate_hz = -5\nsign_convention = 'physics'\n"
     "decay_time_s = 1e-3\nstart_utc = { index = 'records.csv' }\n",
     r"\[field\]: 'sample_rate_hz' must be a number > 0"),
    ("[field]\nfiles = 'field-*.npy'\nsample_rate_hz = 2e7\nsign_convention = 'up'\n"
     "decay_time_s = 1e-3\nstart_utc = { index = 'records.csv' }\n", "'sign_convention'"),
    ("[field]\nfiles = 'field-*.npy'\nsample_rate_hz = 2e7\nsign_convention = 'physics'\n"
     "start_utc = { index = 'records.csv' }\nspeed = 3\n",
     r"unknown key 'speed'.*\n.*'decay_time_s' is required"),
    ("[field\nfiles = 1\n", "not valid TOML"),
]


@pytest.mark.parametrize("text, match", BAD)
def test_bad_descriptions_name_file_and_key(season, tmp_path, text, match):
    """A bad description exits 2 with the file and key named; nothing is written."""
    st = tmp_path / "station"
    _continuous_station(season, st, np.random.default_rng(2))
    (st / "bad.toml").write_text("[catalog]\ncatalog_id = 'hollowmere-x'\n" + text)
    with pytest.raises(InputError, match=match) as err:
        assemble_catalog(st / "bad.toml", tmp_path / "out")
    assert "bad.toml" in str(err.value)
    assert main(["assemble", str(st / "bad.toml"), "--out", str(tmp_path / "out")]) == 2
    assert not (tmp_path / "out").exists()


def test_failure_midway_leaves_no_catalog(season, tmp_path, capsys):
    """A source list with a bad line (read after the windows were cut) fails with the
    line named; no catalog, no temporary folder; an old catalog is kept."""
    st = tmp_path / "station"
    _continuous_station(season, st, np.random.default_rng(3))
    desc = _continuous_toml(season, st)
    src = pd.read_csv(st / "mapped.csv")
    src.loc[5, "ce"] = 0.9
    src.loc[5, "cn"] = 0.9
    src.to_csv(st / "mapped.csv", index=False)
    (tmp_path / "out").mkdir()
    (tmp_path / "out" / "keep.txt").write_text("old")
    assert main(["assemble", str(desc), "--out", str(tmp_path / "out"), "--overwrite"]) == 2
    err = capsys.readouterr().err
    assert "mapped.csv line 7: direction cosines" in err
    assert (tmp_path / "out" / "keep.txt").read_text() == "old"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["out", "station"]


def test_trigger_outside_every_record_is_named(season, tmp_path):
    """A trigger time in no record names the triggers file and its line."""
    st = tmp_path / "station"
    _continuous_station(season, st, np.random.default_rng(4))
    desc = _continuous_toml(season, st)
    trig = pd.read_csv(st / "triggers.csv")
    trig.loc[2, "when"] = "2040-01-01T00:00:00Z"
    trig.to_csv(st / "triggers.csv", index=False)
    with pytest.raises(InputError, match=r"triggers.csv: 1 trigger time\(s\) lie in no field "
                                         r"record \(lines 4\)"):
        assemble_catalog(desc, tmp_path / "out")


def test_csv_and_npz_records_give_the_same_catalog(season, tmp_path):
    """The same continuous records as a CSV column of samples (field) and npz members with
    a start-time key (VHF) build the same catalog as the .npy records."""
    st = tmp_path / "station"
    _continuous_station(season, st, np.random.default_rng(5), max_records=6)
    desc = _continuous_toml(season, st)
    ref = open_catalog(assemble_catalog(desc, tmp_path / "npy"))
    index = pd.read_csv(st / "records.csv").set_index("file")["start_utc"]
    for f in sorted(st.glob("field-*.npy")):
        np.savetxt(st / f"{f.stem}.csv", np.load(f), fmt="%.9g", header="e", comments="")
    for f in sorted(st.glob("vhf-*.npy")):
        np.savez(st / f"{f.stem}.npz", p=np.load(f), start=np.str_(index[f.name]))
    text = desc.read_text().replace('files = "field-*.npy"', 'files = "field-*.csv"\n'
                                    'dataset = "e"')
    text = text.replace('files = ["vhf-*.npy"]', 'files = ["vhf-*.npz"]\ndataset = "p"')
    text = text.replace('[vhf]', '[vhf]\nstart_utc = "attr:start"', 1)
    text = text.replace('start_utc = { index = "records.csv" }\nkind', 'kind')
    index.rename(lambda f: f.replace(".npy", ".csv")).reset_index().to_csv(
        st / "records.csv", index=False)
    (st / "other.toml").write_text(text)
    new = open_catalog(assemble_catalog(st / "other.toml", tmp_path / "other"))
    assert_array_equal(new.event_ids, ref.event_ids)
    assert_array_equal(new.field.open(), ref.field.open())
    assert_array_equal(new.vhf.open(), ref.vhf.open())


def test_the_description_page_examples_use_only_known_keys(tmp_path):
    """Every TOML example of docs/station-description.md is read without a problem other
    than its (absent) recording files."""
    import re
    from pathlib import Path

    from features.station import load_station

    doc = (Path(__file__).resolve().parents[2] / "docs" / "station-description.md").read_text()
    blocks = re.findall(r"```toml\n(.*?)```", doc, re.S)
    assert len(blocks) == 3
    head = blocks[0].split("[field]")[0]
    field = "[field]" + blocks[0].split("[field]")[1].split("[vhf]")[0]
    for i, text in enumerate([blocks[0], head + field + blocks[1],
                              head.replace("[window]", "[window]") + blocks[2]]):
        path = tmp_path / f"d{i}.toml"
        path.write_text(text)
        with pytest.raises(InputError) as err:
            load_station(path)
        odd = [p for p in err.value.problems
               if "matches no file" not in p and "not found" not in p]
        assert not odd, odd
