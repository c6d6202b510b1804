"""Write a simulated season as a catalog v1 folder, chunk by chunk, atomically.

The writer follows /work/shared/spec/catalog-v1.md on its own (it does not use the
project's catalog reader): ``catalog.json``, ``events.csv``, ``field.npy``, optional
``vhf.npy`` and ``sources.csv``, plus the truth labels next to the folder. Arrays are
filled through ``numpy.lib.format.open_memmap`` and CSV rows appended per chunk, so
memory stays flat whatever the number of events; everything goes to a temporary folder
next to the target, renamed into place at the end.
"""

from __future__ import annotations

import json
import logging
import shutil
from pathlib import Path
from typing import NamedTuple

import numpy as np
import pandas as pd
from numpy.lib.format import open_memmap

from ._classes import ALL_CLASSES, CLASSES
from ._fields import field_supports
from ._render import BlockRenderer, clip_counts, digitize_field, digitize_vhf, sources_table
from ._season import (
    BLOCK_EVENTS,
    SeasonClock,
    block_quotas,
    generate_block,
    season_start_ns,
)
from ._settings import render_settings
from ._station import MappingDown, add_sferics, pulse_peaks_v_per_m, select_triggers

__all__ = ["Block", "event_order", "event_table", "iter_blocks", "write_season"]

logger = logging.getLogger("pulsesort")
FORMAT_VERSION = 1


class Block(NamedTuple):
    """One block of a season, ready to render."""

    index: int
    pulses: dict
    flash_start_ns: np.ndarray
    first_flash: int
    noise_rngs: list
    supports: object  # the trigger's field supports (Supports) or None


def _quotas(s, n_events):
    """Class quotas of each block: the season's split, or endless equal blocks when the
    station's trigger decides what is catalogued."""
    if s.catalog_practice == "every_pulse":
        yield from block_quotas(n_events, s.class_mix)
        return
    quota = block_quotas(min(n_events, BLOCK_EVENTS), s.class_mix)[0]
    while True:
        yield quota


def iter_blocks(s, n_events, seed, sferics=True):
    """Yield the :class:`Block` s of a season until it holds ``n_events`` events.

    Every block has its own random streams (``SeedSequence(seed, spawn_key=(block, k))``):
    k = 0 the flashes, 1 field noise, 2 VHF noise, 3 sources and missing rows (each drawn
    in row order, so the output does not depend on the chunking), 4 sferics. The station's
    settings ``s`` decide everything drawn here, so a truth twin gets the same blocks
    (it passes ``sferics=False``: the sferics have their own stream).
    """
    clock = SeasonClock(s.season_year, np.random.default_rng(
        np.random.SeedSequence(seed, spawn_key=(1 << 30,))))
    first_flash = row0 = empty = 0
    for b, quota in enumerate(_quotas(s, n_events)):
        def stream(k, b=b):
            return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(b, k)))
        pulses, starts = generate_block(s, quota, stream(0), clock)
        sup = None
        if s.catalog_practice == "one_per_trigger":
            sup = field_supports(pulses, np.arange(pulses["t_s"].size), s)
            select_triggers(pulses, pulse_peaks_v_per_m(sup), s)
        ev = event_order(pulses)
        pulses["catalogued"][ev[n_events - row0:]] = False  # the season is full
        n_new = min(ev.size, n_events - row0)
        empty = 0 if n_new else empty + 1
        if empty >= 20:
            raise ValueError(
                f"no pulse of the class mix reaches the trigger level "
                f"({s.station_trigger_level_v_per_m!r} V/m) in 20 blocks of flashes: lower "
                "setting 'trigger_level_v_per_m' or change 'class_mix' or 'range_km'")
        if n_new:
            if sferics:
                pulses = add_sferics(pulses, s, stream(4))
            yield Block(b, pulses, starts, first_flash, [stream(k) for k in (1, 2, 3)], sup)
        first_flash += len(starts)
        row0 += n_new
        if row0 >= n_events:
            return


def event_order(p):
    """Pulse indices of the catalogued pulses in record order (flash, then trigger)."""
    ev = np.flatnonzero(p["catalogued"])
    return ev[np.lexsort((p["trigger_s"][ev], p["flash"][ev]))]


def _ids(s, rows, n_events):
    width = max(7, len(str(max(n_events - 1, 0))))
    return [f"{s.catalog_id}-{r:0{width}d}" for r in rows]


def event_table(s, p, ev_idx, starts, first_flash, first_row, n_events):
    """The events.csv columns of a block (and the label, kept apart by the caller)."""
    t_ns = starts[p["flash"][ev_idx]] + np.round(p["trigger_s"][ev_idx] * 1e9).astype(np.int64)
    time_utc = np.char.add(np.datetime_as_string(t_ns.astype("datetime64[ns]"), unit="ns"),
                           "Z")
    table = {
        "event_id": _ids(s, range(first_row, first_row + ev_idx.size), n_events),
        "time_utc": time_utc,
        "flash_id": [f"{s.catalog_id}-f{first_flash + f:06d}" for f in p["flash"][ev_idx]],
    }
    if s.with_range:
        table["range_m"] = np.round(np.hypot(p["x_m"][ev_idx], p["y_m"][ev_idx]), 1)
    return pd.DataFrame(table)


def _pilot_full_scale(s, renderer):
    """Clip level (V/m) that about ``clip_fraction`` of the first block's rows exceed."""
    peaks = np.concatenate([np.abs(renderer.field_rows(a, b)).max(axis=1)
                            for a, b in renderer.row_chunks()])
    level = float(np.quantile(peaks, 1.0 - s.clip_fraction)) if s.clip_fraction > 0 else (
        float(peaks.max()) * 1.5)
    level = float(f"{max(level, 1e-3):.3g}")
    if s.units == "counts":
        level = clip_counts(s, max(level, s.scale))[1]
    return level


def _manifest(s, rs, full_scale, seed, n_events, summary):
    field = {"file": "field.npy", "sample_rate_hz": rs.field_rate_hz,
             "pretrigger_s": rs.pretrigger_s, "units": rs.units, "scale": rs.scale,
             "sign_convention": rs.sign_convention, "decay_time_s": rs.decay_time_s,
             "delay_s": rs.field_delay_s}
    if full_scale is not None:
        field["full_scale"] = full_scale
    out = {"format": "pulse-catalog", "version": FORMAT_VERSION, "catalog_id": s.catalog_id,
           "station": s.station, "season": s.season, "events": "events.csv", "field": field}
    if s.with_vhf:
        out["vhf"] = {"file": "vhf.npy", "sample_rate_hz": rs.vhf_rate_hz,
                      "pretrigger_s": rs.vhf_pretrigger_s, "kind": rs.vhf_kind,
                      "band_hz": list(rs.band_hz), "delay_s": rs.vhf_delay_s}
        if rs.vhf_full_scale is not None:
            out["vhf"]["full_scale"] = rs.vhf_full_scale
    if s.with_sources:
        out["sources"] = {"file": "sources.csv"}
    out["simulation"] = {"generator": "pulsesort features.simulate", "seed": seed,
                         "n_events": n_events, "truth_twin": s.truth_twin,
                         "settings": s.as_dict(), "summary": summary}
    return out


def _append_csv(df, path, first):
    df.to_csv(path, mode="w" if first else "a", header=first, index=False,
              float_format="%.10g", lineterminator="\n")


def _sources_frame(src, event_ids, s, keep):
    """The sources.csv rows of a block (events without mapping left out)."""
    ok = keep[src["row"]]
    cols = {"event_id": event_ids[src["row"][ok]], "t_s": np.round(src["t_s"][ok], 10),
            # rounding can give 360.0: azimuth lives in [0, 360)
            "azimuth_deg": np.round(src["azimuth_deg"][ok], 4) % 360.0,
            "elevation_deg": np.round(src["elevation_deg"][ok], 4)}
    if s.with_xyz:
        for k in ("x_m", "y_m", "z_m"):
            cols[k] = np.round(src[k][ok], 1)
    cols["power_db"] = np.round(src["power_db"][ok], 2)
    return pd.DataFrame(cols)


def write_season(folder: Path, labels_path: Path, s, n_events: int, seed: int) -> dict:
    """Write every file of the season into ``folder`` and the labels to ``labels_path``.

    With ``s.truth_twin`` the same season is written through the twin's instrument
    (:func:`._settings.render_settings`); every random draw still follows ``s``.

    Returns
    -------
    dict
        Summary: events per class, number of flashes, sources, clipped rows.
    """
    twin = s.truth_twin
    rs = render_settings(s)
    field_dtype = np.float64 if twin else np.int16 if s.units == "counts" else np.float32
    arrays = {"field": folder / "field.npy"}
    open_memmap(arrays["field"], mode="w+", dtype=field_dtype,
                shape=(n_events, s.field_samples)).flush()
    if s.with_vhf:
        arrays["vhf"] = folder / "vhf.npy"
        open_memmap(arrays["vhf"], mode="w+", dtype=np.float64 if twin else np.float32,
                    shape=(n_events, s.vhf_samples)).flush()
    full_scale = s.full_scale
    if full_scale is not None and s.units == "counts":
        full_scale = clip_counts(s, full_scale)[1]
    counts = dict.fromkeys(ALL_CLASSES, 0)
    n_flashes = n_sources = n_clipped = 0
    row0 = 0
    decided_at = f"{s.season_year}-12-01T00:00:00Z"
    down = MappingDown(s.mapping_down_fraction, season_start_ns(s.season_year),
                       np.random.default_rng(np.random.SeedSequence(
                           seed, spawn_key=((1 << 30) + 1,))))
    for blk in iter_blocks(s, n_events, seed, sferics=not twin):
        p, first = blk.pulses, row0 == 0
        # map the arrays per block only, so memory (mapped pages too) stays flat
        field = open_memmap(arrays["field"], mode="r+")
        vhf = open_memmap(arrays["vhf"], mode="r+") if s.with_vhf else None
        r = BlockRenderer(p, rs, known=None if twin else blk.supports, own_only=twin)
        if full_scale is None and not twin:
            full_scale = _pilot_full_scale(s, r)
        ev_idx = r.ev_idx
        field_rng, vhf_rng, misc_rng = blk.noise_rngs
        missing = (misc_rng.random(r.n_rows) < s.missing_vhf_fraction) & (not twin)
        for a, z in r.row_chunks():
            if twin:  # as the antenna saw it: V/m, physics sign, no instrument
                field[row0 + a:row0 + z] = r.field_rows(a, z)
                if vhf is not None:
                    vhf[row0 + a:row0 + z] = s.vhf_gain * r.vhf_rows(a, z)
                continue
            rows = digitize_field(r.field_rows(a, z), s, full_scale, field_rng)
            field[row0 + a:row0 + z] = rows
            limit = (clip_counts(s, full_scale)[0] if s.units == "counts"
                     else np.float32(full_scale))
            n_clipped += int((np.abs(rows) >= limit).any(axis=1).sum())
            if vhf is not None:
                vhf[row0 + a:row0 + z] = digitize_vhf(r.vhf_rows(a, z), s, vhf_rng,
                                                      missing[a:z])
        events = event_table(s, p, ev_idx, blk.flash_start_ns, blk.first_flash, row0,
                             n_events)
        _append_csv(events, folder / "events.csv", first)
        labels = pd.DataFrame({
            "event_id": events["event_id"],
            "label": [ALL_CLASSES[c] for c in p["class_index"][ev_idx]],
            "analyst": "truth", "decided_at": decided_at,
            "note": np.where(p["margin"][ev_idx], "simulated; margin", "simulated")})
        _append_csv(labels, labels_path, first)
        if s.with_sources:
            src = sources_table(p, ev_idx, rs, misc_rng)
            # drawn after the sources: an outage removes them and changes nothing else
            outage = (misc_rng.random(r.n_rows) < s.mapping_outage_fraction
                      if s.mapping_outage_fraction > 0 else np.zeros(r.n_rows, bool))
            mapped = np.ones(r.n_rows, bool)
            if not twin:
                t_ns = blk.flash_start_ns[p["flash"][ev_idx]] + np.round(
                    p["trigger_s"][ev_idx] * 1e9).astype(np.int64)
                mapped = ~outage & ~down.is_down(t_ns)
            frame = _sources_frame(src, events["event_id"].to_numpy(), s, mapped)
            _append_csv(frame, folder / "sources.csv", first)
            n_sources += len(frame)
        for c, k in zip(ALL_CLASSES, np.bincount(p["class_index"][ev_idx],
                                                 minlength=len(ALL_CLASSES)), strict=True):
            counts[c] += int(k)
        n_flashes += len(np.unique(p["flash"][ev_idx]))
        row0 += r.n_rows
        field.flush()
        del field
        if vhf is not None:
            vhf.flush()
            del vhf
        logger.debug("simulate: block %d written (%d events so far)", blk.index, row0)
    assert row0 == n_events, (row0, n_events)
    counts = {c: n for c, n in counts.items() if c in CLASSES or n or s.class_mix[c] > 0}
    summary = {"events_per_class": counts, "n_flashes": n_flashes, "n_sources": n_sources,
               "n_rows_clipped": n_clipped, "block_events": BLOCK_EVENTS}
    manifest = _manifest(s, rs, None if twin else full_scale, seed, n_events, summary)
    (folder / "catalog.json").write_text(json.dumps(manifest, indent=2) + "\n",
                                         encoding="utf-8")
    return summary


def replace_atomically(tmp: Path, out: Path, labels_tmp: Path, labels: Path) -> None:
    """Move a finished temporary folder (and labels file) into place."""
    old = None
    if out.exists():
        old = out.parent / f".{out.name}.old"
        if old.exists():
            shutil.rmtree(old)
        out.rename(old)
    tmp.rename(out)
    labels_tmp.replace(labels)
    if old is not None:
        shutil.rmtree(old)
