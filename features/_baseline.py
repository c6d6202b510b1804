"""The digitizer offset of an RC-coupled (fast-antenna) record, before decay compensation.

A fast antenna of decay constant tau records y with dy/dt + (y - c)/tau = dE/dt, c the
digitizer's offset (the level y relaxes to). Decay compensation
E = (y - c) + (1/tau) int (y - c) dt needs c: a wrong c becomes a ramp (c_err t / tau)
in E. Where nothing happens before the trigger, y is c; on the decaying tail of an
earlier field change (a large step before the record) y is c + A exp(-t/tau) instead,
and the record's level before the trigger is not c. On that tail the line through the
record, fitted by least squares as c + A exp(-t/tau) (tau known), gives c; the
exponential must fit the stretch to its noise (an earlier pulse's own shape, a real slow
field change are no RC tail). :func:`rc_offset` takes that line's c where it leaves
the compensated record before the trigger clearly quieter than the quiet level does (a
flat compensated baseline is what a quiet stretch of E is), else the quiet level.
"""

from __future__ import annotations

import numpy as np

from ._lobes import BASELINE_MIN_SAMPLES, baseline_fit, robust_sigma_diff
from ._rowops import cumtrapz_rows

#: The tail's offset is taken where the quiet level's compensated baseline is this many
#: times noisier (its ramp) than the tail's (common practice, no source).
RAMP_NOISE_RATIO = 1.5


def rc_offset(y, stop, sample_rate_hz, quantum, decay_time_s):
    """Digitizer offset c of each RC-coupled row, V/m.

    Parameters
    ----------
    y : ndarray, shape (n, m)
        Recorded field, V/m (no NaN).
    stop : ndarray of int, shape (n,)
        The baseline stretch ends before this column (the trigger's guard).
    sample_rate_hz : float
    quantum : float
        One digitizer step, V/m (0: none).
    decay_time_s : float
        RC decay constant tau, s.

    Returns
    -------
    ndarray, shape (n,)
        c in V/m, to be subtracted from ``y`` before decay compensation.
    """
    fs = float(sample_rate_hz)
    n, m = y.shape
    # (one pass: the quiet level, and the stretch's slope where significant)
    quiet, slope, _, start, used = baseline_fit(y, stop, fs, quantum, quiet_level=True)
    rows = np.flatnonzero((slope != 0) & (used >= BASELINE_MIN_SAMPLES))
    if not rows.size:
        return quiet
    # least-squares fit of c + A exp(-j / (tau fs)) over the stretch (2 x 2 normal
    # equations per row); a stretch the exponential does not fit (an earlier pulse's own
    # shape, a real slow field change) keeps the quiet level
    width = int(used[rows].max())
    j = np.arange(width)[None, :]
    valid = j < used[rows, None]
    yy = np.where(valid, np.take_along_axis(y[rows], np.clip(start[rows, None] + j, 0, m - 1),
                                            axis=1), 0.0)
    b = np.where(valid, np.exp(-j / (decay_time_s * fs)), 0.0)
    s1, sb, sbb = valid.sum(axis=1), b.sum(axis=1), (b * b).sum(axis=1)
    sy, sby = yy.sum(axis=1), (b * yy).sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        det = s1 * sbb - sb * sb
        on_tail = (sbb * sy - sb * sby) / det
        amp = (s1 * sby - sb * sy) / det
        res = np.where(valid, yy - on_tail[:, None] - amp[:, None] * b, 0.0)
        rms = np.sqrt((res * res).sum(axis=1) / np.maximum(s1 - 2, 1))
    # the noise from first differences (blind to the trend being fitted)
    sig_d = robust_sigma_diff(yy, valid)
    sig_d = np.maximum(sig_d, quantum / np.sqrt(12.0))
    fits = np.isfinite(on_tail) & (rms <= RAMP_NOISE_RATIO * sig_d)
    # compensation is linear: comp(y - c) = comp(y) - c (1 + j / (tau fs)) at column j
    # (only the rows the exponential fits, only the columns before the stretch's end)
    keep = rows[fits]
    out = quiet.copy()
    if not keep.size:
        return out
    on_tail = on_tail[fits]
    w = int(min(stop[keep].max(initial=0), m))
    ramp = 1.0 + np.arange(w) / (decay_time_s * fs)
    part = y[keep, :w]
    sub = part + cumtrapz_rows(part, 1.0 / fs) / decay_time_s          # E = y + int y / tau

    def noise(c):
        return baseline_fit(sub - c[:, None] * ramp, stop[keep], fs, quantum,
                            min_slope_s=np.inf, quiet_level=True)[2]

    # (only where the quiet level leaves a ramp that clearly swells the noise)
    out[keep] = np.where(RAMP_NOISE_RATIO * noise(on_tail) < noise(quiet[keep]), on_tail,
                         quiet[keep])
    return out
