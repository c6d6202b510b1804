"""The catalog reader's refusals: implausible numbers, malformed files, odd paths.

Every case is a catalog that an earlier reader accepted (or crashed on), each
now refused with the file, the key or line, the value and what is accepted.
The catalogs are invented, for self-consistency only.
"""

import json
import os

import numpy as np
import pandas as pd
import pytest

from classify.cli import main
from features import CatalogError, open_catalog
from features._manifest import PLAUSIBLE
from features._tables import TABLE_PLAUSIBLE

N, M = 4, 400


def _field(n=N, m=M):
    return np.random.default_rng(0).normal(0, 0.01, (n, m)).astype(np.float32)


def _vhf(n=N, m=500):
    return np.abs(np.random.default_rng(1).normal(0, 1, (n, m))).astype(np.float32)


def _refused(path, *patterns, capsys=None):
    """open_catalog raises naming every pattern; `check` exits 2 without a traceback."""
    with pytest.raises(CatalogError) as info:
        open_catalog(path)
    text = str(info.value)
    for pattern in patterns:
        assert pattern in text, (pattern, text)
    assert main(["check", str(path)]) == 2
    if capsys is not None:
        err = capsys.readouterr().err
        assert "Traceback" not in err and "internal error" not in err
    return text


#: (channel, key, absurd value, accepted range as the message prints it)
ABSURD = [
    ("field", "sample_rate_hz", 1e308, "1000 to 1e+11 Hz"),
    ("field", "sample_rate_hz", 1e-308, "1000 to 1e+11 Hz"),
    ("vhf", "sample_rate_hz", 1e308, "1000 to 1e+11 Hz"),
    ("field", "pretrigger_s", 1e308, "0 to 10 s"),
    ("vhf", "pretrigger_s", 11.0, "0 to 10 s"),
    ("field", "delay_s", -5, "-0.001 to 0.001 s"),
    ("vhf", "delay_s", 1e-308 + 2e-3, "-0.001 to 0.001 s"),
    ("field", "scale", 1e308, "1e-12 to 1e+06 V/m per file unit"),
    ("field", "scale", 1e-308, "1e-12 to 1e+06 V/m per file unit"),
    ("field", "full_scale", 1e-30, "1e-06 to 1e+07 V/m"),
    ("vhf", "full_scale", 1e300, "1e-12 to 1e+12 file units"),
    ("field", "decay_time_s", 1e-308, "1e-06 to 100 s"),
    ("field", "decay_time_s", 1e5, "1e-06 to 100 s"),
]


@pytest.mark.parametrize("channel,key,value,accepted", ABSURD)
def test_absurd_manifest_numbers_are_refused(make_catalog, capsys, channel, key, value,
                                             accepted):
    """A finite but absurd manifest number names key, value and accepted range."""
    meta = {key: value}
    kw = {"field_meta": meta} if channel == "field" else {"vhf_meta": meta}
    path = make_catalog("absurd", _field(), vhf=_vhf(), **kw)
    _refused(path, f"catalog.json: '{channel}.{key}' is {float(value)!r}, outside the "
                   f"accepted range {accepted}", capsys=capsys)


def test_every_plausible_range_is_explained():
    """Each range carries its reason and whether it rests on a source or on practice."""
    for table in (PLAUSIBLE, TABLE_PLAUSIBLE):
        for name, rng in table.items():
            assert rng.low < rng.high, name
            assert rng.why and rng.unit, name


def test_band_beyond_the_accepted_range(make_catalog):
    """A VHF band of 1e300 Hz (power records have no Nyquist check) is refused."""
    path = make_catalog("band", _field(), vhf=_vhf(), vhf_meta={"band_hz": [1e6, 1e300]})
    _refused(path, "'vhf.band_hz' is [1000000.0, 1e+300], outside the accepted range")


def test_limits_themselves_are_accepted(make_catalog):
    """The bounds are inclusive: a catalog at the edges loads."""
    path = make_catalog("edges", _field(), vhf=_vhf(),
                        field_meta={"sample_rate_hz": 1e3, "delay_s": -1e-3,
                                    "decay_time_s": 100.0, "full_scale": 1e7},
                        vhf_meta={"sample_rate_hz": 1e11, "delay_s": 1e-3,
                                  "pretrigger_s": 10.0})
    assert open_catalog(path).field.sample_rate_hz == 1e3


def _events(n=N, **columns):
    t0 = pd.Timestamp("2040-06-01T12:00:00Z")
    ev = {"event_id": [f"e{i}" for i in range(n)],
          "time_utc": [(t0 + pd.Timedelta(seconds=i)).strftime("%Y-%m-%dT%H:%M:%S.%fZ")
                       for i in range(n)]}
    ev.update(columns)
    return ev


def test_absurd_table_numbers_are_refused(make_catalog):
    """range_m and the source columns outside their ranges name file, line and column."""
    ev = _events(range_m=["1e308", "12000", "1e-320", "3e6"])
    src = pd.DataFrame({"event_id": ["e0", "e1", "e2", "e3"],
                        "t_s": [1e308, 1e-6, -11.0, 0.0],
                        "azimuth_deg": [10.0] * 4, "elevation_deg": [5.0] * 4,
                        "x_m": [0.0, 3e6, 0.0, 0.0], "y_m": [0.0] * 4,
                        "z_m": [5e3, 5e3, 5e3, -2e5], "power_db": [10.0, 1e308, 0.0, 0.0]})
    path = make_catalog("tables", _field(), events=ev, sources=src)
    _refused(path,
             "events.csv line 2: column 'range_m' is '1e308', outside the accepted range "
             "1 to 2e+06 m",
             "events.csv line 4: column 'range_m' is '1e-320'",
             "events.csv line 5: column 'range_m' is '3e6'",
             "sources.csv line 2: column 't_s' is",
             "outside the accepted range -10 to 10 s",
             "sources.csv line 4: column 't_s'",
             "sources.csv line 3: column 'x_m'",
             "sources.csv line 5: column 'z_m'",
             "sources.csv line 3: column 'power_db'")


@pytest.mark.parametrize("word", ["now", "today", "2031-07-14", "tomorrow 12:00"])
def test_time_words_and_bare_dates_are_refused(make_catalog, word):
    """Only explicit ISO-8601 times with a time of day are trigger times."""
    ev = _events()
    ev["time_utc"][1] = word
    path = make_catalog("words", _field(), events=ev)
    _refused(path, f"events.csv line 3: column 'time_utc' must be an ISO-8601 UTC time "
                   f"like 2031-07-14T21:03:55.123456Z, got {word!r}")


def test_explicit_iso_forms_are_accepted(make_catalog):
    """Extended and basic ISO-8601, with Z, an offset or no zone, all read."""
    ev = _events()
    ev["time_utc"] = ["2031-07-14T21:03:55.123456Z", "2031-07-14 21:03:56.5+00:00",
                      "20310714T210357Z", "2031-07-14T23:03:58.000001+02:00"]
    cat = open_catalog(make_catalog("iso", _field(), events=ev))
    assert str(cat.events["time_utc"].iloc[3]) == "2031-07-14 21:03:58.000001+00:00"


@pytest.mark.parametrize("table", ["events", "sources"])
def test_repeated_column_names_are_refused(make_catalog, table):
    """pandas renames a repeated column to 'flash_id.1'; the reader refuses the file."""
    src = pd.DataFrame({"event_id": ["e0"], "t_s": [0.0], "azimuth_deg": [1.0],
                        "elevation_deg": [2.0]})
    path = make_catalog("dupcol", _field(), events=_events(flash_id=["f1"] * N), sources=src)
    fname = f"{table}.csv"
    text = (path / fname).read_text().splitlines()
    col = "flash_id" if table == "events" else "t_s"
    lines = [text[0] + f",{col}"] + [ln + ",x" for ln in text[1:]]
    (path / fname).write_text("\n".join(lines) + "\n")
    _refused(path, f"{fname}: the header repeats column(s) ['{col}']")


@pytest.mark.parametrize("table,every_row", [("events", True), ("events", False),
                                             ("sources", True)])
def test_trailing_comma_is_named_as_an_extra_field(make_catalog, table, every_row):
    """A row with one field too many is reported as such, not as a bad time."""
    src = pd.DataFrame({"event_id": ["e0", "e1"], "t_s": [0.0, 1e-6], "azimuth_deg": [1.0] * 2,
                        "elevation_deg": [2.0] * 2})
    path = make_catalog("comma", _field(), sources=src, events=_events())
    fname = f"{table}.csv"
    lines = (path / fname).read_text().splitlines()
    lines = [lines[0]] + [ln + ("," if every_row or i == 2 else "")
                          for i, ln in enumerate(lines[1:], 1)]
    (path / fname).write_text("\n".join(lines) + "\n")
    line = 2 if every_row else 3
    text = _refused(path, f"{fname} line {line}: ", "fields but the header has",
                    "a trailing comma")
    assert "time_utc" not in text


def _npy_with_header(path, old: bytes, new: bytes):
    data = path.read_bytes()
    assert old in data
    path.write_bytes(data.replace(old, new.ljust(len(old))))


@pytest.mark.parametrize("old,new", [(b"(4, 400)", b"(-4, 400)"), (b"(4, 400)", b"(4, -1)"),
                                     (b"(4, 400)", b"(99999999999999999999999, 4)"),
                                     (b"'<f4'", b"'<zz'"), (b"False", b"Fals(")])
def test_corrupted_npy_header_names_the_file(make_catalog, capsys, old, new):
    """A negative, huge or garbled .npy header is bad input naming the file."""
    path = make_catalog("npyhdr", _field())
    _npy_with_header(path / "field.npy", old, new)
    _refused(path, "field.npy: not a readable NumPy .npy file", capsys=capsys)


def test_truncated_npy_names_the_file(make_catalog):
    """A .npy cut short after its header is refused by name."""
    path = make_catalog("trunc", _field())
    data = (path / "field.npy").read_bytes()
    (path / "field.npy").write_bytes(data[:len(data) // 2])
    _refused(path, "field.npy: not a readable NumPy .npy file")


@pytest.mark.parametrize("digits", [401, 5001])
def test_huge_integer_in_manifest_names_the_key(make_catalog, capsys, digits):
    """A 401- or 5001-digit integer is not a number: the key is named."""
    path = make_catalog("bigint", _field())
    text = (path / "catalog.json").read_text()
    text = text.replace('"sample_rate_hz": 20000000.0', '"sample_rate_hz": ' + "9" * digits)
    (path / "catalog.json").write_text(text)
    _refused(path, f"catalog.json: 'field.sample_rate_hz' must be a finite number, got "
                   f"<an integer of {digits} digits>", capsys=capsys)


def test_deeply_nested_manifest_is_refused(make_catalog, capsys):
    """JSON nested 100,000 levels deep is refused without exhausting the stack."""
    path = make_catalog("deep", _field())
    man = json.loads((path / "catalog.json").read_text())
    text = json.dumps(man)[:-1] + ', "x": ' + "[" * 100_000 + "]" * 100_000 + "}"
    (path / "catalog.json").write_text(text)
    _refused(path, "catalog.json: objects and arrays nested more than 64 levels deep",
             capsys=capsys)


def test_non_string_sign_convention_is_refused(make_catalog):
    """An unhashable value where a name is expected is a clear problem, not a TypeError."""
    path = make_catalog("sign", _field(), field_meta={"sign_convention": ["physics"]})
    _refused(path, "'field.sign_convention' must be \"physics\" or \"atmospheric\", "
                   "got ['physics']")


def test_fifo_and_device_are_named_for_what_they_are(make_catalog, capsys):
    """A FIFO or a link to a device is not reported as 'file not found' (and never read)."""
    path = make_catalog("fifo", _field(), vhf=_vhf())
    (path / "vhf.npy").unlink()
    os.mkfifo(path / "vhf.npy")
    _refused(path, "vhf.npy: is a FIFO (named pipe), not a regular file", capsys=capsys)
    (path / "vhf.npy").unlink()
    (path / "vhf.npy").symlink_to("/dev/null")
    _refused(path, "vhf.npy: is a character device, not a regular file", capsys=capsys)
    (path / "catalog.json").rename(path / "manifest.json")
    os.mkfifo(path / "catalog.json")
    _refused(path, "catalog.json: is a FIFO (named pipe)", capsys=capsys)


def test_events_table_that_is_a_folder(make_catalog):
    """events.csv as a folder is named as one."""
    path = make_catalog("evdir", _field())
    (path / "events.csv").unlink()
    (path / "events.csv").mkdir()
    _refused(path, "events.csv: is a folder", "not a regular file")


def test_catalog_path_that_is_a_fifo(tmp_path):
    """A catalog path that is a FIFO names what it is."""
    os.mkfifo(tmp_path / "pipe")
    with pytest.raises(CatalogError, match="pipe: is a FIFO"):
        open_catalog(tmp_path / "pipe")


def test_catalog_id_with_control_characters(make_catalog):
    """A catalog_id names outputs and store rows: no control characters."""
    path = make_catalog("cid", _field(), catalog_id="hollow\nmere")
    _refused(path, "'catalog_id' must be at most 200 characters without control characters")


def test_record_shorter_than_its_pretrigger_is_accepted_with_a_note(make_catalog):
    """By the spec the trigger may lie after the record: a note, not an error."""
    path = make_catalog("short", _field(), vhf=_vhf(), vhf_meta={"pretrigger_s": 1e-3})
    notes = " ".join(open_catalog(path).notes)
    assert "'vhf.pretrigger_s' is 0.001 s but a record lasts 2e-05 s" in notes
    assert main(["check", str(path)]) == 0


def test_repr_is_one_short_line(make_catalog):
    """repr(Catalog) names id, size, channels and path, not the manifest or arrays."""
    src = pd.DataFrame({"event_id": ["e0"], "t_s": [0.0], "azimuth_deg": [1.0],
                        "elevation_deg": [2.0]})
    path = make_catalog("repr", _field(), vhf=_vhf(), sources=src, events=_events())
    text = repr(open_catalog(path))
    assert text == (f"Catalog(catalog_id='testsite-2040', n_events={N}, "
                    f"channels=field+vhf+sources, path={str(path.resolve())!r})")


def test_content_hash_covers_the_waveforms(make_catalog):
    """One changed sample of field.npy or vhf.npy changes the hash; the legacy one stays."""
    path = make_catalog("hash", _field(), vhf=_vhf())
    first = open_catalog(path)
    assert open_catalog(path).content_hash == first.content_hash   # deterministic
    for name in ("field.npy", "vhf.npy"):
        arr = np.load(path / name)
        arr[-1, -1] += 1.0
        np.save(path / name, arr)
        again = open_catalog(path)
        assert again.content_hash != first.content_hash, name
        assert again.legacy_content_hash == first.legacy_content_hash
        first = again


def test_sampled_hash_of_a_big_file_reads_blocks(tmp_path):
    """Beyond 66 blocks the hash samples: a change in a sampled block is seen."""
    from features._hash import HASH_BLOCK, catalog_hash

    ev = tmp_path / "events.csv"
    ev.write_text("event_id,time_utc\n")
    big = tmp_path / "field.npy"
    big.write_bytes(bytes(200 * HASH_BLOCK))
    h0, legacy0 = catalog_hash(b"{}", ev, [big])
    data = bytearray(big.read_bytes())
    data[-1] = 1   # the last block is always sampled
    big.write_bytes(bytes(data))
    h1, legacy1 = catalog_hash(b"{}", ev, [big])
    assert h1 != h0 and legacy1 == legacy0


def test_infinite_samples_are_read_as_missing(make_catalog):
    """An infinite float sample (an overflow) is no measurement: read as NaN, counted
    as such by the scan, and the features still compute."""
    from features import scan_quality
    from features.extract import extract_features

    f = _field()
    f[2, 100:110] = -np.inf
    f[3, :] = np.inf
    cat = open_catalog(make_catalog("inf", f, field_meta={"pretrigger_s": 5e-6}))
    x, _ = cat.read_field(0, N)
    assert np.isnan(x[2, 100:110]).all() and not np.isinf(x).any()
    q = scan_quality(cat)
    assert (q["n_rows_with_nan"], q["n_rows_missing_field"]) == (2, 1)
    assert len(extract_features(cat)) == N
