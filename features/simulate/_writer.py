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

import numpy as np
import pandas as pd
from numpy.lib.format import open_memmap

from ._classes import CLASSES
from ._render import BlockRenderer, clip_counts, digitize_field, digitize_vhf, sources_table
from ._season import BLOCK_EVENTS, SeasonClock, block_quotas, generate_block

__all__ = ["event_table", "iter_blocks", "write_season"]

logger = logging.getLogger("pulsesort")
FORMAT_VERSION = 1


def iter_blocks(s, n_events, seed):
    """Yield ``(block, pulses, flash_start_ns, first_flash, noise_rngs)`` for a season.

    ``noise_rngs`` are three generators (field noise, VHF noise, sources and missing
    rows): each is drawn in row order, so the output does not depend on the chunking.
    """
    clock = SeasonClock(s.season_year, np.random.default_rng(
        np.random.SeedSequence(seed, spawn_key=(1 << 30,))))
    first_flash = 0
    for b, quota in enumerate(block_quotas(n_events, s.class_mix)):
        gen = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(b, 0)))
        noise = [np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(b, k)))
                 for k in (1, 2, 3)]  # field noise, VHF noise, the rest: chunk-proof
        pulses, starts = generate_block(s, quota, gen, clock)
        yield b, pulses, starts, first_flash, noise
        first_flash += len(starts)


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


def _manifest(s, full_scale, seed, n_events, summary):
    field = {"file": "field.npy", "sample_rate_hz": s.field_rate_hz,
             "pretrigger_s": s.pretrigger_s, "units": s.units, "scale": s.scale,
             "sign_convention": s.sign_convention, "decay_time_s": s.decay_time_s,
             "delay_s": s.field_delay_s, "full_scale": full_scale}
    out = {"format": "pulse-catalog", "version": FORMAT_VERSION, "catalog_id": s.catalog_id,
           "station": s.station, "season": s.season, "events": "events.csv", "field": field}
    if s.with_vhf:
        out["vhf"] = {"file": "vhf.npy", "sample_rate_hz": s.vhf_rate_hz,
                      "pretrigger_s": s.vhf_pretrigger_s, "kind": s.vhf_kind,
                      "band_hz": list(s.band_hz), "delay_s": s.vhf_delay_s}
    if s.with_sources:
        out["sources"] = {"file": "sources.csv"}
    out["simulation"] = {"generator": "pulsesort features.simulate", "seed": seed,
                         "n_events": n_events, "settings": s.as_dict(), "summary": summary}
    return out


def _append_csv(df, path, first):
    df.to_csv(path, mode="w" if first else "a", header=first, index=False,
              float_format="%.10g", lineterminator="\n")


def write_season(folder: Path, labels_path: Path, s, n_events: int, seed: int) -> dict:
    """Write every file of the season into ``folder`` and the labels to ``labels_path``.

    Returns
    -------
    dict
        Summary: events per class, number of flashes, sources, clipped rows.
    """
    field_dtype = np.int16 if s.units == "counts" else np.float32
    arrays = {"field": folder / "field.npy"}
    open_memmap(arrays["field"], mode="w+", dtype=field_dtype,
                shape=(n_events, s.field_samples)).flush()
    if s.with_vhf:
        arrays["vhf"] = folder / "vhf.npy"
        open_memmap(arrays["vhf"], mode="w+", dtype=np.float32,
                    shape=(n_events, s.vhf_samples)).flush()
    full_scale = s.full_scale
    if full_scale is not None and s.units == "counts":
        full_scale = clip_counts(s, full_scale)[1]
    counts = dict.fromkeys(CLASSES, 0)
    n_flashes = n_sources = n_clipped = 0
    row0 = 0
    year = s.season_year
    decided_at = f"{year}-12-01T00:00:00Z"
    for b, p, starts, first_flash, noise in iter_blocks(s, n_events, seed):
        # map the arrays per block only, so memory (mapped pages too) stays flat
        field = open_memmap(arrays["field"], mode="r+")
        vhf = open_memmap(arrays["vhf"], mode="r+") if s.with_vhf else None
        r = BlockRenderer(p, s)
        if full_scale is None:
            full_scale = _pilot_full_scale(s, r)
        ev_idx = r.ev_idx
        field_rng, vhf_rng, misc_rng = noise
        missing = misc_rng.random(r.n_rows) < s.missing_vhf_fraction
        for a, z in r.row_chunks():
            rows = digitize_field(r.field_rows(a, z), s, full_scale, field_rng)
            field[row0 + a:row0 + z] = rows
            limit = (clip_counts(s, full_scale)[0] if s.units == "counts"
                     else np.float32(full_scale))
            n_clipped += int((np.abs(rows) >= limit).any(axis=1).sum())
            if vhf is not None:
                vhf[row0 + a:row0 + z] = digitize_vhf(r.vhf_rows(a, z), s, vhf_rng,
                                                      missing[a:z])
        events = event_table(s, p, ev_idx, starts, first_flash, row0, n_events)
        _append_csv(events, folder / "events.csv", b == 0)
        labels = pd.DataFrame({
            "event_id": events["event_id"],
            "label": [CLASSES[c] for c in p["class_index"][ev_idx]],
            "analyst": "truth", "decided_at": decided_at,
            "note": np.where(p["margin"][ev_idx], "simulated; margin", "simulated")})
        _append_csv(labels, labels_path, b == 0)
        if s.with_sources:
            src = sources_table(p, ev_idx, s, misc_rng)
            cols = {"event_id": events["event_id"].to_numpy()[src["row"]],
                    "t_s": np.round(src["t_s"], 10),
                    # rounding can give 360.0: azimuth lives in [0, 360)
                    "azimuth_deg": np.round(src["azimuth_deg"], 4) % 360.0,
                    "elevation_deg": np.round(src["elevation_deg"], 4)}
            if s.with_xyz:
                for k in ("x_m", "y_m", "z_m"):
                    cols[k] = np.round(src[k], 1)
            cols["power_db"] = np.round(src["power_db"], 2)
            _append_csv(pd.DataFrame(cols), folder / "sources.csv", b == 0)
            n_sources += src["row"].size
        for c, k in zip(CLASSES, np.bincount(p["class_index"][ev_idx], minlength=4), strict=True):
            counts[c] += int(k)
        n_flashes += len(np.unique(p["flash"][ev_idx]))
        row0 += r.n_rows
        field.flush()
        del field
        if vhf is not None:
            vhf.flush()
            del vhf
        logger.debug("simulate: block %d written (%d events so far)", b, row0)
    assert row0 == n_events, (row0, n_events)
    summary = {"events_per_class": counts, "n_flashes": n_flashes, "n_sources": n_sources,
               "n_rows_clipped": n_clipped, "block_events": BLOCK_EVENTS}
    manifest = _manifest(s, full_scale, seed, n_events, summary)
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
