"""The one-pulse paper figure (see :mod:`classify.figures`) and its data from a catalog."""

from __future__ import annotations

import numpy as np
import pandas as pd

from features import InputError
from features.mapping import source_positions_m
from features.trace import pulse_trace

from ._figure_base import TIME_LABEL, check_size, new_figure, style_context
from .svgplot import PALETTE

VHF_FLOOR_DB = 60.0
_TRACE_KEYS = ("time_s", "field_v_per_m")


def _check_trace(trace: dict) -> None:
    problems = [f"trace: missing key {k!r}" for k in _TRACE_KEYS if k not in trace]
    if not problems:
        n = len(np.asarray(trace["time_s"]))
        if len(np.asarray(trace["field_v_per_m"])) != n:
            problems.append(f"trace: 'field_v_per_m' has {len(trace['field_v_per_m'])} "
                            f"samples, 'time_s' {n}")
        if trace.get("vhf_envelope") is not None and len(trace["vhf_envelope"]) != len(
                trace.get("vhf_time_s", ())):
            problems.append("trace: 'vhf_envelope' and 'vhf_time_s' differ in length")
        if len(np.atleast_1d(trace.get("neighbours_s", ()))) != len(
                np.atleast_1d(trace.get("neighbour_peaks_v_per_m", ()))):
            problems.append("trace: 'neighbours_s' and 'neighbour_peaks_v_per_m' differ in "
                            "length")
        ext = trace.get("extent_s")
        if ext is not None and (len(ext) != 2 or not ext[0] <= ext[1]):
            problems.append(f"trace: 'extent_s' must be (start, end) with start <= end, got "
                            f"{ext!r}")
    if problems:
        raise InputError(problems)


def pulse_figure(trace: dict, sources: pd.DataFrame | None = None, *, size: str = "page",
                 title: str | None = None):
    """One pulse: field change, VHF power, sources on the sky and their altitude.

    Parameters
    ----------
    trace : dict
        ``time_s`` (physical time from the trigger, s) and ``field_v_per_m``
        (baseline removed, decay-compensated, physics convention), both
        shape (m,); optional ``extent_s`` (start, end of the pulse, s),
        ``neighbours_s`` and ``neighbour_peaks_v_per_m`` (other pulses in the
        record: times in s, peaks in V/m), ``vhf_time_s`` and ``vhf_envelope``
        (smoothed linear VHF power, catalog units).
    sources : pandas.DataFrame, optional
        The pulse's mapped sources: ``t_s`` (from the trigger, s),
        ``azimuth_deg``, ``elevation_deg``, optional ``altitude_m``.
    size : {"column", "page"}, default="page"
    title : str, optional

    Returns
    -------
    matplotlib.figure.Figure
    """
    _check_trace(trace)
    if sources is not None:
        missing = [c for c in ("t_s", "azimuth_deg", "elevation_deg") if c not in sources]
        if missing:
            raise InputError(f"sources: missing column(s) {missing}")
    has_vhf = trace.get("vhf_envelope") is not None and len(trace["vhf_envelope"]) > 1
    src = None if sources is None or len(sources) == 0 else sources
    has_alt = (src is not None and "altitude_m" in src.columns
               and np.isfinite(src["altitude_m"].to_numpy(float)).any())
    panels = ["field"] + (["vhf"] if has_vhf else []) + (["sky"] if src is not None else []) \
        + (["altitude"] if has_alt else [])
    width = check_size(size)
    with style_context(size):
        if size == "column":
            fig = new_figure(size, 1.6 * len(panels) + 0.3)
            axes = dict(zip(panels, fig.subplots(len(panels), 1, squeeze=False)[:, 0]))
            if has_vhf:
                axes["vhf"].sharex(axes["field"])
        else:
            fig = new_figure(size, 0.45 * width)
            grid = fig.add_gridspec(2, 2 if src is not None else 1,
                                    width_ratios=(3, 2) if src is not None else None)
            axes = {"field": fig.add_subplot(grid[0, 0] if has_vhf else grid[:, 0])}
            if has_vhf:
                axes["vhf"] = fig.add_subplot(grid[1, 0], sharex=axes["field"])
            if src is not None:
                axes["sky"] = fig.add_subplot(grid[0, 1] if has_alt else grid[:, 1])
            if has_alt:
                axes["altitude"] = fig.add_subplot(grid[1, 1])
        _draw_field(axes["field"], trace)
        if has_vhf:
            _draw_vhf(axes["vhf"], trace)
        if src is not None:
            _draw_sources(fig, axes.get("sky"), axes.get("altitude"), src)
        if title:
            fig.suptitle(title)
    return fig


def _shade_extent(ax, trace):
    ext = trace.get("extent_s")
    if ext is not None and np.all(np.isfinite(ext)):
        ax.axvspan(ext[0] * 1e6, ext[1] * 1e6, color=PALETTE[4], alpha=0.25, lw=0,
                   label="pulse")


def _draw_field(ax, trace):
    t = np.asarray(trace["time_s"], float) * 1e6
    ax.axhline(0.0, color="0.7", lw=0.5)
    _shade_extent(ax, trace)
    ax.plot(t, np.asarray(trace["field_v_per_m"], float), color=PALETTE[0], lw=0.8)
    nb = np.atleast_1d(np.asarray(trace.get("neighbours_s", ()), float)) * 1e6
    if nb.size:
        peaks = np.atleast_1d(np.asarray(trace["neighbour_peaks_v_per_m"], float))
        ax.plot(nb, peaks, "v", color=PALETTE[1], ms=3.5, label="neighbouring pulses")
    ax.set_xlim(float(np.nanmin(t)), float(np.nanmax(t)))
    ax.set_xlabel(TIME_LABEL)
    ax.set_ylabel("E, + up (V/m)")
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="best", frameon=False)


def _draw_vhf(ax, trace):
    env = np.asarray(trace["vhf_envelope"], float)
    top = np.nanmax(env) if np.isfinite(env).any() else np.nan
    with np.errstate(divide="ignore", invalid="ignore"):
        db = 10.0 * np.log10(np.maximum(env / top, 10 ** (-VHF_FLOOR_DB / 10)))
    _shade_extent(ax, trace)
    ax.plot(np.asarray(trace["vhf_time_s"], float) * 1e6, db, color=PALETTE[2], lw=0.8)
    ax.set_ylim(-VHF_FLOOR_DB, 3)
    ax.set_xlabel(TIME_LABEL)
    ax.set_ylabel("VHF power re peak (dB)")


def _draw_sources(fig, sky, alt_ax, src):
    t = src["t_s"].to_numpy(float) * 1e6
    kw = dict(c=t, cmap="viridis", s=9, vmin=float(np.nanmin(t)), vmax=float(np.nanmax(t)))
    points = sky.scatter(src["azimuth_deg"].to_numpy(float),
                         src["elevation_deg"].to_numpy(float), **kw)
    sky.set_xlabel("Azimuth from north (deg)")
    sky.set_ylabel("Elevation (deg)")
    bar = fig.colorbar(points, ax=[a for a in (sky, alt_ax) if a is not None])
    bar.set_label(TIME_LABEL)
    if alt_ax is not None:
        alt_ax.scatter(t, src["altitude_m"].to_numpy(float) * 1e-3, **kw)
        alt_ax.set_xlabel(TIME_LABEL)
        alt_ax.set_ylabel("Altitude (km)")


# ----------------------------------------------------------------------- from a catalog
def _sources_of(catalog, row: int) -> pd.DataFrame | None:
    """The mapped sources of one row (altitude from the catalog's x/y/z when it has them)."""
    if catalog.sources is None:
        return None
    s = catalog.sources.rows(row, row + 1)
    if s.n_sources == 0:
        return None
    df = pd.DataFrame({"t_s": s.t_s, "azimuth_deg": s.azimuth_deg,
                       "elevation_deg": s.elevation_deg})
    pos = source_positions_m(s, catalog.range_m[row:row + 1])
    if np.isfinite(pos[:, 2]).any():
        df["altitude_m"] = pos[:, 2]     # above the curved Earth (features.mapping)
    return df.sort_values("t_s", kind="stable").reset_index(drop=True)


def pulse_figure_from_catalog(catalog, event_id: str, *, size: str = "page"):
    """:func:`pulse_figure` of one event of a catalog.

    Raises
    ------
    features.InputError
        If the catalog has no such event.
    """
    rows = np.flatnonzero(catalog.event_ids == str(event_id))
    if rows.size == 0:
        raise InputError(f"{catalog.path / 'events.csv'}: no event_id {event_id!r} in "
                         f"catalog {catalog.catalog_id}")
    row = int(rows[0])
    return pulse_figure(pulse_trace(catalog, row), _sources_of(catalog, row),
                        size=size, title=f"{catalog.catalog_id} {event_id}")
