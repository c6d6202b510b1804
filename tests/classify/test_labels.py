"""Tests of classify.labels: the label store, its current-label rule, import and export."""

from __future__ import annotations

import sqlite3

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.metrics import cohen_kappa_score

from classify.labels import SCHEMA_VERSION, STANDARD_CLASSES, LabelStore
from classify.labels._values import parse_time
from features import InputError

from ._labels_testkit import TRICKY_IDS, tiny_catalog, write_labels

CID = "hollowmere-2031"


@pytest.fixture
def cat(tmp_path):
    return tiny_catalog(tmp_path / "hollowmere-2031")


@pytest.fixture
def store(tmp_path, cat):
    s = LabelStore(tmp_path / "labels.sqlite")
    s.register_catalog(cat)
    yield s
    s.close()


def _label(store, event_id):
    cur = store.current_labels([CID]).set_index("event_id")
    return cur.at[event_id, "label"], cur.at[event_id, "status"]


def test_new_store_has_schema_tables_and_standard_classes(tmp_path):
    """A new store is at the current schema with the four standard classes, in order."""
    s = LabelStore(tmp_path / "new.sqlite")
    assert s.schema_version == SCHEMA_VERSION == 3
    assert s.tables() == ["catalogs", "class_events", "classes", "decisions", "events",
                          "import_batches", "schema_version"]
    assert s.classes() == ["narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud"]
    assert [c for c, _ in STANDARD_CLASSES] == s.classes()
    assert s.class_table()["added_at"].notna().all()
    assert s.check_integrity() == []


def test_open_missing_store_without_create_names_the_file(tmp_path):
    """Reading commands do not create a store: a missing file is a clear error."""
    with pytest.raises(InputError, match="absent.sqlite: no label store here"):
        LabelStore(tmp_path / "absent.sqlite", create=False)
    assert not (tmp_path / "absent.sqlite").exists()


def test_not_a_store_is_refused(tmp_path):
    """A file that is not SQLite, or another SQLite database, is refused with a message."""
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not a database at all" * 100)
    with pytest.raises(ValueError, match="(cannot be opened|cannot be used) as a pulsesort label store"):
        LabelStore(junk)
    other = tmp_path / "other.sqlite"
    con = sqlite3.connect(other)
    con.execute("CREATE TABLE t (x)")  # someone else's database
    con.commit()
    con.close()
    with pytest.raises(ValueError, match="no schema_version table"):
        LabelStore(other)


def test_register_twice_is_a_no_op_and_keeps_events(store, cat):
    """Registering the same catalog again adds nothing; its event ids are all stored."""
    assert store.register_catalog(cat) == CID
    reg = store.catalogs()
    assert reg["catalog_id"].tolist() == [CID]
    assert reg["n_events"].tolist() == [cat.n_events]
    assert reg["content_hash"].tolist() == [cat.content_hash]
    assert store.current_labels()["event_id"].tolist() == list(cat.event_ids)


def test_same_id_different_content_is_refused(store, tmp_path):
    """Another season under a registered catalog_id is refused: seasons must not mix."""
    other = tiny_catalog(tmp_path / "other", season="2032", seed=1)
    assert other.catalog_id == CID and other.content_hash != store.catalogs().at[0,
                                                                               "content_hash"]
    with pytest.raises(ValueError, match="Seasons must not be mixed"):
        store.register_catalog(other)
    labels = write_labels(tmp_path / "l.csv", [["ev000", "recoil", "wren", "", ""]])
    with pytest.raises(ValueError, match="Seasons must not be mixed"):
        store.import_labels(labels, other)
    assert store.decisions().empty


def test_agreeing_analysts_give_the_label(store):
    """Two analysts with the same latest label: labelled, both listed."""
    store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev000", "recoil", analyst="tamsin", origin="review")
    cur = store.current_labels([CID]).set_index("event_id").loc["ev000"]
    assert (cur["label"], cur["status"], cur["n_analysts"]) == ("recoil", "labelled", 2)
    assert cur["analysts"] == ("tamsin", "wren")
    assert not cur["resolved"]


def test_latest_decision_of_each_analyst_counts(store):
    """An analyst who changes their mind: only their latest decision counts."""
    store.record_decision(CID, "ev001", "recoil", analyst="wren", origin="review",
                          decided_at="2031-08-01T10:00:00Z")
    store.record_decision(CID, "ev001", "stepped_leader", analyst="wren", origin="review",
                          decided_at="2031-08-02T10:00:00Z")
    # recorded later, but decided earlier: it does not override
    store.record_decision(CID, "ev001", "narrow_bipolar", analyst="wren", origin="review",
                          decided_at="2031-07-30T10:00:00Z")
    assert _label(store, "ev001") == ("stepped_leader", "labelled")


def test_disagreement_is_a_conflict_until_resolved(store):
    """Analysts who disagree leave the event in conflict; a newer resolution settles it."""
    store.record_decision(CID, "ev002", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev002", "narrow_bipolar", analyst="tamsin", origin="review")
    assert _label(store, "ev002") == (None, "conflict")
    conf = store.conflicts([CID])
    assert conf["event_id"].tolist() == ["ev002"] and conf["n_analysts"].tolist() == [2]
    assert conf["labels"].iat[0] == ("narrow_bipolar", "recoil")
    assert conf["votes"].iat[0] == (("tamsin", "narrow_bipolar"), ("wren", "recoil"))
    votes = store.conflicts([CID], long=True)
    assert votes[["analyst", "label"]].values.tolist() == [["tamsin", "narrow_bipolar"],
                                                           ["wren", "recoil"]]
    store.resolve(CID, "ev002", "recoil", analyst="analyst_a", note="VHF shows a recoil")
    cur = store.current_labels([CID]).set_index("event_id").loc["ev002"]
    assert (cur["label"], cur["status"], cur["resolved"]) == ("recoil", "labelled", True)
    assert cur["resolved_by"] == "analyst_a"
    assert store.conflicts([CID]).empty and store.conflicts([CID], long=True).empty
    assert list(store.conflicts([CID]).columns) == ["catalog_id", "event_id", "n_analysts",
                                                    "labels", "votes", "decided_at"]
    # a newer disagreeing decision reopens it; an agreeing one keeps the label
    store.record_decision(CID, "ev002", "narrow_bipolar", analyst="wren", origin="review")
    assert _label(store, "ev002") == ("narrow_bipolar", "labelled")
    store.record_decision(CID, "ev002", "recoil", analyst="tamsin", origin="review")
    assert _label(store, "ev002") == (None, "conflict")


def test_resolve_refused_unless_in_conflict(store):
    """Resolving an event nobody disagrees on is refused with its status."""
    with pytest.raises(ValueError, match="not in conflict .status: unlabelled"):
        store.resolve(CID, "ev003", "recoil", analyst="analyst_a")
    store.record_decision(CID, "ev003", "recoil", analyst="wren", origin="review")
    with pytest.raises(ValueError, match="not in conflict .status: labelled"):
        store.resolve(CID, "ev003", "recoil", analyst="analyst_a")


def test_retraction_withdraws_only_that_analysts_label(store):
    """A retraction is a new row; the other analyst's label then stands alone."""
    store.record_decision(CID, "ev004", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev004", "stepped_leader", analyst="tamsin", origin="review")
    rid = store.retract(CID, "ev004", analyst="tamsin", note="misread the polarity")
    assert _label(store, "ev004") == ("recoil", "labelled")
    h = store.history("ev004", CID)
    assert h["origin"].tolist() == ["review", "review", "retract"]
    assert h["decision_id"].iat[-1] == rid and h["label"].iat[-1] is None
    assert h["note"].iat[-1] == "misread the polarity"
    store.retract(CID, "ev004", analyst="wren")
    assert _label(store, "ev004") == (None, "unlabelled")
    with pytest.raises(ValueError, match="has no label on event 'ev004'"):
        store.retract(CID, "ev004", analyst="wren")
    assert len(store.decisions()) == 4


def test_retracting_a_resolution_reopens_the_conflict(store):
    """The resolver withdraws a resolution by retracting it."""
    store.record_decision(CID, "ev005", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev005", "narrow_bipolar", analyst="tamsin", origin="review")
    store.resolve(CID, "ev005", "recoil", analyst="analyst_a")
    store.retract(CID, "ev005", analyst="analyst_a")
    assert _label(store, "ev005") == (None, "conflict")


def test_undo_last_retracts_the_latest_standing_decision(store):
    """undo_last withdraws the analyst's last decision, then the one before."""
    store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev001", "recoil", analyst="wren", origin="review")
    store.undo_last("wren")
    assert _label(store, "ev001") == (None, "unlabelled")
    assert _label(store, "ev000") == ("recoil", "labelled")
    store.undo_last("wren", catalog_id=CID)
    assert _label(store, "ev000") == (None, "unlabelled")
    assert store.history("ev000")["note"].iat[-1].startswith("undo of decision #")
    with pytest.raises(ValueError, match="no decision to undo"):
        store.undo_last("wren")


def test_record_decision_keeps_model_provenance(store):
    """A model-accepted decision stores the model version and its confidence."""
    store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="model-accepted",
                          model_version="m-2031.2", confidence=0.93)
    d = store.decisions([CID]).iloc[0]
    assert (d["origin"], d["model_version"]) == ("model-accepted", "m-2031.2")
    assert_allclose(d["confidence"], 0.93, rtol=0, atol=0)


@pytest.mark.parametrize("kwargs, match", [
    ({"label": "ball_lightning"}, "unknown label 'ball_lightning'"),
    ({"event_id": "nope"}, "'nope' is not an event of catalog"),
    ({"catalog_id": "elsewhere-2030"}, "catalog 'elsewhere-2030' is not registered"),
    ({"origin": "import"}, "origin must be one of review, rule, model-accepted"),
    ({"origin": "model-accepted"}, "needs the model_version"),
    ({"confidence": 1.5}, r"confidence must be a number in \[0, 1\]"),
    ({"confidence": float("nan")}, r"confidence must be a number in \[0, 1\]"),
    ({"analyst": ""}, "analyst must not be empty"),
    ({"analyst": " wren"}, "must not start or end with spaces"),
    ({"analyst": "wren\nDROP"}, "control characters"),
    ({"decided_at": "last tuesday"}, "expected an ISO-8601 time"),
])
def test_record_decision_refuses_bad_values(store, kwargs, match):
    """Each bad value is refused with a message naming it; nothing is written."""
    args = {"catalog_id": CID, "event_id": "ev000", "label": "recoil", "analyst": "wren",
            "origin": "review"} | kwargs
    with pytest.raises(ValueError, match=match):
        store.record_decision(args.pop("catalog_id"), args.pop("event_id"),
                              args.pop("label"), **args)
    assert store.decisions().empty


def test_identical_decision_is_recorded_once(store):
    """Re-sending the same decision (same time) returns the stored id and adds nothing."""
    a = store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review",
                              decided_at="2031-08-01T10:00:00Z")
    b = store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review",
                              decided_at="2031-08-01T10:00:00+00:00")
    assert a == b and len(store.decisions()) == 1
    with pytest.raises(ValueError, match="already has another decision"):
        store.record_decision(CID, "ev000", "stepped_leader", analyst="wren",
                              origin="review", decided_at="2031-08-01T10:00:00Z")


def test_decisions_cannot_be_updated_or_deleted(store):
    """The append-only triggers stop an UPDATE or DELETE even from outside the API."""
    store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review")
    con = sqlite3.connect(store.path)
    with pytest.raises(sqlite3.IntegrityError, match="append-only"):
        con.execute("UPDATE decisions SET label = 'stepped_leader'")
    with pytest.raises(sqlite3.IntegrityError, match="append-only"):
        con.execute("DELETE FROM decisions")
    con.close()
    assert store.decisions()["label"].tolist() == ["recoil"]


def test_import_keeps_tricky_ids_and_is_idempotent(store, cat, tmp_path):
    """Ids like NA and 007 survive; importing the same file twice adds nothing."""
    rows = [[e, "recoil", "wren", "", f"note for {e}"] for e in TRICKY_IDS]
    rows.append(["ev000", "narrow_bipolar", "", "2031-08-01T09:00:00Z", ""])
    f = write_labels(tmp_path / "wren.csv", rows)
    rep = store.import_labels(f, cat, analyst="tamsin")
    assert (rep.n_rows, rep.n_added, rep.n_present) == (7, 7, 0)
    assert rep.batch_id is not None and rep.source_sha256.startswith("sha256:")
    cur = store.current_labels([CID]).set_index("event_id")
    assert cur.loc[TRICKY_IDS, "label"].tolist() == ["recoil"] * len(TRICKY_IDS)
    assert cur.at["ev000", "analysts"] == ("tamsin",)  # --analyst fills the empty cell
    again = store.import_labels(f, cat, analyst="tamsin")
    assert (again.n_added, again.n_present, again.batch_id) == (0, 7, None)
    dec = store.decisions([CID])
    assert len(dec) == 7 and len(store.import_batches()) == 1
    assert dec["source_file"].map(lambda p: p.endswith("wren.csv")).all()


def test_import_lists_every_bad_row_and_changes_nothing(store, cat, tmp_path):
    """Unknown id, unknown label, bad time, duplicate, no analyst: all listed; store unchanged."""
    store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review")
    before = store.decisions()
    f = write_labels(tmp_path / "bad.csv", [
        ["ev001", "recoil", "wren", "", ""],                      # line 2: fine
        ["ev999", "recoil", "wren", "", ""],                      # line 3: unknown event
        ["ev002", "ball_lightning", "wren", "", ""],              # line 4: unknown label
        ["ev003", "recoil", "wren", "2031-13-45T99:00:00Z", ""],  # line 5: bad time
        ["ev001", "stepped_leader", "wren", "", ""],              # line 6: duplicate of 2
        ["ev004", "recoil", "", "", ""],                          # line 7: no analyst
        ["ev005", "recoil", "wren", "yesterday", ""],             # line 8: bad time
    ])
    with pytest.raises(ValueError) as err:
        store.import_labels(f, cat)
    msg = str(err.value)
    assert "6 bad row(s); nothing was imported" in msg
    for line, what in [(3, "unknown event_id 'ev999'"), (4, "unknown label 'ball_lightning'"),
                       (5, "decided_at: not a valid time"), (6, "duplicate of line 2"),
                       (7, "no analyst"), (8, "decided_at: expected an ISO-8601 time")]:
        assert f"bad.csv:{line}: {what}" in msg
    assert "bad.csv:2:" not in msg
    pd.testing.assert_frame_equal(store.decisions(), before)
    assert store.import_batches().empty


def test_import_refuses_unknown_columns_and_missing_required(store, cat, tmp_path):
    """A misspelt column is refused rather than silently ignored."""
    f = write_labels(tmp_path / "typo.csv", [["ev000", "recoil", "wren"]],
                     header=("event_id", "label", "analsyt"))
    with pytest.raises(ValueError, match="unknown column 'analsyt'"):
        store.import_labels(f, cat)
    f = write_labels(tmp_path / "nolabel.csv", [["ev000"]], header=("event_id",))
    with pytest.raises(ValueError, match="required column 'label' is missing"):
        store.import_labels(f, cat, analyst="wren")
    (tmp_path / "empty.csv").write_text("")
    with pytest.raises(ValueError, match="the file is empty"):
        store.import_labels(tmp_path / "empty.csv", cat, analyst="wren")
    with pytest.raises(InputError, match="absent.csv: no such labels file"):
        store.import_labels(tmp_path / "absent.csv", cat, analyst="wren")


def test_import_accepts_a_spreadsheet_export(store, cat, tmp_path):
    """A UTF-8 byte-order mark and CRLF line ends (spreadsheet CSV) import fine."""
    f = tmp_path / "sheet.csv"
    f.write_bytes(b"\xef\xbb\xbfevent_id,label,analyst\r\nev000,recoil,wren\r\n"
                  b"007,stepped_leader,wren\r\n")
    assert store.import_labels(f, cat).n_added == 2
    assert store.decisions()["event_id"].tolist() == ["ev000", "007"]


def test_history_file_may_hold_a_label_and_its_retraction(store, cat, tmp_path):
    """Same event and analyst twice is fine with two times; a retraction has no label."""
    f = write_labels(tmp_path / "h.csv", [
        ["ev000", "recoil", "wren", "2031-08-01T10:00:00Z", "", "import"],
        ["ev000", "", "wren", "2031-08-02T10:00:00Z", "second look", "retract"],
        ["ev001", "recoil", "wren", "", "", "retract"]],
        header=("event_id", "label", "analyst", "decided_at", "note", "origin"))
    with pytest.raises(ValueError, match="h.csv:4: a retraction .* has an empty label"):
        store.import_labels(f, cat)
    f = write_labels(tmp_path / "h2.csv", [
        ["ev000", "recoil", "wren", "2031-08-01T10:00:00Z", "", "import"],
        ["ev000", "", "wren", "2031-08-02T10:00:00Z", "second look", "retract"]],
        header=("event_id", "label", "analyst", "decided_at", "note", "origin"))
    assert store.import_labels(f, cat).n_added == 2
    assert _label(store, "ev000") == (None, "unlabelled")


def test_import_refuses_rows_of_another_catalog(store, cat, tmp_path):
    """An exported file of another catalog cannot be imported into this one."""
    f = write_labels(tmp_path / "x.csv", [["hollowmere-2030", "ev000", "recoil", "wren"]],
                     header=("catalog_id", "event_id", "label", "analyst"))
    with pytest.raises(ValueError, match="row is for catalog 'hollowmere-2030'"):
        store.import_labels(f, cat)


def _state(store):
    cur = store.current_labels()
    return cur[["catalog_id", "event_id", "label", "status", "resolved"]]


def _busy_store(store):
    store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review",
                          note='says "recoil", with, commas\nand a second line')
    store.record_decision(CID, "ev000", "recoil", analyst="tamsin", origin="review")
    store.record_decision(CID, "ev001", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev001", "stepped_leader", analyst="tamsin", origin="review")
    store.record_decision(CID, "ev002", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev002", "narrow_bipolar", analyst="tamsin", origin="review")
    store.resolve(CID, "ev002", "narrow_bipolar", analyst="analyst_a")
    store.record_decision(CID, "NA", "energetic_in_cloud", analyst="wren",
                          origin="model-accepted", model_version="m1", confidence=0.8)
    store.record_decision(CID, "007", "recoil", analyst="wren", origin="review")
    store.retract(CID, "007", analyst="wren")


@pytest.mark.parametrize("history", [False, True])
def test_export_round_trips_through_import(store, cat, tmp_path, history):
    """Export then import into a fresh store gives the same current labels."""
    _busy_store(store)
    out = tmp_path / "export.csv"
    n = store.export_labels(out, history=history)
    assert n == (10 if history else 4)
    back = LabelStore(tmp_path / "fresh.sqlite")
    rep = back.import_labels(out, cat)
    assert rep.n_added == n
    if history:
        pd.testing.assert_frame_equal(_state(back), _state(store))
        cols = ["event_id", "label", "analyst", "decided_at", "origin", "note",
                "model_version", "confidence"]
        pd.testing.assert_frame_equal(back.decisions()[cols], store.decisions()[cols])
    else:
        lab = _state(store)
        lab = lab[lab["status"] == "labelled"].drop(columns="resolved")
        got = _state(back)
        got = got[got["status"] == "labelled"].drop(columns="resolved")
        pd.testing.assert_frame_equal(got.reset_index(drop=True), lab.reset_index(drop=True))
    # and importing the export into the store it came from adds nothing
    assert store.import_labels(out, cat).n_added == 0
    back.close()


def test_export_needs_a_catalog_when_the_store_has_several(store, tmp_path):
    """With two catalogs registered, export asks which one."""
    store.register_catalog(tiny_catalog(tmp_path / "c2", catalog_id="hollowmere-2032"))
    with pytest.raises(ValueError, match="holds 2 catalogs"):
        store.export_labels(tmp_path / "x.csv")
    assert store.export_labels(tmp_path / "x.csv", "hollowmere-2032") == 0
    assert (tmp_path / "x.csv").read_text().startswith("catalog_id,event_id,label,analyst")


def test_kappa_matches_the_textbook_worked_example(store, tmp_path):
    """2x2 table 20/5/10/15: p_o = 0.7, p_e = 0.5, kappa = 0.4."""
    # Cohen's kappa worked example (Wikipedia "Cohen's kappa", 50 items; from memory):
    # both yes 20, a yes/b no 5, a no/b yes 10, both no 15.
    s = LabelStore(tmp_path / "kappa.sqlite")
    ids = [f"k{i:02d}" for i in range(50)]
    cat50 = tiny_catalog(tmp_path / "k50", ids=ids, catalog_id="kappa-2031")
    s.register_catalog(cat50)
    pairs = ([("recoil", "recoil")] * 20 + [("recoil", "narrow_bipolar")] * 5
             + [("narrow_bipolar", "recoil")] * 10 + [("narrow_bipolar", "narrow_bipolar")] * 15)
    for e, (a, b) in zip(ids, pairs, strict=True):
        s.record_decision("kappa-2031", e, a, analyst="analyst_a", origin="review")
        s.record_decision("kappa-2031", e, b, analyst="analyst_b", origin="review")
    ag = s.agreement().iloc[0]
    assert (ag["analyst_1"], ag["analyst_2"], ag["n_common"], ag["n_agree"]) == (
        "analyst_a", "analyst_b", 50, 35)
    assert_allclose(ag["agreement"], 0.7, rtol=1e-12)
    assert_allclose(ag["kappa"], 0.4, rtol=1e-12)
    # and the reference implementation agrees on the same vectors
    a, b = zip(*pairs, strict=True)
    assert_allclose(ag["kappa"], cohen_kappa_score(a, b), rtol=1e-12)
    s.close()


def test_kappa_is_nan_without_common_events(store):
    """Two analysts who never labelled the same event: n_common 0, kappa NaN."""
    store.record_decision(CID, "ev000", "recoil", analyst="wren", origin="review")
    store.record_decision(CID, "ev001", "recoil", analyst="tamsin", origin="review")
    ag = store.agreement()
    assert ag["n_common"].tolist() == [0] and np.isnan(ag["kappa"].iat[0])


def test_stats_counts_statuses_classes_and_analysts(store):
    """stats() counts labelled/conflict/unlabelled, per class and per analyst."""
    _busy_store(store)
    st = store.stats()
    row = st["catalogs"].loc[CID]
    assert (row["n_events"], row["labelled"], row["conflict"], row["unlabelled"]) == (
        12, 3, 1, 8)
    assert (row["n_decisions"], row["n_analysts"]) == (10, 3)
    cls = st["classes"].loc[CID]
    assert (cls["recoil"], cls["narrow_bipolar"], cls["energetic_in_cloud"],
            cls["total"]) == (1, 1, 1, 3)
    wren = st["analysts"].loc[(CID, "wren")]
    assert (wren["recoil"], wren["energetic_in_cloud"], wren["total"],
            wren["n_decisions"], wren["n_retractions"]) == (3, 1, 4, 6, 1)
    assert st["analysts"].loc[(CID, "analyst_a"), "n_resolutions"] == 1


def test_current_labels_status_filter(store):
    """status= keeps only the asked statuses, and refuses unknown ones."""
    _busy_store(store)
    lab = store.current_labels(status="labelled")
    assert set(lab["event_id"]) == {"ev000", "ev002", "NA"}
    assert len(store.current_labels(status=["conflict", "unlabelled"])) == 9
    with pytest.raises(ValueError, match="status must be among"):
        store.current_labels(status="maybe")


def test_add_class(store):
    """A group can add a class; duplicates and bad names are refused."""
    store.add_class("other", "anything that fits no standard class")
    assert store.classes()[-1] == "other"
    with pytest.raises(ValueError, match="already exists"):
        store.add_class("other", "again")
    with pytest.raises(ValueError, match="1-40 characters of a-z"):
        store.add_class("Other Things", "bad name")
    with pytest.raises(ValueError, match="give a --description"):
        store.add_class("blank", "  ")
    store.record_decision(CID, "ev000", "other", analyst="wren", origin="review")
    assert _label(store, "ev000") == ("other", "labelled")


@pytest.mark.parametrize("text, expected", [
    ("2031-07-14T21:03:55Z", "2031-07-14T21:03:55.000000Z"),
    ("2031-07-14T21:03:55.123456789Z", "2031-07-14T21:03:55.123456Z"),
    ("2031-07-14 21:03:55.5", "2031-07-14T21:03:55.500000Z"),
    ("2031-07-14T23:03:55+02:00", "2031-07-14T21:03:55.000000Z"),
    ("2031-07-14T16:33:55-0430", "2031-07-14T21:03:55.000000Z"),
    ("2031-07-14T21:03", "2031-07-14T21:03:00.000000Z"),
    ("2031-07-14", "2031-07-14T00:00:00.000000Z"),
])
def test_parse_time_normalises_to_utc(text, expected):
    """ISO-8601 forms become fixed-width UTC with microseconds (naive means UTC)."""
    assert parse_time(text) == expected


@pytest.mark.parametrize("text", ["14/07/2031", "2031-07-14T25:00:00Z", "2031-02-30",
                                  "2031-07-14T21:03:55ZZ", "", "tomorrow"])
def test_parse_time_refuses_malformed(text):
    """Anything that is not an ISO-8601 time is refused."""
    with pytest.raises(ValueError, match="ISO-8601|not a valid time"):
        parse_time(text)
