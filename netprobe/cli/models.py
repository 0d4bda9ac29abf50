"""``netprobe models``: the bundled model files, one line each."""

from __future__ import annotations

from netprobe.cli.common import _emit
from netprobe.model.spec import list_models, load_spec

__all__ = ["add_parser", "cmd_models"]


def add_parser(sub) -> None:
    """Register ``netprobe models`` on an ``argparse`` subparsers object."""
    p = sub.add_parser("models", help="list the bundled model files")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_models)


def cmd_models(args) -> int:
    """List the bundled models, one line each."""
    entries = []
    for path in list_models():
        spec = load_spec(str(path))
        entries.append({"name": spec.name, "file": str(path), "site": spec.site, "description": spec.description})
    width = max((len(e["name"]) for e in entries), default=0)
    _emit(args, {"models": entries}, [f"{e['name']:<{width}}  {e['description']}" for e in entries])
    return 0
