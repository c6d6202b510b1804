"""Novelty distances against scikit-learn's NaN-aware Euclidean distance (reference)."""

from __future__ import annotations

import numpy as np
from numpy.testing import assert_allclose, assert_array_equal
from sklearn.metrics.pairwise import nan_euclidean_distances

from classify.novelty import choose_reference, knn_mean_distance, robust_scaling


def _reference_knn(Z, R, k, exclude=None):
    """Brute force with sklearn's nan_euclidean_distances and a full sort."""
    d = nan_euclidean_distances(Z, R)
    d = np.where(np.isfinite(d), d, np.inf)
    if exclude is not None:
        rows = np.flatnonzero(exclude >= 0)
        d[rows, exclude[rows]] = np.inf
    near = np.sort(d, axis=1)[:, :k]
    with np.errstate(invalid="ignore"):
        return np.where(np.isfinite(near).all(axis=1), near.mean(axis=1), np.nan)


def test_knn_mean_distance_matches_scikit_learn_with_missing_values():
    """Equal to sklearn's distance + sort, NaN in pulses and references, several blocks."""
    rng = np.random.default_rng(0)
    Z = rng.normal(size=(5000, 7))
    R = rng.normal(size=(300, 7))
    Z[rng.random(Z.shape) < 0.2] = np.nan
    R[rng.random(R.shape) < 0.1] = np.nan
    Z[3] = np.nan                      # nothing shared with any reference: NaN
    got = knn_mean_distance(Z, R, 5)
    assert_allclose(got, _reference_knn(Z, R, 5), rtol=1e-9, atol=1e-9)
    assert np.isnan(got[3])


def test_knn_mean_distance_complete_rows_and_leave_self_out():
    """Without NaN (the fast path) and with a reference row excluded per pulse."""
    rng = np.random.default_rng(1)
    R = rng.normal(size=(200, 4))
    Z = R[:50].copy()
    exclude = np.arange(50)
    exclude[::2] = -1
    # a distance of zero comes out as sqrt(rounding of |a|^2 + |b|^2 - 2 a.b) ~ 1e-8
    assert_allclose(knn_mean_distance(Z, R, 3, exclude=exclude),
                    _reference_knn(Z, R, 3, exclude=exclude), rtol=1e-9, atol=1e-6)
    # a pulse that is a reference scores 0 to itself when not excluded (k=1)
    assert_allclose(knn_mean_distance(Z[:1], R, 1), [0.0], atol=1e-6)


def test_choose_reference_represents_every_class():
    """Every class present, no repeats, only allowed rows, the size asked for."""
    rng = np.random.default_rng(2)
    y = np.r_[np.zeros(900, int), np.ones(90, int), np.full(10, 2)]
    allowed = np.ones(1000, bool)
    allowed[::7] = False
    ref = choose_reference(y, 3, allowed, 100, rng)
    assert ref.size == 100 and np.unique(ref).size == 100
    assert allowed[ref].all()
    assert_array_equal(np.unique(y[ref]), [0, 1, 2])
    assert (y[ref] == 2).sum() == allowed[y == 2].sum()  # the rare class all in


def test_robust_scaling_falls_back_for_flat_and_empty_columns():
    """IQR, else standard deviation, else 1; an all-NaN column centred on 0."""
    X = np.column_stack([np.arange(100.0), np.r_[np.zeros(99), 5.0], np.full(100, np.nan)])
    center, scale = robust_scaling(X)
    assert_allclose(center, [49.5, 0.0, 0.0])
    assert_allclose(scale, [49.5, np.std(X[:, 1]), 1.0])
