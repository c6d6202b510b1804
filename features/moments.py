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
than the radiation term over the pulse, roughly c T < R for a pulse of duration T.

Close under the source (D < sqrt(2) H, where the electrostatic and induction terms are
positive and outweigh the radiation term over the pulse) that series diverges, and so
does every forward-in-time scheme: the equation, a2 Q'' + a1 Q' + a0 Q = E, then has a
growing homogeneous solution exp(s_+ t) with 1/s_+ a fraction of a microsecond. Those
rows are solved exactly with the stable two-sided inverse (a causal and an anti-causal
first-order part, :func:`_two_sided`), which reads the field up to 8/s_+ past the
pulse's end. Far rows where the series does not converge within
:data:`INVERSION_TOLERANCE` keep the radiation-only estimate (with the D^2/R^3
geometry) and are flagged.

Constants are CODATA values from :mod:`scipy.constants`.
"""

from __future__ import annotations

import numpy as np
from scipy import constants

from ._rowops import cumtrapz_rows

__all__ = ["DEFAULT_ALTITUDE_M", "NEAR_FIELD_RATIO", "INVERSION_TOLERANCE",
           "RADIATION_LEAD", "geometry_factor_m", "radiation_factor_a_per_v", "radiation_led",
           "invert_moments", "moments_at"]

#: Source height assumed when the mapped sources give none, m: the middle of in-cloud
#: source heights (5-15 km; Rakov & Uman 2003, ch. 9; from memory). Flagged.
DEFAULT_ALTITUDE_M = 8e3
#: A source closer than this many times its height is in the near field (flagged):
#: beyond it the radiation geometry D^2/R^3 differs from 1/D by under 6 % (computed).
NEAR_FIELD_RATIO = 5.0
#: Relative change of the charge moment between the last two iterations accepted.
INVERSION_TOLERANCE = 0.02
#: Factor by which the radiation term must outweigh the induction term (|a2| / (a1 T))
#: for the peak to scale by the radiation geometry: the induction term then changes the
#: peak by less than about 20 % (computed for the three-term field of a smooth pulse 9 km
#: up, 1.8-7 km away; the threshold itself is a choice, no source).
RADIATION_LEAD = 5.0
#: How far past a pulse's end the field is read under an elevated source, in units of the
#: anti-causal time 1/s_+ of :func:`_two_sided` (its weight falls to exp(-8) there).
AFTER_ROOT_TIMES = 8.0
#: ... and at most this many columns.
MAX_AFTER_COLUMNS = 4096
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


def radiation_led(range_m, altitude_m, rise_s):
    """True where the radiation term leads the induction term for a pulse rising in
    ``rise_s`` (T) by :data:`RADIATION_LEAD`: D^2 R > RADIATION_LEAD c T (2 H^2 - D^2);
    always beyond D = sqrt(2) H.

    Only there does the peak field scale to another distance by the radiation
    geometry R^3 / D^2; close under the source the peak is mostly the induction and
    electrostatic terms, which fall off otherwise.

    Examples
    --------
    >>> bool(radiation_led(7e3, 9e3, 0.5e-6)), bool(radiation_led(1.8e3, 9e3, 0.3e-6))
    (True, False)
    """
    d = np.asarray(range_m, dtype=np.float64)
    h = np.asarray(altitude_m, dtype=np.float64)
    r = np.sqrt(d * d + h * h)
    return d * d * r > RADIATION_LEAD * _C * np.asarray(rise_s, dtype=np.float64) * (
        2 * h * h - d * d)


def _coefficients(range_m, altitude_m):
    """a0 (per C m), a1 (per A m), a2 (per A m / s) of the three-term field, per row."""
    d = np.asarray(range_m, dtype=np.float64)
    h = np.asarray(altitude_m, dtype=np.float64)
    r = np.sqrt(d * d + h * h)
    with np.errstate(divide="ignore", invalid="ignore"):
        a0 = _K * (2 * h * h - d * d) / r ** 5
        a1 = _K * (2 * h * h - d * d) / (_C * r ** 4)
        a2 = -_K * d * d / (_C ** 2 * r ** 3)
    return a0, a1, a2, r


def _invert_block(src, on, dt, a0, a1, a2, iterate, own_end, reach):
    """The inversion of a block of row windows (each starting two zero columns early).

    ``src`` is the field where ``on`` (from the onset on), else 0; ``iterate`` marks the
    rows that need the three-term iteration; ``own_end`` is each row's last column (its
    convergence is judged there); ``reach`` the column before which rows under an
    elevated source read the field. Returns M, Q (same shape) and the converged rows.
    """
    a0, a1, a2 = a0[:, None], a1[:, None], a2[:, None]
    m = cumtrapz_rows(src, dt) / a2                  # radiation only
    q = cumtrapz_rows(m, dt)
    converged = ~iterate
    todo = np.flatnonzero(iterate)
    w = src.shape[1]
    q_prev = q[todo, own_end[todo]]
    mi, qi = m[todo], q[todo]
    for _ in range(INVERSION_ITERATIONS):
        if not todo.size:
            break
        rhs = np.where(on[todo], src[todo] - a1[todo] * mi - a0[todo] * qi, 0.0)
        mi = cumtrapz_rows(rhs, dt) / a2[todo]
        qi = cumtrapz_rows(mi, dt)
        q_end = qi[np.arange(todo.size), own_end[todo]]
        inside = np.arange(w)[None, :] <= own_end[todo][:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            change = np.abs(q_end - q_prev) / np.maximum(
                np.where(inside, np.abs(qi), 0.0).max(axis=1), 1e-300)
        done = np.isfinite(change) & (change <= INVERSION_TOLERANCE)
        converged[todo[done]] = True
        keep = ~done & np.isfinite(change)
        # rows leaving the iteration keep their last iterate (rows still iterating at
        # the end get the radiation-only estimate back, which m and q still hold)
        m[todo[~keep]], q[todo[~keep]] = mi[~keep], qi[~keep]
        todo, mi, qi, q_prev = todo[keep], mi[keep], qi[keep], q_end[keep]
    # rows close under an elevated source (D < sqrt(2) H), where the induction and
    # electrostatic terms outweigh the radiation term over the pulse, are solved exactly
    a0v, a1v = a0[:, 0], a1[:, 0]
    near = np.flatnonzero(~converged & (a1v > 0) & (a0v > 0))
    if near.size:
        # (the last column read is where the anti-causal part starts from 0: not read)
        read = np.arange(src.shape[1])[None, :] < reach[near, None] - 1
        m[near], q[near] = _two_sided(np.where(read, src[near], 0.0), dt, a0v[near],
                                      a1v[near], a2[near, 0])
        converged[near] = np.isfinite(q[near, :]).all(axis=1)
    # far rows that never converged keep the radiation-only estimate (never overwritten)
    return m, q, converged


def _roots(a0, a1, a2):
    """The two roots s_- < 0 < s_+ (1/s) of a2 s^2 + a1 s + a0 (a2 < 0 < a0, a1)."""
    disc = np.sqrt(a1 * a1 - 4.0 * a2 * a0)
    # the smaller root without cancellation: s_- s_+ = a0 / a2
    s_plus = (-a1 - disc) / (2.0 * a2)
    return a0 / (a2 * s_plus), s_plus


def _first_order(x, dt, s, backward):
    """Solutions of y' = s y + x (``s`` one per row) with x linear between samples (exact
    for such x).

    Causal from y = 0 at the first column (``backward=False``, s < 0), or anti-causal from
    y = 0 after the last (``backward=True``, s > 0: y(t) = -int_t^inf exp(s (t - u)) x du).
    One step per column, every row at once.
    """
    n, w = x.shape
    p = (-s if backward else s) * dt                         # <= 0: a decaying step
    e = np.exp(p)
    with np.errstate(divide="ignore", invalid="ignore"):
        small = np.abs(p) < 1e-4
        # int_0^h exp(s v) v/h dv and int_0^h exp(s v) (1 - v/h) dv, over h (series near 0)
        far_w = np.where(small, 0.5 + p / 3.0, ((p - 1.0) * e + 1.0) / (p * p))
        near_w = np.where(small, 0.5 + p / 6.0, (np.expm1(p) - p) / (p * p))
    # (for the backward pass the weights are those of the mirrored, decaying problem)
    y = np.zeros((n, w))
    if w < 2:
        return y
    cols = range(w - 2, -1, -1) if backward else range(1, w)
    step = -1 if backward else 1
    sign = -1.0 if backward else 1.0
    for j in cols:
        y[:, j] = e * y[:, j - step] + sign * dt * (far_w * x[:, j - step] + near_w * x[:, j])
    return y


def _two_sided(src, dt, a0, a1, a2):
    """Exact M and Q of ``a2 Q'' + a1 Q' + a0 Q = E`` for rows with a2 < 0 < a0, a1.

    Close under an elevated source the causal solution has a mode growing as
    exp(s_+ t), s_+ ~ a1 / |a2| = c (2 H^2 - D^2) / (D^2 R) (a fraction of a
    microsecond), so no forward scheme holds on noisy data. The stable inverse splits
    1 / (a2 (s - s_-)(s - s_+)) into a causal part (s_- ~ -c/R) and an anti-causal one
    (s_+): Q = (z - y) / (a2 (s_+ - s_-)) with y' = s_- y + E from the onset on and
    z' = s_+ z + E from the window's end back, and M = dQ/dt = (s_+ z - s_- y) /
    (a2 (s_+ - s_-)). The anti-causal part reaches about 1/s_+ into the field after a
    column (the record beyond the pulse must be in the window).
    """
    s_minus, s_plus = _roots(a0, a1, a2)
    y = _first_order(src, dt, s_minus, backward=False)
    z = _first_order(src, dt, s_plus, backward=True)
    sm, sp = s_minus[:, None], s_plus[:, None]
    scale = a2[:, None] * (sp - sm)
    return (sp * z - sm * y) / scale, (z - y) / scale


def _windows(e, rows, first, width, j_on):
    """``width`` columns of the given rows of ``e`` from column ``first`` on, 0 before
    the onset column ``j_on`` and beyond the record; and the onset mask."""
    w = e.shape[1]
    cols = first[:, None] + np.arange(width)[None, :]
    on = (cols >= j_on[:, None]) & (cols < w)
    src = np.where(on, e[rows[:, None], np.clip(cols, 0, max(w - 1, 0))], 0.0)
    return src, on


def _prepare(e, sample_rate_hz, start, stop, range_m, altitude_m):
    """Shared set-up: the rows to invert, their windows and which ones iterate."""
    e = np.asarray(e, dtype=np.float64)
    start = np.asarray(start, dtype=np.float64)
    stop = np.asarray(stop, dtype=np.float64)
    dt = 1.0 / float(sample_rate_hz)
    a0, a1, a2, r = _coefficients(range_m, altitude_m)
    d = np.asarray(range_m, dtype=np.float64)
    usable = np.isfinite(d) & (d > 0)
    ok = np.isfinite(start) & np.isfinite(stop)
    # the induction term is ~ c T / R of the radiation term for a pulse lasting T (and the
    # electrostatic one ~ its square): rows where that is under half the tolerance are
    # done with the radiation term alone
    duration = np.clip(stop - start, 0, None) * dt       # s
    with np.errstate(divide="ignore", invalid="ignore"):
        small = _C * duration / r < 0.5 * INVERSION_TOLERANCE
    # each row is integrated from the first column at or after its onset, in a window
    # that starts two (zero) columns earlier and ends one column after its stop
    j_on = np.ceil(np.where(ok, start, 0.0)).astype(np.intp)
    first = j_on - 2
    last = np.floor(np.where(ok, stop, 0.0)).astype(np.intp)
    # rows under an elevated source are solved with an anti-causal part (see _two_sided):
    # their windows reach AFTER_ROOT_TIMES / s_+ past the pulse's end
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        tail = np.where(usable & ok & ~small & (a0 > 0) & (a1 > 0),
                        AFTER_ROOT_TIMES / (_roots(a0, a1, a2)[1] * dt), 0.0)
    after = np.ceil(np.clip(np.nan_to_num(tail), 0, MAX_AFTER_COLUMNS)).astype(np.intp)
    return e, dt, (a0, a1, a2), usable, ok, small, j_on, first, last, after


def invert_moments(e_v_per_m, sample_rate_hz, start, stop, range_m, altitude_m):
    """Current moment M(t) and charge moment Q(t) of each row from its field change.

    Parameters
    ----------
    e_v_per_m : ndarray, shape (n, w)
        Field change (baseline removed, decay-compensated, physics convention), V/m.
    sample_rate_hz : float
    start : ndarray of float, shape (n,)
        Fractional column of the pulse's onset (integration starts at the first column
        at or after it; NaN: none).
    stop : ndarray of float, shape (n,)
        Column after which nothing is needed (the end of the pulse); only the columns
        between the batch's first start and last stop are returned.
    range_m, altitude_m : ndarray, shape (n,)
        Horizontal distance D and source height H, m (NaN range: no moments).

    Returns
    -------
    c0 : int
        Column of ``e`` where the returned arrays start.
    m_a_m : ndarray, shape (n, w')
        Current moment, A m, on columns ``c0 .. c0 + w'`` (0 before the onset and in rows
        without an onset; NaN rows without range).
    q_c_m : ndarray, shape (n, w')
        Charge moment change since the onset, C m.
    converged : ndarray of bool, shape (n,)
        True where the three-term inversion converged or was solved exactly (or had
        nothing to invert); elsewhere the radiation-only estimate with the D^2/R^3
        geometry is returned.

    See Also
    --------
    moments_at : the same values at one column per row, integrating each row only over
        its own pulse (what :func:`features.waveform.field_features` uses).
    """
    e, dt, (a0, a1, a2), usable, ok, small, j_on, first, last, after = _prepare(
        e_v_per_m, sample_rate_hz, start, stop, range_m, altitude_m)
    n, w = e.shape
    c0 = int(np.clip(np.min(j_on[ok], initial=w), 0, max(w - 1, 0))) - 1
    c1 = int(np.clip(np.max(last[ok], initial=0) + 2, c0 + 2, max(w, c0 + 2)))
    width = c1 - c0
    m = np.zeros((n, width))
    q = np.zeros((n, width))
    converged = usable.copy()
    rows = np.flatnonzero(ok & usable)
    if rows.size and width:
        span = max(c1, int((last + 2 + after)[rows].max())) - first[rows].min()
        src, on = _windows(e, rows, first[rows], span, j_on[rows])
        own_end = np.clip(last[rows] - first[rows], 0, span - 1)
        reach = last[rows] + 2 + after[rows] - first[rows]
        mw, qw, conv = _invert_block(src, on, dt, a0[rows], a1[rows], a2[rows],
                                     ~small[rows], own_end, reach)
        converged[rows] = conv
        # row i's window column t is batch column first_i + t - c0
        shift = first[rows] - c0
        t = np.arange(width)[None, :] - shift[:, None]
        inwin = (t >= 0) & (t < span)
        tt = np.clip(t, 0, span - 1)
        r = np.arange(rows.size)[:, None]
        m[rows] = np.where(inwin, mw[r, tt], 0.0)
        q[rows] = np.where(inwin, qw[r, tt], 0.0)
    m[~usable] = np.nan
    q[~usable] = np.nan
    return c0, m, q, converged


def moments_at(e_v_per_m, sample_rate_hz, start, stop, at, range_m, altitude_m, *,
               peak_rate=False, extreme=False):
    """The current moment at one column and the charge moment change at the end, per row.

    The inversion of :func:`invert_moments`, integrating each row only over its own
    pulse (from its onset to its stop): rows are grouped by the length of their pulse
    (powers of two), so a long pulse in the batch does not make every row long.

    Parameters
    ----------
    e_v_per_m : ndarray, shape (n, w)
        Field change (baseline removed, decay-compensated, physics convention), V/m.
    sample_rate_hz : float
    start, stop : ndarray of float, shape (n,)
        Fractional columns of the pulse's onset and end (NaN: no moments for the row).
    at : ndarray of float, shape (n,)
        Fractional column, between ``start`` and ``stop``, where the current moment is
        wanted (linear interpolation between samples).
    range_m, altitude_m : ndarray, shape (n,)
        Horizontal distance D and source height H, m.
    extreme : bool or ndarray of bool, shape (n,), default=False
        Rows (all, or the ones marked) whose current moment is instead M of largest
        magnitude (signed) on the samples from the onset to ``stop``. Far away M peaks
        where the radiation field crosses zero, so ``at`` finds it; close under an
        elevated source the field is mostly the electrostatic and induction terms, has
        no such crossing, and M at the pulse's end is not its peak.
    peak_rate : bool or ndarray of bool, shape (n,), default=False
        Also return the current moment's rate of change where it is largest between
        ``start`` and ``at`` (for every row, or for the rows marked).

    Returns
    -------
    current_moment_a_m : ndarray, shape (n,)
        M at ``at`` (or its extreme, rows of ``extreme``), A m (NaN without onset, stop
        or range).
    charge_moment_c_m : ndarray, shape (n,)
        Q at ``stop``, C m.
    converged : ndarray of bool, shape (n,)
        As in :func:`invert_moments`.
    rate_a_m_per_s : ndarray, shape (n,)
        Only with ``peak_rate``: dM/dt of largest magnitude (signed) on the samples from
        the onset to ``at``, from the field's radiation term, ``(E - a1 M - a0 Q) / a2``,
        A m/s (NaN in rows not marked); its noise is the field's times
        2 pi eps0 c^2 R^3 / D^2.
    """
    e, dt, (a0, a1, a2), usable, ok, small, j_on, first, last, after = _prepare(
        e_v_per_m, sample_rate_hz, start, stop, range_m, altitude_m)
    n, w = e.shape
    at = np.asarray(at, dtype=np.float64)
    want = np.broadcast_to(np.asarray(peak_rate, dtype=bool), (n,))
    widest = np.broadcast_to(np.asarray(extreme, dtype=bool), (n,))
    cur = np.full(n, np.nan)
    chg = np.full(n, np.nan)
    rate = np.full(n, np.nan)
    converged = usable.copy()
    todo = ok & usable & (w > 0)
    # window widths, grouped by powers of two (at least 64 columns)
    span = np.where(todo, last + 2 + after - first, 0)
    group = np.ceil(np.log2(np.maximum(span, 64))).astype(np.intp)
    for g in np.unique(group[todo]):
        rows = np.flatnonzero(todo & (group == g))
        width = int(span[rows].max())
        src, on = _windows(e, rows, first[rows], width, j_on[rows])
        own_end = last[rows] - first[rows]
        m, q, conv = _invert_block(src, on, dt, a0[rows], a1[rows], a2[rows],
                                   ~small[rows], own_end, own_end + 2 + after[rows])
        converged[rows] = conv
        cur[rows] = _interp_window(m, at[rows], first[rows], w)
        k = np.flatnonzero(widest[rows])
        if k.size:
            # (not within the anti-causal reach of the last column read, as below)
            last_on = on[k].shape[1] - 1 - np.argmax(on[k][:, ::-1], axis=1)
            limit = np.minimum(own_end[k] + 1 + after[rows[k]], last_on) - after[rows[k]]
            cols = np.arange(m.shape[1])[None, :]
            inside = on[k] & (cols <= np.minimum(own_end[k], limit)[:, None])
            mk = np.where(inside, np.nan_to_num(m[k]), 0.0)
            j = np.argmax(np.abs(mk), axis=1)
            # (a pulse running to the record's end has no such columns: M at ``at``)
            cur[rows[k]] = np.where(inside.any(axis=1), mk[np.arange(k.size), j],
                                    cur[rows[k]])
        chg[rows] = _interp_window(q, stop[rows], first[rows], w)
        k = np.flatnonzero(want[rows])
        if k.size:
            rk = rows[k]
            # (not within the anti-causal reach of the last column read: the field
            # after it is unknown there)
            last_on = on[k].shape[1] - 1 - np.argmax(on[k][:, ::-1], axis=1)
            limit = np.minimum(own_end[k] + 1 + after[rk], last_on) - after[rk]
            rate[rk] = _peak_rate(src[k], m[k], q[k], on[k], a0[rk], a1[rk], a2[rk],
                                  np.fmin(at[rk] - first[rk], limit))
    return (cur, chg, converged, rate) if peak_rate is not False else (cur, chg, converged)


def _peak_rate(src, m, q, on, a0, a1, a2, at_col):
    """dM/dt = (E - a1 M - a0 Q) / a2 of largest magnitude from the onset to ``at_col``."""
    with np.errstate(divide="ignore", invalid="ignore"):
        r = (src - a1[:, None] * m - a0[:, None] * q) / a2[:, None]
    cols = np.arange(src.shape[1])[None, :]
    r = np.where(on & (cols <= np.nan_to_num(at_col, nan=-1.0)[:, None]) & np.isfinite(r),
                 r, 0.0)
    j = np.argmax(np.abs(r), axis=1)
    out = r[np.arange(len(r)), j]
    return np.where(np.isfinite(at_col), out, np.nan)


def _interp_window(values, x, first, n_cols):
    """Linear interpolation of window rows at absolute fractional columns ``x``.

    As :func:`features._rowops.interp_rows` on the record's columns (the next column
    clipped to the record), NaN where ``x`` is NaN.
    """
    ok = np.isfinite(x)
    xx = np.clip(np.where(ok, x, 0.0), 0, n_cols - 1)
    j0 = np.floor(xx)
    a = xx - j0
    j0 = j0.astype(np.intp)
    j1 = np.minimum(j0 + 1, n_cols - 1)
    width = values.shape[1]
    r = np.arange(values.shape[0])
    v0 = values[r, np.clip(j0 - first, 0, width - 1)]
    v1 = values[r, np.clip(j1 - first, 0, width - 1)]
    return np.where(ok, v0 * (1 - a) + v1 * a, np.nan)
