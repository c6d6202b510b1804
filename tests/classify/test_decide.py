"""Decisions from probabilities: sets, review only for a reason, every reason in words.

The probabilities here are invented (self-consistency of the decision rules).
"""

import numpy as np
import pandas as pd

from classify.decide import REVIEW_REASONS, decide, relaxed_features

CLASSES = ["narrow_bipolar", "recoil", "stepped_leader"]


def _decide(proba, sets=None, **kw):
    proba = np.asarray(proba, dtype=float)
    sets = (proba >= 0.5) if sets is None else np.asarray(sets)
    kw.setdefault("usable", np.ones(len(proba), bool))
    return decide(CLASSES, proba, sets, review_below=0.8, coverage=0.95, **kw)


def test_sets_are_empty_only_for_unusable_records():
    """A usable record's set holds its most probable class; an unusable one's is empty."""
    proba = [[0.4, 0.35, 0.25], [0.98, 0.01, 0.01], [0.6, 0.3, 0.1]]
    out = _decide(proba, sets=np.zeros((3, 3), bool), usable=np.array([True, True, False]))
    assert out["prediction_set"].tolist() == ["narrow_bipolar", "narrow_bipolar", ""]
    assert out["label"].tolist() == ["narrow_bipolar", "narrow_bipolar", ""]
    assert out.loc[2, "review_reason"] == "field_unusable"
    assert np.isnan(out.loc[2, "confidence"])


def test_confident_singletons_stay_out_of_the_queue():
    """A one-class set with confidence > 0.99 is reviewed only for a named reason."""
    rng = np.random.default_rng(0)
    top = rng.uniform(0.991, 0.9999, 200)
    proba = np.column_stack([top, (1 - top) / 2, (1 - top) / 2])
    out = _decide(proba, novelty=np.where(np.arange(200) == 7, 9.0, 1.0), novelty_threshold=3.0)
    queued = out[out["needs_review"]]
    assert queued.index.tolist() == [7]
    assert queued["review_reason"].tolist() == ["novel"]


def test_every_reason_in_words():
    """Each reason triage can give is written out, naming what it is about."""
    proba = np.array([[0.55, 0.40, 0.05],     # low confidence + two classes in the set
                      [0.97, 0.02, 0.01],     # novel
                      [0.90, 0.09, 0.01],     # censored, the class depends on it
                      [0.90, 0.05, 0.05],     # unusable
                      [0.90, 0.05, 0.05]])    # other (cold start)
    sets = np.array([[1, 1, 0], [1, 0, 0], [1, 0, 0], [1, 0, 0], [1, 0, 0]], bool)
    relaxed = proba.copy()
    relaxed[2] = [0.2, 0.1, 0.7]
    out = _decide(proba, sets, usable=np.array([True, True, True, False, True]),
                  novelty=np.array([1.0, 4.1, 1.0, 1.0, 1.0]), novelty_threshold=2.5,
                  relaxed_proba=relaxed, censored_channel=np.array(["", "", "VHF", "", ""]),
                  other=np.array([False, False, False, False, True]))
    why = out["review_why"].tolist()
    assert "confidence 0.55 is below the review level 0.80" in why[0]
    assert "2 classes cannot be ruled out at 95%: narrow_bipolar or recoil" in why[0]
    assert "unlike every labelled pulse" in why[1] and "4.1" in why[1]
    assert "VHF record reached full scale" in why[2] and "stepped_leader" in why[2]
    assert why[3] == "no usable field record and no VHF or sources: no class is given"
    assert why[4] == "fits none of the classes the rules know" and out.loc[4, "label"] == "other"
    codes = set(";".join(out["review_reason"]).split(";"))
    assert codes == set(REVIEW_REASONS)


def test_a_clipped_record_is_reviewed_only_when_its_class_depends_on_it():
    """Relaxing the censored value changes nothing: no review; it changes the class: review."""
    proba = np.array([[0.97, 0.02, 0.01], [0.97, 0.02, 0.01]])
    relaxed = np.array([[0.99, 0.005, 0.005], [0.3, 0.6, 0.1]])
    out = _decide(proba, relaxed_proba=relaxed, censored_channel=np.array(["VHF", "field"]))
    assert out["needs_review"].tolist() == [False, True]
    assert out.loc[1, "review_reason"] == "censored_decision"


def test_relaxed_features_raise_only_the_censored_values():
    """The VHF SNR of VHF-censored rows goes up 10 dB, field amplitudes x3 where clipped."""
    X = pd.DataFrame({"vhf_snr_db": [30.0, 30.0], "peak_current_a": [-5e4, -5e4],
                      "bipolarity": [0.3, 0.3]})
    R = relaxed_features(X, np.array([True, False]), np.array([False, True]))
    assert R["vhf_snr_db"].tolist() == [40.0, 30.0]
    assert R["peak_current_a"].tolist() == [-5e4, -1.5e5]
    assert R["bipolarity"].tolist() == [0.3, 0.3]
    assert X["vhf_snr_db"].tolist() == [30.0, 30.0]          # the input is not changed
