"""``pulsesort demo``: the whole job on an invented station, in a fresh folder."""

from __future__ import annotations

import sys

from ._common import check_output_folder, echo, jobs_int, positive_int

NAME = "demo"
HELP = "run the whole job (simulate, label, train, triage) on the invented station hollowmere"


def add_arguments(parser):
    parser.add_argument("--dir", default="pulsesort-demo",
                        help="fresh folder for the demo (default: ./pulsesort-demo)")
    parser.add_argument("--events", type=positive_int, default=4000,
                        help="pulses in the labelled season (default 4000)")
    parser.add_argument("--next-events", type=positive_int, default=4000,
                        help="pulses in the next season (default 4000)")
    parser.add_argument("--seed", type=int, default=2031)
    parser.add_argument("--jobs", "-j", type=jobs_int, default=2,
                        help="worker processes (default 2)")


def run(args) -> int:
    from classify.demo import run_demo
    from classify.triage import print_summary

    check_output_folder(args.dir, "--dir", must_be_new=True)
    s = run_demo(args.dir, events=args.events, next_events=args.next_events, seed=args.seed,
                 n_jobs=args.jobs, echo=lambda m: echo(args, m))
    if args.quiet:
        return 0
    print()
    print_summary(s["triage"], file=sys.stdout)
    print(f"against the simulator's truth: macro-F1 {s['macro_f1_vs_truth']:.4f}; "
          f"{100 * s['accuracy_not_reviewed']:.2f} % right among pulses not sent to review")
    print(f"with no label at all (cold start, {s['coldstart'].name}): macro-F1 "
          f"{s['coldstart_macro_f1']:.4f}")
    print(f"demo finished in {s['seconds']:.0f} s; everything is in {s['folder']}/")
    d, store = s["folder"], s["store"]
    print("\nnext, try:")
    print(f"  pulsesort labels stats --store {store}")
    print(f"  pulsesort labels conflicts --store {store}")
    print(f"  pulsesort review {s['results']} --catalog {s['season_b']} --store {store} "
          "--analyst you")
    print(f"  pulsesort report {s['results']} --catalog {s['season_b']} --out {d}/report.html")
    print(f"  pulsesort drift {s['season_a']} {s['season_b']} --model {s['model_dir']} "
          f"--out {d}/drift.html")
    print(f"  pulsesort labels import {s['new_labels']} --catalog {s['season_b']} "
          f"--store {store}")
    print(f"  pulsesort retrain {s['season_b']} --store {store} --with {s['season_a']} "
          f"--current {s['model_dir']} --out {d}/models/hollowmere-2032-v1")
    print(f"  pulsesort models list --registry {d}/models")
    print(f"  cat {s['card']}")
    return 0
