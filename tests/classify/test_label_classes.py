"""A store's own classes: add, rename, hide, show, merge, with history; the v2 -> v3 upgrade.

The catalog and the labels are invented (station hollowmere, invented analysts), for
self-consistency; the store is a real SQLite file.
"""

from __future__ import annotations

import logging
import sqlite3
from pathlib import Path

import numpy as np
import pytest
from sklearn.metrics import cohen_kappa_score

from classify.labels import SCHEMA_VERSION, LabelStore
from features import InputError

from ._labels_testkit import tiny_catalog, write_labels

CID = "hollowmere-2031"
DATA = Path(__file__).parent / "data"
STANDARD = ["narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud"]


@pytest.fixture
def store(tmp_path):
    """A store with the tiny catalog registered and wren's and tamsin's labels."""
    cat = tiny_catalog(tmp_path / "cat")
    s = LabelStore(tmp_path / "labels.sqlite")
    s.register_catalog(cat)
    for eid, label in [("ev000", "recoil"), ("ev001", "recoil"), ("ev002", "stepped_leader"),
                       ("ev003", "narrow_bipolar")]:
        s.record_decision(CID, eid, label, analyst="wren", origin="review",
                          decided_at="2031-07-20T10:00:00Z")
    yield s
    s.close()


def _current(s):
    return s.current_labels([CID]).set_index("event_id")


def test_add_class_is_visible_and_recorded(store):
    """add_class appends a visible class at the end of the order, with an 'add' event."""
    store.add_class("return_stroke", "first or subsequent return stroke", analyst="wren",
                    note="the group sorts CG strokes too")
    assert store.classes() == [*STANDARD, "return_stroke"]
    h = store.class_history()
    assert h[["action", "name", "analyst"]].values.tolist() == [["add", "return_stroke",
                                                                 "wren"]]
    assert h["note"].iat[0] == "the group sorts CG strokes too"
    t = store.class_table().set_index("name")
    assert t.loc["return_stroke", "status"] == "visible"
    assert t.loc["return_stroke", "current"] == "return_stroke"


def test_rename_keeps_decisions_and_maps_current_labels(store):
    """After a rename, decisions keep 'recoil'; current labels say 'k_change' (and as decided)."""
    store.rename_class("recoil", "k_change", analyst="tamsin", note="the group's own term")
    assert store.classes() == ["narrow_bipolar", "stepped_leader", "k_change",
                               "energetic_in_cloud"]  # the renamed class keeps its place
    assert set(store.decisions()["label"]) == {"recoil", "stepped_leader", "narrow_bipolar"}
    cur = _current(store)
    assert cur.loc["ev000", "label"] == "k_change"
    assert cur.loc["ev000", "label_as_decided"] == "recoil"
    assert cur.loc["ev002", "label"] == cur.loc["ev002", "label_as_decided"] == "stepped_leader"
    t = store.class_table().set_index("name")
    assert (t.loc["recoil", "status"], t.loc["recoil", "current"]) == ("renamed", "k_change")
    assert t.loc["k_change", "description"] == t.loc["recoil", "description"]
    assert "renamed to k_change" in t.loc["recoil", "history"]
    assert "by tamsin" in t.loc["k_change", "history"]
    h = store.class_history().iloc[-1]
    assert (h["action"], h["name"], h["target"], h["analyst"], h["note"]) == (
        "rename", "recoil", "k_change", "tamsin", "the group's own term")


def test_old_and_new_name_agree_after_a_rename(store):
    """One analyst's 'recoil' and another's later 'k_change' are the same class: no conflict."""
    store.rename_class("recoil", "k_change", analyst="tamsin")
    store.record_decision(CID, "ev000", "k_change", analyst="tamsin", origin="review",
                          decided_at="2031-07-21T10:00:00Z")
    cur = _current(store).loc["ev000"]
    assert (cur["status"], cur["label"], cur["n_analysts"]) == ("labelled", "k_change", 2)
    assert cur["label_as_decided"] == "k_change"  # the newest agreeing decision's
    assert store.conflicts([CID]).empty
    ag = store.agreement([CID]).iloc[0]
    assert (ag["n_common"], ag["n_agree"]) == (1, 1)


def test_a_retired_name_is_refused_for_new_decisions(store):
    """A live decision with a renamed-away name is refused, naming its successor."""
    store.rename_class("recoil", "k_change", analyst="tamsin")
    with pytest.raises(InputError, match="label 'recoil' was renamed to 'k_change'; use "
                                         "'k_change'"):
        store.record_decision(CID, "ev005", "recoil", analyst="wren", origin="review")
    with pytest.raises(InputError, match="unknown label 'hail'"):
        store.record_decision(CID, "ev005", "hail", analyst="wren", origin="review")


def test_an_old_labels_file_imports_and_counts_for_the_successor(store, tmp_path, caplog):
    """A labels file written before a rename imports; its rows count for the new name."""
    store.rename_class("recoil", "k_change", analyst="tamsin")
    f = write_labels(tmp_path / "old.csv", [["ev004", "recoil", "corvin", "", ""]])
    with caplog.at_level(logging.WARNING, logger="pulsesort"):
        rep = store.import_labels(f, tiny_catalog(tmp_path / "cat"))
    assert rep.n_added == 1
    assert "1 row(s) use retired class names" in caplog.text
    assert "recoil -> k_change" in caplog.text
    cur = _current(store).loc["ev004"]
    assert (cur["label"], cur["label_as_decided"]) == ("k_change", "recoil")


def test_merge_maps_sources_and_keeps_history(store):
    """Merging stepped_leader and recoil into a new class maps both; the names retire."""
    store.add_class("leader_step", "any leader step pulse", analyst="wren")
    store.merge_classes(["stepped_leader", "recoil"], "leader_step", analyst="wren",
                        note="too few of each")
    assert store.classes() == ["narrow_bipolar", "energetic_in_cloud", "leader_step"]
    cur = _current(store)
    assert cur.loc[["ev000", "ev001", "ev002"], "label"].tolist() == ["leader_step"] * 3
    assert cur.loc[["ev000", "ev002"], "label_as_decided"].tolist() == ["recoil",
                                                                      "stepped_leader"]
    t = store.class_table().set_index("name")
    assert t.loc["recoil", "status"] == t.loc["stepped_leader", "status"] == "merged"
    assert "stepped_leader merged in" in t.loc["leader_step", "history"]
    st = store.stats([CID])["classes"].loc[CID]
    assert st["leader_step"] == 3 and "recoil" not in st.index
    # the merged names map through a later rename of the target too
    store.rename_class("leader_step", "leader", analyst="wren")
    assert store.class_map()["recoil"] == "leader"
    assert _current(store).loc["ev000", "label"] == "leader"


def test_merge_turns_a_conflict_into_agreement(store):
    """wren says recoil, tamsin stepped_leader: a conflict, until both classes are merged."""
    store.record_decision(CID, "ev001", "stepped_leader", analyst="tamsin", origin="review",
                          decided_at="2031-07-21T10:00:00Z")
    assert _current(store).loc["ev001", "status"] == "conflict"
    store.merge_classes(["recoil"], "stepped_leader", analyst="corvin")
    cur = _current(store).loc["ev001"]
    assert (cur["status"], cur["label"]) == ("labelled", "stepped_leader")


def test_agreement_kappa_uses_the_mapped_labels(store):
    """Cohen's kappa after a merge is sklearn's kappa on the mapped labels."""
    for eid, label in [("ev000", "stepped_leader"), ("ev001", "recoil"),
                       ("ev002", "stepped_leader"), ("ev003", "recoil")]:
        store.record_decision(CID, eid, label, analyst="tamsin", origin="review",
                              decided_at="2031-07-21T10:00:00Z")
    store.add_class("leader_or_k", "either", analyst="wren")
    store.merge_classes(["recoil", "stepped_leader"], "leader_or_k", analyst="wren")
    wren = ["leader_or_k", "leader_or_k", "leader_or_k", "narrow_bipolar"]
    tamsin = ["leader_or_k"] * 4
    ag = store.agreement([CID]).iloc[0]
    # reference implementation: sklearn.metrics.cohen_kappa_score
    want = cohen_kappa_score(wren, tamsin)
    assert ag["n_agree"] == 3
    np.testing.assert_allclose(ag["kappa"], want, rtol=0, atol=1e-12)


def test_hide_and_show(store):
    """A hidden class leaves classes() but keeps its labels; show brings it back in place."""
    store.hide_class("energetic_in_cloud", analyst="wren", note="none at this station")
    assert store.classes() == ["narrow_bipolar", "stepped_leader", "recoil"]
    assert store.classes(include_hidden=True) == STANDARD
    assert store.class_table().set_index("name").loc["energetic_in_cloud", "status"] == "hidden"
    store.record_decision(CID, "ev005", "energetic_in_cloud", analyst="wren", origin="review")
    assert _current(store).loc["ev005", "label"] == "energetic_in_cloud"
    with pytest.raises(InputError, match="already hidden"):
        store.hide_class("energetic_in_cloud")
    store.show_class("energetic_in_cloud")
    assert store.classes() == STANDARD
    with pytest.raises(InputError, match="already visible"):
        store.show_class("energetic_in_cloud")
    assert store.class_history()["action"].tolist() == ["hide", "show"]


def test_a_hidden_class_stays_hidden_when_renamed(store):
    """Renaming a hidden class gives a hidden class."""
    store.hide_class("recoil")
    store.rename_class("recoil", "k_change", analyst="wren")
    assert "k_change" not in store.classes()
    assert store.classes(include_hidden=True)[2] == "k_change"


def test_rename_back_revives_the_old_name(store):
    """Renaming k_change back to recoil undoes the rename; the names never collide."""
    store.rename_class("recoil", "k_change", analyst="wren")
    store.rename_class("k_change", "recoil", analyst="wren", note="undo")
    assert store.classes() == STANDARD
    assert _current(store).loc["ev000", "label"] == "recoil"
    t = store.class_table().set_index("name")
    assert (t.loc["k_change", "status"], t.loc["k_change", "current"]) == ("renamed", "recoil")
    store.record_decision(CID, "ev005", "recoil", analyst="wren", origin="review")


@pytest.mark.parametrize("call, match", [
    (lambda s: s.add_class("recoil", "again"), r"class 'recoil' already exists .*visible"),
    (lambda s: s.add_class("Return Stroke", "x"), "1-40 characters of a-z"),
    (lambda s: s.add_class("r" * 41, "x"), "1-40 characters of a-z"),
    (lambda s: s.add_class("return_stroke", " "), "give a --description"),
    (lambda s: s.rename_class("recoil", "stepped_leader", analyst="wren"),
     r"class name 'stepped_leader' is taken .*visible"),
    (lambda s: s.rename_class("recoil", "9lives", analyst="wren"), "1-40 characters"),
    (lambda s: s.rename_class("hail", "ice", analyst="wren"), "class 'hail' is not a class of"),
    (lambda s: s.rename_class("recoil", "recoil", analyst="wren"), "already has that name"),
    (lambda s: s.rename_class("recoil", "k_change", analyst=None), "give the analyst"),
    (lambda s: s.rename_class("recoil", "k_change", analyst=" wren"), "surrounding|start or end"),
    (lambda s: s.hide_class("hail"), "'hail' is not a class of"),
    (lambda s: s.merge_classes([], "recoil", analyst="wren"), "at least one class to merge"),
    (lambda s: s.merge_classes(["recoil"], "recoil", analyst="wren"), "merged into itself"),
    (lambda s: s.merge_classes(["recoil", "recoil"], "stepped_leader", analyst="wren"),
     "named twice: recoil"),
    (lambda s: s.merge_classes(["hail", "sleet"], "ice", analyst="wren"),
     r"(?s)merge target 'ice' is not.*class to merge 'hail' is not.*'sleet' is not"),
])
def test_bad_class_changes_are_refused_and_change_nothing(store, call, match):
    """Collisions, bad names, unknown classes: InputError naming them; nothing recorded."""
    before = store.class_table()
    with pytest.raises(InputError, match=match):
        call(store)
    assert store.class_table().equals(before)
    assert store.class_history().empty


def test_retired_names_are_never_reused(store):
    """A renamed-away name can be neither added nor renamed to (except to undo), nor merged."""
    store.rename_class("recoil", "k_change", analyst="wren")
    with pytest.raises(InputError, match=r"'recoil' already exists .*renamed to 'k_change'"):
        store.add_class("recoil", "again")
    with pytest.raises(InputError, match=r"name 'recoil' is taken .*renamed to 'k_change'"):
        store.rename_class("stepped_leader", "recoil", analyst="wren")
    with pytest.raises(InputError, match="class to merge 'recoil' was renamed to 'k_change'"):
        store.merge_classes(["recoil"], "stepped_leader", analyst="wren")
    with pytest.raises(InputError, match="'recoil' was renamed"):
        store.hide_class("recoil")


def test_class_events_are_append_only(store):
    """The database refuses to change or delete a class event, or to rename a class row."""
    store.hide_class("recoil", analyst="wren")
    con = sqlite3.connect(store.path)
    try:
        for sql, msg in [("UPDATE class_events SET analyst = 'x'", "append-only"),
                         ("DELETE FROM class_events", "append-only"),
                         ("UPDATE classes SET name = 'k' WHERE name = 'recoil'",
                          "keeps its name"),
                         ("DELETE FROM classes WHERE name = 'recoil'", "cannot be removed")]:
            with pytest.raises(sqlite3.IntegrityError, match=msg):
                con.execute(sql)
    finally:
        con.close()


def test_v2_store_dump_is_upgraded_to_v3(tmp_path):
    """A store written by the v2 code (SQL dump) upgrades with a backup; labels unchanged."""
    path = tmp_path / "labels.sqlite"
    con = sqlite3.connect(path)
    con.executescript((DATA / "labels_store_v2.sql").read_text(encoding="utf-8"))
    before = con.execute("SELECT * FROM decisions ORDER BY decision_id").fetchall()
    con.close()
    cat = tiny_catalog(tmp_path / "cat")  # the same invented catalog the dump registered
    with LabelStore(path) as s:
        assert s.schema_version == SCHEMA_VERSION == 3
        assert s.classes() == [*STANDARD, "other"]
        assert s.class_table()["status"].eq("visible").all()
        assert s.class_history().empty
        assert s.check_integrity() == []
        cur = _current(s)
        assert cur.loc[["ev000", "ev001", "ev002", "ev004"], "label"].tolist() == [
            "recoil", "recoil", "stepped_leader", "other"]
        assert bool(cur.loc["ev001", "resolved"])
        assert cur.loc["ev003", "status"] == "unlabelled"
        s.register_catalog(cat)  # the registered content hash is this catalog's
        s.rename_class("other", "chaotic", analyst="wren")
        s.merge_classes(["stepped_leader"], "recoil", analyst="wren")
        cur = _current(s)
        assert cur.loc[["ev001", "ev002", "ev004"], "label"].tolist() == ["recoil", "recoil",
                                                                         "chaotic"]
        assert len(s.review_marks()) == 1
    con = sqlite3.connect(path)
    assert con.execute("SELECT * FROM decisions ORDER BY decision_id").fetchall() == before
    con.close()
    backup = sqlite3.connect(f"{path}.v2.bak")
    assert backup.execute("SELECT MAX(version) FROM schema_version").fetchone() == (2,)
    assert backup.execute("SELECT COUNT(*) FROM sqlite_master WHERE name = 'class_events'"
                          ).fetchone() == (0,)
    backup.close()
