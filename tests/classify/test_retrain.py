"""Retrain: champion kept without new labels, challenger compared, cards, registry, --force."""

import json
import shutil

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.metrics import f1_score, recall_score

from classify.cli import main
from classify.registry import ModelRegistry, load_model, verify_model_dir
from classify.retrain import metric_vector
from classify.stats import empirical_coverage, expected_calibration_error
from features import open_catalog
from features.extract import extract_features
from features.simulate import labels_path, simulate_season

# short records so the seasons simulate in about a second (features are physical, so
# the sample rates and record lengths need not match between seasons)
SHAPE = dict(field_rate_hz=10e6, field_samples=2000, vhf_samples=2500)
MIX_B = {"narrow_bipolar": 0.3, "stepped_leader": 0.25, "recoil": 0.3,
         "energetic_in_cloud": 0.15}
FAST = ["--max-iter", "20", "--bootstrap", "200"]
METRICS = ("macro_f1", "ece", "conformal_coverage", "review_load")


@pytest.fixture(scope="module")
def seasons(tmp_path_factory):
    """Season A (labelled, champion trained on it) and season B (another digitizer)."""
    root = tmp_path_factory.mktemp("retrain")
    a = simulate_season(root / "a", 400, 31, **SHAPE)
    b = simulate_season(root / "b", 300, 32, season="2032", class_mix=MIX_B,
                        **dict(SHAPE, field_rate_hz=5e6, field_samples=1000))
    store = root / "labels.sqlite"
    assert main(["labels", "import", str(labels_path(a)), "--catalog", str(a), "--analyst",
                 "wren", "--store", str(store)]) == 0
    assert main(["train", str(a), "--store", str(store), "--out", str(root / "reg" / "champ"),
                 "--promote", "--max-iter", "20"]) == 0
    return {"a": a, "b": b, "store": store, "reg": root / "reg"}


def _copy(seasons, tmp_path):
    """A private store and registry (retrain rewrites the champion's card)."""
    store = tmp_path / "labels.sqlite"
    shutil.copy(seasons["store"], store)
    reg = tmp_path / "reg"
    shutil.copytree(seasons["reg"], reg)
    return store, reg


def _import_b(seasons, store, tmp_path, n, seed=0):
    """n random truth labels of season B, imported as analyst 'ines'; return them."""
    truth = pd.read_csv(labels_path(seasons["b"]), dtype=str)
    pick = np.random.default_rng(seed).choice(len(truth), size=n, replace=False)
    sample = truth.iloc[np.sort(pick)][["event_id", "label"]].assign(analyst="ines")
    path = tmp_path / "b_sample.csv"
    sample.to_csv(path, index=False)
    assert main(["labels", "import", str(path), "--catalog", str(seasons["b"]), "--store",
                 str(store)]) == 0
    return sample


def _retrain(seasons, store, reg, out, *extra):
    return main(["retrain", str(seasons["b"]), "--store", str(store), "--with",
                 str(seasons["a"]), "--out", str(reg / out), *FAST, *extra])


def test_zero_new_labels_keeps_champion(seasons, tmp_path, capsys):
    """No labels of the new season: exit 0, champion kept, the message says why."""
    store, reg = _copy(seasons, tmp_path)
    capsys.readouterr()
    assert _retrain(seasons, store, reg, "chal") == 0
    out = capsys.readouterr().out
    assert "decision: kept" in out
    assert "no labelled pulses of the new season hollowmere-2032" in out
    assert ModelRegistry(reg).current() == "champ"
    assert not (reg / "chal").exists()


def test_challenger_comparison_in_both_cards(seasons, tmp_path, capsys):
    """With new labels: comparison printed and in both cards, sums verify, registry agrees."""
    store, reg = _copy(seasons, tmp_path)
    sample = _import_b(seasons, store, tmp_path, 150)
    capsys.readouterr()
    assert _retrain(seasons, store, reg, "chal") == 0
    out = capsys.readouterr().out
    for m in METRICS:
        assert f"  {m} " in out
    assert "recall per class (champion / challenger)" in out
    decision = json.loads((reg / "chal" / "card.json").read_text())["comparisons"][-1]
    assert f"decision: {decision['decision']}" in out
    for folder in ("champ", "chal"):
        verify_model_dir(reg / folder)            # SHA256SUMS still match after the rewrite
        card = json.loads((reg / folder / "card.json").read_text())
        section = card["comparisons"][-1]
        assert section["champion"] == "champ" and section["challenger"] == "chal"
        assert section["metrics"]["n_pulses"] == len(sample)
        for role in ("champion", "challenger", "difference"):
            for m in METRICS:
                v = section["metrics"][role][m]
                assert v["low"] <= v["estimate"] + 1e-12 and v["estimate"] <= v["high"] + 1e-12
        for role in ("champion", "challenger"):
            assert set(section["metrics"][role]["recall"]) == set(card["classes"])
        md = (reg / folder / "card.md").read_text()
        assert "## Comparison on 2032" in md and "| macro_f1 |" in md
    want = "chal" if decision["decision"] in ("promoted", "forced") else "champ"
    assert ModelRegistry(reg).current() == want

    # the champion's scores in the comparison, recomputed from its predictions with
    # scikit-learn's f1_score and classify.stats' ECE (Guo et al. 2017, 15 bins)
    champion, _ = load_model(reg / "champ")
    feats = extract_features(open_catalog(seasons["b"])).merge(sample, on="event_id")
    X = feats[list(champion.feature_names_in_)].astype(float)
    proba = champion.predict_proba(X)
    pred = champion.classes_[proba.argmax(axis=1)]
    present = sorted(set(feats["label"]))
    got = decision["metrics"]["champion"]
    assert_allclose(got["macro_f1"]["estimate"],
                    f1_score(feats["label"], pred, labels=present, average="macro"),
                    rtol=0, atol=1e-12)
    assert_allclose(got["ece"]["estimate"],
                    expected_calibration_error(proba, feats["label"], n_bins=15,
                                               classes=champion.classes_), rtol=0, atol=1e-12)


def test_force_promotes_worse_challenger(seasons, tmp_path, capsys):
    """A weak challenger (40 new labels only, 1 iteration) is kept out unless --force."""
    store, reg = _copy(seasons, tmp_path)
    _import_b(seasons, store, tmp_path, 40, seed=1)
    weak = ["retrain", "--store", str(store), "--new", str(seasons["b"]), "--max-iter", "1",
            "--bootstrap", "100"]
    assert main([*weak, "--out", str(reg / "weak")]) == 0
    out = capsys.readouterr().out
    assert "decision: kept" in out and "worse beyond tolerance" in out
    assert ModelRegistry(reg).current() == "champ"
    assert main([*weak, "--out", str(reg / "weak_forced"), "--force"]) == 0
    out = capsys.readouterr().out
    assert "decision: forced" in out and "promoted anyway (--force)" in out
    assert ModelRegistry(reg).current() == "weak_forced"
    verify_model_dir(reg / "weak_forced")


def _random_inputs(n=600, k=4, seed=0):
    rng = np.random.default_rng(seed)
    proba = rng.dirichlet(np.full(k, 0.7), size=n)
    y = np.where(rng.uniform(size=n) < 0.7, proba.argmax(axis=1), rng.integers(0, k, n))
    sets = rng.uniform(size=(n, k)) < 0.4
    novel = rng.uniform(size=n) < 0.05
    return proba, y, sets, novel


def test_metric_vector_matches_reference_implementations():
    """macro-F1 and recall as sklearn.metrics, ECE and coverage as classify.stats."""
    proba, y, sets, novel = _random_inputs()
    v = metric_vector(y, proba, sets, novel, 0.8)
    pred = proba.argmax(axis=1)
    k = proba.shape[1]
    # reference implementations: scikit-learn's f1_score / recall_score
    assert_allclose(v[0], f1_score(y, pred, average="macro"), rtol=0, atol=1e-12)
    assert_allclose(v[4:], recall_score(y, pred, labels=range(k), average=None), rtol=0,
                    atol=1e-12)
    # top-label ECE with 15 equal bins (Guo et al. 2017, eq. 3; from memory)
    assert_allclose(v[1], expected_calibration_error(proba, y, n_bins=15), rtol=0, atol=1e-12)
    assert_allclose(v[2], empirical_coverage(sets, y), rtol=0, atol=1e-12)
    conf = proba.max(axis=1)
    load = (conf < 0.8) | (sets.sum(axis=1) != 1) | novel
    assert_allclose(v[3], load.mean(), rtol=0, atol=1e-12)


def test_metric_vector_absent_and_unknown_classes():
    """A class absent from y has NaN recall; a class the model lacks scores F1 0."""
    proba, y, sets, novel = _random_inputs(seed=1)
    k = proba.shape[1]
    y = np.where(y == 2, 0, y)                   # class 2 never true
    v = metric_vector(y, proba, sets, novel, 0.8)
    pred = proba.argmax(axis=1)
    present = [0, 1, 3]
    assert_allclose(v[0], f1_score(y, pred, labels=present, average="macro"), rtol=0,
                    atol=1e-12)
    assert np.isnan(v[4 + 2])
    y_unknown = y.copy()
    y_unknown[:50] = -1                          # true class outside the model's classes
    v = metric_vector(y_unknown, proba, sets, novel, 0.8)
    mapped = np.where(y_unknown < 0, k, y_unknown)  # a label the model never predicts
    expected = f1_score(mapped, pred, labels=present + [k], average="macro", zero_division=0)
    assert_allclose(v[0], expected, rtol=0, atol=1e-12)
    assert_allclose(v[2], np.mean(np.where(y_unknown >= 0, sets[np.arange(len(y)),
                                                                 np.clip(y_unknown, 0, k - 1)],
                                           False)), rtol=0, atol=1e-12)


def test_out_into_another_registry_needs_promote(seasons, tmp_path, capsys, caplog):
    """A challenger written into another registry never becomes its current model
    without --promote, even when it wins (here by --force); the old --new spelling
    still works, with a note."""
    store, reg = _copy(seasons, tmp_path)
    _import_b(seasons, store, tmp_path, 40, seed=2)
    other = tmp_path / "other"
    shutil.copytree(reg / "champ", other / "incumbent")
    ModelRegistry(other).register(other / "incumbent")
    base = ["retrain", "--store", str(store), "--new", str(seasons["b"]), "--current",
            str(reg / "champ"), "--max-iter", "1", "--bootstrap", "100", "--force"]
    assert main([*base, "--out", str(other / "c1")]) == 0
    out = capsys.readouterr().out
    assert "decision: forced" in out and "not made current in" in out
    assert ModelRegistry(other).current() == "incumbent"
    assert ModelRegistry(reg).current() == "champ"
    assert "--new CATALOG` is deprecated" in caplog.text
    assert main([*base, "--out", str(other / "c2"), "--promote"]) == 0
    assert ModelRegistry(other).current() == "c2"
    assert ModelRegistry(reg).current() == "champ"


def test_mistyped_store_creates_nothing(seasons, tmp_path, capsys):
    """Reading commands never create a store: a mistyped --store exits 2 naming it."""
    typo = tmp_path / "lables.sqlite"
    assert main(["retrain", str(seasons["b"]), "--store", str(typo), "--out",
                 str(tmp_path / "reg" / "x")]) == 2
    assert "lables.sqlite: no label store here" in capsys.readouterr().err
    assert not typo.exists() and not (tmp_path / "reg").exists()
