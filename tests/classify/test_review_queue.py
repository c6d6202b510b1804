"""Tests of the review queue rule (classify.review._queue) and the store's review marks."""

from __future__ import annotations

import math
import sqlite3

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy.stats import entropy

from classify.labels import LabelStore
from classify.review import build_queue, diversity_order, priority_scores, standardised_features

from ._labels_testkit import tiny_catalog

CID = "hollowmere-2031"


def _results(ids, probs, *, novelty=None, needs=None, feats=None, catalog_id=CID):
    """A results table in the triage column order (two classes unless probs say more)."""
    probs = np.asarray(probs, float)
    n, k = probs.shape
    classes = ["narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud"][:k]
    df = pd.DataFrame({"event_id": ids,
                       "label": [classes[i] for i in probs.argmax(axis=1)],
                       "confidence": probs.max(axis=1),
                       "needs_review": [True] * n if needs is None else needs,
                       "novel": [False] * n,
                       "prediction_set": ["|".join(classes)] * n})
    for j, c in enumerate(classes):
        df[f"p_{c}"] = probs[:, j]
    df["review_reason"] = "low_confidence"
    df["novelty_score"] = np.zeros(n) if novelty is None else novelty
    df["model_version"] = "m-test"
    df["catalog_id"] = catalog_id
    feats = {"width_s": np.arange(n) * 1e-6, "bipolarity": np.arange(n) % 3} if feats is None \
        else feats
    for name, v in feats.items():
        df[name] = v
    return df


@pytest.fixture
def cat(tmp_path):
    return tiny_catalog(tmp_path / CID)


@pytest.fixture
def store(tmp_path, cat):
    s = LabelStore(tmp_path / "labels.sqlite")
    s.register_catalog(cat)
    yield s
    s.close()


def test_uncertainty_is_entropy_normalised_by_log_k():
    """Uncertainty equals scipy's entropy / ln K: 1 for uniform, 0 for certain."""
    p = np.array([[0.5, 0.5, 0, 0], [1, 0, 0, 0], [0.25] * 4, [0.7, 0.2, 0.1, 0.0]])
    u, _, pr = priority_scores(_results(list("abcd"), p))
    expected = entropy(p, axis=1) / np.log(4)          # scipy.stats.entropy, natural log
    assert_allclose(u, expected, atol=1e-12)
    assert_allclose(u[:3], [0.5, 0.0, 1.0], atol=1e-12)
    # by hand: -(.7 ln .7 + .2 ln .2 + .1 ln .1) / ln 4
    by_hand = -(0.7 * math.log(0.7) + 0.2 * math.log(0.2) + 0.1 * math.log(0.1)) / math.log(4)
    assert_allclose(u[3], by_hand, rtol=1e-12)
    assert_allclose(pr, u, atol=1e-12)  # all novelty scores equal: rank 0 for everyone


def test_novelty_term_is_the_rank_fraction_and_ignores_missing_scores():
    """novelty_rank = fraction of rows with a lower score; NaN scores count 0."""
    p = np.tile([0.5, 0.5], (4, 1))
    u, nov, pr = priority_scores(_results(list("abcd"), p, novelty=[3.0, 1.0, 2.0, np.nan]))
    assert_allclose(nov, [2 / 4, 0.0, 1 / 4, 0.0], atol=1e-12)
    assert_allclose(pr, u + 0.5 * nov, atol=1e-12)
    _, _, pr2 = priority_scores(_results(list("abcd"), p, novelty=[3.0, 1.0, 2.0, np.nan]),
                                novelty_weight=2.0)
    assert_allclose(pr2 - u, 2.0 * nov, atol=1e-12)


def test_diversity_order_by_hand():
    """A near-duplicate of the first pick drops behind a distinct, slightly weaker pulse."""
    priority = np.array([1.0, 0.95, 0.8])
    z = np.array([[0.0, 0.0], [0.0, 0.0], [3.0, 3.0]])
    # after 0: mmr(1) = .7*.95 - .3*exp(0) = 0.365; mmr(2) = .7*.8 - .3*exp(-9) = 0.56
    assert diversity_order(priority, z).tolist() == [0, 2, 1]
    assert diversity_order(priority, z, lam=1.0).tolist() == [0, 1, 2]
    # similarity exp(-d^2) with d the RMS difference: a gap of 0.3 per feature
    z2 = np.array([[0.0, 0.0], [0.3, 0.3], [3.0, 3.0]])
    mmr1 = 0.7 * 0.95 - 0.3 * math.exp(-0.09)
    assert mmr1 < 0.7 * 0.8 - 0.3 * math.exp(-9)
    assert diversity_order(priority, z2).tolist() == [0, 2, 1]
    assert diversity_order(priority, z, n_take=2).tolist() == [0, 2]
    assert diversity_order(np.zeros(0), np.zeros((0, 2))).tolist() == []


def test_reviewed_pulses_count_as_taken_in_the_diversity_pass(cat, store):
    """A twin of an already-labelled pulse drops behind; the rebuilt queue continues the first."""
    priority = np.array([1.0, 0.95, 0.8])
    z = np.array([[0.0, 0.0], [0.0, 0.0], [3.0, 3.0]])
    # taken twin of 0: mmr(0) = .7 - .3 = .4, mmr(1) = .365, mmr(2) = .56 - .3 exp(-9)
    assert diversity_order(priority, z, taken=z[:1]).tolist() == [2, 0, 1]
    ids = list(map(str, cat.event_ids[:6]))
    p = [[0.5, 0.5], [0.51, 0.49], [0.6, 0.4], [0.62, 0.38], [0.7, 0.3], [0.75, 0.25]]
    feats = {"width_s": [1e-6, 1.1e-6, 9e-6, 9.2e-6, 30e-6, 31e-6],
             "bipolarity": [0.1, 0.1, 0.5, 0.5, 0.9, 0.9]}
    res = _results(ids, p, feats=feats)
    first = build_queue(res, store, CID)["event_id"].tolist()
    assert sorted(first[:3]) == [ids[0], ids[2], ids[4]]   # one of each twin pair first
    store.record_decision(CID, first[0], "recoil", analyst="wren", origin="review")
    store.record_review_mark(CID, first[1], "skip", analyst="wren")
    again = build_queue(res, store, CID, analyst="wren")["event_id"].tolist()
    assert again == first[2:]


def test_standardised_features_mean_zero_unit_sd_missing_at_mean():
    """Model features are z-scored per column; NaN becomes 0; constant columns 0."""
    df = pd.DataFrame({"width_s": [1.0, 2.0, 3.0, np.nan], "bipolarity": [5.0] * 4,
                       "snr_db": [1.0, 2.0, 3.0, 4.0]})    # snr_db is not a model feature
    z = standardised_features(df)
    assert z.shape == (4, 2)
    assert_allclose(z[:, 0], [-math.sqrt(1.5), 0.0, math.sqrt(1.5), 0.0], atol=1e-12)
    assert_allclose(z[:, 1], 0.0, atol=0)


def test_queue_orders_by_priority_then_diversity(cat):
    """Uncertain first; a duplicate of the first pick is moved behind a distinct pulse."""
    ids = list(map(str, cat.event_ids[:4]))
    p = [[0.5, 0.5], [0.52, 0.48], [0.7, 0.3], [0.99, 0.01]]
    feats = {"width_s": [1e-6, 1e-6, 9e-6, 20e-6], "bipolarity": [0.1, 0.1, 0.9, 0.5]}
    q = build_queue(_results(ids, p, feats=feats))
    # ids[1] is a twin of ids[0]: mmr = .7*.9988 - .3 = 0.399 < .7*.8813 - .3*sim(0,2)
    assert q["event_id"].tolist() == [ids[0], ids[2], ids[1], ids[3]]
    assert q["queue_rank"].tolist() == [1, 2, 3, 4]
    assert_allclose(q["uncertainty"].iloc[0], 1.0, atol=1e-12)
    plain = build_queue(_results(ids, p, feats=feats), lam=1.0)
    assert plain["event_id"].tolist() == ids
    assert build_queue(_results(ids, p, feats=feats), budget=2)["event_id"].tolist() == \
        [ids[0], ids[2]]


def test_queue_keeps_needs_review_and_unlabelled_only(cat, store):
    """Labelled and conflicting events, and pulses not needing review, stay out."""
    ids = list(map(str, cat.event_ids[:6]))
    p = np.tile([0.5, 0.5], (6, 1))
    res = _results(ids, p, needs=[True, True, True, True, False, True])
    store.record_decision(CID, ids[0], "recoil", analyst="wren", origin="review")
    store.record_decision(CID, ids[1], "recoil", analyst="wren", origin="review")
    store.record_decision(CID, ids[1], "narrow_bipolar", analyst="tamsin", origin="review")
    store.record_decision(CID, ids[2], "recoil", analyst="wren", origin="review")
    store.retract(CID, ids[2], analyst="wren")               # unlabelled again
    q = build_queue(res, store, CID)
    assert sorted(q["event_id"]) == sorted([ids[2], ids[3], ids[5]])
    assert build_queue(res)["event_id"].tolist() != []      # no store: nothing removed
    assert len(build_queue(res)) == 5


def test_review_marks_leave_the_analysts_queue_until_withdrawn(cat, store):
    """unsure/skip marks take a pulse out of that analyst's queue; withdrawn brings it back."""
    ids = list(map(str, cat.event_ids[:3]))
    res = _results(ids, np.tile([0.5, 0.5], (3, 1)))
    store.record_review_mark(CID, ids[0], "unsure", analyst="wren", note="<b>odd</b>",
                             model_version="m-test", confidence=0.5)
    store.record_review_mark(CID, ids[1], "skip", analyst="wren")
    assert sorted(build_queue(res, store, analyst="wren")["event_id"]) == [ids[2]]
    assert len(build_queue(res, store, analyst="tamsin")) == 3
    assert len(build_queue(res, store, analyst="wren", revisit=True)) == 3
    store.record_review_mark(CID, ids[1], "withdrawn", analyst="wren")
    assert sorted(build_queue(res, store, analyst="wren")["event_id"]) == sorted(ids[1:])
    marks = store.review_marks([CID], analyst="wren")
    assert marks[["event_id", "mark", "note"]].values.tolist() == [[ids[0], "unsure",
                                                                      "<b>odd</b>"]]
    assert_allclose(marks["confidence"], [0.5], atol=0)
    assert len(store.review_marks(history=True)) == 3
    assert store.current_labels([CID])["status"].eq("unlabelled").all()   # marks are no labels


def test_review_marks_are_validated_and_append_only(cat, store, tmp_path):
    """Unknown marks, events and withdrawals of nothing are refused; rows cannot change."""
    eid = str(cat.event_ids[0])
    with pytest.raises(ValueError, match="mark must be one of unsure, skip, withdrawn"):
        store.record_review_mark(CID, eid, "maybe", analyst="wren")
    with pytest.raises(ValueError, match="is not an event of catalog"):
        store.record_review_mark(CID, "no-such-event", "skip", analyst="wren")
    with pytest.raises(ValueError, match="no review mark on event .* to withdraw"):
        store.record_review_mark(CID, eid, "withdrawn", analyst="wren")
    with pytest.raises(ValueError, match="confidence must be a number in"):
        store.record_review_mark(CID, eid, "skip", analyst="wren", confidence=1.5)
    store.record_review_mark(CID, eid, "skip", analyst="wren")
    con = sqlite3.connect(tmp_path / "labels.sqlite")
    with pytest.raises(sqlite3.DatabaseError, match="append-only"):
        con.execute("UPDATE review_marks SET mark = 'unsure'")
    with pytest.raises(sqlite3.DatabaseError, match="append-only"):
        con.execute("DELETE FROM review_marks")
    con.close()
    assert store.check_integrity() == []


def test_queue_input_errors_name_the_problem(cat):
    """Missing columns, a bad budget, or several catalogs give clear errors."""
    ids = list(map(str, cat.event_ids[:2]))
    res = _results(ids, [[0.5, 0.5], [0.6, 0.4]])
    with pytest.raises(ValueError, match="no 'needs_review' column"):
        build_queue(res.drop(columns="needs_review"))
    with pytest.raises(ValueError, match="budget must be a whole number >= 1"):
        build_queue(res, budget=0)
    two = pd.concat([res, _results(ids, [[0.5, 0.5], [0.6, 0.4]], catalog_id="other-2032")])
    with pytest.raises(ValueError, match="several catalogs"):
        build_queue(two)
    assert len(build_queue(two, catalog_id="other-2032")) == 2
    with pytest.raises(ValueError, match="catalog 'absent' is not in the results"):
        build_queue(res, catalog_id="absent")
    bad = res.assign(needs_review=["yes", "no"])
    with pytest.raises(ValueError, match="needs_review must be 'true' or 'false'"):
        build_queue(bad)
