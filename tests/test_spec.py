"""Model files: every bundled model loads, overrides work, bad input gives our own one-line errors."""

import numpy as np
import pytest
from conftest import dense_from_products, tol

from netprobe.errors import LatticeError, NetprobeError, OperatorError, SectorError, SpecError
from netprobe.engines.mps.mpo import build_mpo
from netprobe.model.spec import build_model, list_models, load_model, parse_spec

BASE = """
[model]
name = "probe"
site = "spin-1/2"
conserved = ["twice_sz"]
[parameters]
lattice = "chain"
length = 4
circumference = 1
J = 1.0
[sector]
twice_sz = 0
[[term]]
on = "nn"
ops = "0.5*Sp Sm + 0.5*Sm Sp + Sz Sz"
coupling = "J"
"""

SMALL = {  # overrides that make every bundled model small enough for a dense check
    "heisenberg": {"length": "6"},
    "tfim": {"length": "6"},
    "haldane": {"length": "2", "circumference": "2", "V": "0.5"},
    "chern_square": {"length": "2", "circumference": "2"},
    "kitaev": {"length": "2", "circumference": "2", "h": "0.1"},
    "kagome_chiral": {"length": "2", "circumference": "1"},
    "toric_code": {"length": "2", "circumference": "2"},
    "hubbard": {"length": "4"},
    "hofstadter": {"length": "2", "circumference": "4", "flux": "0.25"},
}


def test_all_bundled_models_are_covered():
    assert {p.stem for p in list_models()} == set(SMALL)


@pytest.mark.parametrize("name", sorted(SMALL))
def test_bundled_model_is_hermitian_and_mpo_is_exact(name):
    model = load_model(name, SMALL[name])
    h = dense_from_products(model.hamiltonian)
    assert np.allclose(h, h.conj().T, atol=tol())
    # the MPO finite-state machine reproduces the sum of operator strings exactly
    assert np.allclose(build_mpo(model.hamiltonian).to_dense(), h, atol=tol(np.abs(h).max()))


def test_mpo_bond_dimension_linear_in_circumference():
    # design notes section 4: nearest-neighbour terms on a width-W cylinder give D linear in W
    dims = [build_mpo(load_model("heisenberg", {"lattice": "square", "length": "6", "circumference": str(w)})
                      .hamiltonian).max_bond_dimension for w in (2, 3, 4, 5, 6)]
    steps = np.diff(dims)
    assert np.all(steps == steps[0]) and steps[0] <= 3


def test_overrides_change_parameters_and_sizes():
    model = load_model("heisenberg", {"lattice": "square", "length": "3", "circumference": "4", "J2": "0.5"})
    assert model.num_sites == 12 and model.parameters["J2"] == 0.5


def test_parameter_expressions_refer_to_other_parameters():
    text = BASE.replace("J = 1.0", "a = 2\nJ = \"a * cos(pi)\"")
    model = build_model(parse_spec(text))
    assert model.parameters["J"] == -2.0


def test_haldane_phase_is_on_the_oriented_bonds():
    model = load_model("haldane", {"length": "2", "circumference": "2", "phi": "pi/3", "t": "0"})
    coeffs = {np.round(p.coefficient, 12) for p in model.hamiltonian.products if len(p.sites) == 2}
    t2 = 0.3
    assert coeffs <= {np.round(-t2 * np.exp(1j * np.pi / 3), 12), np.round(-t2 * np.exp(-1j * np.pi / 3), 12)}


@pytest.mark.parametrize(
    "change, error, match",
    [
        (("J = 1.0", "J = 1.0\nbogus = [1]"), SpecError, "parameter 'bogus' must be a number"),
        (('ops = "0.5*Sp Sm + 0.5*Sm Sp + Sz Sz"', 'ops = "Sq Sm"'), OperatorError, "unknown operator 'Sq'"),
        (('on = "nn"', 'on = "nnnn"'), LatticeError, "no bond family 'nnnn'"),
        (("length = 4", "length = 0"), SpecError, "length must be a positive integer"),
        (("twice_sz = 0", "twice_sz = 10"), SpecError, "sector twice_sz = 10 has no states"),
        (('coupling = "J"', 'coupling = "K"'), SpecError, "unknown name"),
        (('coupling = "J"', 'coupling = "J +"'), SpecError, "coupling"),
        (("[[term]]", "[[term]]\nstrength = 2"), SpecError, "unknown key 'strength'"),
        (('site = "spin-1/2"', 'site = "spin-7"'), SpecError, "unknown site space 'spin-7'"),
        (('conserved = ["twice_sz"]\n[parameters]', 'conserved = ["N"]\n[parameters]'), SpecError,
         "names charge 'twice_sz' that is not conserved"),
        (('ops = "0.5*Sp Sm + 0.5*Sm Sp + Sz Sz"', 'ops = "Sz Sz Sz"'), SpecError, "3 operators for bonds"),
        (("[model]", "[modle]\n[model]"), SpecError, "unknown key 'modle'"),
        (("length = 4", "length = 4\nlength = 5"), SpecError, "not valid TOML"),
    ],
)
def test_bad_model_files(change, error, match):
    text = BASE.replace(*change)
    assert text != BASE
    with pytest.raises(error, match=match):
        build_model(parse_spec(text))


def test_unknown_override_lists_parameters():
    with pytest.raises(SpecError, match="no parameter 'J3'; valid: lattice"):
        load_model("heisenberg", {"J3": "1"})


def test_unknown_model_name():
    with pytest.raises(SpecError, match="model 'nosuch' not found"):
        load_model("nosuch")


def test_errors_are_value_errors():
    # style guide: our errors subclass ValueError
    assert issubclass(NetprobeError, ValueError) and issubclass(SectorError, NetprobeError)
