"""``netprobe regions``: carve a region layout on the lattice, list its sites, draw it."""

from __future__ import annotations

from netprobe.cli.common import _check_png, _emit, _load
from netprobe.regions import parse_region
from netprobe.output.plots import plot_layout

__all__ = ["cmd_regions"]


def cmd_regions(args) -> int:
    """Build a region layout on the model's lattice, print or plot it."""
    model = _load(args)
    layout = parse_region(args.layout, model.lattice)
    if args.plot:
        _check_png(args.plot)
        plot_layout(layout, args.plot, title=f"{model.name}: {layout.describe()}")
    payload = {"model": model.name, "lattice": model.lattice.describe(), **layout.to_json()}
    lines = [f"{model.name}: {model.lattice.describe()}", layout.describe()]
    for name in layout.names:
        lines.append(f"  {name}: {len(layout[name])} sites  {' '.join(map(str, layout[name]))}")
    if args.plot:
        lines.append(f"plot written to {args.plot}")
    _emit(args, payload, lines)
    return 0
