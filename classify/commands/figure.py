"""``pulsesort figure``: figures for papers (PNG, PDF or SVG; needs pulsesort[figures])."""

from __future__ import annotations

from features import InputError

NAME = "figure"
HELP = ("draw a figure for a paper: one pulse, per-class feature distributions, a pairwise "
        "scatter or the confidence histogram (PNG, PDF or SVG by the extension)")

_KINDS = {
    "pulse": "one pulse: field change, VHF power, sources on the sky and their altitude",
    "distributions": "per-class distributions of the main features, from a triage results file",
    "pairs": "pairwise scatter of the main features coloured by class, from a triage results "
             "file",
    "confidence": "histogram of the confidence per class (log y-scale), from a triage results "
                  "file",
}


def _common(p):
    p.add_argument("--out", "-o", required=True, metavar="FIGURE",
                   help="file to write: .png, .pdf or .svg (replaced atomically)")
    p.add_argument("--size", choices=["column", "page"], default=None,
                   help="width of a journal column (3.5 in) or a page (7 in); default: "
                        "page, column for the confidence histogram")
    p.add_argument("--dpi", type=int, default=300, help="PNG resolution (default 300)")


def add_arguments(parser):
    sub = parser.add_subparsers(dest="kind", metavar="KIND", required=True)
    p = sub.add_parser("pulse", help=_KINDS["pulse"], description=_KINDS["pulse"])
    p.add_argument("catalog", metavar="CATALOG", help="catalog folder")
    p.add_argument("event_id", metavar="EVENT_ID", help="the pulse's event id")
    _common(p)
    for kind in ("distributions", "pairs", "confidence"):
        p = sub.add_parser(kind, help=_KINDS[kind], description=_KINDS[kind])
        p.add_argument("results", metavar="RESULTS.csv", help="a 'pulsesort triage' output")
        _common(p)


def run(args) -> int:
    from pathlib import Path

    from classify import figures

    out = Path(args.out)
    figures.check_figure_path(out)   # before any work
    if args.dpi < 50:
        raise InputError(f"--dpi must be >= 50, got {args.dpi}")
    size = args.size or ("column" if args.kind == "confidence" else "page")
    if args.kind == "pulse":
        from features import open_catalog

        fig = figures.pulse_figure_from_catalog(open_catalog(args.catalog), args.event_id,
                                                size=size)
    else:
        from classify.triage import read_results

        results = read_results(args.results)
        draw = {"distributions": figures.class_distributions_figure,
                "pairs": figures.pairwise_figure,
                "confidence": figures.confidence_figure}[args.kind]
        fig = draw(results, size=size)
    figures.save_figure(fig, out, dpi=args.dpi)
    print(f"wrote {out}")
    return 0
