"""``pulsesort triage``: classify every pulse of a catalog and flag those to review."""

from __future__ import annotations

import sys

from classify.registry import ModelRegistry
from classify.triage import print_summary, triage_catalog
from features import InputError, open_catalog

from ._common import add_parallel_arguments

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
                     help="no model: physics rules from published criteria (cold start)")
    parser.add_argument("--registry", default="models",
                        help="model registry folder for version names (default: models)")
    parser.add_argument("--out", "-o", required=True, help="results CSV")
    parser.add_argument("--review-below", type=float, default=0.8, metavar="P",
                        help="pulses with a lower confidence need review (default 0.8)")
    parser.add_argument("--resume", action="store_true",
                        help="continue an interrupted run (same catalog, model, settings)")
    parser.add_argument("--adapt-priors", action="store_true",
                        help="estimate the season's class mix (EM) and adjust for it")
    parser.add_argument("--training-sets", action="store_true",
                        help="use the training split-conformal thresholds instead of adapting "
                             "them to this season")
    add_parallel_arguments(parser)


def run(args) -> int:
    _unit_interval(args.review_below)
    cat = open_catalog(args.catalog)
    model_dir = None
    if args.model:
        model_dir = ModelRegistry(args.registry).resolve(args.model)
    summary = triage_catalog(cat, args.out, model_dir=model_dir,
                             review_below=args.review_below, chunk_size=args.chunk_size,
                             n_jobs=args.jobs, dask_address=args.dask, resume=args.resume,
                             progress=args.progress, adapt_priors=args.adapt_priors,
                             adapt_sets=not args.training_sets)
    print_summary(summary, file=sys.stdout)
    return 0
