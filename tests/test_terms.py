"""Operator strings in normal form: fermion signs, on-site products, Hermiticity checks.

The reference for fermion signs is the definition itself, built here by brute force: the
Jordan-Wigner operator c_j = F_0 ... F_{j-1} a_j as a full Kronecker product (Jordan and Wigner,
Z. Phys. 47, 631 (1928)); products of such matrices must equal the normal-form matrices.
"""

import itertools

import numpy as np
import pytest
from conftest import dense_from_products, kron_all, tol

from netprobe.errors import HermiticityError, OperatorError, SpecError
from netprobe.model.lattice import build_lattice
from netprobe.model.sites import SITE_SPACES, site_space
from netprobe.model.spec import load_model, parse_spec, build_model
from netprobe.model.terms import Hamiltonian, Term, normal_form


def physical_operator(space, n, site, name):
    """c-type operators with explicit strings on every earlier site (definition of JW)."""
    mats = [np.eye(space.dim)] * n
    mat = space.operator(name)
    parity_flip = (space.parity[:, None] + space.parity[None, :]) % 2
    odd = bool(np.any(np.abs(mat[parity_flip == 1]) > 0))
    mats[site] = mat
    if odd:
        for k in range(site):
            mats[k] = space.string_operator
    return kron_all(mats)


def dense_of(prod, n, d):
    ops = [np.eye(d)] * n
    for s, m in zip(prod.sites, prod.matrices):
        ops[s] = m
    return prod.coefficient * kron_all(ops)


@pytest.mark.parametrize("space_name", ["fermion", "spinful_fermion"])
def test_fermion_products_match_jordan_wigner_definition(space_name, rng):
    space = site_space(space_name)
    n = 4
    names = [k for k in space.operators if k.startswith(("c", "n"))]
    for _ in range(60):
        k = rng.integers(1, 5)
        ops = tuple((int(rng.integers(0, n)), str(rng.choice(names))) for _ in range(k))
        expected = np.eye(space.dim**n)
        for site, name in ops:
            expected = expected @ physical_operator(space, n, site, name)
        parity_ok = sum(int(np.any(np.abs(space.operator(nm)[(space.parity[:, None] + space.parity) % 2 == 1]) > 0))
                        for _, nm in ops) % 2 == 0
        if not parity_ok:
            with pytest.raises(OperatorError, match="changes the fermion parity"):
                normal_form(Term(1.0, ops), space)
            continue
        prod = normal_form(Term(1.0, ops), space)
        got = np.zeros_like(expected) if prod is None else dense_of(prod, n, space.dim)
        assert np.allclose(got, expected, atol=tol()), ops


def test_one_operator_pattern_on_many_site_sets_matches_jordan_wigner_definition():
    # normal forms are worked out once per pattern (operator names, order of the sites) and placed
    # on each term's sites: the placed strings must still equal the definition (Jordan and Wigner
    # 1928, built by brute force above) for strings of every length, an even factor inside a
    # string and two strings in one term
    space = site_space("fermion")
    n = 6
    patterns = [("cdag", "c"), ("c", "cdag"), ("cdag", "n", "c"), ("cdag", "c", "cdag", "c")]
    for names in patterns:
        for sites in itertools.permutations(range(n), len(names)):
            ops = tuple(zip(sites, names))
            expected = np.eye(2**n)
            for site, name in ops:
                expected = expected @ physical_operator(space, n, site, name)
            prod = normal_form(Term(0.7, ops), space)
            got = np.zeros_like(expected) if prod is None else dense_of(prod, n, 2)
            assert np.allclose(got, 0.7 * expected, atol=tol()), ops


def test_anticommutation_across_sites():
    # {c_i, c_j^dag} = delta_ij, built from normal forms only (canonical anticommutation, common practice)
    space = site_space("fermion")
    n = 5
    for i, j in itertools.product(range(n), repeat=2):
        a = normal_form(Term(1.0, ((i, "c"), (j, "cdag"))), space)
        b = normal_form(Term(1.0, ((j, "cdag"), (i, "c"))), space)
        total = sum((dense_of(p, n, 2) for p in (a, b) if p is not None), np.zeros((2**n, 2**n)))
        assert np.allclose(total, np.eye(2**n) * (i == j), atol=tol())


def test_chirality_sp_sm_form_equals_cartesian_form():
    # S_i . (S_j x S_k) = sum eps_abc S^a_i S^b_j S^c_k (definition); the model file uses the
    # Sz-conserving form (i/2) sum_cyclic Sz_i (Sp_j Sm_k - Sm_j Sp_k)
    model = load_model("kagome_chiral", {"J1": "0", "Jchi": "1", "length": "2", "circumference": "1"})
    space = model.space
    n = model.num_sites
    s = [space.operator(a) for a in ("Sx", "Sy", "Sz")]
    chi = np.zeros((2**n, 2**n), complex)
    for bond in model.lattice.family("triangles"):
        for a, b, c in itertools.permutations(range(3)):
            sign = np.linalg.det(np.eye(3)[[a, b, c]])
            ops = [np.eye(2)] * n
            for site, k in zip(bond.sites, (a, b, c)):
                ops[site] = s[k]
            chi += sign * kron_all(ops)
    assert len(model.lattice.family("triangles")) >= 2
    assert np.allclose(dense_from_products(model.hamiltonian), chi, atol=tol())


def test_identity_factors_fold_into_coefficient():
    space = site_space("spin-1/2")
    prod = normal_form(Term(2.0, ((0, "Z"), (0, "Z"), (1, "X"))), space)
    assert prod.sites == (1,) and np.isclose(prod.coefficient, 2.0)


def test_non_hermitian_model_names_the_term():
    text = """
[model]
name = "broken"
site = "fermion"
conserved = ["N"]
[parameters]
lattice = "chain"
length = 4
circumference = 1
[sector]
N = 2
[[term]]
on = "nn"
ops = "cdag c"
coupling = -1.0
"""
    with pytest.raises(HermiticityError, match=r"not Hermitian: term \[\[term\]\] #1"):
        build_model(parse_spec(text))


@pytest.mark.parametrize("name", sorted(SITE_SPACES))
def test_site_space_algebra(name):
    space = SITE_SPACES[name]
    for op, mat in space.operators.items():
        assert mat.shape == (space.dim, space.dim)
    if "Sp" in space.operators:
        sp, sm, sz = (space.operator(k) for k in ("Sp", "Sm", "Sz"))
        # [S+, S-] = 2 Sz (angular momentum algebra, common practice)
        assert np.allclose(sp @ sm - sm @ sp, 2 * sz, atol=tol())
    if "parity" in space.operators:
        assert np.allclose(space.operator("parity"), space.string_operator)
