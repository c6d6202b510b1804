"""Field at the ground of a straight current segment above a perfectly conducting plane.

Derivation (ours, written out so that every step can be checked)
----------------------------------------------------------------
A Hertzian dipole of charge moment ``p(t)`` (C m), current moment ``M = dp/dt``
(A m) and ``dM/dt`` (A m / s), seen at vector distance ``R n`` (``n`` a unit
vector), gives in free space

    E = 1/(4 pi eps0) [ (3n(n.p) - p)/R^3 + (3n(n.M) - M)/(c R^2) + (n(n.dM) - dM)/(c^2 R) ]

with every moment taken at the retarded time ``t - R/c`` (Jackson, *Classical
Electrodynamics*, 3rd ed., sec. 9.2, from memory; the same three terms as the
electrostatic, induction and radiation terms of Uman, McLain & Krider 1975 and
Rakov & Uman 2003, ch. 4, from memory). Over a perfectly conducting ground the
image of an element at height ``h`` lies at ``-h``; its vertical component is
kept and its horizontal components are reversed. At a ground point at
horizontal distance ``D`` (``R^2 = D^2 + h^2``), with ``x`` the horizontal
component of the moment along the direction from the source to the station, the
direct and image fields add to a purely vertical field (up = positive, the
"physics" convention):

    E_z = 1/(2 pi eps0) [ ((2h^2 - D^2) p_z - 3hD p_x) / R^5
                        + ((2h^2 - D^2) M_z - 3hD M_x) / (c R^4)
                        - (D^2 dM_z + hD dM_x) / (c^2 R^3) ]

For a vertical element (``p_x = 0``) this is the textbook vertical-dipole
formula; for ``h = 0`` the radiation term is ``-dM_z/(2 pi eps0 c^2 D)``.

Current model (ours): a transmission-line wave on a straight segment of length
``L`` from ``P0`` along the unit vector ``u`` with speed ``v`` and exponential
attenuation length ``lam`` (infinite = no attenuation),
``i(s, t) = pol * I * g(t - t0 - s/v) * exp(-s/lam)``, where ``pol = +1`` when
the current flows along ``u``. The shape

    g(x) = [exp(-x/tau2) - (1 + (1/tau1 - 1/tau2) x) exp(-x/tau1)] / g_max,  x >= 0

is zero with a zero slope at ``x = 0`` (so the radiation field starts without a
jump), positive (``e^y >= 1 + y``), and has closed-form first and second time
integrals, which the field needs (the charge moment is the time integral of the
current moment). The segment is cut into ``K`` elements; inside each, the
retardation ``s/v + R(s)/c`` is taken as linear in ``s`` and the time integral
over the element is done exactly, so only the geometry and the attenuation are
discretised. Between two node arrival times the field is then a fixed
combination of ``1, y, exp(-y/tau1), y exp(-y/tau1), exp(-y/tau2)``, so each
sample costs the same whatever ``K`` is.
"""

from __future__ import annotations

import numpy as np
from scipy import constants

__all__ = ["EPS0", "C", "shape", "shape_peak", "Segments", "node_weights", "segment_nodes",
           "evaluate",
           "final_value", "geometry", "dipole_ez"]

EPS0 = constants.epsilon_0          # F/m, CODATA via scipy
C = constants.c                     # m/s
_K_E = 1.0 / (2.0 * np.pi * EPS0)   # direct + image: twice 1/(4 pi eps0)


def shape(x_s, tau1_s, tau2_s):
    """Unnormalised current shape and its first two time integrals.

    Parameters
    ----------
    x_s : ndarray
        Time since the start of the wave, in seconds; negative values give 0.
    tau1_s, tau2_s : ndarray or float
        Rise and decay constants in seconds (``tau1_s < tau2_s``).

    Returns
    -------
    g, j0_s, j1_s2 : ndarray
        ``g`` (dimensionless), its integral from 0 (seconds) and the integral of
        that (seconds squared).
    """
    x = np.maximum(x_s, 0.0)
    t1, t2 = tau1_s, tau2_s
    c = 1.0 / t1 - 1.0 / t2
    e1, e2 = np.exp(-x / t1), np.exp(-x / t2)
    g = e2 - (1.0 + c * x) * e1
    a0_2 = t2 * (1.0 - e2)
    a0_1 = t1 * (1.0 - e1)
    a1_1 = t1 ** 2 * (1.0 - e1 * (1.0 + x / t1))
    j0 = a0_2 - a0_1 - c * a1_1
    b0_2 = t2 * x - t2 ** 2 * (1.0 - e2)
    b0_1 = t1 * x - t1 ** 2 * (1.0 - e1)
    b1_1 = t1 ** 2 * x - t1 ** 3 * (2.0 - e1 * (2.0 + x / t1))
    j1 = b0_2 - b0_1 - c * b1_1
    return g, j0, j1


def _peak_by_bisection(tau1_s, tau2_s):
    """Peak value and time of the unnormalised shape, by bisection on its slope."""
    t1 = np.asarray(tau1_s, float)
    t2 = np.asarray(tau2_s, float)
    c = 1.0 / t1 - 1.0 / t2

    def slope(x):
        return -np.exp(-x / t2) / t2 + np.exp(-x / t1) * (1.0 / t2 + c * x / t1)

    lo = 1e-3 * t1
    hi = 60.0 * t2 + 0.0 * t1
    for _ in range(80):
        mid = 0.5 * (lo + hi)
        up = slope(mid) > 0
        lo = np.where(up, mid, lo)
        hi = np.where(up, hi, mid)
    x = 0.5 * (lo + hi)
    return shape(x, t1, t2)[0], x


# The shape scales with tau2: its peak value and peak time / tau2 depend only on
# tau1 / tau2, so they are tabulated once (log-spaced ratios, linear interpolation;
# error < 1e-5, tested against the bisection).
_RATIO = np.geomspace(1e-4, 0.999, 6000)
_PEAK, _PEAK_X = _peak_by_bisection(_RATIO, np.ones_like(_RATIO))


def shape_peak(tau1_s, tau2_s):
    """Peak value (dimensionless) and peak time (s) of the unnormalised shape."""
    t1 = np.asarray(tau1_s, float)
    t2 = np.asarray(tau2_s, float)
    lr = np.log(t1 / t2)
    grid = np.log(_RATIO)
    return np.interp(lr, grid, _PEAK), t2 * np.interp(lr, grid, _PEAK_X)


class Segments:
    """A batch of current segments (one row per pulse), all arrays of shape (n,).

    Attributes (SI units): ``x0_m, y0_m, z0_m`` start point (east, north, up of
    the station); ``ux, uy, uz`` unit direction of the wave; ``length_m``;
    ``speed_m_per_s``; ``atten_m`` (``inf`` for none); ``polarity`` (+1: current
    along ``u``); ``current_a`` (peak current at the start, >= 0); ``tau1_s``,
    ``tau2_s``; ``t0_s`` (time the wave leaves the start point).
    """

    FIELDS = ("x0_m", "y0_m", "z0_m", "ux", "uy", "uz", "length_m", "speed_m_per_s",
              "atten_m", "polarity", "current_a", "tau1_s", "tau2_s", "t0_s")

    def __init__(self, **arrays):
        n = None
        for k in self.FIELDS:
            a = np.atleast_1d(np.asarray(arrays.pop(k), float))
            n = a.shape[0] if n is None else n
            setattr(self, k, a if a.shape == (n,) else np.broadcast_to(a, (n,)).copy())
        if arrays:
            raise TypeError(f"unknown segment fields {sorted(arrays)}")
        self.n = n

    def take(self, idx):
        """A new Segments with the rows ``idx``."""
        return Segments(**{k: getattr(self, k)[idx] for k in self.FIELDS})


def n_elements(seg: Segments, *, kmin=8, kmax=64):
    """Elements per segment: element transit <= 2 tau1 (so that the delayed rises
    of neighbouring elements overlap) and length <= lam/4, within [kmin, kmax]."""
    transit = seg.length_m / seg.speed_m_per_s
    k = np.maximum(np.ceil(transit / (2.0 * seg.tau1_s)),
                   np.ceil(4.0 * seg.length_m / np.minimum(seg.atten_m, 1e12)))
    return np.clip(k, kmin, kmax).astype(int)


def geometry(x, y, z, ux, uy, uz):
    """Factors of the static, induction and radiation terms for unit moments.

    Parameters
    ----------
    x, y, z : ndarray
        Element position (east, north, up of the station), metres; ``z >= 0``.
    ux, uy, uz : ndarray
        Unit direction of the moment.

    Returns
    -------
    gs, gi, gr : ndarray
        ``E_z = gs p + gi M + gr dM/dt`` in V/m for a charge moment ``p`` (C m),
        current moment ``M`` (A m) and its derivative (A m/s), at retarded time.
    """
    d = np.hypot(x, y)
    safe = np.where(d > 0, d, 1.0)
    ux_t = np.where(d > 0, -(ux * x + uy * y) / safe, 0.0)   # toward the station
    r2 = d * d + z * z
    r = np.sqrt(r2)
    ang = (2.0 * z * z - d * d) * uz - 3.0 * z * d * ux_t
    gs = _K_E * ang / (r2 * r2 * r)
    gi = _K_E * ang / (C * r2 * r2)
    gr = -_K_E * (d * d * uz + z * d * ux_t) / (C * C * r2 * r)
    return gs, gi, gr


def dipole_ez(x, y, z, ux, uy, uz, p, m, dm):
    """E_z at the station of one dipole and its image, from the vector formula.

    Independent of :func:`geometry`: sums the free-space vector fields of the
    dipole and its image (Jackson 1999, sec. 9.2, from memory). Returns the
    three components of the total field (V/m) so that a test can check that the
    horizontal ones vanish on the conducting ground.
    """
    out = np.zeros(3)
    for sign_z, mom in ((1.0, np.array([ux, uy, uz])), (-1.0, np.array([-ux, -uy, uz]))):
        rvec = np.array([0.0 - x, 0.0 - y, 0.0 - sign_z * z])
        r = np.linalg.norm(rvec)
        n = rvec / r
        pv, mv, dv = mom * p, mom * m, mom * dm
        e = ((3 * n * (n @ pv) - pv) / r ** 3 + (3 * n * (n @ mv) - mv) / (C * r ** 2)
             + (n * (n @ dv) - dv) / (C ** 2 * r))
        out += e / (4 * np.pi * EPS0)
    return out


TERMS = ("static", "induction", "radiation")


def node_weights(seg: Segments, *, retarded=True, vertical_moment=False, kmax=64,
                 terms=TERMS):
    """Node arrival times and the weights of ``J1``, ``J0`` and ``g`` at each node.

    Parameters
    ----------
    seg : Segments
    retarded : bool
        Include the propagation delay ``R/c`` (False: times at the source).
    vertical_moment : bool
        Instead of the field, return the coefficients of the vertical current
        moment ``M_z(t)`` in A m (no geometry, no delay).
    terms : tuple of str
        The field terms to keep (all three by default; tests compare single
        terms with closed forms).

    Returns
    -------
    dict
        ``tau0_s`` (n,) absolute arrival of node 0 (s); ``tau_s`` (n, K+1) node
        times relative to it (s); ``a``, ``b``, ``d`` (n, K+1) the node weights of
        the charge-moment, current-moment and derivative shapes.
    """
    n = seg.n
    k_el = n_elements(seg, kmin=min(8, kmax), kmax=kmax)
    kk = int(k_el.max())
    idx = np.arange(kk + 1)[None, :]
    frac = np.minimum(idx / k_el[:, None], 1.0)                    # padded nodes sit at the end
    s = frac * seg.length_m[:, None]
    px = seg.x0_m[:, None] + s * seg.ux[:, None]
    py = seg.y0_m[:, None] + s * seg.uy[:, None]
    pz = seg.z0_m[:, None] + s * seg.uz[:, None]
    delay = np.hypot(np.hypot(px, py), pz) / C if retarded and not vertical_moment else 0.0
    tau = seg.t0_s[:, None] + s / seg.speed_m_per_s[:, None] + delay
    tau0 = tau[:, 0].copy()
    tau = tau - tau0[:, None]
    ds = np.diff(s, axis=1)
    dtau = np.diff(tau, axis=1)
    real = ds > 0
    lam = seg.atten_m[:, None]
    finite = np.isfinite(lam)
    with np.errstate(invalid="ignore", divide="ignore"):
        w = np.where(finite & real,
                     lam / np.where(real, ds, 1.0)
                     * (np.exp(-s[:, :-1] / lam) - np.exp(-s[:, 1:] / lam)), 1.0)
    g_max, _ = shape_peak(seg.tau1_s, seg.tau2_s)
    amp = seg.polarity * seg.current_a / g_max
    cel = np.where(real, amp[:, None] * w * np.where(real, ds, 0.0)
                   / np.where(real, dtau, 1.0), 0.0)
    if vertical_moment:
        gs = np.zeros_like(cel)
        gi = np.broadcast_to(seg.uz[:, None], cel.shape)
        gr = np.zeros_like(cel)
    else:
        mx, my, mz = ((q[:, :-1] + q[:, 1:]) / 2 for q in (px, py, pz))
        gs, gi, gr = geometry(mx, my, mz, seg.ux[:, None], seg.uy[:, None], seg.uz[:, None])
        gs, gi, gr = (g if name in terms else np.zeros_like(g)
                      for name, g in zip(TERMS, (gs, gi, gr)))
    node = {}
    for name, gg in (("a", gs), ("b", gi), ("d", gr)):
        e = cel * gg
        node[name] = np.concatenate([e, np.zeros((n, 1))], 1) - np.concatenate(
            [np.zeros((n, 1)), e], 1)
    return {"tau0_s": tau0, "tau_s": tau, "a": node["a"], "b": node["b"], "d": node["d"]}


def segment_nodes(seg: Segments, **kw):
    """Node times and piecewise coefficients of the field (see :func:`node_weights`).

    Returns
    -------
    dict
        ``tau0_s`` and ``tau_s`` as :func:`node_weights`; ``coef`` (n, K+1, 5)
        piecewise coefficients; ``final`` (n,) the value after the pulse (V/m,
        or A m); ``tau1_s``, ``tau2_s``.
    """
    w = node_weights(seg, **kw)
    coef, final = _piecewise(w["tau_s"], w["a"], w["b"], w["d"], seg.tau1_s, seg.tau2_s)
    return {"tau0_s": w["tau0_s"], "tau_s": w["tau_s"], "coef": coef, "final": final,
            "tau1_s": seg.tau1_s, "tau2_s": seg.tau2_s}


def _terms(a, b, d, tau1, tau2):
    t1, t2 = tau1[:, None], tau2[:, None]
    c = 1.0 / t1 - 1.0 / t2
    qtot = t2 - t1 - c * t1 ** 2
    kap = -t2 ** 2 + t1 ** 2 + 2.0 * c * t1 ** 3
    alpha = -a * (t1 ** 2 + 2 * c * t1 ** 3) + b * (t1 + c * t1 ** 2) - d
    beta = c * (-a * t1 ** 2 + b * t1 - d)
    zeta = a * t2 ** 2 - b * t2 + d
    return qtot, kap, alpha, beta, zeta


def _piecewise(tau, a, b, d, tau1, tau2):
    """Coefficients (P0, P1, Q1, R1, Q2) valid after each node (see module notes).

    Sums over earlier nodes with exponential weights ``exp(-(tau_j - tau_k)/T)``
    are done as cumulative sums of ``x_k exp((tau_k - ref)/T)``, with ``ref`` the
    middle of the row to keep the exponents small; rows whose exponents would
    still overflow use the node-by-node recursion (:func:`_piecewise_loop`).
    """
    qtot, kap, alpha, beta, zeta = _terms(a, b, d, tau1, tau2)
    ref = 0.5 * tau[:, -1:]
    rel = tau - ref
    big = np.max(np.abs(rel) / tau1[:, None], axis=1) > 300.0
    if big.any():
        out, final = np.empty(tau.shape + (5,)), np.empty(tau.shape[0])
        if (~big).any():
            out[~big], final[~big] = _piecewise(tau[~big], a[~big], b[~big], d[~big],
                                                tau1[~big], tau2[~big])
        out[big], final[big] = _piecewise_loop(tau[big], a[big], b[big], d[big], tau1[big],
                                               tau2[big])
        return out, final
    t1, t2 = tau1[:, None], tau2[:, None]
    up1, up2 = np.exp(rel / t1), np.exp(rel / t2)
    dn1, dn2 = 1.0 / up1, 1.0 / up2
    sa = np.cumsum(a, axis=1)
    sb = np.cumsum(b, axis=1)
    saa = rel * sa - np.cumsum(a * rel, axis=1)
    s2 = dn2 * np.cumsum(zeta * up2, axis=1)
    r1 = dn1 * np.cumsum(beta * up1, axis=1)
    sal = dn1 * np.cumsum(alpha * up1, axis=1)
    sbd = dn1 * (rel * np.cumsum(beta * up1, axis=1) - np.cumsum(beta * rel * up1, axis=1))
    out = np.stack([qtot * saa + kap * sa + qtot * sb, qtot * sa, sal + sbd, r1, s2], axis=2)
    return out, out[:, -1, 0].copy()


def _piecewise_loop(tau, a, b, d, tau1, tau2):
    """The same coefficients by the node-by-node recursion (reference, and for
    rows whose exponents are too large for :func:`_piecewise`)."""
    n, k1 = tau.shape
    qtot, kap, alpha, beta, zeta = _terms(a, b, d, tau1, tau2)
    qtot, kap = qtot[:, 0], kap[:, 0]
    out = np.empty((n, k1, 5))
    sa = saa = sb = s2 = r1 = sal = sbd = np.zeros(n)
    for j in range(k1):
        dlt = tau[:, j] - tau[:, j - 1] if j else np.zeros(n)
        e1 = np.exp(-dlt / tau1)
        e2 = np.exp(-dlt / tau2)
        saa = saa + dlt * sa
        sbd = e1 * (sbd + dlt * r1)
        sa = sa + a[:, j]
        sb = sb + b[:, j]
        s2 = s2 * e2 + zeta[:, j]
        r1 = r1 * e1 + beta[:, j]
        sal = sal * e1 + alpha[:, j]
        out[:, j, 0] = qtot * saa + kap * sa + qtot * sb
        out[:, j, 1] = qtot * sa
        out[:, j, 2] = sal + sbd
        out[:, j, 3] = r1
        out[:, j, 4] = s2
    return out, out[:, -1, 0].copy()


def evaluate(nodes, row, t_rel_s):
    """Field (or moment) of segment ``row[i]`` at time ``t_rel_s[i]`` after its node 0.

    Parameters
    ----------
    nodes : dict
        From :func:`segment_nodes`.
    row : ndarray of int (m,)
        Segment of each sample (fastest when sorted, with times sorted within a row).
    t_rel_s : ndarray (m,)
        Time after the arrival of the segment's node 0, seconds.

    Returns
    -------
    ndarray (m,)
        V/m (or A m for ``vertical_moment`` nodes); 0 before the arrival.
    """
    tau = nodes["tau_s"]
    k1 = tau.shape[1]
    if "_flat" not in nodes:
        span = float(np.max(tau[:, -1])) + 1.0
        nodes["_flat"] = (span, (np.arange(tau.shape[0])[:, None] * span + tau).ravel(),
                          tau.ravel(), [np.ascontiguousarray(nodes["coef"][:, :, i]).ravel()
                                        for i in range(5)])
    span, keys, tau_flat, coef = nodes["_flat"]
    t = np.maximum(t_rel_s, 0.0)
    base = row * k1
    pos = np.searchsorted(keys, row * span + t, side="right") - 1
    pos = np.maximum(pos, base)
    y = t - tau_flat.take(pos)
    t1 = nodes["tau1_s"].take(row)
    t2 = nodes["tau2_s"].take(row)
    e1 = np.exp(-y / t1)
    val = coef[0].take(pos) + coef[1].take(pos) * y
    val += (coef[2].take(pos) + coef[3].take(pos) * y) * e1
    val += coef[4].take(pos) * np.exp(-y / t2)
    val[t_rel_s < 0] = 0.0
    return val


def final_value(nodes):
    """Value after the pulse: the static field of the moved charge (V/m)."""
    return nodes["final"]
