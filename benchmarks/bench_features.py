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
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

import _common as c

TARGET_RATE = 5000.0      # pulses/s with --jobs 2 (issue 2, section 6)
TARGET_RSS = 1024 ** 3    # bytes, for 100,000 pulses


def measure_pass(catalog, n_events, jobs_list, out_dir, chunk_size, label="features"):
    """Floor and ``pulsesort features`` for every jobs value; rows for the table."""
    rows = []
    for jobs in jobs_list:
        fl = c.run_floor(catalog, n_jobs=jobs, chunk_size=chunk_size)
        floor = json.loads(fl.stdout.strip().splitlines()[-1])
        out = Path(out_dir) / f"features_j{jobs}.csv"
        m = c.run_measured(c.pulsesort("features", catalog, "--out", out, "--jobs", jobs,
                                       "--chunk-size", chunk_size, "--no-progress"))
        for name, meas in ((f"floor (envelope of {floor['envelope_of']})", fl), (label, m)):
            rows.append({"stage": name, "jobs": jobs, "pulses": n_events,
                         "seconds": meas.seconds, "pulses_per_s": n_events / meas.seconds,
                         "time_over_floor": meas.seconds / fl.seconds,
                         "self_reported_per_s": (c.reported_rate(meas.stdout)
                                                 if meas is m else None),
                         "peak_rss_mb": meas.peak_rss_mb, "processes": meas.peak_processes})
        out.unlink(missing_ok=True)
    return rows


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--events", type=int, default=100_000, help="pulses to simulate")
    p.add_argument("--seed", type=int, default=1, help="simulator seed")
    p.add_argument("--jobs", default="1,2", help="comma-separated --jobs values")
    p.add_argument("--chunk-size", type=int, default=256, help="rows per chunk, both passes (pulsesort's default)")
    p.add_argument("--catalog", default=None,
                   help="use this existing catalog instead of simulating one")
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
        rows = measure_pass(cat, n_events, jobs_list, wd.root, args.chunk_size)
    print()
    title = (f"pulsesort features vs floor, {n_events:,} pulses, reference shape (field 8,000 "
             "samples at 20 MS/s, VHF power 10,000 at 25 MS/s); wall clock incl. start-up")
    table = c.print_table(rows, ["stage", "jobs", "pulses", "seconds", "pulses_per_s",
                                 "time_over_floor", "self_reported_per_s", "peak_rss_mb",
                                 "processes"], title)
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
