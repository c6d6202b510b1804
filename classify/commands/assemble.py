"""``pulsesort assemble``: build a catalog from a station description and its recordings."""

from __future__ import annotations

NAME = "assemble"
HELP = ("build a catalog from a station's own recordings, described in a TOML or JSON "
        "file (all or nothing)")


def add_arguments(parser):
    parser.add_argument("description", help="station description (TOML, or .json)")
    parser.add_argument("--out", required=True, help="catalog folder to write")
    parser.add_argument("--overwrite", action="store_true", help="replace an existing --out")
    parser.add_argument("--progress", dest="progress", action="store_true", default=None,
                        help="always show a progress bar")
    parser.add_argument("--no-progress", dest="progress", action="store_false",
                        help="never show a progress bar")


def run(args) -> int:
    import json

    from features.assemble import assemble_catalog

    out = assemble_catalog(args.description, args.out, overwrite=args.overwrite,
                           progress=args.progress)
    man = json.loads((out / "catalog.json").read_text(encoding="utf-8"))
    info = man["assembled"]
    print(f"assembled {info['n_pulses']:,} pulses ({info['pulses']}) -> {out}")
    for rec in info.get("records", []):
        parts = []
        if "n_triggers" in rec:
            parts.append(f"{rec['n_triggers']} pulses detected")
        if "noise_v_per_m" in rec:
            parts.append(f"noise {rec['noise_v_per_m']:.3g} V/m rms")
        if "n_windows" in rec:
            parts.append(f"{rec['n_windows']} windows cut ({rec['n_windows_padded']} "
                         "reaching outside the record)")
        if "n_rows" in rec:
            parts.append(f"{rec['n_rows']} rows")
        print(f"  {rec['record']}: " + ", ".join(parts))
    if "sources" in info:
        s = info["sources"]
        print(f"  sources: {s['n_kept']:,} of {s['n_read']:,} kept "
              f"({s['n_outside_windows']:,} outside every window)")
    if "flash_grouping" in man:
        print(f"  flashes: {man['flash_grouping']['n_flashes']:,} "
              f"(gap {man['flash_grouping']['gap_s']:g} s, "
              f"link {man['flash_grouping']['distance_m'] / 1e3:g} km)")
    return 0
