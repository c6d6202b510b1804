"""Features of the VHF channel: power envelope, peak, lag to the field, duration.

The VHF record is either a band-limited antenna voltage (``kind="voltage"``,
power = |analytic signal|^2, the analytic signal from :func:`scipy.signal.hilbert`)
or an already detected linear power envelope (``kind="power"``). Power stays in
the catalog's own units (V^2, counts^2, ...): absolute VHF levels are not
comparable between stations, so the model uses the ratios (``vhf_snr_db``) and
times, and ``vhf_peak_db`` is reported for the analyst.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy import fft as sp_fft
from scipy import signal

from ._rowops import crossing_after, crossing_before, take_rows

__all__ = ["VHF_WINDOW_S", "VHF_SMOOTH_S", "vhf_power", "vhf_features"]

#: Half-width of the VHF search window around the field peak, seconds.
VHF_WINDOW_S = 30e-6
#: Moving-average length for the VHF duration, seconds (common practice, no source).
VHF_SMOOTH_S = 0.25e-6
#: Record before the trigger used for the VHF noise floor, seconds (at most).
VHF_NOISE_MAX_S = 60e-6
VHF_DB_CAP = 200.0


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
        return np.clip(np.nan_to_num(v, nan=0.0), 0.0, None)
    if kind != "voltage":
        raise ValueError(f"kind must be 'voltage' or 'power', got {kind!r}")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        v = v - np.nanmean(v, axis=1, keepdims=True)
    v = np.nan_to_num(v, nan=0.0)
    nfft = sp_fft.next_fast_len(v.shape[1], real=True)
    z = signal.hilbert(v, N=nfft, axis=1)[:, : v.shape[1]]
    return z.real ** 2 + z.imag ** 2


def _moving_average(p, n):
    if n <= 1:
        return p
    c = np.cumsum(p, axis=1)
    out = np.empty_like(p)
    out[:, :n] = c[:, :n] / np.arange(1, n + 1)
    out[:, n:] = (c[:, n:] - c[:, :-n]) / n
    return out


def vhf_features(vhf, sample_rate_hz, kind, field_peak_time_s, *, pretrigger_s=0.0,
                 delay_s=0.0, window_s=VHF_WINDOW_S, smooth_s=VHF_SMOOTH_S,
                 centre_span_s=None):
    """Compute the VHF features of a batch of pulses.

    Parameters
    ----------
    vhf : ndarray, shape (n_pulses, n_samples)
        VHF record as stored (voltage or power), NaN where missing.
    sample_rate_hz : float
        Samples per second of the VHF channel.
    kind : {"voltage", "power"}
    field_peak_time_s : ndarray, shape (n_pulses,)
        Physical time of the field's initial peak relative to the trigger, s
        (NaN: the VHF peak is searched over the whole record).
    pretrigger_s, delay_s : float
        The VHF channel's pre-trigger length and delay, seconds.
    window_s : float
        Half-width of the search window around the field peak, seconds.
    smooth_s : float
        Moving-average length used for the duration, seconds.
    centre_span_s : (float, float), optional
        The range the field peak times can take (physical, s); the power is then
        computed on a block fixed by it (widened only for a peak outside it).

    Returns
    -------
    dict of str -> ndarray, shape (n_pulses,)
        ``vhf_peak_db`` (10 log10 of the peak power, catalog units),
        ``vhf_peak_time_s`` (physical time of that peak, s),
        ``vhf_snr_db`` (peak over the mean pre-trigger power, dB),
        ``vhf_width_s`` (time the smoothed power stays above 10 % of its peak
        around the peak, s), ``vhf_ok`` (bool: the row has VHF samples).
    """
    v = np.asarray(vhf, dtype=np.float64)
    n, m = v.shape
    fs = float(sample_rate_hz)
    missing = np.isnan(v)
    vhf_ok = missing.mean(axis=1) < 0.5
    t_rec = np.arange(m) / fs - pretrigger_s
    t_phys = t_rec - delay_s

    # noise floor before the search window (mean power; for a voltage record the
    # mean of |analytic|^2 equals twice the mean square voltage)
    tp = np.asarray(field_peak_time_s, dtype=np.float64)
    centre = np.where(np.isfinite(tp), tp, 0.0)
    i_noise = int(np.clip(np.floor((pretrigger_s - window_s) * fs), 0, m))
    i_noise0 = max(0, i_noise - int(VHF_NOISE_MAX_S * fs))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        if i_noise - i_noise0 >= 16:
            seg = v[:, i_noise0:i_noise]
            if kind == "voltage":
                seg = seg - np.nanmean(seg, axis=1, keepdims=True)
                noise = 2.0 * np.nanmean(seg ** 2, axis=1)
            else:
                noise = np.nanmean(np.clip(seg, 0, None), axis=1)
        else:
            noise = np.full(n, np.nan)

    # power in a window that covers every row's search window (one FFT block)
    # one block for the whole batch; with ``centre_span_s`` its extent does not
    # depend on which pulses share the batch (so results do not depend on chunks)
    lo_c, hi_c = (np.nanmin(centre), np.nanmax(centre)) if centre_span_s is None else (
        min(centre_span_s[0], np.nanmin(centre)), max(centre_span_s[1], np.nanmax(centre)))
    lo_t = lo_c - window_s + delay_s
    hi_t = hi_c + window_s + delay_s
    j0 = int(np.clip(np.floor((lo_t + pretrigger_s) * fs) - 64, 0, m))
    j1 = int(np.clip(np.ceil((hi_t + pretrigger_s) * fs) + 64, j0 + 1, m))
    p = vhf_power(v[:, j0:j1], kind)
    tw = t_phys[j0:j1]
    inwin = np.abs(tw[None, :] - centre[:, None]) <= window_s
    pw = np.where(inwin, p, -np.inf)
    jp = pw.argmax(axis=1)
    peak = np.maximum(take_rows(p, jp), 0.0)
    with np.errstate(divide="ignore"):
        peak_db = 10 * np.log10(peak)
        snr_db = 10 * np.log10(peak / noise)
    peak_db = np.where(np.isfinite(peak_db), peak_db, np.nan)
    snr_db = np.where(np.isfinite(snr_db), np.clip(snr_db, -VHF_DB_CAP, VHF_DB_CAP),
                      np.where(peak > 0, VHF_DB_CAP, np.nan))

    ps = _moving_average(p, int(round(smooth_s * fs)))
    ps_in = np.where(inwin, ps, -np.inf)
    js = ps_in.argmax(axis=1)
    level = 0.1 * take_rows(ps, js)
    a = crossing_before(ps, js, level)
    b = crossing_after(ps, js, level)
    width = (np.where(np.isfinite(b), b, ps.shape[1] - 1.0)
             - np.where(np.isfinite(a), a, 0.0)) / fs

    good = vhf_ok & (peak > 0)
    out = {
        "vhf_peak_db": peak_db,
        "vhf_peak_time_s": tw[jp],
        "vhf_snr_db": snr_db,
        "vhf_width_s": width,
    }
    out = {k: np.where(good, val, np.nan) for k, val in out.items()}
    out["vhf_ok"] = vhf_ok
    return out
