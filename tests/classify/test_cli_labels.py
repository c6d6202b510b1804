"""Tests of ``pulsesort labels ...`` and ``pulsesort card`` through classify.cli.main."""

from __future__ import annotations

import logging
import shutil
from pathlib import Path

import pandas as pd
import pytest

from classify.cli import main
from classify.labels import LabelStore

from ._labels_testkit import write_labels, write_tiny_catalog

CID = "hollowmere-2031"


@pytest.fixture
def season(tmp_path, monkeypatch):
    """A working folder with a catalog and two analysts' labels files."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("PULSESORT_STORE", raising=False)
    write_tiny_catalog(tmp_path / CID)
    write_labels(tmp_path / "wren.csv", [["ev000", "recoil", "wren", "", "clear K-change"],
                                         ["ev001", "recoil", "wren", "", ""],
                                         ["NA", "narrow_bipolar", "wren", "", ""]])
    write_labels(tmp_path / "tamsin.csv", [["ev000", "recoil"], ["ev001", "stepped_leader"],
                                           ["NA", "narrow_bipolar"]],
                 header=("event_id", "label"))
    return tmp_path


def _run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def _snapshot(path: Path) -> pd.DataFrame:
    with LabelStore(path, create=False) as s:
        return s.decisions()


def test_import_then_reimport_uses_the_default_store(season, capsys):
    """labels import writes ./labels.sqlite; the same file again adds nothing."""
    code, out, _ = _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)
    assert code == 0 and "3 rows for catalog hollowmere-2031: 3 added" in out
    assert (season / "labels.sqlite").is_file()
    code, out, _ = _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)
    assert code == 0 and "0 added, 3 already in labels.sqlite" in out
    assert len(_snapshot(season / "labels.sqlite")) == 3


def test_store_option_and_environment_variable(season, capsys, monkeypatch):
    """--store PATH wins; else $PULSESORT_STORE; both are honoured."""
    code, _, _ = _run(capsys, "labels", "import", "wren.csv", "--catalog", CID,
                      "--store", "a.sqlite")
    assert code == 0 and (season / "a.sqlite").is_file()
    monkeypatch.setenv("PULSESORT_STORE", str(season / "b.sqlite"))
    code, _, _ = _run(capsys, "labels", "import", "tamsin.csv", "--catalog", CID,
                      "--analyst", "tamsin")
    assert code == 0 and (season / "b.sqlite").is_file()
    assert not (season / "labels.sqlite").exists()
    assert set(_snapshot(season / "b.sqlite")["analyst"]) == {"tamsin"}


def test_failed_import_exits_2_and_leaves_the_store_unchanged(season, capsys):
    """A bad file: exit 2, every bad row on stderr, the store byte-for-byte as before."""
    _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)
    before = _snapshot(season / "labels.sqlite")
    write_labels(season / "bad.csv", [["ev002", "recoil", "wren", "", ""],
                                      ["nope", "recoil", "wren", "", ""],
                                      ["ev003", "hail", "wren", "", ""],
                                      ["ev004", "recoil", "wren", "31/07/2031", ""]])
    code, out, err = _run(capsys, "labels", "import", "bad.csv", "--catalog", CID)
    assert code == 2 and out == ""
    assert "bad.csv: 3 bad row(s); nothing was imported" in err
    assert "bad.csv:3: unknown event_id 'nope'" in err
    assert "bad.csv:4: unknown label 'hail'" in err
    assert "bad.csv:5: decided_at: expected an ISO-8601 time" in err
    pd.testing.assert_frame_equal(_snapshot(season / "labels.sqlite"), before)


def test_failed_first_import_creates_no_store(season, capsys):
    """Without a store yet, a bad file leaves no empty store behind."""
    code, _, err = _run(capsys, "labels", "import", "tamsin.csv", "--catalog", CID)
    assert code == 2 and "no analyst: add an 'analyst' column or pass --analyst" in err
    assert not (season / "labels.sqlite").exists()


def test_missing_catalog_or_file_exits_2(season, capsys):
    """A missing catalog folder or labels file is bad input, exit 2."""
    code, _, err = _run(capsys, "labels", "import", "wren.csv", "--catalog", "nowhere")
    assert code == 2 and "nowhere" in err
    code, _, err = _run(capsys, "labels", "import", "absent.csv", "--catalog", CID,
                        "--analyst", "wren")
    assert code == 2 and "absent.csv: no such labels file" in err
    code, _, err = _run(capsys, "labels", "stats", "--store", "absent.sqlite")
    assert code == 2 and "no label store here" in err


def test_stats_conflicts_resolve_history_retract(season, capsys):
    """The review loop of a group: stats, conflicts with kappa, resolve, history, retract."""
    _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)
    _run(capsys, "labels", "import", "tamsin.csv", "--catalog", CID, "--analyst", "tamsin")
    code, out, _ = _run(capsys, "labels", "stats")
    assert code == 0
    assert "hollowmere-2031 hollowmere   2031        12         2         1           9" in out
    code, out, _ = _run(capsys, "labels", "conflicts")
    assert code == 0 and "Events in conflict: 1" in out
    assert "ev001  tamsin stepped_leader" in out and "ev001    wren         recoil" in out
    # 3 common events, 2 agree; kappa from sklearn (checked in test_labels.py)
    assert "tamsin      wren         3        2   0.666667" in out
    code, out, _ = _run(capsys, "labels", "resolve", CID, "ev001", "recoil", "--analyst",
                        "analyst_a", "--note", "VHF retraces the channel")
    assert code == 0 and "resolved as recoil" in out
    code, out, _ = _run(capsys, "labels", "conflicts")
    assert "Events in conflict: 0" in out
    code, out, _ = _run(capsys, "labels", "history", "ev001")
    assert code == 0 and "VHF retraces the channel" in out and "resolve" in out
    code, out, _ = _run(capsys, "labels", "retract", CID, "NA", "--analyst", "wren",
                        "--note", "second look")
    assert code == 0 and "retracted" in out
    code, out, _ = _run(capsys, "labels", "history", CID, "NA")
    assert "(retracted)" in out and "second look" in out
    code, _, err = _run(capsys, "labels", "resolve", CID, "ev000", "recoil",
                        "--analyst", "analyst_a")
    assert code == 2 and "is not in conflict (status: labelled)" in err
    code, _, err = _run(capsys, "labels", "retract", CID, "ev002", "--analyst", "wren")
    assert code == 2 and "has no label on event 'ev002'" in err


def test_export_round_trip_through_the_cli(season, capsys):
    """export --history, import into a new store: the same current labels."""
    _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)
    _run(capsys, "labels", "import", "tamsin.csv", "--catalog", CID, "--analyst", "tamsin")
    _run(capsys, "labels", "resolve", CID, "ev001", "recoil", "--analyst", "analyst_a")
    for flag in ([], ["--history"]):
        code, out, _ = _run(capsys, "labels", "export", "--out", "out.csv", *flag)
        assert code == 0 and "out.csv:" in out
        code, _, _ = _run(capsys, "labels", "import", "out.csv", "--catalog", CID,
                          "--store", f"copy{len(flag)}.sqlite")
        assert code == 0
        with LabelStore("labels.sqlite") as a, LabelStore(f"copy{len(flag)}.sqlite") as b:
            ca = a.current_labels(status="labelled")[["event_id", "label"]]
            cb = b.current_labels(status="labelled")[["event_id", "label"]]
            pd.testing.assert_frame_equal(ca, cb)


def test_classes_list_and_add(season, capsys):
    """labels classes lists the four standard classes; add needs --description."""
    code, out, _ = _run(capsys, "labels", "classes")
    assert code == 2  # no store yet, and listing does not create one
    code, out, _ = _run(capsys, "labels", "classes", "add", "other", "--description",
                        "fits no standard class")
    assert code == 0 and "class 'other' added" in out
    code, out, _ = _run(capsys, "labels", "classes", "list")
    for name in ("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud", "other"):
        assert name in out
    code, _, err = _run(capsys, "labels", "classes", "add", "spare")
    assert code == 2 and "--description" in err
    code, _, err = _run(capsys, "labels", "classes", "add", "Bad Name", "--description", "x")
    assert code == 2 and "1-40 characters of a-z" in err


def test_classes_old_add_spelling_still_works(season, capsys, caplog):
    """The old `labels classes --add NAME --description TEXT` adds, with a note."""
    with caplog.at_level(logging.WARNING, logger="pulsesort"):
        code, out, _ = _run(capsys, "labels", "classes", "--add", "other", "--description",
                            "fits no standard class")
    assert code == 0 and "class 'other' added" in out and "narrow_bipolar" in out
    assert "`labels classes --add NAME` is deprecated" in caplog.text
    code, _, err = _run(capsys, "labels", "classes", "--add", "spare")
    assert code == 2 and "give a --description" in err


def test_classes_rename_hide_merge_through_the_cli(season, capsys):
    """rename, hide, show, merge and list --history, each with --store after the action."""
    assert _run(capsys, "labels", "import", "wren.csv", "--catalog", CID,
                "--store", "s.sqlite")[0] == 0
    code, out, _ = _run(capsys, "labels", "classes", "rename", "recoil", "k_change",
                        "--analyst", "wren", "--note", "our term", "--store", "s.sqlite")
    assert code == 0 and "'recoil' renamed to 'k_change'" in out
    code, out, _ = _run(capsys, "-q", "labels", "classes", "hide", "energetic_in_cloud",
                        "--store", "s.sqlite")
    assert code == 0 and out == ""  # -q drops the summary
    code, out, _ = _run(capsys, "labels", "classes", "merge", "narrow_bipolar",
                        "stepped_leader", "--into", "k_change", "--analyst", "tamsin",
                        "--store", "s.sqlite")
    assert code == 0 and "'narrow_bipolar', 'stepped_leader' merged into 'k_change'" in out
    code, out, _ = _run(capsys, "labels", "classes", "--store", "s.sqlite", "list")
    assert code == 0
    table = out.split("\n\n")[0].splitlines()[1:]
    rows = {line.split()[0]: line.split()[1:3] for line in table}
    assert list(rows)[:3] == ["k_change", "energetic_in_cloud", "narrow_bipolar"]
    assert rows["recoil"] == ["renamed", "k_change"]
    assert rows["narrow_bipolar"] == ["merged", "k_change"]
    assert rows["energetic_in_cloud"][0] == "hidden"
    code, out, _ = _run(capsys, "labels", "classes", "list", "--history", "--store",
                        "s.sqlite")
    assert code == 0 and "our term" in out and "tamsin" in out
    assert [line.split()[1] for line in out.splitlines()[1:]] == ["rename", "hide", "merge",
                                                                  "merge"]
    code, out, _ = _run(capsys, "labels", "history", CID, "ev000", "--store", "s.sqlite")
    header, row = out.splitlines()[:2]
    assert header.split()[4:6] == ["label", "now"] and row.split()[5:7] == ["recoil",
                                                                           "k_change"]
    with LabelStore("s.sqlite", create=False) as s:
        cur = s.current_labels(status="labelled")
        assert set(cur["label"]) == {"k_change"}
        assert set(cur["label_as_decided"]) == {"recoil", "narrow_bipolar"}
        assert set(s.decisions()["label"]) == {"recoil", "narrow_bipolar"}


@pytest.mark.parametrize("argv, message", [
    (["rename", "recoil", "stepped_leader", "--analyst", "wren"],
     "class name 'stepped_leader' is taken"),
    (["rename", "hail", "ice", "--analyst", "wren"], "class 'hail' is not a class of"),
    (["merge", "recoil", "--into", "hail", "--analyst", "wren"], "merge target 'hail'"),
    (["hide", "Recoil"], "'Recoil' is not a class of"),
    (["show", "recoil"], "already visible"),
    (["rename", "recoil", "k"], "the following arguments are required: --analyst"),
])
def test_classes_bad_changes_exit_2(season, capsys, argv, message):
    """Collisions and unknown names exit 2 with a message naming them; nothing changes."""
    assert _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)[0] == 0
    code, _, err = _run(capsys, "labels", "classes", *argv)
    assert code == 2 and message in err
    with LabelStore("labels.sqlite", create=False) as s:
        assert s.class_history().empty


def test_classes_on_a_missing_store_create_nothing(season, capsys):
    """Only 'add' may create a store; the other actions name the missing file."""
    code, _, err = _run(capsys, "labels", "classes", "hide", "recoil", "--store", "no.sqlite")
    assert code == 2 and "no.sqlite: no label store here" in err
    assert not (season / "no.sqlite").exists()


def test_help_documents_the_rule_and_the_store(capsys):
    """labels --help states the current-label rule and the default store."""
    code, out, _ = _run(capsys, "labels", "--help")
    assert code == 0
    assert "current-label rule" in out and "labels.sqlite" in out and "PULSESORT_STORE" in out
    for action in ("import", "export", "stats", "conflicts", "resolve", "history", "retract",
                   "classes"):
        assert action in out
    code, out, _ = _run(capsys, "labels", "import", "--help")
    assert code == 0 and "--catalog CATALOG_DIR" in out and "--store PATH" in out
    assert _run(capsys, "labels")[0] == 2


def test_card_command_writes_a_deterministic_card(season, capsys):
    """pulsesort card writes data_cards/<id>.md; running it again gives the same bytes."""
    _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)
    code, out, _ = _run(capsys, "card", CID)
    assert code == 0
    card = season / "data_cards" / f"{CID}.md"
    first = card.read_bytes()
    assert b"# Data card: hollowmere-2031" in first
    assert b"pulsesort card hollowmere-2031 --store labels.sqlite --out-dir data_cards" in first
    code, _, _ = _run(capsys, "card", CID, "--out-dir", "data_cards")
    assert code == 0 and card.read_bytes() == first
    code, _, err = _run(capsys, "card", CID, "--store", "absent.sqlite")
    assert code == 2 and "no label store here" in err


def test_card_refuses_a_changed_catalog(season, capsys):
    """A catalog edited after registration is not the one the labels are about: exit 2."""
    _run(capsys, "labels", "import", "wren.csv", "--catalog", CID)
    changed = season / "changed"
    shutil.copytree(season / CID, changed)
    ev = (changed / "events.csv").read_text().replace("f0", "f9", 1)
    (changed / "events.csv").write_text(ev)
    code, _, err = _run(capsys, "card", str(changed))
    assert code == 2 and "its labels do not describe this catalog" in err
    code, _, err = _run(capsys, "labels", "import", "wren.csv", "--catalog", str(changed))
    assert code == 2 and "Seasons must not be mixed" in err
