"""Why this class: exact tree attributions, flash-grouped importances, ``pulsesort explain``."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.ensemble import HistGradientBoostingClassifier

from classify._tree_paths import leaves, tree_tables
from classify.cli import main
from classify.explain import (
    display_spec,
    explain_pulses,
    permutation_importance_by_flash,
    top_reasons,
    tree_score_contributions,
)
from classify.models import PulseClassifier
from features import open_catalog, schema

SIM_SHAPE = ["--field-rate-hz", "10e6", "--field-samples", "2000", "--vhf-samples", "2500"]


def _data(n=600, n_classes=3, seed=0, nan_fraction=0.1):
    """Invented blobs with NaN sprinkled in (self-consistency data, not physics)."""
    rng = np.random.default_rng(seed)
    y = rng.integers(0, n_classes, n)
    X = rng.normal(size=(n, 5))
    X[:, 0] += 2.0 * y
    X[:, 1] -= 1.5 * (y == 1)
    X[rng.random(X.shape) < nan_fraction] = np.nan
    return X, np.array(["a", "b", "c", "d"])[y], rng.integers(0, n // 5, n)


def _raw_scores(est, X):
    """Raw class scores from scikit-learn's own decision_function (reference)."""
    d = est.decision_function(X)
    return np.column_stack([np.zeros(len(d)), d]) if d.ndim == 1 else d


# ----------------------------------------------------------------- what we rely on
def test_tree_layout_that_the_walk_relies_on():
    """Pin scikit-learn's HGB internals used here: node fields, predictor and baseline layout."""
    X, y, _ = _data()
    est = HistGradientBoostingClassifier(max_iter=7, random_state=0).fit(X, y)
    names = set(est._predictors[0][0].nodes.dtype.names)
    assert {"value", "count", "feature_idx", "num_threshold", "missing_go_to_left", "left",
            "right", "is_leaf", "is_categorical", "depth"} <= names
    assert len(est._predictors) == est.n_iter_ == 7
    assert all(len(p) == est.n_trees_per_iteration_ == 3 for p in est._predictors)
    assert np.asarray(est._baseline_prediction).shape == (1, 3)
    nodes = est._predictors[0][0].nodes
    internal = ~nodes["is_leaf"].astype(bool)
    # a node's count is its children's (what the count-weighted node values assume)
    assert_allclose(nodes["count"][internal], nodes["count"][nodes["left"][internal]]
                    + nodes["count"][nodes["right"][internal]])
    # internal values are unshrunk Newton steps (root 0), not expected outputs: we derive
    # our own; if this changes, revisit the module docstring
    assert nodes["value"][0] == 0.0


@pytest.mark.parametrize("n_classes", [2, 3])
def test_contributions_sum_to_scikit_learns_raw_scores(n_classes):
    """base + contributions = decision_function (scikit-learn, reference) for every row."""
    X, y, _ = _data(n_classes=n_classes)
    est = HistGradientBoostingClassifier(max_iter=15, random_state=0).fit(X, y)
    base, contrib = tree_score_contributions(est, X)
    assert contrib.shape == (len(X), n_classes, X.shape[1])
    assert_allclose(base + contrib.sum(axis=2), _raw_scores(est, X), rtol=0, atol=1e-9)


def test_threshold_ties_and_missing_values_route_like_the_model():
    """A value equal to a split threshold goes left (<=); NaN follows missing_go_to_left.

    Column 0 had no NaN in training (NaN then goes to the larger child), column 1 had.
    """
    rng = np.random.default_rng(1)
    X = rng.normal(size=(400, 2))
    y = (X[:, 0] + 0.5 * np.nan_to_num(X[:, 1]) > 0).astype(int)
    X[rng.random(400) < 0.2, 1] = np.nan
    est = HistGradientBoostingClassifier(max_iter=10, random_state=0).fit(X, y)
    nodes = est._predictors[0][0].nodes
    root_feature, root_thr = int(nodes["feature_idx"][0]), float(nodes["num_threshold"][0])
    probe = np.array([[0.0, 0.0], [np.nan, 0.3], [0.2, np.nan], [np.nan, np.nan]])
    probe[0, root_feature] = root_thr
    base, contrib = tree_score_contributions(est, probe)
    assert_allclose(base + contrib.sum(axis=2), _raw_scores(est, probe), atol=1e-9)
    leaf = leaves(nodes, probe[:1])
    first = nodes["left"][0]
    assert nodes["depth"][leaf[0]] >= 1 and (leaf[0] == first or _descends(nodes, first,
                                                                         leaf[0]))


def _descends(nodes, top, target):
    stack = [int(top)]
    while stack:
        i = stack.pop()
        if i == target:
            return True
        if not nodes["is_leaf"][i]:
            stack += [int(nodes["left"][i]), int(nodes["right"][i])]
    return False


def test_node_values_are_expected_outputs_of_the_training_rows():
    """The root's value is the mean output of the tree over its training rows.

    Reference: each tree's output from scikit-learn's staged_decision_function
    (differences of consecutive stages).
    """
    X, y, _ = _data(n_classes=2, nan_fraction=0.0)
    est = HistGradientBoostingClassifier(max_iter=4, random_state=0,
                                         early_stopping=False).fit(X, y)
    stages = [np.asarray(s) for s in est.staged_decision_function(X)]
    start = np.full((1, len(X)), float(np.ravel(est._baseline_prediction)[0]))
    outputs = np.diff(np.vstack([start, np.array(stages)]), axis=0)
    for t, predictors in enumerate(est._predictors):
        value, _ = tree_tables(predictors[0].nodes, X.shape[1])
        assert value[0] == pytest.approx(outputs[t].mean(), abs=1e-12)
        assert np.ptp(outputs[t]) > 0.01          # a tree that does something


# ----------------------------------------------------------------- the pulse classifier
def _margin_reference(model, X, expl):
    """(1/F) sum_f (s_f,k - s_f,j) / T from each fold model's decision_function."""
    classes = list(model.classes_)
    k = expl["predicted"].map(classes.index).to_numpy()
    j = expl["against"].map(classes.index).to_numpy()
    rows = np.arange(len(X))
    diffs = []
    for est in model.estimators_:
        s = np.full((len(X), len(classes)), np.nan)
        s[:, est.classes_.astype(int)] = _raw_scores(est, X)
        diffs.append(s[rows, k] - s[rows, j])
    temp = model.pattern_temperature_[model._patterns(X)]
    return np.mean(diffs, axis=0) / temp


@pytest.mark.parametrize("n_classes,against", [(3, "runner_up"), (3, "b"), (2, "runner_up")])
def test_attributions_add_up_to_the_margin(n_classes, against):
    """For a fitted PulseClassifier: base + contributions = margin within 1e-6 for every pulse.

    The margin is recomputed from scikit-learn's decision_function of each fold model,
    with masked column groups (their own temperatures) and NaN in the rows.
    """
    X, y, g = _data(n=700, n_classes=n_classes, seed=2)
    model = PulseClassifier(max_iter=20, n_reference=100, missing_groups=[[3, 4]],
                            random_state=0).fit(X, y, groups=g)
    Xt, _, _ = _data(n=300, n_classes=n_classes, seed=3)
    Xt[:100, 3:] = np.nan                     # a pattern with its own temperature
    expl = explain_pulses(model, Xt, against=against)
    feats = ["x0", "x1", "x2", "x3", "x4"]
    assert_allclose(expl["base_value"] + expl[feats].sum(axis=1), expl["margin"], atol=1e-9)
    assert_allclose(expl["margin"], _margin_reference(model, Xt, expl), rtol=0, atol=1e-6)
    assert (expl["predicted"] == model.predict(Xt)).all()
    if against != "runner_up":
        other = expl["predicted"] != against
        assert (expl.loc[other, "against"] == against).all()
        assert (expl.loc[~other, "against"] != against).all()
    # the deployed model's log-odds: same sign, and close where the folds agree
    assert (np.sign(expl["log_odds"]) == np.sign(expl["margin"])).mean() > 0.95


def test_unknown_against_class_is_refused():
    """--against must name one of the model's classes."""
    X, y, g = _data(n=200)
    model = PulseClassifier(max_iter=5, n_reference=50).fit(X, y, groups=g)
    with pytest.raises(ValueError, match="against must be 'runner_up' or one of.*'zz'"):
        explain_pulses(model, X[:3], against="zz")


def test_display_units_for_people():
    """Times in µs (or ms), distances in km, currents in kA; dimensionless as '1'."""
    assert display_spec("width_s") == ("width", "µs", 1e6)
    assert display_spec("initial_half_cycle_s") == ("initial half cycle", "µs", 1e6)
    assert display_spec("altitude_m") == ("source altitude", "km", 1e-3)
    assert display_spec("isolation_s")[1:] == ("ms", 1e3)
    assert display_spec("peak_current_a")[1:] == ("kA", 1e-3)
    assert display_spec("bipolarity")[1] == "1"
    # every model feature has a display unit that is not empty
    assert all(display_spec(n)[1] for n in schema.model_feature_names())


# ----------------------------------------------------------------- importances
def test_permutation_importance_scores_only_held_out_flashes():
    """A flash signature that lets the trees memorise training flashes is worth nothing.

    Labels are drawn per flash; x0 is a random value per flash (no information about a
    new flash), x1 is informative, x2 noise (invented data). Scored on the training
    rows, x0 would be the most important feature; on held-out flashes it is not.
    """
    rng = np.random.default_rng(0)
    size = rng.integers(3, 12, 120)
    g = np.repeat(np.arange(120), size)
    lab = rng.integers(0, 2, 120)
    y = np.array(["a", "b"])[lab[g]]
    X = np.column_stack([rng.uniform(0, 1, 120)[g], lab[g] + rng.normal(0, 0.5, len(g)),
                         rng.normal(size=len(g))])
    model = PulseClassifier(max_iter=60, n_reference=100).fit(X, y, groups=g)
    imp = permutation_importance_by_flash(model, X, y, n_repeats=5)
    assert imp.index[0] == "x1" and imp.loc["x1", "log_loss_increase"] > 0.05
    assert imp.loc["x0", "log_loss_increase"] < 0.01
    assert abs(imp.loc["x2", "log_loss_increase"]) < 0.02
    assert imp.attrs["n_rows"] == len(g)
    # the same model scored on its own training rows does use x0 (the trap avoided)
    est, train = model.estimators_[0], model.oof_fold_ != 0
    from sklearn.metrics import log_loss

    Xp = X[train].copy()
    Xp[:, 0] = rng.permutation(Xp[:, 0])
    gain = log_loss(y[train], est.predict_proba(Xp)) - log_loss(y[train],
                                                                 est.predict_proba(X[train]))
    assert gain > 0.1


def test_permutation_importance_needs_held_out_folds():
    """A model trained on a single flash has no held-out fold: None, not a made-up number."""
    X, y, _ = _data(n=120)
    model = PulseClassifier(max_iter=5, n_reference=50).fit(X, y, groups=np.zeros(120))
    assert permutation_importance_by_flash(model, X, y) is None


# ----------------------------------------------------------------- a simulated season
@pytest.fixture(scope="module")
def season(tmp_path_factory):
    """A simulated hollowmere season (invented), its labels imported, a model trained (CLI)."""
    root = tmp_path_factory.mktemp("explain")
    cat = root / "hollowmere-2031"
    assert main(["-q", "simulate", str(cat), "--events", "800", "--seed", "5",
                 *SIM_SHAPE]) == 0
    store = str(root / "s.sqlite")
    assert main(["-q", "labels", "import", f"{cat}.labels.csv", "--catalog", str(cat),
                 "--analyst", "wren", "--store", store]) == 0
    model_dir = root / "models" / "m1"
    assert main(["-q", "train", str(cat), "--store", store, "--out", str(model_dir),
                 "--max-iter", "30"]) == 0
    return cat, model_dir


def test_clear_pulses_are_explained_by_shape_or_context(season):
    """Narrow bipolar vs stepped leader: the top reason is the pulse's shape or its context.

    Physics (from memory): narrow bipolar events are isolated, bipolar pulses ~10-20 us
    wide (Smith et al. 1999); stepped-leader pulses come in trains 10-30 us apart and
    are ~1 us wide (Rakov & Uman 2003, ch. 4). Simulated season, invented data.
    "Clear" = labelled and predicted alike with p > 0.9 (common practice, no source).
    """
    from classify.registry import load_model
    from features.extract import extract_features

    cat_dir, model_dir = season
    model, _ = load_model(model_dir)
    feats = extract_features(open_catalog(cat_dir)).reset_index(drop=True)
    truth = pd.read_csv(f"{cat_dir}.labels.csv").set_index("event_id")["label"]
    y = truth.loc[feats["event_id"]].to_numpy()
    X = feats[list(model.feature_names_in_)].astype(float)
    # widths and shape, the pulse train in the record, the VHF strength over its noise
    # (NBEs are the strongest VHF emitters: Smith et al. 1999, from memory) and the flash
    # context; never an instrument quantity (noise, absolute levels, record coverage)
    shape_or_context = {"width_s", "initial_half_cycle_s", "fwhm_s", "bipolarity",
                        "vhf_snr_db", "vhf_width_s",
                        "rise_time_s", "zero_crossing_s", "neighbours_before",
                        "neighbours_after", "nearest_neighbour_s", "neighbour_interval_s",
                        "largest_neighbour_ratio", "pre_level_ratio", "time_in_flash_s",
                        "channel_reuse"}
    for cls, other in [("narrow_bipolar", "stepped_leader"),
                       ("stepped_leader", "narrow_bipolar")]:
        expl = explain_pulses(model, X, against=other)
        clear = expl[(y == cls) & (expl["predicted"] == cls) & (expl["probability"] > 0.9)]
        assert len(clear) > 50 and (clear["against"] == other).all()
        contrib = clear[list(model.feature_names_in_)].abs()
        assert contrib.mean().idxmax() in shape_or_context, contrib.mean().nlargest(3)
        assert contrib.idxmax(axis=1).isin(shape_or_context).mean() > 0.6
        assert (clear["margin"] > 0).all()


def test_top_reasons_words_and_units(season):
    """Reasons are the largest |contributions| first, values in display units."""
    from classify.explain import event_features
    from classify.registry import load_model

    cat_dir, model_dir = season
    model, _ = load_model(model_dir)
    ids = list(open_catalog(cat_dir).event_ids[:4])
    X = event_features(open_catalog(cat_dir), ids)[list(model.feature_names_in_)]
    expl = explain_pulses(model, X.astype(float))
    reasons = top_reasons(expl, X, n=3)
    assert len(reasons) == 12 and list(reasons["pulse"].unique()) == ids
    for eid, r in reasons.groupby("pulse", sort=False):
        assert r["contribution"].abs().is_monotonic_decreasing
        c = expl.loc[eid, list(model.feature_names_in_)].abs().nlargest(3)
        assert list(r["feature"]) == list(c.index)
    for _, r in reasons.iterrows():
        label, unit, factor = display_spec(r["feature"])
        raw = X.at[r["pulse"], r["feature"]]
        if pd.notna(raw):
            assert r["value"] == pytest.approx(raw * factor)
        assert r["value_text"].startswith(label)
        assert r["text"].endswith(f"(for {expl.at[r['pulse'], 'predicted']})") == (
            r["contribution"] >= 0)


def test_explain_command_prints_reasons_and_refuses_unknown_ids(season, capsys):
    """`pulsesort explain`: class, runner-up and reasons per pulse; unknown id -> exit 2."""
    cat_dir, model_dir = season
    ids = list(open_catalog(cat_dir).event_ids[:2])
    assert main(["explain", str(cat_dir), *ids, "--model", str(model_dir), "--top", "4"]) == 0
    out = capsys.readouterr().out
    for eid in ids:
        assert eid in out
    assert out.count("rather than") == 2 and out.count("margin") >= 2
    reason_lines = [ln for ln in out.splitlines() if ln.startswith("    ")]
    assert len(reason_lines) == 8
    assert main(["explain", str(cat_dir), ids[0], "no-such-pulse", "--model",
                 str(model_dir)]) == 2
    err = capsys.readouterr().err
    assert "no event_id 'no-such-pulse'" in err and "events.csv" in err
    assert main(["explain", str(cat_dir), ids[0], "--model", str(model_dir), "--against",
                 "thunder"]) == 2
    assert "'thunder'" in capsys.readouterr().err


def test_model_card_lists_importances(season):
    """card.json holds every feature's importance, largest first; card.md the top 15."""
    _, model_dir = season
    card = json.loads((model_dir / "card.json").read_text())
    imp = card["importance"]
    feats = [r["feature"] for r in imp["features"]]
    assert sorted(feats) == sorted(card["features"])
    inc = [r["log_loss_increase"] for r in imp["features"]]
    assert inc == sorted(inc, reverse=True)
    # every training row: the pulses as recorded and their station variants
    assert imp["n_rows"] == card["n_training_pulses"] + card["n_station_variant_rows"]
    md = (model_dir / "card.md").read_text()
    section = md.split("## Feature importance")[1].split("\n## ")[0]
    rows = [ln for ln in section.splitlines() if ln.startswith("| ") and ln[2].isdigit()]
    assert len(rows) == 15 and f"`{feats[0]}`" in rows[0]


def test_card_without_held_out_folds_says_so():
    """One flash only: no importances (None), the card says why; older cards show nothing."""
    from types import SimpleNamespace

    from classify.training import build_card, fit_classifier, model_card_markdown

    names = schema.model_feature_names()
    rng = np.random.default_rng(0)
    y = np.array(["narrow_bipolar", "recoil"])[rng.integers(0, 2, 80)]
    table = pd.DataFrame(rng.normal(size=(80, len(names))), columns=names)
    table[names[0]] += 3 * (y == "recoil")
    table = table.assign(catalog_id="hollowmere-2031", event_id=[f"e{i}" for i in range(80)],
                         label=y, season="2031", group="hollowmere-2031/f1")
    model = fit_classifier(table, max_iter=5, n_reference=20)
    cat = SimpleNamespace(catalog_id="hollowmere-2031", station="hollowmere", season="2031",
                          content_hash="sha256:" + "0" * 64, path="x", n_events=80)
    card = build_card(model, table, [cat], "v1")
    assert card["importance"] is None
    assert "Not computed: the model has no held-out folds" in model_card_markdown(card)
    del card["importance"]
    assert "Feature importance" not in model_card_markdown(card)
