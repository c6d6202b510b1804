"""The label store's SQLite schema, its versions and the upgrade path.

Schema history
--------------
v1
    catalogs, events, classes (name, description), import_batches, and the
    append-only decisions table (no ``model_version``/``confidence``).
v2
    adds ``decisions.model_version`` and ``decisions.confidence`` (a decision
    made while looking at a model's output records that model and its
    probability) and ``classes.added_at`` (NULL for classes added before v2:
    the time is unknown).
v3 (current)
    adds ``class_events``, the append-only history of a group's own class set
    (add, rename, hide, show, merge; who, when, why). A class's status and the
    class its name maps to now are derived from that history at query time
    (:mod:`classify.labels._classes`); decisions keep the label they were made
    with. A v2 store gets an empty history: every class visible, as before.

An older store is upgraded in place when opened, after a consistent copy of it
is written to ``<store>.v<N>.bak``. Every migration runs in one transaction.
"""

from __future__ import annotations

import logging
import sqlite3
from pathlib import Path

from features import InputError

from ._values import ORIGINS, STANDARD_CLASSES, utc_now

logger = logging.getLogger("pulsesort")

SCHEMA_VERSION = 3

_ORIGIN_LIST = ", ".join(f"'{o}'" for o in ORIGINS)

# Tables common to every version; kept verbatim so that a v1 store can be
# recreated (tests) and so that the history of the schema is readable here.
_TABLES_V1 = f"""
CREATE TABLE schema_version (
    version     INTEGER PRIMARY KEY,
    applied_at  TEXT NOT NULL
);
CREATE TABLE catalogs (
    catalog_id    TEXT PRIMARY KEY CHECK (length(catalog_id) > 0),
    station       TEXT,
    season        TEXT,
    path          TEXT NOT NULL,
    content_hash  TEXT NOT NULL,
    n_events      INTEGER NOT NULL CHECK (n_events >= 0),
    registered_at TEXT NOT NULL
);
CREATE TABLE events (
    catalog_id  TEXT NOT NULL REFERENCES catalogs(catalog_id),
    event_id    TEXT NOT NULL,
    row_index   INTEGER NOT NULL,
    PRIMARY KEY (catalog_id, event_id)
) WITHOUT ROWID;
CREATE TABLE classes (
    name         TEXT PRIMARY KEY,
    description  TEXT NOT NULL
);
CREATE TABLE import_batches (
    batch_id            INTEGER PRIMARY KEY AUTOINCREMENT,
    catalog_id          TEXT NOT NULL REFERENCES catalogs(catalog_id),
    source_path         TEXT NOT NULL,
    source_sha256       TEXT NOT NULL,
    default_analyst     TEXT,
    default_decided_at  TEXT NOT NULL,
    imported_at         TEXT NOT NULL,
    n_rows              INTEGER NOT NULL,
    n_added             INTEGER NOT NULL
);
CREATE TABLE decisions (
    decision_id  INTEGER PRIMARY KEY AUTOINCREMENT,
    catalog_id   TEXT NOT NULL,
    event_id     TEXT NOT NULL,
    label        TEXT REFERENCES classes(name),
    analyst      TEXT NOT NULL CHECK (length(analyst) > 0),
    decided_at   TEXT NOT NULL,
    origin       TEXT NOT NULL CHECK (origin IN ({_ORIGIN_LIST})),
    note         TEXT,
    batch_id     INTEGER REFERENCES import_batches(batch_id),
    recorded_at  TEXT NOT NULL,
    FOREIGN KEY (catalog_id, event_id) REFERENCES events(catalog_id, event_id),
    CHECK ((label IS NULL) = (origin = 'retract'))
);
"""

_INDEXES_AND_TRIGGERS = """
CREATE UNIQUE INDEX decisions_identity
    ON decisions(catalog_id, event_id, analyst, decided_at, IFNULL(label, ''));
CREATE INDEX decisions_by_analyst ON decisions(analyst, decision_id);
CREATE INDEX import_batches_by_file ON import_batches(catalog_id, source_sha256);
CREATE TRIGGER decisions_no_update BEFORE UPDATE ON decisions
BEGIN SELECT RAISE(ABORT, 'decisions are append-only: record a new decision instead'); END;
CREATE TRIGGER decisions_no_delete BEFORE DELETE ON decisions
BEGIN SELECT RAISE(ABORT, 'decisions are append-only: record a retraction instead'); END;
CREATE TRIGGER events_no_update BEFORE UPDATE ON events
BEGIN SELECT RAISE(ABORT, 'the events of a registered catalog cannot change'); END;
CREATE TRIGGER events_no_delete BEFORE DELETE ON events
BEGIN SELECT RAISE(ABORT, 'the events of a registered catalog cannot change'); END;
CREATE TRIGGER catalogs_no_delete BEFORE DELETE ON catalogs
BEGIN SELECT RAISE(ABORT, 'a registered catalog cannot be removed'); END;
CREATE TRIGGER catalogs_same_content BEFORE UPDATE OF catalog_id, content_hash ON catalogs
BEGIN SELECT RAISE(ABORT, 'a registered catalog keeps its id and content hash'); END;
CREATE TRIGGER classes_no_delete BEFORE DELETE ON classes
BEGIN SELECT RAISE(ABORT, 'classes cannot be removed'); END;
"""

#: The complete DDL of a version-1 store (without its version row).
SCHEMA_V1 = _TABLES_V1 + _INDEXES_AND_TRIGGERS

_V1_TO_V2 = """
ALTER TABLE decisions ADD COLUMN model_version TEXT;
ALTER TABLE decisions ADD COLUMN confidence REAL
    CHECK (confidence IS NULL OR (confidence >= 0.0 AND confidence <= 1.0));
ALTER TABLE classes ADD COLUMN added_at TEXT;
"""

#: What a class event does (see :mod:`classify.labels._classes`).
CLASS_ACTIONS = ("add", "rename", "hide", "show", "merge")

_V2_TO_V3 = f"""
CREATE TABLE class_events (
    class_event_id  INTEGER PRIMARY KEY AUTOINCREMENT,
    action          TEXT NOT NULL CHECK (action IN ({", ".join(f"'{a}'" for a in CLASS_ACTIONS)})),
    name            TEXT NOT NULL REFERENCES classes(name),
    target          TEXT REFERENCES classes(name),
    analyst         TEXT CHECK (analyst IS NULL OR length(analyst) > 0),
    note            TEXT,
    at              TEXT NOT NULL,
    CHECK ((target IS NULL) = (action IN ('add', 'hide', 'show'))),
    CHECK (target IS NULL OR target != name)
);
CREATE TRIGGER class_events_no_update BEFORE UPDATE ON class_events
BEGIN SELECT RAISE(ABORT, 'class events are append-only'); END;
CREATE TRIGGER class_events_no_delete BEFORE DELETE ON class_events
BEGIN SELECT RAISE(ABORT, 'class events are append-only'); END;
CREATE TRIGGER classes_same_name BEFORE UPDATE OF name ON classes
BEGIN SELECT RAISE(ABORT, 'a class keeps its name: rename it with a class event'); END;
"""

#: What the review page records when an analyst looks at a pulse without
#: labelling it: ``unsure``, ``skip``, or ``withdrawn`` (takes the analyst's
#: standing mark on the event back). Not labels, so not in ``decisions``;
#: append-only like them. The table is created by the first mark (a store
#: without marks has none), so it needs no schema version of its own.
REVIEW_MARKS = ("unsure", "skip", "withdrawn")
REVIEW_MARKS_DDL = f"""
CREATE TABLE IF NOT EXISTS review_marks (
    mark_id       INTEGER PRIMARY KEY AUTOINCREMENT,
    catalog_id    TEXT NOT NULL,
    event_id      TEXT NOT NULL,
    analyst       TEXT NOT NULL CHECK (length(analyst) > 0),
    mark          TEXT NOT NULL CHECK (mark IN ({", ".join(f"'{m}'" for m in REVIEW_MARKS)})),
    note          TEXT,
    model_version TEXT,
    confidence    REAL CHECK (confidence IS NULL OR (confidence >= 0.0 AND confidence <= 1.0)),
    marked_at     TEXT NOT NULL,
    FOREIGN KEY (catalog_id, event_id) REFERENCES events(catalog_id, event_id)
);
CREATE INDEX IF NOT EXISTS review_marks_by_event
    ON review_marks(catalog_id, event_id, analyst, mark_id);
CREATE TRIGGER IF NOT EXISTS review_marks_no_update BEFORE UPDATE ON review_marks
BEGIN SELECT RAISE(ABORT, 'review marks are append-only'); END;
CREATE TRIGGER IF NOT EXISTS review_marks_no_delete BEFORE DELETE ON review_marks
BEGIN SELECT RAISE(ABORT, 'review marks are append-only'); END;
"""

#: Statements that take a store from version N to N + 1.
MIGRATIONS = {1: _V1_TO_V2, 2: _V2_TO_V3}

TABLES = ("schema_version", "catalogs", "events", "classes", "import_batches", "decisions",
          "class_events")


def connect(path: Path, timeout_s: float) -> sqlite3.Connection:
    """Open a connection in autocommit mode (transactions are explicit), WAL, FKs on."""
    try:
        con = sqlite3.connect(str(path), timeout=timeout_s, isolation_level=None)
    except sqlite3.DatabaseError as exc:  # e.g. a folder without write permission
        raise InputError(f"{path}: cannot be opened as a pulsesort label store ({exc})"
                         ) from None
    try:
        con.execute(f"PRAGMA busy_timeout = {int(timeout_s * 1000)}")
        con.execute("PRAGMA foreign_keys = ON")
        mode = con.execute("PRAGMA journal_mode = WAL").fetchone()[0]
        if str(mode).lower() != "wal":
            raise InputError(f"{path}: could not switch the label store to WAL mode "
                             f"(journal mode is {mode!r}); is it on a network drive?")
        # FULL: a committed decision survives a power cut, not only a crash.
        con.execute("PRAGMA synchronous = FULL")
    except sqlite3.DatabaseError as exc:
        con.close()
        raise InputError(f"{path}: cannot be opened as a pulsesort label store ({exc})") from None
    except BaseException:
        con.close()
        raise
    return con


def current_version(con: sqlite3.Connection, path: Path) -> int | None:
    """The store's schema version; None for an empty database file."""
    names = {r[0] for r in con.execute(
        "SELECT name FROM sqlite_master WHERE type = 'table'")}
    if not names:
        return None
    if "schema_version" not in names:
        raise InputError(f"{path}: this SQLite file is not a pulsesort label store "
                         f"(it has no schema_version table)")
    row = con.execute("SELECT MAX(version) FROM schema_version").fetchone()
    if row[0] is None:
        raise InputError(f"{path}: the label store's schema_version table is empty")
    return int(row[0])


def create(con: sqlite3.Connection) -> None:
    """Create a current-version store (the caller holds a write transaction)."""
    now = utc_now()
    for stmt in _statements(SCHEMA_V1 + _V1_TO_V2 + _V2_TO_V3):
        con.execute(stmt)
    con.execute("INSERT INTO schema_version (version, applied_at) VALUES (?, ?)",
                (SCHEMA_VERSION, now))
    con.executemany("INSERT INTO classes (name, description, added_at) VALUES (?, ?, ?)",
                    [(n, d, now) for n, d in STANDARD_CLASSES])


def backup(con: sqlite3.Connection, path: Path, version: int) -> Path:
    """Write a consistent copy of the store to ``<store>.v<version>.bak``; return its path.

    Call it outside any transaction on ``con`` (the backup takes its own
    snapshot); an existing backup is never overwritten.
    """
    target = _backup_path(path, version)
    dst = sqlite3.connect(str(target))
    try:
        con.backup(dst)
    finally:
        dst.close()
    logger.info("label store %s: schema v%d backed up to %s", path, version, target)
    return target


def migrate(con: sqlite3.Connection, path: Path, version: int) -> None:
    """Migrate a store from ``version`` to :data:`SCHEMA_VERSION`.

    The caller holds a write transaction (``BEGIN IMMEDIATE``) on ``con``: the
    whole upgrade is applied or none of it.
    """
    now = utc_now()
    for v in range(version, SCHEMA_VERSION):
        for stmt in _statements(MIGRATIONS[v]):
            con.execute(stmt)
        con.execute("INSERT INTO schema_version (version, applied_at) VALUES (?, ?)",
                    (v + 1, now))
    logger.info("label store %s: upgraded from schema v%d to v%d",
                path, version, SCHEMA_VERSION)


def _backup_path(path: Path, version: int) -> Path:
    backup = path.with_name(f"{path.name}.v{version}.bak")
    k = 2
    while backup.exists():  # never overwrite an earlier backup
        backup = path.with_name(f"{path.name}.v{version}.bak.{k}")
        k += 1
    return backup


def _statements(script: str) -> list[str]:
    """Split a DDL script into statements (``executescript`` would commit)."""
    out, buf = [], []
    for line in script.strip().splitlines():
        buf.append(line)
        text = "\n".join(buf).strip()
        if text.endswith(";") and sqlite3.complete_statement(text):
            out.append(text)
            buf = []
    if "\n".join(buf).strip():
        raise AssertionError("incomplete statement in schema script")
    return out
