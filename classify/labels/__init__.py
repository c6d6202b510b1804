"""The labelled-set manager: analysts' decisions in an SQLite store, with provenance.

This package is the only place in pulsesort that holds SQL (always with bound
parameters). Later steps (training, review, retraining) use its Python API::

    from classify.labels import LabelStore
    store = LabelStore("labels.sqlite")          # opens, creates or upgrades
    store.import_labels("wren.csv", cat)         # all rows or none
    y = store.current_labels(["hollowmere-2031"], status="labelled")
    store.rename_class("recoil", "k_change", analyst="wren", note="our term")
    store.classes()                              # visible classes, stable order

Store
-----
One SQLite file (default ``labels.sqlite`` in the working folder, or
``$PULSESORT_STORE``; ``--store PATH`` on every command). WAL journal, foreign
keys on, every write one ``BEGIN IMMEDIATE`` transaction with a busy timeout,
so several processes can write at once. Tables: ``catalogs`` (id, station,
season, path, content hash of manifest + events table, event count, when
registered), ``events`` (the event ids of each catalog), ``classes`` (name,
description, when added), ``class_events`` (the group's changes to its class
set: add, rename, hide, show, merge; see :mod:`classify.labels._classes`),
``import_batches`` (file, SHA-256, when) and ``decisions`` (plus ``review_marks``, the review page's "unsure"/"skip" marks,
created on first use). Decisions are append-only: triggers refuse UPDATE and DELETE,
a retraction is a new row whose label is NULL. ``schema_version`` records the
schema; an older store is upgraded in place after a backup (see
:mod:`classify.labels._schema`).

A decision: catalog_id, event_id, label (NULL for a retraction), analyst,
decided_at (UTC), origin (``import``, ``review``, ``rule``,
``model-accepted``, ``resolve``, ``retract``), note, model_version and
confidence (the model the analyst was looking at, if any), import batch.

Current-label rule
------------------
Every label is first mapped to the class it stands for now (through renames
and merges); the decision keeps the label it was made with. Then, for each
(catalog, event):

1. Take every analyst's latest decision (by ``decided_at``, ties broken by
   the order of recording), leaving resolutions aside. A retraction as an
   analyst's latest decision means that analyst has no label on the event.
2. If the event's latest resolution is newer than every analyst's latest
   decision (retractions included), its label is the current label
   (status ``labelled``, ``resolved`` true).
3. Otherwise, if the analysts with a standing label all agree, that label is
   the current label (``labelled``); if they disagree, the event is
   ``conflict`` and has no training label until someone resolves it; if
   nobody has a standing label it is ``unlabelled``.

So a new decision by any analyst after a resolution reopens the question if
it disagrees, and the resolver withdraws a resolution by retracting it.
"""

from ._importer import EXPORT_COLUMNS, check_labels_file
from ._query import STATUSES
from ._schema import SCHEMA_VERSION
from ._store import DEFAULT_STORE, DIRECT_ORIGINS, STORE_ENV, LabelStore, default_store_path
from ._values import ORIGINS, STANDARD_CLASSES
from ._writes import ImportReport, same_content

__all__ = [
    "DEFAULT_STORE",
    "DIRECT_ORIGINS",
    "EXPORT_COLUMNS",
    "ORIGINS",
    "SCHEMA_VERSION",
    "STANDARD_CLASSES",
    "STATUSES",
    "STORE_ENV",
    "ImportReport",
    "check_labels_file",
    "LabelStore",
    "default_store_path",
    "same_content",
]
