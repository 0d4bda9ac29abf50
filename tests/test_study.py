"""Studies: description errors, the ledger under concurrency, estimates, verdicts and the command line.

The ledger is a real SQLite file, the command line a real subprocess.
"""

import json
import multiprocessing
import os
import socket
import sqlite3
import subprocess
import sys
import time

import numpy as np
import pytest

from conftest import assert_one_line_error, run_main, tol
from references import pfeuty_chain
from study_helpers import ED_VS_FREE_FERMIONS, TFIM_EXACT, netprobe_cli, write_study
from netprobe.errors import SpecError
from netprobe.study.reading import parse_study
from netprobe.study.ledger import Ledger, ledger_path
from netprobe.study.report import steepest_change
from netprobe.study.verdicts import inverse_bond_fit, point_verdict


# ---- the description -------------------------------------------------------------------------------


BASE = """
[study]
name = "t"
model = "tfim"
engine = "{engine}"
{extra_study}
{rest}
"""


def _parse(rest, engine="exact", extra_study=""):
    return parse_study(BASE.format(engine=engine, rest=rest, extra_study=extra_study), path="t.toml")


@pytest.mark.parametrize(
    "rest, match",
    [
        ("[grid]\nhx = { values = [1.0] }", "grid] parameter 'hx' is not a parameter of model 'tfim'"),
        ("[grid]\nh = { values = [] }", "the grid is empty"),
        ("[grid]\nh = { start = 0.5, stop = 1.0, num = 0 }", "the grid is empty"),
        ("[grid]\n", "the grid is empty"),
        ("", "the grid is empty"),
        ("[grid]\nh = { start = 0.5, stop = 1.0 }", "needs start, stop and num"),
        ("[grid]\nh = { values = [1.0], step = 0.1 }", "unknown key 'step' in [grid] h"),
        ('[grid]\nh = { values = [1.0] }\n[measure]\nprobes = ["Jx"]', "unknown probe 'Jx'"),
        ('[grid]\nh = { values = [1.0] }\n[measure]\nprobes = ["J"]', "needs a region"),
        (
            '[grid]\nh = { values = [1.0] }\n[measure]\nregion = "sectors:radius=1"\n'
            'probes = ["chern_number"]',
            "not available with engine 'exact'",
        ),
        ("[grid]\nh = { values = [1.0] }\n[sett]\nJ = 1", "unknown key 'sett' in the top level"),
        ("[grid]\nh = { values = [1.0] }\n[set]\nh = 1.0", "both swept in [grid] and fixed in [set]"),
        ("[grid]\nh = { values = [1.0] }\n[executor]\nworkers = 0", "workers = 0 must be a positive integer"),
        ("[grid]\nh = { values = [1.0] }\n[executor]\nthreads = 2", "unknown key 'threads' in [executor]"),
        (
            "[grid]\nh = { values = [1.0] }\nJ = { values = [1.0] }\nlength = { values = [4] }",
            "a grid sweeps one or two",
        ),
    ],
)
def test_description_errors_name_the_problem(rest, match):
    with pytest.raises(SpecError, match=_escape(match)):
        _parse(rest)


def _escape(text):
    import re

    return re.escape(text)


def test_description_dmrg_needs_an_increasing_ladder():
    with pytest.raises(SpecError, match="needs \\[ladder\\] bond_dimensions"):
        _parse("[grid]\nh = { values = [1.0] }", engine="dmrg")
    with pytest.raises(SpecError, match="must increase"):
        _parse("[grid]\nh = { values = [1.0] }\n[ladder]\nbond_dimensions = [16, 8]", engine="dmrg")
    with pytest.raises(SpecError, match="sweep_limit"):
        _parse(
            "[grid]\nh = { values = [1.0] }\n[ladder]\nbond_dimensions = [8]\nsweep_limit = 0", engine="dmrg"
        )


def test_grid_points_plan_and_warm_start_neighbours():
    d = _parse(
        "[grid]\nlength = { values = [8, 12] }\nh = { start = 0.5, stop = 1.0, num = 3 }\n"
        "[ladder]\nbond_dimensions = [4, 8]",
        engine="dmrg",
        extra_study="warm_start = true",
    )
    # linspace values, both ends included (numpy.linspace)
    assert [p.values["h"] for p in d.points[:3]] == pytest.approx(np.linspace(0.5, 1.0, 3).tolist())
    assert [p.label for p in d.points[:2]] == ["length=8,h=0.5", "length=8,h=0.75"]
    plan = {(t.point, t.rung): t for t in d.plan()}
    assert len(plan) == 6 * 2
    # warm start runs along h only: a state cannot start a model of another length
    assert plan[(0, 0)].needs == ()
    assert plan[(1, 0)].needs == ((0, 0),)
    assert plan[(3, 0)].needs == ()  # first h of length 12
    assert plan[(4, 0)].needs == ((3, 0),)
    assert plan[(4, 1)].needs == ((4, 0),)
    assert d.overrides(d.points[4]) == {"length": "12", "h": "0.75"}


def test_point_lists_keep_their_order_and_reject_repeats():
    d = _parse("[[point]]\nh = 1.5\n[[point]]\nh = 0.5\nJ = 2.0")
    assert [p.values for p in d.points] == [{"h": 1.5}, {"h": 0.5, "J": 2.0}]
    assert d.swept == ("h", "J") and d.points[1].grid_index is None
    with pytest.raises(SpecError, match="repeat a point"):
        _parse("[[point]]\nh = 1.5\n[[point]]\nh = 1.5")
    with pytest.raises(SpecError, match="'hh' is not a parameter"):
        _parse("[[point]]\nhh = 1.5")


def test_fingerprint_ignores_executor_settings():
    a = _parse("[grid]\nh = { values = [1.0, 2.0] }\n[executor]\nworkers = 1")
    b = _parse("[grid]\nh = { values = [1.0, 2.0] }\n[executor]\nworkers = 2")
    c = _parse("[grid]\nh = { values = [1.0, 3.0] }")
    assert a.fingerprint() == b.fingerprint() != c.fingerprint()


# ---- the ledger --------------------------------------------------------------------------------------


def _small_ledger(tmp_path, engine="exact", values="[0.5, 1.0, 1.5]"):
    if engine == "dmrg":
        text = (
            f'[study]\nname = "l"\nmodel = "tfim"\nengine = "dmrg"\nwarm_start = true\n[set]\n'
            f"length = 6\n[grid]\nh = {{ values = {values} }}\n[ladder]\nbond_dimensions = [4, 8]\n"
        )
    else:
        text = TFIM_EXACT.format(values=values)
    d = parse_study(text, path=str(tmp_path / "l.toml"))
    return d, Ledger.prepare(tmp_path / "out", d)


def _claim_all(path, out_queue):
    ledger = Ledger(path)
    mine = []
    while True:
        claim = ledger.claim(owner_pid=os.getpid())
        if claim is None:
            break
        mine.append(claim.task)
        ledger.finish(claim.task, claim.lease, {"energy": 0.0, "by": os.getpid()})
    ledger.close()
    out_queue.put(mine)


def test_concurrent_claims_give_each_task_to_one_process(tmp_path):
    d, ledger = _small_ledger(tmp_path, values=str([round(0.1 * k, 1) for k in range(1, 41)]))
    ledger.begin_run(1)
    path = ledger.path
    ctx = multiprocessing.get_context("spawn")
    queue = ctx.Queue()
    procs = [ctx.Process(target=_claim_all, args=(str(path), queue)) for _ in range(4)]
    for p in procs:
        p.start()
    claimed = [queue.get(timeout=120) for _ in procs]
    for p in procs:
        p.join(timeout=60)
    flat = [t for chunk in claimed for t in chunk]
    assert sorted(flat) == sorted(r.id for r in ledger.tasks())  # every task once, none twice
    counts = ledger.counts()
    assert counts["done"] == counts["total"] == 40
    log = ledger.attempt_log()
    assert len(log) == 40 and all(e["outcome"] == "done" for e in log)
    with sqlite3.connect(path) as conn:
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
        with pytest.raises(sqlite3.IntegrityError):
            conn.execute("INSERT INTO tasks (point, rung, bond_dimension) VALUES (0, 0, 0)")
    ledger.close()


def _dead_pid():
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


def test_recover_takes_back_dead_leases_and_rejects_their_results(tmp_path):
    d, ledger = _small_ledger(tmp_path)
    ledger.begin_run(2)
    first = ledger.claim(owner_pid=_dead_pid())
    second = ledger.claim(owner_pid=os.getpid(), owner_host="elsewhere")
    third = ledger.claim(owner_pid=os.getpid())
    assert ledger.recover(120.0) == [first.task]  # process gone on this host
    assert ledger.recover(120.0, now=time.time() + 1000) == [second.task, third.task]  # heartbeats too old
    rows = {r.id: r for r in ledger.tasks()}
    assert rows[first.task].status == "pending" and "is gone" in rows[first.task].error
    assert "no heartbeat" in rows[second.task].error
    # the old holder's result arrives late: refused, nothing written
    assert not ledger.finish(first.task, first.lease, {"energy": 1.0})
    assert ledger.fail(first.task, first.lease, "late") is None
    assert ledger.task(first.task).status == "pending" and ledger.task(first.task).result is None
    outcomes = [e["outcome"] for e in ledger.attempt_log() if e["task"] == first.task]
    assert outcomes == ["interrupted"]
    again = ledger.claim(owner_pid=os.getpid())
    assert again.attempt == 2
    assert ledger.finish(again.task, again.lease, {"energy": -1.0})
    # a finished task is never reopened, by a late failure or by a new run
    assert ledger.fail(again.task, again.lease, "late") is None
    ledger.begin_run(2)
    assert ledger.task(again.task).status == "done"
    ledger.close()


@pytest.mark.skipif(not os.path.isdir("/proc/self"), reason="zombie state is read from /proc (Linux)")
def test_an_exited_but_unreaped_worker_counts_as_gone():
    # common practice (POSIX): an exited child that its parent has not waited for stays in the
    # process table as a zombie and still answers signal 0; containers whose first process does
    # not reap orphans keep killed workers in that state, and their leases must still be freed
    from netprobe.study.ledger import process_alive

    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    deadline = time.monotonic() + 30
    while open(f"/proc/{proc.pid}/stat", "rb").read().rsplit(b")", 1)[1][1:2] != b"Z":
        assert time.monotonic() < deadline
        time.sleep(0.01)
    os.kill(proc.pid, 0)  # the zombie still answers signal 0 ...
    assert not process_alive(proc.pid)  # ... but is not alive
    assert process_alive(os.getpid())
    proc.wait()
    assert not process_alive(proc.pid)


def test_attempt_budget_and_retry_on_the_next_run(tmp_path):
    d, ledger = _small_ledger(tmp_path, values="[0.5]")
    ledger.begin_run(2)
    c1 = ledger.claim(owner_pid=os.getpid())
    assert ledger.fail(c1.task, c1.lease, "first try") == "pending"
    c2 = ledger.claim(owner_pid=os.getpid())
    assert ledger.fail(c2.task, c2.lease, "second try") == "failed"
    assert ledger.claim(owner_pid=os.getpid()) is None
    assert ledger.task(c1.task).error == "second try"
    assert ledger.begin_run(2) == 1  # a new run retries what failed
    assert ledger.claim(owner_pid=os.getpid()).attempt == 3
    ledger.close()


def test_tasks_wait_for_the_states_they_start_from(tmp_path):
    d, ledger = _small_ledger(tmp_path, engine="dmrg", values="[0.5, 1.0]")
    ledger.begin_run(1)
    first = ledger.claim(owner_pid=os.getpid())
    assert (first.point, first.rung) == (0, 0)
    assert ledger.claim(owner_pid=os.getpid()) is None  # both others start from point 0 at D=4
    assert ledger.fail(first.task, first.lease, "broken") == "failed"
    # a start that failed for good no longer holds them back: they start from scratch
    rest = [ledger.claim(owner_pid=os.getpid()) for _ in range(2)]
    assert sorted((c.point, c.rung) for c in rest) == [(0, 1), (1, 0)]
    ledger.close()


def test_a_different_study_cannot_reuse_the_folder(tmp_path):
    d, ledger = _small_ledger(tmp_path)
    ledger.close()
    other = parse_study(TFIM_EXACT.format(values="[0.25]"), path="x.toml")
    with pytest.raises(Exception, match="holds the ledger of a different study"):
        Ledger.prepare(tmp_path / "out", other)


# ---- estimates and verdicts ------------------------------------------------------------------------


def test_steepest_change_recovers_the_peak_of_a_quadratic_slope():
    # y = a x - (x - c)^3 / 3: the mean slope over [m - h/2, m + h/2] is a - (m - c)^2 - h^2/12, a parabola in
    # the midpoint m with its vertex at c (exact calculus), so the refined estimate is c to rounding
    c, a = 0.37, 2.0
    x = np.linspace(0.0, 1.0, 11)
    y = a * x - (x - c) ** 3 / 3
    location, spacing, bracket, edge = steepest_change(x, y)
    assert location == pytest.approx(c, abs=tol(factor=4.5e3))
    assert spacing == pytest.approx(0.1) and bracket == pytest.approx((0.3, 0.4)) and not edge
    # a step at the end of the range is reported as such
    assert steepest_change(x, np.where(x > 0.95, 1.0, 0.0))[3]
    assert steepest_change(x, np.ones_like(x)) is None


def test_inverse_bond_fit_matches_a_least_squares_line():
    d = np.array([16.0, 32.0, 64.0])
    v = np.array([0.91, 0.955, 0.972])
    fit = inverse_bond_fit(d, v)
    slope, intercept = np.polyfit(1.0 / d, v, 1)  # numpy's least-squares line
    assert fit.value == pytest.approx(intercept, rel=tol(factor=4.5e3))
    assert fit.slope == pytest.approx(slope, rel=tol(factor=4.5e3))
    two = inverse_bond_fit(d[1:], v[1:])
    assert two.error == pytest.approx(abs(two.value - v[-1]))
    assert fit.error >= abs(fit.value - two.value) - 1e-15
    assert inverse_bond_fit([16], [0.9]) is None


def test_verdict_flags_a_probe_that_moves_between_the_last_rungs(tmp_path):
    text = (
        '[study]\nname = "v"\nmodel = "tfim"\nengine = "dmrg"\n[set]\nlength = 6\n[grid]\nh = { values = '
        '[0.5, 1.0] }\n[ladder]\nbond_dimensions = [4, 8]\n[measure]\nprobes = ["mean:X"]\n[verdicts]\n'
        "change_threshold = 0.01\n"
    )
    d = parse_study(text, path=str(tmp_path / "v.toml"))
    ledger = Ledger.prepare(tmp_path / "out", d)
    ledger.begin_run(1)
    fake = {(0, 4): 0.50, (0, 8): 0.505, (1, 4): 0.60, (1, 8): 0.65}
    while (c := ledger.claim(owner_pid=os.getpid())) is not None:
        value = fake[(c.point, c.bond_dimension)]
        ledger.finish(
            c.task,
            c.lease,
            {
                "energy": -1.0 - 1e-3 * c.rung,
                "probes": {"mean:X": value},
                "dmrg": {"discarded_weight": 1e-6 / (1 + c.rung), "converged": True},
            },
        )
    rows = ledger.tasks()
    ledger.close()
    v0 = point_verdict(d, [r for r in rows if r.point == 0])
    v1 = point_verdict(d, [r for r in rows if r.point == 1])
    assert v0.probes["mean:X"].flagged is False and v1.probes["mean:X"].flagged is True
    assert v1.status == "flagged" and any("mean:X changed by 0.05" in f for f in v1.flags)
    # energies changed by 1e-3 > 1e-6 * max(1, |E|): flagged at both points
    assert v0.energy.flagged and v0.energy.extrapolated is not None
    assert v1.probes["mean:X"].fit.value == pytest.approx(
        0.65 + (0.65 - 0.60)
    )  # line in 1/D: v(inf) = 2 v8 - v4


# ---- the command line --------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def small_study(tmp_path_factory):
    """A small exact-engine study run once through the command line."""
    folder = tmp_path_factory.mktemp("cli")
    spec = write_study(folder, TFIM_EXACT.format(values="[0.5, 1.0, 1.5]"))
    out = folder / "out"
    before = netprobe_cli("study", spec, "--out", out, "--status", "--json")
    run = netprobe_cli("study", spec, "--out", out, "--json")
    return spec, out, before, run


def _snapshot(out):
    with sqlite3.connect(ledger_path(out)) as conn:
        return (
            conn.execute("SELECT * FROM tasks ORDER BY id").fetchall(),
            conn.execute("SELECT * FROM attempts ORDER BY id").fetchall(),
        )


def test_cli_study_runs_and_reports_status(small_study):
    spec, out, before, run = small_study
    assert before.returncode == 0, before.stderr
    status = json.loads(before.stdout)
    assert {"pending", "running", "done", "failed"} <= set(status)
    assert status["pending"] == status["total"] == 3 and status["done"] == 0 and status["ledger"] is None
    assert run.returncode == 0, run.stderr
    assert "3/3 done" in run.stderr  # progress on standard error
    after = json.loads(netprobe_cli("study", spec, "--out", out, "--status", "--json").stdout)
    assert (after["pending"], after["running"], after["done"], after["failed"]) == (0, 0, 3, 0)
    text = run_main("study", spec, "--out", out, "--status")
    assert text.returncode == 0 and "3/3 done" in text.stdout
    with Ledger(ledger_path(out)) as ledger:
        for row in ledger.tasks():
            energy, mean_x = pfeuty_chain(8, row.parameters["h"])
            # exact diagonalisation against the free-fermion solution: rounding of a 256-state problem
            assert row.result["energy"] == pytest.approx(energy, abs=ED_VS_FREE_FERMIONS)
            assert row.result["probes"]["mean:X"] == pytest.approx(mean_x, abs=ED_VS_FREE_FERMIONS)


def test_cli_report_writes_tables_plots_and_json(small_study):
    spec, out, _, _ = small_study
    proc = netprobe_cli("report", out, "--json")
    assert proc.returncode == 0, proc.stderr
    payload = json.loads(proc.stdout)
    assert {"points", "boundaries"} <= set(payload)
    assert [p["parameters"]["h"] for p in payload["points"]] == [0.5, 1.0, 1.5]
    assert all(p["verdict"]["status"] == "exact" for p in payload["points"])
    assert "h" in payload["boundaries"] and payload["boundaries"]["h"]
    for name in ("points.csv", "tasks.csv", "boundaries.csv", "report.json", "phase_mean_X.png"):
        path = out / "report" / name
        assert path.is_file() and path.stat().st_size > 0
    assert (out / "report" / "phase_mean_X.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature
    text = run_main("report", out, "--no-plots")
    assert text.returncode == 0 and "transition in h" in text.stdout


def test_cli_bad_input_is_one_line_and_keeps_the_ledger(small_study, tmp_path):
    spec, out, _, _ = small_study
    before = _snapshot(out)
    bad_grid = write_study(tmp_path, TFIM_EXACT.format(values="[0.5]").replace("h = {", "hx = {"), "bad.toml")
    proc = run_main("study", bad_grid, "--out", out)
    assert_one_line_error(proc, "'hx' is not a parameter of model 'tfim'")
    empty = write_study(tmp_path, TFIM_EXACT.format(values="[]"), "empty.toml")
    assert_one_line_error(run_main("study", empty, "--out", out), "the grid is empty")
    with socket.socket() as s:  # a port that nothing listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    proc = netprobe_cli("study", spec, "--out", out, "--scheduler", f"tcp://127.0.0.1:{port}")
    assert_one_line_error(proc, "cannot reach the Dask scheduler")
    assert_one_line_error(run_main("report", tmp_path / "nothing"), "holds no study ledger")
    assert _snapshot(out) == before  # every row and every attempt as it was
