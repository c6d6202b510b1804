"""The station's view of a block: its trigger, the sferics it hears, its mapping outages.

- **One record per trigger** (``catalog_practice="one_per_trigger"``): the station
  triggers on the first pulse whose recorded field (noise-free, after the fast antenna's
  RC decay and the digitizer's one-sample average) reaches ``trigger_level_v_per_m`` in
  magnitude, then is dead for ``dead_time_s`` (the post-trigger record by default); the
  next pulse over the level after that triggers again. The catalogued event of a record
  is its triggering pulse, labelled with that pulse's class. A trigger on a pulse of a
  class outside ``class_mix`` still makes the station dead, but its record is not
  catalogued (cataloguing practice: out-of-scope records are dropped). The trigger
  decision is made pulse by pulse on each pulse's own field, not on the sum of
  overlapping pulses (a simplification).
- **Sferics** (``sferic_rate_hz``): return strokes of distant storms, 200-1500 km away
  (log-uniform) in any direction, arriving as a Poisson process of that rate. They are
  drawn only over the spans the records cover (each flash's union of record windows,
  widened 300 us back for pulses already under way), so overlapping records show the same
  sferic. First or subsequent strokes at equal odds, 10 % of positive polarity; no VHF,
  no mapped sources (too far for the mapping).
- **Mapping outages**: ``mapping_outage_fraction`` of events lose their sources at random;
  ``mapping_down_fraction`` f of the season's time the mapping is down, in stretches of
  Exp(6 h) (up stretches Exp(6 h x (1 - f) / f), the first stretch down with
  probability f); events inside lose their sources.

The stretch lengths and the sferic ranges are our choice (common practice, no source).
"""

from __future__ import annotations

import numpy as np

from ._classes import ALL_CLASSES, PARAMS, SUBSEQUENT_STROKE
from ._earth import slant_distance_m
from ._fields import Supports
from ._flashes import FRONT_FIELDS, SFERIC
from .dipole import SPEED_OF_LIGHT_M_PER_S

__all__ = ["MappingDown", "add_sferics", "pulse_peaks_v_per_m", "select_triggers"]

#: Sferic distances, m (log-uniform).
SFERIC_RANGE_M = (200e3, 1500e3)
#: How far back before a record window a sferic may arrive and still be in it, s.
SFERIC_LEAD_S = 300e-6
#: Mean length of a stretch of mapping outage, s.
MAPPING_DOWN_MEAN_S = 6 * 3600.0


def pulse_peaks_v_per_m(sup: Supports) -> np.ndarray:
    """Largest magnitude of each pulse's recorded field on its support, in V/m."""
    return np.maximum.reduceat(np.abs(sup.data[:-1]), sup.offset).astype(float)


def select_triggers(p, peaks_v_per_m, s) -> int:
    """Mark the catalogued pulses of a one-record-per-trigger station (in ``p``).

    Parameters
    ----------
    p : dict of ndarray
        The block's pulses (``flash``, ``trigger_s``, ``class_index``, ``catalogued``).
    peaks_v_per_m : ndarray
        Each pulse's recorded peak field magnitude in V/m (:func:`pulse_peaks_v_per_m`).
    s : Settings

    Returns
    -------
    int
        Number of triggers (catalogued or not).
    """
    cand = np.flatnonzero(peaks_v_per_m >= s.station_trigger_level_v_per_m)
    order = cand[np.lexsort((p["trigger_s"][cand], p["flash"][cand]))]
    key = p["flash"][order] * 1e4 + p["trigger_s"][order]  # flashes last < 1e4 s
    dead = s.station_dead_time_s
    chosen = []
    i = 0
    while i < order.size:  # one step per trigger, not per pulse
        chosen.append(i)
        i = max(i + 1, int(np.searchsorted(key, key[i] + dead, "left")))
    chosen = order[np.array(chosen, np.int64)]
    in_mix = np.array([s.class_mix[c] > 0 for c in ALL_CLASSES] + [False])
    p["catalogued"][:] = False
    p["catalogued"][chosen] = in_mix[p["class_index"][chosen]]
    return int(chosen.size)


def _union_spans(flash, start, end):
    """Union of intervals per flash: (flash, start, end) of the merged intervals."""
    order = np.lexsort((start, flash))
    f, a, b = flash[order], start[order] + flash[order] * 1e4, end[order] + flash[order] * 1e4
    reach = np.maximum.accumulate(b)
    new = np.ones(a.size, bool)
    new[1:] = a[1:] > reach[:-1]
    group = np.cumsum(new) - 1
    first = np.flatnonzero(new)
    last = np.append(first[1:], a.size) - 1
    return f[first], a[first] - f[first] * 1e4, reach[last] - f[first] * 1e4, group


def add_sferics(p, s, rng):
    """The block's pulses with the sferics that fall in its records appended (new dict)."""
    ev = np.flatnonzero(p["catalogued"])
    if s.sferic_rate_hz <= 0 or ev.size == 0:
        return p
    win0 = p["trigger_s"][ev] - s.pretrigger_s - s.field_delay_s
    flash, lo, hi, _ = _union_spans(p["flash"][ev], win0 - SFERIC_LEAD_S,
                                    win0 + s.field_duration_s)
    counts = rng.poisson(s.sferic_rate_hz * (hi - lo))
    n = int(counts.sum())
    if n == 0:
        return p
    span = np.repeat(np.arange(flash.size), counts)
    arrival = lo[span] + rng.random(n) * (hi - lo)[span]
    dist = np.exp(rng.uniform(*np.log(SFERIC_RANGE_M), n))
    phi = rng.uniform(0.0, 2 * np.pi, n)
    params = PARAMS["return_stroke"]
    first = rng.random(n) < 0.5
    new = {k: np.full(n, np.nan) for k in p}
    for key in ("peak_a", "rise_s", "decay_s", "length_m", "speed_m_per_s"):
        drawn = params[key].draw(rng, n)
        if key in SUBSEQUENT_STROKE:
            drawn = np.where(first, drawn, SUBSEQUENT_STROKE[key].draw(rng, n))
        new[key] = drawn
    new["decay_length_m"] = params["decay_ratio"].draw(rng, n) * new["length_m"]
    new["peak_a"] = np.where(rng.random(n) < 0.1, -1.0, 1.0) * new["peak_a"]
    slant = slant_distance_m(dist, 0.0)
    new.update(flash=flash[span], class_index=np.full(n, SFERIC, np.int8),
               catalogued=np.zeros(n, bool), margin=np.zeros(n, bool),
               x_m=dist * np.sin(phi), y_m=dist * np.cos(phi), z0_m=np.zeros(n),
               channel_direction=np.ones(n), vhf_peak_db=np.full(n, -np.inf),
               plateau_db=np.full(n, -np.inf), plateau_s=np.zeros(n),
               branch_share=np.zeros(n), src_weight=np.zeros(n), slant_m=slant,
               arrival_s=arrival, t_s=arrival - slant / SPEED_OF_LIGHT_M_PER_S,
               trigger_s=arrival, n_src_mean=np.zeros(n))
    for k in FRONT_FIELDS:
        new["front_" + k] = np.full(n, np.nan)
    return {k: np.concatenate([p[k], new[k].astype(p[k].dtype)]) for k in p}


class MappingDown:
    """Stretches of the season when the mapping is down (deterministic from a seed).

    Alternating down and up stretches, Exp(6 h) and Exp(6 h x (1 - f) / f) long; the
    first one is down with probability ``f`` (the stationary state).
    """

    def __init__(self, fraction, start_ns, rng):
        self.fraction = float(fraction)
        self.rng = rng
        self.edges = [int(start_ns)]  # stretch j covers edges[j]..edges[j+1]
        self.first_down = bool(rng.random() < self.fraction) if self.fraction > 0 else False

    def _extend(self, until_ns):
        mean_up = MAPPING_DOWN_MEAN_S * (1 - self.fraction) / self.fraction
        while self.edges[-1] <= until_ns:
            down = self.first_down != ((len(self.edges) - 1) % 2 == 1)
            mean = MAPPING_DOWN_MEAN_S if down else mean_up
            self.edges.append(self.edges[-1] + int(self.rng.exponential(mean) * 1e9) + 1)

    def is_down(self, t_ns) -> np.ndarray:
        """Whether the mapping is down at each time (ns since the Unix epoch)."""
        t_ns = np.asarray(t_ns, np.int64)
        if self.fraction <= 0 or t_ns.size == 0:
            return np.zeros(t_ns.shape, bool)
        self._extend(int(t_ns.max()))
        j = np.searchsorted(np.array(self.edges, np.int64), t_ns, "right") - 1
        return (self.first_down != (j % 2 == 1)) & (j >= 0)
