"""Argument helpers shared by the command modules (no science here)."""

from __future__ import annotations

import argparse
import os


def positive_int(text: str) -> int:
    """argparse type: an integer >= 1."""
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if v < 1:
        raise argparse.ArgumentTypeError(f"expected a number >= 1, got {v}")
    return v


def jobs_int(text: str) -> int:
    """argparse type for --jobs: >= 1, or -1 for one worker per core."""
    try:
        v = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if v == -1:
        return os.cpu_count() or 1
    if v < 1:
        raise argparse.ArgumentTypeError(f"expected a number >= 1 (or -1), got {v}")
    return v


def fraction(text: str) -> float:
    """argparse type: a number in (0, 1)."""
    try:
        v = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not 0.0 < v < 1.0:
        raise argparse.ArgumentTypeError(f"expected a number between 0 and 1, got {v}")
    return v


def add_parallel_arguments(parser: argparse.ArgumentParser) -> None:
    """--jobs, --dask and --chunk-size, the same on every heavy command."""
    from features.extract import DEFAULT_CHUNK_SIZE

    g = parser.add_argument_group("parallel processing")
    g.add_argument("--jobs", "-j", type=jobs_int, default=1, metavar="N",
                   help="worker processes on this machine (joblib; -1 = one per core); "
                        "default 1")
    g.add_argument("--dask", metavar="ADDRESS", default=None,
                   help="run the chunks on a dask.distributed scheduler at ADDRESS "
                        "(e.g. tcp://127.0.0.1:8786); needs pulsesort[dask]")
    g.add_argument("--chunk-size", type=positive_int, default=DEFAULT_CHUNK_SIZE, metavar="N",
                   help=f"pulses per unit of work (default {DEFAULT_CHUNK_SIZE}); results do "
                        "not depend on the backend or the number of jobs")
    g.add_argument("--progress", dest="progress", action="store_true", default=None,
                   help="always show a progress bar")
    g.add_argument("--no-progress", dest="progress", action="store_false",
                   help="never show a progress bar")
