"""Tests of features.simulate.dipole against textbook closed forms and CODATA constants."""

import numpy as np
import pytest
import scipy.constants
from numpy.testing import assert_allclose
from scipy.integrate import cumulative_trapezoid

from features.simulate import dipole
from features.simulate.dipole import (
    DoubleExponentialCurrent,
    HeidlerCurrent,
    channel_field_terms,
    current_moment_a_m,
    element_field_factors,
    point_charge_field_v_per_m,
    sampled_channel_field_terms,
    sampled_vertical_field_v_per_m,
    tl_radiation_field_v_per_m,
    vertical_field_v_per_m,
)

EPS0 = scipy.constants.epsilon_0
C = scipy.constants.c


def test_constants_are_codata_from_scipy():
    """The module's constants are scipy.constants' CODATA values."""
    assert dipole.EPSILON_0_F_PER_M == scipy.constants.epsilon_0
    assert dipole.SPEED_OF_LIGHT_M_PER_S == scipy.constants.c
    # CODATA 2018: c exact, eps0 = 8.8541878128e-12 F/m (from memory)
    assert_allclose(dipole.EPSILON_0_F_PER_M, 8.8541878128e-12, rtol=1e-9)


def test_tl_radiation_worked_example():
    """TL far field -v I/(2 pi eps0 c^2 D): 30 kA, 1.5e8 m/s, 100 km gives about 9 V/m."""
    # Uman & McLain (1969); textbook-type worked example, Rakov & Uman 2003 ch. 12
    # (from memory): |E| ~ 9.0 V/m.
    e = tl_radiation_field_v_per_m(30e3, 1.5e8, 100e3)
    assert_allclose(e, -1.5e8 * 30e3 / (2 * np.pi * EPS0 * C**2 * 100e3), rtol=1e-3)
    assert_allclose(abs(e), 9.0, rtol=1e-2)
    assert e < 0  # upward-directed positive current: field points down (physics)


def test_channel_radiation_matches_tl_formula_while_front_is_low():
    """Direct integration of a TL channel gives -v i(t)/(2 pi eps0 c^2 D) in the far field."""
    # Uman & McLain (1969): E_rad = -v i(t - D/c) / (2 pi eps0 c^2 D) while the front
    # is low compared with D (here under 300 m at 100 km).
    cur = HeidlerCurrent(30e3, 0.5e-6, 5e-6)
    d, v = 100e3, 1.5e8
    tau = np.linspace(0.0, 2e-6, 81)
    terms = channel_field_terms(d / C + tau, d, cur, 0.0, 5000.0, v, n_segments=4000)
    expected = tl_radiation_field_v_per_m(cur.current_a(tau), v, d)
    assert_allclose(terms.radiation_v_per_m, expected, atol=2e-3 * 9.0)


def test_static_term_matches_charge_pair_closed_form():
    """After the current stops, the static term equals the moved charge's closed form."""
    # Electrostatics of a charge above a conducting plane with its image (Rakov & Uman
    # 2003, ch. 4; from memory): moving +Q from H1 up to H2 changes the field by
    # dE = -Q/(2 pi eps0) * (H2/(H2^2+D^2)^1.5 - H1/(H1^2+D^2)^1.5).
    cur = DoubleExponentialCurrent(2e3, 1e-6, 10e-6)
    h1, h2, d = 5000.0, 7000.0, 10e3
    late = np.array([3e-3])
    terms = channel_field_terms(late, d, cur, h1, h2, 1e7, n_segments=4000)
    q = cur.charge_c(3e-3)
    closed = -q / (2 * np.pi * EPS0) * (h2 / (h2**2 + d**2) ** 1.5 - h1 / (h1**2 + d**2) ** 1.5)
    assert_allclose(terms.electrostatic_v_per_m, closed, rtol=1e-4)
    assert_allclose(closed, point_charge_field_v_per_m(q, h2, d)
                    + point_charge_field_v_per_m(-q, h1, d), rtol=1e-12)
    assert abs(terms.induction_v_per_m[0]) < 1e-9 * abs(closed)
    assert abs(terms.radiation_v_per_m[0]) < 1e-9 * abs(closed)


def test_static_term_of_an_elevated_short_channel_reverses_at_sqrt2_height():
    """Close to an elevated source the static change has the other sign (D < sqrt(2) H)."""
    # A short vertical dipole of moment p = Q L at height H above a conducting ground
    # gives E_z = p/(2 pi eps0) * (2 H^2 - D^2)/R^5, R = sqrt(H^2 + D^2): zero at
    # D = sqrt(2) H, one sign beneath the source and the other beyond (Uman, McLain &
    # Krider 1975; Rakov & Uman 2003, ch. 4; from memory). Close flashes' pulses change
    # shape and sign through this term, which a season of far flashes never shows.
    cur = DoubleExponentialCurrent(2e3, 1e-6, 10e-6)
    h, length = 8000.0, 50.0
    late = np.array([3e-3])
    q = cur.charge_c(3e-3)
    for d in (1e3, 5e3, 9e3, 13e3, 20e3, 60e3):
        terms = channel_field_terms(late, d, cur, h - length / 2, h + length / 2, 1e7,
                                    n_segments=400)
        r = np.hypot(h, d)
        closed = q * length / (2 * np.pi * EPS0) * (2 * h**2 - d**2) / r**5
        assert_allclose(terms.electrostatic_v_per_m, closed, rtol=1e-3)
        assert np.sign(terms.electrostatic_v_per_m[0]) == np.sign(np.sqrt(2) * h - d)


def test_radiation_of_an_elevated_source_follows_d2_over_r3():
    """The radiation term scales with the D^2/R^3 geometry: it vanishes beneath the source."""
    # E_rad = -(1/(2 pi eps0 c^2)) D^2/R^3 dM/dt for a short channel at height H
    # (Uman, McLain & Krider 1975; from memory): at D = 2 km below a source 10 km up it
    # is 4 % of the 1/D far-field form, so the near terms take over there.
    cur = HeidlerCurrent(10e3, 1e-6, 5e-6)
    # a channel 3 m long: the front crosses it in 30 ns, so the viewing angle's time
    # compression (1 - v cos(theta)/c) does not matter beside the 1 us rise
    h, length = 10e3, 3.0
    tau = np.linspace(0.2e-6, 6e-6, 60)
    peaks = {}
    for d in (2e3, 10e3, 80e3):
        r = np.hypot(h, d)
        terms = channel_field_terms(r / C + tau, d, cur, h, h + length, 1e8, n_segments=50)
        peaks[d] = np.abs(terms.radiation_v_per_m).max()
    geometry = {d: d**2 / np.hypot(h, d) ** 3 for d in peaks}
    assert_allclose(peaks[2e3] / peaks[80e3], geometry[2e3] / geometry[80e3], rtol=2e-3)
    assert_allclose(peaks[10e3] / peaks[80e3], geometry[10e3] / geometry[80e3], rtol=2e-3)


def test_point_charge_field_sign_and_value():
    """A positive charge overhead gives a downward field, -Q H/(2 pi eps0 R^3)."""
    # Coulomb field doubled by the image at the ground (from memory).
    e = point_charge_field_v_per_m(1.0, 3000.0, 4000.0)
    assert_allclose(e, -3000.0 / (2 * np.pi * EPS0 * 5000.0**3), rtol=1e-12)
    assert e < 0


@pytest.mark.parametrize(("term", "power"), [("electrostatic_v_per_m", 3),
                                             ("induction_v_per_m", 2),
                                             ("radiation_v_per_m", 1)])
def test_range_dependence_of_the_three_terms(term, power):
    """Far from a low channel the terms fall as 1/D^3, 1/D^2 and 1/D."""
    # Uman, McLain & Krider (1975): static ~ 1/D^3, induction ~ 1/D^2, radiation ~ 1/D.
    cur = HeidlerCurrent(10e3, 1e-6, 5e-6)
    tau = np.linspace(0.5e-6, 20e-6, 40)
    fields = []
    for d in (50e3, 100e3):
        r0 = np.hypot(0.0, d)
        terms = channel_field_terms(r0 / C + tau, d, cur, 0.0, 300.0, 1e8, n_segments=600)
        fields.append(getattr(terms, term))
    scale = np.abs(fields[0]).max()
    assert_allclose(fields[1] * 2.0**power, fields[0], atol=2e-3 * scale)


def test_element_factors_closed_form():
    """Element factors are the dipole-technique coefficients of Uman et al. (1975)."""
    z, d = 4000.0, 9000.0
    r = np.hypot(z, d)
    es, ind, rad, rr = element_field_factors(z, d)
    k = 1 / (2 * np.pi * EPS0)
    assert_allclose(es, k * (2 * z**2 - d**2) / r**5, rtol=1e-12)
    assert_allclose(ind, k * (2 * z**2 - d**2) / (C * r**4), rtol=1e-12)
    assert_allclose(rad, -k * d**2 / (C**2 * r**3), rtol=1e-12)
    assert_allclose(rr, r, rtol=1e-15)


def test_heidler_peak_charge_and_derivative():
    """Heidler current: peak equals peak_a; charge and derivative match numerics."""
    cur = HeidlerCurrent(25e3, 0.4e-6, 6e-6, 2)
    t = np.linspace(0.0, 120e-6, 1_200_001)
    i = cur.current_a(t)
    assert_allclose(i.max(), 25e3, rtol=1e-7)
    assert_allclose(t[np.argmax(i)], cur.peak_time_s, atol=2e-10)
    q = cumulative_trapezoid(i, t, initial=0.0)
    assert_allclose(cur.charge_c(t[::20000]), q[::20000], rtol=1e-7, atol=1e-12)
    assert_allclose(cur.derivative_a_per_s(t[1:-1:997]),
                    np.gradient(i, t)[1:-1:997], rtol=1e-4, atol=1e-6 * 25e3 / 0.4e-6)
    both = cur.current_and_derivative(t[::1000])
    assert_allclose(both[0], cur.current_a(t[::1000]), rtol=1e-12)
    assert_allclose(both[1], cur.derivative_a_per_s(t[::1000]), rtol=1e-12, atol=1e-3)


def test_double_exponential_closed_forms():
    """Double exponential: peak time ln(t2/t1) t1 t2/(t2 - t1) and total charge I0 (t2 - t1)."""
    cur = DoubleExponentialCurrent(10e3, 1e-6, 20e-6)
    tp = np.log(20.0) * 20e-12 / 19e-6
    assert_allclose(cur.peak_time_s, tp, rtol=1e-12)
    assert_allclose(cur.current_a(tp), 10e3, rtol=1e-12)
    i0 = 10e3 / (np.exp(-tp / 20e-6) - np.exp(-tp / 1e-6))
    assert_allclose(cur.charge_c(1.0), i0 * (20e-6 - 1e-6), rtol=1e-12)


def test_mtle_moment_closed_form():
    """MTLE current moment while the front rises: v * integral i0(s) exp(-v(t-s)/lambda)."""
    # Nucci et al. (1988) MTLE: i(z, t) = exp(-z/lambda) i0(t - z/v).
    cur = DoubleExponentialCurrent(5e3, 0.5e-6, 4e-6)
    v, lam = 1e8, 400.0
    t = np.array([2e-6, 5e-6])
    got = current_moment_a_m(t, cur, 1000.0, 3000.0, v, lam, n_segments=20000)
    s = np.linspace(0, 1, 200001)
    want = [v * np.trapezoid(cur.current_a(tt * s) * np.exp(-v * (tt - tt * s) / lam), tt * s)
            for tt in t]
    assert_allclose(got, want, rtol=1e-4)


@pytest.mark.parametrize(("z0", "z1", "v", "lam", "d"), [
    (15000.0, 14400.0, 5e7, 300.0, 20e3),   # downward front, high, near
    (9000.0, 10500.0, 1e8, 800.0, 10e3),    # upward front, overhead-ish
    (5000.0, 5100.0, 8e7, None, 100e3),     # short TL channel, far
])
def test_sampled_evaluator_matches_direct_integration(z0, z1, v, lam, d):
    """The fast convolution evaluator agrees with direct element integration."""
    cur = HeidlerCurrent(20e3, 0.8e-6, 4e-6)
    fs = 100e6
    t = np.arange(3000) / fs
    fast = sampled_channel_field_terms(cur.current_a(t)[None], cur.derivative_a_per_s(t)[None],
                                       fs, [d], [z0], [z1], [v],
                                       None if lam is None else [lam])
    ref = channel_field_terms(np.hypot(z0, d) / C + t, d, cur, z0, z1, v, lam,
                              n_segments=3000)
    for a, b in zip(fast, ref, strict=True):
        assert_allclose(a[0], b, atol=2e-4 * np.abs(b).max())
    total = sampled_vertical_field_v_per_m(*cur.current_and_derivative(t[None]), fs, [d],
                                           [z0], [z1], [v], None if lam is None else [lam])
    assert_allclose(total[0], fast.total_v_per_m[0], rtol=1e-9, atol=1e-12)
    assert_allclose(vertical_field_v_per_m(t[:5] + np.hypot(z0, d) / C, d, cur, z0, z1, v, lam,
                                           n_segments=3000), ref.total_v_per_m[:5], rtol=1e-9)


def test_bad_channel_raises():
    """A zero-length channel, negative heights or a speed >= c are refused."""
    cur = HeidlerCurrent(1.0, 1e-6, 2e-6)
    with pytest.raises(ValueError, match="z_end_m must differ"):
        channel_field_terms([0.0], 1e3, cur, 100.0, 100.0, 1e8)
    with pytest.raises(ValueError, match="heights must be >= 0"):
        channel_field_terms([0.0], 1e3, cur, -10.0, 100.0, 1e8)
    with pytest.raises(ValueError, match="speed_m_per_s must be in"):
        channel_field_terms([0.0], 1e3, cur, 0.0, 100.0, 3.1e8)
