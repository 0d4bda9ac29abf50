"""The ledger of a study: an SQLite file (WAL mode) with one row per (point, bond dimension) task.

Schema (``format = netprobe-study-ledger``, version 1)
--------------------------------------------------------
``meta(key, value)``
    ``format``, ``format_version``, ``package_version``, ``created``, ``fingerprint`` (of the
    study's identity), ``description`` (the study as JSON; workers rebuild everything from it).
``points(id, label, parameters)``
    One row per point; ``parameters`` is a JSON object of the swept values.
``tasks(id, point, rung, bond_dimension, status, attempts, attempt_limit, error, lease, owner_host,
owner_pid, claimed_at, heartbeat, started_at, finished_at, seconds, result, state_file)``
    ``UNIQUE(point, bond_dimension)``; ``status`` is one of pending, running, done, failed;
    ``result`` is JSON text; ``state_file`` is relative to the study folder.
``needs(task, needed)``
    The tasks whose states a task starts from; it is claimed only when they are done (or failed for
    good, and then it starts from scratch).
``attempts(id, task, attempt, lease, owner_host, owner_pid, claimed_at, ended_at, outcome, detail)``
    One row per claim, closed with the outcome (done, failed, interrupted, rejected); a history that
    shows whether anything ran twice.

Concurrency
-----------
Every connection waits up to 30 s for a lock (``busy_timeout``), writes in short ``BEGIN IMMEDIATE``
transactions, and claims with ``UPDATE ... WHERE id = ? AND status = 'pending'`` inside such a
transaction, so two processes never claim one task. A claim is a lease: a random token, the host
and process id of its holder and a heartbeat. Results are accepted only from the current lease
(``WHERE lease = ? AND status = 'running'``), so a process that lost its lease cannot overwrite
anything, and a finished task is never reopened. :meth:`Ledger.recover` gives back the leases of
holders that died (same host: the process is gone; any host: no heartbeat for ``lease_seconds``).

SQLite's WAL mode needs a local file system (not NFS); on a cluster, keep the study folder on a disk
that the coordinator and the workers share as a local mount.
"""

from __future__ import annotations

import contextlib
import datetime
import json
import os
import socket
import sqlite3
import time
import uuid
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Mapping

from netprobe import __version__
from netprobe.jsonio import encode_json
from netprobe.errors import StudyError
from netprobe.study.description import StudyDescription

__all__ = [
    "LEDGER_NAME",
    "STATES_FOLDER",
    "FORMAT_NAME",
    "FORMAT_VERSION",
    "STATUSES",
    "Claim",
    "TaskRow",
    "Ledger",
    "host_name",
    "process_alive",
    "ledger_path",
]

LEDGER_NAME = "study.sqlite"
STATES_FOLDER = "states"
FORMAT_NAME = "netprobe-study-ledger"
FORMAT_VERSION = 1
STATUSES = ("pending", "running", "done", "failed")
_BUSY_MS = 30_000
# the status of a task given back after a failed or interrupted try
_PENDING_WHILE_TRIES_LEFT = "CASE WHEN attempts < attempt_limit THEN 'pending' ELSE 'failed' END"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS points (
    id INTEGER PRIMARY KEY,
    label TEXT NOT NULL UNIQUE,
    parameters TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS tasks (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    point INTEGER NOT NULL REFERENCES points(id),
    rung INTEGER NOT NULL,
    bond_dimension INTEGER NOT NULL,
    status TEXT NOT NULL DEFAULT 'pending' CHECK (status IN ('pending', 'running', 'done', 'failed')),
    attempts INTEGER NOT NULL DEFAULT 0,
    attempt_limit INTEGER NOT NULL DEFAULT 0,
    error TEXT,
    lease TEXT,
    owner_host TEXT,
    owner_pid INTEGER,
    claimed_at REAL,
    heartbeat REAL,
    started_at REAL,
    finished_at REAL,
    seconds REAL,
    result TEXT,
    state_file TEXT,
    UNIQUE (point, bond_dimension)
);
CREATE TABLE IF NOT EXISTS needs (
    task INTEGER NOT NULL REFERENCES tasks(id),
    needed INTEGER NOT NULL REFERENCES tasks(id),
    PRIMARY KEY (task, needed)
);
CREATE TABLE IF NOT EXISTS attempts (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    task INTEGER NOT NULL REFERENCES tasks(id),
    attempt INTEGER NOT NULL,
    lease TEXT NOT NULL UNIQUE,
    owner_host TEXT,
    owner_pid INTEGER,
    claimed_at REAL NOT NULL,
    ended_at REAL,
    outcome TEXT,
    detail TEXT
);
CREATE INDEX IF NOT EXISTS tasks_by_status ON tasks (status, rung, point);
"""


def host_name() -> str:
    """This machine's name as recorded in leases."""
    return socket.gethostname()


def process_alive(pid: int) -> bool:
    """True if a process with this id exists on this machine and has not exited.

    An exited process whose parent has not collected it (a zombie, common in containers whose
    first process does not reap orphans) still answers signal 0, so on Linux its state in
    /proc is read as well.
    """
    if pid is None or pid <= 0:
        return False
    try:
        os.kill(int(pid), 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    try:
        with open(f"/proc/{int(pid)}/stat", "rb") as handle:
            stat = handle.read()
    except OSError:
        return True  # no /proc (not Linux) or the process just vanished: signal 0 said it exists
    # the state letter follows the command name, which is in parentheses and may contain spaces
    end = stat.rfind(b")")
    return stat[end + 2 : end + 3] not in (b"Z", b"X")


def ledger_path(folder) -> Path:
    """The ledger file of a study folder."""
    return Path(folder) / LEDGER_NAME


@dataclass(frozen=True)
class Claim:
    """A task leased to one process: what to run and the token that proves the lease."""

    task: int
    lease: str
    point: int
    rung: int
    bond_dimension: int
    attempt: int


@dataclass(frozen=True)
class TaskRow:
    """One task as stored (times are UNIX seconds; ``result`` is decoded JSON or None)."""

    id: int
    point: int
    label: str
    parameters: Mapping[str, Any]
    rung: int
    bond_dimension: int
    status: str
    attempts: int
    attempt_limit: int
    error: str | None
    lease: str | None
    owner_host: str | None
    owner_pid: int | None
    claimed_at: float | None
    heartbeat: float | None
    started_at: float | None
    finished_at: float | None
    seconds: float | None
    result: Mapping[str, Any] | None
    state_file: str | None


class Ledger:
    """An open study ledger (one SQLite connection; open one per process or thread).

    Parameters
    ----------
    path : str or Path
        The ledger file.

    Raises
    ------
    StudyError
        If the file is missing, not SQLite, or not a study ledger of a version we read.

    """

    def __init__(self, path):
        self.path = Path(path)
        if not self.path.is_file():
            raise StudyError(
                f"no study ledger at {self.path}; run 'netprobe study SPEC --out {self.path.parent}' first"
            )
        self._conn = self._connect(self.path)
        try:
            meta = dict(self._conn.execute("SELECT key, value FROM meta").fetchall())
        except sqlite3.DatabaseError as err:
            self._conn.close()
            raise StudyError(
                f"{self.path} is not a study ledger ({err}); give the folder of a study"
            ) from None
        if meta.get("format") != FORMAT_NAME or meta.get("format_version") != str(FORMAT_VERSION):
            self._conn.close()
            raise StudyError(
                f"{self.path} is not a netprobe study ledger of format version {FORMAT_VERSION} (found "
                f"{meta.get('format')!r} version {meta.get('format_version')!r})"
            )
        self._meta = meta

    # ---- opening and creating ----------------------------------------------------------------

    @staticmethod
    def _connect(path: Path) -> sqlite3.Connection:
        conn = sqlite3.connect(str(path), timeout=_BUSY_MS / 1000, isolation_level=None)
        conn.execute(f"PRAGMA busy_timeout = {_BUSY_MS}")
        conn.execute("PRAGMA journal_mode = WAL")
        conn.execute("PRAGMA synchronous = FULL")
        conn.execute("PRAGMA foreign_keys = ON")
        return conn

    @classmethod
    def prepare(cls, folder, description: StudyDescription) -> "Ledger":
        """Open the ledger of a study folder, creating the folder and the ledger if needed.

        New points and tasks are inserted; existing rows are never touched. A ledger written for a
        different study (another model, grid, ladder, region or probe list) is refused.

        Raises
        ------
        StudyError
            If the folder holds the ledger of a different study.

        """
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        (folder / STATES_FOLDER).mkdir(exist_ok=True)
        path = ledger_path(folder)
        conn = cls._connect(path)
        try:
            with _transaction(conn):
                for statement in _SCHEMA.strip().split(";"):
                    if statement.strip():
                        conn.execute(statement)
                meta = dict(conn.execute("SELECT key, value FROM meta").fetchall())
                fingerprint = description.fingerprint()
                if not meta:
                    now = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
                    rows = {
                        "format": FORMAT_NAME,
                        "format_version": str(FORMAT_VERSION),
                        "package_version": __version__,
                        "created": now,
                        "fingerprint": fingerprint,
                        "description": json.dumps(description.to_dict()),
                    }
                    conn.executemany("INSERT INTO meta (key, value) VALUES (?, ?)", rows.items())
                elif meta.get("fingerprint") != fingerprint:
                    stored = StudyDescription.from_dict(json.loads(meta["description"]))
                    diffs = sorted(
                        k for k, v in description.identity().items() if stored.identity().get(k) != v
                    )
                    raise StudyError(
                        f"{folder} holds the ledger of a different study ('{stored.name}', differing in "
                        f"{', '.join(diffs) or 'its layout'}); use another --out folder"
                    )
                else:
                    # executor settings and thresholds may change between runs; keep the latest
                    conn.execute(
                        "UPDATE meta SET value = ? WHERE key = 'description'",
                        (json.dumps(description.to_dict()),),
                    )
                for point in description.points:
                    conn.execute(
                        "INSERT OR IGNORE INTO points (id, label, parameters) VALUES (?, ?, ?)",
                        (point.index, point.label, json.dumps(dict(point.values))),
                    )
                ids = {}
                for plan in description.plan():
                    conn.execute(
                        "INSERT OR IGNORE INTO tasks (point, rung, bond_dimension) VALUES (?, ?, ?)",
                        (plan.point, plan.rung, plan.bond_dimension),
                    )
                    ids[(plan.point, plan.rung)] = conn.execute(
                        "SELECT id FROM tasks WHERE point = ? AND bond_dimension = ?",
                        (plan.point, plan.bond_dimension),
                    ).fetchone()[0]
                for plan in description.plan():
                    for need in plan.needs:
                        conn.execute(
                            "INSERT OR IGNORE INTO needs (task, needed) VALUES (?, ?)",
                            (ids[(plan.point, plan.rung)], ids[need]),
                        )
        finally:
            conn.close()
        return cls(path)

    def close(self) -> None:
        """Close the connection."""
        self._conn.close()

    def __enter__(self) -> "Ledger":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    @property
    def folder(self) -> Path:
        """The study folder."""
        return self.path.parent

    def description(self) -> StudyDescription:
        """The study as stored in the ledger."""
        text = self._conn.execute("SELECT value FROM meta WHERE key = 'description'").fetchone()[0]
        return StudyDescription.from_dict(json.loads(text))

    @property
    def fingerprint(self) -> str:
        """Fingerprint of the study this ledger was written for."""
        return self._meta["fingerprint"]

    def meta(self) -> dict[str, str]:
        """The meta table (without the stored description)."""
        return {k: v for k, v in self._conn.execute("SELECT key, value FROM meta") if k != "description"}

    # ---- a run's bookkeeping ---------------------------------------------------------------------

    def begin_run(self, attempts: int) -> int:
        """Give every unfinished task ``attempts`` more tries in this run; failed tasks become pending.

        Returns
        -------
        int
            Tasks that were failed and are pending again.

        """
        with _transaction(self._conn):
            reopened = self._conn.execute(
                "UPDATE tasks SET status = 'pending', lease = NULL WHERE status = 'failed'"
            ).rowcount
            self._conn.execute(
                "UPDATE tasks SET attempt_limit = attempts + ? WHERE status = 'pending'", (int(attempts),)
            )
        return reopened

    def recover(self, lease_seconds: float, *, now: float | None = None, exclude=()) -> list[int]:
        """Take back the leases of holders that died: their tasks become pending (or failed, if out of tries).

        A holder on this host is dead when its process is gone; on any host, when its heartbeat is
        older than ``lease_seconds``.

        Parameters
        ----------
        lease_seconds : float
        now : float, optional
            The current time (UNIX seconds).
        exclude : iterable of str
            Leases to leave alone (the caller's own).

        Returns
        -------
        list of int
            The tasks taken back.

        """
        now = time.time() if now is None else now
        here = host_name()
        exclude = set(exclude)
        rows = self._conn.execute(
            "SELECT id, lease, owner_host, owner_pid, heartbeat FROM tasks WHERE status = 'running'"
        ).fetchall()
        dead = []
        for task, lease, host, pid, beat in rows:
            if lease in exclude:
                continue
            silent = beat is None or now - beat > lease_seconds
            gone = host == here and not process_alive(pid)
            if silent or gone:
                why = (
                    f"interrupted: process {pid} on {host} is gone"
                    if gone
                    else f"interrupted: no heartbeat from process {pid} on {host} "
                    f"for {now - (beat or 0):.0f} s"
                )
                dead.append((task, lease, why))
        taken = []
        for task, lease, why in dead:
            if self._take_back(task, lease, why, now, _PENDING_WHILE_TRIES_LEFT):
                taken.append(task)
        return taken

    def claim(self, *, owner_pid: int, owner_host: str | None = None) -> Claim | None:
        """Lease the next pending task whose needed tasks are settled (lowest rung first), or None.

        A needed task is settled when it is done, or failed for good in this run (the task then starts
        from scratch). The claim is atomic: among processes claiming at once, each task goes to exactly one.
        """
        host = owner_host or host_name()
        now = time.time()
        lease = uuid.uuid4().hex
        with _transaction(self._conn):
            row = self._conn.execute(
                "SELECT id, point, rung, bond_dimension, attempts FROM tasks t WHERE status = 'pending' "
                "AND attempts < attempt_limit AND NOT EXISTS "
                "(SELECT 1 FROM needs n JOIN tasks u ON u.id = n.needed "
                "WHERE n.task = t.id AND u.status NOT IN ('done', 'failed')) ORDER BY rung, point LIMIT 1"
            ).fetchone()
            if row is None:
                return None
            task, point, rung, chi, attempts = row
            changed = self._conn.execute(
                "UPDATE tasks SET status = 'running', attempts = attempts + 1, lease = ?, owner_host = ?, "
                "owner_pid = ?, claimed_at = ?, heartbeat = ?, started_at = NULL "
                "WHERE id = ? AND status = 'pending'",
                (lease, host, int(owner_pid), now, now, task),
            ).rowcount
            if changed != 1:
                return None
            self._conn.execute(
                "INSERT INTO attempts (task, attempt, lease, owner_host, owner_pid, claimed_at) "
                "VALUES (?, ?, ?, ?, ?, ?)",
                (task, attempts + 1, lease, host, int(owner_pid), now),
            )
        return Claim(task, lease, point, rung, chi, attempts + 1)

    def start(self, task: int, lease: str, *, pid: int | None = None, host: str | None = None) -> bool:
        """Record that the lease holder has started (and which process it is); False if the lease is lost."""
        pid = os.getpid() if pid is None else pid
        host = host or host_name()
        now = time.time()
        with _transaction(self._conn):
            changed = self._conn.execute(
                "UPDATE tasks SET started_at = ?, heartbeat = ?, owner_pid = ?, owner_host = ? "
                "WHERE id = ? AND lease = ? AND status = 'running'",
                (now, now, pid, host, task, lease),
            ).rowcount
            if changed:
                self._conn.execute(
                    "UPDATE attempts SET owner_pid = ?, owner_host = ? WHERE lease = ?", (pid, host, lease)
                )
        return bool(changed)

    def beat(self, leases) -> None:
        """Refresh the heartbeat of running tasks held under these leases."""
        leases = list(leases)
        if not leases:
            return
        now = time.time()
        with _transaction(self._conn):
            self._conn.executemany(
                "UPDATE tasks SET heartbeat = ? WHERE lease = ? AND status = 'running'",
                [(now, lease) for lease in leases],
            )

    def finish(
        self,
        task: int,
        lease: str,
        result: Mapping,
        *,
        state_file: str | None = None,
        seconds: float | None = None,
    ) -> bool:
        """Store a task's result and mark it done; False (nothing written) if the lease was lost."""
        now = time.time()
        text = encode_json(result)
        with _transaction(self._conn):
            changed = self._conn.execute(
                "UPDATE tasks SET status = 'done', result = ?, state_file = ?, finished_at = ?, seconds = ?, "
                "error = NULL WHERE id = ? AND lease = ? AND status = 'running'",
                (text, state_file, now, seconds, task, lease),
            ).rowcount
            self._close_attempt(
                lease,
                "done" if changed else "rejected",
                None if changed else "the lease was lost before the result arrived",
                now,
            )
        return bool(changed)

    def fail(self, task: int, lease: str, error: str) -> str | None:
        """Record a failed try: the task becomes pending again if it has tries left, else failed.

        Returns
        -------
        str or None
            The new status, or None if the lease was lost (nothing written).

        """
        now = time.time()
        error = " ".join(str(error).split()) or "failed without a message"
        with _transaction(self._conn):
            changed = self._conn.execute(
                f"UPDATE tasks SET status = {_PENDING_WHILE_TRIES_LEFT}, "
                "error = ?, lease = NULL, finished_at = ? WHERE id = ? AND lease = ? AND status = 'running'",
                (error, now, task, lease),
            ).rowcount
            self._close_attempt(lease, "failed" if changed else "rejected", error, now)
            if not changed:
                return None
            return self._conn.execute("SELECT status FROM tasks WHERE id = ?", (task,)).fetchone()[0]

    def release(self, task: int, lease: str, why: str) -> bool:
        """Give a running task back unfinished, because its holder was stopped.

        The task becomes pending again and the try is logged as interrupted. Returns False if the
        lease was already lost.
        """
        return self._take_back(task, lease, why, time.time(), "'pending'")

    def _take_back(self, task, lease, why, now, status: str) -> bool:
        """Set a running task held under ``lease`` to ``status`` (an SQL expression of ours, never user
        text) and log the try as interrupted; False if the lease was already lost."""
        with _transaction(self._conn):
            changed = self._conn.execute(
                f"UPDATE tasks SET status = {status}, error = ?, lease = NULL WHERE id = ? AND lease = ? "
                "AND status = 'running'",
                (why, task, lease),
            ).rowcount
            if changed:
                self._close_attempt(lease, "interrupted", why, now)
        return bool(changed)

    def _close_attempt(self, lease, outcome, detail, now):
        self._conn.execute(
            "UPDATE attempts SET ended_at = ?, outcome = ?, detail = ? WHERE lease = ? AND ended_at IS NULL",
            (now, outcome, detail, lease),
        )

    # ---- reading ---------------------------------------------------------------------------------

    def counts(self) -> dict[str, int]:
        """Tasks by status (every status present, with 0), and ``total``."""
        out = {s: 0 for s in STATUSES}
        for status, n in self._conn.execute("SELECT status, COUNT(*) FROM tasks GROUP BY status"):
            out[status] = n
        out["total"] = sum(out[s] for s in STATUSES)
        return out

    def stale(self, lease_seconds: float) -> int:
        """Running tasks whose holder looks dead (what :meth:`recover` would take back)."""
        now, here = time.time(), host_name()
        n = 0
        for host, pid, beat in self._conn.execute(
            "SELECT owner_host, owner_pid, heartbeat FROM tasks WHERE status = 'running'"
        ):
            if beat is None or now - beat > lease_seconds or (host == here and not process_alive(pid)):
                n += 1
        return n

    def tasks(self) -> list[TaskRow]:
        """Every task, ordered by point and rung."""
        rows = self._conn.execute(
            "SELECT t.id, t.point, p.label, p.parameters, t.rung, t.bond_dimension, t.status, t.attempts, "
            "t.attempt_limit, t.error, t.lease, t.owner_host, t.owner_pid, t.claimed_at, t.heartbeat, "
            "t.started_at, "
            "t.finished_at, t.seconds, t.result, t.state_file FROM tasks t JOIN points p ON p.id = t.point "
            "ORDER BY t.point, t.rung"
        ).fetchall()
        out = []
        for r in rows:
            r = list(r)
            r[3] = json.loads(r[3])
            r[18] = None if r[18] is None else json.loads(r[18])
            out.append(TaskRow(*r))
        return out

    def task(self, task: int) -> TaskRow:
        """One task by id."""
        for row in self.tasks():
            if row.id == task:
                return row
        raise StudyError(f"ledger {self.path} has no task {task}")

    def needed(self, task: int) -> list[TaskRow]:
        """The tasks a task starts from."""
        ids = [r[0] for r in self._conn.execute("SELECT needed FROM needs WHERE task = ?", (task,))]
        return [row for row in self.tasks() if row.id in ids]

    def attempt_log(self) -> list[dict]:
        """The history of claims: one dict per claim with its outcome."""
        cur = self._conn.execute(
            "SELECT id, task, attempt, lease, owner_host, owner_pid, claimed_at, ended_at, outcome, detail "
            "FROM attempts ORDER BY id"
        )
        names = [d[0] for d in cur.description]
        return [dict(zip(names, row)) for row in cur.fetchall()]

    def leases_of_running(self) -> set[str]:
        """Leases currently held."""
        return {r[0] for r in self._conn.execute("SELECT lease FROM tasks WHERE status = 'running'")}


@contextlib.contextmanager
def _transaction(conn: sqlite3.Connection) -> Iterator[None]:
    """A short write transaction that takes the write lock at once (``BEGIN IMMEDIATE``)."""
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")
