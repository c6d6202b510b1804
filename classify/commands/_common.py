"""Argument helpers shared by the command modules (no science here)."""

from __future__ import annotations

import argparse
import logging
import os
from pathlib import Path

from features import InputError
from features._checks import describe_path_kind


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


def echo(args, *lines: str) -> None:
    """Print a command's summary lines unless ``-q`` was given.

    ``-q`` keeps warnings and errors (logging, stderr) and drops summaries and
    progress chatter. The answer of a query command (``labels stats``,
    ``models list``...) is printed with plain ``print``: asking for it is the point.
    """
    if not getattr(args, "quiet", False):
        for line in lines:
            print(line)


def progress_of(args) -> bool | None:
    """The progress-bar setting: ``--progress``/``--no-progress``, else off under ``-q``."""
    if args.progress is None and getattr(args, "quiet", False):
        return False
    return args.progress


def check_output_file(path, suffixes: tuple[str, ...], option: str) -> Path:
    """Check an output file the user named before any work is done; return it.

    Parameters
    ----------
    path : str or path
    suffixes : tuple of str
        Accepted extensions, lower case with the dot (``(".csv", ".parquet")``).
    option : str
        The option that named it, for the message (``"--out"``).

    Raises
    ------
    features.InputError
        If the extension is not one of ``suffixes``, the path is a folder, or its
        folder is missing, not a folder or not writable.
    """
    out = Path(path)
    if out.suffix.lower() not in suffixes:
        raise InputError(f"{option} {out}: the file name must end in "
                         f"{' or '.join(suffixes)} (got {out.suffix or 'no extension'!r})")
    kind = describe_path_kind(out)
    if kind not in (None, "missing"):
        raise InputError(f"{option} {out}: is {kind}; give a file name")
    parent = out.parent
    pkind = describe_path_kind(parent)
    if pkind != "a folder":
        raise InputError(f"{option} {out}: its folder {parent} is "
                         f"{'missing' if pkind == 'missing' else pkind}")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(f"{option} {out}: its folder {parent} is not writable")
    return out


def check_output_folder(path, option: str, *, must_be_new: bool = False) -> Path:
    """Check a folder the user named for outputs (it may not exist yet); return it.

    Raises
    ------
    features.InputError
        If it is a file, is not empty when ``must_be_new``, or its nearest
        existing parent is not a writable folder.
    """
    out = Path(path)
    kind = describe_path_kind(out)
    if kind not in ("a folder", "missing"):
        raise InputError(f"{option} {out}: is {kind}, not a folder")
    if must_be_new and kind == "a folder" and any(out.iterdir()):
        raise InputError(f"{option} {out}: already exists and is not empty")
    parent = out if kind == "a folder" else out.parent
    while describe_path_kind(parent) == "missing" and parent != parent.parent:
        parent = parent.parent
    if describe_path_kind(parent) != "a folder":
        raise InputError(f"{option} {out}: {parent} is not a folder")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise InputError(f"{option} {out}: {parent} is not writable")
    return out


def read_store(path):
    """Open the label store at ``path`` (None: the default) for a command that only
    reads labels: a mistyped path is an error naming it, and nothing is created."""
    from classify.labels import LabelStore

    return LabelStore(path, create=False)


def deprecated(option: str, instead: str) -> None:
    """Log that an old spelling was used (it keeps working)."""
    logging.getLogger("pulsesort").warning("note: %s is deprecated; use %s", option, instead)
