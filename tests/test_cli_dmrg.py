"""`netprobe run` / `netprobe measure` through real subprocesses: JSON keys, kill and resume, bad input."""

import json
import math
import os
import signal
import subprocess
import sys

import h5py
import pytest
from conftest import assert_one_line_error, run_cli, run_main


# a resumed ladder repeats the same sweeps from the checkpointed state: energies agree to rounding of
# the sweep sums (~1e-13 of |E| ~ 10); 1e-10 leaves room for a different BLAS summation order
RESUMED_ENERGY = 1e-10
# DMRG at D = 16 on a 16-site critical Ising chain is converged to ~1e-10 relative here; 1e-8 is a safe bound
DMRG_D16_ENERGY = 1e-8
# <H> of the stored state recomputed by the measure command against the energy the run recorded: the same
# state, the last local solve's residual and rounding of the MPO contraction
STORED_ENERGY = 1e-10


STAGE_KEYS = ("bond_dimension", "energy", "discarded_weight", "variance", "sweeps", "seconds", "state_file")


def test_run_json_stages_and_measure(tmp_path):
    out = tmp_path / "run"
    proc = run_cli("run", "tfim", "--set", "length=16", "--bond-dimension", "8,16", "--out", str(out), "--json",
                   check=True)
    payload = json.loads(proc.stdout)
    assert [st["bond_dimension"] for st in payload["stages"]] == [8, 16]
    for st in payload["stages"]:
        for key in STAGE_KEYS:
            assert key in st
        assert os.path.isfile(st["state_file"])
    n = 16
    # open critical Ising chain, E0 = J [1 - 1/sin(pi/(4N+2))] (Pfeuty, Ann. Phys. 57, 79 (1970));
    # D = 16 is converged to ~1e-10 here, so 1e-8 relative is a safe bound
    exact_energy = 1 - 1 / math.sin(math.pi / (4 * n + 2))
    assert payload["stages"][-1]["energy"] == pytest.approx(exact_energy, rel=DMRG_D16_ENERGY)
    meas = json.loads(run_cli("measure", payload["stages"][-1]["state_file"], "--local", "X", "--entropy",
                              "--energy", "--json", check=True).stdout)
    assert meas["energy"] == pytest.approx(payload["stages"][-1]["energy"], rel=STORED_ENERGY)
    assert len(meas["local"]["X"]) == n and len(meas["entropies"]) == n - 1


def test_killed_run_resumes_to_the_same_energy(tmp_path):
    # 12 sites and D <= 16 keep each run to seconds: the resumed energies must equal the uninterrupted run's
    # at any size (same seed, same sweeps); test_dmrg.py checks a resumed ladder in process as well
    args = ["heisenberg", "--set", "length=12", "--bond-dimension", "4,8,16", "--seed", "7"]
    ref = json.loads(run_cli("run", *args, "--out", str(tmp_path / "ref"), "--json", check=True).stdout)
    out = tmp_path / "killed"
    env = dict(os.environ, PYTHONUNBUFFERED="1")
    proc = subprocess.Popen([sys.executable, "-m", "netprobe", "run", *args, "--out", str(out)],
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE, text=True, env=env)
    seen_stage2_sweep = False
    for line in proc.stderr:
        if line.startswith("D=8 ") and "sweep" in line:
            seen_stage2_sweep = True
            break
    proc.send_signal(signal.SIGKILL)  # in the middle of stage 2
    proc.wait(timeout=60)
    assert seen_stage2_sweep and proc.returncode == -signal.SIGKILL
    assert (out / "checkpoint.h5").is_file()
    with h5py.File(out / "checkpoint.h5", "r"):  # the checkpoint on disk is whole after SIGKILL
        pass
    # a kill that lands inside a checkpoint write leaves that write's temporary file beside the whole
    # checkpoint (atomic replace); the resumed run must clear it
    resumed = json.loads(run_cli("run", *args, "--out", str(out), "--resume", "--json", check=True).stdout)
    assert not [p for p in os.listdir(out) if ".tmp" in p]
    assert len(resumed["stages"]) == 3
    for a, b in zip(ref["stages"], resumed["stages"]):
        assert b["energy"] == pytest.approx(a["energy"], abs=RESUMED_ENERGY)


@pytest.mark.parametrize(
    "args, match",
    [
        (("run", "heisenberg", "--set", "length=5", "--bond-dimension", "8"), "has no states"),
        (("run", "heisenberg", "--bond-dimension", "0"), "at least 1"),
        (("run", "heisenberg", "--bond-dimension", "16,8"), "must increase"),
        (("run", "heisenberg", "--bond-dimension", "x"), "integers separated by commas"),
        (("run", "heisenberg", "--bond-dimension", "8", "--resume"), "--resume needs --out"),
    ],
)
def test_run_bad_input(args, match):
    assert_one_line_error(run_main(*args), match)


def test_measure_rejects_foreign_and_unreadable_files(tmp_path):
    text = tmp_path / "notes.h5"
    text.write_text("not a state\n")
    assert_one_line_error(run_main("measure", str(text)), str(text))
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as fh:
        fh["data"] = [1, 2, 3]
    assert_one_line_error(run_main("measure", str(foreign)), str(foreign))
    assert_one_line_error(run_main("measure", str(tmp_path / "missing.h5")), "missing.h5")
