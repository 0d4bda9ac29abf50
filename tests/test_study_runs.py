"""Whole studies on real executors.

The Haldane and Ising transitions, a study killed mid-run and resumed, Dask against local processes,
and a worker process that dies.
"""

import contextlib
import json
import math
import os
import signal
import sqlite3
import time

import numpy as np
import pytest
from references import pfeuty_chain
from conftest import tol
from study_helpers import ED_VS_FREE_FERMIONS, TFIM_EXACT, netprobe_cli, netprobe_popen, write_study

from netprobe.model.spec import load_model
from netprobe.engines.mps.store import load_state
from netprobe.output.study_report import write_report
from netprobe.study import build_report, load_study, parse_study, run_study
from netprobe.study.executors import EXECUTORS, DaskExecutor, LocalExecutor
from netprobe.study.ledger import Ledger, ledger_path
from netprobe.study.report import steepest_change
from netprobe.study.tasks import run_task


# J/(pi/3) and the real-space Chern number on a radius-6 disk of a 14 x 12 cylinder deep inside a phase:
# finite-disk corrections of a few per cent
DISK_R6 = 0.1
# DMRG at D = 16 on Ising chains of <= 32 sites: truncation ~1e-12, observables err at the local solver's
# tolerance (1e-8 relative); 1e-6 leaves room for both
DMRG_D16_OBSERVABLE = 1e-6
# the study's steepest-change estimate against the same estimator on the exact <X> over the same grid:
# DMRG's 1e-6 error in <X>, over the grid spacing 0.1 (models/studies/tfim_sweep.toml), moves the slope
# peak by far less than 1e-3
STEEPEST_ESTIMATE = 1e-3
# the finite-size locations 0.865 (L = 16) and 0.938 (L = 32) are recomputed from the free-fermion solution
# on the study's grid; 0.02 is a fifth of its spacing 0.1
LOCATION_RECALC = 0.02
# 10-site Ising chain at h = 1: D = 4 discards up to ~5e-7 of the weight, an energy error of order 1e-5;
# D = 8 discards ~1e-10 and is exact to about 1e-9
DMRG_D4_ENERGY = 1e-4
DMRG_D8_ENERGY = 1e-7


@pytest.mark.slow  # long run (over 10 s on 2 cores); run with -m slow
def test_haldane_sweep_locates_the_chern_transition(tmp_path):
    out = tmp_path / "haldane"
    proc = netprobe_cli("study", "haldane_transition", "--out", out)
    assert proc.returncode == 0, proc.stderr
    report = json.loads(netprobe_cli("report", out, "--json", "--no-plots").stdout)
    t2 = load_model("haldane").parameters["t2"]
    critical = 3 * math.sqrt(3) * t2  # gap closes at M = 3 sqrt(3) t2 sin(phi) (Haldane, PRL 61, 2015 (1988))
    for probe in ("J", "chern_number"):
        found = [b for b in report["boundaries"]["M"] if b["probe"] == probe]
        assert len(found) == 1 and not found[0]["at_edge"]
        # within one grid spacing of the exact transition (the brief's criterion)
        assert abs(found[0]["location"] - critical) <= found[0]["uncertainty"], found[0]
    for point in report["points"]:
        m = point["parameters"]["M"]
        j_units = abs(point["values"]["J"]) / (
            math.pi / 3
        )  # J = (pi/3) c- with |c-| = |C| = 1 in the Chern phase
        nu = abs(
            point["values"]["chern_number"]
        )  # real-space Chern number (Kitaev, Ann. Phys. 321, 2 (2006))
        # 0.1: finite-disk corrections of a radius-6 disk on a 14 x 12 cylinder, a few per cent
        # deep inside a phase
        if m <= 1.0:
            assert j_units == pytest.approx(1.0, abs=DISK_R6) and nu == pytest.approx(1.0, abs=DISK_R6)
        if m >= 2.5:
            assert j_units < 0.1 and nu < 0.1


@pytest.mark.slow  # long run (over 10 s on 2 cores); run with -m slow
def test_dmrg_ising_sweep_extrapolates_to_the_critical_field(tmp_path):
    description = load_study("tfim_sweep")
    run = run_study(description, tmp_path / "tfim", progress=None)
    assert run.complete, run.failures
    report = build_report(tmp_path / "tfim")
    names = {f.name for f in write_report(report)}
    assert {"phase_mean_X.png", "lines_mean_X.png", "convergence.png", "points.csv"} <= names
    hs = np.array(description.axes[1].values)
    locations = {}
    for entry in report.points:
        length, h = entry["parameters"]["length"], entry["parameters"]["h"]
        _, exact_x = pfeuty_chain(length, h)
        # DMRG at D = 16 on an Ising chain of <= 32 sites: truncation ~1e-12, observables err at the local
        # solver's tolerance (1e-8 relative); 1e-6 leaves room for both
        assert entry["values"]["mean:X"] == pytest.approx(exact_x, abs=DMRG_D16_OBSERVABLE)
        assert entry["verdict"]["status"] == "converged", entry["verdict"]
    for b in report.boundaries["h"]:
        if b.probe == "mean:X":
            locations[b.at["length"]] = b.location
            # the same estimator on the exact free-fermion <X> over the same grid (Pfeuty 1970)
            reference = steepest_change(hs, [pfeuty_chain(b.at["length"], h)[1] for h in hs])[0]
            assert b.location == pytest.approx(reference, abs=STEEPEST_ESTIMATE)
    assert set(locations) == {16, 32}
    # finite-size locations near 0.87 and 0.94 on open chains (recomputed from the free-fermion solution)
    assert locations[16] == pytest.approx(0.865, abs=LOCATION_RECALC)
    assert locations[32] == pytest.approx(0.938, abs=LOCATION_RECALC)
    # linear in 1/length: h(L) = h_c + a / L, so h_c = (32 h(32) - 16 h(16)) / 16; h_c = J (Pfeuty 1970)
    h_c = (32 * locations[32] - 16 * locations[16]) / 16
    assert abs(h_c - 1.0) < 0.03


KILL_STUDY = """
[study]
name = "kill_me"
model = "tfim"
engine = "dmrg"
seed = 3

[set]
length = 10

[grid]
h = { values = [0.4, 0.6, 0.8, 1.0, 1.2, 1.4, 1.6] }

[ladder]
bond_dimensions = [4, 8]
variance = false
noise_sweeps = 0

[measure]
probes = ["energy", "mean:X"]

[executor]
workers = 2
attempts = 2
heartbeat_seconds = 1.0
lease_seconds = 60.0
"""


def _rows(path):
    with sqlite3.connect(path) as conn:
        conn.row_factory = sqlite3.Row
        return [dict(r) for r in conn.execute("SELECT * FROM tasks ORDER BY id")]


def test_killed_study_resumes_without_recomputing(tmp_path):
    spec = write_study(tmp_path, KILL_STUDY)
    out = tmp_path / "out"
    proc = netprobe_popen(
        "study",
        spec,
        "--out",
        out,
        start_new_session=True,
        stdout=open(os.devnull, "w"),
        stderr=open(tmp_path / "first.log", "w"),
    )
    deadline = time.monotonic() + 300
    try:
        while True:
            assert time.monotonic() < deadline, (tmp_path / "first.log").read_text()
            assert proc.poll() is None, (tmp_path / "first.log").read_text()
            if ledger_path(out).is_file():
                try:
                    rows = _rows(ledger_path(out))
                except sqlite3.OperationalError:  # tables not created yet
                    rows = []
                status = [r["status"] for r in rows]
                if status.count("done") >= 3 and status.count("running") >= 1:
                    break
            time.sleep(0.05)
    finally:
        os.killpg(proc.pid, signal.SIGKILL)  # the dispatcher and its workers, mid-run
        proc.wait()
    killed = _rows(ledger_path(out))
    finished_before = {r["id"]: r for r in killed if r["status"] == "done"}
    assert any(r["status"] == "running" for r in killed)
    second = netprobe_cli("study", spec, "--out", out)
    assert second.returncode == 0, second.stderr
    rows = _rows(ledger_path(out))
    assert all(r["status"] == "done" for r in rows) and len(rows) == 14
    assert len({(r["point"], r["bond_dimension"]) for r in rows}) == len(rows)  # no duplicate rows
    for r in rows:
        if r["id"] in finished_before:
            before = finished_before[r["id"]]
            for key in ("attempts", "finished_at", "result", "state_file", "lease"):
                assert r[key] == before[key], key  # a finished task is not recomputed
    with Ledger(ledger_path(out)) as ledger:
        log = ledger.attempt_log()
        for r in rows:
            outcomes = [e["outcome"] for e in log if e["task"] == r["id"]]
            assert outcomes.count("done") == 1, outcomes
        assert any(e["outcome"] == "interrupted" for e in log)
    states = out / "states"
    assert not [p for p in states.iterdir() if p.name.endswith(".tmp")]  # no half-written file left
    referenced = {os.path.basename(r["state_file"]) for r in rows}
    assert {p.name for p in states.iterdir()} == referenced
    for r in rows:
        saved = load_state(out / r["state_file"])
        result = json.loads(r["result"])
        assert saved.info["energy"] == result["energy"]
        energy, _ = pfeuty_chain(10, saved.info["parameters"]["h"])
        # D = 4 on a 10-site Ising chain discards up to ~5e-7 of the weight at h = 1, an energy error of
        # order 1e-5; D = 8 discards ~1e-10 and is exact to about 1e-9
        bound = DMRG_D4_ENERGY if r["bond_dimension"] == 4 else DMRG_D8_ENERGY
        assert result["energy"] == pytest.approx(energy, abs=bound)


@contextlib.contextmanager
def _local_executor():
    yield LocalExecutor(workers=2)


@contextlib.contextmanager
def _dask_executor():
    distributed = pytest.importorskip("distributed")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    ) as cluster:
        yield DaskExecutor(cluster.scheduler_address)


# How to start each executor of the registry (netprobe.study.executors.EXECUTORS) on this machine; the
# tests below are crossed with the registry itself, so a newly registered executor needs an entry here.
EXECUTOR_STARTS = {"local": _local_executor, "dask": _dask_executor}


@pytest.fixture(scope="module")
def executor_runs(tmp_path_factory):
    """``run(name)``: the small Ising study run once by the executor ``name``; returns its folder."""
    folders = {}

    def run(name):
        if name not in folders:
            if name not in EXECUTOR_STARTS:
                pytest.fail(f"executor {name!r} is registered but has no start in EXECUTOR_STARTS")
            folder = tmp_path_factory.mktemp(f"study-{name}")
            description = parse_study(TFIM_EXACT.format(values="[0.5, 1.0, 1.5]"), path=str(folder / "s.toml"))
            with EXECUTOR_STARTS[name]() as executor:
                outcome = run_study(description, folder / "out", executor=executor, progress=None)
            assert outcome.complete, outcome.failures
            folders[name] = folder / "out"
        return folders[name]

    return run


@pytest.mark.parametrize("name", list(EXECUTORS))
def test_every_executor_runs_the_study_in_workers_to_the_exact_answer(name, executor_runs):
    out = executor_runs(name)
    with Ledger(ledger_path(out)) as ledger:
        rows = ledger.tasks()
    assert len(rows) == 3
    for row in rows:
        energy, mean_x = pfeuty_chain(8, row.parameters["h"])
        # exact diagonalisation against the free-fermion solution (Pfeuty 1970): rounding only
        assert row.result["energy"] == pytest.approx(energy, abs=ED_VS_FREE_FERMIONS)
        assert row.result["probes"]["mean:X"] == pytest.approx(mean_x, abs=ED_VS_FREE_FERMIONS)
    assert {r.owner_pid for r in rows} != {os.getpid()}  # the executor's workers ran them, not this process


def test_all_executors_agree_to_rounding(executor_runs):
    reports = {name: {p["label"]: p["values"] for p in build_report(executor_runs(name)).points}
               for name in EXECUTORS}
    first, *others = reports
    for name in others:
        assert reports[name].keys() == reports[first].keys(), name
        for label, values in reports[first].items():
            for probe, value in values.items():
                # the same code on one BLAS thread per task; rounding only
                assert reports[name][label][probe] == pytest.approx(value, abs=tol(factor=4.5e3)), (name, probe)


def dying_runner(ledger_file, task, lease, *, blas_threads=None):
    """Runs the real task, except that the worker process exits abruptly on the point h = 1.0."""
    with Ledger(ledger_file) as ledger:
        if ledger.task(task).parameters["h"] == 1.0:
            os._exit(7)
    return run_task(ledger_file, task, lease, blas_threads=blas_threads)


def test_a_dying_worker_fails_its_task_and_the_study_goes_on(tmp_path):
    description = parse_study(TFIM_EXACT.format(values="[0.5, 1.0, 1.5]"), path=str(tmp_path / "s.toml"))
    run = run_study(
        description, tmp_path / "out", executor=LocalExecutor(workers=2, runner=dying_runner), progress=None
    )
    assert (run.counts["done"], run.counts["failed"]) == (2, 1)
    with Ledger(ledger_path(tmp_path / "out")) as ledger:
        failed = [r for r in ledger.tasks() if r.status == "failed"]
        assert len(failed) == 1 and failed[0].parameters["h"] == 1.0
        assert "died (exit status 7)" in failed[0].error
    again = run_study(description, tmp_path / "out", progress=None)  # the real runner retries what failed
    assert again.complete
    with Ledger(ledger_path(tmp_path / "out")) as ledger:
        row = next(r for r in ledger.tasks() if r.parameters["h"] == 1.0)
        assert row.attempts == 2
        assert row.result["energy"] == pytest.approx(pfeuty_chain(8, 1.0)[0], abs=ED_VS_FREE_FERMIONS)
