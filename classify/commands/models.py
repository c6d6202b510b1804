"""``pulsesort models``: the model registry (list, show, promote)."""

from __future__ import annotations

import argparse
import json

from classify.registry import DEFAULT_REGISTRY, ModelRegistry, read_card, resolve_model

from ._common import deprecated, echo

NAME = "models"
HELP = "list, show or promote models in the registry"


def add_arguments(parser):
    # The old spelling `models --registry DIR ACTION` keeps working (with a note).
    parser.add_argument("--registry", dest="registry_before_action", default=None,
                        help=argparse.SUPPRESS)
    sub = parser.add_subparsers(dest="action", metavar="ACTION", required=True)

    def add(name, help_):
        p = sub.add_parser(name, help=help_, description=help_)
        p.add_argument("--registry", metavar="DIR", default=None,
                       help=f"registry folder (default: {DEFAULT_REGISTRY})")
        return p

    add("list", "every registered version; * marks the current one")
    show = add("show", "the model card of a version")
    show.add_argument("version", help="version name, 'current', a model folder or a "
                                      "registry folder")
    show.add_argument("--json", action="store_true", help="print card.json instead")
    promote = add("promote", "make a version the current model")
    promote.add_argument("version")


def _registry(args) -> str:
    if args.registry_before_action is not None:
        deprecated(f"`pulsesort models --registry DIR {args.action}`",
                   f"`pulsesort models {args.action} --registry DIR`")
        if args.registry is None:
            return args.registry_before_action
    return args.registry if args.registry is not None else DEFAULT_REGISTRY


def run(args) -> int:
    reg = ModelRegistry(_registry(args))
    if args.action == "list":
        data = reg.read()
        if not data["models"]:
            print(f"no models registered in {reg.root}")
            return 0
        print(f"{'':2}{'version':<32} {'created':<21} {'macro-F1':>8}  training catalogs")
        for m in data["models"]:
            mark = "*" if m["version"] == data.get("current") else " "
            f1 = m.get("macro_f1")
            f1 = f"{f1:.4f}" if isinstance(f1, (int, float)) else "-"
            print(f"{mark} {m['version']:<32} {m.get('created_at') or '-':<21} {f1:>8}  "
                  + ", ".join(str(c) for c in m.get("training_catalogs") or []))
        return 0
    folder = resolve_model(args.version, reg.root)
    if args.action == "show":
        card = read_card(folder)
        if args.json or not (folder / "card.md").exists():
            print(json.dumps(card, indent=2))
        else:
            print((folder / "card.md").read_text(encoding="utf-8", errors="replace"))
        return 0
    reg.promote(args.version)
    echo(args, f"current model: {folder.name}")
    return 0
