"""Build a catalog v1 folder from a station description and the station's recordings.

:func:`assemble_catalog` reads the description (:func:`features.station.load_station`),
finds the pulses (given trigger times, triggers stored with triggered records, or
the noise-adaptive trigger of :mod:`features.trigger` on continuous records), cuts
one window per pulse from the field (and VHF) records, converts the mapped-source
list, optionally groups the pulses into flashes (:mod:`features.flashes`), and
writes the catalog **all or nothing**: everything goes to a hidden temporary folder
beside the output, which is checked with :func:`features.open_catalog` and only then
renamed into place (:func:`features.writer.staged_folder`). Records are read block
by block (memory-mapped ``.npy``, sliced HDF5), so memory stays flat in record length.

The manifest gets an ``"assembled"`` object: the description's name and SHA-256, how
the pulses were found (and the trigger settings), and per record the number of
triggers, the noise level and the windows that reached outside the record.
"""

from __future__ import annotations

import contextlib
import logging
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
from numpy.lib.format import open_memmap

from .._checks import InputError
from ..station import ATTR, ChannelSpec, StationDescription, load_station
from ..trigger import detect_pulses, merge_trigger_times
from ..writer import (
    format_time_utc,
    staged_folder,
    write_events,
    write_manifest,
    write_sources,
)
from ._records import Record, _given_triggers, cut_windows, open_records, parse_utc_ns
from ._sources import read_station_sources
from ._triggered import stack_triggered

__all__ = ["assemble_catalog"]

logger = logging.getLogger("pulsesort")


def _value(spec_value, rec: Record, what: str, positive=True) -> float:
    if isinstance(spec_value, str) and spec_value.startswith(ATTR):
        v = rec.attribute(spec_value, what)
        try:
            v = float(v)
        except (TypeError, ValueError):
            raise InputError(f"{rec.label}: attribute for {what} must be a number, got {v!r}"
                             ) from None
        if (positive and v <= 0) or v < 0 or not np.isfinite(v):
            raise InputError(f"{rec.label}: {what} must be > 0, got {v!r}")
        return v
    return float(spec_value)


def _one(values: list[float], what: str, spec: ChannelSpec) -> float:
    if len(set(values)) > 1:
        raise InputError(f"{spec.name}: records disagree on {what} ({sorted(set(values))}); a "
                         "catalog has one value per channel: assemble them separately")
    return values[0]


def _starts_ns(spec: ChannelSpec, recs: list[Record]) -> np.ndarray:
    st = spec.start_utc
    if isinstance(st, dict):
        df = pd.read_csv(st["index"], dtype=str, keep_default_na=False)
        for c in (st["file_column"], st["time_column"]):
            if c not in df.columns:
                raise InputError(f"{st['index'].name}: column {c!r} missing; header has "
                                 f"{list(df.columns)}")
        table = dict(zip(df[st["file_column"]].str.strip(), range(len(df))))
        out = []
        for r in recs:
            i = table.get(r.label, table.get(r.path.name))
            if i is None:
                raise InputError(f"{st['index'].name}: no row for record {r.label!r}")
            out.append(parse_utc_ns(df[st["time_column"]].iloc[i],
                                    f"{st['index'].name} line {i + 2}"))
        return np.array(out, np.int64)
    if st.startswith(ATTR):
        return np.array([parse_utc_ns(r.attribute(st, "start_utc"), r.label) for r in recs],
                        np.int64)
    return np.array([parse_utc_ns(st, f"{spec.name} start_utc")], np.int64)


def _record_at(starts_ns, ends_ns, t_ns) -> np.ndarray:
    """Index of the record holding each time, -1 where none does."""
    order = np.argsort(starts_ns, kind="stable")
    k = np.searchsorted(starts_ns[order], t_ns, side="right") - 1
    kk = order[np.maximum(k, 0)]
    return np.where((k >= 0) & (t_ns < ends_ns[kk]), kk, -1)


def _progress(total: int, desc: str, enabled: bool | None):
    from tqdm.auto import tqdm

    if enabled is None:
        enabled = sys.stderr.isatty()
    return tqdm(total=total, desc=desc, disable=not enabled, file=sys.stderr, unit="row")


def _continuous_triggers(d, recs, rates, starts_ns, vrecs, vrate, vstarts, stats, progress):
    """Detect pulses in every continuous record; fill per-record stats; return times (ns)."""
    s = d.detect
    post = d.length_s - d.pretrigger_s
    times = []
    scale = d.field.meta.get("scale", 1.0) or 1.0
    for i, r in enumerate(recs):
        rate = rates[i]
        det_times = []
        if s.channel in ("field", "both"):
            det = detect_pulses(r.data, rate, s, kind="field",
                                decay_time_s=d.field.meta.get("decay_time_s"),
                                post_trigger_s=post)
            det_times.append(det.trigger_index / rate)
            stats[i].update(noise_v_per_m=det.noise_level * scale,
                            n_field_triggers=int(det.trigger_index.size),
                            n_suppressed=det.n_suppressed)
        if s.channel in ("vhf", "both"):
            vt = []
            for j, vr in enumerate(vrecs):  # VHF records overlapping this field record
                off = (vstarts[j] - starts_ns[i]) / 1e9
                if off >= r.n_samples / rate or off + vr.n_samples / vrate <= 0:
                    continue
                vdet = detect_pulses(vr.data, vrate, s, kind=d.vhf.meta["kind"],
                                     post_trigger_s=post)
                vt.append(vdet.trigger_index / vrate + off)
                stats[i]["vhf_noise"] = vdet.noise_level
            n_v = sum(v.size for v in vt)
            stats[i]["n_vhf_triggers"] = int(n_v)
            det_times += vt
        t = merge_trigger_times(det_times, s.holdoff_s)
        t = t[(t >= 0) & (t < r.n_samples / rate)]
        stats[i]["n_triggers"] = int(t.size)
        times.append(starts_ns[i] + np.round(t * 1e9).astype(np.int64))
        progress.update(1)
        logger.info("assemble: %s: %d pulses detected, noise %.3g V/m", r.label, t.size,
                    stats[i].get("noise_v_per_m", float("nan")))
    return np.concatenate(times) if times else np.empty(0, np.int64)


def _cut_continuous(recs, rates, starts_ns, t_ns, pre_s, out, stats=None):
    """Cut one window per trigger from the record holding it (NaN rows where none does).

    Returns ``(rows in no record, windows reaching outside their record)``.
    """
    ends = starts_ns + np.round(np.array([r.n_samples for r in recs]) / np.array(rates)
                                * 1e9).astype(np.int64)
    which = _record_at(starts_ns, ends, t_ns)
    out[which < 0] = np.nan
    padded = 0
    for i, r in enumerate(recs):
        rows = np.flatnonzero(which == i)
        if not rows.size:
            continue
        rate = rates[i]
        first = np.round((t_ns[rows] - starts_ns[i]) * rate / 1e9).astype(np.int64) \
            - round(pre_s * rate)
        block = np.empty((rows.size, out.shape[1]))
        n_pad = cut_windows(r.data, first, out.shape[1], block)
        out[rows] = block
        padded += n_pad
        if stats is not None:
            stats[i]["n_windows"] = stats[i].get("n_windows", 0) + int(rows.size)
            stats[i]["n_windows_padded"] = stats[i].get("n_windows_padded", 0) + int(n_pad)
    return int((which < 0).sum()), padded


def _write_channel_meta(spec: ChannelSpec, rate: float, pre: float) -> dict:
    meta = {"file": f"{spec.name}.npy", "sample_rate_hz": rate, "pretrigger_s": pre}
    meta.update({k: v for k, v in spec.meta.items() if v is not None or k == "decay_time_s"})
    return meta


def assemble_catalog(description, out, *, overwrite: bool = False,
                     progress: bool | None = None) -> Path:
    """Turn a station's recordings into a catalog v1 folder, all or nothing.

    Parameters
    ----------
    description : path
        The station description (TOML, or JSON), see ``docs/station-description.md``.
    out : path
        The catalog folder to write.
    overwrite : bool, default=False
        Replace an existing ``out``.
    progress : bool or None
        Progress bar on stderr (None: when stderr is a terminal).

    Returns
    -------
    Path
        The catalog folder. Its manifest's ``"assembled"`` object records how it was
        made, the trigger settings, and detection counts and noise level per record.

    Raises
    ------
    InputError
        A bad description or recording (the message names the file, key or line);
        nothing is written.
    FileExistsError
        ``out`` is not empty and ``overwrite`` is False.
    """
    d = description if isinstance(description, StationDescription) else \
        load_station(description)
    with staged_folder(out, overwrite=overwrite) as tmp, contextlib.ExitStack() as stack:
        scratch = Path(stack.enter_context(tempfile.TemporaryDirectory(
            prefix=".assemble-", dir=tmp.parent)))  # CSV records converted for slicing
        recs = open_records(d.field, stack, scratch)
        rates = [_value(d.field.sample_rate_hz, r, "sample_rate_hz") for r in recs]
        vrecs, vrates = [], []
        if d.vhf is not None:
            vrecs = open_records(d.vhf, stack, scratch)
            vrates = [_value(d.vhf.sample_rate_hz, r, "sample_rate_hz") for r in vrecs]
        rate = _one(rates, "sample_rate_hz", d.field)
        vrate = _one(vrates, "sample_rate_hz", d.vhf) if vrecs else None
        stats = [{"record": r.label} for r in recs]
        info: dict = {"description": d.path.name, "description_sha256": d.sha256,
                      "layout": d.field.layout}
        if d.field.layout == "continuous":
            starts = _starts_ns(d.field, recs)
            vstarts = _starts_ns(d.vhf, vrecs) if vrecs else None
            pre, vpre = d.pretrigger_s, d.vhf_pretrigger_s
            if d.triggers is not None:
                trig = _given_triggers(d, [r.label for r in recs], starts)
                t_ns = trig["time_ns"].to_numpy()
                info["pulses"] = "given trigger times"
                info["triggers_file"] = d.triggers.file.name
            else:
                with _progress(len(recs), "detecting", progress) as bar:
                    t_ns = _continuous_triggers(d, recs, rates, starts, vrecs, vrate,
                                                vstarts, stats, bar)
                trig = pd.DataFrame({"time_ns": t_ns})
                info["pulses"] = "detected"
                info["trigger"] = d.detect.to_manifest()
            order = np.argsort(t_ns, kind="stable")
            trig = trig.iloc[order].reset_index(drop=True)
            t_ns = trig["time_ns"].to_numpy()
            n = t_ns.size
            if n == 0:
                raise InputError(f"{d.path.name}: no pulses found in the records (nothing to "
                                 "catalog)")
            ends = starts + np.round(np.array([r.n_samples for r in recs]) / rate
                                     * 1e9).astype(np.int64)
            outside = np.flatnonzero(_record_at(starts, ends, t_ns) < 0)
            if outside.size:
                lines = trig["line"].to_numpy()[outside[:5]] if "line" in trig else []
                raise InputError(f"{d.triggers.file.name if d.triggers else d.path.name}: "
                                 f"{outside.size} trigger time(s) lie in no field record"
                                 + (f" (lines {', '.join(str(int(x)) for x in lines)})"
                                    if len(lines) else ""))
            m = round(d.length_s * rate)
            field = open_memmap(tmp / "field.npy", mode="w+", dtype=np.float32, shape=(n, m))
            pad = 0
            with _progress(n, "cutting", progress) as bar:
                for a in range(0, n, 4096):  # rows in chunks: memory flat in n
                    b = min(n, a + 4096)
                    _, pa = _cut_continuous(recs, rates, starts, t_ns[a:b], pre, field[a:b],
                                            stats)
                    pad += pa
                    bar.update(b - a)
            field.flush()
            vhf = None
            if vrecs:
                vm = round(d.vhf_length_s * vrate)
                vhf = open_memmap(tmp / "vhf.npy", mode="w+", dtype=np.float32, shape=(n, vm))
                vmiss = 0
                for a in range(0, n, 4096):
                    b = min(n, a + 4096)
                    mi, _ = _cut_continuous(vrecs, vrates, vstarts, t_ns[a:b], vpre,
                                            vhf[a:b])
                    vmiss += mi
                vhf.flush()
                info["n_rows_without_vhf_record"] = vmiss
            info["n_windows_padded"] = pad
            info["records"] = stats
        else:
            t_ns, pre, vpre, trig = stack_triggered(d, recs, vrecs, tmp, info)
            n = t_ns.size
        if "event_id" in trig:
            ids = trig["event_id"].to_numpy(dtype=object)
        else:
            width = max(7, len(str(n - 1)))
            ids = np.array([f"{d.catalog_id}-{i:0{width}d}" for i in range(n)], dtype=object)
        events = pd.DataFrame({"event_id": ids, "time_utc": format_time_utc(t_ns)})
        for c in trig.columns:
            if c not in ("time_ns", "event_id", "line"):
                events[c] = trig[c].to_numpy()
        manifest = {"format": "pulse-catalog", "version": 1, "catalog_id": d.catalog_id}
        if d.station is not None:
            manifest["station"] = d.station
        if d.season is not None:
            manifest["season"] = d.season
        manifest["events"] = "events.csv"
        fmeta = _write_channel_meta(d.field, rate, pre)
        if fmeta.get("full_scale") is None and np.dtype(recs[0].data.dtype) == np.int16:
            fmeta["full_scale"] = 32767 * fmeta.get("scale", 1.0)  # int16 rails stay clipped
        manifest["field"] = fmeta
        if vrecs:
            manifest["vhf"] = _write_channel_meta(d.vhf, vrate, vpre)
        if d.sources is not None:
            table, counts = read_station_sources(d.sources, ids.astype(str), t_ns, pre,
                                                 d.length_s)
            write_sources(tmp / "sources.csv", table)
            manifest["sources"] = {"file": "sources.csv"}
            info["sources"] = counts
        info["n_pulses"] = int(n)
        manifest["assembled"] = info
        write_events(tmp / "events.csv", events)
        write_manifest(tmp / "catalog.json", manifest)
        if d.flashes is not None and not (events.get("flash_id", pd.Series([""])) != "").any():
            _group_in_place(tmp, d, manifest, events)
    logger.info("assemble: %d pulses -> %s", n, out)
    return Path(out).expanduser()


def _group_in_place(tmp: Path, d: StationDescription, manifest: dict, events: pd.DataFrame):
    """Add grouped flash ids to the staged catalog (positions need its sources)."""
    from ..catalog import open_catalog
    from ..flashes import assign_flash_ids, group_flashes, pulse_positions_m

    cat = open_catalog(tmp)
    labels = group_flashes(cat.time_ns, pulse_positions_m(cat), d.flashes)
    events = events.copy()
    events["flash_id"] = assign_flash_ids(labels, f"{d.catalog_id}-flash-")
    manifest["flash_grouping"] = {**d.flashes.to_manifest(),
                                  "n_flashes": int(labels.max()) + 1 if labels.size else 0}
    write_events(tmp / "events.csv", events)
    write_manifest(tmp / "catalog.json", manifest)

