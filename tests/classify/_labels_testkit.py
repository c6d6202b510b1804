"""Helpers shared by the label-store tests: a tiny real catalog and labels files."""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pandas as pd

from features import open_catalog

# Event ids that a careless CSV reader would turn into NaN or a number.
TRICKY_IDS = ["NA", "007", "null", "1e3", " spaced id ", "e'; DROP TABLE decisions;--"]


def write_tiny_catalog(folder, n=12, *, catalog_id="hollowmere-2031", season="2031",
                       ids=None, range_m=None, vhf=True, seed=0) -> Path:
    """Write a small spec-v1 catalog (field.npy, optional vhf.npy) and return its folder."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    ids = list(ids) if ids is not None else [f"ev{i:03d}" for i in range(n - len(TRICKY_IDS))]
    ids = ids + [t for t in TRICKY_IDS if t not in ids][: max(0, n - len(ids))]
    n = len(ids)
    t0 = pd.Timestamp("2031-07-14T21:00:00Z")
    events = pd.DataFrame({
        "event_id": ids,
        "time_utc": [(t0 + pd.Timedelta(milliseconds=37 * i)).strftime("%Y-%m-%dT%H:%M:%S.%f")
                     + "Z" for i in range(n)],
        "flash_id": [f"f{i // 3}" for i in range(n)],
    })
    if range_m is not None:
        events["range_m"] = f"{range_m:.1f}"
    events.to_csv(folder / "events.csv", index=False, quoting=csv.QUOTE_MINIMAL)
    np.save(folder / "field.npy", rng.normal(0.0, 1.0, (n, 64)).astype(np.float32))
    manifest = {
        "format": "pulse-catalog", "version": 1, "catalog_id": catalog_id,
        "station": "hollowmere", "season": season, "events": "events.csv",
        "field": {"file": "field.npy", "sample_rate_hz": 20000000, "pretrigger_s": 1e-6,
                  "units": "V/m", "scale": 1.0, "sign_convention": "physics",
                  "decay_time_s": 0.001, "delay_s": 0.0, "full_scale": 250.0},
    }
    if vhf:
        np.save(folder / "vhf.npy", np.abs(rng.normal(0.0, 0.1, (n, 80))).astype(np.float32))
        manifest["vhf"] = {"file": "vhf.npy", "sample_rate_hz": 250000000,
                           "pretrigger_s": 1e-7, "kind": "power",
                           "band_hz": [25000000, 85000000], "delay_s": 4e-7,
                           "full_scale": 1.0}
    (folder / "catalog.json").write_text(json.dumps(manifest, indent=2))
    return folder


def tiny_catalog(folder, **kw):
    """Write and open a tiny catalog."""
    return open_catalog(write_tiny_catalog(folder, **kw))


def write_labels(path, rows, header=("event_id", "label", "analyst", "decided_at", "note")):
    """Write a labels CSV (rows are sequences in ``header`` order); return the path."""
    path = Path(path)
    with path.open("w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)
    return path
