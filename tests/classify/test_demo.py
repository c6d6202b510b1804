"""The README's first command, end to end on a small demo (self-consistency only:
the demo's data are invented by pulsesort's own simulator)."""

from __future__ import annotations

import pytest

from classify.demo import run_demo
from classify.triage import read_results


@pytest.mark.slow
def test_demo_runs_whole_job_and_scores_both_triages(tmp_path):
    lines = []
    s = run_demo(tmp_path / "demo", events=600, next_events=400, seed=7, n_jobs=1,
                 echo=lines.append)
    for key in ("season_a", "season_b", "store", "results", "coldstart", "card"):
        assert s[key].exists(), key
    assert [ln[:4] for ln in lines if ln.startswith("[")] == [
        f"[{i}/6" for i in range(1, 7)]
    res = read_results(s["results"])
    cold = read_results(s["coldstart"])
    assert len(res) == len(cold) == 400
    # Both triages must beat chance by a wide margin on the demo's four classes.
    assert s["macro_f1_vs_truth"] > 0.8
    assert s["coldstart_macro_f1"] > 0.6
    assert s["triage"]["model_version"] != "rules-4"
