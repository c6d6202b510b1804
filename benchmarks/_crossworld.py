"""Worlds, command lines, scores and goals of ``bench_crossworld.py`` (run by hand).

Everything the benchmark runs is written out here, in one place, so the command lines
can follow the CLI as it changes:

* :data:`WORLDS`: every world (writer, preset or profile, stress member, seed offset);
  :data:`CELLS`: the (train world, test world) pairs; :data:`TRIAGE_VARIANTS`: the
  ways ``pulsesort triage`` is run on a test world.
* ``cmd_*``: the command lines (``pulsesort simulate``, ``python -m tests.speclit``,
  ``pulsesort labels import``, ``train``, ``triage``, ``features``).
* :func:`score`: every metric of one results file against the truth labels.
* :func:`reference_scores`: a plain ``HistGradientBoostingClassifier`` on
  :data:`REFERENCE_FEATURES`, the yardstick beside the model.
* :func:`checks_of`: the goals, met or not.
"""

from __future__ import annotations

import fnmatch
import sys
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

import _common as c
import numpy as np

REPO = Path(__file__).resolve().parent.parent

#: The four classes every world of the 4-class matrix is asked for.
FOUR_CLASSES = ("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud")


@dataclass(frozen=True)
class World:
    """One world: which writer makes it, how, and its seed offset."""

    name: str            # "own:stress-1", "speclit:near"
    writer: str          # "own" (pulsesort simulate) or "speclit" (python -m tests.speclit)
    kind: str            # simulator preset or speclit profile
    member: int | None = None   # stress-family member
    offset: int = 0      # seed = --seed + offset (train) or --seed + 100 + offset (test)


WORLDS = {w.name: w for w in [
    World("own:reference", "own", "reference", offset=0),
    World("own:next", "own", "next", offset=1),
    *[World(f"own:stress-{k}", "own", "stress", member=k, offset=2 + k) for k in range(5)],
    World("speclit:plain", "speclit", "plain", offset=7),
    World("speclit:shifted", "speclit", "shifted", offset=8),
    World("speclit:harder", "speclit", "harder", offset=9),
    World("speclit:records", "speclit", "records", offset=10),
    World("speclit:near", "speclit", "near", offset=11),
]}

#: (train world, test world). A train world and a test world of the same name are two
#: seasons of it with different seeds.
CELLS = ([("own:reference", name) for name in WORLDS if name != "own:reference"]
         + [("own:stress-1", "own:reference"), ("own:stress-1", "speclit:shifted"),
            ("speclit:plain", "own:reference"), ("speclit:plain", "own:stress-3"),
            ("speclit:plain", "speclit:records")])
TRAIN_WORLDS = tuple(dict.fromkeys(t for t, _ in CELLS))
MILD_CELL = ("own:reference", "own:next")

#: Ways to triage a test world. A variant whose arguments hold "{model}" runs once per
#: cell with the cell's model; any other is a zero-label variant, run once per test
#: world: the cold start (rules, then self-training on the season) and the rules alone.
#: ``model`` is the trained model alone (``--season-fit never``), ``season-fit`` the
#: trained model with ``--season-fit`` (always: its confident pulses anchor a fit on the
#: test season itself), ``auto`` what ``triage --model`` does by default (the fit only
#: where the model would send more than 2.5 % of the season to review for doubt).
TRIAGE_VARIANTS = {
    "model": ["--model", "{model}", "--season-fit", "never"],
    "season-fit": ["--model", "{model}", "--season-fit"],
    "auto": ["--model", "{model}"],
    "rules": ["--rules"],
    "rules-only": ["--rules", "--rules-only"],
}


def needs_model(variant: str) -> bool:
    return any("{model}" in a for a in TRIAGE_VARIANTS[variant])


def cell_name(train: str, test: str) -> str:
    return f"{train} -> {test}"


def select_cells(patterns) -> list[tuple[str, str]]:
    """Cells whose ``TRAIN->TEST`` (spaces ignored) matches one of the glob patterns."""
    if not patterns:
        return list(CELLS)
    keys = {f"{t}->{s}": (t, s) for t, s in CELLS}
    chosen = [cell for key, cell in keys.items()
              if any(fnmatch.fnmatchcase(key, p.replace(" ", "")) for p in patterns)]
    if not chosen:
        raise SystemExit(f"--cells {' '.join(patterns)}: no cell matches; cells are "
                         + ", ".join(keys))
    return chosen


def world_seed(world: World, base_seed: int, role: str) -> int:
    """Seed of a world's season: train seasons ``base + offset``, test ``base + 100 + offset``."""
    return base_seed + world.offset + (0 if role == "train" else 100)


def stress_four_class_mix(member: int) -> dict:
    """The stress member's own drawn class mix, restricted to the four classes."""
    from features.simulate import stress_settings

    mix = {k: v for k, v in stress_settings(member)["class_mix"].items() if k in FOUR_CLASSES}
    total = sum(mix.values())
    return {k: round(v / total, 4) for k, v in mix.items()}


# --------------------------------------------------------------------------- command lines
def cmd_world(world: World, out, events: int, seed: int) -> list[str]:
    """The command line that writes ``world`` (a catalog folder plus ``OUT.labels.csv``)."""
    if world.writer == "own":
        extra = {}
        if world.member is not None:
            extra = {"member": world.member,
                     "class_mix": stress_four_class_mix(world.member)}
        return c.pulsesort(*c.simulate_args(out, events, seed, world.kind, **extra))
    return [sys.executable, "-m", "tests.speclit", str(out), "--events", str(events),
            "--seed", str(seed), "--profile", world.kind, "--classes", *FOUR_CLASSES,
            "--overwrite"]


def cmd_labels_import(labels_csv, catalog, store) -> list[str]:
    return c.pulsesort("labels", "import", labels_csv, "--catalog", catalog,
                       "--analyst", "truth", "--store", store)


def cmd_train(catalog, store, model_dir, jobs: int) -> list[str]:
    return c.pulsesort("train", catalog, "--store", store, "--out", model_dir,
                       "--jobs", jobs, "--no-progress")


def cmd_triage(catalog, variant: str, out, jobs: int, model_dir=None) -> list[str]:
    how = [str(a).replace("{model}", str(model_dir)) for a in TRIAGE_VARIANTS[variant]]
    return c.pulsesort("triage", catalog, *how, "--out", out, "--jobs", jobs,
                       "--no-progress")


def cmd_features(catalog, out, jobs: int) -> list[str]:
    return c.pulsesort("features", catalog, "--out", out, "--jobs", jobs, "--no-progress")


def labels_csv(catalog) -> Path:
    """The truth labels both writers put beside a catalog folder."""
    return Path(str(catalog) + ".labels.csv")


# --------------------------------------------------------------------------- scores
def _truth(catalog):
    import pandas as pd

    return pd.read_csv(labels_csv(catalog), usecols=["event_id", "label"], dtype=str)


#: Review reasons about the record rather than the class (triage gives these pulses an
#: empty set in model mode).
QUALITY_REASONS = {"clipped", "no_vhf", "field_unusable"}


def score(results_csv, catalog) -> dict:
    """Every metric of one triage results file against the truth labels of ``catalog``.

    Coverage counts every pulse: an empty set, and a pulse whose true class the model
    does not know, are misses. ECE is over the pulses whose true class the model knows.
    ``coverage_unflagged`` is the coverage of the pulses without a record-quality reason
    (:data:`QUALITY_REASONS`), to tell the sets apart from the quality flags.
    """
    from sklearn.metrics import f1_score

    from classify.stats import expected_calibration_error
    from classify.triage import read_results

    res = read_results(results_csv)
    truth = _truth(catalog)
    df = res.merge(truth, on="event_id", suffixes=("", "_true"), validate="one_to_one")
    if len(df) != len(truth) or len(df) != len(res):
        raise RuntimeError(f"{results_csv}: {len(df)} rows joined, {len(res)} results, "
                           f"{len(truth)} truth labels")
    classes = [col[2:] for col in res.columns if col.startswith("p_")]
    y, pred = df["label_true"].to_numpy(), df["label"].to_numpy()
    known = np.isin(y, classes)
    true_known = sorted(set(y[known]))
    proba = df[[f"p_{k}" for k in classes]].to_numpy(dtype=np.float64)
    sets = df["prediction_set"].str.split("|")
    in_set = np.array([t in s for t, s in zip(y, sets)])
    set_size = np.array([len([k for k in s if k]) for s in sets])
    review = df["needs_review"].to_numpy(dtype=bool)
    auto = ~review
    reasons = Counter(r for text in df["review_reason"] for r in text.split(";") if r)
    quality = np.array([bool(set(text.split(";")) & QUALITY_REASONS)
                        for text in df["review_reason"]])
    n = len(df)
    out = {
        "pulses": n,
        "classes_known": classes,
        "macro_f1": float(f1_score(y, pred, labels=true_known, average="macro",
                                   zero_division=0)) if true_known else None,
        "accuracy": float(np.mean(pred == y)),
        "recall": {k: float(np.mean(pred[y == k] == k)) for k in sorted(set(y))},
        "ece": (expected_calibration_error(proba[known], y[known], classes=classes)
                if known.any() else None),
        "coverage": float(in_set.mean()),
        "mean_set_size": float(set_size.mean()),
        "empty_set": float(np.mean(set_size == 0)),
        "quality_flagged": float(quality.mean()),
        "coverage_unflagged": float(in_set[~quality].mean()) if (~quality).any() else None,
        "review": float(review.mean()),
        "auto_accepted": float(auto.mean()),
        "auto_accuracy": float(np.mean(pred[auto] == y[auto])) if auto.any() else None,
        "review_reasons": {k: v / n for k, v in reasons.most_common()},
        "novel": float(df["novel"].mean()),
        "unknown_truth": float(np.mean(~known)),
        "model_version": sorted(set(df["model_version"].astype(str))),
        "truth_mix": {k: float(v) for k, v in
                      df["label_true"].value_counts(normalize=True).sort_index().items()},
    }
    if (~known).any():
        unk = df.loc[~known]
        out["unknown_handling"] = {
            "classes": {k: int(v) for k, v in unk["label_true"].value_counts().items()},
            "sent_to_review": float(unk["needs_review"].mean()),
            "novel": float(unk["novel"].mean()),
            "labelled_as": {k: int(v) for k, v in unk["label"].value_counts().items()}}
    adapt = [col for col in res.columns if "adapt" in col.lower() or "self_train" in col.lower()]
    out["adaptation"] = {col: {str(k): int(v) for k, v in
                               df[col].astype(str).value_counts().head(10).items()}
                         for col in adapt}
    return out


#: Features of the reference classifier (physical, unit in the name); no tuning.
REFERENCE_FEATURES = ("width_s", "fwhm_s", "rise_time_s", "initial_half_cycle_s",
                      "zero_crossing_s", "bipolarity", "range_normalized_peak_v_per_m",
                      "peak_current_a", "vhf_snr_db", "speed_m_per_s", "altitude_m",
                      "time_in_flash_s")


def _feature_table(features_csv, catalog):
    import pandas as pd

    feats = pd.read_csv(features_csv, usecols=["event_id", *REFERENCE_FEATURES],
                        dtype={"event_id": str})
    df = feats.merge(_truth(catalog), on="event_id", validate="one_to_one")
    if len(df) != len(feats):
        raise RuntimeError(f"{features_csv}: {len(df)} of {len(feats)} rows have a truth label")
    X = df[list(REFERENCE_FEATURES)].astype(np.float64).replace([np.inf, -np.inf], np.nan)
    return X.to_numpy(), df["label"].to_numpy()


def reference_scores(train_features, train_catalog, test_features, test_catalog) -> dict:
    """Macro-F1 and accuracy of a plain ``HistGradientBoostingClassifier`` (defaults,
    ``random_state=0``) trained on :data:`REFERENCE_FEATURES` of the train world."""
    from sklearn.ensemble import HistGradientBoostingClassifier
    from sklearn.metrics import f1_score

    X, y = _feature_table(train_features, train_catalog)
    Xt, yt = _feature_table(test_features, test_catalog)
    clf = HistGradientBoostingClassifier(random_state=0).fit(X, y)
    pred = clf.predict(Xt)
    labels = sorted(set(yt) & set(clf.classes_))
    return {"ref_macro_f1": float(f1_score(yt, pred, labels=labels, average="macro",
                                           zero_division=0)),
            "ref_accuracy": float(np.mean(pred == yt)),
            "ref_recall": {k: float(np.mean(pred[yt == k] == k)) for k in sorted(set(yt))}}


# --------------------------------------------------------------------------- goals
GOAL_REVIEW = 0.05
GOAL_AUTO_ACCURACY = 0.995
GOAL_COVERAGE, GOAL_COVERAGE_TOL = 0.95, 0.02
GOAL_ECE = 0.02
GOAL_MACRO_F1 = 0.99
GOAL_ZERO_LABEL_F1, GOAL_ZERO_LABEL_WORST = 0.90, 0.85


def _check(cell, variant, goal, value, target, met):
    return {"cell": cell, "variant": variant, "goal": goal, "value": value,
            "target": target, "met": None if value is None else bool(met)}


def checks_of(row: dict) -> list[dict]:
    """The goals of one scored row (a model cell or a zero-label row), met or not."""
    cell, variant = row["cell"], row["variant"]
    if row.get("error"):
        return [_check(cell, variant, "ran", None, "exit 0", False)]
    if not needs_model(variant):
        worst = min(row["recall"].values())
        return [
            _check(cell, variant, "0-label macro_f1", row["macro_f1"],
                   f">= {GOAL_ZERO_LABEL_F1}", row["macro_f1"] >= GOAL_ZERO_LABEL_F1),
            _check(cell, variant, "0-label worst recall", worst,
                   f">= {GOAL_ZERO_LABEL_WORST}", worst >= GOAL_ZERO_LABEL_WORST),
        ]
    auto = row["auto_accuracy"]
    out = [
        _check(cell, variant, "review", row["review"], f"<= {GOAL_REVIEW}",
               row["review"] <= GOAL_REVIEW),
        _check(cell, variant, "auto_accuracy", auto, f">= {GOAL_AUTO_ACCURACY}",
               auto is not None and auto >= GOAL_AUTO_ACCURACY),
        _check(cell, variant, "coverage", row["coverage"],
               f"{GOAL_COVERAGE} +- {GOAL_COVERAGE_TOL}",
               abs(row["coverage"] - GOAL_COVERAGE) <= GOAL_COVERAGE_TOL + 1e-12),
        _check(cell, variant, "ECE", row["ece"], f"<= {GOAL_ECE}",
               row["ece"] is not None and row["ece"] <= GOAL_ECE),
        _check(cell, variant, "macro_f1", row["macro_f1"], f">= {GOAL_MACRO_F1}",
               row["macro_f1"] is not None and row["macro_f1"] >= GOAL_MACRO_F1),
    ]
    if (row["train"], row["test"]) == MILD_CELL and row.get("ref_macro_f1") is not None:
        out.append(_check(cell, variant, "macro_f1 >= ref",
                          row["macro_f1"], f">= {row['ref_macro_f1']:.4f}",
                          row["macro_f1"] >= row["ref_macro_f1"]))
    return out
