"""The ``netprobe report`` subcommand.

``netprobe report DIR [--out FOLDER] [--no-plots] [--json]``
    Writes tables and figures to ``DIR/report`` and prints a summary (or one JSON object with
    ``points`` and ``boundaries``).
"""

from __future__ import annotations

from netprobe.cli.common import _print_json
from netprobe.study.report import build_report
from netprobe.output.study_report import summary_lines, write_report

__all__ = ["add_parser", "cmd_report"]


def add_parser(sub) -> None:
    """Register ``netprobe report`` on an ``argparse`` subparsers object."""
    p = sub.add_parser(
        "report",
        help="tables, transition estimates and phase maps of a study folder",
        description="Read a study folder, write CSV/JSON tables and PNG figures, and print "
        "a summary with convergence verdicts and transition estimates.",
    )
    p.add_argument("folder", metavar="DIR", help="the study folder (the --out of 'netprobe study')")
    p.add_argument("--out", metavar="FOLDER", help="where the files go (default: DIR/report)")
    p.add_argument("--no-plots", dest="plots", action="store_false", help="write the tables only")
    p.add_argument("--json", action="store_true", help="print one JSON object (points, boundaries, counts)")
    p.set_defaults(func=cmd_report)


def cmd_report(args) -> int:
    """Write a study's tables and figures and print its summary."""
    report = build_report(args.folder)
    files = write_report(report, args.out, plots=args.plots)
    if args.json:
        payload = report.to_json()
        payload["files"] = [str(f) for f in files]
        _print_json(payload)
    else:
        lines = summary_lines(report)
        lines.append(f"files: {', '.join(str(f) for f in files)}")
        print("\n".join(lines))
    return 0
