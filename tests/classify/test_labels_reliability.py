"""Reliability of the label store with the real SQLite: concurrency, crashes, hostile text,
schema upgrades. No mocks: real processes, a real SIGKILL, real files."""

from __future__ import annotations

import multiprocessing as mp
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest

from classify.labels import SCHEMA_VERSION, LabelStore
from classify.labels._schema import SCHEMA_V1
from classify.labels._writes import PAUSE_ENV
from features import InputError

from ._labels_testkit import tiny_catalog, write_labels

CID = "hollowmere-2031"
N_PROC, N_EACH = 8, 500


def _write_many(store_path, k, ids, barrier, errors):
    """One writer process: N_EACH decisions, each its own transaction."""
    try:
        store = LabelStore(store_path)
        barrier.wait(timeout=60)
        for i, e in enumerate(ids):
            label = ("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud")[
                (i + k) % 4]
            store.record_decision(CID, e, label, analyst=f"analyst_{k}", origin="review",
                                  note=f"writer {k} row {i}")
        store.close()
    except BaseException as exc:  # report to the parent, which fails the test
        errors.put(f"writer {k}: {type(exc).__name__}: {exc}")
        raise


def test_eight_processes_writing_at_once_lose_nothing(tmp_path):
    """8 processes x 500 decisions at the same time: all 4,000 stored, none twice."""
    ids = [f"ev{i:04d}" for i in range(N_EACH)]
    cat = tiny_catalog(tmp_path / "cat", ids=ids)
    path = tmp_path / "labels.sqlite"
    with LabelStore(path) as s:
        s.register_catalog(cat)
    ctx = mp.get_context("fork" if "fork" in mp.get_all_start_methods() else "spawn")
    barrier, errors = ctx.Barrier(N_PROC), ctx.Queue()
    procs = [ctx.Process(target=_write_many, args=(path, k, ids, barrier, errors))
             for k in range(N_PROC)]
    for p in procs:
        p.start()
    for p in procs:
        p.join(timeout=120)
    problems = [errors.get() for _ in range(errors.qsize())] if not errors.empty() else []
    assert problems == []
    assert [p.exitcode for p in procs] == [0] * N_PROC
    with LabelStore(path) as s:
        dec = s.decisions()
        assert len(dec) == N_PROC * N_EACH
        assert dec["decision_id"].is_unique
        assert not dec.duplicated(["analyst", "event_id"]).any()
        assert dec.groupby("analyst").size().tolist() == [N_EACH] * N_PROC
        assert set(dec["note"]) == {f"writer {k} row {i}" for k in range(N_PROC)
                                    for i in range(N_EACH)}
        assert s.check_integrity() == []


def test_killed_import_leaves_the_store_as_before(tmp_path):
    """SIGKILL while an import transaction is open: the store is exactly as before."""
    cat = tiny_catalog(tmp_path / "cat", ids=[f"ev{i:04d}" for i in range(200)])
    path = tmp_path / "labels.sqlite"
    with LabelStore(path) as s:
        s.register_catalog(cat)
        s.record_decision(CID, "ev0000", "recoil", analyst="wren", origin="review")
        before = s.decisions()
    labels = write_labels(tmp_path / "tamsin.csv",
                          [[f"ev{i:04d}", "recoil", "tamsin", "", ""] for i in range(200)])
    marker = tmp_path / "paused"
    env = dict(os.environ, **{PAUSE_ENV: f"120:{marker}"})
    proc = subprocess.Popen(
        [sys.executable, "-m", "classify.cli", "labels", "import", str(labels),
         "--catalog", str(cat.path), "--store", str(path)],
        env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    try:
        deadline = time.monotonic() + 60
        while not marker.exists():
            assert proc.poll() is None, proc.communicate()
            assert time.monotonic() < deadline, "the import never reached its pause"
            time.sleep(0.05)
        # 120 rows are inserted but not committed: a reader does not see them
        with LabelStore(path, create=False) as s:
            pd.testing.assert_frame_equal(s.decisions(), before)
    finally:
        proc.send_signal(signal.SIGKILL)
        proc.communicate(timeout=30)
    assert proc.returncode == -signal.SIGKILL
    with LabelStore(path, create=False) as s:
        pd.testing.assert_frame_equal(s.decisions(), before)
        assert s.import_batches().empty
        assert s.check_integrity() == []
        # the lock died with the process: the same import now goes through whole
        rep = s.import_labels(labels, cat)
        assert (rep.n_added, len(s.decisions())) == (200, 201)


HOSTILE = [
    "O'Brien \"the quoter\"",
    "'; DROP TABLE decisions;--",
    "Robert'); DELETE FROM decisions WHERE ('1'='1",
    "line one\nline two\r\nline three",
    "x" * 100_000,
    "tab\tand unicode: \u00e9\u00e8 \u4e2d\u6587 \U0001f329",
    "%s %d {0} ${HOME} \\N \\x00-as-text",
]


@pytest.mark.parametrize("text", HOSTILE, ids=range(len(HOSTILE)))
def test_hostile_note_is_stored_verbatim(tmp_path, text):
    """Quotes, SQL fragments, newlines, 100 kB: a note round-trips exactly, nothing runs."""
    cat = tiny_catalog(tmp_path / "cat")
    with LabelStore(tmp_path / "labels.sqlite") as s:
        s.register_catalog(cat)
        s.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review", note=text)
        f = write_labels(tmp_path / "in.csv", [["ev001", "recoil", "tamsin", "", text]])
        s.import_labels(f, cat)
        s.export_labels(tmp_path / "out.csv", history=True)
        notes = s.decisions()["note"].tolist()
        assert notes == [text, text]
        assert s.tables() == ["catalogs", "class_events", "classes", "decisions", "events",
                              "import_batches", "schema_version"]
        assert s.check_integrity() == []
    back = LabelStore(tmp_path / "back.sqlite")
    back.import_labels(tmp_path / "out.csv", cat)
    assert back.decisions()["note"].tolist() == [text, text]
    back.close()


@pytest.mark.parametrize("name", [n for n in HOSTILE if "\n" not in n and "\t" not in n],
                         ids=range(5))
def test_hostile_analyst_name_round_trips(tmp_path, name):
    """Analyst names with quotes or SQL are stored as written and found again."""
    cat = tiny_catalog(tmp_path / "cat")
    with LabelStore(tmp_path / "labels.sqlite") as s:
        s.register_catalog(cat)
        s.record_decision(CID, "e'; DROP TABLE decisions;--", "recoil", analyst=name,
                          origin="review")
        s.retract(CID, "e'; DROP TABLE decisions;--", analyst=name, note=name)
        h = s.history("e'; DROP TABLE decisions;--", CID)
        assert h["analyst"].tolist() == [name, name]
        assert s.stats()["analysts"].index.get_level_values("analyst").tolist() == [name]
        assert s.check_integrity() == [] and "decisions" in s.tables()


def test_control_characters_are_refused_clearly(tmp_path):
    """A NUL in a note or a newline in a name is refused with a message, not stored."""
    cat = tiny_catalog(tmp_path / "cat")
    with LabelStore(tmp_path / "labels.sqlite") as s:
        s.register_catalog(cat)
        with pytest.raises(ValueError, match="note must not contain control characters"):
            s.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review",
                              note="before\x00after")
        with pytest.raises(ValueError, match="analyst must not contain control characters"):
            s.record_decision(CID, "ev000", "recoil", analyst="wren\nDROP", origin="review")
        with pytest.raises(ValueError, match="not valid Unicode"):
            s.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review",
                              note="lone surrogate \udc80")
        assert s.decisions().empty


def test_non_utf8_bytes_in_a_labels_file_are_refused_by_line(tmp_path):
    """Latin-1 bytes in two rows: both lines named, nothing imported."""
    cat = tiny_catalog(tmp_path / "cat")
    f = tmp_path / "latin1.csv"
    f.write_bytes(b"event_id,label,analyst,note\n"
                  b"ev000,recoil,wren,fine\n"
                  b"ev001,recoil,wren,caf\xe9\n"
                  b"ev002,recoil,J\xf6rg,\n")
    with LabelStore(tmp_path / "labels.sqlite") as s:
        with pytest.raises(ValueError) as err:
            s.import_labels(f, cat)
        msg = str(err.value)
        assert "latin1.csv:3: not UTF-8 text" in msg and "latin1.csv:4: not UTF-8 text" in msg
        assert "latin1.csv:2" not in msg
        assert s.decisions().empty and s.catalogs().empty


def test_quoted_multiline_note_reports_true_line_numbers(tmp_path):
    """A note spanning lines shifts later rows; errors still name their real line."""
    cat = tiny_catalog(tmp_path / "cat")
    f = tmp_path / "multi.csv"
    f.write_text('event_id,label,analyst,note\nev000,recoil,wren,"one\ntwo\nthree"\n'
                 "ev999,recoil,wren,\n", encoding="utf-8")
    with LabelStore(tmp_path / "labels.sqlite") as s:
        with pytest.raises(ValueError, match=r"multi.csv:5: unknown event_id 'ev999'"):
            s.import_labels(f, cat)


def _write_v1_store(path, cat, content_hash=None):
    """A store as schema v1 wrote it: no model_version/confidence, no classes.added_at."""
    con = sqlite3.connect(path, isolation_level=None)
    con.executescript("PRAGMA journal_mode = WAL;\nBEGIN;\n" + SCHEMA_V1 + "\nCOMMIT;")
    con.execute("INSERT INTO schema_version VALUES (1, '2031-06-01T00:00:00.000000Z')")
    con.executemany("INSERT INTO classes VALUES (?, ?)",
                    [("narrow_bipolar", "NBE"), ("stepped_leader", "SL"), ("recoil", "K"),
                     ("energetic_in_cloud", "EIP"), ("other", "anything else")])
    con.execute("INSERT INTO catalogs VALUES (?, ?, ?, ?, ?, ?, ?)",
                (CID, "hollowmere", "2031", str(cat.path), content_hash or cat.content_hash,
                 cat.n_events, "2031-06-01T00:00:00.000000Z"))
    con.executemany("INSERT INTO events VALUES (?, ?, ?)",
                    [(CID, e, i) for i, e in enumerate(cat.event_ids)])
    con.executemany(
        "INSERT INTO decisions (catalog_id, event_id, label, analyst, decided_at, origin,"
        " note, batch_id, recorded_at) VALUES (?, ?, ?, ?, ?, ?, ?, NULL, ?)",
        [(CID, "ev000", "recoil", "wren", "2031-06-02T10:00:00.000000Z", "review", "old",
          "2031-06-02T10:00:01.000000Z"),
         (CID, "ev001", "other", "tamsin", "2031-06-02T11:00:00.000000Z", "review", None,
          "2031-06-02T11:00:01.000000Z")])
    con.close()


def test_v1_store_is_upgraded_in_place_with_a_backup(tmp_path):
    """Opening a v1 store backs it up to <store>.v1.bak, then upgrades it to the current schema."""
    cat = tiny_catalog(tmp_path / "cat")
    path = tmp_path / "labels.sqlite"
    _write_v1_store(path, cat)
    with LabelStore(path) as s:
        assert s.schema_version == SCHEMA_VERSION == 3
        dec = s.decisions()
        assert dec["label"].tolist() == ["recoil", "other"]
        assert dec["note"].tolist() == ["old", None]
        assert dec["model_version"].isna().all() and dec["confidence"].isna().all()
        assert s.class_table()["added_at"].isna().all()  # unknown before v2
        s.record_decision(CID, "ev002", "recoil", analyst="wren", origin="model-accepted",
                          model_version="m1", confidence=0.75)
        s.add_class("graupel_noise", "instrument noise from graupel impacts")
        assert s.class_table()["added_at"].iat[-1] is not None
        assert s.check_integrity() == []
    backup = Path(f"{path}.v1.bak")
    assert backup.is_file()
    con = sqlite3.connect(backup)
    assert con.execute("SELECT MAX(version) FROM schema_version").fetchone() == (1,)
    assert con.execute("SELECT COUNT(*) FROM decisions").fetchone() == (2,)
    cols = [r[1] for r in con.execute("PRAGMA table_info(decisions)")]
    assert "model_version" not in cols
    con.close()
    # opening again changes nothing and makes no second backup
    with LabelStore(path) as s:
        assert s.schema_version == SCHEMA_VERSION == 3 and len(s.decisions()) == 3
    assert sorted(p.name for p in tmp_path.glob("labels.sqlite.v*")) == ["labels.sqlite.v1.bak"]


def test_catalog_registered_under_the_earlier_hash_still_matches(tmp_path):
    """Stores registered catalogs by a hash of manifest + events only: both hashes match.

    The registered row is immutable (a trigger refuses to change its hash), so
    the store accepts the catalog's legacy hash as well as the new one that also
    samples the waveform files; another season under the same id is still refused.
    """
    from classify.cards import render_data_card

    cat = tiny_catalog(tmp_path / "cat")
    assert cat.legacy_content_hash and cat.legacy_content_hash != cat.content_hash
    path = tmp_path / "labels.sqlite"
    _write_v1_store(path, cat, content_hash=cat.legacy_content_hash)
    labels = write_labels(tmp_path / "l.csv", [["ev003", "recoil", "wren", "", ""]])
    with LabelStore(path) as s:
        assert s.register_catalog(cat) == CID
        assert s.import_labels(labels, cat).n_added == 1
        assert "ev003" in set(s.current_labels([CID], status="labelled")["event_id"])
        assert "hollowmere" in render_data_card(cat, s)
        other = tiny_catalog(tmp_path / "other", season="2032", seed=1)
        with pytest.raises(InputError, match="Seasons must not be mixed"):
            s.register_catalog(other)


def test_store_from_a_newer_version_is_refused(tmp_path):
    """A store written by a future schema is not touched."""
    path = tmp_path / "labels.sqlite"
    LabelStore(path).close()
    con = sqlite3.connect(path)
    con.execute("INSERT INTO schema_version VALUES (?, '2032-01-01T00:00:00.000000Z')",
                (SCHEMA_VERSION + 1,))
    con.commit()
    con.close()
    with pytest.raises(ValueError, match=f"written by a newer pulsesort .schema "
                                         f"v{SCHEMA_VERSION + 1}"):
        LabelStore(path)
