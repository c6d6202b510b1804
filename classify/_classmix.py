"""The class-mix math of :mod:`classify.priors`: Bayes re-weighting and the EM estimate.

Pure NumPy on calibrated probabilities, below every module that applies a model
(:mod:`classify.predict` adapts a season with it; :mod:`classify.priors` re-exports it and
applies it to a model and a feature table). See :mod:`classify.priors` for the method.

References
----------
Saerens, M., Latinne, P. and Decaestecker, C. (2002), Adjusting the outputs of a
classifier to new a priori probabilities: a simple procedure, *Neural
Computation* 14(1), 21-41 (the EM steps are their eqs. 2.9-2.10; from memory).
"""

from __future__ import annotations

import logging
import warnings

import numpy as np

__all__ = ["ROW_SUM_TOL", "adjust_priors", "estimate_priors_em"]

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
