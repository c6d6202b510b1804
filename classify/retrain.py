"""A new season: train a challenger, score it against the champion, promote or keep.

Honest scoring on the new season's labelled pulses:

* the **champion** (the current model, never trained on the new season) predicts
  every labelled pulse of the new season;
* the **challenger** is trained on the old seasons' labels plus the new season's
  (new-season rows weighted ``new_weight`` times, default 2); its scores are its
  out-of-fold predictions: cross-validation is grouped by flash, so the fold model
  that scores a new-season flash never saw that flash.

Each metric (macro-F1, per-class recall, expected calibration error, conformal
coverage, review load at the review threshold) comes with a percentile bootstrap
interval over flashes (:func:`classify.stats.bootstrap_ci`); champion and
challenger are resampled together, so the interval of their difference is paired.

Promotion rule: the challenger replaces the champion when its macro-F1 is not
lower than the champion's by more than ``tolerance`` (default 0.005) and its ECE
not higher by more than ``ece_tolerance`` (default 0.02); ``force`` promotes
anyway. Without labels of the new season nothing can be scored and the champion
is kept. The comparison is written into both model cards.
"""

from __future__ import annotations

import datetime as _dt
import json
import logging

import numpy as np

from features import open_catalog

from .predict import predict_features
from .registry import ModelRegistry, load_model, resolve_model, save_model, write_card_files
from .stats import bootstrap_ci
from .training import (
    build_card,
    check_model_out,
    fit_classifier,
    model_card_markdown,
    training_table,
)

__all__ = ["NEW_WEIGHT", "retrain", "compare_on_season", "metric_vector"]

logger = logging.getLogger("pulsesort")

#: Default weight of a new-season label relative to an old one.
NEW_WEIGHT = 2.0
N_BINS = 15


def metric_vector(y, proba, sets, novel, review_below):
    """Macro-F1, ECE, coverage, review load and per-class recall in one vector.

    Parameters
    ----------
    y : ndarray of int, shape (n,)
        True class index (column of ``proba``), -1 for a class the model lacks.
    proba : ndarray, shape (n, k)
    sets : ndarray of bool, shape (n, k)
    novel : ndarray of bool, shape (n,)
    review_below : float

    Returns
    -------
    ndarray, shape (4 + k,)
        ``[macro_f1, ece, coverage, review_load, recall_0, ..., recall_{k-1}]``;
        macro-F1 averages the classes present in ``y`` (same as
        ``sklearn.metrics.f1_score(average="macro", labels=present)``), ECE is the
        top-label ECE with 15 equal bins (Guo et al. 2017).
    """
    n, k = proba.shape
    pred = np.argmax(proba, axis=1)
    present = np.unique(y[y >= 0])
    tp = np.bincount(pred[pred == y], minlength=k)[:k]
    n_true = np.bincount(y[y >= 0], minlength=k)[:k]
    n_pred = np.bincount(pred, minlength=k)[:k]
    with np.errstate(invalid="ignore", divide="ignore"):
        f1 = np.where(n_true + n_pred > 0, 2 * tp / (n_true + n_pred), 0.0)
        recall = np.where(n_true > 0, tp / n_true, np.nan)
    # classes the model lacks count as true classes it never predicts
    n_missing = len(np.unique(y[y < 0]))
    macro = (f1[present].sum()) / max(len(present) + n_missing, 1)
    conf = proba[np.arange(n), pred]
    bins = np.minimum((conf * N_BINS).astype(int), N_BINS - 1)
    acc = np.bincount(bins, (pred == y).astype(float), minlength=N_BINS)
    mc = np.bincount(bins, conf, minlength=N_BINS)
    ece = np.abs(acc - mc).sum() / max(n, 1)
    in_set = np.where(y >= 0, sets[np.arange(n), np.clip(y, 0, k - 1)], False)
    load = (conf < review_below) | (sets.sum(axis=1) != 1) | novel
    return np.concatenate([[macro, ece, in_set.mean(), load.mean()], recall])


def _scores(model, rows, proba=None):
    """``(proba, sets, novel)`` of a model on the rows of a features table
    (:func:`classify.predict.predict_features`); ``proba`` replaces the model's
    probabilities (e.g. out-of-fold ones) when given."""
    pred = predict_features(model, rows, relax=False)
    proba = pred["proba"] if proba is None else proba
    sets = model.predict_set(rows, proba=proba)
    novel = ~(pred["novelty"] <= pred["novelty_threshold"])
    return proba, sets, novel


def compare_on_season(y_true, groups, champion, challenger, *, review_below=0.8,
                      n_boot=1000, random_state=0):
    """Champion vs challenger metrics with bootstrap intervals over flashes.

    Parameters
    ----------
    y_true : ndarray of str, shape (n,)
    groups : ndarray, shape (n,)
        Flash of every pulse (bootstrap unit).
    champion, challenger : tuple
        ``(classes, proba, sets, novel)`` of each model on the same pulses.

    Returns
    -------
    dict
        ``{"champion": {...}, "challenger": {...}, "difference": {...}}`` with
        ``estimate``, ``low``, ``high`` per metric.
    """
    classes = sorted(set(champion[0]) | set(challenger[0]))
    y_true = np.asarray(y_true).astype(str)
    parts = []
    for cls in (champion[0], challenger[0]):
        idx = {c: i for i, c in enumerate(cls)}
        parts.append(np.array([idx.get(c, -1) for c in y_true]))
    a_y, b_y = parts
    a, b = champion, challenger

    def stat(ay, ap, aset, anov, by, bp, bset, bnov):
        va = metric_vector(ay, ap, aset, anov, review_below)
        vb = metric_vector(by, bp, bset, bnov, review_below)
        return np.concatenate([va[:4], vb[:4], vb[:4] - va[:4]])

    ci = bootstrap_ci(stat, groups, a_y, a[1], a[2], a[3], b_y, b[1], b[2], b[3],
                      n_boot=n_boot, random_state=random_state)
    names = ["macro_f1", "ece", "conformal_coverage", "review_load"]

    def block(offset):
        return {nm: {"estimate": float(ci.estimate[offset + i]), "low": float(ci.low[offset + i]),
                     "high": float(ci.high[offset + i])} for i, nm in enumerate(names)}

    out = {"champion": block(0), "challenger": block(4), "difference": block(8),
           "n_pulses": int(len(y_true)), "n_flashes": int(len(np.unique(groups))),
           "n_boot": int(n_boot), "classes": classes}
    for role, (cls, proba, sets, novel), yy in (("champion", a, a_y), ("challenger", b, b_y)):
        rec = metric_vector(yy, proba, sets, novel, review_below)[4:]
        out[role]["recall"] = {c: (None if np.isnan(r) else float(r)) for c, r in zip(cls, rec)}
    return out


def _comparison_markdown(cmp: dict, decision: str) -> str:
    rows = ["| metric | champion | challenger | challenger - champion |", "|---|---|---|---|"]
    for m in ("macro_f1", "ece", "conformal_coverage", "review_load"):
        cells = []
        for role in ("champion", "challenger", "difference"):
            v = cmp[role][m]
            cells.append(f"{v['estimate']:.4f} [{v['low']:.4f}, {v['high']:.4f}]")
        rows.append(f"| {m} | " + " | ".join(cells) + " |")
    rec = ["", "Recall per class (champion / challenger):", ""]
    for c in cmp["classes"]:
        a = cmp["champion"]["recall"].get(c)
        b = cmp["challenger"]["recall"].get(c)
        rec.append(f"- {c}: {'-' if a is None else f'{a:.3f}'} / "
                   f"{'-' if b is None else f'{b:.3f}'}")
    head = (f"Scored on {cmp['n_pulses']} labelled pulses in {cmp['n_flashes']} flashes; "
            f"95 % bootstrap intervals over flashes ({cmp['n_boot']} resamples). "
            f"Decision: {decision}")
    return "\n".join([head, ""] + rows + rec)


def retrain(store, new_catalog, old_catalogs, current, out_dir, *, registry=None,
            new_weight=NEW_WEIGHT, tolerance=0.005, ece_tolerance=0.02, force=False,
            promote_elsewhere=False, review_below=0.8, n_boot=1000, n_jobs=1,
            dask_address=None, chunk_size=512, progress=None, random_state=0,
            station_variants=2, **params) -> dict:
    """Train a challenger on old + new labels, compare with ``current`` on the new season.

    The challenger learns every labelled pulse also as ``station_variants`` other
    stations would record it (:func:`classify.training.training_table`); the comparison
    scores the new season's pulses as recorded.

    Parameters
    ----------
    current : str or path
        The champion, resolved by :func:`classify.registry.resolve_model` in
        ``registry`` (default: the parent of ``out_dir``).
    out_dir : path
        The challenger's folder; it is registered in its parent folder's registry.
    promote_elsewhere : bool, default=False
        When ``out_dir`` lies in another registry than the champion's, a winning
        challenger becomes that registry's current model only with this set;
        otherwise the other registry's current model is never changed.

    Returns
    -------
    dict
        ``decision`` ("promoted", "kept", "forced"), ``reason``, ``comparison``
        (see :func:`compare_on_season`, None without new labels), ``challenger_dir``,
        ``made_current`` (whether the challenger became its registry's current model).
    """
    out_dir = check_model_out(out_dir)
    new_cat = open_catalog(new_catalog)
    olds = [open_catalog(p) for p in old_catalogs]
    champ_dir = resolve_model(current, registry or out_dir.parent)
    champion, champ_card = load_model(champ_dir)
    out_registry = ModelRegistry(out_dir.parent)
    same_registry = champ_dir.resolve().parent == out_dir.parent.resolve()
    store.register_catalog(new_cat)
    n_new = len(store.current_labels([new_cat.catalog_id], status="labelled"))
    if n_new == 0:
        reason = (f"no labelled pulses of the new season {new_cat.catalog_id} in the store: "
                  "nothing to score a challenger on; the champion "
                  f"{champ_card['version']} is kept")
        return {"decision": "kept", "reason": reason, "comparison": None,
                "challenger_dir": None, "champion": champ_card["version"],
                "made_current": False}
    if any(c["catalog_id"] == new_cat.catalog_id for c in champ_card["training_catalogs"]):
        logger.warning("the champion was trained on %s: its scores on it are optimistic",
                       new_cat.catalog_id)
    catalogs = olds + [new_cat]
    table = training_table(catalogs, store, n_jobs=n_jobs, dask_address=dask_address,
                           chunk_size=chunk_size, progress=progress,
                           station_variants=station_variants, seed=random_state)
    from_new = (table["catalog_id"] == new_cat.catalog_id).to_numpy()
    weights = np.where(from_new, float(new_weight), 1.0)
    challenger = fit_classifier(table, sample_weight=weights, random_state=random_state,
                                progress=progress, **params)
    is_new = from_new & (table["variant"] == 0).to_numpy()   # scored as recorded
    new_rows = table[is_new]
    ch = (champion.classes_.astype(str), *_scores(champion, new_rows))
    oof = challenger.oof_proba_[is_new]
    cl = (challenger.classes_.astype(str), *_scores(challenger, new_rows, proba=oof))
    cmp = compare_on_season(new_rows["label"].to_numpy(), new_rows["group"].to_numpy(), ch,
                            cl, review_below=review_below, n_boot=n_boot,
                            random_state=random_state)
    d_f1 = cmp["difference"]["macro_f1"]["estimate"]
    d_ece = cmp["difference"]["ece"]["estimate"]
    better = d_f1 >= -tolerance and d_ece <= ece_tolerance
    if better:
        decision = "promoted"
        reason = (f"challenger macro-F1 {cmp['challenger']['macro_f1']['estimate']:.4f} vs "
                  f"champion {cmp['champion']['macro_f1']['estimate']:.4f} (difference "
                  f"{d_f1:+.4f}, tolerance -{tolerance}); ECE difference {d_ece:+.4f} "
                  f"(tolerance +{ece_tolerance})")
    else:
        decision = "forced" if force else "kept"
        reason = (f"challenger is worse beyond tolerance: macro-F1 difference {d_f1:+.4f} "
                  f"(tolerance -{tolerance}), ECE difference {d_ece:+.4f} (tolerance "
                  f"+{ece_tolerance})" + ("; promoted anyway (--force)" if force else
                                          f"; the champion {champ_card['version']} is kept"))
    wins = decision in ("promoted", "forced")
    make_current = wins and (same_registry or promote_elsewhere)
    if wins and not make_current:
        reason += (f"; not made current in {out_registry.root}: it is not the champion's "
                   "registry (pass --promote to make it current there)")
    when = _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")
    section = {"season": new_cat.season, "catalog_id": new_cat.catalog_id, "when": when,
               "champion": champ_card["version"], "challenger": out_dir.name,
               "decision": decision, "reason": reason, "new_weight": float(new_weight),
               "metrics": cmp, "markdown": _comparison_markdown(cmp, reason)}
    card = build_card(challenger, table, catalogs, out_dir.name,
                      extra={"comparisons": [section], "new_season_weight": float(new_weight),
                             "parent": champ_card["version"]})
    save_model(challenger, out_dir, card, model_card_markdown(card))
    out_registry.register(out_dir, make_current=make_current)
    champ_card.setdefault("comparisons", []).append(section)
    write_card_files(champ_dir, json.loads(json.dumps(champ_card, default=str)),
                     model_card_markdown(champ_card))
    return {"decision": decision, "reason": reason, "comparison": cmp,
            "challenger_dir": out_dir, "champion": champ_card["version"],
            "made_current": make_current}
