"""Lobes with the level each rides on: the part of pulse grouping that reads the record.

:func:`features._lobes.find_lobes` finds the lobes; this adds, per lobe, what
:func:`features.pulses.group_pulses` needs from the record itself: the level it rides on
(the valley it was split from an earlier lobe at), whether the record between it and the
previous lobe kept its sign (a swing broken by noise), and its rise from half its own
height to its peak (a channel-end reversal is the pulse's own current wave, no faster).
Kept apart from :mod:`features.pulses` (which groups the lobes, picks the catalogued
pulse and its neighbours) to keep both near the style guide's length.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from . import _lobes
from ._lobes import LOBE_HIGH_SIGMA, LobeTable
from ._runsum import running_sum

__all__ = ["BRIDGE_LEVEL", "BRIDGE_SIGMA", "LobeTableWithBase", "find_lobes"]

#: The record between a lobe and the previous one keeps the lobe's sign (``bridged``;
#: used for gaps up to :data:`features.pulses.BRIDGE_MAX_S`) when the gap's mean holds
#: that sign by at least this many standard errors ...
BRIDGE_SIGMA = 3.0
#: ... and this many noise sigmas (a baseline off by a fraction of a count is no bridge).
BRIDGE_LEVEL = 0.5


@dataclass(frozen=True)
class LobeTableWithBase(LobeTable):
    """A :class:`LobeTable` with the level each lobe rides on.

    Attributes
    ----------
    base : ndarray of float
        |e| of the (smoothed) record at the lobe's first sample where the lobe was split
        from the one before it at a valley (``after_valley``: it rides on that lobe's
        tail), else 0, V/m. ``peak - base`` is the lobe's own height (its prominence).
    bridged : ndarray of bool
        The record between the row's previous lobe and this one keeps this lobe's sign
        on average (by at least max(``BRIDGE_SIGMA`` standard errors, ``BRIDGE_LEVEL``
        sigma)): the field did not come back to the baseline in between, the two are one
        swing broken where it hovered near the detection level.
    rise : ndarray of float
        Columns from the lobe's last sample below half its own height (``base`` + half
        of ``peak - base``, smoothed record) to its peak: its rise time, 50-100 %.
    cut : ndarray of bool
        The record opens inside the lobe: it starts at the first column with the
        (smoothed) record there already at ``LOBE_HIGH_SIGMA`` sigma in its sign, so its
        start and perhaps its peak lie before the record (a run that merely hovers above
        the low level from the first column, an offset of a count or two, is not cut).
    """

    base: np.ndarray = None
    bridged: np.ndarray = None
    rise: np.ndarray = None
    cut: np.ndarray = None


def find_lobes(e: np.ndarray, sigma: np.ndarray, *, smooth: int = 1,
               **levels) -> LobeTableWithBase:
    """Every lobe of every row (:func:`features._lobes.find_lobes`) and its base level.

    A pulse riding on the tail of an earlier one (an overshoot or an RC undershoot that
    decays slowly, a leader step on a stroke's tail) is split from it at the valley
    between them; its own height is its peak above that valley, not above the baseline
    (the topographic prominence). Parameters as :func:`features._lobes.find_lobes`.

    Returns
    -------
    LobeTableWithBase
    """
    lobes, smoothed = _lobes.smoothed_lobes(e, sigma, smooth=smooth, **levels)
    base = np.zeros(len(lobes))
    ride = np.flatnonzero(lobes.after_valley)
    if ride.size:
        # the smoothed record at the valley (find_lobes' centred moving average)
        w = e.shape[1]
        k = max(int(smooth), 1)
        cols = lobes.start[ride, None] + np.arange(k)[None] - k // 2
        vals = e[lobes.row[ride, None], np.clip(cols, 0, w - 1)]
        base[ride] = np.minimum(np.abs(vals.mean(axis=1)), lobes.peak[ride])
    bridged = np.zeros(len(lobes), dtype=bool)
    if len(lobes) > 1:
        # mean of the record in the gap after the previous lobe of the same row
        j = np.flatnonzero(lobes.row[1:] == lobes.row[:-1]) + 1
        a, b, r = lobes.stop[j - 1], lobes.start[j], lobes.row[j]
        has_gap = b > a
        j, a, b, r = j[has_gap], a[has_gap], b[has_gap], r[has_gap]
        if j.size:
            n_gap = b - a
            sg = np.where(np.isfinite(sigma) & (sigma > 0), sigma, np.inf)[r]
            need = np.maximum(BRIDGE_SIGMA * sg / np.sqrt(n_gap), BRIDGE_LEVEL * sg)
            # a direct sum per gap; the running sums' means only where the two could
            # fall on different sides of the threshold (NaN: not sure either)
            mean, tol = _gap_means_fast(e, r, a, b)
            side = mean * lobes.sign[j] - need
            bridged[j] = side >= 0.0
            redo = np.flatnonzero(~(np.abs(side) > 2.0 * tol))
            if redo.size:
                bridged[j[redo]] = (_gap_means(e, r[redo], a[redo], b[redo])
                                    * lobes.sign[j[redo]] >= need[redo])
    cut = np.zeros(len(lobes), dtype=bool)
    at0 = np.flatnonzero(lobes.start == 0)
    if at0.size and e.shape[1]:
        k = min(max(int(smooth), 1), e.shape[1])
        first = e[lobes.row[at0], :k].mean(axis=1) * lobes.sign[at0]
        sg = np.where(np.isfinite(sigma) & (sigma > 0), sigma, np.inf)[lobes.row[at0]]
        cut[at0] = first >= LOBE_HIGH_SIGMA * sg
    return LobeTableWithBase(**{f: getattr(lobes, f) for f in _LOBE_FIELDS}, base=base,
                             bridged=bridged, rise=_half_rise(smoothed, lobes, base),
                             cut=cut)


_LOBE_FIELDS = ("row", "start", "stop", "peak_col", "peak", "sign", "after_valley")


def _gap_means(e, r, a, b):
    """Mean of ``e[r, a:b]`` for each gap, as the difference of the row's running sums
    (the numbers that decide ``bridged``)."""
    rows = np.unique(r)
    # (a running sum is sequential: up to the last gap's end it is the same)
    c1 = int(b.max()) + 1
    cs = np.zeros((rows.size, c1))
    running_sum(e[rows, :c1 - 1], cs[:, 1:])
    ri = np.searchsorted(rows, r)
    return (cs[ri, b] - cs[ri, a]) / (b - a)


def _gap_means_fast(e, r, a, b):
    """The means of :func:`_gap_means` from one direct sum per gap, and how far apart
    the two ways of summing can be.

    Both sums hold at most w terms of size at most M (the row's largest ``|e|``): each
    is within (w - 1) eps / 2 times w M of the exact sum (recursive summation; Higham,
    Accuracy and Stability of Numerical Algorithms, 2002, ch. 4; pairwise summation
    less), a difference and a division within eps / 2 of their results. Returns the
    means and a bound ``tol`` on their distance from :func:`_gap_means`' (four times
    those terms): a comparison of the mean with a threshold more than ``2 tol`` away
    comes out the same either way.
    """
    n, w = e.shape
    flat = np.ascontiguousarray(e, dtype=np.float64).ravel()
    idx = np.empty(2 * r.size, dtype=np.intp)
    idx[0::2] = r * w + a
    idx[1::2] = r * w + b           # (< n w: a lobe starts inside its record)
    mean = np.add.reduceat(flat, idx)[0::2] / (b - a)
    size = np.maximum(e.max(axis=1), -e.min(axis=1))[r]
    eps = np.finfo(np.float64).eps
    with np.errstate(invalid="ignore", over="ignore"):
        return mean, 4.0 * eps * (float(w) * w * size / (b - a) + np.abs(mean))


def _half_rise(es, lobes, base):
    """Columns from each lobe's last sample below half its own height (above ``base``,
    on the smoothed record ``es`` the lobes were found on) to its peak; at most
    ``peak_col - start``."""
    n_l = len(lobes)
    rise = np.zeros(n_l)
    if n_l == 0:
        return rise
    length = np.maximum(lobes.peak_col - lobes.start, 0) + 1
    lobe = np.repeat(np.arange(n_l), length)
    off = np.arange(lobe.size) - np.repeat(np.cumsum(length) - length, length)
    col = lobes.start[lobe] + off
    half = base + 0.5 * (lobes.peak - base)
    below = lobes.sign[lobe] * es[lobes.row[lobe], col] < half[lobe]
    last = np.full(n_l, -1)
    np.maximum.at(last, lobe[below], col[below])
    rise = np.where(last >= 0, lobes.peak_col - last, length - 1).astype(np.float64)
    return rise
