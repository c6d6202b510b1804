"""A group's own class set: add, rename, hide, show and merge classes, history kept.

The store's ``classes`` table holds every name a class ever had (rows are never
removed or renamed); ``class_events`` (schema v3) is the append-only history of
what happened to them, with who, when and why. A class's status and the class
its name stands for now are derived from that history, in order:

``add``
    a new class, visible.
``hide`` / ``show``
    a hidden class is not offered on the review page and its labelled pulses
    are left out of training; its labels stay in the store.
``rename`` (name -> target)
    ``target`` takes the place of ``name``: same description (unless a new one
    is given), same status, same position in the class order; ``name`` is
    retired (status ``renamed``) and maps to ``target``. Renaming a class back
    to a retired name that maps to it revives that name (an undo).
``merge`` (name -> target)
    ``name`` is retired (status ``merged``) and maps to ``target``.

Decisions are append-only and keep the label they were made with; every query
maps a label through these events to its current class (``current_labels``
gives both). A retired name cannot be used for a new decision (the error names
its successor), but a labels file that uses one imports (its rows count for
the successor), so that exports made before a rename import again.

The class order is stable: the order in which classes were added, a renamed
class keeping its predecessor's place.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import pandas as pd

from features import InputError

from ._values import check_class_name, check_name, check_text, utc_now

logger = logging.getLogger("pulsesort")

#: Statuses of a class name: the two of a class in use, the two of a retired name.
CLASS_STATUSES = ("visible", "hidden", "renamed", "merged")
RETIRED = ("renamed", "merged")
HISTORY_COLUMNS = ["class_event_id", "action", "name", "target", "analyst", "note", "at"]
TABLE_COLUMNS = ["name", "status", "current", "description", "added_at", "history"]


@dataclass
class ClassState:
    """What a class name is now (derived from the class events)."""

    name: str
    description: str
    added_at: str | None
    status: str
    maps_to: str | None      # the name it was renamed or merged into, if retired
    position: int            # sort key of the class order


def load(con) -> dict[str, ClassState]:
    """Every class name and its state, in the order the names were added."""
    states = {name: ClassState(name, desc, at, "visible", None, int(rowid))
              for rowid, name, desc, at in con.execute(
                  "SELECT rowid, name, description, added_at FROM classes ORDER BY rowid")}
    for action, name, target in con.execute(
            "SELECT action, name, target FROM class_events ORDER BY class_event_id"):
        _apply(states, action, name, target)
    return states


def _apply(states, action, name, target) -> None:
    s = states[name]
    if action == "hide":
        s.status = "hidden"
    elif action == "show":
        s.status = "visible"
    elif action == "rename":
        t = states[target]
        t.status, t.maps_to, t.position = s.status, None, s.position
        s.status, s.maps_to = "renamed", target
    elif action == "merge":
        s.status, s.maps_to = "merged", target


def current(states, name: str) -> str:
    """The class in use that ``name`` stands for now (``name`` itself if in use)."""
    seen = [name]
    while states[name].maps_to is not None:
        name = states[name].maps_to
        if name in seen:  # the write checks make this impossible
            raise AssertionError(f"class events form a cycle: {seen + [name]}")
        seen.append(name)
    return name


def in_use(states, *, include_hidden: bool) -> list[str]:
    """Classes in use (visible, and hidden if asked), in the stable class order."""
    keep = ("visible", "hidden") if include_hidden else ("visible",)
    live = [s for s in states.values() if s.status in keep]
    return [s.name for s in sorted(live, key=lambda s: s.position)]


def label_map(con) -> dict[str, str]:
    """Retired names -> the class each stands for now (only names that map elsewhere)."""
    states = load(con)
    return {n: current(states, n) for n, s in states.items() if s.maps_to is not None}


def history(con) -> pd.DataFrame:
    """Every class event, in recorded order."""
    rows = con.execute(f"SELECT {', '.join(HISTORY_COLUMNS)} FROM class_events"
                       " ORDER BY class_event_id").fetchall()
    df = pd.DataFrame(rows, columns=HISTORY_COLUMNS, dtype=object)
    df["class_event_id"] = df["class_event_id"].astype("int64")
    df["at"] = pd.to_datetime(df["at"], utc=True, format="ISO8601")
    return df


def table(con) -> pd.DataFrame:
    """Every class name: status, current class, description, when added, history text."""
    states = load(con)
    events = history(con)
    text = {n: [] for n in states}
    for e in events.itertuples(index=False):
        when = f" on {e.at:%Y-%m-%d}" + (f" by {e.analyst}" if e.analyst else "")
        if e.action in ("hide", "show"):
            text[e.name].append(("hidden" if e.action == "hide" else "shown again") + when)
        elif e.action == "rename":
            text[e.name].append(f"renamed to {e.target}{when}")
            text[e.target].append(f"renamed from {e.name}{when}")
        elif e.action == "merge":
            text[e.name].append(f"merged into {e.target}{when}")
            text[e.target].append(f"{e.name} merged in{when}")
    order = in_use(states, include_hidden=True)
    order += [n for n in states if n not in order]
    rows = [(n, states[n].status, current(states, n), states[n].description,
             states[n].added_at, "; ".join(text[n])) for n in order]
    return pd.DataFrame(rows, columns=TABLE_COLUMNS, dtype=object)


# --------------------------------------------------------------------------- writes


def _describe(states, name) -> str:
    s = states[name]
    if s.status in RETIRED:
        verb = "renamed to" if s.status == "renamed" else "merged into"
        now = current(states, name)
        return f"{verb} {s.maps_to!r}" + (f", now {now!r}" if now != s.maps_to else "")
    return s.status


def check_in_use(states, name, store_path, what="class") -> str:
    """Raise ``InputError`` unless ``name`` is a class in use (visible or hidden)."""
    if not isinstance(name, str) or name not in states:
        known = ", ".join(in_use(states, include_hidden=True))
        raise InputError(f"{what} {name!r} is not a class of {store_path}; classes: {known}")
    if states[name].status in RETIRED:
        raise InputError(f"{what} {name!r} was {_describe(states, name)}; use "
                         f"{current(states, name)!r}")
    return name


def _check_new(states, name, store_path) -> str:
    check_class_name(name, "new class name")
    if name in states:
        raise InputError(f"class name {name!r} is taken in {store_path} "
                         f"(status: {_describe(states, name)}); names are never reused")
    return name


def _event(con, action, name, target, analyst, note, at) -> None:
    con.execute("INSERT INTO class_events (action, name, target, analyst, note, at)"
                " VALUES (?, ?, ?, ?, ?, ?)", (action, name, target, analyst, note, at))


def _who(analyst, note, *, required: bool):
    if analyst is None and required:
        raise InputError("give the analyst who makes this change to the classes")
    if analyst is not None:
        check_name(analyst, "analyst")
    if note is not None:
        check_text(note, "note", allow_newlines=True)


def add(con, store_path, name, description, analyst=None, note=None) -> None:
    """Add a visible class (the caller holds the write transaction)."""
    check_class_name(name)
    check_text(description, "description", allow_newlines=False)
    if not description.strip():
        raise InputError(f"class {name!r}: give a --description of what it means")
    _who(analyst, note, required=False)
    states = load(con)
    if name in states:
        raise InputError(f"class {name!r} already exists in {store_path} "
                         f"(status: {_describe(states, name)})")
    at = utc_now()
    con.execute("INSERT INTO classes (name, description, added_at) VALUES (?, ?, ?)",
                (name, description, at))
    _event(con, "add", name, None, analyst, note, at)


def rename(con, store_path, old, new, analyst, note, description=None) -> None:
    """Rename class ``old`` to ``new`` (the caller holds the write transaction)."""
    _who(analyst, note, required=True)
    states = load(con)
    check_in_use(states, old, store_path)
    if new == old:
        raise InputError(f"class {old!r} already has that name")
    at = utc_now()
    if (isinstance(new, str) and new in states and states[new].status in RETIRED
            and current(states, new) == old):
        logger.info("class %s: renamed back to %s (a name it had before)", old, new)
    else:
        _check_new(states, new, store_path)
        if description is not None:
            check_text(description, "description", allow_newlines=False)
        desc = description if description and description.strip() else \
            states[old].description
        con.execute("INSERT INTO classes (name, description, added_at) VALUES (?, ?, ?)",
                    (new, desc, at))
    _event(con, "rename", old, new, analyst, note, at)


def set_hidden(con, store_path, name, hidden: bool, analyst=None, note=None) -> None:
    """Hide or show class ``name`` (the caller holds the write transaction)."""
    _who(analyst, note, required=False)
    states = load(con)
    check_in_use(states, name, store_path)
    want = "hidden" if hidden else "visible"
    if states[name].status == want:
        raise InputError(f"class {name!r} is already {want}")
    _event(con, "hide" if hidden else "show", name, None, analyst, note, utc_now())


def merge(con, store_path, sources, into, analyst, note) -> None:
    """Merge classes ``sources`` into ``into`` (the caller holds the write transaction)."""
    _who(analyst, note, required=True)
    if isinstance(sources, str):
        sources = [sources]
    sources = list(sources)
    states = load(con)
    problems = []
    for what, names in (("merge target", [into]), ("class to merge", sources)):
        for n in names:
            try:
                check_in_use(states, n, store_path, what)
            except InputError as exc:
                problems.append(str(exc))
    if not sources:
        problems.append("name at least one class to merge")
    if into in sources:
        problems.append(f"class {into!r} cannot be merged into itself")
    dup = sorted({n for n in sources if sources.count(n) > 1}, key=str)
    if dup:
        problems.append(f"class(es) named twice: {', '.join(map(str, dup))}")
    if problems:
        raise InputError(problems)
    at = utc_now()
    for n in sources:
        _event(con, "merge", n, into, analyst, note, at)


class ClassesMixin:
    """The class-set methods of :class:`classify.labels.LabelStore` (SQL in this module)."""

    def classes(self, include_hidden: bool = False) -> list[str]:
        """The classes in use, in the stable class order (order added; a renamed class
        keeps its place). Hidden classes only with ``include_hidden``; retired names
        (renamed or merged away) never."""
        with self._read() as con:
            return in_use(load(con), include_hidden=include_hidden)

    def class_map(self) -> dict[str, str]:
        """Every class name ever used -> the class in use it stands for now."""
        with self._read() as con:
            states = load(con)
        return {n: current(states, n) for n in states}

    def class_table(self) -> pd.DataFrame:
        """Every class name with ``status`` (visible, hidden, renamed, merged), ``current``
        (the class it stands for now), description, ``added_at`` (None: before v2) and
        ``history`` (its renames, merges, hides as text); classes in use first, in order."""
        with self._read() as con:
            return table(con)

    def class_history(self) -> pd.DataFrame:
        """Every class event (class_event_id, action, name, target, analyst, note, at)."""
        with self._read() as con:
            return history(con)

    def add_class(self, name: str, description: str, *, analyst=None, note=None) -> None:
        """Add a class (e.g. ``return_stroke``); class names are never removed or reused."""
        with self._write() as con:
            add(con, self.path, name, description, analyst, note)

    def rename_class(self, old: str, new: str, *, analyst: str, note=None,
                     description=None) -> None:
        """Rename a class: decisions keep the label they were made with; current labels,
        training, review and reports use ``new``. Recorded with ``analyst``, the time
        and ``note``. ``description`` replaces the class's description if given."""
        with self._write() as con:
            rename(con, self.path, old, new, analyst, note, description)

    def hide_class(self, name: str, *, analyst=None, note=None) -> None:
        """Hide a class: not offered on the review page, its labelled pulses left out
        of training (with a warning); its labels stay."""
        with self._write() as con:
            set_hidden(con, self.path, name, True, analyst, note)

    def show_class(self, name: str, *, analyst=None, note=None) -> None:
        """Show a hidden class again."""
        with self._write() as con:
            set_hidden(con, self.path, name, False, analyst, note)

    def merge_classes(self, sources, into: str, *, analyst: str, note=None) -> None:
        """Merge classes ``sources`` into ``into``: their current labels become ``into``
        (decisions keep the label they were made with); the names are retired."""
        with self._write() as con:
            merge(con, self.path, sources, into, analyst, note)
