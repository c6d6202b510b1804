"""Smoke test of the benchmark harnesses on tiny sizes (the benchmarks themselves run by hand)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from sklearn.metrics import f1_score

from classify.stats import empirical_coverage, expected_calibration_error
from classify.triage import read_results

BENCHMARKS = Path(__file__).resolve().parent.parent / "benchmarks"


@pytest.mark.slow
def test_crossworld_runs_end_to_end(tmp_path, monkeypatch):
    """One cell (own simulator -> spec-literal writer) and its zero-label row, tiny sizes.

    Invented worlds, self-consistency only: the harness's scores are recomputed from the
    kept results files with scikit-learn and classify.stats; no accuracy is asserted.
    """
    monkeypatch.syspath_prepend(str(BENCHMARKS))
    import bench_crossworld

    work, out_json, out_md = tmp_path / "work", tmp_path / "xw.json", tmp_path / "xw.md"
    rc = bench_crossworld.main(["--train-events", "240", "--events", "90", "--jobs", "1",
                                "--cells", "own:reference->speclit:plain", "--workdir",
                                str(work), "--keep", "--json", str(out_json),
                                "--markdown", str(out_md), "--variants", "model", "rules"])
    assert rc == 0
    data = json.loads(out_json.read_text())
    assert data["errors"] == []
    assert data["cells"] == ["own:reference -> speclit:plain"]
    rows = {r["variant"]: r for r in data["rows"]}
    assert set(rows) == {"model", "rules"}
    [test_world] = [w for w in data["worlds"] if w["role"] == "test"]
    catalog = work / test_world["folder"]
    truth = pd.read_csv(str(catalog) + ".labels.csv", dtype=str)[["event_id", "label"]]
    tags = {"model": "own-reference__speclit-plain", "rules": "speclit-plain"}
    for variant, row in rows.items():
        assert row["pulses"] == 90
        res = read_results(work / "results" / f"{tags[variant]}.{variant}.csv")
        df = res.merge(truth, on="event_id", suffixes=("", "_true"))
        classes = [col[2:] for col in res.columns if col.startswith("p_")]
        y = df["label_true"].to_numpy()
        sets = np.array([[k in s.split("|") for k in classes] for s in df["prediction_set"]])
        proba = df[[f"p_{k}" for k in classes]].to_numpy()
        assert_allclose(row["coverage"], empirical_coverage(sets, y, classes=classes),
                        rtol=0, atol=1e-12)
        assert_allclose(row["ece"], expected_calibration_error(proba, y, classes=classes),
                        rtol=0, atol=1e-12)
        assert_allclose(row["macro_f1"], f1_score(y, df["label"], average="macro",
                                                  labels=sorted(set(y))), rtol=0, atol=1e-12)
        assert_allclose(row["review"], df["needs_review"].mean(), rtol=0, atol=1e-12)
    assert 0.0 <= rows["model"]["ref_macro_f1"] <= 1.0
    goals = {(ck["variant"], ck["goal"]) for ck in data["checks"]}
    assert ("model", "coverage") in goals and ("rules", "0-label macro_f1") in goals
    assert "own:reference -> speclit:plain" in out_md.read_text()
