"""Features of the VHF channel: a smoothed power envelope, its peak, lag, width and SNR.

The VHF record is either a band-limited antenna voltage (``kind="voltage"``,
power = |analytic signal|^2, the analytic signal from :func:`scipy.signal.hilbert`)
or an already detected linear power envelope (``kind="power"``). Power stays in
the catalog's own units (V^2, counts^2, ...): absolute VHF levels are not
comparable between stations, so the models use ratios and times, and
``vhf_peak_db`` is reported for the analyst.

The raw power of a noise-like VHF signal is speckled (a detected Gaussian carrier has
exponentially distributed power): its largest sample over a long record sits ~10 dB
above the mean even with no signal, and the time of a single burst's largest sample
jitters by its duration. Every VHF feature is therefore measured on a **smoothed
envelope**: the power averaged into bins of :data:`VHF_BIN_S` and then over a moving
window of :data:`VHF_SMOOTH_S` (0.5 us: about the duration of a leader step's VHF burst;
common practice, no source).

* **window**: around the catalogued pulse's rise in the field record: from its onset
  less its own onset-to-peak time (at least :data:`VHF_MIN_LEAD_S`, at most
  :data:`VHF_LEAD_S`: an energetic in-cloud pulse's VHF leads its largest field peak by
  ~10 us, common practice, no source) to :data:`VHF_TRAIL_S` after its field peak (the
  VHF of breakdown accompanies the current's rise, Rakov & Uman 2003, from memory; the
  long tail of a stepped-leader step's extent holds its neighbours' bursts), never
  beyond half-way to a neighbouring pulse, at most :data:`VHF_MAX_WINDOW_S` long
  (:func:`features.extract.vhf_window_s`).
* **noise floor**: the median of the smoothed envelope over :data:`VHF_NOISE_S` before
  the window (after it when the record starts later): a quiet stretch, where bursts of
  other pulses occupy a small part of the time.
* **peak** and **SNR** = peak / noise floor (dB): the largest value of the envelope
  smoothed again over a quarter of its burst's top (:func:`_burst_centre`; the largest
  of a speckled top is biased up by its fluctuation, less so over more looks); in a
  clipped window, the 0.5 us envelope's largest bin (parabola through three bins).
* **peak time**: the centroid of the burst's top half (:func:`_burst_centre`), inside
  the window. The
  smoothed power of a noise-like signal still fluctuates by ~1/sqrt(N) of its mean, N
  the independent looks in the smoothing window (bandwidth x window; the speckle
  statistics of Goodman, Speckle Phenomena in Optics, 2007, ch. 3, from memory): 16
  looks, +-25 %, for a 33 MHz band and 0.5 us. The largest bin of a burst whose top
  falls by less than that over microseconds (an energetic in-cloud pulse's VHF) wanders
  over the whole top; the centroid of the top averages its speckle (common practice, no
  source). The top is the stretch around the peak above half of it: a shoulder below
  half the peak (the plateau a recoil's VHF keeps while its front moves) stays out. A
  clipped window (``censored``) keeps the largest bin (parabola through three bins): its
  flat top holds the burst and whatever follows it at the clip level (measured on
  clipped narrow bipolar events: the middle of the clipped top, or its crossings of a
  level under the clip, are later than the burst's unclipped peak more often); the
  burst's peak lies anywhere between the window's first and last clipped sample, so
  the time's standard error there is that stretch over sqrt(12) (uniform). NaN
  below :data:`MIN_SNR_TIME_DB` (3 dB), where the window's largest noise cell competes
  with the burst, and where the time's **standard error** exceeds
  :data:`MAX_TIME_SE_S`: the envelope's fluctuation (its relative spread measured in the
  noise stretch, i.e. the looks of this channel, whatever its band or detector)
  propagated through the centroid. A broad top in few looks (a microseconds-long burst
  in a narrow band, or at a few dB SNR) has no time resolved to better than a few
  tenths of a microsecond.
* **width**: the time the envelope, smoothed again over a quarter of its burst's top
  (:func:`_burst_centre`: on top of the 0.1 us bins and the 0.5 us moving average),
  stays above 10 % of the way from the noise floor to its peak around it. NaN below
  10 dB SNR, where clipped, where the burst does not fall below that level inside the
  record on either side (running off it, it cannot be measured), and where the width's
  standard error exceeds 5 % of it (+ half a bin): each crossing's error read off where
  the envelope crosses the level +- 2 of its standard deviations (its relative spread
  measured in the noise stretch), :mod:`features._vhf_width`. Near the noise, or on a
  plateau near 10 % of the peak (a recoil's VHF while its front moves), the envelope
  does not fall clearly below the level, and a speckle dip is not the burst's end.
* **censored**: a raw sample of the window at or beyond the channel's full scale: the
  peak is then a lower bound (NBEs, the strongest VHF emitters, saturate receivers set
  sensitive enough for everything else).

(Longer than 400 lines: the envelope, its noise floor and spread, and the burst's time,
standard error and width are computed on the same arrays in one pass; split, they would
be handed between modules as half a dozen arrays.)
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import fft as sp_fft

from ._rowops import (
    crossing_after,
    crossing_before,
    median_rows,
    moving_average_rows,
    nanmedian_rows,
    parabolic_peak,
)
from ._vhf_width import burst_width, width_resolved

__all__ = ["MIN_RATIO_FIELD_SNR_DB", "VHF_BIN_S", "VHF_SMOOTH_S", "VHF_SPAN_S", "vhf_power",
           "vhf_envelope", "vhf_features"]

#: Bin of the power envelope, s.
VHF_BIN_S = 0.1e-6
#: Moving average of the binned envelope, s.
VHF_SMOOTH_S = 0.5e-6
#: The window opens the pulse's rise (onset to field peak) before its onset, at most this
#: long, s ...
VHF_LEAD_S = 15e-6
#: ... and at least this long (the onset is read where the field clears the noise, up to
#: a few smoothing windows after the current starts), s ...
VHF_MIN_LEAD_S = 1e-6
#: ... and closes this long after the field peak, s.
VHF_TRAIL_S = 2e-6
#: Longest window, s.
VHF_MAX_WINDOW_S = 80e-6
#: Stretch of envelope before the window whose median is the noise floor, s.
VHF_NOISE_S = 20e-6
#: Span of the VHF record read around the trigger (field physical time), s.
VHF_SPAN_S = (-60e-6, 100e-6)
VHF_DB_CAP = 200.0
#: SNR below which the width is not reported, dB (10 % of the peak under the floor).
MIN_SNR_WIDTH_DB = 10.0
#: Field SNR (``snr_db``) below which ``vhf_field_ratio_db`` is NaN, dB: a field peak
#: ``a`` noise sigmas high is known within 20 log10(1 +- 2 / a) dB (2 sigma), within
#: +2 dB (the ratio's stated precision, its tolerance in :mod:`features.schema`) from
#: a >= 7.7, 17.7 dB. Measured (stress 0-4 + reference, 400 pulses): wrong ratios at a
#: field SNR under 20 dB 14.6 -> 6.1 % of claims, none lost at >= 20 dB.
MIN_RATIO_FIELD_SNR_DB = 18.0
#: SNR below which the burst's time is not resolved, dB: the smoothed noise envelope of
#: a band of B over VHF_SMOOTH_S averages N = B x 0.5 us looks (16 for 33 MHz) and its
#: largest cell in a window of a few us reaches ~1 + 3/sqrt(N) of its mean, 1-3 dB
#: (gamma-distributed speckle, Goodman, Speckle Phenomena in Optics, 2007, ch. 3, from
#: memory): a peak less than twice the floor may be that noise, not the pulse's burst.
MIN_SNR_TIME_DB = 3.0
#: The peak time is the centroid of the envelope above this fraction of the way from the
#: noise floor to the peak (half: the centre of the width at half maximum when the top
#: is symmetric) ...
TOP_LEVEL = 0.5
#: ... within the stretch around the peak above this fraction (a quarter: below the dips
#: of 16-look speckle, +-25 %, inside a burst's top).
EDGE_LEVEL = 0.25
#: The burst's top (above ``TOP_LEVEL``) is smoothed again over this fraction of its
#: duration before its centroid is taken.
TOP_SMOOTH_FRACTION = 0.25
#: Largest standard error of a burst's time that is still reported, s
#: (:func:`_burst_centre`): 0.15 us, so that the time is known within +-0.3 us (2 sigma),
#: finer than the 0.5 us envelope itself resolves. Measured on the stress stations
#: (members 0-4 + reference, 400 pulses each, field SNR >= 20 dB): lag within
#: tolerance 91.6 -> 95.5 % of claims, NaN 11 -> 22 % (mostly energetic in-cloud pulses,
#: whose microseconds-broad tops wander by 0.2-1 us); 0.1 us: 96.7 % / 30 %, 0.2 us:
#: 94.6 % / 18 %.
MAX_TIME_SE_S = 0.15e-6
#: Rows of voltage records turned into power at once (bounds the memory of the FFT).
_HILBERT_ROWS = 64


def vhf_power(vhf, kind):
    """Linear VHF power of a batch of rows.

    Parameters
    ----------
    vhf : ndarray, shape (n_pulses, n_samples)
        Antenna voltage (``kind="voltage"``) or power envelope (``kind="power"``),
        NaN where missing.
    kind : {"voltage", "power"}

    Returns
    -------
    ndarray, shape (n_pulses, n_samples)
        Power in the catalog's units squared (voltage) or as given (power);
        missing samples are 0. Negative power samples (noise) are clipped to 0.
    """
    v = np.asarray(vhf, dtype=np.float64)
    if kind == "power":
        out = np.maximum(v, 0.0)           # what np.clip(v, 0.0, None) computes
        missing = np.isnan(v)
        if missing.any():
            out[missing] = 0.0
        return out
    if kind != "voltage":
        raise ValueError(f"kind must be 'voltage' or 'power', got {kind!r}")
    # imported here: scipy.signal is slow to import, and power records never need it
    from scipy import signal

    out = np.empty_like(v)
    if v.shape[1] == 0:
        return out
    nfft = sp_fft.next_fast_len(v.shape[1], real=True)
    for a in range(0, v.shape[0], _HILBERT_ROWS):
        b = min(a + _HILBERT_ROWS, v.shape[0])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            block = v[a:b] - np.nanmean(v[a:b], axis=1, keepdims=True)
        block = np.nan_to_num(block, nan=0.0)
        z = signal.hilbert(block, N=nfft, axis=1)[:, : v.shape[1]]
        out[a:b] = z.real ** 2 + z.imag ** 2
    return out


def vhf_envelope(power, sample_rate_hz, *, bin_s=VHF_BIN_S, smooth_s=VHF_SMOOTH_S):
    """Bin and smooth a linear power envelope.

    Parameters
    ----------
    power : ndarray, shape (n, m)
        Linear power (:func:`vhf_power`).
    sample_rate_hz : float
    bin_s, smooth_s : float
        Bin length and moving-average length, s.

    Returns
    -------
    envelope : ndarray, shape (n, m // k)
        Mean power per bin, then averaged over ``smooth_s`` (centred).
    samples_per_bin : int
        k, samples of the input per bin.
    """
    fs = float(sample_rate_hz)
    k = max(int(round(bin_s * fs)), 1)
    nb = power.shape[1] // k
    binned = _bin_means(power, k, nb)
    w = max(int(round(smooth_s * fs / k)), 1)
    if 1 < w <= nb:
        binned = moving_average_rows(binned, np.full(binned.shape[0], w))
    elif w > nb > 0:         # a window longer than the record (moving_average_rows
        # would shorten it to the record's length)
        c = np.zeros((binned.shape[0], nb + 1))
        np.cumsum(binned, axis=1, out=c[:, 1:])
        lo = np.clip(np.arange(nb) - (w - 1) // 2, 0, nb)
        hi = np.clip(np.arange(nb) + w - (w - 1) // 2, 0, nb)
        binned = (c[:, hi] - c[:, lo]) / (hi - lo)
    return binned, k


def _bin_means(power, k, nb):
    """Means of ``nb`` consecutive bins of ``k`` samples of each row.

    What ``reshape(n, nb, k).mean(axis=2)`` gives, bit for bit: NumPy sums fewer than 8
    values in order from 0 (its pairwise summation starts only at 8), so for the usual
    few samples per bin the same sums are formed column by column, without a reduction
    over a short axis (about 20 times slower). From 8 samples on, that mean itself.
    """
    if k >= 8 or nb == 0:
        return power[:, : nb * k].reshape(power.shape[0], nb, k).mean(axis=2)
    acc = 0.0 + power[:, 0: nb * k: k]
    for i in range(1, k):
        acc += power[:, i: nb * k: k]
    acc /= k
    return acc


def _stretch(env, jp, edge):
    """Bins of each row's burst: between the crossings of ``edge`` nearest to ``jp``
    (the record's ends where it has none), as a boolean mask of shape ``env.shape``."""
    nb = env.shape[1]
    a = crossing_before(env, jp, edge)
    b = crossing_after(env, jp, edge)
    cols = np.arange(nb)[None, :]
    return ((cols > np.where(np.isfinite(a), a, -1.0)[:, None])
            & (cols < np.where(np.isfinite(b), b, nb)[:, None]))


def _burst_centre(env, inwin, jp, peak, noise, spread, w_bins):
    """Time (fractional bin), peak and standard error of each row's burst: the centroid of
    its top half.

    Parameters
    ----------
    env : ndarray, shape (n, nb)
        Smoothed envelope (:func:`vhf_envelope`).
    inwin : ndarray of bool, shape (n, nb)
        Bins of each row's search window.
    jp : ndarray of int, shape (n,)
        Bin of each row's largest envelope value in the window.
    peak, noise : ndarray, shape (n,)
        That peak and the noise floor, the envelope's units.
    spread : ndarray, shape (n,)
        Relative standard deviation of one value of ``env`` (:func:`_noise_floor`; NaN:
        unknown).
    w_bins : int
        Bins of the envelope's moving average (values closer than this are correlated).

    Returns
    -------
    centre : ndarray, shape (n,)
        Fractional bin index; NaN where the top holds no excess.
    peak : ndarray, shape (n,)
        The largest value of the burst-smoothed envelope in the window.
    env2 : ndarray, shape (n, nb)
        The burst-smoothed envelope.
    jp2 : ndarray of int, shape (n,)
        Bin of its largest value in the window.
    se : ndarray, shape (n,)
        Standard error of ``centre`` from the envelope's fluctuation, bins (NaN where
        ``spread`` is unknown).

    Notes
    -----
    The envelope is smoothed again over :data:`TOP_SMOOTH_FRACTION` of the time the burst
    (its stretch around the peak above :data:`EDGE_LEVEL` of the way from the floor to
    the peak, inside the window) spends above :data:`TOP_LEVEL` of the way (at least one
    bin): a broad burst's speckle is then averaged over proportionally more looks. The
    burst's top is the stretch of that envelope around its new peak above
    :data:`TOP_LEVEL` of the way to it, inside the window; the centroid of the excess
    over that level there is the burst's time: the middle of the flat top of a
    box-smoothed short burst, the maximum of a symmetric one. A shoulder below half the
    peak (the plateau a recoil's or narrow bipolar event's VHF keeps while its front
    moves) or another burst beyond a dip under half the peak is not part of the top,
    nor is anything outside the window.

    The standard error propagates the fluctuation of the envelope (relative standard
    deviation ``spread`` per value, correlated over ``w_bins`` bins) through the
    centroid: ``c = sum(j e_j) / E`` with ``e_j = env2_j - L`` and ``E = sum(e_j)`` over
    the top, ``var(c) = spread^2 (w_bins sum((j - c)^2 env2_j^2) + (TOP_LEVEL d_peak
    sum(j - c))^2) / E^2``, the second term from the level ``L`` following the peak's own
    fluctuation ``d_peak`` (first-order error propagation, e.g. Taylor, An Introduction
    to Error Analysis, 1997, ch. 3; the speckle of a detected band-limited signal has a
    relative standard deviation 1/sqrt(looks) per smoothing window, Goodman, Speckle
    Phenomena in Optics, 2007, ch. 3, from memory).
    """
    n, nb = env.shape
    r = np.arange(n)
    rise = np.maximum(peak - noise, 0.0)
    inside = _stretch(env, jp, noise + EDGE_LEVEL * rise) & inwin
    top = np.count_nonzero(inside & (env >= (noise + TOP_LEVEL * rise)[:, None]), axis=1)
    half = np.round(0.5 * TOP_SMOOTH_FRACTION * top).astype(np.intp)
    env2 = moving_average_rows(env, 2 * half + 1)   # odd: centred on its bin
    jp2 = np.where(inwin, env2, -np.inf).argmax(axis=1)
    peak2 = env2[r, jp2]
    rise2 = np.maximum(peak2 - noise, 0.0)
    level = noise + TOP_LEVEL * rise2
    excess = np.where(_stretch(env2, jp2, level) & inwin,
                      np.maximum(env2 - level[:, None], 0.0), 0.0)
    total = excess.sum(axis=1)
    cols = np.arange(nb)[None, :]
    with np.errstate(divide="ignore", invalid="ignore"):
        c = (excess * cols).sum(axis=1) / total
        dj = np.where(excess > 0, cols - c[:, None], 0.0)
        # env2 averages 2 half + 1 bins: its values fluctuate less than env's when that
        # is longer than env's own moving average
        d_peak = peak2 * np.sqrt(np.minimum(w_bins / (2 * half + 1), 1.0))
        var = (w_bins * (dj ** 2 * env2 ** 2).sum(axis=1)
               + (TOP_LEVEL * d_peak * dj.sum(axis=1)) ** 2) / total ** 2
    ok = total > 0
    return (np.where(ok, c, np.nan), peak2, env2, jp2,
            np.where(ok, spread * np.sqrt(var), np.nan))


def _noise_floor(env, inwin, n_bins):
    """Median of the ``n_bins`` bins before each row's window (after it if too few), and
    their relative spread (interquartile range / 1.349 over the median; NaN with fewer
    than 8 bins or a zero floor)."""
    n, nb = env.shape
    n_bins = int(np.clip(n_bins, 8, nb))
    first = np.where(inwin.any(axis=1), inwin.argmax(axis=1), nb)
    last = np.where(inwin.any(axis=1), nb - 1 - inwin[:, ::-1].argmax(axis=1), -1)
    before = first >= 8
    start = np.where(before, np.maximum(first - n_bins, 0), np.minimum(last + 1, nb - 1))
    stop = np.where(before, first, np.minimum(last + 1 + n_bins, nb))
    width = int(max((stop - start).max(initial=0), 1))
    cols = start[:, None] + np.arange(width)[None, :]
    block = np.take_along_axis(env, np.clip(cols, 0, nb - 1), axis=1)
    block = np.where(cols < stop[:, None], block, np.nan)
    out = nanmedian_rows(block)
    bad = ~np.isfinite(out)
    if bad.any():
        out[bad] = median_rows(env[bad])
    # the interquartile range of the same bins over 1.349 (a normal's), robust to a
    # burst among them; NaN sorts last
    srt = np.sort(block, axis=1)
    cnt = np.count_nonzero(np.isfinite(block), axis=1)
    q = np.clip(np.round(np.outer(cnt - 1, (0.25, 0.75))).astype(np.intp), 0, width - 1)
    q1, q3 = srt[np.arange(n), q[:, 0]], srt[np.arange(n), q[:, 1]]
    with np.errstate(divide="ignore", invalid="ignore"):
        spread = (q3 - q1) / (1.349 * out)
    spread = np.where((cnt >= 8) & np.isfinite(spread), spread, np.nan)
    return out, spread


def vhf_features(vhf, sample_rate_hz, kind, window_s, *, pretrigger_s=0.0, delay_s=0.0,
                 full_scale=None):
    """Compute the VHF features of a batch of pulses.

    Parameters
    ----------
    vhf : ndarray, shape (n_pulses, n_samples)
        VHF record as stored (voltage or power), NaN where missing.
    sample_rate_hz : float
        Samples per second of the VHF channel.
    kind : {"voltage", "power"}
    window_s : (ndarray, ndarray), each shape (n_pulses,)
        Start and end of each pulse's search window, physical time relative to the
        trigger, s (NaN: the whole record).
    pretrigger_s, delay_s : float
        The VHF channel's pre-trigger length (of ``vhf``'s first column) and delay, s.
    full_scale : float, optional
        The channel's clip level in file units.

    Returns
    -------
    dict of str -> ndarray, shape (n_pulses,)
        ``vhf_peak_db`` (10 log10 of the smoothed peak power, catalog units),
        ``vhf_peak_time_s`` (physical time of the burst, the centroid of its top half,
        s; NaN below 3 dB SNR or a standard error over :data:`MAX_TIME_SE_S`, a clipped
        window's from its clipped stretch), ``vhf_snr_db`` (peak over the noise floor,
        dB), ``vhf_width_s`` (s; NaN where its standard error exceeds 5 %,
        :mod:`features._vhf_width`), ``vhf_censored`` (bool),
        ``vhf_ok`` (bool: the row has VHF samples).
    """
    v = np.asarray(vhf, dtype=np.float64)
    n, m = v.shape
    fs = float(sample_rate_hz)
    nan = np.full(n, np.nan)
    out = {"vhf_peak_db": nan.copy(), "vhf_peak_time_s": nan.copy(),
           "vhf_snr_db": nan.copy(), "vhf_width_s": nan.copy(),
           "vhf_censored": np.zeros(n, dtype=bool), "vhf_ok": np.zeros(n, dtype=bool)}
    if m == 0:
        return out
    vhf_ok = np.count_nonzero(np.isnan(v), axis=1) / m < 0.5
    env, k = vhf_envelope(vhf_power(v, kind), fs)
    nb = env.shape[1]
    if nb < 3:
        out["vhf_ok"] = vhf_ok
        return out
    t_bin = ((np.arange(nb) + 0.5) * k) / fs - pretrigger_s - delay_s   # physical, s
    lo_s, hi_s = (np.asarray(w, dtype=np.float64) for w in window_s)
    lo_s = np.where(np.isfinite(lo_s), lo_s, -np.inf)
    hi_s = np.where(np.isfinite(hi_s), hi_s, np.inf)
    inwin = (t_bin[None, :] >= lo_s[:, None]) & (t_bin[None, :] <= hi_s[:, None])
    has_win = inwin.any(axis=1)
    noise, spread = _noise_floor(env, inwin, int(round(VHF_NOISE_S * fs / k)))
    jp = np.where(inwin, env, -np.inf).argmax(axis=1)
    frac, peak = parabolic_peak(env, jp)
    peak = np.maximum(peak, 0.0)
    censored = np.zeros(n, dtype=bool)
    clip_span_s = np.zeros(n)
    if full_scale is not None:
        t_raw = np.arange(m) / fs - pretrigger_s - delay_s
        raw_in = (t_raw[None, :] >= lo_s[:, None]) & (t_raw[None, :] <= hi_s[:, None])
        with np.errstate(invalid="ignore"):
            clip = (np.abs(v) >= float(full_scale) * (1 - 1e-6)) & raw_in
        censored = clip.any(axis=1)
        # from the first to the last clipped sample of the window (each one sample long)
        clip_span_s = np.where(censored, (m - clip[:, ::-1].argmax(axis=1)
                                          - clip.argmax(axis=1)) / fs, 0.0)
    w_bins = max(int(round(VHF_SMOOTH_S * fs / k)), 1)
    centre, peak2, env2, jp2, se = _burst_centre(env, inwin, jp, peak, noise, spread,
                                                 w_bins)
    # a clipped top is flat over the burst and whatever follows it at the clip level: its
    # centroid is not the burst's; the largest bin is kept there
    centre = np.where(np.isfinite(centre) & ~censored, centre, frac)
    peak = np.where(censored, peak, np.maximum(peak2, 0.0))
    with np.errstate(divide="ignore", invalid="ignore"):
        peak_db = 10 * np.log10(peak)
        snr_db = 10 * np.log10(peak / noise)
    peak_db = np.where(np.isfinite(peak_db), peak_db, np.nan)
    snr_db = np.where(np.isfinite(snr_db), np.clip(snr_db, -VHF_DB_CAP, VHF_DB_CAP),
                      np.where(peak > 0, VHF_DB_CAP, np.nan))
    # the width on the burst-smoothed envelope (its speckle averaged over a quarter of
    # its top, so that a dip of a broad burst's tail does not end it early), where it
    # falls through 10 % of the burst's own power over the floor, both crossings in the
    # record; NaN where its standard error (from that envelope's fluctuation, measured
    # in the same noise stretch) exceeds 5 % (:mod:`features._vhf_width`)
    _, spread2 = _noise_floor(env2, inwin, int(round(VHF_NOISE_S * fs / k)))
    width, width_se = burst_width(env2, jp2, np.maximum(peak2, 0.0), noise, spread2)
    # a clipped burst's 10 % level is that of a lower bound of its peak: no width
    width = np.where((snr_db >= MIN_SNR_WIDTH_DB) & ~censored
                     & width_resolved(width, width_se), width * k / fs, np.nan)
    t_peak = np.interp(centre, np.arange(nb), t_bin)
    # resolved: standard error within MAX_TIME_SE_S (unknown spread, e.g. a noise-free
    # record: resolved). A clipped burst's peak lies anywhere in the stretch of the
    # window from its first to its last clipped sample (its power is not known there):
    # uniform over it, the time's standard error is the stretch's length over sqrt(12)
    resolved = np.where(censored, clip_span_s / np.sqrt(12) <= MAX_TIME_SE_S,
                        ~(se * k / fs > MAX_TIME_SE_S))
    good = vhf_ok & has_win & (peak > 0)
    out.update({
        "vhf_peak_db": np.where(good, peak_db, np.nan),
        "vhf_peak_time_s": np.where(good & (snr_db >= MIN_SNR_TIME_DB) & resolved, t_peak,
                                    np.nan),
        "vhf_snr_db": np.where(good, snr_db, np.nan),
        "vhf_width_s": np.where(good, width, np.nan),
        "vhf_censored": censored & good,
        "vhf_ok": vhf_ok,
    })
    return out
