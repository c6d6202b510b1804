"""Drift between catalogs: PSI, KS, instrument changes, ranking, report and CLI."""

import json
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats

from classify.cli import main
from classify.drift import (
    PSI_EPS,
    SETTING_EFFECTS,
    compare_catalogs,
    feature_drift,
    instrument_changes,
    instrument_settings,
    population_stability_index,
    psi_band,
    read_feature_table,
)
from classify.drift_report import format_drift_text, render_drift_html, write_drift_html
from features import InputError, open_catalog, schema
from features.extract import extract_features, write_features
from tests.conftest import bipolar_field

FS = 10e6            # field sample rate, Hz
M = 2800             # samples: 100 us before the trigger, 180 us after
PRE = 1e-4
CLASSES = ("narrow_bipolar", "stepped_leader")


def _season_pulses(n, frac_nbe, seed):
    """Two invented pulse kinds: long strongly bipolar ones and short nearly unipolar ones."""
    rng = np.random.default_rng(seed)
    t = np.arange(M) / FS - PRE
    nbe = rng.uniform(size=n) < frac_nbe
    rows = []
    for is_nbe in nbe:
        amp = rng.uniform(3, 20) * rng.choice([-1, 1])
        if is_nbe:
            y = bipolar_field(t, rng.uniform(-1e-6, 1e-6), rng.uniform(0.4e-6, 0.8e-6),
                              rng.uniform(2e-6, 4e-6), rng.uniform(0.5, 0.8),
                              rng.uniform(6e-6, 12e-6), amp)
        else:
            y = bipolar_field(t, rng.uniform(-1e-6, 1e-6), rng.uniform(0.15e-6, 0.3e-6),
                              rng.uniform(0.4e-6, 0.9e-6), rng.uniform(0.02, 0.1),
                              rng.uniform(1e-6, 3e-6), amp)
        rows.append(y + rng.normal(0, 0.02, M))
    t0 = pd.Timestamp("2040-07-01T10:00:00Z")
    events = {"event_id": [f"p{i:03d}" for i in range(n)],
              "time_utc": [(t0 + pd.Timedelta(milliseconds=9 * i)).strftime(
                  "%Y-%m-%dT%H:%M:%S.%fZ") for i in range(n)],
              "flash_id": [f"f{i // 8}" for i in range(n)],
              "range_m": rng.uniform(20e3, 100e3, n)}
    labels = np.where(nbe, CLASSES[0], CLASSES[1])
    return np.array(rows, dtype=np.float32), events, labels


@pytest.fixture
def decay_pair(make_catalog):
    """Same 120 pulses twice; B's manifest declares a 20 us RC decay constant (A: DC)."""
    x, ev, _ = _season_pulses(120, 0.5, seed=1)
    a = make_catalog("a", x, events=ev, field_meta={"sample_rate_hz": FS},
                     catalog_id="testsite-2040")
    b = make_catalog("b", x, events=ev, field_meta={"sample_rate_hz": FS,
                                                    "decay_time_s": 2e-5},
                     catalog_id="testsite-2041")
    return open_catalog(a), open_catalog(b)


def test_psi_of_identical_samples_is_zero():
    """The same sample (NaNs and ties included) against itself: PSI exactly 0."""
    x = np.random.default_rng(0).normal(size=500)
    x[::7] = np.nan
    x[:50] = 1.0
    assert population_stability_index(x, x.copy()) == 0.0


def test_psi_closed_form_two_bins():
    """Median split of 0..99 vs an 80/20 sample: 0.3 ln 1.6 + 0.3 ln 2.5 (by hand)."""
    a = np.arange(100.0)
    b = np.r_[np.zeros(80), np.full(20, 99.0)]
    expected = (0.8 - 0.5) * np.log(0.8 / 0.5) + (0.2 - 0.5) * np.log(0.2 / 0.5)
    assert_allclose(population_stability_index(a, b, n_bins=2), expected, rtol=1e-12)
    assert_allclose(expected, 0.41589, atol=1e-5)


def test_psi_empty_bin_and_missing_bin():
    """An empty bin counts as eps; NaNs of B fill the missing-value bin (by hand)."""
    a = np.arange(100.0)
    all_low = np.zeros(50)
    expected = 0.5 * np.log(1 / 0.5) + (PSI_EPS - 0.5) * np.log(PSI_EPS / 0.5)
    assert_allclose(population_stability_index(a, all_low, n_bins=2), expected, rtol=1e-12)
    half_missing = np.r_[np.zeros(25), np.full(25, 99.0), np.full(50, np.nan)]
    expected = 2 * (0.25 - 0.5) * np.log(0.25 / 0.5) + (0.5 - PSI_EPS) * np.log(0.5 / PSI_EPS)
    assert_allclose(population_stability_index(a, half_missing, n_bins=2), expected,
                    rtol=1e-12)


def test_psi_bands():
    """Bands at 0.1 and 0.25 (common practice, no source)."""
    assert [psi_band(v) for v in (0.05, 0.1, 0.25, 0.3, np.nan)] == [
        "stable", "moderate", "moderate", "major", ""]


def _frames(rng, n, shift=0.0):
    a = pd.DataFrame({"rise_time_s": rng.lognormal(-14, 0.3, n),
                      "bipolarity": rng.uniform(0, 1, n),
                      "snr_db": rng.normal(30, 5, n)})
    b = pd.DataFrame({"rise_time_s": rng.lognormal(-14, 0.3, n),
                      "bipolarity": rng.uniform(0, 1, n) + shift,
                      "snr_db": rng.normal(30, 5, n)})
    b.loc[: n // 10, "snr_db"] = np.nan
    return a, b


def test_ks_matches_scipy_on_the_non_missing_values():
    """KS statistic and p-value equal scipy.stats.ks_2samp on the same finite values."""
    a, b = _frames(np.random.default_rng(0), 300, shift=0.1)
    table = feature_drift(a, b).set_index("feature")
    for col in a.columns:
        ref = stats.ks_2samp(a[col].dropna(), b[col].dropna())
        assert_allclose(table.loc[col, "ks_statistic"], ref.statistic, rtol=1e-12)
        assert_allclose(table.loc[col, "ks_pvalue"], ref.pvalue, rtol=1e-12)
    assert_allclose(table.loc["snr_db", "missing_b"], 31 / 300, rtol=1e-12)
    assert table.loc["snr_db", "n_b"] == 300 - 31


def test_ranking_puts_the_shifted_feature_first():
    """bipolarity shifted by 0.3 (others from the same law) ranks first, 'major'."""
    a, b = _frames(np.random.default_rng(0), 2000, shift=0.3)
    table = feature_drift(a, b)
    assert table["feature"].iloc[0] == "bipolarity"
    assert table["band"].iloc[0] == "major"
    assert table["rank"].tolist() == [1, 2, 3]
    assert table.set_index("feature").loc["rise_time_s", "band"] == "stable"


def test_effects_table_names_real_settings_and_features():
    """Every feature in SETTING_EFFECTS is a schema column; every setting has an entry."""
    names = set(schema.feature_names())
    for eff in SETTING_EFFECTS:
        assert set(eff.affects) <= names, eff.setting
    decay = next(e for e in SETTING_EFFECTS if e.setting == "field.decay_time_s")
    assert {"bipolarity", "zero_crossing_s", "width_s"} <= set(decay.affects)
    lag = next(e for e in SETTING_EFFECTS if e.setting == "vhf.delay_s")
    assert lag.affects == ("vhf_field_lag_s", "vhf_lag_first_peak_s")


def test_manifest_diff_lists_exactly_the_changed_settings(make_catalog):
    """Rate, decay, VHF delay and range presence changed: those four, in table order."""
    x, ev, _ = _season_pulses(12, 0.5, seed=2)
    vhf = np.abs(np.random.default_rng(0).normal(size=(12, 6000))).astype(np.float32)
    a = make_catalog("ma", x, events=ev, vhf=vhf, field_meta={"sample_rate_hz": FS})
    ev_b = dict(ev, range_m=[np.nan] * 12)
    b = make_catalog("mb", x[:, ::2].copy(), events=ev_b, vhf=vhf, vhf_meta={"delay_s": 4e-7},
                     field_meta={"sample_rate_hz": FS / 2, "decay_time_s": 1e-3})
    ca, cb = open_catalog(a), open_catalog(b)
    changes = instrument_changes(ca, cb)
    assert [c.setting for c in changes] == ["field.sample_rate_hz", "field.decay_time_s",
                                            "vhf.delay_s", "events.range_m"]
    assert (changes[0].a, changes[0].b) == (FS, FS / 2)
    assert "range_normalized_peak_v_per_m" in changes[-1].affects
    assert instrument_changes(ca, ca) == []
    settings = set(instrument_settings(ca))
    assert settings <= {e.setting for e in SETTING_EFFECTS}


def test_decay_change_end_to_end(decay_pair):
    """Same pulses, other declared decay constant: the change is listed first and its
    features lead the ranking, while pulse timing on the rising edge stays stable."""
    ca, cb = decay_pair
    fa, fb = extract_features(ca), extract_features(cb)
    result = compare_catalogs(ca, cb, fa, fb)
    assert [c.setting for c in result.changes] == ["field.decay_time_s"]
    affected = set(result.changes[0].affects)
    top = result.table.head(3)
    assert set(top["feature"]) <= affected
    assert (top["explained_by"] == "field.decay_time_s").all()
    assert (top["band"] == "major").all()
    by = result.table.set_index("feature")
    assert by.loc["polarity", "psi"] < 0.1
    assert by.loc["range_m", "psi"] == 0.0          # same events.csv: no change at all
    text = format_drift_text(result, top=5)
    assert text.index("instrument changes") < text.index("field.decay_time_s") < text.index(
        "feature drift")
    assert "none -> 20 µs" in text                # display units, classify.display


def test_html_report_is_self_contained_and_complete(decay_pair, tmp_path):
    """The report parses, has one chart per top feature, and fetches nothing."""
    ca, cb = decay_pair
    fa, fb = extract_features(ca), extract_features(cb)
    result = compare_catalogs(ca, cb, fa, fb)
    out = write_drift_html(result, fa, fb, tmp_path / "r.html", top=4)
    html = out.read_text(encoding="utf-8")
    assert html == render_drift_html(result, fa, fb, top=4)
    assert html.count("<svg") == 4
    assert "src=" not in html and "<link" not in html and "<script" not in html

    class Tags(HTMLParser):
        def __init__(self):
            super().__init__()
            self.stack, self.bad = [], []

        def handle_starttag(self, tag, attrs):
            if tag not in ("meta", "line", "rect", "circle", "polyline", "br"):
                self.stack.append(tag)

        def handle_endtag(self, tag):
            if tag in ("line", "rect", "circle", "polyline"):
                return
            if not self.stack or self.stack.pop() != tag:
                self.bad.append(tag)

    p = Tags()
    p.feed(html)
    assert p.bad == [] and p.stack == []
    assert html.index("Instrument changes") < html.index("Most drifted features")
    assert not list(tmp_path.glob("*.partial"))


def test_read_feature_table_round_trip_and_errors(decay_pair, tmp_path):
    """A features CSV reads back equal to the computed table; wrong files are refused."""
    ca, cb = decay_pair
    csv = write_features(ca, tmp_path / "fa.csv")
    back = read_feature_table(csv, ca)
    ref = extract_features(ca).reset_index(drop=True)
    assert back["event_id"].tolist() == ref["event_id"].tolist()
    for f in schema.FEATURES[1:]:
        if f.unit in ("bool", "-"):
            assert (back[f.name] == ref[f.name]).all(), f.name
        else:
            assert_allclose(back[f.name], ref[f.name].astype(float), rtol=1e-9,
                            equal_nan=True, err_msg=f.name)
    df = pd.read_csv(csv, dtype=str, keep_default_na=False)
    df.loc[3, "clipped"] = "maybe"
    df.to_csv(tmp_path / "bad_bool.csv", index=False)
    with pytest.raises(ValueError, match=r"bad_bool.csv: column 'clipped' must be true/false"
                                         r", got 'maybe' \(event 'p003'\)"):
        read_feature_table(tmp_path / "bad_bool.csv", ca)
    df = pd.read_csv(csv, dtype=str, keep_default_na=False).drop(columns=["bipolarity"])
    df.to_csv(tmp_path / "no_col.csv", index=False)
    with pytest.raises(ValueError, match=r"no_col.csv: missing feature column\(s\) "
                                         r"\['bipolarity'\]"):
        read_feature_table(tmp_path / "no_col.csv", ca)
    df = pd.read_csv(csv, dtype=str, keep_default_na=False).iloc[1:]
    df.to_csv(tmp_path / "short.csv", index=False)
    with pytest.raises(ValueError, match=r"1 of the catalog's missing \(first 'p000'\)"):
        read_feature_table(tmp_path / "short.csv", ca)
    with pytest.raises(InputError, match="nothing.csv: no such features file"):
        read_feature_table(tmp_path / "nothing.csv", ca)


def test_cli_exit_codes(decay_pair, tmp_path, capsys):
    """0 with a report; 2 for a missing catalog, a foreign features file or a bad option."""
    ca, cb = decay_pair
    fa = write_features(ca, tmp_path / "fa.csv")
    fb = write_features(cb, tmp_path / "fb.csv")
    out = tmp_path / "report.html"
    code = main(["drift", str(ca.path), str(cb.path), "--features-a", str(fa),
                 "--features-b", str(fb), "--out", str(out), "--top", "3"])
    printed = capsys.readouterr().out
    assert code == 0
    assert out.is_file() and "field.decay_time_s" in printed
    assert printed.index("instrument changes") < printed.index("feature drift")
    assert main(["drift", str(ca.path), str(tmp_path / "nope")]) == 2
    assert "no such catalog folder" in capsys.readouterr().err
    assert main(["drift", str(ca.path), str(cb.path), "--features-a", str(fb),
                 "--features-b", str(fb), "--out", str(out)]) == 0   # same event ids
    bad = tmp_path / "other.csv"
    pd.read_csv(fa, dtype=str).assign(event_id=lambda d: "x" + d["event_id"]).to_csv(
        bad, index=False)
    assert main(["drift", str(ca.path), str(cb.path), "--features-a", str(bad),
                 "--out", str(out)]) == 2
    assert "do not match catalog 'testsite-2040'" in capsys.readouterr().err
    assert main(["drift", str(ca.path), str(cb.path), "--store", str(tmp_path / "s.db")]) == 2
    assert "--store is used with --model" in capsys.readouterr().err
    assert main(["drift", str(ca.path), str(cb.path), "--top", "0"]) == 2
    assert main(["drift", str(ca.path), str(cb.path), "--out", str(tmp_path / "no" / "r.html"),
                 "--features-a", str(fa), "--features-b", str(fb)]) == 2
    assert main(["drift", str(ca.path), str(cb.path), "--model", str(tmp_path)]) == 2
    assert "neither a model folder" in capsys.readouterr().err
    assert main(["drift", str(ca.path), str(cb.path), "--out", str(tmp_path / "r.htm")]) == 2
    assert "must end in .html" in capsys.readouterr().err


def test_cli_writes_beside_catalog_b_by_default(decay_pair, tmp_path, capsys, monkeypatch):
    """Without --out the report goes to the folder holding catalog B, and its path is
    printed; nothing is written to the working folder; -q prints nothing."""
    ca, cb = decay_pair
    fa = write_features(ca, tmp_path / "fa.csv")
    fb = write_features(cb, tmp_path / "fb.csv")
    work = tmp_path / "elsewhere"
    work.mkdir()
    monkeypatch.chdir(work)
    assert main(["drift", str(ca.path), str(cb.path), "--features-a", str(fa),
                 "--features-b", str(fb)]) == 0
    want = cb.path.parent / "drift_testsite-2040_vs_testsite-2041.html"
    assert want.is_file() and f"report: {want}" in capsys.readouterr().out
    assert list(work.iterdir()) == []
    want.unlink()
    assert main(["-q", "drift", str(ca.path), str(cb.path), "--features-a", str(fa),
                 "--features-b", str(fb)]) == 0
    assert want.is_file() and capsys.readouterr().out == ""


def test_html_medians_in_display_units_that_do_not_wrap(decay_pair):
    """Medians read '2.4 µs -> 2.97 µs' (not 2.4e-06) in cells that never wrap."""
    ca, cb = decay_pair
    fa, fb = extract_features(ca), extract_features(cb)
    html = render_drift_html(compare_catalogs(ca, cb, fa, fb), fa, fb, top=2)
    assert "white-space:nowrap" in html
    row = html[html.index("<td>initial_half_cycle_s</td>"):]
    row = row[:row.index("</tr>")]
    medians = [c for c in row.split("<td") if "-&gt;" in c and "µs" in c]
    assert medians and 'class="n"' in medians[0]
    assert "e-0" not in medians[0]
    assert json.loads((ca.path / "catalog.json").read_text())["catalog_id"] == "testsite-2040"


def test_cli_with_a_trained_model(make_catalog, tmp_path, capsys):
    """train on A (even mix), drift A -> B (76 % narrow bipolar): EM mix within 3 points,
    calibration on B's labelled pulses, both in the report."""
    from classify.labels import LabelStore
    from classify.priors import prior_shift
    from classify.registry import load_model

    x, ev, lab = _season_pulses(160, 0.5, seed=3)
    a = make_catalog("ta", x, events=ev, field_meta={"sample_rate_hz": FS},
                     catalog_id="testsite-2040")
    x2, ev2, lab2 = _season_pulses(160, 0.8, seed=4)
    b = make_catalog("tb", x2, events=ev2, field_meta={"sample_rate_hz": FS},
                     catalog_id="testsite-2041")
    store = tmp_path / "labels.sqlite"
    pd.DataFrame({"event_id": ev["event_id"], "label": lab, "analyst": "wren"}).to_csv(
        tmp_path / "la.csv", index=False)
    pd.DataFrame({"event_id": ev2["event_id"][:60], "label": lab2[:60],
                  "analyst": "tamsin"}).to_csv(tmp_path / "lb.csv", index=False)
    with LabelStore(store) as st:
        st.import_labels(tmp_path / "la.csv", open_catalog(a))
        st.import_labels(tmp_path / "lb.csv", open_catalog(b))
    models = tmp_path / "models"
    assert main(["train", str(a), "--store", str(store), "--out", str(models / "v1"),
                 "--max-iter", "30"]) == 0
    capsys.readouterr()
    out = tmp_path / "r.html"
    assert main(["drift", str(a), str(b), "--model", str(models), "--store", str(store),
                 "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "instrument changes: none" in printed
    assert "class-prior shift of testsite-2041" in printed
    assert "champion calibration on 60 labelled pulses" in printed
    model, _ = load_model(models / "v1")
    shift = prior_shift(model, extract_features(open_catalog(b)))
    truth = [np.mean(lab2 == c) for c in shift.classes]
    assert_allclose(shift.new_priors, truth, atol=0.03)
    html = out.read_text(encoding="utf-8")
    assert "Class-prior shift" in html and "Champion calibration on B" in html
