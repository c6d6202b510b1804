"""Fuzzing the boundary: every variant of a small valid catalog gets a clean answer.

Each variant is the small catalog below with one or two seeded mutations (a
manifest number set to 0, 1e308 or a 401-digit integer, a key deleted, a time
cell set to 'now', a trailing comma, a corrupted .npy header, a FIFO in place of
a file, ...). Every variant goes through ``check``, ``features`` and
``triage --rules`` via :func:`classify.cli.main` with the strict exit-code
mapping (``LEGACY_VALUEERROR_IS_INPUT`` off), and must end in exit 0, or in a
clean exit 2 whose message names the mutated file and a key, line or column;
never exit 1, and never an output file (or a temporary one) left behind by a
failed command. ``check`` must run exactly the reader's validation: when it
passes a catalog, ``features`` and ``triage`` must not refuse it.

The catalog is invented, for self-consistency only. ``benchmarks/bench_fuzz.py``
runs thousands of variants of the same generator by hand.
"""

from __future__ import annotations

import json
import os
import re
import shutil
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import classify.cli as cli
from features._manifest import PLAUSIBLE

from .conftest import write_catalog

SEED = 20310714
N_VARIANTS = 200
N_EVENTS = 6
FILES = ("catalog.json", "events.csv", "sources.csv", "field.npy", "vhf.npy")

#: Manifest numbers the generator mutates: (channel, key).
NUMBERS = [("field", "sample_rate_hz"), ("field", "pretrigger_s"), ("field", "delay_s"),
           ("field", "scale"), ("field", "full_scale"), ("field", "decay_time_s"),
           ("vhf", "sample_rate_hz"), ("vhf", "pretrigger_s"), ("vhf", "delay_s"),
           ("vhf", "full_scale")]
#: Absurd, odd and edge values (JSON text, so literals JSON cannot hold are possible).
ODD_NUMBERS = ["0", "-0.0", "-1", "1e308", "-1e308", "1e-308", "5e-324", "1e-30", "1e30",
               "NaN", "Infinity", "-Infinity", "9" * 401, "9" * 5001, '"20e6"', "null",
               "true", "[]", "{}", '"fast"']
ODD_TIMES = ["now", "today", "2031-07-14", "", "yesterday 12:00", "2031-13-45T99:00:00Z",
             "1e308", "2031-07-14T21:03:55Z extra", "\u00e9t\u00e9"]
ODD_CELLS = ["", "nan", "1e308", "-1e308", "inf", "-5", "0", "abc", "1e-320", "9" * 401]


def base_catalog(folder: Path) -> Path:
    """The small valid catalog every variant starts from (invented values)."""
    rng = np.random.default_rng(0)
    t = np.arange(400) / 20e6 - 5e-6
    field = (np.exp(-0.5 * (t / 0.4e-6) ** 2)[None, :] * rng.uniform(1, 5, (N_EVENTS, 1))
             + rng.normal(0, 0.01, (N_EVENTS, 400))).astype(np.float32)
    vhf = np.abs(rng.normal(0, 1, (N_EVENTS, 500))).astype(np.float32)
    t0 = pd.Timestamp("2031-07-14T21:03:55Z")
    events = {"event_id": [f"e{i}" for i in range(N_EVENTS)],
              "time_utc": [(t0 + pd.Timedelta(milliseconds=3 * i)).strftime(
                  "%Y-%m-%dT%H:%M:%S.%fZ") for i in range(N_EVENTS)],
              "flash_id": ["f0", "f0", "f0", "f1", "f1", ""],
              "range_m": ["30000", "31000", "", "52000", "51000", "80000"]}
    src = [{"event_id": f"e{i}", "t_s": 1e-6 * j, "azimuth_deg": 40.0 + j,
            "elevation_deg": 10.0 + j, "x_m": 2e4 + 50 * j, "y_m": 1e4, "z_m": 5e3 + 40 * j,
            "power_db": 12.0} for i in range(N_EVENTS - 1) for j in range(4)]
    return write_catalog(folder, field, vhf=vhf, events=events, sources=pd.DataFrame(src),
                         field_meta={"pretrigger_s": 5e-6, "decay_time_s": 1e-3,
                                     "full_scale": 250.0},
                         vhf_meta={"pretrigger_s": 5e-6}, catalog_id="hollowmere-2031")


# ------------------------------------------------------------------ mutations
@dataclass(frozen=True)
class Mutation:
    """One change to a catalog folder; ``file`` is the file an error must name."""

    op: str
    file: str
    args: tuple

    def __str__(self) -> str:
        return f"{self.op}{self.args!r} on {self.file}"


def _manifest_text(folder):
    return (folder / "catalog.json").read_text(encoding="utf-8")


def _parent_of(folder, path):
    """(manifest, the object holding the last key of ``path``, that key), or None when
    an earlier mutation left no such object (a corrupted manifest: nothing to change)."""
    try:
        man = json.loads(_manifest_text(folder))
    except (ValueError, RecursionError):
        return None
    *parents, last = path.split(".")
    d = man
    for p in parents:
        d = d.get(p) if isinstance(d, dict) else None
    return (man, d, last) if isinstance(d, dict) else None


def _set_json(folder, path, literal):
    """Set manifest key ``path`` ("field.delay_s") to the JSON text ``literal``."""
    found = _parent_of(folder, path)
    if found is None:
        return
    man, d, last = found
    d[last] = "@@VALUE@@"
    text = json.dumps(man, indent=2).replace('"@@VALUE@@"', literal)
    (folder / "catalog.json").write_text(text, encoding="utf-8")


def _delete_key(folder, path):
    found = _parent_of(folder, path)
    if found is None:
        return
    man, d, last = found
    d.pop(last, None)
    (folder / "catalog.json").write_text(json.dumps(man), encoding="utf-8")


def _csv_lines(folder, name):
    return (folder / name).read_text(encoding="utf-8").splitlines()


def _write_lines(folder, name, lines):
    (folder / name).write_text("\n".join(lines) + "\n", encoding="utf-8")


def _set_cell(folder, name, row, column, value):
    df = pd.read_csv(folder / name, dtype=str, keep_default_na=False)
    df.loc[row, column] = value
    df.to_csv(folder / name, index=False)


def _npy_header(folder, name, old, new):
    data = (folder / name).read_bytes()
    end = data.index(b"\n") + 1
    head = data[:end].replace(old, new)
    head = head[:end - 1].ljust(end - 1) + b"\n" if len(head) <= end else head
    (folder / name).write_bytes(head + data[end:])


def apply(folder: Path, m: Mutation) -> None:
    """Apply mutation ``m`` to the catalog in ``folder``."""
    a = m.args
    if m.op == "number":
        _set_json(folder, a[0], a[1])
    elif m.op == "delete":
        _delete_key(folder, a[0])
    elif m.op == "manifest_text":
        text = _manifest_text(folder)
        if a[0] == "truncate":
            text = text[: int(len(text) * a[1])]
        elif a[0] == "nest":
            text = text.rstrip()[:-1] + ', "x": ' + "[" * a[1] + "]" * a[1] + "}"
        elif a[0] == "latin1":
            (folder / "catalog.json").write_bytes(text.encode() + b"\xe9\xff")
            return
        (folder / "catalog.json").write_text(text, encoding="utf-8")
    elif m.op == "cell":
        _set_cell(folder, m.file, a[0], a[1], a[2])
    elif m.op == "csv":
        lines = _csv_lines(folder, m.file)
        if a[0] == "trailing_comma":
            lines[a[1]] += ","
        elif a[0] == "repeat_column":
            lines = [ln + "," + ln.split(",")[a[1]] for ln in lines]
        elif a[0] == "drop_column":
            lines = [",".join(c for j, c in enumerate(ln.split(",")) if j != a[1])
                     for ln in lines]
        elif a[0] == "drop_row":
            del lines[a[1]]
        elif a[0] == "duplicate_row":
            lines.append(lines[a[1]])
        elif a[0] == "header_only":
            lines = lines[:1]
        elif a[0] == "empty":
            lines = []
        elif a[0] == "crlf_bom":
            (folder / m.file).write_bytes(b"\xef\xbb\xbf" + "\r\n".join(lines).encode()
                                          + b"\r\n")
            return
        elif a[0] == "bad_utf8":
            (folder / m.file).write_bytes("\n".join(lines).encode() + b"\n\xff\xfe,\n")
            return
        _write_lines(folder, m.file, lines)
    elif m.op == "npy_header":
        _npy_header(folder, m.file, a[0].encode(), a[1].encode())
    elif m.op == "npy":
        arr = np.load(folder / m.file)
        if a[0] == "truncate":
            data = (folder / m.file).read_bytes()
            (folder / m.file).write_bytes(data[: int(len(data) * a[1])])
            return
        if a[0] == "dtype":
            arr = arr.astype(a[1])
        elif a[0] == "rows":
            arr = arr[: a[1]] if a[1] < len(arr) else np.vstack([arr] * 2)[: a[1]]
        elif a[0] == "ndim":
            arr = arr[..., None]
        elif a[0] == "samples":
            arr = arr[:, : a[1]]
        elif a[0] == "poke":
            arr = arr.astype(np.float32)
            arr[a[1], a[2]:a[3]] = np.float32(a[4])
        np.save(folder / m.file, arr)
    elif m.op == "kind":
        path = folder / m.file
        path.unlink()
        if a[0] == "fifo":
            os.mkfifo(path)
        elif a[0] == "devnull":
            path.symlink_to("/dev/null")
        elif a[0] == "folder":
            path.mkdir()
    else:  # pragma: no cover - a generator bug
        raise AssertionError(m.op)


def _plausible_literal(rng, channel, key):
    rng_ = PLAUSIBLE.get(f"{channel}.{key}", PLAUSIBLE.get(key))
    lo, hi = max(rng_.low, 1e-9), rng_.high
    v = float(np.exp(rng.uniform(np.log(lo), np.log(hi))))
    if key == "delay_s" and rng.uniform() < 0.5:
        v = -v
    return repr(v)


def random_mutation(rng) -> Mutation:
    """One seeded mutation, drawn over every kind of input the reader takes."""
    kind = rng.choice(["number", "number", "plausible", "plausible", "delete", "type",
                       "manifest_text", "time", "events_cell", "events_csv", "sources_cell",
                       "sources_csv", "npy_header", "npy", "kind"])
    if kind in ("number", "plausible", "delete", "type"):
        channel, key = NUMBERS[rng.integers(len(NUMBERS))]
        if kind == "number":
            return Mutation("number", "catalog.json", (f"{channel}.{key}",
                                                       str(rng.choice(ODD_NUMBERS))))
        if kind == "plausible":
            return Mutation("number", "catalog.json",
                            (f"{channel}.{key}", _plausible_literal(rng, channel, key)))
        path = str(rng.choice([f"{channel}.{key}", "format", "version", "catalog_id", "field",
                               "field.units", "field.sign_convention", "vhf.kind",
                               "field.file", "vhf.band_hz", "events"]))
        if kind == "delete":
            return Mutation("delete", "catalog.json", (path,))
        return Mutation("number", "catalog.json",
                        (path, str(rng.choice(['"x/../y"', "3", '""', "[1, 2, 3]", "null",
                                               '{"a": 1}', '"V/m "', "2", '"pulse"']))))
    if kind == "manifest_text":
        how = rng.choice(["truncate", "nest", "latin1"])
        arg = float(rng.uniform(0.1, 0.95)) if how == "truncate" else int(
            rng.choice([65, 1000, 100_000]))
        return Mutation("manifest_text", "catalog.json", (str(how), arg))
    if kind == "time":
        return Mutation("cell", "events.csv", (int(rng.integers(N_EVENTS)), "time_utc",
                                               str(rng.choice(ODD_TIMES))))
    if kind == "events_cell":
        col = str(rng.choice(["event_id", "range_m", "flash_id"]))
        value = str(rng.choice(ODD_CELLS + ["e0"]))
        return Mutation("cell", "events.csv", (int(rng.integers(N_EVENTS)), col, value))
    if kind == "sources_cell":
        col = str(rng.choice(["event_id", "t_s", "azimuth_deg", "elevation_deg", "x_m", "z_m",
                              "power_db"]))
        return Mutation("cell", "sources.csv", (int(rng.integers(20)), col,
                                                str(rng.choice(ODD_CELLS + ["ghost", "360"]))))
    if kind in ("events_csv", "sources_csv"):
        name = "events.csv" if kind == "events_csv" else "sources.csv"
        how = str(rng.choice(["trailing_comma", "repeat_column", "drop_column", "drop_row",
                              "duplicate_row", "header_only", "empty", "crlf_bom",
                              "bad_utf8"]))
        arg = int(rng.integers(1, N_EVENTS)) if how != "repeat_column" else int(
            rng.integers(3))
        if how == "drop_column":
            arg = int(rng.integers(4))
        return Mutation("csv", name, (how, arg))
    name = str(rng.choice(["field.npy", "vhf.npy"]))
    if kind == "npy_header":
        old, new = [("(6, ", "(-6, "), ("(6, ", "(99999999999999999999, "), ("'<f4'", "'<zz'"),
                    ("'<f4'", "'|O' "), ("False", "Fals("), ("'shape'", "'shap'"),
                    ("(6, ", "(6.5, ")][rng.integers(7)]
        return Mutation("npy_header", name, (old, new))
    if kind == "npy":
        how = str(rng.choice(["truncate", "dtype", "rows", "ndim", "samples", "poke"]))
        if how == "truncate":
            return Mutation("npy", name, (how, float(rng.uniform(0.05, 0.95))))
        if how == "dtype":
            return Mutation("npy", name, (how, str(rng.choice(["int32", "float16", "int16",
                                                               "float64", "complex64"]))))
        if how == "rows":
            return Mutation("npy", name, (how, int(rng.choice([0, 1, 5, 7]))))
        if how == "samples":
            return Mutation("npy", name, (how, int(rng.choice([0, 1, 7, 8, 9]))))
        if how == "poke":
            row = int(rng.integers(N_EVENTS))
            start = int(rng.integers(400))
            stop = start + int(rng.choice([1, 10, 400]))
            value = float(rng.choice([np.nan, np.inf, -np.inf, 1e30, 3e38, 0.0]))
            return Mutation("npy", name, (how, row, start, stop, value))
        return Mutation("npy", name, (how,))
    name = str(rng.choice(["events.csv", "sources.csv", "field.npy", "vhf.npy"]))
    return Mutation("kind", name, (str(rng.choice(["fifo", "devnull", "folder"])),))


def variants(seed: int = SEED, n: int = N_VARIANTS) -> list[tuple[Mutation, ...]]:
    """``n`` seeded variants: one mutation each, or two for one variant in five."""
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        k = 2 if rng.uniform() < 0.2 else 1
        out.append(tuple(random_mutation(rng) for _ in range(k)))
    return out


def _try_apply(folder: Path, m: Mutation) -> bool:
    """Apply ``m``; False when an earlier mutation left nothing for it to change (the
    file is gone, a folder, or no longer parses), so the variant is the earlier one."""
    if m.op not in ("kind",) and (folder / m.file).is_file() is False:
        return False
    try:
        apply(folder, m)
    except (OSError, ValueError, KeyError, IndexError, EOFError):
        return False
    return True


# ------------------------------------------------------------------ one variant
#: Besides the file, the message of a clean refusal names a key ('field.delay_s'), a
#: line, a column or the header, a byte, or says what is wrong with the whole file
#: (an .npy or CSV file as a unit, a manifest that is no JSON object, too deep).
_NAMED = re.compile(r"'[A-Za-z_]+(?:\.[A-Za-z_]+)?'|line \d+|column|header|byte \d+|"
                    r"\.npy: |\.csv: |JSON object|nested|is a (?:FIFO|folder|character)")


@dataclass
class Outcome:
    """What the three commands did with one variant."""

    codes: dict
    problems: list

    @property
    def handled(self) -> bool:
        return not self.problems


def run_variant(base: Path, work: Path, mutations, capsys=None) -> Outcome:
    """Copy ``base`` to ``work``, apply ``mutations``, run the three commands; report."""
    shutil.rmtree(work, ignore_errors=True)
    cat = work / "cat"
    shutil.copytree(base, cat, symlinks=True)
    applied = [m for m in mutations if _try_apply(cat, m)]
    out_dir = work / "out"
    out_dir.mkdir()
    files = {m.file for m in applied}
    codes, problems = {}, []
    for name, argv in (("check", ["check", str(cat)]),
                       ("features", ["features", str(cat), "--out", str(out_dir / "f.csv")]),
                       ("triage", ["triage", str(cat), "--rules", "--out",
                                   str(out_dir / "t.csv")])):
        code = cli.main(["-q", *argv])
        err = capsys.readouterr().err if capsys is not None else ""
        codes[name] = code
        if code not in (0, 2):
            problems.append(f"{name}: exit {code}: {err.strip()[-300:]}")
        elif code == 2 and capsys is not None:
            if not any(f in err for f in files | {str(cat)}):
                problems.append(f"{name}: exit 2 without naming {sorted(files)}: {err[-300:]}")
            elif not _NAMED.search(err):
                problems.append(f"{name}: exit 2 naming no key, line or column: {err[-300:]}")
    left = sorted(p.name for p in out_dir.iterdir())
    expected = [f for f, c in (("f.csv", codes["features"]), ("t.csv", codes["triage"]))
                if c == 0]
    if [f for f in left if f not in expected]:
        problems.append(f"files left behind by a failed command: {left}")
    if codes["check"] == 0 and 2 in (codes["features"], codes["triage"]):
        problems.append("check passed a catalog that features or triage refused")
    if codes["check"] == 2 and 0 in (codes["features"], codes["triage"]):
        problems.append("features or triage accepted a catalog that check refused")
    return Outcome(codes, problems)


# ------------------------------------------------------------------ the test
#: The two crashes inside the feature code (features/vhf.py, called from
#: features/extract.py; not the reader's) on input that is valid by the spec.
VHF_WINDOW_EMPTY = ("feature code: the VHF search window lies outside the VHF record (a "
                    "pre-trigger or delay putting the trigger beyond the record, which the "
                    "spec allows): vhf_features takes argmax of an empty sequence")
VHF_SMOOTHING_TOO_LONG = ("feature code: the VHF smoothing window is longer than the VHF "
                          "segment (a high VHF rate with a short record, or a delay leaving "
                          "few samples): vhf._moving_average fails to broadcast")

#: Variants that crash inside the feature code on valid input, with the issue: strict
#: xfails, so each turns into a failure (to remove from here) once the code is fixed.
FEATURE_CODE_ISSUES: dict[int, str] = {}

_VARIANTS = variants()


@pytest.fixture(scope="module")
def base(tmp_path_factory):
    return base_catalog(tmp_path_factory.mktemp("fuzz") / "base")


@pytest.fixture(autouse=True)
def strict_mapping(monkeypatch):
    """Only InputError may exit 2 here: a plain ValueError is a bug (exit 1)."""
    monkeypatch.setattr(cli, "LEGACY_VALUEERROR_IS_INPUT", False)


def test_base_catalog_is_clean(base, tmp_path, capsys):
    """The unmutated catalog passes all three commands (else every variant is moot)."""
    outcome = run_variant(base, tmp_path / "w", (), capsys)
    assert outcome.codes == {"check": 0, "features": 0, "triage": 0}, outcome.problems


@pytest.mark.parametrize("index", [
    pytest.param(i, marks=pytest.mark.xfail(strict=True, reason=FEATURE_CODE_ISSUES[i]))
    if i in FEATURE_CODE_ISSUES else i for i in range(len(_VARIANTS))])
def test_variant_gets_a_clean_answer(base, tmp_path, capsys, index):
    """Exit 0 or a clean exit 2 naming file and key; never 1; nothing left behind."""
    outcome = run_variant(base, tmp_path / "w", _VARIANTS[index], capsys)
    assert outcome.handled, (" + ".join(map(str, _VARIANTS[index])), outcome.problems)


def test_vhf_record_ending_before_the_trigger(base, tmp_path, capsys):
    """Reproducer: a VHF pre-trigger of 1 ms on a 20 us record (valid: the trigger may lie
    after the record; the reader notes it) must give features, not a crash."""
    m = Mutation("number", "catalog.json", ("vhf.pretrigger_s", "0.001"))
    outcome = run_variant(base, tmp_path / "w", (m,), capsys)
    assert outcome.handled, outcome.problems


def test_vhf_smoothing_window_longer_than_the_record(base, tmp_path, capsys):
    """Reproducer: VHF at 10 GS/s with 500 samples (50 ns) is within the accepted rates;
    the features must come out, not a broadcast error."""
    m = Mutation("number", "catalog.json", ("vhf.sample_rate_hz", "1e10"))
    outcome = run_variant(base, tmp_path / "w", (m,), capsys)
    assert outcome.handled, outcome.problems
