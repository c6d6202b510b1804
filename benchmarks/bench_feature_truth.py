"""Every feature column against its noise-free truth, on the stress family of stations.

For each case (stress members ``--members`` and the reference preset), with one seed:

1. ``pulsesort simulate`` the season, its truth twin (``--truth-twin``: each record only
   its own pulse, no instrument) and its *context twin*: the same station with the field
   noise set to 0 on a 24-bit float digitizer ten times the full scale, without VHF or
   sources, so the records keep their neighbours and sferics (the truth of the level
   and slope before the pulse, which the twin leaves out);
2. ``pulsesort features`` of the three (``--jobs``);
3. ``features.simulate.draw_season`` of the same season: the labels, the true distances
   and the physical truth (current and charge moments, source altitude, front speed and
   its vertical direction, current direction); and the true neighbours of every pulse
   from the simulator's own list of the pulses in each record (``_neighbours.py``);
4. every numeric schema column judged with its stated tolerance
   (``features.schema.Tolerance``, rule in that module's notes) against its truth, and
   the physical columns against ``draw_season``.

Regimes: field SNR band (the noisy ``snr_db``), true range band and digitizer. The goal
(beside the table): at SNR >= 20 dB, >= 95 % of the claimed values within tolerance, and
NaN rather than a wrong number below. Prints the tables; ``--markdown PATH`` writes them
as Markdown with reproducers (case, event id, noisy and true values, SNR) of the misses,
``--json PATH`` every number, ``--verdicts PATH`` every pulse's verdict per column (CSV).

    OMP_NUM_THREADS=1 python benchmarks/bench_feature_truth.py --members 0-1 --events 200
    OMP_NUM_THREADS=1 python benchmarks/bench_feature_truth.py --members 0-4 --events 1000 \\
        --jobs 2 --markdown truth.md --json truth.json
"""

from __future__ import annotations

import argparse
import shutil
import sys
import time
from pathlib import Path

import _common as c
import _neighbours as nb
import _truth as tr
import pandas as pd

from features.simulate import draw_season, resolve_settings

#: Full scale of the context twin's digitizer, as a multiple of the station's (no clip).
CONTEXT_FULL_SCALE = 10.0


def parse_members(text: str) -> list[int]:
    """``"0-4"``, ``"0,3,7"`` or ``"2"`` -> member numbers."""
    out: list[int] = []
    for part in text.split(","):
        part = part.strip()
        if not part:
            continue
        lo, _, hi = part.partition("-")
        try:
            a, b = int(lo), int(hi or lo)
        except ValueError:
            raise argparse.ArgumentTypeError(f"--members: expected e.g. 0-4 or 0,3,7, got "
                                             f"{text!r}") from None
        if a < 0 or b < a:
            raise argparse.ArgumentTypeError(f"--members: bad range {part!r}")
        out += range(a, b + 1)
    if not out:
        raise argparse.ArgumentTypeError("--members: no member given")
    return sorted(set(out))


def _simulate(out, events, seed, preset, member, *extra, **settings):
    kw = {"member": member} if member is not None else {}
    args = c.simulate_args(out, events, seed, preset, **kw, **settings) + list(extra)
    c.run_measured(c.pulsesort(*args))


def run_case(wd, name, preset, member, args) -> tuple[pd.DataFrame, pd.DataFrame, dict]:
    """Simulate, extract and judge one case; returns (judged, physical, seconds)."""
    s = resolve_settings(preset, **({"member": member} if member is not None else {}))
    tag = name.replace(" ", "")
    cats = {k: wd.big(f"{tag}_{k}") for k in ("noisy", "twin", "context")}
    t0 = time.perf_counter()
    _simulate(cats["noisy"], args.events, args.seed, preset, member)
    _simulate(cats["twin"], args.events, args.seed, preset, member, "--truth-twin")
    _simulate(cats["context"], args.events, args.seed, preset, member,
              field_noise_v_per_m=0.0, units="V/m", field_bits=24,
              full_scale=CONTEXT_FULL_SCALE * s.full_scale, with_vhf=False,
              with_sources=False)
    t1 = time.perf_counter()
    feats = {}
    for k, cat in cats.items():
        out = wd.root / f"{tag}_{k}.csv"
        c.run_measured(c.pulsesort("features", cat, "--out", out, "--jobs", args.jobs,
                                   "--no-progress"))
        feats[k] = tr.read_features(out)
        if not args.keep:
            out.unlink()
    t2 = time.perf_counter()
    kw = {"member": member} if member is not None else {}
    world = draw_season(args.events, args.seed, preset=preset, **kw)
    inst = tr.instrument_of(cats["noisy"])
    record = nb.record_truth(args.events, args.seed, preset, inst.sigma_v_per_m, member)
    judged = tr.judge(name, feats["noisy"], feats["twin"], feats["context"], record, world,
                      inst)
    physical = tr.judge_physical(name, feats["noisy"], feats["twin"], world, inst)
    t3 = time.perf_counter()
    if not args.keep:
        for cat in cats.values():
            shutil.rmtree(cat, ignore_errors=True)
            Path(str(cat) + ".labels.csv").unlink(missing_ok=True)
    seconds = {"simulate": t1 - t0, "features": t2 - t1, "truth_and_judging": t3 - t2}
    print(f"{name}: {len(world)} pulses, field SNR >= 20 dB: "
          f"{(feats['noisy']['snr_db'] >= tr.GOAL_SNR_DB).mean():.0%}; "
          + ", ".join(f"{k} {v:.0f} s" for k, v in seconds.items()), flush=True)
    return judged, physical, {"case": name, "preset": preset, "member": member,
                              "seed": args.seed, "events": args.events,
                              "digitizer": inst.digitizer, "sigma_v_per_m": inst.sigma_v_per_m,
                              "vhf_floor": inst.vhf_floor, "seconds": seconds}


def main(argv=None) -> int:
    p = c.base_parser(__doc__.split("\n\n")[0])
    p.add_argument("--members", type=parse_members, default=parse_members("0-9"),
                   help="stress members, e.g. 0-9 or 0,3,7")
    p.add_argument("--events", type=int, default=1000, help="pulses per season")
    p.add_argument("--seed", type=int, default=11, help="season seed (twins use the same)")
    p.add_argument("--jobs", type=int, default=2, help="--jobs of pulsesort features")
    p.add_argument("--no-reference", action="store_true",
                   help="leave out the reference-preset season")
    p.add_argument("--markdown", metavar="PATH", default=None,
                   help="write the tables and reproducers as Markdown here")
    p.add_argument("--verdicts", metavar="PATH", default=None,
                   help="write every verdict (pulse x column: value, truth, allowance) as "
                        "CSV here, to study the misses")
    args = p.parse_args(argv)
    if args.events < 1:
        p.error("--events must be >= 1")
    info = c.machine_info()
    print(c.format_machine(info))
    cases = [(f"stress {m}", "stress", m) for m in args.members]
    if not args.no_reference:
        cases.append(("reference", "reference", None))
    t_start = time.perf_counter()
    judged, physical, meta = [], [], []
    with c.Workdir(args.workdir, keep=args.keep) as wd:
        for name, preset, member in cases:
            s = resolve_settings(preset, **({"member": member} if member is not None else {}))
            c.check_disk(wd.root, 3 * c.catalog_bytes(
                args.events, s.field_samples, s.vhf_samples, field_itemsize=8,
                vhf_itemsize=8, sources_per_event=s.sources_per_event))
            j, ph, m = run_case(wd, name, preset, member, args)
            judged.append(j)
            physical.append(ph)
            meta.append(m)
    seconds = time.perf_counter() - t_start
    j = pd.concat(judged, ignore_index=True)
    ph = pd.concat(physical, ignore_index=True)
    summary = tr.summarize(j)
    phys = tr.summarize_physical(ph)
    regimes = tr.by_regime(j)
    nan_rows = tr.truth_nan(j)
    missed = [r["column"] for r in summary + phys if r["met"] is False]
    repro = tr.reproducers(pd.concat([j, ph[ph["source"] == "noisy"]], ignore_index=True),
                           missed)
    print()
    c.print_table(summary, ["column", "truth", "claims_hi", "within_hi", "nan_hi",
                            "false_claims_hi", "wrong_lo", "nan_lo", "met"],
                  f"every numeric column against its truth (within_hi: share of claims "
                  f"within tolerance at field SNR >= {tr.GOAL_SNR_DB:g} dB; goal "
                  f">= {tr.GOAL_SHARE:g})")
    print()
    c.print_table(phys, ["column", "claims_hi", "within_hi", "wrong_lo", "twin_claims",
                         "twin_within", "met"], "against draw_season's physical truth")
    n_pulses = sum(m["events"] for m in meta)
    header = (f"## Feature truth: {len(cases)} seasons ({', '.join(n for n, _, _ in cases)}), "
              f"{args.events:,} pulses each, seed {args.seed}; {seconds / 60:.1f} min\n\n"
              f"{c.format_machine(info)}")
    text = tr.markdown_report(header, summary, regimes, phys, nan_rows, repro)
    met = sum(r["met"] is True for r in summary)
    print(f"\n{met} of {sum(r['met'] is not None for r in summary)} columns meet the goal; "
          f"{n_pulses:,} pulses in {seconds / 60:.1f} min")
    if args.markdown:
        out = Path(args.markdown)
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = out.with_name(f".{out.name}.tmp")
        tmp.write_text(text, encoding="utf-8")
        tmp.replace(out)
        print(f"markdown written to {out}")
    if args.verdicts:
        out = Path(args.verdicts)
        out.parent.mkdir(parents=True, exist_ok=True)
        tmp = out.with_name(f".{out.name}.tmp")
        pd.concat([j.assign(source="noisy"), ph], ignore_index=True).to_csv(
            tmp, index=False, float_format="%.9g")
        tmp.replace(out)
        print(f"verdicts written to {out}")
    if args.json:
        per_case = {m["case"]: tr.summarize(j[j["case"] == m["case"]]) for m in meta}
        c.write_json(args.json, {"benchmark": "feature_truth", "machine": info,
                                 "seconds": seconds, "cases": meta, "summary": summary,
                                 "physical": phys, "regimes": regimes, "truth_nan": nan_rows,
                                 "reproducers": repro, "per_case": per_case})
    return 0


if __name__ == "__main__":
    sys.exit(main())
