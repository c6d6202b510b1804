"""Class-prior shift: re-weight calibrated probabilities for another class mix.

A classifier trained on one season learns the posteriors p_t(c | x) under that
season's class frequencies p_t(c). If a new season has another mix p_n(c) but
the same class-conditional densities p(x | c) (the "prior shift" or "label
shift" assumption), Bayes' rule gives the new posteriors without retraining::

    p_n(c | x) = p_t(c | x) * w(c) / sum_j p_t(j | x) * w(j),   w(c) = p_n(c) / p_t(c)

(:func:`adjust_priors`). When p_n is unknown, :func:`estimate_priors_em`
estimates it from the unlabelled pulses of the new season with the EM
algorithm of Saerens, Latinne & Decaestecker (2002): alternately adjust the
posteriors with the current prior estimate (E step) and set the estimate to
the mean adjusted posterior (M step). It converges to the maximum-likelihood
class mix of the new data, given that the input probabilities are calibrated.

:func:`prior_shift` applies the estimate to a model and a catalog's feature
table (``pulsesort drift --model``). All assume calibrated probabilities (the
models of pulsesort are calibrated); on uncalibrated scores the estimate is
biased.

References
----------
Saerens, M., Latinne, P. and Decaestecker, C. (2002), Adjusting the outputs of a
classifier to new a priori probabilities: a simple procedure, *Neural
Computation* 14(1), 21-41 (the EM steps are their eqs. 2.9-2.10; from memory).

Examples
--------
>>> import numpy as np
>>> proba = np.array([[8 / 11, 3 / 11]] * 40 + [[2 / 9, 7 / 9]] * 60)
>>> new, adjusted, n_iter = estimate_priors_em(proba, [0.5, 0.5])
>>> np.round(new, 6).tolist()
[0.2, 0.8]
"""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd

from features import InputError, schema

__all__ = ["adjust_priors", "estimate_priors_em", "PriorShift", "prior_shift"]

logger = logging.getLogger("pulsesort")

#: Rows of ``proba`` may sum to 1 within this tolerance (they are renormalised).
ROW_SUM_TOL = 1e-6


def _check_proba(proba) -> np.ndarray:
    p = np.asarray(proba, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] < 2:
        raise ValueError(f"proba must be 2-D (n_pulses, n_classes) with at least 2 classes, "
                         f"got shape {p.shape}")
    if p.shape[0] == 0:
        raise ValueError("proba has no rows: nothing to estimate priors from")
    bad = ~np.isfinite(p).all(axis=1) | (p < 0).any(axis=1) | (p > 1 + ROW_SUM_TOL).any(axis=1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ValueError(f"proba row {i}: probabilities must be finite and in [0, 1], got "
                         f"{p[i].tolist()} ({int(bad.sum())} bad row(s))")
    s = p.sum(axis=1)
    off = np.abs(s - 1) > ROW_SUM_TOL
    if off.any():
        i = int(np.flatnonzero(off)[0])
        raise ValueError(f"proba row {i}: probabilities must sum to 1, got {s[i]!r} "
                         f"({int(off.sum())} such row(s))")
    return p / s[:, None]


def _check_priors(priors, n_classes: int, name: str, *, allow_zero: bool) -> np.ndarray:
    q = np.asarray(priors, dtype=np.float64)
    if q.shape != (n_classes,):
        raise ValueError(f"{name} must have one value per class ({n_classes}), got shape "
                         f"{q.shape}")
    if not np.isfinite(q).all() or (q < 0).any() or (not allow_zero and (q == 0).any()):
        need = ">= 0" if allow_zero else "> 0"
        raise ValueError(f"{name} must be finite and {need}, got {q.tolist()}")
    if abs(q.sum() - 1) > ROW_SUM_TOL:
        raise ValueError(f"{name} must sum to 1, got {q.sum()!r} ({q.tolist()})")
    return q / q.sum()


def _reweight(p: np.ndarray, ratio: np.ndarray) -> np.ndarray:
    num = p * ratio[None, :]
    den = num.sum(axis=1)
    zero = den <= 0
    if zero.any():
        i = int(np.flatnonzero(zero)[0])
        raise ValueError(f"proba row {i}: all its probability is on classes whose new prior "
                         f"is 0 ({p[i].tolist()}); the adjusted posterior is undefined")
    return num / den[:, None]


def adjust_priors(proba, train_priors, new_priors) -> np.ndarray:
    """Posteriors for new class priors by Bayes re-weighting.

    Parameters
    ----------
    proba : array-like, shape (n_pulses, n_classes)
        Calibrated probabilities p_t(c | x) under the training priors; rows sum to 1.
    train_priors : array-like, shape (n_classes,)
        Class frequencies of the training set, all > 0, summing to 1.
    new_priors : array-like, shape (n_classes,)
        Class frequencies to adjust to, >= 0, summing to 1.

    Returns
    -------
    ndarray, shape (n_pulses, n_classes)
        p_n(c | x) proportional to p_t(c | x) p_n(c) / p_t(c), rows summing to 1.

    Raises
    ------
    ValueError
        On a malformed input (the message names the row or argument), or if a
        row's whole probability lies on classes whose new prior is 0.

    Examples
    --------
    >>> adjust_priors([[0.5, 0.5]], [0.5, 0.5], [0.2, 0.8]).round(3).tolist()
    [[0.2, 0.8]]
    """
    p = _check_proba(proba)
    t = _check_priors(train_priors, p.shape[1], "train_priors", allow_zero=False)
    q = _check_priors(new_priors, p.shape[1], "new_priors", allow_zero=True)
    return _reweight(p, q / t)


def estimate_priors_em(proba, train_priors, max_iter: int = 1000, tol: float = 1e-8):
    """Estimate a new data set's class priors from calibrated probabilities (EM).

    Parameters
    ----------
    proba : array-like, shape (n_pulses, n_classes)
        Calibrated probabilities p_t(c | x) of the (unlabelled) new pulses under
        the training priors; rows sum to 1.
    train_priors : array-like, shape (n_classes,)
        Class frequencies of the training set, all > 0, summing to 1.
    max_iter : int, default=1000
        Most EM iterations.
    tol : float, default=1e-8
        Stop when no prior changes by more than ``tol`` in one iteration.

    Returns
    -------
    new_priors : ndarray, shape (n_classes,)
        Estimated class frequencies of the new data (sum to 1).
    adjusted_proba : ndarray, shape (n_pulses, n_classes)
        The posteriors adjusted to ``new_priors`` (:func:`adjust_priors`).
    n_iter : int
        EM iterations run (1 if the training priors already are the fixed point).

    Warns
    -----
    RuntimeWarning
        If the estimate has not converged after ``max_iter`` iterations; the last
        estimate is returned.

    Notes
    -----
    Start: p^(0) = p_t. E step: p^(s)(c | x_k) = p_t(c | x_k) p^(s)(c) / p_t(c),
    renormalised over c. M step: p^(s+1)(c) = mean over k of p^(s)(c | x_k).
    Each step does not decrease the likelihood of the new data under the mixture
    sum_c p(c) p(x | c), so the estimate converges to its maximum (Saerens et
    al. 2002, section 2.2; from memory). At the fixed point the returned priors
    equal the mean of ``adjusted_proba``.

    References
    ----------
    Saerens, M., Latinne, P. and Decaestecker, C. (2002), *Neural Computation*
    14(1), 21-41.
    """
    p = _check_proba(proba)
    t = _check_priors(train_priors, p.shape[1], "train_priors", allow_zero=False)
    if int(max_iter) < 1:
        raise ValueError(f"max_iter must be >= 1, got {max_iter!r}")
    if not tol > 0:
        raise ValueError(f"tol must be > 0, got {tol!r}")
    prior = t.copy()
    adjusted = p
    n_iter = 0
    converged = False
    for n_iter in range(1, int(max_iter) + 1):   # noqa: B007 - n_iter is returned
        adjusted = _reweight(p, prior / t)          # E step
        new = adjusted.mean(axis=0)                 # M step
        change = float(np.abs(new - prior).max())
        prior = new
        if change <= tol:
            converged = True
            break
    if not converged:
        warnings.warn(f"prior EM did not converge in {max_iter} iterations (last change "
                      f"{change:.3g} > tol {tol:g}); returning the last estimate",
                      RuntimeWarning, stacklevel=2)
    adjusted = _reweight(p, prior / t)
    logger.debug("prior EM: %d iteration(s), priors %s", n_iter, np.round(prior, 4).tolist())
    return prior, adjusted, n_iter


@dataclass
class PriorShift:
    """Class mix of a model's training set vs the EM estimate for a new catalog.

    Attributes
    ----------
    classes : ndarray, shape (n_classes,)
    train_priors : ndarray, shape (n_classes,)
        The model's ``class_priors_``.
    new_priors : ndarray, shape (n_classes,)
        EM estimate for the new catalog.
    mean_proba : ndarray, shape (n_classes,)
        Unadjusted mean probability (the naive estimate, biased toward the
        training mix), for comparison.
    n_pulses : int
        Pulses used.
    n_iter : int
        EM iterations.
    """

    classes: np.ndarray
    train_priors: np.ndarray
    new_priors: np.ndarray
    mean_proba: np.ndarray
    n_pulses: int
    n_iter: int


def _model_inputs(model, features: pd.DataFrame) -> pd.DataFrame:
    """The model's input columns of a feature table (``feature_names_in_``, else the schema's)."""
    names = getattr(model, "feature_names_in_", None)
    names = list(names) if names is not None else schema.model_feature_names()
    missing = [c for c in names if c not in features.columns]
    if missing:
        raise InputError(f"the feature table lacks the model's input column(s) {missing[:8]}")
    return features[names].astype(np.float64)


def prior_shift(model, features: pd.DataFrame, *, max_iter: int = 1000,
                tol: float = 1e-8) -> PriorShift:
    """Estimate the class mix of a catalog from a model's calibrated probabilities.

    Parameters
    ----------
    model : object
        With ``classes_``, ``class_priors_`` (training class frequencies) and a
        calibrated ``predict_proba`` (e.g. :class:`classify.models.PulseClassifier`).
    features : pandas.DataFrame
        Feature table of the new catalog. Rows with ``field_ok`` false (no usable
        field record) are left out.
    max_iter, tol
        See :func:`estimate_priors_em`.

    Returns
    -------
    PriorShift
    """
    use = features
    if "field_ok" in features.columns:
        use = features[features["field_ok"].astype(bool).to_numpy()]
    if use.empty:
        raise InputError("no pulse with a usable field record to estimate the class mix from")
    proba = np.asarray(model.predict_proba(_model_inputs(model, use)), dtype=np.float64)
    train = np.asarray(model.class_priors_, dtype=np.float64)
    new, _, n_iter = estimate_priors_em(proba, train, max_iter=max_iter, tol=tol)
    return PriorShift(np.asarray(model.classes_), train, new, proba.mean(axis=0), len(use),
                      n_iter)
