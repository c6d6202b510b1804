"""Shared pieces of the paper figures: sizes, fonts, the matplotlib import, file output.

See :mod:`classify.figures`. Figures are built without pyplot (headless).
"""

from __future__ import annotations

import logging
from pathlib import Path

from features import InputError
from features.atomic import atomic_open

logger = logging.getLogger("pulsesort")

#: Figure widths in inches: a journal column and a full page (common practice, no source).
SIZES = {"column": 3.5, "page": 7.0}
#: Output formats, chosen by the file extension.
FORMATS = ("png", "pdf", "svg")
#: Resolution of PNG output, dots per inch (a common journal minimum for line art is 300).
DPI = 300
TIME_LABEL = "Time from trigger (µs)"
FONT_SIZE = {"column": 7, "page": 8}


def _mpl():
    try:
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise InputError("figures need the optional extra: pip install 'pulsesort[figures]'"
                         ) from exc
    return Figure


def check_size(size: str) -> float:
    if size not in SIZES:
        raise InputError(f"size must be one of {sorted(SIZES)}, got {size!r}")
    return SIZES[size]


def new_figure(size: str, height_in: float):
    return _mpl()(figsize=(check_size(size), height_in), layout="constrained")


def style_context(size):
    import matplotlib

    return matplotlib.rc_context({"font.size": FONT_SIZE[size], "axes.titlesize":
                                  FONT_SIZE[size], "legend.fontsize": FONT_SIZE[size] - 1})


def check_figure_path(path) -> str:
    """The format of a figure file from its extension ("png", "pdf" or "svg").

    Raises
    ------
    features.InputError
        For another extension (naming the file and the formats allowed).
    FileNotFoundError
        If the file's folder does not exist.
    """
    path = Path(path)
    fmt = path.suffix.lower().lstrip(".")
    if fmt not in FORMATS:
        raise InputError(f"{path}: unknown figure format {path.suffix or '(none)'!r}; use "
                         + ", ".join(f".{f}" for f in FORMATS))
    if not path.parent.is_dir():
        raise InputError(f"{path.parent}: no such folder for the figure")
    return fmt


def save_figure(fig, path, *, dpi: int = DPI) -> Path:
    """Write a figure as PNG, PDF or SVG (by the extension; :func:`check_figure_path`),
    atomically (temporary file + rename)."""
    path = Path(path)
    fmt = check_figure_path(path)
    import matplotlib

    # no dates and fixed element ids: the same figure gives the same bytes
    meta = {"pdf": {"CreationDate": None}, "svg": {"Date": None}}.get(fmt)
    with matplotlib.rc_context({"svg.hashsalt": "pulsesort"}), atomic_open(path, "wb") as fh:
        fig.savefig(fh, format=fmt, dpi=dpi, metadata=meta)
    logger.debug("figure written to %s", path)
    return path

