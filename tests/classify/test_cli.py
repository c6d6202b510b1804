"""The command line's contract: exit codes, -q, output paths, one argument style.

Catalogs and labels here are invented (the fictional station hollowmere), for
self-consistency only.
"""

from __future__ import annotations

import logging

import pytest

import classify.cli as cli
from classify.cli import main
from classify.labels import LabelStore
from features import InputError

from ._labels_testkit import write_labels, write_tiny_catalog

CID = "hollowmere-2031"


@pytest.fixture
def season(tmp_path, monkeypatch):
    """A working folder with a tiny catalog, a labels file and a store holding it."""
    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("PULSESORT_STORE", raising=False)
    write_tiny_catalog(tmp_path / CID)
    write_labels(tmp_path / "wren.csv", [["ev000", "recoil", "wren", "", ""],
                                         ["ev001", "stepped_leader", "wren", "", ""]])
    assert main(["-q", "labels", "import", "wren.csv", "--catalog", CID, "--store",
                 "labels.sqlite"]) == 0
    return tmp_path


def _raising(monkeypatch, exc):
    """Make `pulsesort check` raise ``exc`` inside the command (the CLI mapping's input)."""
    import classify.commands.check as check

    def boom(path):
        raise exc

    monkeypatch.setattr(check, "open_catalog", boom)


@pytest.mark.parametrize("legacy", [True, False])
@pytest.mark.parametrize("exc,legacy_code,strict_code", [
    (InputError(["a.csv line 3: column 'x' must be a number"]), 2, 2),
    (ValueError("attempt to get argmax of an empty sequence"), 2, 1),
    (FileNotFoundError("gone.csv: no such file"), 2, 1),
    (KeyError("flash_id"), 1, 1),
    (OSError("field.npy: file ends before row 9"), 1, 1),
], ids=["InputError", "ValueError", "FileNotFoundError", "KeyError", "OSError"])
def test_exit_code_mapping(monkeypatch, capsys, legacy, exc, legacy_code, strict_code):
    """InputError is bad input (2); other errors are bugs (1), except the legacy
    ValueError/OSError-kind mapping while LEGACY_VALUEERROR_IS_INPUT is on."""
    monkeypatch.setattr(cli, "LEGACY_VALUEERROR_IS_INPUT", legacy)
    _raising(monkeypatch, exc)
    code = main(["check", "anything"])
    err = capsys.readouterr().err
    assert code == (legacy_code if legacy else strict_code)
    if code == 1:
        assert "internal error" in err and "This is a bug" in err
    else:
        assert "error:" in err and "internal error" not in err


def test_debug_prints_the_traceback_and_keeps_the_code(monkeypatch, capsys):
    """--debug adds the traceback; the exit code stays what it would be."""
    monkeypatch.setattr(cli, "LEGACY_VALUEERROR_IS_INPUT", False)
    _raising(monkeypatch, ValueError("zero-size array"))
    assert main(["--debug", "check", "x"]) == 1
    err = capsys.readouterr().err
    assert "Traceback (most recent call last)" in err and "zero-size array" in err
    _raising(monkeypatch, InputError("catalog.json: 'version' must be 1, got 2"))
    assert main(["--debug", "check", "x"]) == 2
    assert "Traceback" in capsys.readouterr().err


def test_usage_errors_exit_2(capsys):
    """argparse usage errors (unknown option, bad number) exit 2."""
    assert main(["check", "--no-such-option", "x"]) == 2
    assert main(["features", "x", "--chunk-size", "zero"]) == 2


def test_train_with_a_mistyped_store_creates_nothing(season, capsys):
    """Reading commands never create a store: exit 2 naming it, no file, no model."""
    assert main(["train", CID, "--store", "lables.sqlite", "--out", "models/v1"]) == 2
    assert "lables.sqlite: no label store here" in capsys.readouterr().err
    assert not (season / "lables.sqlite").exists() and not (season / "models").exists()


@pytest.mark.parametrize("argv", [
    ["labels", "stats", "--store", "typo.sqlite"],
    ["labels", "export", "--out", "x.csv", "--store", "typo.sqlite"],
    ["labels", "history", CID, "ev000", "--store", "typo.sqlite"],
    ["card", CID, "--store", "typo.sqlite"],
    ["drift", CID, CID, "--model", "nope", "--store", "typo.sqlite"],
])
def test_other_reading_commands_create_nothing(season, capsys, argv):
    """Every command that only reads labels refuses a missing store and creates none."""
    assert main(argv) == 2
    assert "typo.sqlite: no label store here" in capsys.readouterr().err
    assert not (season / "typo.sqlite").exists()


@pytest.mark.parametrize("out", ["f.xlsx", "f", "f.csv.gz"])
def test_features_refuses_unknown_output_extensions(season, capsys, out):
    """features writes .csv or .parquet only: anything else is refused up front."""
    assert main(["features", CID, "--out", out]) == 2
    assert "must end in .csv or .parquet" in capsys.readouterr().err
    assert not (season / out).exists()


@pytest.mark.parametrize("argv,pattern", [
    (["features", CID, "--out", "missing/f.csv"], "its folder missing is missing"),
    (["labels", "export", "--out", "x.xlsx"], "must end in .csv"),
    (["report", "r.csv", "--out", "r.pdf"], "must end in .html"),
    (["drift", CID, CID, "--out", "d.txt"], "must end in .html"),
])
def test_output_paths_are_checked_first(season, capsys, argv, pattern):
    """Every output path is checked before any work: extension and folder."""
    assert main(argv) == 2
    assert pattern in capsys.readouterr().err


def test_quiet_prints_no_summaries(season, capsys):
    """-q: the commands' summaries are gone; results are still written."""
    capsys.readouterr()
    assert main(["-q", "check", CID]) == 0
    assert main(["-q", "features", CID, "--out", "f.csv"]) == 0
    assert main(["-q", "labels", "export", "--out", "back.csv"]) == 0
    assert main(["-q", "labels", "retract", CID, "ev000", "--analyst", "wren"]) == 0
    assert main(["-q", "card", CID]) == 0
    assert capsys.readouterr().out == ""
    assert (season / "f.csv").is_file() and (season / "back.csv").is_file()
    assert main(["check", CID]) == 0
    assert "ok: the catalog follows catalog v1" in capsys.readouterr().out


def test_card_goes_beside_the_store_by_default(season, capsys, tmp_path_factory):
    """card writes into data_cards/ beside the store, not the working folder."""
    store_dir = tmp_path_factory.mktemp("stores")
    (season / "labels.sqlite").rename(store_dir / "labels.sqlite")
    assert main(["card", CID, "--store", str(store_dir / "labels.sqlite")]) == 0
    card = store_dir / "data_cards" / f"{CID}.md"
    assert card.is_file() and str(card) in capsys.readouterr().out
    assert not (season / "data_cards").exists()


def test_labels_history_takes_catalog_then_event(season, capsys, caplog):
    """history CATALOG_ID EVENT_ID like resolve/retract; the old --catalog still works."""
    assert main(["labels", "history", CID, "ev000"]) == 0
    new = capsys.readouterr().out
    assert "recoil" in new and "wren" in new
    assert main(["labels", "history", "ev000"]) == 0             # every catalog
    assert capsys.readouterr().out == new
    with caplog.at_level(logging.WARNING, logger="pulsesort"):
        assert main(["labels", "history", "ev000", "--catalog", CID]) == 0
    assert capsys.readouterr().out == new
    assert "--catalog ID` is deprecated" in caplog.text


def test_models_registry_option_after_the_action(tmp_path, capsys, caplog):
    """models ACTION --registry DIR like triage/review; the old position still works."""
    assert main(["models", "list", "--registry", str(tmp_path)]) == 0
    assert f"no models registered in {tmp_path}" in capsys.readouterr().out
    with caplog.at_level(logging.WARNING, logger="pulsesort"):
        assert main(["models", "--registry", str(tmp_path), "list"]) == 0
    assert f"no models registered in {tmp_path}" in capsys.readouterr().out
    assert "is deprecated; use `pulsesort models list --registry DIR`" in caplog.text


def test_store_that_is_a_folder_or_unopenable(season, capsys):
    """A store path that is a folder, or a file that is not SQLite, is bad input."""
    (season / "dir.sqlite").mkdir()
    assert main(["labels", "stats", "--store", "dir.sqlite"]) == 2
    assert "dir.sqlite: is a folder" in capsys.readouterr().err
    (season / "junk.sqlite").write_bytes(b"not a database at all" * 100)
    assert main(["labels", "stats", "--store", "junk.sqlite"]) == 2
    assert "junk.sqlite: cannot be" in capsys.readouterr().err
    with pytest.raises(InputError, match="folder .*missing"):
        LabelStore(season / "nowhere" / "labels.sqlite")


def test_parquet_without_pyarrow_is_refused_up_front(season, capsys):
    """--out .parquet needs the optional pyarrow: said before any work, nothing written."""
    import importlib.util

    if importlib.util.find_spec("pyarrow") is not None:
        pytest.skip("pyarrow is installed here: Parquet output works")
    assert main(["features", CID, "--out", "f.parquet"]) == 2
    assert "pip install 'pulsesort[parquet]'" in capsys.readouterr().err
    assert not (season / "f.parquet").exists()
