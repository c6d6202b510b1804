"""``python -m tests.speclit OUT --events N --seed S --profile P [--classes ...]``."""

from __future__ import annotations

import argparse
import json
import sys
import time

from features import InputError

from . import PROFILES, write_season
from ._classes import CLASSES


def main(argv=None) -> int:
    """Write a season from the command line; exit 0, or 2 on bad input."""
    ap = argparse.ArgumentParser(prog="python -m tests.speclit",
                                 description="Write a labelled catalog-v1 season of an "
                                             "invented world (station hollowmere).")
    ap.add_argument("out", metavar="OUT", help="catalog folder to create")
    ap.add_argument("--events", type=int, default=4000, help="events to catalogue")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--profile", default="shifted", choices=sorted(PROFILES))
    ap.add_argument("--classes", nargs="+", choices=CLASSES, metavar="CLASS",
                    help=f"classes to catalogue (of {', '.join(CLASSES)})")
    ap.add_argument("--mix", metavar="JSON", help='class shares, e.g. \'{"recoil": 2, '
                                                  '"narrow_bipolar": 1}\'')
    ap.add_argument("--set", nargs="+", default=[], metavar="KEY=JSON",
                    help="other profile settings, e.g. field_rate_hz=5e6")
    ap.add_argument("--overwrite", action="store_true")
    args = ap.parse_args(argv)
    over = {}
    try:
        if args.classes:
            over["classes"] = args.classes
        if args.mix:
            over["mix"] = _json(args.mix, "--mix")
        for item in args.set:
            key, sep, val = item.partition("=")
            if not sep:
                raise InputError(f"--set {item!r}: expected KEY=JSON")
            over[key] = _json(val, f"--set {key}")
        t0 = time.perf_counter()
        path, labels = write_season(args.out, n_events=args.events, seed=args.seed,
                                    profile=args.profile, overwrite=args.overwrite, **over)
    except InputError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    counts = labels["label"].value_counts().sort_index()
    print(f"wrote {path} ({len(labels)} events, {time.perf_counter() - t0:.1f} s)")
    for name, n in counts.items():
        print(f"  {name:20s} {n}")
    return 0


def _json(text, where):
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"{where}: not valid JSON ({exc.msg}): {text!r}") from None


if __name__ == "__main__":
    sys.exit(main())
