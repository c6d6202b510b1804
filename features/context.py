"""Flash context of each pulse: its place among the other catalogued pulses.

These features need the whole catalog (all pulses of a flash), not one row, so
they are computed once per catalog from ``events.csv`` and ``sources.csv``
before the waveform chunks (:func:`flash_context`).

Definitions:

* ``time_in_flash_s``: trigger time minus the earliest trigger of the flash
  (NaN when the pulse has no flash_id).
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
  cos elevation) and elevation. NaN for a pulse without sources. The age limit
  keeps a leader's own recent steps out: recoil leaders retrace channels made
  tens to hundreds of ms before (Rakov & Uman 2003, ch. 9; from memory),
  while a stepped leader keeps advancing into virgin air.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

__all__ = ["REUSE_CELL_M", "REUSE_CELL_DEG", "REUSE_MIN_AGE_S", "flash_context"]

#: Grid cell of the channel-reuse test with 3-D positions, metres.
REUSE_CELL_M = 300.0
#: Grid cell of the channel-reuse test on the sky, degrees.
REUSE_CELL_DEG = 0.3
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


def _channel_reuse(flash_code, time_ns, sources):
    n = len(flash_code)
    out = np.full(n, np.nan)
    if sources is None or sources.n_sources == 0:
        return out
    ev = np.asarray(sources.event_index, dtype=np.int64)
    fl = flash_code[ev]
    keep = fl >= 0
    if sources.xyz_m is not None:
        pos = np.asarray(sources.xyz_m, dtype=np.float64) / REUSE_CELL_M
    else:
        el = np.asarray(sources.elevation_deg, dtype=np.float64)
        az = np.asarray(sources.azimuth_deg, dtype=np.float64)
        pos = np.column_stack([az * np.cos(np.radians(el)), el]) / REUSE_CELL_DEG
    keep &= np.isfinite(pos).all(axis=1)
    # absolute source time in seconds (event trigger + t_s); float64 keeps ~0.5 us
    t_abs = time_ns[ev].astype(np.float64) * 1e-9 + np.asarray(sources.t_s, np.float64)
    cell = np.floor(np.where(np.isfinite(pos), pos, 0.0)).astype(np.int64)
    limit = time_ns[ev].astype(np.float64) * 1e-9 - REUSE_MIN_AGE_S
    reused = np.zeros(len(ev), dtype=bool)
    # flashes in blocks so that (flash, cell) always packs into one int64 key
    block = 1 << 20
    for lo in range(0, int(fl.max()) + 1 if keep.any() else 0, block):
        sel = keep & (fl >= lo) & (fl < lo + block)
        if sel.any():
            reused[sel] = _reused_in_cells(fl[sel] - lo, cell[sel], t_abs[sel], limit[sel])
    n_src = np.bincount(ev, minlength=n)
    n_reused = np.bincount(ev, reused, minlength=n)
    has = n_src > 0
    out[has] = n_reused[has] / n_src[has]
    # pulses with sources but no flash: nothing earlier to reuse
    return out


def _reused_in_cells(fl, cell, t_abs, limit):
    """Whether a source's own or an adjacent cell of its flash was hit before ``limit``."""
    dim = cell.shape[1]
    # one int64 key per (flash, cell): the flash (< 2**20) in the top bits, each
    # cell index (offset to be positive, clipped to its bit range) below
    bits = 42 // dim
    cell = np.clip(cell + (1 << (bits - 1)), 1, (1 << bits) - 2)

    def pack(cells):
        key = fl.astype(np.int64)
        for i in range(dim):
            key = (key << bits) | cells[:, i]
        return key

    uniq, inverse = np.unique(pack(cell), return_inverse=True)
    first = np.full(len(uniq), np.inf)
    np.minimum.at(first, inverse, t_abs)       # earliest source time per (flash, cell)
    hit = np.zeros(len(fl), dtype=bool)
    offsets = np.array(np.meshgrid(*([[-1, 0, 1]] * dim), indexing="ij")).reshape(dim, -1).T
    for off in offsets:
        probe = pack(cell + off)
        loc = np.minimum(np.searchsorted(uniq, probe), len(uniq) - 1)
        found = uniq[loc] == probe
        hit[found] |= first[loc[found]] <= limit[found]
    return hit


def flash_context(events, time_ns, sources=None):
    """Compute the flash-context features of every pulse of a catalog.

    Parameters
    ----------
    events : pandas.DataFrame
        The catalog's events table (``flash_id`` column, "" for none).
    time_ns : ndarray of int64, shape (n_events,)
        Trigger times, nanoseconds since 1970-01-01 UTC.
    sources : features._tables.SourceTable or None
        The catalog's sources.

    Returns
    -------
    dict of str -> ndarray, shape (n_events,)
        ``time_in_flash_s``, ``isolation_s``, ``isolation_any_s``,
        ``flash_n_pulses``, ``channel_reuse``.
    """
    n = len(events)
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
    return {
        "time_in_flash_s": t_in,
        "isolation_s": isolation,
        "isolation_any_s": isolation_any,
        "flash_n_pulses": size,
        "channel_reuse": reuse,
    }
