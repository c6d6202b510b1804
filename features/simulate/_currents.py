"""Source currents of the channel models: Heidler and double-exponential.

The current ``i0(t)`` where a TL/MTLE front starts (:mod:`features.simulate.dipole`
propagates it along the channel). Both are zero before t = 0, rise and fall; the sign of
the peak is the current direction (positive = upward-directed).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from numpy.polynomial.legendre import leggauss

__all__ = ["DoubleExponentialCurrent", "HeidlerCurrent"]

_GL_X, _GL_W = leggauss(16)


def _heidler_peak_x(steepness, ratio):
    """Solve n/(x (1 + x^n)) = ratio for x = t_peak/rise_s (vectorised bisection)."""
    n = np.asarray(steepness, float)
    r = np.asarray(ratio, float)
    lo = np.full(np.broadcast(n, r).shape, -12.0)
    hi = np.full_like(lo, 12.0)
    for _ in range(48):  # on log x; the left side decreases monotonically
        mid = 0.5 * (lo + hi)
        x = np.exp(mid)
        big = n / (x * (1.0 + x ** n)) > r
        lo = np.where(big, mid, lo)
        hi = np.where(big, hi, mid)
    return np.exp(0.5 * (lo + hi))


@dataclass(frozen=True)
class HeidlerCurrent:
    """Heidler (1985) current ``i0(t) = I0 (t/t1)^n / (1 + (t/t1)^n) exp(-t/t2)``, t >= 0.

    Parameters may be arrays that broadcast against the times (e.g. shape ``(n, 1)``
    for a batch of pulses evaluated on times of shape ``(m,)``).

    Parameters
    ----------
    peak_a : float or ndarray
        Peak current in A (``I0`` is set so the maximum equals it); its sign is the
        current direction (positive = upward-directed).
    rise_s : float or ndarray
        Front time constant ``t1`` in seconds.
    decay_s : float or ndarray
        Decay time constant ``t2`` in seconds.
    steepness : float or ndarray, default=2
        Exponent ``n`` (>= 2 gives a smooth start, ``di/dt = 0`` at t = 0).

    References
    ----------
    Heidler, F. (1985); Rakov & Uman 2003, ch. 12 (from memory).
    """

    peak_a: float | np.ndarray
    rise_s: float | np.ndarray
    decay_s: float | np.ndarray
    steepness: float | np.ndarray = 2.0

    @cached_property
    def _amplitude(self):
        t1 = np.asarray(self.rise_s, float)
        t2 = np.asarray(self.decay_s, float)
        n = np.asarray(self.steepness, float)
        xp = _heidler_peak_x(n, t1 / t2)
        eta = xp ** n / (1 + xp ** n) * np.exp(-xp * t1 / t2)
        return np.asarray(self.peak_a, float) / eta, xp

    def _x_amp(self, time_s):
        t = np.maximum(np.asarray(time_s, float), 0.0)
        t1 = np.asarray(self.rise_s, float)
        t2 = np.asarray(self.decay_s, float)
        n = np.asarray(self.steepness, float)
        return t, t1, t2, n, self._amplitude[0]

    @property
    def peak_time_s(self) -> np.ndarray:
        """Time of the current peak, in seconds."""
        return self._amplitude[1] * np.asarray(self.rise_s, float)

    def current_a(self, time_s) -> np.ndarray:
        """Current in A at ``time_s`` (zero for t < 0)."""
        t, t1, t2, n, amp = self._x_amp(time_s)
        xn = (t / t1) ** n
        return np.where(np.asarray(time_s) > 0, amp * xn / (1 + xn) * np.exp(-t / t2), 0.0)

    def derivative_a_per_s(self, time_s) -> np.ndarray:
        """Time derivative of the current in A/s."""
        t, t1, t2, n, amp = self._x_amp(time_s)
        x = t / t1
        xn = x ** n
        with np.errstate(divide="ignore", invalid="ignore"):
            dfrac = np.where(t > 0, n * x ** (n - 1) / (t1 * (1 + xn) ** 2), 0.0)
        val = amp * np.exp(-t / t2) * (dfrac - xn / (1 + xn) / t2)
        return np.where(np.asarray(time_s) > 0, val, 0.0)

    def current_and_derivative(self, time_s) -> tuple[np.ndarray, np.ndarray]:
        """Current in A and its derivative in A/s, computed together (faster)."""
        t, t1, t2, n, amp = self._x_amp(time_s)
        pos = np.asarray(time_s) > 0
        x = t / t1
        xn1 = x ** (n - 1)
        xn = xn1 * x
        inv = 1.0 / (1.0 + xn)
        g = amp * np.exp(-t / t2)
        frac = xn * inv
        cur = np.where(pos, g * frac, 0.0)
        der = np.where(pos, g * (n * xn1 * inv * inv / t1 - frac / t2), 0.0)
        return cur, der

    def charge_c(self, time_s) -> np.ndarray:
        """Charge ``integral_0^t i0 dt`` in C (composite 16-point Gauss-Legendre)."""
        t = np.maximum(np.asarray(time_s, float), 0.0)
        params = (self.peak_a, self.rise_s, self.decay_s, self.steepness)
        shape = np.broadcast_shapes(t.shape, *(np.shape(p) for p in params))
        flat = [np.broadcast_to(x, shape).ravel() for x in (t, *params)]
        out = np.empty(flat[0].size)
        step = 16384  # chunks keep the (times x panels x nodes) array small
        for a in range(0, out.size, step):
            tc, pk, t1, t2, n = (x[a:a + step] for x in flat)
            scale = np.minimum(t1, t2)
            ratio = max(float(np.max(tc / scale, initial=1.0)), 1.0)
            k = np.arange(-1, int(np.ceil(np.log2(ratio))) + 2)
            edges = np.minimum(tc[:, None], scale[:, None] * 2.0 ** k)
            lo = np.concatenate([np.zeros((tc.size, 1)), edges[:, :-1]], axis=1)
            half = 0.5 * (edges - lo)
            nodes = (lo + half)[..., None] + half[..., None] * _GL_X
            sub = HeidlerCurrent(*(x[:, None, None] for x in (pk, t1, t2, n)))
            out[a:a + step] = np.sum(sub.current_a(nodes) * _GL_W * half[..., None],
                                     axis=(1, 2))
        return out.reshape(shape)


@dataclass(frozen=True)
class DoubleExponentialCurrent:
    """Double exponential ``i0(t) = I0 (exp(-t/t2) - exp(-t/t1))`` for t >= 0, t1 < t2.

    ``di/dt`` jumps at t = 0; use :class:`HeidlerCurrent` for a smooth start.

    Parameters
    ----------
    peak_a : float or ndarray
        Peak current in A (sign = direction, positive upward-directed).
    rise_s : float or ndarray
        Front time constant ``t1`` in seconds.
    decay_s : float or ndarray
        Tail time constant ``t2`` in seconds (> ``rise_s``).

    References
    ----------
    Bruce & Golde (1941); Rakov & Uman 2003, ch. 12 (from memory).
    """

    peak_a: float | np.ndarray
    rise_s: float | np.ndarray
    decay_s: float | np.ndarray

    @property
    def peak_time_s(self) -> np.ndarray:
        """Time of the current peak, in seconds."""
        t1 = np.asarray(self.rise_s, float)
        t2 = np.asarray(self.decay_s, float)
        return np.log(t2 / t1) * t1 * t2 / (t2 - t1)

    def _amp(self):
        t1 = np.asarray(self.rise_s, float)
        t2 = np.asarray(self.decay_s, float)
        tp = self.peak_time_s
        return np.asarray(self.peak_a, float) / (np.exp(-tp / t2) - np.exp(-tp / t1)), t1, t2

    def current_a(self, time_s) -> np.ndarray:
        """Current in A (zero for t < 0)."""
        amp, t1, t2 = self._amp()
        t = np.maximum(np.asarray(time_s, float), 0.0)
        return amp * (np.exp(-t / t2) - np.exp(-t / t1))

    def derivative_a_per_s(self, time_s) -> np.ndarray:
        """Time derivative of the current in A/s (zero for t <= 0)."""
        amp, t1, t2 = self._amp()
        t = np.maximum(np.asarray(time_s, float), 0.0)
        val = amp * (np.exp(-t / t1) / t1 - np.exp(-t / t2) / t2)
        return np.where(np.asarray(time_s) > 0, val, 0.0)

    def charge_c(self, time_s) -> np.ndarray:
        """Charge ``integral_0^t i0 dt`` in C (closed form)."""
        amp, t1, t2 = self._amp()
        t = np.maximum(np.asarray(time_s, float), 0.0)
        return amp * (t2 * (1 - np.exp(-t / t2)) - t1 * (1 - np.exp(-t / t1)))
