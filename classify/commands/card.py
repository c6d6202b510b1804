"""``pulsesort card``: write the data card (Markdown datasheet) of a labelled catalog."""

from __future__ import annotations

from pathlib import Path

from ._common import check_output_folder, echo, read_store

NAME = "card"
HELP = ("write the data card of a catalog's labelled set to <out-dir>/<catalog_id>.md "
        "(deterministic: same store and catalog, same file)")


def add_arguments(parser) -> None:
    parser.add_argument("catalog", metavar="CATALOG_DIR", help="the catalog folder")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="label store file (default: $PULSESORT_STORE, else ./labels.sqlite)")
    parser.add_argument("--out-dir", metavar="DIR", default=None,
                        help="folder for the card (default: data_cards beside the label "
                             "store)")


def run(args) -> int:
    from classify.cards import write_data_card
    from features import open_catalog

    cat = open_catalog(args.catalog)
    with read_store(args.store) as store:
        out_dir = Path(args.out_dir) if args.out_dir else store.path.parent / "data_cards"
        check_output_folder(out_dir, "--out-dir")
        out = write_data_card(cat, store, out_dir)
    echo(args, f"{out}: data card of {cat.catalog_id} written")
    return 0
