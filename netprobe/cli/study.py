"""The ``netprobe study`` subcommand.

:func:`add_parser` registers the subcommand on the argument parser of :mod:`netprobe.cli`; it
sets ``func``, which returns the exit status and raises :class:`netprobe.errors.NetprobeError`
subclasses for user mistakes (the command line turns them into one line on standard error and
exit status 2).

``netprobe study SPEC [--out DIR] [--workers N | --scheduler ADDRESS] [--attempts K] [--json]``
    Runs every task not done yet; progress goes to standard error. Exit status 0 when every task is
    done, 1 when some failed (the ledger says why; running again retries them).
``netprobe study SPEC --status [--out DIR] [--json]``
    Counts of tasks by status (``pending``, ``running``, ``done``, ``failed``, ``total``, ``stale``),
    read without changing anything.
"""

from __future__ import annotations

import argparse
import contextlib
import signal
from pathlib import Path

from netprobe.errors import StudyError
from netprobe.cli.common import _print_json
from netprobe.cli.options import folder_path, scheduler_address, unwritable
from netprobe.study.description import StudyDescription
from netprobe.study.reading import load_study
from netprobe.study.ledger import Ledger, ledger_path
from netprobe.study.executors import DaskExecutor, LocalExecutor, run_study

__all__ = ["add_parser", "cmd_study", "default_folder"]


def _positive_int(text: str) -> int:

    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got '{text}'") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a positive whole number, got {value}")
    return value


def add_parser(sub) -> None:
    """Register ``netprobe study`` on an ``argparse`` subparsers object."""
    p = sub.add_parser(
        "study",
        help="run a parameter sweep described by a study file (or show its status)",
        description="Run the tasks of a study (a sweep over a grid of parameter points "
        "and bond dimensions) that are not done yet, on local processes or a "
        "Dask scheduler; the ledger in the study folder keeps every result.",
    )
    p.add_argument("spec", metavar="SPEC", help="study file (path) or the name of a bundled study")
    p.add_argument(
        "--out",
        type=folder_path,
        metavar="DIR",
        help="study folder for the ledger, states and reports (default: ./<study name>-study)",
    )
    p.add_argument(
        "--workers",
        type=_positive_int,
        metavar="N",
        help="local worker processes (default: [executor] workers, else one per core)",
    )
    p.add_argument(
        "--scheduler",
        type=scheduler_address,
        metavar="ADDRESS",
        help="run on a dask.distributed scheduler, e.g. tcp://10.0.0.5:8786 (the workers must see DIR)",
    )
    p.add_argument(
        "--attempts",
        type=_positive_int,
        metavar="K",
        help="tries per task in this run (default: [executor] attempts)",
    )
    p.add_argument("--status", action="store_true", help="only report task counts; change nothing")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=cmd_study)


def default_folder(description: StudyDescription) -> Path:
    """``./<study name>-study``."""
    return Path.cwd() / f"{description.name}-study"


def _status(description: StudyDescription, folder: Path, as_json: bool) -> int:
    path = ledger_path(folder)
    if path.is_file():
        with Ledger(path) as ledger:
            if ledger.fingerprint != description.fingerprint():
                raise StudyError(
                    f"{folder} holds the ledger of a different study ('{ledger.description().name}'); "
                    "give the --out folder of this study"
                )
            counts = ledger.counts()
            stale = ledger.stale(description.executor.lease_seconds)
        where = str(path)
    else:
        total = len(description.plan())
        counts = {"pending": total, "running": 0, "done": 0, "failed": 0, "total": total}
        stale, where = 0, None
    payload = {
        "study": description.name,
        "folder": str(folder),
        "ledger": where,
        **counts,
        "stale": stale,
        "points": len(description.points),
    }
    if as_json:
        _print_json(payload)
    else:
        note = "" if where else " (not started: no ledger yet)"
        print(
            f"study {description.name}{note}: {counts['done']}/{counts['total']} done, "
            f"{counts['failed']} failed, "
            f"{counts['running']} running ({stale} with a dead holder), {counts['pending']} pending; "
            f"{len(description.points)} points; folder {folder}"
        )
    return 0


@contextlib.contextmanager
def _terminate_as_interrupt():
    """Treat SIGTERM (batch systems, ``kill``) like Ctrl-C, so that running tasks are handed back."""

    def stop(signum, frame):
        raise KeyboardInterrupt

    try:
        previous = signal.signal(signal.SIGTERM, stop)
    except ValueError:  # not the main thread: leave signals alone
        yield
        return
    try:
        yield
    finally:
        signal.signal(signal.SIGTERM, previous)


def cmd_study(args) -> int:
    """Run a study, or report its status."""
    description = load_study(args.spec)
    folder = Path(args.out) if args.out else default_folder(description)
    if args.status:
        return _status(description, folder, args.json)
    problem = unwritable(str(folder))
    if problem is not None:
        raise StudyError(f"--out {problem}")
    if args.workers is not None and args.scheduler:
        raise StudyError(
            "give --workers (local processes) or --scheduler (Dask), not both; Dask decides its workers"
        )
    changes = {}
    if args.workers is not None:
        changes["workers"] = args.workers
    if args.attempts is not None:
        changes["attempts"] = args.attempts
    if changes:
        description = description.with_executor(**changes)
    settings = description.executor
    if args.scheduler:
        executor = DaskExecutor(
            args.scheduler, connect_seconds=settings.connect_seconds, blas_threads=settings.blas_threads or 1
        )
    else:
        executor = LocalExecutor(workers=settings.workers, blas_threads=settings.blas_threads)
    with _terminate_as_interrupt():
        run = run_study(description, folder, executor=executor, progress="stderr")
    payload = {
        "study": description.name,
        "folder": str(folder),
        **dict(run.counts),
        "seconds": run.seconds,
        "executor": run.executor,
        "failures": list(run.failures),
    }
    if args.json:
        _print_json(payload)
    else:
        c = run.counts
        print(
            f"study {description.name}: {c['done']}/{c['total']} tasks done, {c['failed']} failed, "
            f"{run.seconds:.1f} s; folder {folder} (see 'netprobe report {folder}')"
        )
    return 0 if run.complete else 1
