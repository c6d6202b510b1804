"""Triage: the results file, review flags, crash safety and resume."""

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest

from classify.cli import main
from classify.labels import LabelStore
from classify.triage import read_results, triage_catalog
from features import open_catalog
from tests.conftest import two_class_catalog

HEAD = ["event_id", "label", "confidence", "needs_review", "novel", "prediction_set"]


@pytest.fixture(scope="module")
def trained(tmp_path_factory):
    """A model trained on one invented two-class catalog (via the CLI)."""
    root = tmp_path_factory.mktemp("trained")
    cat, labels = two_class_catalog(root / "train", n=240, seed=0)
    labels.to_csv(root / "labels.csv", index=False)
    store = str(root / "s.sqlite")
    assert main(["labels", "import", str(root / "labels.csv"), "--catalog", str(cat),
                 "--analyst", "wren", "--store", store]) == 0
    assert main(["train", str(cat), "--store", store, "--out", str(root / "models" / "m1"),
                 "--max-iter", "40"]) == 0
    return root / "models" / "m1"


def test_results_columns_and_booleans(tmp_path, trained):
    """Columns in the documented order; booleans true/false; one row per event."""
    cat, _ = two_class_catalog(tmp_path / "c", n=60, seed=3, clip_rows=[5])
    out = tmp_path / "r.csv"
    assert main(["triage", str(cat), "--model", str(trained), "--out", str(out)]) == 0
    header = out.read_text().splitlines()[0].split(",")
    assert header[:6] == HEAD
    assert header[6:8] == ["p_narrow_bipolar", "p_stepped_leader"]
    assert header[8:14] == ["review_reason", "review_why", "novelty_score", "model_version",
                            "adaptation", "catalog_id"]
    df = read_results(out)
    assert len(df) == 60 and df["needs_review"].dtype == bool
    # a clipped record is classified like any other: it is flagged, and goes to review
    # only when its class depends on the clipped value
    assert df.loc[5, "clipped"] and df.loc[5, "label"] != ""
    assert set(df["review_reason"].str.split(";").explode()) <= {
        "", "low_confidence", "ambiguous_set", "novel", "censored_decision", "field_unusable"}
    assert (df["review_why"].ne("") == df["needs_review"]).all()
    assert df["adaptation"].str.contains("sets adapted to the season").all()
    np.testing.assert_allclose(df[["p_narrow_bipolar", "p_stepped_leader"]].sum(axis=1), 1.0,
                               atol=1e-9)


def test_triage_is_invariant_to_storage_conventions(tmp_path, trained):
    """The same pulses as atmospheric int16 counts at 10 MS/s get the same labels."""
    a, truth = two_class_catalog(tmp_path / "a", n=80, seed=7)
    b, _ = two_class_catalog(tmp_path / "b", n=80, seed=7, fs=10e6, counts_scale=0.001,
                             atmospheric=True)
    ra = triage_catalog(open_catalog(a), tmp_path / "a.csv", model_dir=trained)
    rb = triage_catalog(open_catalog(b), tmp_path / "b.csv", model_dir=trained)
    la = read_results(tmp_path / "a.csv")["label"]
    lb = read_results(tmp_path / "b.csv")["label"]
    assert (la == truth["label"]).mean() > 0.97
    assert (la == lb).mean() > 0.97
    assert ra["n"] == rb["n"] == 80


def test_stop_and_resume_is_byte_identical(tmp_path, trained):
    """Stopped after 2 chunks, resumed: identical bytes; no final file before the end."""
    cat = open_catalog(two_class_catalog(tmp_path / "c", n=100, seed=4)[0])
    full = tmp_path / "full.csv"
    triage_catalog(cat, full, model_dir=trained, chunk_size=16)
    out = tmp_path / "out.csv"
    r = triage_catalog(cat, out, model_dir=trained, chunk_size=16, stop_after_chunks=2)
    assert r["stopped"] and not out.exists()
    assert (tmp_path / "out.csv.partial.d" / "chunks.json").exists()
    triage_catalog(cat, out, model_dir=trained, chunk_size=16, resume=True)
    assert out.read_bytes() == full.read_bytes()
    assert not (tmp_path / "out.csv.partial").exists()
    assert not (tmp_path / "out.csv.partial.json").exists()
    assert not (tmp_path / "out.csv.partial.d").exists()


def test_resume_refuses_changed_settings(tmp_path, trained):
    """A resume with another review threshold is refused (rows would not match)."""
    cat = open_catalog(two_class_catalog(tmp_path / "c", n=60, seed=4)[0])
    out = tmp_path / "out.csv"
    triage_catalog(cat, out, model_dir=trained, chunk_size=16, stop_after_chunks=1)
    with pytest.raises(ValueError, match="another catalog, model or settings"):
        triage_catalog(cat, out, model_dir=trained, chunk_size=16, resume=True,
                       review_below=0.5)


def test_killed_process_resumes_byte_identical(tmp_path, trained):
    """SIGKILL a real `pulsesort triage` mid-run; --resume gives the uninterrupted bytes."""
    cat, _ = two_class_catalog(tmp_path / "c", n=400, seed=5)
    full = tmp_path / "full.csv"
    args = ["triage", str(cat), "--model", str(trained), "--chunk-size", "8"]
    assert main(args + ["--out", str(full)]) == 0
    out = tmp_path / "out.csv"
    journal = tmp_path / "out.csv.partial.d" / "chunks.json"      # the features phase
    code = f"import sys; from classify.cli import main; sys.exit(main({args + ['--out', str(out)]!r}))"
    env = dict(os.environ, OMP_NUM_THREADS="1")
    proc = subprocess.Popen([sys.executable, "-c", code], env=env, cwd=tmp_path)
    deadline = time.time() + 120
    while time.time() < deadline:
        if journal.exists():
            try:
                if len(json.loads(journal.read_text())["offsets"]) >= 3:
                    break
            except (json.JSONDecodeError, KeyError):
                pass
        time.sleep(0.01)
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert proc.returncode == -signal.SIGKILL, "the run finished before it could be killed"
    assert not out.exists()
    assert main(args + ["--out", str(out), "--resume"]) == 0
    assert out.read_bytes() == full.read_bytes()


def test_rules_mode_needs_no_labels(tmp_path):
    """`--rules` triages without labels: rules, then self-training; `--rules-only` the rules."""
    cat, truth = two_class_catalog(tmp_path / "c", n=200, seed=1)
    out = tmp_path / "r.csv"
    assert main(["triage", str(cat), "--rules", "--out", str(out)]) == 0
    df = read_results(out)
    assert df["model_version"].eq("self-trained from rules-4").all()
    assert df["adaptation"].str.startswith("self-trained from rules-4").all()
    assert main(["triage", str(cat), "--rules", "--rules-only", "--out", str(out)]) == 0
    df = read_results(out)
    assert df["model_version"].eq("rules-4").all()
    assert {"p_narrow_bipolar", "p_stepped_leader", "p_recoil",
            "p_energetic_in_cloud"} <= set(df.columns)


def test_bad_inputs_exit_2(tmp_path, trained, capsys):
    """A missing model, a bad threshold or a broken catalog exit 2 without traceback."""
    cat, _ = two_class_catalog(tmp_path / "c", n=20, seed=1)
    out = str(tmp_path / "r.csv")
    assert main(["triage", str(cat), "--model", "nope", "--registry", str(tmp_path),
                 "--out", out]) == 2
    assert main(["triage", str(cat), "--rules", "--review-below", "1.5", "--out", out]) == 2
    (cat / "catalog.json").write_text("{}")
    assert main(["triage", str(cat), "--rules", "--out", out]) == 2
    assert "Traceback" not in capsys.readouterr().err


def test_store_labels_are_used_for_training(tmp_path, trained):
    """The trained model's card lists the catalog and its labels from the store."""
    card = json.loads((trained / "card.json").read_text())
    assert card["n_training_pulses"] == 240
    assert card["training_catalogs"][0]["content_hash"].startswith("sha256:")
    assert card["metrics"]["macro_f1"] > 0.95
    assert LabelStore  # the store module is the one the CLI used


def test_adapt_priors_estimates_the_season_mix(tmp_path):
    """`--adapt-priors`: the EM estimate of a shifted class mix is close to the truth.

    Trained on a balanced simulated season, triaging one with 70 % leader pulses
    (invented data; the EM itself is checked against hand-computed cases in
    test_priors.py).
    """
    from features.simulate import labels_path, simulate_season

    shape = dict(field_rate_hz=10e6, field_samples=2000, vhf_samples=2500)
    a = simulate_season(tmp_path / "a", 500, 41, class_mix={
        "narrow_bipolar": 0.25, "stepped_leader": 0.25, "recoil": 0.25,
        "energetic_in_cloud": 0.25}, **shape)
    mix = {"narrow_bipolar": 0.1, "stepped_leader": 0.7, "recoil": 0.1,
           "energetic_in_cloud": 0.1}
    b = simulate_season(tmp_path / "b", 400, 42, season="2032", class_mix=mix, **shape)
    store = str(tmp_path / "s.sqlite")
    assert main(["labels", "import", str(labels_path(a)), "--catalog", str(a), "--analyst",
                 "wren", "--store", store]) == 0
    model = tmp_path / "models" / "m"
    assert main(["train", str(a), "--store", store, "--out", str(model), "--max-iter",
                 "30"]) == 0
    summary = triage_catalog(open_catalog(b), tmp_path / "r.csv", model_dir=model,
                             adapt_priors=True)
    truth = pd.read_csv(labels_path(b))["label"].value_counts(normalize=True)
    for cls, p in summary["priors"].items():
        assert abs(p - truth[cls]) < 0.03, (cls, p, truth[cls])
    plain = triage_catalog(open_catalog(b), tmp_path / "r0.csv", model_dir=model)
    assert "priors" not in plain
