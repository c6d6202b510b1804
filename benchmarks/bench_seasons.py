"""A new season: drift report, class-mix estimate, and retrain with 0 and 300 new labels.

Simulates two seasons of the invented station: A (reference preset) and B, the next
season, with a deliberate instrument change (default: the field digitizer slowed from
20 MS/s to 5 MS/s, same record length; ``--change SETTING=VALUE`` for others, e.g.
``decay_time_s=2e-4`` or ``vhf_delay_s=9e-7``) and a different class mix. Then, as a
user would:

1. ``pulsesort labels import`` A's truth labels (analyst "wren"), ``pulsesort train A
   --promote``: the champion;
2. ``pulsesort drift A B --model CHAMPION``: checks that the changed setting is listed
   first among the instrument changes (and nothing else is), that the top-ranked
   drifting feature is one the change is expected to move, and that the EM estimate of
   B's class mix (Saerens et al. 2002, ``classify.priors``) is within 3 points of B's
   true mix for every class;
3. ``pulsesort retrain --new B --with A`` with 0 labels of B: the champion must be kept
   (exit 0, the reason printed);
4. 300 random truth labels of B imported as analyst "ines", ``pulsesort retrain`` again:
   the challenger must be promoted, and it must beat the champion on B: its macro-F1 on
   B's pulses that were not among the 300 labels (both models triage B with
   ``pulsesort triage``) is higher, and so is the retrain comparison's estimate.

Targets from issue 6.

    OMP_NUM_THREADS=1 python benchmarks/bench_seasons.py --events 2500     # smoke run
    python benchmarks/bench_seasons.py --json seasons.json               # full size
"""

from __future__ import annotations

import json
import shutil
import sys

import _common as c
import numpy as np
import pandas as pd
from bench_accuracy import score

MIX_B = {"narrow_bipolar": 0.30, "stepped_leader": 0.25, "recoil": 0.30,
         "energetic_in_cloud": 0.15}
#: simulator setting -> the instrument setting `pulsesort drift` names
DRIFT_NAME = {
    "field_rate_hz": "field.sample_rate_hz", "field_samples": "field.window_s",
    "pretrigger_s": "field.pretrigger_s", "decay_time_s": "field.decay_time_s",
    "field_delay_s": "field.delay_s", "sign_convention": "field.sign_convention",
    "units": "field.units", "scale": "field.scale", "full_scale": "field.full_scale",
    "vhf_rate_hz": "vhf.sample_rate_hz", "vhf_samples": "vhf.window_s",
    "vhf_delay_s": "vhf.delay_s", "band_hz": "vhf.band_hz", "vhf_kind": "vhf.kind",
    "with_vhf": "vhf.present", "with_range": "events.range_m", "with_xyz": "sources.xyz",
    "with_sources": "sources.present",
}
REFERENCE = {"field_rate_hz": 20e6, "field_samples": 8000, "vhf_rate_hz": 25e6,
             "vhf_samples": 10000}
TARGET_PRIOR_POINTS = 0.03
N_NEW_LABELS = 300


def parse_change(items) -> tuple[dict, set]:
    """Simulator settings of B's instrument change, and the drift names expected to show.

    A new sample rate keeps the record length (the samples per record follow it) unless
    the samples are given too, so only the rate is expected among the changes.
    """
    out = {}
    for item in items:
        key, sep, value = item.partition("=")
        if not sep:
            raise SystemExit(f"--change {item!r}: expected SETTING=VALUE")
        key = key.strip().replace("-", "_")
        if key not in DRIFT_NAME:
            raise SystemExit(f"--change {key!r}: one of {', '.join(DRIFT_NAME)}")
        low = value.strip().lower()
        if low in ("true", "false"):
            out[key] = low == "true"
        elif low == "none":
            out[key] = None
        else:
            try:
                out[key] = float(value)
            except ValueError:
                out[key] = value.strip()
    expected = {DRIFT_NAME[k] for k in out}
    for rate, samples in (("field_rate_hz", "field_samples"), ("vhf_rate_hz", "vhf_samples")):
        if rate in out and samples not in out:
            out[samples] = int(round(REFERENCE[samples] * out[rate] / REFERENCE[rate]))
    for k in ("field_samples", "vhf_samples"):
        if k in out:
            out[k] = int(out[k])
    return out, expected


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--events", type=int, default=10_000, help="pulses of each season")
    p.add_argument("--seed", type=int, default=21, help="seed of A (B uses seed + 1)")
    p.add_argument("--change", action="append", default=None, metavar="SETTING=VALUE",
                   help="instrument change of B (repeatable; default field_rate_hz=5e6)")
    p.add_argument("--new-labels", type=int, default=N_NEW_LABELS,
                   help="labels of B for the second retrain")
    p.add_argument("--max-iter", type=int, default=80, help="--max-iter of train/retrain")
    p.add_argument("--jobs", type=int, default=2, help="--jobs of the heavy commands")
    args = p.parse_args(argv)
    change, expected = parse_change(args.change or ["field_rate_hz=5e6"])
    info = c.machine_info()
    print(c.format_machine(info))
    print(f"instrument change of B: {change}; class mix of B: {MIX_B}")
    checks, extra = [], {}
    from classify.drift import compare_catalogs, read_feature_table
    from classify.priors import prior_shift
    from classify.registry import ModelRegistry, load_model
    from features import open_catalog

    with c.Workdir(args.workdir, keep=args.keep) as wd:
        c.check_disk(wd.root, 2 * c.catalog_bytes(args.events, 8000, 10000))
        a, b = wd.big("season_a"), wd.big("season_b")
        c.simulate(a, args.events, args.seed, "reference")
        c.simulate(b, args.events, args.seed + 1, "reference", season="2032",
                   class_mix=MIX_B, **change)
        store = wd.root / "seasons.sqlite"
        store.unlink(missing_ok=True)
        reg = wd.root / "models"
        shutil.rmtree(reg, ignore_errors=True)
        champ = reg / "champion-2031"
        c.run_measured(c.pulsesort("labels", "import", str(a) + ".labels.csv", "--catalog", a,
                                   "--analyst", "wren", "--store", store))
        m = c.run_measured(c.pulsesort("train", a, "--store", store, "--out", champ,
                                       "--promote", "--max-iter", args.max_iter, "--jobs",
                                       args.jobs, "--no-progress"))
        print(m.stdout)

        # ---- drift
        fa, fb = wd.root / "features_a.csv", wd.root / "features_b.csv"
        for cat, f in ((a, fa), (b, fb)):
            c.run_measured(c.pulsesort("features", cat, "--out", f, "--jobs", args.jobs,
                                       "--no-progress"))
        m = c.run_measured(c.pulsesort("drift", a, b, "--model", champ, "--features-a", fa,
                                       "--features-b", fb, "--out", wd.root / "drift.html"))
        print(m.stdout)
        cat_a, cat_b = open_catalog(a), open_catalog(b)
        feat_b = read_feature_table(fb, cat_b)
        res = compare_catalogs(cat_a, cat_b, read_feature_table(fa, cat_a), feat_b)
        listed = [ch.setting for ch in res.changes]
        checks.append({"check": "changed setting listed first, and only expected ones",
                       "value": ", ".join(listed) or "(none)",
                       "met": bool(listed) and listed[0] in expected
                       and set(listed) == expected})
        t = res.table
        explained = t["explained_by"].map(lambda s: bool(set(s.split(";")) & expected))
        first = int(t.loc[explained, "rank"].min()) if explained.any() else None
        top = t.iloc[0]
        checks.append({"check": "top-ranked drifting feature is moved by the change",
                       "value": f"#1 {top['feature']} (PSI {top['psi']:.2f}); first moved "
                                f"feature at rank {first}", "met": first == 1})
        model, _ = load_model(champ)
        ps = prior_shift(model, feat_b)
        truth_b = pd.read_csv(str(b) + ".labels.csv", dtype=str)
        true_mix = truth_b["label"].value_counts(normalize=True)
        prior_rows = []
        for k, cls in enumerate(ps.classes.astype(str)):
            prior_rows.append({"class": cls, "training": float(ps.train_priors[k]),
                               "B_true": float(true_mix.get(cls, 0.0)),
                               "B_em": float(ps.new_priors[k]),
                               "B_mean_p": float(ps.mean_proba[k]),
                               "em_error_points": 100 * abs(float(ps.new_priors[k])
                                                            - float(true_mix.get(cls, 0.0)))})
        worst = max(r["em_error_points"] for r in prior_rows)
        checks.append({"check": "EM class mix of B within 3 points per class",
                       "value": f"worst {worst:.2f} points",
                       "met": worst <= 100 * TARGET_PRIOR_POINTS})
        extra["drift_top"] = t.head(10)[["rank", "feature", "psi", "explained_by"]].to_dict(
            "records")
        extra["changes"] = listed
        extra["priors"] = prior_rows

        # ---- retrain with 0 labels of B
        retrain = ["retrain", "--store", store, "--new", b, "--with", a, "--current",
                   "current", "--registry", reg, "--max-iter", args.max_iter, "--jobs",
                   args.jobs, "--no-progress"]
        m0 = c.run_measured(c.pulsesort(*retrain, "--out", reg / "challenger-0"))
        print(m0.stdout)
        kept = ModelRegistry(reg).current() == champ.name
        checks.append({"check": "0 labels of B: champion kept (exit 0, reason given)",
                       "value": m0.stdout.strip().splitlines()[-1][:60] + "...",
                       "met": kept and m0.returncode == 0 and "kept" in m0.stdout})

        # ---- retrain with N labels of B
        rng = np.random.default_rng(args.seed)
        pick = np.sort(rng.choice(len(truth_b), size=min(args.new_labels, len(truth_b)),
                                  replace=False))
        sample = truth_b.iloc[pick][["event_id", "label"]].assign(analyst="ines")
        sample_csv = wd.root / "labels_b_sample.csv"
        sample.to_csv(sample_csv, index=False)
        c.run_measured(c.pulsesort("labels", "import", sample_csv, "--catalog", b, "--store",
                                   store))
        chal = reg / f"challenger-{len(sample)}"
        mn = c.run_measured(c.pulsesort(*retrain, "--out", chal))
        print(mn.stdout)
        promoted = ModelRegistry(reg).current() == chal.name
        card = json.loads((chal / "card.json").read_text())
        cmp = card["comparisons"][-1]["metrics"]
        d = cmp["difference"]["macro_f1"]
        checks.append({"check": f"{len(sample)} labels of B: challenger promoted",
                       "value": card["comparisons"][-1]["decision"], "met": promoted})
        checks.append({"check": "challenger beats champion in the retrain comparison",
                       "value": f"macro-F1 difference {d['estimate']:+.4f} "
                                f"[{d['low']:+.4f}, {d['high']:+.4f}]",
                       "met": d["estimate"] > 0})
        # both models on every pulse of B that was not labelled
        held = set(truth_b["event_id"]) - set(sample["event_id"])
        held_csv = wd.root / "labels_b_held.csv"
        truth_b[truth_b["event_id"].isin(held)].to_csv(held_csv, index=False)
        f1 = {}
        for name, mdir in (("champion", champ), ("challenger", chal)):
            out = wd.root / f"triage_b_{name}.csv"
            c.run_measured(c.pulsesort("triage", b, "--model", mdir, "--out", out, "--jobs",
                                       args.jobs, "--no-progress"))
            res_df = pd.read_csv(out, dtype={"event_id": str},
                                                   keep_default_na=False, na_values=[""])
            res_df[res_df["event_id"].isin(held)].to_csv(out, index=False)
            f1[name] = score(out, held_csv, 0.95)
            out.unlink(missing_ok=True)
        checks.append({"check": f"challenger beats champion on B's {len(held):,} unlabelled "
                                "pulses (macro-F1 vs truth)",
                       "value": f"{f1['challenger']['macro_f1']:.4f} vs "
                                f"{f1['champion']['macro_f1']:.4f}",
                       "met": f1["challenger"]["macro_f1"] > f1["champion"]["macro_f1"]})
        extra["comparison"] = cmp
        extra["held_out"] = {k: {m: v[m] for m in ("macro_f1", "accuracy", "ece", "coverage",
                                                   "review_fraction")} for k, v in f1.items()}
        for f in (fa, fb):
            f.unlink(missing_ok=True)
    print()
    c.print_table(extra["drift_top"][:5], ["rank", "feature", "psi", "explained_by"],
                  "top drifting features of B against A")
    print()
    c.print_table(prior_rows, ["class", "training", "B_true", "B_em", "B_mean_p",
                               "em_error_points"], "class mix of B: truth vs EM estimate")
    print()
    rows = [{"model": k, **v} for k, v in extra["held_out"].items()]
    c.print_table(rows, ["model", "macro_f1", "accuracy", "ece", "coverage", "review_fraction"],
                  "champion vs challenger on B's unlabelled pulses")
    print()
    table = c.print_table(checks, ["check", "value", "met"], "targets (issue 6)")
    if args.json:
        c.write_json(args.json, {"benchmark": "seasons", "machine": info, "events": args.events,
                                 "change": change, "class_mix_b": MIX_B, "checks": checks,
                                 "table": table, **extra})
    return 0


if __name__ == "__main__":
    sys.exit(main())
