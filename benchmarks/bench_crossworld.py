"""Cross-world benchmark: train in one world, triage structurally different ones.

Two independent writers make the worlds: pulsesort's own simulator (``pulsesort
simulate``, presets reference / next / stress members 0-4) and the spec-literal writer
``python -m tests.speclit`` (profiles plain / shifted / harder / records / near). All are
asked for the four classes narrow_bipolar, stepped_leader, recoil, energetic_in_cloud
(stress members keep their own drawn mix of these four). Training is done as a user
does it (``pulsesort labels import`` of the truth labels as analyst "truth", ``pulsesort
train``), triage with ``pulsesort triage`` (every variant of
``_crossworld.TRIAGE_VARIANTS``), and every pulse is scored against the writer's truth.
Beside each model cell, a plain ``HistGradientBoostingClassifier`` on twelve physical
features from ``pulsesort features`` gives a yardstick macro-F1.

Cells (train -> test): own:reference -> every other world; own:stress-1 -> own:reference
and -> speclit:shifted. Train and test seasons of one world have different seeds.
Zero-label rows: every test world triaged without a model (``--rules``).

    OMP_NUM_THREADS=1 python benchmarks/bench_crossworld.py --quick
    OMP_NUM_THREADS=1 python benchmarks/bench_crossworld.py --json xw.json --markdown xw.md
    python benchmarks/bench_crossworld.py --quick --cells 'own:reference->speclit:*'
"""

from __future__ import annotations

import json
import shutil
import sys
import time
from pathlib import Path

import _common as c
import _crossworld as xw

QUICK_EVENTS = 600


def ensure_world(wd, world: xw.World, role: str, events: int, seed: int, log: list) -> Path:
    """Write a world's season once; a later run in the same ``--workdir`` reuses it."""
    slug = world.name.replace(":", "-")
    out = wd.big(f"{role}-{slug}-s{seed}-n{events}")
    marker = Path(str(out) + ".done.json")
    cmd = xw.cmd_world(world, out, events, seed)
    if marker.is_file() and out.is_dir() and xw.labels_csv(out).is_file() \
            and json.loads(marker.read_text()).get("command") == cmd:
        print(f"reusing {out}", flush=True)
        log.append({"world": world.name, "role": role, "seed": seed, "seconds": None,
                    "folder": out.name, "written": "reused"})
        return out
    marker.unlink(missing_ok=True)
    features_csv(wd, out).unlink(missing_ok=True)
    m = c.run_measured(cmd, cwd=xw.REPO)
    marker.write_text(json.dumps({"command": cmd}))
    size = sum(p.stat().st_size for p in out.iterdir() if p.is_file())
    log.append({"world": world.name, "role": role, "seed": seed, "seconds": m.seconds,
                "folder": out.name, "written": "now", "mb": size / c.MB})
    return out


def features_csv(wd, catalog: Path) -> Path:
    return wd.root / "features" / f"{catalog.name}.csv"


def ensure_features(wd, catalog: Path, jobs: int) -> Path:
    """``pulsesort features`` of a catalog, once per written season."""
    out = features_csv(wd, catalog)
    if not out.is_file():
        out.parent.mkdir(exist_ok=True)
        c.run_measured(xw.cmd_features(catalog, out, jobs))
    return out


def train_model(wd, world: xw.World, catalog: Path, jobs: int) -> dict:
    slug = world.name.replace(":", "-")
    store = wd.root / f"labels-{slug}.sqlite"
    for p in wd.root.glob(store.name + "*"):
        p.unlink()
    model = wd.root / "models" / f"crossworld-{slug}"
    shutil.rmtree(model, ignore_errors=True)
    model.parent.mkdir(exist_ok=True)
    c.run_measured(xw.cmd_labels_import(xw.labels_csv(catalog), catalog, store))
    m = c.run_measured(xw.cmd_train(catalog, store, model, jobs))
    card = json.loads((model / "card.json").read_text(encoding="utf-8"))
    return {"train": world.name, "model": model, "seconds": m.seconds,
            "model_version": card.get("version"), "card_metrics": card.get("metrics"),
            "train_stdout": m.stdout[-3000:]}


def triage_scored(wd, catalog: Path, variant: str, tag: str, jobs: int, keep: bool,
                  model=None) -> dict:
    out = wd.root / "results" / f"{tag}.{variant}.csv"
    out.parent.mkdir(exist_ok=True)
    m = c.run_measured(xw.cmd_triage(catalog, variant, out, jobs, model))
    s = xw.score(out, catalog)
    s.update(seconds=m.seconds, triage_stdout=m.stdout[-2000:])
    if not keep:
        out.unlink(missing_ok=True)
    return s


def _error(exc) -> str:
    return str(exc).strip()[-1500:]


def run(args) -> dict:
    cells = xw.select_cells(args.cells)
    variants = args.variants or list(xw.TRIAGE_VARIANTS)
    for v in variants:
        if v not in xw.TRIAGE_VARIANTS:
            raise SystemExit(f"--variants: unknown {v!r}; known: {list(xw.TRIAGE_VARIANTS)}")
    model_variants = [v for v in variants if xw.needs_model(v)]
    zero_variants = [v for v in variants if not xw.needs_model(v)]
    train_names = list(dict.fromkeys(t for t, _ in cells)) if model_variants else []
    test_names = list(dict.fromkeys(s for _, s in cells))
    rows, models, worlds_log, errors = [], {}, [], []
    t_start = time.perf_counter()
    with c.Workdir(args.workdir, keep=args.keep, prefix="pulsesort-crossworld-") as wd:
        c.check_disk(wd.root, (len(train_names) * c.catalog_bytes(args.train_events, 8000,
                                                                   20000)
                               + len(test_names) * c.catalog_bytes(args.events, 8000, 20000)))
        folders = {}
        for role, names, n in (("train", train_names, args.train_events),
                               ("test", test_names, args.events)):
            for name in names:
                w = xw.WORLDS[name]
                try:
                    folders[role, name] = ensure_world(wd, w, role, n,
                                                       xw.world_seed(w, args.seed, role),
                                                       worlds_log)
                except RuntimeError as exc:
                    errors.append({"step": f"write {role} world {name}", "error": _error(exc)})
        for name in train_names:
            if ("train", name) not in folders:
                continue
            try:
                models[name] = train_model(wd, xw.WORLDS[name], folders["train", name],
                                           args.jobs)
                print(models[name]["train_stdout"], flush=True)
            except RuntimeError as exc:
                errors.append({"step": f"train on {name}", "error": _error(exc)})
        for train, test in cells:
            cell = xw.cell_name(train, test)
            ref = {}
            if model_variants and ("test", test) in folders and train in models:
                try:
                    ref = xw.reference_scores(
                        ensure_features(wd, folders["train", train], args.jobs),
                        folders["train", train],
                        ensure_features(wd, folders["test", test], args.jobs),
                        folders["test", test])
                except RuntimeError as exc:
                    errors.append({"step": f"reference classifier {cell}",
                                   "error": _error(exc)})
            for v in model_variants:
                row = {"cell": cell, "train": train, "test": test, "variant": v}
                if ("test", test) not in folders or train not in models:
                    row["error"] = "world or model missing (see errors)"
                else:
                    tag = f"{train}__{test}".replace(":", "-")
                    try:
                        row.update(triage_scored(wd, folders["test", test], v, tag,
                                                 args.jobs, args.keep, models[train]["model"]))
                    except RuntimeError as exc:
                        row["error"] = _error(exc)
                        errors.append({"step": f"triage {cell} ({v})", "error": row["error"]})
                row.update(ref)
                rows.append(row)
        for test in test_names:
            for v in zero_variants:
                row = {"cell": f"zero labels -> {test}", "train": None, "test": test,
                       "variant": v}
                if ("test", test) not in folders:
                    row["error"] = "world missing (see errors)"
                else:
                    try:
                        row.update(triage_scored(wd, folders["test", test], v,
                                                 test.replace(":", "-"), args.jobs,
                                                 args.keep))
                    except RuntimeError as exc:
                        row["error"] = _error(exc)
                        errors.append({"step": f"triage {test} ({v})", "error": row["error"]})
                rows.append(row)
        workdir = str(wd.root)
        if not args.keep:
            for sub in ("features", "results"):
                shutil.rmtree(wd.root / sub, ignore_errors=True)
            for marker in wd.root.glob("*.done.json"):   # their seasons go with the workdir
                marker.unlink()
    checks = [ck for r in rows for ck in xw.checks_of(r)]
    for mdl in models.values():
        mdl["model"] = str(mdl["model"])
    return {"rows": rows, "checks": checks, "models": list(models.values()),
            "worlds": worlds_log, "errors": errors, "workdir": workdir,
            "seconds_total": time.perf_counter() - t_start}


MAIN_COLUMNS = ["cell", "variant", "pulses", "macro_f1", "ref_macro_f1", "accuracy", "ece",
                "coverage", "coverage_unflagged", "mean_set_size", "review", "auto_accuracy",
                "unknown_truth", "novel"]


def goal_matrix(checks: list[dict]) -> tuple[list[dict], list[str]]:
    """One row per (cell, variant), one column per goal: ``value yes`` or ``value NO``."""
    goals = list(dict.fromkeys(ck["goal"] for ck in checks))
    rows: dict = {}
    for ck in checks:
        row = rows.setdefault((ck["cell"], ck["variant"]),
                              {"cell": ck["cell"], "variant": ck["variant"]})
        value = "-" if ck["value"] is None else f"{ck['value']:.4f}"
        row[ck["goal"]] = f"{value} {'yes' if ck['met'] else 'NO'}"
    return list(rows.values()), ["cell", "variant", *goals]


def tables(result: dict) -> list[tuple[str, list[dict], list[str]]]:
    """(title, rows, columns) of every table the benchmark prints."""
    rows = [r for r in result["rows"] if not r.get("error")]
    classes = sorted({k for r in rows for k in r["recall"]})
    reasons = sorted({k for r in rows for k in r["review_reasons"]})
    recall = [{"cell": r["cell"], "variant": r["variant"], **r["recall"]} for r in rows]
    why = [{"cell": r["cell"], "variant": r["variant"], **r["review_reasons"]} for r in rows]
    models = [{"train": m["train"], "model_version": m["model_version"],
               "train_seconds": m["seconds"]} for m in result["models"]]
    extra = [{"cell": r["cell"], "variant": r["variant"],
              "model_version": ", ".join(r["model_version"]),
              "adaptation": json.dumps(r["adaptation"]) if r["adaptation"] else "-",
              "unknown_handling": json.dumps(r.get("unknown_handling")) if
              r.get("unknown_handling") else "-", "triage_seconds": r["seconds"]}
             for r in rows]
    return [
        ("scores per cell (macro-F1 over the true classes the model knows; coverage and "
         "accuracy over every pulse)", rows, MAIN_COLUMNS),
        ("recall per true class", recall, ["cell", "variant", *classes]),
        ("review reasons (share of all pulses; a pulse may have several)", why,
         ["cell", "variant", *reasons]),
        ("goals (" + "; ".join(sorted({f"{ck['goal']} {ck['target']}" for ck in
                                        result["checks"] if not ck["goal"].startswith(
                                            "macro_f1 >= ref")})) + ")",
         *goal_matrix(result["checks"])),
        ("models", models, ["train", "model_version", "train_seconds"]),
        ("versions, adaptation columns, pulses of unknown classes", extra,
         ["cell", "variant", "model_version", "adaptation", "unknown_handling",
          "triage_seconds"]),
        ("worlds", result["worlds"], ["world", "role", "seed", "folder", "mb", "seconds",
                                      "written"]),
    ]


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--train-events", type=int, default=4000,
                   help="pulses (all labelled) of each training world")
    p.add_argument("--events", type=int, default=4000, help="pulses of every test world")
    p.add_argument("--quick", action="store_true",
                   help=f"smoke run: {QUICK_EVENTS} training and {QUICK_EVENTS} test pulses")
    p.add_argument("--jobs", type=int, default=2, help="--jobs of every pulsesort command")
    p.add_argument("--seed", type=int, default=11, help="base seed: train worlds use "
                   "seed + offset, test worlds seed + 100 + offset")
    p.add_argument("--cells", nargs="+", metavar="GLOB", default=None,
                   help="only cells whose TRAIN->TEST matches, e.g. 'own:reference->own:*'")
    p.add_argument("--variants", nargs="+", metavar="NAME", default=None,
                   help=f"triage variants to run (default all: {', '.join(xw.TRIAGE_VARIANTS)})")
    p.add_argument("--markdown", metavar="PATH", default=None,
                   help="also write the tables as Markdown (for the README)")
    args = p.parse_args(argv)
    if args.quick:
        args.train_events = args.events = QUICK_EVENTS
    info = c.machine_info()
    machine = c.format_machine(info)
    print(machine, flush=True)
    result = run(args)
    print()
    texts = []
    for title, rows, cols in tables(result):
        texts.append(c.print_table(rows, cols, title))
        print()
    for e in result["errors"]:
        print(f"FAILED: {e['step']}\n  {e['error']}\n")
    summary = (f"cross-world benchmark: {args.train_events:,} labelled training pulses per "
               f"train world, {args.events:,} pulses per test world, --jobs {args.jobs}, "
               f"seed {args.seed}; {result['seconds_total'] / 60:.1f} min in all")
    print(summary)
    if args.markdown:
        parts = [f"{summary}\n\n```\n{machine}\n```\n"]
        for title, rows, cols in tables(result):
            parts.append(f"**{title}**\n\n{c.markdown_table(rows, cols)}\n")
        for e in result["errors"]:
            parts.append(f"FAILED: {e['step']}: `{e['error'].splitlines()[-1]}`\n")
        path = Path(args.markdown)
        tmp = path.with_name(f".{path.name}.tmp")
        tmp.write_text("\n".join(parts), encoding="utf-8")
        tmp.replace(path)
        print(f"tables written to {path}")
    if args.json:
        c.write_json(args.json, {"benchmark": "crossworld", "machine": info,
                                 "train_events": args.train_events, "events": args.events,
                                 "seed": args.seed, "jobs": args.jobs,
                                 "cells": [xw.cell_name(*cl) for cl in
                                           xw.select_cells(args.cells)],
                                 "triage_variants": xw.TRIAGE_VARIANTS,
                                 "reference_features": xw.REFERENCE_FEATURES,
                                 **result, "tables": texts})
    return 1 if result["errors"] else 0


if __name__ == "__main__":
    sys.exit(main())
