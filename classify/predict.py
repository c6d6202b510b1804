"""Apply a trained model to pulses: the one place a model meets a features table.

Three layers, each used by the next and by :mod:`classify.triage` (which streams a season
through the same functions, so a pulse gets the same decision from either):

1. :func:`predict_features`: a model and a features table give calibrated class
   probabilities, the probabilities with censored values relaxed
   (:func:`classify.decide.relaxed_features`) and the novelty scores;
2. :func:`season_decisions`: a whole season's predictions are adapted to the season
   (conformal thresholds from its own calibrated probabilities,
   :func:`classify.conformal.season_thresholds`; optionally its class mix by EM,
   :mod:`classify.priors`) into everything :func:`classify.decide.decide` needs, and
   :func:`decision_table` turns them into the results' decision columns;
3. :func:`predict_catalog`: a catalog in, the table ``pulsesort triage`` writes out (its
   decisions and features), in memory, for a notebook.

:func:`load_model` loads a model by folder, registry version or ``"current"``.

Imports stay light: scikit-learn is imported only when a model is loaded or applied.

Examples are in :func:`predict_features` and :func:`predict_catalog`.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pandas as pd

from features import InputError, schema

from ._classmix import adjust_priors, estimate_priors_em
from .conformal import season_thresholds
from .decide import classifiable, decide, field_ok, flag, relaxed_features

__all__ = ["MIN_SEASON_PULSES", "load_model", "model_inputs", "predict_features",
           "season_decisions", "decision_table", "predict_catalog"]

logger = logging.getLogger("pulsesort")

#: Fewest usable pulses for a season's own adaptation (class mix, conformal thresholds);
#: fewer keep the training thresholds (common practice, no source).
MIN_SEASON_PULSES = 20
#: ``model_version`` of the results of a model given as an object without its card.
UNSAVED_VERSION = "unsaved model"


def load_model(model="current", registry=None):
    """Load a model by folder, registry version or ``"current"``, after verifying it.

    Parameters
    ----------
    model : str or path, default="current"
        A model folder, a registry folder (its current model), a version name, or
        ``"current"`` (:func:`classify.registry.resolve_model`).
    registry : path, optional
        The registry in which a version name or ``"current"`` is looked up (default:
        ``models`` in the working folder).

    Returns
    -------
    model : classify.models.PulseClassifier
        The fitted model.
    card : dict
        Its model card (``version``, ``classes``, ``features``, training catalogs,
        cross-validated metrics...).

    Raises
    ------
    features.InputError
        The name resolves to nothing (the message says where it looked), or the folder
        fails verification (:func:`classify.registry.load_model`: checksums, card,
        allow-listed types).

    Examples
    --------
    >>> model, card = load_model("current", registry="models")  # doctest: +SKIP
    >>> card["version"], list(model.classes_)                    # doctest: +SKIP
    ('hollowmere-2031-v1', ['energetic_in_cloud', 'narrow_bipolar', ...])

    (Skipped here: it needs a trained model folder; ``tests/test_api.py`` trains one and
    loads it this way.)
    """
    from .registry import load_model as load_folder
    from .registry import resolve_model

    return load_folder(resolve_model(model, registry))


def model_inputs(model, features: pd.DataFrame) -> pd.DataFrame:
    """The model's input columns of a features table, by name, as floats.

    Parameters
    ----------
    model : object
        A fitted classifier; its ``feature_names_in_`` name its inputs (the schema's
        model features, :func:`features.schema.model_feature_names`, when it has none).
    features : pandas.DataFrame
        Any table holding those columns (a features table, a triage results table).

    Returns
    -------
    pandas.DataFrame
        Those columns in the model's order, float64.

    Raises
    ------
    features.InputError
        Naming the columns the table lacks (:func:`classify.models.select_columns`).
    """
    from .models import select_columns

    names = getattr(model, "feature_names_in_", None)
    names = list(names) if names is not None else schema.model_feature_names()
    return select_columns(features, names).astype(np.float64)


def predict_features(model, features: pd.DataFrame, *, relax: bool = True,
                     novelty: bool = True) -> dict:
    """Apply a trained model to a features table.

    Parameters
    ----------
    model : classify.models.PulseClassifier or classifier
        Fitted; any scikit-learn classifier with calibrated ``predict_proba`` works for
        the probabilities (novelty needs ``novelty_score``).
    features : pandas.DataFrame, n rows
        A features table (:func:`features.extract_features`) or any wider table holding
        the model's columns (:func:`model_inputs`) in SI units; other columns are
        ignored. ``vhf_censored`` and ``field_censored`` mark censored values.
    relax : bool, default=True
        Also predict the censored pulses with their censored values relaxed upwards
        (:func:`classify.decide.relaxed_features`): does the class depend on how far
        beyond full scale the record went?
    novelty : bool, default=True
        Compute the novelty scores.

    Returns
    -------
    dict
        ``classes`` (ndarray of str, k), ``proba`` (ndarray (n, k), calibrated, rows
        summing to 1), ``relaxed`` (ndarray (n, k): ``proba`` with the censored rows
        predicted relaxed; equal to ``proba`` without censoring or with ``relax=False``),
        ``novelty`` (ndarray (n,), robust standardised units; NaN when not computed)
        and ``novelty_threshold`` (float; NaN when the model has none).

    Raises
    ------
    features.InputError
        The table lacks some of the model's columns (named in the message).

    Examples
    --------
    A model fitted on an invented features table (self-consistency only), applied to a wider
    table (its extra columns are ignored):

    >>> import numpy as np, pandas as pd
    >>> from classify.models import PulseClassifier
    >>> rng = np.random.default_rng(0)
    >>> table = pd.DataFrame({"event_id": [f"e{i}" for i in range(300)],
    ...                       "bipolarity": rng.uniform(0, 1, 300),
    ...                       "width_s": rng.uniform(1e-6, 3e-5, 300)})
    >>> y = np.where(table["bipolarity"] > 0.5, "narrow_bipolar", "stepped_leader")
    >>> model = PulseClassifier(max_iter=10, n_reference=50).fit(
    ...     table[["bipolarity", "width_s"]], y)
    >>> out = predict_features(model, table)
    >>> out["proba"].shape, out["novelty"].shape
    ((300, 2), (300,))
    >>> bool((out["relaxed"] == out["proba"]).all())     # no censored value to relax
    True
    """
    X = model_inputs(model, features)
    schema.mask_unusable_field(X, field_ok(features))
    proba = np.asarray(model.predict_proba(X), dtype=np.float64)
    relaxed = proba.copy()
    if relax:
        vc, fc = flag(features, "vhf_censored"), flag(features, "field_censored")
        cens = vc | fc
        if cens.any():
            Xr = relaxed_features(X[cens], vc[cens], fc[cens])
            relaxed[cens] = model.predict_proba(Xr)
    scores = (np.asarray(model.novelty_score(X), dtype=np.float64)
              if novelty and hasattr(model, "novelty_score") else np.full(len(X), np.nan))
    return {"classes": np.asarray(model.classes_).astype(str), "proba": proba,
            "relaxed": relaxed, "novelty": scores,
            "novelty_threshold": float(getattr(model, "novelty_threshold_", np.nan))}


def season_decisions(model, predicted: dict, usable, *, version: str,
                     features: pd.DataFrame | Callable[[], pd.DataFrame] | None = None,
                     adapt_priors: bool = False, adapt_sets: bool = True,
                     coverage: float | None = None, placeable=None) -> dict:
    """Adapt a season's predictions to the season: the input of :func:`decision_table`.

    Parameters
    ----------
    model : classify.models.PulseClassifier
    predicted : dict
        :func:`predict_features` of every pulse of the season (or the same keys
        gathered block by block).
    usable : ndarray of bool, shape (n,)
        Pulses with a usable field record (``field_ok``); only they inform the
        adaptation.
    version : str
        The model's version (``model_version`` of the results).
    features : DataFrame or callable, optional
        The season's features (or a function returning them), needed only for the
        training thresholds (``adapt_sets=False`` or fewer than
        :data:`MIN_SEASON_PULSES` usable pulses): their missing column groups choose the
        thresholds.
    adapt_priors : bool, default=False
        Estimate the season's class mix by EM and re-weight the probabilities
        (:func:`classify.priors.estimate_priors_em`, Saerens et al. 2002).
    adapt_sets : bool, default=True
        Conformal thresholds from the season's own calibrated probabilities
        (:func:`classify.conformal.season_thresholds`); False keeps the training ones.
    coverage : float, optional
        Target coverage of the sets (default: the model's).
    placeable : ndarray of bool, shape (n,), optional
        Pulses the model can place (:func:`classifiable`; default: ``usable``): the
        others get an empty set.

    Returns
    -------
    dict
        ``classes``, ``proba``, ``relaxed``, ``sets`` (bool (n, k)), ``novelty``,
        ``novelty_threshold``, ``usable``, ``placeable``, ``coverage``, ``version``,
        ``adaptation`` (in words), ``other`` (None), ``priors`` (class -> estimated
        share, or None).
    """
    usable = np.asarray(usable, dtype=bool)
    proba, relaxed = predicted["proba"], predicted["relaxed"]
    classes = np.asarray(model.classes_).astype(str)
    coverage = float(model.coverage if coverage is None else coverage)
    n_usable = int(usable.sum())
    notes, priors = [], None
    if adapt_priors and n_usable >= MIN_SEASON_PULSES:
        new_priors, _, _ = estimate_priors_em(proba[usable], model.class_priors_)
        priors = dict(zip(classes.tolist(), map(float, new_priors)))
        proba = adjust_priors(proba, model.class_priors_, new_priors)
        relaxed = adjust_priors(relaxed, model.class_priors_, new_priors)
        notes.append("class mix by EM on {:,} pulses ({})".format(
            n_usable, ", ".join(f"{c} {p:.3f}" for c, p in zip(classes, new_priors))))
    if adapt_sets and n_usable >= MIN_SEASON_PULSES:
        q = season_thresholds(proba[usable], coverage, model.conformal_thresholds_)
        sets = (1.0 - proba) <= q[None, :] + 1e-12
        notes.append(f"sets adapted to the season at {coverage:.2f} on {n_usable:,} pulses")
    else:
        if features is None:
            raise ValueError("season_decisions: the training thresholds need the features")
        table = features() if callable(features) else features
        sets = model.predict_set(table, proba=proba)
        notes.append(f"training sets at {coverage:.2f}")
    return {"classes": classes, "proba": proba, "relaxed": relaxed, "sets": sets,
            "novelty": predicted["novelty"],
            "novelty_threshold": float(model.novelty_threshold_), "usable": usable,
            "placeable": usable if placeable is None else np.asarray(placeable, dtype=bool),
            "coverage": coverage, "version": version,
            "adaptation": "; ".join(notes) or "none", "other": None, "priors": priors}


def decision_table(d: dict, review_below: float, event_ids, catalog_id: str, start: int = 0,
                   stop: int | None = None):
    """The results' decision columns of rows ``start:stop`` of a season.

    Parameters
    ----------
    d : dict
        :func:`season_decisions` (or the cold start's equivalent), with optional
        ``censored_v`` and ``censored_f`` (bool (n,): VHF or field at full scale).
    review_below : float
        Confidence below which a pulse needs review.
    event_ids : sequence of str
        The catalog's event ids (all of them).
    catalog_id : str
    start, stop : int
        The rows (default: all).

    Returns
    -------
    table : pandas.DataFrame
        ``event_id``, the decision columns of :func:`classify.decide.decide`
        (``label``, ``confidence``, ``needs_review``, ``novel``, ``prediction_set``,
        ``p_<class>``..., ``review_reason``, ``review_why``), then ``novelty_score``,
        ``model_version``, ``adaptation``, ``catalog_id``.
    reasons : dict
        Count of pulses per review reason.
    """
    a = start
    b = len(d["proba"]) if stop is None else stop
    cens_v = d["censored_v"][a:b] if "censored_v" in d else np.zeros(b - a, bool)
    cens_f = d["censored_f"][a:b] if "censored_f" in d else np.zeros(b - a, bool)
    channel = np.where(cens_v & cens_f, "field and VHF",
                       np.where(cens_v, "VHF", np.where(cens_f, "field", "")))
    out = decide(d["classes"], d["proba"][a:b], d["sets"][a:b], usable=d["placeable"][a:b],
                 review_below=review_below, coverage=d["coverage"],
                 novelty=d["novelty"][a:b], novelty_threshold=d["novelty_threshold"],
                 relaxed_proba=d["relaxed"][a:b], censored_channel=channel,
                 other=None if d["other"] is None else d["other"][a:b])
    reasons = out.attrs["reasons"]
    out.insert(0, "event_id", np.asarray(event_ids)[a:b])
    out["novelty_score"] = d["novelty"][a:b]
    out["model_version"] = d["version"]
    out["adaptation"] = d["adaptation"]
    out["catalog_id"] = catalog_id
    return out, reasons


def _the_model(model, card, registry):
    """``(estimator, version)`` from a model object or a name to load."""
    if hasattr(model, "predict_proba"):
        version = (card or {}).get("version") or UNSAVED_VERSION
        return model, str(version)
    if not isinstance(model, (str, Path)):
        raise InputError(f"model must be a fitted pulsesort model, a model folder, a version "
                         f"or 'current'; got {type(model).__name__}")
    est, card = load_model(model, registry)
    return est, str(card["version"])


def predict_catalog(catalog, model="current", *, card=None, registry=None, review_below=0.8,
                    coverage=None, adapt_sets=True, adapt_priors=False, features=None,
                    n_jobs=1, dask_address=None, chunk_size=None,
                    progress=None, season_fit="auto", store=None) -> pd.DataFrame:
    """Classify every pulse of a catalog in memory: the table ``pulsesort triage`` writes.

    Features of every pulse (:func:`features.extract_features`), the model's predictions
    (:func:`predict_features`), the season's adaptation (:func:`season_decisions`) and the
    decisions (:func:`classify.decide.decide`), exactly as :func:`classify.triage.
    triage_catalog` makes them (which streams a season of any size to a file, crash-safe;
    this keeps everything in memory).

    Parameters
    ----------
    catalog : features.Catalog or path
        An open catalog, or its folder.
    model : PulseClassifier, str or path, default="current"
        A fitted model, or what :func:`load_model` loads: a model folder, a version or
        ``"current"`` in ``registry``.
    card : dict, optional
        The model card of a model given as an object (its ``version`` becomes the
        ``model_version`` column; without it, ``"unsaved model"``).
    registry : path, optional
        Where a version or ``"current"`` is looked up (default ``models``).
    review_below : float, default=0.8
        Pulses with a lower confidence (calibrated top probability) need review.
    coverage : float, optional
        Target coverage of the prediction sets (default: the model's).
    adapt_sets : bool, default=True
        Adapt the conformal thresholds to this season; False uses the training ones.
    adapt_priors : bool, default=False
        Re-weight the probabilities for the season's class mix estimated by EM.
    features : pandas.DataFrame, optional
        The catalog's features if already computed (one row per event, in catalog
        order); default: computed here.
    n_jobs, dask_address, chunk_size, progress
        How the features are computed (:func:`features.extract.iter_features`); the
        results do not depend on them.
    season_fit : {"auto", "always", "never"} or bool, default="auto"
        Fit the season itself, anchored by the model's confident pulses
        (:func:`classify.seasonfit.fit_to_season`); ``"auto"`` when the model would send
        more than 2.5 % of the usable pulses to review for doubt.
    store : LabelStore, optional
        Analysts' labels of this catalog, more anchors of a season fit.

    Returns
    -------
    pandas.DataFrame
        One row per pulse in catalog order: ``event_id``, ``label``, ``confidence``,
        ``needs_review``, ``novel``, ``prediction_set`` (classes joined by ``|``),
        ``p_<class>`` per class, ``review_reason``, ``review_why``, ``novelty_score``,
        ``model_version``, ``adaptation``, ``catalog_id``, then every feature column (SI
        units, :mod:`features.schema`). ``attrs`` holds ``reasons`` (pulses per review
        reason), ``adaptation``, ``model_version`` and ``priors``.

    Raises
    ------
    features.InputError
        A bad catalog, model name or option, or ``features`` that are not the catalog's.

    Examples
    --------
    A model fitted on the features of a tiny invented catalog (hollowmere, two shapes of
    pulse; self-consistency only), then the catalog classified:

    >>> import tempfile, numpy as np
    >>> from features import extract_features, open_catalog, write_catalog
    >>> from classify.models import PulseClassifier
    >>> t = np.arange(2000) / 20e6 - 50e-6                     # s, 20 MS/s
    >>> rng = np.random.default_rng(1)
    >>> wide = rng.uniform(0, 1, 160) > 0.5                    # two invented kinds
    >>> width = np.where(wide, 8e-6, 1e-6)[:, None]            # s
    >>> field = (np.exp(-0.5 * (t / width) ** 2)               # V/m
    ...          - wide[:, None] * 0.5 * np.exp(-0.5 * ((t - 3 * width) / width) ** 2))
    >>> field = (field + rng.normal(0, 0.002, field.shape)).astype(np.float32)
    >>> folder = write_catalog(
    ...     tempfile.mkdtemp() + "/hollowmere-tiny",
    ...     {"event_id": [f"e{i:03d}" for i in range(160)],
    ...      "time_utc": [f"2031-07-14T21:{i // 60:02d}:{i % 60:02d}Z" for i in range(160)]},
    ...     field, field_meta={"sample_rate_hz": 20e6, "pretrigger_s": 50e-6,
    ...                        "units": "V/m", "sign_convention": "physics",
    ...                        "decay_time_s": None}, catalog_id="hollowmere-tiny")
    >>> cat = open_catalog(folder)
    >>> F = extract_features(cat)
    >>> truth = np.where(wide, "energetic_in_cloud", "stepped_leader")
    >>> model = PulseClassifier(max_iter=10, n_splits=2, n_reference=20).fit(
    ...     F[["fwhm_s", "width_s", "bipolarity"]], truth)
    >>> res = predict_catalog(cat, model, features=F)
    >>> res.columns[:6].tolist()
    ['event_id', 'label', 'confidence', 'needs_review', 'novel', 'prediction_set']
    >>> float((res["label"] == truth).mean())
    1.0
    """
    from features import open_catalog
    from features.catalog import Catalog
    from features.extract import DEFAULT_CHUNK_SIZE, extract_features

    if not 0 <= review_below <= 1:
        raise InputError(f"review_below must be in [0, 1], got {review_below}")
    cat = catalog if isinstance(catalog, Catalog) else open_catalog(catalog)
    est, version = _the_model(model, card, registry)
    ids = np.asarray(cat.event_ids).astype(str)
    if features is None:
        feats = extract_features(cat, chunk_size=chunk_size or DEFAULT_CHUNK_SIZE,
                                 n_jobs=n_jobs, dask_address=dask_address, progress=progress)
    else:
        feats = features
        if "event_id" not in feats.columns or len(feats) != len(ids) or not np.array_equal(
                feats["event_id"].astype(str).to_numpy(), ids):
            raise InputError(f"features: not the features of catalog {cat.catalog_id} at "
                             f"{cat.path} (one row per event with its event_id, in catalog "
                             "order, expected)")
    feats = feats.reset_index(drop=True)
    pred = predict_features(est, feats)
    d = season_decisions(est, pred, flag(feats, "field_ok"), version=version, features=feats,
                         adapt_priors=adapt_priors, adapt_sets=adapt_sets, coverage=coverage,
                         placeable=classifiable(feats))
    from types import SimpleNamespace

    from .seasonfit import fit_to_season

    def numeric():
        num = feats.drop(columns="event_id").select_dtypes(include=["number", "bool"])
        return pd.DataFrame({c: num[c].to_numpy(dtype=np.float64) for c in num.columns})

    d = fit_to_season(d, numeric, cat, SimpleNamespace(review_below=float(review_below),
                                                       self_training=True, coverage=coverage),
                      mode=season_fit, store=store, n_jobs=n_jobs)
    d["censored_v"] = flag(feats, "vhf_censored")
    d["censored_f"] = flag(feats, "field_censored")
    out, reasons = decision_table(d, float(review_below), ids, cat.catalog_id)
    table = pd.concat([out, feats.drop(columns="event_id")], axis=1)
    table.attrs.update(reasons=reasons, adaptation=d["adaptation"], model_version=version,
                       priors=d["priors"])
    return table
