"""The moment inversion of features.moments: batch independence and the near/far choice."""

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import constants

from features.moments import INVERSION_TOLERANCE, invert_moments, moments_at

FS = 20e6


def _row(onset_col, width_samples, w=4000, amp=-1.0):
    """An invented half-sine pulse (self-consistency only): ``amp`` V/m, from ``onset_col``."""
    x = np.zeros(w)
    k = np.arange(width_samples)
    x[onset_col:onset_col + width_samples] = amp * np.sin(np.pi * (k + 0.5) / width_samples)
    return x


def test_a_row_does_not_depend_on_the_rows_beside_it():
    """Invented pulses (self-consistency): one row alone equals the same row in a batch.

    The second row starts at column 0, so the batch's integration span starts 2,000
    columns earlier than the first row's own; whether a row needs the three-term
    iteration (c T / R against the tolerance) must not depend on that span.
    """
    d, h = 119e3, 9e3
    width = 70                                   # 3.5 us: c T / R ~ 0.009, radiation only
    assert constants.c * width / FS / np.hypot(d, h) < 0.5 * INVERSION_TOLERANCE
    a = _row(2000, width)
    b = _row(0, 40, amp=0.5)
    start = np.array([2000.0, 0.0])
    stop = np.array([2000.0 + width, 40.0])
    rng = np.array([d, 60e3])
    alt = np.array([h, 7e3])
    c_one, m_one, q_one, conv_one = invert_moments(a[None], FS, start[:1], stop[:1],
                                                   rng[:1], alt[:1])
    c_two, m_two, q_two, conv_two = invert_moments(np.stack([a, b]), FS, start, stop,
                                                   rng, alt)
    assert c_two < c_one                        # the batch's span is wider
    span = slice(c_one - c_two, c_one - c_two + m_one.shape[1])
    assert_array_equal(m_two[0, span], m_one[0])
    assert_array_equal(q_two[0, span], q_one[0])
    assert conv_one[0] and conv_two[0]


def test_radiation_only_far_away_matches_the_radiation_term():
    """Far away and short (c T / R < 1 %): M = -2 pi eps0 c^2 (R^3/D^2) int E dt.

    The radiation term of the vertical-dipole field (Uman, McLain & Krider 1975; Rakov &
    Uman 2003, ch. 4; from memory), constants from scipy.constants (CODATA).
    """
    d, h, width = 119e3, 9e3, 70
    e = _row(100, width)
    c0, m, q, conv = invert_moments(e[None], FS, np.array([100.0]), np.array([100.0 + width]),
                                    np.array([d]), np.array([h]))
    r = np.hypot(d, h)
    factor = -2 * np.pi * constants.epsilon_0 * constants.c ** 2 * r ** 3 / d ** 2
    expected = factor * np.sum(e) / FS              # the half-sine's integral, trapezoids
    assert_allclose(m[0, -1], expected, rtol=1e-9)
    assert conv[0]


def test_moments_at_equals_the_batch_inversion_sampled():
    """Invented pulses (self-consistency): moments_at gives invert_moments' values.

    Rows of very different lengths and onsets (so moments_at groups them into separate
    windows), near ones that iterate and far ones that do not, a row without onset and
    one without range.
    """
    rng = np.random.default_rng(0)
    n, w = 7, 6000
    rows, start, stop = [], [], []
    for i in range(n):
        on = int(rng.integers(0, 3000))
        width = (2500, 30, 300)[i % 3]
        rows.append(_row(on, width, w=w, amp=rng.normal()))
        start.append(on + rng.uniform(0, 0.9))
        stop.append(min(on + width + 5.0 + rng.uniform(0, 1), w - 1.0))
    e = np.stack(rows) + 1e-3 * rng.normal(size=(n, w))
    start, stop = np.array(start), np.array(stop)
    start[5] = np.nan                                     # no onset
    d = rng.uniform(5e3, 150e3, n)
    d[6] = np.nan                                         # no range
    h = rng.uniform(3e3, 14e3, n)
    d[0], h[0] = 2e3, 10e3              # close by and long: may not converge
    d[1], h[1] = 140e3, 8e3             # far and short: radiation term only
    at = start + 0.6 * (stop - start)
    c0, m, q, conv = invert_moments(e, FS, start, stop, d, h)
    cur, chg, conv_at = moments_at(e, FS, start, stop, at, d, h)

    def sample(v, x):
        j = np.floor(x - c0).astype(int)
        a = (x - c0) - j
        return v[np.arange(len(x)), j] * (1 - a) + v[np.arange(len(x)), j + 1] * a

    good = np.isfinite(start) & np.isfinite(d)
    assert_allclose(cur[good], sample(m[good], at[good]), rtol=1e-12)
    assert_allclose(chg[good], sample(q[good], stop[good]), rtol=1e-12)
    assert np.isnan(cur[~good]).all() and np.isnan(chg[~good]).all()
    assert_array_equal(conv_at, conv)
    assert not conv[6] and conv[5]                       # no range; nothing to invert
    ctr = constants.c * (stop - start) / FS / np.hypot(d, h)
    assert (ctr[good] > 0.5 * INVERSION_TOLERANCE).any()     # rows that iterate
    assert (ctr[good] < 0.5 * INVERSION_TOLERANCE).any()     # rows that do not


def _three_term_field(t, m0, width_s, d, h):
    """Vertical field at the ground of M(t) = m0 sin^2(pi t / T) on 0 <= t <= T.

    The electrostatic, induction and radiation terms of a short vertical channel at
    height h over a perfect ground (Uman, McLain & Krider 1975; Rakov & Uman 2003, ch. 4;
    from memory), retardation left out (a shift of every term alike); Q = int M dt and
    dM/dt in closed form; constants from scipy.constants (CODATA).
    """
    c, k = constants.c, 1 / (2 * np.pi * constants.epsilon_0)
    r = np.hypot(d, h)
    tt = np.clip(t, 0, width_s)
    m = np.where((t >= 0) & (t <= width_s), m0 * np.sin(np.pi * tt / width_s) ** 2, 0.0)
    q = m0 * (tt / 2 - width_s * np.sin(2 * np.pi * tt / width_s) / (4 * np.pi))
    dm = np.where((t >= 0) & (t <= width_s),
                  m0 * np.pi / width_s * np.sin(2 * np.pi * tt / width_s), 0.0)
    e = k * ((2 * h * h - d * d) / r ** 5 * q + (2 * h * h - d * d) / (c * r ** 4) * m
             - d * d / (c ** 2 * r ** 3) * dm)
    return e, m, q


@pytest.mark.parametrize("d, h", [(400.0, 8e3), (1.8e3, 9e3), (5e3, 9e3)])
def test_close_under_an_elevated_source_the_moments_follow_the_three_term_field(d, h):
    """Close under the source (D << H) the induction and electrostatic terms carry the
    field; the moments must still come back (within 2 %, with noise of 0.1 % of the
    peak), where the radiation-only estimate is off by more than half."""
    m0, width_s, onset = 1e8, 20e-6, 200
    t = (np.arange(2000) - onset) / FS
    e, m, q = _three_term_field(t, m0, width_s, d, h)
    e = e + 1e-3 * np.abs(e).max() * np.random.default_rng(1).normal(size=e.size) * (t >= 0)
    end = onset + width_s * FS
    at = onset + 0.5 * width_s * FS
    cur, chg, conv = moments_at(e[None], FS, np.array([float(onset)]), np.array([end]),
                                np.array([at]), np.array([d]), np.array([h]))
    assert conv[0]
    assert_allclose(cur[0], m0, rtol=0.02)
    assert_allclose(chg[0], m0 * width_s / 2, rtol=0.02)
    r = np.hypot(d, h)
    radiation_only = (-2 * np.pi * constants.epsilon_0 * constants.c ** 2 * r ** 3 / d ** 2
                      * np.sum(e[onset:int(at) + 1]) / FS)
    assert abs(radiation_only - m0) > 0.5 * m0
