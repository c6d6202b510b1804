"""Novelty: how unlike every labelled pulse a pulse is.

A pulse's novelty score is the mean NaN-aware Euclidean distance to its ``k``
nearest reference pulses in a robust standardised feature space: each column
centred on its median, divided by its interquartile range and compressed with
``arcsinh`` (so a heavy tail does not dominate the distance). The reference set
is a fixed-size, class-stratified sample of the labelled training pulses, so the
cost per pulse does not grow with the training set: one block matrix product
against ``n_reference`` rows and a partial sort.

The distance is the one of :func:`sklearn.metrics.pairwise.nan_euclidean_distances`
(coordinates missing in either row left out, the sum scaled by ``n_features /
n_present``); ``tests/classify/test_models.py`` checks it against scikit-learn.

Examples
--------
>>> import numpy as np
>>> from classify.novelty import knn_mean_distance
>>> ref = np.array([[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
>>> knn_mean_distance(np.array([[0.0, 0.0], [3.0, 4.0]]), ref, k=1)
array([0.        , 4.24264069])
"""

from __future__ import annotations

import warnings

import numpy as np

__all__ = ["robust_scaling", "standardise", "choose_reference", "knn_mean_distance"]

#: Pulses per block of the distance computation (a block x reference matrix in memory).
BLOCK_ROWS = 2048


def robust_scaling(X) -> tuple[np.ndarray, np.ndarray]:
    """Median and spread of every column, ignoring NaN.

    The spread is the interquartile range, else the standard deviation where the
    IQR is zero or undefined, else 1 (an all-NaN or constant column).

    Returns
    -------
    center, scale : ndarray, shape (n_features,)
    """
    X = np.asarray(X, dtype=np.float64)
    with warnings.catch_warnings():  # all-NaN columns give NaN: handled below
        warnings.simplefilter("ignore", RuntimeWarning)
        center = np.nanmedian(X, axis=0)
        q75, q25 = np.nanpercentile(X, [75, 25], axis=0)
        spread = np.nanstd(X, axis=0)
    scale = q75 - q25
    scale = np.where(np.isfinite(scale) & (scale > 0), scale,
                     np.where(np.isfinite(spread) & (spread > 0), spread, 1.0))
    return np.where(np.isfinite(center), center, 0.0), scale


def standardise(X, center, scale) -> np.ndarray:
    """``arcsinh((X - center) / scale)``: the space novelty distances are measured in."""
    return np.arcsinh((np.asarray(X, dtype=np.float64) - center) / scale)


def choose_reference(y_idx, n_classes: int, allowed, m: int, rng) -> np.ndarray:
    """Row numbers of ``m`` reference pulses, every class represented.

    Each class gets up to ``m // n_classes`` rows drawn at random among the
    ``allowed`` ones; the rest of the quota is filled at random from the others.

    Returns
    -------
    ndarray of int, sorted
    """
    y_idx = np.asarray(y_idx)
    allowed = np.asarray(allowed, dtype=bool)
    order = rng.permutation(len(y_idx))
    order = order[allowed[order]]
    quota = max(1, m // max(n_classes, 1))
    take = np.concatenate([order[y_idx[order] == k][:quota] for k in range(n_classes)]
                          ).astype(np.intp)
    rest = order[~np.isin(order, take)][: max(0, m - take.size)]
    return np.sort(np.concatenate([take, rest]))[:m]


def _prepared(R):
    """The reference's three stacked blocks and its present-coordinate mask."""
    present = ~np.isnan(R)
    r = np.where(present, R, 0.0)
    f = present.astype(np.float64)
    return np.hstack([f, r * r, r]), f, bool(present.all())


def knn_mean_distance(Z, reference, k: int, *, exclude=None) -> np.ndarray:
    """Mean NaN-aware Euclidean distance of each row of ``Z`` to its ``k`` nearest references.

    Parameters
    ----------
    Z : ndarray, shape (n, n_features)
        Standardised pulses (:func:`standardise`); NaN where a feature is missing.
    reference : ndarray, shape (m, n_features)
        Standardised reference pulses.
    k : int
        Neighbours averaged (at most ``m``).
    exclude : ndarray of int, shape (n,), optional
        A reference row to leave out for each pulse (-1: none), for leave-self-out
        scores of pulses that are themselves in the reference.

    Returns
    -------
    ndarray, shape (n,)
        NaN where fewer than ``k`` references share a coordinate with the pulse.
    """
    Z = np.asarray(Z, dtype=np.float64)
    R = np.asarray(reference, dtype=np.float64)
    n, d = Z.shape
    k = int(min(k, len(R)))
    out = np.full(n, np.nan)
    if n == 0 or k == 0:
        return out
    stacked, f_ref, ref_full = _prepared(R)
    for s in range(0, n, BLOCK_ROWS):
        A = Z[s:s + BLOCK_ROWS]
        present = ~np.isnan(A)
        a = np.where(present, A, 0.0)
        fa = present.astype(np.float64)
        # |a - b|^2 over shared coordinates as one product: [a^2, 1, -2a] . [1, b^2, b]
        d2 = np.hstack([a * a, fa, -2.0 * a]) @ stacked.T
        np.maximum(d2, 0.0, out=d2)
        if not (ref_full and present.all()):  # else n_features / n_present = 1
            shared = fa @ f_ref.T
            with np.errstate(divide="ignore", invalid="ignore"):
                d2 *= d / shared
            d2[shared == 0] = np.inf
        if exclude is not None:
            ex = np.asarray(exclude[s:s + BLOCK_ROWS])
            rows = np.flatnonzero(ex >= 0)
            d2[rows, ex[rows]] = np.inf
        near = np.partition(d2, k - 1, axis=1)[:, :k]
        with np.errstate(invalid="ignore"):
            mean = np.sqrt(near).mean(axis=1)
        out[s:s + BLOCK_ROWS] = np.where(np.isfinite(near).all(axis=1), mean, np.nan)
    return out
