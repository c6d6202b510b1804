"""``pulsesort report``: a self-contained HTML summary of a triage, for a group meeting."""

from __future__ import annotations

from ._common import check_output_file, echo

NAME = "report"
HELP = "write a self-contained HTML summary of a triage (counts per hour, confidence, " \
       "review load, example waveforms)"


def add_arguments(parser):
    parser.add_argument("results", metavar="RESULTS.csv", help="a 'pulsesort triage' output")
    parser.add_argument("--out", "-o", required=True, metavar="REPORT.html",
                        help="HTML file to write (replaced atomically)")
    parser.add_argument("--catalog", metavar="CATALOG", default=None,
                        help="the catalog folder, for example waveforms per class")
    parser.add_argument("--title", default=None, help="report title")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="label store: also list its classes and say what each class "
                             "is in it now (renamed, merged, hidden)")


def run(args) -> int:
    from classify.report import write_report
    from features import InputError
    from features._checks import describe_path_kind

    check_output_file(args.out, (".html",), "--out")
    kind = describe_path_kind(args.results)
    if kind is not None:
        raise InputError(f"{args.results}: no such results file" if kind == "missing" else
                         f"{args.results}: is {kind}, not a results file")
    out = write_report(args.results, args.out, catalog=args.catalog, title=args.title,
                       store=args.store)
    echo(args, f"wrote {out}")
    return 0
