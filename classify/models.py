"""The pulse classifier: gradient-boosted trees, calibrated, with conformal sets and novelty.

:class:`PulseClassifier` is a scikit-learn classifier. ``fit(X, y, groups=...)``:

1. splits the rows into ``n_splits`` folds grouped by ``groups`` (flashes: the
   pulses of one flash never sit in both the training and the held-out fold;
   :class:`~sklearn.model_selection.StratifiedGroupKFold`);
2. fits one :class:`~sklearn.ensemble.HistGradientBoostingClassifier` per fold
   (missing values handled natively; optional class weights). Training rows
   are augmented with copies in which whole groups of columns that a catalog
   may lack (range, VHF, sources, flash ids; ``missing_groups``) are set to
   NaN, so the trees learn what to do when a station records less;
3. calibrates by temperature scaling (Guo et al. 2017) fitted on the
   out-of-fold predictions: p = softmax(log p_raw / T). The deployed model
   averages the fold models' probabilities and applies T (cross-fitted
   calibration, in the spirit of ``CalibratedClassifierCV(ensemble=True)``).
   Calibration is conditional on what the catalog holds: every held-out fold
   is also predicted with each combination of the missing groups removed, and
   each pattern of missing groups (no range, no VHF, ...) gets its own
   temperature (falling back to the pooled one below ``MIN_CALIBRATION_ROWS``);
4. sets split-conformal thresholds per pattern and class (Mondrian conformal
   prediction; Vovk et al. 2005) on those out-of-fold calibrated probabilities:
   with score s = 1 - p_true, class k's threshold q_k is the
   ceil((n_k + 1)(1 - alpha)) / n_k empirical quantile of the scores of class-k
   pulses of that pattern (the pooled threshold below
   ``MIN_CONFORMAL_PER_CLASS`` pulses), and a pulse's prediction set is
   {k : 1 - p_k <= q_k};
5. fits a novelty score: mean Euclidean distance (NaN-aware,
   :func:`~sklearn.metrics.pairwise.nan_euclidean_distances`) to the
   ``novelty_k`` nearest of up to ``n_reference`` labelled training pulses in a
   robust standardised space (median/IQR z-scores, then arcsinh to tame tails);
   the threshold is the ``novelty_quantile`` of the training pulses' own
   (leave-self-out) scores.
"""

from __future__ import annotations

import numbers

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin
from sklearn.ensemble import HistGradientBoostingClassifier
from sklearn.model_selection import StratifiedGroupKFold, StratifiedKFold
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from features import InputError

from .conformal import (
    apply_temperature,
    conformal_thresholds,
    fit_temperature,
    nan_euclidean,
    season_thresholds,
)
from .novelty import choose_reference, knn_mean_distance, robust_scaling, standardise

__all__ = ["PulseClassifier", "conformal_thresholds", "fit_temperature", "nan_euclidean",
           "season_thresholds", "select_columns"]

#: Held-out rows per fold masked for each pattern of missing column groups.
MASKED_CALIBRATION_ROWS = 5000
#: Fewest calibration rows of a pattern of missing column groups for its own temperature.
MIN_CALIBRATION_ROWS = 200
#: Fewest calibration rows of a pattern the training pulses have as recorded (no group
#: missing, or what the station lacks) for its own temperature: below
#: MIN_CALIBRATION_ROWS it would take the pooled one, fitted mostly on masked copies (31
#: of 32 combinations hide something), which softens a small model's every probability
#: (a cold start on 90 pulses fell below its 0.95 self-training level round after
#: round). One temperature is one parameter: 20 rows fit it (our choice).
MIN_FULL_PATTERN_ROWS = 20
#: Fewest calibration pulses of a class (in a pattern) for its own conformal threshold.
MIN_CONFORMAL_PER_CLASS = 30
#: Joins catalog_id and event_id in ``sample_ids`` (a character no CSV id contains).
ID_SEPARATOR = "\x1f"
#: Columns listed by name in an error message, at most.
MAX_NAMES_SHOWN = 8


def select_columns(table, names):
    """The columns ``names`` of a table, taken by name and in that order.

    A model fitted on a feature table takes its own columns from any wider table
    (a features file, a triage results file): the other columns are ignored and the
    order of the table does not matter.

    Parameters
    ----------
    table : pandas.DataFrame
    names : sequence of str
        The columns wanted (a model's ``feature_names_in_``).

    Returns
    -------
    pandas.DataFrame
        ``table[names]`` (a copy).

    Raises
    ------
    features.InputError
        Naming every wanted column the table lacks (and, as a hint, the table's
        columns that the model does not know, which may be their renamed forms).

    Examples
    --------
    >>> import pandas as pd
    >>> t = pd.DataFrame({"event_id": ["a"], "width_s": [2e-5], "bipolarity": [0.4]})
    >>> select_columns(t, ["bipolarity", "width_s"]).columns.tolist()
    ['bipolarity', 'width_s']
    >>> select_columns(t, ["bipolarity", "rise_time_s"])
    Traceback (most recent call last):
    ...
    features._checks.InputError: the feature table lacks the model's input column(s) ['rise_time_s']...
    """
    names = [str(n) for n in names]
    have = set(table.columns)
    missing = [n for n in names if n not in have]
    if missing:
        shown = missing[:MAX_NAMES_SHOWN] + (["..."] if len(missing) > MAX_NAMES_SHOWN else [])
        unknown = [str(c) for c in table.columns if c not in set(names)]
        hint = (f"; columns of the table the model does not use: "
                f"{unknown[:MAX_NAMES_SHOWN] + (['...'] if len(unknown) > MAX_NAMES_SHOWN else [])}"
                if unknown else "")
        raise InputError(f"the feature table lacks the model's input column(s) {shown} "
                         f"({len(missing)} of the {len(names)} it was fitted on){hint}")
    return table[names]


class PulseClassifier(ClassifierMixin, BaseEstimator):
    """Calibrated gradient-boosted classifier with conformal sets and a novelty score.

    Parameters
    ----------
    coverage : float, default=0.95
        Target class-conditional coverage of the prediction sets.
    n_splits : int, default=5
        Folds (grouped by ``groups``) for out-of-fold calibration; fewer are
        used when a class has fewer members.
    max_iter : int, default=80
        Boosting iterations of each fold model.
    learning_rate : float, default=0.15
    max_leaf_nodes : int, default=31
    l2_regularization : float, default=1.0
    class_weight : {"balanced"}, dict or None, default=None
        None by default: scikit-learn bins weighted data far more slowly, and
        calibrated probabilities should reflect the training class mix (the
        pulse classes of a season are imbalanced by at most ~10:1).
    missing_groups : list of list of int, optional
        Column-index groups that a catalog may lack together; training rows
        are augmented with copies in which each group is masked (NaN) with
        probability 1/2.
    augment_fraction : float, default=0.5
        Number of augmented copies as a fraction of the training rows.
    novelty_quantile : float, default=0.999
        Quantile of the training pulses' novelty scores used as the threshold.
    novelty_k : int, default=5
    n_reference : int, default=1000
        Labelled pulses kept for the novelty score and look-alikes.
    random_state : int, default=0

    Attributes
    ----------
    classes_ : ndarray of shape (n_classes,)
    n_features_in_ : int
    n_iter_ : int
        Boosting iterations of the longest fold model.
    feature_names_in_ : ndarray of str
        Set when ``X`` is a DataFrame.
    estimators_ : list of HistGradientBoostingClassifier
        One per fold.
    temperature_ : float
        Temperature of pulses with every column group present.
    conformal_thresholds_ : ndarray of shape (n_classes,)
        Thresholds of pulses with every column group present.
    pattern_temperature_ : ndarray of shape (2 ** n_groups,)
        Temperature per pattern of missing column groups (bit j: group j missing).
    pattern_thresholds_ : ndarray of shape (2 ** n_groups, n_classes)
        Conformal thresholds per pattern and class.
    oof_pattern_ : ndarray of int, shape (n_samples,)
    class_priors_ : ndarray of shape (n_classes,)
        Class frequencies of the training labels (weights included).
    oof_proba_ : ndarray of shape (n_samples, n_classes)
        Calibrated out-of-fold probabilities of the training rows.
    oof_fold_ : ndarray of int, shape (n_samples,)
    center_, scale_ : ndarray of shape (n_features,)
        Robust standardisation of the novelty space.
    reference_X_ : ndarray of shape (n_reference, n_features)
        Standardised features of the reference pulses.
    reference_index_ : ndarray of int
        Their row numbers in the training ``X``.
    reference_y_ : ndarray
        Their labels.
    reference_ids_ : ndarray of str
        Their ``sample_ids`` (row numbers when none were given).
    novelty_threshold_ : float
    """

    def __init__(self, *, coverage=0.95, n_splits=5, max_iter=80, learning_rate=0.15,
                 max_leaf_nodes=31, l2_regularization=1.0, class_weight=None,
                 missing_groups=None, augment_fraction=0.5, novelty_quantile=0.999,
                 novelty_k=5, n_reference=1000, random_state=0):
        self.coverage = coverage
        self.n_splits = n_splits
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.l2_regularization = l2_regularization
        self.class_weight = class_weight
        self.missing_groups = missing_groups
        self.augment_fraction = augment_fraction
        self.novelty_quantile = novelty_quantile
        self.novelty_k = novelty_k
        self.n_reference = n_reference
        self.random_state = random_state

    # ------------------------------------------------------------------ checks
    def _check_params(self):
        def check(name, ok, expected):
            if not ok:
                raise InputError(f"PulseClassifier: parameter {name!r} must be {expected}, got "
                                 f"{getattr(self, name)!r}")

        check("coverage", isinstance(self.coverage, numbers.Real)
              and 0 < self.coverage < 1, "a float in (0, 1)")
        check("n_splits", isinstance(self.n_splits, numbers.Integral) and self.n_splits >= 2,
              "an int >= 2")
        check("max_iter", isinstance(self.max_iter, numbers.Integral) and self.max_iter >= 1,
              "an int >= 1")
        check("augment_fraction", isinstance(self.augment_fraction, numbers.Real)
              and self.augment_fraction >= 0, "a float >= 0")
        check("novelty_quantile", isinstance(self.novelty_quantile, numbers.Real)
              and 0 < self.novelty_quantile <= 1, "a float in (0, 1]")
        check("class_weight", self.class_weight is None or self.class_weight == "balanced"
              or isinstance(self.class_weight, dict), "'balanced', a dict or None")
        check("novelty_k", isinstance(self.novelty_k, numbers.Integral) and self.novelty_k >= 1,
              "an int >= 1")

    def _new_tree_model(self, seed):
        cw = self.class_weight
        if isinstance(cw, dict):  # user labels -> the class indices the trees see
            cw = {i: cw[c] for i, c in enumerate(self.classes_) if c in cw}
        return HistGradientBoostingClassifier(
            max_iter=self.max_iter, learning_rate=self.learning_rate,
            max_leaf_nodes=self.max_leaf_nodes, l2_regularization=self.l2_regularization,
            class_weight=cw, early_stopping=False, random_state=seed)

    def _fit_tree_model(self, seed, X, y, w):
        # a column with no value at all cannot be binned: make it constant (the
        # trees then never split on it, whatever values it has later)
        empty = np.isnan(X).all(axis=0)
        if empty.any():
            X = X.copy()
            X[:, empty] = 0.0
        # integer weights are repeated rows: scikit-learn bins weighted data one
        # percentile at a time, which is ~100x slower than unweighted binning
        if np.all(w == 1):
            w = None
        elif np.all(w == np.round(w)):
            reps = w.astype(np.intp)
            X, y, w = np.repeat(X, reps, axis=0), np.repeat(y, reps), None
        return self._new_tree_model(seed).fit(X, y, sample_weight=w)

    def _group_columns(self):
        return [np.asarray(g, dtype=np.intp) for g in (self.missing_groups or []) if len(g)]

    def _patterns(self, X):
        """Bit j set where column group j is entirely missing (NaN) in a row."""
        code = np.zeros(len(X), dtype=np.intp)
        for j, g in enumerate(self._group_columns()):
            code |= np.isnan(X[:, g]).all(axis=1).astype(np.intp) << j
        return code

    def _mask(self, X, code):
        Xm = X.copy()
        for j, g in enumerate(self._group_columns()):
            if code >> j & 1:
                Xm[:, g] = np.nan
        return Xm

    def _augment(self, X, y, w, rng):
        groups = self._group_columns()
        n_aug = int(round(self.augment_fraction * len(X))) if groups else 0
        if n_aug == 0:
            return X, y, w
        rows = rng.integers(0, len(X), n_aug)
        Xa = X[rows].copy()
        masks = rng.random((n_aug, len(groups))) < 0.5
        masks[~masks.any(axis=1), rng.integers(0, len(groups))] = True
        for j, g in enumerate(groups):
            Xa[np.ix_(masks[:, j], g)] = np.nan
        return (np.vstack([X, Xa]), np.concatenate([y, y[rows]]),
                np.concatenate([w, w[rows]]))

    def _splits(self, y_idx, groups, rng_seed):
        counts = np.bincount(y_idx)
        n_splits = int(min(self.n_splits, counts.min()))
        if n_splits < 2:
            return None
        if groups is None:
            cv = StratifiedKFold(n_splits=n_splits, shuffle=True, random_state=rng_seed)
            return list(cv.split(np.zeros(len(y_idx)), y_idx))
        n_groups = len(np.unique(groups))
        if n_groups < n_splits:
            n_splits = n_groups
            if n_splits < 2:
                return None
        cv = StratifiedGroupKFold(n_splits=n_splits, shuffle=True, random_state=rng_seed)
        return list(cv.split(np.zeros(len(y_idx)), y_idx, groups))

    # ------------------------------------------------------------------ fit
    def fit(self, X, y, groups=None, sample_weight=None, sample_ids=None, reference_rows=None,
            progress=None):
        """Fit fold models, calibration, conformal thresholds and the novelty score.

        Parameters
        ----------
        X : array-like or DataFrame, shape (n_samples, n_features)
            Features; NaN allowed.
        y : array-like, shape (n_samples,)
            Class labels.
        groups : array-like, shape (n_samples,), optional
            Group (flash) of every row for grouped cross-validation.
        sample_weight : array-like, shape (n_samples,), optional
        sample_ids : array-like of str, shape (n_samples,), optional
            Names of the rows (e.g. "catalog_id/event_id"), kept for the
            reference pulses so look-alikes can be traced back.
        reference_rows : array-like of bool, shape (n_samples,), optional
            Rows the reference (look-alike) pulses may be taken from, e.g. the pulses
            as recorded and not their station variants (default: all).
        progress : callable, optional
            ``progress(done, total, step)`` is called before the first step and after
            each one: one step per fold model, then the calibration (temperatures,
            conformal thresholds and the novelty reference); ``step`` names the
            step just done (``"start"`` at first). The estimator never prints: the
            caller draws a bar (:class:`classify.training.FitProgress`).

        Returns
        -------
        self
        """
        self._check_params()
        X, y = validate_data(self, X, y, ensure_all_finite="allow-nan", dtype=np.float64)
        check_classification_targets(y)
        self.classes_, y_idx = np.unique(y, return_inverse=True)
        if len(self.classes_) < 2:
            raise InputError(f"PulseClassifier needs labels of at least 2 classes; got 1 class "
                             f"({self.classes_.tolist()})")
        n, n_classes = len(y_idx), len(self.classes_)
        w = (np.ones(n) if sample_weight is None
             else np.asarray(sample_weight, dtype=np.float64).reshape(-1))
        if w.shape != (n,) or not np.all(np.isfinite(w)) or (w < 0).any():
            raise ValueError(f"sample_weight must be {n} finite non-negative numbers")
        if not w.any():
            raise ValueError("Sample weights must contain at least one non-zero number.")
        if groups is not None:
            groups = np.asarray(groups)
            if groups.shape != (n,):
                raise ValueError(f"groups must have one entry per row ({n}), got "
                                 f"{groups.shape}")
        rng = np.random.default_rng(self.random_state)
        seed = int(rng.integers(0, 2**31 - 1))
        splits = self._splits(y_idx, groups, seed)

        oof_raw = np.zeros((n, n_classes))
        oof_fold = np.full(n, -1)
        n_patterns = 2 ** len(self._group_columns())
        natural = self._patterns(X)
        cal_raw, cal_y, cal_w, cal_pat = [], [], [], []
        self.estimators_ = []
        n_steps = (1 if splits is None else len(splits)) + 1
        if progress is not None:
            progress(0, n_steps, "start")
        if splits is None:  # too little data to cross-validate: one model, T = 1
            Xa, ya, wa = self._augment(X, y_idx, w, rng)
            est = self._fit_tree_model(seed, Xa, ya, wa)
            self.estimators_.append(est)
            if progress is not None:
                progress(1, n_steps, "model 1 of 1")
            oof_raw = self._expand(est, est.predict_proba(X))
            cal_raw, cal_y, cal_w, cal_pat = [oof_raw], [y_idx], [w], [natural]
        else:
            for fold, (tr, te) in enumerate(splits):
                Xa, ya, wa = self._augment(X[tr], y_idx[tr], w[tr], rng)
                est = self._fit_tree_model(seed + fold, Xa, ya, wa)
                self.estimators_.append(est)
                oof_fold[te] = fold
                # held-out rows as they are and with every combination of column
                # groups removed: calibration conditional on what a catalog has
                oof_raw[te] = self._expand(est, est.predict_proba(X[te]))
                # masked copies of at most MASKED_CALIBRATION_ROWS held-out rows per
                # pattern and fold (enough for a temperature and class thresholds)
                sub = te if len(te) <= MASKED_CALIBRATION_ROWS else np.sort(
                    rng.choice(te, MASKED_CALIBRATION_ROWS, replace=False))
                for code in range(n_patterns):
                    rows = te if code == 0 else sub
                    raw = (oof_raw[te] if code == 0 else
                           self._expand(est, est.predict_proba(self._mask(X[rows], code))))
                    cal_raw.append(raw)
                    cal_y.append(y_idx[rows])
                    cal_w.append(w[rows])
                    cal_pat.append(natural[rows] | code)
                if progress is not None:
                    progress(fold + 1, n_steps, f"fold model {fold + 1} of {len(splits)}")
        cal_raw, cal_y = np.vstack(cal_raw), np.concatenate(cal_y)
        cal_w, cal_pat = np.concatenate(cal_w), np.concatenate(cal_pat)
        self._fit_pattern_calibration(cal_raw, cal_y, cal_w, cal_pat, n_patterns,
                                      cross_fitted=splits is not None,
                                      recorded=np.unique(natural))
        self.oof_proba_ = self._calibrate(oof_raw, natural)
        self.oof_pattern_ = natural
        self.oof_fold_ = oof_fold
        self.n_iter_ = max(int(e.n_iter_) for e in self.estimators_)
        self.class_priors_ = np.bincount(y_idx, weights=w, minlength=n_classes) / w.sum()
        allowed = (np.ones(n, dtype=bool) if reference_rows is None
                   else np.asarray(reference_rows, dtype=bool).reshape(-1))
        if allowed.shape != (n,) or not allowed.any():
            raise ValueError(f"reference_rows must be {n} booleans, at least one True")
        self._fit_novelty(X, y_idx, rng, allowed)
        ids = (np.arange(n).astype(str) if sample_ids is None
               else np.asarray(sample_ids).astype(str))
        if ids.shape != (n,):
            raise ValueError(f"sample_ids must have one entry per row ({n}), got {ids.shape}")
        self.reference_ids_ = ids[self.reference_index_]
        if progress is not None:
            progress(n_steps, n_steps, "calibration")
        return self

    def _fit_pattern_calibration(self, raw, y, w, pattern, n_patterns, cross_fitted,
                                 recorded=(0,)):
        """Temperature and conformal thresholds for every pattern of missing groups
        (``recorded``: the patterns the training pulses have as recorded)."""
        k = len(self.classes_)
        pooled_t = fit_temperature(raw, y, w) if cross_fitted else 1.0
        temps = np.full(n_patterns, pooled_t)
        for p in range(n_patterns):
            sel = pattern == p
            least = MIN_FULL_PATTERN_ROWS if p in recorded else MIN_CALIBRATION_ROWS
            if cross_fitted and sel.sum() >= least and len(np.unique(y[sel])) > 1:
                temps[p] = fit_temperature(raw[sel], y[sel], w[sel])
        cal = apply_temperature(raw, temps[pattern])
        pooled_q = conformal_thresholds(cal, y, k, self.coverage)
        qs = np.tile(pooled_q, (n_patterns, 1))
        for p in range(n_patterns):
            sel = pattern == p
            if not sel.any():
                continue
            q = conformal_thresholds(cal[sel], y[sel], k, self.coverage)
            counts = np.bincount(y[sel], minlength=k)
            enough = counts >= MIN_CONFORMAL_PER_CLASS
            qs[p, enough] = q[enough]
        self.pattern_temperature_ = temps
        self.pattern_thresholds_ = qs
        self.temperature_ = float(temps[0])
        self.conformal_thresholds_ = qs[0]

    def _calibrate(self, raw, pattern):
        return apply_temperature(raw, self.pattern_temperature_[pattern])

    def _expand(self, est, proba):
        """Probabilities over all classes_ even if a fold lacked some class."""
        if proba.shape[1] == len(self.classes_):
            return proba
        full = np.zeros((proba.shape[0], len(self.classes_)))
        full[:, est.classes_.astype(int)] = proba
        return full

    # ------------------------------------------------------------------ novelty
    def _standardise(self, X):
        return standardise(X, self.center_, self.scale_)

    def _fit_novelty(self, X, y_idx, rng, allowed):
        """Robust scaling, the reference pulses and the threshold (see :mod:`.novelty`)."""
        self.center_, self.scale_ = robust_scaling(X)
        n = len(X)
        m = min(self.n_reference, int(allowed.sum()))
        ref = choose_reference(y_idx, len(self.classes_), allowed, m, rng)
        self.reference_index_ = ref
        self.reference_X_ = self._standardise(X[ref])
        self.reference_y_ = self.classes_[y_idx[ref]]
        # leave-self-out scores of (a sample of) the training pulses
        probe = rng.choice(n, size=min(n, 4000), replace=False)
        exclude = np.where(np.isin(probe, ref), ref.searchsorted(probe), -1)
        scores = knn_mean_distance(self._standardise(X[probe]), self.reference_X_,
                                   self.novelty_k, exclude=exclude)
        finite = scores[np.isfinite(scores)]
        self.novelty_threshold_ = (float(np.quantile(finite, self.novelty_quantile))
                                   if finite.size else np.inf)

    # ------------------------------------------------------------------ predict
    def _validate(self, X):
        """``X`` as a float array of the fitted columns.

        A DataFrame is taken by column name when the model was fitted on one
        (:func:`select_columns`: extra columns ignored, any order, a missing column
        an :class:`~features.InputError`); anything else is checked by scikit-learn.
        """
        check_is_fitted(self, "estimators_")
        names = getattr(self, "feature_names_in_", None)
        if names is not None and hasattr(X, "columns"):
            X = select_columns(X, names)
        return validate_data(self, X, reset=False, ensure_all_finite="allow-nan",
                             dtype=np.float64)

    def _proba(self, Xv):
        """Calibrated probabilities of validated rows (a float array)."""
        raw = np.mean([self._expand(e, e.predict_proba(Xv)) for e in self.estimators_], axis=0)
        return self._calibrate(raw, self._patterns(Xv))

    def predict_proba(self, X):
        """Calibrated class probabilities.

        Parameters
        ----------
        X : DataFrame or array-like, shape (n_samples, n_features)
            The pulses' features (SI units, NaN allowed). A DataFrame may hold more
            columns than the model was fitted on, in any order: the model takes its
            own by name (a missing one is an :class:`~features.InputError`).

        Returns
        -------
        ndarray, shape (n_samples, n_classes)
            Rows sum to 1; columns in the order of ``classes_``.
        """
        return self._proba(self._validate(X))

    def predict(self, X):
        """Most probable class of every row (``X`` as for :meth:`predict_proba`)."""
        proba = self.predict_proba(X)
        return self.classes_[np.argmax(proba, axis=1)]

    def predict_set(self, X, proba=None, thresholds=None, exclude=None):
        """Conformal prediction sets: bool array (n_samples, n_classes).

        Parameters
        ----------
        X : DataFrame or array-like, shape (n_samples, n_features)
            The pulses, as for :meth:`predict_proba` (their missing column groups
            choose the thresholds).
        proba : ndarray, shape (n_samples, n_classes), optional
            Probabilities to use instead of ``predict_proba(X)`` (e.g. after a
            prior adjustment).
        thresholds : ndarray, shape (n_classes,), optional
            Season-adapted thresholds (:func:`season_thresholds`) instead of the
            training ones.
        exclude : ndarray of bool, shape (n_samples,), optional
            Pulses whose set is empty whatever their probabilities (e.g. records
            with a quality problem, sent to review anyway).
        """
        Xv = self._validate(X)
        p = self._proba(Xv) if proba is None else np.asarray(proba)
        if thresholds is None:
            q = self.pattern_thresholds_[self._patterns(Xv)]
        else:
            q = np.asarray(thresholds, dtype=np.float64)[None, :]
        sets = (1.0 - p) <= q + 1e-12
        if exclude is not None:
            sets &= ~np.asarray(exclude, dtype=bool)[:, None]
        return sets

    def novelty_score(self, X):
        """Mean distance to the nearest reference pulses (larger = less familiar).

        ``X`` as for :meth:`predict_proba`; returns an ndarray of shape (n_samples,), in
        robust standardised units (NaN where no reference pulse shares a feature).
        """
        X = self._validate(X)
        return knn_mean_distance(self._standardise(X), self.reference_X_, self.novelty_k)

    def is_novel(self, X):
        """True where the novelty score exceeds the training threshold (or is NaN)."""
        s = self.novelty_score(X)
        return ~(s <= self.novelty_threshold_)

    def nearest_labelled(self, X, k=5):
        """Indices into the reference set and distances of the ``k`` nearest, each (n, k).

        ``X`` as for :meth:`predict_proba`.
        """
        Z = self._standardise(self._validate(X))
        d = nan_euclidean(Z, self.reference_X_)
        d = np.where(np.isfinite(d), d, np.inf)
        k = min(k, d.shape[1])
        idx = np.argsort(d, axis=1, kind="stable")[:, :k]
        return idx, np.take_along_axis(d, idx, axis=1)

    @property
    def reference_(self):
        """The reference (labelled) pulses as a DataFrame: id, label, model features."""
        import pandas as pd

        check_is_fitted(self, "reference_X_")
        X = np.sinh(self.reference_X_) * self.scale_ + self.center_
        names = (list(self.feature_names_in_) if hasattr(self, "feature_names_in_")
                 else [f"x{i}" for i in range(X.shape[1])])
        df = pd.DataFrame(X, columns=names)
        df.insert(0, "label", self.reference_y_)
        ids = pd.Series(self.reference_ids_, dtype=str)
        if ids.str.contains(ID_SEPARATOR, regex=False).all():
            parts = ids.str.split(ID_SEPARATOR, n=1, expand=True)
            df.insert(0, "event_id", parts[1].to_numpy())
            df.insert(0, "catalog_id", parts[0].to_numpy())
        else:
            df.insert(0, "sample_id", ids.to_numpy())
        return df

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        return tags
