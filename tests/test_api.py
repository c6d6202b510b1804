"""The public Python API: names, light imports, one prediction entry point, progress."""

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import urllib.request
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal

import classify
import features
from classify.cli import main
from classify.labels import LabelStore
from classify.models import PulseClassifier
from classify.predict import load_model, predict_catalog, predict_features
from classify.review import TOKEN_HEADER
from classify.triage import read_results, triage_catalog
from features import InputError, open_catalog
from features.extract import extract_features
from features.simulate import labels_path
from tests._hollowmere import MODEL, hollowmere
from tests.conftest import two_class_catalog

#: The names the API promises, each with a numpydoc Examples section.
PROMISED = {"features": ["open_catalog", "extract_features", "write_catalog", "pulse_trace",
                         "schema", "InputError"],
            "classify": ["load_model", "predict_catalog", "predict_features",
                         "triage_catalog", "train_from_store", "LabelStore",
                         "explain_pulses"]}

def _interruptible():
    """The child takes Ctrl-C (SIGINT) even when the test run itself was started with it
    ignored (a background job, nohup), as an analyst's terminal gives it."""
    signal.signal(signal.SIGINT, signal.SIG_DFL)



@pytest.fixture(scope="module")
def season():
    """The simulated hollowmere seasons and model (tests/_hollowmere.py; invented data)."""
    return hollowmere()


@pytest.mark.parametrize("package", [features, classify], ids=["features", "classify"])
def test_every_advertised_name_imports_and_is_documented(package):
    """Every name of __all__ resolves; the promised ones have Parameters or Examples docs."""
    for name in package.__all__:
        assert getattr(package, name) is not None, name
    assert set(PROMISED[package.__name__]) <= set(package.__all__)
    for name in PROMISED[package.__name__]:
        doc = getattr(package, name).__doc__ or ""
        assert "Examples\n" in doc and "--------" in doc, f"{name}: no Examples section"
    with pytest.raises(AttributeError, match="has no attribute 'nope'"):
        package.nope  # noqa: B018


def test_importing_the_packages_does_not_import_scikit_learn():
    """'import classify' (and the triage's main-process modules) leave scikit-learn out;
    the first use of a model name is what loads it (a fresh interpreter each)."""
    code = ("import sys, classify, features, classify.predict, classify.triage\n"
            "names = classify.predict_catalog, classify.LabelStore, features.extract_features\n"
            "print(sorted(m for m in sys.modules if m.split('.')[0] == 'sklearn'))\n"
            "classify.load_model\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True)
    assert out.stdout.strip() == "[]"


def test_estimator_takes_its_columns_by_name_from_a_wider_table():
    """Fitted on a DataFrame, every prediction method takes its own columns from a wider,
    reordered table with the same results and no feature-name warning; a missing column
    is an InputError naming it. Invented data (self-consistency)."""
    rng = np.random.default_rng(0)
    X = pd.DataFrame({"bipolarity": rng.uniform(0, 1, 400),
                      "width_s": rng.uniform(1e-6, 3e-5, 400),
                      "rise_time_s": rng.uniform(1e-7, 1e-6, 400)})
    y = np.where(X["bipolarity"] > 0.5, "narrow_bipolar", "stepped_leader")
    m = PulseClassifier(max_iter=10, n_splits=3, n_reference=60).fit(X, y)
    wide = X[["rise_time_s", "width_s", "bipolarity"]].assign(
        event_id=[f"e{i}" for i in range(400)], label="?", snr_db=30.0)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        for method in ("predict_proba", "predict", "predict_set", "novelty_score", "is_novel"):
            assert_array_equal(getattr(m, method)(wide), getattr(m, method)(X), method)
        assert_array_equal(m.nearest_labelled(wide, k=3)[0], m.nearest_labelled(X, k=3)[0])
        assert_array_equal(m.predict_set(wide, proba=m.predict_proba(X)), m.predict_set(X))
    assert (m.predict(wide) == y).mean() > 0.95
    for method in ("predict_proba", "predict_set", "novelty_score", "nearest_labelled"):
        with pytest.raises(InputError, match=r"lacks the model's input column\(s\) "
                                             r"\['width_s'\] \(1 of the 3"):
            getattr(m, method)(wide.drop(columns="width_s"))


def test_fit_reports_each_fold_model_then_the_calibration():
    """PulseClassifier.fit calls progress(done, total, step) once before and after each step."""
    rng = np.random.default_rng(1)
    X = rng.normal(size=(300, 3))
    y = np.where(X[:, 0] > 0, "a", "b")
    calls = []
    PulseClassifier(max_iter=5, n_splits=3, n_reference=30).fit(
        X, y, groups=np.arange(300) // 10, progress=lambda *a: calls.append(a))
    assert calls == [(0, 4, "start"), (1, 4, "fold model 1 of 3"), (2, 4, "fold model 2 of 3"),
                     (3, 4, "fold model 3 of 3"), (4, 4, "calibration")]


def test_train_shows_the_fit_progress_unless_quiet(tmp_path, capsys):
    """`train --progress` draws the fit's bar on stderr; `-q` and the default off a
    terminal draw none."""
    cat, labels = two_class_catalog(tmp_path / "c", n=120, seed=5)
    labels.to_csv(tmp_path / "labels.csv", index=False)
    store = str(tmp_path / "s.sqlite")
    assert main(["labels", "import", str(tmp_path / "labels.csv"), "--catalog", str(cat),
                 "--analyst", "wren", "--store", store]) == 0
    capsys.readouterr()
    for i, (before, after) in enumerate([([], ["--progress"]), (["-q"], []), ([], [])]):
        assert main(before + ["train", str(cat), "--store", store, "--out",
                              str(tmp_path / "m" / f"v{i}"), "--max-iter", "5",
                              "--station-variants", "0"] + after) == 0
        err = capsys.readouterr().err
        bar = re.findall(r"fit: 100%\|.*?\| (\d+)/(\d+) ", err)
        if after:
            assert bar and bar[-1][0] == bar[-1][1] and int(bar[-1][1]) >= 3, err
            assert "calibration" in err
        else:
            assert "fit:" not in err


def test_predict_catalog_gives_what_triage_writes(season, tmp_path):
    """On a simulated season: the same columns, labels, confidences, sets, reasons and
    features as `pulsesort triage`, with adapted sets, training sets, and the class mix
    estimated by EM."""
    cat = open_catalog(season["b"])
    for i, options in enumerate([{}, {"adapt_sets": False}, {"adapt_priors": True}]):
        out = tmp_path / f"triage-{i}.csv"
        triage_catalog(cat, out, model_dir=season["model_dir"], chunk_size=64, **options)
        written = read_results(out)
        res = predict_catalog(cat, "current", registry=season["root"] / "models", **options)
        assert res.columns.tolist() == written.columns.tolist()
        for c in ("event_id", "label", "needs_review", "novel", "prediction_set",
                  "review_reason", "review_why", "model_version", "adaptation", "catalog_id"):
            assert_array_equal(res[c].to_numpy(), written[c].to_numpy(), err_msg=c)
        numeric = [c for c in written.columns if c.startswith("p_")] + [
            "confidence", "novelty_score", "width_s", "speed_m_per_s", "peak_current_a"]
        assert_allclose(res[numeric].to_numpy(float), written[numeric].to_numpy(float),
                        rtol=1e-9, atol=1e-300, equal_nan=True)
        assert res["model_version"].iloc[0] == MODEL
        assert res.attrs["reasons"]["low_confidence"] == written["review_reason"].str.contains(
            "low_confidence").sum()
        assert res.attrs["adaptation"] == written["adaptation"].iloc[0]
    assert "class mix by EM on 300 pulses" in res["adaptation"].iloc[0]
    assert set(res.attrs["priors"]) == {c[2:] for c in res.columns if c.startswith("p_")}
    assert_allclose(sum(res.attrs["priors"].values()), 1.0, rtol=1e-9)
    # the simulator's truth (invented data; self-consistency): the model learnt the classes
    assert (res["label"].to_numpy() == season["truth_b"]["label"].to_numpy()).mean() > 0.9


def test_pulse_with_pinned_field_record_is_classified_from_vhf_and_sources(season, tmp_path):
    """A field record pinned at full scale from start to end (a DC-coupled antenna after
    a close stroke's static change) has no usable field features, but the pulse's VHF,
    sources and flash context remain: it gets a class and a non-empty prediction set
    from them (the model learnt with the field columns masked), not an empty one. The
    simulator's truth (invented data; self-consistency) checks the classes."""
    folder = tmp_path / "pinned"
    shutil.copytree(season["b"], folder)
    meta = json.loads((folder / "catalog.json").read_text())["field"]
    field = np.load(folder / meta["file"], mmap_mode="r+")
    level = -meta["full_scale"] / meta.get("scale", 1.0)
    if field.dtype.kind in "iu":
        level = np.iinfo(field.dtype).min if level < np.iinfo(field.dtype).min else round(level)
    rows = np.arange(0, 300, 5)
    field[rows] = level
    field.flush()
    del field
    res = predict_catalog(open_catalog(folder), season["model_dir"])
    pinned = res.iloc[rows]
    assert not pinned["field_ok"].any()
    placed = pinned["has_vhf"] | (pinned["n_sources"] > 0)
    assert placed.mean() > 0.9
    assert (pinned.loc[placed, "label"] != "").all()
    assert (pinned.loc[placed, "prediction_set"] != "").all()
    assert not pinned.loc[placed, "review_reason"].str.contains("field_unusable").any()
    truth = season["truth_b"]["label"].to_numpy()[rows][placed.to_numpy()]
    assert (pinned.loc[placed, "label"].to_numpy() == truth).mean() > 0.7
    # the other pulses are decided as before
    rest = np.setdiff1d(np.arange(300), rows)
    assert (res["label"].to_numpy()[rest] == season["truth_b"]["label"].to_numpy()[rest]
            ).mean() > 0.9


def test_predict_catalog_options_and_refusals(season):
    """Given features are used as they are; others' features, a bad review level and a
    model that is neither an estimator nor a name are InputErrors naming them."""
    cat_a, cat_b = open_catalog(season["a"]), open_catalog(season["b"])
    model, card = load_model(season["model_dir"])
    feats = extract_features(cat_b)
    res = predict_catalog(season["b"], model, card=card, features=feats, review_below=0.95)
    assert len(res) == cat_b.n_events and res["model_version"].eq(MODEL).all()
    usable = res["label"] != ""
    assert (res.loc[usable, "needs_review"] | (res.loc[usable, "confidence"] >= 0.95)).all()
    assert predict_catalog(cat_b, model, features=feats)["model_version"].iloc[0] == \
        "unsaved model"
    with pytest.raises(InputError, match="not the features of catalog hollowmere-2032"):
        predict_catalog(cat_b, model, features=extract_features(cat_a))
    with pytest.raises(InputError, match=r"review_below must be in \[0, 1\], got 1.5"):
        predict_catalog(cat_b, model, review_below=1.5, features=feats)
    with pytest.raises(InputError, match="model must be a fitted pulsesort model.*got int"):
        predict_catalog(cat_b, 42, features=feats)


def test_load_model_by_folder_version_and_current(season):
    """A folder, a version and 'current' give the same model; an unknown version names the
    registry's versions."""
    reg = season["root"] / "models"
    versions = {load_model(season["model_dir"])[1]["version"],
                load_model(MODEL, registry=reg)[1]["version"],
                load_model("current", registry=reg)[1]["version"],
                load_model(reg)[1]["version"]}
    assert versions == {MODEL}
    with pytest.raises(InputError, match=f"no model 'v9'.*known versions: {MODEL}"):
        load_model("v9", registry=reg)


def test_predict_features_relaxes_only_censored_rows(season):
    """Relaxed probabilities differ from the plain ones only on censored rows, where they
    are the model's probabilities of the relaxed values; a plain scikit-learn classifier
    gets probabilities and NaN novelty."""
    from sklearn.linear_model import LogisticRegression
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import StandardScaler

    from classify.decide import relaxed_features

    model, _ = load_model(season["model_dir"])
    feats = extract_features(open_catalog(season["b"])).reset_index(drop=True)
    feats["vhf_censored"] = False
    feats.loc[:9, "vhf_censored"] = True
    out = predict_features(model, feats)
    assert_array_equal(out["relaxed"][10:], out["proba"][10:])
    names = list(model.feature_names_in_)
    expect = model.predict_proba(relaxed_features(feats.loc[:9, names], np.ones(10, bool),
                                                  np.zeros(10, bool)))
    assert_allclose(out["relaxed"][:10], expect, rtol=1e-12)
    assert np.isfinite(out["novelty"]).all() and out["novelty_threshold"] > 0
    plain = predict_features(model, feats, relax=False, novelty=False)
    assert_array_equal(plain["relaxed"], plain["proba"]) and np.isnan(plain["novelty"]).all()
    cols = ["bipolarity", "width_s"]
    ok = feats[cols].notna().all(axis=1)
    lr = make_pipeline(StandardScaler(), LogisticRegression()).fit(
        feats.loc[ok, cols], season["truth_b"]["label"][ok.to_numpy()])
    got = predict_features(lr, feats[ok])
    assert got["proba"].shape == (int(ok.sum()), len(lr.classes_))
    assert np.isnan(got["novelty"]).all()


def test_retrain_shows_the_fit_progress(season, tmp_path, capsys):
    """retrain(progress=True) draws the challenger's fit on stderr."""
    from classify.retrain import retrain

    store = tmp_path / "labels.sqlite"
    shutil.copy(season["store"], store)
    reg = tmp_path / "models"
    shutil.copytree(season["root"] / "models", reg)
    truth = pd.read_csv(labels_path(season["b"]), dtype=str).iloc[::3]
    path = tmp_path / "b.csv"
    truth[["event_id", "label"]].assign(analyst="ines").to_csv(path, index=False)
    with LabelStore(store) as s:
        s.import_labels(path, open_catalog(season["b"]))
        res = retrain(s, season["b"], [season["a"]], "current", reg / "v2", n_boot=50,
                      station_variants=0, max_iter=10, progress=True)
    err = capsys.readouterr().err
    assert res["comparison"]["n_pulses"] == len(truth)
    assert re.search(r"fit: 100%\|.*\| (\d+)/\1 ", err), err


def test_review_explains_the_class_with_the_model(season, tmp_path):
    """`pulsesort review` with a model: the page's 'why this class' holds the largest
    contributions of explain_pulses for the pulse on screen, by feature (real server,
    real HTTP); a session without attributions has none."""
    from classify.commands.review import model_attributions
    from classify.explain import explain_pulses
    from classify.review import ReviewSession

    cat = open_catalog(season["b"])
    out = tmp_path / "r.csv"
    triage_catalog(cat, out, model_dir=season["model_dir"])
    results = read_results(out)
    model, _ = load_model(season["model_dir"])
    env = dict(os.environ, PYTHONPATH=str(Path(__file__).resolve().parents[1]))
    proc = subprocess.Popen([sys.executable, "-m", "classify.cli", "review", str(out),
                             "--catalog", str(season["b"]), "--store", str(tmp_path / "s.db"),
                             "--analyst", "wren", "--model", str(season["model_dir"])],
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            preexec_fn=_interruptible)
    try:
        lines = [proc.stdout.readline() for _ in range(4)]
        assert lines[2].startswith("why this class: the features' contributions"), lines
        url = lines[3].split()[1]
        token = url.split("token=")[1]
        req = urllib.request.Request(url.split("/?")[0] + "/api/current",
                                     headers={TOKEN_HEADER: token})
        with urllib.request.urlopen(req, timeout=60) as r:
            pulse = json.loads(r.read())["pulse"]
    finally:
        proc.send_signal(signal.SIGINT)
        proc.communicate(timeout=120)
    why = pulse["why"]
    assert len(why) == 6 and all(isinstance(label, str) for label, _ in why)
    row = results[results["event_id"] == pulse["event_id"]]
    expl = explain_pulses(model, row)[list(model.feature_names_in_)].iloc[0].astype(float)
    top = expl.abs().sort_values(ascending=False, kind="stable")
    assert_allclose([v for _, v in why], expl[top.index[:6]].to_numpy(), rtol=1e-9)
    assert [name for name, _ in why] == top.index[:6].tolist()
    assert model_attributions(model)(row.drop(columns="width_s").iloc[0]) is None
    plain = ReviewSession(results, cat, tmp_path / "s2.sqlite", "wren", model=model)
    assert plain.current()["pulse"]["why"] is None


@pytest.mark.browser
def test_why_panel_of_a_real_model_fits_its_plot_in_chromium(season, tmp_path):
    """The model's 'why this class' bars, long feature names included, keep every text
    inside the panel and apart (real Chromium, the page's own layout check)."""
    from tests.classify.test_review_browser import (
        _LABEL_CHECK,
        CHROMIUM,
        CHROMIUM_ARGS,
        _need_browser,
        _settled,
        served_page,
    )

    _need_browser()
    sync_api = pytest.importorskip("playwright.sync_api")
    from classify.commands.review import model_attributions

    out = tmp_path / "r.csv"
    # a high review threshold: enough pulses in the queue to step through four of them
    triage_catalog(open_catalog(season["b"]), out, model_dir=season["model_dir"],
                   review_below=0.9999)
    assert read_results(out)["needs_review"].sum() >= 4
    model, _ = load_model(season["model_dir"])
    with sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), args=CHROMIUM_ARGS)
        try:
            with served_page(browser, season["b"], out, tmp_path / "s.sqlite",
                             size=(1920, 1080), model=model,
                             attributions=model_attributions(model)) as (page, _, _, errors):
                eid = page.evaluate("document.body.dataset.event")
                for _ in range(3):
                    bars = page.eval_on_selector_all("#plot-why svg rect", "rs => rs.length")
                    assert bars == 6, eid
                    assert page.evaluate(_LABEL_CHECK)["problems"] == [], eid
                    page.keyboard.press("s")
                    eid = _settled(page, eid)
                assert errors == []
        finally:
            browser.close()
