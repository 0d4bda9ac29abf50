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


# ----------------------------------------------------------------------------------------------
# named tolerances shared by several test modules; each comment says where its number comes from
# ----------------------------------------------------------------------------------------------

#: entropies, CMI and J from dense eigendecompositions (reduced states of at most ~2^8 dimensions, or
#: free-fermion matrices of norm up to ~30): every eigenvalue and logarithm carries ~1e3 ulps of the norm,
#: summed over the spectrum (common practice)
DENSE_LOG = 1e-10
#: one state through two exact routes (exact diagonalisation against free fermions on a Slater
#: determinant, two walks over one MPS, a pure state's entropy from a region and from its complement):
#: rounding only; the bound these comparisons have always used
TWO_ROUTES = 1e-9
#: the lowest 12 entanglement levels per sector (-log of Schmidt weights) of one state by two exact
#: routes: the logarithm amplifies the rounding of a small weight by 1/weight
LEVELS_TWO_ROUTES = 1e-8
#: quantities of an exact-diagonalisation ground state whose exact value is known (a flat spectrum, a
#: fixed polarization): eigenvectors from eigh or ARPACK at tol 1e-10
EXACT_VECTOR = 1e-10
#: DMRG at a bond dimension that truncates nothing, stopped by an energy change of at most 1e-9 to 1e-11
#: between sweeps: its energy agrees with exact diagonalisation to this, relative to max(1, |E0|)
DMRG_EXACT_ENERGY = 1e-8
#: entropies of such a DMRG state against exact values: the project's acceptance bound for entropies,
#: CMI, J and gamma between engines (a project choice, not derived; met with margin in these tests)
PROBE_ACCEPTANCE = 1e-6
#: free-fermion J of one state by two routes (dense and momentum blocks): the logarithms of correlation-matrix
#: eigenvalues near the clip (1e-14, GaussianOptions) amplify entry differences of ~1e-12 (ENTRY_TOL in
#: tests/test_gaussian_momentum.py); the bound this comparison has always used, far below |J|
CLIPPED_LOG_J = 1e-8

# free-fermion disks (tests/test_gaussian.py)
#: J/(pi/3) and the real-space Chern number on finite disks approach the bulk values exponentially in R/xi
#: (shared/references.md); measured deviations 2e-4 (J) and 6e-5 (nu) at R = 10, 5x larger at R = 8
FINITE_DISK = 1e-3
#: against values recomputed in shared/references.md, whose disk convention (centre, boundary) is not
#: recorded: moving the centre by half a spacing shifts J by ~1e-5 at R = 8
RECOMPUTED_DISK = 5e-5
#: |J| in the trivial phase (m = 3) on a disk of radius 6 (shared/references.md)
TRIVIAL_DISK_J = 2e-4

# DMRG and the eigensolver (tests/test_dmrg.py)
#: DMRG with TIGHT settings (energy_tolerance 1e-12, discarded_tolerance 1e-9) at a bond dimension that
#: truncates nothing: relative energy error
DMRG_TIGHT_ENERGY = 1e-9
#: the residual norm the Lanczos kernel is asked for (its tol argument), relative to |E|; a factor 10 on it
#: (and on a floor of 1e-12 for the eigenvalue) leaves room for the residual estimate's own rounding
LANCZOS_ASKED = 1e-10
LANCZOS_RESIDUAL_FLOOR = 1e-12
#: relative accuracy of c from a Calabrese-Cardy fit of the entropies of 64-site (or shorter) open chains:
#: boundary and finite-size corrections of a few per cent
CALABRESE_CARDY_FIT = 0.03
#: the Heisenberg bulk energy per site from open chains: the three-length elimination on 12-48 sites and the
#: difference E(128) - E(64) keep 1/L^2 and logarithmic corrections of ~1e-4; the elimination on 32-128
#: sites leaves ~2e-5
HEISENBERG_BULK = 1e-4
HEISENBERG_BULK_ELIMINATED = 2e-5
#: a ladder resumed from its checkpoint against the uninterrupted one: same seed, same arithmetic, equal to
#: rounding (the bound the checkpoint feature was specified with)
RESUMED_LADDER = 1e-10

# edge diagnostics (tests/test_edge.py)
#: h - c-/24 from the momentum polarization of a 16-column Chern strip over odd circumferences 7..19: the
#: acceptance criterion's tolerance (as tests/test_edge.py states)
EDGE_H = 0.002
#: c- from the same ladder of circumferences: finite-circumference corrections; the bound the test has used
EDGE_C_MINUS = 0.05
#: c- and h from lambda of toric-code DMRG states (stabilizer states, exact at D = 128): rounding amplified
#: by the fit over three circumferences
TORIC_EDGE_FIT = 1e-6
#: the polarization fit on noise-free synthetic lambda: rounding through logarithms and phase unwrapping
SYNTHETIC_FIT = 1e-9
SYNTHETIC_FIT_RESIDUAL = 1e-8


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
