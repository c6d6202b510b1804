"""Small, dependency-free SVG charts for the review page and the HTML reports.

Every chart is drawn from the data by this module and returned as an SVG string
that can be inlined in HTML: no external library, no fonts or scripts fetched
from anywhere. Text is XML-escaped. Charts are deliberately plain: axes with
labels and units, ticks, the data, nothing else.

Examples
--------
>>> svg = line_chart([([0, 1, 2], [0, 1, 0], "field")], x_label="time (us)",
...                  y_label="E (V/m)")
>>> svg.startswith("<svg")
True
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from html import escape

import numpy as np

__all__ = ["PALETTE", "nice_ticks", "line_chart", "scatter_chart", "bar_chart",
           "hbar_chart", "stacked_bar_chart", "histogram_chart", "time_colour"]

#: Colour-blind-safe palette (Okabe & Ito 2008).
PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442",
           "#000000")
_FONT = 'font-family="system-ui, sans-serif" font-size="11"'
#: Generous width of one character at font size 11, px (a layout estimate).
_CHAR_PX = 6.6
#: Right edge of the rotated y-axis label (drawn centred on x = 12), px.
_Y_LABEL_RIGHT = 20


def nice_ticks(lo: float, hi: float, n: int = 5) -> list[float]:
    """About ``n`` round tick values covering [lo, hi]."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return []
    if hi <= lo:
        hi = lo + (abs(lo) if lo else 1.0)
    raw = (hi - lo) / max(n, 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = min((m * mag for m in (1, 2, 2.5, 5, 10) if m * mag >= raw), default=10 * mag)
    start = math.ceil(lo / step - 1e-9) * step
    ticks = []
    v = start
    while v <= hi + 1e-9 * step and len(ticks) < 50:
        ticks.append(0.0 if abs(v) < 1e-12 * step else v)
        v += step
    return ticks


def _fmt(v: float) -> str:
    if v == 0:
        return "0"
    a = abs(v)
    if a >= 1e5 or a < 1e-3:
        return f"{v:.1e}"
    return f"{v:.4g}"


class _Frame:
    def __init__(self, width, height, xlim, ylim, x_label, y_label, title=None,
                 margin=(46, 14, 34, 58), xticks=True, yticks=True):
        self.w, self.h = width, height
        self.top, self.right, self.bottom, self.left = margin
        if title:
            self.top += 14
        if yticks and y_label:  # room for the widest tick label right of the rotated axis label
            widest = max((len(_fmt(t)) for t in nice_ticks(*ylim)), default=0)
            self.left = max(self.left, _Y_LABEL_RIGHT + 6 + math.ceil(_CHAR_PX * widest))
        self.xlim, self.ylim = xlim, ylim
        self.parts = [f'<svg xmlns="http://www.w3.org/2000/svg" width="{width}" '
                      f'height="{height}" viewBox="0 0 {width} {height}" role="img">']
        if title:
            self.parts.append(f'<text x="{self.left}" y="14" {_FONT} font-weight="600">'
                              f"{escape(title)}</text>")
        self._axes(x_label, y_label, xticks, yticks)

    def x(self, v):
        lo, hi = self.xlim
        return self.left + (v - lo) / (hi - lo or 1) * (self.w - self.left - self.right)

    def y(self, v):
        lo, hi = self.ylim
        return self.h - self.bottom - (v - lo) / (hi - lo or 1) * (self.h - self.top
                                                                     - self.bottom)

    def _axes(self, x_label, y_label, xticks=True, yticks=True):
        x0, x1 = self.left, self.w - self.right
        y0, y1 = self.h - self.bottom, self.top
        p = self.parts
        p.append(f'<g stroke="#444" stroke-width="1"><line x1="{x0}" y1="{y0}" x2="{x1}" '
                 f'y2="{y0}"/><line x1="{x0}" y1="{y0}" x2="{x0}" y2="{y1}"/></g>')
        for t in nice_ticks(*self.xlim) if xticks else []:
            xx = self.x(t)
            p.append(f'<line x1="{xx:.1f}" y1="{y0}" x2="{xx:.1f}" y2="{y0 + 4}" stroke="#444"/>'
                     f'<text x="{xx:.1f}" y="{y0 + 15}" text-anchor="middle" {_FONT}>'
                     f"{_fmt(t)}</text>")
        for t in nice_ticks(*self.ylim) if yticks else []:
            yy = self.y(t)
            p.append(f'<line x1="{x0 - 4}" y1="{yy:.1f}" x2="{x0}" y2="{yy:.1f}" stroke="#444"/>'
                     f'<text x="{x0 - 6}" y="{yy + 3.5:.1f}" text-anchor="end" {_FONT}>'
                     f"{_fmt(t)}</text>")
        p.append(f'<text x="{(x0 + x1) / 2:.1f}" y="{self.h - 4}" text-anchor="middle" '
                 f"{_FONT}>{escape(x_label)}</text>")
        p.append(f'<text transform="translate(12 {(y0 + y1) / 2:.1f}) rotate(-90)" '
                 f'text-anchor="middle" {_FONT}>{escape(y_label)}</text>')

    def vline(self, v, colour="#888", label=None, dash="4 3", row=0):
        """A dashed vertical line at x = v; its label on text row ``row`` (0 = top)."""
        if not (self.xlim[0] <= v <= self.xlim[1]):
            return
        xx = self.x(v)
        self.parts.append(f'<line x1="{xx:.1f}" y1="{self.top}" x2="{xx:.1f}" '
                          f'y2="{self.h - self.bottom}" stroke="{colour}" '
                          f'stroke-dasharray="{dash}"/>')
        if label:
            self.parts.append(f'<text x="{xx + 3:.1f}" y="{self.top + 10 + 12 * row}" {_FONT} '
                              f'fill="{colour}">{escape(label)}</text>')

    def legend(self, names, colours, outside=False):
        """Colour key at the top left inside the axes, or right of them (``outside``)."""
        xx = self.w - self.right + 10 if outside else self.left + 8
        for i, (name, col) in enumerate(zip(names, colours)):
            yy = self.top + 12 + 13 * i
            self.parts.append(f'<rect x="{xx}" y="{yy - 8}" width="10" height="3" '
                              f'fill="{col}"/><text x="{xx + 14}" y="{yy - 4}" {_FONT}>'
                              f"{escape(str(name))}</text>")

    def svg(self):
        return "".join(self.parts) + "</svg>"


def _limits(values: Sequence[np.ndarray], pad=0.05, lim=None):
    if lim is not None:
        return tuple(float(v) for v in lim)
    finite = [np.asarray(v, float)[np.isfinite(np.asarray(v, float))] for v in values]
    finite = [f for f in finite if f.size]
    if not finite:
        return (0.0, 1.0)
    lo = min(float(f.min()) for f in finite)
    hi = max(float(f.max()) for f in finite)
    if hi == lo:
        hi, lo = hi + (abs(hi) or 1.0) * 0.5, lo - (abs(lo) or 1.0) * 0.5
    span = hi - lo
    return (lo - pad * span, hi + pad * span)


def _decimate(x, y, max_points=1500):
    """Keep the shape of a long trace: min and max of each bin."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    if len(x) <= max_points:
        return x, y
    k = int(math.ceil(len(x) / (max_points / 2)))
    n = len(x) // k * k
    xb = x[:n].reshape(-1, k)
    yb = y[:n].reshape(-1, k)
    imin, imax = np.nanargmin(yb, axis=1), np.nanargmax(yb, axis=1)
    r = np.arange(len(yb))
    first = np.minimum(imin, imax)
    second = np.maximum(imin, imax)
    xs = np.column_stack([xb[r, first], xb[r, second]]).ravel()
    ys = np.column_stack([yb[r, first], yb[r, second]]).ravel()
    return xs, ys


def line_chart(series, *, x_label, y_label, width=560, height=220, title=None, xlim=None,
               ylim=None, markers=(), zero_line=False, legend=True):
    """Lines ``[(x, y, name), ...]``; ``markers`` are ``(x, label, colour)`` vertical lines."""
    xs = [s[0] for s in series]
    ys = [s[1] for s in series]
    f = _Frame(width, height, _limits(xs, 0.0, xlim), _limits(ys, 0.05, ylim), x_label,
               y_label, title)
    if zero_line and f.ylim[0] < 0 < f.ylim[1]:
        f.parts.append(f'<line x1="{f.left}" y1="{f.y(0):.1f}" x2="{f.w - f.right}" '
                       f'y2="{f.y(0):.1f}" stroke="#bbb"/>')
    for i, (x, y, _name) in enumerate(series):
        x, y = _decimate(x, y)
        keep = np.isfinite(x) & np.isfinite(y)
        pts = " ".join(f"{f.x(a):.1f},{f.y(b):.1f}" for a, b in zip(x[keep], y[keep]))
        f.parts.append(f'<polyline fill="none" stroke="{PALETTE[i % len(PALETTE)]}" '
                       f'stroke-width="1.3" points="{pts}"/>')
    for i, (x, label, colour) in enumerate(markers):
        f.vline(x, colour, label, row=i)  # one text row each: close markers stay readable
    if legend and len(series) > 1:
        f.legend([s[2] for s in series], PALETTE)
    return f.svg()


def time_colour(frac: float) -> str:
    """A colour from dark blue (0) to yellow (1) for colouring by time."""
    frac = min(max(float(frac), 0.0), 1.0) if math.isfinite(frac) else 0.0
    stops = [(0.0, (13, 8, 135)), (0.5, (204, 71, 120)), (1.0, (240, 200, 30))]
    for (a, ca), (b, cb) in zip(stops, stops[1:]):
        if frac <= b:
            w = (frac - a) / (b - a)
            c = [round(ca[i] + w * (cb[i] - ca[i])) for i in range(3)]
            return "#{:02x}{:02x}{:02x}".format(*c)
    return "#f0c81e"


def scatter_chart(x, y, *, x_label, y_label, colours=None, width=300, height=240, title=None,
                  xlim=None, ylim=None, radius=2.5, groups=None):
    """Points; ``colours`` one per point (e.g. :func:`time_colour`), or ``groups`` names."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    f = _Frame(width, height, _limits([x], 0.05, xlim), _limits([y], 0.05, ylim), x_label,
               y_label, title)
    names = []
    if groups is not None:
        names = list(dict.fromkeys(groups))
        colours = [PALETTE[names.index(g) % len(PALETTE)] for g in groups]
    for i in range(len(x)):
        if not (math.isfinite(x[i]) and math.isfinite(y[i])):
            continue
        c = colours[i] if colours is not None else PALETTE[0]
        f.parts.append(f'<circle cx="{f.x(x[i]):.1f}" cy="{f.y(y[i]):.1f}" r="{radius}" '
                       f'fill="{c}" fill-opacity="0.8"/>')
    if names:
        f.legend(names, PALETTE)
    return f.svg()


def bar_chart(labels, values, *, y_label, x_label="", width=480, height=220, title=None,
              colours=None):
    """Vertical bars with category labels."""
    values = np.asarray(values, float)
    n = len(values)
    f = _Frame(width, height, (0, max(n, 1)), _limits([values, [0.0]], 0.05), x_label,
               y_label, title, xticks=False)
    for i, (lab, v) in enumerate(zip(labels, values)):
        x0, x1 = f.x(i + 0.15), f.x(i + 0.85)
        y0, y1 = f.y(0), f.y(v if math.isfinite(v) else 0)
        c = (colours[i] if colours is not None else PALETTE[i % len(PALETTE)])
        f.parts.append(f'<rect x="{x0:.1f}" y="{min(y0, y1):.1f}" width="{x1 - x0:.1f}" '
                       f'height="{abs(y1 - y0):.1f}" fill="{c}"/>')
        f.parts.append(f'<text x="{(x0 + x1) / 2:.1f}" y="{f.h - f.bottom + 14}" '
                       f'text-anchor="middle" {_FONT}>{escape(str(lab))}</text>')
    return f.svg()


def hbar_chart(labels, values, *, x_label, width=420, height=None, title=None, colours=None,
               xlim=None, label_width=130, value_format="{:.2f}"):
    """Horizontal bars, one row per category (long category names stay readable).

    Each bar is labelled on its left with its category and on its right with
    its value (``value_format``); ``xlim`` fixes the value axis (e.g. (0, 1)).
    """
    values = np.asarray(values, float)
    n = len(values)
    row = 22
    height = height or (46 + 34 + row * max(n, 1) + (14 if title else 0))
    lim = _limits([values, [0.0]], 0.05, xlim)
    f = _Frame(width, height, lim, (0, max(n, 1)), x_label, "", title,
               margin=(46, 40, 34, label_width), yticks=False)
    for i, (lab, v) in enumerate(zip(labels, values)):
        y0, y1 = f.y(n - i - 0.2), f.y(n - i - 0.8)
        x0 = f.x(max(lim[0], 0.0))
        x1 = f.x(v if math.isfinite(v) else 0.0)
        c = (colours[i] if colours is not None else PALETTE[i % len(PALETTE)])
        f.parts.append(f'<rect x="{min(x0, x1):.1f}" y="{y0:.1f}" width="{abs(x1 - x0):.1f}" '
                       f'height="{y1 - y0:.1f}" fill="{c}"/>')
        ym = (y0 + y1) / 2 + 3.5
        f.parts.append(f'<text x="{f.left - 6}" y="{ym:.1f}" text-anchor="end" {_FONT}>'
                       f"{escape(str(lab))}</text>")
        shown = value_format.format(v) if math.isfinite(v) else "n/a"
        f.parts.append(f'<text x="{max(x0, x1) + 4:.1f}" y="{ym:.1f}" {_FONT}>'
                       f"{escape(shown)}</text>")
    return f.svg()


def stacked_bar_chart(x, stacks, *, x_label, y_label, width=640, height=240, title=None,
                      bar_width=1.0):
    """Bars at positions ``x`` stacked from ``stacks = [(values, name), ...]``, bottom first.

    Counts per time bin by class, for instance: ``x`` are the bin starts and
    each bar spans ``[x, x + bar_width]``. Empty segments are not drawn, so a
    long, mostly quiet axis stays small.
    """
    x = np.asarray(x, float)
    vals = np.array([np.nan_to_num(np.asarray(v, float)) for v, _ in stacks]).reshape(
        len(stacks), len(x))
    total = vals.sum(axis=0) if len(stacks) else np.zeros(len(x))
    xlim = (float(x.min()), float(x.max()) + bar_width) if len(x) else (0.0, 1.0)
    right = 14 + (10 + 7 * max((len(str(n)) for _, n in stacks), default=0) + 14
                  if len(stacks) > 1 else 0)
    f = _Frame(width, height, xlim, (0.0, float(total.max()) * 1.08 if total.size and
                                     total.max() > 0 else 1.0), x_label, y_label, title,
               margin=(46, right, 34, 58))
    gap = 0.1 * bar_width
    bottom = np.zeros(len(x))
    for k, row in enumerate(vals):
        colour = PALETTE[k % len(PALETTE)]
        for i in np.flatnonzero(row > 0):
            x0, x1 = f.x(x[i] + gap), f.x(x[i] + bar_width - gap)
            y0, y1 = f.y(bottom[i]), f.y(bottom[i] + row[i])
            f.parts.append(f'<rect x="{x0:.1f}" y="{y1:.1f}" width="{max(x1 - x0, 0.8):.1f}" '
                           f'height="{y0 - y1:.1f}" fill="{colour}"/>')
        bottom += row
    if len(stacks) > 1:
        f.legend([name for _, name in stacks], PALETTE, outside=True)
    return f.svg()


def histogram_chart(samples, *, bins=30, x_label, y_label="count", width=480, height=220,
                    title=None, names=None, range_=None, density=False):
    """Overlaid step histograms of one or more samples."""
    samples = [np.asarray(s, float)[np.isfinite(np.asarray(s, float))] for s in samples]
    allv = np.concatenate(samples) if samples else np.array([])
    if range_ is None:
        range_ = (float(allv.min()), float(allv.max())) if allv.size else (0.0, 1.0)
        if range_[0] == range_[1]:
            range_ = (range_[0] - 0.5, range_[1] + 0.5)
    edges = np.linspace(range_[0], range_[1], bins + 1)
    hists = [np.histogram(s, edges, density=density)[0].astype(float) for s in samples]
    top = max((h.max() for h in hists if h.size), default=1.0) or 1.0
    f = _Frame(width, height, (edges[0], edges[-1]), (0, top * 1.08), x_label, y_label, title)
    for i, h in enumerate(hists):
        pts = []
        for j, v in enumerate(h):
            pts += [f"{f.x(edges[j]):.1f},{f.y(v):.1f}", f"{f.x(edges[j + 1]):.1f},{f.y(v):.1f}"]
        f.parts.append(f'<polyline fill="none" stroke="{PALETTE[i % len(PALETTE)]}" '
                       f'stroke-width="1.5" points="{" ".join(pts)}"/>')
    if names and len(names) > 1:
        f.legend(names, PALETTE)
    return f.svg()
