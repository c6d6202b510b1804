"""The pulse classifier: sklearn's estimator checks, calibration, conformal sets, novelty."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.special import softmax
from sklearn.utils.estimator_checks import parametrize_with_checks

from classify.models import PulseClassifier, conformal_thresholds, fit_temperature

EXPECTED_FAILURES = {
    "check_sample_weight_equivalence_on_dense_data":
        "cross-validation folds and the masked-copy augmentation see repeated rows as "
        "separate rows, so integer weights are not equivalent to repetition",
}


@parametrize_with_checks([PulseClassifier(max_iter=5, n_splits=2, n_reference=50)],
                         expected_failed_checks=lambda est: EXPECTED_FAILURES)
def test_sklearn_estimator_checks(estimator, check):
    """scikit-learn's estimator checks (sklearn.utils.estimator_checks)."""
    check(estimator)


def _blobs(n=600, seed=0, sep=3.0):
    rng = np.random.default_rng(seed)
    y = rng.integers(0, 3, n)
    centers = np.array([[0, 0, 0, 0], [sep, 0, 0, 0], [0, sep, 0, 0]])
    X = centers[y] + rng.normal(size=(n, 4))
    return X, np.array(["a", "b", "c"])[y], rng.integers(0, n // 6, n)


def test_fit_temperature_recovers_known_temperature():
    """Labels drawn from softmax(z / 2) and probabilities softmax(z): T = 2 within 5 %."""
    rng = np.random.default_rng(0)
    z = rng.normal(0, 3, (20000, 3))
    p_true = softmax(z / 2.0, axis=1)
    y = np.array([rng.choice(3, p=p) for p in p_true])
    assert_allclose(fit_temperature(softmax(z, axis=1), y), 2.0, rtol=0.05)


def test_conformal_thresholds_hand_computed():
    """Class 0 scores 0.1..0.9 (n=9), alpha=0.2: rank ceil(10*0.8)=8 -> q=0.8."""
    p_true = 1 - np.linspace(0.1, 0.9, 9)
    proba = np.column_stack([p_true, 1 - p_true])
    q = conformal_thresholds(proba, np.zeros(9, int), 2, coverage=0.8)
    assert_allclose(q[0], 0.8)
    assert q[1] == 1.0  # no calibration pulses of class 1: always in the set


def test_a_class_with_too_few_calibration_pulses_gets_the_marginal_threshold():
    """Class 1 has 2 pulses, too few for rank ceil(3 * 0.8) = 3: it takes the marginal
    split-conformal threshold over all 11 pulses, rank ceil(12 * 0.8) = 10 of the sorted
    scores (Vovk et al. 2005; hand-computed), not 1 (which would put it in every set)."""
    p0 = 1 - np.linspace(0.1, 0.9, 9)                   # class 0 scores 0.1 .. 0.9
    proba = np.vstack([np.column_stack([p0, 1 - p0]), [[0.05, 0.95], [0.15, 0.85]]])
    y = np.array([0] * 9 + [1, 1])
    q = conformal_thresholds(proba, y, 2, coverage=0.8)
    scores = np.sort(np.r_[np.linspace(0.1, 0.9, 9), 0.05, 0.15])
    assert_allclose(q[0], 0.8)
    assert_allclose(q[1], scores[9])


def test_grouped_cv_keeps_flashes_together():
    """No group appears in two out-of-fold folds."""
    X, y, g = _blobs()
    m = PulseClassifier(max_iter=20, n_reference=100).fit(X, y, groups=g)
    for group in np.unique(g):
        assert len(np.unique(m.oof_fold_[g == group])) == 1


def test_calibrated_and_covering_on_held_out_data():
    """On fresh data of the same kind: ECE small, coverage near target."""
    from classify.stats import empirical_coverage, expected_calibration_error

    X, y, g = _blobs(2000, seed=1, sep=2.0)
    m = PulseClassifier(max_iter=25, coverage=0.9, n_reference=200).fit(X, y, groups=g)
    Xt, yt, _ = _blobs(3000, seed=2, sep=2.0)
    proba = m.predict_proba(Xt)
    assert_allclose(proba.sum(axis=1), 1.0)
    assert expected_calibration_error(proba, yt, classes=m.classes_) < 0.04
    cov = empirical_coverage(m.predict_set(Xt), yt, classes=m.classes_)
    assert abs(cov - 0.9) < 0.03


def test_novelty_flags_far_points_only():
    """Points far outside the training cloud are novel; training-like points mostly not."""
    X, y, g = _blobs(800)
    m = PulseClassifier(max_iter=20, n_reference=300, novelty_quantile=0.99).fit(X, y,
                                                                                 groups=g)
    Xt, _, _ = _blobs(500, seed=5)
    assert m.is_novel(Xt).mean() < 0.05
    far = np.array([[40.0, -40, 30, 25], [-30, 50, -20, 10]])
    assert m.is_novel(far).all()


def test_missing_group_augmentation_handles_absent_columns():
    """Trained with a maskable column group, a model still classifies rows missing it."""
    rng = np.random.default_rng(3)
    n = 1500
    y = rng.integers(0, 2, n)
    X = np.column_stack([y * 3 + rng.normal(size=n), y * 3 + rng.normal(size=n),
                         rng.normal(size=n)])
    m = PulseClassifier(max_iter=30, missing_groups=[[0]], n_reference=200).fit(X, y)
    Xt = X.copy()
    Xt[:, 0] = np.nan
    assert (m.predict(Xt) == y).mean() > 0.9


def test_reference_and_nearest_labelled():
    """The reference set keeps ids and labels; a training row's nearest is itself."""
    X, y, g = _blobs(300)
    ids = np.array([f"cat\x1fe{i}" for i in range(300)])
    m = PulseClassifier(max_iter=10, n_reference=50).fit(X, y, groups=g, sample_ids=ids)
    ref = m.reference_
    assert list(ref.columns[:3]) == ["catalog_id", "event_id", "label"]
    assert ref["catalog_id"].eq("cat").all()
    row = m.reference_index_[0]
    idx, dist = m.nearest_labelled(X[[row]], k=3)
    assert idx[0, 0] == 0 and dist[0, 0] == pytest.approx(0, abs=1e-9)
    assert_allclose(ref.iloc[0, 3:].to_numpy(float), X[row], rtol=1e-9, atol=1e-9)


def test_bad_parameters_are_named():
    """A bad parameter names itself and the value."""
    X, y, _ = _blobs(60)
    with pytest.raises(ValueError, match="'coverage' must be a float in \\(0, 1\\), got 1.5"):
        PulseClassifier(coverage=1.5).fit(X, y)


def test_nan_euclidean_matches_scikit_learn():
    """Our NaN-aware distance equals sklearn's nan_euclidean_distances (reference)."""
    from sklearn.metrics.pairwise import nan_euclidean_distances

    from classify.models import nan_euclidean

    rng = np.random.default_rng(0)
    A, B = rng.normal(size=(40, 6)), rng.normal(size=(25, 6))
    A[rng.random(A.shape) < 0.2] = np.nan
    B[rng.random(B.shape) < 0.2] = np.nan
    assert_allclose(nan_euclidean(A, B), nan_euclidean_distances(A, B), rtol=1e-9, atol=1e-9)


def test_season_thresholds_hand_computed():
    """Plug-in season thresholds: smallest q whose probability mass reaches the coverage."""
    from classify.models import season_thresholds

    # class 0 probabilities 0.99 (x50) and 0.6 (x50): mass 79.5; 95 % = 75.5 needs the
    # 0.99 pulses (49.5) and 44 of the 0.6 ones -> q = 1 - 0.6 = 0.4
    p0 = np.r_[np.full(50, 0.99), np.full(50, 0.6)]
    proba = np.column_stack([p0, 1 - p0])
    q = season_thresholds(proba, 0.95, fallback=np.array([0.01, 0.01]))
    assert_allclose(q[0], 0.4)
    # excluded (flagged) pulses count but cannot be covered: 10 of 100 certain pulses
    certain = np.column_stack([np.ones(100), np.zeros(100)])
    flagged = np.arange(100) < 10
    assert season_thresholds(certain, 0.95, np.array([0.01, 0.01]), exclude=flagged)[0] == 0.5
    few = np.arange(100) < 2
    assert season_thresholds(certain, 0.95, np.array([0.01, 0.01]), exclude=few)[0] == 0.0
    # a class with almost no mass keeps the training threshold
    assert season_thresholds(certain, 0.95, np.array([0.01, 0.02]))[1] == 0.02
