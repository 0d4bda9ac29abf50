"""Engine agreement on bulk probes: DMRG, exact diagonalisation and the free-fermion engine.

For the Haldane model at V = 0 (Haldane, Phys. Rev. Lett. 61, 2015 (1988)) the ground state is a
Slater determinant, so the free-fermion formulas (Peschel, J. Phys. A 36, L205 (2003) for entropies;
J = i Tr(G_ABC [h_AB, h_BC]), Phys. Rev. Lett. 128, 176402 (2022)) are an outside reference for the
many-body reduced density matrices, which must treat the Jordan-Wigner strings correctly when the
parts interleave in the MPS order.
"""

import numpy as np
import pytest

from conftest import DMRG_EXACT_ENERGY, PROBE_ACCEPTANCE
from references import filled_projector, peschel_entropy, single_particle_matrix

from netprobe.engines.dmrg import SweepSettings, find_ground_state
from netprobe.engines.registry import ENGINES, SolveSettings, ground_state as engine_ground_state
from netprobe.engines.exact import ground_state
from netprobe.engines.gaussian import FreeFermionState
from netprobe.probes import measure_probes
from netprobe.model.spec import load_model
from netprobe.pipeline.measure import measure
from netprobe.regions.layout import Layout

# DMRG at D = 256 on 16 sites is exact to ~1e-10 in energy; exact diagonalisation and the free-fermion
# levels to rounding
ENERGY_D256 = 1e-9

OVERRIDES = {"length": "4", "circumference": "2", "V": "0", "phi": "pi/2", "t2": "0.3", "M": "0.2"}

# parts as MPS site lists; 8 to 12 sites in all, the second and third interleave in the 1D order
PART_SETS = [
    {"A": [2, 3, 4], "B": [5, 6, 7], "C": [8, 9]},
    {"A": [1, 4, 9], "B": [3, 6, 11], "C": [5, 8, 13]},
    {"A": [0, 7, 10, 15], "B": [2, 5, 12], "C": [3, 9, 14, 4]},
]


@pytest.fixture(scope="module")
def states():
    model = load_model("haldane", OVERRIDES)
    exact = ground_state(model.hamiltonian)
    # D = 256 exceeds the largest Schmidt rank needed on 16 sites at 1e-12 (2^8 = 256 at the centre)
    dmrg = find_ground_state(model, SweepSettings(bond_dimension=256, sweep_limit=12), seed=3, progress=None)
    free = FreeFermionState.from_model(model)
    return model, exact, dmrg, free


def test_energies_agree(states):
    model, exact, dmrg, free = states
    assert dmrg.energy == pytest.approx(exact.energy, abs=ENERGY_D256)
    assert free.energy == pytest.approx(exact.energy, abs=ENERGY_D256)


@pytest.mark.parametrize("parts", PART_SETS)
def test_probes_agree(states, parts):
    model, exact, dmrg, free = states
    a, b, c = parts["A"], parts["B"], parts["C"]
    assert 8 <= len(a + b + c) <= 12
    reference = {
        "S_ABC": free.entropy(a + b + c),
        "S_AB": free.entropy(a + b),
        "cmi": free.cmi(a, b, c),
        "J": free.modular_commutator(a, b, c),
    }
    for state in (exact, dmrg.state):
        rep = measure_probes(state, parts, model.space, probes=("S", "CMI", "J")).to_json()
        # 1e-6: the acceptance bound; DMRG at this bond dimension is exact to ~1e-10 in energy
        assert rep["entropies"]["ABC"] == pytest.approx(reference["S_ABC"], abs=PROBE_ACCEPTANCE)
        assert rep["entropies"]["AB"] == pytest.approx(reference["S_AB"], abs=PROBE_ACCEPTANCE)
        assert rep["cmi"] == pytest.approx(reference["cmi"], abs=PROBE_ACCEPTANCE)
        assert rep["J"] == pytest.approx(reference["J"], abs=PROBE_ACCEPTANCE)
    assert abs(reference["J"]) > 1e-3  # a complex (chiral) state: the comparison is not trivially 0 = 0


# A 2 x 2 cylinder of the same model (8 sites, 256 states): small enough for every registered engine in well
# under a second, with bond dimension 16 = 2^4 holding every Schmidt value of the MPS.
TINY = {**OVERRIDES, "length": "2", "circumference": "2"}
TINY_PARTS = {"A": [0, 1], "B": [2, 5], "C": [3, 6]}


@pytest.mark.parametrize("engine", list(ENGINES))
def test_every_registered_engine_matches_the_free_fermion_reference(engine):
    # crossed with the registry itself, so a newly registered engine is checked too; the reference is the
    # Slater determinant of the filled lower half of the one-particle levels (numpy.linalg.eigh) with its
    # entropies from the correlation matrix (Peschel, J. Phys. A 36, L205 (2003))
    model = load_model("haldane", TINY)
    h = single_particle_matrix(model)
    filled = model.num_sites // 2
    g = filled_projector(h, filled)
    reference = float(np.sum(np.linalg.eigvalsh(h)[:filled]))
    sweeps = SweepSettings(bond_dimension=16, sweep_limit=6, ramp=())
    settings = SolveSettings(bond_dimensions=(16,), sweeps=sweeps, seed=3, progress=None)
    ground = engine_ground_state(model, engine, settings)
    assert ground.engine == engine
    assert abs(ground.energy - reference) < DMRG_EXACT_ENERGY * max(1.0, abs(reference))
    layout = Layout("explicit", TINY_PARTS, model.lattice)
    got = measure(ground, layout, probes=("S", "CMI"))
    a, b, c = TINY_PARTS["A"], TINY_PARTS["B"], TINY_PARTS["C"]
    s = {key: peschel_entropy(g, sites) for key, sites in
         {"ABC": a + b + c, "AB": a + b, "BC": b + c, "B": b}.items()}
    for key in ("ABC", "AB"):
        assert got.entropies[key] == pytest.approx(s[key], abs=PROBE_ACCEPTANCE), (engine, key)
    assert got.cmi == pytest.approx(s["AB"] + s["BC"] - s["B"] - s["ABC"], abs=PROBE_ACCEPTANCE), engine
