"""Shared test fixtures: a minimal, spec-literal catalog writer.

This writer is deliberately separate from ``features.simulate`` (the season
simulator): it writes exactly what the catalog v1 spec says and nothing more,
from arrays the test supplies, so reader and features are checked against two
independent writers.
"""

from __future__ import annotations

import os

# One OpenMP thread per test process: the tree models spin-wait badly when the
# machine's cores are shared, and the test data are small (common practice).
os.environ.setdefault("OMP_NUM_THREADS", "1")

import json  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402


def write_catalog(folder, field, *, field_meta=None, vhf=None, vhf_meta=None, events=None,
                  sources=None, manifest=None, catalog_id="testsite-2040"):
    """Write a catalog v1 folder from arrays; return its path.

    Parameters
    ----------
    folder : path
    field : ndarray (n, m)
        Stored as given (dtype kept).
    field_meta, vhf_meta : dict
        Keys merged over the defaults of the ``field`` / ``vhf`` manifest objects.
    events : DataFrame or dict, optional
        Default: ids ``e0000...``, one second apart, no flash, no range.
    sources : DataFrame, optional
    manifest : dict, optional
        Keys merged over the top-level manifest (None values delete a key).
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    n = field.shape[0]
    if events is None:
        t0 = pd.Timestamp("2040-06-01T12:00:00Z")
        events = {"event_id": [f"e{i:04d}" for i in range(n)],
                  "time_utc": [(t0 + pd.Timedelta(seconds=i)).strftime(
                      "%Y-%m-%dT%H:%M:%S.%f") + "000Z" for i in range(n)]}
    pd.DataFrame(events).to_csv(folder / "events.csv", index=False)
    np.save(folder / "field.npy", field)
    fmeta = {"file": "field.npy", "sample_rate_hz": 20e6, "pretrigger_s": 1e-4,
             "units": "V/m", "scale": 1.0, "sign_convention": "physics",
             "decay_time_s": None, "delay_s": 0.0}
    fmeta.update(field_meta or {})
    man = {"format": "pulse-catalog", "version": 1, "catalog_id": catalog_id,
           "station": "testsite", "season": "2040", "events": "events.csv", "field": fmeta}
    if vhf is not None:
        np.save(folder / "vhf.npy", vhf)
        vmeta = {"file": "vhf.npy", "sample_rate_hz": 25e6, "pretrigger_s": 1e-4,
                 "kind": "power", "band_hz": [25e6, 85e6], "delay_s": 0.0}
        vmeta.update(vhf_meta or {})
        man["vhf"] = vmeta
    if sources is not None:
        pd.DataFrame(sources).to_csv(folder / "sources.csv", index=False)
        man["sources"] = {"file": "sources.csv"}
    for k, v in (manifest or {}).items():
        if v is None:
            man.pop(k, None)
        else:
            man[k] = v
    (folder / "catalog.json").write_text(json.dumps(man, indent=2))
    return folder


def bipolar_field(t_s, t0_s, rise_s, fall_s, overshoot, overshoot_s, amplitude):
    """A smooth bipolar test pulse: a unipolar bump minus a later, wider bump."""
    def bump(t, a, b):
        x = np.clip(t, 0, None)
        return (1 - np.exp(-x / a)) * np.exp(-x / b) * (t > 0)

    main = bump(t_s - t0_s, rise_s, fall_s)
    later = bump(t_s - t0_s - 2 * fall_s, rise_s * 3, overshoot_s)
    y = main / main.max() - overshoot * later / later.max()
    return amplitude * y


@pytest.fixture
def make_catalog(tmp_path):
    """``make_catalog(name, field, **kw)`` writes a catalog under ``tmp_path``."""
    def _make(name, field, **kw):
        return write_catalog(tmp_path / name, field, **kw)
    return _make


def two_class_catalog(folder, n=200, seed=0, *, fs=20e6, window_s=200e-6, pre=50e-6,
                      counts_scale=None, atmospheric=False, clip_rows=()):
    """A small invented catalog of two pulse kinds, with its true labels.

    Even rows: bipolar pulses (NBE-like); odd rows: narrow unipolar pulses
    (leader-like). For self-consistency tests only, not physics.

    Returns
    -------
    (path, labels DataFrame)
    """
    m = int(round(window_s * fs))
    t = np.arange(m) / fs - pre
    rng = np.random.default_rng(seed)
    rows, labels = [], []
    for i in range(n):
        if i % 2 == 0:
            rows.append(bipolar_field(t, 0, 0.5e-6, 2e-6, 0.4, 10e-6, rng.uniform(2, 10)))
            labels.append("narrow_bipolar")
        else:
            rows.append(np.exp(-0.5 * (t / 0.3e-6) ** 2) * rng.uniform(0.5, 2))
            labels.append("stepped_leader")
    x = np.array(rows) + rng.normal(0, 0.01, (n, m))
    meta = {"sample_rate_hz": fs, "pretrigger_s": pre, "full_scale": 50.0}
    for r in clip_rows:
        x[r, m // 2] = 60.0
    if atmospheric:
        x = -x
        meta["sign_convention"] = "atmospheric"
    if counts_scale:
        x = np.clip(np.round(x / counts_scale), -32768, 32767).astype(np.int16)
        meta.update(units="counts", scale=counts_scale)
    else:
        x = x.astype(np.float32)
    t0 = pd.Timestamp("2040-07-01T10:00:00Z")
    ev = {"event_id": [f"p{i}" for i in range(n)],
          "time_utc": [(t0 + pd.Timedelta(milliseconds=7 * i)).strftime(
              "%Y-%m-%dT%H:%M:%S.%fZ") for i in range(n)],
          "flash_id": [f"f{i // 10}" for i in range(n)],
          "range_m": rng.uniform(2e4, 1e5, n)}
    path = write_catalog(folder, x, events=ev, field_meta=meta)
    return path, pd.DataFrame({"event_id": ev["event_id"], "label": labels})
