"""``pulsesort simulate``: write a simulated season (catalog v1) and its truth labels."""

from __future__ import annotations

import argparse
import json
import re
from pathlib import Path

from features import InputError
from features.simulate import PRESETS, labels_path, simulate_season

NAME = "simulate"
HELP = "simulate a season of an invented station (physical forward model) as a catalog"

#: (option, setting, type, help); every default comes from the preset.
_OPTIONS = [
    ("--station", "station", str, "station name [hollowmere]"),
    ("--season", "season", str, "season name [2031]"),
    ("--catalog-id", "catalog_id", str, "catalog id [STATION-SEASON]"),
    ("--field-rate-hz", "field_rate_hz", float, "field sample rate, Hz [20e6]"),
    ("--field-samples", "field_samples", int, "field samples per record [8000]"),
    ("--pretrigger-s", "pretrigger_s", float, "pre-trigger time, s [1e-4]"),
    ("--vhf-rate-hz", "vhf_rate_hz", float, "VHF sample rate, Hz [25e6; 250e6 voltage]"),
    ("--vhf-samples", "vhf_samples", int, "VHF samples per record [10000]"),
    ("--vhf-pretrigger-s", "vhf_pretrigger_s", float, "VHF pre-trigger time, s"),
    ("--vhf-kind", "vhf_kind", str, "VHF channel: power or voltage [power]"),
    ("--units", "units", str, "field file units: V/m (float32) or counts (int16)"),
    ("--scale", "scale", float, "V/m per count for --units counts [2**-7]"),
    ("--field-bits", "field_bits", int, "digitizer bits of a V/m file [16]"),
    ("--sign-convention", "sign_convention", str, "physics or atmospheric [physics]"),
    ("--decay-time-s", "decay_time_s", str, "fast-antenna RC decay, s, or 'none' [1e-3]"),
    ("--field-delay-s", "field_delay_s", float, "field channel delay, s [0]"),
    ("--vhf-delay-s", "vhf_delay_s", float, "VHF channel delay, s [4e-7]"),
    ("--field-noise-v-per-m", "field_noise_v_per_m", float, "field noise rms, V/m [0.01]"),
    ("--vhf-noise-floor", "vhf_noise_floor", float, "VHF noise floor, file units [0.1]"),
    ("--vhf-gain", "vhf_gain", float, "VHF instrument gain [1]"),
    ("--full-scale", "full_scale", float, "field clip level, V/m [250]"),
    ("--clip-fraction", "clip_fraction", float, "set the clip level so this fraction of "
                                                "rows clip (instead of --full-scale)"),
    ("--missing-vhf-fraction", "missing_vhf_fraction", float, "rows without VHF [0]"),
    ("--sources-per-event", "sources_per_event", float, "mean mapped sources per pulse [20]"),
    ("--angle-noise-deg", "angle_noise_deg", float, "source angle noise, degrees [0.2]"),
    ("--xyz-noise-m", "xyz_noise_m", float, "source position noise, m [10]"),
    ("--chunk-size", "chunk_size", int, "rows written at a time, at most [1024]"),
    ("--member", "member", int, "member of the stress family (with --preset stress) [0]"),
    ("--catalog-practice", "catalog_practice", str,
     "every_pulse (pulses catalogued one by one) or one_per_trigger [every_pulse]"),
    ("--dead-time-s", "dead_time_s", float,
     "dead time after a trigger, s (one_per_trigger) [the post-trigger record]"),
    ("--trigger-level-v-per-m", "trigger_level_v_per_m", float,
     "trigger level, V/m (one_per_trigger) [5 x field noise]"),
    ("--sferic-rate-hz", "sferic_rate_hz", float, "distant strokes per second [0]"),
    ("--vhf-full-scale", "vhf_full_scale", float, "VHF clip level, file units [none]"),
    ("--mapping-outage-fraction", "mapping_outage_fraction", float,
     "fraction of pulses without sources [0]"),
    ("--mapping-down-fraction", "mapping_down_fraction", float,
     "fraction of the season with the mapping down, in stretches [0]"),
]
_FLAGS = [("vhf", "with_vhf"), ("sources", "with_sources"), ("xyz", "with_xyz"),
          ("range", "with_range")]
_CLASS_MIX_HELP = ("fractions, e.g. narrow_bipolar=0.2,stepped_leader=0.4,recoil=0.3,"
                   "energetic_in_cloud=0.1; also return_stroke, initial_breakdown")


def add_arguments(parser):
    parser.add_argument("out", help="catalog folder to write (labels go to OUT.labels.csv)")
    parser.add_argument("--events", type=int, required=True, help="number of pulses (rows)")
    parser.add_argument("--seed", type=int, required=True, help="random seed (>= 0)")
    parser.add_argument("--preset", choices=sorted(PRESETS), default="reference",
                        help="starting settings: reference, next (another season), hard, "
                             "or stress (a station drawn from ranges; see --member)")
    parser.add_argument("--truth-twin", dest="truth_twin", action="store_true", default=None,
                        help="write the season's noise-free truth twin instead (each record "
                             "only its own pulse, no instrument)")
    parser.add_argument("--overwrite", action="store_true",
                        help="replace an existing catalog folder")
    for option, dest, kind, text in _OPTIONS:
        parser.add_argument(option, dest=dest, type=kind, default=None, help=text)
    parser.add_argument("--band-hz", dest="band_hz", type=float, nargs=2, default=None,
                        metavar=("LOW", "HIGH"), help="VHF band, Hz [25e6 85e6]")
    parser.add_argument("--range-km", dest="range_km", type=float, nargs=2, default=None,
                        metavar=("NEAR", "FAR"), help="source distances, km [10 150]")
    parser.add_argument("--class-mix", dest="class_mix", default=None, help=_CLASS_MIX_HELP)
    for name, dest in _FLAGS:
        parser.add_argument(f"--{name}", dest=dest, action=argparse.BooleanOptionalAction,
                            default=None, help=f"write {name} data [yes]")


def _class_mix(text):
    mix = {}
    for part in filter(None, (p.strip() for p in text.split(","))):
        key, sep, value = part.partition("=")
        try:
            mix[key.strip()] = float(value)
        except ValueError:
            sep = ""
        if not sep:
            raise InputError(f"option --class-mix: expected CLASS=FRACTION pairs, got {part!r}")
    return mix


def _option_of(message: str) -> str:
    """The command-line option of the first setting named in a library message."""
    for option, dest, _, _ in _OPTIONS:
        if re.search(rf"\b{dest}\b", message):
            return option
    for dest in ("band_hz", "range_km", "class_mix"):
        if dest in message:
            return "--" + dest.replace("_", "-")
    return ""


def _size(path: Path) -> str:
    n = path.stat().st_size
    for unit in ("B", "kB", "MB", "GB"):
        if n < 1000 or unit == "GB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000.0
    return ""


def run(args) -> int:
    settings = {dest: getattr(args, dest) for _, dest, _, _ in _OPTIONS}
    settings.update({dest: getattr(args, dest) for _, dest in _FLAGS})
    settings["band_hz"] = args.band_hz
    settings["range_km"] = args.range_km
    settings["class_mix"] = None if args.class_mix is None else _class_mix(args.class_mix)
    settings["truth_twin"] = args.truth_twin
    settings = {k: v for k, v in settings.items() if v is not None}  # the preset decides
    try:
        out = simulate_season(args.out, args.events, args.seed, preset=args.preset,
                              overwrite=args.overwrite, **settings)
    except ValueError as exc:
        option = _option_of(str(exc))
        raise InputError(f"{exc}" + (f" (option {option})" if option else "")) from exc
    manifest = json.loads((out / "catalog.json").read_text(encoding="utf-8"))
    summary = manifest["simulation"]["summary"]
    twin = " (noise-free truth twin)" if manifest["simulation"].get("truth_twin") else ""
    member = manifest["simulation"]["settings"].get("member")
    preset = args.preset + (f" member {member}" if args.preset == "stress" else "")
    print(f"simulated {args.events:,} pulses in {summary['n_flashes']:,} flashes "
          f"(catalog {manifest['catalog_id']}, preset {preset}, seed {args.seed}){twin}")
    for label, n in summary["events_per_class"].items():
        print(f"  {label:<20s} {n:>9,}")
    print(f"  mapped sources       {summary['n_sources']:>9,}")
    print(f"  rows clipped         {summary['n_rows_clipped']:>9,}")
    print("files:")
    for path in sorted(out.iterdir()):
        print(f"  {path}  {_size(path)}")
    labels = labels_path(out)
    print(f"  {labels}  {_size(labels)}  (truth labels, analyst 'truth')")
    return 0
