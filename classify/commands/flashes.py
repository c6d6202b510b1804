"""``pulsesort flashes``: group the pulses of a catalog into flashes (a new catalog)."""

from __future__ import annotations

NAME = "flashes"
HELP = "group pulses into flashes by time and position; writes a new catalog with flash ids"


def add_arguments(parser):
    from features.flashes import FlashSettings

    d = FlashSettings()
    parser.add_argument("catalog", help="catalog folder to read")
    parser.add_argument("--out", required=True, help="new catalog folder to write")
    parser.add_argument("--gap-s", type=float, default=d.gap_s,
                        help=f"longest quiet time inside one flash, s (default {d.gap_s})")
    parser.add_argument("--distance-km", type=float, default=d.distance_m / 1e3,
                        help="largest east or north distance between linked pulses, km "
                             f"(default {d.distance_m / 1e3:g})")
    parser.add_argument("--replace", action="store_true",
                        help="regroup a catalog that already has flash ids (old ids kept in "
                             "the column flash_id_before)")
    parser.add_argument("--overwrite", action="store_true", help="replace an existing --out")


def run(args) -> int:
    from features.flashes import FlashSettings, group_catalog_flashes

    settings = FlashSettings(gap_s=args.gap_s, distance_m=args.distance_km * 1e3)
    out = group_catalog_flashes(args.catalog, args.out, settings=settings,
                                replace=args.replace, overwrite=args.overwrite)
    import json

    rec = json.loads((out / "catalog.json").read_text(encoding="utf-8"))["flash_grouping"]
    print(f"grouped into {rec['n_flashes']:,} flashes (gap {settings.gap_s:g} s, link "
          f"{settings.distance_m / 1e3:g} km) -> {out}")
    return 0
