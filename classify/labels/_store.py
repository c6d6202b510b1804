"""The :class:`LabelStore`: opening, upgrading and writing the SQLite label store."""

from __future__ import annotations

import contextlib
import logging
import os
import sqlite3
from pathlib import Path

import pandas as pd

from features import InputError
from features._checks import describe_path_kind

from . import _classes, _export, _marks, _query, _schema, _writes
from ._classes import ClassesMixin
from ._importer import read_labels_file
from ._values import check_confidence, check_name
from ._writes import ImportReport

logger = logging.getLogger("pulsesort")

DEFAULT_STORE = "labels.sqlite"
STORE_ENV = "PULSESORT_STORE"
#: Origins that :meth:`LabelStore.record_decision` accepts (the others have
#: their own methods: import_labels, resolve, retract).
DIRECT_ORIGINS = ("review", "rule", "model-accepted")


def default_store_path() -> Path:
    """``$PULSESORT_STORE`` if set, else ``labels.sqlite`` in the working folder."""
    return Path(os.environ.get(STORE_ENV) or DEFAULT_STORE)


class LabelStore(ClassesMixin):
    """Analysts' decisions in an SQLite file: append-only, with provenance.

    Parameters
    ----------
    path : str or os.PathLike or None
        The store file; None means :func:`default_store_path`.
    create : bool, default=True
        Create the store if the file does not exist (else :class:`features.InputError`
        naming the path). Commands that only read labels pass False.
    timeout_s : float, default=60.0
        How long a writer waits for another process's write to finish, in seconds.

    Notes
    -----
    The class-set methods (``classes``, ``class_table``, ``add_class``,
    ``rename_class``, ``hide_class``, ``show_class``, ``merge_classes``...) are
    documented in :mod:`classify.labels._classes`.

    Opening a store written by an older schema upgrades it in place after a
    backup copy ``<store>.v<N>.bak``. Every write is one ``BEGIN IMMEDIATE``
    transaction: it either happens whole or not at all, and concurrent writers
    (other processes) wait for each other.

    Examples
    --------
    >>> import tempfile
    >>> from classify import LabelStore
    >>> with LabelStore(tempfile.mkdtemp() + "/labels.sqlite") as store:
    ...     store.classes()
    ['narrow_bipolar', 'stepped_leader', 'recoil', 'energetic_in_cloud']

    Labels come in with ``store.import_labels(csv_path, catalog)`` or
    ``store.record_decision(...)``; ``store.current_labels([catalog_id])`` gives what
    the analysts decided, one row per pulse.
    """

    def __init__(self, path=None, *, create: bool = True, timeout_s: float = 60.0):
        self.path = Path(path) if path is not None else default_store_path()
        kind = describe_path_kind(self.path)
        if kind == "missing":
            if not create:
                raise InputError(
                    f"{self.path}: no label store here (import labels first, or pass "
                    f"--store PATH / set ${STORE_ENV})")
            parent = describe_path_kind(self.path.parent)
            if parent != "a folder":
                raise InputError(f"{self.path}: cannot create a label store here: its folder "
                                 f"{self.path.parent} is {'missing' if parent == 'missing' else parent}")
        elif kind is not None:
            raise InputError(f"{self.path}: is {kind}; --store names a label store file")
        self._con = _schema.connect(self.path, timeout_s)
        try:
            with self._read():
                version = _schema.current_version(self._con, self.path)
            if version != _schema.SCHEMA_VERSION:
                self._prepare(version)
        except sqlite3.DatabaseError as exc:
            self._con.close()
            raise InputError(f"{self.path}: cannot be used as a pulsesort label store "
                             f"({exc})") from None
        except BaseException:
            self._con.close()
            raise

    def _prepare(self, version: int | None) -> None:
        """Create or upgrade the schema, under the write lock (another process may race)."""
        if version is not None and version > _schema.SCHEMA_VERSION:
            raise InputError(
                f"{self.path}: written by a newer pulsesort (schema v{version}; "
                f"this one knows up to v{_schema.SCHEMA_VERSION}); upgrade pulsesort")
        if version is not None:  # older: copy it first, outside the write transaction
            _schema.backup(self._con, self.path, version)
        with self._write():
            version = _schema.current_version(self._con, self.path)
            if version is None:
                _schema.create(self._con)
                logger.info("label store %s: created (schema v%d)", self.path,
                            _schema.SCHEMA_VERSION)
            elif version < _schema.SCHEMA_VERSION:
                _schema.migrate(self._con, self.path, version)

    # ------------------------------------------------------------------ plumbing

    def close(self) -> None:
        """Close the connection (the store stays consistent on disk)."""
        self._con.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def __repr__(self):
        return f"LabelStore({str(self.path)!r})"

    @contextlib.contextmanager
    def _write(self):
        self._con.execute("BEGIN IMMEDIATE")
        try:
            yield self._con
        except BaseException:
            self._con.execute("ROLLBACK")
            raise
        else:
            self._con.execute("COMMIT")

    @contextlib.contextmanager
    def _read(self):
        self._con.execute("BEGIN")
        try:
            yield self._con
        finally:
            self._con.execute("COMMIT")

    @property
    def schema_version(self) -> int:
        """The schema version of the open store."""
        with self._read() as con:
            return _schema.current_version(con, self.path)

    def tables(self) -> list[str]:
        """Names of the store's tables."""
        with self._read() as con:
            return sorted(r[0] for r in con.execute(
                "SELECT name FROM sqlite_master WHERE type = 'table'"
                " AND name NOT LIKE 'sqlite_%'"))

    def check_integrity(self) -> list[str]:
        """SQLite's integrity and foreign-key checks; an empty list means all is well."""
        with self._read() as con:
            out = [r[0] for r in con.execute("PRAGMA integrity_check")]
            out = [] if out == ["ok"] else out
            out += [f"foreign key: {tuple(r)}" for r in con.execute("PRAGMA foreign_key_check")]
            missing = set(_schema.TABLES) - {r[0] for r in con.execute(
                "SELECT name FROM sqlite_master WHERE type = 'table'")}
            out += [f"missing table {t}" for t in sorted(missing)]
        return out

    # ------------------------------------------------------------------ catalogs

    def register_catalog(self, catalog) -> str:
        """Record a catalog (id, station, season, path, content hash, event ids).

        Registering the same catalog again does nothing (its path is updated
        if it moved). A different catalog under an id already registered is
        refused: seasons must not be mixed up.

        Returns
        -------
        str
            The catalog id.
        """
        with self._write() as con:
            _writes.register(con, self.path, catalog)
        return catalog.catalog_id

    def catalogs(self) -> pd.DataFrame:
        """The registered catalogs, one row each."""
        with self._read() as con:
            rows = con.execute("SELECT catalog_id, station, season, n_events, content_hash,"
                               " path, registered_at FROM catalogs ORDER BY catalog_id")
            return pd.DataFrame(rows.fetchall(), columns=[
                "catalog_id", "station", "season", "n_events", "content_hash", "path",
                "registered_at"])

    # ------------------------------------------------------------------ decisions

    def record_decision(self, catalog_id, event_id, label, *, analyst, origin, note=None,
                        model_version=None, confidence=None, decided_at=None) -> int:
        """Append one analyst's decision on one event.

        Parameters
        ----------
        catalog_id, event_id : str
            A registered catalog and one of its events.
        label : str
            A class of the store.
        analyst : str
            Who decided (a person, or a rule's name for ``origin="rule"``).
        origin : {"review", "rule", "model-accepted"}
            How the decision was made.
        note : str, optional
            Free text, stored verbatim.
        model_version : str, optional
            The model whose output the analyst saw (required for ``model-accepted``).
        confidence : float, optional
            That model's probability for ``label``, in [0, 1].
        decided_at : str or datetime, optional
            ISO-8601 (UTC when no offset is given); default: now.

        Returns
        -------
        int
            The decision id. Recording a decision identical to one already
            stored (same event, analyst, label and ``decided_at``) adds nothing
            and returns the stored one's id, so a retried write is harmless.
        """
        if origin not in DIRECT_ORIGINS:
            raise InputError(f"origin must be one of {', '.join(DIRECT_ORIGINS)}, got "
                             f"{origin!r} (use import_labels, resolve or retract for the others)")
        if model_version is None and origin == "model-accepted":
            raise InputError("a 'model-accepted' decision needs the model_version")
        if model_version is not None:
            check_name(model_version, "model_version")
        confidence = check_confidence(confidence)
        with self._write() as con:
            return _writes.insert(con, self.path, catalog_id, event_id, label, analyst, origin, note,
                                decided_at, model_version=model_version, confidence=confidence)

    def retract(self, catalog_id, event_id, *, analyst, note=None, decided_at=None) -> int:
        """Withdraw ``analyst``'s label on an event (a new row; nothing is deleted).

        Returns the retraction's decision id. Refused when the analyst has no
        label (or resolution) on the event to withdraw.
        """
        with self._write() as con:
            check_name(analyst, "analyst")
            _writes.check_event(con, self.path, catalog_id, event_id)
            last = con.execute(
                "SELECT label FROM decisions WHERE catalog_id = ? AND event_id = ?"
                " AND analyst = ? ORDER BY decided_at DESC, decision_id DESC LIMIT 1",
                (catalog_id, event_id, analyst)).fetchone()
            if last is None or last[0] is None:
                raise InputError(f"analyst {analyst!r} has no label on event {event_id!r} of "
                                 f"catalog {catalog_id!r} to retract")
            return _writes.insert(con, self.path, catalog_id, event_id, None, analyst, "retract", note,
                                decided_at)

    def resolve(self, catalog_id, event_id, label, *, analyst, note=None,
                decided_at=None) -> int:
        """Settle an event in conflict (or re-settle a resolved one) with ``label``.

        The resolution is the current label until any analyst decides on the
        event again. Returns the decision id.
        """
        with self._write() as con:
            _writes.check_event(con, self.path, catalog_id, event_id)
            cur = _query.rule(_query.latest(con, event=(catalog_id, event_id)))
            if cur.empty or not (cur["status"].iat[0] == "conflict" or cur["resolved"].iat[0]):
                state = "unlabelled" if cur.empty else cur["status"].iat[0]
                raise InputError(
                    f"event {event_id!r} of catalog {catalog_id!r} is not in conflict "
                    f"(status: {state}); record an ordinary decision instead")
            return _writes.insert(con, self.path, catalog_id, event_id, label, analyst, "resolve", note,
                                decided_at)

    def undo_last(self, analyst, *, catalog_id=None, note=None) -> int:
        """Retract ``analyst``'s most recently recorded decision that still stands.

        The analyst's label on that event is withdrawn (an earlier label of
        theirs is not restored). Returns the retraction's decision id.
        """
        check_name(analyst, "analyst")
        where, params = ("AND d.catalog_id = ?", [catalog_id]) if catalog_id else ("", [])
        with self._write() as con:
            row = con.execute(
                "SELECT d.decision_id, d.catalog_id, d.event_id FROM decisions d"
                " WHERE d.analyst = ? AND d.origin != 'retract' " + where +
                " AND NOT EXISTS (SELECT 1 FROM decisions r WHERE r.analyst = d.analyst"
                "  AND r.catalog_id = d.catalog_id AND r.event_id = d.event_id"
                "  AND r.origin = 'retract' AND r.decision_id > d.decision_id)"
                " ORDER BY d.decision_id DESC LIMIT 1", [analyst, *params]).fetchone()
            if row is None:
                raise InputError(f"analyst {analyst!r} has no decision to undo")
            text = f"undo of decision #{row[0]}" + (f": {note}" if note else "")
            return _writes.insert(con, self.path, row[1], row[2], None, analyst, "retract", text, None)

    def record_review_mark(self, catalog_id, event_id, mark, *, analyst, note=None,
                           model_version=None, confidence=None) -> int:
        """Record that ``analyst`` looked at an event on the review page without labelling it.

        Parameters
        ----------
        catalog_id, event_id : str
            A registered catalog and one of its events.
        mark : {"unsure", "skip", "withdrawn"}
            ``withdrawn`` takes back the analyst's standing mark on the event.
        analyst : str
        note : str, optional
        model_version : str, optional
            The model whose output the analyst saw.
        confidence : float, optional
            That model's probability for its top class, in [0, 1].

        Returns
        -------
        int
            The mark id. Marks are append-only (never a label: the current
            labels do not change); see :meth:`review_marks`.
        """
        with self._write() as con:
            return _marks.record(con, self.path, catalog_id, event_id, mark, analyst=analyst,
                                 note=note, model_version=model_version,
                                 confidence=confidence)

    def review_marks(self, catalog_ids=None, *, analyst=None, history=False) -> pd.DataFrame:
        """Review marks: each analyst's standing one per event, or every mark (``history``).

        A standing mark is an analyst's latest mark on an event unless it is
        ``withdrawn``. Columns: mark_id, catalog_id, event_id, analyst, mark,
        note, model_version, confidence, marked_at (UTC); in recorded order.
        """
        with self._read() as con:
            return _marks.marks(con, catalog_ids, analyst=analyst, history=history)

    # ------------------------------------------------------------------ import / export

    def import_labels(self, csv_path, catalog, analyst=None) -> ImportReport:
        """Import a labels file for ``catalog``: all rows or none.

        Every row is checked first (unknown event_id or label, malformed time,
        duplicate rows, missing analyst, non-UTF-8 text); any problem raises an
        :class:`features.InputError` listing every bad row
        and the store is left unchanged. Rows already in the store are
        skipped, so importing the same file twice adds nothing the second time
        (rows without ``decided_at`` get the time of the file's first import).

        Parameters
        ----------
        csv_path : str or os.PathLike
            The labels file (catalog spec v1, "Labels file").
        catalog : features.Catalog
            The catalog the labels are for (registered if it is not yet).
        analyst : str, optional
            The analyst of rows that do not name one.
        """
        path = Path(csv_path)
        with self._read() as con:
            row = con.execute("SELECT content_hash FROM catalogs WHERE catalog_id = ?",
                              (catalog.catalog_id,)).fetchone()
            classes = [r[0] for r in con.execute("SELECT name FROM classes")]
        if row is not None and not _writes.same_content(row[0], catalog):
            with self._write() as con:
                _writes.register(con, self.path, catalog)  # raises the "seasons mixed" error
        parsed = read_labels_file(path, catalog_id=catalog.catalog_id,
                                  event_ids=set(map(str, catalog.event_ids)),
                                  classes=classes, analyst=analyst)
        with self._write() as con:
            registered = _writes.register(con, self.path, catalog)
            report = _writes.import_rows(con, parsed, catalog.catalog_id, analyst, registered)
            retired = _classes.label_map(con)
        old = sorted({r.label for r in parsed.rows if r.label in retired})
        if old:
            logger.warning("%s: %d row(s) use retired class names; they count for the class "
                           "each stands for now: %s", path,
                           sum(r.label in retired for r in parsed.rows),
                           ", ".join(f"{n} -> {retired[n]}" for n in old))
        logger.debug("%s: %d rows, %d added, %d already in the store", path, report.n_rows,
                    report.n_added, report.n_present)
        return report

    def export_labels(self, out, catalog_id=None, *, history: bool = False) -> int:
        """Write current labels (or every decision) as a labels file; return the row count.

        The file has the columns of :data:`EXPORT_COLUMNS` and imports back
        (``labels import``) to the same current labels. Current labels are
        the decisions that carry them: each agreeing analyst's latest decision,
        or the resolution. The file is written to a temporary name and renamed.
        """
        with self._read() as con:
            dec = _export.export_frame(con, self.path, catalog_id, history)
        _export.write_csv(Path(out), dec)
        return len(dec)

    # ------------------------------------------------------------------ queries

    def current_labels(self, catalog_ids=None, *, status=None) -> pd.DataFrame:
        """The current label of every registered event (see the rule in :mod:`classify.labels`).

        Parameters
        ----------
        catalog_ids : list of str, optional
            Catalogs to include (default: all).
        status : str or list of str, optional
            Keep only these statuses (``labelled``, ``conflict``, ``unlabelled``).

        Returns
        -------
        pandas.DataFrame
            Columns catalog_id, event_id, label (the current class, mapped through
            renames and merges; None unless labelled), label_as_decided (the label
            of the deciding decision as it was recorded: the resolution's, or the
            newest agreeing analyst's), status, resolved (bool), resolved_by,
            n_analysts, analysts (tuple of names with a standing label),
            decided_at (UTC, of that decision); catalog row order.
        """
        with self._read() as con:
            return _query.current_labels(con, catalog_ids, status)

    def decisions(self, catalog_ids=None) -> pd.DataFrame:
        """Every decision (the full, append-only history), in recorded order."""
        with self._read() as con:
            return _query.decisions(con, catalog_ids)

    def history(self, event_id, catalog_id=None) -> pd.DataFrame:
        """Every decision on ``event_id`` (in every catalog unless ``catalog_id``)."""
        with self._read() as con:
            return _query.decisions(con, None if catalog_id is None else [catalog_id],
                                    event_id=event_id)

    def conflicts(self, catalog_ids=None, *, long: bool = False) -> pd.DataFrame:
        """Events in conflict, one row each: n_analysts, labels, votes, decided_at.

        With ``long=True``, one row per analyst's standing label on each such
        event (catalog_id, event_id, analyst, label, decided_at, decision_id).
        """
        with self._read() as con:
            return _query.conflicts(con, catalog_ids, long)

    def agreement(self, catalog_ids=None) -> pd.DataFrame:
        """Analyst pairs: n_common, n_agree, agreement, Cohen's kappa."""
        with self._read() as con:
            return _query.agreement(con, catalog_ids)

    def stats(self, catalog_ids=None) -> dict[str, pd.DataFrame]:
        """Counts: ``catalogs`` (by status), ``classes`` (per catalog), ``analysts``."""
        with self._read() as con:
            classes = _classes.in_use(_classes.load(con), include_hidden=True)
            return _query.stats(con, classes, catalog_ids)

    def import_batches(self, catalog_ids=None) -> pd.DataFrame:
        """The import batches (file, hash, when, rows added) of some or all catalogs."""
        where, params = _query._in("catalog_id", catalog_ids)
        with self._read() as con:
            rows = con.execute(
                "SELECT batch_id, catalog_id, source_path, source_sha256, default_analyst,"
                " imported_at, n_rows, n_added FROM import_batches WHERE " + where +
                " ORDER BY batch_id", params).fetchall()
        return pd.DataFrame(rows, columns=["batch_id", "catalog_id", "source_path",
                                           "source_sha256", "default_analyst", "imported_at",
                                           "n_rows", "n_added"])
