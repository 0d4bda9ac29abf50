"""The ``netprobe`` command line: the parser assembly and :func:`main`; one module per command beside,
holding its parser (``add_parser``) and its work (``cmd_<name>``).

Every subcommand turns our own errors (:class:`netprobe.errors.NetprobeError`) into one line on
standard error and exit status 2; a traceback means a bug. ``--json`` makes standard output one
JSON object, with progress and notes on standard error.
"""

from __future__ import annotations

import argparse
import os
import sys

from netprobe import __version__
from netprobe.cli import assess, check, edge, exact, flux, measure, models, probe, regions, report, run, study
from netprobe.errors import NetprobeError

__all__ = ["main", "build_parser", "COMMANDS"]

#: The command modules in the order of ``netprobe --help``; each registers its parser (``add_parser``).
COMMANDS = (models, check, exact, run, measure, probe, assess, flux, edge, study, report, regions)


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line and exit status 2."""

    def error(self, message):
        self.exit(2, f"{self.prog}: error: {message} (see '{self.prog} --help')\n")


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``netprobe`` command."""
    parser = _Parser(prog="netprobe", description="Ground states of lattice models and bulk probes of chiral "
                                                  "topological order.")
    parser.add_argument("--version", action="version", version=f"netprobe {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True
    for command in COMMANDS:
        command.add_parser(sub)
    return parser


def _closed_output() -> int:
    """Standard output is closed (``>&-``) or its reader went away: say so in one line."""
    try:  # later writes and the interpreter's final flush go nowhere instead of failing again
        sys.stdout = open(os.devnull, "w")
    except OSError:
        pass
    print("netprobe: error: standard output is closed; redirect it to a file or /dev/null (> out.txt)",
          file=sys.stderr)
    return 2


def main(argv=None) -> int:
    """Entry point of the ``netprobe`` console script."""
    parser = build_parser()
    args = parser.parse_args(argv)
    if sys.stdout is None:
        return _closed_output()
    try:
        return args.func(args)
    except BrokenPipeError:
        return _closed_output()
    except NetprobeError as err:
        message = " ".join(str(err).split())  # one line, whatever the message held
        print(f"netprobe: error: {message}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("netprobe: interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
