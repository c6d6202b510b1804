"""Training time and memory vs number of labels (1k / 10k / 100k).

1. Simulates one season with short records so simulation is quick (reference preset,
   field 2,000 samples int16 at 10 MS/s, VHF power 2,500 at 25 MS/s; 100,000 pulses by
   default) and computes its features once (``pulsesort features --jobs 2``).
2. For every label count N: a subprocess reads the features, joins the truth labels of
   the first N pulses (catalog order, i.e. whole stretches of the season as analysts
   label them), and times ``classify.training.fit_classifier`` (grouped-CV fold models,
   calibration, conformal thresholds, novelty reference): the fit alone. Its peak RSS is
   the whole subprocess (reading the table included).
3. The whole ``pulsesort train`` (features + join + fit + card + registry) on a separate
   10,000-pulse catalog of the same shape whose labels were imported with
   ``pulsesort labels import``.

Target (issue 4): training on 100,000 labelled pulses in under 60 s.

    OMP_NUM_THREADS=1 python benchmarks/bench_train.py --events 3000 --labels 1000,3000 \
        --train-events 2000                                          # smoke run
    python benchmarks/bench_train.py --json train.json              # full size
"""

from __future__ import annotations

import argparse
import json
import sys

import _common as c

SHAPE = dict(field_rate_hz=10e6, field_samples=2000, units="counts", scale=2.0 ** -7,
             vhf_rate_hz=25e6, vhf_samples=2500)
SHAPE_TEXT = "field 2,000 samples int16 at 10 MS/s, VHF power 2,500 at 25 MS/s"
TARGET_S = 60.0


def fit_only(features_csv, catalog_dir, labels_csv, n_labels, max_iter) -> dict:
    """Time ``fit_classifier`` on the first ``n_labels`` labelled pulses (subprocess side)."""
    import time

    import pandas as pd

    from classify.drift import read_feature_table
    from classify.stats import flash_groups
    from classify.training import fit_classifier
    from features import open_catalog

    cat = open_catalog(catalog_dir)
    feats = read_feature_table(features_csv, cat).iloc[:n_labels]
    truth = pd.read_csv(labels_csv, usecols=["event_id", "label"], dtype=str)
    table = feats.merge(truth, on="event_id", how="inner")
    table.insert(0, "catalog_id", cat.catalog_id)
    table["season"], table["station"] = cat.season, cat.station
    table["group"] = cat.catalog_id + "/" + flash_groups(table["flash_id"], table["event_id"])
    t0 = time.perf_counter()
    model = fit_classifier(table, random_state=0, max_iter=max_iter)
    seconds = time.perf_counter() - t0
    return {"n_labels": len(table), "fit_seconds": seconds, "n_folds": len(model.estimators_),
            "n_iter": int(model.n_iter_),
            "oof_accuracy": float((model.classes_[model.oof_proba_.argmax(axis=1)]
                                   == table["label"].to_numpy()).mean())}


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--events", type=int, default=100_000, help="pulses of the season")
    p.add_argument("--labels", default="1000,10000,100000",
                   help="comma-separated label counts (capped at --events)")
    p.add_argument("--train-events", type=int, default=10_000,
                   help="pulses of the catalog for the whole `pulsesort train` run")
    p.add_argument("--seed", type=int, default=5, help="simulator seed")
    p.add_argument("--max-iter", type=int, default=80, help="boosting iterations per fold")
    p.add_argument("--jobs", type=int, default=2, help="--jobs of the feature steps")
    p.add_argument("--fit-only", nargs=4, metavar=("FEATURES", "CATALOG", "LABELS", "N"),
                   help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.fit_only:
        f, cat, lab, n = args.fit_only
        print(json.dumps(fit_only(f, cat, lab, int(n), args.max_iter)))
        return 0
    counts = sorted({min(int(x), args.events) for x in args.labels.split(",")})
    info = c.machine_info()
    print(c.format_machine(info))
    rows = []
    with c.Workdir(args.workdir, keep=args.keep) as wd:
        c.check_disk(wd.root, c.catalog_bytes(args.events + args.train_events, 2000, 2500,
                                              field_itemsize=2) + args.events * 600)
        cat = wd.big("season")
        sim = c.simulate(cat, args.events, args.seed, "reference", **SHAPE)
        print(f"simulated {args.events:,} pulses in {sim.seconds:.0f} s")
        feats = wd.root / "season_features.csv"
        fm = c.run_measured(c.pulsesort("features", cat, "--out", feats, "--jobs", args.jobs,
                                        "--no-progress"))
        print(fm.stdout)
        for n in counts:
            m = c.run_measured([sys.executable, __file__, "--fit-only", feats, cat,
                                str(cat) + ".labels.csv", n, "--max-iter", args.max_iter])
            res = json.loads(m.stdout.strip().splitlines()[-1])
            rows.append({"run": "fit_classifier", "labels": res["n_labels"],
                         "seconds": res["fit_seconds"], "process_seconds": m.seconds,
                         "peak_rss_mb": m.peak_rss_mb, "folds": res["n_folds"],
                         "oof_accuracy": res["oof_accuracy"]})
        feats.unlink(missing_ok=True)
        tcat = wd.big("train10k")
        c.simulate(tcat, args.train_events, args.seed + 1, "reference", **SHAPE)
        store = wd.root / "train10k.sqlite"
        store.unlink(missing_ok=True)
        c.run_measured(c.pulsesort("labels", "import", str(tcat) + ".labels.csv", "--catalog",
                                   tcat, "--analyst", "tamsin", "--store", store))
        model = wd.root / "models" / "train10k"
        if model.exists():
            import shutil

            shutil.rmtree(model)
        m = c.run_measured(c.pulsesort("train", tcat, "--store", store, "--out", model,
                                       "--jobs", args.jobs, "--max-iter", args.max_iter,
                                       "--no-progress"))
        print(m.stdout)
        rows.append({"run": f"pulsesort train --jobs {args.jobs} (features + fit + card)",
                     "labels": args.train_events, "seconds": m.seconds,
                     "process_seconds": m.seconds, "peak_rss_mb": m.peak_rss_mb,
                     "folds": None, "oof_accuracy": None})
    print()
    title = (f"training time vs labels ({SHAPE_TEXT}; --max-iter {args.max_iter}); seconds: "
             "the fit alone, process_seconds: the whole subprocess")
    table = c.print_table(rows, ["run", "labels", "seconds", "process_seconds", "peak_rss_mb",
                                 "folds", "oof_accuracy"], title)
    checks = [{"target": "fit on 100,000 labels < 60 s", "value": r["seconds"],
               "met": r["seconds"] < TARGET_S}
              for r in rows if r["run"] == "fit_classifier" and r["labels"] >= 100_000]
    if checks:
        print()
        c.print_table(checks, ["target", "value", "met"])
    if args.json:
        c.write_json(args.json, {"benchmark": "train", "machine": info, "rows": rows,
                                 "checks": checks, "table": table, "shape": SHAPE_TEXT,
                                 "simulate": sim.as_dict(), "features": fm.as_dict()})
    return 0


if __name__ == "__main__":
    sys.exit(main())
