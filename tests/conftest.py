"""Shared test helpers: tolerances and small dense references built independently of netprobe."""

import contextlib
import io
import os
import resource
import subprocess
import sys
from functools import reduce

import numpy as np
import pytest

from netprobe.cli import main

EPS = np.finfo(float).eps


def tol(scale: float = 1.0, factor: float = 1e3) -> float:
    """Absolute tolerance for dense linear algebra: ``factor`` ulps of the problem's scale.

    Eigenvalues from LAPACK on well-conditioned Hermitian problems are accurate to a few ulps of
    the matrix norm (common practice); 1e3 leaves room for accumulated sums over many terms.
    """
    return factor * EPS * max(1.0, abs(scale))


def kron_all(mats):
    """Kronecker product, first factor leftmost (site 0 most significant)."""
    return reduce(np.kron, mats, np.array([[1.0]]))


def dense_from_products(ham):
    """Full-space matrix of a netprobe Hamiltonian built by Kronecker products (small N only)."""
    n, d = ham.num_sites, ham.space.dim
    out = np.zeros((d**n, d**n), dtype=complex)
    for p in ham.products:
        ops = [np.eye(d)] * n
        for s, m in zip(p.sites, p.matrices):
            ops[s] = m
        out += p.coefficient * kron_all(ops)
    return out


def run_cli(*args, check=False, timeout=600):
    """Run the netprobe command in a real subprocess; returns CompletedProcess (text)."""
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.run([sys.executable, "-m", "netprobe", *args], capture_output=True, text=True,
                          env=env, timeout=timeout)
    if check and proc.returncode != 0:
        raise AssertionError(f"netprobe {' '.join(args)} failed ({proc.returncode}):\n{proc.stderr}")
    return proc


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
