"""Exact MPO compression: bond dimensions against the operator Schmidt rank, operators against the
uncompressed finite-state machine, energies against exact diagonalisation."""

import numpy as np
import pytest
from conftest import dense_from_products, tol

from netprobe.engines.dmrg import SweepSettings, find_ground_state
from netprobe.engines.exact import ground_state
from netprobe.engines.mps.mpo import build_mpo
from netprobe.model.spec import build_model, load_model, parse_spec


# relative energy error of DMRG at D = 64 on these sizes: exact up to the stopping rule (energy change
# 1e-11 between sweeps, measured ~1e-10 relative); 1e-8 leaves margin for the last sweep's change
DMRG_D64_ENERGY = 1e-8


_BILINEAR = "Sx Sx + Sy Sy + Sz Sz"
# (S.S)^2 written as a user would: nine on-site products per bond
_BIQUADRATIC = " + ".join(f"S{a}.S{b} S{a}.S{b}" for a in "xyz" for b in "xyz")
# the same with charge-definite factors (S.S = (1/2)(S+ S- + S- S+) + Sz Sz, squared)
_BIQUADRATIC_CHARGED = ("0.25*Sp.Sp Sm.Sm + 0.25*Sp.Sm Sm.Sp + 0.5*Sp.Sz Sm.Sz + 0.25*Sm.Sp Sp.Sm + "
                        "0.25*Sm.Sm Sp.Sp + 0.5*Sm.Sz Sp.Sz + 0.5*Sz.Sp Sz.Sm + 0.5*Sz.Sm Sz.Sp + Sz.Sz Sz.Sz")

_CHAIN = """
[model]
name = "{name}"
description = "invented test chain"
site = "{site}"
conserved = {conserved}

[parameters]
lattice = "chain"
length = {length}
circumference = 1
{sector}
{terms}
"""


def _term(ops, coupling, family="nn", conjugate=False):
    return (f'[[term]]\non = "{family}"\nops = "{ops}"\ncoupling = "{coupling}"\n'
            f'conjugate = {"true" if conjugate else "false"}\n')


def _chain(name, site, terms, *, length=6, conserved=(), sector=""):
    text = _CHAIN.format(name=name, site=site, conserved=list(conserved).__repr__().replace("'", '"'),
                         length=length, sector=f"[sector]\n{sector}\n" if sector else "", terms="\n".join(terms))
    return build_model(parse_spec(text))


def _blbq(length=6, conserved=("twice_sz",), ops=_BIQUADRATIC):
    sector = 'twice_sz = "0"' if conserved else ""
    return _chain("blbq", "spin-1", [_term(_BILINEAR, "cos(0.3)"), _term(ops, "sin(0.3)")],
                  length=length, conserved=conserved, sector=sector)


NN_CHAINS = {
    "blbq_spin1": lambda n: _blbq(n),
    "blbq_spin1_charged_factors": lambda n: _blbq(n, ops=_BIQUADRATIC_CHARGED),
    "blbq_spin1_no_charges": lambda n: _blbq(n, conserved=()),
    "heisenberg": lambda n: load_model("heisenberg", {"length": str(n), "Delta": "0.7"}),
    "tfim": lambda n: load_model("tfim", {"length": str(n)}),
    "hubbard": lambda n: load_model("hubbard", {"length": str(n), "circumference": "1"}),
    "spinless_complex_hopping": lambda n: _chain(
        "fermions", "fermion", [_term("cdag c", "-exp(0.4j)", conjugate=True), _term("n n", "0.7"),
                                _term("n", "0.2", family="sites")], length=n, conserved=("N",), sector='N = "sites / 2"'),
    "spin1_anisotropic": lambda n: _chain(
        "xxz1", "spin-1", [_term("Sx Sx + Sy Sy + 0.5*Sz Sz", "1.0"), _term("Sz2", "0.3", family="sites")],
        length=n),
}


def _bond_rank(two_site_model) -> int:
    """Operator Schmidt rank of the bond term with its identity parts removed, by numpy SVD.

    The bond term h (d^2 x d^2) is reshaped to (left operator) x (right operator), and the
    components proportional to the identity on either side (on-site terms, which need no bond
    channel) are projected out before counting singular values (common practice).
    """
    ham = two_site_model.hamiltonian
    d = ham.space.dim
    h = dense_from_products(ham).reshape(d, d, d, d)  # (s1', s2', s1, s2)
    m = h.transpose(0, 2, 1, 3).reshape(d * d, d * d)  # (s1' s1), (s2' s2)
    e = np.eye(d).reshape(-1) / np.sqrt(d)
    p = np.eye(d * d) - np.outer(e, e)
    s = np.linalg.svd(p @ m @ p, compute_uv=False)
    return int(np.sum(s > 1e-10 * max(s[0], 1.0)))  # couplings are O(0.1-1), rounding O(1e-15)


@pytest.mark.parametrize("name", sorted(NN_CHAINS))
def test_nearest_neighbour_chains_reach_rank_plus_two(name):
    rank = _bond_rank(NN_CHAINS[name](2))
    assert build_mpo(NN_CHAINS[name](8).hamiltonian).bond_dimensions == [rank + 2] * 7
    model = NN_CHAINS[name](4)
    mpo = build_mpo(model.hamiltonian)
    assert mpo.bond_dimensions == [rank + 2] * 3
    plain = build_mpo(model.hamiltonian, compress=False)
    assert list(mpo.uncompressed_bond_dimensions) == plain.bond_dimensions
    h = plain.to_dense()
    assert np.max(np.abs(mpo.to_dense() - h)) < tol(np.abs(h).max(), 1e2)


def test_bilinear_biquadratic_spin1_chain_needs_ten_channels():
    # S.S on spin 1 spans the 3 generators; (S.S)^2 adds the 5 quadrupoles: rank 8, MPO 8 + 2
    # (from memory: the traceless 3 x 3 matrices form an 8-dimensional space)
    mpo = build_mpo(_blbq(8).hamiltonian)
    assert mpo.max_bond_dimension == 10 and max(mpo.uncompressed_bond_dimensions) == 25
    assert _bond_rank(_blbq(2)) == 8


@pytest.mark.parametrize("name, params", [
    ("haldane", {"length": "2", "circumference": "2", "twist": "0.4", "flux": "0.1", "V": "0.5"}),
    ("kagome_chiral", {"length": "1", "circumference": "3", "J2": "0.3", "twice_sz": "1"}),
    ("hubbard", {"length": "4"}),
    ("heisenberg", {"lattice": "triangular", "length": "2", "circumference": "4", "J2": "0.2"}),
    ("toric_code", {"length": "2", "circumference": "2"}),
])
def test_compressed_mpo_is_the_same_operator(name, params):
    model = load_model(name, params)
    assert model.num_sites * np.log2(model.space.dim) <= 10  # dense references of at most 1024 states
    ham = model.hamiltonian
    mpo = build_mpo(ham)
    ref = dense_from_products(ham)  # the sum of operator strings, by Kronecker products
    assert np.max(np.abs(mpo.to_dense() - ref)) < tol(np.abs(ref).max(), 1e2)
    assert mpo.max_bond_dimension <= max(mpo.uncompressed_bond_dimensions)
    # charge rule on every compressed tensor: W[a, s', s, b] != 0 only if q_b = q_a + q_s' - q_s
    q = mpo.site_charges
    for w, ql, qr in zip(mpo.tensors, mpo.bond_charges[:-1], mpo.bond_charges[1:]):
        a, sp, s, b = np.nonzero(np.abs(w) > 1e-12)
        assert np.array_equal(qr[b], ql[a] + q[sp] - q[s])


def _mpo_inner(a, b) -> complex:
    """Tr(A^dag B) / d^N by a left-to-right transfer contraction (numpy einsum)."""
    d = a.tensors[0].shape[1]
    env = np.ones((1, 1))
    for wa, wb in zip(a.tensors, b.tensors):
        env = np.einsum("xy,xstu,ystv->uv", env, wa.conj(), wb) / d
    return complex(env[0, 0])


def test_width_six_kagome_compression_is_exact():
    # 54 sites: no dense matrix; the Hilbert-Schmidt distance of the two MPOs instead
    model = load_model("kagome_chiral", {"length": "6", "circumference": "3"})
    plain = build_mpo(model.hamiltonian, compress=False)
    mpo = build_mpo(model.hamiltonian)
    assert max(plain.bond_dimensions) == 47 and mpo.max_bond_dimension < 47
    aa, bb, ab = _mpo_inner(plain, plain).real, _mpo_inner(mpo, mpo).real, _mpo_inner(plain, mpo)
    # the distance is a difference of O(aa) numbers: rounding leaves ~1e-13 of aa
    assert (aa + bb - 2 * ab.real) < tol(aa, factor=4.5e4)


@pytest.mark.parametrize("model", [
    pytest.param(lambda: _blbq(6), id="blbq_spin1"),
    pytest.param(lambda: load_model("haldane", {"length": "3", "circumference": "2", "twist": "0.3"}), id="haldane"),
])
def test_dmrg_on_the_compressed_mpo_finds_the_exact_energy(model):
    model = model()
    exact = ground_state(model.hamiltonian).energy
    result = find_ground_state(model, SweepSettings(bond_dimension=64, sweep_limit=8, energy_tolerance=1e-11), seed=3, warn=False)
    # DMRG at D = 64 is exact for these sizes; the solver stops at ~1e-10 relative change
    assert abs(result.energy - exact) < DMRG_D64_ENERGY * max(1.0, abs(exact))
