"""Why this class: exact per-pulse attributions and flash-grouped feature importances.

What is explained
-----------------
A :class:`~classify.models.PulseClassifier` averages the probabilities of its
fold models (gradient-boosted trees) and then applies the temperature ``T`` of
the pulse's pattern of missing column groups. Each fold model ``f`` has a raw
score ``s_f,c(x)`` per class ``c`` (the sum of its trees' leaf values plus a
baseline) with ``log p_f,c - log p_f,c' = s_f,c - s_f,c'``. For a pulse ``x``
predicted as class ``k`` and compared with class ``j`` (by default the
runner-up, the class of second-highest calibrated probability), this module
explains the **margin**

    margin(x) = (1 / F) sum_f [s_f,k(x) - s_f,j(x)] / T(x),

the fold-averaged log-odds of ``k`` against ``j`` on the calibrated scale.
The margin is additive over trees, so it splits exactly into a **base value**
(the same difference of the trees' expected outputs over their training
samples) plus one **contribution per feature**:

    margin(x) = base(x) + sum_i contribution_i(x)        (to rounding error).

``base`` depends on ``x`` only through ``k``, ``j`` and ``T(x)``. The deployed
model's own log-odds ``log p_k - log p_j`` (column ``log_odds``) average
probabilities, not log-odds, across folds: the two agree when the fold models
agree and differ a little where they do not; the margin is the additive one.
Fold models that never saw class ``k`` or ``j`` (a fold without it) are left
out of that pulse's mean.

Contributions of one tree are path-based: the pulse's decision path is walked
from the root to its leaf and every change of the node value along it is given
to the feature the node splits on (missing values go where the tree sends
them, ``missing_go_to_left``). Node values are the count-weighted means of the
leaf values below the node (the expected tree output of the training samples
that reached it): scikit-learn stores leaf values with the learning rate
applied but internal nodes unshrunk (the root holds 0), so the stored internal
values are not on the scale of the output and are not used.

Importances
-----------
:func:`permutation_importance_by_flash` permutes one feature at a time within
the held-out fold of each fold model (folds hold whole flashes, so every pulse
is scored only by the model that never trained on its flash) and reports the
increase of the log-loss and the drop of the macro-F1 of the pooled held-out
predictions, averaged over repeats.

References
----------
Saabas, A. (2014), "Interpreting random forests" (path-based attributions);
Breiman, L. (2001), Random forests, Machine Learning 45, 5-32 (permutation
importance); both from memory.

Examples
--------
>>> import numpy as np
>>> from classify.models import PulseClassifier
>>> rng = np.random.default_rng(0)
>>> X = rng.normal(size=(300, 3)); y = np.where(X[:, 0] > 0, "a", "b")
>>> m = PulseClassifier(max_iter=10, n_reference=50).fit(X, y)
>>> e = explain_pulses(m, X[:5])
>>> bool(np.allclose(e["base_value"] + e[["x0", "x1", "x2"]].sum(axis=1), e["margin"]))
True
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from features import InputError, schema

from ._tree_paths import apply_tables, score_tables, tree_score_contributions

__all__ = ["DISPLAY_UNITS", "display_spec", "tree_score_contributions", "explain_pulses",
           "top_reasons", "event_features", "permutation_importance_by_flash"]

#: Rows explained at once (the per-class accumulator is rows x classes x features).
BLOCK_ROWS = 4096
#: Display unit and factor from SI for a schema unit (the review page's table first).
DISPLAY_UNITS = {"s": ("µs", 1e6), "m": ("km", 1e-3), "A": ("kA", 1e-3),
                 "A m": ("kA m", 1e-3)}
#: Features whose natural display differs from their unit's default.
_DISPLAY_OVERRIDES = {"time_in_flash_s": ("time in flash", "ms", 1e3),
                      "source_duration_s": ("source duration", "µs", 1e6)}


def display_spec(name: str) -> tuple[str, str, float]:
    """How a feature is shown to people: ``(label, unit, factor from SI)``.

    The review page's table (:data:`classify.review.DISPLAY_FEATURES`) first,
    then :data:`DISPLAY_UNITS` by the schema unit; a dimensionless feature has
    unit ``"1"``.

    Examples
    --------
    >>> display_spec("width_s")
    ('width', 'µs', 1000000.0)
    """
    from .review import DISPLAY_FEATURES

    if name in _DISPLAY_OVERRIDES:
        return _DISPLAY_OVERRIDES[name]
    for col, label, unit, factor in DISPLAY_FEATURES:
        if col == name:
            return label, unit or "1", float(factor)
    try:
        si = schema.get(name).unit
    except KeyError:
        return name, "", 1.0
    unit, factor = DISPLAY_UNITS.get(si, (si, 1.0))
    label = name
    for suffix in ("_v_per_m", "_m_per_s", "_deg_per_s", "_a_m", "_c_m", "_db", "_deg", "_s",
                   "_m", "_a"):
        if label.endswith(suffix):
            label = label[: -len(suffix)]
            break
    return label.replace("_", " "), unit, factor


# ---------------------------------------------------------------------------- pulses
def _names(model, n_features):
    if hasattr(model, "feature_names_in_"):
        return [str(c) for c in model.feature_names_in_]
    return [f"x{i}" for i in range(n_features)]


def _pairs(proba, classes, against):
    """Predicted class index and the class it is compared with, per row."""
    order = np.argsort(-proba, axis=1, kind="stable")
    k, runner = order[:, 0], order[:, 1]
    if against == "runner_up":
        return k, runner
    names = [str(c) for c in classes]
    if against not in names:
        raise InputError(f"against must be 'runner_up' or one of the model's classes "
                         f"{names}, got {against!r}")
    j = np.full(len(k), names.index(against))
    return k, np.where(j == k, runner, j)


def explain_pulses(model, X, *, against="runner_up") -> pd.DataFrame:
    """Per-pulse contributions of every feature to the predicted class against another.

    Parameters
    ----------
    model : classify.models.PulseClassifier
        Fitted.
    X : DataFrame or array-like, shape (n_pulses, n_features)
        The model's features (SI units, NaN allowed), as for ``predict_proba``.
    against : str, default="runner_up"
        The class the prediction is compared with: the runner-up, or a class
        name (pulses predicted as that class are compared with their runner-up).

    Returns
    -------
    pandas.DataFrame
        One row per pulse (``X``'s index when it is a DataFrame): ``predicted``,
        ``against``, ``probability`` and ``against_probability`` (calibrated),
        ``margin`` (the explained quantity, see the module docstring; natural
        log-odds), ``base_value``, ``log_odds`` (the deployed model's
        ``log p_predicted - log p_against``), then one column per feature:
        its contribution to the margin. ``base_value`` plus the contributions
        equals ``margin``.

    Examples
    --------
    A model fitted on an invented features table (self-consistency only); the pulses to
    explain may come as any wider table (a features or results table):

    >>> import numpy as np, pandas as pd
    >>> from classify.models import PulseClassifier
    >>> rng = np.random.default_rng(0)
    >>> X = pd.DataFrame({"bipolarity": rng.uniform(0, 1, 300),
    ...                   "width_s": rng.uniform(1e-6, 3e-5, 300)})
    >>> y = np.where(X["bipolarity"] > 0.5, "narrow_bipolar", "stepped_leader")
    >>> m = PulseClassifier(max_iter=10, n_reference=50).fit(X, y)
    >>> e = explain_pulses(m, X.assign(event_id="e").head(2))
    >>> e["predicted"].tolist() == y[:2].tolist()
    True
    >>> bool(abs(e.loc[0, "bipolarity"]) > abs(e.loc[0, "width_s"]))   # the class's feature
    True
    """
    Xv = model._validate(X)
    n, n_features = Xv.shape
    names = _names(model, n_features)
    classes = model.classes_
    proba = model.predict_proba(X)
    k, j = _pairs(proba, classes, against)
    temp = model.pattern_temperature_[model._patterns(Xv)]
    rows = np.arange(n)
    total = np.zeros((n, n_features))
    base = np.zeros(n)
    n_folds = np.zeros(n)
    for est in model.estimators_:
        pos = np.full(len(classes), -1)
        pos[est.classes_.astype(int)] = np.arange(len(est.classes_))
        pk, pj = pos[k], pos[j]
        known = (pk >= 0) & (pj >= 0)
        pk, pj = np.where(known, pk, 0), np.where(known, pj, 0)
        b, trees = score_tables(est, n_features)
        for s in range(0, n, BLOCK_ROWS):
            blk = slice(s, s + BLOCK_ROWS)
            c = apply_tables(trees, Xv[blk], len(b))
            r = rows[blk] - s
            diff = c[r, pk[blk], :] - c[r, pj[blk], :]
            total[blk] += np.where(known[blk, None], diff, 0.0)
            base[blk] += np.where(known[blk], b[pk[blk]] - b[pj[blk]], 0.0)
        n_folds += known
    with np.errstate(invalid="ignore", divide="ignore"):
        scale = 1.0 / (np.where(n_folds > 0, n_folds, np.nan) * temp)
        log_odds = np.log(proba[rows, k]) - np.log(proba[rows, j])
    contrib = total * scale[:, None]
    base = base * scale
    index = X.index if isinstance(X, pd.DataFrame) else pd.RangeIndex(n)
    head = pd.DataFrame({
        "predicted": classes[k].astype(str), "against": classes[j].astype(str),
        "probability": proba[rows, k], "against_probability": proba[rows, j],
        "margin": base + contrib.sum(axis=1), "base_value": base, "log_odds": log_odds,
    }, index=index)
    return pd.concat([head, pd.DataFrame(contrib, columns=names, index=index)], axis=1)


def _value_text(name, value) -> str:
    label, unit, factor = display_spec(name)
    if value is None or not np.isfinite(value):
        return f"{label} missing"
    v = float(value) * factor
    shown = f"{v:,.0f}" if abs(v) >= 1000 else f"{v:.3g}"
    return f"{label} {shown}" + ("" if unit in ("", "1") else f" {unit}")


def top_reasons(explanation: pd.DataFrame, X, *, n: int = 3) -> pd.DataFrame:
    """The ``n`` largest contributions of each pulse, in words with display units.

    Parameters
    ----------
    explanation : pandas.DataFrame
        :func:`explain_pulses` output.
    X : DataFrame
        The same pulses' features (SI units), indexed like ``explanation``.
    n : int, default=3
        Reasons per pulse (by absolute contribution).

    Returns
    -------
    pandas.DataFrame
        One row per reason: ``pulse`` (index label), ``rank`` (1 = largest),
        ``feature``, ``value`` (in display units), ``unit``, ``contribution``
        (to the margin; > 0 speaks for the predicted class), ``value_text``
        ("width 14.2 µs") and ``text`` (with the contribution and the class
        it speaks for).
    """
    if n < 1:
        raise ValueError(f"n must be >= 1, got {n}")
    features = [c for c in explanation.columns if c in X.columns]
    C = explanation[features].to_numpy(dtype=np.float64)
    top = np.argsort(-np.abs(C), axis=1, kind="stable")[:, :n]
    out = []
    for i, label in enumerate(explanation.index):
        pred, other = explanation.at[label, "predicted"], explanation.at[label, "against"]
        for rank, col in enumerate(top[i], start=1):
            name = features[col]
            c = float(C[i, col])
            _, unit, factor = display_spec(name)
            raw = X.at[label, name]
            side = pred if c >= 0 else other
            shown = _value_text(name, raw)
            out.append({"pulse": label, "rank": rank, "feature": name,
                        "value": float(raw) * factor if pd.notna(raw) else np.nan,
                        "unit": unit, "contribution": c, "value_text": shown,
                        "text": f"{shown}: {c:+.2f} (for {side})"})
    return pd.DataFrame(out, columns=["pulse", "rank", "feature", "value", "unit",
                                      "contribution", "value_text", "text"])


def event_features(catalog, event_ids) -> pd.DataFrame:
    """Features of some events of a catalog (flash context from the whole catalog).

    Parameters
    ----------
    catalog : features.Catalog
    event_ids : list of str
        Ids from the catalog's events.csv (repeats are kept once).

    Returns
    -------
    pandas.DataFrame
        Indexed by event id, in the order given: the schema's columns.

    Raises
    ------
    features.InputError
        Naming every id the catalog does not hold.
    """
    from features import InputError
    from features.extract import compute_chunk, plan_chunks

    ids = list(dict.fromkeys(str(e) for e in event_ids))
    if not ids:
        raise InputError("no event id given")
    row_of = {e: i for i, e in enumerate(map(str, catalog.event_ids))}
    unknown = [e for e in ids if e not in row_of]
    if unknown:
        raise InputError([f"{catalog.path / 'events.csv'}: no event_id {e!r} in catalog "
                          f"{catalog.catalog_id}" for e in unknown])
    plan = plan_chunks(catalog, bounds=[(row_of[e], row_of[e] + 1) for e in ids])
    df = pd.concat([compute_chunk(job) for job in plan.jobs()])
    return df.set_index(pd.Index(ids, name="event_id"), drop=False)


# ---------------------------------------------------------------------------- global
def _held_out_proba(model, Xs, fold, rows_of):
    """Calibrated probabilities of held-out rows, each from the model of its own fold."""
    out = np.empty((len(Xs), len(model.classes_)))
    for f, sel in rows_of.items():
        est = model.estimators_[f]
        raw = model._expand(est, est.predict_proba(Xs[sel]))
        out[sel] = model._calibrate(raw, model._patterns(Xs[sel]))
    return out


def permutation_importance_by_flash(model, X, y, *, n_repeats: int = 3, random_state=0,
                                    max_rows: int = 20_000) -> pd.DataFrame | None:
    """Importance of each feature on held-out flashes: the loss when it is permuted.

    Parameters
    ----------
    model : classify.models.PulseClassifier
        Fitted on ``X`` and ``y`` with grouped folds (``model.oof_fold_``).
    X : DataFrame or array-like, shape (n_samples, n_features)
        The training features, in the order the model was fitted on.
    y : array-like, shape (n_samples,)
        The training labels.
    n_repeats : int, default=3
        Permutations per feature.
    random_state : int, default=0
    max_rows : int, default=20000
        At most this many training rows are scored (a random subset, each row
        still scored by the model of its own held-out fold).

    Returns
    -------
    pandas.DataFrame or None
        Indexed by feature: ``log_loss_increase`` (nats, mean over repeats),
        ``log_loss_increase_std``, ``macro_f1_drop``, ``macro_f1_drop_std``,
        sorted by ``log_loss_increase`` (largest first). None when the model
        has no held-out folds (trained on too few flashes to cross-validate).
    """
    from sklearn.metrics import f1_score, log_loss

    Xv = model._validate(X)
    y = np.asarray(y).astype(str)
    fold = np.asarray(model.oof_fold_)
    if len(fold) != len(Xv) or len(y) != len(Xv):
        raise ValueError(f"X ({len(Xv)} rows) and y ({len(y)}) must be the model's training "
                         f"rows ({len(fold)})")
    if (fold < 0).all():
        return None
    rng = np.random.default_rng(random_state)
    keep = np.flatnonzero(fold >= 0)
    if len(keep) > max_rows:
        keep = np.sort(rng.choice(keep, max_rows, replace=False))
    Xs, ys, fs = Xv[keep], y[keep], fold[keep]
    rows_of = {int(f): np.flatnonzero(fs == f) for f in np.unique(fs)}
    classes = model.classes_.astype(str)

    def scores(p):
        pred = classes[np.argmax(p, axis=1)]
        return (log_loss(ys, np.clip(p, 1e-15, 1.0), labels=classes),
                f1_score(ys, pred, labels=classes, average="macro", zero_division=0))

    base_loss, base_f1 = scores(_held_out_proba(model, Xs, fs, rows_of))
    names = _names(model, Xv.shape[1])
    result = np.zeros((len(names), n_repeats, 2))
    for c in range(len(names)):
        for r in range(n_repeats):
            Xp = Xs.copy()
            for sel in rows_of.values():   # within each held-out fold
                Xp[sel, c] = Xs[sel[rng.permutation(len(sel))], c]
            loss, f1 = scores(_held_out_proba(model, Xp, fs, rows_of))
            result[c, r] = (loss - base_loss, base_f1 - f1)
    df = pd.DataFrame({"log_loss_increase": result[:, :, 0].mean(axis=1),
                       "log_loss_increase_std": result[:, :, 0].std(axis=1),
                       "macro_f1_drop": result[:, :, 1].mean(axis=1),
                       "macro_f1_drop_std": result[:, :, 1].std(axis=1)},
                      index=pd.Index(names, name="feature"))
    df.attrs.update(base_log_loss=float(base_loss), base_macro_f1=float(base_f1),
                    n_rows=int(len(keep)), n_repeats=int(n_repeats))
    return df.sort_values("log_loss_increase", ascending=False, kind="stable")
