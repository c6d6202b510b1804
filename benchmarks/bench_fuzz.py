"""The long fuzz run: thousands of variants of a small valid catalog, by hand.

The same generator and the same judgement as ``tests/test_fuzz.py`` (which runs a
few hundred variants in the suite): each variant is the small invented catalog
with one or two seeded mutations, sent through ``pulsesort check``, ``features``
and ``triage --rules`` in this process via ``classify.cli.main``, with the strict
exit-code mapping (``LEGACY_VALUEERROR_IS_INPUT`` off). A variant is handled well
when every command ends in exit 0 or in a clean exit 2 naming the mutated file
and a key, line or column, leaves no output behind when it fails, and ``check``
agrees with the other two. The script prints the variants tried and handled
well, then one reproducer per kind of failure (the mutations, and the last line
of the first problem), and with ``--json`` writes the figures.

    OMP_NUM_THREADS=1 python benchmarks/bench_fuzz.py --variants 3000
    python benchmarks/bench_fuzz.py --variants 200 --seed 7 --json fuzz.json
"""

from __future__ import annotations

import argparse
import contextlib
import io
import re
import sys
import time
from collections import OrderedDict
from pathlib import Path

import _common as c

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

import classify.cli as cli  # noqa: E402
from tests import test_fuzz as fz  # noqa: E402


class _Capture:
    """Stands in for pytest's capsys: stderr of each command, stdout discarded."""

    def __init__(self):
        self.err = io.StringIO()

    def readouterr(self):
        text = self.err.getvalue()
        self.err.seek(0)
        self.err.truncate()
        return type("Captured", (), {"out": "", "err": text})()


def _kind(problem: str) -> str:
    """A short key grouping problems of the same kind: the command and, for a crash,
    the exception and its message without numbers; else the problem's first words."""
    command, _, rest = problem.partition(": ")
    if "internal error: " in rest:
        rest = rest.split("internal error: ", 1)[1].splitlines()[0]
    return command + ": " + re.sub(r"[-+]?\d[\d.e+-]*", "#", rest.splitlines()[0])[:100]


def _first_line(problem: str) -> str:
    command, _, rest = problem.partition(": ")
    if "internal error: " in rest:
        rest = rest.split("internal error: ", 1)[1]
    return f"{command}: {rest.splitlines()[0][:200]}"


def main(argv=None) -> int:
    parser = c.base_parser(__doc__.splitlines()[0])
    parser.formatter_class = argparse.RawDescriptionHelpFormatter
    parser.add_argument("--variants", type=int, default=2000, help="variants to try")
    parser.add_argument("--seed", type=int, default=fz.SEED + 1,
                        help="generator seed (the suite's is %(default)s - 1)")
    args = parser.parse_args(argv)
    cli.LEGACY_VALUEERROR_IS_INPUT = False
    with c.Workdir(args.workdir, keep=args.keep, prefix="pulsesort-fuzz-") as wd:
        work = wd.root
        base = fz.base_catalog(work / "base")
        cap = _Capture()
        kinds: OrderedDict[str, tuple[int, str, str]] = OrderedDict()
        counts: dict[str, int] = {}
        handled = 0
        t0 = time.perf_counter()
        all_variants = fz.variants(args.seed, args.variants)
        for i, mutations in enumerate(all_variants):
            with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(cap.err):
                outcome = fz.run_variant(base, work / "v", mutations, cap)
            if outcome.handled:
                handled += 1
                continue
            key = _kind(outcome.problems[0])
            counts[key] = counts.get(key, 0) + 1
            kinds.setdefault(key, (i, " + ".join(map(str, mutations)),
                                   _first_line(outcome.problems[0])))
            if (i + 1) % 250 == 0:
                print(f"  {i + 1} variants, {handled} handled well", file=sys.stderr)
        seconds = time.perf_counter() - t0
    tried = len(all_variants)
    print(f"variants tried: {tried}; handled well: {handled} ({100 * handled / tried:.1f} %); "
          f"{seconds:.0f} s (seed {args.seed})")
    if kinds:
        print("\nnot handled well, one reproducer per kind "
              "(index: mutations -> first problem):")
        for key, (i, muts, problem) in kinds.items():
            print(f"  [{counts[key]}x] #{i}: {muts}\n      -> {problem}")
    if args.json:
        c.write_json(args.json, {"variants_tried": tried, "handled_well": handled,
                                 "seed": args.seed, "seconds": seconds,
                                 "kinds": {k: {"count": counts[k], "example": v[1],
                                               "problem": v[2]} for k, v in kinds.items()}})
    return 0


if __name__ == "__main__":
    sys.exit(main())
