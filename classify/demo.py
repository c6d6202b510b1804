"""The demo: the whole job on the invented station "hollowmere", in a fresh folder.

1. simulate a labelled season (hollowmere-2031);
2. import its labels as analyst "wren", and a second opinion from analyst
   "tamsin" on a few hundred pulses who disagrees on some of them;
3. train a model on the current labels (pulses in conflict are left out);
4. simulate the next season (hollowmere-2032) with other instrument settings
   (atmospheric sign convention, int16 counts, another field sample rate) and
   another class mix;
5. triage it without any label first (the cold start a group's first season gets:
   rules, then self-training), then with the 2031 model, and score both against the
   simulator's truth;
6. write the data card of the labelled season.

Everything is invented (station, seasons, analysts); nothing is real data.
"""

from __future__ import annotations

import logging
import time
from pathlib import Path

import numpy as np
import pandas as pd

from features import InputError, open_catalog

from .cards import write_data_card
from .labels import LabelStore
from .training import train_from_store
from .triage import read_results, triage_catalog

__all__ = ["run_demo"]

logger = logging.getLogger("pulsesort")

STATION = "hollowmere"


def _second_opinion(labels: pd.DataFrame, n: int, n_disagree: int, seed: int) -> pd.DataFrame:
    """A second analyst's labels on ``n`` pulses, ``n_disagree`` of them different."""
    rng = np.random.default_rng(seed)
    pick = rng.choice(len(labels), size=min(n, len(labels)), replace=False)
    sub = labels.iloc[np.sort(pick)][["event_id", "label"]].copy()
    classes = sorted(labels["label"].unique())
    flip = rng.choice(len(sub), size=min(n_disagree, len(sub)), replace=False)
    for i in flip:
        others = [c for c in classes if c != sub.iloc[i, 1]]
        sub.iloc[i, 1] = others[int(rng.integers(len(others)))]
    sub["analyst"] = "tamsin"
    sub["decided_at"] = "2031-11-02T09:30:00Z"
    sub["note"] = ""
    return sub


def _score(results, truth):
    """Macro-F1, share sent to review and accuracy of the rest, against the truth."""
    from sklearn.metrics import f1_score

    res = read_results(results)
    joined = res.merge(truth[["event_id", "label"]], on="event_id", suffixes=("", "_true"))
    f1 = f1_score(joined["label_true"], joined["label"], average="macro",
                  labels=sorted(set(joined["label_true"])))
    auto = joined[~joined["needs_review"]]
    acc = float((auto["label"] == auto["label_true"]).mean()) if len(auto) else float("nan")
    return float(f1), float(joined["needs_review"].mean()), acc


def run_demo(folder, *, events=4000, next_events=4000, seed=2031, n_jobs=1, echo=print):
    """Run the demo in ``folder`` (created; must be empty); return a summary dict."""
    from features.simulate import simulate_season

    folder = Path(folder)
    if folder.exists() and any(folder.iterdir()):
        raise InputError(f"{folder}: not empty; the demo runs in a fresh folder "
                              "(remove it or give another --dir)")
    folder.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    store_path = folder / "labels.sqlite"

    echo(f"[1/6] simulating season 2031 of the invented station '{STATION}' "
         f"({events:,} pulses)")
    season_a = simulate_season(folder / f"{STATION}-2031", events, seed, station=STATION,
                               season="2031", preset="reference")
    labels_a = Path(str(season_a) + ".labels.csv")

    echo("[2/6] importing labels: analyst 'wren' (all), analyst 'tamsin' (a second "
         "opinion on 300 pulses)")
    store = LabelStore(store_path)
    cat_a = open_catalog(season_a)
    truth_a = pd.read_csv(labels_a, dtype=str, keep_default_na=False)
    first = folder / "wren-2031.labels.csv"
    truth_a.assign(analyst="wren", decided_at="2031-10-28T14:00:00Z").to_csv(first, index=False)
    store.import_labels(first, cat_a)
    second = folder / "tamsin-2031.labels.csv"
    _second_opinion(truth_a, 300, 12, seed).to_csv(second, index=False)
    store.import_labels(second, cat_a)
    conflicts = store.conflicts([cat_a.catalog_id])
    echo(f"      {len(truth_a):,} + 300 decisions; {len(conflicts)} pulses in conflict "
         "between the two analysts (left out of training until resolved)")

    echo("[3/6] training a calibrated classifier (grouped by flash)")
    model_dir, card = train_from_store([season_a], store, folder / "models" /
                                       f"{STATION}-2031-v1", n_jobs=n_jobs)
    m = card["metrics"]
    echo(f"      grouped-CV macro-F1 {m['macro_f1']:.4f}, ECE {m['ece']:.4f}, conformal "
         f"coverage {m['conformal_coverage']:.3f} (target {m['conformal_target']:.2f})")

    echo(f"[4/6] simulating season 2032 with other instrument settings and class mix "
         f"({next_events:,} pulses)")
    season_b = simulate_season(folder / f"{STATION}-2032", next_events, seed + 1,
                               station=STATION, season="2032", preset="next")

    cat_b = open_catalog(season_b)
    truth_b = pd.read_csv(str(season_b) + ".labels.csv", dtype=str, keep_default_na=False)
    echo("[5/6] triaging season 2032: first with no label at all (cold start: rules, then "
         "self-training on the season), then with the 2031 model")
    cold = folder / f"{STATION}-2032.coldstart.csv"
    cold_summary = triage_catalog(cat_b, cold, model_dir=None, n_jobs=n_jobs)
    cold_f1, cold_review, cold_auto = _score(cold, truth_b)
    echo(f"      cold start ({cold_summary['model_version']}): macro-F1 {cold_f1:.3f} vs "
         f"the truth, {cold_review:.1%} sent to review, {cold_auto:.2%} right among the "
         "rest")
    results = folder / f"{STATION}-2032.triage.csv"
    summary = triage_catalog(cat_b, results, model_dir=model_dir, n_jobs=n_jobs)
    f1, review, acc_auto = _score(results, truth_b)
    echo(f"      2031 model ({summary['model_version']}): macro-F1 {f1:.3f}, {review:.1%} "
         f"sent to review, {acc_auto:.2%} right among the rest")

    echo("[6/6] writing the data card of the labelled season")
    card_path = write_data_card(cat_a, store, folder / "data_cards")
    # a few hundred labels of the new season, as an analyst would make them, for retrain
    sample = truth_b.sample(n=min(300, len(truth_b)), random_state=seed)
    sample = sample.assign(analyst="ines", decided_at="2032-10-20T15:00:00Z", note="")
    new_labels = folder / f"{STATION}-2032.sample300.labels.csv"
    sample[["event_id", "label", "analyst", "decided_at", "note"]].to_csv(new_labels,
                                                                         index=False)
    seconds = time.perf_counter() - t0
    return {"folder": folder, "season_a": season_a, "season_b": season_b,
            "store": store_path, "model_dir": model_dir, "results": results,
            "card": card_path, "triage": summary, "new_labels": new_labels,
            "macro_f1_vs_truth": float(f1), "coldstart": cold, "coldstart_macro_f1": cold_f1,
            "accuracy_not_reviewed": acc_auto, "n_conflicts": len(conflicts),
            "seconds": seconds}
