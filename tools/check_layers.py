"""Check the package layout: no import from a lower stage to a higher one, no module over 900 lines.

Stages, lowest first (a module may import its own stage and every stage below it)::

    base      errors, resources, fitting, jsonio
    model     netprobe.model
    tensor    netprobe.tensor
    engines   netprobe.engines
    regions   netprobe.regions
    rdm       netprobe.rdm
    probes    netprobe.probes
    pipeline  netprobe.pipeline
    study     netprobe.study
    output    netprobe.output
    app       netprobe.cli, netprobe.demo, netprobe.__main__, the package itself (netprobe/__init__.py)

Every import statement counts, at module top or inside a function. ``from netprobe import __version__``
is allowed everywhere (the version string is set before the package imports anything).

Run ``python tools/check_layers.py`` from the repository root: it prints one line per problem and exits
with status 1 if there is any, 0 otherwise.
"""

from __future__ import annotations

import ast
import sys
from pathlib import Path

__all__ = ["STAGES", "MAX_LINES", "stage_of", "module_name", "problems", "main"]

STAGES = ("base", "model", "tensor", "engines", "regions", "rdm", "probes", "pipeline", "study", "output", "app")
MAX_LINES = 900
_BASE = {"errors", "resources", "fitting", "jsonio"}
_APP = {"cli", "demo", "__main__"}


def stage_of(module: str) -> str | None:
    """The stage of a dotted module name inside the package (``None`` for the package root itself)."""
    parts = module.split(".")
    if parts[0] != "netprobe":
        raise ValueError(f"not a netprobe module: {module}")
    if len(parts) == 1:
        return None
    head = parts[1]
    if head in _BASE:
        return "base"
    if head in _APP:
        return "app"
    if head in STAGES:
        return head
    raise ValueError(f"{module}: no stage for netprobe.{head}; add it to tools/check_layers.py")


def module_name(path: Path, root: Path) -> str:
    """Dotted module name of a file under the repository root (``netprobe/x/__init__.py`` -> ``netprobe.x``)."""
    parts = list(path.relative_to(root).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imported(tree: ast.AST, name: str) -> list[tuple[int, str]]:
    """(line, dotted target) of every netprobe import in a module; ``from netprobe import x`` names x."""
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found += [(node.lineno, a.name) for a in node.names if a.name.split(".")[0] == "netprobe"]
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = name.split(".")[: len(name.split(".")) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "netprobe":
                continue
            if target == "netprobe":
                found += [(node.lineno, f"netprobe.{a.name}") for a in node.names if a.name != "__version__"]
            else:
                found.append((node.lineno, target))
    return found


def problems(root: Path) -> list[str]:
    """Every layering or size problem of the package under ``root``, one line each."""
    out = []
    rank = {s: i for i, s in enumerate(STAGES)}
    for path in sorted((root / "netprobe").rglob("*.py")):
        rel = path.relative_to(root)
        text = path.read_text(encoding="utf-8")
        lines = text.count("\n") + (not text.endswith("\n"))
        if lines > MAX_LINES:
            out.append(f"{rel}: {lines} lines, over {MAX_LINES}; split it into two stages or two modules")
        name = module_name(path, root)
        own = stage_of(name)
        if own is None:  # the package root re-exports the public API from every stage
            continue
        for line, target in _imported(ast.parse(text, filename=str(rel)), name):
            other = stage_of(target)
            if other is not None and rank[other] > rank[own]:
                out.append(f"{rel}:{line}: stage '{own}' imports {target} from the higher stage '{other}'")
    return out


def main(argv: list[str] | None = None) -> int:
    """Print the problems of the repository (default: the parent of this script's folder)."""
    args = sys.argv[1:] if argv is None else argv
    root = Path(args[0]) if args else Path(__file__).resolve().parents[1]
    found = problems(root)
    for line in found:
        print(line)
    print(f"{len(found)} layout problem(s)" if found else "layout ok: no upward imports, no module over "
          f"{MAX_LINES} lines")
    return 1 if found else 0


if __name__ == "__main__":
    sys.exit(main())
