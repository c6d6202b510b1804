"""Cold start: a season's first triage without labels (rules, then self-training).

A group's first season has no labels. :func:`cold_start` classifies it in two steps:

1. **rules** (:mod:`classify.rules`, station-independent physical criteria) score every
   pulse; pulses that fit none of the classes are ``other`` and go to review;
2. **self-training**: the rules' *confident core* (best score >= :data:`CORE_SCORE` and a
   pseudo-probability margin >= :data:`CORE_MARGIN` over the runner-up) labels a
   training set; a :class:`~classify.models.PulseClassifier` is fitted on it with every
   feature (cross-validated grouped by flash, like every model here), predicts the whole
   season, and the pulses it is confident about (>= :data:`CONFIDENT`) become the next
   round's training set, until fewer than :data:`STOP_CHANGED` of the labels change or
   :data:`MAX_ROUNDS` rounds have run. Its calibration and conformal thresholds come from
   its out-of-fold predictions of the pseudo-labels: calibrated on the agreement between
   the rules and the model (not on truth, which a first season does not have).

Analysts' first labels of the season (``store``) are **anchors**: they join every
round's training set with their own label (weight :data:`ANCHOR_WEIGHT`) and override
the rules; a class the rules do not know (a group's own class) is learnt from them, and a
pulse the rules call ``other`` that the model puts in such a class takes it.

With a trained model, ``triage --season-fit`` passes the pulses the model places
confidently as more anchors (``seeds``): the same self-training then adapts to a season
of another station, anchored by the model instead of the rules alone.

The results have the columns of a trained model's; ``model_version`` says
``self-trained from rules-4`` (or ``rules-4`` for the rules alone).

References
----------
Yarowsky, D. (1995), Unsupervised word sense disambiguation rivaling supervised methods,
*ACL* (self-training from a confident seed set); from memory.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from features import schema

from . import rules

__all__ = ["COLDSTART_VERSION", "cold_start", "CORE_SCORE", "CORE_MARGIN", "CONFIDENT",
           "MAX_ROUNDS"]

logger = logging.getLogger("pulsesort")

COLDSTART_VERSION = f"{rules.RULES_VERSION}/self-training-1"
#: The rules' confident core: best score and pseudo-probability margin.
CORE_SCORE = 0.6
CORE_MARGIN = 0.3
#: A pulse the self-trained model gives at least this probability joins the next round.
CONFIDENT = 0.95
#: Rounds of self-training at most, and the share of changed labels that stops them.
MAX_ROUNDS = 3
STOP_CHANGED = 0.005
#: Pulses fitted at most per round (a stratified sample of the training set).
MAX_FIT = 20_000
#: Weight of an analyst's label against a pseudo-label.
ANCHOR_WEIGHT = 5.0
#: Rules alone: classes with a pseudo-probability at least this are in the set.
RULES_SET_LEVEL = 0.2


def _flash_groups(cat) -> np.ndarray:
    """A group per flash (the catalog's flash ids, else grouped flashes) for the CV."""
    flash = cat.events["flash_id"].astype(str).to_numpy()
    if (flash != "").any():
        codes = pd.factorize(np.where(flash != "", flash, None), use_na_sentinel=True)[0]
    else:
        from features.flashes import group_flashes, pulse_positions_m

        codes = group_flashes(cat.time_ns, pulse_positions_m(cat))
    codes = np.asarray(codes, dtype=np.int64)
    alone = codes < 0
    codes[alone] = codes.max(initial=-1) + 1 + np.arange(alone.sum())
    return codes


def _anchors(store, cat, n) -> tuple[np.ndarray, np.ndarray]:
    """Rows and labels of the analysts' current labels of this catalog in ``store``."""
    rows = np.zeros(0, dtype=np.int64)
    labels = np.zeros(0, dtype=object)
    if store is None:
        return rows, labels
    cur = store.current_labels([cat.catalog_id], status="labelled")
    if cur.empty:
        return rows, labels
    index = pd.Series(np.arange(n), index=pd.Index(cat.event_ids.astype(str)))
    ids = cur["event_id"].astype(str)
    known = ids.isin(index.index)
    return (index[ids[known]].to_numpy(dtype=np.int64),
            cur.loc[known.to_numpy(), "label"].astype(str).to_numpy(dtype=object))


def _sample(rows, labels, groups, rng, limit):
    """At most ``limit`` rows, stratified by label (whole flashes are not needed here:
    the folds of the fit are grouped by flash anyway)."""
    if rows.size <= limit:
        return rows
    keep = []
    classes = np.unique(labels)
    quota = max(limit // max(classes.size, 1), 1)
    for c in classes:
        r = rows[labels == c]
        keep.append(r if r.size <= quota else rng.choice(r, quota, replace=False))
    return np.sort(np.concatenate(keep))


def cold_start(spill, columns, cat, settings, *, store=None, n_jobs=1, seeds=None) -> dict:
    """Decisions of every pulse of a spilled season without a trained model.

    Parameters
    ----------
    spill : features.spill.FeatureSpill or pandas.DataFrame
        The season's numeric features: a spill, or a frame of its columns.
    columns : sequence of str or None
        The spill's numeric columns (unused for a frame).
    cat : Catalog
    settings : classify.triage.TriageSettings
        ``self_training`` and ``coverage`` are used.
    store : LabelStore, optional
        Anchors: analysts' labels of this catalog.
    seeds : tuple (rows, labels), optional
        More anchors: pulses (row numbers) a trained model placed confidently and its
        classes (``triage --season-fit``); an analyst's label of the same pulse wins.

    Returns
    -------
    dict
        What :mod:`classify.triage` decides from (classes, proba, sets, novelty,
        usable, other, version, adaptation...).
    """
    from .conformal import season_thresholds

    frame = spill if isinstance(spill, pd.DataFrame) else pd.DataFrame(
        np.array(spill.numeric()), columns=list(columns))
    n = len(frame)
    usable = frame["field_ok"].to_numpy() > 0
    coverage = 0.95 if settings.coverage is None else float(settings.coverage)
    ref = rules.season_reference(frame[usable])
    scores = rules.rule_scores(frame, ref)
    rp = rules.rule_proba(frame, ref, scores)
    other = rules.other_pulses(frame, scores, ref) & usable
    classes = np.array(rules.CLASSES)
    if not settings.self_training:
        return {"classes": classes, "proba": rp, "relaxed": rp, "sets": rp >= RULES_SET_LEVEL,
                "novelty": np.full(n, np.nan), "novelty_threshold": None, "usable": usable,
                "placeable": usable,
                "coverage": coverage, "version": rules.RULES_VERSION,
                "adaptation": "rules alone (no self-training)", "other": other}

    from .models import PulseClassifier

    names = schema.model_feature_names()
    X = frame[names].astype(np.float64)
    schema.mask_unusable_field(X, usable)
    groups = _flash_groups(cat)
    a_rows, a_labels = _anchors(store, cat, n)
    anchors_text = f"{a_rows.size:,} analysts' labels as anchors"
    if seeds is not None:
        s_rows, s_labels = np.asarray(seeds[0], dtype=np.int64), np.asarray(seeds[1], object)
        keep = ~np.isin(s_rows, a_rows)
        anchors_text = (f"{int(keep.sum()):,} of the trained model's confident pulses and "
                        + anchors_text)
        a_rows = np.concatenate([s_rows[keep], a_rows])
        a_labels = np.concatenate([s_labels[keep], a_labels])
    best = scores.to_numpy().max(axis=1)
    srt = np.sort(rp, axis=1)
    margin = srt[:, -1] - srt[:, -2]
    core = usable & ~other & (best >= CORE_SCORE) & (margin >= CORE_MARGIN)
    label = np.where(core, classes[np.argmax(rp, axis=1)], "").astype(object)
    label[a_rows] = a_labels
    anchored = np.zeros(n, dtype=bool)
    anchored[a_rows] = True
    train = core | anchored
    rng = np.random.default_rng(0)
    missing = [[names.index(c) for c in cols]
               for cols in schema.missing_groups(names).values()]
    model, rounds, changed = None, 0, 1.0
    for rounds in range(1, MAX_ROUNDS + 1):
        rows = np.flatnonzero(train)
        fit_rows = np.union1d(_sample(rows[~anchored[rows]], label[rows[~anchored[rows]]],
                                      groups, rng, MAX_FIT), np.flatnonzero(anchored))
        y = label[fit_rows].astype(str)
        if np.unique(y).size < 2:
            logger.warning("cold start: the rules' confident core holds fewer than two "
                           "classes; the rules alone decide")
            model = None
            break
        w = np.where(anchored[fit_rows], ANCHOR_WEIGHT, 1.0)
        model = PulseClassifier(coverage=coverage, missing_groups=missing, max_iter=60,
                                random_state=rounds).fit(
            X.iloc[fit_rows], y, groups=groups[fit_rows], sample_weight=w)
        proba = model.predict_proba(X)
        top = model.classes_.astype(str)[np.argmax(proba, axis=1)]
        conf = proba.max(axis=1)
        new_train = (usable & ~other & (conf >= CONFIDENT)) | anchored
        new_label = np.where(new_train, top, "").astype(object)
        new_label[a_rows] = a_labels
        before = label[train | new_train]
        after = new_label[train | new_train]
        changed = float(np.mean(before != after)) if before.size else 0.0
        train, label = new_train, new_label
        if changed < STOP_CHANGED:
            break
    if model is None:
        return {"classes": classes, "proba": rp, "relaxed": rp, "sets": rp >= RULES_SET_LEVEL,
                "novelty": np.full(n, np.nan), "novelty_threshold": None, "usable": usable,
                "placeable": usable,
                "coverage": coverage, "version": rules.RULES_VERSION,
                "adaptation": "rules alone (the rules' confident core was too small)",
                "other": other}
    classes = model.classes_.astype(str)
    proba = model.predict_proba(X)
    # the pulses the last fit trained on are scored out of fold (honest probabilities)
    proba[fit_rows] = model.oof_proba_
    # a pulse the rules call "other" that the model gives a class only the analysts'
    # labels taught it (a group's own class) takes that class
    learnt = ~np.isin(classes, rules.CLASSES)
    if learnt.any():
        own = learnt[np.argmax(proba, axis=1)]
        other = other & ~own
    relaxed = proba
    q = season_thresholds(proba[usable & ~other], coverage, model.conformal_thresholds_)
    sets = (1.0 - proba) <= q[None, :] + 1e-12
    note = (f"self-trained from {rules.RULES_VERSION}: {rounds} round(s), "
            f"{int(train.sum()):,} pulses in the last training set"
            + (f" ({anchors_text})" if a_rows.size else "")
            + f", {changed:.1%} of its labels changed in the last round; sets adapted to the "
            f"season at {coverage:.2f}")
    from .decide import classifiable

    return {"classes": classes, "proba": proba, "relaxed": relaxed, "sets": sets,
            "novelty": model.novelty_score(X), "novelty_threshold": float(
                model.novelty_threshold_), "usable": usable,
            "placeable": classifiable(frame), "coverage": coverage,
            "version": f"self-trained from {rules.RULES_VERSION}", "adaptation": note,
            "other": other}
