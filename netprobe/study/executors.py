"""Running a study: the dispatcher, local worker processes and a Dask cluster.

The dispatcher (:func:`run_study`) owns nothing but the loop: it takes back dead leases, claims
tasks from the ledger for free worker slots, hands them to an executor and reports progress. The
workers record results in the ledger themselves (:func:`netprobe.study.tasks.run_task`), so work
finished by a worker whose dispatcher was killed is kept.

Executors (the registry :data:`EXECUTORS`)
    ``local``  worker processes started with ``spawn``, one task at a time each, connected by pipes.
               A worker that dies (a crash, ``os._exit``, the out-of-memory killer) is noticed through
               its process sentinel; its task is recorded as failed with the exit status and a new
               worker takes its place. BLAS/LAPACK and numba threads per worker are capped so that
               workers x threads does not exceed the cores.
    ``dask``   tasks submitted to a ``dask.distributed`` scheduler; every worker must reach the study
               folder at the same path. A task whose Dask worker died comes back as an error and is
               recorded as failed with Dask's reason.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import socket
import sys
import time
from dataclasses import dataclass, field
from multiprocessing.connection import wait as wait_for
from pathlib import Path
from types import MappingProxyType
from typing import Callable, Mapping

from netprobe.errors import StudyError
from netprobe.study.description import StudyDescription
from netprobe.study.ledger import STATES_FOLDER, Claim, Ledger, process_alive
from netprobe.study.tasks import run_task

__all__ = [
    "EXECUTORS",
    "LocalExecutor",
    "DaskExecutor",
    "StudyRun",
    "run_study",
    "default_workers",
    "tidy_states",
]

#: Executors by name.
EXECUTORS: Mapping[str, str] = MappingProxyType(
    {
        "local": "worker processes on this machine (spawned, one task at a time each)",
        "dask": "a dask.distributed scheduler (give its address)",
    }
)

_THREAD_VARIABLES = (
    "OMP_NUM_THREADS",
    "OPENBLAS_NUM_THREADS",
    "MKL_NUM_THREADS",
    "BLIS_NUM_THREADS",
    "VECLIB_MAXIMUM_THREADS",
    "NUMEXPR_NUM_THREADS",
    "NUMBA_NUM_THREADS",
)
_POLL = 0.2  # seconds between looks at the ledger while tasks run


def default_workers() -> int:
    """One worker per core this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


@dataclass(frozen=True)
class _Finished:
    claim: Claim
    status: str | None  # what the worker reported
    crash: str | None  # why the worker could not report


def _default_runner():
    return run_task


def _limit_threads(threads: int | None) -> None:
    numba = sys.modules.get("numba")
    if threads is None or numba is None:
        # a numba loaded later (by the exact engine) reads NUMBA_NUM_THREADS, set for this worker at spawn;
        # importing it here only for the cap cost every worker 0.6-0.75 s CPU (benchmarks/RESULTS.md, 2026-12-03)
        return
    with contextlib.suppress(Exception):  # the threads cap is best effort, never needed for correctness
        numba.set_num_threads(max(1, min(threads, numba.config.NUMBA_NUM_THREADS)))


def _local_worker(conn, ledger_file: str, threads: int | None, runner) -> None:
    """Main function of a local worker process: run tasks sent through ``conn`` until told to stop."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the dispatcher's to handle
    _limit_threads(threads)
    runner = runner or _default_runner()
    while True:
        try:
            message = conn.recv()
        except (EOFError, OSError):
            return  # the dispatcher is gone
        if message is None:
            return
        task, lease = message
        try:
            reply = (task, lease, runner(ledger_file, task, lease, blas_threads=threads), None)
        except Exception as err:  # the runner could not even record its outcome
            reply = (task, lease, None, f"{type(err).__name__}: {' '.join(str(err).split())}")
        try:
            conn.send(reply)
        except (BrokenPipeError, OSError):
            return


@contextlib.contextmanager
def _thread_environment(threads: int | None):
    """Thread caps in the environment a spawned child inherits (read by BLAS and numba at import)."""
    if threads is None:
        yield
        return
    saved = {k: os.environ.get(k) for k in _THREAD_VARIABLES}
    os.environ.update({k: str(threads) for k in _THREAD_VARIABLES})
    try:
        yield
    finally:
        for key, value in saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value


class _Slot:
    def __init__(self, process, conn):
        self.process = process
        self.conn = conn
        self.claim: Claim | None = None


class LocalExecutor:
    """Worker processes on this machine.

    Parameters
    ----------
    workers : int, optional
        Number of worker processes (default: one per core).
    blas_threads : int, optional
        BLAS/LAPACK threads per worker (default: the cores shared among the workers, at least 1).
    runner : callable, optional
        ``runner(ledger_file, task, lease, blas_threads=...) -> status``, a module-level function;
        default :func:`netprobe.study.tasks.run_task`. Tests pass one that wraps it.

    """

    name = "local"

    def __init__(
        self, *, workers: int | None = None, blas_threads: int | None = None, runner: Callable | None = None
    ):
        if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
            raise StudyError(f"--workers {workers!r}: give a positive number of worker processes")
        self.workers = workers or default_workers()
        self.blas_threads = blas_threads or max(1, default_workers() // self.workers)
        self.runner = runner
        self._context = multiprocessing.get_context("spawn")
        self._slots: list[_Slot] = []
        self._reserved: _Slot | None = None
        self._ledger_file: str | None = None
        self.deaths = 0

    def describe(self) -> str:
        return f"local processes: {self.workers} worker(s) x {self.blas_threads} BLAS thread(s)"

    def open(self, ledger_file) -> None:
        """Remember the ledger; workers start when the first tasks arrive."""
        self._ledger_file = str(Path(ledger_file).resolve())

    def _spawn(self) -> _Slot:
        parent, child = self._context.Pipe()
        process = self._context.Process(
            target=_local_worker,
            name="netprobe-study-worker",
            args=(child, self._ledger_file, self.blas_threads, self.runner),
            daemon=True,
        )
        with _thread_environment(self.blas_threads):
            process.start()
        child.close()
        slot = _Slot(process, parent)
        self._slots.append(slot)
        return slot

    def free_owner(self) -> int | None:
        """The process id that will hold the next claim, or None if every worker is busy."""
        for slot in list(self._slots):
            if slot.claim is None and not slot.process.is_alive():  # died while idle
                slot.process.join(timeout=1)
                slot.conn.close()
                self._slots.remove(slot)
        self._reserved = next((s for s in self._slots if s.claim is None), None)
        if self._reserved is None and len(self._slots) < self.workers:
            self._reserved = self._spawn()
        return None if self._reserved is None else self._reserved.process.pid

    def submit(self, claim: Claim) -> None:
        """Send a claimed task to the worker that :meth:`free_owner` named."""
        slot, self._reserved = self._reserved, None
        if slot is None:
            raise StudyError("LocalExecutor.submit: call free_owner first; its process holds the claim")
        slot.claim = claim
        try:
            slot.conn.send((claim.task, claim.lease))
        except (BrokenPipeError, OSError):
            pass  # the worker died just now; wait() sees its sentinel and records the task as failed

    def leases(self) -> list[str]:
        return [s.claim.lease for s in self._slots if s.claim is not None]

    def claims(self) -> dict[str, Claim]:
        return {s.claim.lease: s.claim for s in self._slots if s.claim is not None}

    def busy(self) -> bool:
        return any(s.claim is not None for s in self._slots)

    def wait(self, timeout: float) -> list[_Finished]:
        """Wait up to ``timeout`` seconds for workers to report or die."""
        busy = [s for s in self._slots if s.claim is not None]
        if not busy:
            return []
        handles = [s.conn for s in busy] + [s.process.sentinel for s in busy]
        ready = set(wait_for(handles, timeout=timeout))
        out = []
        for slot in busy:
            message = None
            if slot.conn in ready:
                try:
                    message = slot.conn.recv()
                except (EOFError, OSError):
                    message = None
            if message is not None:
                out.append(_Finished(slot.claim, message[2], message[3]))
                slot.claim = None
            elif slot.conn in ready or slot.process.sentinel in ready:
                slot.process.join(timeout=5)
                code = slot.process.exitcode
                how = f"killed by signal {-code}" if code is not None and code < 0 else f"exit status {code}"
                out.append(
                    _Finished(
                        slot.claim,
                        None,
                        f"worker process {slot.process.pid} died ({how}) while running this task",
                    )
                )
                slot.claim = None
                slot.conn.close()
                self._slots.remove(slot)
                self.deaths += 1
        return out

    def close(self) -> None:
        """Stop the workers: idle ones finish, busy ones (only after an interruption) are terminated."""
        for slot in self._slots:
            if slot.claim is not None:
                slot.process.terminate()
            with contextlib.suppress(OSError, ValueError):
                slot.conn.send(None)
        deadline = time.monotonic() + 10
        for slot in self._slots:
            slot.process.join(timeout=max(0.1, deadline - time.monotonic()))
            if slot.process.is_alive():
                slot.process.terminate()
                slot.process.join(timeout=5)
            slot.conn.close()
        self._slots.clear()


def _dask_task(ledger_file: str, task: int, lease: str, threads: int | None, runner) -> str:
    runner = runner or _default_runner()
    return runner(ledger_file, task, lease, blas_threads=threads)


class DaskExecutor:
    """Tasks on a ``dask.distributed`` cluster.

    Parameters
    ----------
    address : str
        The scheduler, e.g. ``tcp://10.0.0.5:8786`` (or a ``LocalCluster``'s ``scheduler_address``).
    connect_seconds : float
        How long to try to reach it.
    blas_threads : int
        BLAS/LAPACK threads per task (default 1: Dask runs one task per worker thread).
    runner : callable, optional
        As for :class:`LocalExecutor`.

    Raises
    ------
    StudyError
        From :meth:`open`, if the scheduler cannot be reached.

    """

    name = "dask"

    def __init__(
        self,
        address: str,
        *,
        connect_seconds: float = 10.0,
        blas_threads: int | None = 1,
        runner: Callable | None = None,
    ):
        self.address = address
        self.connect_seconds = connect_seconds
        self.blas_threads = blas_threads
        self.runner = runner
        self.client = None
        self._futures: dict = {}
        self._slots = 1
        self._ledger_file: str | None = None

    def describe(self) -> str:
        return f"Dask scheduler {self.address}: {self._slots} worker thread(s)"

    def connect(self) -> None:
        """Reach the scheduler (before anything is written)."""
        try:  # dask.distributed is the optional [cluster] extra: imported only for --scheduler
            from distributed import Client
        except ImportError:
            raise StudyError("--scheduler needs dask.distributed; install netprobe[cluster]") from None
        # a client that fails half-way blocks in its finaliser and prints its own traceback: open a
        # plain connection first, so that a bad or unreachable address fails here, cleanly
        problem = _unreachable(self.address, self.connect_seconds)
        try:
            if problem is not None:
                raise OSError(problem)
            self.client = Client(self.address, timeout=f"{self.connect_seconds}s", set_as_default=False)
        except Exception as err:  # the client raises OSError, TimeoutError or ValueError by cause
            detail = " ".join(str(err).split()) or type(err).__name__
            raise StudyError(
                f"cannot reach the Dask scheduler at {self.address} ({detail}); check the address and "
                "that the "
                "scheduler runs, or leave out --scheduler to use local processes"
            ) from None
        self._slots = max(1, sum(self.client.nthreads().values()))

    def open(self, ledger_file) -> None:
        if self.client is None:
            self.connect()
        self._ledger_file = str(Path(ledger_file).resolve())

    def free_owner(self) -> int | None:
        # the claim names this process until a Dask worker starts the task and takes it over
        return os.getpid() if len(self._futures) < self._slots else None

    def submit(self, claim: Claim) -> None:
        future = self.client.submit(
            _dask_task,
            self._ledger_file,
            claim.task,
            claim.lease,
            self.blas_threads,
            self.runner,
            pure=False,
            key=f"netprobe-study-{claim.lease}",
        )
        self._futures[future] = claim

    def leases(self) -> list[str]:
        return [c.lease for c in self._futures.values()]

    def claims(self) -> dict[str, Claim]:
        return {c.lease: c for c in self._futures.values()}

    def busy(self) -> bool:
        return bool(self._futures)

    def wait(self, timeout: float) -> list[_Finished]:
        if not self._futures:
            return []
        # polled: distributed.wait needs a default client, and this one is private to the study
        deadline = time.monotonic() + timeout
        while not any(f.done() for f in self._futures) and time.monotonic() < deadline:
            time.sleep(0.02)
        out = []
        for future in [f for f in self._futures if f.done()]:
            claim = self._futures.pop(future)
            if future.status == "finished":
                out.append(_Finished(claim, future.result(), None))
            else:
                try:
                    error = future.exception()
                    detail = f"{type(error).__name__}: {' '.join(str(error).split())}"
                except Exception as err:  # a cancelled future has no exception to fetch
                    detail = f"{type(err).__name__}"
                out.append(_Finished(claim, None, f"the Dask task did not finish ({detail})"))
        return out

    def close(self) -> None:
        if self.client is not None:
            for future in list(self._futures):
                future.cancel()
            self._futures.clear()
            self.client.close()
            self.client = None


def _unreachable(address: str, seconds: float) -> str | None:
    """Why no TCP connection to a ``tcp://`` or ``tls://`` scheduler opens (None: it opens, or
    the scheme is not TCP)."""
    scheme, sep, rest = address.partition("://")
    if not sep:
        scheme, rest = "tcp", address
    if scheme not in ("tcp", "tls"):
        return None
    host, sep, port = rest.rpartition(":")
    if not sep or not port.isdigit():
        return f"missing port number in address {address!r}"
    try:
        with socket.create_connection((host.strip("[]"), int(port)), timeout=seconds):
            return None
    except OSError as err:
        return f"{err.strerror or type(err).__name__}"


@dataclass(frozen=True)
class StudyRun:
    """Outcome of :func:`run_study`.

    Attributes
    ----------
    folder : Path
    counts : mapping of str to int
        Tasks by status at the end, and ``total``.
    seconds : float
    failures : tuple of str
        One line per failed try in this run.
    executor : str

    """

    folder: Path
    counts: Mapping[str, int]
    seconds: float
    failures: tuple[str, ...] = field(default=())
    executor: str = ""

    @property
    def complete(self) -> bool:
        """True if every task is done."""
        return self.counts["done"] == self.counts["total"]

    def __repr__(self) -> str:
        c = self.counts
        return (
            f"StudyRun({c['done']}/{c['total']} done, {c['failed']} failed, {self.seconds:.1f} s, "
            f"{self.folder})"
        )


class _Progress:
    """Lines on standard error: counts when they change, and every failed try."""

    def __init__(self, name: str, stream):
        self.name = name
        self.stream = sys.stderr if stream == "stderr" else stream
        self._last = None

    def line(self, text: str) -> None:
        if self.stream is not None:
            print(f"study {self.name} | {text}", file=self.stream, flush=True)

    def counts(self, counts, *, force: bool = False) -> None:
        key = (counts["done"], counts["failed"])
        if key != self._last or force:
            self._last = key
            self.line(
                f"{counts['done']}/{counts['total']} done, {counts['failed']} failed, "
                f"{counts['running']} running, {counts['pending']} pending"
            )


def tidy_states(folder, ledger: Ledger) -> list[Path]:
    """Remove what killed or superseded tries left in ``states/``.

    Temporary files of writers that are gone, and state files that no finished task refers to and no
    running lease can still claim. Files of finished tasks are never touched.

    Returns
    -------
    list of Path
        The files removed.

    """
    states = Path(folder) / STATES_FOLDER
    if not states.is_dir():
        return []
    # leases first: a task finishing between the two reads is then still protected by its lease
    live = {lease[:8] for lease in ledger.leases_of_running() if lease}
    kept = {Path(r.state_file).name for r in ledger.tasks() if r.status == "done" and r.state_file}
    removed = []
    for entry in states.iterdir():
        name = entry.name
        if name.startswith(".") and name.endswith(".tmp"):
            pid = name.rsplit(".", 2)[-2]
            if pid.isdigit() and not process_alive(int(pid)):
                entry.unlink(missing_ok=True)
                removed.append(entry)
        elif name.endswith(".h5") and name not in kept and name[:-3].rsplit("_", 1)[-1] not in live:
            entry.unlink(missing_ok=True)
            removed.append(entry)
    return removed


def run_study(description: StudyDescription, out, *, executor=None, progress="stderr") -> StudyRun:
    """Run every task of a study that is not done yet.

    Parameters
    ----------
    description : StudyDescription
    out : str or Path
        The study folder (created if needed); holds ``study.sqlite`` and ``states/``.
    executor : LocalExecutor or DaskExecutor, optional
        Default: local processes with the study's ``[executor] workers``.
    progress : file-like, "stderr" or None

    Returns
    -------
    StudyRun

    Raises
    ------
    StudyError
        If the folder holds a different study, or the executor cannot start (an unreachable
        scheduler): then nothing in the ledger has changed.
    NetprobeError
        If the model cannot be built at some lattice of the study, or a region does not fit.

    """
    start = time.monotonic()
    report = _Progress(description.name, progress)
    description.check()
    settings = description.executor
    if executor is None:
        executor = LocalExecutor(workers=settings.workers, blas_threads=settings.blas_threads)
    if isinstance(executor, DaskExecutor) and executor.client is None:
        executor.connect()  # before the ledger is touched
    failures: list[str] = []
    try:
        ledger = Ledger.prepare(out, description)
    except BaseException:
        executor.close()
        raise
    try:
        executor.open(ledger.path)
        ledger.recover(settings.lease_seconds)
        reopened = ledger.begin_run(settings.attempts)
        tidy_states(ledger.folder, ledger)
        counts = ledger.counts()
        report.line(
            f"{counts['total']} tasks ({counts['done']} done before, {reopened} failed before and retried); "
            f"{executor.describe()}; ledger {ledger.path}"
        )
        report.counts(counts, force=True)
        waiting_noted = False
        while True:
            # leases of our own workers are settled by executor.wait, which knows why a worker died
            if ledger.recover(settings.lease_seconds, exclude=executor.leases()):
                tidy_states(ledger.folder, ledger)  # files the lost holders wrote but never recorded
            while True:
                owner = executor.free_owner()
                if owner is None:
                    break
                claim = ledger.claim(owner_pid=owner)
                if claim is None:
                    break
                executor.submit(claim)
            ledger.beat(executor.leases())
            if not executor.busy():
                counts = ledger.counts()
                if counts["running"] == 0:
                    break
                if not waiting_noted:
                    report.line(f"waiting for {counts['running']} task(s) held by other processes")
                    waiting_noted = True
                time.sleep(1.0)
                continue
            for item in executor.wait(_POLL):
                claim = item.claim
                if item.crash is not None:
                    status = ledger.fail(claim.task, claim.lease, item.crash)
                    error = item.crash
                elif item.status in ("pending", "failed"):
                    status, error = item.status, ledger.task(claim.task).error
                else:
                    continue
                row = ledger.task(claim.task)
                chi = f", D={row.bond_dimension}" if row.bond_dimension else ""
                text = (
                    f"task {claim.task} ({row.label}{chi}) failed on try {claim.attempt}"
                    f"{'; will retry' if status == 'pending' else ''}: {error}"
                )
                failures.append(text)
                report.line(text)
            report.counts(ledger.counts())
        tidy_states(ledger.folder, ledger)
        counts = ledger.counts()
    except BaseException:
        # stopped from outside (Ctrl-C) or by a bug: hand back what our workers held, then stop them
        for lease, claim in executor.claims().items():
            with contextlib.suppress(Exception):
                ledger.release(claim.task, lease, "interrupted: the study was stopped")
        raise
    finally:
        executor.close()
        ledger.close()
    seconds = time.monotonic() - start
    report.line(
        f"finished: {counts['done']}/{counts['total']} done, {counts['failed']} failed, {seconds:.1f} s"
    )
    return StudyRun(Path(out), counts, seconds, tuple(failures), executor.name)
