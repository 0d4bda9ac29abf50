"""Entry point of the benchmark suite: ``python -m benchmarks.run --quick`` (or ``--full``).

Prints each benchmark's ratio beside its target, writes the figures as JSON
(``benchmarks/results/quick.json`` or ``full.json``: a list of objects with ``name``, ``ratio``,
``target``, ``sense``, ``met`` and ``details``) and appends a dated section to
``benchmarks/RESULTS.md`` with the command, the machine and the log of the run.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import os
import sys
import tempfile
import time
import traceback
from pathlib import Path

from benchmarks.cases import BENCHMARKS, Context, Figure
from benchmarks.machine import describe

HERE = Path(__file__).resolve().parent
RESULTS = HERE / "results"
RECORD = HERE / "RESULTS.md"


class _Log:
    """Prints progress lines as they come (with the elapsed time) and keeps them for RESULTS.md."""

    def __init__(self):
        self.lines: list[str] = []
        self.start = time.monotonic()

    def __call__(self, text: str) -> None:
        line = f"[{time.monotonic() - self.start:6.0f} s] {text}"
        self.lines.append(text)
        print(line, flush=True)


def _atomic_write(path: Path, text: str) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    tmp.write_text(text, encoding="utf-8")
    os.replace(tmp, path)


def _fmt(value) -> str:
    if value is None:
        return "-"
    return f"{value:.3g}" if abs(value) < 1000 else f"{value:.0f}"


def _table(figures: list[Figure]) -> list[str]:
    rows = [("benchmark", "ratio", "target", "met")]
    rows += [(f.name, _fmt(f.ratio), f"{f.sense} {f.target:g}", "yes" if f.met else "NO") for f in figures]
    widths = [max(len(r[k]) for r in rows) for k in range(4)]
    return ["  ".join(cell.ljust(w) for cell, w in zip(row, widths)).rstrip() for row in rows]


def _record(mode: str, command: str, machine: dict, figures: list[Figure], log: list[str], seconds: float):
    blas = "; ".join(f"{b['internal_api']} {b['version']} ({b['architecture']}, {b['threading_layer']})"
                     for b in machine["blas"]) or "unknown"
    lines = [
        "",
        f"## {dt.date.today().isoformat()}: `{command}` ({mode} set, {seconds / 60:.1f} min)",
        "",
        f"Machine: {machine['cores']} cores ({machine['cpu']}), {machine['memory_gib']} GiB; BLAS: {blas}; "
        f"Python {machine['python']}, numpy {machine['numpy']}, scipy {machine['scipy']}.",
        "",
        "```",
        *_table(figures),
        "```",
        "",
        "<details><summary>log of the run</summary>",
        "",
        "```",
        *log,
        "```",
        "</details>",
        "",
    ]
    existing = RECORD.read_text(encoding="utf-8") if RECORD.exists() else "# Benchmark results\n"
    _atomic_write(RECORD, existing.rstrip("\n") + "\n" + "\n".join(lines))


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(prog="python -m benchmarks.run", description=__doc__.splitlines()[0])
    mode = parser.add_mutually_exclusive_group()
    mode.add_argument("--quick", action="store_true", help="the subset that runs in under 5 minutes (default)")
    mode.add_argument("--full", action="store_true", help="every benchmark at the sizes of the targets")
    parser.add_argument("--only", default="", help=f"comma-separated subset of: {', '.join(BENCHMARKS)}")
    parser.add_argument("--no-record", action="store_true", help="do not write JSON or RESULTS.md")
    args = parser.parse_args(argv)
    quick = not args.full
    names = [n.strip() for n in args.only.split(",") if n.strip()] or list(BENCHMARKS)
    unknown = [n for n in names if n not in BENCHMARKS]
    if unknown:
        parser.error(f"unknown benchmark(s) {', '.join(unknown)}; choose from {', '.join(BENCHMARKS)}")
    command = "make bench-quick" if quick and not args.only else "make bench" if not args.only else \
        "python -m benchmarks.run " + " ".join(argv if argv is not None else sys.argv[1:])
    machine = describe()
    log = _Log()
    log(f"netprobe benchmarks ({'quick' if quick else 'full'} set) on {machine['cores']} cores, "
        f"{machine['cpu']}; numpy {machine['numpy']}")
    figures: list[Figure] = []
    with tempfile.TemporaryDirectory(prefix="netprobe-bench-") as scratch:
        ctx = Context(quick=quick, scratch=Path(scratch), log=log)
        for name in names:
            log(f"{name}: {BENCHMARKS[name].__doc__.strip().splitlines()[0]}")
            start = time.monotonic()
            try:
                found = BENCHMARKS[name](ctx)
            except Exception as err:  # a broken benchmark is a missed target, not the end of the run
                traceback.print_exc()
                found = [Figure(name, None, float("nan"), details={"error": f"{type(err).__name__}: {err}"})]
                log(f"    failed: {type(err).__name__}: {err}")
            for f in found:
                log(f"    -> {f.name}: {_fmt(f.ratio)} (target {f.sense} {f.target:g}) "
                    f"{'met' if f.met else 'MISSED'}")
            log(f"    ({time.monotonic() - start:.0f} s)")
            figures.extend(found)
    seconds = time.monotonic() - log.start
    print()
    print("\n".join(_table(figures)))
    print(f"\n{sum(f.met for f in figures)} of {len(figures)} targets met in {seconds / 60:.1f} min")
    if not args.no_record:
        out = RESULTS / ("quick.json" if quick else "full.json")
        if args.only:
            out = RESULTS / f"{'quick' if quick else 'full'}-{'-'.join(names)}.json"
        payload = [f.to_json() for f in figures]
        _atomic_write(out, json.dumps(payload, indent=2, default=float) + "\n")
        _record("quick" if quick else "full", command, machine, figures, log.lines, seconds)
        print(f"wrote {out.relative_to(HERE.parent)} and appended to {RECORD.relative_to(HERE.parent)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
