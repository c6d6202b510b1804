"""Speed and memory of ``pulsesort features`` against the floor, at the reference shape.

Simulates the reference catalog (field 8,000 samples at 20 MS/s float32, VHF power
10,000 samples at 25 MS/s float32, about 20 mapped sources per pulse; 100,000 pulses
by default, about 7.4 GB on disk), reads it once into the page cache (untimed), then
times, for every ``--jobs`` value:

* the floor: a memory-mapped read of the same arrays in chunks of rows plus one
  analytic-signal envelope ``abs(scipy.signal.hilbert(row))`` of every VHF row over
  its whole record (``_common.floor_pass``), on that many processes;
* ``pulsesort features CATALOG --out F.csv --jobs N`` as a subprocess.

Both are subprocesses whose whole process tree (joblib workers included) is sampled
for peak RSS every 20 ms; times are wall clock, interpreter start and imports
included. Targets (issue 2, section 6): >= 5,000 pulses/s with --jobs 2 on 2 cores,
peak memory under 1 GB for 100,000 pulses.

    OMP_NUM_THREADS=1 python benchmarks/bench_features.py --events 2000   # smoke run
    python benchmarks/bench_features.py --json features.json              # full size
    python benchmarks/bench_features.py --events 20000 --jobs 2 --repeat 5  # shared machine

``--repeat N`` runs the floor and the command back to back N times and reports the
medians and the median of the per-pair ratios: on a machine shared with other work
the load changes between runs, and a pair sees the same load.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import _common as c
import numpy as np

TARGET_RATE = 5000.0      # pulses/s with --jobs 2 (issue 2, section 6)
TARGET_RSS = 1024 ** 3    # bytes, for 100,000 pulses


def measure_pass(catalog, n_events, jobs_list, out_dir, chunk_size, label="features",
                 repeat=1):
    """Floor and ``pulsesort features`` for every jobs value; rows for the table.

    With ``repeat`` > 1 the floor and the command run back to back that many times per
    jobs value (so both see the same load on a shared machine); the row gives the
    medians, and ``time_over_floor`` is the median of the ratios of each pair.
    """
    rows = []
    for jobs in jobs_list:
        pairs = []
        for _ in range(repeat):
            fl = c.run_floor(catalog, n_jobs=jobs, chunk_size=chunk_size)
            floor = json.loads(fl.stdout.strip().splitlines()[-1])
            out = Path(out_dir) / f"features_j{jobs}.csv"
            m = c.run_measured(c.pulsesort("features", catalog, "--out", out, "--jobs", jobs,
                                           "--chunk-size", chunk_size, "--no-progress"))
            out.unlink(missing_ok=True)
            pairs.append((fl, m, floor))
        ratio = float(np.median([m.seconds / fl.seconds for fl, m, _ in pairs]))
        cpu_ratio = float(np.median([m.cpu_seconds / fl.cpu_seconds for fl, m, _ in pairs]))
        for name, which in ((f"floor (envelope of {pairs[0][2]['envelope_of']})", 0),
                            (label, 1)):
            meas = [p[which] for p in pairs]
            seconds = float(np.median([x.seconds for x in meas]))
            rows.append({"stage": name, "jobs": jobs, "pulses": n_events, "runs": repeat,
                         "seconds": seconds, "pulses_per_s": n_events / seconds,
                         "time_over_floor": 1.0 if which == 0 else ratio,
                         "cpu_seconds": float(np.median([x.cpu_seconds for x in meas])),
                         "cpu_over_floor": 1.0 if which == 0 else cpu_ratio,
                         "self_reported_per_s": (float(np.median([c.reported_rate(x.stdout)
                                                                  for x in meas]))
                                                 if which == 1 else None),
                         "peak_rss_mb": max(x.peak_rss_mb for x in meas),
                         "processes": max(x.peak_processes for x in meas),
                         "all_seconds": [x.seconds for x in meas]})
    return rows


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--events", type=int, default=100_000, help="pulses to simulate")
    p.add_argument("--seed", type=int, default=1, help="simulator seed")
    p.add_argument("--jobs", default="1,2", help="comma-separated --jobs values")
    p.add_argument("--chunk-size", type=int, default=256, help="rows per chunk, both passes (pulsesort's default)")
    p.add_argument("--catalog", default=None,
                   help="use this existing catalog instead of simulating one")
    p.add_argument("--repeat", type=int, default=1,
                   help="run the floor and the command back to back this many times per "
                        "--jobs value and report medians (for a shared machine)")
    args = p.parse_args(argv)
    jobs_list = [int(j) for j in args.jobs.split(",")]
    info = c.machine_info()
    print(c.format_machine(info))
    with c.Workdir(args.workdir, keep=args.keep) as wd:
        sim = None
        if args.catalog:
            cat = Path(args.catalog)
            n = json.loads((cat / "catalog.json").read_text())
            n_events = sum(1 for _ in open(cat / n["events"])) - 1
        else:
            n_events = args.events
            c.check_disk(wd.root, c.catalog_bytes(n_events, 8000, 10000))
            cat = wd.big("reference")
            sim = c.simulate(cat, n_events, args.seed, "reference")
            print(f"simulated {n_events:,} pulses in {sim.seconds:.0f} s "
                  f"(peak RSS {sim.peak_rss_mb:,.0f} MB)")
        print(f"page cache warmed in {c.warm_cache(cat):.1f} s (untimed)")
        rows = measure_pass(cat, n_events, jobs_list, wd.root, args.chunk_size,
                            repeat=args.repeat)
    print()
    title = (f"pulsesort features vs floor, {n_events:,} pulses, reference shape (field 8,000 "
             "samples at 20 MS/s, VHF power 10,000 at 25 MS/s); wall clock incl. start-up")
    table = c.print_table(rows, ["stage", "jobs", "pulses", "runs", "seconds", "pulses_per_s",
                                 "time_over_floor", "cpu_seconds", "cpu_over_floor",
                                 "self_reported_per_s", "peak_rss_mb", "processes"], title)
    checks = []
    for r in rows:
        if r["stage"] == "features" and r["jobs"] == 2:
            checks.append({"target": ">= 5,000 pulses/s with --jobs 2",
                           "value": r["pulses_per_s"], "met": r["pulses_per_s"] >= TARGET_RATE})
    worst = max(r["peak_rss_mb"] for r in rows if r["stage"] == "features")
    checks.append({"target": f"peak RSS < 1 GB ({n_events:,} pulses"
                             + ("" if n_events >= 100_000 else "; target is for 100,000") + ")",
                   "value": worst, "met": worst * c.MB < TARGET_RSS})
    print()
    c.print_table(checks, ["target", "value", "met"])
    if args.json:
        c.write_json(args.json, {"benchmark": "features", "machine": info,
                                 "events": n_events, "simulate": sim and sim.as_dict(),
                                 "rows": rows, "checks": checks, "table": table})
    return 0


if __name__ == "__main__":
    sys.exit(main())
