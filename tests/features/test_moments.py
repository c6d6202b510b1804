"""The moment inversion of features.moments: batch independence and the near/far choice."""

import numpy as np
from numpy.testing import assert_allclose, assert_array_equal
from scipy import constants

from features.moments import INVERSION_TOLERANCE, invert_moments

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
