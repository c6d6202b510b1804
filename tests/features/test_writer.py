"""The public catalog writer: what it writes reads back identically, or nothing is written."""

import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from features import InputError, open_catalog, write_catalog
from features.extract import extract_features
from features.simulate import simulate_season
from features.writer import format_time_utc, staged_folder

FIELD_META = {"sample_rate_hz": 20e6, "pretrigger_s": 1e-4, "units": "V/m",
              "sign_convention": "physics", "decay_time_s": 1e-3, "full_scale": 250.0}


def _events(n):
    return {"event_id": [f"hm-{i}" for i in range(n)],
            "time_utc": [f"2031-07-14T21:03:{i:02d}.123456789Z" for i in range(n)]}


def test_times_keep_nanoseconds():
    """int64 ns -> ISO-8601 UTC text with nine digits (numpy datetime64 is the reference)."""
    ns = np.array([0, 1_900_000_000_123_456_789])
    assert list(format_time_utc(ns)) == ["1970-01-01T00:00:00.000000000Z",
                                         "2030-03-17T17:46:40.123456789Z"]
    assert format_time_utc(ns)[1][:-1] == str(np.datetime64(int(ns[1]), "ns"))


def test_simulated_season_rewritten_reads_back_the_same(tmp_path):
    """A simulated catalog (invented data) rewritten by the public writer: same rows,
    same times to the nanosecond, same sources, same features (self-consistency)."""
    src = open_catalog(simulate_season(tmp_path / "sim", 60, 3, field_samples=2000,
                                       pretrigger_s=2e-5))
    m = src.manifest
    events = src.events[["event_id", "flash_id", "range_m"]].copy()
    events.insert(1, "time_utc", src.time_ns)
    s = src.sources
    ids = src.event_ids[s.event_index]
    sources = pd.DataFrame({"event_id": ids, "t_s": s.t_s, "azimuth_deg": s.azimuth_deg,
                            "elevation_deg": s.elevation_deg, "x_m": s.xyz_m[:, 0],
                            "y_m": s.xyz_m[:, 1], "z_m": s.xyz_m[:, 2]})
    fmeta = {k: v for k, v in m["field"].items() if k != "file"}
    vmeta = {k: v for k, v in m["vhf"].items() if k != "file"}
    out = write_catalog(tmp_path / "copy", events, src.field.open(), field_meta=fmeta,
                        vhf=src.vhf.open(), vhf_meta=vmeta, sources=sources,
                        catalog_id=src.catalog_id, station="hollowmere", season="2031",
                        extra={"note": {"written_by": "test"}})
    cat = open_catalog(out)
    assert_array_equal(cat.event_ids, src.event_ids)
    assert_array_equal(cat.time_ns, src.time_ns)
    assert_array_equal(cat.field.open(), src.field.open())
    assert_array_equal(cat.sources.offsets, src.sources.offsets)
    assert_allclose(cat.sources.azimuth_deg, src.sources.azimuth_deg, rtol=1e-9)
    assert cat.manifest["note"] == {"written_by": "test"}
    a, b = extract_features(src), extract_features(cat)
    pd.testing.assert_frame_equal(a, b, check_exact=False, rtol=1e-9)


@pytest.mark.parametrize("kwargs, match", [
    ({"catalog_id": ""}, "'catalog_id' must be a non-empty string"),
    ({"field": np.zeros((3, 400), np.float32)}, "'field' has 3 rows but 'events' has 2"),
    ({"field": np.zeros((2, 400), np.int32)}, "'field' dtype must be float32"),
    ({"field_meta": {"sample_rate_hz": 20e6}}, "'field_meta' is missing key 'units'"),
    ({"field_meta": dict(FIELD_META, rate=1)}, "'field_meta' has unknown key 'rate'"),
    ({"vhf": np.zeros((2, 100))}, "'vhf' and 'vhf_meta' go together"),
    ({"events": {"event_id": ["a", "a"], "time_utc": ["2031-01-01T00:00:00Z"] * 2}},
     r"repeats event_id\(s\) \['a'\]"),
    ({"events": {"event_id": ["a", "b"], "time_utc": ["2031-01-01T00:00:00Z", "noon"]}},
     "row 1: 'time_utc' must be an ISO-8601 UTC time, got 'noon'"),
    ({"extra": {"field": 1}}, "'extra' key 'field' is a catalog v1 key"),
])
def test_bad_arguments_are_named(tmp_path, kwargs, match):
    """Every bad argument raises InputError naming it; nothing is left behind."""
    args = {"events": _events(2), "field": np.zeros((2, 400), np.float32),
            "field_meta": FIELD_META, "catalog_id": "hollowmere-x"}
    args.update(kwargs)
    with pytest.raises(InputError, match=match):
        write_catalog(tmp_path / "out", args.pop("events"), args.pop("field"), **args)
    assert not (tmp_path / "out").exists()
    assert not list(tmp_path.glob(".*partial"))


def test_invalid_result_is_not_published(tmp_path):
    """A catalog the reader rejects (VHF band above Nyquist) is removed, not renamed."""
    with pytest.raises(InputError, match="does not validate") as err:
        write_catalog(tmp_path / "out", _events(2), np.zeros((2, 400), np.float32),
                      field_meta=FIELD_META, vhf=np.zeros((2, 400), np.float32),
                      vhf_meta={"sample_rate_hz": 100e6, "kind": "voltage",
                                "band_hz": [25e6, 85e6]},
                      catalog_id="hollowmere-x")
    assert any("Nyquist" in p for p in err.value.problems)
    assert not (tmp_path / "out").exists() and not list(tmp_path.iterdir())


def test_existing_folder_is_kept_unless_overwrite(tmp_path):
    """No overwrite: FileExistsError and the old catalog intact; overwrite replaces it."""
    args = dict(field_meta=FIELD_META, catalog_id="hollowmere-x")
    out = write_catalog(tmp_path / "c", _events(2), np.ones((2, 400), np.float32), **args)
    with pytest.raises(InputError, match="not empty"):
        write_catalog(out, _events(3), np.zeros((3, 400), np.float32), **args)
    assert open_catalog(out).n_events == 2
    write_catalog(out, _events(3), np.zeros((3, 400), np.float32), overwrite=True, **args)
    assert open_catalog(out).n_events == 3
    assert sorted(p.name for p in tmp_path.iterdir()) == ["c"]


def test_failure_inside_the_stage_leaves_nothing(tmp_path):
    """An exception while files are being written removes the temporary folder."""
    with pytest.raises(RuntimeError, match="disk full"), staged_folder(tmp_path / "c") as tmp:
        (tmp / "catalog.json").write_text(json.dumps({"format": "pulse-catalog"}))
        raise RuntimeError("disk full")
    assert not list(tmp_path.iterdir())


def test_the_format_page_example_makes_a_valid_catalog(tmp_path, monkeypatch):
    """The NumPy/pandas example of docs/catalog-v1.md writes a catalog the reader accepts."""
    import re
    from pathlib import Path

    doc = (Path(__file__).resolve().parents[2] / "docs" / "catalog-v1.md").read_text()
    code = re.findall(r"```python\n(.*?)```", doc, re.S)[0]
    monkeypatch.chdir(tmp_path)
    exec(compile(code, "docs/catalog-v1.md", "exec"), {})
    cat = open_catalog(tmp_path / "hollowmere-2031")
    assert cat.n_events == 3 and cat.sources.n_sources == 2 and not cat.notes
