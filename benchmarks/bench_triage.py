"""Speed and memory of ``pulsesort triage`` (features + classification) against the floor.

1. Trains a model as a user would: ``pulsesort simulate`` a labelled season (reference
   preset, ``--train-events`` pulses, 5,000 by default), ``pulsesort labels import`` its
   truth labels (analyst "wren"), ``pulsesort train``.
2. Default mode: simulates the reference catalog (field 8,000 samples at 20 MS/s, VHF
   power 10,000 at 25 MS/s; 100,000 pulses, about 7.4 GB) and times
   ``pulsesort triage CATALOG --model M --out R.csv --jobs 2`` against the floor (a
   memory-mapped read of the arrays plus one ``scipy.signal.hilbert`` envelope per VHF
   row, ``_common.floor_pass``) on as many processes.
3. ``--million``: the same on a 1,000,000-pulse catalog of a smaller shape that fits a
   laptop's disk: field 2,000 samples int16 counts at 10 MS/s (200 us, 100 us before the
   trigger), VHF power 2,500 samples float32 at 25 MS/s (100 us); about 16 GB with its
   sources. The simulator writes it in chunks, so the writer's memory stays flat too.

Peak RSS is the summed resident memory of the command's process tree (joblib workers
included), sampled every 20 ms; times are wall clock including start-up. The label
agreement with the simulator's truth is printed as a sanity check (accuracy targets
are bench_accuracy.py's). Targets (issues 4 and 7): >= 5,000 pulses/s with --jobs 2 at
the reference shape; peak RSS under 1 GB for 1,000,000 pulses (flat in catalog size).

    OMP_NUM_THREADS=1 python benchmarks/bench_triage.py --events 2000 --train-events 1500
    OMP_NUM_THREADS=1 python benchmarks/bench_triage.py --million --events 5000
    python benchmarks/bench_triage.py --json triage.json                 # full size
    python benchmarks/bench_triage.py --million --json triage_1m.json    # full size
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import _common as c

TARGET_RATE = 5000.0
TARGET_RSS = 1024 ** 3
REFERENCE_SHAPE = {}
MILLION_SHAPE = dict(field_rate_hz=10e6, field_samples=2000, units="counts",
                     scale=2.0 ** -7, vhf_rate_hz=25e6, vhf_samples=2500)
MILLION_TEXT = ("field 2,000 samples int16 at 10 MS/s, VHF power 2,500 float32 at 25 MS/s")
REFERENCE_TEXT = ("field 8,000 samples float32 at 20 MS/s, VHF power 10,000 float32 at "
                  "25 MS/s")


def train_model(wd, n_events, seed, max_iter):
    """Simulate, import and train through the CLI; return (model_dir, measurements)."""
    cat = wd.big("train")
    sim = c.simulate(cat, n_events, seed, "reference")
    store = wd.root / "labels.sqlite"
    store.unlink(missing_ok=True)
    imp = c.run_measured(c.pulsesort("labels", "import", str(cat) + ".labels.csv", "--catalog",
                                     cat, "--analyst", "wren", "--store", store))
    model = wd.root / "models" / f"bench-{n_events}"
    if model.exists():
        import shutil

        shutil.rmtree(model)
    train = c.run_measured(c.pulsesort("train", cat, "--store", store, "--out", model,
                                       "--max-iter", max_iter, "--no-progress"))
    print(train.stdout)
    return model, {"simulate": sim, "import": imp, "train": train}


def label_agreement(results_csv, labels_csv) -> float:
    """Fraction of triage labels equal to the simulator's truth (two columns read only)."""
    import pandas as pd

    got = pd.read_csv(results_csv, usecols=["event_id", "label"], dtype=str)
    truth = pd.read_csv(labels_csv, usecols=["event_id", "label"], dtype=str)
    both = got.merge(truth, on="event_id", suffixes=("", "_true"))
    if len(both) != len(truth):
        raise RuntimeError(f"{results_csv}: {len(both)} rows match the {len(truth)} truth rows")
    return float((both["label"] == both["label_true"]).mean())


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--million", action="store_true",
                   help=f"1,000,000 pulses of a smaller shape ({MILLION_TEXT})")
    p.add_argument("--events", type=int, default=None,
                   help="pulses of the triaged catalog (default 100,000; 1,000,000 with "
                        "--million)")
    p.add_argument("--train-events", type=int, default=5000, help="labelled training pulses")
    p.add_argument("--seed", type=int, default=2, help="seed of the triaged catalog")
    p.add_argument("--train-seed", type=int, default=11, help="seed of the training season")
    p.add_argument("--max-iter", type=int, default=80, help="pulsesort train --max-iter")
    p.add_argument("--jobs", default="2", help="comma-separated --jobs values")
    p.add_argument("--chunk-size", type=int, default=256, help="rows per chunk (pulsesort's default)")
    p.add_argument("--catalog", default=None,
                   help="triage this existing simulated catalog instead of simulating one")
    args = p.parse_args(argv)
    jobs_list = [int(j) for j in args.jobs.split(",")]
    n_events = args.events or (1_000_000 if args.million else 100_000)
    shape, shape_text = ((MILLION_SHAPE, MILLION_TEXT) if args.million
                         else (REFERENCE_SHAPE, REFERENCE_TEXT))
    info = c.machine_info()
    print(c.format_machine(info))
    rows, extra = [], {}
    with c.Workdir(args.workdir, keep=args.keep) as wd:
        if args.catalog:
            cat = Path(args.catalog).resolve()
            man = json.loads((cat / "catalog.json").read_text())
            n_events = man["simulation"]["n_events"]
            shape_text = f"the given catalog {cat}"
            need = 0
        else:
            fs = shape.get("field_samples", 8000)
            vs = shape.get("vhf_samples", 10000)
            isz = 2 if shape.get("units") == "counts" else 4
            need = (c.catalog_bytes(n_events, fs, vs, field_itemsize=isz)
                    + c.catalog_bytes(args.train_events, 8000, 10000) + n_events * 700)
        c.check_disk(wd.root, need)
        model, train_meas = train_model(wd, args.train_events, args.train_seed, args.max_iter)
        extra["train"] = {k: v.as_dict() for k, v in train_meas.items()}
        if not args.catalog:
            cat = wd.big("million" if args.million else "reference")
            sim = c.simulate(cat, n_events, args.seed, "reference", **shape)
            extra["simulate"] = sim.as_dict()
            print(f"simulated {n_events:,} pulses in {sim.seconds:.0f} s (writer peak RSS "
                  f"{sim.peak_rss_mb:,.0f} MB)")
        print(f"page cache warmed in {c.warm_cache(cat):.1f} s (untimed)")
        labels = Path(str(cat) + ".labels.csv")
        for jobs in jobs_list:
            fl = c.run_floor(cat, n_jobs=jobs, chunk_size=args.chunk_size)
            floor = json.loads(fl.stdout.strip().splitlines()[-1])
            out = wd.root / f"triage_j{jobs}.csv"
            m = c.run_measured(c.pulsesort(
                "triage", cat, "--model", model, "--out", out, "--jobs", jobs,
                "--chunk-size", args.chunk_size, "--no-progress"))
            print(m.stdout)
            agree = label_agreement(out, labels) if labels.is_file() else None
            for name, meas in ((f"floor (envelope of {floor['envelope_of']})", fl),
                               ("triage", m)):
                rows.append({"stage": name, "jobs": jobs, "pulses": n_events,
                             "seconds": meas.seconds, "pulses_per_s": n_events / meas.seconds,
                             "time_over_floor": meas.seconds / fl.seconds,
                             "cpu_seconds": meas.cpu_seconds,
                             "cpu_over_floor": meas.cpu_seconds / fl.cpu_seconds,
                             "self_reported_per_s": (c.reported_rate(meas.stdout)
                                                     if meas is m else None),
                             "peak_rss_mb": meas.peak_rss_mb,
                             "processes": meas.peak_processes,
                             "label_agreement": agree if meas is m else None})
            out.unlink(missing_ok=True)
    print()
    tr = extra["train"]["train"]
    print(f"training: pulsesort train on {args.train_events:,} labels took "
          f"{tr['seconds']:.1f} s (peak RSS {tr['peak_rss_mb']:,.0f} MB)")
    title = (f"pulsesort triage vs floor, {n_events:,} pulses ({shape_text}); wall clock incl. "
             "start-up")
    table = c.print_table(rows, ["stage", "jobs", "pulses", "seconds", "pulses_per_s",
                                 "time_over_floor", "cpu_seconds", "cpu_over_floor",
                                 "self_reported_per_s", "peak_rss_mb", "processes",
                                 "label_agreement"], title)
    checks = []
    tri = [r for r in rows if r["stage"] == "triage"]
    if not args.million:
        for r in tri:
            if r["jobs"] == 2:
                checks.append({"target": ">= 5,000 pulses/s with --jobs 2 (reference shape)",
                               "value": r["pulses_per_s"],
                               "met": r["pulses_per_s"] >= TARGET_RATE})
    worst = max(r["peak_rss_mb"] for r in tri)
    checks.append({"target": f"peak RSS < 1 GB ({n_events:,} pulses)", "value": worst,
                   "met": worst * c.MB < TARGET_RSS})
    print()
    c.print_table(checks, ["target", "value", "met"])
    if args.json:
        c.write_json(args.json, {"benchmark": "triage-million" if args.million else "triage",
                                 "machine": info, "events": n_events, "shape": shape_text,
                                 "rows": rows, "checks": checks, "table": table, **extra})
    return 0


if __name__ == "__main__":
    sys.exit(main())
