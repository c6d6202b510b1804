"""``pulsesort triage``: classify every pulse of a catalog and flag those to review."""

from __future__ import annotations

import io

from classify.seasonfit import AUTO_DOUBT_SHARE, MODES
from features import InputError, open_catalog

from ._common import (
    add_parallel_arguments,
    check_output_file,
    echo,
    fraction,
    progress_of,
    read_store,
)

NAME = "triage"
HELP = "classify every pulse of a catalog with a confidence and a review flag"


def _unit_interval(text):
    v = float(text)
    if not 0 <= v <= 1:
        raise InputError(f"--review-below must be between 0 and 1, got {v}")
    return v


def add_arguments(parser):
    parser.add_argument("catalog", help="catalog folder")
    src = parser.add_mutually_exclusive_group(required=True)
    src.add_argument("--model", metavar="MODEL",
                     help="model folder, a version in the registry, or 'current'")
    src.add_argument("--rules", action="store_true",
                     help="no model yet (a first season): physics rules, then a model "
                          "self-trained on the season's confidently ruled pulses")
    parser.add_argument("--registry", default=None,
                        help="model registry folder for version names (default: models)")
    parser.add_argument("--out", "-o", required=True, help="results CSV")
    parser.add_argument("--review-below", type=float, default=0.8, metavar="P",
                        help="pulses with a lower confidence need review (default 0.8)")
    parser.add_argument("--coverage", type=fraction, default=None,
                        help="target coverage of the prediction sets (default: the model's, "
                             "0.95 for --rules)")
    parser.add_argument("--resume", action="store_true",
                        help="continue an interrupted run (same catalog, model, settings)")
    parser.add_argument("--adapt-priors", action="store_true",
                        help="estimate the season's class mix (EM) and adjust the "
                             "probabilities for it")
    parser.add_argument("--training-sets", action="store_true",
                        help="use the training split-conformal thresholds instead of adapting "
                             "them to this season")
    parser.add_argument("--rules-only", action="store_true",
                        help="with --rules: the rules alone, no self-training")
    parser.add_argument("--season-fit", nargs="?", const="always", default="auto",
                        choices=MODES, metavar="WHEN",
                        help="with --model: fit the season itself, anchored by the pulses "
                             "the model places confidently (and --store's labels): 'auto' "
                             f"(default) when the model would send more than "
                             f"{100 * AUTO_DOUBT_SHARE:g} %% of the "
                             "season to review (another station or instrument), 'always' (the flag "
                             "alone) or 'never'")
    parser.add_argument("--store", default=None,
                        help="a label store whose analysts' labels of this catalog anchor "
                             "the self-training (--rules, or --model when the season is "
                             "fitted)")
    add_parallel_arguments(parser)


def run(args) -> int:
    _unit_interval(args.review_below)
    if args.rules_only and not args.rules:
        raise InputError("--rules-only goes with --rules (the cold start)")
    if args.season_fit == "always" and args.rules:
        raise InputError("--season-fit goes with --model (--rules already fits the season)")
    if args.store and not args.rules and args.season_fit == "never":
        raise InputError("--store goes with --rules or a season fit (it anchors the "
                         "self-training on the season), not with --season-fit never")
    # imported here: ``pulsesort --help`` and the other commands do not load the model code
    from classify.registry import resolve_model
    from classify.triage import print_summary, triage_catalog

    out = check_output_file(args.out, (".csv",), "--out")
    cat = open_catalog(args.catalog)
    model_dir = None if args.rules else resolve_model(args.model, args.registry)
    store = read_store(args.store) if args.store else None
    try:
        summary = triage_catalog(cat, out, model_dir=model_dir,
                                 review_below=args.review_below, chunk_size=args.chunk_size,
                                 n_jobs=args.jobs, dask_address=args.dask, resume=args.resume,
                                 progress=progress_of(args), adapt_priors=args.adapt_priors,
                                 adapt_sets=not args.training_sets,
                                 self_training=not args.rules_only, coverage=args.coverage,
                                 store=store, season_fit=args.season_fit)
    finally:
        if store is not None:
            store.close()
    text = io.StringIO()
    print_summary(summary, file=text)
    echo(args, *text.getvalue().rstrip("\n").split("\n"))
    return 0
