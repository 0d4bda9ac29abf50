"""Independent references for the tests, written with numpy only: dense Hamiltonians, exact solutions and
free-fermion references. Test modules import them from here, never from each other.
"""

import itertools
from functools import reduce

import numpy as np

from netprobe.engines.exact import hamiltonian_matrix, sector_basis

__all__ = [
    "kron_all",
    "dense_from_products",
    "pfeuty_chain",
    "spin_basis_rho",
    "entropy",
    "slater_vector",
    "peschel_entropy",
    "jw_annihilators",
    "single_particle_matrix",
    "filled_projector",
    "site_modes",
]


# ----------------------------------------------------------------------------------------------
# dense Hamiltonians
# ----------------------------------------------------------------------------------------------


def kron_all(mats):
    """Kronecker product, first factor leftmost (site 0 most significant)."""
    return reduce(np.kron, mats, np.array([[1.0]]))


def dense_from_products(ham):
    """Full-space matrix of a netprobe Hamiltonian built by Kronecker products (small N only)."""
    n, d = ham.num_sites, ham.space.dim
    out = np.zeros((d**n, d**n), dtype=complex)
    for p in ham.products:
        ops = [np.eye(d)] * n
        for s, m in zip(p.sites, p.matrices):
            ops[s] = m
        out += p.coefficient * kron_all(ops)
    return out


# ----------------------------------------------------------------------------------------------
# exact solutions
# ----------------------------------------------------------------------------------------------


def pfeuty_chain(length, h, coupling=1.0):
    """Open transverse-field Ising chain H = -J sum Z Z - h sum X from its free-fermion solution.

    The quasiparticle energies are twice the singular values s_k of the bidiagonal matrix with h on the
    diagonal and J above it; E0 = -sum s_k, and <X> per site = (1/L) sum_k ds_k/dh = tr(U V^T)/L
    (Pfeuty, Ann. Phys. 57, 79 (1970); Lieb, Schultz, Mattis, Ann. Phys. 16, 407 (1961)).
    """
    t = np.diag(np.full(length, float(h))) + np.diag(np.full(length - 1, float(coupling)), 1)
    u, s, vh = np.linalg.svd(t)
    return -float(s.sum()), float(np.trace(u @ vh)) / length


# ----------------------------------------------------------------------------------------------
# reduced states and free fermions
# ----------------------------------------------------------------------------------------------


def spin_basis_rho(psi, n, d, sites):
    """The ordinary (tensor-product) partial trace: correct for spins, wrong for fermions."""
    rest = [k for k in range(n) if k not in sites]
    m = np.transpose(psi.reshape((d,) * n), list(sites) + rest).reshape(d ** len(sites), -1)
    return m @ m.conj().T


def entropy(rho):
    w = np.linalg.eigvalsh(rho)
    w = w[w > 1e-300]
    return float(-np.sum(w * np.log(w)))


def slater_vector(phi):
    """Many-body amplitudes of prod_k (sum_i phi[i, k] c_i^dag) |0> in the JW occupation basis.

    Sorting the creation operators into ascending mode order gives the amplitude det(phi[occupied, :])
    on the occupied set (common practice).
    """
    n, nf = phi.shape
    vec = np.zeros(2**n, dtype=complex)
    for occ in itertools.combinations(range(n), nf):
        vec[sum(2 ** (n - 1 - i) for i in occ)] = np.linalg.det(phi[list(occ), :])
    return vec


def peschel_entropy(g, modes):
    """S = -sum [nu ln nu + (1 - nu) ln(1 - nu)] over eigenvalues of G restricted to the modes
    (Peschel, J. Phys. A 36, L205 (2003))."""
    nu = np.clip(np.linalg.eigvalsh(g[np.ix_(modes, modes)]), 1e-14, 1 - 1e-14)
    return float(-np.sum(nu * np.log(nu) + (1 - nu) * np.log(1 - nu)))


def jw_annihilators(n):
    """Matrices of c_j = Z x ... x Z x a x 1 x ... (Jordan-Wigner, mode 0 leftmost; common practice)."""
    z, a, one = np.diag([1.0, -1.0]), np.array([[0.0, 1.0], [0.0, 0.0]]), np.eye(2)
    out = []
    for j in range(n):
        mat = np.array([[1.0]])
        for op in [z] * j + [a] + [one] * (n - j - 1):
            mat = np.kron(mat, op)
        out.append(mat)
    return out


def single_particle_matrix(model):
    """h_ij = <0| c_i H c_j^dag |0> from the exact engine's one-particle sector (modes in MPS order).

    A one-particle basis state c_j^dag |0> carries no Jordan-Wigner sign, so the sector matrix is h itself.
    """
    ham = model.hamiltonian.with_sector({"N": 1})
    basis = sector_basis(ham)
    h1 = hamiltonian_matrix(ham, basis).toarray()
    states = basis.states()
    occupied = np.argmax(states > 0, axis=1)
    local = states[np.arange(len(states)), occupied]
    # mode index: site * modes per site + orbital (spinful_fermion: up = state 1, down = state 2)
    per_site = 1 if model.space.dim == 2 else 2
    mode = occupied * per_site + (local - 1 if per_site == 2 else 0)
    h = np.zeros((len(mode), len(mode)), dtype=complex)
    h[np.ix_(mode, mode)] = h1
    return h


def filled_projector(h, nf):
    e, u = np.linalg.eigh(h)
    assert e[nf] - e[nf - 1] > 1e-6, "degenerate Fermi level: the free-fermion reference is ambiguous"
    phi = u[:, :nf]
    return phi @ phi.conj().T  # G_ij = <c_j^dag c_i>


def site_modes(sites, per_site):
    return [s * per_site + k for s in sites for k in range(per_site)]
