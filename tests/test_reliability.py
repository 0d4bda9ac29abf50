"""Hostile input (issue #13): every user mistake ends in one line on stderr and exit status 2.

CLI cases run through ``netprobe.cli.main`` in this process (``conftest.run_main``) under an
address-space limit, so an input that would allocate without bound fails the test instead of the
machine; the cases that need a process of their own (a closed standard output, a named pipe, a deep
recursion, a scheduler that must not be waited for) run real subprocesses under the same limit and a
timeout. Damaged state files are made with h5py from real files written by netprobe.
"""

import json
import os
import resource
import subprocess
import sys

import h5py
import numpy as np
import pytest

from conftest import assert_one_line_error, run_main
from netprobe.engines.dmrg import LadderSettings, SweepSettings, run_ladder
from netprobe.errors import StateFileError
from netprobe.engines.mps import random_state
from netprobe.model.spec import load_model, models_directory
from netprobe.engines.mps import store

_MEMORY_LIMIT = 3 * 2**30  # address space per CLI run: far above a small run, far below a runaway one
_TIMEOUT = 60  # seconds; every refusal here comes before any large computation
TFIM = (models_directory() / "tfim.toml").read_text()


def _limit_memory():
    resource.setrlimit(resource.RLIMIT_AS, (_MEMORY_LIMIT, _MEMORY_LIMIT))


def run_cli(*args, close_stdout=False):
    env = dict(os.environ, PYTHONUNBUFFERED="1", OMP_NUM_THREADS="1")

    def setup():
        _limit_memory()
        if close_stdout:
            os.close(1)

    return subprocess.run([sys.executable, "-m", "netprobe", *args], capture_output=not close_stdout,
                          stderr=subprocess.PIPE if close_stdout else None, text=True, env=env,
                          timeout=_TIMEOUT, preexec_fn=setup)


def _model(tmp_path, name="m.toml", **replace):
    text = TFIM
    for old, new in replace.items():
        text = text.replace(old, new)
    path = tmp_path / name
    path.write_text(text)
    return str(path)


# --- sizes: refused from an estimate, before anything is built --------------------------------------


@pytest.mark.parametrize("args", [
    ("check", "tfim", "--set", "length=100000000"),
    ("run", "heisenberg", "--set", "length=10000000", "--bond-dimension", "8"),
    ("run", "heisenberg", "--set", "length=40", "--bond-dimension", "2000000"),
])
def test_oversized_requests_are_refused_with_the_estimate(args):
    assert_one_line_error(run_main(*args), "over the memory budget")


@pytest.mark.parametrize("length", ["1000000000", "1e30"])
def test_oversized_length_in_a_model_file(tmp_path, length):
    proc = run_main("check", _model(tmp_path, **{"length = 16": f"length = {length}"}))
    assert_one_line_error(proc, "over the memory budget")
    assert "--set length=" in proc.stderr  # says what to shrink


def _study(tmp_path, body, name="s.toml"):
    path = tmp_path / name
    path.write_text(body)
    return str(path)


def test_study_grid_too_large_is_refused(tmp_path):
    spec = _study(tmp_path, '[study]\nname = "big"\nmodel = "tfim"\nengine = "exact"\n'
                            '[grid]\nh = { start = 0.5, stop = 1.5, num = 100000000 }\n')
    assert_one_line_error(run_main("study", spec, "--out", str(tmp_path / "out")), "over the memory budget")


def test_study_with_an_impossible_point_is_refused_at_the_start(tmp_path):
    spec = _study(tmp_path, '[study]\nname = "ex400"\nmodel = "heisenberg"\nengine = "exact"\n'
                            '[set]\nlength = 400\n[grid]\nJ1 = { values = [1.0, 2.0] }\n')
    out = tmp_path / "out"
    assert_one_line_error(run_main("study", spec, "--out", str(out)), "exact diagonalisation of 400 sites")
    assert not out.exists()  # refused before the ledger was created


# --- parsing ------------------------------------------------------------------------------------------


def test_deeply_nested_toml(tmp_path):
    path = tmp_path / "deep.toml"
    path.write_text("x = " + "[" * 10000 + "]" * 10000 + "\n")
    assert_one_line_error(run_cli("check", str(path)), "nests")


def test_term_that_is_not_a_table(tmp_path):
    text = TFIM[:TFIM.index("[[term]]")]
    path = tmp_path / "t.toml"
    path.write_text("term = [1, 2]\n" + text)
    assert_one_line_error(run_main("check", str(path)), "not a table")


@pytest.mark.parametrize("value", ["nan", "inf", "1e400"])
def test_non_finite_couplings(tmp_path, value):
    proc = run_main("check", _model(tmp_path, **{"h = 1.0": f"h = {value}"}))
    assert_one_line_error(proc, "not a finite number")
    # through --set the value is an expression: a literal beyond double precision is named as such
    assert_one_line_error(run_main("check", "tfim", "--set", f"h={value}"),
                          "too large for double precision" if value == "1e400" else "not a finite number")


def test_paths_that_are_not_regular_files(tmp_path):
    folder = tmp_path / "folder.toml"
    folder.mkdir()
    assert_one_line_error(run_main("check", str(folder)), "is a folder")
    fifo = tmp_path / "pipe.toml"
    os.mkfifo(fifo)
    assert_one_line_error(run_cli("check", str(fifo)), "named pipe")
    (tmp_path / "a.toml").symlink_to(tmp_path / "b.toml")
    (tmp_path / "b.toml").symlink_to(tmp_path / "a.toml")
    assert_one_line_error(run_main("check", str(tmp_path / "a.toml")), "symbolic link that loops")


def test_invalid_utf8_is_named_with_its_offset(tmp_path):
    path = tmp_path / "bad.toml"
    path.write_bytes(b'[model]\nname = "\xff"\n')
    assert_one_line_error(run_main("check", str(path)), "byte offset 16")


# --- options ------------------------------------------------------------------------------------------


@pytest.mark.parametrize("command", ["run", "probe", "assess", "flux", "edge"])
def test_negative_seed(command):
    # every command that seeds a DMRG start takes the same validator (numpy refuses negative seeds with a
    # traceback otherwise); the parser rejects the value before anything runs
    extra = {"run": ("--bond-dimension", "4"), "probe": ("--region", "half:columns=2")}.get(command, ())
    assert_one_line_error(run_main(command, "tfim", "--set", "length=4", *extra, "--seed", "-1"), "--seed")


@pytest.mark.parametrize("budget", ["nan", "inf", "0"])
def test_memory_budget_must_be_positive_and_finite(budget):
    proc = run_main("probe", "tfim", "--set", "length=4", "--engine", "exact", "--region", "half:columns=2",
                   "--memory-budget", budget)
    assert_one_line_error(proc, "--memory-budget")


def test_out_naming_a_file_or_an_unwritable_place(tmp_path):
    taken = tmp_path / "taken"
    taken.write_text("x")
    assert_one_line_error(run_main("run", "tfim", "--set", "length=4", "--bond-dimension", "4", "--out", str(taken)),
                          "existing file")
    study = str(models_directory() / "studies" / "tfim_sweep.toml")
    assert_one_line_error(run_main("study", study, "--out", str(taken)), "existing file")
    # /proc refuses new entries even to root, where permission bits would not
    assert_one_line_error(run_main("run", "tfim", "--set", "length=4", "--bond-dimension", "4", "--out",
                                  "/proc/netprobe-out"), "cannot write")


def test_closed_standard_output():
    proc = run_cli("exact", "tfim", "--set", "length=6", "--json", close_stdout=True)
    assert_one_line_error(proc, "standard output is closed")


def test_bad_scheduler_address_is_one_line_and_prompt():
    study = str(models_directory() / "studies" / "tfim_sweep.toml")
    proc = run_cli("study", study, "--scheduler", "not a url")  # _TIMEOUT bounds the wait
    assert_one_line_error(proc, "not a scheduler address")


# --- state files ----------------------------------------------------------------------------------------

OVERRIDES = {"length": "6"}


@pytest.fixture(scope="module")
def saved_file(tmp_path_factory):
    model = load_model("tfim", OVERRIDES)
    path = tmp_path_factory.mktemp("state") / "state.h5"
    store.save_state(path, random_state(model.hamiltonian, bond_dimension=4, rng=5), model_text=model.spec.text,
                     overrides=OVERRIDES, seed=1)
    return path


def _copy(saved_file, tmp_path):
    path = tmp_path / "copy.h5"
    path.write_bytes(saved_file.read_bytes())
    return path


def _replace(f, name, data):
    del f[name]
    f.create_dataset(name, data=data)


@pytest.mark.parametrize("damage, match", [
    (lambda f: _replace(f, "mps/site_00002/keys", np.full_like(f["mps/site_00002/keys"][()], 99)), "out of range"),
    (lambda f: _replace(f, "mps/site_00002/data", 1.0), "dimension"),
    (lambda f: _replace(f, "mps/site_00002/data", np.full_like(f["mps/site_00002/data"][()], np.nan)), "NaN"),
    (lambda f: f.attrs.__setitem__("rng_state", '{"bit_generator": "PCG64", "state": 5}'), "random-generator"),
    (lambda f: f.attrs.__setitem__("rng_state", '{"bit_generator": "Nope"}'), "random-generator"),
    (lambda f: f.attrs.__setitem__("info", "[1, 2]"), "info"),
])
def test_damaged_state_files_are_named(saved_file, tmp_path, damage, match):
    path = _copy(saved_file, tmp_path)
    with h5py.File(path, "r+") as f:
        damage(f)
    with pytest.raises(StateFileError, match=f"state file .*copy.h5 is damaged or incomplete: .*{match}"):
        store.load_state(path)
    assert_one_line_error(run_main("measure", str(path)), "is damaged or incomplete")


def test_one_bit_flip_in_tensor_data_is_detected(saved_file, tmp_path):
    path = _copy(saved_file, tmp_path)
    with h5py.File(path, "r") as f:
        dset = f["mps/site_00003/data"]
        assert dset.fletcher32  # written with HDF5's checksum filter
        offset = dset.id.get_chunk_info(0).byte_offset
    raw = bytearray(path.read_bytes())
    raw[offset + 3] ^= 0x10
    path.write_bytes(bytes(raw))
    with pytest.raises(StateFileError, match="checksum"):
        store.load_state(path)
    assert_one_line_error(run_main("measure", str(path)), "is damaged or incomplete")


def test_version_1_files_without_checksums_stay_readable(saved_file, tmp_path, monkeypatch):
    model = load_model("tfim", OVERRIDES)
    psi = random_state(model.hamiltonian, bond_dimension=4, rng=5)
    monkeypatch.setattr(store, "FORMAT_VERSION", 1)
    monkeypatch.setattr(store, "_write_dataset", lambda group, name, data, checksum=False: group.create_dataset(name, data=data))
    old = store.save_state(tmp_path / "old.h5", psi, model_text=model.spec.text, overrides=OVERRIDES)
    monkeypatch.undo()
    with h5py.File(old, "r") as f:
        assert f.attrs["format_version"] == 1 and not f["mps/site_00003/data"].fletcher32
    saved = store.load_state(old)
    assert saved.format_version == 1
    # the same amplitudes come back (NumPy comparison of the dense vectors)
    assert np.array_equal(saved.state.to_vector(), psi.to_vector())


@pytest.mark.filterwarnings("ignore:DMRG ladder")  # two sweeps are enough to write a checkpoint
@pytest.mark.parametrize("info_change, match", [
    (lambda info: info.update(stages=[5] * len(info["stages"])), "stage entry"),
    (lambda info: info.update(stages=[dict(s, energy="low") for s in info["stages"]]), "energy"),
    (lambda info: info.update(stage="one"), "stage"),
    (lambda info: info.pop("stages"), "stages"),
])
def test_malformed_checkpoint_entries_are_named(tmp_path, info_change, match):
    model = load_model("tfim", OVERRIDES)
    settings = LadderSettings(bond_dimensions=(2, 4), sweeps=SweepSettings(sweep_limit=2))
    out = tmp_path / "run"
    run_ladder(model, settings, overrides=OVERRIDES, seed=0, out=out, progress=None)
    ckpt = out / "checkpoint.h5"
    with h5py.File(ckpt, "r+") as f:
        info = json.loads(f.attrs["info"])
        info_change(info)
        f.attrs["info"] = json.dumps(info)
    with pytest.raises(StateFileError, match=f"damaged or incomplete: .*{match}"):
        run_ladder(model, settings, overrides=OVERRIDES, seed=0, out=out, resume=True, progress=None)
