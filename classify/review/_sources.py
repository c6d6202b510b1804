"""Mapped sources of one pulse for the page, and the channel mapped earlier in its flash.

Positions are east, north, up from the station in metres: the catalog's
``x_m, y_m, z_m`` when it has them, else the pulse's ``range_m`` with the
source's azimuth and elevation (the positions the source-speed features use,
from the same helper of :mod:`features.mapping`). Without either there are only
directions (the page then shows the sky and elevation against time, no plan
or altitude view).

The earlier channel is every source of the pulses of the same ``flash_id``
triggered before this one (the latest :data:`MAX_EARLIER_PULSES` of them):
drawn faintly under the pulse's own sources, it shows a channel being reused,
as a recoil leader retraces one (the flash context's ``channel_reuse`` feature
counts the same overlap, :mod:`features.context`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from features.mapping import source_positions_m

from ._trace import compact

__all__ = ["MAX_EARLIER_PULSES", "flash_codes", "source_view"]

#: At most this many earlier pulses of the flash are drawn (the latest ones).
MAX_EARLIER_PULSES = 200


def flash_codes(catalog) -> np.ndarray:
    """Integer code of each event's flash_id (-1 for none), shape (n_events,)."""
    fid = catalog.events["flash_id"].astype(str) if "flash_id" in catalog.events else None
    if fid is None:
        return np.full(catalog.n_events, -1, dtype=np.int64)
    codes, _ = pd.factorize(fid.where(fid != "", None), use_na_sentinel=True)
    return codes.astype(np.int64)


def _rows_sources(catalog, rows):
    """Sources of the given event rows: (t_s, az, el, positions (n, 3) or None, row of each)."""
    parts = [catalog.sources.rows(int(r), int(r) + 1) for r in rows]
    parts = [(r, p) for r, p in zip(rows, parts) if p.n_sources]
    if not parts:
        return None
    t = np.concatenate([p.t_s for _, p in parts])
    az = np.concatenate([p.azimuth_deg for _, p in parts])
    el = np.concatenate([p.elevation_deg for _, p in parts])
    owner = np.concatenate([np.full(p.n_sources, r) for r, p in parts])
    pos = np.concatenate([source_positions_m(p, catalog.range_m[r:r + 1]) for r, p in parts])
    return t, az, el, pos, owner


def _position_kind(catalog, pos) -> str | None:
    if not np.isfinite(pos).all(axis=1).any():
        return None
    return "xyz" if catalog.has_xyz else "range"


def _points(t_s, az, el, pos, kind) -> dict:
    out = {"t_s": compact(t_s, 7), "azimuth_deg": compact(az), "elevation_deg": compact(el)}
    for j, name in enumerate(("east_m", "north_m", "up_m")):
        out[name] = None if kind is None else compact(pos[:, j])
    return out


def source_view(catalog, row: int, codes=None) -> dict | None:
    """The sources of one pulse and of the earlier pulses of its flash, JSON-ready.

    Parameters
    ----------
    catalog : features.catalog.Catalog
    row : int
        The event's row in the catalog.
    codes : ndarray of int, shape (n_events,), optional
        :func:`flash_codes` of the catalog (computed once per session); without
        it, no earlier channel.

    Returns
    -------
    dict or None
        None when the pulse has no mapped sources. Otherwise ``t_s`` (s from
        the trigger), ``azimuth_deg``, ``elevation_deg``, ``east_m``,
        ``north_m``, ``up_m`` (None without positions), ``position``
        (``"xyz"``, ``"range"`` or None) and ``earlier``: None, or the same
        point lists for the earlier channel with ``age_s`` (how long before
        this pulse's trigger each was mapped, s), ``n_pulses`` and ``n_sources``.
    """
    if catalog.sources is None:
        return None
    own = _rows_sources(catalog, [row])
    if own is None:
        return None
    t, az, el, pos, _ = own
    order = np.argsort(t, kind="stable")
    kind = _position_kind(catalog, pos)
    out = _points(t[order], az[order], el[order], pos[order], kind)
    out["position"] = kind
    out["earlier"] = None
    if codes is None or codes[row] < 0:
        return out
    same = np.flatnonzero(codes == codes[row])
    tns = catalog.time_ns
    same = same[tns[same] < tns[row]]
    same = same[np.argsort(tns[same], kind="stable")][-MAX_EARLIER_PULSES:]
    prior = _rows_sources(catalog, same) if len(same) else None
    if prior is not None:
        pt, paz, pel, ppos, owner = prior
        age = (tns[row] - tns[owner]).astype(np.float64) * 1e-9 - pt
        early = _points(pt, paz, pel, ppos, kind if _position_kind(catalog, ppos) else None)
        early.update({"age_s": compact(age), "n_pulses": int(len(np.unique(owner))),
                      "n_sources": int(len(pt))})
        early.pop("t_s")
        out["earlier"] = early
    return out
