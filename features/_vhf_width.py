"""Width of a VHF burst on its smoothed envelope, and the width's standard error.

Split from :mod:`features.vhf` (which computes the envelope, its noise floor and
fluctuation and the burst-smoothed envelope this module reads).

The width is the time between the crossings, on either side of the burst's peak, of the
level a tenth of the way from the noise floor to the peak (:data:`WIDTH_LEVEL`). On a
speckled envelope both crossings and the level itself fluctuate: a crossing is where the
envelope, fluctuating by ``sigma`` about its mean, meets the level, so it lies anywhere
between the envelope's crossings of ``level + z sigma`` and ``level - z sigma``
(``z`` = :data:`BRACKET_Z`); the standard error of one crossing is that bracket over
``2 z`` (for a locally straight edge, ``sigma / |slope|``: first-order error propagation,
e.g. Taylor, An Introduction to Error Analysis, 1997, ch. 3). Where the envelope does
not fall clearly below the level (a plateau near 10 % of the peak, e.g. the VHF a recoil
keeps while its front moves, or a level in the noise) the lower crossing lies far out or
nowhere and the width is NaN: not known, rather than set by one speckle dip.
"""

from __future__ import annotations

import numpy as np

from ._rowops import crossing_after, crossing_before

__all__ = ["WIDTH_LEVEL", "BRACKET_Z", "MAX_WIDTH_REL_SE", "burst_width"]

#: The width is taken at this fraction of the way from the noise floor to the peak.
WIDTH_LEVEL = 0.1
#: Half-width of a crossing's bracket, standard deviations of the envelope at the level.
BRACKET_Z = 2.0
#: Largest relative standard error of a reported width (0.05: the width is known to
#: +-10 % at 2 standard errors) ...
MAX_WIDTH_REL_SE = 0.05
#: ... plus this many envelope bins (the bin quantises the crossings).
MAX_WIDTH_SE_BINS = 0.5


def burst_width(env, jp, peak, noise, sigma_rel):
    """Width of each row's burst around bin ``jp`` and its standard error, in bins.

    Parameters
    ----------
    env : ndarray, shape (n, nb)
        Smoothed envelope (linear power, any units).
    jp : ndarray of int, shape (n,)
        Bin of each row's burst peak.
    peak, noise : ndarray, shape (n,)
        The peak and the noise floor, ``env``'s units.
    sigma_rel : ndarray, shape (n,)
        Relative standard deviation of one value of ``env`` (speckle: the same fraction
        of signal and noise power); NaN where unknown (a noise-free record: the
        crossings are then taken as exact).

    Returns
    -------
    width : ndarray, shape (n,)
        Bins between the crossings of the level (NaN where either runs off the record).
    se : ndarray, shape (n,)
        Standard error of ``width``, bins: the two crossings' brackets (independent
        speckle) over ``2 z``, in quadrature, plus the level's own error (a tenth of
        the peak's fluctuation, shared by both crossings: it moves them apart or
        together). NaN where a bracket's lower crossing is missing; 0 where
        ``sigma_rel`` is unknown.

    Examples
    --------
    A noise-free Gaussian burst of standard deviation 5 bins is ``2 sqrt(2 ln 10) 5``
    = 21.46 bins wide at a tenth of its peak (closed form):

    >>> import numpy as np
    >>> j = np.arange(200.0)
    >>> env = np.exp(-0.5 * ((j - 100) / 5) ** 2)[None]
    >>> w, se = burst_width(env, np.array([100]), np.ones(1), np.zeros(1),
    ...                     np.array([np.nan]))
    >>> round(float(w[0]), 1), float(se[0])
    (21.5, 0.0)
    """
    rise = np.maximum(peak - noise, 0.0)
    level = noise + WIDTH_LEVEL * rise
    a = crossing_before(env, jp, level)
    b = crossing_after(env, jp, level)
    width = b - a
    known = np.isfinite(sigma_rel)
    s = np.where(known, sigma_rel, 0.0)
    sig = s * level                       # the envelope's fluctuation at the level
    sig_level = WIDTH_LEVEL * s * peak    # the level's, from the peak's
    hi = level + BRACKET_Z * sig
    lo = level - BRACKET_Z * sig
    a_hi, a_lo = crossing_before(env, jp, hi), crossing_before(env, jp, lo)
    b_hi, b_lo = crossing_after(env, jp, hi), crossing_after(env, jp, lo)
    se_a = (a_hi - a_lo) / (2 * BRACKET_Z)
    se_b = (b_lo - b_hi) / (2 * BRACKET_Z)
    with np.errstate(divide="ignore", invalid="ignore"):
        # the level's error moves each crossing by (its error) / (the edge's slope),
        # the slope being sig / se of that crossing
        ratio = np.where(sig > 0, sig_level / sig, 0.0)
    se = np.sqrt(se_a ** 2 + se_b ** 2 + (ratio * (se_a + se_b)) ** 2)
    se = np.where(known, se, 0.0)
    return width, se


def width_resolved(width, se):
    """Whether a width (bins) is known to :data:`MAX_WIDTH_REL_SE` (bins' quantisation
    allowed): ``se <= MAX_WIDTH_REL_SE width + MAX_WIDTH_SE_BINS``; False where ``se`` is
    NaN."""
    with np.errstate(invalid="ignore"):
        return se <= MAX_WIDTH_REL_SE * width + MAX_WIDTH_SE_BINS
