"""One analyst's review session: the queue, the decisions, undo (no HTTP here).

Every decision is written to the label store the moment it is made, so a
closed page or a stopped server loses nothing; the next session's queue leaves
out what was decided (see :mod:`classify.review._queue`).

What each action writes (all with the analyst, the UTC time, the model version
of the results row and the model's probability):

``label``
    ``LabelStore.record_decision(..., origin="review", confidence=p_<label>)``:
    the probability the page showed for the chosen class (None if the model
    has no such class). A model trained before the store renamed or merged
    classes has ``p_`` columns under the old names: the class's probability is
    then the sum over the model classes that map to it (the probability of
    their union).
``unsure`` / ``skip``
    ``LabelStore.record_review_mark(..., mark)`` with the model's confidence in
    its own top label: a review mark, not a label (no class is invented for
    "unsure"); the pulse leaves this analyst's queue.
``undo``
    Withdraws this session's last action: a retraction of the label
    (``LabelStore.retract``) or a ``withdrawn`` mark. Nothing is deleted.
"""

from __future__ import annotations

import logging
import math
import threading
from collections import OrderedDict

import pandas as pd

from classify.labels import LabelStore
from features import InputError

from ._help import REVIEW_REASONS, priority_parts, priority_rule
from ._lookalike import LookAlikes, lookalike_classes, store_labels
from ._pulse import pulse_view
from ._queue import build_queue, probability_columns
from ._sources import flash_codes

logger = logging.getLogger("pulsesort")

__all__ = ["ReviewSession", "OutOfTurn", "ACTIONS", "MAX_NOTE_CHARS"]

ACTIONS = ("label", "unsure", "skip")
MAX_NOTE_CHARS = 2000
UNDO_NOTE = "undone on the review page"
_KEYS = "123456789"


class OutOfTurn(ValueError):
    """A decision on a pulse that is not the one to decide now (double click, stale page)."""


class ReviewSession:
    """The state behind the review page of one analyst on one catalog.

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results (booleans parsed) of ``catalog``.
    catalog : features.catalog.Catalog
    store_path : path
        The label store (created if missing; the catalog is registered in it).
    analyst : str
    budget : int, optional
        Queue at most this many pulses.
    model : object, optional
        The model behind the results (for the look-alikes).
    catalog_paths : dict, optional
        Extra catalog_id -> folder (e.g. a model card's training catalogs).
    revisit : bool, default=False
        Queue again the pulses this analyst marked unsure or skipped before.
    n_lookalikes : int, default=3
        Look-alikes shown per class.
    trace : callable, optional
        ``trace(catalog, row) -> dict`` giving a pulse's record with the keys of
        :data:`classify.review._trace.TRACE_KEYS` (``features.trace.pulse_trace``
        has that signature); default :func:`classify.review._trace.record_trace`.
    attributions : callable, optional
        ``attributions(result_row) -> [(feature, contribution), ...]`` or None:
        why the model chose its class, shown as a bar chart ("not available
        for this model" without it). ``pulsesort review`` passes
        :func:`classify.commands.review.model_attributions` of the model behind
        the results (its largest feature contributions,
        :func:`classify.explain.explain_pulses`).
    """

    def __init__(self, results, catalog, store_path, analyst, *, budget=None, model=None,
                 catalog_paths=None, revisit=False, n_lookalikes=3, trace=None,
                 attributions=None):
        if not isinstance(analyst, str) or not analyst.strip() or analyst != analyst.strip():
            raise InputError(f"--analyst must be a non-empty name without surrounding "
                             f"spaces, got {analyst!r}")
        cid = catalog.catalog_id
        if "catalog_id" in results.columns:
            other = sorted(set(results["catalog_id"].astype(str)) - {cid})
            if other:
                raise InputError(f"the results are of catalog(s) {', '.join(other)}, not of "
                                 f"the catalog given ({cid} at {catalog.path})")
        rows = {e: i for i, e in enumerate(map(str, catalog.event_ids))}
        unknown = [e for e in results["event_id"].astype(str) if e not in rows]
        if unknown:
            raise InputError(f"{len(unknown)} event id(s) of the results are not in catalog "
                             f"{cid} at {catalog.path}, e.g. {unknown[0]!r}: were the results "
                             "made from another catalog?")
        self.results = results.reset_index(drop=True)
        self.catalog = catalog
        self.store_path = store_path
        self.analyst = analyst
        self._rows = rows
        with LabelStore(store_path) as store:
            store.register_catalog(catalog)
            self.classes = store.classes()  # the visible classes, in the store's order
            class_map = store.class_map()
            self.queue = build_queue(self.results, store, cid, budget, analyst=analyst,
                                     revisit=revisit)
            labels = store_labels(store, None if model is not None else [cid])
            paths = dict(zip(store.catalogs()["catalog_id"], store.catalogs()["path"]))
        paths.update(catalog_paths or {})
        self.lookalikes = LookAlikes(self.results, catalog, labels, catalog_paths=paths,
                                     model=model, k=n_lookalikes)
        self.trace = trace
        self.attributions = attributions
        self._flash_codes = flash_codes(catalog) if catalog.sources is not None else None
        self._lock = threading.RLock()
        self._done: dict[str, dict] = {}
        self._history: list[dict] = []
        self._views: OrderedDict[str, dict] = OrderedDict()
        self._queue_ids = list(self.queue["event_id"].astype(str))
        self._class_map = class_map
        # the results' probability columns that count for each store class
        self._p_columns = {c: [col for col in probability_columns(self.results)
                               if class_map.get(col[2:], col[2:]) == c] for c in self.classes}
        logger.info("review of %s by %s: %d pulses queued", cid, analyst, len(self.queue))

    # ------------------------------------------------------------------ reading

    @property
    def n_queued(self) -> int:
        return len(self._queue_ids)

    @property
    def n_reviewed(self) -> int:
        return len(self._history)

    def info(self) -> dict:
        """Session facts for the page header (JSON-ready)."""
        versions = sorted(set(self.queue.get("model_version", pd.Series([], dtype=str))
                              .dropna().astype(str)))
        return {"analyst": self.analyst, "catalog_id": self.catalog.catalog_id,
                "station": self.catalog.station, "season": self.catalog.season,
                "classes": [{"name": c, "key": _KEYS[i] if i < len(_KEYS) else None}
                            for i, c in enumerate(self.classes)],
                "model_versions": versions, "lookalike_source": self.lookalikes.source,
                "n_queued": self.n_queued, "n_reviewed": self.n_reviewed,
                "reasons": dict(REVIEW_REASONS), "priority_rule": priority_rule()}

    def _current_index(self):
        for i, e in enumerate(self._queue_ids):
            if e not in self._done:
                return i
        return None

    def _view(self, i: int) -> dict:
        eid = self._queue_ids[i]
        if eid not in self._views:
            res = self.queue.iloc[i]
            view = pulse_view(self.catalog, self._rows[eid], res, classes=self.classes,
                              trace=self.trace, flash_codes=self._flash_codes)
            view["queue_rank"] = int(res["queue_rank"])
            view["queue"] = priority_parts(res["priority"], res["uncertainty"],
                                           res["novelty_rank"])
            m = view["model"]
            wanted = lookalike_classes(m["prediction_set"], [(p["class"], p["p"]) for p in
                                                             m["probabilities"]])
            if self.lookalikes.source == "store":  # labels in the store's current classes
                wanted = list(dict.fromkeys(self._class_map.get(c, c) for c in wanted))
            view["lookalikes"] = self.lookalikes.find(eid, wanted)
            view["why"] = _attributions(self.attributions, res)
            self._views[eid] = view
            while len(self._views) > 8:
                self._views.popitem(last=False)
        return self._views[eid]

    def current(self) -> dict:
        """The pulse to decide now (``done`` when the queue is empty), with the counters."""
        with self._lock:
            i = self._current_index()
            last = self._history[-1] if self._history else None
            out = {"done": i is None, "n_queued": self.n_queued,
                   "n_reviewed": self.n_reviewed, "position": i,
                   "last": None if last is None else {k: last[k] for k in (
                       "event_id", "action", "label", "note")}}
            if i is not None:
                out["pulse"] = self._view(i)
            return out

    # ------------------------------------------------------------------ writing

    def _row(self, event_id):
        return self.queue.iloc[self._queue_ids.index(event_id)]

    def decide(self, event_id, action, label=None, note=None) -> dict:
        """Record a decision on the current pulse; return :meth:`current` after it.

        Raises
        ------
        ValueError
            Unknown action or label, a note too long, or ``event_id`` not the
            pulse on screen (a second click, or a stale page).
        """
        if action not in ACTIONS:
            raise InputError(f"action must be one of {', '.join(ACTIONS)}, got {action!r}")
        if note is not None and not isinstance(note, str):
            raise InputError("note must be text")
        note = (note or "").strip() or None
        if note is not None and len(note) > MAX_NOTE_CHARS:
            raise InputError(f"note is longer than {MAX_NOTE_CHARS} characters")
        if action == "label" and label not in self.classes:
            raise InputError(f"unknown class {label!r}; classes: {', '.join(self.classes)}")
        with self._lock:
            i = self._current_index()
            if i is None or self._queue_ids[i] != event_id:
                raise OutOfTurn(f"event {event_id!r} is not the pulse to decide now "
                                 "(already decided, or the page is out of date: reload it)")
            res = self._row(event_id)
            version = str(res.get("model_version") or "").strip() or None
            cid = self.catalog.catalog_id
            with LabelStore(self.store_path) as store:
                if action == "label":
                    conf = self._class_probability(res, label)
                    did = store.record_decision(cid, event_id, label, analyst=self.analyst,
                                                origin="review", note=note,
                                                model_version=version, confidence=conf)
                else:
                    conf = _num(res.get("confidence"))
                    did = store.record_review_mark(cid, event_id, action, analyst=self.analyst,
                                                   note=note, model_version=version,
                                                   confidence=conf)
            act = {"event_id": event_id, "action": action,
                   "label": label if action == "label" else None, "note": note, "id": did,
                   "confidence": conf}
            self._done[event_id] = act
            self._history.append(act)
            if action == "label":
                self.lookalikes.set_label(event_id, label)
                self._views.clear()  # look-alikes of the next pulses may change
            logger.info("review: %s %s %s", event_id, action, label or "")
            return self.current()

    def _class_probability(self, res, label):
        """The model's probability of store class ``label`` (None if no model class maps to it)."""
        values = [_num(res.get(col)) for col in self._p_columns.get(label, [])]
        values = [v for v in values if v is not None]
        return min(1.0, sum(values)) if values else None

    def undo(self) -> dict:
        """Withdraw this session's last decision; that pulse is on screen again."""
        with self._lock:
            if not self._history:
                raise InputError("nothing to undo in this session")
            act = self._history[-1]
            cid, eid = self.catalog.catalog_id, act["event_id"]
            with LabelStore(self.store_path) as store:
                if act["action"] == "label":
                    store.retract(cid, eid, analyst=self.analyst, note=UNDO_NOTE)
                else:
                    store.record_review_mark(cid, eid, "withdrawn", analyst=self.analyst,
                                             note=UNDO_NOTE)
            self._history.pop()
            del self._done[eid]
            if act["action"] == "label":
                self.lookalikes.set_label(eid, None)
                self._views.clear()
            logger.info("review: undid %s on %s", act["action"], eid)
            return self.current()


def _attributions(fn, res):
    """``fn(res)`` as ``[[feature, contribution], ...]`` (finite numbers), or None."""
    if fn is None:
        return None
    pairs = fn(res)
    if pairs is None:
        return None
    out = []
    for name, value in pairs:
        v = _num(value)
        if v is not None:
            out.append([str(name), v])
    return out or None


def _num(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None
