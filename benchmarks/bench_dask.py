"""Dask vs joblib vs serial: ``pulsesort features`` and ``pulsesort triage`` on 2 workers.

Simulates a reference-shape catalog (20,000 pulses by default; field 8,000 samples at
20 MS/s, VHF power 10,000 at 25 MS/s), trains a model as in bench_triage.py, then runs
each command three ways:

* serial (``--jobs 1``);
* joblib (``--jobs 2``: two loky worker processes);
* Dask (``--dask ADDRESS``: a ``distributed.LocalCluster`` of 2 worker processes, one
  thread each, on 127.0.0.1, started before and kept across both commands).

and checks that the three output files are byte-identical. Peak RSS is the summed
resident memory of the command's process tree, plus the cluster's (scheduler,
nannies, workers) for the Dask runs. Times are wall clock including start-up; the
Dask runs do not pay the cluster's start-up (a cluster is started once and shared).

    OMP_NUM_THREADS=1 python benchmarks/bench_dask.py --events 2000 --train-events 1500
    python benchmarks/bench_dask.py --json dask.json          # full size
"""

from __future__ import annotations

import sys

import _common as c
from bench_triage import train_model


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--events", type=int, default=20_000, help="pulses of the catalog")
    p.add_argument("--train-events", type=int, default=5000, help="labelled training pulses")
    p.add_argument("--seed", type=int, default=3, help="seed of the catalog")
    p.add_argument("--train-seed", type=int, default=11, help="seed of the training season")
    p.add_argument("--max-iter", type=int, default=80, help="pulsesort train --max-iter")
    p.add_argument("--chunk-size", type=int, default=256, help="rows per chunk (pulsesort's default)")
    p.add_argument("--workers", type=int, default=2, help="Dask worker processes (and "
                   "joblib --jobs)")
    args = p.parse_args(argv)
    try:
        import distributed  # noqa: F401
    except ImportError:
        raise SystemExit("bench_dask.py needs the optional extra: pip install "
                         "'pulsesort[dask]'") from None
    info = c.machine_info()
    print(c.format_machine(info))
    rows = []
    with c.Workdir(args.workdir, keep=args.keep) as wd:
        c.check_disk(wd.root, c.catalog_bytes(args.events + args.train_events, 8000, 10000)
                     + 3 * args.events * 1500)
        model, _ = train_model(wd, args.train_events, args.train_seed, args.max_iter)
        cat = wd.big("dask_catalog")
        c.simulate(cat, args.events, args.seed, "reference")
        print(f"page cache warmed in {c.warm_cache(cat):.1f} s (untimed)")
        commands = {
            "features": lambda out: ["features", cat, "--out", out],
            "triage": lambda out: ["triage", cat, "--model", model, "--out", out],
        }
        outputs = {}
        w = args.workers
        for stage, make in commands.items():
            for backend, extra in (("serial", ["--jobs", "1"]), (f"joblib {w}", ["--jobs", w])):
                out = wd.root / f"{stage}_{backend.split()[0]}.csv"
                m = c.run_measured(c.pulsesort(*make(out), *extra, "--chunk-size",
                                               args.chunk_size, "--no-progress"))
                outputs[(stage, backend)] = out
                rows.append({"stage": stage, "backend": backend, "seconds": m.seconds,
                             "pulses_per_s": args.events / m.seconds,
                             "self_reported_per_s": c.reported_rate(m.stdout),
                             "peak_rss_mb": m.peak_rss_mb, "processes": m.peak_processes})
        with c.Cluster(w) as cl:
            for stage, make in commands.items():
                backend = f"dask {w} workers"
                out = wd.root / f"{stage}_dask.csv"
                m = c.run_measured(c.pulsesort(*make(out), "--dask", cl.address,
                                               "--chunk-size", args.chunk_size,
                                               "--no-progress"), extra_roots=[cl.pid])
                outputs[(stage, backend)] = out
                rows.append({"stage": stage, "backend": backend, "seconds": m.seconds,
                             "pulses_per_s": args.events / m.seconds,
                             "self_reported_per_s": c.reported_rate(m.stdout),
                             "peak_rss_mb": m.peak_rss_mb, "processes": m.peak_processes})
        for r in rows:
            ref = outputs[(r["stage"], "serial")].read_bytes()
            r["identical_to_serial"] = outputs[(r["stage"], r["backend"])].read_bytes() == ref
        for out in outputs.values():
            out.unlink(missing_ok=True)
    print()
    title = (f"serial vs joblib vs Dask on {args.workers} workers, {args.events:,} pulses "
             "(reference shape); wall clock incl. start-up; Dask RSS includes the cluster")
    table = c.print_table(rows, ["stage", "backend", "seconds", "pulses_per_s",
                                 "self_reported_per_s", "peak_rss_mb", "processes",
                                 "identical_to_serial"], title)
    ok = all(r["identical_to_serial"] for r in rows)
    print(f"\noutputs byte-identical across backends: {'yes' if ok else 'NO'}")
    if args.json:
        c.write_json(args.json, {"benchmark": "dask", "machine": info, "events": args.events,
                                 "rows": rows, "identical": ok, "table": table})
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
