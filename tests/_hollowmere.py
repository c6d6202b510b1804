"""A small simulated setup of the invented station hollowmere, shared by the API tests.

Season 2031 (labelled by the simulator's truth, imported as analyst "wren"), a model
trained on it and registered as the current one in ``models/``, and season 2032 with
the next season's instrument settings (``preset="next"``). Built once per test process
in a temporary folder (removed at exit); tests must not change it. Invented data: for
self-consistency, not physics.
"""

from __future__ import annotations

import atexit
import functools
import shutil
import tempfile
from pathlib import Path

import pandas as pd

from classify.labels import LabelStore
from classify.training import train_from_store
from features import open_catalog
from features.simulate import labels_path, simulate_season

#: Short records so the seasons simulate in seconds (the features are physical).
SHAPE = dict(field_rate_hz=10e6, field_samples=2000, vhf_samples=2500)
MODEL = "hollowmere-2031-v1"


@functools.lru_cache(maxsize=1)
def hollowmere() -> dict:
    """``root`` (the folder: ``hollowmere-2031/``, ``hollowmere-2032/``, ``labels.sqlite``,
    ``models/``), ``a`` and ``b`` (catalog folders), ``store``, ``model_dir``, ``truth_b``
    (the simulator's labels of season 2032)."""
    root = Path(tempfile.mkdtemp(prefix="pulsesort-hollowmere-"))
    atexit.register(shutil.rmtree, root, ignore_errors=True)
    a = simulate_season(root / "hollowmere-2031", 600, 2031, **SHAPE)
    b = simulate_season(root / "hollowmere-2032", 300, 2032, preset="next", vhf_samples=2500)
    labels = pd.read_csv(labels_path(a), dtype=str, keep_default_na=False)
    wren = root / "wren-2031.labels.csv"
    labels.assign(analyst="wren", decided_at="2031-10-28T14:00:00Z").to_csv(wren, index=False)
    store = root / "labels.sqlite"
    with LabelStore(store) as s:
        s.import_labels(wren, open_catalog(a))
        model_dir, _ = train_from_store([a], s, root / "models" / MODEL, station_variants=0,
                                        max_iter=30, progress=False)
    truth_b = pd.read_csv(labels_path(b), dtype=str, keep_default_na=False)
    return {"root": root, "a": a, "b": b, "store": store, "model_dir": model_dir,
            "truth_b": truth_b}
