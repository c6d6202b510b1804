"""Prior-shift EM (Saerens, Latinne & Decaestecker 2002) and Bayes re-weighting."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats
from sklearn.linear_model import LogisticRegression
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from classify.priors import adjust_priors, estimate_priors_em, prior_shift

# Hand-computable two-class example. x takes two values, a and b, with
# p(a|c0) = 0.8, p(b|c0) = 0.2, p(a|c1) = 0.3, p(b|c1) = 0.7 and training priors
# (1/2, 1/2), so by Bayes p_t(c0|a) = 0.4 / 0.55 = 8/11 and p_t(c0|b) = 0.1 / 0.45 = 2/9.
# Under new priors (0.2, 0.8): p(a) = 0.2*0.8 + 0.8*0.3 = 0.4, so a sample of 40 a and
# 60 b has exactly the new mix's expected counts. The likelihood
# 0.4 log(0.3 + 0.5 pi) + 0.6 log(0.7 - 0.5 pi) has its maximum where
# 0.4 (0.7 - 0.5 pi) = 0.6 (0.3 + 0.5 pi), i.e. pi = 0.2 exactly (worked by hand).
POST_A = [8 / 11, 3 / 11]
POST_B = [2 / 9, 7 / 9]


def _hand_sample(n_a, n_b):
    return np.array([POST_A] * n_a + [POST_B] * n_b)


def test_em_recovers_the_hand_computed_prior():
    """40 a + 60 b rows: EM gives priors (0.2, 0.8) and the Bayes posteriors 0.4 and 1/15."""
    new, adjusted, n_iter = estimate_priors_em(_hand_sample(40, 60), [0.5, 0.5], tol=1e-12)
    assert_allclose(new, [0.2, 0.8], atol=1e-9)
    # Bayes under the new priors: p_n(c0|a) = 0.2*0.8 / 0.4 = 0.4 and
    # p_n(c0|b) = 0.2*0.2 / (0.2*0.2 + 0.8*0.7) = 0.04 / 0.6 = 1/15 (by hand)
    assert_allclose(adjusted[0], [0.4, 0.6], atol=1e-9)
    assert_allclose(adjusted[-1], [1 / 15, 14 / 15], atol=1e-9)
    assert 1 < n_iter < 1000


def test_adjust_priors_matches_bayes_rule_by_hand():
    """Re-weighting (8/11, 3/11) by (0.2, 0.8) / (0.5, 0.5) gives (0.4, 0.6) (by hand)."""
    out = adjust_priors(np.array([POST_A, POST_B]), [0.5, 0.5], [0.2, 0.8])
    assert_allclose(out, [[0.4, 0.6], [1 / 15, 14 / 15]], rtol=1e-12)
    assert_allclose(adjust_priors(np.array([POST_A]), [0.5, 0.5], [0.5, 0.5]), [POST_A],
                    rtol=1e-12)


def test_training_priors_are_a_fixed_point():
    """55 a + 45 b rows average to the training priors: EM stops after one step, unchanged."""
    # mean p_t(c0) = 0.55 * 8/11 + 0.45 * 2/9 = 0.4 + 0.1 = 0.5 (by hand)
    proba = _hand_sample(55, 45)
    new, adjusted, n_iter = estimate_priors_em(proba, [0.5, 0.5])
    assert n_iter == 1
    assert_allclose(new, [0.5, 0.5], atol=1e-12)
    assert_allclose(adjusted, proba, atol=1e-12)


def _gaussian_posteriors(x, means, priors):
    like = stats.norm.pdf(x[:, None], loc=np.asarray(means)[None, :], scale=1.0)
    joint = like * np.asarray(priors)[None, :]
    return joint / joint.sum(axis=1, keepdims=True)


def test_large_simulated_mixture_recovers_priors_within_0_01():
    """4 overlapping unit Gaussians, exact posteriors, 100,000 pulses: error < 0.01 per class."""
    rng = np.random.default_rng(0)
    means = [0.0, 1.5, 3.0, 4.5]
    train = np.full(4, 0.25)
    true_new = np.array([0.5, 0.25, 0.15, 0.10])
    y = rng.choice(4, size=100_000, p=true_new)
    x = rng.normal(np.asarray(means)[y], 1.0)
    proba = _gaussian_posteriors(x, means, train)
    before = proba.copy()
    new, adjusted, n_iter = estimate_priors_em(proba, train)
    assert_allclose(new, true_new, atol=0.01)
    assert np.abs(proba.mean(axis=0) - true_new).max() > 0.03   # the unadjusted mean is off
    # the fixed point of the M step: the priors are the mean adjusted posterior
    assert_allclose(adjusted.mean(axis=0), new, atol=1e-6)
    assert_allclose(new.sum(), 1.0, rtol=1e-12)
    assert_allclose(proba, before, rtol=0)                      # input not modified
    assert n_iter < 1000


def test_em_on_a_fitted_classifier_recovers_the_new_mix():
    """Logistic regression (well specified for equal-variance Gaussians) + EM: within 0.02."""
    rng = np.random.default_rng(0)
    means = np.array([[0.0, 0.0], [2.0, 0.5], [0.5, 2.0]])
    n_train = 3000
    y_tr = np.repeat(np.arange(3), n_train)
    x_tr = means[y_tr] + rng.normal(size=(3 * n_train, 2))
    clf = LogisticRegression().fit(x_tr, y_tr)
    true_new = np.array([0.6, 0.3, 0.1])
    y_new = rng.choice(3, size=20_000, p=true_new)
    x_new = means[y_new] + rng.normal(size=(len(y_new), 2))
    new, _, _ = estimate_priors_em(clf.predict_proba(x_new), np.full(3, 1 / 3))
    assert_allclose(new, true_new, atol=0.02)


def test_em_warns_when_not_converged():
    """max_iter=1 on shifted data: a RuntimeWarning and the one-step estimate."""
    with pytest.warns(RuntimeWarning, match="did not converge in 1 iterations"):
        new, _, n_iter = estimate_priors_em(_hand_sample(40, 60), [0.5, 0.5], max_iter=1)
    assert n_iter == 1
    # one M step from (1/2, 1/2): mean p_t(c0) = 0.4 * 8/11 + 0.6 * 2/9 (by hand)
    assert_allclose(new[0], 0.4 * 8 / 11 + 0.6 * 2 / 9, rtol=1e-12)


@pytest.mark.parametrize(("proba", "priors", "match"), [
    ([[0.7, 0.7]], [0.5, 0.5], r"row 0: probabilities must sum to 1"),
    ([[0.5, 0.5], [np.nan, 1.0]], [0.5, 0.5], r"row 1: probabilities must be finite"),
    ([0.5, 0.5], [0.5, 0.5], r"must be 2-D"),
    ([[0.5, 0.5]], [1.0, 0.0], r"train_priors must be finite and > 0"),
    ([[0.5, 0.5]], [0.3, 0.3, 0.4], r"one value per class \(2\)"),
    ([[0.5, 0.5]], [0.4, 0.4], r"train_priors must sum to 1"),
])
def test_bad_input_is_refused(proba, priors, match):
    """Malformed probabilities or priors raise ValueError naming the row or argument."""
    with pytest.raises(ValueError, match=match):
        estimate_priors_em(proba, priors)


def test_adjust_refuses_rows_with_no_mass_left():
    """A row whose probability sits only on classes with new prior 0 has no posterior."""
    with pytest.raises(ValueError, match=r"row 1: all its probability"):
        adjust_priors([[0.5, 0.5], [1.0, 0.0]], [0.5, 0.5], [0.0, 1.0])


def test_prior_shift_on_a_feature_table():
    """A classifier fitted on feature columns: EM finds B's mix; rows without field_ok are
    left out; the naive mean probability stays biased toward the training mix."""
    rng = np.random.default_rng(0)

    def table(n, frac0):
        y = (rng.uniform(size=n) >= frac0).astype(int)
        return pd.DataFrame({"event_id": [f"e{i}" for i in range(n)],
                             "bipolarity": rng.normal(np.where(y == 0, 0.5, 0.2), 0.15),
                             "rise_time_s": rng.normal(np.where(y == 0, 4e-7, 2e-7), 1e-7),
                             "field_ok": True}), y

    train, y_train = table(4000, 0.5)
    cols = ["bipolarity", "rise_time_s"]
    clf = make_pipeline(StandardScaler(), LogisticRegression()).fit(train[cols], y_train)
    clf.class_priors_ = np.bincount(y_train) / len(y_train)
    new, y_new = table(8000, 0.8)
    new.loc[:99, "field_ok"] = False
    new.loc[:99, cols] = np.nan                 # unusable rows: would break predict_proba
    shift = prior_shift(clf, new)
    assert shift.n_pulses == 8000 - 100
    truth = np.bincount(y_new[100:], minlength=2) / (8000 - 100)
    assert_allclose(shift.new_priors, truth, atol=0.02)
    assert np.abs(shift.mean_proba - truth).max() > 0.03
    assert shift.classes.tolist() == [0, 1]
    with pytest.raises(ValueError, match=r"lacks the model's input column\(s\) \['bipolarity'\]"):
        prior_shift(clf, new.drop(columns=["bipolarity"]))
