"""Flash grouping: give pulses without flash ids the flash they belong to.

Two pulses are *linked* when they are close in time and, where both have a
position, close in space::

    |t_a - t_b| <= gap_s   and   |x_a - x_b| <= distance_m   and   |y_a - y_b| <= distance_m

(a Chebyshev distance on ``(t / gap_s, x / distance_m, y / distance_m)``), and a
flash is a connected group of linked pulses (single linkage). So a flash ends after
a quiet gap of more than ``gap_s``, and two flashes at the same time stay apart when
their pulses are more than ``distance_m`` from each other.

The numbers:

- ``gap_s = 0.5``: interstroke intervals are typically tens of ms and rarely above
  ~0.5 s, and in-cloud activity of one flash fills it (Rakov & Uman 2003, ch. 4 and 9;
  from memory). Grouping algorithms in the trade use gaps of a few hundred ms; the
  exact value is common practice, no source.
- ``distance_m = 10e3``: a flash's channels extend over some kilometres to tens of
  kilometres horizontally (from memory); a 10 km link length (chained from pulse to
  pulse, so a flash may be larger) is common practice, no source.

A pulse's horizontal position (x east, y north from the station, m) comes from its
mapped sources: the mean of their ``x_m, y_m`` when the catalog has 3-D positions,
otherwise its ``range_m`` along the mean azimuth of its sources. A pulse without a
position joins the flash of the nearest pulse in time that has one (within the same
gap-separated stretch), or is grouped by time alone when none of its stretch has one.
"""

from __future__ import annotations

import logging
import os
import shutil
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from ._checks import InputError, is_real_number
from .catalog import Catalog, open_catalog
from .writer import staged_folder, write_events, write_manifest

__all__ = ["FlashSettings", "assign_flash_ids", "group_catalog_flashes", "group_flashes",
           "pulse_positions_m"]

logger = logging.getLogger("pulsesort")

#: Pulses per call of the pair search (whole gap-separated stretches are kept together).
_BATCH = 50_000


@dataclass(frozen=True)
class FlashSettings:
    """Thresholds of flash grouping.

    Attributes
    ----------
    gap_s : float, default=0.5
        Longest quiet time inside one flash, s.
    distance_m : float, default=10e3
        Largest east or north distance between two linked pulses, m.
    """

    gap_s: float = 0.5
    distance_m: float = 10e3

    def __post_init__(self):
        for k in ("gap_s", "distance_m"):
            v = getattr(self, k)
            if not is_real_number(v) or v <= 0:
                raise InputError(f"flash grouping: '{k}' must be a number > 0, got {v!r}")

    def to_manifest(self) -> dict:
        """JSON-ready description of the method (for the catalog's manifest)."""
        return {"method": "single linkage in time and horizontal position",
                "link": "|dt| <= gap_s and |dx|, |dy| <= distance_m", **asdict(self),
                "position": "mean source x/y, else range_m along the mean source azimuth"}


def pulse_positions_m(catalog: Catalog) -> np.ndarray:
    """Horizontal position of every pulse, shape (n_events, 2): x east, y north, m.

    NaN where the pulse has no sources, or only angles and no ``range_m``.
    """
    n = catalog.n_events
    out = np.full((n, 2), np.nan)
    src = catalog.sources
    if src is None or src.n_sources == 0:
        return out
    counts = src.counts()
    has = counts > 0
    starts = src.offsets[:-1][has]
    if src.has_xyz:
        xy = np.asarray(src.xyz_m[:, :2], dtype=np.float64)
        ok = np.isfinite(xy).all(axis=1)
        sums = np.add.reduceat(np.where(ok[:, None], xy, 0.0), starts, axis=0)
        cnt = np.add.reduceat(ok.astype(np.float64), starts)
        with np.errstate(invalid="ignore"):
            out[has] = sums / cnt[:, None]
        missing = ~np.isfinite(out).all(axis=1)
    else:
        missing = np.ones(n, dtype=bool)
    az = np.radians(np.asarray(src.azimuth_deg, dtype=np.float64))
    e = np.add.reduceat(np.sin(az), starts)
    nn = np.add.reduceat(np.cos(az), starts)
    mean_az = np.full(n, np.nan)
    mean_az[has] = np.arctan2(e, nn)
    rng = catalog.range_m
    use = missing & np.isfinite(mean_az) & np.isfinite(rng)
    out[use, 0] = rng[use] * np.sin(mean_az[use])
    out[use, 1] = rng[use] * np.cos(mean_az[use])
    return out


def group_flashes(time_ns, xy_m=None, settings: FlashSettings | None = None) -> np.ndarray:
    """Flash number of every pulse (0, 1, ... in order of each flash's first pulse).

    Parameters
    ----------
    time_ns : array_like of int64, shape (n,)
        Pulse times, ns since 1970-01-01 UTC (any order).
    xy_m : ndarray, shape (n, 2), optional
        Horizontal positions in m (x east, y north), NaN where unknown. None: time only.
    settings : FlashSettings, optional

    Returns
    -------
    ndarray of int64, shape (n,)

    Examples
    --------
    >>> group_flashes([0, 100_000_000, 2_000_000_000]).tolist()   # 0.1 s and 1.9 s gaps
    [0, 0, 1]
    """
    s = settings or FlashSettings()
    t = np.asarray(time_ns, dtype=np.int64)
    n = t.size
    if n == 0:
        return np.empty(0, np.int64)
    xy = np.full((n, 2), np.nan) if xy_m is None else np.asarray(xy_m, dtype=np.float64)
    order = np.argsort(t, kind="stable")
    ts = (t[order] - t[order[0]]) / 1e9  # s, sorted
    xys = xy[order]
    gap = np.diff(ts) > s.gap_s
    stretch = np.concatenate([[0], np.cumsum(gap)])  # gap-separated stretches
    located = np.isfinite(xys).all(axis=1)
    # linked pairs among located pulses, stretch batches of about _BATCH pulses
    bounds = np.flatnonzero(np.diff(stretch)) + 1
    cuts = [0]
    for b in bounds:  # batch edges on stretch edges (a loop over stretch edges only)
        if b - cuts[-1] >= _BATCH:
            cuts.append(int(b))
    cuts.append(n)
    rows, cols = [], []
    for a, b in zip(cuts[:-1], cuts[1:]):
        idx = np.flatnonzero(located[a:b]) + a
        if idx.size < 2:
            continue
        pts = np.column_stack([ts[idx] / s.gap_s, xys[idx] / s.distance_m])
        pairs = cKDTree(pts).query_pairs(1.0, p=np.inf, output_type="ndarray")
        rows.append(idx[pairs[:, 0]])
        cols.append(idx[pairs[:, 1]])
    # unlocated pulses: link to the nearest located pulse in time within the stretch,
    # else to the previous pulse of the stretch (time only)
    loc_idx = np.flatnonzero(located)
    un = np.flatnonzero(~located)
    if un.size:
        if loc_idx.size:
            j = np.searchsorted(ts[loc_idx], ts[un])
            lo = loc_idx[np.clip(j - 1, 0, loc_idx.size - 1)]
            hi = loc_idx[np.clip(j, 0, loc_idx.size - 1)]
            near = np.where(np.abs(ts[hi] - ts[un]) < np.abs(ts[un] - ts[lo]), hi, lo)
            same = stretch[near] == stretch[un]
        else:
            near, same = un, np.zeros(un.size, bool)
        rows.append(un[same])
        cols.append(near[same])
        alone = un[~same]
        prev = alone - 1
        ok = (prev >= 0) & (stretch[np.maximum(prev, 0)] == stretch[alone]) & \
            ~located[np.maximum(prev, 0)]
        rows.append(alone[ok])
        cols.append(prev[ok])
    r = np.concatenate(rows) if rows else np.empty(0, np.int64)
    c = np.concatenate(cols) if cols else np.empty(0, np.int64)
    graph = coo_matrix((np.ones(r.size, np.int8), (r, c)), shape=(n, n))
    _, comp = connected_components(graph, directed=False)
    # renumber in order of each flash's first pulse
    first = np.full(comp.max() + 1, n, dtype=np.int64)
    np.minimum.at(first, comp, np.arange(n))
    rank = np.empty_like(first)
    rank[np.argsort(first, kind="stable")] = np.arange(first.size)
    out = np.empty(n, np.int64)
    out[order] = rank[comp]
    return out


def assign_flash_ids(labels: np.ndarray, prefix: str) -> np.ndarray:
    """Flash numbers -> id strings ``f"{prefix}{number:06d}"`` (object array)."""
    return np.char.add(prefix, np.char.zfill(labels.astype(str), 6)).astype(object)


def _link_or_copy(src: Path, dst: Path) -> None:
    """Hard-link a waveform file (no second copy of a large array), else copy it."""
    try:
        os.link(src, dst)
    except OSError:
        shutil.copyfile(src, dst)


def group_catalog_flashes(catalog, out, *, settings: FlashSettings | None = None,
                          replace: bool = False, overwrite: bool = False) -> Path:
    """Write a copy of a catalog whose events carry grouped flash ids.

    Parameters
    ----------
    catalog : path or Catalog
        The catalog to read.
    out : path
        The new catalog folder (written all or nothing).
    settings : FlashSettings, optional
    replace : bool, default=False
        Regroup a catalog that already has flash ids (the old ones are kept in a
        column ``flash_id_before``); without it such a catalog is refused.
    overwrite : bool, default=False
        Replace an existing ``out``.

    Returns
    -------
    Path
        The new catalog; its manifest has a ``"flash_grouping"`` object recording the
        method, thresholds and flash count. The waveform files are hard-linked where
        the file system allows (they are never modified), else copied.
    """
    s = settings or FlashSettings()
    cat = catalog if isinstance(catalog, Catalog) else open_catalog(catalog)
    ev = cat.events.copy()
    has_ids = (ev["flash_id"] != "").any()
    if has_ids and not replace:
        raise InputError(f"{cat.path / 'events.csv'}: column 'flash_id' already holds flash "
                         "ids; pass replace=True (--replace) to regroup (the old ids are "
                         "kept in 'flash_id_before')")
    if Path(out).expanduser().resolve() == cat.path:
        raise InputError(f"{out}: the output must be a new folder, not the catalog read")
    labels = group_flashes(cat.time_ns, pulse_positions_m(cat), s)
    if has_ids:
        ev["flash_id_before"] = ev["flash_id"]
    ev["flash_id"] = assign_flash_ids(labels, f"{cat.catalog_id}-flash-")
    man = dict(cat.manifest)
    n_flashes = int(labels.max()) + 1 if labels.size else 0
    man["flash_grouping"] = {**s.to_manifest(), "n_flashes": n_flashes,
                             "grouped_from": str(cat.path.name)}
    with staged_folder(out, overwrite=overwrite) as tmp:
        write_events(tmp / man.get("events", "events.csv"), ev)
        for key in ("field", "vhf", "sources"):
            spec = man.get(key)
            if isinstance(spec, dict) and "file" in spec:
                dst = tmp / spec["file"]
                dst.parent.mkdir(parents=True, exist_ok=True)
                _link_or_copy(cat.path / spec["file"], dst)
        if man.get("sources") is None and (cat.path / "sources.csv").is_file():
            _link_or_copy(cat.path / "sources.csv", tmp / "sources.csv")
        write_manifest(tmp / "catalog.json", man)
    logger.info("flashes: %d pulses in %d flashes -> %s", cat.n_events, n_flashes, out)
    return Path(out).expanduser()
