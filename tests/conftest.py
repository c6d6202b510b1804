"""Shared test fixtures: a minimal, spec-literal catalog writer.

This writer is deliberately separate from ``features.simulate`` (the season
simulator): it writes exactly what the catalog v1 spec says and nothing more,
from arrays the test supplies, so reader and features are checked against two
independent writers.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest


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
