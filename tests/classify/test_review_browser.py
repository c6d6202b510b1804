"""End to end in a real headless Chromium (Playwright): the review page as an analyst uses it.

The catalogs are simulated (invented data, for self-consistency) and really triaged;
the server, the label store and the browser are the real ones.
"""

from __future__ import annotations

import os
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose

from classify.labels import LabelStore
from classify.review import REVIEW_REASONS, ReviewSession, make_server, record_trace
from classify.triage import read_results
from features import open_catalog

from ._review_testkit import XSS_ID, triaged_catalog

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync"]
NOTE = "<script>window.__pwned=2</script><img src=x onerror=alert(2)> two pulses?"
SCREENS = [(1366, 768), (1920, 1080)]

pytestmark = pytest.mark.browser


def _need_browser():
    if CHROMIUM.exists():
        return
    if os.environ.get("PULSESORT_REQUIRE_BROWSER") == "1":
        pytest.fail(f"{CHROMIUM} is missing but PULSESORT_REQUIRE_BROWSER=1")
    pytest.skip(f"{CHROMIUM} not installed (Debian package 'chromium'); set "
                "PULSESORT_REQUIRE_BROWSER=1 to make this a failure")


@pytest.fixture(scope="module")
def browser():
    """One headless Chromium for the module."""
    _need_browser()
    try:
        from playwright import sync_api
    except ImportError:
        if os.environ.get("PULSESORT_REQUIRE_BROWSER") == "1":
            raise
        pytest.skip("the Python package playwright is not installed (pulsesort[test])")
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            yield b
        finally:
            b.close()


@pytest.fixture(scope="module")
def triaged(tmp_path_factory):
    """A simulated catalog with x/y/z sources and its real rules-mode triage."""
    return triaged_catalog(tmp_path_factory.mktemp("review-browser"))


@contextmanager
def served_page(browser, cat_dir, results_csv, store, size=(1366, 768), **session_kw):
    """A review server on a fresh session and a Chromium page showing it, settled."""
    results = read_results(results_csv)
    session = ReviewSession(results, open_catalog(cat_dir), store, "wren", **session_kw)
    server = make_server(session)
    server.start_background()
    page = browser.new_page(viewport={"width": size[0], "height": size[1]})
    errors = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    try:
        page.goto(server.url)
        _settled(page)
        yield page, server, results, errors
    finally:
        page.close()
        server.shutdown()
        server.server_close()


def _settled(page, previous=None):
    """Wait until no request is pending and (optionally) another pulse is on screen."""
    page.wait_for_function(
        "prev => document.body.dataset.pending === '0' && document.body.dataset.event "
        "!== undefined && document.body.dataset.event !== prev", arg=previous, timeout=20_000)
    return page.evaluate("document.body.dataset.event")


def _time_range(page, plot_id):
    """The time range (µs) a time plot shows now, from its data attributes."""
    d = page.evaluate("id => { const c = document.getElementById(id); "
                      "return [Number(c.dataset.t0Us), Number(c.dataset.t1Us)]; }", plot_id)
    return tuple(d)


def _box(page, selector):
    return page.locator(selector).first.bounding_box()


def store_marks_standing(server):
    """The analyst's standing review marks in the store, as (event_id, mark)."""
    with LabelStore(server.session.store_path) as store:
        m = store.review_marks(analyst="wren")
    return list(zip(m["event_id"], m["mark"]))


def test_keyboard_review_writes_exactly_those_decisions(browser, triaged, tmp_path, capsys):
    """Five labels by key, a note, undo (z), unsure, skip and Backspace: the store holds exactly those."""
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "labels.sqlite",
                     size=(1400, 1000)) as (page, server, results, errors):
        dialogs, outside = [], []
        page.on("dialog", lambda d: (dialogs.append(d.message), d.dismiss()))
        page.on("requestfailed", lambda r: errors.append(f"request failed: {r.url}"))
        page.on("request", lambda r: None if r.url.startswith(
            f"http://127.0.0.1:{server.port}/") else outside.append(r.url))
        page.reload()
        eid = _settled(page)
        # the event id with markup is shown as text, nothing of it ran
        assert eid == XSS_ID
        assert page.text_content("#event-id") == XSS_ID
        assert page.evaluate("document.querySelectorAll('script').length") == 3
        assert page.evaluate("document.querySelectorAll('img[src=\"x\"]').length") == 0
        assert page.evaluate("window.__pwned") is None
        assert len(page.get_attribute("#plot-field svg path.trace", "d")) > 100
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
    assert (review["model_version"] == "rules-4").all()
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


@pytest.mark.parametrize("size", SCREENS, ids=lambda s: f"{s[0]}x{s[1]}")
def test_waveforms_reason_and_decision_row_share_the_first_screen(browser, triaged, tmp_path,
                                                                   size):
    """Without scrolling: field and VHF plots, the queue reason and every decision button are in view.

    After scrolling to the end, the decision row is still in view and nothing below it
    (look-alikes, features) is hidden under it.
    """
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "s.sqlite", size=size) as (
            page, server, _, errors):
        w, h = size
        assert page.evaluate("window.scrollY") == 0
        bar = _box(page, "#decide")
        assert bar["y"] + bar["height"] <= h + 0.5 and bar["y"] > h / 2
        buttons = page.locator("#decide button")
        assert buttons.count() == 4 + 3
        for i in range(buttons.count()):
            b = buttons.nth(i).bounding_box()
            assert 0 <= b["x"] and b["x"] + b["width"] <= w, i
            assert 0 <= b["y"] and b["y"] + b["height"] <= h, i
        for sel in ("#plot-field svg", "#plot-vhf svg", "#review-reason", "#queue-rank",
                    "#model-label"):
            b = _box(page, sel)
            assert b is not None and b["y"] >= 0 and b["y"] + b["height"] <= bar["y"] + 0.5, \
                (sel, b, bar)
        if w >= 1700:  # a wide screen has room for the sources in the first screen too
            b = _box(page, "#plot-altitude svg")
            assert b["y"] + b["height"] <= bar["y"] + 0.5
        page.evaluate("window.scrollTo(0, document.documentElement.scrollHeight)")
        page.wait_for_function("() => window.scrollY > 0")
        bar2 = _box(page, "#decide")
        assert bar2 == bar
        for sel in ("#lookalikes", "#key-features"):
            b = _box(page, sel)
            assert b["y"] + b["height"] <= bar2["y"] + 0.5, sel
        assert errors == []


def test_zoom_and_pan_move_field_and_vhf_time_axes_together(browser, triaged, tmp_path):
    """Keys (+, -, arrows, 0) and the wheel change the field plot's time range, the VHF plot's with it."""
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "s.sqlite") as (page, _, _, errors):
        t0 = _time_range(page, "plot-field")
        assert _time_range(page, "plot-vhf") == t0
        ticks0 = page.eval_on_selector_all("#plot-field text.tick", "ts => ts.map(t => "
                                           "t.textContent)")
        page.keyboard.press("+")
        t1 = _time_range(page, "plot-field")
        assert _time_range(page, "plot-vhf") == t1
        assert_allclose(t1[1] - t1[0], (t0[1] - t0[0]) / 1.5, rtol=1e-9)
        assert_allclose(sum(t1) / 2, sum(t0) / 2, rtol=1e-9, atol=1e-9)  # about the centre
        assert page.eval_on_selector_all("#plot-field text.tick",
                                         "ts => ts.map(t => t.textContent)") != ticks0
        page.keyboard.press("ArrowRight")
        t2 = _time_range(page, "plot-field")
        assert_allclose(t2[0] - t1[0], 0.25 * (t1[1] - t1[0]), rtol=1e-9)
        assert _time_range(page, "plot-vhf") == t2
        # the wheel over the field plot zooms out about the pointer
        box = _box(page, "#plot-field")
        page.mouse.move(box["x"] + box["width"] * 0.5, box["y"] + box["height"] * 0.5)
        page.mouse.wheel(0, 300)
        page.wait_for_function("w => { const c = document.getElementById('plot-field'); "
                               "return Number(c.dataset.t1Us) - Number(c.dataset.t0Us) > w; }",
                               arg=(t2[1] - t2[0]) * 1.2)
        t3 = _time_range(page, "plot-field")
        assert _time_range(page, "plot-vhf") == t3
        assert t3[1] - t3[0] > t2[1] - t2[0]
        # the overview's band is the range shown
        band = page.eval_on_selector("#plot-overview rect.view-band",
                                     "r => [Number(r.getAttribute('x')), "
                                     "Number(r.getAttribute('width'))]")
        assert band[1] > 0
        page.keyboard.press("0")
        assert _time_range(page, "plot-field") == t0 == _time_range(page, "plot-vhf")
        page.click("#zoom-out")
        t4 = _time_range(page, "plot-field")
        assert t4[1] - t4[0] > t0[1] - t0[0] and _time_range(page, "plot-vhf") == t4
        assert errors == []


def test_help_opens_on_question_mark_and_closes_on_escape(browser, triaged, tmp_path):
    """'?' shows every key and every review reason in words; keys do nothing else while it is open."""
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "s.sqlite") as (page, server, _, errors):
        assert page.is_hidden("#help")
        page.keyboard.press("?")
        assert page.is_visible("#help")
        text = page.text_content("#help")
        for key in ("1", "2", "3", "4", "u", "s", "z", "Backspace", "+", "0", "Esc", "?"):
            assert key in page.eval_on_selector_all("#help-keys kbd",
                                                    "ks => ks.map(k => k.textContent)"), key
        for name in ("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud"):
            assert f"label the pulse {name}" in text
        for words in REVIEW_REASONS.values():
            assert words in text
        assert "priority = uncertainty + 0.5 x novelty rank" in text
        page.keyboard.press("1")                 # not a decision while the help is open
        assert page.is_visible("#help")
        page.keyboard.press("Escape")
        assert page.is_hidden("#help")
        assert server.session.n_reviewed == 0
        page.click("#btn-help")
        assert page.is_visible("#help")
        page.keyboard.press("Escape")
        assert page.is_hidden("#help")
        assert errors == []


def test_priority_is_shown_with_its_parts(browser, triaged, tmp_path):
    """'priority P = U uncertainty + N novelty (0.5 × novelty rank R)', the numbers of the queue."""
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "s.sqlite") as (page, server, _, _):
        q = server.session.queue.iloc[0]
        line = page.text_content("#queue-rank")
        assert line == (f"queue rank 1 of {server.session.n_queued} · priority "
                        f"{q['priority']:.2f} = {q['uncertainty']:.2f} uncertainty + "
                        f"{0.5 * q['novelty_rank']:.2f} novelty (0.5 × novelty rank "
                        f"{q['novelty_rank']:.2f})")
        reasons = page.eval_on_selector_all("#review-reason li", "ls => ls.map(l => "
                                            "l.textContent)")
        codes = str(q["review_reason"]).split(";")
        assert [r.split(":")[0] for r in reasons] == [c.replace("_", " ") for c in codes]


def test_altitude_and_plan_views_exist_with_positions_only(browser, triaged, tmp_path):
    """With x/y/z: altitude-time and plan views (earlier channel under them); without: neither."""
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "a.sqlite", size=(1920, 1080)) as (
            page, server, _, errors):
        assert page.is_visible("#plot-altitude svg") and page.is_visible("#plot-plan svg")
        assert page.is_hidden("#plot-elevation")
        view = server.session.current()["pulse"]
        n_own = len(view["sources"]["t_s"])
        assert page.locator("#plot-altitude g.own circle").count() == n_own
        assert page.locator("#plot-plan g.own circle").count() == n_own
        earlier = view["sources"]["earlier"]
        n_early = 0 if earlier is None else earlier["n_sources"]
        assert page.locator("#plot-plan g.earlier circle").count() == n_early
        assert page.locator("#src-colourbar svg rect").count() > 10
        assert "source time from trigger (µs)" in page.text_content("#src-colourbar")
        assert errors == []
    # no positions (and no VHF channel either): no altitude or plan view, no VHF plot
    bare_dir, bare_out = triaged_catalog(tmp_path / "bare", simulate_args=[
        "--no-xyz", "--no-range", "--no-vhf"])
    with served_page(browser, bare_dir, bare_out, tmp_path / "b.sqlite",
                     size=(1920, 1080)) as (page, server, _, errors):
        pulse = server.session.current()["pulse"]
        assert pulse["sources"]["position"] is None and pulse["trace"]["vhf_envelope"] is None
        assert page.is_hidden("#plot-altitude") and page.is_hidden("#plot-plan")
        assert page.is_visible("#plot-elevation svg") and page.is_visible("#plot-sky svg")
        assert page.locator("#plot-altitude svg").count() == 0
        assert page.is_hidden("#plot-vhf") and "no VHF record" in page.text_content("#notes")
        t0 = _time_range(page, "plot-field")
        page.keyboard.press("+")
        assert _time_range(page, "plot-field") != t0
        assert page.evaluate(_LABEL_CHECK)["problems"] == []
        assert errors == []


def _injected_trace(extent_us=(-0.5, 2.0), neighbours_us=(-25.0, 6.0, 60.0)):
    """A trace function adding an extent and neighbours to the real record (injected values)."""
    def trace(catalog, row):
        tr = record_trace(catalog, row)
        tr["extent_s"] = (extent_us[0] * 1e-6, extent_us[1] * 1e-6)
        tr["neighbours_s"] = np.array(neighbours_us) * 1e-6
        tr["neighbour_peaks_v_per_m"] = np.array([1.5, -0.7, 0.9])
        return tr
    return trace


def _attributions(res):
    return [("rise_time_s", 0.8), ("bipolarity", -0.3), ("width_s", 0.05)]


_LABEL_CHECK = """() => {
  const problems = [];
  let nTexts = 0;
  const shown = el => { const b = el.getBoundingClientRect(); return b.width > 0 && b.height > 0; };
  const overlap = (a, b) => a.left < b.right - 0.5 && b.left < a.right - 0.5 &&
                            a.top < b.bottom - 0.5 && b.top < a.bottom - 0.5;
  const svgs = [...document.querySelectorAll('main svg')].filter(shown);
  for (const s of svgs) {
    const id = s.parentElement.id || s.parentElement.className;
    const sb = s.getBoundingClientRect();
    const texts = [...s.querySelectorAll('text')].map(t => [t.textContent, t.getBoundingClientRect()]);
    nTexts += texts.length;
    for (const [name, b] of texts) {
      if (b.left < sb.left - 0.5 || b.right > sb.right + 0.5 || b.top < sb.top - 0.5 ||
          b.bottom > sb.bottom + 0.5) { problems.push(['outside', id, name]); }
    }
    for (let i = 0; i < texts.length; i++) {
      for (let j = i + 1; j < texts.length; j++) {
        if (overlap(texts[i][1], texts[j][1])) { problems.push(['overlap', id, texts[i][0], texts[j][0]]); }
      }
    }
  }
  for (const ul of document.querySelectorAll('.legend')) {
    const items = [...ul.querySelectorAll('li')].filter(shown).map(l => [l.textContent, l.getBoundingClientRect()]);
    for (let i = 0; i < items.length; i++) {
      for (let j = i + 1; j < items.length; j++) {
        if (overlap(items[i][1], items[j][1])) { problems.push(['legend', ul.id, items[i][0], items[j][0]]); }
      }
    }
  }
  return {nSvgs: svgs.length, nTexts: nTexts, problems: problems};
}"""


@pytest.mark.parametrize("size", SCREENS, ids=lambda s: f"{s[0]}x{s[1]}")
def test_plot_labels_never_overlap_or_leave_their_plot(browser, triaged, tmp_path, size):
    """Every text of every plot stays inside its SVG and overlaps no other (bounding boxes).

    The peak markers are named in the legend, not beside their lines, so close peaks
    (the VHF peak is a fraction of a microsecond before the field peak) cannot collide.
    Checked at the first view, zoomed far in, and with extent, neighbours and attributions.
    """
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "s.sqlite", size=size,
                     trace=_injected_trace(), attributions=_attributions) as (
            page, server, _, errors):
        legend = page.text_content("#legend-field")
        assert "field peak" in legend and "VHF peak" in legend and "pulse extent" in legend
        markers = page.eval_on_selector_all("#plot-field svg text",
                                            "ts => ts.map(t => t.textContent)")
        assert "field peak" not in markers and "VHF peak" not in markers
        for step in ("first view", "+", "+", "+", "+", "+", "0", "-", "-", "-"):
            if step != "first view":
                page.keyboard.press(step)
            check = page.evaluate(_LABEL_CHECK)
            assert check["nSvgs"] >= 8 and check["nTexts"] > 60, check
            assert check["problems"] == [], (step, check["problems"])
        eid = page.evaluate("document.body.dataset.event")
        for _ in range(5):                      # other pulses, other shapes and ranges
            page.keyboard.press("s")
            eid = _settled(page, eid)
            assert page.evaluate(_LABEL_CHECK)["problems"] == [], eid
        assert errors == []


def test_extent_neighbours_and_why_are_drawn_from_the_pulse_json(browser, triaged, tmp_path):
    """Injected extent (shaded), neighbour times (ticks) and attributions (bars) land where they should."""
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "s.sqlite",
                     trace=_injected_trace(), attributions=_attributions) as (
            page, server, _, errors):
        pulse = server.session.current()["pulse"]
        assert_allclose(pulse["trace"]["extent_s"], [-0.5e-6, 2.0e-6], rtol=1e-6)
        assert_allclose(pulse["trace"]["neighbours_s"], [-25e-6, 6e-6, 60e-6], rtol=1e-6)
        assert pulse["why"] == [["rise_time_s", 0.8], ["bipolarity", -0.3], ["width_s", 0.05]]
        page.keyboard.press("-")
        page.keyboard.press("-")
        page.keyboard.press("-")                       # wide enough to show every neighbour
        t0, t1 = _time_range(page, "plot-field")
        left, right = page.evaluate("(() => { const c = document.getElementById('plot-field'); "
                                    "return [Number(c.dataset.plotLeft), "
                                    "Number(c.dataset.plotRight)]; })()")

        def px(t_us):
            return left + (t_us - t0) / (t1 - t0) * (right - left)

        rect = page.eval_on_selector("#plot-field rect.extent", "r => [Number(r.getAttribute"
                                     "('x')), Number(r.getAttribute('width'))]")
        assert_allclose(rect[0], px(-0.5), atol=0.6)
        assert_allclose(rect[0] + rect[1], px(2.0), atol=0.6)
        ticks = page.eval_on_selector_all("#plot-field line.neighbour",
                                          "ls => ls.map(l => Number(l.getAttribute('x1')))")
        inside = [t for t in (-25.0, 6.0, 60.0) if t0 <= t <= t1]
        assert len(inside) == 3
        assert_allclose(sorted(ticks), [px(t) for t in inside], atol=0.6)
        assert "other pulses in the record (3)" in page.text_content("#legend-field")
        bars = page.eval_on_selector_all("#plot-why svg text", "ts => ts.map(t => "
                                         "t.textContent)")
        assert {"rise_time_s", "bipolarity", "width_s", "+0.80", "-0.30"} <= set(bars)
        assert page.is_hidden("#why-none")
        assert errors == []
    with served_page(browser, cat_dir, out, tmp_path / "t.sqlite") as (page, server, _,
                                                                        errors):
        assert page.is_visible("#why-none")
        assert page.text_content("#why-none") == "not available for this model"
        # by default the page shows the extent the features measured (features.trace)
        pulse = server.session.current()["pulse"]
        assert pulse["trace"]["extent_s"] is not None
        assert "pulse extent: not available" not in page.text_content("#legend-field")
        assert page.locator("#plot-field rect.extent").count() == 1


def test_lookalikes_are_grouped_by_class_on_the_pulse_time_axis(browser, triaged, tmp_path):
    """After some labels: one group per class in question, each card of its class, zoom linked."""
    cat_dir, out = triaged
    with served_page(browser, cat_dir, out, tmp_path / "s.sqlite") as (page, server, _, errors):
        assert "No labelled pulses" in page.text_content("#lookalike-groups")
        eid = page.evaluate("document.body.dataset.event")
        for key in "1234123":
            page.keyboard.press(key)
            eid = _settled(page, eid)
        pulse = server.session.current()["pulse"]
        heads = page.eval_on_selector_all("#lookalike-groups .la-group h3",
                                          "hs => hs.map(h => h.firstChild.textContent)")
        assert heads == [g["class"] for g in pulse["lookalikes"]] and len(heads) >= 2
        for g in pulse["lookalikes"]:
            assert all(item["label"] == g["class"] for item in g["items"])
        n_cards = sum(len(g["items"]) for g in pulse["lookalikes"])
        assert n_cards > 0 and page.locator("figure.lookalike .la-plot svg").count() == n_cards
        width = page.locator(".la-plot").first.bounding_box()["width"]
        assert width >= 250                       # readable, not a thumbnail
        page.keyboard.press("+")
        field = _time_range(page, "plot-field")
        ranges = page.eval_on_selector_all(".la-plot", "cs => cs.map(c => [Number("
                                           "c.dataset.t0Us), Number(c.dataset.t1Us)])")
        assert ranges and all(tuple(r) == field for r in ranges)
        assert errors == []
