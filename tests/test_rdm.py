"""Reduced density matrices of site sets: spins, fermions (Jordan-Wigner), dense vectors and MPS routes."""

import itertools
import math

import numpy as np
import scipy.linalg
import pytest

from netprobe import rdm, resources
from netprobe.rdm import root as root_route
from netprobe.rdm import split as split_route
from netprobe.rdm import tables as rdm_tables
from netprobe.rdm import tiles as rdm_tiles
from netprobe.rdm import zipper as zipper_route
from netprobe.errors import LatticeError, MemoryBudgetError, NetprobeError, SectorError
from netprobe.engines.exact import correlation, full_vector, ground_state
from netprobe.engines.mps import random_state
from netprobe.model.sites import site_space
from netprobe.model.spec import load_model

from conftest import DENSE_LOG, PROBE_ACCEPTANCE, tol
from references import (entropy, filled_projector, jw_annihilators, peschel_entropy, single_particle_matrix,
                        site_modes, slater_vector, spin_basis_rho)

SPIN = site_space("spin-1/2")
FERMION = site_space("fermion")

# Lanczos (scipy eigsh, tol 1e-10 in the exact engine) leaves ground-state vectors accurate to about
# 1e-10; entropies and correlators compared with an independent calculation inherit that.
LANCZOS_TOL = 1e-8


@pytest.fixture(scope="module")
def kagome():
    model = load_model("kagome_chiral", {})
    return model, full_vector(ground_state(model.hamiltonian))


@pytest.fixture(scope="module")
def haldane_interacting():
    model = load_model("haldane", {"length": "3", "circumference": "2", "V": "1.0", "phi": "pi/2"})
    res = ground_state(model.hamiltonian)
    return model, res, full_vector(res)


@pytest.fixture(scope="module")
def haldane_free():
    model = load_model("haldane", {"length": "3", "circumference": "2", "V": "0.0", "phi": "pi/2"})
    return model, full_vector(ground_state(model.hamiltonian))


@pytest.fixture(scope="module")
def chern_spinful_fermion():
    # a twist of 0.3 lifts the zero-mode degeneracy of the 3 x 2 cylinder at m = 1
    model = load_model("chern_square", {"length": "3", "circumference": "2", "m": "1.0", "twist": "0.3"})
    return model, full_vector(ground_state(model.hamiltonian))


# ----------------------------------------------------------------------------------------------
# Density-matrix properties
# ----------------------------------------------------------------------------------------------


def _random_spin_vector(rng, n=9):
    psi = rng.standard_normal(2**n) + 1j * rng.standard_normal(2**n)
    return psi / np.linalg.norm(psi)


@pytest.mark.parametrize("case", ["random-spin", "kagome", "haldane", "chern-spinful_fermion"])
def test_rho_is_a_density_matrix_and_pure_state_entropies_match(case, rng, kagome, haldane_interacting,
                                                                 chern_spinful_fermion):
    if case == "random-spin":
        psi, space, sets = _random_spin_vector(rng), SPIN, [[0, 3, 5], [1, 2, 8]]
    elif case == "kagome":
        (model, psi), sets = kagome, [[0, 4, 5, 9], [2, 3, 7, 8, 11]]
        space = model.space
    elif case == "haldane":
        model, _, psi = haldane_interacting
        space, sets = model.space, [[0, 3, 5], [1, 4, 6, 9, 10]]
    else:
        (model, psi), sets = chern_spinful_fermion, [[0, 2, 5], [1, 4]]
        space = model.space
    n = round(np.log(psi.size) / np.log(space.dim))
    for sites in sets:
        rho = rdm.reduced_density_matrix(psi, sites, space)
        w = np.linalg.eigvalsh(rho)
        # Hermitian, unit trace, no negative eigenvalues beyond rounding (common practice)
        assert np.allclose(rho, rho.conj().T, atol=tol())
        assert abs(np.trace(rho) - 1) < tol()
        assert w.min() > -tol()
        # pure state: S_A = S_complement (Schmidt decomposition; common practice), also for
        # non-contiguous fermionic sets
        comp = [k for k in range(n) if k not in sites]
        s_a = entropy(rho)
        s_c = entropy(rdm.reduced_density_matrix(psi, comp, space))
        assert abs(s_a - s_c) < DENSE_LOG
        assert s_a > 0.1  # the check is not empty: the parts are entangled


def test_spin_rdm_is_the_ordinary_partial_trace(rng):
    # spin-1, N = 6, a gapped non-contiguous set; reference: numpy transpose + reshape (common practice)
    space = site_space("spin-1")
    psi = rng.standard_normal(3**6) + 1j * rng.standard_normal(3**6)
    psi /= np.linalg.norm(psi)
    sites = [4, 0, 2]
    rho = rdm.reduced_density_matrix(psi, sites, space)
    assert np.allclose(rho, spin_basis_rho(psi, 6, 3, sorted(sites)), atol=tol())


# ----------------------------------------------------------------------------------------------
# The fermion rule
# ----------------------------------------------------------------------------------------------


def test_random_slater_determinant_matches_peschel_and_spin_basis_does_not(rng):
    n, nf, sites = 8, 4, [0, 3, 5]
    q, _ = np.linalg.qr(rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n)))
    phi = q[:, :nf]
    psi = slater_vector(phi)
    g = phi @ phi.conj().T
    rho = rdm.reduced_density_matrix(psi, sites, FERMION)
    s_true = peschel_entropy(g, sites)
    # free-fermion entropy from the correlation matrix (Peschel, J. Phys. A 36, L205 (2003)); rounding only
    assert abs(entropy(rho) - s_true) < DENSE_LOG
    # the spin-basis partial trace of an interleaved set is a different matrix (design notes, section 6:
    # 1.82 versus 1.33 nats for their example); here it misses by more than 0.02 nats
    s_spin = entropy(spin_basis_rho(psi, n, 2, sites))
    assert abs(s_spin - s_true) > 0.02
    # the square-root form gives the same spectrum
    assert abs(entropy(np.diag(rdm.reduced_root(psi, sites, FERMION).weights())) - s_true) < DENSE_LOG


def test_fermionic_rho_reproduces_hopping_across_traced_sites(haldane_interacting):
    model, res, psi = haldane_interacting
    sites = [0, 3, 5]
    rho = rdm.reduced_density_matrix(psi, sites, model.space)
    wrong = spin_basis_rho(psi, model.num_sites, 2, sites)
    c = jw_annihilators(3)  # modes 0, 3, 5 are modes 0, 1, 2 of the set's own JW basis
    for (i, j), (p, q) in {(0, 5): (0, 2), (0, 3): (0, 1), (3, 5): (1, 2)}.items():
        op = c[p].T @ c[q]
        exact = correlation(res, model, "cdag", "c", i, j)  # the exact engine's own JW strings
        # Tr(rho_S O) = <O> for even operators on S: the defining property of the fermionic RDM
        # (common practice); rounding only, the same vector enters both sides
        assert abs(np.trace(rho @ op) - exact) < tol(factor=1e4)
        if (i, j) != (3, 5):  # a traced odd site lies between: the spin-basis matrix gets it wrong
            assert abs(np.trace(wrong @ op) - exact) > 1e-3


@pytest.mark.parametrize("sites", [[0, 3, 5], [1, 2, 7, 10], [0, 2, 4, 6, 8, 10], [5]])
def test_noninteracting_haldane_entropies_equal_free_fermion_values(haldane_free, sites):
    model, psi = haldane_free
    g = filled_projector(single_particle_matrix(model), model.num_sites // 2)
    s = entropy(rdm.reduced_density_matrix(psi, sites, model.space))
    # Peschel, J. Phys. A 36, L205 (2003); Lanczos accuracy of the many-body vector
    assert abs(s - peschel_entropy(g, sites)) < LANCZOS_TOL


def test_spinful_fermion_sites_follow_the_mode_order_up_then_down(chern_spinful_fermion):
    model, psi = chern_spinful_fermion
    g = filled_projector(single_particle_matrix(model), model.num_sites)
    for sites in ([0, 2, 5], [1, 4], [0, 3]):
        s = entropy(rdm.reduced_density_matrix(psi, sites, model.space))
        # Peschel, J. Phys. A 36, L205 (2003), modes (site, up), (site, down) in MPS order
        assert abs(s - peschel_entropy(g, site_modes(sites, 2))) < LANCZOS_TOL


def test_permutation_sign_matches_reordered_creation_operators(rng):
    # |x> = prod_i (c_i^dag)^x_i |0> in the new order, expanded in the old JW basis with explicit
    # matrices (common practice); four modes, one per subsystem
    n = 4
    cdag = [c.T for c in jw_annihilators(n)]
    vac = np.zeros(2**n)
    vac[0] = 1.0
    for order in ([2, 0, 3, 1], [3, 2, 1, 0], [0, 2, 1, 3]):
        sign = rdm.permutation_sign([np.array([0, 1])] * n, order)
        for x in itertools.product((0, 1), repeat=n):
            state = vac
            for k in reversed(order):  # the leftmost creation operator acts last
                if x[k]:
                    state = cdag[k] @ state
            code = int("".join(map(str, x)), 2)
            assert state[code] == sign[x]


def test_reorder_parts_gives_prefix_traces_that_are_fermionic(rng):
    n, nf = 9, 4
    q, _ = np.linalg.qr(rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n)))
    phi = q[:, :nf]
    psi, g = slater_vector(phi), phi @ phi.conj().T
    parts = {"A": [4, 0], "B": [2, 7], "C": [1, 5]}
    sites = sorted(sum(parts.values(), []))
    rho, dims = rdm.reorder_parts(rdm.reduced_density_matrix(psi, sites, FERMION), sites, parts, FERMION)
    assert dims == (4, 4, 4)
    t = rho.reshape(16, 4, 16, 4)
    rho_ab = np.einsum("icjc->ij", t)  # ordinary trace of the suffix C
    rho_bc = np.einsum("aiaj->ij", rho.reshape(4, 16, 4, 16))  # ordinary trace of the prefix A
    # Peschel, J. Phys. A 36, L205 (2003)
    assert abs(entropy(rho_ab) - peschel_entropy(g, [0, 2, 4, 7])) < DENSE_LOG
    assert abs(entropy(rho_bc) - peschel_entropy(g, [1, 2, 5, 7])) < DENSE_LOG
    assert abs(entropy(rho) - peschel_entropy(g, sites)) < DENSE_LOG


# ----------------------------------------------------------------------------------------------
# MPS routes
# ----------------------------------------------------------------------------------------------


def _mps_cases():
    return [
        ("kagome_chiral", {}, [[0, 3, 5, 6, 10], [2, 7, 11], [4]]),
        ("haldane", {"length": "3", "circumference": "2", "V": "1.0"}, [[1, 2, 5, 8, 9], [0, 11], [3, 4, 5]]),
        ("chern_square", {"length": "3", "circumference": "2"}, [[0, 2, 3], [1, 5]]),
        ("heisenberg", {"length": "8", "lattice": "chain", "twice_sz": "0"}, [[0, 7], [1, 3, 4, 6]]),
    ]


def _mps_routes(state, sites, space):
    """Every registered MPS route that applies (the registry itself, so a new route is crossed too)."""
    return [name for name, route in rdm.ROUTES.items()
            if name != "vector" and route.applies(state, tuple(sorted(sites)), space)]


@pytest.mark.parametrize("name, overrides, sets", _mps_cases())
def test_every_mps_route_equals_the_dense_vector_route(name, overrides, sets):
    model = load_model(name, overrides)
    state = random_state(model.hamiltonian, bond_dimension=12, rng=7)
    psi = state.to_vector()
    for sites in sets:
        ref = rdm.reduced_density_matrix(psi, sites, model.space)
        routes = _mps_routes(state, sites, model.space)
        # the split route places the fermion parity strings: it applies to every case here
        assert {"root", "zipper", "split"} <= set(routes), (name, routes)
        w_ref = np.sort(np.linalg.eigvalsh(ref))[::-1]
        for method in routes:
            rho = rdm.reduced_density_matrix(state, sites, model.space, method=method)
            # gauge-invariant matrices, rounding only (common practice)
            assert np.allclose(rho, ref, atol=tol(factor=1e4)), (name, sites, method)
            root = rdm.reduced_root(state, sites, model.space, method=method)
            assert root.route == rdm.ROUTES[method].label  # the route asked for is the route that ran
            w = root.weights()
            assert np.allclose(w, w_ref[: len(w)], atol=tol(factor=1e4)), (name, sites, method)
            assert abs(w.sum() - 1) < tol(factor=1e4)


def test_dense_output_runs_the_route_it_names(monkeypatch):
    # Review finding: reduced_density_matrix(method="split") used to run the square-root walk. The
    # budget check names the route, and a spy on the split walk records that it ran.
    model = load_model("heisenberg", {"lattice": "square", "circumference": "3", "length": "4"})
    state = random_state(model.hamiltonian, bond_dimension=16, rng=3)
    sites = [1, 2, 5, 9, 10]
    ran = []
    original = split_route.split_blocks

    def spy(*args, **kwargs):
        ran.append("split")
        return original(*args, **kwargs)

    monkeypatch.setattr(split_route, "split_blocks", spy)
    rho = rdm.reduced_density_matrix(state, sites, model.space, method="split")
    assert ran == ["split"]
    assert rdm.rdm_route(state, sites, model.space, method="split", dense=True) == "split"
    need = rdm.estimate_rdm_memory(state, sites, model.space, method="split", dense=True)
    with pytest.raises(MemoryBudgetError, match="reduced_density_matrix: the split walk over 5 sites"):
        rdm.reduced_density_matrix(state, sites, model.space, method="split", memory_budget=int(need) - 1)
    # reference: the partial trace of the dense vector (common practice); rounding only
    assert np.allclose(rho, rdm.reduced_density_matrix(state.to_vector(), sites, model.space),
                       atol=tol(factor=1e4))


def test_split_route_gives_the_fermionic_rho_of_a_free_fermion_ground_state():
    # A DMRG ground state of free fermions (V = 0) on 8 sites, exact at bond dimension 16; the split
    # route with parity strings against the correlation-matrix entropy (Peschel, J. Phys. A 36, L205
    # (2003)), which the spin-basis partial trace misses for interleaved sets (design notes, section 6)
    from netprobe.engines.dmrg import SweepSettings, find_ground_state

    model = load_model("haldane", {"length": "2", "circumference": "2", "V": "0.0", "phi": "pi/2"})
    result = find_ground_state(model, SweepSettings(bond_dimension=16, sweep_limit=8), seed=3, progress=None)
    g = filled_projector(single_particle_matrix(model), model.num_sites // 2)
    psi = result.state.to_vector()
    for sites in ([0, 3, 5], [1, 2, 6], [0, 2, 4, 7]):
        assert rdm.rdm_route(result.state, sites, model.space, method="split") == "split"
        root = rdm.reduced_root(result.state, sites, model.space, method="split")
        assert root.route == "mps-split"
        s_split = float(-np.sum(root.weights() * np.log(root.weights())))
        s_true = peschel_entropy(g, sites)
        # DMRG energy tolerance 1e-9 bounds the state error (as in the test below)
        assert abs(s_split - s_true) < PROBE_ACCEPTANCE
        zipped = rdm.reduced_density_matrix(result.state, sites, model.space, method="zipper")
        assert np.allclose(root.density_matrix(), zipped, atol=tol(factor=1e4))
        if sites == [0, 3, 5]:
            assert abs(entropy(spin_basis_rho(psi, model.num_sites, 2, sites)) - s_true) > 0.02


def test_blocked_rho_holds_only_the_charge_blocks():
    model = load_model("haldane", {"length": "3", "circumference": "2", "V": "1.0"})
    state = random_state(model.hamiltonian, bond_dimension=12, rng=5)
    sites = [0, 2, 3, 7, 9, 10]
    blocks = rdm.reduced_blocks(state, sites, model.space)
    ref = rdm.reduced_density_matrix(state.to_vector(), sites, model.space)
    assert np.allclose(blocks.density_matrix(), ref, atol=tol(factor=1e4))
    # block sizes are the numbers of configurations of S with each (N, parity): binomials (common practice)
    sizes = sorted(len(b.codes) for b in blocks.blocks)
    assert sizes == sorted(math.comb(6, k) for k in range(7))
    assert blocks.nbytes < ref.nbytes


@pytest.mark.parametrize("name, overrides, sites", [
    # gaps of traced sites on both walks, a set that starts and ends the chain, a single site
    ("heisenberg", {"lattice": "square", "circumference": "3", "length": "4"}, [1, 2, 5, 9, 10]),
    ("heisenberg", {"lattice": "square", "circumference": "3", "length": "4"}, [0, 11]),
    ("heisenberg", {"lattice": "square", "circumference": "3", "length": "4"}, [6]),
    ("tfim", {"length": "10"}, [2, 3, 5, 8]),  # Z2 parity as the charge
    ("kagome_chiral", {}, [0, 2, 3, 7, 8, 11]),  # complex couplings
])
def test_split_walks_equal_the_dense_vector_route(name, overrides, sites):
    # reference: the partial trace of the dense state vector (common practice)
    model = load_model(name, overrides)
    state = random_state(model.hamiltonian, bond_dimension=16, rng=3)
    ref = rdm.reduced_density_matrix(state.to_vector(), sites, model.space)
    rho = rdm.reduced_density_matrix(state, sites, model.space, method="split")
    assert np.allclose(rho, ref, atol=tol(factor=1e4))
    assert rdm.reduced_root(state, sites, model.space, method="split").route == "mps-split"


@pytest.mark.parametrize("pieces", [False, True])
def test_upper_tiles_and_hermitian_fill_rebuild_a_hermitian_matrix(rng, pieces):
    # Reference: a random Hermitian matrix (common practice: rho = rho^dagger). The block has three sector
    # pairs of (left, right) open states; the join's helpers write the sub-blocks above the diagonal and
    # the tiles i <= j of the diagonal ones (with ``pieces``: the columns of each diagonal sub-block in
    # two disjoint sets of right bra states), and the fill must give back the whole matrix, bit for bit.
    pairs = [(3, 2), (1, 4), (4, 3)]
    spans, off = [], 0
    for xl, xr in pairs:
        spans.append((off, xl, xr))
        off += xl * xr
    a = rng.normal(size=(off, off)) + 1j * rng.normal(size=(off, off))
    full = a + a.conj().T
    built = np.zeros_like(full)
    for k, (r0, xl, xr) in enumerate(spans):
        for c0, yl, yr in spans[k + 1:]:
            built[r0:r0 + xl * xr, c0:c0 + yl * yr] = full[r0:r0 + xl * xr, c0:c0 + yl * yr]
        sub = full[r0:r0 + xl * xr, r0:r0 + xl * xr].reshape(xl, xr, xl, xr).transpose(0, 2, 1, 3)
        rows = sub.reshape(xl * xl, xr * xr)[rdm_tiles.upper_pairs(xl)]  # (i <= j, (a, b))
        if not pieces:
            rdm_tiles.add_upper_tiles(built, rows, r0, r0, xl, xr, xr, None)
            continue
        for pos in (np.arange(xr)[::2], np.arange(xr)[1::2]):
            part = rows.reshape(-1, xr, xr)[:, :, pos].reshape(len(rows), -1)
            rdm_tiles.add_upper_tiles(built, part, r0, r0, xl, xr, xr, pos)
    assert not np.array_equal(built, full)  # the lower half is still missing
    rdm_tiles.fill_hermitian(built, spans)
    assert np.array_equal(built, full)


@pytest.mark.parametrize("dtype", [np.float64, np.complex128])
def test_block_eigenvalues_match_scipy(rng, dtype):
    # reference: scipy's one-stage eigvalsh (general-purpose library); both backward stable, so they agree
    # to a few hundred ulps of the largest eigenvalue for n = 500 (common practice: error ~ n eps ||H||)
    from netprobe.rdm.spectra import TWO_STAGE_MIN, hermitian_eigenvalues

    n = TWO_STAGE_MIN + 116
    x = rng.standard_normal((n, n)) + (1j * rng.standard_normal((n, n)) if dtype is np.complex128 else 0.0)
    h = (x @ x.conj().T).astype(dtype)
    ref = scipy.linalg.eigvalsh(h)
    kept = h.copy()
    w = hermitian_eigenvalues(h)
    assert np.array_equal(h, kept)  # the input is left alone unless overwrite is asked for
    assert np.allclose(w, ref, rtol=0, atol=tol(ref.max(), factor=n))
    small = h[:5, :5]
    assert np.allclose(hermitian_eigenvalues(small), scipy.linalg.eigvalsh(small), atol=tol(ref.max()))


#: small cases of the split route with their sites: real spins, complex couplings, fermion strings
SPLIT_CASES = [
    ("heisenberg", {"lattice": "square", "circumference": "3", "length": "4"}, (1, 2, 5, 9, 10)),
    ("kagome_chiral", {}, (0, 2, 3, 7, 8, 11)),  # complex
    ("haldane", {"length": "3", "circumference": "2", "V": "1.0"}, (0, 2, 3, 7, 9, 10)),  # fermion strings
]


def _split_case(name, overrides, sites):
    """Model, seeded random MPS (bond dimension 16) and the reference rho of ``sites`` from its dense vector."""
    model = load_model(name, overrides)
    state = random_state(model.hamiltonian, bond_dimension=16, rng=3)
    return model, state, rdm.reduced_density_matrix(state.to_vector(), list(sites), model.space)


def _budget_under_one_step(model, state, sites):
    """The one-step plan and a memory budget just under its peak (so that the planner must go deeper)."""
    shallow = split_route._plan(state, sites, 1e30)
    item = np.dtype(state.dtype).itemsize
    return shallow, int(8.0 * model.space.dim ** len(sites) + 0.999 * shallow.peak * item)


@pytest.mark.parametrize("name, overrides, sites", SPLIT_CASES)
def test_split_walk_steps_on_several_threads_equal_the_dense_vector_route(monkeypatch, name, overrides, sites):
    # reference: the partial trace of the dense state vector (common practice); every step split among
    # three threads by ket sector, the right walk also in pieces (the bra legs of its own)
    model, state, ref = _split_case(name, overrides, sites)
    monkeypatch.setattr(split_route, "PARALLEL_ENTRIES", 0)
    monkeypatch.setattr(split_route, "_blas_threads", lambda: 3)
    rho = rdm.reduced_density_matrix(state, list(sites), model.space, method="split")
    assert np.allclose(rho, ref, atol=tol(factor=1e4))
    monkeypatch.setattr(split_route, "MAX_STREAMED", 1)
    shallow, budget = _budget_under_one_step(model, state, sites)
    blocks = rdm.reduced_blocks(state, list(sites), model.space, memory_budget=budget)
    assert np.allclose(blocks.density_matrix(), ref, atol=tol(factor=1e4))


@pytest.mark.parametrize("workers", [1, 2])
def test_blocks_side_by_side_give_scipys_eigenvalues(rng, workers):
    # reference: scipy's one-stage eigvalsh (general-purpose library), to n eps ||H|| as above (common
    # practice); the blocks come back in the order given whatever order the workers take them in
    from netprobe.rdm.spectra import TWO_STAGE_MIN, block_eigenvalues

    sizes = [5, TWO_STAGE_MIN + 40, TWO_STAGE_MIN, TWO_STAGE_MIN + 80, 30]
    mats = []
    for n, dtype in zip(sizes, [np.complex128, np.float64, np.complex128, np.complex128, np.float64]):
        x = rng.standard_normal((n, n)) + (1j * rng.standard_normal((n, n)) if dtype is np.complex128 else 0.0)
        mats.append((x @ x.conj().T).astype(dtype))
    kept = [m.copy() for m in mats]
    got = block_eigenvalues(mats, workers=workers)
    for w, m, k in zip(got, mats, kept):
        ref = scipy.linalg.eigvalsh(k)
        assert np.array_equal(m, k)
        assert np.allclose(w, ref, rtol=0, atol=tol(ref.max(), factor=len(ref)))


@pytest.mark.parametrize("name, overrides, sites", SPLIT_CASES)
def test_split_walks_done_in_pieces_equal_the_dense_vector_route(monkeypatch, name, overrides, sites):
    # reference: the partial trace of the dense state vector (common practice)
    model, state, ref = _split_case(name, overrides, sites)
    # the last steps in ranges of single bond states (every piece of the join as small as it gets)
    monkeypatch.setattr(split_route, "CHUNK_ENTRIES", 1.0)
    monkeypatch.setattr(split_route, "CHUNK_FRACTION", 0.0)
    monkeypatch.setattr(split_route, "CHUNK_MIN", 1)
    rho = rdm.reduced_density_matrix(state, list(sites), model.space, method="split")
    assert np.allclose(rho, ref, atol=tol(factor=1e4))
    # a budget just under the one-step plan's peak: deeper steps done sector by sector, same rho
    monkeypatch.setattr(split_route, "CHUNK_MIN", 10**9)
    shallow, budget = _budget_under_one_step(model, state, sites)
    deep = split_route._plan(state, sites, split_route._budget_entries(state, sites, budget))
    assert max(deep.depth) > 1 and deep.peak < shallow.peak
    blocks = rdm.reduced_blocks(state, list(sites), model.space, memory_budget=budget)
    assert np.allclose(blocks.density_matrix(), ref, atol=tol(factor=1e4))


@pytest.mark.parametrize("name, overrides, sites", SPLIT_CASES)
def test_split_walk_cut_by_the_bras_first_sites_equals_the_dense_vector_route(monkeypatch, name, overrides, sites):
    # reference: the partial trace of the dense state vector (common practice)
    model, state, ref = _split_case(name, overrides, sites)
    # no deeper streaming: a budget just under the one-step plan's peak leaves only the right walk in pieces
    monkeypatch.setattr(split_route, "MAX_STREAMED", 1)
    shallow, budget = _budget_under_one_step(model, state, sites)
    cut = split_route._plan(state, sites, split_route._budget_entries(state, sites, budget))
    assert len(cut.fixes) > 1 and cut.peak < shallow.peak
    estimate = rdm.estimate_rdm_memory(state, list(sites), model.space, method="split", memory_budget=budget)
    seen = []
    original = rdm_tables.WalkMeter.check

    def spy(meter, entries, site, width):
        seen.append(entries * meter.itemsize)
        return original(meter, entries, site, width)

    monkeypatch.setattr(rdm_tables.WalkMeter, "check", spy)
    blocks = rdm.reduced_blocks(state, list(sites), model.space, memory_budget=budget)
    assert np.allclose(blocks.density_matrix(), ref, atol=tol(factor=1e4))
    # every piece's own check (planned sizes) stays within the up-front estimate
    assert seen and max(seen) <= estimate * 1.0001
    # and the pieces of the join cut further into single bond states
    monkeypatch.setattr(split_route, "CHUNK_ENTRIES", 1.0)
    monkeypatch.setattr(split_route, "CHUNK_FRACTION", 0.0)
    monkeypatch.setattr(split_route, "CHUNK_MIN", 1)
    blocks = rdm.reduced_blocks(state, list(sites), model.space, memory_budget=budget)
    assert np.allclose(blocks.density_matrix(), ref, atol=tol(factor=1e4))


@pytest.mark.slow
@pytest.mark.parametrize("name, overrides, size, bond", [
    ("heisenberg", {"lattice": "square", "circumference": "4", "length": "6"}, 10, 64),
    ("kagome_chiral", {"length": "4", "circumference": "2"}, 10, 48),  # complex
])
def test_probe_memory_estimate_is_within_one_and_a_half_of_the_traced_peak(name, overrides, size, bond):
    # numpy reports its array allocations to tracemalloc (common practice), so the traced peak is what the
    # arrays of the probes held; issue 11 asks for the estimate within a factor 1.5 of the measured peak
    import tracemalloc

    from benchmarks.rdm_probe import disk_parts
    from netprobe.probes import measure_probes

    model = load_model(name, overrides)
    state = random_state(model.hamiltonian, bond_dimension=bond, rng=3)
    parts = disk_parts(model.lattice, size)
    estimate = rdm.estimate_blocks_memory(state, sorted(s for p in parts.values() for s in p), model.space)
    tracemalloc.start()
    try:
        report = measure_probes(state, parts, model.space, probes=("S", "CMI", "J"))
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert report.route == "mps-split"
    assert 1 / 1.5 <= estimate / peak <= 1.5


def test_split_walks_stay_within_their_estimate():
    spins = load_model("heisenberg", {"lattice": "square", "circumference": "4", "length": "6"})
    state = random_state(spins.hamiltonian, bond_dimension=64, rng=2)
    sites = (5, 6, 9, 10, 13, 14, 17)
    estimate = rdm.estimate_rdm_memory(state, sites, spins.space, method="split")
    seen = []
    original = rdm_tables.WalkMeter.check

    def spy(meter, entries, site, width):
        seen.append(entries * meter.itemsize)
        return original(meter, entries, site, width)

    rdm_tables.WalkMeter.check = spy
    try:
        rdm.reduced_root(state, sites, spins.space, method="split", memory_budget=2**40)
    finally:
        rdm_tables.WalkMeter.check = original
    # every step's own check (actual sizes) stays within the up-front estimate (exact sector counts)
    assert seen and max(seen) <= estimate * 1.0001
    # every plan holds the blocks of rho (even with the right walk in pieces): half of them is refused
    held = split_route._plan(state, sites, 1e30).held * np.dtype(state.dtype).itemsize
    with pytest.raises(MemoryBudgetError, match="split walk over 7 sites"):
        rdm.reduced_root(state, sites, spins.space, method="split", memory_budget=int(held / 2))


def test_dmrg_ground_state_rdm_matches_exact_engine():
    from netprobe.engines.dmrg import SweepSettings, find_ground_state

    model = load_model("haldane", {"length": "2", "circumference": "2", "V": "1.0"})
    result = find_ground_state(model, SweepSettings(bond_dimension=16, sweep_limit=8), seed=3, progress=None)
    exact = full_vector(ground_state(model.hamiltonian))
    for sites in ([0, 3, 5], [1, 2, 6]):
        s_mps = entropy(rdm.reduced_density_matrix(result.state, sites, model.space))
        s_ed = entropy(rdm.reduced_density_matrix(exact, sites, model.space))
        # bond dimension 16 is exact on 8 sites; DMRG energy tolerance 1e-9 bounds the state error
        assert abs(s_mps - s_ed) < PROBE_ACCEPTANCE


def mps_without_charges(psi, space):
    """An MPS with the trivial charge rule, by successive numpy SVDs of the vector (common practice)."""
    from netprobe.engines.mps import MPS, SiteBasis
    from netprobe.tensor import BlockTensor, Leg

    basis = SiteBasis.from_space(space, ())
    d = space.dim
    n = round(np.log(psi.size) / np.log(d))
    arrays, rest, chi = [], psi.reshape(1, -1), 1
    for _ in range(n - 1):
        u, s, vh = np.linalg.svd(rest.reshape(chi * d, -1), full_matrices=False)
        keep = s > 1e-14 * s[0]
        arrays.append(u[:, keep].reshape(chi, d, -1))
        rest, chi = s[keep, None] * vh[keep], int(keep.sum())
    arrays.append(rest.reshape(chi, d, 1))

    def bond(dim, direction):
        return Leg(np.zeros((1, 1), np.int64), np.array([dim]), direction)

    tensors = [BlockTensor.from_dense(a[:, basis.order, :], (bond(a.shape[0], 1), basis.leg,
                                                              bond(a.shape[2], -1)), None, basis.rule)
               for a in arrays]
    return MPS(tensors, basis, centre=n - 1)


def test_fermion_mps_without_particle_number_uses_the_zipper_and_checks_parity(haldane_interacting, rng):
    model, _, psi = haldane_interacting
    state = mps_without_charges(psi, model.space)
    for sites in ([0, 3, 5], [1, 4, 6, 9]):
        rho = rdm.reduced_density_matrix(state, sites, model.space)
        # one state through two routes, rounding only (common practice)
        assert np.allclose(rho, rdm.reduced_density_matrix(psi, sites, model.space), atol=tol(factor=4.5e3))
    assert rdm.reduced_root(state, [0, 3, 5], model.space).route == "mps-zipper"
    with pytest.raises(NetprobeError, match="use method='zipper' or conserved N"):
        rdm.reduced_root(state, [0, 3, 5], model.space, method="root")
    mixed = psi + rng.standard_normal(psi.size) * 0.1
    with pytest.raises(SectorError, match="mixes fermion parities"):
        rdm.reduced_root(mps_without_charges(mixed / np.linalg.norm(mixed), model.space), [0, 3], model.space)


def test_exact_results_are_accepted_directly(haldane_interacting):
    model, res, psi = haldane_interacting
    assert np.allclose(rdm.reduced_density_matrix(res, [2, 7], model.space),
                       rdm.reduced_density_matrix(psi, [2, 7], model.space))
    with pytest.raises(NetprobeError, match="expected a state vector"):
        rdm.reduced_root([0.0, 1.0], [0], SPIN)


def test_centre_outside_the_span_is_moved_on_a_copy():
    model = load_model("heisenberg", {"length": "10"})
    state = random_state(model.hamiltonian, bond_dimension=8, rng=2)
    assert state.centre == 0
    psi = state.to_vector()
    rho = rdm.reduced_density_matrix(state, [6, 9], model.space, method="root")
    assert state.centre == 0  # the caller's gauge is untouched
    assert np.allclose(rho, rdm.reduced_density_matrix(psi, [6, 9], model.space), atol=tol(factor=1e4))


def test_memory_refusal_happens_before_any_contraction(monkeypatch):
    model = load_model("kagome_chiral", {})
    state = random_state(model.hamiltonian, bond_dimension=12, rng=1)

    def forbidden(*args, **kwargs):
        raise AssertionError("the contraction started before the budget check")

    monkeypatch.setattr(root_route, "root_walk", forbidden)
    monkeypatch.setattr(zipper_route, "zipper_rho", forbidden)
    monkeypatch.setattr(split_route, "split_blocks", forbidden)
    for method in ("root", "zipper", "split", "auto"):
        with pytest.raises(MemoryBudgetError, match=r"would need about .* [KMG]iB, over the memory budget .*fewer"):
            rdm.reduced_root(state, [0, 3, 5, 6, 10], model.space, method=method, memory_budget=1000)
    monkeypatch.setattr(resources, "default_memory_budget", lambda: 1000)
    with pytest.raises(MemoryBudgetError, match="raise --memory-budget"):
        rdm.reduced_density_matrix(state, [0, 3, 5], model.space)
    with pytest.raises(MemoryBudgetError, match="memory budget"):
        rdm.reduced_density_matrix(state.to_vector(), [0, 3, 5], model.space)


def test_walk_refuses_a_step_before_allocating_it(monkeypatch):
    # A random MPS fills e up to its dimension bound, beyond the up-front estimate (which assumes a
    # weakly entangled region): a budget between the two passes the up-front check, and the walk
    # itself must stop at the first step that would not fit, before that step's kernels run.
    model = load_model("kagome_chiral", {})
    state = random_state(model.hamiltonian, bond_dimension=12, rng=1)
    sites = [0, 3, 5, 6, 10]
    calls = []

    def recording(name, kernel):
        def run(*args, **kwargs):
            out = kernel(*args, **kwargs)
            first = out[0] if isinstance(out, tuple) else out
            calls.append((name, sum(b.nbytes for b in first.blocks.values())))
            return out
        return run

    for name in ("contract", "svd", "diag_multiply", "_fuse_open"):
        monkeypatch.setattr(root_route, name, recording(name, getattr(root_route, name)))
    full = rdm.reduced_root(state, sites, model.space, method="root", memory_budget=2**40)
    done = list(calls)
    upfront = rdm.estimate_rdm_memory(state, sites, model.space, method="root")
    assert upfront < full.peak_estimate  # the case really needs the step checks
    budget = int((upfront + full.peak_estimate) / 2)
    calls.clear()
    with pytest.raises(MemoryBudgetError, match=r"at site \d+ with e of width \d+, would need about .* [KMG]iB, "
                                                r"over the memory budget .*fewer sites"):
        rdm.reduced_root(state, sites, model.space, method="root", memory_budget=budget)
    # the refused walk is the start of the full one, stopped before it finished; none of its
    # allocations came near the budget
    assert 0 < len(calls) < len(done) and calls == done[: len(calls)]
    assert max(size for _, size in calls) < budget
    # with the peak as budget the walk goes through and gives the same root
    enough = int(full.peak_estimate) + 1
    again = rdm.reduced_root(state, sites, model.space, method="root", memory_budget=enough)
    assert again.peak_estimate == full.peak_estimate
    assert np.allclose(again.density_matrix(), full.density_matrix(), atol=tol())


def test_memory_estimate_bounds_what_the_root_route_holds():
    model = load_model("kagome_chiral", {})
    state = random_state(model.hamiltonian, bond_dimension=16, rng=4)
    sites = [0, 2, 5, 6, 9, 10]
    root = rdm.reduced_root(state, sites, model.space, method="root")
    estimate = rdm.estimate_rdm_memory(state, sites, model.space, method="root")
    assert root.nbytes <= estimate
    assert rdm.estimate_rdm_memory(state, sites, model.space, method="zipper") > estimate


# ----------------------------------------------------------------------------------------------
# User mistakes
# ----------------------------------------------------------------------------------------------


def test_bad_site_sets_and_states_raise_clear_errors(rng):
    psi = _random_spin_vector(rng, 6)
    with pytest.raises(LatticeError, match="site 6 is not an MPS index of a lattice with 6 sites"):
        rdm.reduced_density_matrix(psi, [0, 6], SPIN)
    with pytest.raises(LatticeError, match=r"site\(s\) \[2\] listed twice"):
        rdm.reduced_density_matrix(psi, [2, 2], SPIN)
    with pytest.raises(LatticeError, match="the site set is empty"):
        rdm.reduced_root(psi, [], SPIN)
    with pytest.raises(NetprobeError, match="length d\\*\\*N"):
        rdm.reduced_density_matrix(psi[:50], [0], SPIN)
    with pytest.raises(NetprobeError, match="valid methods: auto, vector, root, zipper, split"):
        rdm.reduced_root(psi, [0], SPIN, method="fast")
    mixed = _random_spin_vector(rng, 6)  # every occupation pattern, both parities
    with pytest.raises(SectorError, match="mixes fermion parities"):
        rdm.reduced_density_matrix(mixed, [0, 2], FERMION)
    with pytest.raises(LatticeError, match="parts must be disjoint"):
        rdm.reorder_parts(np.eye(8) / 8, [0, 1, 2], {"A": [0, 1], "B": [1, 2]}, SPIN)
