"""``pulsesort card``: write the data card (Markdown datasheet) of a labelled catalog."""

from __future__ import annotations

NAME = "card"
HELP = ("write the data card of a catalog's labelled set to <out-dir>/<catalog_id>.md "
        "(deterministic: same store and catalog, same file)")


def add_arguments(parser) -> None:
    parser.add_argument("catalog", metavar="CATALOG_DIR", help="the catalog folder")
    parser.add_argument("--store", metavar="PATH", default=None,
                        help="label store file (default: $PULSESORT_STORE, else ./labels.sqlite)")
    parser.add_argument("--out-dir", metavar="DIR", default="data_cards",
                        help="folder for the card (default: data_cards)")


def run(args) -> int:
    from classify.cards import write_data_card
    from classify.labels import LabelStore
    from features import open_catalog

    cat = open_catalog(args.catalog)
    with LabelStore(args.store, create=False) as store:
        out = write_data_card(cat, store, args.out_dir)
    print(f"{out}: data card of {cat.catalog_id} written")
    return 0
