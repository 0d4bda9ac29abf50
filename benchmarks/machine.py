"""What the machine is and how fast it multiplies matrices, measured in the same run as the benchmarks."""

from __future__ import annotations

import os
import platform
import time

import numpy as np
from threadpoolctl import threadpool_info, threadpool_limits

__all__ = ["describe", "gemm_rate", "usable_cores", "proc_kib"]


def usable_cores() -> int:
    """Cores this process may run on (the affinity mask where the platform has one)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:
        return os.cpu_count() or 1


def _cpu_model() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as handle:
            for line in handle:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or platform.machine()


def proc_kib(path: str, key: str) -> int | None:
    """The ``key:`` line of a /proc status file such as /proc/meminfo, in bytes (None if absent)."""
    try:
        with open(path, encoding="utf-8") as handle:
            for line in handle:
                if line.startswith(key + ":"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    return None


def _memory_bytes() -> int | None:
    return proc_kib("/proc/meminfo", "MemTotal")


def describe() -> dict:
    """Cores, CPU, memory, BLAS libraries and library versions, as a JSON-friendly dict."""
    import scipy

    blas = [
        {k: lib.get(k) for k in ("internal_api", "version", "architecture", "threading_layer", "num_threads")}
        for lib in threadpool_info()
        if lib.get("user_api") == "blas"
    ]
    memory = _memory_bytes()
    return {
        "cores": usable_cores(),
        "cpu": _cpu_model(),
        "memory_gib": None if memory is None else round(memory / 2**30, 1),
        "blas": blas,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "platform": platform.platform(),
    }


def gemm_rate(dtype=np.complex128, n: int = 1024, *, threads: int = 1, repeats: int = 5) -> float:
    """Floating-point operations per second of a plain ``n x n`` matrix product (best of ``repeats``).

    Counted as ``8 n^3`` for complex and ``2 n^3`` for real matrices (common practice). The best
    of several repeats is the machine's rate with the least interference from other processes.
    """
    dtype = np.dtype(dtype)
    rng = np.random.default_rng(0)
    a = rng.standard_normal((n, n))
    b = rng.standard_normal((n, n))
    if dtype.kind == "c":
        a = a + 1j * rng.standard_normal((n, n))
        b = b + 1j * rng.standard_normal((n, n))
    a, b = a.astype(dtype), b.astype(dtype)
    out = np.empty((n, n), dtype)
    best = float("inf")
    with threadpool_limits(limits=threads):
        np.matmul(a, b, out=out)
        for _ in range(repeats):
            start = time.perf_counter()
            np.matmul(a, b, out=out)
            best = min(best, time.perf_counter() - start)
    return (8 if dtype.kind == "c" else 2) * n**3 / best
