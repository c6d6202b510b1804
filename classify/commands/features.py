"""``pulsesort features``: one row of physical features per pulse."""

from __future__ import annotations

import sys
import time

from features import open_catalog, schema
from features.extract import write_features

from ._common import add_parallel_arguments

NAME = "features"
HELP = "compute physical features (SI units) of every pulse of a catalog"


def add_arguments(parser):
    parser.add_argument("catalog", nargs="?", help="catalog folder")
    parser.add_argument("--out", "-o", help="output CSV (or .parquet with pyarrow)")
    parser.add_argument("--list", action="store_true",
                        help="print every feature with its unit and definition, then exit")
    parser.add_argument("--markdown", action="store_true", help="with --list: a Markdown table")
    add_parallel_arguments(parser)


def run(args) -> int:
    if args.list:
        print(f"feature schema {schema.SCHEMA_VERSION}")
        print(schema.format_table(markdown=args.markdown))
        return 0
    if not args.catalog or not args.out:
        print("pulsesort features: error: give CATALOG and --out FILE (or --list)",
              file=sys.stderr)
        return 2
    cat = open_catalog(args.catalog)
    t = time.perf_counter()
    out = write_features(cat, args.out, chunk_size=args.chunk_size, n_jobs=args.jobs,
                         dask_address=args.dask, progress=args.progress)
    dt = time.perf_counter() - t
    rate = cat.n_events / dt if dt > 0 else float("inf")
    print(f"wrote {cat.n_events:,} rows x {len(schema.FEATURES)} features to {out} "
          f"in {dt:.1f} s ({rate:,.0f} pulses/s)")
    return 0
