"""Matrix product states: construction, canonical forms, overlaps, expectation values, entanglement.

References: dense vectors and Kronecker-product operators built here with NumPy (conftest), the
Jordan-Wigner definition c_j = F_0 ... F_{j-1} a_j (Jordan and Wigner, Z. Phys. 47, 631 (1928)) for
fermion correlations, the Schmidt decomposition by numpy.linalg.svd, and our own exact engine
(netprobe.engines.exact) on small systems.
"""

import numpy as np
import pytest
from conftest import dense_from_products, kron_all, tol

from netprobe.engines import exact
from netprobe.engines.dmrg import SweepSettings, find_ground_state
from netprobe.errors import NetprobeError, OperatorError, SectorError
from netprobe.engines.mps.mpo import build_mpo
from netprobe.engines.mps import (correlation, energy_variance, entanglement_entropies, entanglement_spectrum,
                          expectation_value, local_expectations, overlap, product_state, random_state,
                          schmidt_spectra)
from netprobe.model.spec import load_model
from netprobe.tensor import BlockLayout, BlockTensor, ChargeRule, Leg


# MPS built from (or converged to) an exact-diagonalisation vector with an eigen-residual of ~1e-6 or
# better: entropies and expectation values are smooth in the state and move by far less than 1e-8
STATE_SMOOTH = 1e-8
# norms and overlaps of a normalised MPS contracted two ways: rounding of sums over <~ 2^12 amplitudes
MPS_ROUNDING = 1e-10


# small cases: (model, overrides); fermions with hoppings that cross other sites in the 1D order,
# complex couplings, two conserved charges, and no conserved charge at all
CASES = {
    "heisenberg": ("heisenberg", {"length": "8"}),
    "haldane": ("haldane", {"length": "2", "circumference": "2", "V": "1.0"}),
    "hubbard": ("hubbard", {"length": "4"}),
    "tfim": ("tfim", {"length": "7"}),
}


def _model(key):
    name, overrides = CASES[key]
    return load_model(name, overrides)


def _sector_mask(ham):
    """True on every full-space basis state whose charges equal the Hamiltonian's sector."""
    n, d = ham.num_sites, ham.space.dim
    q = ham.space.charge_values(ham.conserved)
    digits = np.indices((d,) * n).reshape(n, -1)
    total = sum(q[digits[j]] for j in range(n))
    target = np.array([ham.sector[c] for c in ham.conserved])
    return np.all(total == target, axis=1) if q.shape[1] else np.ones(d**n, bool)


def _entropy(vector, d, bond):
    s = np.linalg.svd(vector.reshape(d**bond, -1), compute_uv=False)
    p = s**2 / np.sum(s**2)
    p = p[p > 1e-300]
    return float(-np.sum(p * np.log(p)))


@pytest.mark.parametrize("key", list(CASES))
def test_random_state_is_normalised_in_its_sector_and_seeded(key):
    ham = _model(key).hamiltonian
    psi = random_state(ham, bond_dimension=6, rng=11)
    v = psi.to_vector()
    assert np.linalg.norm(v) == pytest.approx(1.0, abs=tol(1, 100))
    outside = np.sum(np.abs(v[~_sector_mask(ham)]) ** 2)  # numpy reference: charges counted state by state
    assert outside <= tol(1, 10)
    assert psi.sector == ham.sector
    assert np.array_equal(random_state(ham, bond_dimension=6, rng=11).to_vector(), v)
    assert not np.allclose(random_state(ham, bond_dimension=6, rng=12).to_vector(), v)
    assert psi.max_bond_dimension <= 6
    assert np.iscomplexobj(v) == (np.dtype(ham.dtype).kind == "c")


def _left_orthonormal(t):
    a = t.to_dense()
    m = a.reshape(-1, a.shape[2])
    return np.allclose(m.conj().T @ m, np.eye(m.shape[1]), atol=tol(1, 100))


def _right_orthonormal(t):
    a = t.to_dense()
    m = a.reshape(a.shape[0], -1)
    return np.allclose(m @ m.conj().T, np.eye(m.shape[0]), atol=tol(1, 100))


@pytest.mark.parametrize("centre", [0, 3, 7])
def test_canonical_forms_are_isometries_and_keep_the_state(centre):
    psi = random_state(_model("haldane").hamiltonian, bond_dimension=8, rng=3)
    before = psi.to_vector()
    psi.canonicalize(centre)
    # the defining property of the mixed canonical form, checked on dense arrays (common practice)
    assert all(_left_orthonormal(t) for t in psi.tensors[:centre])
    assert all(_right_orthonormal(t) for t in psi.tensors[centre + 1:])
    assert np.allclose(psi.to_vector(), before, atol=tol(1, 100))
    psi.move_centre(1)
    assert psi.centre == 1 and _left_orthonormal(psi.tensors[0]) and _right_orthonormal(psi.tensors[2])
    assert psi.norm() == pytest.approx(1.0, abs=tol(1, 100))


def test_product_state_is_the_basis_vector_and_checks_its_sector():
    ham = _model("heisenberg").hamiltonian
    labels = ["up", "down"] * 4
    v = product_state(ham, labels).to_vector()
    code = int("".join("0" if lab == "up" else "1" for lab in labels), 2)  # site 0 most significant
    expected = np.zeros(2**8)
    expected[code] = 1.0
    assert np.array_equal(v, expected)
    assert np.array_equal(product_state(ham, [0, 1] * 4).to_vector(), expected)
    with pytest.raises(SectorError, match="twice_sz = 2 but the target sector is twice_sz = 0"):
        product_state(ham, ["up", "up", "down", "up", "down", "up", "down", "up"])
    with pytest.raises(OperatorError, match="unknown local state 'sideways'"):
        product_state(ham, ["sideways"] * 8)


@pytest.mark.parametrize("key", ["haldane", "tfim", "hubbard"])
def test_overlap_matches_dense_vectors(key):
    ham = _model(key).hamiltonian
    a = random_state(ham, bond_dimension=5, rng=1)
    b = random_state(ham, bond_dimension=7, rng=2)
    ref = np.vdot(a.to_vector(), b.to_vector())  # numpy reference
    assert complex(overlap(a, b)) == pytest.approx(complex(ref), abs=tol(1, 100))
    assert float(np.real(overlap(a, a))) == pytest.approx(1.0, abs=tol(1, 100))


@pytest.mark.parametrize("key", list(CASES))
def test_energy_and_variance_match_dense_kronecker_products(key):
    ham = _model(key).hamiltonian
    psi = random_state(ham, bond_dimension=6, rng=5)
    v = psi.to_vector()
    h = dense_from_products(ham)  # Kronecker products built independently of the MPO (conftest)
    hv = h @ v
    e_ref = np.vdot(v, hv).real
    var_ref = np.vdot(hv, hv).real - e_ref**2
    scale = np.abs(h).sum(axis=1).max()  # the infinity norm bounds the spectral norm (common practice)
    mpo = build_mpo(ham)
    assert expectation_value(psi, mpo) == pytest.approx(e_ref, abs=tol(scale, 1e3))
    # <H^2> - <H>^2 loses about eps * <H^2> to cancellation (common practice)
    assert energy_variance(psi, mpo) == pytest.approx(var_ref, abs=tol(scale**2, 1e3))


@pytest.fixture(scope="module")
def heisenberg_ground():
    """Exact and DMRG ground states of an open Heisenberg chain with twice_sz = 2 (so <Sz_i> != 0)."""
    model = load_model("heisenberg", {"length": "10", "twice_sz": "2"})
    ref = exact.ground_state(model.hamiltonian)
    res = find_ground_state(model, SweepSettings(bond_dimension=32, energy_tolerance=1e-12,
                                                 discarded_tolerance=1e-10), seed=1, progress=None)
    return model, ref, res.state


def test_ground_state_entropies_match_schmidt_decomposition_of_exact_vector(heisenberg_ground):
    model, ref, psi = heisenberg_ground
    vec = exact.full_vector(ref)
    # Schmidt values of the exact-engine vector by numpy.linalg.svd (the reference)
    expected = [_entropy(vec, 2, b) for b in range(1, model.num_sites)]
    # entropies are smooth in the state: a residual of 1e-6 in the vector moves them by far less than 1e-8
    assert np.allclose(entanglement_entropies(psi), expected, atol=STATE_SMOOTH)
    assert abs(np.vdot(vec, psi.to_vector())) == pytest.approx(1.0, abs=MPS_ROUNDING)


def test_entanglement_spectrum_is_labelled_by_the_left_charge(heisenberg_ground):
    model, ref, psi = heisenberg_ground
    vec = exact.full_vector(ref).reshape((2,) * model.num_sites)
    bond = 4
    spec = entanglement_spectrum(psi, bond)
    assert spec.names == ("twice_sz",)
    got = spec.per_charge()
    # reference: split the exact vector by the twice_sz of the left block and take numpy SVDs block by block
    twice_sz = np.array([1, -1])  # basis order of spin-1/2: up, down
    left_q = sum(np.meshgrid(*([twice_sz] * bond), indexing="ij")).reshape(-1)
    mat = vec.reshape(2**bond, -1)
    expected = {}
    for q in np.unique(left_q):
        s = np.linalg.svd(mat[left_q == q], compute_uv=False)
        s = s[s > 1e-7]
        expected[(int(q),)] = s
    assert set(got) >= set(expected)
    for q, s in expected.items():
        assert np.allclose(got[q][: len(s)], s, atol=STATE_SMOOTH), q
    assert np.sum(spec.weights) == pytest.approx(1.0, abs=tol(factor=4.5e3))
    assert spec.entropy() == pytest.approx(schmidt_spectra(psi)[bond - 1].entropy(), abs=tol(factor=4.5e3))


def test_local_expectations_match_exact_engine(heisenberg_ground):
    model, ref, psi = heisenberg_ground
    got = local_expectations(psi, "Sz")
    expected = exact.local_expectations(ref, model, "Sz")  # our exact engine (reference)
    assert np.allclose(got, expected, atol=STATE_SMOOTH)
    assert np.sum(got) == pytest.approx(1.0, abs=MPS_ROUNDING)  # total Sz of the sector twice_sz = 2
    with pytest.raises(OperatorError, match="changes twice_sz by \\+2 and leaves the sector"):
        local_expectations(psi, "Sp")
    with pytest.raises(OperatorError, match="mixes different changes of the conserved charge twice_sz"):
        local_expectations(psi, "Sx")


def test_spin_correlations_match_exact_engine(heisenberg_ground):
    model, ref, psi = heisenberg_ground
    for a, b, i, j in [("Sz", "Sz", 2, 7), ("Sp", "Sm", 1, 6), ("Sm", "Sp", 8, 3), ("Sz", "Sz", 4, 4)]:
        expected = exact.correlation(ref, model, a, b, i, j)  # our exact engine (reference)
        assert correlation(psi, a, b, i, j) == pytest.approx(expected, abs=STATE_SMOOTH), (a, b, i, j)


def _jw_annihilator(space, n, site, name):
    """Dense c_site = F_0 ... F_{site-1} a_site (Jordan-Wigner definition, built here)."""
    mats = [np.eye(space.dim)] * n
    for k in range(site):
        mats[k] = space.string_operator
    mats[site] = space.operator(name)
    return kron_all(mats)


@pytest.mark.parametrize("key,create,annihilate", [("haldane", "cdag", "c"), ("hubbard", "cdag_up", "c_up"),
                                                   ("hubbard", "cdag_dn", "c_dn")])
def test_fermion_correlations_include_jordan_wigner_strings(key, create, annihilate):
    ham = _model(key).hamiltonian
    space, n = ham.space, ham.num_sites
    psi = random_state(ham, bond_dimension=8, rng=7)
    v = psi.to_vector()
    for i, j in [(0, n - 1), (n - 1, 1), (2, 2), (1, 3)]:
        ci_dag = _jw_annihilator(space, n, i, annihilate).conj().T
        cj = _jw_annihilator(space, n, j, annihilate)
        expected = np.vdot(v, ci_dag @ (cj @ v))
        got = correlation(psi, create, annihilate, i, j)
        assert complex(got) == pytest.approx(complex(expected), abs=tol(1, 100)), (i, j)
    with pytest.raises(OperatorError, match="fermion-odd"):
        correlation(psi, create, "n" if key == "haldane" else "n_up", 0, 1)


def test_fermion_ground_state_correlations_match_exact_engine():
    model = load_model(*CASES["haldane"])
    ref = exact.ground_state(model.hamiltonian)
    psi = find_ground_state(model, SweepSettings(bond_dimension=16, energy_tolerance=1e-12,
                                                 discarded_tolerance=1e-10), seed=2, progress=None).state
    for i, j in [(0, 5), (6, 2), (3, 3)]:
        expected = exact.correlation(ref, model, "cdag", "c", i, j)  # our exact engine (reference)
        assert complex(correlation(psi, "cdag", "c", i, j)) == pytest.approx(complex(expected), abs=STATE_SMOOTH)
    assert np.allclose(local_expectations(psi, "n"), exact.local_expectations(ref, model, "n"), atol=STATE_SMOOTH)


def test_block_layout_round_trip():
    rule = ChargeRule.u1()
    rng = np.random.default_rng(4)
    legs = (Leg([[0], [1], [2]], [2, 1, 3]), Leg([[0], [1]], [1, 1]), Leg([[1], [2], [3]], [2, 2, 1], -1))
    t = BlockTensor.random(legs, None, rule, dtype=np.complex128, rng=rng)
    layout = BlockLayout(legs, None, rule, np.complex128)
    vec = layout.pack(t)
    assert vec.size == layout.size == t.size
    assert np.array_equal(layout.unpack(vec).to_dense(), t.to_dense())  # dense arrays as the reference
    with pytest.raises(ValueError, match="legs or total charge differ"):
        layout.pack(BlockTensor.random(legs[::-1], None, rule, rng=rng))
    with pytest.raises(ValueError, match=f"length {layout.size}, got shape"):
        layout.unpack(np.zeros(3))


def test_bad_requests_raise_our_errors():
    ham = _model("heisenberg").hamiltonian
    with pytest.raises(NetprobeError, match="bond_dimension=0 must be an integer of at least 1"):
        random_state(ham, bond_dimension=0)
    with pytest.raises(SectorError, match="sector twice_sz = 1 has no states on 8 sites"):
        random_state(ham.with_sector({"twice_sz": 1}))
    psi = random_state(ham, rng=1)
    with pytest.raises(NetprobeError, match="bond 8 outside 1..7"):
        entanglement_spectrum(psi, 8)
    with pytest.raises(OperatorError, match="site 9 outside 0..7"):
        correlation(psi, "Sz", "Sz", 0, 9)
    with pytest.raises(OperatorError, match="unknown operator 'Q'"):
        local_expectations(psi, "Q")
