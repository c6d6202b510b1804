"""What a first season's first labels buy: the cold start with 0, 20, 50, 100, 300 anchors.

For every test catalog given (each with its truth ``<catalog>.labels.csv`` beside it,
as ``pulsesort simulate`` and ``python -m tests.speclit`` write it), the script runs the
cold start as a user would:

1. ``pulsesort triage CATALOG --rules`` with no label at all;
2. for each N: N pulses get the truth label, chosen as an analyst would on the review
   page (``--pick review``: the cold start's most doubtful pulses first, the order of
   the review queue by confidence) or at random (``--pick random``); they are imported
   with ``pulsesort labels import`` into a fresh store, and
   ``pulsesort triage CATALOG --rules --store STORE`` is run again.

Every score is computed on the pulses that were **not** labelled (the anchors would
otherwise score themselves), against the truth: macro-F1 over the true classes, the
worst class's F1, the share sent to review and the accuracy of the rest. No model
trained elsewhere is involved, so every figure is measured in the test world itself
with zero to N of its own labels.

Usage::

    python benchmarks/bench_anchors.py /tmp/xw/shifted /tmp/xw/records --jobs 2 \\
        --sizes 0 20 50 100 300 --pick review random --markdown anchors.md

Run by hand; about one cold start (tens of seconds at 2,000 pulses) per cell.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

sys.path.insert(0, str(Path(__file__).resolve().parent))
from _common import machine_info, pulsesort  # noqa: E402

#: The classes the rules know; a label of another class is added to the store first.
CLASSES = ("narrow_bipolar", "stepped_leader", "recoil", "energetic_in_cloud")


def _run(args):
    proc = subprocess.run(pulsesort() + [str(a) for a in args], capture_output=True,
                          text=True)
    if proc.returncode != 0:
        raise SystemExit(f"failed ({proc.returncode}): pulsesort {' '.join(map(str, args))}"
                         f"\n{proc.stderr[-2000:]}")
    return proc.stdout


def _score(results: Path, truth: pd.DataFrame, exclude: set[str]) -> dict:
    from sklearn.metrics import f1_score

    from classify.triage import read_results

    res = read_results(results)
    j = res.merge(truth[["event_id", "label"]], on="event_id", suffixes=("", "_true"))
    j = j[~j["event_id"].isin(exclude)]
    classes = sorted(set(j["label_true"]))
    per = f1_score(j["label_true"], j["label"], average=None, labels=classes)
    auto = j[~j["needs_review"]]
    return {"n_scored": int(len(j)),
            "macro_f1": float(np.mean(per)),
            "worst_class": classes[int(np.argmin(per))],
            "worst_f1": float(np.min(per)),
            "review": float(j["needs_review"].mean()),
            "auto_accuracy": (float((auto["label"] == auto["label_true"]).mean())
                              if len(auto) else float("nan")),
            "model_version": str(res["model_version"].iloc[0]) if len(res) else ""}


def _pick(first: pd.DataFrame, n: int, how: str, rng) -> list[str]:
    """Event ids an analyst would label first."""
    if n == 0:
        return []
    if how == "review":
        order = first.sort_values(["needs_review", "confidence"], ascending=[False, True],
                                  kind="stable")
        return order["event_id"].head(n).tolist()
    return rng.choice(first["event_id"].to_numpy(), size=min(n, len(first)),
                      replace=False).tolist()


def bench(catalog: Path, sizes, picks, jobs: int, work: Path, seed: int) -> list[dict]:
    from classify.triage import read_results

    truth = pd.read_csv(f"{catalog}.labels.csv", dtype=str, keep_default_na=False)
    first_out = work / f"{catalog.name}.n0.csv"
    _run(["triage", catalog, "--rules", "--out", first_out, "--jobs", jobs, "--no-progress"])
    first = read_results(first_out)
    rows = [{"world": catalog.name, "pick": "-", "n_labels": 0,
             **_score(first_out, truth, set())}]
    for how in picks:
        rng = np.random.default_rng(seed)
        for n in sizes:
            if n == 0:
                continue
            ids = _pick(first, n, how, rng)
            labels = truth.set_index("event_id").loc[ids, ["label"]].reset_index()
            lab_csv = work / f"{catalog.name}.{how}{n}.labels.csv"
            labels.to_csv(lab_csv, index=False)
            store = work / f"{catalog.name}.{how}{n}.sqlite"
            for extra in sorted(set(labels["label"]) - set(CLASSES)):  # a group's own class
                _run(["labels", "classes", "add", extra, "--description",
                      "a class of the test world's truth", "--store", store])
            _run(["labels", "import", lab_csv, "--catalog", catalog, "--analyst", "bench",
                  "--store", store])
            out = work / f"{catalog.name}.{how}{n}.csv"
            _run(["triage", catalog, "--rules", "--store", store, "--out", out, "--jobs",
                  jobs, "--no-progress"])
            rows.append({"world": catalog.name, "pick": how, "n_labels": n,
                         **_score(out, truth, set(ids))})
            print(json.dumps(rows[-1]), flush=True)
    return rows


def markdown(rows: list[dict]) -> str:
    head = ("| test world | labels | picked | macro-F1 | worst class (F1) | to review | "
            "right among the rest |")
    lines = [head, "|---|---:|---|---:|---|---:|---:|"]
    for r in rows:
        lines.append(f"| {r['world']} | {r['n_labels']} | {r['pick']} | {r['macro_f1']:.3f} "
                     f"| {r['worst_class']} ({r['worst_f1']:.3f}) | {100 * r['review']:.1f} % "
                     f"| {100 * r['auto_accuracy']:.2f} % |")
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("catalogs", nargs="+", type=Path)
    p.add_argument("--sizes", type=int, nargs="+", default=[0, 20, 50, 100, 300])
    p.add_argument("--pick", nargs="+", choices=["review", "random"], default=["review"])
    p.add_argument("--jobs", type=int, default=2)
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--markdown", type=Path)
    p.add_argument("--json", type=Path)
    a = p.parse_args(argv)
    rows = []
    with tempfile.TemporaryDirectory(prefix="bench-anchors-") as tmp:
        for cat in a.catalogs:
            rows += bench(cat, a.sizes, a.pick, a.jobs, Path(tmp), a.seed)
    table = markdown(rows)
    print(table)
    print("machine:", json.dumps(machine_info()))
    if a.markdown:
        a.markdown.write_text(table, encoding="utf-8")
    if a.json:
        a.json.write_text(json.dumps(rows, indent=1), encoding="utf-8")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
