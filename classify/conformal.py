"""Calibration and conformal-set arithmetic, free of scikit-learn.

The pieces of :class:`classify.models.PulseClassifier` that are plain NumPy and
SciPy: temperature scaling, split-conformal thresholds, their adaptation to a
new season, and NaN-aware distances. They live apart so that the triage's main
process (which plans, adapts and writes while the workers classify) does not
import scikit-learn.

References
----------
Guo, C., Pleiss, G., Sun, Y. and Weinberger, K. Q. (2017), On calibration of
modern neural networks, *ICML* (temperature scaling); from memory.
Vovk, V., Gammerman, A. and Shafer, G. (2005), *Algorithmic Learning in a Random
World*, Springer (conformal prediction, Mondrian / class-conditional); from memory.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize_scalar
from scipy.special import log_softmax

__all__ = ["fit_temperature", "apply_temperature", "conformal_thresholds",
           "season_thresholds", "nan_euclidean"]

_EPS = 1e-12


def fit_temperature(proba, y_index, sample_weight=None):
    """Temperature T minimising the log loss of softmax(log(proba) / T).

    Parameters
    ----------
    proba : ndarray, shape (n, n_classes)
        Uncalibrated probabilities.
    y_index : ndarray of int, shape (n,)
        True class indices.

    Returns
    -------
    float
        The temperature, in [0.05, 20].
    """
    logp = np.log(np.clip(proba, _EPS, 1.0))
    w = np.ones(len(y_index)) if sample_weight is None else np.asarray(sample_weight, float)

    def nll(log_t):
        lp = log_softmax(logp / math.exp(log_t), axis=1)
        return -np.sum(w * lp[np.arange(len(y_index)), y_index]) / w.sum()

    res = minimize_scalar(nll, bounds=(math.log(0.05), math.log(20.0)), method="bounded",
                          options={"xatol": 1e-4})
    return float(math.exp(res.x))


def apply_temperature(proba, temperature):
    """softmax(log(proba) / T); ``temperature`` a scalar or one value per row."""
    logp = np.log(np.clip(proba, _EPS, 1.0))
    t = np.asarray(temperature, dtype=np.float64)
    if t.ndim == 1:
        t = t[:, None]
    return np.exp(log_softmax(logp / t, axis=1))


def conformal_thresholds(proba, y_index, n_classes, coverage):
    """Class-conditional split-conformal thresholds on scores 1 - p_true.

    Returns
    -------
    ndarray, shape (n_classes,)
        q_k; a class is in a pulse's set when 1 - p_k <= q_k. A class with some
        calibration pulses but too few for the level gets the marginal threshold
        (the same quantile of every pulse's score, whatever its class: split
        conformal without the Mondrian split, Vovk et al. 2005; from memory), so a
        group's new class with a handful of labels does not enter every set; a
        class with none gets q_k = 1 (always in the set).
    """
    alpha = 1.0 - coverage

    def quantile(s):
        """The split-conformal quantile of scores ``s``, or None when too few."""
        rank = math.ceil((len(s) + 1) * (1 - alpha))
        return np.sort(s)[rank - 1] if len(s) and rank <= len(s) else None

    scores = 1.0 - proba[np.arange(len(y_index)), y_index]
    marginal = quantile(scores)
    q = np.ones(n_classes)
    for k in range(n_classes):
        mine = scores[y_index == k]
        own = quantile(mine)
        if own is not None:
            q[k] = own
        elif mine.size and marginal is not None:
            q[k] = marginal
    return q


def nan_euclidean(A, B):
    """NaN-aware Euclidean distances between the rows of ``A`` and ``B``.

    The same definition as :func:`sklearn.metrics.pairwise.nan_euclidean_distances`
    (coordinates missing in either row are left out and the sum is scaled by
    n_features / n_present), computed with four float64 matrix products; NaN
    where two rows share no coordinate.
    """
    ma, mb = ~np.isnan(A), ~np.isnan(B)
    a, b = np.where(ma, A, 0.0), np.where(mb, B, 0.0)
    fa, fb = ma.astype(np.float64), mb.astype(np.float64)
    sq = (a * a) @ fb.T + fa @ (b * b).T - 2.0 * (a @ b.T)
    n = fa @ fb.T
    with np.errstate(invalid="ignore", divide="ignore"):
        d2 = np.maximum(sq, 0.0) * (A.shape[1] / n)
    return np.sqrt(np.where(n > 0, d2, np.nan))


def season_thresholds(proba, coverage, fallback, exclude=None):
    """Conformal thresholds adapted to a new season from calibrated probabilities.

    Split-conformal thresholds hold on data like the calibration data; on a
    season whose pulses differ (noisier, other instrument), the scores shift and
    coverage drops. If the probabilities remain calibrated there (which the
    drift and retrain reports check), the expected class-conditional coverage of
    a threshold q on the season's own unlabelled pulses is

        cov_k(q) = sum_x p_k(x) [1 - p_k(x) <= q] / sum_x p_k(x),

    and q_k is the smallest score with cov_k(q_k) >= coverage (a plug-in
    estimate, not a finite-sample guarantee).

    Parameters
    ----------
    proba : ndarray, shape (n_pulses, n_classes)
        Calibrated probabilities of (a sample of) the season's pulses.
    coverage : float
    fallback : ndarray, shape (n_classes,)
        Used for a class with less than 20 pulses' worth of probability.
    exclude : ndarray of bool, shape (n_pulses,), optional
        Pulses whose sets will be empty (:meth:`PulseClassifier.predict_set`):
        their probability mass counts in the coverage but cannot be covered, so
        the other pulses' thresholds make up for them. When they alone weigh
        more than 1 - coverage, the others get q = 0.5 (a class is in the set
        when its probability is at least one half).

    Returns
    -------
    ndarray, shape (n_classes,)
    """
    p = np.asarray(proba, dtype=np.float64)
    q = np.asarray(fallback, dtype=np.float64).copy()
    keep = np.ones(len(p), bool) if exclude is None else ~np.asarray(exclude, dtype=bool)
    for k in range(p.shape[1]):
        w = p[:, k]
        total = w.sum()
        if total < 20:
            continue
        need = coverage * total               # mass the kept pulses' sets must hold
        wk, sk = w[keep], 1.0 - w[keep]
        if need >= wk.sum() * (1 - 1e-9):
            q[k] = 0.5
            continue
        order = np.argsort(sk, kind="stable")
        cum = np.cumsum(wk[order])
        i = int(np.searchsorted(cum, need, side="left"))
        q[k] = sk[order][min(i, len(sk) - 1)]
    return q
