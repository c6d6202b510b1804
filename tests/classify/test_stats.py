"""Cluster bootstrap, calibration error, F1/recall wrappers and conformal coverage."""

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import stats
from sklearn import metrics

from classify.stats import (
    bootstrap_ci,
    empirical_coverage,
    expected_calibration_error,
    flash_groups,
    macro_f1,
    per_class_recall,
    reliability_curve,
)

Z95 = stats.norm.ppf(0.975)   # 1.95996...


def _grouped_normal(rng, n_groups, per_group, within_sd=1.0):
    """Group effect u ~ N(0, 1) shared by the group's rows, plus N(0, within_sd^2) noise."""
    g = np.repeat(np.arange(n_groups), per_group)
    x = rng.normal(size=n_groups)[g] + rng.normal(scale=within_sd, size=g.size)
    return g, x


def test_cluster_bootstrap_of_a_mean_has_the_analytic_interval():
    """Mean of 400 N(0,1) groups of 4: interval = mean +- 1.96 sqrt(var/G), width within 10 %."""
    rng = np.random.default_rng(0)
    n_groups, m = 400, 4
    g, x = _grouped_normal(rng, n_groups, m)
    est, lo, hi = bootstrap_ci(np.mean, g, x, n_boot=2000)
    # a group mean has variance 1 + 1/m (normal theory); the mean of G of them
    # is normal with sd sqrt((1 + 1/m) / G), so the 95 % interval is +- 1.96 sd
    half = Z95 * np.sqrt((1 + 1 / m) / n_groups)
    assert_allclose(est, x.mean(), rtol=1e-12)
    assert_allclose(hi - lo, 2 * half, rtol=0.10)
    assert_allclose([lo, hi], [x.mean() - half, x.mean() + half], atol=0.15 * half)


def test_row_bootstrap_is_too_narrow_for_grouped_data():
    """Resampling single rows of the same data gives the (wrong) iid width sqrt(var/n)."""
    rng = np.random.default_rng(0)
    g, x = _grouped_normal(rng, 400, 4)
    _, lo, hi = bootstrap_ci(np.mean, None, x, n_boot=2000)
    iid_half = Z95 * np.sqrt(2.0 / x.size)      # row variance 1 + 1 = 2
    assert_allclose(hi - lo, 2 * iid_half, rtol=0.10)
    _, clo, chi = bootstrap_ci(np.mean, g, x, n_boot=2000)
    assert (chi - clo) > 1.3 * (hi - lo)


def test_cluster_bootstrap_covers_the_true_mean_about_95_percent():
    """200 repeated experiments (40 groups each): the 95 % interval holds 0 in 89-99 %."""
    rng = np.random.default_rng(0)
    hits = 0
    n_rep = 200
    for _ in range(n_rep):
        g, x = _grouped_normal(rng, 40, 3)
        _, lo, hi = bootstrap_ci(np.mean, g, x, n_boot=300, random_state=rng)
        hits += lo <= 0.0 <= hi
    # binomial sd at 95 %: sqrt(0.95 * 0.05 / 200) = 1.5 points; the percentile
    # interval runs slightly short with 40 groups (Efron & Tibshirani 1993, ch. 13;
    # from memory), so the band is asymmetric
    assert 0.89 <= hits / n_rep <= 0.99


def test_resamples_keep_whole_groups():
    """Every bootstrap sample holds each drawn group with all its rows (sizes 1..5)."""
    sizes = np.array([1, 2, 3, 4, 5])
    g = np.repeat(np.arange(5), sizes)
    seen = []

    def stat(groups):
        counts = np.bincount(groups, minlength=5)
        assert (counts % sizes == 0).all()
        assert (counts // sizes).sum() == 5      # as many groups drawn as there are
        seen.append(counts)
        return float(len(groups))

    bootstrap_ci(stat, g, g, n_boot=200)
    assert len({tuple(c) for c in seen}) > 20


def test_bootstrap_is_reproducible_and_takes_frames():
    """Same random_state: same interval; DataFrames are indexed by rows like arrays."""
    rng = np.random.default_rng(0)
    g, x = _grouped_normal(rng, 30, 3)
    df = pd.DataFrame({"x": x})
    a = bootstrap_ci(lambda d: d["x"].mean(), g, df, n_boot=200, random_state=7)
    b = bootstrap_ci(np.mean, g, x, n_boot=200, random_state=7)
    assert a == b
    assert a != bootstrap_ci(np.mean, g, x, n_boot=200, random_state=8)


def test_vector_statistic_with_nan_samples():
    """Per-class recall: one interval per class; NaN resamples (class absent) are left out."""
    y_true = np.array(["a"] * 30 + ["b"] * 30 + ["c"])
    y_pred = y_true.copy()
    y_pred[:10] = "b"
    groups = np.arange(len(y_true))

    def recall(t, p):
        return per_class_recall(t, p, labels=["a", "b", "c"]).to_numpy()

    est, lo, hi = bootstrap_ci(recall, groups, y_true, y_pred, n_boot=300)
    assert_allclose(est, [20 / 30, 1.0, 1.0])
    assert lo[0] < 20 / 30 < hi[0]
    assert_allclose([lo[1], hi[1], lo[2], hi[2]], 1.0)   # c is absent from ~37 % of samples


@pytest.mark.parametrize(("args", "kw", "match"), [
    ((np.mean, None), {}, "at least one data array"),
    ((np.mean, [0, 1], np.zeros(3)), {}, r"groups must have one entry per row \(3\)"),
    ((np.mean, None, np.zeros(3), np.zeros(2)), {}, "array 1 has 2 rows, array 0 has 3"),
    ((np.mean, None, np.zeros(3)), {"alpha": 1.5}, r"alpha must be in \(0, 1\)"),
])
def test_bootstrap_bad_input(args, kw, match):
    """Mismatched arrays or options raise ValueError saying which."""
    with pytest.raises(ValueError, match=match):
        bootstrap_ci(*args, **kw)


def test_flash_groups_make_unflashed_pulses_singletons():
    """Pulses of one flash share a group; each pulse without flash_id is its own group."""
    g = flash_groups(["f1", "", "f1", "", "f2"], ["e0", "e1", "e2", "e3", "e4"])
    assert g[0] == g[2]
    assert len(set(g.tolist())) == 4


def test_ece_by_hand():
    """Four pulses, 5 bins: 0.5 * |0.5 - 0.6| + 0.5 * |1 - 0.95| = 0.075 (by hand)."""
    proba = np.array([[0.6, 0.4], [0.6, 0.4], [0.1, 0.9], [0.0, 1.0]])
    y = np.array([0, 1, 1, 1])
    assert_allclose(expected_calibration_error(proba, y, n_bins=5), 0.075, atol=1e-12)
    # one bin (0.5, 1]: |0.75 - 0.775| = 0.025
    assert_allclose(expected_calibration_error(proba, y, n_bins=2), 0.025, atol=1e-12)
    assert_allclose(expected_calibration_error(proba, ["n", "r", "r", "r"], n_bins=5,
                                               classes=["n", "r"]), 0.075, atol=1e-12)


def test_ece_of_calibrated_probabilities_is_near_zero():
    """y ~ Bernoulli(p) with p ~ U(0, 1), 200,000 pulses: ECE < 0.01 (sampling noise only)."""
    rng = np.random.default_rng(0)
    p = rng.uniform(size=200_000)
    y = (rng.uniform(size=p.size) < p).astype(int)
    proba = np.column_stack([1 - p, p])
    assert expected_calibration_error(proba, y) < 0.01


def test_ece_of_overconfident_probabilities_is_the_expected_gap():
    """Confidence r ~ U(0.5, 1) but accuracy 0.5 + (r - 0.5) / 2: ECE = E[(r - 0.5)/2] = 1/8."""
    rng = np.random.default_rng(0)
    r = rng.uniform(0.5, 1.0, size=200_000)
    right = rng.uniform(size=r.size) < 0.5 + (r - 0.5) / 2
    proba = np.column_stack([r, 1 - r])
    y = np.where(right, 0, 1)
    # in every bin the accuracy is below the confidence, so |gap| = gap and the
    # ECE is the mean gap, 0.5 * E[r - 0.5] = 0.5 * 0.25 = 0.125, whatever the bins
    assert_allclose(expected_calibration_error(proba, y), 0.125, atol=0.005)
    assert_allclose(expected_calibration_error(proba, y, n_bins=5), 0.125, atol=0.005)


def test_reliability_curve_table():
    """Bins are ((m-1)/M, m/M]; counts add up; an empty bin has NaN accuracy."""
    proba = np.array([[0.6, 0.4], [0.6, 0.4], [0.1, 0.9], [0.0, 1.0]])
    rel = reliability_curve(proba, np.array([0, 1, 1, 1]), n_bins=5)
    assert list(rel.columns) == ["bin_low", "bin_high", "count", "mean_confidence",
                                 "accuracy"]
    assert rel["count"].tolist() == [0, 0, 2, 0, 2]
    assert_allclose(rel["accuracy"].iloc[[2, 4]], [0.5, 1.0])
    assert_allclose(rel["mean_confidence"].iloc[[2, 4]], [0.6, 0.95])
    assert rel["accuracy"].iloc[[0, 1, 3]].isna().all()


def test_ece_bad_labels():
    """A label outside the classes is named in the error."""
    with pytest.raises(ValueError, match=r"label\(s\) \['x'\] are not among"):
        expected_calibration_error([[0.5, 0.5]], ["x"], classes=["a", "b"])
    with pytest.raises(ValueError, match="pass classes="):
        expected_calibration_error([[0.5, 0.5]], ["a"])


def test_macro_f1_and_recall_by_hand():
    """F1 (1/2, 2/3, 1) -> macro 13/18; recall (1/2, 2/3, 1) and NaN for an absent class."""
    t = ["a", "a", "b", "b", "b", "c"]
    p = ["a", "b", "b", "b", "a", "c"]
    assert_allclose(macro_f1(t, p), (0.5 + 2 / 3 + 1) / 3, rtol=1e-12)
    assert_allclose(macro_f1(t, p), metrics.f1_score(t, p, average="macro"), rtol=1e-12)
    r = per_class_recall(t, p, labels=["a", "b", "c", "d"])
    assert r.index.tolist() == ["a", "b", "c", "d"]
    assert_allclose(r.to_numpy()[:3], [0.5, 2 / 3, 1.0], rtol=1e-12)
    assert np.isnan(r["d"])


def test_empirical_coverage_by_hand():
    """Sets {a,b}, {b}, {}, {a,c} with truth a, a, c, c: 2 of 4 covered."""
    sets = np.array([[1, 1, 0], [0, 1, 0], [0, 0, 0], [1, 0, 1]], dtype=bool)
    assert empirical_coverage(sets, ["a", "a", "c", "c"], classes=["a", "b", "c"]) == 0.5
    assert empirical_coverage(sets, np.array([0, 0, 2, 2])) == 0.5
    with pytest.raises(ValueError, match="one label per row of pred_sets"):
        empirical_coverage(sets, np.array([0, 1]))
