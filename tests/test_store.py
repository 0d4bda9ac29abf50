"""State files in HDF5: round trips, refusal of foreign or damaged files, atomic writes.

References: h5py itself (files written and edited here by hand), the dense vector of the state
(NumPy) for the overlap, and numpy's own Generator for the saved random state.
"""

import json
import os

import h5py
import numpy as np
import pytest
from conftest import tol

from netprobe.errors import NetprobeError, StateFileError
from netprobe.engines.mps.mpo import build_mpo
from netprobe.engines.mps import expectation_value, overlap, random_state
from netprobe.model.spec import load_model
from netprobe.engines.mps.store import (FORMAT_NAME, FORMAT_VERSION, atomic_file, load_state, remove_stale_temporaries,
                            save_state)

OVERRIDES = {"length": "2", "circumference": "2", "V": "1.0"}


@pytest.fixture(scope="module")
def model():
    return load_model("haldane", OVERRIDES)  # complex fermions: the hardest case for the layout


def _save(tmp_path, model, name="state.h5", **kw):
    psi = random_state(model.hamiltonian, bond_dimension=8, rng=3)
    path = save_state(tmp_path / name, psi, model_text=model.spec.text, overrides=OVERRIDES, seed=42,
                      info={"energy": -1.5, "history": [1, 2]}, **kw)
    return psi, path


def test_round_trip_keeps_state_energy_and_description(tmp_path, model):
    psi, path = _save(tmp_path, model)
    saved = load_state(path)
    back = saved.state
    # the stored state is the same vector: overlap 1 and equal dense amplitudes (NumPy reference)
    assert abs(overlap(psi, back)) == pytest.approx(1.0, abs=tol(factor=4.5e3))
    assert np.array_equal(back.to_vector(), psi.to_vector())
    mpo = build_mpo(model.hamiltonian)
    assert expectation_value(back, mpo) == pytest.approx(expectation_value(psi, mpo), abs=tol(10, 100))
    assert back.centre == psi.centre and back.sector == psi.sector and back.dtype == psi.dtype
    assert saved.model_text == model.spec.text and saved.overrides == OVERRIDES and saved.seed == 42
    assert saved.info == {"energy": -1.5, "history": [1, 2]} and saved.kind == "state"
    assert saved.format_version == FORMAT_VERSION
    rebuilt = saved.model()
    assert expectation_value(back, build_mpo(rebuilt.hamiltonian)) == pytest.approx(
        expectation_value(psi, mpo), abs=tol(10, 100))
    with h5py.File(path, "r") as f:  # the layout is plain numbers and strings (h5py reference)
        assert f.attrs["format"] == FORMAT_NAME
        assert json.loads(f.attrs["overrides"]) == OVERRIDES
        assert f["mps/site_00000/data"].dtype == np.complex128


def test_random_generator_state_round_trips(tmp_path, model):
    rng = np.random.default_rng(9)
    rng.standard_normal(5)
    _, path = _save(tmp_path, model, kind="checkpoint", rng_state=rng.bit_generator.state)
    saved = load_state(path)
    again = np.random.Generator(np.random.PCG64())
    again.bit_generator.state = saved.rng_state
    assert np.array_equal(again.standard_normal(4), rng.standard_normal(4))  # numpy's own stream
    assert saved.kind == "checkpoint"


def test_save_leaves_no_temporary_file_and_failed_write_keeps_old_file(tmp_path, model):
    psi, path = _save(tmp_path, model)
    assert sorted(os.listdir(tmp_path)) == ["state.h5"]
    with pytest.raises(RuntimeError, match="interrupted"):
        with atomic_file(path) as f:
            f.attrs["format"] = "half-written"
            raise RuntimeError("interrupted")
    assert sorted(os.listdir(tmp_path)) == ["state.h5"]
    assert np.array_equal(load_state(path).state.to_vector(), psi.to_vector())
    with pytest.raises(NetprobeError, match="not JSON-serialisable"):
        save_state(tmp_path / "other.h5", psi, info={"bad": object()})
    assert sorted(os.listdir(tmp_path)) == ["state.h5"]
    # a writer killed mid-write leaves its temporary file; the cleanup removes it and nothing else
    stale = tmp_path / ".state.h5.999999.tmp"
    stale.write_bytes(b"partial")
    (tmp_path / "notes.tmp").write_text("keep")
    assert remove_stale_temporaries(tmp_path) == [stale]
    assert sorted(os.listdir(tmp_path)) == ["notes.tmp", "state.h5"]


def test_text_file_is_refused(tmp_path):
    path = tmp_path / "notes.h5"
    path.write_text("energy = -1.0\n")
    with pytest.raises(StateFileError, match=r"notes\.h5 is not an HDF5 file; give a state file"):
        load_state(path)
    with pytest.raises(StateFileError, match="does not exist"):
        load_state(tmp_path / "missing.h5")


def test_foreign_hdf5_file_is_refused(tmp_path):
    path = tmp_path / "foreign.h5"
    with h5py.File(path, "w") as f:  # an HDF5 file from some other program
        f.create_dataset("psi", data=np.ones(4))
        f.attrs["format"] = "something-else"
    with pytest.raises(StateFileError, match="is an HDF5 file but not a netprobe state file"):
        load_state(path)


def test_unsupported_version_is_refused(tmp_path, model):
    _, path = _save(tmp_path, model)
    with h5py.File(path, "r+") as f:
        f.attrs["format_version"] = 99
    with pytest.raises(StateFileError, match="format version 99, but netprobe .* reads version"):
        load_state(path)


def test_damaged_file_is_refused(tmp_path, model):
    _, path = _save(tmp_path, model)
    with h5py.File(path, "r+") as f:
        del f["mps/site_00003/data"]
    with pytest.raises(StateFileError, match="is damaged or incomplete"):
        load_state(path)
    with pytest.raises(NetprobeError, match="folder .* does not exist"):
        save_state(tmp_path / "no" / "where.h5", random_state(model.hamiltonian, rng=1))


def test_layout_version_2_names_are_read_and_translated(tmp_path):
    # Version 2 files name the charge list "conserve", the label "2Sz" and the space "electron"; their stored
    # model text uses the same old names. Rewrite a fresh file to those names and read it back.
    hubbard = load_model("hubbard", {"length": "2"})
    psi = random_state(hubbard.hamiltonian, bond_dimension=4, rng=5)
    path = save_state(tmp_path / "old.h5", psi, model_text=hubbard.spec.text, overrides={"length": "2"})
    old_text = (hubbard.spec.text.replace("conserved =", "conserve =").replace("twice_sz", "2Sz")
                .replace('"spinful_fermion"', '"electron"').replace("n_pair", "n_updn"))
    assert "conserved" not in old_text and "twice_sz" not in old_text
    with h5py.File(path, "r+") as f:
        f.attrs["format_version"] = 2
        f.attrs["model_text"] = old_text
        f["mps"].attrs["site_space"] = "electron"
        f["mps"].attrs["conserve"] = json.dumps(["N", "2Sz"])
        del f["mps"].attrs["conserved"]
    saved = load_state(path)
    assert saved.format_version == 2
    assert saved.state.basis.space.name == "spinful_fermion"
    assert tuple(saved.state.basis.conserved) == ("N", "twice_sz")
    assert saved.model_text == hubbard.spec.text
    # the same state: overlap 1 up to rounding of the stored numbers (common practice)
    norm = abs(overlap(psi, psi))
    assert abs(overlap(saved.state, psi)) == pytest.approx(norm, abs=tol(norm))
