"""``pulsesort retrain``: challenger vs champion on a new season; promote or keep."""

from __future__ import annotations

from ._common import add_parallel_arguments, positive_int

NAME = "retrain"
HELP = "train a challenger on old + new labels, compare with the current model, promote or keep"


def add_arguments(parser):
    parser.add_argument("--store", default=None, help="label store (default: labels.sqlite)")
    parser.add_argument("--new", required=True, metavar="CATALOG",
                        help="the new season's catalog (with some labels in the store)")
    parser.add_argument("--with", dest="old", nargs="*", default=[], metavar="CATALOG",
                        help="earlier seasons' catalogs whose labels are kept")
    parser.add_argument("--current", default="current", metavar="MODEL",
                        help="the champion: model folder, version or 'current' (default)")
    parser.add_argument("--out", required=True, metavar="MODEL_DIR",
                        help="folder for the challenger (its parent is the registry)")
    parser.add_argument("--registry", default=None,
                        help="registry folder (default: the parent of --out)")
    parser.add_argument("--new-weight", type=float, default=None,
                        help="weight of a new-season label vs an old one (default 2, "
                             "classify.retrain.NEW_WEIGHT)")
    parser.add_argument("--tolerance", type=float, default=0.005,
                        help="largest macro-F1 loss still promoted (default 0.005)")
    parser.add_argument("--review-below", type=float, default=0.8,
                        help="confidence threshold for the review load (default 0.8)")
    parser.add_argument("--bootstrap", type=positive_int, default=1000,
                        help="bootstrap resamples over flashes (default 1000)")
    parser.add_argument("--force", action="store_true",
                        help="promote the challenger even if it is worse")
    parser.add_argument("--max-iter", type=int, default=80,
                        help="boosting iterations per fold model (default 80)")
    add_parallel_arguments(parser)


def _fmt(v):
    return f"{v['estimate']:.4f} [{v['low']:.4f}, {v['high']:.4f}]"


def run(args) -> int:
    from classify.labels import LabelStore
    from classify.retrain import NEW_WEIGHT, retrain

    if args.new_weight is None:
        args.new_weight = NEW_WEIGHT
    if args.new_weight <= 0:
        raise ValueError(f"--new-weight must be > 0, got {args.new_weight}")
    res = retrain(LabelStore(args.store), args.new, args.old, args.current, args.out,
                  registry=args.registry, new_weight=args.new_weight, tolerance=args.tolerance,
                  force=args.force, review_below=args.review_below, n_boot=args.bootstrap,
                  n_jobs=args.jobs, dask_address=args.dask, chunk_size=args.chunk_size,
                  progress=args.progress, max_iter=args.max_iter)
    cmp = res["comparison"]
    if cmp is not None:
        print(f"new season: {cmp['n_pulses']} labelled pulses in {cmp['n_flashes']} flashes "
              f"(95 % bootstrap intervals over flashes)")
        print(f"  {'metric':<20} {'champion':<28} {'challenger':<28} difference")
        for m in ("macro_f1", "ece", "conformal_coverage", "review_load"):
            print(f"  {m:<20} {_fmt(cmp['champion'][m]):<28} {_fmt(cmp['challenger'][m]):<28} "
                  f"{_fmt(cmp['difference'][m])}")
        print("  recall per class (champion / challenger):")
        for c in cmp["classes"]:
            a, b = cmp["champion"]["recall"].get(c), cmp["challenger"]["recall"].get(c)
            print(f"    {c:<20} {'-' if a is None else f'{a:.3f}':>6} / "
                  f"{'-' if b is None else f'{b:.3f}'}")
    print(f"decision: {res['decision']}: {res['reason']}")
    if res["challenger_dir"] is not None:
        print(f"challenger: {res['challenger_dir']}")
    return 0
