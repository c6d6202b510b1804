"""The review queue: which doubtful pulses an analyst sees, most informative first.

Who is in the queue
-------------------
The pulses of one catalog of a triage results file with ``needs_review`` true
whose event has no current label in the label store (status ``unlabelled``:
events in ``conflict`` are settled with ``pulsesort labels resolve``, not by a
further opinion) and, when an analyst is given, that this analyst has not
already marked ``unsure`` or ``skip`` in an earlier session (``revisit=True``
brings those back). So reopening the page resumes where the analyst stopped.

Order (the rule)
----------------
1. **Priority** of each pulse, with ``p`` its calibrated probabilities over the
   model's ``K`` classes::

       uncertainty = -sum_k p_k ln p_k / ln K        # normalised entropy, in [0, 1]
       novelty     = fraction of the results' pulses with a lower novelty_score
       priority    = uncertainty + novelty_weight * novelty

   (missing probabilities or scores count as 0). Entropy sampling is the
   textbook uncertainty rule of active learning (Settles 2009, "Active
   Learning Literature Survey", sec. 3.1; from memory); the rank form of the
   novelty term makes it free of the scale of the novelty score.
2. **Diversity**: a greedy maximal-marginal-relevance pass (Carbonell &
   Goldstein 1998; from memory) over the model features, each standardised
   (mean 0, standard deviation 1 over the pulses of the results file, missing
   values at the mean). With ``d`` the root-mean-square difference of two
   pulses' standardised features, their similarity is ``exp(-d**2)`` (1 for
   identical pulses). Starting from the highest priority, each next pulse is
   the one that maximises::

       mmr = lam * priority - (1 - lam) * max(similarity to the pulses already taken)

   so ten near-identical pulses do not fill the first page. The pass orders
   the first ``W = min(diversity_window, budget)`` places (``diversity_window``
   defaults to 300), choosing among the ``4 W`` highest priorities; the rest
   follow by priority (the pass is quadratic, a season is large). Ties are
   broken by catalog order. Pulses that need review but were decided already
   (labelled, in conflict, or marked by the analyst; the ``4 W`` of highest
   priority among them) count as taken before the first pick, so a queue
   rebuilt after some decisions goes on as the first one would have, and no
   near-twin of a reviewed pulse jumps to the front.
3. ``budget`` keeps the first ``budget`` pulses.

The weights (``novelty_weight=0.5``, ``lam=0.7``) are common practice, no source.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd

from features import InputError, schema

logger = logging.getLogger("pulsesort")

__all__ = ["build_queue", "probability_columns", "priority_scores", "feature_stats",
           "standardised_features", "diversity_order"]

NOVELTY_WEIGHT = 0.5
MMR_LAMBDA = 0.7
DIVERSITY_WINDOW = 300
POOL_FACTOR = 4
QUEUE_COLUMNS = ("queue_rank", "priority", "uncertainty", "novelty_rank")


def probability_columns(results: pd.DataFrame) -> list[str]:
    """The ``p_<class>`` columns of a results table, in the model's class order."""
    cols = list(results.columns)
    if "prediction_set" in cols and "review_reason" in cols:
        block = cols[cols.index("prediction_set") + 1: cols.index("review_reason")]
        return [c for c in block if c.startswith("p_")]
    return [c for c in cols if c.startswith("p_") and c[2:] and c not in schema.feature_names()]


def priority_scores(results: pd.DataFrame, *, novelty_weight: float = NOVELTY_WEIGHT):
    """Uncertainty, novelty rank and priority of every row (see the module rule).

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results: ``p_<class>`` columns and ``novelty_score``.
    novelty_weight : float, default=0.5
        Weight of the novelty rank in the priority.

    Returns
    -------
    uncertainty, novelty_rank, priority : ndarray of float64, shape (n_rows,)
        Normalised entropy in [0, 1]; fraction of rows with a lower novelty
        score in [0, 1); their weighted sum.
    """
    pcols = probability_columns(results)
    n = len(results)
    if len(pcols) >= 2:
        p = results[pcols].to_numpy(dtype=np.float64)
        p = np.where(np.isfinite(p) & (p > 0), p, 0.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            h = -np.where(p > 0, p * np.log(p), 0.0).sum(axis=1) / np.log(len(pcols))
        uncertainty = np.clip(np.nan_to_num(h, nan=0.0), 0.0, 1.0)
    else:
        uncertainty = np.zeros(n)
    if "novelty_score" in results:
        s = pd.to_numeric(results["novelty_score"], errors="coerce").to_numpy(dtype=np.float64)
        finite = np.sort(s[np.isfinite(s)])
        rank = np.searchsorted(finite, s, side="left") / max(n, 1)
        novelty = np.where(np.isfinite(s), rank, 0.0)
    else:
        novelty = np.zeros(n)
    return uncertainty, novelty, uncertainty + novelty_weight * novelty


def feature_stats(results: pd.DataFrame, columns=None):
    """Mean and standard deviation of each model feature over all rows (NaN ignored).

    Returns
    -------
    columns : list of str
        Default: the schema's model features present in ``results``.
    mean, std : ndarray of float64, shape (n_features,)
        ``std`` is 0 for a constant or empty column (it is then left out).
    """
    if columns is None:
        columns = [c for c in schema.model_feature_names() if c in results.columns]
    mean, std = np.zeros(len(columns)), np.zeros(len(columns))
    for j, name in enumerate(columns):  # column by column: a season is large
        x = pd.to_numeric(results[name], errors="coerce").to_numpy(dtype=np.float64)
        x = x[np.isfinite(x)]
        if x.size:
            mean[j], std[j] = x.mean(), x.std()
    return list(columns), mean, np.where(np.isfinite(std), std, 0.0)


def standardised_features(results: pd.DataFrame, columns=None, rows=None, stats=None
                          ) -> np.ndarray:
    """Model features standardised over all rows; missing values at 0 (the mean).

    Parameters
    ----------
    results : pandas.DataFrame
    columns : list of str, optional
        Default: the schema's model features present in ``results``.
    rows : array of int, optional
        Positions of the rows to return (default all); the mean and standard
        deviation are always those of every row.
    stats : tuple, optional
        :func:`feature_stats` of ``results``, if already computed.

    Returns
    -------
    ndarray of float64, shape (n_rows, n_features)
        ``(x - mean) / std`` per column (a constant column is 0).
    """
    columns, mean, std = stats if stats is not None else feature_stats(results, columns)
    rows = np.arange(len(results)) if rows is None else np.asarray(rows, dtype=np.int64)
    z = np.zeros((len(rows), len(columns)))
    sub = results.iloc[rows]
    for j, name in enumerate(columns):
        if std[j] > 0:
            x = pd.to_numeric(sub[name], errors="coerce").to_numpy(dtype=np.float64)
            z[:, j] = np.nan_to_num((x - mean[j]) / std[j], nan=0.0, posinf=0.0,
                                    neginf=0.0)
    return z


def diversity_order(priority, z, *, lam: float = MMR_LAMBDA, n_take=None, taken=None
                    ) -> np.ndarray:
    """Greedy maximal-marginal-relevance order of candidates.

    Parameters
    ----------
    priority : ndarray, shape (n,)
        Priority of each candidate (higher first).
    z : ndarray, shape (n, n_features)
        Standardised features of the candidates.
    lam : float, default=0.7
        Weight of the priority against the similarity penalty, in [0, 1].
    n_take : int, optional
        How many to order (default all).
    taken : ndarray, shape (n_taken, n_features), optional
        Standardised features of pulses already reviewed: they count as taken
        before the first pick.

    Returns
    -------
    ndarray of int, shape (n_take,)
        Candidate indices in queue order.
    """
    priority = np.asarray(priority, dtype=np.float64)
    n = len(priority)
    n_take = n if n_take is None else min(int(n_take), n)
    if n == 0 or n_take == 0:
        return np.zeros(0, dtype=np.int64)
    n_feat = max(z.shape[1], 1)
    max_sim = np.zeros(n)
    for t in [] if taken is None else np.asarray(taken, dtype=np.float64):
        max_sim = np.maximum(max_sim, np.exp(-((z - t) ** 2).sum(axis=1) / n_feat))
    free = np.ones(n, dtype=bool)
    order = []
    for _ in range(n_take):
        mmr = np.where(free, lam * priority - (1.0 - lam) * max_sim, -np.inf)
        k = int(np.argmax(mmr))        # first index among ties: catalog order
        order.append(k)
        free[k] = False
        d2 = ((z - z[k]) ** 2).sum(axis=1) / n_feat
        max_sim = np.maximum(max_sim, np.exp(-d2))
    return np.asarray(order, dtype=np.int64)


def _unavailable(store, catalog_id, analyst, revisit) -> set[str]:
    """Event ids with a current label or a conflict (and the analyst's standing marks)."""
    if store is None:
        return set()
    cur = store.current_labels([catalog_id])
    done = set(cur.loc[cur["status"] != "unlabelled", "event_id"].astype(str))
    if analyst is not None and not revisit and hasattr(store, "review_marks"):
        marks = store.review_marks([catalog_id], analyst=analyst)
        done |= set(marks["event_id"].astype(str))
    return done


def build_queue(results: pd.DataFrame, store=None, catalog_id=None, budget=None, *,
                analyst=None, revisit: bool = False, novelty_weight: float = NOVELTY_WEIGHT,
                lam: float = MMR_LAMBDA, diversity_window: int = DIVERSITY_WINDOW
                ) -> pd.DataFrame:
    """The review queue of one catalog of a triage results table (rule: module docstring).

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results (booleans parsed, as :func:`classify.triage.read_results`
        returns them).
    store : classify.labels.LabelStore, optional
        Events with a current label (or in conflict) are left out; without a
        store none are.
    catalog_id : str, optional
        Which catalog of ``results``; needed only when it holds several.
    budget : int, optional
        Keep at most this many pulses.
    analyst : str, optional
        Leave out the pulses this analyst marked unsure or skipped before.
    revisit : bool, default=False
        Keep those marked pulses in the queue.
    novelty_weight, lam : float
        The weights of the rule.
    diversity_window : int, default=300
        How many first places the diversity pass orders.

    Returns
    -------
    pandas.DataFrame
        The queued rows of ``results`` in queue order (index reset), with the
        added columns ``queue_rank`` (1, 2, ...), ``priority``,
        ``uncertainty`` and ``novelty_rank``.
    """
    for col in ("event_id", "needs_review"):
        if col not in results.columns:
            raise InputError(f"the results table has no {col!r} column; is it a "
                             "'pulsesort triage' output?")
    if budget is not None and (int(budget) != budget or budget < 1):
        raise InputError(f"budget must be a whole number >= 1, got {budget!r}")
    if not 0.0 <= lam <= 1.0:
        raise InputError(f"lam must be in [0, 1], got {lam!r}")
    results = results.reset_index(drop=True)
    if "catalog_id" in results.columns:
        ids = list(dict.fromkeys(results["catalog_id"].astype(str)))
        if catalog_id is None:
            if len(ids) > 1:
                raise InputError(f"the results hold several catalogs ({', '.join(ids)}); "
                                 "name one with catalog_id")
            catalog_id = ids[0] if ids else None
        elif catalog_id not in ids:
            raise InputError(f"catalog {catalog_id!r} is not in the results (they hold "
                             f"{', '.join(ids) or 'nothing'})")
        results = results[results["catalog_id"].astype(str) == catalog_id].reset_index(
            drop=True)
    elif catalog_id is None and store is not None:
        raise InputError("the results have no catalog_id column: pass catalog_id")
    uncertainty, novelty, priority = priority_scores(results, novelty_weight=novelty_weight)
    needs = results["needs_review"].map(_as_bool).to_numpy(dtype=bool)
    taken = _unavailable(store, catalog_id, analyst, revisit)
    ok = needs & ~results["event_id"].astype(str).isin(taken).to_numpy()
    cand = np.flatnonzero(ok)
    # by priority, ties in catalog order
    by_priority = cand[np.argsort(-priority[cand], kind="stable")]
    window = min(diversity_window, len(by_priority) if budget is None else int(budget))
    pool = by_priority[: max(window * POOL_FACTOR, window)]
    stats = feature_stats(results)
    z_pool = standardised_features(results, rows=pool, stats=stats)
    # pulses that need review but were decided already count as taken (capped)
    done = np.flatnonzero(needs & ~ok)
    done = done[np.argsort(-priority[done], kind="stable")][: POOL_FACTOR * max(window, 1)]
    z_done = standardised_features(results, rows=done, stats=stats)
    head = pool[diversity_order(priority[pool], z_pool, lam=lam, n_take=window,
                                taken=z_done)]
    rest = by_priority[~np.isin(by_priority, head)]
    order = np.concatenate([head, rest]).astype(np.int64)
    if budget is not None:
        order = order[: int(budget)]
    out = results.iloc[order].reset_index(drop=True)
    out.insert(0, "queue_rank", np.arange(1, len(out) + 1))
    out["priority"] = priority[order]
    out["uncertainty"] = uncertainty[order]
    out["novelty_rank"] = novelty[order]
    logger.debug("review queue of %s: %d of %d pulses need review and are unlabelled",
                 catalog_id, len(cand), len(results))
    return out


def _as_bool(v) -> bool:
    if isinstance(v, str):
        if v not in ("true", "false"):
            raise InputError(f"needs_review must be 'true' or 'false', got {v!r}")
        return v == "true"
    return bool(v)
