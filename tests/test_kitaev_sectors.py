"""Conserved Z2 quantities of the Kitaev honeycomb model on an open cylinder and the biases that fix them.

The plaquette operators W_p (``hexagons``) and Z on the sites of a zigzag end that sit on a single
link (``dangling``) commute with the Hamiltonian at h = 0, so the open cylinder's ground space splits
into sectors. A partial translation around y only sees a nonzero overlap when the left part's sector
pattern is translation invariant; ``flux_bias`` and ``edge_bias`` pick the uniform pattern. The
reference Hamiltonian below is assembled here by Kronecker products from the lattice's links and paths
(numpy/scipy), independently of the model-file terms.
"""

import cmath

import numpy as np
import pytest
import scipy.sparse as sp
import scipy.sparse.linalg as spla
from conftest import tol

from netprobe.engines.dmrg.engine import SweepSettings, find_ground_state
from netprobe.engines.exact import ground_state
from netprobe.model.lattice import build_lattice
from netprobe.model.spec import load_model
from netprobe.pipeline.cut import column_cut, exact_cut, mps_cut

KAPPA = 0.1
BIAS = 0.5
SMALL = {"length": "3", "circumference": "2", "kappa": str(KAPPA)}  # 12 spins: dense references are cheap
# the lowest sectors are separated by ~0.17 here (exact spectrum), so Lanczos and DMRG with energy
# tolerance 1e-12 give the state to ~1e-6 in norm and lambda to about that (as in test_edge.py)
DMRG_LAMBDA_TOL = 1e-6
# a few sweeps of DMRG reach the exact energy to about the energy tolerance times the sweep count
DMRG_ENERGY_TOL = 1e-9


def _site_op(space, name, site, n):
    """Sparse ``name`` on ``site`` of ``n`` spins, site 0 most significant."""
    out = sp.identity(1, format="csr", dtype=complex)
    for k in range(n):
        out = sp.kron(out, sp.csr_matrix(space.operator(name)) if k == site else sp.identity(space.dim), format="csr")
    return out


def _product(space, names_sites, n):
    out = sp.identity(space.dim ** n, format="csr", dtype=complex)
    for name, site in names_sites:
        out = out @ _site_op(space, name, site, n)
    return out


def _reference(model):
    """Kitaev H at h = 0 from the lattice's links and three-site paths; W_p; Z on dangling sites.

    H = -sum_a K_a sum_{a-links} s^a s^a - kappa sum_paths s^a_j s^c_k s^b_l (Kitaev, Annals of
    Physics 321, 2 (2006), eqs. 2 and 47 with K = 1), W_p = prod over the hexagon of the Pauli of each
    site's outward link (same paper, eq. 6).
    """
    lat, space = model.lattice, model.space
    n = lat.num_sites
    pauli = {"x": "X", "y": "Y", "z": "Z"}
    ham = sp.csr_matrix((space.dim ** n, space.dim ** n), dtype=complex)
    links = {}
    for kind in "xyz":
        for bond in lat.family(f"nn_{kind}"):
            ham = ham - _product(space, [(pauli[kind], s) for s in bond.sites], n)
            links[frozenset(bond.sites)] = kind
    for a, b in ("xy", "yz", "zx"):
        c = ({"x", "y", "z"} - {a, b}).pop()
        for bond in lat.family(f"paths_{a}{b}"):
            j, k, l = bond.sites
            ham = ham - KAPPA * _product(space, [(pauli[a], j), (pauli[c], k), (pauli[b], l)], n)
    plaquettes = []
    for hexagon in lat.family("hexagons"):
        members = set(hexagon.sites)
        outward = []
        for s in hexagon.sites:
            out = [kind for pair, kind in links.items() if s in pair and not pair - {s} <= members]
            outward.append((pauli[out[0]], s))
        plaquettes.append(_product(space, outward, n))
    left = [_site_op(space, "Z", bond.sites[0], n) for bond in lat.family("dangling_left")]
    right = [_site_op(space, "Z", bond.sites[0], n) for bond in lat.family("dangling_right")]
    return ham, plaquettes, left + right


def _lowest(matrix, k=1):
    vals, vecs = spla.eigsh(matrix, k=k, which="SA", tol=1e-13)
    order = np.argsort(vals)
    return vals[order], vecs[:, order]


def _dense_lambda(vector, cut, n):
    """<psi| T |psi> with T permuting the left part's tensor axes (numpy only)."""
    t = vector.reshape((2,) * n)
    source = list(range(n))
    for i in range(cut.bond):
        source[int(cut.permutation[i])] = i
    return complex(np.vdot(vector, np.transpose(t, source).reshape(-1)))


@pytest.mark.parametrize("orientation", ["zigzag", "armchair"])
def test_hexagons_are_rings_ordered_by_outward_link(orientation):
    lat = build_lattice("honeycomb", length=4, circumference=4, geometry="torus", orientation=orientation)
    links = {frozenset(b.sites): b.kind for kind in "xyz" for b in lat.family(f"nn_{kind}")}
    hexagons = lat.family("hexagons")
    assert len(hexagons) == 16  # one hexagon per unit cell on the torus (common practice)
    assert len({frozenset(h.sites) for h in hexagons}) == 16
    for h in hexagons:
        members = set(h.sites)
        inside = [pair for pair in links if pair <= members]
        assert len(inside) == 6  # a closed ring of six links
        outward = []
        for s in h.sites:
            assert sum(s in pair for pair in inside) == 2
            outward.append("".join(kind for pair, kind in links.items() if s in pair and not pair <= members))
        assert outward == list("xxyyzz")


def test_dangling_sites_are_the_outer_ends_of_zigzag_links():
    lat = build_lattice("honeycomb", length=3, circumference=3, orientation="zigzag")
    for family, column in (("dangling_left", 0), ("dangling_right", 2)):
        ends = [b.sites[0] for b in lat.family(family)]
        kinds = [[b.kind for kind in "xyz" for b in lat.family(f"nn_{kind}") if s in b.sites] for s in ends]
        assert len(ends) == 3 and all(k == ["z"] for k in kinds)
        assert set(lat.cells[ends, 0].tolist()) == {column}
    armchair = build_lattice("honeycomb", length=3, circumference=3, orientation="armchair")
    assert armchair.family("dangling_left") == () and armchair.family("dangling_right") == ()


def test_plaquettes_and_end_spins_commute_with_the_hamiltonian():
    model = load_model("kitaev", SMALL)
    ham, plaquettes, ends = _reference(model)
    assert len(plaquettes) == 2 and len(ends) == 4
    scale = spla.norm(ham)
    for op in plaquettes + ends:
        assert spla.norm(ham @ op - op @ ham) <= tol(scale)
    # the model file's terms give the reference Hamiltonian (the reference is built from the lattice)
    e_ref = _lowest(ham)[0][0]
    assert abs(ground_state(model.hamiltonian).energy - e_ref) <= tol(scale)


def test_biases_keep_the_ground_energy_and_fix_every_sector():
    # Lieb, PRL 73, 2158 (1994): the vortex-free sector holds the ground state; the uniform end
    # sector holding it too is what the reference diagonalisation checks here
    model = load_model("kitaev", SMALL)
    ham, plaquettes, ends = _reference(model)
    vals, vecs = _lowest(ham, k=4)
    biased = load_model("kitaev", {**SMALL, "flux_bias": str(BIAS), "edge_bias": str(BIAS)})
    gs = ground_state(biased.hamiltonian, num_states=2)
    shift = BIAS * (len(plaquettes) + len(ends))
    assert abs(gs.energies[0] + shift - vals[0]) <= tol(spla.norm(ham))
    assert gs.energies[1] - gs.energies[0] > 0.1  # the bias leaves a unique ground state
    psi = np.zeros(ham.shape[0], complex)
    psi[gs.basis.codes] = gs.vector(0)
    for op in plaquettes + ends:
        assert abs(np.vdot(psi, op @ psi) - 1.0) <= tol(spla.norm(ham))
    # without the bias the lowest level is degenerate (end sectors), so a solver may return any mix
    assert abs(vals[1] - vals[0]) <= tol(spla.norm(ham))


@pytest.mark.parametrize("length, sign, holds", [(2, 1, False), (2, -1, True)])
def test_end_signs_on_an_odd_circumference(length, sign, holds):
    # our own observation, checked against the reference diagonalisation: on an odd circumference the
    # two ends' products are tied, so only one relative sign of the end pins keeps the ground energy
    base = {"length": str(length), "circumference": "3", "kappa": str(KAPPA)}
    ham, plaquettes, ends = _reference(load_model("kitaev", base))
    e0 = _lowest(ham)[0][0]
    biased = load_model("kitaev", {**base, "flux_bias": str(BIAS), "edge_bias": str(BIAS), "edge_sign": str(sign)})
    excess = ground_state(biased.hamiltonian).energy + BIAS * (len(plaquettes) + len(ends)) - e0
    scale = spla.norm(ham)
    assert (abs(excess) <= tol(scale)) == holds
    assert excess > -tol(scale)  # a bias never lowers the energy below the unbiased ground state


def test_dmrg_with_biases_matches_exact_polarization():
    over = {**SMALL, "flux_bias": str(BIAS), "edge_bias": str(BIAS)}
    model = load_model("kitaev", over)
    cut = column_cut(model.lattice)
    gs = ground_state(model.hamiltonian)
    exact = exact_cut(gs.vector(0), gs.basis, model.space, cut).polarization
    psi = np.zeros(2 ** model.lattice.num_sites, complex)
    psi[gs.basis.codes] = gs.vector(0)
    assert abs(exact - _dense_lambda(psi, cut, model.lattice.num_sites)) <= tol()
    result = find_ground_state(model, SweepSettings(bond_dimension=64, sweep_limit=6, energy_tolerance=1e-12,
                                                    solver_tolerance=1e-10), seed=0, progress=None, warn=False)
    assert abs(result.energy - gs.energy) <= DMRG_ENERGY_TOL
    lam = mps_cut(result.state, cut).polarization
    assert abs(lam - exact) <= DMRG_LAMBDA_TOL
    assert abs(exact) > 0.5, cmath.polar(exact)  # the translated left part overlaps the state
