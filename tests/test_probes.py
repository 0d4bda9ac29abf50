"""Entanglement probes: entropy kernels, CMI, Kitaev-Preskill, and the modular commutator J."""

import functools
import json
import math

import numpy as np
import pytest
from scipy.stats import unitary_group

from netprobe import probes, rdm
from netprobe.errors import LatticeError, MemoryBudgetError, NetprobeError
from netprobe.engines.exact import full_vector, ground_state
from netprobe.engines.mps import random_state
from netprobe.model.sites import site_space
from netprobe.model.spec import load_model

from conftest import tol
from references import filled_projector, single_particle_matrix, slater_vector

SPIN = site_space("spin-1/2")
FERMION = site_space("fermion")
LANCZOS_TOL = 1e-8  # exact-engine eigenvectors from eigsh with tol 1e-10 (see test_rdm)
# entropies and J from dense eigendecompositions of reduced states of at most 2^6 dimensions: each
# eigenvalue and log carries ~1e3 ulps, summed over the spectrum (common practice)
DENSE_LOG = 1e-10
# J of a product rho_A x rho_BC (or rho_AB x rho_C) of 2-12 dimensions is 0 exactly; rounding only
PRODUCT_J = 1e-11
# J through scipy.linalg.logm (Schur-Pade), or with modular Hamiltonians floored on a kernel: logm and the
# floor add errors of ~1e-11 relative on top of DENSE_LOG
LOGM_J = 1e-9
FLOORED_J = 1e-9
# eigenvalues below this fraction of the largest span the kernel of a rank-4 rho_AB (its zeros come out of
# eigh at ~1e-16)
KERNEL_FLOOR = 1e-12
# S_n - S_1 is O(n - 1) (common practice): at n - 1 = 1e-6 and O(1) coefficients the difference stays
# below 1e-5
RENYI_STEP = 1e-6
RENYI_SLOPE = 1e-5


def random_density_matrix(rng, d, rank=None):
    x = rng.standard_normal((d, rank or d)) + 1j * rng.standard_normal((d, rank or d))
    rho = x @ x.conj().T
    return rho / np.trace(rho).real


def numpy_entropy(rho):
    w = np.linalg.eigvalsh(rho)
    w = w[w > 1e-300]
    return float(-np.sum(w * np.log(w)))


def numpy_j(rho, dims):
    """J = i Tr(rho [K_AB x 1, 1 x K_BC]) written out with numpy and scipy.linalg.logm on full-rank
    reduced matrices (definition, Phys. Rev. Lett. 128, 176402 (2022))."""
    from scipy.linalg import logm

    da, db, dc = dims
    t = rho.reshape(da, db, dc, da, db, dc)
    rho_ab = np.einsum("abcxyc->abxy", t).reshape(da * db, da * db)
    rho_bc = np.einsum("abcayz->bcyz", t).reshape(db * dc, db * dc)
    k_ab = np.kron(-logm(rho_ab), np.eye(dc))
    k_bc = np.kron(np.eye(da), -logm(rho_bc))
    return float(np.real(1j * np.trace(rho @ (k_ab @ k_bc - k_bc @ k_ab))))


@pytest.fixture(scope="module")
def kagome_state():
    model = load_model("kagome_chiral", {})
    return model, full_vector(ground_state(model.hamiltonian))


KAGOME_PARTS = {"A": [0, 1, 6], "B": [2, 3, 7], "C": [4, 8, 9]}


# ----------------------------------------------------------------------------------------------
# Entropy kernels
# ----------------------------------------------------------------------------------------------


def test_entropy_kernels_on_known_spectra(rng):
    d = 6
    # maximally mixed state: S = S_n = ln d for every order (common practice)
    for order in (0.5, 1, 2, 3, math.inf):
        assert abs(probes.renyi_entropy(np.eye(d) / d, order) - math.log(d)) < tol()
    w = rng.dirichlet(np.ones(d))
    rho = random_density_matrix(rng, d)
    vals = np.linalg.eigvalsh(rho)
    # formulas of the definitions, evaluated with numpy (common practice)
    assert abs(probes.entropy_from_weights(w) + np.sum(w * np.log(w))) < tol()
    assert abs(probes.renyi_from_weights(w, 2) + np.log(np.sum(w**2))) < tol()
    assert abs(probes.von_neumann_entropy(rho) + np.sum(vals * np.log(vals))) < tol()
    # Renyi approaches von Neumann as n -> 1 (common practice); the difference is O(n - 1)
    assert abs(probes.renyi_from_weights(w, 1 + RENYI_STEP) - probes.entropy_from_weights(w)) < RENYI_SLOPE
    y = rng.standard_normal((d, 3)) + 1j * rng.standard_normal((d, 3))
    assert np.allclose(np.sort(probes.root_weights(y)), np.sort(np.linalg.eigvalsh(y @ y.conj().T))[-3:],
                       atol=tol(np.linalg.norm(y) ** 2))


def test_partial_trace_matches_numpy_einsum(rng):
    dims = (2, 3, 2)
    op = random_density_matrix(rng, 12)
    t = op.reshape(dims + dims)
    # reference: numpy einsum over the traced legs (common practice)
    assert np.allclose(probes.partial_trace(op, dims, [0, 2]), np.einsum("abcxbz->acxz", t).reshape(4, 4))
    assert np.allclose(probes.partial_trace(op, dims, [1]), np.einsum("abcaxc->bx", t))
    assert np.allclose(probes.partial_trace(op, dims, [0, 1, 2]), op)


def test_fermionic_partial_trace_of_a_middle_part_is_the_free_fermion_one(rng):
    n, nf = 6, 3
    q, _ = np.linalg.qr(rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n)))
    phi = q[:, :nf]
    g = phi @ phi.conj().T
    psi = slater_vector(phi)
    rho = np.outer(psi, psi.conj())
    par = [np.array([0, 1])] * n
    for keep in ([0, 2, 5], [1, 4], [0, 5]):
        rho_k = probes.partial_trace(rho, (2,) * n, keep, parities=par)
        nu = np.clip(np.linalg.eigvalsh(g[np.ix_(keep, keep)]), 1e-14, 1 - 1e-14)
        # Peschel, J. Phys. A 36, L205 (2003)
        assert abs(numpy_entropy(rho_k) - float(-np.sum(nu * np.log(nu) + (1 - nu) * np.log(1 - nu)))) < DENSE_LOG


def test_cmi_is_nonnegative_and_kitaev_preskill_vanishes_for_products(rng, kagome_state):
    model, psi = kagome_state
    for parts in (KAGOME_PARTS, {"A": [0, 5], "B": [1, 2, 9], "C": [10, 11]}):
        rep = probes.measure_probes(psi, parts, model.space, probes=("CMI", "TEE"))
        # strong subadditivity (Lieb and Ruskai, J. Math. Phys. 14, 1938 (1973))
        assert rep.cmi > -1e-12
    # mixed random states on three qubits through the same kernels
    for _ in range(5):
        rho = random_density_matrix(rng, 8)
        s = {tuple(k): numpy_entropy(probes.partial_trace(rho, (2, 2, 2), k)) for k in
             ([0], [1], [2], [0, 1], [1, 2], [0, 2], [0, 1, 2])}
        cmi = probes.conditional_mutual_information(s[(0, 1)], s[(1, 2)], s[(1,)], s[(0, 1, 2)])
        assert cmi > -1e-12  # Lieb and Ruskai, J. Math. Phys. 14, 1938 (1973)
    # for rho_A x rho_B x rho_C every entropy is additive, so the combination is 0 (common practice)
    ra, rb, rc = (random_density_matrix(rng, 2) for _ in range(3))
    prod = np.kron(np.kron(ra, rb), rc)
    s = {k: numpy_entropy(probes.partial_trace(prod, (2, 2, 2), k)) for k in
         ((0,), (1,), (2,), (0, 1), (1, 2), (0, 2), (0, 1, 2))}
    kp = probes.kitaev_preskill_combination(s[(0,)], s[(1,)], s[(2,)], s[(0, 1)], s[(1, 2)], s[(0, 2)],
                                            s[(0, 1, 2)])
    assert abs(kp) < tol(10)
    assert probes.levin_wen_gamma(2 * math.log(2)) == math.log(2)


def test_probe_entropies_equal_numpy_partial_traces(kagome_state):
    model, psi = kagome_state
    rep = probes.measure_probes(psi, KAGOME_PARTS, model.space)
    n = model.num_sites
    t = psi.reshape((2,) * n)
    for label in ("A", "B", "C", "AB", "BC", "AC", "ABC"):
        sites = sorted(s for name in label for s in KAGOME_PARTS[name])
        rest = [k for k in range(n) if k not in sites]
        m = np.transpose(t, sites + rest).reshape(2 ** len(sites), -1)
        # spins: the ordinary partial trace (common practice)
        assert abs(rep.entropies[label] - numpy_entropy(m @ m.conj().T)) < DENSE_LOG
    e = rep.entropies
    assert abs(rep.cmi - (e["AB"] + e["BC"] - e["B"] - e["ABC"])) < tol(10)
    assert abs(rep.gamma + (e["A"] + e["B"] + e["C"] - e["AB"] - e["BC"] - e["AC"] + e["ABC"])) < tol(10)


# ----------------------------------------------------------------------------------------------
# Modular commutator: exact properties (shared/references.md, "Exact properties of J")
# ----------------------------------------------------------------------------------------------


def test_dense_j_kernels_agree_with_the_definition(rng):
    dims = (2, 3, 2)
    rho = random_density_matrix(rng, 12)
    ref = numpy_j(rho, dims)
    assert abs(ref) > 1e-3  # a generic complex state has J != 0
    # definition written out with scipy.linalg.logm (Phys. Rev. Lett. 128, 176402 (2022)); rounding only
    assert abs(probes.modular_commutator(rho, dims).value - ref) < DENSE_LOG
    w, v = np.linalg.eigh(rho)
    y = v * np.sqrt(np.clip(w, 0, None))
    assert abs(probes.modular_commutator_root(y, dims).value - ref) < DENSE_LOG


def test_j_is_odd_under_swapping_a_and_c_and_under_conjugation(rng, kagome_state):
    model, psi = kagome_state
    j = probes.measure_probes(psi, KAGOME_PARTS, model.space, probes=("J",)).modular_commutator.value
    swapped = {"A": KAGOME_PARTS["C"], "B": KAGOME_PARTS["B"], "C": KAGOME_PARTS["A"]}
    j_swap = probes.measure_probes(psi, swapped, model.space, probes=("J",)).modular_commutator.value
    j_conj = probes.measure_probes(psi.conj(), KAGOME_PARTS, model.space,
                                   probes=("J",)).modular_commutator.value
    assert abs(j) > 1e-2  # the chiral state has J != 0 on these parts
    # J(C,B,A) = -J(A,B,C) and J(psi*) = -J(psi) (references.md, exact properties of J); rounding only
    assert abs(j + j_swap) < DENSE_LOG
    assert abs(j + j_conj) < DENSE_LOG
    rho = random_density_matrix(rng, 8)
    rho_cba = rho.reshape([2] * 6).transpose(2, 1, 0, 5, 4, 3).reshape(8, 8)
    swap = probes.modular_commutator(rho_cba, (2, 2, 2))
    assert abs(probes.modular_commutator(rho, (2, 2, 2)).value + swap.value) < DENSE_LOG


def test_j_vanishes_for_a_real_state():
    model = load_model("heisenberg", {"length": "12"})
    psi = full_vector(ground_state(model.hamiltonian))
    assert not np.iscomplexobj(psi) or np.max(np.abs(psi.imag)) == 0
    for parts in ({"A": [0, 1], "B": [2, 3, 4], "C": [5, 6]}, {"A": [1, 7], "B": [2, 9, 11], "C": [0, 4, 5]}):
        j = probes.measure_probes(psi, parts, model.space, probes=("J",)).modular_commutator
        # a state real in a product basis has J = 0 (references.md)
        assert abs(j.value) < DENSE_LOG and abs(j.value_loose) < DENSE_LOG


def test_j_vanishes_for_pure_and_product_states(rng, kagome_state):
    model, psi = kagome_state
    whole = {"A": [0, 1, 2, 3], "B": [4, 5, 6, 7], "C": [8, 9, 10, 11]}
    j_pure = probes.measure_probes(psi, whole, model.space, probes=("J",)).modular_commutator.value
    # J = 0 when rho_ABC is pure (references.md); Lanczos accuracy of the vector
    assert abs(j_pure) < LANCZOS_TOL
    ra, rbc = random_density_matrix(rng, 2), random_density_matrix(rng, 6)
    rab, rc = random_density_matrix(rng, 6), random_density_matrix(rng, 3)
    # rho_A x rho_BC and rho_AB x rho_C give J = 0 (references.md); rounding only
    assert abs(probes.modular_commutator(np.kron(ra, rbc), (2, 2, 3)).value) < PRODUCT_J
    assert abs(probes.modular_commutator(np.kron(rab, rc), (2, 3, 3)).value) < PRODUCT_J
    ya, ybc = np.linalg.cholesky(ra), np.linalg.cholesky(rbc)
    assert abs(probes.modular_commutator_root(np.kron(ya, ybc), (2, 2, 3)).value) < PRODUCT_J


def test_j_is_unchanged_by_local_unitaries(rng, kagome_state):
    model, psi = kagome_state
    sites = sorted(sum(KAGOME_PARTS.values(), []))
    rho, dims = rdm.reorder_parts(rdm.reduced_density_matrix(psi, sites, model.space), sites, KAGOME_PARTS,
                                  model.space)
    ua, ub, uc = (unitary_group.rvs(d, random_state=seed) for seed, d in enumerate(dims, start=1))
    u = np.kron(np.kron(ua, ub), uc)
    j = probes.modular_commutator(rho, dims).value
    j_rot = probes.modular_commutator(u @ rho @ u.conj().T, dims).value
    # invariance under U_A x U_B x U_C (references.md); rounding only
    assert abs(j) > 1e-2 and abs(j - j_rot) < DENSE_LOG


def test_block_route_agrees_with_dense_kernels(kagome_state):
    model, psi = kagome_state
    sites = sorted(sum(KAGOME_PARTS.values(), []))
    rho, dims = rdm.reorder_parts(rdm.reduced_density_matrix(psi, sites, model.space), sites, KAGOME_PARTS,
                                  model.space)
    rep = probes.measure_probes(psi, KAGOME_PARTS, model.space, probes=("J",))
    assert abs(rep.modular_commutator.value - numpy_j(rho, dims)) < LOGM_J  # definition with scipy logm
    assert abs(rep.modular_commutator.value - probes.modular_commutator(rho, dims).value) < DENSE_LOG


def test_kernel_floor_is_exact_on_the_kernel(rng):
    # rho_AB of rank 4 out of 16: K_AB is arbitrary on its kernel, and J must not care
    # (supp rho_ABC lies in supp(rho_AB) x H_C; design notes, section 7)
    dims = (4, 4, 2)
    y = rng.standard_normal((32, 2)) + 1j * rng.standard_normal((32, 2))
    rho = y @ y.conj().T
    rho /= np.trace(rho).real
    mc = probes.modular_commutator(rho, dims)
    assert mc.rank_ab == 4
    k_ab = probes.modular_hamiltonian(probes.partial_trace(rho, dims, [0, 1]))
    k_bc = probes.modular_hamiltonian(probes.partial_trace(rho, dims, [1, 2]))
    w, v = np.linalg.eigh(probes.partial_trace(rho, dims, [0, 1]))
    ker = v[:, w < KERNEL_FLOOR * w.max()]
    x = rng.standard_normal((ker.shape[1],) * 2)
    k_ab_other = k_ab + ker @ (x + x.T) @ ker.conj().T
    for k in (k_ab, k_ab_other):
        big_ab, big_bc = np.kron(k, np.eye(2)), np.kron(np.eye(4), k_bc)
        j = float(np.real(1j * np.trace(rho @ (big_ab @ big_bc - big_bc @ big_ab))))
        assert abs(j - mc.value) < FLOORED_J
    assert abs(mc.value) > 1e-3
    assert abs(mc.floor_shift) < FLOORED_J
    assert abs(probes.modular_commutator_root(y / np.linalg.norm(y), dims).value - mc.value) < FLOORED_J


def test_free_fermion_j_of_a_slater_determinant(rng):
    # J = i Tr(G_ABC [h_AB + 0_C, 0_A + h_BC]), h_X = ln[(1 - G_X) G_X^-1], G_ij = <c_j^dag c_i>
    # (shared/references.md, free-fermion formulas)
    n, nf = 10, 5
    q, _ = np.linalg.qr(rng.standard_normal((n, n)) + 1j * rng.standard_normal((n, n)))
    phi = q[:, :nf]
    g = phi @ phi.conj().T
    parts = {"A": [0, 4], "B": [2, 6], "C": [3, 7, 9]}
    j_ff = free_fermion_j(g, parts)
    rep = probes.measure_probes(slater_vector(phi), parts, FERMION, probes=("J", "CMI"))
    assert abs(j_ff) > 1e-2
    assert abs(rep.modular_commutator.value - j_ff) < LOGM_J  # rounding of the 2^10 vector only
    assert rep.cmi > -1e-12  # Lieb and Ruskai, J. Math. Phys. 14, 1938 (1973)


def free_fermion_j(g, parts):
    abc = parts["A"] + parts["B"] + parts["C"]
    idx = {s: i for i, s in enumerate(abc)}

    def embedded(modes):
        nu, w = np.linalg.eigh(g[np.ix_(modes, modes)])
        nu = np.clip(nu, 1e-14, 1 - 1e-14)
        out = np.zeros((len(abc),) * 2, dtype=complex)
        rows = [idx[s] for s in modes]
        out[np.ix_(rows, rows)] = (w * np.log((1 - nu) / nu)) @ w.conj().T
        return out

    h_ab = embedded(parts["A"] + parts["B"])
    h_bc = embedded(parts["B"] + parts["C"])
    return float(np.real(1j * np.trace(g[np.ix_(abc, abc)] @ (h_ab @ h_bc - h_bc @ h_ab))))


def test_noninteracting_haldane_j_equals_free_fermion_value():
    model = load_model("haldane", {"length": "3", "circumference": "2", "V": "0.0", "phi": "pi/2"})
    psi = full_vector(ground_state(model.hamiltonian))
    g = filled_projector(single_particle_matrix(model), model.num_sites // 2)
    for parts in ({"A": [0, 4], "B": [2, 6], "C": [3, 7, 9]}, {"A": [5, 1], "B": [0, 8, 10], "C": [3, 11]}):
        rep = probes.measure_probes(psi, parts, model.space, probes=("J",))
        j_ff = free_fermion_j(g, parts)
        # free-fermion formula of shared/references.md; Lanczos accuracy of the many-body vector
        assert abs(j_ff) > 1e-2 and abs(rep.modular_commutator.value - j_ff) < LANCZOS_TOL


# ----------------------------------------------------------------------------------------------
# MPS routes through the probes
# ----------------------------------------------------------------------------------------------


# Each MPS route of the registry (rdm.ROUTES itself, so a newly registered route is crossed too) against the
# dense vector route; the split route computes the probes on the charge blocks of rho_ABC, the others on its
# square root.
ROUTE_CASES = [
    ("kagome_chiral", {}, KAGOME_PARTS),
    ("kagome_chiral", {}, {"A": [1, 7], "B": [3, 4], "C": [6, 10]}),
    ("haldane", {"length": "3", "circumference": "2", "V": "1.0"}, {"A": [0, 4, 9], "B": [1, 5, 7], "C": [2, 3, 10]}),
    ("haldane", {"length": "3", "circumference": "2", "V": "1.0"}, {"A": [0, 9], "B": [2, 5], "C": [3, 7]}),
    # parts interleaved out of MPS order: fermionic reordering of the blocks
    ("haldane", {"length": "3", "circumference": "2", "V": "1.0"}, {"A": [5, 6], "B": [0, 9], "C": [3, 10]}),
    ("chern_square", {"length": "3", "circumference": "2"}, {"A": [0], "B": [2, 4], "C": [3]}),
]
# Every combination runs in the default suite: each took at most 0.6 s on 2 loaded cores, the dense
# zipper (chi^2 d^(2m) entries) on the 9-site layouts included.


def _route_params():
    for i, (name, _, _) in enumerate(ROUTE_CASES):
        for method in rdm.ROUTES:
            if method != "vector":  # the reference itself
                yield pytest.param(i, method, id=f"{name}-{i}-{method}")


@functools.lru_cache(maxsize=None)
def _route_case(i):
    """Model, random MPS and the probes of its dense vector (the reference) for ROUTE_CASES[i]."""
    name, overrides, parts = ROUTE_CASES[i]
    model = load_model(name, overrides)
    state = random_state(model.hamiltonian, bond_dimension=12, rng=11)
    return model, state, probes.measure_probes(state.to_vector(), parts, model.space)


@pytest.mark.parametrize("case, method", list(_route_params()))
def test_mps_routes_give_the_same_probes_as_the_vector(case, method):
    model, state, ref = _route_case(case)
    parts = ROUTE_CASES[case][2]
    route = rdm.ROUTES[method]
    sites = tuple(sorted(s for part in parts.values() for s in part))
    if not route.applies(state, sites, model.space):
        pytest.skip(f"{method}: {route.unfit}")
    rep = probes.measure_probes(state, parts, model.space, method=method)
    assert rep.route == route.label
    # gauge-invariant numbers of one state, rounding only (common practice)
    for key, value in ref.entropies.items():
        assert abs(rep.entropies[key] - value) < DENSE_LOG
    assert abs(rep.modular_commutator.value - ref.modular_commutator.value) < LOGM_J
    assert abs(rep.modular_commutator.value_loose - ref.modular_commutator.value_loose) < LOGM_J
    assert abs(rep.cmi - ref.cmi) < DENSE_LOG
    assert abs(rep.kitaev_preskill - ref.kitaev_preskill) < DENSE_LOG


# ----------------------------------------------------------------------------------------------
# The entry point
# ----------------------------------------------------------------------------------------------


def test_probe_state_returns_json_with_every_probe(kagome_state):
    model, psi = kagome_state
    out = probes.probe_state(psi, KAGOME_PARTS, model.space, renyi_orders=(2,))
    text = json.dumps(out)
    assert json.loads(text) == out
    for key in ("parts", "entropies", "cmi", "kitaev_preskill", "gamma", "J", "J_loose", "eps", "eps_loose",
                "c_minus", "route", "renyi"):
        assert key in out
    assert set(out["entropies"]) == {"A", "B", "C", "AB", "BC", "AC", "ABC"}
    assert out["eps"] == 1e-12 and out["eps_loose"] == pytest.approx(1e-10)
    assert out["c_minus"] == pytest.approx(3 * out["J"] / math.pi, rel=tol(factor=4.5))
    assert out["gamma"] == -out["kitaev_preskill"]
    rep = probes.measure_probes(psi, KAGOME_PARTS, model.space)
    assert repr(rep).startswith("ProbeReport(A: 3, B: 3, C: 3;")
    assert "J=" in repr(rep.modular_commutator)


def test_layout_objects_and_single_part_layouts(kagome_state):
    model, psi = kagome_state

    class Layout:  # the duck type of a region layout: names plus item access
        names = ("A",)

        def __getitem__(self, name):
            return (0, 4, 5)

    out = probes.probe_state(psi, Layout(), model.space, probes=("S",))
    assert set(out["entropies"]) == {"A"}
    assert "J" not in out and out["cmi"] is None
    with pytest.raises(LatticeError, match="need exactly the parts A, B, C"):
        probes.probe_state(psi, Layout(), model.space)


def test_probe_state_errors(kagome_state):
    model, psi = kagome_state
    with pytest.raises(NetprobeError, match="valid probes: S, CMI, J, TEE"):
        probes.probe_state(psi, KAGOME_PARTS, model.space, probes=("J", "Chern"))
    with pytest.raises(LatticeError, match="parts must be disjoint"):
        probes.probe_state(psi, {"A": [0, 1], "B": [1, 2], "C": [3]}, model.space)
    with pytest.raises(LatticeError, match="site 12 is not an MPS index"):
        probes.probe_state(psi, {"A": [0, 12], "B": [1, 2], "C": [3]}, model.space)
    with pytest.raises(NetprobeError, match="eps=0.1 must lie in"):
        probes.probe_state(psi, KAGOME_PARTS, model.space, eps=0.1)
    with pytest.raises(MemoryBudgetError, match="memory budget"):
        probes.probe_state(psi, KAGOME_PARTS, model.space, memory_budget=10_000)
