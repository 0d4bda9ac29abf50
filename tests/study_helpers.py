"""Builders shared by the study tests: a small invented study description and command-line runners.

Test modules import these from here, never from each other.
"""

import os
import subprocess
import sys

__all__ = ["netprobe_cli", "netprobe_popen", "TFIM_EXACT", "write_study", "ED_VS_FREE_FERMIONS"]

# exact diagonalisation of an 8-site Ising chain (256 states) against its free-fermion solution
# (Pfeuty 1970): both at rounding, ~1e-13 of |E| ~ 10; 1e-9 is the bound the study tests use
ED_VS_FREE_FERMIONS = 1e-9


def netprobe_cli(*args, cwd=None, timeout=600, **popen):
    """Run ``netprobe ARGS`` in a real subprocess (returns CompletedProcess, text)."""
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.run(
        [sys.executable, "-m", "netprobe", *map(str, args)],
        capture_output=True,
        text=True,
        env=env,
        timeout=timeout,
        cwd=cwd,
        **popen,
    )


def netprobe_popen(*args, **kwargs):
    """Start ``netprobe ARGS`` as a real subprocess without waiting."""
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    return subprocess.Popen([sys.executable, "-m", "netprobe", *map(str, args)], env=env, **kwargs)


TFIM_EXACT = """
[study]
name = "tfim_small"
model = "tfim"
engine = "exact"

[set]
length = 8

[grid]
h = {{ values = {values} }}

[measure]
region = "half:columns=4"
probes = ["energy", "mean:X", "entropy"]

[executor]
workers = 2
attempts = 1
connect_seconds = 2.0
"""


def write_study(folder, text, name="study.toml"):
    """Write a study description ``text`` to ``folder/name``; returns the path."""
    path = folder / name
    path.write_text(text)
    return path
