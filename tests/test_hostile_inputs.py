"""Property-based hostile input (issue #13): generated model files, study files and option lists.

Every run either succeeds (exit 0) or ends in exactly one line on stderr with exit status 2 and no
traceback. Most examples run in-process through ``netprobe.cli.main``; a few run as subprocesses
under an address-space limit and a timeout, so that unbounded memory or time fails the test. Sizes
are drawn either small (the run finishes in a moment) or absurd (it must be refused from an
estimate), never in between. ``-m slow`` runs a longer profile.
"""

import math
import os
import resource
import subprocess
import sys

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from conftest import run_main
from netprobe.errors import NetprobeError
from netprobe.study.reading import load_study

_MEMORY_LIMIT = 3 * 2**30  # address space of a subprocess run: a small run needs well under 1 GiB
_TIMEOUT = 60  # seconds per subprocess run
_QUICK = settings(max_examples=12, deadline=None, derandomize=True,
                  suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
_LONG = settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                         HealthCheck.function_scoped_fixture])

SMALL_LENGTHS = [1, 2, 3, 4, 6, 8]
ABSURD_LENGTHS = [10**8, 10**12, 10**30]
odd_numbers = st.sampled_from(["nan", "inf", "-inf", "1e400", "0", "-1", "1e-320", "1.5", "-0.0"])
toml_values = st.one_of(
    st.integers(min_value=-10**20, max_value=10**20).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(lambda v: "nan" if math.isnan(v) else
                                                       ("inf" if v == math.inf else ("-inf" if v == -math.inf else repr(v)))),
    odd_numbers,
    st.text(alphabet="abcJh+-*/()0123456789. ", max_size=12).map(lambda s: '"' + s + '"'),
    st.sampled_from(["[1, 2]", "{ a = 1 }", "true", '"pi/2"', "[[1]]", "[" * 20 + "]" * 20]),
)
lengths = st.one_of(st.sampled_from(SMALL_LENGTHS), st.sampled_from(ABSURD_LENGTHS),
                    st.sampled_from(["0", "-3", "1.5", '"x"', "1e30", "nan"]))


@st.composite
def model_files(draw):
    """TOML text of a transverse-field Ising chain with hostile values spliced in."""
    length = draw(lengths)
    h = draw(toml_values)
    coupling = draw(st.sampled_from(['"-J"', '"-h"', "1e400", "nan", '"J*"', '"x"', "[1, 2]", "-1.0"]))
    ops = draw(st.sampled_from(['"Z Z"', '"X"', '"Q Q"', '""', "5", '"Z@3 Z"']))
    family = draw(st.sampled_from(['"nn"', '"sites"', '"nnn"', '"diagonal"']))
    extra = draw(st.sampled_from(["", "term = [1, 2]\n", "[extra]\na = 1\n", "model = 3\n", ""]))
    text = (f'{extra}[model]\nname = "gen"\nsite = "spin-1/2"\nconserved = []\n'
            f'[parameters]\nlattice = "chain"\nlength = {length}\ncircumference = 1\nJ = 1.0\nh = {h}\n'
            f'[[term]]\non = {family}\nops = {ops}\ncoupling = {coupling}\n'
            f'[[term]]\non = "sites"\nops = "X"\ncoupling = "-h"\n')
    return text


@st.composite
def option_lists(draw, model_path):
    """An argument list for check, exact, run or probe with hostile options."""
    command = draw(st.sampled_from(["check", "exact", "run", "probe"]))
    args = [command, model_path]
    for _ in range(draw(st.integers(0, 2))):
        name = draw(st.sampled_from(["length", "h", "J", "nope", "", "circumference"]))
        value = draw(st.one_of(st.sampled_from([str(n) for n in SMALL_LENGTHS + ABSURD_LENGTHS]), odd_numbers))
        args += ["--set", f"{name}={value}"]
    if command == "exact":
        args += draw(st.sampled_from([[], ["--states", "0"], ["--states", "2"], ["--json"]]))
    if command == "run":
        args += ["--bond-dimension", draw(st.sampled_from(["4", "0", "8,4", "x", "10000000"]))]
        args += draw(st.sampled_from([[], ["--seed", "-1"], ["--seed", "99999999999999999999999"], ["--sweeps", "0"],
                                      ["--sweeps", "2"]]))
    if command == "probe":
        args += ["--engine", "exact", "--region", draw(st.sampled_from(["half:columns=2", "disk:radius=-1", "x"]))]
        args += draw(st.sampled_from([[], ["--memory-budget", "nan"], ["--memory-budget", "0"],
                                      ["--memory-budget", "1e-9"], ["--eps", "nan"]]))
    return args


def _small_enough(args) -> bool:
    """Skip the in-between sizes that would run long: only small or absurd lengths reach a run."""
    for a in args:
        if a.startswith("length="):
            value = a.partition("=")[2]
            if value.isdigit() and 8 < int(value) < 10**8:
                return False
    return True


def _run_in_process(args):
    proc = run_main(*args)
    return proc.returncode, proc.stderr


def _check_outcome(code, stderr, args):
    assert "Traceback" not in stderr, (args, stderr)
    assert code in (0, 1, 2), (args, code, stderr)  # 1: a DMRG run that did not converge is not an error
    if code == 2:
        lines = [ln for ln in stderr.splitlines() if ln.strip()]
        assert len(lines) == 1, (args, stderr)
        assert "error" in lines[0], (args, lines[0])


def _model_and_options(tmp_path, data):
    path = tmp_path / "gen.toml"
    path.write_text(data.draw(model_files()))
    args = data.draw(option_lists(str(path)))
    if "--out" not in args and args[0] == "run":
        args += ["--out", str(tmp_path / "out")]
    return args


@_QUICK
@given(data=st.data())
def test_generated_models_and_options_in_process(tmp_path, data):
    args = _model_and_options(tmp_path, data)
    if not _small_enough(args):
        return
    code, stderr = _run_in_process(args)
    _check_outcome(code, stderr, args)


@st.composite
def study_files(draw):
    engine = draw(st.sampled_from(["exact", "dmrg", "gaussian", "quantum"]))
    grid = draw(st.sampled_from([
        "h = { start = 0.5, stop = 1.5, num = 2 }", "h = { start = 0.5, stop = 1.5, num = 100000000 }",
        "h = { values = [nan] }", "h = { start = 0, stop = inf, num = 3 }", "h = 5", "length = { values = [400] }",
        "nope = { values = [1] }", "h = { values = [" + "[" * 30 + "]" * 30 + "] }"]))
    ladder = draw(st.sampled_from(["", "[ladder]\nbond_dimensions = [4]\nsweep_limit = 1\n",
                                   "[ladder]\nbond_dimensions = [100000000]\n", "[ladder]\nbond_dimensions = -1\n"]))
    fixed = draw(st.sampled_from(["", "[set]\nlength = 4\n", "[set]\nlength = 1e30\n", "[set]\nlength = 4.5\n"]))
    return f'[study]\nname = "gen"\nmodel = "tfim"\nengine = "{engine}"\n{fixed}[grid]\n{grid}\n{ladder}'


@_QUICK
@given(data=st.data())
def test_generated_study_files_are_checked_up_front(tmp_path, data):
    path = tmp_path / "study.toml"
    path.write_text(data.draw(study_files()))
    code, stderr = 0, ""
    try:  # the checks that `netprobe study` makes before its ledger exists
        load_study(str(path)).check()
    except NetprobeError as exc:  # the command line prints these as one line, exit 2
        code, stderr = 2, f"netprobe: error: {' '.join(str(exc).split())}"
    _check_outcome(code, stderr, [str(path)])


def _limit_memory():
    resource.setrlimit(resource.RLIMIT_AS, (_MEMORY_LIMIT, _MEMORY_LIMIT))


def _run_subprocess(args):
    env = dict(os.environ, PYTHONUNBUFFERED="1", OMP_NUM_THREADS="1")
    proc = subprocess.run([sys.executable, "-m", "netprobe", *args], capture_output=True, text=True, env=env,
                          timeout=_TIMEOUT, preexec_fn=_limit_memory)
    return proc.returncode, proc.stderr


@settings(max_examples=4, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(data=st.data())
def test_generated_runs_in_bounded_subprocesses(tmp_path, data):
    args = _model_and_options(tmp_path, data)
    if not _small_enough(args):
        return
    code, stderr = _run_subprocess(args)
    _check_outcome(code, stderr, args)


@pytest.mark.slow
@_LONG
@given(data=st.data())
def test_generated_inputs_long_profile(tmp_path, data):
    args = _model_and_options(tmp_path, data)
    if not _small_enough(args):
        return
    code, stderr = _run_subprocess(args) if data.draw(st.booleans()) else _run_in_process(args)
    _check_outcome(code, stderr, args)
