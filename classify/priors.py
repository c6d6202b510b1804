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

from dataclasses import dataclass

import numpy as np
import pandas as pd

from features import InputError

from ._classmix import ROW_SUM_TOL, adjust_priors, estimate_priors_em
from .predict import model_inputs, predict_features

__all__ = ["adjust_priors", "estimate_priors_em", "PriorShift", "prior_shift", "ROW_SUM_TOL"]


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
    """The model's input columns of a feature table (:func:`classify.predict.model_inputs`;
    kept under this name for :mod:`classify.drift_report`)."""
    return model_inputs(model, features)


def prior_shift(model, features: pd.DataFrame, *, max_iter: int = 1000,
                tol: float = 1e-8) -> PriorShift:
    """Estimate the class mix of a catalog from a model's calibrated probabilities.

    Parameters
    ----------
    model : object
        With ``classes_``, ``class_priors_`` (training class frequencies) and a
        calibrated ``predict_proba`` (e.g. :class:`classify.models.PulseClassifier`),
        applied by :func:`classify.predict.predict_features`.
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
    proba = predict_features(model, use, relax=False, novelty=False)["proba"]
    train = np.asarray(model.class_priors_, dtype=np.float64)
    new, _, n_iter = estimate_priors_em(proba, train, max_iter=max_iter, tol=tol)
    return PriorShift(np.asarray(model.classes_), train, new, proba.mean(axis=0), len(use),
                      n_iter)
