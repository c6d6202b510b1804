"""Triggered records (one row per trigger, or one trigger per record) -> catalog rows."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from numpy.lib.format import open_memmap

from .._checks import InputError
from ..station import ATTR, ChannelSpec, StationDescription
from ._records import Record, _given_triggers, parse_utc_ns

__all__ = ["stack_triggered"]

ROWS_PER_READ = 4096


def _rows(r: Record) -> int:
    return 1 if len(r.data.shape) == 1 else int(r.data.shape[0])


def _pretrigger(spec: ChannelSpec, recs: list[Record]) -> float:
    vals = set()
    for r in recs:
        v = spec.pretrigger_s
        if isinstance(v, str) and v.startswith(ATTR):
            try:
                v = float(r.attribute(v, "pretrigger_s"))
            except (TypeError, ValueError):
                raise InputError(f"{r.label}: the pre-trigger attribute must be a number of "
                                 "seconds") from None
        vals.add(float(v))
    if len(vals) > 1:
        raise InputError(f"[{spec.name}] records disagree on pretrigger_s ({sorted(vals)}); a "
                         "catalog has one value per channel")
    return vals.pop()


def _copy(spec: ChannelSpec, recs: list[Record], path: Path) -> int:
    lengths = {r.n_samples for r in recs}
    if len(lengths) > 1:
        raise InputError(f"[{spec.name}] triggered records differ in length "
                         f"({sorted(lengths)} samples); a catalog row has one length")
    n = sum(_rows(r) for r in recs)
    m = lengths.pop()
    out = open_memmap(path, mode="w+", dtype=np.float32, shape=(n, m))
    row = 0
    for r in recs:
        if len(r.data.shape) == 1:
            out[row] = np.asarray(r.data[:], dtype=np.float64)
            row += 1
            continue
        for a in range(0, _rows(r), ROWS_PER_READ):  # blocks of rows: flat memory
            b = min(_rows(r), a + ROWS_PER_READ)
            out[row + a:row + b] = np.asarray(r.data[a:b], dtype=np.float64)
        row += _rows(r)
    out.flush()
    return n


def stack_triggered(d: StationDescription, recs, vrecs, tmp: Path, info: dict):
    """Copy the rows; return ``(trigger ns, field pre-trigger s, VHF pre-trigger s, table)``."""
    n = _copy(d.field, recs, tmp / "field.npy")
    pre = _pretrigger(d.field, recs)
    vpre = None
    if vrecs:
        nv = _copy(d.vhf, vrecs, tmp / "vhf.npy")
        if nv != n:
            raise InputError(f"[vhf] records hold {nv} triggers but [field] records hold {n}; "
                             "row i of each must be the same pulse")
        vpre = _pretrigger(d.vhf, vrecs) if d.vhf.pretrigger_s is not None else pre
    if d.field.trigger_utc is not None:
        times = []
        for r in recs:
            v = r.attribute(d.field.trigger_utc, "trigger_utc")
            vals = np.atleast_1d(v) if not isinstance(v, (str, bytes)) else [v]
            if len(vals) != _rows(r):
                raise InputError(f"{r.label}: {len(vals)} trigger time(s) in its attribute for "
                                 f"{_rows(r)} row(s)")
            times += [parse_utc_ns(x, r.label) for x in vals]
        trig = pd.DataFrame({"time_ns": np.array(times, np.int64)})
        info["pulses"] = "trigger times stored with the records"
    else:

        if d.triggers.time != "utc":
            raise InputError(f"{d.triggers.file.name}: triggered records need UTC trigger "
                             "times ([triggers] time = \"utc\")")
        trig = _given_triggers(d, [r.label for r in recs], None)
        if len(trig) != n:
            raise InputError(f"{d.triggers.file.name}: {len(trig)} trigger rows for {n} "
                             "record rows (one per row, in file order)")
        info["pulses"] = "given trigger times (one per row, in record order)"
        info["triggers_file"] = d.triggers.file.name
    for col, name in d.field.event_attributes.items():  # e.g. event_id, flash_id, range_m
        vals = []
        for r in recs:
            v = r.attribute(ATTR + name, col)
            v = [v] if isinstance(v, (str, bytes)) or np.ndim(v) == 0 else list(v)
            if len(v) != _rows(r):
                raise InputError(f"{r.label}: attribute {name!r} holds {len(v)} value(s) for "
                                 f"{_rows(r)} row(s)")
            vals += [x.decode() if isinstance(x, bytes) else x for x in v]
        trig[col] = vals
    info["records"] = [{"record": r.label, "n_rows": _rows(r)} for r in recs]
    return trig["time_ns"].to_numpy(), pre, vpre, trig
