"""Write side of the label store: registration, decisions, import batches.

Functions take an open connection inside the caller's ``BEGIN IMMEDIATE``
transaction; they validate what they write and raise ``InputError`` with a
message naming the value, so that the transaction rolls back whole.
"""

from __future__ import annotations

import logging
import os
import sqlite3
import time
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path

from features import InputError

from . import _classes
from ._values import check_name, check_text, parse_time, utc_now

logger = logging.getLogger("pulsesort")

#: Testing hook: ``"N:MARKER"`` makes an import pause (sleep) inside its open
#: transaction after inserting N rows, once it has created the file MARKER.
#: Used to kill a process in the middle of an import; never set it otherwise.
PAUSE_ENV = "PULSESORT_TEST_IMPORT_PAUSE"


@dataclass(frozen=True)
class ImportReport:
    """What :meth:`LabelStore.import_labels` did.

    Attributes
    ----------
    path : pathlib.Path
        The labels file.
    catalog_id : str
    source_sha256 : str
        ``"sha256:<hex>"`` of the file's bytes (recorded with its batch).
    batch_id : int or None
        The import batch; None when nothing was new.
    n_rows : int
        Rows in the file.
    n_added : int
        Decisions added.
    n_present : int
        Rows already in the store (a re-import adds nothing).
    registered : bool
        True if this import registered the catalog.
    """

    path: Path
    catalog_id: str
    source_sha256: str
    batch_id: int | None
    n_rows: int
    n_added: int
    n_present: int
    registered: bool


def same_content(recorded_hash: str, catalog) -> bool:
    """Whether a hash recorded in the store is ``catalog``'s.

    Stores written before the content hash covered the waveform files recorded
    the hash of the manifest and events table only; such a row is accepted
    through ``catalog.legacy_content_hash`` (an immutable row is never rewritten,
    so both hashes stay valid for it).
    """
    hashes = getattr(catalog, "content_hashes", None) or (catalog.content_hash,)
    return recorded_hash in hashes


def register(con, store_path, catalog) -> bool:
    """Register ``catalog`` (or check it is the one registered); True if new."""
    cid = check_name(catalog.catalog_id, "catalog_id")
    path = str(Path(catalog.path).resolve())
    row = con.execute("SELECT content_hash, path FROM catalogs WHERE catalog_id = ?",
                      (cid,)).fetchone()
    if row is not None:
        if not same_content(row[0], catalog):
            raise InputError(
                f"catalog {cid!r} at {path} is not the catalog registered under that id "
                f"in {store_path} (registered from {row[1]} with content hash {row[0]}; "
                f"this one has {catalog.content_hash}). Seasons must not be mixed: "
                f"give the new catalog its own catalog_id")
        if row[1] != path:
            con.execute("UPDATE catalogs SET path = ? WHERE catalog_id = ?", (path, cid))
            logger.info("catalog %s: path updated to %s", cid, path)
        return False
    ids = [str(e) for e in catalog.event_ids]
    con.execute("INSERT INTO catalogs (catalog_id, station, season, path, content_hash,"
                " n_events, registered_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
                (cid, catalog.station, catalog.season, path, catalog.content_hash,
                 len(ids), utc_now()))
    try:
        con.executemany("INSERT INTO events (catalog_id, event_id, row_index)"
                        " VALUES (?, ?, ?)", ((cid, e, i) for i, e in enumerate(ids)))
    except sqlite3.IntegrityError:
        raise InputError(f"catalog {cid!r}: event ids are not unique") from None
    logger.info("catalog %s: registered (%d events)", cid, len(ids))
    return True


def check_event(con, store_path, catalog_id, event_id) -> None:
    """Raise ``InputError`` unless the event belongs to a registered catalog."""
    if con.execute("SELECT 1 FROM events WHERE catalog_id = ? AND event_id = ?",
                   (catalog_id, event_id)).fetchone():
        return
    if not con.execute("SELECT 1 FROM catalogs WHERE catalog_id = ?",
                       (catalog_id,)).fetchone():
        raise InputError(f"catalog {catalog_id!r} is not registered in {store_path}")
    raise InputError(f"event {event_id!r} is not an event of catalog {catalog_id!r}")


def insert(con, store_path, catalog_id, event_id, label, analyst, origin, note, decided_at,
           *, model_version=None, confidence=None) -> int:
    """Validate and append one decision; return its id (or an identical stored one's)."""
    check_name(analyst, "analyst")
    if note is not None:
        check_text(note, "note", allow_newlines=True)
    check_event(con, store_path, catalog_id, event_id)
    if label is not None:
        states = _classes.load(con)
        if label not in states:
            known = ", ".join(_classes.in_use(states, include_hidden=True))
            raise InputError(f"unknown label {label!r}; known classes: {known}")
        _classes.check_in_use(states, label, store_path, "label")  # a retired name
    # A retraction or resolution must be newer than what it overrides.
    if origin == "resolve":
        prev = con.execute("SELECT MAX(decided_at) FROM decisions WHERE catalog_id = ?"
                           " AND event_id = ?", (catalog_id, event_id)).fetchone()[0]
    elif origin == "retract":
        prev = con.execute("SELECT MAX(decided_at) FROM decisions WHERE catalog_id = ?"
                           " AND event_id = ? AND analyst = ?",
                           (catalog_id, event_id, analyst)).fetchone()[0]
    else:
        prev = None
    if decided_at is None:
        at = utc_now()
        if prev is not None and at <= prev:  # clock behind a stored time
            at = _after(prev)
    else:
        at = parse_time(decided_at)
        if prev is not None and at <= prev:
            raise InputError(f"decided_at {at} is not after the latest decision it "
                             f"overrides ({prev})")
    same = con.execute(
        "SELECT decision_id, label FROM decisions WHERE catalog_id = ? AND event_id = ?"
        " AND analyst = ? AND decided_at = ?", (catalog_id, event_id, analyst, at)).fetchall()
    for did, lab in same:
        if lab == label:
            return int(did)
    if same:
        raise InputError(f"analyst {analyst!r} already has another decision on event "
                         f"{event_id!r} at {at} (decision #{same[0][0]})")
    cur = con.execute(
        "INSERT INTO decisions (catalog_id, event_id, label, analyst, decided_at, origin,"
        " note, model_version, confidence, batch_id, recorded_at)"
        " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, NULL, ?)",
        (catalog_id, event_id, label, analyst, at, origin, note, model_version,
         confidence, utc_now()))
    return int(cur.lastrowid)


def import_rows(con, parsed, cid, analyst, registered) -> ImportReport:
    """Append a validated labels file as one batch (the caller holds the transaction)."""
    prior = con.execute("SELECT default_decided_at FROM import_batches WHERE catalog_id = ?"
                        " AND source_sha256 = ? ORDER BY batch_id LIMIT 1",
                        (cid, parsed.sha256)).fetchone()
    now = utc_now()
    default_at = prior[0] if prior else now
    con.execute("SAVEPOINT batch")
    bid = con.execute(
        "INSERT INTO import_batches (catalog_id, source_path, source_sha256, default_analyst,"
        " default_decided_at, imported_at, n_rows, n_added) VALUES (?, ?, ?, ?, ?, ?, ?, 0)",
        (cid, str(parsed.path.resolve()), parsed.sha256, analyst, default_at, now,
         len(parsed.rows))).lastrowid
    pause = _pause_hook()
    clashes, added = [], 0
    for i, r in enumerate(parsed.rows):
        if pause is not None and i == pause[0]:
            _pause(pause[1])
        at = r.decided_at or default_at
        cur = con.execute(
            "INSERT INTO decisions (catalog_id, event_id, label, analyst, decided_at,"
            " origin, note, model_version, confidence, batch_id, recorded_at)"
            " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?) ON CONFLICT DO NOTHING",
            (cid, r.event_id, r.label, r.analyst, at, r.origin, r.note, r.model_version,
             r.confidence, bid, now))
        if cur.rowcount == 1:
            added += 1
            other = con.execute(
                "SELECT decision_id, label FROM decisions WHERE catalog_id = ?"
                " AND event_id = ? AND analyst = ? AND decided_at = ?"
                " AND decision_id != ?", (cid, r.event_id, r.analyst, at,
                                          cur.lastrowid)).fetchone()
            if other is not None:
                clashes.append(f"{parsed.path}:{r.line}: analyst {r.analyst!r} already "
                               f"has decision #{other[0]} ({other[1]!r}) on event "
                               f"{r.event_id!r} at {at}")
    if clashes:
        raise InputError("\n".join([f"{parsed.path}: {len(clashes)} row(s) contradict "
                                    "the store; nothing was imported:", *clashes[:200]]))
    if added:
        con.execute("UPDATE import_batches SET n_added = ? WHERE batch_id = ?", (added, bid))
        con.execute("RELEASE batch")
    else:
        con.execute("ROLLBACK TO batch")
        con.execute("RELEASE batch")
        bid = None
    return ImportReport(path=parsed.path, catalog_id=cid, source_sha256=parsed.sha256,
                        batch_id=bid, n_rows=len(parsed.rows), n_added=added,
                        n_present=len(parsed.rows) - added, registered=registered)


def _after(stamp: str) -> str:
    """The store timestamp one microsecond after ``stamp``."""
    dt = datetime.strptime(stamp, "%Y-%m-%dT%H:%M:%S.%fZ").replace(tzinfo=timezone.utc)
    return (dt + timedelta(microseconds=1)).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def _pause_hook():
    spec = os.environ.get(PAUSE_ENV)
    if not spec:
        return None
    n, _, marker = spec.partition(":")
    return int(n), marker


def _pause(marker: str) -> None:  # pragma: no cover - runs in a process that gets killed
    Path(marker).write_text("paused inside the import transaction\n")
    time.sleep(3600)
