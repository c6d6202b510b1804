"""Accuracy, calibration, coverage and review load of triage on unseen simulated seasons.

Trains a model as a user would (``pulsesort simulate`` a reference-preset season with
seed A, ``pulsesort labels import`` its truth labels as analyst "analyst_a",
``pulsesort train``), then triages three other seasons with ``pulsesort triage`` and
scores every pulse against the simulator's truth:

(a) ``next``: another seed, field sample rate (10 MS/s), sign convention (atmospheric),
    units (int16 counts), VHF gain and delay, and class mix (``--preset next``);
(b) ``hard``: no range, no 3-D positions, more noise, about 2 % clipped rows, 5 %
    missing VHF, another decay constant and VHF delay (``--preset hard``);
(c) rules only, zero labels (``pulsesort triage --rules``) on a reference season.

Per case: macro-F1 vs truth (``sklearn.metrics.f1_score(average="macro")`` over the true
classes), top-label ECE (``classify.stats.expected_calibration_error``, 15 bins),
empirical coverage of ``prediction_set`` against the model's target, fraction sent to
review and why, accuracy of the pulses not sent to review, novel fraction. Targets
(issue 4) beside the values: macro-F1 >= 0.99 (a) / >= 0.985 (b) / >= 0.85 (c);
<= 10 % review and >= 99.5 % right among the rest; ECE <= 0.03; coverage within 3
points of the target (model cases).

    OMP_NUM_THREADS=1 python benchmarks/bench_accuracy.py --train-events 3000 --events 2000
    python benchmarks/bench_accuracy.py --json accuracy.json        # full size
"""

from __future__ import annotations

import json
import shutil
import sys
from collections import Counter
from pathlib import Path

import _common as c
import numpy as np

CASES = (
    # name, preset, seed offset, rules mode, macro-F1 target
    ("a: next season", "next", 101, False, 0.99),
    ("b: hard season", "hard", 202, False, 0.985),
    ("c: rules, 0 labels", "reference", 303, True, 0.85),
)
TARGET_REVIEW = 0.10
TARGET_RIGHT = 0.995
TARGET_ECE = 0.03
TARGET_COVERAGE_POINTS = 0.03


def score(results_csv, labels_csv, coverage_target=None) -> dict:
    """Every metric of one triaged season against its truth labels."""
    import pandas as pd

    from classify.stats import empirical_coverage, expected_calibration_error, macro_f1
    from classify.triage import read_results

    res = read_results(results_csv)
    truth = pd.read_csv(labels_csv, usecols=["event_id", "label"], dtype=str)
    df = res.merge(truth, on="event_id", suffixes=("", "_true"), validate="one_to_one")
    if len(df) != len(truth):
        raise RuntimeError(f"{results_csv}: {len(df)} of {len(truth)} truth rows matched")
    classes = [col[2:] for col in res.columns if col.startswith("p_")]
    y, pred = df["label_true"].to_numpy(), df["label"].to_numpy()
    unknown = sorted(set(y) - set(classes))
    if unknown:
        raise RuntimeError(f"truth classes {unknown} are not classes of the triage output")
    proba = df[[f"p_{k}" for k in classes]].to_numpy(dtype=np.float64)
    sets = np.array([[k in s.split("|") for k in classes] for s in df["prediction_set"]])
    review = df["needs_review"].to_numpy(dtype=bool)
    reasons = Counter(r for text in df.loc[review, "review_reason"] for r in text.split(";") if r)
    rest = ~review
    out = {
        "pulses": len(df),
        "macro_f1": macro_f1(y, pred, labels=sorted(set(y))),
        "accuracy": float(np.mean(pred == y)),
        "ece": expected_calibration_error(proba, y, classes=classes),
        "coverage": empirical_coverage(sets, y, classes=classes),
        "coverage_target": coverage_target,
        "mean_set_size": float(sets.sum(axis=1).mean()),
        "review_fraction": float(review.mean()),
        "review_reasons": {k: v / len(df) for k, v in reasons.most_common()},
        "right_among_rest": float(np.mean(pred[rest] == y[rest])) if rest.any() else None,
        "novel_fraction": float(df["novel"].mean()),
        "recall": {k: float(np.mean(pred[y == k] == k)) for k in sorted(set(y))},
    }
    return out


def checks_of(name, rules, f1_target, s) -> list[dict]:
    rows = [{"case": name, "metric": "macro-F1", "value": s["macro_f1"],
             "target": f">= {f1_target}", "met": s["macro_f1"] >= f1_target}]
    if rules:
        return rows
    cov_gap = abs(s["coverage"] - s["coverage_target"])
    rows += [
        {"case": name, "metric": "sent to review", "value": s["review_fraction"],
         "target": f"<= {TARGET_REVIEW}", "met": s["review_fraction"] <= TARGET_REVIEW},
        {"case": name, "metric": "right among the rest", "value": s["right_among_rest"],
         "target": f">= {TARGET_RIGHT}",
         "met": s["right_among_rest"] is not None and s["right_among_rest"] >= TARGET_RIGHT},
        {"case": name, "metric": "ECE", "value": s["ece"], "target": f"<= {TARGET_ECE}",
         "met": s["ece"] <= TARGET_ECE},
        {"case": name, "metric": "coverage", "value": s["coverage"],
         "target": f"{s['coverage_target']:.2f} +- {TARGET_COVERAGE_POINTS}",
         "met": cov_gap <= TARGET_COVERAGE_POINTS},
    ]
    return rows


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--train-events", type=int, default=20_000,
                   help="pulses (all labelled) of the training season")
    p.add_argument("--events", type=int, default=20_000, help="pulses of every triaged season")
    p.add_argument("--seed", type=int, default=7, help="seed A of the training season (the "
                   "triaged seasons use A + 101, A + 202, A + 303)")
    p.add_argument("--max-iter", type=int, default=80, help="pulsesort train --max-iter")
    p.add_argument("--coverage", type=float, default=0.95, help="pulsesort train --coverage")
    p.add_argument("--jobs", type=int, default=2, help="--jobs of train and triage")
    p.add_argument("--triage-option", action="append", default=[], metavar="OPT",
                   help="extra option for every model triage, e.g. --triage-option=--adapt-priors")
    args = p.parse_args(argv)
    info = c.machine_info()
    print(c.format_machine(info))
    results, checks = [], []
    with c.Workdir(args.workdir, keep=args.keep) as wd:
        c.check_disk(wd.root, c.catalog_bytes(args.train_events, 8000, 10000)
                     + 3 * c.catalog_bytes(args.events, 8000, 10000))
        train = wd.big("train")
        c.simulate(train, args.train_events, args.seed, "reference")
        store = wd.root / "accuracy.sqlite"
        store.unlink(missing_ok=True)
        c.run_measured(c.pulsesort("labels", "import", str(train) + ".labels.csv", "--catalog",
                                   train, "--analyst", "analyst_a", "--store", store))
        model = wd.root / "models" / "accuracy-m1"
        shutil.rmtree(model, ignore_errors=True)
        tm = c.run_measured(c.pulsesort("train", train, "--store", store, "--out", model,
                                        "--coverage", args.coverage, "--max-iter",
                                        args.max_iter, "--jobs", args.jobs, "--no-progress"))
        print(tm.stdout)
        card = json.loads((model / "card.json").read_text())
        target_cov = card["metrics"]["conformal_target"]
        for name, preset, offset, rules, f1_target in CASES:
            cat = wd.big(f"case_{preset}_{offset}")
            c.simulate(cat, args.events, args.seed + offset, preset)
            out = wd.root / f"results_{preset}_{offset}.csv"
            how = ["--rules"] if rules else ["--model", model, *args.triage_option]
            m = c.run_measured(c.pulsesort("triage", cat, *how, "--out", out, "--jobs",
                                           args.jobs, "--no-progress"))
            print(m.stdout)
            s = score(out, Path(str(cat) + ".labels.csv"), None if rules else target_cov)
            s.update(case=name, preset=preset, seed=args.seed + offset,
                     mode="rules" if rules else "model", seconds=m.seconds)
            results.append(s)
            checks += checks_of(name, rules, f1_target, s)
            out.unlink(missing_ok=True)
            shutil.rmtree(cat, ignore_errors=True)
    print()
    title = (f"triage accuracy vs simulator truth: model trained on {args.train_events:,} "
             f"labelled pulses (reference preset, seed {args.seed}); {args.events:,} pulses "
             "per season")
    table = c.print_table(results, ["case", "mode", "pulses", "macro_f1", "accuracy", "ece",
                                    "coverage", "coverage_target", "mean_set_size",
                                    "review_fraction", "right_among_rest", "novel_fraction"],
                          title)
    print("\nwhy pulses were sent to review (fraction of all pulses; a pulse may have several "
          "reasons):")
    for s in results:
        why = ", ".join(f"{k} {100 * v:.1f} %" for k, v in s["review_reasons"].items())
        print(f"  {s['case']:<20} {why or '-'}")
    print("\nrecall per class:")
    for s in results:
        print(f"  {s['case']:<20} " + ", ".join(f"{k} {v:.4f}" for k, v in s["recall"].items()))
    print()
    ctable = c.print_table(checks, ["case", "metric", "value", "target", "met"],
                           "targets (issue 4)")
    if args.json:
        c.write_json(args.json, {"benchmark": "accuracy", "machine": info,
                                 "train_events": args.train_events, "events": args.events,
                                 "model_card_metrics": card["metrics"], "results": results,
                                 "checks": checks, "table": table, "checks_table": ctable})
    return 0


if __name__ == "__main__":
    sys.exit(main())
