"""Figures for papers: one pulse, per-class feature distributions, confidence (matplotlib).

Needs the optional extra ``figures`` (``pip install 'pulsesort[figures]'``).
Figures are :class:`matplotlib.figure.Figure` objects built without pyplot, so
they render headless (Agg for PNG) and never touch an interactive session.
Widths follow a journal column (``size="column"``, 3.5 in) or a full page
(``size="page"``, 7 in); :func:`save_figure` writes PNG, PDF or SVG by the
file's extension, atomically. Every axis label states its unit in
parentheses; values are shown in display units (µs, km, kA; see
:func:`classify.explain.display_spec`), computed from the SI columns.

Conventions of the pulse figure: time is the physical arrival time at the
antenna relative to the trigger, in µs; the field change has its baseline
removed and the fast antenna's decay compensated, in V/m, physics convention
(+ = field vector up); the VHF power is in dB relative to its own peak.

Examples
--------
>>> fig = confidence_figure(results)                       # doctest: +SKIP
>>> save_figure(fig, "confidence.pdf")                     # doctest: +SKIP
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from features import InputError

from ._feature_values import (
    MAIN_FEATURES,
    PAIR_FEATURES,
    feature_values,
    result_classes,
)
from ._figure_base import (
    DPI,
    FORMATS,
    SIZES,
    check_figure_path,
    check_size,
    new_figure,
    save_figure,
    style_context,
)
from ._pulse_figure import pulse_figure, pulse_figure_from_catalog
from .svgplot import PALETTE

#: At most this many points per scatter panel (a random, seeded subset).
MAX_SCATTER_POINTS = 20_000

__all__ = ["SIZES", "FORMATS", "DPI", "MAIN_FEATURES", "PAIR_FEATURES", "feature_values",
           "pulse_figure", "class_distributions_figure", "pairwise_figure",
           "confidence_figure", "check_figure_path", "save_figure",
           "pulse_figure_from_catalog"]

def _classes(results) -> list[str]:

    if "label" not in results.columns:
        raise InputError("the results have no 'label' column; is it a 'pulsesort triage' "
                         "output?")
    return result_classes(results)


def _span(values, log):
    """(low, high) of the finite values, widened when they are all equal."""
    finite = values[np.isfinite(values)]
    if finite.size == 0:
        return 0.0, 1.0
    lo, hi = float(finite.min()), float(finite.max())
    if hi <= lo:
        lo, hi = (lo / 2, hi * 2) if log else (lo - 0.5 * (abs(lo) or 1.0),
                                                hi + 0.5 * (abs(hi) or 1.0))
    return lo, hi


def _bins(values, log, n=30):
    lo, hi = _span(values, log)
    return np.geomspace(lo, hi, n + 1) if log else np.linspace(lo, hi, n + 1)


# ----------------------------------------------------------------------- a season
def class_distributions_figure(results: pd.DataFrame, *, features=MAIN_FEATURES,
                               size: str = "page"):
    """A panel per main feature: its distribution in every predicted class.

    Parameters
    ----------
    results : pandas.DataFrame
        Triage results (``label`` and the feature columns, SI units).
    features : sequence of (name, absolute)
        Default :data:`MAIN_FEATURES`; features the results lack are skipped.
    size : {"column", "page"}

    Returns
    -------
    matplotlib.figure.Figure
    """
    classes = _classes(results)
    names = [(n, a) for n, a in features if n in results.columns]
    if not names:
        raise InputError(f"the results have none of the features {[n for n, _ in features]}")
    ncols = 2 if size == "column" else 4
    nrows = -(-len(names) // ncols)
    width = check_size(size)
    labels = results["label"].astype(str).to_numpy()
    with style_context(size):
        fig = new_figure(size, nrows * width / ncols * 0.9 + 0.4)
        axes = fig.subplots(nrows, ncols, squeeze=False).ravel()
        for i_ax, (ax, (name, absolute)) in enumerate(zip(axes, names)):
            v, label, log = feature_values(results, name, absolute)
            bins = _bins(v, log)
            for i, c in enumerate(classes):
                sel = v[(labels == c) & np.isfinite(v)]
                if sel.size:
                    ax.hist(sel, bins=bins, histtype="step", color=PALETTE[i % len(PALETTE)],
                            label=c, lw=0.9)
            if log:
                _set_log(ax, "x", v)
            ax.set_xlabel(label)
            if i_ax % ncols == 0:
                ax.set_ylabel("Pulses (count)")
        for ax in axes[len(names):]:
            ax.set_visible(False)
        handles, texts = axes[0].get_legend_handles_labels()
        fig.legend(handles, texts, loc="outside lower center", frameon=False,
                   ncols=min(len(classes), 2 if size == "column" else 4))
    return fig


def pairwise_figure(results: pd.DataFrame, *, features=PAIR_FEATURES, size: str = "page",
                    random_state: int = 0):
    """Pairwise scatter of the main features, coloured by predicted class.

    The diagonal holds each feature's histogram per class (the first row's
    axis is labelled on the right); a column-wide figure shows the first
    three features. At most
    :data:`MAX_SCATTER_POINTS` pulses (a seeded random subset) are drawn in
    the scatter panels, all of them in the histograms.

    Returns
    -------
    matplotlib.figure.Figure
    """
    classes = _classes(results)
    names = [(n, a) for n, a in features if n in results.columns]
    if size == "column":
        names = names[:3]          # a column holds a 3 x 3 grid legibly
    if len(names) < 2:
        raise InputError(f"the results need at least two of the features "
                         f"{[n for n, _ in features]}")
    cols = [feature_values(results, n, a) for n, a in names]
    labels = results["label"].astype(str).to_numpy()
    rng = np.random.default_rng(random_state)
    shown = np.arange(len(results))
    if len(shown) > MAX_SCATTER_POINTS:
        shown = np.sort(rng.choice(shown, MAX_SCATTER_POINTS, replace=False))
    k = len(names)
    width = check_size(size)
    with style_context(size):
        fig = new_figure(size, width + 0.3)
        axes = fig.subplots(k, k, squeeze=False)
        for r in range(k):
            for c in range(k):
                ax = axes[r, c]
                (vx, lx, logx), (vy, ly, logy) = cols[c], cols[r]
                for i, cls in enumerate(classes):
                    colour = PALETTE[i % len(PALETTE)]
                    mine = labels == cls
                    if r == c:
                        sel = vx[mine & np.isfinite(vx)]
                        if sel.size:
                            ax.hist(sel, bins=_bins(vx, logx), histtype="step", color=colour,
                                    lw=0.8, label=cls)
                    else:
                        s = shown[mine[shown]]
                        ax.scatter(vx[s], vy[s], s=1.5, color=colour, alpha=0.5, lw=0,
                                   label=cls, rasterized=len(shown) > 2000)
                if logx:
                    _set_log(ax, "x", vx)
                ax.set_xlim(*_padded(vx, logx))
                if r == c:
                    ax.set_yticks([])
                else:
                    if logy:
                        _set_log(ax, "y", vy)
                    ax.set_ylim(*_padded(vy, logy))
                if r == k - 1:
                    ax.set_xlabel(lx)
                else:
                    ax.tick_params(labelbottom=False)
                if c == 0 and r != 0:
                    ax.set_ylabel(ly)
                elif r == 0 and c == k - 1:     # the first row's axis, on the right
                    ax.yaxis.tick_right()
                    ax.yaxis.set_label_position("right")
                    ax.set_ylabel(ly)
                elif c != 0:
                    ax.tick_params(labelleft=False)
        handles, texts = axes[0, 0].get_legend_handles_labels()
        fig.legend(handles, texts, loc="outside lower center", frameon=False,
                   ncols=min(len(classes), 2 if size == "column" else 4))
    return fig


def _set_log(ax, which, values):
    """Log scale with readable labels: 1-2-5 ticks within two decades, powers of ten beyond."""
    from matplotlib import ticker

    (ax.set_xscale if which == "x" else ax.set_yscale)("log")
    axis = ax.xaxis if which == "x" else ax.yaxis
    lo, hi = _span(values, True)
    if hi / lo <= 100.0:
        axis.set_major_locator(ticker.LogLocator(subs=(1.0, 2.0, 5.0)))
        axis.set_major_formatter(ticker.FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(ticker.NullFormatter())


def _padded(values, log, pad=0.04):
    """Axis limits of a feature, the same in every panel of its row or column."""
    lo, hi = _span(values, log)
    if log:
        f = (hi / lo) ** pad
        return lo / f, hi * f
    return lo - pad * (hi - lo), hi + pad * (hi - lo)


def confidence_figure(results: pd.DataFrame, *, size: str = "column", bins: int = 20):
    """Histogram of the confidence of the predicted class, per class, on a log y-scale.

    Returns
    -------
    matplotlib.figure.Figure
    """
    classes = _classes(results)
    if "confidence" not in results.columns:
        raise InputError("the results have no 'confidence' column")
    conf = pd.to_numeric(results["confidence"], errors="coerce").to_numpy(float)
    labels = results["label"].astype(str).to_numpy()
    edges = np.linspace(0.0, 1.0, bins + 1)
    width = check_size(size)
    with style_context(size):
        fig = new_figure(size, 0.7 * width if size == "column" else 0.4 * width)
        ax = fig.add_subplot()
        for i, c in enumerate(classes):
            sel = conf[(labels == c) & np.isfinite(conf)]
            if sel.size:
                ax.hist(sel, bins=edges, histtype="step", color=PALETTE[i % len(PALETTE)],
                        label=c, lw=0.9)
        ax.set_yscale("log")
        ax.set_xlim(0.0, 1.0)
        ax.set_xlabel("Confidence of the predicted class (1)")
        ax.set_ylabel("Pulses (count)")
        ax.legend(frameon=False, loc="upper left")
    return fig


