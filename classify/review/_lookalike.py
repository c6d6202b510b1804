"""Look-alikes: for each class in question, the labelled pulses of THAT class nearest to the pulse.

Which classes: those of the pulse's prediction set when it holds two or more,
else the two classes of highest probability (:func:`lookalike_classes`); the
analyst compares the pulse with references of each candidate class.

With a model, its own reference set of labelled training pulses
(``model.reference_``) and its distance (``model.nearest_labelled``, asked for
the whole set, then filtered by class) are used. Without one (rules mode), the
label store's labelled pulses of the same catalog are compared in the
standardised model-feature space of the results file (the space of the
queue's diversity pass, :func:`classify.review._queue.standardised_features`);
the distance shown is then the root-mean-square difference of the standardised
features. Each look-alike carries its field record over the features' analysis
window (:func:`features.trace.pulse_trace`) when its catalog can be
opened (its path as registered in the label store), so the page draws it on
the pulse's own time axis.
"""

from __future__ import annotations

import logging
import math

import numpy as np
import pandas as pd

from classify.predict import model_inputs
from features import open_catalog
from features.trace import pulse_trace

from ._queue import feature_stats, standardised_features
from ._trace import compact, reduce_points

logger = logging.getLogger("pulsesort")

__all__ = ["LookAlikes", "lookalike_classes", "MAX_TRACE_POINTS"]

#: Longest look-alike trace sent to the page (longer ones: block minima and maxima).
MAX_TRACE_POINTS = 4096


def lookalike_classes(prediction_set, probabilities) -> list[str]:
    """The classes whose references the page shows next to a pulse.

    Parameters
    ----------
    prediction_set : list of str
        The pulse's conformal prediction set.
    probabilities : list of (str, float or None)
        ``(class, probability)`` in the model's class order.

    Returns
    -------
    list of str
        The set when it has two classes or more; otherwise the two most
        probable classes (ties in class order).

    Examples
    --------
    >>> lookalike_classes(["recoil"], [("narrow_bipolar", 0.3), ("recoil", 0.6),
    ...                                 ("stepped_leader", 0.1)])
    ['recoil', 'narrow_bipolar']
    """
    if len(prediction_set) >= 2:
        return list(prediction_set)
    ranked = sorted(enumerate(probabilities), key=lambda ip: (-(ip[1][1] or 0.0), ip[0]))
    return [c for _, (c, _) in ranked[:2]]


class LookAlikes:
    """Find, per class, the ``k`` labelled pulses nearest to a pulse of a results table.

    Parameters
    ----------
    results : pandas.DataFrame
        The triage results of ``catalog`` (catalog order not required).
    catalog : features.catalog.Catalog
    labels : pandas.DataFrame
        Current labels (``catalog_id``, ``event_id``, ``label``) of the store.
    catalog_paths : dict of str -> path, optional
        Where other catalogs live (for the traces of a model's reference pulses).
    model : object, optional
        A fitted pulsesort model (``reference_``, ``nearest_labelled``).
    k : int, default=3
        Look-alikes per class.
    """

    def __init__(self, results, catalog, labels, *, catalog_paths=None, model=None, k=3):
        self.results = results.reset_index(drop=True)
        self.catalog = catalog
        self.model = model
        self.k = int(k)
        self.catalog_paths = dict(catalog_paths or {})
        self._catalogs = {catalog.catalog_id: catalog}
        self._rows = {catalog.catalog_id: _row_map(catalog)}
        self._res_row = {e: i for i, e in enumerate(self.results["event_id"].astype(str))}
        self._stats = feature_stats(self.results)
        self._z = {}  # results row -> standardised features, filled as needed
        self._ref = None if model is None else model.reference_
        mine = labels[labels["catalog_id"].astype(str) == catalog.catalog_id]
        mine = mine[mine["label"].notna()]
        self._labels = dict(zip(mine["event_id"].astype(str), mine["label"].astype(str)))

    @property
    def source(self) -> str:
        """``"model"`` (the model's reference set) or ``"store"`` (this catalog's labels)."""
        return "model" if self.model is not None else "store"

    def set_label(self, event_id: str, label: str | None) -> None:
        """Keep the store-mode set current after a decision (None: the label was undone)."""
        if label is None:
            self._labels.pop(str(event_id), None)
        else:
            self._labels[str(event_id)] = str(label)

    def _catalog(self, catalog_id):
        if catalog_id in self._catalogs:
            return self._catalogs[catalog_id]
        cat = None
        path = self.catalog_paths.get(catalog_id)
        if path is not None:
            try:
                cat = open_catalog(path)
                if cat.catalog_id != catalog_id:
                    cat = None
            except (OSError, ValueError) as exc:
                logger.info("look-alikes: catalog %s at %s not available (%s)", catalog_id,
                            path, exc)
        self._catalogs[catalog_id] = cat
        if cat is not None:
            self._rows[catalog_id] = _row_map(cat)
        return cat

    def _trace(self, catalog_id, event_id):
        cat = self._catalog(catalog_id)
        if cat is None:
            return None
        row = self._rows[catalog_id].get(event_id)
        if row is None:
            return None
        tr = pulse_trace(cat, row)          # the analysed span, as the features saw it
        t, e = reduce_points(tr["time_s"], tr["field_v_per_m"], MAX_TRACE_POINTS)
        return {"time_s": compact(t, 6), "field_v_per_m": compact(e, 4)}

    def _standardised(self, rows):
        missing = [r for r in rows if r not in self._z]
        if missing:
            for r, z in zip(missing, standardised_features(self.results, rows=missing,
                                                                stats=self._stats)):
                self._z[r] = z
        return np.array([self._z[r] for r in rows])

    def _ranked(self, event_id):
        """Every candidate, nearest first: (catalog_id, event_id, label, distance) lists."""
        i = self._res_row[event_id]
        if self.model is not None:
            ref = self._ref
            X = model_inputs(self.model, self.results.iloc[[i]])
            idx, dist = self.model.nearest_labelled(X, k=len(ref))
            idx, dist = np.asarray(idx)[0], np.asarray(dist)[0]
            keep = idx >= 0
            idx, dist = idx[keep], dist[keep]
            return (ref["catalog_id"].to_numpy(dtype=str)[idx],
                    ref["event_id"].to_numpy(dtype=str)[idx],
                    ref["label"].to_numpy(dtype=str)[idx], dist)
        cand = [(e, self._res_row[e]) for e in self._labels
                if e != event_id and e in self._res_row]
        if not cand:
            return [], [], [], []
        rows = np.array([r for _, r in cand])
        z, zi = self._standardised(rows), self._standardised(np.array([i]))[0]
        d = np.sqrt(((z - zi) ** 2).sum(axis=1) / max(z.shape[1], 1))
        order = np.argsort(d, kind="stable")
        ids = [cand[j][0] for j in order]
        return ([self.catalog.catalog_id] * len(ids), ids, [self._labels[e] for e in ids],
                d[order])

    def find(self, event_id: str, classes) -> list[dict]:
        """The look-alikes of ``event_id`` for each class of ``classes``.

        Returns
        -------
        list of dict
            One per class, in the order given: ``class`` and ``items``, a list
            (nearest first, at most ``k``; empty when no labelled pulse of that
            class exists) of dicts with ``catalog_id``, ``event_id``,
            ``label``, ``distance`` and ``trace`` (``time_s``,
            ``field_v_per_m``; None when the catalog cannot be opened).
        """
        cids, eids, labels, dist = self._ranked(str(event_id))
        groups = []
        for c in classes:
            picks = [j for j, lab in enumerate(labels) if lab == c][: self.k]
            items = []
            for j in picks:
                dj = float(dist[j])
                items.append({"catalog_id": str(cids[j]), "event_id": str(eids[j]),
                              "label": str(labels[j]),
                              "distance": dj if math.isfinite(dj) else None,
                              "trace": self._trace(str(cids[j]), str(eids[j]))})
            groups.append({"class": c, "items": items})
        return groups


def _row_map(cat) -> dict:
    return {e: i for i, e in enumerate(map(str, cat.event_ids))}


def store_labels(store, catalog_ids=None) -> pd.DataFrame:
    """The labelled events of the store (catalog_id, event_id, label)."""
    cur = store.current_labels(catalog_ids, status="labelled")
    return cur[["catalog_id", "event_id", "label"]]


def find_model(results: pd.DataFrame, model_dir=None, registry="models"):
    """The model behind a results table, for the look-alikes: ``(model, card)`` or ``(None, None)``.

    ``model_dir`` wins; otherwise the results' ``model_version`` is looked up
    in the model registry at ``registry``. Rules-mode results (``rules-<n>``)
    have no model. A model that cannot be found is not an error (the strip
    then uses the store's labels), but one that fails verification is.
    """
    from classify.registry import ModelRegistry, load_model

    if model_dir is not None:
        return load_model(model_dir)
    versions = sorted(set(results.get("model_version", pd.Series([], dtype=str))
                          .dropna().astype(str)))
    if len(versions) != 1 or versions[0].startswith("rules-"):
        return None, None
    try:
        folder = ModelRegistry(registry).resolve(versions[0])
    except (FileNotFoundError, ValueError) as exc:
        logger.warning("model %s not found (%s); look-alikes come from the label store",
                       versions[0], exc)
        return None, None
    return load_model(folder)


def card_catalog_paths(card) -> dict:
    """catalog_id -> path of a model card's training catalogs."""
    out = {}
    for c in (card or {}).get("training_catalogs", []) or []:
        if isinstance(c, dict) and c.get("catalog_id") and c.get("path"):
            out[str(c["catalog_id"])] = c["path"]
    return out
