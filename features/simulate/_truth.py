"""Truth quantities of the field channels: current moment, charge moment, altitude.

For a TL/MTLE channel of length ``L``, front speed ``v`` and decay length ``lambda``
(``inf`` for TL) carrying the source current ``i0`` (:mod:`.dipole`), the current moment
is ``M(t) = integral i dz = v integral_0^min(t, L/v) exp(-v tau / lambda) i0(t - tau)
dtau`` and the charge moment change ``integral M dt = Q lambda (1 - exp(-L/lambda))``
(``Q L`` for TL), with ``Q`` the total charge of ``i0``. The first is evaluated
numerically (composite Gauss-Legendre over the current's time, on a time grid refined
around the peak), the second in closed form.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial.legendre import leggauss

from ._currents import HeidlerCurrent

__all__ = ["charge_moment_change_c_m", "current_moment_peak_a_m"]

_X, _W = leggauss(16)
_CHUNK = 128  # pulses per batch (memory: chunk x times x panels x nodes)


def _moment(t, cur, length, speed, lam):
    """M(t) in A m at times ``t`` (shape (n, m)) for pulses with parameters (n,).

    ``M(t) = v integral_{max(0, t - L/v)}^{t} exp(-v (t - u) / lambda) i0(u) du``, on
    panels growing geometrically from the current's start (as ``charge_c`` does).
    """
    u_hi = t
    u_lo = np.maximum(t - (length / speed)[:, None], 0.0)
    scale = np.minimum(cur[1], cur[2])[:, None, None]
    k_max = int(np.ceil(np.log2(max(float(np.max(u_hi[..., None] / scale)), 1.0)))) + 1
    grow = scale * 2.0 ** np.arange(-1, k_max + 1)
    edges = np.concatenate([u_lo[..., None],
                            np.clip(grow, u_lo[..., None], u_hi[..., None]),
                            u_hi[..., None]], axis=-1)
    half = 0.5 * np.diff(edges, axis=-1)  # (n, m, panels)
    u = (edges[..., :-1] + half)[..., None] + half[..., None] * _X  # (n, m, P, 16)
    ex = (slice(None), None, None, None)
    w = np.exp(-speed[ex] * (t[..., None, None] - u) / lam[ex])
    i = HeidlerCurrent(*(x[ex] for x in cur)).current_a(u)
    return speed[:, None] * np.sum(w * i * _W * half[..., None], axis=(-2, -1))


def current_moment_peak_a_m(peak_a, rise_s, decay_s, length_m, speed_m_per_s,
                            decay_length_m):
    """Signed extreme of the current moment ``M(t)`` of each channel, in A m.

    Parameters
    ----------
    peak_a, rise_s, decay_s : ndarray, shape (n,)
        Heidler source current: signed peak in A (positive upward-directed), time
        constants in s.
    length_m, speed_m_per_s, decay_length_m : ndarray, shape (n,)
        Channel length (m), front speed (m/s), MTLE decay length (m; ``inf`` for TL).

    Returns
    -------
    ndarray, shape (n,)
        ``M`` at its largest magnitude, with its sign (that of the current).
    """
    args = [np.asarray(a, float).ravel() for a in (peak_a, rise_s, decay_s, length_m,
                                                   speed_m_per_s, decay_length_m)]
    out = np.empty(args[0].size)
    for a in range(0, out.size, _CHUNK):
        pk, t1, t2, length, v, lam = (x[a:a + _CHUNK] for x in args)
        cur = (pk, t1, t2)
        t_peak = HeidlerCurrent(1.0, t1, t2).peak_time_s
        span = t_peak + length / v + t1  # M peaks before the current's peak leaves
        lo, hi = np.zeros_like(span), span
        for n_grid in (32, 12, 12, 12):  # the peak bracketed, then the bracket refined
            t = lo[:, None] + (hi - lo)[:, None] * np.linspace(0.0, 1.0, n_grid)
            m = _moment(t, cur, length, v, lam)
            k = np.argmax(np.abs(m), axis=1)
            step = (hi - lo) / (n_grid - 1)
            best = m[np.arange(m.shape[0]), k]
            centre = lo + k * step
            lo, hi = np.maximum(centre - step, 0.0), centre + step
        out[a:a + _CHUNK] = best
    return out


def charge_moment_change_c_m(peak_a, rise_s, decay_s, length_m, decay_length_m):
    """Charge moment change ``integral M dt`` of each channel (whole pulse), in C m.

    ``Q lambda (1 - exp(-L / lambda))`` (``Q L`` for TL, ``lambda = inf``) with ``Q`` the
    total charge of the source current (signed).
    """
    cur = HeidlerCurrent(np.asarray(peak_a, float), np.asarray(rise_s, float),
                         np.asarray(decay_s, float))
    total_q = cur.charge_c(cur.peak_time_s + 40.0 * np.asarray(decay_s, float))
    length = np.asarray(length_m, float)
    lam = np.asarray(decay_length_m, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        eff = np.where(np.isinf(lam), length, -lam * np.expm1(-length / lam))
    return total_q * eff
