"""``netprobe regions``: carve a region layout on the lattice, list its sites, draw it."""

from __future__ import annotations

from netprobe.cli.common import _add_model_arguments, _check_png, _emit, _load, _plots
from netprobe.regions import parse_region

__all__ = ["add_parser", "cmd_regions"]


def add_parser(sub) -> None:
    """Register ``netprobe regions`` on an ``argparse`` subparsers object."""
    p = sub.add_parser("regions", help="carve a region layout on the lattice; list its sites, draw it")
    _add_model_arguments(p)
    p.add_argument("--layout", required=True, metavar="KIND:KEY=VALUE,...",
                   help="e.g. sectors:radius=3  disk:radius=2.5,center=4,2  levin_wen:inner=1,outer=3,cut=40")
    p.add_argument("--plot", metavar="FILE.png", help="draw the lattice with the parts coloured")
    p.add_argument("--json", action="store_true", help="print one JSON object (sites and coordinates)")
    p.set_defaults(func=cmd_regions)


def cmd_regions(args) -> int:
    """Build a region layout on the model's lattice, print or plot it."""
    model = _load(args)
    layout = parse_region(args.layout, model.lattice)
    if args.plot:
        _check_png(args.plot)
        _plots().plot_layout(layout, args.plot, title=f"{model.name}: {layout.describe()}")
    payload = {"model": model.name, "lattice": model.lattice.describe(), **layout.to_json()}
    lines = [f"{model.name}: {model.lattice.describe()}", layout.describe()]
    for name in layout.names:
        lines.append(f"  {name}: {len(layout[name])} sites  {' '.join(map(str, layout[name]))}")
    if args.plot:
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0
