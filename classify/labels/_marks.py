"""Review marks: what the review page records when an analyst does not label a pulse.

``unsure`` and ``skip`` take a pulse out of that analyst's review queue;
``withdrawn`` takes the analyst's standing mark back. Marks are not labels
(the current labels never depend on them) and, like decisions, are
append-only. Their table (:data:`classify.labels._schema.REVIEW_MARKS_DDL`) is
created by the first mark, so stores without marks have none.
"""

from __future__ import annotations

import pandas as pd

from features import InputError

from . import _query, _schema, _writes
from ._values import check_confidence, check_name, check_text, utc_now

COLUMNS = ["mark_id", "catalog_id", "event_id", "analyst", "mark", "note", "model_version",
           "confidence", "marked_at"]


def record(con, store_path, catalog_id, event_id, mark, *, analyst, note=None,
           model_version=None, confidence=None) -> int:
    """Validate and append one mark (the caller holds the write transaction); return its id."""
    if mark not in _schema.REVIEW_MARKS:
        raise InputError(f"mark must be one of {', '.join(_schema.REVIEW_MARKS)}, "
                         f"got {mark!r}")
    check_name(analyst, "analyst")
    if note is not None:
        check_text(note, "note", allow_newlines=True)
    if model_version is not None:
        check_name(model_version, "model_version")
    confidence = check_confidence(confidence)
    _writes.check_event(con, store_path, catalog_id, event_id)
    for stmt in _schema._statements(_schema.REVIEW_MARKS_DDL):
        con.execute(stmt)
    if mark == "withdrawn":
        last = con.execute(
            "SELECT mark FROM review_marks WHERE catalog_id = ? AND event_id = ?"
            " AND analyst = ? ORDER BY mark_id DESC LIMIT 1",
            (catalog_id, event_id, analyst)).fetchone()
        if last is None or last[0] == "withdrawn":
            raise InputError(f"analyst {analyst!r} has no review mark on event "
                             f"{event_id!r} of catalog {catalog_id!r} to withdraw")
    cur = con.execute(
        "INSERT INTO review_marks (catalog_id, event_id, analyst, mark, note,"
        " model_version, confidence, marked_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
        (catalog_id, event_id, analyst, mark, note, model_version, confidence, utc_now()))
    return int(cur.lastrowid)


def marks(con, catalog_ids=None, *, analyst=None, history=False) -> pd.DataFrame:
    """Each analyst's standing mark per event, or every mark (``history``), in recorded order."""
    where, params = _query._in("catalog_id", catalog_ids)
    if analyst is not None:
        where += " AND analyst = ?"
        params.append(analyst)
    if not con.execute("SELECT 1 FROM sqlite_master WHERE type = 'table'"
                       " AND name = 'review_marks'").fetchone():
        rows = []
    elif history:
        rows = con.execute(f"SELECT {', '.join(COLUMNS)} FROM review_marks WHERE {where}"
                           " ORDER BY mark_id", params).fetchall()
    else:
        rows = con.execute(
            f"SELECT {', '.join(COLUMNS)} FROM review_marks m WHERE {where}"
            " AND mark != 'withdrawn' AND mark_id = (SELECT MAX(mark_id) FROM"
            " review_marks l WHERE l.catalog_id = m.catalog_id"
            " AND l.event_id = m.event_id AND l.analyst = m.analyst)"
            " ORDER BY mark_id", params).fetchall()
    df = pd.DataFrame(rows, columns=COLUMNS, dtype=object)
    df["mark_id"] = df["mark_id"].astype("int64")
    df["confidence"] = df["confidence"].astype("float64")
    df["marked_at"] = pd.to_datetime(df["marked_at"], utc=True, format="ISO8601")
    return df
