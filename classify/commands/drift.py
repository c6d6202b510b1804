"""``pulsesort drift``: what changed between two catalogs (instrument, features, class mix)."""

from __future__ import annotations

import argparse
import logging
from pathlib import Path

from ._common import check_output_file, echo, jobs_int, positive_int, read_store

NAME = "drift"
HELP = ("compare catalog B with catalog A: instrument changes, ranked feature drift (PSI, "
        "KS), and with --model the class-prior shift and calibration on B")

logger = logging.getLogger("pulsesort")


def add_arguments(parser):
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.epilog = (
        "Prints the instrument changes read from the two manifests first (each with the\n"
        "features it is expected to move), then the features ranked by population\n"
        "stability index of B against A, and writes an HTML report (by default beside\n"
        "catalog B, in its parent folder). Exit 0 whatever the drift; 2 for bad input.")
    parser.add_argument("catalog_a", metavar="CATALOG_A", help="reference catalog folder "
                        "(e.g. the training season)")
    parser.add_argument("catalog_b", metavar="CATALOG_B", help="new catalog folder")
    parser.add_argument("--features-a", metavar="CSV", help="features of A from `pulsesort "
                        "features` (default: computed now)")
    parser.add_argument("--features-b", metavar="CSV", help="features of B (default: "
                        "computed now)")
    parser.add_argument("--model", metavar="MODEL", help="a model folder, a registry folder "
                        "(its current model), or a version or 'current' in --registry: "
                        "estimate B's class mix (EM) and, with --store, the model's "
                        "calibration on B's labelled pulses")
    parser.add_argument("--registry", metavar="DIR", default=None,
                        help="model registry for --model VERSION (default: models)")
    parser.add_argument("--store", metavar="PATH", help="label store holding labels of B "
                        "(with --model)")
    parser.add_argument("--out", "-o", metavar="REPORT.html", help="HTML report (default: "
                        "drift_<A>_vs_<B>.html in the folder that holds catalog B)")
    parser.add_argument("--top", type=positive_int, default=10, metavar="N",
                        help="features in the terminal table and charts (default 10)")
    parser.add_argument("--jobs", "-j", type=jobs_int, default=1, metavar="N",
                        help="worker processes for computing features (-1: one per core)")


def default_report_path(cat_a, cat_b) -> Path:
    """``drift_<A>_vs_<B>.html`` in the folder that holds catalog B."""
    name = f"drift_{cat_a.catalog_id}_vs_{cat_b.catalog_id}.html".replace("/", "_")
    return Path(cat_b.path).parent / name


def _features(cat, csv, jobs):
    from classify.drift import read_feature_table
    from features.extract import extract_features

    if csv:
        return read_feature_table(csv, cat)
    logger.info("%s: computing features of %d pulses", cat.catalog_id, cat.n_events)
    return extract_features(cat, n_jobs=jobs).reset_index(drop=True)


def run(args) -> int:
    from classify.drift import compare_catalogs
    from classify.drift_report import (
        champion_calibration,
        format_drift_text,
        write_drift_html,
    )
    from classify.priors import prior_shift
    from classify.registry import load_model, resolve_model
    from features import InputError, open_catalog

    if args.store and not args.model:
        raise InputError("--store is used with --model (the model's calibration on B's "
                         "labels); give --model MODEL_DIR too")
    if args.out:
        check_output_file(args.out, (".html",), "--out")
    cat_a, cat_b = open_catalog(args.catalog_a), open_catalog(args.catalog_b)
    out = Path(args.out) if args.out else default_report_path(cat_a, cat_b)
    check_output_file(out, (".html",), "--out")
    model = card = labels = None
    if args.store:
        with read_store(args.store) as store:
            labels = store.current_labels([cat_b.catalog_id], status="labelled")
    if args.model:
        model, card = load_model(resolve_model(args.model, args.registry))
    feat_a = _features(cat_a, args.features_a, args.jobs)
    feat_b = _features(cat_b, args.features_b, args.jobs)
    result = compare_catalogs(cat_a, cat_b, feat_a, feat_b)
    if model is not None:
        result.model_version = str(card.get("version", Path(args.model).name))
        result.priors = prior_shift(model, feat_b)
        if labels is not None:
            result.calibration = champion_calibration(model, feat_b, labels)
            if result.calibration is None:
                logger.warning("%s: no labelled pulses of the model's classes in the store; "
                               "no calibration diagram", cat_b.catalog_id)
    echo(args, format_drift_text(result, top=args.top))
    path = write_drift_html(result, feat_a, feat_b, out, top=args.top)
    echo(args, "", f"report: {path}")
    return 0
