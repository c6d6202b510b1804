"""End to end in a real headless Chromium (Playwright): decide pulses by keyboard on the page."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from numpy.testing import assert_allclose

from classify.labels import LabelStore
from classify.review import ReviewSession, make_server
from classify.triage import read_results
from features import open_catalog

from ._review_testkit import XSS_ID, triaged_catalog

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync"]
NOTE = "<script>window.__pwned=2</script><img src=x onerror=alert(2)> two pulses?"

pytestmark = pytest.mark.browser


def _need_browser():
    if CHROMIUM.exists():
        return
    if os.environ.get("PULSESORT_REQUIRE_BROWSER") == "1":
        pytest.fail(f"{CHROMIUM} is missing but PULSESORT_REQUIRE_BROWSER=1")
    pytest.skip(f"{CHROMIUM} not installed (Debian package 'chromium'); set "
                "PULSESORT_REQUIRE_BROWSER=1 to make this a failure")


@pytest.fixture
def page_and_server(tmp_path):
    """A running review server on a triaged simulated catalog, and a Chromium page."""
    _need_browser()
    try:
        from playwright import sync_api
    except ImportError:
        if os.environ.get("PULSESORT_REQUIRE_BROWSER") == "1":
            raise
        pytest.skip("the Python package playwright is not installed (pulsesort[test])")
    cat_dir, out = triaged_catalog(tmp_path / "data")
    results = read_results(out)
    session = ReviewSession(results, open_catalog(cat_dir), tmp_path / "labels.sqlite",
                            "wren")
    server = make_server(session)
    server.start_background()
    with sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": 1400, "height": 1000})
        try:
            yield page, server, results, tmp_path
        finally:
            browser.close()
            server.shutdown()
            server.server_close()


def store_marks_standing(server):
    """The analyst's standing review marks in the store, as (event_id, mark)."""
    with LabelStore(server.session.store_path) as store:
        m = store.review_marks(analyst="wren")
    return list(zip(m["event_id"], m["mark"]))


def _settled(page, previous=None):
    """Wait until no request is pending and (optionally) another pulse is on screen."""
    page.wait_for_function(
        "prev => document.body.dataset.pending === '0' && document.body.dataset.event "
        "!== undefined && document.body.dataset.event !== prev", arg=previous, timeout=20_000)
    return page.evaluate("document.body.dataset.event")


def test_keyboard_review_writes_exactly_those_decisions(page_and_server, capsys):
    """Five labels by key, a note, undo (z), unsure, skip and Backspace: the store holds exactly those."""
    page, server, results, tmp_path = page_and_server
    dialogs, errors = [], []
    page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.on("requestfailed", lambda r: errors.append(f"request failed: {r.url}"))
    outside = []
    page.on("request", lambda r: None if r.url.startswith((f"http://127.0.0.1:{server.port}/",
                                                           "blob:")) else outside.append(r.url))
    page.goto(server.url)
    eid = _settled(page)
    # the event id with markup is shown as text, nothing of it ran
    assert eid == XSS_ID
    assert page.text_content("#event-id") == XSS_ID
    assert page.evaluate("document.querySelectorAll('script').length") == 1
    assert page.evaluate("document.querySelectorAll('img[src=\"x\"]').length") == 0
    assert page.evaluate("window.__pwned") is None
    assert page.evaluate("document.getElementById('plot-field').naturalWidth") > 0
    n_queued = server.session.n_queued
    assert page.text_content("#counter") == f"reviewed 0 / queued {n_queued}"

    keys = [("1", "narrow_bipolar"), ("3", "recoil"), ("2", "stepped_leader"),
            ("4", "energetic_in_cloud"), ("1", "narrow_bipolar")]
    decided = []
    for i, (key, label) in enumerate(keys):
        note = None
        if i == 2:  # a note, typed in the field, then Esc to leave it
            page.click("#note")
            page.keyboard.type(NOTE)
            page.keyboard.press("Escape")
            note = NOTE
        page.keyboard.press(key)
        decided.append((eid, label, note))
        eid = _settled(page, eid)
        if i == 2:
            assert NOTE in page.text_content("#last")
            assert page.input_value("#note") == ""
    assert page.text_content("#counter") == f"reviewed 5 / queued {n_queued}"
    # undo the fifth decision: that pulse comes back
    page.keyboard.press("z")
    eid = _settled(page, eid)
    assert eid == decided[-1][0]
    assert page.text_content("#counter") == f"reviewed 4 / queued {n_queued}"
    undone = decided.pop()
    page.keyboard.press("u")
    unsure_id = eid
    eid = _settled(page, eid)
    page.keyboard.press("s")                     # skip, then take it back with Backspace
    skipped = eid
    eid = _settled(page, eid)
    page.keyboard.press("Backspace")
    eid = _settled(page, eid)
    assert eid == skipped
    assert page.text_content("#counter") == f"reviewed 5 / queued {n_queued}"
    shot = tmp_path / "review-page.png"
    page.screenshot(path=str(shot), full_page=True)
    with capsys.disabled():
        print(f"\nreview page screenshot: {shot}")
    assert shot.stat().st_size > 10_000

    assert dialogs == [] and errors == [] and outside == []
    assert page.evaluate("window.__pwned") is None
    assert page.evaluate("document.querySelectorAll('img[src=\"x\"]').length") == 0

    res = results.set_index("event_id")
    with LabelStore(server.session.store_path) as store:
        dec = store.decisions()
        cur = store.current_labels(status="labelled")
        marks = store.review_marks(history=True)
    review = dec[dec["origin"] == "review"]
    assert len(dec) == 6 and len(review) == 5
    assert review["event_id"].tolist() == [d[0] for d in decided] + [undone[0]]
    assert review["label"].tolist() == [d[1] for d in decided] + [undone[1]]
    assert (review["analyst"] == "wren").all()
    assert (review["model_version"] == "rules-2").all()
    expected_conf = [res.at[e, f"p_{lab}"] for e, lab, _ in decided + [undone]]
    assert_allclose(review["confidence"].to_numpy(), expected_conf, rtol=1e-9)
    assert review["note"].tolist()[2] == NOTE
    assert review["note"].isna().sum() == 4
    retract = dec[dec["origin"] == "retract"]
    assert retract["event_id"].tolist() == [undone[0]]
    assert sorted(zip(cur["event_id"], cur["label"])) == sorted((e, lab) for e, lab, _ in decided)
    assert marks[["event_id", "mark", "analyst"]].values.tolist() == [
        [unsure_id, "unsure", "wren"], [skipped, "skip", "wren"], [skipped, "withdrawn", "wren"]]
    assert_allclose(marks["confidence"].iloc[:2], [res.at[unsure_id, "confidence"],
                                                   res.at[skipped, "confidence"]], rtol=1e-9)
    assert store_marks_standing(server) == [(unsure_id, "unsure")]
