"""Validators of command-line options, used as ``argparse`` ``type=`` functions.

Each function takes the option's text and returns the checked value, or raises
:class:`argparse.ArgumentTypeError`, which the parser turns into one line on standard error and
exit status 2 before any work starts.
"""

from __future__ import annotations

import argparse
import math
import os
import re
from pathlib import Path

__all__ = [
    "MAX_SEED",
    "seed",
    "positive_gigabytes",
    "output_folder",
    "folder_path",
    "unwritable",
    "scheduler_address",
]

#: Largest accepted seed: seeds are stored as signed 64-bit integers (SQLite ledgers, HDF5 attributes).
MAX_SEED = 2**63 - 1

_SCHEMES = ("tcp", "tls", "ws", "wss", "inproc", "ucx")
_ADDRESS = re.compile(r"^(?:(?P<scheme>[a-z]+)://)?(?P<host>\[[0-9A-Fa-f:.]+\]|[A-Za-z0-9_.\-]+)"
                      r"(?::(?P<port>\d+))?$")


def seed(text: str) -> int:
    """A seed of the random initial state: a whole number from 0 to 2**63 - 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"seed '{text}' must be a whole number from 0 to {MAX_SEED}") from None
    if not 0 <= value <= MAX_SEED:
        raise argparse.ArgumentTypeError(f"seed {value} must be a whole number from 0 to {MAX_SEED}")
    return value


def positive_gigabytes(text: str) -> float:
    """A memory size in GB: a positive finite number (``nan``, ``inf`` and 0 are refused)."""
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"'{text}' is not a number of GB; give e.g. 4 or 0.5") from None
    if not math.isfinite(value) or value <= 0:
        raise argparse.ArgumentTypeError(f"{text} GB must be a positive finite number; give e.g. 4 or 0.5")
    return value


def output_folder(text: str) -> str:
    """A folder to write into: an existing writable folder, or a new one under a writable folder.

    Refuses an existing file (not a folder), a place whose nearest existing parent is not a folder,
    and a folder that cannot be written.
    """
    folder_path(text)
    problem = unwritable(text)
    if problem is not None:
        raise argparse.ArgumentTypeError(problem)
    return text


def folder_path(text: str) -> str:
    """A folder name that is not an existing file (it may exist as a folder, or not yet)."""
    if not text.strip():
        raise argparse.ArgumentTypeError("the folder name is empty; give a folder such as results/run1")
    path = Path(text)
    if path.exists() and not path.is_dir():
        raise argparse.ArgumentTypeError(f"{text} is an existing file, not a folder; give a folder name")
    probe = path
    while not probe.exists():
        if probe.is_symlink():
            raise argparse.ArgumentTypeError(f"{probe} is a broken symbolic link; give a folder name")
        parent = probe.parent
        if parent == probe:
            break
        probe = parent
    if probe.exists() and not probe.is_dir():
        raise argparse.ArgumentTypeError(f"{text}: {probe} is a file, not a folder; give a folder name")
    return text


def unwritable(text: str) -> str | None:
    """Why files cannot be created in folder ``text`` (or in its nearest existing parent); None if
    they can."""
    probe = Path(text)
    while not probe.exists() and probe.parent != probe:
        probe = probe.parent
    if probe.is_dir() and _writable(probe):
        return None
    return f"{text}: cannot write in {probe} (permission denied or read-only); choose another folder"


def _writable(folder: Path) -> bool:
    """Whether files can be created in ``folder`` (tried, since permission bits lie for root and on
    read-only mounts)."""
    if not os.access(folder, os.W_OK | os.X_OK):
        return False
    try:
        fd, name = _probe_file(folder)
    except OSError:
        return False
    os.close(fd)
    os.unlink(name)
    return True


def _probe_file(folder: Path):
    name = folder / f".netprobe-write-test.{os.getpid()}"
    return os.open(name, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o600), name


def scheduler_address(text: str) -> str:
    """A Dask scheduler address: ``[scheme://]host[:port]`` with a known scheme."""
    match = _ADDRESS.match(text.strip())
    if match is None or (match.group("scheme") or "tcp") not in _SCHEMES:
        raise argparse.ArgumentTypeError(
            f"'{text}' is not a scheduler address; give [scheme://]host:port, e.g. tcp://10.0.0.5:8786 "
            f"(schemes: {', '.join(_SCHEMES)})")
    port = match.group("port")
    if port is None and match.group("scheme") != "inproc":
        raise argparse.ArgumentTypeError(f"'{text}' names no port; give host:port, e.g. tcp://10.0.0.5:8786")
    if port is not None and not 0 < int(port) < 65536:
        raise argparse.ArgumentTypeError(f"'{text}': port {port} must lie between 1 and 65535")
    return text.strip()
