"""Train a pulse classifier on the current labels of catalogs and write its model card.

The training table is the join, on ``(catalog_id, event_id)``, of every
catalog's features with the label store's current labels (status "labelled";
events in conflict or unlabelled are left out), in the store's current classes:
labels map through the store's renames and merges, and pulses of hidden classes
are left out (with a warning saying how many). The model's classes are thus
the store's visible classes that have labels. Cross-validation groups are
flashes (``catalog_id`` + ``flash_id``; a pulse without flash is its own group).
"""

from __future__ import annotations

import datetime as _dt
import logging
import os
import platform
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn import metrics

from features import InputError, open_catalog, schema
from features.extract import extract_features

from .models import ID_SEPARATOR, PulseClassifier
from .registry import VERSION_PATTERN, ModelRegistry, save_model
from .stats import empirical_coverage, expected_calibration_error, flash_groups

__all__ = ["catalog_features", "training_table", "fit_classifier", "FitProgress", "cv_metrics",
           "feature_importance", "build_card", "check_model_out", "train_from_store",
           "model_card_markdown"]

logger = logging.getLogger("pulsesort")


def catalog_features(cat, **kwargs) -> pd.DataFrame:
    """Features of one catalog with a ``catalog_id`` column in front."""
    df = extract_features(cat, **kwargs)
    df.insert(0, "catalog_id", cat.catalog_id)
    return df.reset_index(drop=True)


#: Chunk size of the station-variant passes (each chunk is one other station).
VARIANT_CHUNK_SIZE = 64
#: Station variants catalogue as a one-record-per-trigger station with this chance, with
#: a dead time drawn log-uniformly in this range (s), and ignore the flash ids (which are
#: then grouped) with the other chance (common practice, no source).
VARIANT_ONE_PER_TRIGGER = 0.5
VARIANT_DEAD_TIME_S = (2e-4, 2e-3)
VARIANT_NO_FLASH_IDS = 0.3
#: A variant catalogues, with chance VARIANT_THINNED, only a share of the pulses drawn
#: uniformly in VARIANT_KEEP_FRACTION (a higher trigger level, a cap per flash); each of
#: its flashes, with chance VARIANT_TIME_SCALED, has another storm's time scale: its
#: pulses' times since the flash began stretched by a factor drawn log-uniformly in
#: VARIANT_TIME_SCALE (flash stages last from a few to a few hundred ms; our choice, no
#: source), so the time in the flash separates leaders from recoils less sharply: a
#: leader 65 ms into an in-cloud flash is still a leader.
VARIANT_THINNED = 0.5
VARIANT_KEEP_FRACTION = (0.25, 1.0)
VARIANT_TIME_SCALED = 0.7
VARIANT_TIME_SCALE = (0.2, 10.0)
#: A variant's mapper, with chance VARIANT_UNMAPPED, locates none of a share of the
#: pulses drawn uniformly in VARIANT_UNMAPPED_SHARE, whatever their class (a mapping
#: array's detection efficiency depends on the array, the range and the storm), and with
#: chance VARIANT_UNMAPPED_NO_RANGE their range is unknown too (ranges from the mapper
#: itself): a model must tell a narrow bipolar event from a recoil without the sources
#: it usually has (our choice, no source).
VARIANT_UNMAPPED = 0.5
VARIANT_UNMAPPED_SHARE = (0.05, 0.6)
VARIANT_UNMAPPED_NO_RANGE = 0.5


def _log_uniform(rng, bounds):
    lo, hi = bounds
    return float(np.exp(rng.uniform(np.log(lo), np.log(hi))))


def _mapping(cat, rng):
    """The catalog as a variant's mapper would have located it (:data:`VARIANT_UNMAPPED`)."""
    from features.augment import unmapped_view

    if cat.sources is None or rng.random() >= VARIANT_UNMAPPED:
        return cat
    drop = rng.random(cat.n_events) < rng.uniform(*VARIANT_UNMAPPED_SHARE)
    return unmapped_view(cat, drop, drop_range=bool(rng.random() < VARIANT_UNMAPPED_NO_RANGE))


def _practice(cat, rng):
    """Which pulses a station variant catalogues, and their flash context."""
    from features.augment import practice_context

    dead = _log_uniform(rng, VARIANT_DEAD_TIME_S) if rng.random() < VARIANT_ONE_PER_TRIGGER \
        else None
    drop_ids = bool(rng.random() < VARIANT_NO_FLASH_IDS)
    keep = float(rng.uniform(*VARIANT_KEEP_FRACTION)) if rng.random() < VARIANT_THINNED else 1.0
    # each flash its own storm's time scale (one draw per flash id)
    codes = np.unique(cat.events["flash_id"].astype(str).to_numpy(), return_inverse=True)[1]
    n_flashes = int(codes.max()) + 1 if len(codes) else 0
    lo, hi = np.log(VARIANT_TIME_SCALE)
    per_flash = np.where(rng.random(n_flashes) < VARIANT_TIME_SCALED,
                         np.exp(rng.uniform(lo, hi, n_flashes)), 1.0)
    scale = per_flash[codes]
    return practice_context(cat, dead_time_s=dead, drop_flash_ids=drop_ids, keep_fraction=keep,
                            time_scale=scale, rng=rng)


def training_table(catalogs, store, *, station_variants=0, seed=0,
                   **feature_kwargs) -> pd.DataFrame:
    """Features of labelled pulses of ``catalogs`` joined with their current labels.

    Parameters
    ----------
    catalogs : list of Catalog
    store : classify.labels.LabelStore
    station_variants : int, default=0
        Also compute the labelled pulses' features as this many other stations would
        record them (:mod:`features.augment`; each chunk of 64 pulses another station)
        and catalogue them (half the variants one record per trigger with a dead time,
        some without flash ids, half keeping only a share of the pulses, most flashes on
        another time scale: :func:`features.augment.practice_context`) and map them (half
        the variants locate none of a share of the pulses:
        :func:`features.augment.unmapped_view`), so the model
        learns what a pulse is, not what this station's records and catalogs look like.
    seed : int, default=0
        Seed of the stations drawn.
    **feature_kwargs
        Passed to :func:`features.extract.extract_features` (``n_jobs``, ...).

    Returns
    -------
    pandas.DataFrame
        ``catalog_id, event_id, label, season, station, group, variant`` (0: as recorded;
        1..: a station variant) then the features. ``label`` is the current class in
        the store (renames and merges applied); hidden classes are left out.
    """
    parts = []
    visible = set(store.classes())
    for ci, cat in enumerate(catalogs):
        store.register_catalog(cat)
        labels = store.current_labels([cat.catalog_id], status="labelled")
        hidden = ~labels["label"].isin(visible)
        if hidden.any():
            counts = labels.loc[hidden, "label"].value_counts()
            logger.warning("%s: %d labelled pulse(s) of hidden class(es) left out of training "
                           "(%s); 'pulsesort labels classes show NAME' brings a class back",
                           cat.catalog_id, int(hidden.sum()),
                           ", ".join(f"{c}: {n}" for c, n in sorted(counts.items())))
            labels = labels[~hidden]
        if labels.empty:
            logger.warning("%s: no labelled pulses of visible classes in the store",
                           cat.catalog_id)
            continue
        passes = [catalog_features(cat, **feature_kwargs)]
        kw = dict(feature_kwargs, chunk_size=VARIANT_CHUNK_SIZE)
        for k in range(station_variants):
            vseed = seed * 1000 + ci * 100 + k + 1
            rng = np.random.default_rng(vseed)
            vcat = _mapping(cat, rng)
            keep, context = _practice(vcat, rng)
            feats = catalog_features(vcat, variant_seed=vseed, context=context, **kw)
            passes.append(feats[keep].reset_index(drop=True))
        for k, feats in enumerate(passes):
            t = feats.merge(labels[["event_id", "label"]], on="event_id", how="inner")
            t.insert(2, "season", cat.season or "")
            t.insert(3, "station", cat.station or "")
            t.insert(4, "variant", k)
            parts.append(t)
    if not parts:
        names = ", ".join(c.catalog_id for c in catalogs)
        raise InputError(f"no labelled pulses of visible classes for catalog(s) {names} in "
                         "the store; import labels first (pulsesort labels import ...)")
    table = pd.concat(parts, ignore_index=True)
    table["group"] = table["catalog_id"] + "/" + flash_groups(table["flash_id"],
                                                             table["event_id"])
    label = table.pop("label")
    table.insert(2, "label", label.astype(str))
    return table


class FitProgress:
    """A progress bar for :meth:`PulseClassifier.fit`: its ``progress`` callback.

    One step per fold model, then the calibration, drawn with tqdm on stderr.

    Parameters
    ----------
    enabled : bool or None
        True: always; False: never; None: when stderr is a terminal.
    """

    def __init__(self, enabled: bool | None):
        self.enabled = sys.stderr.isatty() if enabled is None else bool(enabled)
        self.bar = None

    def __call__(self, done: int, total: int, step: str) -> None:
        if not self.enabled:
            return
        if self.bar is None:
            from tqdm.auto import tqdm

            self.bar = tqdm(total=total, desc="fit", unit="step", file=sys.stderr)
        self.bar.set_postfix_str(step, refresh=False)
        self.bar.update(done - self.bar.n)
        if done >= total:
            self.bar.close()


def fit_classifier(table, *, coverage=0.95, sample_weight=None, random_state=0,
                   progress=None, **params) -> PulseClassifier:
    """Fit a :class:`PulseClassifier` on a training table's model features.

    ``progress`` (bool or None) shows a bar of the fit on stderr (:class:`FitProgress`;
    None: on a terminal).
    """
    names = schema.model_feature_names()
    X = table[names].astype(float)
    groups_idx = [[names.index(c) for c in cols]
                  for cols in schema.missing_groups(names).values()]
    model = PulseClassifier(coverage=coverage, missing_groups=groups_idx,
                            random_state=random_state, **params)
    ids = (table["catalog_id"].astype(str) + ID_SEPARATOR
           + table["event_id"].astype(str)).to_numpy()
    recorded = (table["variant"] == 0).to_numpy() if "variant" in table else None
    return model.fit(X, table["label"].to_numpy(), groups=table["group"].to_numpy(),
                     sample_weight=sample_weight, sample_ids=ids, reference_rows=recorded,
                     progress=FitProgress(progress))


def cv_metrics(model: PulseClassifier, y, rows=None) -> dict:
    """Grouped cross-validation metrics from the model's out-of-fold probabilities.

    ``rows`` (bool mask) restricts them to some training rows, e.g. the pulses as
    recorded (not their station variants).
    """
    rows = np.ones(len(y), dtype=bool) if rows is None else np.asarray(rows, dtype=bool)
    y = np.asarray(y).astype(str)[rows]
    classes = model.classes_.astype(str)
    proba = model.oof_proba_[rows]
    pattern = model.oof_pattern_[rows]
    pred = classes[np.argmax(proba, axis=1)]
    p, r, f, s = metrics.precision_recall_fscore_support(y, pred, labels=classes,
                                                         zero_division=0)
    sets = (1.0 - proba) <= model.pattern_thresholds_[pattern] + 1e-12
    per_cov = {c: float(np.mean(sets[y == c, k])) if (y == c).any() else None
               for k, c in enumerate(classes)}
    return {
        "macro_f1": float(metrics.f1_score(y, pred, labels=classes, average="macro",
                                           zero_division=0)),
        "accuracy": float(np.mean(pred == y)),
        "per_class": {c: {"precision": float(p[k]), "recall": float(r[k]), "f1": float(f[k]),
                          "support": int(s[k]), "conformal_coverage": per_cov[c]}
                      for k, c in enumerate(classes)},
        "confusion_matrix": {"labels": classes.tolist(),
                             "matrix": metrics.confusion_matrix(y, pred, labels=classes
                                                                ).tolist()},
        "ece": expected_calibration_error(proba, y, classes=classes),
        "conformal_coverage": empirical_coverage(sets, y, classes=classes),
        "conformal_target": float(model.coverage),
        "mean_set_size": float(sets.sum(axis=1).mean()),
        "temperature": float(model.temperature_),
        "novelty_threshold": float(model.novelty_threshold_),
        "n_folds": len(model.estimators_),
    }


def _versions() -> dict:
    import joblib
    import scipy
    import sklearn
    import skops

    from ._version import __version__

    return {"pulsesort": __version__, "python": platform.python_version(),
            "numpy": np.__version__, "scipy": scipy.__version__, "pandas": pd.__version__,
            "scikit-learn": sklearn.__version__, "joblib": joblib.__version__,
            "skops": skops.__version__}


#: Permutations per feature for the model card's importances.
IMPORTANCE_REPEATS = 3


def feature_importance(model, table, *, n_repeats=IMPORTANCE_REPEATS, random_state=0):
    """The model card's importances: permutation on held-out flashes (or None).

    See :func:`classify.explain.permutation_importance_by_flash`; the rows of
    ``table`` must be the model's training rows, in order.

    Returns
    -------
    dict or None
        ``method``, ``n_rows``, ``n_repeats``, ``base_log_loss``,
        ``base_macro_f1`` and ``features``: a list of {feature,
        log_loss_increase, log_loss_increase_std, macro_f1_drop,
        macro_f1_drop_std}, most important first. None without held-out folds.
    """
    from .explain import permutation_importance_by_flash

    names = list(map(str, model.feature_names_in_))
    imp = permutation_importance_by_flash(model, table[names].astype(float), table["label"],
                                          n_repeats=n_repeats, random_state=random_state)
    if imp is None:
        return None
    rows = [{"feature": f, **{k: float(v) for k, v in r.items()}} for f, r in imp.iterrows()]
    return {"method": "permutation within each held-out fold (folds grouped by flash); "
                      "increase of the log-loss and drop of the macro-F1 of the pooled "
                      "held-out predictions, mean and std over repeats",
            **imp.attrs, "features": rows}


def build_card(model, table, catalogs, version, *, extra=None) -> dict:
    """The model card as a dict (stored as card.json)."""
    recorded = table[table["variant"] == 0] if "variant" in table else table
    counts = (recorded.groupby(["season", "label"]).size().unstack(fill_value=0)
              .astype(int))
    card = {
        "version": version,
        "created_at": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "kind": "PulseClassifier",
        "classes": model.classes_.astype(str).tolist(),
        "class_priors": dict(zip(model.classes_.astype(str), map(float, model.class_priors_))),
        "conformal_thresholds": dict(zip(model.classes_.astype(str),
                                         map(float, model.conformal_thresholds_))),
        "coverage": float(model.coverage),
        "feature_schema_version": schema.SCHEMA_VERSION,
        "features": list(map(str, model.feature_names_in_)),
        "training_catalogs": [{"catalog_id": c.catalog_id, "station": c.station,
                               "season": c.season, "content_hash": c.content_hash,
                               "path": str(c.path), "n_events": c.n_events}
                              for c in catalogs],
        "n_training_pulses": int(len(recorded)),
        "n_station_variant_rows": int(len(table) - len(recorded)),
        "n_flashes": int(table["group"].nunique()),
        "labels_per_season": {str(s): {str(k): int(v) for k, v in row.items()}
                              for s, row in counts.iterrows()},
        "parameters": {k: v for k, v in model.get_params().items() if k != "missing_groups"},
        "metrics": cv_metrics(model, table["label"], table["variant"] == 0
                              if "variant" in table else None),
        "importance": feature_importance(model, table),
        "library_versions": _versions(),
    }
    if extra:
        card.update(extra)
    return card


def model_card_markdown(card: dict) -> str:
    """The model card for people."""
    m = card["metrics"]
    lines = [
        f"# Model card: {card['version']}",
        "",
        "pulsesort pulse classifier (research tool, not a lightning warning or safety "
        "system).",
        "",
        f"- created: {card['created_at']}",
        f"- classes: {', '.join(card['classes'])}",
        f"- feature schema: {card['feature_schema_version']} ({len(card['features'])} "
        "features)",
        f"- training pulses: {card['n_training_pulses']:,} in {card['n_flashes']:,} flashes",
        "",
        "## Training catalogs",
        "",
        "| catalog | station | season | pulses | content hash |",
        "|---|---|---|---|---|",
    ]
    for c in card["training_catalogs"]:
        lines.append(f"| {c['catalog_id']} | {c['station']} | {c['season']} | "
                     f"{c['n_events']:,} | `{c['content_hash'][:23]}...` |")
    lines += ["", "## Labels per class and season", "",
              "| season | " + " | ".join(card["classes"]) + " |",
              "|---" * (len(card["classes"]) + 1) + "|"]
    for season, row in card["labels_per_season"].items():
        lines.append(f"| {season} | " + " | ".join(str(row.get(c, 0)) for c in
                                                   card["classes"]) + " |")
    lines += ["", f"## Grouped cross-validation ({m['n_folds']} folds, grouped by flash)", "",
              f"- macro-F1: {m['macro_f1']:.4f}; accuracy {m['accuracy']:.4f}",
              f"- expected calibration error (15 bins, top label): {m['ece']:.4f} "
              f"(temperature {m['temperature']:.3f})",
              f"- conformal coverage: {m['conformal_coverage']:.4f} (target "
              f"{m['conformal_target']:.2f}); mean set size {m['mean_set_size']:.3f}",
              f"- novelty threshold: {m['novelty_threshold']:.3f}", "",
              "| class | precision | recall | F1 | support | set coverage |",
              "|---|---|---|---|---|---|"]
    for c, v in m["per_class"].items():
        cov = "-" if v["conformal_coverage"] is None else f"{v['conformal_coverage']:.3f}"
        lines.append(f"| {c} | {v['precision']:.4f} | {v['recall']:.4f} | {v['f1']:.4f} | "
                     f"{v['support']} | {cov} |")
    cm = m["confusion_matrix"]
    lines += ["", "Confusion matrix (rows: true, columns: predicted):", "",
              "| | " + " | ".join(cm["labels"]) + " |", "|---" * (len(cm["labels"]) + 1) + "|"]
    for lab, row in zip(cm["labels"], cm["matrix"]):
        lines.append(f"| {lab} | " + " | ".join(map(str, row)) + " |")
    if "importance" in card:        # cards written before importances have none
        lines += _importance_markdown(card["importance"])
    for section in card.get("comparisons", []):
        lines += ["", f"## Comparison on {section.get('season', '?')} "
                      f"({section.get('when', '')})", "", section.get("markdown", "")]
    lines += ["", "## Library versions", "",
              ", ".join(f"{k} {v}" for k, v in card["library_versions"].items()), ""]
    return "\n".join(lines)


#: Features listed in the card's importance table.
IMPORTANCE_TOP = 15


def _importance_markdown(imp) -> list[str]:
    if not imp:
        return ["", "## Feature importance", "",
                "Not computed: the model has no held-out folds (too few flashes)."]
    lines = ["", "## Feature importance (permutation on held-out flashes)", "",
             f"Each feature permuted within the held-out fold of each fold model "
             f"({imp['n_repeats']} repeats, {imp['n_rows']:,} pulses); folds hold whole "
             f"flashes, so no pulse is scored by a model that trained on its flash. "
             f"Baseline: log-loss {imp['base_log_loss']:.4f}, macro-F1 "
             f"{imp['base_macro_f1']:.4f}. Top {IMPORTANCE_TOP}:", "",
             "| rank | feature | log-loss increase | macro-F1 drop |", "|---|---|---|---|"]
    for i, r in enumerate(imp["features"][:IMPORTANCE_TOP], start=1):
        lines.append(f"| {i} | `{r['feature']}` | {r['log_loss_increase']:.4f} ± "
                     f"{r['log_loss_increase_std']:.4f} | {r['macro_f1_drop']:.4f} ± "
                     f"{r['macro_f1_drop_std']:.4f} |")
    return lines
def check_model_out(out_dir) -> Path:
    """Check a new model folder the user named, before any work; return it.

    Its name is the model's version (:data:`classify.registry.VERSION_PATTERN`),
    it must not exist yet (or be empty), and its parent, the registry, must be a
    folder or creatable.

    Raises
    ------
    features.InputError
    """
    out_dir = Path(out_dir)
    if not VERSION_PATTERN.fullmatch(out_dir.name):
        raise InputError(f"--out {out_dir}: the folder's name is the model's version: 1-128 "
                         "letters, digits, '.', '_', '+' or '-' starting with a letter or "
                         "digit")
    if out_dir.exists() and (not out_dir.is_dir() or any(out_dir.iterdir())):
        raise InputError(f"--out {out_dir}: already exists; model folders are immutable, "
                         "choose a new --out")
    parent = out_dir.parent
    while not parent.exists() and parent != parent.parent:
        parent = parent.parent
    if not parent.is_dir() or not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(f"--out {out_dir}: cannot create it under {parent}")
    return out_dir


def train_from_store(catalog_paths, store, out_dir, *, coverage=0.95, n_jobs=1,
                     dask_address=None, chunk_size=512, progress=None, random_state=0,
                     sample_weight_fn=None, make_current=None, station_variants=2,
                     **params):
    """Train, save and register a model on the store's current labels of catalogs.

    Parameters
    ----------
    catalog_paths : list of path
        Catalog folders whose labelled pulses are learnt.
    store : classify.labels.LabelStore
    out_dir : path
        The new model folder (its name is the version); its parent is the registry.
    coverage : float, default=0.95
        Target coverage of the conformal prediction sets.
    n_jobs, dask_address, chunk_size
        How the features are computed (:func:`features.extract.iter_features`).
    progress : bool, optional
        Progress bars of the features and of the fit (one step per fold model, then
        the calibration) on stderr; None: on a terminal.
    random_state : int, default=0
    sample_weight_fn : callable, optional
        ``f(table) -> weights`` (e.g. to weight a new season's labels more).
    make_current : bool, optional
        Make the model the registry's current one (None: only if it has none).
    station_variants : int, default=2
        Station variants of every labelled pulse added to training
        (:func:`training_table`).
    **params
        :class:`~classify.models.PulseClassifier` parameters (``max_iter``...).

    Returns
    -------
    model_dir : pathlib.Path
    card : dict
        The model card (also ``card.json`` and ``card.md`` in the folder).

    Raises
    ------
    features.InputError
        A bad ``out_dir``, catalog or store, or no labelled pulse of a visible class.

    Examples
    --------
    >>> from classify import LabelStore, train_from_store
    >>> with LabelStore("labels.sqlite") as store:              # doctest: +SKIP
    ...     model_dir, card = train_from_store(["hollowmere-2031"], store,
    ...                                        "models/hollowmere-2031-v1")
    >>> card["metrics"]["macro_f1"]                             # doctest: +SKIP
    0.99...

    (Skipped here: it needs a labelled season; ``tests/test_api.py`` runs it on a
    simulated one.)
    """
    out_dir = check_model_out(out_dir)
    catalogs = [open_catalog(p) for p in catalog_paths]
    ids = [c.catalog_id for c in catalogs]
    if len(set(ids)) != len(ids):
        raise InputError(f"the same catalog_id was given twice: {ids}")
    table = training_table(catalogs, store, n_jobs=n_jobs, dask_address=dask_address,
                           chunk_size=chunk_size, progress=progress,
                           station_variants=station_variants, seed=random_state)
    weights = None if sample_weight_fn is None else sample_weight_fn(table)
    model = fit_classifier(table, coverage=coverage, sample_weight=weights,
                           random_state=random_state, progress=progress, **params)
    version = out_dir.name
    card = build_card(model, table, catalogs, version)
    save_model(model, out_dir, card, model_card_markdown(card))
    ModelRegistry(out_dir.parent).register(out_dir, make_current=make_current)
    return out_dir, card
