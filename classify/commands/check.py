"""``pulsesort check``: validate a catalog and print a short summary.

The validation is exactly the reader's (:func:`features.open_catalog`): a catalog
that passes ``check`` is one that every other command opens.
"""

from __future__ import annotations

from features import open_catalog, scan_quality

from ._common import echo

NAME = "check"
HELP = "validate a catalog against the catalog v1 format and summarise it"


def add_arguments(parser):
    parser.add_argument("catalog", help="catalog folder (holding catalog.json)")
    parser.add_argument("--no-scan", action="store_true",
                        help="skip the pass over the waveforms (NaN / clipped row counts)")


def _fmt_rate(hz):
    return f"{hz / 1e6:g} MS/s"


def run(args) -> int:
    cat = open_catalog(args.catalog)
    lines: list[str] = []   # printed at the end unless -q
    add = lines.append
    s = cat.summary()
    f = s["field"]
    add(f"catalog {s['catalog_id']}  (station {s['station']}, season {s['season']})")
    add(f"  folder      {s['path']}")
    add(f"  events      {s['n_events']:,} in {s['n_flashes']:,} flashes "
          f"({s['n_events_without_flash']:,} without flash_id)")
    add(f"  time span   {s['first_time_utc']} .. {s['last_time_utc']}")
    add(f"  range       {s['n_events_with_range']:,} of {s['n_events']:,} events have range_m")
    decay = "none (DC)" if f["decay_time_s"] is None else f"{f['decay_time_s']:g} s"
    add(f"  field       {_fmt_rate(f['sample_rate_hz'])}, {f['n_samples']} samples "
          f"({f['window_s'] * 1e6:g} us, {f['pretrigger_s'] * 1e6:g} us pre-trigger), "
          f"{f['dtype']} {f['units']} x {f['scale']:g}, {f['sign_convention']} convention, "
          f"decay {decay}, "
          f"delay {f['delay_s'] * 1e9:g} ns, full scale {f['full_scale']}")
    v = s["vhf"]
    if v is None:
        add("  vhf         none")
    else:
        band = "?" if v["band_hz"] is None else "-".join(f"{b / 1e6:g}" for b in v["band_hz"])
        add(f"  vhf         {v['kind']}, {_fmt_rate(v['sample_rate_hz'])}, {v['n_samples']} "
              f"samples ({v['window_s'] * 1e6:g} us), band {band} MHz, delay "
              f"{v['delay_s'] * 1e9:g} ns, {v['dtype']}, full scale {v['full_scale']}")
    src = s["sources"]
    if src is None:
        add("  sources     none")
    else:
        add(f"  sources     {src['n_sources']:,} ({src['per_event_mean']:.1f} per event, max "
              f"{src['per_event_max']}, {src['n_events_without_sources']:,} events without); "
              f"xyz {'yes' if src['has_xyz'] else 'no'}, power_db "
              f"{'yes' if src['has_power_db'] else 'no'}")
    if not args.no_scan:
        q = scan_quality(cat)
        add(f"  quality     {q['n_rows_with_nan']:,} rows with NaN field samples "
              f"({q['n_rows_missing_field']:,} all NaN), {q['n_rows_clipped']:,} rows clipped "
              f"(field {q['n_rows_field_clipped']:,}, VHF {q['n_rows_vhf_clipped']:,}), "
              f"{q['n_rows_missing_vhf']:,} rows without VHF")
    add(f"  hash        {s['content_hash']}")
    for note in s["notes"]:
        add(f"  note: {note}")
    add("ok: the catalog follows catalog v1")
    echo(args, *lines)
    return 0
