"""Exact diagonalisation: sector bases, sparse assembly, eigen-solvers and measurements.

References are outside netprobe: dense matrices written here from Pauli and ladder matrices and
diagonalised by numpy/scipy, closed forms from the literature, and single-particle levels from
numpy.linalg.eigh. Tolerances: LAPACK eigenvalues of Hermitian matrices of norm ~ sum of |couplings|
are accurate to ~1e3 ulps of that norm (common practice); ARPACK with tol=1e-10 returns the lowest
eigenvalue to ~1e-10 relative or better, and we allow 1e-8 absolute for a few tens of terms.
"""

import dataclasses
import functools
import math
from functools import reduce

import numpy as np
import pytest
import scipy.sparse as sp
from scipy.special import comb

from netprobe.model import expr
from netprobe.errors import HermiticityError, MemoryBudgetError, OperatorError, SectorError, SpecError
from netprobe.engines.exact import (
    ExactOptions,
    SectorBasis,
    correlation,
    expectation,
    full_vector,
    ground_state,
    hamiltonian_matrix,
    hamiltonian_operator,
    local_expectations,
    operator_matrix,
    sector_basis,
)
from netprobe.model.lattice import build_lattice
from netprobe.model.sites import site_space
from netprobe.model.spec import build_model, load_model, load_spec, parse_spec
from netprobe.model.terms import Hamiltonian, Term

DENSE_TOL = 1e-11  # LAPACK on matrices of norm <~ 30: 1e3 ulps of the norm (common practice)
LANCZOS_TOL = 1e-8  # ARPACK at tol=1e-10 relative on |E0| <~ 20
ROUNDOFF = 1e-12  # the same vector contracted two ways: sums of <~ 1e4 products of O(1) numbers
STATE_TOL = 1e-10  # eigenvectors from eigh err by ~ eps * norm / gap, with gaps >= 1e-3 here
ONE_ROUNDING = 1e-14  # an entry that is one product of O(1) numbers, rounded once: ~45 ulps at most
ARPACK_RESIDUAL = 1e-6  # ||H v - E v|| for ARPACK at tol=1e-10 relative on ||H|| of a few tens

# Pauli-based spin-1/2 matrices, basis (up, down) (common practice)
SX = np.array([[0, 1], [1, 0]]) / 2
SY = np.array([[0, -1j], [1j, 0]]) / 2
SZ = np.array([[1, 0], [0, -1]]) / 2
SPLUS = np.array([[0, 1], [0, 0]])
SMINUS = SPLUS.T
I2 = np.eye(2)


def kron_op(local: dict, n: int, d: int = 2) -> sp.csr_matrix:
    """Operator acting with local[j] on site j, written with scipy.sparse.kron, site 0 leftmost."""
    mats = [sp.csr_matrix(local.get(j, np.eye(d))) for j in range(n)]
    return reduce(lambda a, b: sp.kron(a, b, format="csr"), mats)


def spin_half_2sz(n: int) -> np.ndarray:
    """twice_sz of every full-space index (digit 0 = up), computed from the bits."""
    idx = np.arange(2**n)
    downs = sum((idx >> (n - 1 - j)) & 1 for j in range(n))
    return n - 2 * downs


def heisenberg_kron(n: int, bonds, jz: float = 1.0, jxy: float = 1.0) -> sp.csr_matrix:
    h = sp.csr_matrix((2**n, 2**n), dtype=complex)
    for i, j in bonds:
        h = h + jxy * (kron_op({i: SX, j: SX}, n) + kron_op({i: SY, j: SY}, n))
        h = h + jz * kron_op({i: SZ, j: SZ}, n)
    return h


def block_eigvalsh(h: sp.spmatrix, mask: np.ndarray) -> np.ndarray:
    idx = np.nonzero(mask)[0]
    return np.linalg.eigvalsh(h[idx][:, idx].toarray())


def with_sector(spec, **sector):
    """The same model description with another [sector] (the bundled files fix it to one value)."""
    return dataclasses.replace(spec, sector={k: expr.parse(str(v)) for k, v in sector.items()})


# ---------------------------------------------------------------------------------------------
# one dimension
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("n", [6, 7, 8, 9, 10])
def test_heisenberg_open_chain_against_kronecker(n):
    twice_sz = n % 2
    model = build_model(with_sector(load_spec("heisenberg"), **{"twice_sz": twice_sz}), {"length": str(n)})
    ham = model.hamiltonian
    bonds = [(i, i + 1) for i in range(n - 1)]
    # numpy eigvalsh of the Kronecker-built block (common practice)
    reference = block_eigvalsh(heisenberg_kron(n, bonds), spin_half_2sz(n) == twice_sz)
    basis = sector_basis(ham)
    assert basis.dim == reference.size
    full = ground_state(ham, num_states=basis.dim)
    assert full.method == "dense"
    np.testing.assert_allclose(full.energies, reference, atol=DENSE_TOL)
    lanczos = ground_state(ham, num_states=2, options=ExactOptions(dense_limit=0))
    assert lanczos.method == "sparse"
    np.testing.assert_allclose(lanczos.energies, reference[:2], atol=LANCZOS_TOL)


def test_four_site_ring_is_minus_two_j():
    model = load_model("heisenberg", {"lattice": "square", "length": "1", "circumference": "4"})
    ring = sorted(tuple(sorted(b.sites)) for b in model.lattice.family("nn"))
    assert ring == [(0, 1), (0, 3), (1, 2), (2, 3)]
    # E0 = (J/2)[S_tot^2 - S_A^2 - S_B^2] = (J/2)(0 - 2 - 2) = -2 J for the two sublattice pairs (from memory)
    assert ground_state(model.hamiltonian).energy == pytest.approx(-2.0, abs=DENSE_TOL)


@pytest.mark.parametrize("n", [10, 11, 12])
def test_xx_chain_free_fermion_levels(n):
    twice_sz = n % 2
    model = build_model(with_sector(load_spec("heisenberg"), **{"twice_sz": twice_sz}),
                        {"length": str(n), "Delta": "0"})
    # levels J cos(pi m/(N+1)) (Lieb, Schultz, Mattis, Ann. Phys. 16, 407 (1961)); N/2 particles fill
    # the negative ones; for odd N (twice_sz = 1) the zero mode m = (N+1)/2 makes (N-1)/2 and (N+1)/2 equal
    levels = np.cos(np.pi * np.arange(1, n + 1) / (n + 1))
    exact = levels[levels < -1e-12].sum()
    result = ground_state(model.hamiltonian)
    assert result.energy == pytest.approx(exact, abs=LANCZOS_TOL)


@pytest.mark.parametrize("n", [6, 10, 14])
def test_critical_ising_open_chain(n):
    model = load_model("tfim", {"length": str(n)})
    assert model.hamiltonian.conserved == ()
    result = ground_state(model.hamiltonian)
    assert result.basis.dim == 2**n
    # E0 = J [1 - 1/sin(pi/(4N+2))] at h = J (Pfeuty, Ann. Phys. 57, 79 (1970))
    assert result.energy == pytest.approx(1 - 1 / math.sin(math.pi / (4 * n + 2)), abs=LANCZOS_TOL)


def test_two_site_hubbard_closed_form():
    model = load_model("hubbard", {"length": "2", "U": "4", "t": "1"})
    # half-filled singlet: E0 = (U - sqrt(U^2 + 16 t^2)) / 2 (common practice)
    assert ground_state(model.hamiltonian).energy == pytest.approx((4 - math.sqrt(32)) / 2, abs=DENSE_TOL)


# ---------------------------------------------------------------------------------------------
# sectors
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("n", [11, 12])
def test_spin_half_sector_dimensions_are_binomial(n):
    q = site_space("spin-1/2").charge_values(("twice_sz",))
    for ups in range(n + 1):
        basis = SectorBasis(q, n, [2 * ups - n], names=["twice_sz"])
        assert basis.dim == comb(n, ups, exact=True)  # scipy.special.comb (common practice)
        assert np.all(np.diff(basis.codes) > 0)


def test_spin_one_and_spinful_fermion_dimensions():
    n = 6
    trinomial = np.polynomial.polynomial.polypow([1, 1, 1], n)  # (1 + x + x^2)^N (common practice)
    q1 = site_space("spin-1").charge_values(("twice_sz",))
    for k, count in enumerate(trinomial):
        assert SectorBasis(q1, n, [2 * (k - n)]).dim == round(count)
    qe = site_space("spinful_fermion").charge_values(("N", "twice_sz"))
    length = 5
    for up in range(length + 1):
        for dn in range(length + 1):
            basis = SectorBasis(qe, length, [up + dn, up - dn], names=["N", "twice_sz"])
            assert basis.dim == comb(length, up, exact=True) * comb(length, dn, exact=True)


@pytest.mark.parametrize("space,conserved,n", [("spin-1", ("twice_sz",), 6), ("spinful_fermion", ("N", "twice_sz"), 4),
                                              ("spin-1/2", (), 5)])
def test_codes_and_index_against_brute_force(space, conserved, n):
    q = site_space(space).charge_values(conserved)
    d = q.shape[0]
    digits = np.array(np.unravel_index(np.arange(d**n), (d,) * n)).T  # site 0 most significant (numpy)
    totals = q[digits].sum(axis=1)
    target = totals[d**n // 3]
    expected = np.nonzero(np.all(totals == target, axis=1))[0]
    basis = SectorBasis(q, n, target, names=conserved)
    np.testing.assert_array_equal(basis.codes, expected)
    np.testing.assert_array_equal(basis.states(), digits[expected])
    probe = np.arange(d**n)
    want = np.full(d**n, -1)
    want[expected] = np.arange(expected.size)
    np.testing.assert_array_equal(basis.index(probe), want)


def test_empty_sector_raises():
    q = site_space("spin-1/2").charge_values(("twice_sz",))
    with pytest.raises(SectorError, match="no states"):
        SectorBasis(q, 4, [1])  # wrong parity
    with pytest.raises(SectorError, match="no states"):
        SectorBasis(q, 4, [6])  # beyond the maximum


def _random_spin_one_terms(rng, n):
    terms, conj = [], set()
    for i in range(n):
        terms.append(Term(rng.normal(), ((i, "Sz"),), f"field {i}"))
        terms.append(Term(rng.normal(), ((i, "Sz2"),), f"anisotropy {i}"))
        for j in range(i + 1, n):
            hop = complex(rng.normal(), rng.normal())
            terms.append(Term(hop, ((i, "Sp"), (j, "Sm")), f"flip {i} {j}"))
            conj.add(f"flip {i} {j}")
            terms.append(Term(rng.normal(), ((i, "Sz"), (j, "Sz")), f"zz {i} {j}"))
    for i in range(n - 2):  # a three-site term that moves charge two sites along
        ops = ((i, "Sp"), (i + 1, "Sz"), (i + 2, "Sm"))
        terms.append(Term(complex(rng.normal(), rng.normal()), ops, f"t3 {i}"))
        conj.add(f"t3 {i}")
    return terms, conj


def test_union_of_sectors_is_the_full_spectrum(rng):
    n = 5
    lattice = build_lattice("chain", length=n, circumference=1)
    space = site_space("spin-1")
    terms, conj = _random_spin_one_terms(rng, n)
    full_ham = Hamiltonian.from_terms(lattice, space, terms, add_conjugate=conj)
    assert full_ham.dtype == np.complex128
    # dense reference from the spin-1 ladder matrices written here (common practice)
    sz = np.diag([1.0, 0.0, -1.0])
    splus = np.diag([math.sqrt(2), math.sqrt(2)], 1)
    mats = {"Sz": sz, "Sz2": sz @ sz, "Sp": splus, "Sm": splus.T}
    dense = sp.csr_matrix((3**n, 3**n), dtype=complex)
    for term in terms:
        op = term.coefficient * kron_op({s: mats[name] for s, name in term.operators}, n, 3)
        dense = dense + op + (op.conj().T if term.origin in conj else 0)
    reference = np.linalg.eigvalsh(dense.toarray())
    whole = ground_state(full_ham, num_states=3**n)
    np.testing.assert_allclose(whole.energies, reference, atol=DENSE_TOL)
    parts = []
    for twice_sz in range(-2 * n, 2 * n + 1, 2):
        ham = Hamiltonian.from_terms(lattice, space, terms, add_conjugate=conj, conserved=("twice_sz",),
                                     sector={"twice_sz": twice_sz})
        dim = sector_basis(ham).dim
        parts.append(ground_state(ham, num_states=dim).energies)
    np.testing.assert_allclose(np.sort(np.concatenate(parts)), reference, atol=DENSE_TOL)


COMPLEX_CHAIN = """
[model]
name = "complex-flip-ladder"
site = "spin-1/2"
conserved = ["twice_sz"]
[parameters]
lattice = "square"
geometry = "strip"
length = 4
circumference = 2
K = 0.7
phi = 0.9
Jz = 0.4
[sector]
twice_sz = 0
[[term]]
on = "nn"
ops = "Sp Sm"
coupling = "K * exp(1j*phi)"
conjugate = true
[[term]]
on = "nn"
ops = "Sz Sz"
coupling = "Jz"
[[term]]
on = "nnn"
ops = "Sp Sm"
coupling = "0.3j"
conjugate = true
"""


def test_complex_couplings_against_dense():
    n = 8
    model = build_model(parse_spec(COMPLEX_CHAIN))
    ham = model.hamiltonian
    assert ham.dtype == np.complex128
    dense = sp.csr_matrix((2**n, 2**n), dtype=complex)
    for bond in model.lattice.family("nn"):  # x bonds skip a site in the 1D order
        i, j = bond.sites
        flip = 0.7 * np.exp(0.9j) * kron_op({i: SPLUS, j: SMINUS}, n)
        dense = dense + flip + flip.conj().T + 0.4 * kron_op({i: SZ, j: SZ}, n)
    for bond in model.lattice.family("nnn"):
        i, j = bond.sites
        flip = 0.3j * kron_op({i: SPLUS, j: SMINUS}, n)
        dense = dense + flip + flip.conj().T
    mask = spin_half_2sz(n) == 0
    reference = block_eigvalsh(dense, mask)  # numpy (common practice)
    np.testing.assert_allclose(ground_state(ham, num_states=4).energies, reference[:4], atol=DENSE_TOL)
    lanczos = ground_state(ham, num_states=2, options=ExactOptions(dense_limit=0))
    assert np.iscomplexobj(lanczos.vectors)
    np.testing.assert_allclose(lanczos.energies, reference[:2], atol=LANCZOS_TOL)
    idx = np.nonzero(mask)[0]
    h_block = hamiltonian_matrix(ham).toarray()
    # each entry is one product of couplings and matrix elements: exact up to one rounding
    np.testing.assert_allclose(h_block, dense[idx][:, idx].toarray(), atol=ONE_ROUNDING)


# ---------------------------------------------------------------------------------------------
# fermions
# ---------------------------------------------------------------------------------------------

HOPPING = """
[model]
name = "hopping-cylinder"
site = "fermion"
conserved = ["N"]
[parameters]
lattice = "square"
length = 2
circumference = 3
t = 1.0
phi = 0.4
mu = 0.3
Nf = 3
[sector]
N = "Nf"
[[term]]
on = "nn"
ops = "cdag c"
coupling = "-t * exp(1j*phi)"
conjugate = true
[[term]]
on = "sites"
ops = "n"
coupling = "mu * (x + 0.37*y*y)"
"""


def _single_particle(model, t=1.0, phi=0.4, mu=0.3):
    lat = model.lattice
    h = np.zeros((lat.num_sites, lat.num_sites), dtype=complex)
    for bond in lat.family("nn"):
        i, j = bond.sites  # term -t e^{i phi} c_i^dag c_j + h.c.
        h[i, j] += -t * np.exp(1j * phi)
        h[j, i] += -t * np.exp(-1j * phi)
    for k, (x, y) in enumerate(lat.positions):
        h[k, k] += mu * (x + 0.37 * y * y)
    return h


@pytest.mark.parametrize("nf", [1, 2, 3, 4, 5])
def test_fermion_cylinder_is_a_slater_determinant(nf):
    model = build_model(parse_spec(HOPPING), {"Nf": str(nf)})
    # the seam bond (2, 0) and the x bonds (0, 3), ... skip sites in the 1D order: strings matter
    assert any(abs(b.sites[0] - b.sites[1]) > 1 for b in model.lattice.family("nn"))
    levels, orbitals = np.linalg.eigh(_single_particle(model))  # numpy (common practice)
    assert levels[nf] - levels[nf - 1] > 1e-3  # a unique ground state, so densities are defined
    result = ground_state(model.hamiltonian)
    assert result.energy == pytest.approx(levels[:nf].sum(), abs=DENSE_TOL)  # sum of filled levels
    filled = orbitals[:, :nf]
    g = filled.conj() @ filled.T  # <c_i^dag c_j> = sum_n conj(phi_n(i)) phi_n(j) (common practice)
    np.testing.assert_allclose(local_expectations(result, model, "n"), np.diag(g).real, atol=STATE_TOL)
    for i, j in [(0, 2), (2, 0), (0, 5), (1, 4), (3, 5)]:
        value = correlation(result, model, "cdag", "c", i, j)
        assert value == pytest.approx(g[i, j], abs=STATE_TOL)


def test_spinful_fermion_cylinder_sectors_at_zero_interaction():
    overrides = {"lattice": "square", "length": "2", "circumference": "3", "U": "0"}
    levels = None
    for filling, spin in [("1/3", "0"), ("2/3", "2"), ("1", "0"), ("1", "2")]:
        model = load_model("hubbard", dict(overrides, filling=filling, spin=spin))
        if levels is None:
            h = np.zeros((6, 6))
            for bond in model.lattice.family("nn"):
                i, j = bond.sites
                h[i, j] -= 1.0
                h[j, i] -= 1.0
            levels = np.linalg.eigvalsh(h)  # numpy (common practice)
        n, twice_sz = model.hamiltonian.sector["N"], model.hamiltonian.sector["twice_sz"]
        up, dn = (n + twice_sz) // 2, (n - twice_sz) // 2
        assert ground_state(model.hamiltonian).energy == pytest.approx(levels[:up].sum() + levels[:dn].sum(),
                                                                       abs=LANCZOS_TOL)


# ---------------------------------------------------------------------------------------------
# assembly paths, measurements, errors
# ---------------------------------------------------------------------------------------------


@functools.lru_cache(maxsize=1)  # the dense reference is built once for the tests below
def _j1j2_cylinder():
    model = load_model("heisenberg", {"lattice": "square", "length": "3", "circumference": "4", "J2": "0.5"})
    n = model.num_sites
    h = heisenberg_kron(n, [b.sites for b in model.lattice.family("nn")])
    h = h + 0.5 * heisenberg_kron(n, [b.sites for b in model.lattice.family("nnn")])
    return model, block_eigvalsh(h, spin_half_2sz(n) == 0)  # numpy (common practice)


def test_sparse_and_matrix_free_agree_with_kronecker():
    model, reference = _j1j2_cylinder()
    ham = model.hamiltonian
    sparse = ground_state(ham, num_states=3)
    free = ground_state(ham, num_states=3, matrix_free=True)
    assert (sparse.method, free.method) == ("sparse", "matrix-free")
    np.testing.assert_allclose(sparse.energies, reference[:3], atol=LANCZOS_TOL)
    np.testing.assert_allclose(free.energies, reference[:3], atol=LANCZOS_TOL)
    # a small budget moves the automatic choice to the matrix-free path; a tiny one refuses
    dim = sector_basis(ham).dim
    squeezed = ground_state(ham, options=ExactOptions(memory_budget=40 * dim * 8))
    assert squeezed.method == "matrix-free"
    with pytest.raises(MemoryBudgetError, match="budget"):
        ground_state(ham, options=ExactOptions(memory_budget=dim * 8))


def test_ground_state_is_deterministic():
    model, _ = _j1j2_cylinder()
    first = ground_state(model.hamiltonian, num_states=2)
    second = ground_state(model.hamiltonian, num_states=2)
    np.testing.assert_array_equal(first.vectors, second.vectors)
    other_seed = ground_state(model.hamiltonian, num_states=2, seed=7)
    np.testing.assert_allclose(other_seed.energies, first.energies, atol=LANCZOS_TOL)
    assert "E0=" in repr(first) and len(repr(first)) < 120


def test_measurements_against_the_full_vector():
    n = 8
    model = load_model("heisenberg", {"length": str(n), "Delta": "0.6"})
    result = ground_state(model.hamiltonian, sector={"twice_sz": 2})
    psi = full_vector(result)
    assert psi.shape == (2**n,)
    assert np.count_nonzero(psi) == np.count_nonzero(result.vector())
    sz = local_expectations(result, model, "Sz")
    assert sz.sum() == pytest.approx(1.0, abs=ROUNDOFF)  # total Sz of the sector
    for i in range(n):  # <psi| Sz_i |psi> with the full-space Kronecker operator (common practice)
        assert sz[i] == pytest.approx(np.vdot(psi, kron_op({i: SZ}, n) @ psi).real, abs=ROUNDOFF)
    for i, j in [(0, 1), (2, 6), (7, 3)]:
        want = np.vdot(psi, kron_op({i: SPLUS, j: SMINUS}, n) @ psi)
        assert correlation(result, model, "Sp", "Sm", i, j) == pytest.approx(want, abs=ROUNDOFF)
        want = np.vdot(psi, kron_op({i: SZ, j: SZ}, n) @ psi).real
        assert correlation(result, model, "Sz", "Sz", i, j) == pytest.approx(want, abs=ROUNDOFF)
    energy = expectation(result, model.hamiltonian.products)
    assert isinstance(energy, float) and energy == pytest.approx(result.energy, abs=ROUNDOFF)
    # an operator into another sector: Sm_0 maps twice_sz = 2 to twice_sz = 0
    target = result.basis.with_target({"twice_sz": 0})
    lower = operator_matrix([p for p in _single_site_products(model, "Sm", 0)], result.basis, target)
    assert lower.shape == (target.dim, result.basis.dim)
    lowered = np.zeros(2**n)
    lowered[target.codes] = lower @ result.vector()
    np.testing.assert_allclose(lowered, kron_op({0: SMINUS}, n) @ psi, atol=ONE_ROUNDING)  # entries 0 or 1: exact


def _single_site_products(model, name, site):
    from netprobe.model.terms import normal_form
    return [normal_form(Term(1.0, ((site, name),)), model.space)]


def test_user_mistakes_raise_our_errors():
    model = load_model("heisenberg", {"length": "6"})
    result = ground_state(model.hamiltonian)
    with pytest.raises(OperatorError, match="leaves the sector"):
        local_expectations(result, model, "Sp")
    with pytest.raises(OperatorError, match="mixes"):
        local_expectations(result, model, "Sx")
    with pytest.raises(SectorError, match="num_states"):
        ground_state(model.hamiltonian, num_states=1000)
    lattice, space = model.lattice, model.space
    field = [Term(1.0, ((i, "Sx"),), f"field {i}") for i in range(6)]
    leaky = Hamiltonian.from_terms(lattice, space, field, conserved=("twice_sz",), sector={"twice_sz": 0})
    with pytest.raises(SpecError, match="does not conserved"):
        ground_state(leaky)
    one_way = Hamiltonian.from_terms(lattice, space, [Term(1.0, ((0, "Sp"), (1, "Sm")), "flip")],
                                     conserved=("twice_sz",), sector={"twice_sz": 0})
    with pytest.raises(HermiticityError):
        ground_state(one_way)


def test_twenty_spin_cylinder_completes():
    # performance sanity on a 4 x 5 cylinder (184756 states), not a timing assertion
    model = load_model("heisenberg", {"lattice": "square", "length": "5", "circumference": "4"})
    ham = model.hamiltonian
    result = ground_state(ham)
    assert result.method == "sparse" and result.basis.dim == comb(20, 10, exact=True)
    bonds = len(model.lattice.family("nn"))
    # -3/4 J per bond (singlet bound) <= E0 <= -1/4 J per bond (Neel state, variational) (common practice)
    assert -0.75 * bonds <= result.energy <= -0.25 * bonds
    h = hamiltonian_matrix(ham)
    v = result.vector()
    assert np.linalg.norm(h @ v - result.energy * v) < ARPACK_RESIDUAL
    x = np.random.default_rng(3).standard_normal(h.shape[0])
    free = hamiltonian_operator(ham, matrix_free=True)
    np.testing.assert_allclose(free.matvec(x), h @ x, atol=ROUNDOFF)


def test_binary_search_lookup_matches_rank_tables(monkeypatch):
    model = build_model(parse_spec(HOPPING), {"Nf": "3"})
    ham = model.hamiltonian
    with_tables = hamiltonian_matrix(ham).toarray()
    monkeypatch.setattr("netprobe.engines.exact.basis._TABLE_LIMIT", 0)  # force the fallback for every basis
    basis = sector_basis(ham)
    assert basis.lookup_tables()[3] is False
    np.testing.assert_array_equal(hamiltonian_matrix(ham, basis).toarray(), with_tables)
    levels = np.linalg.eigvalsh(_single_particle(model))  # numpy (common practice)
    assert ground_state(ham).energy == pytest.approx(levels[:3].sum(), abs=DENSE_TOL)
