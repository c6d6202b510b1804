"""Flash context of each pulse: its place among the other catalogued pulses.

These features need the whole catalog (all pulses of a flash), not one row, so
they are computed once per catalog from ``events.csv`` and ``sources.csv``
before the waveform chunks (:func:`flash_context`).

Definitions:

* ``time_in_flash_s``: trigger time minus the earliest trigger of the flash
  (NaN when the pulse has no flash, or is alone in it: no flash context).
* ``isolation_s``: time to the nearest other catalogued pulse of the same
  flash (NaN when alone in its flash or without flash_id).
* ``isolation_any_s``: time to the nearest other catalogued pulse of the
  catalog, any flash (NaN for a one-pulse catalog).
* ``flash_n_pulses``: catalogued pulses sharing the flash_id (1 without one;
  NaN for every pulse when the catalog gives no flash ids at all).
* ``channel_reuse``: fraction of the pulse's sources that lie near a source
  mapped at least ``REUSE_MIN_AGE_S`` earlier in the same flash. "Near" is
  decided on a grid: with x, y, z, a source counts when an earlier source lies
  in its own or an adjacent cube of ``REUSE_CELL_M`` (so always when closer
  than that, never when farther than about 1.7 cells); without x, y, z the
  same on the sky with cells of ``REUSE_CELL_DEG`` in azimuth (scaled by
  cos elevation) and elevation. NaN for a pulse without sources or without a flash,
  and for every pulse when the catalog's position noise (estimated from the sources
  themselves, :func:`mapping_noise_cells`) exceeds ``REUSE_MAX_NOISE_CELLS`` of a cell:
  two sources mapped at one spot then land cells apart, and whether a source meets an
  earlier one is decided by the noise, not by the channel. The age limit
  keeps a leader's own recent steps out: recoil leaders retrace channels made
  tens to hundreds of ms before (Rakov & Uman 2003, ch. 9; from memory),
  while a stepped leader keeps advancing into virgin air.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd

from ._checks import InputError
from ._trackfit import chord_offsets_sq, group_order

__all__ = ["REUSE_CELL_M", "REUSE_CELL_DEG", "REUSE_MAX_NOISE_CELLS", "REUSE_MIN_AGE_S",
           "flash_context", "mapping_noise_cells"]

#: Grid cell of the channel-reuse test with 3-D positions, metres.
REUSE_CELL_M = 300.0
#: Grid cell of the channel-reuse test on the sky, degrees.
REUSE_CELL_DEG = 0.3
#: Largest position noise (rms per axis, in cells) at which channel reuse is measured:
#: two sources at one spot then differ by sqrt(2) x 0.25 = 0.35 cell rms per axis, well
#: inside the own-or-adjacent-cell test (our choice).
REUSE_MAX_NOISE_CELLS = 0.25
#: Most chord offsets kept per block for the catalog's noise estimate (a median).
_NOISE_SAMPLES_PER_BLOCK = 200_000
#: An earlier source counts for channel reuse only if at least this much older, s.
REUSE_MIN_AGE_S = 5e-3


def _nearest_gap_s(time_ns, groups):
    """Time to the nearest other member of the same group, seconds (NaN if alone)."""
    n = len(time_ns)
    out = np.full(n, np.nan)
    if n < 2:
        return out
    order = np.lexsort((time_ns, groups))
    t = time_ns[order].astype(np.int64)
    g = groups[order]
    gap = np.diff(t).astype(np.float64) * 1e-9
    same = g[1:] == g[:-1]
    prev = np.full(n, np.inf)
    nxt = np.full(n, np.inf)
    prev[1:] = np.where(same, gap, np.inf)
    nxt[:-1] = np.where(same, gap, np.inf)
    best = np.minimum(prev, nxt)
    out[order] = np.where(np.isfinite(best), best, np.nan)
    return out


#: Events per block when scanning the source table (memory stays flat).
_BLOCK_EVENTS = 25_000


def _block_cells(flash_code, time_ns, part, b0):
    """Keys (flash, cell), absolute times and age limits of one block's sources."""
    ev = part.event_index + b0
    fl = flash_code[ev]
    pos = _cell_positions(part)
    keep = (fl >= 0) & np.isfinite(pos).all(axis=1)
    cell = np.floor(np.where(np.isfinite(pos), pos, 0.0)).astype(np.int64)
    # absolute source time in seconds (event trigger + t_s); float64 keeps ~0.5 us
    t_abs = time_ns[ev].astype(np.float64) * 1e-9 + part.t_s
    limit = time_ns[ev].astype(np.float64) * 1e-9 - REUSE_MIN_AGE_S
    return ev, keep, fl, cell, t_abs, limit


def _key_fields(fl, cells):
    """Parts of the int64 key of each (flash, cell) and of its neighbour cells.

    The key holds the flash in the top bits and the cell indices below (3-D: 13 bits
    per axis, 2-D: 19), each index offset and clipped into its field. Returns the
    flash part and, per axis, the index part for offsets -1, 0 and +1: the key of a
    neighbour cell is the OR of its parts.
    """
    dim = cells.shape[1]
    bits = 39 // dim
    base = fl.astype(np.int64) << (bits * dim)
    fields = []
    for i in range(dim):
        c = np.ascontiguousarray(cells[:, i], dtype=np.int64) + (1 << (bits - 1))
        fields.append([np.clip(c + off, 1, (1 << bits) - 2) << (bits * (dim - 1 - i))
                       for off in (-1, 0, 1)])
    return base, fields


#: Sources per group of flashes handled at once (memory stays flat in catalog size).
_GROUP_SOURCES = 500_000


def _flash_groups(flash_code, counts):
    """Groups of consecutive flash codes, each with about _GROUP_SOURCES sources.

    Returns a list of (first code, end code, first row, end row): the event rows
    that hold every pulse of the group's flashes.
    """
    n_codes = int(flash_code.max()) + 1
    rows = np.arange(len(flash_code))
    has = flash_code >= 0
    first = np.full(n_codes, len(flash_code))
    last = np.full(n_codes, -1)
    np.minimum.at(first, flash_code[has], rows[has])
    np.maximum.at(last, flash_code[has], rows[has])
    per_code = np.bincount(flash_code[has], weights=counts[has], minlength=n_codes)
    groups, c0, acc = [], 0, 0.0
    for c in range(n_codes):
        acc += per_code[c]
        if acc >= _GROUP_SOURCES or c == n_codes - 1:
            groups.append((c0, c + 1, int(first[c0:c + 1].min()), int(last[c0:c + 1].max()) + 1))
            c0, acc = c + 1, 0.0
    return groups


def _cell_positions(part):
    """Positions of a block's sources in cells of the reuse grid (xyz, else the sky)."""
    if part.xyz_m is not None:
        return part.xyz_m / REUSE_CELL_M
    el, az = part.elevation_deg, part.azimuth_deg
    return np.column_stack([az * np.cos(np.radians(el)), el]) / REUSE_CELL_DEG


def mapping_noise_cells(sources):
    """The catalog's position noise, rms per axis, in cells of the channel-reuse grid.

    The pooled median over the catalog of each source's offset to the chord of its
    neighbours in time (:func:`features._trackfit.chord_offsets_sq`): one number for
    the station's mapping, which the turns of a few tracks barely move.

    Parameters
    ----------
    sources : features._tables.SourceTable or None

    Returns
    -------
    float
        Noise in cells (``REUSE_CELL_M`` with x, y, z, else ``REUSE_CELL_DEG``); NaN
        without a pulse of 3 or more sources.
    """
    if sources is None or sources.n_sources == 0:
        return float("nan")
    n_events = len(sources.counts())
    samples, med_chi2 = [], 1.0
    for b0 in range(0, n_events, _BLOCK_EVENTS):
        part = sources.rows(b0, min(b0 + _BLOCK_EVENTS, n_events))
        order = group_order(part.t_s, part.event_index)
        z2, med_chi2 = chord_offsets_sq(part.t_s[order], _cell_positions(part)[order],
                                        part.event_index[order])
        z2 = z2[np.isfinite(z2)]
        step = max(1, z2.size // _NOISE_SAMPLES_PER_BLOCK)
        samples.append(z2[::step])
    z2 = np.concatenate(samples)
    return float(np.sqrt(np.median(z2) / med_chi2)) if z2.size else float("nan")


def _channel_reuse(flash_code, time_ns, sources):
    n = len(flash_code)
    out = np.full(n, np.nan)
    if sources is None or sources.n_sources == 0:
        return out
    if flash_code.max(initial=0) >= 1 << 23:
        raise InputError("channel reuse supports up to 8 million flashes per catalog")
    if not mapping_noise_cells(sources) <= REUSE_MAX_NOISE_CELLS:
        return out                          # noise decides, or no track to tell: unknown
    counts = sources.counts()
    n_src = counts.astype(np.float64)
    n_reused = np.zeros(n)
    if (flash_code >= 0).any():
        for c0, c1, r0, r1 in _flash_groups(flash_code, counts):
            parts = []
            for b0 in range(r0, r1, _BLOCK_EVENTS):
                b1 = min(b0 + _BLOCK_EVENTS, r1)
                ev, keep, fl, cell, t_abs, limit = _block_cells(flash_code, time_ns,
                                                                sources.rows(b0, b1), b0)
                keep &= (fl >= c0) & (fl < c1)
                parts.append((ev[keep], fl[keep], cell[keep], t_abs[keep], limit[keep]))
            ev, fl, cell, t_abs, limit = (np.concatenate(x) for x in zip(*parts))
            del parts
            if len(ev):
                hit = _reused_in_cells(fl, cell, t_abs, limit)
                n_reused += np.bincount(ev, hit, minlength=n)
    has = (n_src > 0) & (flash_code >= 0)   # without a flash: unknown (NaN), not 0
    out[has] = n_reused[has] / n_src[has]
    return out


def _sorted_lookup(keys, probe):
    """``np.searchsorted(keys, probe)`` for sorted ``keys``, in linear time when ``probe``
    is sorted too (the probes of sources taken in key order nearly always are)."""
    if probe.size > 1 and not (probe[1:] >= probe[:-1]).all():
        return np.searchsorted(keys, probe)
    # keys[k] < probe[p] exactly when the probes not above keys[k] come before p
    counts = np.bincount(np.searchsorted(probe, keys, side="right"), minlength=probe.size + 1)
    return np.cumsum(counts[:probe.size])


def _reused_in_cells(fl, cell, t_abs, limit):
    """Whether a source's own or an adjacent cell of its flash was hit before ``limit``.

    Sources are taken in the order of their own keys: the keys of each neighbour probe
    then come sorted, and are looked up by a merge instead of a binary search each.
    """
    base, fields = _key_fields(fl, cell)
    own = base.copy()
    for f in fields:
        own |= f[1]
    order = np.argsort(own, kind="stable")
    base, fields = _key_fields(fl[order], cell[order])
    own = own[order]
    new = np.ones(own.size, dtype=bool)
    new[1:] = own[1:] != own[:-1]
    keys = own[new]
    first = np.minimum.reduceat(t_abs[order], np.flatnonzero(new))  # earliest per cell
    limit = limit[order]
    hit = np.zeros(len(fl), dtype=bool)
    for offs in itertools.product(range(3), repeat=len(fields)):
        probe = base.copy()
        for axis, o in zip(fields, offs):
            probe |= axis[o]
        loc = np.minimum(_sorted_lookup(keys, probe), len(keys) - 1)
        found = keys[loc] == probe
        hit[found] |= first[loc[found]] <= limit[found]
    out = np.empty_like(hit)
    out[order] = hit
    return out


def flash_context(events, time_ns, sources=None, flash_codes=None):
    """Compute the flash-context features of every pulse of a catalog.

    Parameters
    ----------
    events : pandas.DataFrame
        The catalog's events table (``flash_id`` column, "" for none).
    time_ns : ndarray of int64, shape (n_events,)
        Trigger times, nanoseconds since 1970-01-01 UTC.
    sources : features._tables.SourceTable or None
        The catalog's sources.
    flash_codes : ndarray of int, shape (n_events,), optional
        Flash of every pulse (-1: none) to use instead of ``events["flash_id"]``: the
        flashes grouped by :func:`features.flashes.group_flashes` for a catalog that
        gives no flash ids.

    Returns
    -------
    dict of str -> ndarray, shape (n_events,)
        ``time_in_flash_s``, ``isolation_s``, ``isolation_any_s``,
        ``flash_n_pulses``, ``channel_reuse``.
    """
    n = len(events)
    if flash_codes is not None:
        code = np.asarray(flash_codes, dtype=np.int64)
        has_flash = code >= 0
    else:
        flash = events["flash_id"].astype(str).to_numpy(dtype=object)
        has_flash = flash != ""
        code = np.full(n, -1, dtype=np.int64)
        if has_flash.any():
            code[has_flash] = pd.factorize(flash[has_flash])[0]
    t = np.asarray(time_ns, dtype=np.int64)
    # each flash-less pulse is its own group for isolation within a flash
    groups = np.where(has_flash, code, -1 - np.arange(n))
    isolation = _nearest_gap_s(t, groups)
    isolation_any = _nearest_gap_s(t, np.zeros(n, dtype=np.int64))
    size = np.ones(n)
    t_in = np.full(n, np.nan)
    if has_flash.any():
        c = code[has_flash]
        counts = np.bincount(c)
        size[has_flash] = counts[c]
        first = np.full(counts.size, np.iinfo(np.int64).max)
        np.minimum.at(first, c, t[has_flash])
        t_in[has_flash] = (t[has_flash] - first[c]).astype(np.float64) * 1e-9
    if not has_flash.any():
        size[:] = np.nan
    reuse = _channel_reuse(code, t, sources)
    # a pulse alone in its flash has no flash context: unknown, not "first" or "no reuse"
    # (a station that catalogues one record per trigger, or misses the rest of a flash,
    # has many such pulses; their time in the flash is not 0)
    alone = size == 1
    t_in[alone] = np.nan
    reuse[alone] = np.nan
    return {
        "time_in_flash_s": t_in,
        "isolation_s": isolation,
        "isolation_any_s": isolation_any,
        "flash_n_pulses": size,
        "channel_reuse": reuse,
    }
