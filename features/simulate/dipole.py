"""Vertical electric field at the ground from a vertical lightning channel.

The standard "dipole technique" for a straight vertical channel above a perfectly
conducting flat ground (the image channel included), observed at ground level at a
horizontal distance ``D``. A channel element ``dz'`` at height ``z'`` carrying the
current ``i(z', t)`` gives, at the observer time ``t`` (Uman, McLain & Krider 1975;
Rakov & Uman 2003, ch. 4; from memory)::

    dE_z = dz'/(2 pi eps0) * [ (2 z'^2 - D^2)/R^5 * q(z', t - R/c)          electrostatic
                             + (2 z'^2 - D^2)/(c R^4) * i(z', t - R/c)      induction
                             - D^2/(c^2 R^3) * di/dt(z', t - R/c) ]          radiation

with ``R = sqrt(z'^2 + D^2)`` and ``q(z', t) = integral_0^t i(z', tau) dtau`` the charge
that has passed through the element. Sign convention (physics): ``E_z > 0`` means the
field vector at the ground points up; a current is positive when it is directed upward
(positive charge moving up). In the far field of a short channel the radiation term is
``E_rad = -(1/(2 pi eps0 c^2 D)) dM/dt`` with ``M = integral i dz'`` (A m), and for the
transmission-line model ``E_rad = -v i / (2 pi eps0 c^2 D)`` (Uman & McLain 1969).

Current distributions along the channel (engineering models; Rakov & Uman 2003, ch. 12;
from memory), with ``s = |z' - z_start|`` the distance from the point where the front
starts and ``v`` the front speed (the front may move up or down)::

    TL   (Uman & McLain 1969):  i(z', t) = i0(t - s/v)
    MTLE (Nucci et al. 1988):   i(z', t) = exp(-s/lambda_m) i0(t - s/v)

zero ahead of the front and beyond the channel end (the wave is absorbed at the end).
``i0`` is the current where the front starts: :class:`HeidlerCurrent` (smooth start,
Heidler 1985) or :class:`DoubleExponentialCurrent` (Bruce & Golde 1941). Both rise and
fall, so a short channel radiates a bipolar field (``dM/dt`` changes sign).

Constants are CODATA values from :mod:`scipy.constants`.

Two evaluators share the element factors of :func:`element_field_factors`:
:func:`channel_field_terms` integrates directly over channel elements for one channel
(the reference), :func:`sampled_channel_field_terms` evaluates a batch of channels whose
source currents are sampled on a uniform grid, by convolving the current, its charge and
its derivative with the channel's delay kernel (fast, for simulation).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import scipy.constants
from numpy.polynomial.legendre import leggauss
from scipy import fft as sp_fft

from ._currents import DoubleExponentialCurrent, HeidlerCurrent

__all__ = [
    "EPSILON_0_F_PER_M",
    "SPEED_OF_LIGHT_M_PER_S",
    "DoubleExponentialCurrent",
    "FieldTerms",
    "HeidlerCurrent",
    "channel_current_a",
    "channel_field_terms",
    "current_moment_a_m",
    "element_field_factors",
    "point_charge_field_v_per_m",
    "sampled_channel_field_terms",
    "sampled_vertical_field_v_per_m",
    "tl_radiation_field_v_per_m",
    "vertical_field_v_per_m",
]

#: Vacuum permittivity, F/m (CODATA, via scipy.constants).
EPSILON_0_F_PER_M: float = scipy.constants.epsilon_0
#: Speed of light in vacuum, m/s (CODATA, via scipy.constants).
SPEED_OF_LIGHT_M_PER_S: float = scipy.constants.c

_K = 1.0 / (2.0 * np.pi * EPSILON_0_F_PER_M)  # field of a charge and its image, V m / C


class FieldTerms(NamedTuple):
    """The three terms of the vertical field at the ground, each in V/m."""

    electrostatic_v_per_m: np.ndarray
    induction_v_per_m: np.ndarray
    radiation_v_per_m: np.ndarray

    @property
    def total_v_per_m(self) -> np.ndarray:
        """Sum of the three terms, in V/m."""
        return self.electrostatic_v_per_m + self.induction_v_per_m + self.radiation_v_per_m


# ------------------------------------------------------------ closed-form fields
def element_field_factors(height_m, distance_m):
    """Field at the ground per unit element source, for each of the three terms.

    Parameters
    ----------
    height_m : float or ndarray
        Height ``z'`` of the element above the ground, in m.
    distance_m : float or ndarray
        Horizontal distance ``D`` from the element to the observer, in m.

    Returns
    -------
    electrostatic : ndarray
        V/m per C m of charge moment ``q dz'`` (``(2 z'^2 - D^2) / (2 pi eps0 R^5)``).
    induction : ndarray
        V/m per A m of current moment ``i dz'``.
    radiation : ndarray
        V/m per (A/s) m of ``di/dt dz'`` (``-D^2 / (2 pi eps0 c^2 R^3)``).
    distance_r_m : ndarray
        Slant distance ``R`` in m (for the retardation ``R/c``).

    References
    ----------
    Uman, McLain & Krider (1975); Rakov & Uman 2003, ch. 4 (from memory).
    """
    z = np.asarray(height_m, float)
    d = np.asarray(distance_m, float)
    r2 = z * z + d * d
    r = np.sqrt(r2)
    geo = (2 * z * z - d * d) * _K
    c = SPEED_OF_LIGHT_M_PER_S
    return geo / (r2 * r2 * r), geo / (c * r2 * r2), -_K * d * d / (c * c * r2 * r), r


def point_charge_field_v_per_m(charge_c, height_m, distance_m):
    """Vertical field at the ground of a point charge at a height, image included.

    ``E_z = -Q H / (2 pi eps0 (H^2 + D^2)^1.5)`` (physics convention: a positive charge
    overhead gives a downward field, E_z < 0). Electrostatics of a charge above a
    perfectly conducting plane (Rakov & Uman 2003, ch. 3-4; from memory).

    Parameters
    ----------
    charge_c : float or ndarray
        Charge in C.
    height_m, distance_m : float or ndarray
        Height above the ground and horizontal distance, in m.

    Returns
    -------
    ndarray
        Field in V/m.
    """
    h = np.asarray(height_m, float)
    d = np.asarray(distance_m, float)
    return -np.asarray(charge_c, float) * h * _K / (h * h + d * d) ** 1.5


def tl_radiation_field_v_per_m(current_a, speed_m_per_s, distance_m):
    """Far radiation field of the transmission-line model, ``-v i / (2 pi eps0 c^2 D)``.

    Parameters
    ----------
    current_a : float or ndarray
        Current at the front start (positive = upward-directed), in A.
    speed_m_per_s : float or ndarray
        Front speed in m/s.
    distance_m : float or ndarray
        Horizontal distance in m.

    Returns
    -------
    ndarray
        Radiation field in V/m (physics convention).

    References
    ----------
    Uman & McLain (1969); Rakov & Uman 2003, ch. 12 (from memory).
    """
    c = SPEED_OF_LIGHT_M_PER_S
    return (-np.asarray(speed_m_per_s, float) * np.asarray(current_a, float) * _K
            / (c * c * np.asarray(distance_m, float)))


# --------------------------------------------------------- channel distributions
def _channel_geometry(z_start_m, z_end_m, n_segments):
    length = abs(float(z_end_m) - float(z_start_m))
    if length <= 0:
        raise ValueError(f"z_end_m must differ from z_start_m, got {z_start_m!r} twice")
    if min(z_start_m, z_end_m) < 0:
        raise ValueError(f"channel heights must be >= 0 m, got {z_start_m!r}, {z_end_m!r}")
    ds = length / n_segments
    s = (np.arange(n_segments) + 0.5) * ds
    z = float(z_start_m) + np.sign(z_end_m - z_start_m) * s
    return s, z, ds


def _attenuation(s, decay_length_m):
    if decay_length_m is None or np.isinf(decay_length_m):
        return np.ones_like(s)
    return np.exp(-s / float(decay_length_m))


def channel_current_a(time_s, height_m, current, z_start_m, z_end_m, speed_m_per_s,
                      decay_length_m=None):
    """Current ``i(z', t)`` in A of a TL (``decay_length_m=None``) or MTLE channel.

    Parameters
    ----------
    time_s : ndarray
        Source times in s (t = 0 when the front leaves ``z_start_m``).
    height_m : ndarray
        Heights ``z'`` in m; broadcasts against ``time_s``.
    current : HeidlerCurrent or DoubleExponentialCurrent
        Current where the front starts.
    z_start_m, z_end_m : float
        Heights in m where the front starts and where the channel ends.
    speed_m_per_s : float
        Front speed in m/s.
    decay_length_m : float or None
        MTLE decay constant ``lambda_m`` in m; None for TL.

    Returns
    -------
    ndarray
        Current in A (zero outside the channel and ahead of the front).
    """
    z = np.asarray(height_m, float)
    s = np.abs(z - z_start_m)
    inside = (z >= min(z_start_m, z_end_m)) & (z <= max(z_start_m, z_end_m))
    i = current.current_a(np.asarray(time_s, float) - s / speed_m_per_s)
    return np.where(inside, i * _attenuation(s, decay_length_m), 0.0)


def current_moment_a_m(time_s, current, z_start_m, z_end_m, speed_m_per_s,
                       decay_length_m=None, n_segments=2000):
    """Current moment ``M(t) = integral i(z', t) dz'`` in A m (source time, midpoint rule).

    Parameters are those of :func:`channel_current_a`; ``n_segments`` channel elements.

    Returns
    -------
    ndarray
        Current moment in A m, shape of ``time_s``.
    """
    s, z, ds = _channel_geometry(z_start_m, z_end_m, n_segments)
    t = np.asarray(time_s, float)
    i = current.current_a(t[..., None] - s / speed_m_per_s) * _attenuation(s, decay_length_m)
    return np.sum(i, axis=-1) * ds


def _charge_function(current, tau_min_s, tau_max_s):
    """``current.charge_c``, tabulated finely and interpolated unless it is closed-form."""
    if isinstance(current, DoubleExponentialCurrent) or tau_max_s <= 0:
        return current.charge_c
    grid = np.linspace(max(tau_min_s, 0.0), tau_max_s, 200_001)
    x, w = leggauss(4)  # exact-enough increments per interval, then a running sum
    half = 0.5 * (grid[1] - grid[0])
    nodes = (grid[:-1] + half)[:, None] + half * x
    steps = (current.current_a(nodes) * w).sum(axis=1) * half
    table = float(current.charge_c(grid[0])) + np.concatenate([[0.0], np.cumsum(steps)])
    return lambda tau: np.interp(tau, grid, table, left=0.0)


def channel_field_terms(time_s, distance_m, current, z_start_m, z_end_m, speed_m_per_s,
                        decay_length_m=None, n_segments=1000) -> FieldTerms:
    """Vertical field at the ground of one TL/MTLE channel, by direct integration.

    Parameters
    ----------
    time_s : ndarray, shape (m,)
        Observer times in s (t = 0 when the front leaves ``z_start_m``; the first field
        arrives at ``sqrt(z_start^2 + D^2)/c``).
    distance_m : float
        Horizontal distance from the channel to the observer in m.
    current : HeidlerCurrent or DoubleExponentialCurrent
        Current where the front starts (scalar parameters).
    z_start_m, z_end_m : float
        Heights in m where the front starts and where the channel ends (``z_end_m >
        z_start_m`` for an upward front).
    speed_m_per_s : float
        Front speed in m/s (< c).
    decay_length_m : float or None, default=None
        MTLE decay constant in m; None gives the TL model.
    n_segments : int, default=1000
        Number of channel elements (midpoint rule).

    Returns
    -------
    FieldTerms
        Electrostatic, induction and radiation terms in V/m, each of shape (m,).

    References
    ----------
    Uman, McLain & Krider (1975); Rakov & Uman 2003, ch. 4 and 12 (from memory).
    """
    if not 0 < speed_m_per_s < SPEED_OF_LIGHT_M_PER_S:
        raise ValueError(f"speed_m_per_s must be in (0, c), got {speed_m_per_s!r}")
    s, z, ds = _channel_geometry(z_start_m, z_end_m, n_segments)
    f_es, f_ind, f_rad, r = element_field_factors(z, distance_m)
    att = _attenuation(s, decay_length_m) * ds
    t = np.atleast_1d(np.asarray(time_s, float))
    delay = r / SPEED_OF_LIGHT_M_PER_S + s / speed_m_per_s
    charge = _charge_function(current, float(t.min() - delay.max()), float(t.max()))
    out = [np.empty(t.shape) for _ in range(3)]
    step = max(1, 4_000_000 // len(s))
    for a in range(0, len(t), step):  # chunks of times keep memory flat
        tau = t[a:a + step, None] - delay
        out[0][a:a + step] = charge(tau) @ (f_es * att)
        out[1][a:a + step] = current.current_a(tau) @ (f_ind * att)
        out[2][a:a + step] = current.derivative_a_per_s(tau) @ (f_rad * att)
    return FieldTerms(*out)


def vertical_field_v_per_m(time_s, distance_m, current, z_start_m, z_end_m, speed_m_per_s,
                           decay_length_m=None, n_segments=1000) -> np.ndarray:
    """Total vertical field in V/m; see :func:`channel_field_terms` for the parameters."""
    return channel_field_terms(time_s, distance_m, current, z_start_m, z_end_m,
                               speed_m_per_s, decay_length_m, n_segments).total_v_per_m


# ------------------------------------------------------------ batch evaluator
def sampled_vertical_field_v_per_m(current_a, derivative_a_per_s, sample_rate_hz, distance_m,
                                   z_start_m, z_end_m, speed_m_per_s, decay_length_m=None,
                                   segments_per_sample=2.0) -> np.ndarray:
    """Total field of :func:`sampled_channel_field_terms` (one inverse FFT), in V/m.

    Same parameters; returns an ndarray of shape (n, m).
    """
    return _sampled(current_a, derivative_a_per_s, sample_rate_hz, distance_m, z_start_m,
                    z_end_m, speed_m_per_s, decay_length_m, segments_per_sample, True)


def sampled_channel_field_terms(current_a, derivative_a_per_s, sample_rate_hz, distance_m,
                                z_start_m, z_end_m, speed_m_per_s, decay_length_m=None,
                                segments_per_sample=2.0) -> FieldTerms:
    """Vertical field of a batch of TL/MTLE channels from sampled source currents.

    Each row's field is ``h_es * q + h_ind * i + h_rad * di/dt`` (``*`` a convolution),
    where the kernels ``h`` hold the element factors of :func:`element_field_factors`
    at each element's delay ``s/v + (R - R_start)/c``, deposited on the sample grid by
    linear interpolation. Elements are spaced at most ``1/segments_per_sample`` samples
    apart in delay, so the kernel is a smooth sampled version of the continuous one.

    Parameters
    ----------
    current_a : ndarray, shape (n, m)
        Source current where each front starts, in A, sampled at ``k / sample_rate_hz``
        for k = 0..m-1 (t = 0 when the front leaves ``z_start_m``; zero before).
    derivative_a_per_s : ndarray, shape (n, m) or None
        Its time derivative in A/s (None: ``numpy.gradient`` of ``current_a``).
    sample_rate_hz : float
        Sample rate of the current and of the output, in Hz.
    distance_m, z_start_m, z_end_m, speed_m_per_s : ndarray, shape (n,)
        Horizontal distance, start and end heights (m) and front speed (m/s) per row.
    decay_length_m : ndarray, shape (n,), or None
        MTLE decay constants in m (``inf`` or None: TL).
    segments_per_sample : float, default=2.0
        Elements per sample of delay.

    Returns
    -------
    FieldTerms
        Terms in V/m, shape (n, m); sample k is at the observer time
        ``R_start/c + k / sample_rate_hz`` with ``R_start`` the slant distance of the
        start point. Exact linear convolution (no wrap-around) over the m samples.
    """
    return FieldTerms(*_sampled(current_a, derivative_a_per_s, sample_rate_hz, distance_m,
                                z_start_m, z_end_m, speed_m_per_s, decay_length_m,
                                segments_per_sample, False))


def _sampled(current_a, derivative_a_per_s, sample_rate_hz, distance_m, z_start_m, z_end_m,
             speed_m_per_s, decay_length_m, segments_per_sample, total):
    i0 = np.atleast_2d(np.asarray(current_a, float))
    n, m = i0.shape
    fs = float(sample_rate_hz)
    di = (np.gradient(i0, 1.0 / fs, axis=1) if derivative_a_per_s is None
          else np.atleast_2d(np.asarray(derivative_a_per_s, float)))
    q = np.zeros_like(i0)
    q[:, 1:] = np.cumsum(0.5 * (i0[:, 1:] + i0[:, :-1]), axis=1) / fs

    d = np.broadcast_to(np.asarray(distance_m, float), (n,))
    z0 = np.broadcast_to(np.asarray(z_start_m, float), (n,))
    z1 = np.broadcast_to(np.asarray(z_end_m, float), (n,))
    v = np.broadcast_to(np.asarray(speed_m_per_s, float), (n,))
    lam = (np.full(n, np.inf) if decay_length_m is None
           else np.broadcast_to(np.asarray(decay_length_m, float), (n,)))
    length = np.abs(z1 - z0)
    c = SPEED_OF_LIGHT_M_PER_S
    n_seg = np.maximum(8, np.ceil(segments_per_sample * fs * length * (1 / v + 1 / c)))
    n_seg = n_seg.astype(np.int64)
    row = np.repeat(np.arange(n), n_seg)
    first = np.cumsum(n_seg) - n_seg
    k = np.arange(row.size) - first[row]
    ds = length[row] / n_seg[row]
    s = (k + 0.5) * ds
    z = z0[row] + np.sign(z1 - z0)[row] * s
    f_es, f_ind, f_rad, r = element_field_factors(z, d[row])
    r_start = np.sqrt(z0 * z0 + d * d)
    pos = (s / v[row] + (r - r_start[row]) / c) * fs
    w = np.exp(-s / lam[row]) * ds
    j = np.floor(pos).astype(np.int64)
    frac = pos - j
    n_k = int(j.max()) + 2
    flat0 = row * n_k + j
    kernels = []
    for factor in (f_es, f_ind, f_rad):
        h = np.bincount(flat0, factor * w * (1 - frac), minlength=n * n_k)
        h += np.bincount(flat0 + 1, factor * w * frac, minlength=n * n_k)
        kernels.append(h.reshape(n, n_k))
    n_fft = sp_fft.next_fast_len(m + n_k - 1, real=True)
    specs = [sp_fft.rfft(x, n_fft, axis=1, workers=-1) * sp_fft.rfft(h, n_fft, axis=1,
                                                                     workers=-1)
             for x, h in zip((q, i0, di), kernels, strict=True)]
    if total:
        return sp_fft.irfft(specs[0] + specs[1] + specs[2], n_fft, axis=1, workers=-1)[:, :m]
    return [sp_fft.irfft(x, n_fft, axis=1, workers=-1)[:, :m] for x in specs]
