"""The triage spill: rows read back as written; the journal names only synced chunks."""

import numpy as np
import pandas as pd

from features import spill as spill_mod
from features.csvio import csv_rows
from features.spill import FeatureSpill

COLUMNS = ["a_s", "ok"]


def _chunk(start, n, rng):
    """An invented features chunk: event ids, a float column with NaN, a boolean, text."""
    a = rng.normal(size=n) * 1e-6
    a[::3] = np.nan
    return pd.DataFrame({"event_id": [f"hm-{i}" for i in range(start, start + n)],
                         "a_s": a, "ok": rng.random(n) > 0.5,
                         "note": ["x,y" if i % 4 else "plain" for i in range(n)]},
                        index=pd.RangeIndex(start, start + n))


def test_rows_read_back_and_journal_follows_syncs(tmp_path, monkeypatch):
    """Numbers come back bit for bit (float64, booleans as 0/1) and the text records are
    the CSV dialect's (``features.csvio.csv_rows``); chunks written since the last sync
    are not in the journal, so a reopened spill starts after the last synced chunk."""
    monkeypatch.setattr(spill_mod, "SYNC_CHUNKS", 3)
    rng = np.random.default_rng(4)
    chunks = [_chunk(s, 10, rng) for s in range(0, 50, 10)]
    folder = tmp_path / "s.partial.d"
    sp = FeatureSpill(folder, 50, COLUMNS, "key-1")
    for ch in chunks[:4]:
        sp.write_chunk(int(ch.index[0]), ch)
    # three chunks synced by the rule, the fourth not yet
    assert FeatureSpill(folder, 50, COLUMNS, "key-1").n_chunks_done == 3
    sp = FeatureSpill(folder, 50, COLUMNS, "key-1")     # as a resumed run: from chunk 3
    for ch in chunks[3:]:
        sp.write_chunk(int(ch.index[0]), ch)           # the last chunk syncs
    assert FeatureSpill(folder, 50, COLUMNS, "key-1").n_chunks_done == 5
    whole = pd.concat(chunks)
    expected = np.column_stack([whole["a_s"].to_numpy(), whole["ok"].to_numpy(np.float64)])
    assert np.array_equal(np.asarray(sp.numeric()), expected, equal_nan=True)
    assert sp.records(0, 50) == csv_rows(whole.drop(columns="event_id"))
    assert sp.records(13, 27) == csv_rows(whole.drop(columns="event_id").iloc[13:27])
    assert sp.feature_columns == ["event_id", "a_s", "ok", "note"]


def test_other_key_starts_again(tmp_path):
    """A spill folder of another run (key) is emptied, not resumed."""
    rng = np.random.default_rng(5)
    sp = FeatureSpill(tmp_path / "d", 10, COLUMNS, "key-1")
    sp.write_chunk(0, _chunk(0, 10, rng))
    assert FeatureSpill(tmp_path / "d", 10, COLUMNS, "key-1").n_chunks_done == 1
    assert FeatureSpill(tmp_path / "d", 10, COLUMNS, "key-2").n_chunks_done == 0
