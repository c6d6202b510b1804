"""``pulsesort explain``: why the model put some pulses in their class."""

from __future__ import annotations

from ._common import positive_int

NAME = "explain"
HELP = ("explain the class of some pulses: the features that pushed each one towards its "
        "class rather than the runner-up, with their values")


def add_arguments(parser):
    parser.add_argument("catalog", metavar="CATALOG", help="catalog folder")
    parser.add_argument("event_ids", nargs="+", metavar="EVENT_ID", help="event id(s)")
    parser.add_argument("--model", required=True, metavar="MODEL",
                        help="model folder, a version in the registry, or 'current'")
    parser.add_argument("--registry", default="models",
                        help="model registry folder for version names (default: models)")
    parser.add_argument("--against", default="runner_up", metavar="CLASS",
                        help="compare with this class instead of the runner-up")
    parser.add_argument("--top", type=positive_int, default=5, metavar="N",
                        help="contributions shown per pulse (default 5)")


def run(args) -> int:
    from classify.explain import event_features, explain_pulses, top_reasons
    from classify.registry import ModelRegistry, load_model
    from features import open_catalog

    model, card = load_model(ModelRegistry(args.registry).resolve(args.model))
    cat = open_catalog(args.catalog)
    feats = event_features(cat, args.event_ids)
    X = feats[list(model.feature_names_in_)].astype(float)
    expl = explain_pulses(model, X, against=args.against)
    reasons = top_reasons(expl, X, n=args.top)
    print(f"model {card.get('version', '?')}; margin = fold-averaged log-odds of the class "
          "against the other one, after calibration; contributions add up to it")
    for eid, row in expl.iterrows():
        print(f"{eid}  {row['predicted']} (p {row['probability']:.3f}) rather than "
              f"{row['against']} (p {row['against_probability']:.3f})")
        print(f"  margin {row['margin']:+.2f} = base {row['base_value']:+.2f} + "
              f"contributions {row['margin'] - row['base_value']:+.2f}; model log-odds "
              f"{row['log_odds']:+.2f}")
        for _, r in reasons[reasons["pulse"] == eid].iterrows():
            print(f"    {r['contribution']:+6.2f}  {r['value_text']}")
    return 0
