"""Tests of classify.cards: the data card of a labelled catalog."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from classify.cards import render_data_card, write_data_card
from classify.labels import LabelStore

from ._labels_testkit import tiny_catalog, write_tiny_catalog

CID = "hollowmere-2031"


@pytest.fixture
def labelled(tmp_path):
    cat = tiny_catalog(tmp_path / "hollowmere-2031", range_m=12500.0)
    store = LabelStore(tmp_path / "labels.sqlite")
    store.register_catalog(cat)
    for e, a, b in [("ev000", "recoil", "recoil"), ("ev001", "recoil", "narrow_bipolar"),
                    ("ev002", "narrow_bipolar", "narrow_bipolar"),
                    ("ev003", "stepped_leader", "stepped_leader")]:
        store.record_decision(CID, e, a, analyst="wren", origin="review",
                              decided_at="2031-08-01T10:00:00Z")
        store.record_decision(CID, e, b, analyst="tamsin", origin="review",
                              decided_at="2031-08-02T10:00:00Z")
    store.record_decision(CID, "ev004", "recoil", analyst="wren", origin="model-accepted",
                          model_version="m-2031.1", confidence=0.9,
                          decided_at="2031-08-03T10:00:00Z")
    yield cat, store
    store.close()


def _section(text, title):
    m = re.search(rf"^## {re.escape(title)}\n(.*?)(?=^## |\Z)", text, re.S | re.M)
    assert m, f"no section {title!r}"
    return m.group(1)


def test_card_is_byte_identical_when_regenerated(labelled, tmp_path, monkeypatch):
    """Same store and catalog: the same bytes, written whole (no temporary file left)."""
    cat, store = labelled
    monkeypatch.chdir(tmp_path)
    out = write_data_card(cat, store, "data_cards")
    assert out == Path("data_cards") / "hollowmere-2031.md" and out.is_file()
    first = out.read_bytes()
    again = write_data_card(cat, store, "data_cards").read_bytes()
    assert first == again
    assert b"\r" not in first and first.endswith(b"\n")
    assert not list((tmp_path / "data_cards").glob(".*.tmp"))  # no temp file left


def test_card_lists_instrument_settings_from_the_manifest(labelled):
    """Rates, window length (n_samples / rate), band, sign convention, decay, delays."""
    cat, store = labelled
    inst = _section(render_data_card(cat, store), "Instrument settings (from catalog.json)")
    # field: 64 samples at 20 MHz = 3.2 us; VHF: 80 samples at 250 MHz = 320 ns
    for row in ["| sample rate | 20 MHz |", "| samples per record | 64 |",
                "| record window | 3.2 µs |", "| decay time constant (RC) | 1 ms |",
                "| full scale (clip level) | 250 V/m |", "| pass band | 25 MHz to 85 MHz |",
                "| record window | 320 ns |", "| cable/electronics delay | 400 ns |",
                "| sign convention in file | physics", "| kind | power |"]:
        assert row in inst


def test_card_counts_labels_per_class_analyst_and_kappa(labelled):
    """Per-class counts, per-analyst counts, and the kappa of the only pair."""
    cat, store = labelled
    text = render_data_card(cat, store)
    labels = _section(text, "Labels")
    assert "| labelled | 4 | 33.3 % |" in labels  # ev000, ev002, ev003, ev004 of 12
    assert "| conflict | 1 | 8.3 % |" in labels
    assert "| `recoil` | 2 | 50.0 % |" in labels
    assert "| wren | 1 | 1 | 3 | 0 | 5 | 5 | 0 | 0 |" in labels
    kappa = store.agreement([CID])["kappa"].iat[0]
    assert f"| tamsin | wren | 4 | 0.750 | {kappa:.3f} |" in labels
    assert "| `m-2031.1` | 1 |" in labels
    assert "between 2031-08-01 10:00:00 and 2031-08-03 10:00:00 UTC" in labels
    assert "| `model-accepted` | 1 |" in labels and "| `review` | 8 |" in labels


def test_card_names_known_gaps(tmp_path):
    """No range, no VHF, no sources, NaN and clipped rows are listed as caveats."""
    folder = write_tiny_catalog(tmp_path / "gappy", vhf=False)
    field = np.load(folder / "field.npy")
    field[0, 5] = np.nan
    field[1, :] = np.nan
    field[2, 10] = 300.0  # beyond the 250 V/m full scale
    np.save(folder / "field.npy", field)
    from features import open_catalog

    cat = open_catalog(folder)
    with LabelStore(tmp_path / "labels.sqlite") as store:
        gaps = _section(render_data_card(cat, store), "Known gaps and caveats")
    assert "Range unknown for 12 of 12 events (100.0 %)" in gaps
    assert "No VHF channel" in gaps and "No mapped VHF sources" in gaps
    assert "- 2 field rows with missing (NaN) samples (16.7 %)." in gaps
    assert "- 1 field row missing entirely (all NaN) (8.3 %)." in gaps
    assert "- 1 field row clipped at full scale (8.3 %)." in gaps
    assert "No labels for classes `narrow_bipolar`, `stepped_leader`, `recoil`" in gaps


def test_card_shows_the_regenerate_command(labelled, tmp_path, monkeypatch):
    """The card ends with the exact command that rebuilds it."""
    cat, store = labelled
    monkeypatch.chdir(tmp_path)
    text = render_data_card(cat, store, out_dir="cards")
    assert ("```\npulsesort card hollowmere-2031 --store labels.sqlite --out-dir cards\n```"
            in _section(text, "How to regenerate"))


def test_card_escapes_user_text(labelled):
    """An analyst name with Markdown table syntax cannot break the table."""
    cat, store = labelled
    store.record_decision(CID, "ev005", "recoil", analyst="evil | <b>name</b>",
                          origin="review")
    text = render_data_card(cat, store)
    assert "| evil \\| &lt;b&gt;name&lt;/b&gt; |" in text
    # every row of every table has as many cells as its header
    width = None
    for line in text.splitlines():
        if not line.startswith("|"):
            width = None
            continue
        cells = len(re.split(r"(?<!\\)\|", line)) - 2
        width = cells if width is None else width
        assert cells == width, line


def test_card_refuses_a_catalog_that_is_not_the_registered_one(labelled, tmp_path):
    """Another catalog under the same id would describe the wrong labels: refused."""
    _, store = labelled
    other = tiny_catalog(tmp_path / "other", season="2032", seed=3)
    with pytest.raises(ValueError, match="its labels do not describe this catalog"):
        render_data_card(other, store)


def test_card_of_a_catalog_without_labels(tmp_path):
    """A catalog with no decisions still gets a card, saying so."""
    cat = tiny_catalog(tmp_path / "c")
    with LabelStore(tmp_path / "labels.sqlite") as store:
        text = render_data_card(cat, store)
    assert "| unlabelled | 12 | 100.0 % |" in text
    assert "No decisions on this catalog in the store." in text
    assert "Fewer than two analysts" in text


def test_card_shows_the_class_set_and_counts_in_current_classes(labelled):
    """After a merge and a hide, the card counts mapped labels and lists the class changes."""
    cat, store = labelled
    store.merge_classes(["narrow_bipolar"], "recoil", analyst="wren", note="one kind here")
    store.hide_class("stepped_leader", analyst="tamsin")
    labels = _section(render_data_card(cat, store), "Labels")
    # ev001 was a conflict recoil/narrow_bipolar: now both say recoil
    assert "| labelled | 5 | 41.7 % |" in labels and "| conflict | 0 | 0.0 % |" in labels
    assert "| `recoil` | 4 | 80.0 % |" in labels      # ev000, ev001, ev002, ev004
    assert "| `stepped_leader` (hidden) | 1 | 20.0 % |" in labels
    assert "`narrow_bipolar`" not in labels.split("### Per class", 1)[1].split("###")[0]
    assert "| `narrow_bipolar` | merged | `recoil` | merged into recoil on " in labels
    assert "| `stepped_leader` | hidden |  | hidden on " in labels and "by tamsin" in labels
    gaps = _section(render_data_card(cat, store), "Known gaps and caveats")
    assert "stepped_leader" not in gaps  # a hidden class is not a training gap
