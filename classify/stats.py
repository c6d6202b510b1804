"""Statistics for model cards and champion-vs-challenger comparisons.

* :func:`bootstrap_ci`: percentile bootstrap confidence interval of any
  statistic, resampling whole groups (flashes) with replacement. Pulses of one
  flash are not independent (same storm cell, same channel, often labelled
  together), so resampling single pulses would give intervals that are too
  narrow; the cluster bootstrap resamples the units that are independent.
* :func:`expected_calibration_error` and :func:`reliability_curve`: top-label
  calibration with equal-width confidence bins (Guo et al. 2017).
* :func:`macro_f1`, :func:`per_class_recall`: thin wrappers over
  :mod:`sklearn.metrics` with the conventions pulsesort uses (fixed class
  order, NaN for a class absent from the truth).
* :func:`empirical_coverage`: how often a conformal prediction set holds the
  true class.

``y`` arguments are class labels; pass ``classes`` (the columns of ``proba``
or ``pred_sets``, e.g. ``model.classes_``) to map them to columns, or give
integer column indices and leave ``classes`` out.

References
----------
Efron, B. and Tibshirani, R. J. (1993), *An Introduction to the Bootstrap*,
Chapman & Hall: ch. 13 (percentile interval); from memory.
Davison, A. C. and Hinkley, D. V. (1997), *Bootstrap Methods and their
Application*, Cambridge University Press: section 3.8 (resampling clusters);
from memory.
Guo, C., Pleiss, G., Sun, Y. and Weinberger, K. Q. (2017), On calibration of
modern neural networks, *ICML*, eq. 3 (ECE); from memory.
"""

from __future__ import annotations

import logging
import warnings
from typing import NamedTuple

import numpy as np
import pandas as pd
from sklearn import metrics

__all__ = ["BootstrapCI", "bootstrap_ci", "flash_groups", "expected_calibration_error",
           "reliability_curve", "macro_f1", "per_class_recall", "empirical_coverage"]

logger = logging.getLogger("pulsesort")


class BootstrapCI(NamedTuple):
    """A statistic and its bootstrap interval (unpacks as ``estimate, low, high``).

    Scalars for a scalar statistic, arrays of its shape for an array statistic.
    """

    estimate: float | np.ndarray
    low: float | np.ndarray
    high: float | np.ndarray


def flash_groups(flash_id, event_id=None) -> np.ndarray:
    """Bootstrap groups from a flash_id column: a pulse without flash is its own group.

    Parameters
    ----------
    flash_id : array-like of str, shape (n_pulses,)
        ``""`` (or missing) for a pulse not assigned to a flash.
    event_id : array-like of str, shape (n_pulses,), optional
        Used to name the singleton groups (default: the row number).

    Returns
    -------
    ndarray of object, shape (n_pulses,)
    """
    f = pd.Series(flash_id, dtype=object).fillna("").astype(str).to_numpy(dtype=object)
    names = (np.arange(len(f)).astype(str) if event_id is None
             else np.asarray(event_id, dtype=object).astype(str))
    alone = f == ""
    out = np.where(alone, "\x00event:" + names.astype(object), "flash:" + f)
    return out.astype(object)


def _group_index(groups, n: int):
    g = np.asarray(groups)
    if g.shape != (n,):
        raise ValueError(f"groups must have one entry per row ({n}), got shape {g.shape}")
    codes, _ = pd.factorize(pd.Series(g, dtype=object), use_na_sentinel=False)
    order = np.argsort(codes, kind="stable")
    sizes = np.bincount(codes)
    starts = np.concatenate([[0], np.cumsum(sizes)[:-1]])
    return order, starts, sizes


def bootstrap_ci(stat_fn, groups, *arrays, n_boot: int = 1000, alpha: float = 0.05,
                 random_state=0) -> BootstrapCI:
    """Percentile bootstrap interval of ``stat_fn(*arrays)``, resampling whole groups.

    Parameters
    ----------
    stat_fn : callable
        ``stat_fn(*arrays) -> float or ndarray``; called once on the data and
        once per bootstrap sample, with every array indexed by the same rows.
    groups : array-like, shape (n_rows,), or None
        Group of each row (e.g. :func:`flash_groups`). A bootstrap sample draws
        as many groups as there are, with replacement, and keeps all rows of
        each drawn group. None: every row is its own group (ordinary bootstrap).
    *arrays : array-like, each with n_rows along axis 0
        The data (e.g. ``y_true, y_pred``).
    n_boot : int, default=1000
        Bootstrap samples.
    alpha : float, default=0.05
        The interval is the (alpha/2, 1 - alpha/2) percentile range (95 %).
    random_state : int or numpy.random.Generator, default=0

    Returns
    -------
    BootstrapCI
        ``estimate`` (on the full data), ``low``, ``high``. Bootstrap samples on
        which the statistic is NaN (e.g. a class missing from the sample) are
        left out of the percentiles; if all are NaN the bounds are NaN.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.random.default_rng(0).normal(size=400)
    >>> est, lo, hi = bootstrap_ci(np.mean, np.repeat(np.arange(100), 4), x)
    >>> bool(lo < est < hi)
    True
    """
    if not arrays:
        raise ValueError("bootstrap_ci needs at least one data array")
    arrs = [a if isinstance(a, (pd.DataFrame, pd.Series)) else np.asarray(a) for a in arrays]
    n = len(arrs[0])
    for i, a in enumerate(arrs):
        if len(a) != n:
            raise ValueError(f"array {i} has {len(a)} rows, array 0 has {n}")
    if n == 0:
        raise ValueError("bootstrap_ci needs at least one row")
    if int(n_boot) < 1:
        raise ValueError(f"n_boot must be >= 1, got {n_boot!r}")
    if not 0 < alpha < 1:
        raise ValueError(f"alpha must be in (0, 1), got {alpha!r}")
    order, starts, sizes = _group_index(np.arange(n) if groups is None else groups, n)
    n_groups = len(sizes)
    rng = (random_state if isinstance(random_state, np.random.Generator)
           else np.random.default_rng(random_state))

    def take(a, idx):
        return a.iloc[idx] if isinstance(a, (pd.DataFrame, pd.Series)) else a[idx]

    estimate = np.asarray(stat_fn(*arrs), dtype=np.float64)
    reps = np.full((int(n_boot),) + estimate.shape, np.nan)
    for b in range(int(n_boot)):
        drawn = rng.integers(0, n_groups, size=n_groups)
        sz = sizes[drawn]
        # row positions: every member of every drawn group, as offsets into `order`
        pos = np.repeat(starts[drawn] - np.cumsum(sz) + sz, sz) + np.arange(sz.sum())
        idx = order[pos]
        reps[b] = np.asarray(stat_fn(*(take(a, idx) for a in arrs)), dtype=np.float64)
    finite = np.isfinite(reps)
    reps[~finite] = np.nan
    if not finite.all():
        logger.debug("bootstrap: %d of %d samples gave a NaN statistic", int((~finite).sum()),
                     reps.size)
    lo = np.full(estimate.shape, np.nan)
    hi = np.full(estimate.shape, np.nan)
    ok = finite.any(axis=0)
    if np.any(ok):
        with warnings.catch_warnings():   # an all-NaN component stays NaN, as documented
            warnings.simplefilter("ignore", RuntimeWarning)
            lo, hi = np.nanpercentile(reps, [100 * alpha / 2, 100 * (1 - alpha / 2)], axis=0)
    if estimate.ndim == 0:
        return BootstrapCI(float(estimate), float(lo), float(hi))
    return BootstrapCI(estimate, lo, hi)


def _labels_to_index(y, classes, n_classes: int, name: str = "y") -> np.ndarray:
    y = np.asarray(y)
    if classes is None:
        if y.dtype.kind not in "iu":
            raise ValueError(f"{name} holds labels ({y.dtype}); pass classes= (the columns' "
                             "class names) or integer column indices")
        idx = y.astype(np.intp)
    else:
        classes = list(np.asarray(classes).tolist())
        if len(classes) != n_classes:
            raise ValueError(f"classes has {len(classes)} names but there are {n_classes} "
                             "columns")
        pos = {c: i for i, c in enumerate(classes)}
        unknown = [v for v in dict.fromkeys(y.tolist()) if v not in pos]
        if unknown:
            raise ValueError(f"{name}: label(s) {unknown[:5]} are not among the classes "
                             f"{classes}")
        idx = np.array([pos[v] for v in y.tolist()], dtype=np.intp)
    if idx.size and (idx.min() < 0 or idx.max() >= n_classes):
        raise ValueError(f"{name}: column indices must be in [0, {n_classes}), got "
                         f"{idx.min()}..{idx.max()}")
    return idx


def _top_label(proba, y, classes):
    p = np.asarray(proba, dtype=np.float64)
    if p.ndim != 2 or p.shape[0] == 0:
        raise ValueError(f"proba must be 2-D (n_pulses, n_classes) with rows, got {p.shape}")
    if not np.isfinite(p).all():
        raise ValueError("proba holds NaN or infinite values")
    yi = _labels_to_index(y, classes, p.shape[1])
    if yi.shape != (p.shape[0],):
        raise ValueError(f"y must have one label per row of proba ({p.shape[0]}), got "
                         f"{yi.shape}")
    conf = p.max(axis=1)
    correct = p.argmax(axis=1) == yi
    return conf, correct


def _bin_index(conf, n_bins):
    if int(n_bins) < 1:
        raise ValueError(f"n_bins must be >= 1, got {n_bins!r}")
    # bins ((m-1)/M, m/M] on the edges np.linspace(0, 1, M + 1); 0 joins the first bin
    edges = np.linspace(0.0, 1.0, int(n_bins) + 1)
    return np.clip(np.searchsorted(edges, conf, side="left") - 1, 0, int(n_bins) - 1)


def reliability_curve(proba, y, n_bins: int = 15, classes=None) -> pd.DataFrame:
    """Top-label reliability table: confidence vs accuracy in equal-width bins.

    Parameters
    ----------
    proba : array-like, shape (n_pulses, n_classes)
        Predicted probabilities.
    y : array-like, shape (n_pulses,)
        True labels (names with ``classes``, else column indices).
    n_bins : int, default=15
        Equal-width bins ((m-1)/M, m/M] of the top-label confidence.
    classes : array-like, shape (n_classes,), optional
        Class names of the columns of ``proba``.

    Returns
    -------
    pandas.DataFrame
        One row per bin: ``bin_low``, ``bin_high``, ``count``, ``mean_confidence``,
        ``accuracy`` (NaN for an empty bin).
    """
    conf, correct = _top_label(proba, y, classes)
    b = _bin_index(conf, n_bins)
    count = np.bincount(b, minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_conf = np.bincount(b, conf, minlength=n_bins) / count
        acc = np.bincount(b, correct.astype(float), minlength=n_bins) / count
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    return pd.DataFrame({"bin_low": edges[:-1], "bin_high": edges[1:], "count": count,
                         "mean_confidence": mean_conf, "accuracy": acc})


def expected_calibration_error(proba, y, n_bins: int = 15, classes=None) -> float:
    """Top-label expected calibration error with equal-width bins.

    ECE = sum over bins b of (n_b / n) |accuracy_b - mean confidence_b|, where
    confidence is the largest probability of a row and accuracy is the fraction
    of rows whose top class is the true one (Guo et al. 2017, eq. 3).

    Parameters
    ----------
    proba : array-like, shape (n_pulses, n_classes)
    y : array-like, shape (n_pulses,)
        True labels (names with ``classes``, else column indices).
    n_bins : int, default=15
    classes : array-like, shape (n_classes,), optional

    Returns
    -------
    float
        In [0, 1]; 0 for a perfectly calibrated model (up to sampling noise).

    Examples
    --------
    >>> expected_calibration_error([[0.9, 0.1], [0.9, 0.1]], [0, 1], n_bins=10)
    0.4
    """
    rel = reliability_curve(proba, y, n_bins, classes)
    used = rel["count"] > 0
    w = rel.loc[used, "count"] / rel["count"].sum()
    gap = (rel.loc[used, "accuracy"] - rel.loc[used, "mean_confidence"]).abs()
    return float(round((w * gap).sum(), 15))


def macro_f1(y_true, y_pred, labels=None) -> float:
    """Unweighted mean of the per-class F1 scores (sklearn's ``average="macro"``).

    Parameters
    ----------
    y_true, y_pred : array-like, shape (n_pulses,)
    labels : array-like, optional
        Classes to average over (default: those present in either array). A
        class in ``labels`` with no true and no predicted pulse scores 0.
    """
    return float(metrics.f1_score(y_true, y_pred, labels=labels, average="macro",
                                  zero_division=0))


def per_class_recall(y_true, y_pred, labels=None) -> pd.Series:
    """Recall of every class: the fraction of its true pulses predicted as it.

    Parameters
    ----------
    y_true, y_pred : array-like, shape (n_pulses,)
    labels : array-like, optional
        Classes, in output order (default: sorted union of both arrays).

    Returns
    -------
    pandas.Series
        Indexed by class; NaN for a class with no true pulse.
    """
    if labels is None:
        labels = np.unique(np.concatenate([np.asarray(y_true), np.asarray(y_pred)]))
    labels = list(np.asarray(labels).tolist())
    r = metrics.recall_score(y_true, y_pred, labels=labels, average=None,
                             zero_division=np.nan)
    return pd.Series(np.asarray(r, dtype=np.float64), index=pd.Index(labels, name="class"),
                     name="recall")


def empirical_coverage(pred_sets, y, classes=None) -> float:
    """Fraction of pulses whose prediction set contains the true class.

    Parameters
    ----------
    pred_sets : array-like of bool, shape (n_pulses, n_classes)
        ``pred_sets[i, j]``: class j is in the set of pulse i (e.g.
        ``model.predict_set(X)``).
    y : array-like, shape (n_pulses,)
        True labels (names with ``classes``, else column indices).
    classes : array-like, shape (n_classes,), optional

    Returns
    -------
    float
        In [0, 1]; a split-conformal set at level 1 - alpha should give about
        1 - alpha on exchangeable data.
    """
    s = np.asarray(pred_sets)
    if s.ndim != 2 or s.shape[0] == 0:
        raise ValueError(f"pred_sets must be 2-D (n_pulses, n_classes) with rows, got "
                         f"{s.shape}")
    if s.dtype != bool:
        if not np.isin(s, (0, 1)).all():
            raise ValueError("pred_sets must be boolean (or 0/1)")
        s = s.astype(bool)
    yi = _labels_to_index(y, classes, s.shape[1])
    if yi.shape != (s.shape[0],):
        raise ValueError(f"y must have one label per row of pred_sets ({s.shape[0]}), got "
                         f"{yi.shape}")
    return float(s[np.arange(len(yi)), yi].mean())
