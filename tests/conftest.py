"""Shared test helpers: tolerances, command-line runners and one-line error checks.

References built independently of netprobe (dense Hamiltonians, exact solutions, free fermions) live in
``references.py``.
"""

import contextlib
import io
import os
import resource
import subprocess
import sys

import numpy as np
import pytest

from netprobe.cli import main
from references import dense_from_products, kron_all  # noqa: F401 (importable from conftest as before)

EPS = np.finfo(float).eps


def tol(scale: float = 1.0, factor: float = 1e3) -> float:
    """Absolute tolerance for dense linear algebra: ``factor`` ulps of the problem's scale.

    Eigenvalues from LAPACK on well-conditioned Hermitian problems are accurate to a few ulps of
    the matrix norm (common practice); 1e3 leaves room for accumulated sums over many terms.
    """
    return factor * EPS * max(1.0, abs(scale))


def run_cli(*args, check=False, timeout=600):
    """Run the netprobe command in a real subprocess; returns CompletedProcess (text)."""
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.run([sys.executable, "-m", "netprobe", *args], capture_output=True, text=True,
                          env=env, timeout=timeout)
    if check and proc.returncode != 0:
        raise AssertionError(f"netprobe {' '.join(args)} failed ({proc.returncode}):\n{proc.stderr}")
    return proc


def assert_one_line_error(proc, match):
    """A user error: exit status 2 and one line on standard error that contains ``match``, no traceback."""
    assert proc.returncode == 2, proc.stderr
    assert "Traceback" not in proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, proc.stderr
    assert match in lines[0], lines[0]


IN_PROCESS_MEMORY = 3 * 2**30  # address space an in-process command may map: far above a small run


def _address_space() -> int:
    """Bytes of address space this process maps now (VmSize from /proc); 0 where /proc is missing."""
    try:
        with open("/proc/self/status") as status:
            for line in status:
                if line.startswith("VmSize:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


@contextlib.contextmanager
def bounded_memory(extra: int = IN_PROCESS_MEMORY):
    """Let code in this process map at most ``extra`` bytes beyond what the process maps already."""
    soft, hard = resource.getrlimit(resource.RLIMIT_AS)
    used = _address_space()
    limit = used + extra if used else soft
    if hard != resource.RLIM_INFINITY:
        limit = min(limit, hard)
    resource.setrlimit(resource.RLIMIT_AS, (limit, hard))
    try:
        yield
    finally:
        resource.setrlimit(resource.RLIMIT_AS, (soft, hard))


def run_main(*args):
    """Run ``netprobe ARGS`` through :func:`netprobe.cli.main` in this process, under :func:`bounded_memory`.

    For user errors found before any large computation: the same one-line policy as a subprocess (main
    turns our errors into one line and a status), without the interpreter start-up of a subprocess.
    Returns a CompletedProcess (text); a runaway allocation shows as a traceback line in its stderr.
    """
    out, err = io.StringIO(), io.StringIO()
    with bounded_memory(), contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main([str(a) for a in args])
        except SystemExit as exc:  # argparse usage errors and --help
            code = exc.code
        except MemoryError:
            code, _ = 1, err.write("Traceback: MemoryError (unbounded allocation)\n")
    return subprocess.CompletedProcess(["netprobe", *map(str, args)], code, out.getvalue(), err.getvalue())


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)
