"""``pulsesort models``: the model registry (list, show, promote)."""

from __future__ import annotations

import json

from classify.registry import ModelRegistry, verify_model_dir

NAME = "models"
HELP = "list, show or promote models in the registry"


def add_arguments(parser):
    parser.add_argument("--registry", default="models", help="registry folder (default: models)")
    sub = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    sub.add_parser("list", help="every registered version; * marks the current one")
    show = sub.add_parser("show", help="the model card of a version")
    show.add_argument("version", help="version name, 'current' or a model folder")
    show.add_argument("--json", action="store_true", help="print card.json instead")
    promote = sub.add_parser("promote", help="make a version the current model")
    promote.add_argument("version")


def run(args) -> int:
    reg = ModelRegistry(args.registry)
    if args.action == "list":
        data = reg.read()
        if not data["models"]:
            print(f"no models registered in {reg.root}")
            return 0
        print(f"{'':2}{'version':<32} {'created':<21} {'macro-F1':>8}  training catalogs")
        for m in data["models"]:
            mark = "*" if m["version"] == data.get("current") else " "
            f1 = "-" if m.get("macro_f1") is None else f"{m['macro_f1']:.4f}"
            print(f"{mark} {m['version']:<32} {m.get('created_at') or '-':<21} {f1:>8}  "
                  + ", ".join(m.get("training_catalogs") or []))
        return 0
    folder = reg.resolve(args.version)
    if args.action == "show":
        verify_model_dir(folder)
        if args.json:
            print(json.dumps(json.loads((folder / "card.json").read_text()), indent=2))
        else:
            print((folder / "card.md").read_text())
        return 0
    reg.promote(args.version)
    print(f"current model: {folder.name}")
    return 0
