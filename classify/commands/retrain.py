"""``pulsesort retrain``: challenger vs champion on a new season; promote or keep."""

from __future__ import annotations

import argparse

from ._common import (
    add_parallel_arguments,
    deprecated,
    echo,
    fraction,
    positive_int,
    progress_of,
    read_store,
)

NAME = "retrain"
HELP = "train a challenger on old + new labels, compare with the current model, promote or keep"


def add_arguments(parser):
    parser.add_argument("new", metavar="NEW_CATALOG", nargs="?", default=None,
                        help="the new season's catalog (with some labels in the store)")
    # the old spelling `--new CATALOG` keeps working (with a note)
    parser.add_argument("--new", dest="new_option", metavar="CATALOG", help=argparse.SUPPRESS)
    parser.add_argument("--store", default=None,
                        help="label store (default: labels.sqlite here, or $PULSESORT_STORE); "
                             "it must exist")
    parser.add_argument("--with", dest="old", nargs="*", default=[], metavar="CATALOG",
                        help="earlier seasons' catalogs whose labels are kept")
    parser.add_argument("--current", default="current", metavar="MODEL",
                        help="the champion: model folder, registry folder, version or "
                             "'current' (default)")
    parser.add_argument("--out", required=True, metavar="MODEL_DIR",
                        help="folder for the challenger (its parent is the registry it is "
                             "added to)")
    parser.add_argument("--registry", default=None,
                        help="registry in which --current VERSION is looked up (default: the "
                             "parent of --out)")
    parser.add_argument("--promote", action="store_true",
                        help="when --out lies in another registry than the champion's, let a "
                             "winning challenger become that registry's current model (it "
                             "never does otherwise)")
    parser.add_argument("--new-weight", type=float, default=None,
                        help="weight of a new-season label vs an old one (default 2, "
                             "classify.retrain.NEW_WEIGHT)")
    parser.add_argument("--tolerance", type=float, default=0.005,
                        help="largest macro-F1 loss still promoted (default 0.005)")
    parser.add_argument("--review-below", type=fraction, default=0.8,
                        help="confidence threshold for the review load (default 0.8)")
    parser.add_argument("--bootstrap", type=positive_int, default=1000,
                        help="bootstrap resamples over flashes (default 1000)")
    parser.add_argument("--force", action="store_true",
                        help="promote the challenger even if it is worse")
    parser.add_argument("--max-iter", type=positive_int, default=80,
                        help="boosting iterations per fold model (default 80)")
    add_parallel_arguments(parser)


def _fmt(v):
    return f"{v['estimate']:.4f} [{v['low']:.4f}, {v['high']:.4f}]"


def run(args) -> int:
    from classify.retrain import NEW_WEIGHT, retrain
    from features import InputError

    new = args.new
    if args.new_option is not None:
        deprecated("`retrain --new CATALOG`", "`retrain CATALOG`")
        if new is not None and new != args.new_option:
            raise InputError(f"retrain: NEW_CATALOG {new} and --new {args.new_option} differ")
        new = args.new_option
    if new is None:
        raise InputError("retrain: give the new season's catalog (NEW_CATALOG)")
    if args.new_weight is None:
        args.new_weight = NEW_WEIGHT
    if not args.new_weight > 0:
        raise InputError(f"--new-weight must be > 0, got {args.new_weight}")
    if not args.tolerance >= 0:
        raise InputError(f"--tolerance must be >= 0, got {args.tolerance}")
    with read_store(args.store) as store:
        res = retrain(store, new, args.old, args.current, args.out,
                      registry=args.registry, new_weight=args.new_weight,
                      tolerance=args.tolerance, force=args.force,
                      promote_elsewhere=args.promote, review_below=args.review_below,
                      n_boot=args.bootstrap, n_jobs=args.jobs, dask_address=args.dask,
                      chunk_size=args.chunk_size, progress=progress_of(args),
                      max_iter=args.max_iter)
    cmp = res["comparison"]
    lines = []
    if cmp is not None:
        lines += [f"new season: {cmp['n_pulses']} labelled pulses in {cmp['n_flashes']} "
                  "flashes (95 % bootstrap intervals over flashes)",
                  f"  {'metric':<20} {'champion':<28} {'challenger':<28} difference"]
        for m in ("macro_f1", "ece", "conformal_coverage", "review_load"):
            lines.append(f"  {m:<20} {_fmt(cmp['champion'][m]):<28} "
                         f"{_fmt(cmp['challenger'][m]):<28} {_fmt(cmp['difference'][m])}")
        lines.append("  recall per class (champion / challenger):")
        for c in cmp["classes"]:
            a, b = cmp["champion"]["recall"].get(c), cmp["challenger"]["recall"].get(c)
            lines.append(f"    {c:<20} {'-' if a is None else f'{a:.3f}':>6} / "
                         f"{'-' if b is None else f'{b:.3f}'}")
    lines.append(f"decision: {res['decision']}: {res['reason']}")
    if res["challenger_dir"] is not None:
        lines.append(f"challenger: {res['challenger_dir']}")
    echo(args, *lines)
    return 0
