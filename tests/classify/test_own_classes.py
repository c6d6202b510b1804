"""End to end: a group's own class set, from the label store through training, triage,
review and report, then a rename, a merge and a hidden class, and a retrain.

Everything runs for real: the simulator writes two small seasons of the invented station
hollowmere (invented data, for self-consistency), ``classify.cli.main`` runs every
command, the label store is a real SQLite file, the review server answers real HTTP on
127.0.0.1, and the page test drives the real Chromium when it is installed.
"""

from __future__ import annotations

import json
import logging
import re
import shutil
from pathlib import Path

import pandas as pd
import pytest
from numpy.testing import assert_allclose

from classify.cli import main
from classify.labels import LabelStore
from classify.review import ReviewSession, make_server
from classify.triage import read_results
from features import open_catalog

from ._review_testkit import SIMULATE_SHORT, Client

MIX = "narrow_bipolar=0.2,stepped_leader=0.2,recoil=0.2,energetic_in_cloud=0.15,return_stroke=0.25"
STANDARD = ["narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud"]
FAST_TRAIN = ["--station-variants", "0", "--max-iter", "20"]


def _run(*argv) -> None:
    code = main(["-q", *map(str, argv)])
    assert code == 0, argv


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    """Season 2031 labelled (with return_stroke) and a five-class model; season 2032 triaged.

    The store file is left as it was after the import and the training (tests copy it).
    """
    root = tmp_path_factory.mktemp("own-classes")
    a, b = root / "hollowmere-2031", root / "hollowmere-2032"
    store, model = root / "labels.sqlite", root / "models" / "hollowmere-2031-v1"
    _run("simulate", a, "--events", 300, "--seed", 3, "--class-mix", MIX, *SIMULATE_SHORT)
    _run("simulate", b, "--events", 200, "--seed", 4, "--season", 2032, "--preset", "next",
         "--class-mix", MIX, *SIMULATE_SHORT)
    _run("labels", "classes", "add", "return_stroke", "--description",
         "return stroke of a cloud-to-ground flash", "--analyst", "wren", "--store", store)
    _run("labels", "import", f"{a}.labels.csv", "--catalog", a, "--store", store)
    _run("train", a, "--store", store, "--out", model, *FAST_TRAIN)
    # the model's decisions as they are (a season fit may add the rules' "other" where the
    # model is unsure)
    _run("triage", b, "--model", model, "--out", root / "results.csv", "--season-fit",
         "never")
    assert not Path(f"{store}-wal").exists()  # closed: the file alone is the store
    truth = pd.read_csv(f"{a}.labels.csv", dtype=str)["label"].value_counts()
    return {"root": root, "a": a, "b": b, "store": store, "model": model,
            "results": root / "results.csv", "truth": truth}


def _copy_store(season, tmp_path) -> Path:
    out = tmp_path / "labels.sqlite"
    shutil.copyfile(season["store"], out)
    return out


def _card(model_dir: Path) -> dict:
    return json.loads((model_dir / "card.json").read_text(encoding="utf-8"))


def _class_rows(html: str) -> dict[str, list[str]]:
    """Rows of the report's class table: class -> its other cells."""
    part = html.split("<h2>Classes</h2>", 1)[1].split("</table>", 1)[0]
    rows = re.findall(r"<tr>(.*?)</tr>", part.split("<tbody>", 1)[1])
    return {c[0]: c[1:] for c in (re.findall(r"<td>(.*?)</td>", r) for r in rows)}


class _Served:
    """A review session of ``analyst`` on season 2032, served on 127.0.0.1."""

    def __init__(self, season, store, analyst):
        self.results = read_results(season["results"])
        session = ReviewSession(self.results, open_catalog(season["b"]), store, analyst)
        self.server = make_server(session)

    def __enter__(self):
        self.server.start_background()
        return Client(self.server)

    def __exit__(self, *exc):
        self.server.shutdown()
        self.server.server_close()


def test_a_group_class_from_labels_to_report_then_renamed_merged_hidden(season, tmp_path,
                                                                       caplog):
    """return_stroke is trained, triaged, reviewed and reported; renames and merges follow."""
    store = _copy_store(season, tmp_path)
    truth = season["truth"]
    five = sorted([*STANDARD, "return_stroke"])
    # a five-class model: the store's visible classes that have labels
    card = _card(season["model"])
    assert sorted(card["classes"]) == five
    assert card["labels_per_season"]["2031"] == {c: int(truth[c]) for c in five}
    results = read_results(season["results"])
    assert sorted(c for c in results.columns if c.startswith("p_")) == [f"p_{c}" for c in five]

    # the review page offers the store's five classes with keys 1-5, in the store's order
    with _Served(season, store, "tamsin") as client:
        status, info = client.json("GET", "/api/session")
        assert status == 200
        assert [(c["name"], c["key"]) for c in info["classes"]] == [
            (c, str(k)) for k, c in enumerate([*STANDARD, "return_stroke"], start=1)]
        first = client.json("GET", "/api/current")[1]["pulse"]["event_id"]
        status, _ = client.json("POST", "/api/decision", {"event_id": first, "action": "label",
                                                          "label": "return_stroke"})
        assert status == 200
    res = results.set_index("event_id")
    with LabelStore(store, create=False) as s:
        d = s.decisions(["hollowmere-2032"]).iloc[-1]
    assert (d["event_id"], d["label"], d["origin"], d["analyst"]) == (
        first, "return_stroke", "review", "tamsin")
    assert d["model_version"] == "hollowmere-2031-v1"
    assert_allclose(d["confidence"], res.at[first, "p_return_stroke"], rtol=1e-12)

    # the report lists the five classes, all classes of the store
    report = tmp_path / "report.html"
    _run("report", season["results"], "--out", report, "--store", store)
    rows = _class_rows(report.read_text(encoding="utf-8"))
    assert sorted(rows) == five and all(r[-1] == "store class" for r in rows.values())

    # the group renames return_stroke, merges the two leader classes, hides one class
    _run("labels", "classes", "rename", "return_stroke", "cg_stroke", "--analyst", "wren",
         "--note", "the group's name", "--store", store)
    _run("labels", "classes", "add", "leader_pulse", "--description",
         "a stepped-leader or recoil-leader pulse", "--store", store)
    _run("labels", "classes", "merge", "recoil", "stepped_leader", "--into", "leader_pulse",
         "--analyst", "wren", "--store", store)
    _run("labels", "classes", "hide", "energetic_in_cloud", "--analyst", "tamsin",
         "--store", store)
    with LabelStore(store, create=False) as s:
        assert s.classes() == ["narrow_bipolar", "cg_stroke", "leader_pulse"]
        cur = s.current_labels(["hollowmere-2032"]).set_index("event_id").loc[first]
        assert (cur["label"], cur["label_as_decided"]) == ("cg_stroke", "return_stroke")
        assert s.decisions(["hollowmere-2032"])["label"].tolist() == ["return_stroke"]
        assert s.class_history()["action"].tolist() == ["add", "rename", "add", "merge",
                                                        "merge", "hide"]

    # the review page now offers the three visible classes; a merged class's probability
    # is that of the union of the model classes merged: p_recoil + p_stepped_leader
    with _Served(season, store, "tamsin") as client:
        info = client.json("GET", "/api/session")[1]
        assert [c["name"] for c in info["classes"]] == ["narrow_bipolar", "cg_stroke",
                                                        "leader_pulse"]
        second = client.json("GET", "/api/current")[1]["pulse"]["event_id"]
        assert second != first
        assert client.json("POST", "/api/decision", {"event_id": second, "action": "label",
                                                     "label": "leader_pulse"})[0] == 200
    with LabelStore(store, create=False) as s:
        d = s.decisions(["hollowmere-2032"]).iloc[-1]
    assert d["label"] == "leader_pulse"
    assert_allclose(d["confidence"], res.at[second, "p_recoil"]
                    + res.at[second, "p_stepped_leader"], rtol=1e-12)

    # the old results' report says what each of its classes is in the store now
    _run("report", season["results"], "--out", report, "--store", store)
    rows = _class_rows(report.read_text(encoding="utf-8"))
    assert list(rows)[-1] == "leader_pulse" and rows["leader_pulse"][0] == "0"
    assert rows["return_stroke"][-1] == "now cg_stroke (renamed or merged)"
    assert rows["recoil"][-1] == "now leader_pulse (renamed or merged)"
    assert rows["energetic_in_cloud"][-1] == "hidden in the store"

    # a retrain sees the mapped classes, without the hidden one (and says how many)
    v2 = season["root"] / "models" / f"{tmp_path.name}-v2"
    with caplog.at_level(logging.WARNING, logger="pulsesort"):
        _run("train", season["a"], "--store", store, "--out", v2, *FAST_TRAIN)
    n_hidden = int(truth["energetic_in_cloud"])
    assert (f"hollowmere-2031: {n_hidden} labelled pulse(s) of hidden class(es) left out of "
            f"training (energetic_in_cloud: {n_hidden})") in caplog.text
    card = _card(v2)
    assert sorted(card["classes"]) == ["cg_stroke", "leader_pulse", "narrow_bipolar"]
    assert card["labels_per_season"]["2031"] == {
        "cg_stroke": int(truth["return_stroke"]),
        "leader_pulse": int(truth["recoil"] + truth["stepped_leader"]),
        "narrow_bipolar": int(truth["narrow_bipolar"])}
    assert card["n_training_pulses"] == 300 - n_hidden


def test_review_page_shows_five_class_buttons_and_records_return_stroke(season, tmp_path):
    """In Chromium: five class buttons in the store's order; a click records return_stroke."""
    from .test_review_browser import CHROMIUM, CHROMIUM_ARGS, _need_browser, _settled

    _need_browser()
    sync_api = pytest.importorskip("playwright.sync_api")
    store = _copy_store(season, tmp_path)
    served = _Served(season, store, "wren")
    with served, sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1366, "height": 768})
            errors = []
            page.on("pageerror", lambda e: errors.append(str(e)))
            page.goto(served.server.url)
            eid = _settled(page)
            buttons = page.locator("#class-buttons button.class-button")
            assert buttons.count() == 5
            texts = [buttons.nth(i).text_content() for i in range(5)]
            for i, name in enumerate([*STANDARD, "return_stroke"]):
                assert name in texts[i] and str(i + 1) in texts[i]
            buttons.nth(4).click()
            _settled(page, eid)
            assert errors == []
        finally:
            browser.close()
    with LabelStore(store, create=False) as s:
        d = s.decisions(["hollowmere-2032"])
    assert d[["event_id", "label", "analyst"]].values.tolist() == [[eid, "return_stroke",
                                                                     "wren"]]


def test_a_season_fit_keeps_the_groups_classes_where_the_model_is_sure(season, tmp_path):
    """Fitted on the season, the pulses the five-class model is sure of keep its class:
    the rules' "other" (a pulse no rule class fits, as a return stroke is to the rules)
    does not overrule the group's model, nor the fitted one. Self-consistency on
    invented data."""
    plain = read_results(season["results"])
    sure = (plain["confidence"] >= 0.95) & ~plain["needs_review"].astype(bool)
    _run("triage", season["b"], "--rules", "--out", tmp_path / "rules.csv")
    rules_other = sure & (read_results(tmp_path / "rules.csv")["label"] == "other")
    assert rules_other.sum() >= 5                  # the rules alone call them "other"
    _run("triage", season["b"], "--model", season["model"], "--out", tmp_path / "fit.csv",
         "--season-fit", "always")
    fitted = read_results(tmp_path / "fit.csv")
    assert fitted["adaptation"].str.contains("fitted on the season").all()
    assert (fitted.loc[sure, "label"] == plain.loc[sure, "label"]).mean() >= 0.99
    assert not (fitted.loc[sure, "label"] == "other").any()
    # nor anywhere else: with a trained model, its novelty, not the rules' "other",
    # flags a class it does not know
    assert not (fitted["label"] == "other").any()
