"""The look-alikes strip: the labelled pulses nearest to the one under review.

With a model, its own reference set of labelled training pulses and its
distance (``model.nearest_labelled``) are used. Without one (rules mode), the
label store's labelled pulses of the same catalog are compared in the
standardised model-feature space of the results file (the space of the
queue's diversity pass, :func:`classify.review._queue.standardised_features`);
the distance shown is then the root-mean-square difference of the standardised
features. A thumbnail of each look-alike's field change is drawn when its
catalog can be opened (its path as registered in the label store).
"""

from __future__ import annotations

import logging
import math

import numpy as np
import pandas as pd

from features import open_catalog

from ._pulse import thumbnail_svg
from ._queue import feature_stats, standardised_features

logger = logging.getLogger("pulsesort")

__all__ = ["LookAlikes"]


class LookAlikes:
    """Find the ``k`` labelled pulses nearest to a pulse of a results table.

    Parameters
    ----------
    results : pandas.DataFrame
        The triage results of ``catalog`` (catalog order not required).
    catalog : features.catalog.Catalog
    labels : pandas.DataFrame
        Current labels (``catalog_id``, ``event_id``, ``label``) of the store.
    catalog_paths : dict of str -> path, optional
        Where other catalogs live (for thumbnails of a model's reference pulses).
    model : object, optional
        A fitted pulsesort model (``reference_``, ``nearest_labelled``).
    k : int, default=5
    """

    def __init__(self, results, catalog, labels, *, catalog_paths=None, model=None, k=5):
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

    def _thumb(self, catalog_id, event_id):
        cat = self._catalog(catalog_id)
        if cat is None:
            return None
        row = self._rows[catalog_id].get(event_id)
        return None if row is None else thumbnail_svg(cat, row)

    def _standardised(self, rows):
        missing = [r for r in rows if r not in self._z]
        if missing:
            for r, z in zip(missing, standardised_features(self.results, rows=missing,
                                                                stats=self._stats)):
                self._z[r] = z
        return np.array([self._z[r] for r in rows])

    def find(self, event_id: str) -> list[dict]:
        """The look-alikes of ``event_id``: dicts of catalog_id, event_id, label, distance, thumb.

        An empty list means there are no labelled pulses to compare with.
        """
        event_id = str(event_id)
        i = self._res_row[event_id]
        if self.model is not None:
            ref = self.model.reference_
            names = list(getattr(self.model, "feature_names_in_", self.results.columns))
            X = self.results.iloc[[i]][names].apply(pd.to_numeric, errors="coerce")
            idx, dist = self.model.nearest_labelled(X.astype(float), k=self.k)
            picks = [(str(ref["catalog_id"].iat[j]), str(ref["event_id"].iat[j]),
                      str(ref["label"].iat[j]), float(d))
                     for j, d in zip(np.asarray(idx)[0], np.asarray(dist)[0]) if j >= 0]
        else:
            cand = [(e, self._res_row[e]) for e in self._labels
                    if e != event_id and e in self._res_row]
            if not cand:
                return []
            rows = np.array([r for _, r in cand])
            z, zi = self._standardised(rows), self._standardised(np.array([i]))[0]
            d = np.sqrt(((z - zi) ** 2).sum(axis=1) / max(z.shape[1], 1))
            order = np.argsort(d, kind="stable")[: self.k]
            cid = self.catalog.catalog_id
            picks = [(cid, cand[j][0], self._labels[cand[j][0]], float(d[j])) for j in order]
        out = []
        for cid, eid, label, dist in picks:
            out.append({"catalog_id": cid, "event_id": eid, "label": label,
                        "distance": dist if math.isfinite(dist) else None,
                        "thumb": self._thumb(cid, eid)})
        return out


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
