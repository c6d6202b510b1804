"""``pulsesort train``: train a calibrated classifier on the store's current labels."""

from __future__ import annotations

from ._common import add_parallel_arguments, echo, fraction, positive_int, progress_of, read_store

NAME = "train"
HELP = "train a calibrated pulse classifier on the current labels of catalogs"


def add_arguments(parser):
    parser.add_argument("catalogs", nargs="+", metavar="CATALOG", help="catalog folder(s)")
    parser.add_argument("--store", default=None,
                        help="label store (default: labels.sqlite here, or $PULSESORT_STORE); "
                             "it must exist: training only reads labels")
    parser.add_argument("--out", required=True, metavar="MODEL_DIR",
                        help="new model folder; its parent folder is the registry "
                             "(e.g. models/hollowmere-2031-v1)")
    parser.add_argument("--coverage", type=fraction, default=0.95,
                        help="target coverage of the conformal prediction sets (default 0.95)")
    parser.add_argument("--seed", type=int, default=0, help="random seed (default 0)")
    parser.add_argument("--max-iter", type=positive_int, default=80,
                        help="boosting iterations per fold model (default 80)")
    parser.add_argument("--station-variants", type=int, default=2, metavar="K",
                        help="also learn each labelled pulse as K other stations would record "
                             "it (other rates, noise, digitizers, full scales; default 2, "
                             "0: as recorded only)")
    parser.add_argument("--promote", action="store_true",
                        help="make the new model the registry's current one")
    add_parallel_arguments(parser)


def run(args) -> int:
    from classify.training import check_model_out, train_from_store

    check_model_out(args.out)
    with read_store(args.store) as store:
        model_dir, card = train_from_store(
            args.catalogs, store, args.out, coverage=args.coverage, n_jobs=args.jobs,
            dask_address=args.dask, chunk_size=args.chunk_size, progress=progress_of(args),
            random_state=args.seed, max_iter=args.max_iter,
            station_variants=args.station_variants,
            make_current=True if args.promote else None)
    m = card["metrics"]
    lines = [f"trained {card['version']} on {card['n_training_pulses']:,} labelled pulses "
             f"({card['n_flashes']:,} flashes) from "
             + ", ".join(c["catalog_id"] for c in card["training_catalogs"]),
             f"  grouped CV ({m['n_folds']} folds by flash): macro-F1 {m['macro_f1']:.4f}, "
             f"ECE {m['ece']:.4f}, conformal coverage {m['conformal_coverage']:.3f} "
             f"(target {m['conformal_target']:.2f})"]
    for c, v in m["per_class"].items():
        lines.append(f"  {c:<20} precision {v['precision']:.3f}  recall {v['recall']:.3f}  "
                     f"n {v['support']}")
    lines.append(f"model: {model_dir} (card: {model_dir / 'card.md'})")
    echo(args, *lines)
    return 0
