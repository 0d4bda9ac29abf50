"""Shared test helpers: tolerances and small dense references built independently of netprobe."""

import os
import subprocess
import sys
from functools import reduce

import numpy as np
import pytest

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


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)
