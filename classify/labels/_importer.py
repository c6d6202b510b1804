"""Read and validate a labels file (catalog spec v1, "Labels file") before any write.

Columns: ``event_id`` and ``label`` are required; ``analyst``, ``decided_at``
(ISO-8601; without an offset it is UTC) and ``note`` are optional. Files written
by ``pulsesort labels export`` also carry ``catalog_id``, ``origin``,
``model_version`` and ``confidence``, so that an export round-trips; those are
accepted too. Any other column is refused (a misspelt ``analyst`` or
``decided_at`` would otherwise be silently dropped).

Rules: every problem in the file is reported at once (file and line) and
nothing is imported unless every row is good. Two rows for the same event and
analyst are a duplicate unless both give different ``decided_at`` times (a
history file may hold an analyst's label and its later retraction). An empty
``analyst`` cell takes ``--analyst``; an empty ``decided_at`` takes the time
of the file's first import (so a re-import adds nothing). A row with origin
``retract`` has an empty label.

Every cell is read as text, exactly as written: ids such as ``NA`` or ``007``
stay as they are. A UTF-8 byte-order mark and Windows line ends are accepted. The file is read with the standard :mod:`csv` module so that
every problem can name its true line, even where a quoted note spans lines.
"""

from __future__ import annotations

import csv
import hashlib
import io
from dataclasses import dataclass
from pathlib import Path

from features._checks import InputError, Problems, describe_path_kind

from ._values import (
    ORIGINS,
    STANDARD_CLASSES,
    check_confidence,
    check_name,
    check_text,
    parse_time,
)

REQUIRED_COLUMNS = ("event_id", "label")
OPTIONAL_COLUMNS = ("analyst", "decided_at", "note", "catalog_id", "origin",
                    "model_version", "confidence")
#: Column order of the files that ``labels export`` writes.
EXPORT_COLUMNS = ("catalog_id", "event_id", "label", "analyst", "decided_at", "note",
                  "origin", "model_version", "confidence")

MAX_PROBLEMS_PER_KIND = 200


@dataclass(frozen=True)
class LabelRow:
    """One validated row of a labels file."""

    line: int
    event_id: str
    label: str | None          # None only for a retraction
    analyst: str
    decided_at: str | None     # store timestamp, or None: use the import's time
    origin: str
    note: str | None
    model_version: str | None
    confidence: float | None


@dataclass(frozen=True)
class LabelsFile:
    """A labels file that passed validation."""

    path: Path
    sha256: str
    rows: tuple[LabelRow, ...]


def read_labels_file(path, *, catalog_id: str, event_ids, classes, analyst=None) -> LabelsFile:
    """Validate a whole labels file against a catalog and a class list.

    Parameters
    ----------
    path : str or os.PathLike
        The CSV file.
    catalog_id : str
        The catalog the labels are for; a ``catalog_id`` column must match it.
    event_ids : set of str
        The catalog's event ids.
    classes : collection of str
        The store's class names.
    analyst : str or None
        The analyst of rows whose ``analyst`` cell is missing or empty.

    Returns
    -------
    LabelsFile

    Raises
    ------
    features.InputError
        If the file is missing or not a regular file, or listing every bad row as
        ``FILE:LINE: problem``, one per line.
    """
    path = Path(path)
    kind = describe_path_kind(path)
    if kind is not None:
        raise InputError(f"{path}: no such labels file" if kind == "missing" else
                         f"{path}: is {kind}, not a labels file")
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise InputError(f"{path}: cannot be read ({exc.strerror or exc})") from None
    sha = "sha256:" + hashlib.sha256(data).hexdigest()
    if data.startswith(b"\xef\xbb\xbf"):  # a UTF-8 byte-order mark (spreadsheet export)
        data = data[3:]
    text = data.decode("utf-8", errors="surrogateescape")
    where = str(path)
    problems = Problems(max_per_key=MAX_PROBLEMS_PER_KIND)
    if analyst is not None:
        check_name(analyst, "--analyst")

    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    try:
        header = next(reader)
    except StopIteration:
        raise InputError(f"{where}: the file is empty; expected a header row "
                         f"with at least {', '.join(REQUIRED_COLUMNS)}") from None
    except csv.Error as exc:
        raise InputError(f"{where}:1: cannot read the header row: {exc}") from None
    columns = [h.strip() for h in header]
    _check_header(columns, where, problems)
    if problems:
        raise InputError(problems.items)
    col = {name: i for i, name in enumerate(columns)}
    classes = set(classes)

    rows: list[LabelRow] = []
    first_line: dict[tuple, int] = {}
    n_bad = 0
    line = reader.line_num + 1
    while True:
        try:
            cells = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            problems.add(f"{where}:{line}: not valid CSV: {exc}", "csv")
            n_bad += 1
            break  # the reader cannot resynchronise after a CSV syntax error
        start, line = line, reader.line_num + 1
        if not cells:
            continue  # a blank line
        row, key, msgs = _check_row(cells, start, col, len(columns), catalog_id, event_ids,
                                    classes, analyst)
        if key is not None:
            if key in first_line:
                msgs.append(("duplicate", f"duplicate of line {first_line[key]} (same "
                             f"event_id, analyst and decided_at)"))
                row = None
            else:
                first_line[key] = start
        for kind, msg in msgs:
            problems.add(f"{where}:{start}: {msg}", kind)
        if msgs:
            n_bad += 1
        elif row is not None:
            rows.append(row)
    if problems:
        problems.summarise()
        head = (f"{where}: {n_bad} bad row(s); nothing was imported "
                f"(fix every row listed and import again):")
        raise InputError([head, *problems.items])
    return LabelsFile(path=path, sha256=sha, rows=tuple(rows))


def check_labels_file(path, catalog, *, classes=None, analyst=None) -> LabelsFile:
    """Validate a labels file for ``catalog`` without touching any store.

    ``classes`` defaults to the four standard classes (those of a new store).
    Raises :class:`features.InputError` listing every bad row, like
    :meth:`LabelStore.import_labels`.
    """
    if classes is None:
        classes = [name for name, _ in STANDARD_CLASSES]
    return read_labels_file(path, catalog_id=catalog.catalog_id,
                            event_ids=set(map(str, catalog.event_ids)), classes=classes,
                            analyst=analyst)


def _check_header(columns, where, problems) -> None:
    known = REQUIRED_COLUMNS + OPTIONAL_COLUMNS
    for name in REQUIRED_COLUMNS:
        if name not in columns:
            problems.add(f"{where}:1: required column {name!r} is missing "
                         f"(header: {', '.join(map(repr, columns))})")
    seen = set()
    for name in columns:
        if _has_surrogates(name):
            problems.add(f"{where}:1: the header is not UTF-8 text")
        elif name in seen:
            problems.add(f"{where}:1: column {name!r} appears twice")
        elif name not in known:
            problems.add(f"{where}:1: unknown column {name!r}; a labels file has the "
                         f"columns {', '.join(known)}")
        seen.add(name)


def _check_row(cells, line, col, n_columns, catalog_id, event_ids, classes, default_analyst):
    """Return (LabelRow or None, duplicate key or None, [(kind, message), ...])."""
    if any(_has_surrogates(c) for c in cells):
        return None, None, [("utf8", "not UTF-8 text (the file must be saved as UTF-8)")]
    if len(cells) != n_columns:
        return None, None, [("fields", f"expected {n_columns} fields as in the header, "
                                       f"found {len(cells)}")]
    msgs: list[tuple[str, str]] = []

    def get(name):
        return cells[col[name]] if name in col else ""

    event_id = get("event_id")
    if event_id == "":
        msgs.append(("event_id", "event_id is empty"))
    elif event_id not in event_ids:
        msgs.append(("event_id", f"unknown event_id {_show(event_id)}: not an event of "
                                 f"catalog {catalog_id!r}"))
    cid = get("catalog_id")
    if cid not in ("", catalog_id):
        msgs.append(("catalog_id", f"row is for catalog {_show(cid)}, but the labels are "
                                   f"being imported into catalog {catalog_id!r}"))
    origin = get("origin") or "import"
    if origin not in ORIGINS:
        msgs.append(("origin", f"unknown origin {_show(origin)}; expected one of "
                               f"{', '.join(ORIGINS)}"))
    label = get("label")
    if origin == "retract":
        if label != "":
            msgs.append(("label", f"a retraction (origin 'retract') has an empty label, "
                                  f"got {_show(label)}"))
    elif label == "":
        msgs.append(("label", "label is empty"))
    elif label not in classes:
        msgs.append(("label", f"unknown label {_show(label)}; known classes: "
                              f"{', '.join(sorted(classes))} (add one with "
                              f"'pulsesort labels classes add NAME --description TEXT')"))
    analyst = get("analyst") or default_analyst
    if analyst is None:
        msgs.append(("analyst", "no analyst: add an 'analyst' column or pass --analyst NAME"))
    else:
        try:
            check_name(analyst, "analyst")
        except ValueError as exc:
            msgs.append(("analyst", str(exc)))
    decided_at = None
    if get("decided_at") != "":
        try:
            decided_at = parse_time(get("decided_at"))
        except ValueError as exc:
            msgs.append(("decided_at", f"decided_at: {exc}"))
    note = get("note") or None
    model_version = get("model_version") or None
    confidence = None
    try:
        if note is not None:
            check_text(note, "note", allow_newlines=True)
        if model_version is not None:
            check_name(model_version, "model_version")
        if get("confidence") != "":
            confidence = check_confidence(get("confidence"))
    except ValueError as exc:
        msgs.append(("text", str(exc)))
    key = None if analyst is None or event_id == "" else (event_id, analyst, decided_at)
    if msgs:
        return None, key, msgs
    row = LabelRow(line=line, event_id=event_id, label=label or None, analyst=analyst,
                   decided_at=decided_at, origin=origin, note=note,
                   model_version=model_version, confidence=confidence)
    return row, key, msgs


def _has_surrogates(text: str) -> bool:
    return any("\udc80" <= ch <= "\udcff" for ch in text)


def _show(text: str, n: int = 80) -> str:
    return repr(text if len(text) <= n else text[:n] + "...")
