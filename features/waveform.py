"""Features of the fast-antenna field change: the catalogued pulse within its own extent.

All functions take a batch of rows ``(n_pulses, n_samples)`` in V/m (physics
convention, as :meth:`features.catalog.Catalog.read_field` returns them) and the
channel's sample rate in Hz; they return one value per row, in SI units. This module
holds decay compensation, the far-field moment factor and :func:`field_features`; the
latter's row helpers (missing samples, baseline line, masked maxima, the first sub-peak)
are in :mod:`features._waveform_rows`.

Steps and definitions (the contract of :mod:`features.schema`):

1. **Decay compensation**: a fast antenna with RC constant tau records y with
   dy/dt + y/tau = dE/dt, so E(t) = y(t) + (1/tau) int y dt (first-order high-pass
   inverted; common practice for fast antennas).
2. **Baseline and noise** from whatever precedes the pulse (:func:`features.pulses.
   baseline_fit`): a robust straight line and the noise sigma (quantisation noise included).
3. **Every pulse in the record** (:mod:`features.pulses`): lobes with hysteresis
   (2 and 5 sigma), grouped into pulses with their overshoots; the catalogued one is the
   pulse at the trigger, and it is measured within its own extent: a neighbour
   (a following leader step, a return stroke, the tail of an earlier pulse) never
   lends it a peak, a width or a baseline.
4. **Peak** P: the largest |E| of the pulse's initial half-cycle, refined by a parabola
   through three samples; its sign is the polarity; below, ``u = polarity * E``.
5. **Smoothing**: the measures below are taken on a copy smoothed by a centred moving
   average just long enough to bring the noise to 1 % of P (at most a quarter of the
   FWHM and 5 us; none at 40 dB and above), and P is that copy's peak: the top of a
   slow pulse, not the largest noise sample on it. **Leading edge**: 10, 50 and 90 %
   crossings searched back from the peak, never before the end of the previous pulse;
   the **onset** is the last rise through max(1 % of P, 3 sigma_s); the initial half-cycle
   (onset to zero crossing) is NaN below 20 dB, where the onset is lost in the noise.
6. **Trailing measures with hysteresis**, so that noise near zero does not end a
   lobe: the **zero
   crossing** is the last fall of the smoothed u through 0 before it goes below -max(3 sigma_s, 2 % of P); a pulse that never does is unipolar (no zero
   crossing, bipolarity 0). The **overshoot lobe** ends where it comes back through 0
   before rising above max(3 sigma_s, 10 % of P) (hysteresis again), or
   where the overshoot's tail first falls below max(2 sigma_t, 1 % of P) after the
   overshoot's peak, or at the next pulse; its peak is taken on a copy smoothed over a
   quarter of the overshoot's own FWHM (at most to 1 % of P, as the peak's). The
   tail is followed on a copy smoothed to :data:`TAIL_NOISE_FRACTION` of P (noise
   sigma_t), over at most the overshoot's rise and a window that delays the fall by at
   most a quarter of its tolerance (:mod:`features._tail`), so that a noise dip does not
   end it early, and re-read off a line through it; ``pulse_end_s`` is NaN where
   2 sigma_t stays above 1 % of P (the end would be the noise's), where the tail is still
   above its level at the next pulse (the end is hidden), where RESOLVE_SIGMAS of the
   fall's time noise exceed its tolerance, and for a unipolar-looking pulse where
   bipolarity is NaN (its noise could hide an overshoot, and with it the end). An
   RC-coupled record on the decaying tail of an earlier field change has its digitizer
   offset from a fit of that tail (:mod:`features._baseline`), not its level.
7. **Width**: from the 10 % point of the leading edge to the point where the pulse (or
   its overshoot on the tail copy, if that exceeds 10 % of P) last falls below 10 % of P.
8. **Resolution**: a quantity the record cannot resolve is NaN, not a number: rise time
   below 20 dB SNR or shorter than one sample; FWHM below 12 dB or shorter than two
   samples (the noise taken as at least half a digitizer step here); width shorter than two samples or with its 10 % level under 2 sigma_s;
   bipolarity of a unipolar-looking pulse whose noise could hide an overshoot of 15 %.
   A time read off a crossing is uncertain by sigma_s / |du_s/dt| there (the slope over
   +-the column's tolerance): rise time, zero crossing and width are NaN where
   :data:`RESOLVE_SIGMAS` of that uncertainty exceed the column's tolerance (10 % + 1
   sample; the zero crossing's is that of its line fit), bipolarity where as many of its level
   uncertainty (overshoot and peak noise over P) exceed 0.08. A censored pulse (at the
   digitizer's full scale) has no known peak: the columns of :data:`CENSORED_NAN` are NaN.
9. **Moments and currents** (:mod:`features.moments`): the D^2/R^3 geometry of an
   elevated source (altitude from the mapped sources, else
   :data:`features.moments.DEFAULT_ALTITUDE_M`, flagged), the three-term inversion for
   M(t) and Q(t) where it converges. The current moment's peak is M at the zero crossing
   (where dM/dt = 0) or at the end of a unipolar pulse; the charge moment change is Q at
   the end of the overshoot lobe (or of the pulse). Transmission-line peak current
   I = -2 pi eps0 c^2 (R^3/D^2) E / v with v = ``TL_SPEED_M_PER_S``. The charge
   moment change is NaN below 20 dB, where its onset and the end of its tail are lost
   in the noise (an integral cut short is a wrong number).

References
----------
Rakov, V. A. and Uman, M. A. (2003), *Lightning: Physics and Effects*, Cambridge
University Press: ch. 4 (field equations, TL model), ch. 9 and 20 (in-cloud pulses);
definitions recalled from memory.
"""

from __future__ import annotations

import numpy as np
from scipy import constants

from . import pulses as _pulses
from ._baseline import rc_offset
from ._rowops import (
    crossing_after,
    crossing_before,
    cumsum_rows,
    cumtrapz_rows,
    moving_average_rows,
    parabolic_peak,
    take_rows,
)
from ._tail import bounded_tail_window, line_half_window
from ._waveform_rows import (
    REFINE_MAX_HALF,
    _crossing_sigma,
    _end_resolved,
    _fill_missing,
    _first_subpeak,
    _last_at_least,
    _masked_max,
    _mean_before,
    _refine_crossing,
    _subtract_baseline,
)
from ._waveform_rows import SUBPEAK_HALF_S as SUBPEAK_HALF_S
from .moments import (
    DEFAULT_ALTITUDE_M,
    NEAR_FIELD_RATIO,
    geometry_factor_m,
    moments_at,
    radiation_led,
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

#: Span of record analysed around the trigger (recorded time), in seconds: the pulse,
#: its neighbours within :data:`features.pulses.CONTEXT_S` and the baseline before it.
ANALYSIS_WINDOW_S = (-140e-6, 170e-6)
#: Where the peak is searched when no pulse stands out of the noise, s.
PEAK_SEARCH_S = (-3e-6, 40e-6)
#: Stretch just before the catalogued pulse through which its local baseline line is
#: fitted (the tail of an earlier pulse is nearly straight over it), s.
LOCAL_BASELINE_S = 5e-6
#: The first baseline stretch ends this long before the trigger, s.
TRIGGER_GUARD_S = 3e-6
#: Close under the source, the radiation term's peak (dM/dt of the exact inversion) is
#: kept where it stands this many times above its noise (the most a row's noise reaches
#: over a few hundred samples is ~4 sigma; common practice, no source).
RATE_SIGMAS = 5.0
#: Transmission-line return-stroke speed assumed for ``peak_current_a``, m/s.
#: Half the speed of light: the middle of measured return-stroke speeds
#: (about c/3 to 2c/3; Rakov & Uman 2003, ch. 4; from memory).
TL_SPEED_M_PER_S = 1.5e8
#: Range to which peaks are normalised, m (the customary 100 km).
REFERENCE_RANGE_M = 100e3
#: Fraction of missing (NaN) samples in the span above which a row is unusable.
MAX_MISSING_FRACTION = 0.5
#: Cap of the signal-to-noise ratio for noiseless records, dB.
SNR_CAP_DB = 200.0
#: Peak-to-noise ratios below which a quantity is not resolved (amplitude ratios):
#: the 10 % level must stand at 1 sigma for the rise time (20 dB), the 50 % level at
#: 2 sigma for the FWHM (12 dB) (common practice, no source).
MIN_PEAK_SIGMA_RISE = 10.0
MIN_PEAK_SIGMA_FWHM = 4.0
#: A duration read off crossings (or a level ratio) is kept where this many of its
#: standard uncertainties fit inside its tolerance (1.25: at the limit 79 % of Gaussian
#: errors within, more for the values kept; common practice, no source; 1.5 withheld
#: half again as many bipolarities for 0.8 % more within); the tolerances are the
#: schema's (:mod:`features.schema`): 10 % of a duration plus one sample, 0.08 for
#: bipolarity.
RESOLVE_SIGMAS = 1.25
DURATION_REL = 0.10
DURATION_SAMPLES = 1.0
BIPOLARITY_TOLERANCE = 0.08
#: Columns relative to the peak (its level or its time) that a censored pulse, whose
#: peak the digitizer clipped, cannot give: NaN there.
CENSORED_NAN = ("rise_time_s", "fwhm_s", "zero_crossing_s", "width_s", "bipolarity",
                "pulse_end_s")
#: Smallest peak, in noise sigmas, for a usable field record.
MIN_PEAK_SIGMA_OK = 3.0
#: Longest smoothing of the trailing measures, s.
MAX_SMOOTH_S = 5e-6
#: Noise of the overshoot's tail copy, as a fraction of the peak: a sixth of the 1 %
#: tail level, so that its first fall through that level is the tail's, not a noise dip
#: (common practice, no source).
TAIL_NOISE_FRACTION = 1.0 / 600.0
#: Smallest noise sigma, as a fraction of the row's largest |E| (noiseless records).
RELATIVE_SIGMA_FLOOR = 1e-7


def moment_factor_a_per_v(range_m):
    """2 pi eps0 c^2 D: current-moment rate per unit radiation field, in A/(V s^-1).

    The far-field (ground-level source) special case of
    :func:`features.moments.radiation_factor_a_per_v`.

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
        Recorded field change in V/m.
    sample_rate_hz : float
        Samples per second.
    decay_time_s : float or None
        RC decay constant tau in seconds; None returns the input unchanged.

    Returns
    -------
    ndarray, shape (n_pulses, n_samples)
        The compensated field change in V/m.

    Examples
    --------
    >>> import numpy as np
    >>> t = np.arange(2000) / 1e6                       # 2 ms at 1 MS/s
    >>> y = np.exp(-t / 1e-3)[None, :]                  # an RC-decayed unit step
    >>> round(float(decay_compensate(y, 1e6, 1e-3)[0, -1]), 3)
    1.0
    """
    y = np.asarray(y_v_per_m, dtype=np.float64)
    if decay_time_s is None:
        return y
    out = cumtrapz_rows(y, 1.0 / sample_rate_hz)
    out /= decay_time_s          # in place: y + cumtrapz / tau, one array, same numbers
    out += y
    return out


def field_features(field_v_per_m, sample_rate_hz, *, pretrigger_s=0.0, delay_s=0.0,
                   decay_time_s=None, quantum_v_per_m=0.0, range_m=None, altitude_m=None,
                   full_scale_v_per_m=None, tl_speed_m_per_s=TL_SPEED_M_PER_S,
                   return_trace=False):
    """Compute every field-change feature of a batch of pulses.

    Parameters
    ----------
    field_v_per_m : ndarray, shape (n_pulses, n_samples)
        Field change in V/m, physics convention, NaN where missing.
    sample_rate_hz : float
        Samples per second of the field channel.
    pretrigger_s : float, default=0.0
        Sample 0 lies this long before the trigger, in seconds (may exceed the record:
        the trigger then lies after it, and the largest pulse is taken).
    delay_s : float, default=0.0
        Channel delay in seconds (physical time = recorded time - delay).
    decay_time_s : float or None, default=None
        Fast-antenna RC constant in seconds (None: DC-coupled).
    quantum_v_per_m : float, default=0.0
        One digitizer step in V/m (0 for float records): the noise sigma is measured in a
        way that does not snap to whole steps, and is at least step/sqrt(12).
    range_m, altitude_m : ndarray, shape (n_pulses,), optional
        Horizontal distance and source height in metres, NaN where unknown (an unknown
        altitude takes :data:`features.moments.DEFAULT_ALTITUDE_M`).
    full_scale_v_per_m : float, optional
        Clip level of the digitizer in V/m; a pulse reaching it is censored.
    tl_speed_m_per_s : float
        Return-stroke speed assumed by the transmission-line peak current, m/s.
    return_trace : bool, default=False
        Also return the processed rows and the pulses found (for plots).

    Returns
    -------
    dict of str -> ndarray, shape (n_pulses,)
        Keys as in :data:`features.schema.FEATURES` for the field group, plus
        ``peak_time_s``, ``first_peak_time_s``, ``onset_time_s``, ``end_time_s`` (the
        pulse's extent even where ``pulse_end_s`` is NaN; physical times
        relative to the trigger, s), ``prev_end_s``, ``next_start_s`` (the neighbouring
        pulses' extents, s, NaN: none) and ``field_ok`` (bool). With ``return_trace``,
        a second dict: ``field_v_per_m`` (processed rows), ``time_s`` (physical time of
        each column), ``pulses`` (the :class:`features.pulses.PulseTable`), ``own``,
        ``sigma``, ``compensated_v_per_m`` (after decay compensation, before the
        baseline), ``offset`` (digitizer offset removed first, V/m) and ``baseline``
        ((level, slope per column, first and last column of the line)).
    """
    x = np.asarray(field_v_per_m, dtype=np.float64)
    if x.ndim != 2:
        raise ValueError(f"field_v_per_m must be 2-D (n_pulses, n_samples), got {x.shape}")
    n, m = x.shape
    fs = float(sample_rate_hz)
    dt = 1.0 / fs
    rows = np.arange(n)
    cols = np.arange(m)
    rng = np.full(n, np.nan) if range_m is None else np.asarray(range_m, dtype=np.float64)
    alt_given = (np.full(n, np.nan) if altitude_m is None
                 else np.asarray(altitude_m, dtype=np.float64))
    x, missing = _fill_missing(x)
    miss_frac = np.count_nonzero(missing, axis=1) / m if m else np.ones(n)
    x_filled = x                                       # (for the clip test at the end)
    jt = pretrigger_s * fs                             # trigger column (fractional)
    inside = 0 <= jt < m
    q = float(quantum_v_per_m or 0.0)
    stop_a = np.full(n, int(np.clip(np.floor(jt - TRIGGER_GUARD_S * fs), 0, m)))
    # the digitizer's offset first (decay compensation would turn it into a ramp)
    # (on the decaying tail of an earlier field change: :mod:`features._baseline`)
    offset = np.zeros(n)
    if decay_time_s is not None and m:
        offset = rc_offset(x, stop_a, fs, q, decay_time_s)
        x = x - offset[:, None]
    e0 = decay_compensate(x, fs, decay_time_s)

    # baseline, stage A: the level of the quietest record before the trigger, and the noise
    level, _, sigma, _, used = _pulses.baseline_fit(e0, stop_a, fs, q, min_slope_s=np.inf,
                                                    quiet_level=True)
    no_base = used == 0
    if no_base.any():  # no pre-trigger: level 0 (the digitizer's zero), sigma from steps
        sigma = np.where(no_base, _pulses._noise_floor(
            _pulses.robust_sigma_diff(e0) if m > 2 else np.full(n, np.nan), q), sigma)
    e_a = e0 - level[:, None]
    # a noiseless record (a test, a model) still has a scale: 1e-7 of its largest value
    floor = RELATIVE_SIGMA_FLOOR * (np.maximum(e_a.max(axis=1), -e_a.min(axis=1)) if m
                                    else np.zeros(n))
    sigma = np.fmax(sigma, np.maximum(floor, np.finfo(float).tiny))
    smooth = max(int(round(_pulses.DETECT_SMOOTH_S * fs)) | 1, 1)   # odd: centred
    lobes = _pulses.find_lobes(e_a, sigma, smooth=smooth)
    table, merged, lobe_pulse = _pulses.group_pulses(lobes, fs)
    own = _pulses.catalogued_pulse(table, merged, lobe_pulse, n, jt if inside else np.nan, fs)
    has = own >= 0
    own_c = np.where(has, own, 0)

    # baseline, stage B: a line through the LOCAL_BASELINE_S just before the catalogued
    # pulse (the tail of an earlier pulse, if any), held constant outside that stretch
    # and the pulse (never extrapolated further); the noise stays stage A's
    slope = np.zeros(n)
    line_lo, line_hi = np.zeros(n), np.zeros(n)
    if len(table):
        ext_start = np.where(has, table.start[own_c], -1)
        guard = max(int(round(0.5e-6 * fs)), 2)
        stop_b = np.where(has, np.minimum(stop_a, ext_start - guard), stop_a)
        # ... beginning after the end of the lobe before the pulse, if any: the line is
        # the tail's, not drawn through an earlier pulse (none left: stage A's level); a
        # pulse split from that lobe at a valley rides on its tail: after its peak then
        first_b = table.first_lobe[own_c]
        lobe_b = np.maximum(first_b - 1, 0)
        after = np.where(has & (first_b > 0) & (merged.row[lobe_b] == rows),
                         np.where(merged.after_valley[first_b], merged.peak_col[lobe_b] + 1,
                                  merged.stop[lobe_b]), 0)
        lev_b, slo_b, _, start_b, used_b = _pulses.baseline_fit(
            e0, stop_b, fs, q, max_s=LOCAL_BASELINE_S, min_slope_s=0.5 * LOCAL_BASELINE_S,
            start_min=after)
        use_b = has & (used_b >= _pulses.BASELINE_MIN_SAMPLES)
        level = np.where(use_b, lev_b, level)
        slope = np.where(use_b, slo_b, 0.0)
        line_lo = np.where(use_b, start_b, 0)
        line_hi = np.where(use_b, table.stop[own_c], 0)
    baseline_short = used < _pulses.BASELINE_MIN_S * fs
    e = _subtract_baseline(e0, level, slope, line_lo, line_hi)

    # the peak: the catalogued pulse's initial half-cycle, else the largest |E| near the
    # trigger (a pulse lost in the noise)
    if inside:
        p0 = int(np.clip(np.floor(jt + PEAK_SEARCH_S[0] * fs), 0, m - 1))
        p1 = int(np.clip(np.ceil(jt + PEAK_SEARCH_S[1] * fs) + 1, p0 + 1, m))
    else:
        p0, p1 = 0, m
    fallback = p0 + np.abs(e[:, p0:p1]).argmax(axis=1) if m else np.zeros(n, np.intp)
    first = table.first_lobe[own_c] if len(table) else np.zeros(n, np.intp)
    s = np.where(has, merged.peak_col[first] if len(table) else 0, fallback).astype(np.intp)
    # the detector's peak is that of the smoothed record: the raw one lies within half
    # its window (a one-sample spike keeps its height)
    if smooth > 1 and m:
        half = smooth // 2
        _, s_raw = _masked_max(e_a, s - half, s + half + 1, transform=np.abs)
        s = np.where(has, s_raw, s).astype(np.intp)
    polarity = np.where(take_rows(e, s) >= 0, 1.0, -1.0)
    if len(table):
        polarity = np.where(has, merged.sign[first].astype(float), polarity)
    u = e * polarity[:, None]
    _, peak = parabolic_peak(u, s)

    # the pulse's neighbours in the record bound every search
    if len(table):
        prev_ok = has & (own_c > 0) & (table.row[np.maximum(own_c - 1, 0)] == rows)
        prev_end = np.where(prev_ok, table.stop[np.maximum(own_c - 1, 0)], 0)
        last = len(table) - 1
        next_ok = has & (own_c < last) & (table.row[np.minimum(own_c + 1, last)] == rows)
        next_start = np.where(next_ok, table.start[np.minimum(own_c + 1, last)], m)
        run_start = np.where(has, table.start[own_c], s)
        ext_stop = np.where(has, table.stop[own_c], s + 1)
    else:
        prev_ok = next_ok = np.zeros(n, dtype=bool)
        prev_end, next_start = np.zeros(n, np.intp), np.full(n, m)
        run_start, ext_stop = s.copy(), s + 1
    edge_lo = np.maximum(prev_end, run_start - (s - run_start) - 2
                         - int(round(0.5e-6 * fs))).astype(np.intp)
    # smoothing: just enough to bring the noise to 1 % of the peak, at most a quarter of
    # the FWHM and MAX_SMOOTH_S (a pulse at 40 dB and above is not smoothed at all)
    c50 = crossing_before(u, s, 0.5 * peak, start=edge_lo)
    f50 = crossing_after(u, s, 0.5 * peak, stop=next_start)
    with np.errstate(divide="ignore", invalid="ignore"):
        need = np.ceil((100.0 * sigma / peak) ** 2)
    k = np.fmin(np.nan_to_num(need, nan=1.0, posinf=1.0),
                np.where(np.isfinite(f50 - c50), np.round((f50 - c50) / 4.0), 1.0))
    k = np.clip(k, 1, max(int(round(MAX_SMOOTH_S * fs)), 1)).astype(np.intp)
    # (every smoothed copy of u below: one running sum of its rows, taken once)
    u_sum = cumsum_rows(u)
    u_s = moving_average_rows(u, k, cumsum=u_sum)
    sig_s = sigma / np.sqrt(k)
    # a level is located no better than half a digitizer step (the largest rounding
    # error), however quiet the record: the resolution tests use that at least
    sigma_res = np.maximum(sigma, 0.5 * q)
    # the peak of the smoothed pulse near the raw one (the top of a slow pulse, not the
    # largest noise sample on it)
    _, s_top = _masked_max(u_s, np.where(np.isfinite(c50), np.floor(np.nan_to_num(c50)), s - k),
                           np.where(np.isfinite(f50), np.ceil(np.nan_to_num(f50)) + 1, s + k + 1))
    s = np.where(k > 1, s_top, s).astype(np.intp)
    s_frac, peak = parabolic_peak(u_s, s)
    ok = (miss_frac <= MAX_MISSING_FRACTION) & (peak > 0) & (peak >= MIN_PEAK_SIGMA_OK * sigma)
    lvl = lambda f: f * peak  # noqa: E731 - a level as a fraction of the peak
    c10 = crossing_before(u_s, s, lvl(0.1), start=edge_lo)
    c50 = crossing_before(u_s, s, lvl(0.5), start=edge_lo)
    c90 = crossing_before(u_s, s, lvl(0.9), start=edge_lo)
    onset = crossing_before(u_s, s, np.maximum(lvl(0.01), 3 * sig_s), start=edge_lo)
    onset = np.where(np.isfinite(onset), onset, edge_lo.astype(float))
    f50 = crossing_after(u_s, s, lvl(0.5), stop=next_start)
    fwhm_samples = f50 - c50
    h_zc = np.maximum(3 * sig_s, lvl(0.02))
    zc_stop = np.minimum(next_start, ext_stop + 4 * np.maximum(ext_stop - onset, 1) + k)
    conf = crossing_after(u_s, s, -h_zc, stop=np.minimum(zc_stop, m))
    has_zc = np.isfinite(conf)
    jc = np.where(has_zc, np.ceil(np.nan_to_num(conf)), s).astype(np.intp)
    nu_s = -u_s                                # the overshoot's side, searched upwards
    zc = crossing_before(nu_s, jc, np.zeros(n), start=s)
    has_zc &= np.isfinite(zc)
    # ... re-read off a line through the samples within +-3 sigma_t of it (the span of its
    # noise crossings: the last of them is not the signal's), at most its tolerance
    # (10 % + 1 sample; between the lobes the pulse is nearly straight over that)
    tol_zc = DURATION_REL * np.abs(zc - s_frac) + DURATION_SAMPLES
    h_zc = np.clip(3 * _crossing_sigma(u_s, zc, sig_s, np.fmax(tol_zc, k / 2.0)),
                   np.maximum(k / 2.0, 1.0), np.fmax(0.5 * np.abs(zc - s_frac), k / 2.0))
    zc = np.where(has_zc, _refine_crossing(u_s, zc, np.zeros(n), h_zc), zc)
    ihc = zc - onset
    lobe_stop = np.minimum(np.minimum(next_start, jc + np.ceil(10 * np.nan_to_num(ihc))
                                      .astype(np.intp) + 1), m)
    back = crossing_after(nu_s, jc, -np.maximum(3 * sig_s, lvl(0.1)), stop=lobe_stop)
    has_back = np.isfinite(back)
    jb = np.where(has_back, np.ceil(np.nan_to_num(back)), jc).astype(np.intp)
    lobe_back = crossing_before(u_s, jb, np.zeros(n), start=jc)
    # the overshoot's tail ends at its FIRST fall below the tail level after the
    # overshoot's peak: the last sample above it would be a noise excursion anywhere in
    # the search window (2 sigma is exceeded by ~2 % of noise samples)
    # ... on a copy smoothed just enough to bring the noise to TAIL_NOISE_FRACTION of P
    # (a first fall through 1 % of P is then not set by a noise dip), over at most the
    # overshoot's rise (zero crossing to its peak) and MAX_SMOOTH_S, which bends the
    # slower tail little
    _, j_opk = _masked_max(nu_s, jc, lobe_stop)
    with np.errstate(divide="ignore", invalid="ignore"):
        need_tail = np.nan_to_num(np.ceil((sigma / (TAIL_NOISE_FRACTION * peak)) ** 2),
                                  nan=1.0, posinf=1.0)
    k_cap = np.minimum(np.round(j_opk - np.nan_to_num(zc, nan=s)),
                       max(int(round(MAX_SMOOTH_S * fs)), 1))
    k_tail = np.maximum(np.minimum(need_tail, k_cap), k).astype(np.intp)
    k_tail = np.where(has_zc, k_tail, 1)
    nu_t = -moving_average_rows(u, k_tail, cumsum=u_sum)
    h_tail = np.maximum(2 * sigma / np.sqrt(k_tail), lvl(0.01))
    t_from = np.minimum(j_opk, np.maximum(lobe_stop - 1, jc))
    tail_fall = crossing_after(nu_t, t_from, h_tail, stop=lobe_stop)
    # ... over a window short enough to bend the tail's fall by at most a quarter of the
    # end's tolerance (:mod:`features._tail`; a fast tail is bent most), re-read there
    tol_end = DURATION_REL * np.abs(tail_fall - c10) + DURATION_SAMPLES
    k_b, tau_t = bounded_tail_window(nu_t, tail_fall, h_tail, k_tail, k, tol_end)
    redo = np.flatnonzero(k_b < k_tail)
    if redo.size:
        k_tail = k_b
        nu_t[redo] = -moving_average_rows(u[redo], k_tail[redo], cumsum=u_sum[redo])
        h_tail = np.maximum(2 * sigma / np.sqrt(k_tail), lvl(0.01))
        tail_fall[redo] = crossing_after(nu_t[redo], t_from[redo], h_tail[redo],
                                         stop=lobe_stop[redo])
    # ... re-read off a line through the copy within +-its tolerance (a first fall is
    # early by a noise dip where the tail is slow: the line crosses where the tail does),
    # over a window that bends it little (:func:`features._tail.line_half_window`)
    tail_fall = _refine_crossing(nu_t, tail_fall, h_tail, np.fmin(
        np.fmax(tol_end, k_tail / 2.0), line_half_window(tau_t, tol_end)))
    h_tail = np.maximum(2 * sig_s, lvl(0.01))
    j_tail, has_tail = _last_at_least(nu_s, h_tail, jc + 1, lobe_stop)
    lobe_end = np.where(has_back & np.isfinite(lobe_back), lobe_back,
                        np.where(np.isfinite(tail_fall), tail_fall,
                                 np.where(has_tail, j_tail + 1.0, jc.astype(float))))
    # a tail still above its level where the search stops (the next pulse, the record's
    # end, ten initial half-cycles) has no fall the record shows: its end is hidden
    tail_cut = has_zc & ~(has_back & np.isfinite(lobe_back)) & ~np.isfinite(tail_fall) & has_tail
    lobe_end = np.minimum(lobe_end, m - 1.0)
    lobe_end = np.where(has_zc, lobe_end, np.nan)
    overshoot, j_os = _masked_max(nu_s, np.where(has_zc, np.floor(np.nan_to_num(zc)), 0),
                                  np.where(has_zc, np.nan_to_num(lobe_end) + 1, 0))
    overshoot = np.where(has_zc, np.maximum(overshoot, 0.0), 0.0)
    # the overshoot's peak on a copy smoothed over a quarter of the overshoot's own FWHM
    # (as the peak's, at most to 1 % of P): a broad overshoot's largest noisy sample would
    # overstate it by a noise maximum
    o_a = crossing_before(nu_s, j_os, 0.5 * overshoot,
                          start=np.floor(np.nan_to_num(zc)).astype(np.intp))
    o_b = crossing_after(nu_s, j_os, 0.5 * overshoot,
                         stop=np.nan_to_num(lobe_end).astype(np.intp) + 1)
    k_os = np.fmin(np.nan_to_num(need, nan=1.0, posinf=1.0),
                   np.where(np.isfinite(o_b - o_a), np.round((o_b - o_a) / 4.0), 1.0))
    k_os = np.clip(k_os, k, max(int(round(MAX_SMOOTH_S * fs)), 1)).astype(np.intp)
    k_os = np.where(has_zc & (overshoot > 0), k_os, k)
    more = np.flatnonzero(k_os > k)              # (only those rows: a pass over the record)
    if more.size:
        ov_s, _ = _masked_max(-moving_average_rows(u[more], k_os[more], cumsum=u_sum[more]),
                              np.where(np.isfinite(o_a), np.floor(np.nan_to_num(o_a)), j_os)[more],
                              np.where(np.isfinite(o_b), np.ceil(np.nan_to_num(o_b)) + 1,
                                       j_os + 1)[more])
        overshoot[more] = np.maximum(ov_s, 0.0)
    resolvable = peak >= 20.0 * sig_s
    bipolarity = np.where(has_zc, overshoot / np.where(peak > 0, peak, 1.0),
                          np.where(resolvable, 0.0, np.nan))
    bipolarity = np.where(peak >= MIN_PEAK_SIGMA_RISE * sigma_res, bipolarity, np.nan)

    f10 = crossing_after(u_s, s, lvl(0.1), stop=next_start)
    big_os = has_zc & (overshoot >= lvl(0.1))
    # the overshoot's fall through 10 % of P on the tail copy (noise does not end it early)
    os_fall = crossing_after(nu_t, j_os, lvl(0.1), stop=np.nan_to_num(lobe_end).astype(np.intp)
                             + 1)
    end_w = np.where(big_os, np.where(np.isfinite(os_fall), os_fall, lobe_end), f10)
    end_w = np.where(lvl(0.1) >= 2 * sig_s, end_w, np.nan)
    width = end_w - c10
    pulse_end = np.where(has_zc, lobe_end,
                         np.where(np.isfinite(f10), f10, ext_stop - 1.0))
    pulse_end = np.maximum(pulse_end, np.where(np.isfinite(end_w), end_w, -np.inf))

    # moments of the elevated source
    known = np.isfinite(alt_given) & (alt_given >= 0)
    altitude = np.where(known, alt_given, DEFAULT_ALTITUDE_M)
    altitude_assumed = ~known
    # the radiation geometry scales the peak only where the radiation term leads it;
    # closer under the source the peak is mostly the electrostatic and induction terms,
    # and the radiation term's own peak, dM/dt of the exact inversion, is scaled instead
    # (NaN where it is within RATE_SIGMAS of its noise, the field's x 1/|a2|)
    radiating = radiation_led(rng, altitude, (s_frac - onset) * dt)
    current_moment, charge_moment, converged, rate = moments_at(
        e, fs, np.where(ok, onset, np.nan), np.where(ok, pulse_end, np.nan),
        np.where(has_zc, zc, pulse_end), rng, altitude,
        peak_rate=~radiating & np.isfinite(rng), extreme=~radiating & np.isfinite(rng))
    geometry = geometry_factor_m(rng, altitude)
    k_rad = moment_factor_a_per_v(geometry)
    peak_signed = polarity * peak
    rate = np.where(np.abs(rate) >= RATE_SIGMAS * k_rad * sigma, rate, np.nan)
    radiated_v_per_m = np.where(radiating, peak_signed * geometry / REFERENCE_RANGE_M,
                                -rate / moment_factor_a_per_v(REFERENCE_RANGE_M))
    current_a = np.where(radiating, -k_rad * peak_signed / tl_speed_m_per_s,
                         rate / tl_speed_m_per_s)
    with np.errstate(divide="ignore", invalid="ignore"):
        snr = 20 * np.log10(peak / sigma)
    snr = np.where(np.isfinite(snr), np.minimum(snr, SNR_CAP_DB),
                   np.where(peak > 0, SNR_CAP_DB, np.nan))

    # the pulse among its neighbours
    nb = _pulses.neighbour_features(table, own, peak, s, sigma, n, m, fs)
    pre = _mean_before(u, np.floor(onset).astype(np.intp), max(int(round(2e-6 * fs)), 1))
    with np.errstate(divide="ignore", invalid="ignore"):
        pre_level_ratio = np.where(np.isfinite(pre), pre / peak, 0.0)
        slope_ratio = polarity * slope * (10e-6 * fs) / peak
    censored = np.zeros(n, dtype=bool)
    if full_scale_v_per_m is not None and m:
        lo_c = np.floor(onset).astype(np.intp)
        hi_c = np.ceil(np.nan_to_num(pulse_end, nan=s)).astype(np.intp) + 1
        b0 = int(np.clip(lo_c.min(initial=m), 0, m))
        b1 = int(np.clip(hi_c.max(initial=0), b0, m))
        band_cols = np.arange(b0, b1)[None, :]
        band, clip = x_filled[:, b0:b1], float(full_scale_v_per_m) * (1 - 1e-9)
        # (|x| >= clip somewhere in the band, NaN ignored: only then, rarely, each row's
        # own extent is masked)
        if band.size and (np.fmax.reduce(band, axis=None) >= clip
                          or -np.fmin.reduce(band, axis=None) >= clip):
            censored = ((np.abs(band) >= clip) & (band_cols >= lo_c[:, None])
                        & (band_cols < hi_c[:, None])).any(axis=1)

    # resolution: NaN rather than a number the record cannot carry. A time read off a
    # crossing moves by sigma_s / |du_s/dt| there (error propagation of a threshold
    # crossing; common practice, no source); a duration whose RESOLVE_SIGMAS-sigma
    # uncertainty exceeds its tolerance (DURATION_REL of it + DURATION_SAMPLES) is not
    # resolved, and a level ratio likewise against BIPOLARITY_TOLERANCE. A censored pulse
    # (at full scale) has no known peak: nothing relative to it (levels, 10-90 %, the
    # peak's time) is measured
    # (the slope over +-the tolerance: within it the crossing is resolved when the pulse
    # moves by more than its noise, and so measured the slope is not the noise's)
    tol_rise = DURATION_REL * np.abs(c90 - c10) + DURATION_SAMPLES
    tol_zc = DURATION_REL * np.abs(zc - s_frac) + DURATION_SAMPLES
    # (a level f P moves with the peak too: its noise is sigma_s sqrt(1 + f^2))
    st10 = _crossing_sigma(u_s, c10, sig_s * np.sqrt(1.01), np.fmax(tol_rise, k / 2.0))
    st90 = _crossing_sigma(u_s, c90, sig_s * np.sqrt(1.81), np.fmax(tol_rise, k / 2.0))
    # (the zero crossing is read off a line through 2 h + 1 samples of a record smoothed
    # over k: its noise averaged over (2 h + 1) / k independent values)
    stzc = _crossing_sigma(u_s, zc, sig_s, np.fmax(tol_zc, k / 2.0)) / np.sqrt(
        np.maximum((2 * np.floor(np.minimum(h_zc, REFINE_MAX_HALF)) + 1) / k, 1.0))
    # the width's end: on the tail copy where it is the overshoot's fall, else on u_s
    tol_w = DURATION_REL * np.abs(width) + DURATION_SAMPLES
    on_tail = big_os & np.isfinite(os_fall)
    st10_w = _crossing_sigma(u_s, c10, sig_s * np.sqrt(1.01), np.fmax(tol_w, k / 2.0))
    st_w = np.where(on_tail,
                    _crossing_sigma(nu_t, end_w, sigma / np.sqrt(k_tail),
                                    np.fmax(tol_w, k_tail / 2.0)),
                    np.where(big_os, 0.0,      # (the overshoot lobe's end: not a 10 % fall)
                             _crossing_sigma(u_s, end_w, sig_s, np.fmax(tol_w, k / 2.0))))
    with np.errstate(invalid="ignore"):
        rise_ok = (RESOLVE_SIGMAS * np.hypot(st10, st90) <= tol_rise) & ~censored
        zc_ok = (RESOLVE_SIGMAS * stzc <= tol_zc) & ~censored
        width_ok = (RESOLVE_SIGMAS * np.hypot(st10_w, st_w) <= tol_w) & ~censored
        sig_b = np.hypot(sigma / np.sqrt(k_os), bipolarity * sig_s) / peak
        bip_ok = (RESOLVE_SIGMAS * sig_b <= BIPOLARITY_TOLERANCE) & ~censored
    tol_end = DURATION_REL * np.abs(np.nan_to_num(
        np.where(np.isfinite(end_w), end_w, pulse_end) - c10)) + DURATION_SAMPLES
    end_ok = _end_resolved(u_s, nu_t, sig_s, sigma / np.sqrt(k_tail), k, k_tail, tol_end,
                           pulse_end, end_w, st_w, has_zc & has_back & np.isfinite(lobe_back),
                           has_zc & np.isfinite(tail_fall), tail_cut, RESOLVE_SIGMAS) & ~censored
    bipolarity = np.where(bip_ok | (bipolarity == 0), bipolarity, np.nan)
    bipolarity = np.where(censored, np.nan, bipolarity)
    rise = (c90 - c10) * dt
    rise = np.where((peak >= MIN_PEAK_SIGMA_RISE * sigma_res) & (c90 - c10 >= 1.0) & rise_ok,
                    rise, np.nan)
    fwhm = np.where((peak >= MIN_PEAK_SIGMA_FWHM * sigma_res) & (fwhm_samples >= 2.0),
                    fwhm_samples * dt, np.nan)
    width = np.where((width >= 2.0) & width_ok, width * dt, np.nan)
    sub = _first_subpeak(u, s, c50, peak, sigma, fs)

    t0 = -pretrigger_s - delay_s            # physical time of column 0
    tm = lambda c: t0 + c * dt  # noqa: E731 - column -> physical time
    out = {
        "peak_field_v_per_m": peak_signed,
        "polarity": polarity,
        "rise_time_s": rise,
        "fwhm_s": fwhm,
        "initial_half_cycle_s": np.where(has_zc & (peak >= MIN_PEAK_SIGMA_RISE * sigma_res),
                                         ihc * dt, np.nan),
        "zero_crossing_s": np.where(has_zc & (peak >= MIN_PEAK_SIGMA_RISE * sigma_res) & zc_ok,
                                    (zc - s_frac) * dt, np.nan),
        "width_s": width,
        "bipolarity": bipolarity,
        # (close under the source a field at full scale has lost part of the electrostatic
        # and induction terms the inversion needs: its radiation term is not even a bound)
        "range_normalized_peak_v_per_m": np.where(censored & ~radiating, np.nan,
                                                  radiated_v_per_m),
        "current_moment_peak_a_m": current_moment,
        # Q integrates from the onset, lost in the noise below 20 dB (the rule of the
        # initial half-cycle), to the end of the overshoot's tail, lost sooner still: an
        # integral cut short there is a wrong number, not a smaller one
        "charge_moment_change_c_m": np.where(peak >= MIN_PEAK_SIGMA_RISE * sigma_res,
                                             charge_moment, np.nan),
        "peak_current_a": np.where(censored & ~radiating, np.nan, current_a),
        "pulse_start_s": tm(onset),
        # the end of an overshoot's tail is resolved where the tail copy's level is 1 % of
        # P; where its noise holds the level above that, the end is the noise's: NaN; so
        # is the end of a unipolar-looking pulse whose noise could hide an overshoot (the
        # rule of bipolarity)
        "pulse_end_s": np.where(np.where(has_zc, (2 * sigma / np.sqrt(k_tail) <= lvl(0.01))
                                         & end_ok, np.isfinite(bipolarity) & end_ok),
                                tm(pulse_end), np.nan),
        **nb,
        "pre_level_ratio": pre_level_ratio,
        "baseline_slope_ratio": slope_ratio,
        "snr_db": snr,
        "field_noise_v_per_m": np.where(np.isfinite(sigma), sigma, np.nan),
        "peak_time_s": tm(s_frac),
        "first_peak_time_s": tm(sub),
        "onset_time_s": tm(onset),
        "end_time_s": tm(pulse_end),
        "prev_end_s": np.where(prev_ok, tm(prev_end - 1.0), np.nan),
        "next_start_s": np.where(next_ok, tm(next_start.astype(float)), np.nan),
    }
    for key, val in out.items():
        out[key] = np.where(ok, val, np.nan)
    for key in CENSORED_NAN:
        out[key] = np.where(censored, np.nan, out[key])
    out.update({
        "field_ok": ok,
        "field_censored": censored & ok,
        "baseline_short": baseline_short,
        "altitude_assumed": altitude_assumed,
        "near_field": np.isfinite(rng) & (rng < NEAR_FIELD_RATIO * altitude),
        "moments_converged": converged & ok,
    })
    if not return_trace:
        return out
    trace = {"field_v_per_m": e, "time_s": tm(cols.astype(float)), "pulses": table,
             "own": own, "sigma": sigma, "compensated_v_per_m": e0, "offset": offset,
             "baseline": (level, slope, line_lo, line_hi)}
    return out, trace
