"""Current and charge moments from the measured field of an elevated source.

The vertical field at the ground of a short vertical channel at height H, seen at a
horizontal distance D (slant range R = sqrt(D^2 + H^2)), over a perfectly conducting
ground (image included), is (Uman, McLain & Krider 1975; Rakov & Uman 2003, ch. 4; from
memory)::

    E(t) = 1/(2 pi eps0) * [ (2H^2 - D^2)/R^5 * Q(t)              electrostatic
                           + (2H^2 - D^2)/(c R^4) * M(t)          induction
                           - D^2/(c^2 R^3) * dM/dt ]              radiation

with M(t) the current moment (A m, positive for an upward-directed current) and
Q(t) = int M dt the charge moment change (C m), all at the retarded time. Far away
(D >> H) the radiation term is E = -(1/(2 pi eps0 c^2 D)) dM/dt; close to an elevated
source its geometry is D^2/R^3, not 1/D: an NBE at 12 km altitude seen from 10 km has a
radiation field 2.6 times weaker than the 1/D law says.

:func:`invert_moments` solves the equation above for M and Q by a fixed-point
(Neumann) iteration on the radiation term: M_{k+1} = int (E - a1 M_k - a0 Q_k) dt / a2,
Q_{k+1} = int M_{k+1} dt, from the pulse's onset. Each step is a vectorised cumulative
integral; the series converges when the induction and electrostatic terms are smaller
than the radiation term over the pulse, roughly c T < R for a pulse of duration T. Rows
where it does not converge within :data:`INVERSION_TOLERANCE` keep the radiation-only
estimate (with the D^2/R^3 geometry) and are flagged.

Constants are CODATA values from :mod:`scipy.constants`.
"""

from __future__ import annotations

import numpy as np
from scipy import constants

from ._rowops import cumtrapz_rows

__all__ = ["DEFAULT_ALTITUDE_M", "NEAR_FIELD_RATIO", "INVERSION_TOLERANCE",
           "geometry_factor_m", "radiation_factor_a_per_v", "invert_moments"]

#: Source height assumed when the mapped sources give none, m: the middle of in-cloud
#: source heights (5-15 km; Rakov & Uman 2003, ch. 9; from memory). Flagged.
DEFAULT_ALTITUDE_M = 8e3
#: A source closer than this many times its height is in the near field (flagged):
#: beyond it the radiation geometry D^2/R^3 differs from 1/D by under 6 % (computed).
NEAR_FIELD_RATIO = 5.0
#: Relative change of the charge moment between the last two iterations accepted.
INVERSION_TOLERANCE = 0.02
#: Iterations of the moment inversion.
INVERSION_ITERATIONS = 5

_K = 1.0 / (2.0 * np.pi * constants.epsilon_0)
_C = constants.c


def geometry_factor_m(range_m, altitude_m):
    """R^3 / D^2, the radiation field's effective distance, in metres.

    Equals D for a source at the ground; larger for an elevated one
    (the radiation field is -(1/(2 pi eps0 c^2)) (D^2/R^3) dM/dt).

    Parameters
    ----------
    range_m : float or ndarray
        Horizontal distance D, m.
    altitude_m : float or ndarray
        Source height H, m.

    Returns
    -------
    float or ndarray
        R^3 / D^2 in metres.

    Examples
    --------
    >>> round(float(geometry_factor_m(10e3, 12e3)) / 1e3, 1)   # km, vs 10 km at the ground
    38.1
    """
    d = np.asarray(range_m, dtype=np.float64)
    h = np.asarray(altitude_m, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        return (d * d + h * h) ** 1.5 / (d * d)


def radiation_factor_a_per_v(range_m, altitude_m):
    """2 pi eps0 c^2 R^3 / D^2: current-moment rate per unit radiation field, A m/(V/m s).

    Multiply a radiation field E (V/m) by it to get -dM/dt (A m / s).
    """
    return 2.0 * np.pi * constants.epsilon_0 * _C ** 2 * geometry_factor_m(range_m, altitude_m)


def invert_moments(e_v_per_m, sample_rate_hz, start, stop, range_m, altitude_m):
    """Current moment M(t) and charge moment Q(t) of each row from its field change.

    Parameters
    ----------
    e_v_per_m : ndarray, shape (n, w)
        Field change (baseline removed, decay-compensated, physics convention), V/m.
    sample_rate_hz : float
    start : ndarray of float, shape (n,)
        Fractional column of the pulse's onset (integration starts there; NaN: none).
    stop : ndarray of float, shape (n,)
        Column after which nothing is needed (the end of the pulse); only the columns
        between the batch's first start and last stop are integrated.
    range_m, altitude_m : ndarray, shape (n,)
        Horizontal distance D and source height H, m (NaN range: no moments).

    Returns
    -------
    c0 : int
        Column of ``e`` where the returned arrays start.
    m_a_m : ndarray, shape (n, w')
        Current moment, A m, on columns ``c0 .. c0 + w'`` (0 before the onset; NaN rows
        without range).
    q_c_m : ndarray, shape (n, w')
        Charge moment change since the onset, C m.
    converged : ndarray of bool, shape (n,)
        True where the three-term inversion converged; elsewhere the radiation-only
        estimate with the D^2/R^3 geometry is returned.
    """
    e = np.asarray(e_v_per_m, dtype=np.float64)
    n, w = e.shape
    start = np.asarray(start, dtype=np.float64)
    stop = np.asarray(stop, dtype=np.float64)
    ok = np.isfinite(start) & np.isfinite(stop)
    duration = np.clip(stop - start, 0, None) * (1.0 / float(sample_rate_hz))   # s
    c0 = int(np.clip(np.floor(np.min(start[ok], initial=w)), 0, w - 1)) if w else 0
    c1 = int(np.clip(np.ceil(np.max(stop[ok], initial=0)) + 2, c0 + 1, w))
    # one zero column before the span, so that every row's integral starts from a zero
    # sample just before its onset whatever the batch (results do not depend on chunks)
    e = np.concatenate([np.zeros((n, 1)), e[:, c0:c1]], axis=1)
    c0 -= 1
    start = start - c0
    w = e.shape[1]
    dt = 1.0 / float(sample_rate_hz)
    d = np.asarray(range_m, dtype=np.float64)
    h = np.asarray(altitude_m, dtype=np.float64)
    r2 = d * d + h * h
    r = np.sqrt(r2)
    with np.errstate(divide="ignore", invalid="ignore"):
        a0 = (_K * (2 * h * h - d * d) / r ** 5)[:, None]          # per C m
        a1 = (_K * (2 * h * h - d * d) / (_C * r ** 4))[:, None]   # per A m
        a2 = (-_K * d * d / (_C ** 2 * r ** 3))[:, None]           # per A m / s
    on = np.arange(w)[None, :] >= np.nan_to_num(start, nan=w)[:, None]
    src = np.where(on, e, 0.0)
    m = cumtrapz_rows(src, dt) / a2                  # radiation only
    q = cumtrapz_rows(m, dt)
    # the induction term is ~ c T / R of the radiation term for a pulse lasting T (and the
    # electrostatic one ~ its square): rows where that is under half the tolerance are
    # done with the radiation term alone
    with np.errstate(divide="ignore", invalid="ignore"):
        small = _C * duration / r < 0.5 * INVERSION_TOLERANCE
    converged = np.isfinite(d) & (d > 0) & small
    todo = np.flatnonzero(np.isfinite(d) & (d > 0) & ~small)
    # convergence is judged at each row's own end (never at the batch's)
    own_end = np.clip(np.nan_to_num(stop - c0, nan=0).astype(np.intp), 0, w - 1)
    q_prev = q[todo, own_end[todo]]
    mi, qi = m[todo], q[todo]
    for _ in range(INVERSION_ITERATIONS):
        if not todo.size:
            break
        rhs = np.where(on[todo], e[todo] - a1[todo] * mi - a0[todo] * qi, 0.0)
        mi = cumtrapz_rows(rhs, dt) / a2[todo]
        qi = cumtrapz_rows(mi, dt)
        q_end = qi[np.arange(todo.size), own_end[todo]]
        inside = np.arange(w)[None, :] <= own_end[todo][:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            change = np.abs(q_end - q_prev) / np.maximum(
                np.where(inside, np.abs(qi), 0.0).max(axis=1), 1e-300)
        m[todo], q[todo] = mi, qi
        done = np.isfinite(change) & (change <= INVERSION_TOLERANCE)
        converged[todo[done]] = True
        keep = ~done & np.isfinite(change)
        todo, mi, qi, q_prev = todo[keep], mi[keep], qi[keep], q_end[keep]
    # rows that never converged keep the radiation-only estimate
    if todo.size:
        m[todo] = (cumtrapz_rows(src[todo], dt) / a2[todo])
        q[todo] = cumtrapz_rows(m[todo], dt)
    bad = ~np.isfinite(d) | (d <= 0)
    m[bad] = np.nan
    q[bad] = np.nan
    return c0, m, q, converged
