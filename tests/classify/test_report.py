"""Tests of classify.report and ``pulsesort report``: a self-contained HTML triage summary."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser

import pandas as pd
import pytest

from classify.cli import main
from classify.report import build_report, hourly_counts, review_load, write_report
from classify.triage import read_results
from features import open_catalog

from ._review_testkit import XSS_ID, triaged_catalog


@pytest.fixture(scope="module")
def triaged(tmp_path_factory):
    """A simulated catalog and its real rules-mode triage (made once for this module)."""
    return triaged_catalog(tmp_path_factory.mktemp("report"))


class _Collect(HTMLParser):
    """Tags, attributes and text of an HTML document."""

    def __init__(self):
        super().__init__()
        self.tags, self.attrs, self.text = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs += attrs

    def handle_data(self, data):
        self.text.append(data)


def test_hourly_counts_by_hand():
    """Pulses at 21:05, 21:50 and 23:10 fill hours 21 (2), 22 (0) and 23 (1)."""
    df = pd.DataFrame({
        "event_id": ["a", "b", "c"], "label": ["recoil", "narrow_bipolar", "recoil"],
        "time_utc": pd.to_datetime(["2031-07-14T21:05:00Z", "2031-07-14T21:50:00Z",
                                    "2031-07-14T23:10:00Z"], utc=True),
        "p_narrow_bipolar": [0.1, 0.9, 0.2], "p_recoil": [0.9, 0.1, 0.8]})
    h = hourly_counts(df)
    assert list(h.columns) == ["narrow_bipolar", "recoil"]
    assert [t.hour for t in h.index] == [21, 22, 23]
    assert h["recoil"].tolist() == [1, 0, 1] and h["narrow_bipolar"].tolist() == [1, 0, 0]


def test_review_load_counts_each_reason():
    """A pulse with two reasons counts once under each; shares are of all pulses."""
    df = pd.DataFrame({"review_reason": ["low_confidence;novel", "novel", "", "clipped"]})
    load = review_load(df)
    assert load.loc["novel", "n"] == 2 and load.loc["low_confidence", "n"] == 1
    # a reason of an older results file is still counted; a known one not seen is 0
    assert load.loc["clipped", "n"] == 1 and load.loc["field_unusable", "n"] == 0
    assert load.loc["novel", "share"] == pytest.approx(0.5)


def test_report_is_self_contained_and_matches_the_results(triaged, tmp_path):
    """No script, no external resource; counts, hours and reasons agree with the results file."""
    cat_dir, out = triaged
    html_path = write_report(out, tmp_path / "report.html", catalog=cat_dir)
    html = html_path.read_text(encoding="utf-8")
    p = _Collect()
    p.feed(html)
    assert "script" not in p.tags and "link" not in p.tags and "iframe" not in p.tags
    assert not [a for a in p.attrs if a[0] in ("src", "href")]
    urls = set(re.findall(r"https?://[^\s\"'<>]+", html))
    assert urls <= {"http://www.w3.org/2000/svg"}
    for svg in re.findall(r"<svg.*?</svg>", html, flags=re.S):
        ET.fromstring(svg)                       # each inline chart is well-formed XML
    res = read_results(out)
    text = " ".join(p.text)
    for label, n in res["label"].value_counts().items():
        assert re.search(rf"{label}\s+{n}\s", text), label
    hours = hourly_counts(res)
    assert int(hours.to_numpy().sum()) == len(res)
    n_review = int(res["needs_review"].sum())
    assert f"{n_review:,} of {len(res):,} pulses need review" in text
    n_novel = int(res["review_reason"].str.contains("novel").sum())
    assert re.search(rf"novel\s+{n_novel}\s", text)
    assert "Example waveforms" in html and html.count("<figure>") >= 2
    assert "<script" not in html.lower()


def test_text_from_the_data_is_escaped(triaged):
    """An event id with markup, shown as an example, appears escaped and never as a tag."""
    cat_dir, out = triaged
    res = read_results(out)
    sure = res["event_id"] == XSS_ID
    assert sure.sum() == 1
    res.loc[sure, ["needs_review", "confidence"]] = [False, 1.0]   # make it the top example
    html = build_report(res, catalog=open_catalog(cat_dir), title="<b>season</b>")
    assert "&lt;script&gt;window.__pwned=1&lt;/script&gt;" in html
    assert XSS_ID not in html and "<script" not in html.lower()
    assert "<b>season</b>" not in html and "&lt;b&gt;season&lt;/b&gt;" in html


def test_report_without_catalog_says_how_to_get_waveforms(triaged, tmp_path):
    """Without --catalog there are no waveforms and a hint instead."""
    _, out = triaged
    html = build_report(read_results(out))
    assert "<figure>" not in html and "--catalog" in html


def test_report_is_written_atomically_and_bad_input_exits_2(triaged, tmp_path, capsys):
    """A failed run leaves the old report untouched and no temporary file behind."""
    cat_dir, out = triaged
    target = tmp_path / "r.html"
    target.write_text("old report")
    bad = tmp_path / "bad.csv"
    bad.write_text("event_id,label\na,recoil\n")
    assert main(["report", str(bad), "--out", str(target)]) == 2
    assert "not a pulsesort triage results file" in capsys.readouterr().err
    assert target.read_text() == "old report"
    assert sorted(x.name for x in tmp_path.iterdir()) == ["bad.csv", "r.html"]
    assert main(["report", str(out), "--out", str(tmp_path / "absent" / "r.html")]) == 2
    other = open_catalog(cat_dir)
    with pytest.raises(ValueError, match="not of"):
        build_report(read_results(out).assign(catalog_id="elsewhere-2040"), catalog=other)
    assert main(["report", str(out), "--out", str(target)]) == 0
    assert target.read_text().startswith("<!doctype html>")
    assert sorted(x.name for x in tmp_path.iterdir()) == ["bad.csv", "r.html"]


def test_distribution_samples_by_hand():
    """Widths 1-100 µs span two decades: log10 of µs; bipolarity with zeros stays linear."""
    from classify.report import distribution_samples

    df = pd.DataFrame({"label": ["a", "a", "a", "b", "b", "b"],
                       "width_s": [1e-6, 1e-5, 1e-4, 1e-6, 2e-6, float("nan")],
                       "bipolarity": [0.0, 0.5, 0.2, 0.4, 0.1, 0.3],
                       "p_a": 0.5, "p_b": 0.5})
    samples, label = distribution_samples(df, "width_s")
    assert label == "log10 of width (µs)"
    assert samples[0] == pytest.approx([0.0, 1.0, 2.0])
    assert samples[1] == pytest.approx([0.0, 0.30103], abs=1e-5)   # log10(2)
    samples, label = distribution_samples(df, "bipolarity")
    assert label == "bipolarity (1)"
    assert samples[0] == pytest.approx([0.0, 0.5, 0.2]) and len(samples[1]) == 3


def test_report_shows_feature_distributions_per_class(triaged):
    """One SVG histogram per main feature, each x axis with its unit, every class named."""
    from classify.figures import MAIN_FEATURES

    _, out = triaged
    res = read_results(out)
    html = build_report(res)
    section = html.split("<h2>Feature distributions per class</h2>")[1].split("<h2>")[0]
    svgs = re.findall(r"<svg.*?</svg>", section, flags=re.S)
    expected = [n for n, _ in MAIN_FEATURES if res[n].notna().any()]
    assert len(svgs) == len(expected) >= 6
    for svg in svgs:
        texts = [t.text or "" for t in ET.fromstring(svg).iter("{http://www.w3.org/2000/svg}text")]
        assert any(re.search(r"\([^()]+\)$", t) for t in texts), texts
    for c in res["label"].unique():
        assert f"&#9632; {c}</span>" in section


def _class_rows(html: str) -> dict[str, list[str]]:
    """The rows of the report's class table (the first table after <h2>Classes</h2>)."""
    part = html.split("<h2>Classes</h2>", 1)[1].split("</table>", 1)[0]
    rows = re.findall(r"<tr>(.*?)</tr>", part.split("<tbody>", 1)[1])
    return {cells[0]: cells[1:] for cells in
            (re.findall(r"<td>(.*?)</td>", r) for r in rows)}


def test_report_lists_the_store_classes_and_their_state(triaged, tmp_path, capsys):
    """With --store: the store's new classes are listed (0 pulses) and renamed ones say so."""
    from classify.labels import LabelStore

    cat_dir, out = triaged
    store = tmp_path / "labels.sqlite"
    with LabelStore(store) as s:
        s.add_class("return_stroke", "CG return stroke", analyst="wren")
        s.rename_class("recoil", "k_change", analyst="wren")
        s.hide_class("energetic_in_cloud")
    html_out = tmp_path / "r.html"
    assert main(["-q", "report", str(out), "--out", str(html_out), "--store", str(store)]) == 0
    html = html_out.read_text(encoding="utf-8")
    rows = _class_rows(html)
    # the rules' four classes (p_ columns), 'other' where the rules placed none, then
    # the store's classes the results lack
    four = ["energetic_in_cloud", "narrow_bipolar", "recoil", "stepped_leader"]
    other = ["other"] if (read_results(out)["label"] == "other").any() else []
    assert list(rows) == four + other + ["k_change", "return_stroke"]
    assert rows["return_stroke"][0] == "0" and rows["return_stroke"][-1] == "store class"
    assert rows["recoil"][-1] == "now k_change (renamed or merged)"
    assert rows["energetic_in_cloud"][-1] == "hidden in the store"
    assert rows["narrow_bipolar"][-1] == "store class"
    # the hourly table has a column for every listed class
    assert "<th>return_stroke</th>" in html.split("Class counts per hour", 1)[1]
    # without the store: the results' classes only, no store column
    assert main(["-q", "report", str(out), "--out", str(html_out)]) == 0
    rows = _class_rows(html_out.read_text(encoding="utf-8"))
    assert list(rows) == four + other
    assert all(len(r) == 4 for r in rows.values())
    code = main(["report", str(out), "--out", str(html_out), "--store", str(tmp_path / "no")])
    assert code == 2 and "no label store here" in capsys.readouterr().err
