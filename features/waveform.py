"""Features of the fast-antenna field change: shape, amplitude, moments, quality.

All functions take a batch of rows ``(n_pulses, n_samples)`` in V/m (physics
convention, as :meth:`features.catalog.Catalog.read_field` returns them) and
the channel's sample rate in Hz; they return one value per row, in SI units.

Definitions (the contract of :mod:`features.schema`):

* **baseline** and **noise**: median and robust standard deviation
  (1.4826 x MAD, floored at one digitizer step / sqrt(12)) of up to
  ``BASELINE_MAX_S`` of record before the analysis window.
* **decay compensation**: a fast antenna with RC constant tau records
  y with dy/dt + y/tau = dE/dt, so E(t) = y(t) + (1/tau) int y dt
  (first-order high-pass inverted; common practice for fast antennas).
* **initial peak**: within ``PEAK_SEARCH_S`` of the trigger, the first local
  maximum of |E| (over +-0.5 us) that reaches ``PEAK_FRACTION`` of the largest
  |E| there (and 4 noise sigmas), refined by a parabola through three samples:
  the catalogued pulse, not a bigger neighbour later in its train. Its sign is the polarity; below,
  ``u = polarity * E`` so that the initial peak P is positive.
* **valley**: the lowest u within four times the 50 %-to-peak time before the
  peak; leading-edge crossings are searched after it, so a pulse riding on its
  predecessor's tail is measured on its own edge.
* **onset**: the last time before the peak where u rises through
  max(1 % of P, noise), after the valley (the valley itself if u never gets
  that low).
* **rise time**: 10 % to 90 % of P on the leading edge.
* **FWHM**: the contiguous interval around the peak where u >= P / 2.
* **zero crossing**: the first time after the peak where u <= 0 (before the
  field rises again above 60 % of P, i.e. before a following pulse).
* **overshoot**: the largest -u in the opposite-polarity lobe after the zero
  crossing, up to the field's return through zero (at most 10 initial
  half-cycles later, never past a following rise above 50 % of P).
* **width**: from the 10 % point of the leading edge to the point where the
  pulse (or its overshoot, if that exceeds 10 % of P) last falls below 10 % of P.
* **current moment** (radiation term, far field over a perfectly conducting
  ground): E = -(1 / (2 pi eps0 c^2 D)) dM/dt, so M(t) = -2 pi eps0 c^2 D int E dt,
  integrated from the onset; its peak is taken at the zero crossing (where
  dM/dt = 0) or, for a pulse with no crossing, at the end of the pulse.
  Positive M is an upward-directed current moment.
* **charge moment change**: int M dt from the onset to the end of the
  overshoot lobe (or of the pulse).
* **windows**: every pulse is first measured within -25..+50 us of the trigger;
  a pulse that reaches that window's edge (a wide pulse) is measured again on
  the full ``ANALYSIS_WINDOW_S``.
* **peak current**: transmission-line model I = -2 pi eps0 c^2 D E_peak / v with
  v = ``TL_SPEED_M_PER_S``.

References
----------
Rakov, V. A. and Uman, M. A. (2003), *Lightning: Physics and Effects*, Cambridge
University Press: ch. 4 (field equations, TL model), ch. 9 and 20 (in-cloud pulses);
definitions recalled from memory.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import constants, ndimage

from ._rowops import (
    crossing_after,
    crossing_before,
    cumtrapz_rows,
    first_true,
    integrate_rows,
    interp_rows,
    parabolic_peak,
    take_rows,
)

__all__ = [
    "ANALYSIS_WINDOW_S",
    "PEAK_SEARCH_S",
    "TL_SPEED_M_PER_S",
    "REFERENCE_RANGE_M",
    "decay_compensate",
    "field_features",
    "moment_factor_a_per_v",
]

#: Analysis window relative to the trigger (recorded time), in seconds.
ANALYSIS_WINDOW_S = (-40e-6, 160e-6)
#: Where the initial peak is searched, relative to the trigger, in seconds.
PEAK_SEARCH_S = (-3e-6, 40e-6)
#: The initial peak is the first local maximum reaching this fraction of the
#: largest |E| of the search window (common practice, no source).
PEAK_FRACTION = 0.15
#: Longest stretch of pre-window record used for baseline and noise, in seconds.
BASELINE_MAX_S = 40e-6
#: Transmission-line return-stroke speed assumed for ``peak_current_a``, m/s.
#: Half the speed of light: the middle of measured return-stroke speeds
#: (about c/3 to 2c/3; Rakov & Uman 2003, ch. 4; from memory).
TL_SPEED_M_PER_S = 1.5e8
#: Range to which peaks are normalised, m (the customary 100 km).
REFERENCE_RANGE_M = 100e3
#: Fraction of missing (NaN) samples in the window above which a row is unusable.
MAX_MISSING_FRACTION = 0.5
#: Cap of the signal-to-noise ratio for noiseless records, dB.
SNR_CAP_DB = 200.0


def moment_factor_a_per_v(range_m):
    """2 pi eps0 c^2 D: current-moment rate per unit radiation field, in A/(V s^-1).

    Parameters
    ----------
    range_m : float or ndarray
        Horizontal distance D, in metres.

    Returns
    -------
    float or ndarray
        Multiply E (V/m) by this to get -dM/dt (A m / s).
    """
    return 2 * np.pi * constants.epsilon_0 * constants.c ** 2 * np.asarray(range_m, float)


def decay_compensate(y_v_per_m, sample_rate_hz, decay_time_s):
    """Undo a fast antenna's RC decay: E = y + (1/tau) int y dt.

    Parameters
    ----------
    y_v_per_m : ndarray, shape (n_pulses, n_samples)
        Recorded field change, baseline removed, in V/m.
    sample_rate_hz : float
        Samples per second.
    decay_time_s : float or None
        RC decay constant tau in seconds; None returns the input unchanged.

    Returns
    -------
    ndarray, shape (n_pulses, n_samples)
        The compensated field change in V/m.
    """
    y = np.asarray(y_v_per_m, dtype=np.float64)
    if decay_time_s is None:
        return y
    return y + cumtrapz_rows(y, 1.0 / sample_rate_hz) / decay_time_s


def _index_range(n_samples, sample_rate_hz, pretrigger_s, window_s):
    i0 = int(np.floor((pretrigger_s + window_s[0]) * sample_rate_hz))
    i1 = int(np.ceil((pretrigger_s + window_s[1]) * sample_rate_hz)) + 1
    return max(i0, 0), min(max(i1, 0), n_samples)


def _row_median(a):
    """Median of each row ignoring NaN; vectorised for rows without NaN."""
    out = np.empty(a.shape[0])
    nan_rows = np.isnan(a).any(axis=1)
    if (~nan_rows).any():
        out[~nan_rows] = np.median(a[~nan_rows], axis=1)
    if nan_rows.any():
        with warnings.catch_warnings():  # all-NaN rows give NaN, which is what we want
            warnings.simplefilter("ignore", RuntimeWarning)
            out[nan_rows] = np.nanmedian(a[nan_rows], axis=1)
    return out


def _baseline_noise(field, i0, quantum):
    """Median and robust sigma of the pre-window record (or the whole row)."""
    base = field[:, :i0] if i0 >= 16 else field  # no pre-trigger: the whole row
    med = _row_median(base)
    sigma = 1.4826 * _row_median(np.abs(base - med[:, None]))
    if quantum > 0:
        sigma = np.maximum(sigma, quantum / np.sqrt(12.0))
    return med, sigma


def field_features(field_v_per_m, sample_rate_hz, *, pretrigger_s=0.0, delay_s=0.0,
                   decay_time_s=None, quantum_v_per_m=0.0, range_m=None,
                   analysis_window_s=ANALYSIS_WINDOW_S, peak_search_s=PEAK_SEARCH_S,
                   tl_speed_m_per_s=TL_SPEED_M_PER_S):
    """Compute every field-change feature of a batch of pulses.

    Parameters
    ----------
    field_v_per_m : ndarray, shape (n_pulses, n_samples)
        Field change in V/m, physics convention, NaN where missing.
    sample_rate_hz : float
        Samples per second of the field channel.
    pretrigger_s : float, default=0.0
        Sample 0 lies this long before the trigger, in seconds.
    delay_s : float, default=0.0
        Channel delay in seconds (physical time = recorded time - delay).
    decay_time_s : float or None, default=None
        Fast-antenna RC constant in seconds (None: DC-coupled).
    quantum_v_per_m : float, default=0.0
        One digitizer step in V/m (0 for float records); floors the noise estimate.
    range_m : ndarray, shape (n_pulses,), optional
        Horizontal distance to the source in metres, NaN where unknown.
    analysis_window_s, peak_search_s : (float, float)
        Windows relative to the trigger, in seconds.
    tl_speed_m_per_s : float
        Return-stroke speed assumed by the transmission-line peak current, m/s.

    Returns
    -------
    dict of str -> ndarray, shape (n_pulses,)
        Keys as in :data:`features.schema.FEATURES` (``peak_field_v_per_m``,
        ``rise_time_s``, ...), plus ``peak_time_s`` (physical time of the peak
        relative to the trigger, s) and ``field_ok`` (bool).
    """
    x = np.asarray(field_v_per_m, dtype=np.float64)
    if x.ndim != 2:
        raise ValueError(f"field_v_per_m must be 2-D (n_pulses, n_samples), got {x.shape}")
    n, m = x.shape
    fs = float(sample_rate_hz)
    rng = np.full(n, np.nan) if range_m is None else np.asarray(range_m, dtype=np.float64)
    i0, i1 = _index_range(m, fs, pretrigger_s, analysis_window_s)
    if i1 - i0 < 8:  # the trigger lies outside the record: use all of it
        analysis_window_s = peak_search_s = (-pretrigger_s, m / fs - pretrigger_s)
        i0 = 0
    base, sigma = _baseline_noise(x, i0, quantum_v_per_m)
    kw = dict(pretrigger_s=pretrigger_s, delay_s=delay_s, decay_time_s=decay_time_s,
              peak_search_s=peak_search_s, tl_speed_m_per_s=tl_speed_m_per_s)
    # Most pulses are over within tens of microseconds: measure every row on a
    # short window first, and again on the full window only where a crossing or
    # the overshoot lobe runs to the short window's edge (wide pulses).
    short = (max(analysis_window_s[0], -25e-6), min(analysis_window_s[1], 50e-6))
    s0, s1 = _index_range(m, fs, pretrigger_s, short)
    if s1 - s0 < 8:
        short = tuple(analysis_window_s)
    out, longer = _field_window(x, fs, base, sigma, rng, window_s=short, **kw)
    if longer.any() and short != tuple(analysis_window_s):
        rows = np.flatnonzero(longer)
        full, _ = _field_window(x[rows], fs, base[rows], sigma[rows], rng[rows],
                                window_s=analysis_window_s, **kw)
        for key, val in full.items():
            out[key][rows] = val
    return out


def _field_window(x, fs, base, sigma, rng, *, window_s, pretrigger_s, delay_s, decay_time_s,
                  peak_search_s, tl_speed_m_per_s):
    """Field features of every row measured within ``window_s`` of the trigger.

    Returns the feature dict and a bool array marking rows whose pulse reaches
    the window's edge (to be measured again on a longer window).
    """
    n, m = x.shape
    dt = 1.0 / fs
    i0, i1 = _index_range(m, fs, pretrigger_s, window_s)
    y = x[:, i0:i1] - base[:, None]
    missing = np.isnan(y)
    miss_frac = missing.mean(axis=1)
    y[missing] = 0.0
    e = decay_compensate(y, fs, decay_time_s)
    w = e.shape[1]
    cols = np.arange(w)
    t0 = i0 / fs - pretrigger_s - delay_s          # physical time of window sample 0

    # initial peak inside the search window
    p0, p1 = _index_range(m, fs, pretrigger_s, peak_search_s)
    p0, p1 = max(p0 - i0, 0), min(p1 - i0, w)
    if p1 <= p0:  # the search window lies outside this window: search all of it
        p0, p1 = 0, w
    absw = np.abs(e[:, p0:p1])
    # the initial peak is the first local maximum of |E| (within +-0.5 us) that
    # reaches PEAK_FRACTION of the largest |E| of the search window (and four
    # noise sigmas): the catalogued pulse, not a bigger neighbour later in a train
    half = max(int(round(0.5e-6 * fs)), 1)
    ext = max(p0 - half, 0)      # look a little before the window: its first sample is
    wide = np.abs(e[:, ext:p1])  # a peak only if the field was lower just before it
    local = (absw >= ndimage.maximum_filter1d(wide, 2 * half + 1, axis=1,
                                              mode="nearest")[:, p0 - ext:])
    top = absw.max(axis=1)
    level = np.maximum(PEAK_FRACTION * top, np.minimum(top, 4 * sigma))
    first, found = first_true(local & (absw >= level[:, None]))
    s = p0 + np.where(found, first, absw.argmax(axis=1))
    polarity = np.where(take_rows(e, s) >= 0, 1.0, -1.0)
    u = e * polarity[:, None]
    s_frac, peak = parabolic_peak(u, s)
    ok = (miss_frac <= MAX_MISSING_FRACTION) & (peak > 0)

    lvl = lambda f: f * peak  # noqa: E731 - a level as a fraction of the peak
    # the valley before the rise: lowest u within four 50 %-to-peak times before the peak
    c50 = crossing_before(u, s, lvl(0.5))
    lookback = np.where(np.isfinite(c50), 4 * (s - np.nan_to_num(c50)) + 2, 1e-6 * fs)
    lo = np.maximum(s - np.ceil(lookback).astype(np.intp), 0)
    v0, v1 = int(lo.min(initial=0)), int(s.max(initial=0)) + 1
    vc = cols[v0:v1]
    valley = v0 + np.where((vc >= lo[:, None]) & (vc <= s[:, None]), u[:, v0:v1],
                           np.inf).argmin(axis=1)
    # leading-edge levels are searched after the valley (a pulse riding on its
    # predecessor's tail has no 10 % point of its own: NaN)
    c10 = crossing_before(u, s, lvl(0.1), start=valley)
    c50 = crossing_before(u, s, lvl(0.5), start=valley)
    c90 = crossing_before(u, s, lvl(0.9), start=valley)
    f50 = crossing_after(u, s, lvl(0.5))
    f10 = crossing_after(u, s, lvl(0.1))
    # onset: last rise through max(1 % of P, noise) after the valley, else the valley
    onset_level = np.maximum(lvl(0.01), sigma)
    onset = crossing_before(u, s, onset_level, start=valley)
    onset = np.where(np.isfinite(onset), onset, valley.astype(float))

    # zero crossing, bounded by a following pulse rising above 60 % of P
    after50 = np.where(np.isfinite(f50), np.ceil(np.nan_to_num(f50)), w).astype(np.intp)
    next_rise, has_next = first_true((u >= lvl(0.6)[:, None]) & (cols > after50[:, None]))
    zc_stop = np.where(has_next, next_rise, w)
    zc = crossing_after(u, s, np.zeros(n), stop=zc_stop, inclusive=True)
    has_zc = np.isfinite(zc)
    ihc = zc - onset                                   # samples

    # overshoot lobe: from the zero crossing to the field's return through zero, at
    # most 10 initial half-cycles and never past a following pulse (> 50 % of P)
    jz = np.where(has_zc, np.ceil(np.nan_to_num(zc)), w).astype(np.intp)
    os_end = np.minimum(jz + np.ceil(10 * np.nan_to_num(ihc, nan=0.0)).astype(np.intp) + 1, w)
    nxt, has_nxt = first_true((u >= lvl(0.5)[:, None]) & (cols > jz[:, None]))
    os_end = np.where(has_nxt, np.minimum(os_end, nxt), os_end)
    lobe_back = crossing_after(-u, jz, np.zeros(n), stop=os_end, inclusive=True)
    lobe_closed = np.isfinite(lobe_back)
    lobe_end = np.where(lobe_closed, np.ceil(np.nan_to_num(lobe_back)), os_end).astype(np.intp)
    in_lobe = (cols >= jz[:, None]) & (cols < np.maximum(lobe_end, jz + 1)[:, None])
    neg = np.where(in_lobe, -u, -np.inf)
    j_os = neg.argmax(axis=1)
    overshoot = np.where(has_zc, np.maximum(take_rows(neg, j_os), 0.0), 0.0)
    bipolarity = np.where(ok, overshoot / np.where(peak > 0, peak, 1.0), np.nan)

    # end of the pulse for the width (overshoot counted when it exceeds 10 % of P)
    big_os = has_zc & (overshoot >= lvl(0.1))
    os_fall = crossing_after(-u, j_os, lvl(0.1), stop=lobe_end + 1)
    end_width = np.where(big_os, np.where(np.isfinite(os_fall), os_fall, lobe_end - 1.0), f10)
    # end of the overshoot lobe for the charge moment: its return through zero
    end_charge = np.where(has_zc, np.where(lobe_closed, lobe_back, os_end - 1.0),
                          np.where(np.isfinite(f10), f10, w - 1.0))
    # rows whose pulse reaches this window's edge: measure them on a longer one
    longer = ok & ((valley <= 1) | ~np.isfinite(f10) | (~has_zc & ~has_next)
                   | (has_zc & ~lobe_closed & ~has_nxt & (os_end >= w)))

    # moments: M(t) = -2 pi eps0 c^2 D int_onset^t E dt
    k = moment_factor_a_per_v(rng)
    ie = cumtrapz_rows(e, dt)                           # V s / m
    ie_on = interp_rows(ie, onset)
    m_end = np.where(has_zc, zc, np.where(np.isfinite(f10), f10, w - 1.0))
    current_moment = -k * (interp_rows(ie, m_end) - ie_on)
    # int_onset^T (int_onset^t E dt') dt  =  int_onset^T ie dt - ie(onset) (T - onset)
    t_span = np.maximum(end_charge - onset, 0.0)
    charge_moment = -k * (integrate_rows(ie, onset, onset + t_span, dt) - ie_on * t_span * dt)

    peak_signed = polarity * peak
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = 20 * np.log10(peak / sigma)
    snr = np.where(np.isfinite(snr), np.minimum(snr, SNR_CAP_DB), np.where(peak > 0,
                   SNR_CAP_DB, np.nan))
    range_norm = peak_signed * rng / REFERENCE_RANGE_M
    out = {
        "peak_field_v_per_m": peak_signed,
        "polarity": polarity,
        "rise_time_s": (c90 - c10) * dt,
        "fwhm_s": (f50 - c50) * dt,
        "initial_half_cycle_s": ihc * dt,
        "zero_crossing_s": (zc - s_frac) * dt,
        "width_s": (end_width - c10) * dt,
        "bipolarity": bipolarity,
        "range_normalized_peak_v_per_m": range_norm,
        "current_moment_peak_a_m": current_moment,
        "charge_moment_change_c_m": charge_moment,
        "peak_current_a": -k * peak_signed / tl_speed_m_per_s,
        "snr_db": snr,
        "peak_time_s": t0 + s_frac * dt,
        "onset_time_s": t0 + onset * dt,
        "field_noise_v_per_m": sigma,
        "field_ok": ok,
    }
    for key, val in out.items():
        if key != "field_ok" and val.dtype.kind == "f":
            out[key] = np.where(ok, val, np.nan)
    out["snr_db"] = np.where(ok, out["snr_db"], np.nan)
    return out, longer
