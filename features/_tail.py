"""The overshoot's tail copy: smoothing that bends the tail's 1 % fall less than its tolerance.

:func:`features.waveform.field_features` follows the tail of a bipolar pulse's overshoot
on a copy smoothed by a centred moving average of ``k_tail`` samples (enough to bring the
noise far below the 1 % level the tail falls through). A moving average also bends a
curved tail: over a decaying exponential exp(-t/tau) a centred window of L samples
multiplies the curve by sinh(x)/x, x = L / (2 tau) (the average of exp over the window),
so the smoothed tail falls through a level tau ln(sinh(x)/x) ~ L^2 / (24 tau) later than
the tail itself. :func:`bounded_tail_window` shortens the window until that delay, with
tau read off the smoothed tail at its crossing (level / slope, which smoothing leaves
unchanged for an exponential and overstates the delay for a straighter tail), is at most
:data:`TAIL_BIAS_SHARE` of the end's tolerance (10 % of the span + 1 sample).
"""

from __future__ import annotations

import numpy as np

from ._rowops import interp_rows

#: Share of the end's tolerance that the smoothing's delay may take (the rest is left
#: to the noise; common practice, no source).
TAIL_BIAS_SHARE = 0.25


def smoothing_delay(window, tau):
    """Delay of a level crossing of exp(-t/tau) after a centred moving average.

    Parameters
    ----------
    window : float or ndarray
        Window length L, in samples.
    tau : float or ndarray
        Decay time of the exponential, in samples.

    Returns
    -------
    float or ndarray
        tau ln(sinh(x) / x), x = L / (2 tau), in samples (0 for L <= 1 or tau = inf).
    """
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        x = np.asarray(window, float) / (2.0 * np.asarray(tau, float))
        # ln(sinh x / x) = x + ln(1 - exp(-2x)) - ln(2x); its series x^2/6 near 0
        big = x - np.log(2.0 * x) + np.log1p(-np.exp(-2.0 * x))
        out = np.asarray(tau, float) * np.where(x > 1e-3, big, x * x / 6.0)
    return np.where(np.isfinite(out), np.maximum(out, 0.0), 0.0)


def bounded_tail_window(nu_t, crossing, level, k_tail, k_min, tol):
    """The longest tail window whose smoothing delay fits :data:`TAIL_BIAS_SHARE` of ``tol``.

    Parameters
    ----------
    nu_t : ndarray, shape (n, m)
        The tail copy smoothed over ``k_tail`` (overshoot side up).
    crossing : ndarray, shape (n,)
        Its fall through ``level`` (fractional column, NaN: none).
    level : ndarray, shape (n,)
        The level fallen through.
    k_tail, k_min : ndarray, shape (n,)
        Present window and the shortest allowed (the pulse's own smoothing), samples.
    tol : ndarray, shape (n,)
        Tolerance of the end, samples.

    Returns
    -------
    window : ndarray of intp, shape (n,)
        ``k_tail`` where its delay fits or the crossing is NaN, else the largest window
        L with tau ln(sinh(L / 2 tau) / (L / 2 tau)) <= share * tol (at least ``k_min``).
    tau : ndarray, shape (n,)
        The tail's decay time at the crossing, samples (inf: flat or none).
    """
    # (the slope over +-half the window: on a fast tail it reaches the steeper part, so
    # tau comes out short and the window with it; erring on the side of less delay)
    half = np.maximum(k_tail / 2.0, 1.0)
    c = np.nan_to_num(crossing)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = (interp_rows(nu_t, c - half) - interp_rows(nu_t, c + half)) / (2.0 * half)
        tau = np.where(slope > 0, level / slope, np.inf)
    budget = TAIL_BIAS_SHARE * tol
    # the delay grows with L: bisect on L between k_min and k_tail (vectorised, 12 steps)
    lo = np.minimum(k_min, k_tail).astype(float)
    hi = k_tail.astype(float)
    fits = smoothing_delay(hi, tau) <= budget
    for _ in range(12):
        mid = 0.5 * (lo + hi)
        ok = smoothing_delay(mid, tau) <= budget
        lo = np.where(ok, mid, lo)
        hi = np.where(ok, hi, mid)
    out = np.where(fits | ~np.isfinite(crossing), k_tail, np.floor(lo))
    return np.maximum(out, k_min).astype(np.intp), tau


def line_half_window(tau, tol):
    """Half-window of a line fit across a tail's crossing that bends it at most
    :data:`TAIL_BIAS_SHARE` of ``tol``: a least-squares line through exp(-t/tau) over
    +-h meets a level about h^2 / (6 tau) later than the curve (the window's mean,
    second order), so h = sqrt(6 share tol tau) (samples; at least 1)."""
    with np.errstate(invalid="ignore"):
        return np.maximum(np.sqrt(6.0 * TAIL_BIAS_SHARE * tol * tau), 1.0)
