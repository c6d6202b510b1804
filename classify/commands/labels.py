"""``pulsesort labels``: the labelled-set manager (import, export, stats, conflicts...)."""

from __future__ import annotations

import argparse
from pathlib import Path

import pandas as pd

from features import InputError

from ._common import check_output_file, deprecated, echo

NAME = "labels"
HELP = ("manage analysts' labels in the label store: import, export, stats, conflicts, "
        "resolve, history, retract, classes")

EPILOG = """\
label store:
  An SQLite file: --store PATH, else $PULSESORT_STORE, else labels.sqlite in the
  working folder. Decisions are never changed or deleted: a retraction or a
  resolution is a new decision.

current-label rule (for each event of a catalog):
  1. take every analyst's latest decision; a retraction as the latest one means
     that analyst has no label on the event;
  2. if a resolution ('labels resolve') is newer than every analyst's latest
     decision, its label is the current label;
  3. otherwise, if the analysts' standing labels agree, that is the label
     (status labelled); if they disagree the event is in conflict (no training
     label until resolved); if nobody has a standing label it is unlabelled.
"""


def _store_arg(p: argparse.ArgumentParser) -> None:
    p.add_argument("--store", metavar="PATH", default=None,
                   help="label store file (default: $PULSESORT_STORE, else ./labels.sqlite)")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = EPILOG
    sub = parser.add_subparsers(dest="labels_action", metavar="ACTION")

    def add(name, func, help_):
        p = sub.add_parser(name, help=help_, description=help_, epilog=EPILOG,
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        p.set_defaults(_labels_run=func)
        return p

    p = add("import", _import, "import a labels file (CSV: event_id,label[,analyst,"
            "decided_at,note]) for a catalog; all rows or none")
    p.add_argument("file", metavar="FILE", help="the labels CSV file")
    p.add_argument("--catalog", metavar="CATALOG_DIR", required=True,
                   help="the catalog folder the labels are for")
    p.add_argument("--analyst", metavar="NAME",
                   help="analyst of rows without an 'analyst' value")
    _store_arg(p)

    p = add("export", _export, "write current labels (or the full history) as a labels "
            "file that imports back")
    p.add_argument("--out", metavar="FILE", required=True, help="CSV file to write")
    p.add_argument("--catalog", metavar="ID", help="catalog id (needed if the store holds "
                   "several catalogs)")
    p.add_argument("--history", action="store_true",
                   help="every decision (retractions and resolutions included)")
    _store_arg(p)

    p = add("stats", _stats, "counts per catalog/season, per class and per analyst: "
            "labelled, in conflict, unlabelled")
    p.add_argument("--catalog", metavar="ID", action="append",
                   help="only this catalog id (repeatable)")
    _store_arg(p)

    p = add("conflicts", _conflicts, "events on which analysts disagree, and agreement "
            "(Cohen's kappa) between analyst pairs")
    p.add_argument("--catalog", metavar="ID", action="append",
                   help="only this catalog id (repeatable)")
    _store_arg(p)

    p = add("resolve", _resolve, "settle an event in conflict with a label")
    p.add_argument("catalog_id", metavar="CATALOG_ID")
    p.add_argument("event_id", metavar="EVENT_ID")
    p.add_argument("label", metavar="LABEL")
    p.add_argument("--analyst", metavar="NAME", required=True, help="who resolves")
    p.add_argument("--note", metavar="TEXT", help="why")
    _store_arg(p)

    p = add("history", _history, "every decision on an event: who decided what, when, why "
            "(CATALOG_ID EVENT_ID like resolve and retract; EVENT_ID alone: in every catalog)")
    p.add_argument("catalog_id", metavar="CATALOG_ID", nargs="?", default=None)
    p.add_argument("event_id", metavar="EVENT_ID")
    # the old spelling `history EVENT_ID --catalog ID` keeps working (with a note)
    p.add_argument("--catalog", dest="catalog_option", metavar="ID", help=argparse.SUPPRESS)
    _store_arg(p)

    p = add("retract", _retract, "withdraw an analyst's label on an event")
    p.add_argument("catalog_id", metavar="CATALOG_ID")
    p.add_argument("event_id", metavar="EVENT_ID")
    p.add_argument("--analyst", metavar="NAME", required=True, help="whose label")
    p.add_argument("--note", metavar="TEXT", help="why")
    _store_arg(p)

    p = add("classes", _classes, "the store's own classes: list, add, rename, hide, show, "
            "merge (history kept; decisions keep the label they were made with)")
    p.epilog = CLASSES_EPILOG
    _classes_arguments(p)
    parser.set_defaults(_labels_parser=parser)


CLASSES_EPILOG = """\
classes:
  Names are 1-40 characters of a-z, 0-9 and '_' starting with a letter, and are
  never reused. A renamed or merged class keeps its decisions as they were
  made; the current labels, training, the review page and reports use the new
  class. A hidden class is not offered on the review page and its labelled
  pulses are left out of training (its labels stay). Every change is recorded
  with who, when and why ('labels classes list --history').
"""


def _classes_arguments(p: argparse.ArgumentParser) -> None:
    """``labels classes ACTION ...``; the old spelling ``classes --add NAME`` still works."""
    p.add_argument("--add", metavar="NAME", help=argparse.SUPPRESS)
    p.add_argument("--description", metavar="TEXT", help=argparse.SUPPRESS)
    _store_arg(p)
    sub = p.add_subparsers(dest="classes_action", metavar="ACTION")

    def action(name, help_):
        q = sub.add_parser(name, help=help_, description=help_, epilog=CLASSES_EPILOG,
                           formatter_class=argparse.RawDescriptionHelpFormatter)
        # SUPPRESS: an option not given here keeps the value given before the action
        q.add_argument("--store", metavar="PATH", default=argparse.SUPPRESS,
                       help="label store file (default: $PULSESORT_STORE, else "
                            "./labels.sqlite)")
        return q

    def who(q, required):
        q.add_argument("--analyst", metavar="NAME", required=required,
                       default=argparse.SUPPRESS, help="who makes the change")
        q.add_argument("--note", metavar="TEXT", default=argparse.SUPPRESS, help="why")

    q = action("list", "every class name: status (visible, hidden, renamed, merged), the "
               "class it stands for now, its history")
    q.add_argument("--history", action="store_true", default=argparse.SUPPRESS,
                   help="every change to the classes instead: who, when, why")
    q = action("add", "add a class")
    q.add_argument("name", metavar="NAME", help="new class name (a-z, 0-9, _)")
    q.add_argument("--description", metavar="TEXT", required=True,
                   default=argparse.SUPPRESS, help="what the class means")
    who(q, False)
    q = action("rename", "rename a class (its decisions keep the old name; current labels "
               "use the new one)")
    q.add_argument("old", metavar="OLD")
    q.add_argument("new", metavar="NEW")
    q.add_argument("--description", metavar="TEXT", default=argparse.SUPPRESS,
                   help="a new description (default: the old one)")
    who(q, True)
    q = action("hide", "hide a class: not offered on the review page, left out of training")
    q.add_argument("name", metavar="NAME")
    who(q, False)
    q = action("show", "show a hidden class again")
    q.add_argument("name", metavar="NAME")
    who(q, False)
    q = action("merge", "merge classes into another: their current labels become it")
    q.add_argument("sources", metavar="SOURCE", nargs="+", help="classes to merge")
    q.add_argument("--into", metavar="TARGET", required=True, help="the class they become")
    who(q, True)


def run(args) -> int:
    func = getattr(args, "_labels_run", None)
    if func is None:
        args._labels_parser.print_help()
        return 2
    return func(args)


def _open(args, *, create=False):
    """The store of ``--store``; only ``import`` and ``classes --add`` may create one."""
    from classify.labels import LabelStore

    return LabelStore(args.store, create=create)


def _show(df: pd.DataFrame) -> str:
    return df.to_string(index=False)


def _import(args) -> int:
    from classify.labels import check_labels_file, default_store_path
    from features import open_catalog

    cat = open_catalog(args.catalog)
    path = Path(args.store) if args.store else default_store_path()
    if not path.exists():  # check the file before creating a store for it
        check_labels_file(args.file, cat, analyst=args.analyst)
    with _open(args, create=True) as store:
        rep = store.import_labels(args.file, cat, analyst=args.analyst)
    echo(args, f"{rep.path}: {rep.n_rows} rows for catalog {rep.catalog_id}: "
               f"{rep.n_added} added, {rep.n_present} already in {path}"
               + (f" (batch {rep.batch_id})" if rep.batch_id is not None else ""))
    return 0


def _export(args) -> int:
    check_output_file(args.out, (".csv",), "--out")
    with _open(args) as store:
        n = store.export_labels(args.out, args.catalog, history=args.history)
    what = "decisions" if args.history else "label rows"
    echo(args, f"{args.out}: {n} {what} written")
    return 0


def _stats(args) -> int:
    with _open(args) as store:
        st = store.stats(args.catalog)
    if st["catalogs"].empty:
        print("no catalogs in the store yet")
        return 0
    print("Events by status, per catalog:")
    print(st["catalogs"].reset_index().to_string(index=False))
    print("\nCurrent labels per class:")
    print(st["classes"].reset_index().to_string(index=False))
    print("\nStanding labels per analyst:")
    if st["analysts"].empty:
        print("(no decisions yet)")
    else:
        print(st["analysts"].reset_index().to_string(index=False))
    return 0


def _conflicts(args) -> int:
    with _open(args) as store:
        conf = store.conflicts(args.catalog, long=True)
        agree = store.agreement(args.catalog)
    n = len(conf.drop_duplicates(["catalog_id", "event_id"]))
    print(f"Events in conflict: {n}")
    if n:
        print(_show(conf.drop(columns="decision_id")))
    print("\nAgreement between analysts (events both labelled; Cohen's kappa):")
    print(_show(agree) if len(agree) else "(fewer than two analysts)")
    return 0


def _resolve(args) -> int:
    with _open(args) as store:
        did = store.resolve(args.catalog_id, args.event_id, args.label,
                            analyst=args.analyst, note=args.note)
    echo(args, f"decision #{did}: {args.catalog_id} {args.event_id} resolved as {args.label}")
    return 0


def _history(args) -> int:
    catalog = args.catalog_id
    if args.catalog_option is not None:
        deprecated("`labels history EVENT_ID --catalog ID`", "`labels history ID EVENT_ID`")
        if catalog is not None and catalog != args.catalog_option:
            raise InputError(f"labels history: catalog {catalog!r} and --catalog "
                             f"{args.catalog_option!r} differ; give one")
        catalog = args.catalog_option
    with _open(args) as store:
        h = store.history(args.event_id, catalog)
        class_map = store.class_map()
    if h.empty:
        print(f"no decisions on event {args.event_id!r}")
        return 0
    cols = ["decision_id", "catalog_id", "decided_at", "analyst", "label", "origin", "note",
            "model_version", "confidence", "source_file"]
    h = h[cols].astype(object)
    now = h["label"].map(lambda c: class_map.get(c, c) if isinstance(c, str) else None)
    if (now.notna() & (now != h["label"])).any():  # a class renamed or merged since
        h.insert(cols.index("label") + 1, "now", now.where(now != h["label"], None))
    h["label"] = h["label"].where(h["label"].notna(), "(retracted)")
    print(_show(h.where(h.notna(), "")))
    return 0


def _retract(args) -> int:
    with _open(args) as store:
        did = store.retract(args.catalog_id, args.event_id, analyst=args.analyst,
                            note=args.note)
    echo(args, f"decision #{did}: label of {args.analyst} on {args.catalog_id} "
               f"{args.event_id} retracted")
    return 0


def _classes(args) -> int:
    action = args.classes_action
    if action is None and args.add is None:
        if args.description is not None:
            raise InputError("--description goes with an action: labels classes add NAME "
                             "--description TEXT")
        action = "list"
    elif action is None:  # the old spelling: labels classes --add NAME --description TEXT
        deprecated("`labels classes --add NAME`", "`labels classes add NAME`")
        if args.description is None:
            raise InputError(f"--add {args.add}: give a --description of the class")
        with _open(args, create=True) as store:
            store.add_class(args.add, args.description)
            echo(args, f"class {args.add!r} added")
            _print_classes(store)
        return 0
    elif args.add is not None:
        raise InputError(f"--add goes without an action; use: labels classes add {args.add}")
    analyst, note = getattr(args, "analyst", None), getattr(args, "note", None)
    with _open(args, create=action == "add") as store:
        if action == "list":
            if getattr(args, "history", False):
                _print_class_history(store)
            else:
                _print_classes(store)
        elif action == "add":
            store.add_class(args.name, args.description, analyst=analyst, note=note)
            echo(args, f"class {args.name!r} added (visible)")
        elif action == "rename":
            store.rename_class(args.old, args.new, analyst=analyst, note=note,
                               description=getattr(args, "description", None))
            echo(args, f"class {args.old!r} renamed to {args.new!r}: decisions keep "
                       f"{args.old!r}, current labels say {args.new!r}")
        elif action in ("hide", "show"):
            (store.hide_class if action == "hide" else store.show_class)(
                args.name, analyst=analyst, note=note)
            echo(args, f"class {args.name!r} hidden: not offered on the review page, its "
                       "labelled pulses left out of training" if action == "hide" else
                       f"class {args.name!r} shown again")
        elif action == "merge":
            store.merge_classes(args.sources, args.into, analyst=analyst, note=note)
            names = ", ".join(repr(n) for n in args.sources)
            echo(args, f"{names} merged into {args.into!r}: their current labels are "
                       f"{args.into!r}")
    return 0


def _print_classes(store) -> None:
    t = store.class_table()
    shown = t[["name", "status", "current"]].copy()
    shown["current"] = shown["current"].where(shown["current"] != shown["name"], "")
    shown["added"] = [a[:10] if isinstance(a, str) else "" for a in t["added_at"]]
    shown["history"] = t["history"]
    print(_show(shown.rename(columns={"current": "now"})))
    print("\nDescriptions:")
    for name, desc, status in zip(t["name"], t["description"], t["status"], strict=True):
        if status in ("visible", "hidden"):
            print(f"  {name}: {desc}")


def _print_class_history(store) -> None:
    h = store.class_history()
    if h.empty:
        print("no changes to the classes yet (the store's classes are as created)")
        return
    h = h.astype(object)
    print(_show(h.where(h.notna(), "")))
