"""The same discharges seen from nearer: a station variant for training.

A season recorded with the storms 20-150 km away holds no pulse whose field is the
electrostatic and induction terms of a source overhead, and a model trained on it has
never seen one: an energetic in-cloud pulse 4 km away is a unipolar change of a few
hundred V/m of the other polarity, nothing like the bipolar radiation pulse it gives at
80 km. :func:`nearer_field` moves a recorded pulse nearer, at the same height: it
inverts the field for the current and charge moments M and Q
(:func:`features.moments.invert_moments`) and writes the three-term field of the same
moments at the new distance (Uman, McLain & Krider 1975; Rakov & Uman 2003, ch. 4; from
memory)::

    E = a0 Q + a1 M + a2 dM/dt   ->   E' = (a2'/a2) E + (a1' - a2' a1 / a2) M
                                             + (a0' - a2' a0 / a2) Q

which is exact for noise-free moments (dM/dt = (E - a1 M - a0 Q) / a2). The record's
noise is carried by the radiation factor a2'/a2 and, integrated, by the other two terms:
only pulses far away (:data:`NEAR_FROM_M`) and at least :data:`NEAR_MIN_SNR` above their
noise are moved, where that integrated noise stays a slow wander of a few V/m under the
near field of hundreds. Their VHF power grows as (R / R')^2 (slant ranges), and the
mapped sources of a moved pulse are dropped (the catalog keeps its new range): a
variant's mapper that missed it.
"""

from __future__ import annotations

import numpy as np

from .moments import DEFAULT_ALTITUDE_M, _coefficients, invert_moments
from .pulses import robust_sigma_diff
from .waveform import decay_compensate

__all__ = ["NEAR_RANGE_M", "NEAR_FROM_M", "NEAR_MIN_SNR", "nearer_rows", "nearer_field",
           "nearer_vhf", "move_chunk_nearer"]

#: New horizontal distances, m (log-uniform): storms overhead to the edge of the near
#: field (common practice, no source).
NEAR_RANGE_M = (1e3, 15e3)
#: Only pulses at least this far are moved (their field is the radiation term), m.
NEAR_FROM_M = 20e3
#: ... and with a peak at least this many times the record's noise (40 dB).
NEAR_MIN_SNR = 100.0
#: The moments are inverted from this long before the trigger ...
NEAR_LEAD_S = 20e-6
#: ... to this long after it, s (the series of :func:`features.moments.invert_moments`
#: converges over a span short beside R / c; past it M is 0 and Q stays).
NEAR_SPAN_S = 100e-6


def _baseline_noise(x, n_pre):
    """Median and robust noise sigma of each row's first ``n_pre`` columns."""
    part = x[:, :max(n_pre, 16)]
    return np.median(part, axis=1), robust_sigma_diff(part)


def nearer_rows(x_v_per_m, pretrigger_s, sample_rate_hz, range_m, rng, share):
    """Which rows a variant moves nearer, and to what distance.

    Parameters
    ----------
    x_v_per_m : ndarray, shape (n, m)
        Field rows (V/m, physics convention).
    pretrigger_s, sample_rate_hz : float
    range_m : ndarray, shape (n,)
        Their horizontal distance, m (NaN unknown: not moved).
    rng : numpy.random.Generator
    share : float
        Share of the eligible rows moved.

    Returns
    -------
    moved : ndarray of bool, shape (n,)
    new_range_m : ndarray, shape (n,)
        The new distance where moved, else the old one.
    """
    x = np.nan_to_num(np.asarray(x_v_per_m, dtype=np.float64))
    d = np.asarray(range_m, dtype=np.float64)
    n_pre = int(max(pretrigger_s - 2e-6, 0.0) * sample_rate_hz)
    base, sigma = _baseline_noise(x, n_pre)
    peak = np.abs(x - base[:, None]).max(axis=1) if x.shape[1] else np.zeros(len(x))
    eligible = (np.isfinite(d) & (d >= NEAR_FROM_M)
                & (peak >= NEAR_MIN_SNR * np.maximum(sigma, 1e-30)))
    moved = eligible & (rng.random(len(x)) < share)
    lo, hi = np.log(NEAR_RANGE_M)
    new = np.exp(rng.uniform(lo, hi, len(x)))
    return moved, np.where(moved, new, d)


def nearer_field(x_v_per_m, sample_rate_hz, pretrigger_s, decay_time_s, range_m,
                 altitude_m, new_range_m):
    """Field rows of the same sources at another horizontal distance (same height).

    Parameters
    ----------
    x_v_per_m : ndarray, shape (n, m)
        Rows as recorded (V/m, physics convention), through the antenna's RC decay
        ``decay_time_s`` (s; None: DC-coupled).
    sample_rate_hz, pretrigger_s : float
    range_m, altitude_m, new_range_m : ndarray, shape (n,)
        Horizontal distance, source height (NaN: :data:`DEFAULT_ALTITUDE_M`) and the
        new distance, m.

    Returns
    -------
    rows : ndarray, shape (n, m)
        The rows at ``new_range_m``, through the same RC decay, V/m (as given where not
        ``moved``).
    moved : ndarray of bool, shape (n,)
        Rows whose inversion converged (the others are not moved).

    Examples
    --------
    A unipolar radiation pulse of +2 V/m from 80 km, 9 km up, brought to 3 km: the
    current moment it radiated now gives induction and electrostatic fields, ten times
    stronger and of the other sign (invented pulse):

    >>> import numpy as np
    >>> t = np.arange(4000) / 20e6 - 50e-6                      # s
    >>> e = 2.0 * np.exp(-0.5 * (t / 3e-6) ** 2)                 # V/m
    >>> near, moved = nearer_field(e[None], 20e6, 50e-6, None, [80e3], [9e3], [3e3])
    >>> bool(moved[0]), round(float(near[0, np.argmax(np.abs(near[0]))]), 1)
    (True, -22.5)
    """
    from .augment import _rc_highpass

    x = np.nan_to_num(np.asarray(x_v_per_m, dtype=np.float64))
    n, w = x.shape
    fs = float(sample_rate_hz)
    d = np.asarray(range_m, dtype=np.float64)
    h = np.asarray(altitude_m, dtype=np.float64)
    h = np.where(np.isfinite(h) & (h >= 0), h, DEFAULT_ALTITUDE_M)
    d2 = np.asarray(new_range_m, dtype=np.float64)
    if n == 0 or w < 2:
        return x.copy(), np.zeros(n, dtype=bool)
    e = decay_compensate(x, fs, decay_time_s) if decay_time_s else x.copy()
    n_pre = int(max(pretrigger_s - 2e-6, 0.0) * fs)
    base, _ = _baseline_noise(e, n_pre)
    e = e - base[:, None]
    first = max(int((pretrigger_s - NEAR_LEAD_S) * fs), 0)
    last = min(int(np.ceil((pretrigger_s + NEAR_SPAN_S) * fs)), w - 1)
    c0, m, q, moved = invert_moments(e, fs, np.full(n, float(first)), np.full(n, float(last)),
                                     d, h)
    moved = moved & np.isfinite(d) & np.isfinite(d2)
    a0, a1, a2, _ = _coefficients(d, h)
    b0, b1, b2, _ = _coefficients(d2, h)
    with np.errstate(divide="ignore", invalid="ignore"):
        k_rad, k_ind, k_st = b2 / a2, b1 - b2 * a1 / a2, b0 - b2 * a0 / a2
    out = k_rad[:, None] * e
    c0 = max(c0, 0)
    span = min(m.shape[1], last + 1 - c0)
    out[:, c0:c0 + span] += (k_ind[:, None] * np.nan_to_num(m[:, :span])
                             + k_st[:, None] * np.nan_to_num(q[:, :span]))
    out[:, c0 + span:] += (k_st * np.nan_to_num(q[:, span - 1]))[:, None]
    if decay_time_s:
        out = _rc_highpass(out, fs, decay_time_s)
    return np.where(moved[:, None], out, x), moved


def nearer_vhf(vhf, kind, pretrigger_s, sample_rate_hz, range_m, altitude_m, new_range_m):
    """VHF rows of the same sources nearer: power above the floor x (R / R')^2 (slant
    ranges; the voltage of a ``kind="voltage"`` record x R / R')."""
    x = np.nan_to_num(np.asarray(vhf, dtype=np.float64))
    h = np.asarray(altitude_m, dtype=np.float64)
    h = np.where(np.isfinite(h) & (h >= 0), h, DEFAULT_ALTITUDE_M)
    r = np.hypot(np.asarray(range_m, dtype=np.float64), h)
    r2 = np.hypot(np.asarray(new_range_m, dtype=np.float64), h)
    gain = (r / r2) ** 2
    if kind == "power":
        n_pre = int(max(pretrigger_s - 2e-6, 0.0) * sample_rate_hz)
        floor = np.median(x[:, :max(n_pre, 16)], axis=1)[:, None]
        return floor + (x - floor) * gain[:, None]
    return x * np.sqrt(gain)[:, None]


def move_chunk_nearer(x_v_per_m, ch, range_m, altitude_m, share, seed):
    """A chunk's field rows with a share of its pulses moved nearer (a station variant).

    Parameters
    ----------
    x_v_per_m : ndarray, shape (n, m)
        Field rows (V/m, physics convention) of channel ``ch``.
    ch : Channel
    range_m, altitude_m : ndarray, shape (n,)
        Horizontal distance and source height, m (NaN unknown).
    share : float
        Share of the eligible pulses (:func:`nearer_rows`) moved.
    seed : sequence of int
        Seed of the draws.

    Returns
    -------
    x : ndarray, shape (n, m)
    moved : ndarray of bool, shape (n,)
    new_range_m : ndarray, shape (n,)
        Distances after the move (the old ones where not moved).
    """
    rng = np.random.default_rng(seed)
    moved, new = nearer_rows(x_v_per_m, ch.pretrigger_s, ch.sample_rate_hz, range_m, rng,
                             share)
    x = np.asarray(x_v_per_m, dtype=np.float64)
    if not moved.any():
        return x, moved, np.asarray(range_m, dtype=np.float64)
    idx = np.flatnonzero(moved)
    rows, ok = nearer_field(x[idx], ch.sample_rate_hz, ch.pretrigger_s, ch.decay_time_s,
                            np.asarray(range_m)[idx], np.asarray(altitude_m)[idx], new[idx])
    x = x.copy()
    x[idx] = rows
    moved[idx[~ok]] = False
    return x, moved, np.where(moved, new, range_m)
