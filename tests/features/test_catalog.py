"""The catalog v1 reader: every MUST of the spec, and one test per kind of broken catalog."""

import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose

from classify.cli import main
from features import CatalogError, open_catalog, scan_quality

N, M = 6, 400


def _field(n=N, m=M, dtype=np.float32):
    rng = np.random.default_rng(0)
    return rng.normal(0, 0.01, (n, m)).astype(dtype)


def _sources(ids, k=4):
    rows = []
    for e in ids:
        for j in range(k):
            rows.append({"event_id": e, "t_s": j * 1e-6, "azimuth_deg": 10.0 + j,
                         "elevation_deg": 5.0 + j})
    return pd.DataFrame(rows)


def test_good_catalog_loads_with_all_parts(make_catalog):
    """A complete catalog loads; units, ids, sources and unknown keys are kept."""
    ids = [f"e{i:04d}" for i in range(N)]
    path = make_catalog("good", _field(), vhf=np.abs(_field(m=500)),
                        sources=_sources(ids), manifest={"x_future_key": {"a": 1}})
    cat = open_catalog(path)
    assert cat.catalog_id == "testsite-2040"
    assert cat.n_events == N and cat.event_ids.tolist() == ids
    assert cat.manifest["x_future_key"] == {"a": 1}
    assert cat.sources.n_sources == 4 * N and cat.sources.counts().tolist() == [4] * N
    assert cat.vhf.kind == "power" and cat.field.sign == 1
    assert cat.content_hash.startswith("sha256:")
    assert str(cat.events["time_utc"].dtype) == "datetime64[ns, UTC]"


def test_nanosecond_times_are_kept(make_catalog):
    """Trigger times keep nanoseconds (the spec asks for at least microseconds)."""
    ev = {"event_id": ["a", "b"], "time_utc": ["2031-07-14T21:03:55.123456789Z",
                                               "2031-07-14T21:03:55.123456790Z"]}
    cat = open_catalog(make_catalog("ns", _field(2), events=ev))
    assert np.diff(cat.time_ns).tolist() == [1]


def test_atmospheric_counts_become_physics_volts(make_catalog):
    """int16 counts x scale, atmospheric sign -> V/m in the physics convention."""
    counts = np.array([[0, 100, -200, 32767] * 100] * 2, dtype=np.int16)
    path = make_catalog("counts", counts, field_meta={"units": "counts", "scale": 0.01,
                                                      "sign_convention": "atmospheric"})
    cat = open_catalog(path)
    x, clipped = cat.read_field(0, 2)
    assert_allclose(x[0, :4], [0.0, -1.0, 2.0, -327.67])
    assert clipped.all()  # 32767 is the int16 limit: the digitizer saturated


def test_full_scale_clipping_is_flagged_per_row(make_catalog):
    """Rows with a sample at +-full_scale (in V/m after scale) are clipped, others not."""
    f = _field()
    f[2, 50] = 250.0
    f[4, 60] = -250.0
    cat = open_catalog(make_catalog("clip", f, field_meta={"full_scale": 250.0}))
    q = scan_quality(cat)
    assert q["n_rows_field_clipped"] == 2
    assert cat.read_field(0, N)[1].tolist() == [False, False, True, False, True, False]


def test_nan_rows_are_counted(make_catalog):
    """NaN marks missing samples; scan_quality counts partial and all-NaN rows."""
    f = _field()
    f[1, :10] = np.nan
    f[3, :] = np.nan
    q = scan_quality(open_catalog(make_catalog("nan", f)))
    assert q["n_rows_with_nan"] == 2 and q["n_rows_missing_field"] == 1


def test_optional_parts_may_be_absent(make_catalog):
    """No VHF, no sources, no range, no flash_id: still a valid catalog."""
    cat = open_catalog(make_catalog("bare", _field()))
    assert cat.vhf is None and cat.sources is None
    assert np.isnan(cat.range_m).all() and (cat.events["flash_id"] == "").all()


def test_ids_that_look_like_missing_values_survive(make_catalog):
    """Event ids such as 'NA', 'null' and '007' are strings, not NaN or 7."""
    ev = {"event_id": ["NA", "null", "007"],
          "time_utc": ["2031-01-01T00:00:00.000000Z"] * 3}
    cat = open_catalog(make_catalog("ids", _field(3), events=ev))
    assert cat.event_ids.tolist() == ["NA", "null", "007"]


def test_unsorted_sources_are_grouped_by_event(make_catalog):
    """sources.csv in any row order is regrouped in events.csv order."""
    ids = [f"e{i:04d}" for i in range(N)]
    src = _sources(ids).sample(frac=1.0, random_state=0)
    cat = open_catalog(make_catalog("unsorted", _field(), sources=src))
    ev = cat.sources.event_index
    assert (np.diff(ev) >= 0).all() and cat.sources.counts().tolist() == [4] * N


def test_optional_xyz_columns(make_catalog):
    """x_m, y_m, z_m are read when all three are present."""
    ids = [f"e{i:04d}" for i in range(N)]
    src = _sources(ids).assign(x_m=1.0, y_m=2.0, z_m=3.0)
    cat = open_catalog(make_catalog("xyz", _field(), sources=src))
    assert cat.has_xyz and cat.sources.xyz_m.shape == (4 * N, 3)


# ---------------------------------------------------------------- broken catalogs


def _broken(make_catalog, name, **kw):
    return make_catalog(name, kw.pop("field", _field()), **kw)


BROKEN = {
    "format": (dict(manifest={"format": "wave-catalog"}), "'format' must be"),
    "version": (dict(manifest={"version": 2}), "'version' must be 1"),
    "catalog_id": (dict(manifest={"catalog_id": ""}), "'catalog_id' must be a non-empty"),
    "rate": (dict(field_meta={"sample_rate_hz": 0}), "sample_rate_hz' must be > 0"),
    "rate_type": (dict(field_meta={"sample_rate_hz": "fast"}), "sample_rate_hz' must be a"),
    "units": (dict(field_meta={"units": "kV/m"}), "'field.units' must be"),
    "counts_no_scale": (dict(field_meta={"units": "counts", "scale": None}),
                        "'field.scale' .* required"),
    "convention": (dict(field_meta={"sign_convention": "up"}), "sign_convention' must be"),
    "decay": (dict(field_meta={"decay_time_s": -1.0}), "decay_time_s' must be > 0"),
    "full_scale": (dict(field_meta={"full_scale": -5}), "full_scale' must be > 0"),
    "vhf_kind": (dict(vhf=np.ones((N, 100), np.float32), vhf_meta={"kind": "dB"}),
                 "'vhf.kind' must be"),
    "vhf_rows": (dict(vhf=np.ones((N + 1, 100), np.float32)),
                 r"vhf.npy: has 7 rows but events.csv has 6"),
    "field_rows": (dict(field=_field(N - 1), events={
        "event_id": [f"e{i}" for i in range(N)], "time_utc": ["2031-01-01T00:00:00Z"] * N}),
        r"field.npy: has 5 rows but events.csv has 6"),
    "dtype": (dict(field=_field(dtype=np.int32)), "dtype must be float32, float64 or int16"),
    "ndim": (dict(field=np.zeros((N, 20, 2), np.float32)), "must be 2-D"),
    "band": (dict(vhf=np.ones((N, 100), np.float32), vhf_meta={"band_hz": [85e6, 25e6]}),
             "band_hz' must be"),
}


@pytest.mark.parametrize("case", sorted(BROKEN))
def test_broken_manifest_or_array_is_refused(make_catalog, case, capsys):
    """Each broken catalog gives its named error and `pulsesort check` exits 2."""
    kw, pattern = BROKEN[case]
    meta = dict(kw.get("field_meta") or {})
    if meta.get("scale", 1) is None:  # delete the key
        meta.pop("scale")
        kw["field_meta"] = meta
        path = _broken(make_catalog, case, **kw)
        man = json.loads((path / "catalog.json").read_text())
        del man["field"]["scale"]
        (path / "catalog.json").write_text(json.dumps(man))
    else:
        path = _broken(make_catalog, case, **kw)
    with pytest.raises(CatalogError, match=pattern):
        open_catalog(path)
    assert main(["check", str(path)]) == 2
    err = capsys.readouterr().err
    assert "Traceback" not in err and "problem" in err


def _events_case(make_catalog, name, events, pattern):
    path = make_catalog(name, _field(len(events["event_id"])), events=events)
    with pytest.raises(CatalogError, match=pattern):
        open_catalog(path)
    assert main(["check", str(path)]) == 2


def test_duplicate_event_id(make_catalog):
    """Duplicate event_id names both lines."""
    ev = {"event_id": ["a", "b", "a"], "time_utc": ["2031-01-01T00:00:00Z"] * 3}
    _events_case(make_catalog, "dup", ev, r"line 4: event_id 'a' is not unique \(first seen "
                                          r"on line 2\)")


def test_bad_time(make_catalog):
    """A malformed trigger time names the line and shows the expected form."""
    ev = {"event_id": ["a", "b"], "time_utc": ["2031-01-01T00:00:00Z", "yesterday"]}
    _events_case(make_catalog, "time", ev, r"events.csv line 3: column 'time_utc' must be an "
                                           "ISO-8601")


def test_bad_range(make_catalog):
    """range_m must be a positive number or empty."""
    ev = {"event_id": ["a", "b", "c"], "time_utc": ["2031-01-01T00:00:00Z"] * 3,
          "range_m": ["12000", "-5", "far"]}
    path = make_catalog("range", _field(3), events=ev)
    with pytest.raises(CatalogError) as info:
        open_catalog(path)
    text = str(info.value)
    assert "line 3: column 'range_m' must be > 0" in text
    assert "line 4: column 'range_m' must be a number, got 'far'" in text


def test_missing_required_column(make_catalog):
    """events.csv without time_utc is refused, listing the header found."""
    _events_case(make_catalog, "nocol", {"event_id": ["a"], "when": ["x"]},
                 r"required column\(s\) \['time_utc'\] missing")


def test_sources_pointing_at_unknown_events(make_catalog):
    """A source whose event_id is not in events.csv names its line."""
    src = _sources(["e0000", "ghost"])
    path = make_catalog("ghost", _field(), sources=src)
    with pytest.raises(CatalogError, match=r"sources.csv line 6: event_id 'ghost' is not in "
                                           "events.csv"):
        open_catalog(path)


def test_source_angles_out_of_range(make_catalog):
    """azimuth in [0, 360) and elevation in [0, 90] are enforced."""
    src = _sources(["e0000"])
    src.loc[1, "azimuth_deg"] = 360.5
    src.loc[2, "elevation_deg"] = -1.0
    path = make_catalog("angles", _field(), sources=src)
    with pytest.raises(CatalogError) as info:
        open_catalog(path)
    assert "line 3: column 'azimuth_deg' must be in [0, 360)" in str(info.value)
    assert "line 4: column 'elevation_deg' must be in [0, 90]" in str(info.value)


def test_partial_xyz_columns(make_catalog):
    """x_m without y_m and z_m is refused."""
    src = _sources(["e0000"]).assign(x_m=1.0)
    with pytest.raises(CatalogError, match="x_m, y_m, z_m come together"):
        open_catalog(make_catalog("partial", _field(), sources=src))


def test_missing_declared_files(make_catalog):
    """A file declared in catalog.json but absent is named."""
    path = make_catalog("nofile", _field(), vhf=np.ones((N, 50), np.float32))
    (path / "vhf.npy").unlink()
    with pytest.raises(CatalogError, match=r"vhf.npy: file not found"):
        open_catalog(path)


def test_invalid_json_and_not_a_folder(tmp_path, make_catalog):
    """Broken JSON names line and column; a missing folder is an InputError naming it."""
    path = make_catalog("json", _field())
    (path / "catalog.json").write_text('{"format": "pulse-catalog",\n "version": }')
    with pytest.raises(CatalogError, match=r"invalid JSON at line 2"):
        open_catalog(path)
    with pytest.raises(CatalogError, match=r"nowhere: no such catalog folder"):
        open_catalog(tmp_path / "nowhere")
    assert main(["check", str(tmp_path / "nowhere")]) == 2


def test_not_an_npy_file(make_catalog):
    """A field file that is not .npy is refused by name."""
    path = make_catalog("npy", _field())
    (path / "field.npy").write_bytes(b"not numpy at all")
    with pytest.raises(CatalogError, match="field.npy: not a readable NumPy"):
        open_catalog(path)


def test_non_utf8_events(make_catalog):
    """events.csv with non-UTF-8 bytes is refused, not garbled."""
    path = make_catalog("latin", _field(1), events={"event_id": ["a"],
                                                    "time_utc": ["2031-01-01T00:00:00Z"]})
    (path / "events.csv").write_bytes(b"event_id,time_utc\n\xe9v,2031-01-01T00:00:00Z\n")
    with pytest.raises(CatalogError, match="not valid UTF-8"):
        open_catalog(path)


def test_every_problem_is_reported_at_once(make_catalog):
    """Several independent problems are all listed in one error."""
    path = make_catalog("many", _field(), field_meta={"sample_rate_hz": -1,
                                                      "sign_convention": "sideways"},
                        manifest={"version": 3})
    with pytest.raises(CatalogError) as info:
        open_catalog(path)
    assert len(info.value.problems) >= 3


def test_check_prints_summary(make_catalog, capsys):
    """`pulsesort check` on a good catalog prints the summary and exits 0."""
    ids = [f"e{i:04d}" for i in range(N)]
    path = make_catalog("sum", _field(), vhf=np.abs(_field(m=500)), sources=_sources(ids))
    assert main(["check", str(path)]) == 0
    out = capsys.readouterr().out
    assert "events      6" in out and "sources     24 (4.0 per event" in out
    assert "ok: the catalog follows catalog v1" in out


def test_trigger_outside_the_record_is_noted(make_catalog):
    """A pre-trigger longer than the record is allowed but noted (pulses searched everywhere)."""
    field = _field()
    field[:, M // 2] += 1.0  # one clear pulse in every record (invented, self-consistency)
    path = make_catalog("pre", field, field_meta={"pretrigger_s": 1e-3})
    notes = " ".join(open_catalog(path).notes)
    assert "'field.pretrigger_s' is 0.001 s but a record lasts 2e-05 s" in notes
    from features.extract import extract_features

    df = extract_features(open_catalog(path))
    assert len(df) == N and df["field_ok"].all()
    # the pulse was found wherever it is: its peak is the spike
    assert np.allclose(df["peak_field_v_per_m"], 1.0, atol=0.05)


def test_large_source_tables_spill_to_disk(make_catalog, monkeypatch):
    """Above the in-memory limit, sources live in temporary files, read per chunk."""
    import features._sources as tables

    monkeypatch.setattr(tables, "SOURCES_IN_MEMORY_MAX", 1)
    ids = [f"e{i:04d}" for i in range(N)]
    src = _sources(ids).assign(x_m=1.0, y_m=2.0, z_m=3.0).iloc[::-1]
    cat = open_catalog(make_catalog("spill", _field(), sources=src))
    assert isinstance(cat.sources.t_s, np.memmap)
    part = cat.sources.rows(2, 4)
    assert part.event_index.tolist() == [0] * 4 + [1] * 4
    assert_allclose(part.t_s, [3e-6, 2e-6, 1e-6, 0] * 2)  # file order kept within an event
    assert_allclose(part.xyz_m, [[1.0, 2.0, 3.0]] * 8)
    folder = cat.sources.t_s.filename.rsplit("/", 1)[0]
    import gc
    import os

    del cat, part
    gc.collect()
    assert not os.path.exists(folder)  # temporary files go with the catalog


@pytest.mark.parametrize("order,dtype", [("C", "<f4"), ("F", "<f8"), ("C", ">i2")])
def test_row_reader_matches_numpy_load(tmp_path, order, dtype):
    """NpyRows.read gives exactly numpy.load's rows, for C, Fortran and big-endian files."""
    from features._rowio import NpyRows

    a = np.asarray(np.random.default_rng(0).normal(0, 100, (37, 11)), dtype=dtype, order=order)
    np.save(tmp_path / "a.npy", a)
    rows = NpyRows(tmp_path / "a.npy")
    np.testing.assert_array_equal(rows.read(5, 17), np.load(tmp_path / "a.npy")[5:17])
    np.testing.assert_array_equal(rows.read(30, 99), a[30:])


def test_events_without_rows(make_catalog):
    """A header-only events.csv is refused by name."""
    path = make_catalog("empty", _field(1), events={"event_id": ["a"],
                                                    "time_utc": ["2031-01-01T00:00:00Z"]})
    (path / "events.csv").write_text("event_id,time_utc\n")
    with pytest.raises(CatalogError, match="events.csv: no event rows after the header"):
        open_catalog(path)


def test_azimuth_of_a_full_turn_is_north(make_catalog):
    """azimuth 360 (a writer's rounding of 359.99996) is read as 0, with a note."""
    src = _sources(["e0000"])
    src.loc[0, "azimuth_deg"] = 360.0
    cat = open_catalog(make_catalog("turn", _field(), sources=src))
    assert cat.sources.azimuth_deg[0] == 0.0
    assert any("exactly 360 read as 0" in n for n in cat.notes)


@pytest.mark.parametrize("order", ["C", "F"])
def test_row_reader_columns(tmp_path, order):
    """NpyRows.read_columns reads exactly a column span of some rows."""
    from features._rowio import NpyRows

    a = np.asarray(np.arange(40 * 50).reshape(40, 50), dtype="<i2", order=order)
    np.save(tmp_path / "a.npy", a)
    rows = NpyRows(tmp_path / "a.npy")
    np.testing.assert_array_equal(rows.read_columns(3, 9, 10, 20), a[3:9, 10:20])
    np.testing.assert_array_equal(rows.read_columns(38, 45, 0, 50), a[38:, :])
