"""``pulsesort features``: one row of physical features per pulse."""

from __future__ import annotations

import importlib.util
import time

from features import InputError, open_catalog, schema
from features.extract import write_features

from ._common import add_parallel_arguments, check_output_file, echo, progress_of

NAME = "features"
HELP = "compute physical features (SI units) of every pulse of a catalog"

#: Output formats by extension (Parquet needs the optional pyarrow).
OUTPUT_SUFFIXES = (".csv", ".parquet")


def add_arguments(parser):
    parser.add_argument("catalog", nargs="?", help="catalog folder")
    parser.add_argument("--out", "-o", help="output file: .csv, or .parquet (with pyarrow)")
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
        raise InputError("give CATALOG and --out FILE (or --list)")
    out = check_output_file(args.out, OUTPUT_SUFFIXES, "--out")
    for needed, module, extra in ((out.suffix.lower() == ".parquet", "pyarrow", "parquet"),
                                  (args.dask is not None, "distributed", "dask")):
        if needed and importlib.util.find_spec(module) is None:
            raise InputError(f"{'--out ' + str(out) if extra == 'parquet' else '--dask'} needs "
                             f"the optional extra: pip install 'pulsesort[{extra}]'")
    cat = open_catalog(args.catalog)
    t = time.perf_counter()
    out = write_features(cat, out, chunk_size=args.chunk_size, n_jobs=args.jobs,
                         dask_address=args.dask, progress=progress_of(args))
    dt = time.perf_counter() - t
    rate = cat.n_events / dt if dt > 0 else float("inf")
    echo(args, f"wrote {cat.n_events:,} rows x {len(schema.FEATURES)} features to {out} "
               f"in {dt:.1f} s ({rate:,.0f} pulses/s)")
    return 0
