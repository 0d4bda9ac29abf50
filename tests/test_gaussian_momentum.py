"""The momentum route of the free-fermion engine against the dense route (one scipy eigh of the lattice).

The dense route diagonalises the whole single-particle matrix with scipy (a general-purpose library);
the momentum route must give the same ground state to rounding, on cylinders with twist and flux, and
fall back to the dense route where the translation around the cylinder is not a symmetry.
"""

import dataclasses

import numpy as np
import pytest
from conftest import CLIPPED_LOG_J, tol

from netprobe.engines.gaussian import (
    FreeFermionState,
    GaussianOptions,
    GaussianStateError,
    MajoranaState,
    QuadraticForm,
    gaussian_state,
    quadratic_form,
)
from netprobe.engines.gaussian.momentum import CylinderMatrix, cylinder_layout, translation_blocks
from netprobe.model.lattice import build_lattice
from netprobe.model.spec import load_model

DENSE = GaussianOptions(route="dense")
MOMENTUM = GaussianOptions(route="momentum")
# a projector's entries and the probes built from them agree to a few hundred ulps between two
# eigensolvers of well-separated levels (gaps >= 0.05 here): common practice for Hermitian eigh
ENTRY_TOL = tol(1.0, 1e4)


def _sectors(lattice, radius):
    """Three 120-degree sectors of a disk about the middle of the lattice (counterclockwise)."""
    pos = lattice.positions
    d = pos - pos.mean(axis=0)
    inside = np.hypot(d[:, 0], d[:, 1]) < radius
    sector = np.floor(np.mod(np.arctan2(d[:, 1], d[:, 0]), 2 * np.pi) / (2 * np.pi / 3)).astype(int)
    return [np.nonzero(inside & (sector == k))[0].tolist() for k in range(3)]


CYLINDERS = [
    ("haldane", {"length": "4", "circumference": "4", "twist": "0.7"}, 2.1),
    ("haldane", {"length": "4", "circumference": "5", "twist": "0.4", "flux": "0.1", "M": "0.2"}, 2.1),
    ("chern_square", {"length": "4", "circumference": "4", "twist": "0.3", "flux": "0.05"}, 1.6),
    ("chern_square", {"length": "3", "circumference": "6", "twist": "1.1", "m": "-1"}, 1.6),
]


@pytest.mark.parametrize("name, params, radius", CYLINDERS, ids=lambda v: str(v))
def test_momentum_route_matches_the_dense_route(name, params, radius):
    model = load_model(name, params)
    dense = gaussian_state(model, options=DENSE)
    fast = gaussian_state(model, options=MOMENTUM)
    assert dense.route == "dense" and fast.route == "momentum"
    assert gaussian_state(model).route == "momentum"  # the default picks it for these models
    scale = float(np.max(np.abs(dense.levels)))
    assert abs(fast.energy - dense.energy) < tol(scale * model.num_sites, 1e4)
    np.testing.assert_allclose(fast.levels, dense.levels, atol=tol(scale, 1e4))
    assert fast.particles == dense.particles
    assert np.max(np.abs(fast.correlation - dense.correlation)) < ENTRY_TOL
    a, b, c = _sectors(model.lattice, radius)
    assert min(len(a), len(b), len(c)) > 0
    for region in (a, b + c, a + b + c):
        assert abs(fast.entropy(region) - dense.entropy(region)) < ENTRY_TOL * len(region)
        np.testing.assert_allclose(fast.correlation_matrix(region), dense.correlation_matrix(region),
                                   atol=ENTRY_TOL)
    # J's logarithms amplify differences of eigenvalues near the clip; 1e-8 is far below its size
    assert abs(fast.modular_commutator(a, b, c) - dense.modular_commutator(a, b, c)) < CLIPPED_LOG_J
    assert abs(fast.chern_number(a, b, c) - dense.chern_number(a, b, c)) < ENTRY_TOL * 100
    assert abs(fast.cmi(a, b, c) - dense.cmi(a, b, c)) < ENTRY_TOL * model.num_sites
    # the Majorana covariance built from the momentum blocks equals the dense conversion
    gamma_fast = MajoranaState.from_free_fermion(fast)
    gamma_dense = MajoranaState.from_free_fermion(dense)
    assert gamma_fast.route == "momentum"
    assert np.max(np.abs(gamma_fast.covariance - gamma_dense.covariance)) < ENTRY_TOL
    assert abs(gamma_fast.modular_commutator(a, b, c) - dense.modular_commutator(a, b, c)) < CLIPPED_LOG_J


def _pairing_form(lattice, mu, delta, perturb=0.0):
    """Spinless p + ip superconductor on the square lattice: -t hopping, Delta_x = delta, Delta_y = i delta."""
    n = lattice.num_sites
    h = np.zeros((n, n), dtype=complex)
    d = np.zeros((n, n), dtype=complex)
    for family, pair in (("nn_along_x", delta), ("nn_along_y", 1j * delta)):
        for bond in lattice.family(family):
            i, j = bond.sites
            h[i, j] += -1.0
            h[j, i] += -1.0
            d[i, j] += pair
            d[j, i] -= pair
    h -= mu * np.eye(n)
    h[0, 0] += perturb
    return QuadraticForm(h, d, 0.0, n, 1, "fermion", np.eye(2), name="p+ip")


@pytest.mark.parametrize("mu", [-1.0, -5.0])
def test_pairing_model_by_momentum_matches_dense(mu):
    # mu = -1: topological phase (edge modes, skipped if one sits at zero energy); mu = -5: trivial
    lattice = build_lattice("square", length=4, circumference=5)
    form = _pairing_form(lattice, mu, 0.6)
    try:
        dense = MajoranaState.from_form(form, options=DENSE, lattice=lattice)
    except GaussianStateError:
        pytest.skip("degenerate ground state at this chemical potential")
    fast = MajoranaState.from_form(form, options=MOMENTUM, lattice=lattice)
    assert fast.route == "momentum"
    assert abs(fast.energy - dense.energy) < tol(10 * lattice.num_sites, 1e4)
    np.testing.assert_allclose(fast.levels, dense.levels, atol=tol(10.0, 1e4))
    assert np.max(np.abs(fast.covariance - dense.covariance)) < ENTRY_TOL
    a, b, c = _sectors(lattice, 1.2)
    assert abs(fast.entropy(a + b) - dense.entropy(a + b)) < ENTRY_TOL * lattice.num_sites
    assert abs(fast.modular_commutator(a, b, c) - dense.modular_commutator(a, b, c)) < CLIPPED_LOG_J


@pytest.mark.parametrize("name, params, radius", CYLINDERS[:3], ids=lambda v: str(v))
def test_stored_hopping_entries_are_the_nonzeros_of_the_matrix(name, params, radius):
    # the extraction hands the momentum route the entries it built h from; numpy's nonzero is the reference
    form = quadratic_form(load_model(name, params).hamiltonian)
    rows, cols, values = form.stored_hopping()
    expected_rows, expected_cols = np.nonzero(form.hopping)
    np.testing.assert_array_equal(rows, expected_rows)
    np.testing.assert_array_equal(cols, expected_cols)
    np.testing.assert_array_equal(values, form.hopping[expected_rows, expected_cols])
    stale = dataclasses.replace(form, hopping=np.eye(form.num_modes))  # entries of the old matrix are ignored
    np.testing.assert_array_equal(stale.stored_hopping()[0], np.arange(form.num_modes))


def test_broken_translation_falls_back_to_the_dense_route():
    model = load_model("haldane", {"length": "3", "circumference": "4", "twist": "0.5"})
    form = quadratic_form(model.hamiltonian, model=model)
    hop = np.array(form.hopping)
    hop[5, 5] += 0.3  # one site's potential: no longer invariant around the cylinder
    broken = dataclasses.replace(form, hopping=hop)
    lattice = model.lattice
    auto = FreeFermionState.from_form(broken, lattice=lattice)
    dense = FreeFermionState.from_form(broken, lattice=lattice, options=DENSE)
    assert auto.route == "dense"
    assert np.max(np.abs(auto.correlation - dense.correlation)) == 0.0
    with pytest.raises(GaussianStateError, match="not invariant under a translation around the cylinder"):
        FreeFermionState.from_form(broken, lattice=lattice, options=MOMENTUM)
    # a tiny perturbation below the rounding threshold keeps the momentum route
    hop[5, 5] = form.hopping[5, 5] + 1e-14
    assert FreeFermionState.from_form(dataclasses.replace(form, hopping=hop), lattice=lattice).route == "momentum"
    p_ip = _pairing_form(build_lattice("square", length=3, circumference=4), -5.0, 0.6, perturb=0.2)
    assert MajoranaState.from_form(p_ip, lattice=build_lattice("square", length=3, circumference=4)).route == "dense"


def test_strips_and_missing_lattices_take_the_dense_route():
    strip = load_model("haldane", {"length": "3", "circumference": "3", "geometry": "strip", "M": "0.3"})
    assert gaussian_state(strip).route == "dense"
    with pytest.raises(GaussianStateError, match="not periodic in y"):
        gaussian_state(strip, options=MOMENTUM)
    cyl = load_model("haldane", {"length": "3", "circumference": "3", "twist": "0.5"})
    form = quadratic_form(cyl.hamiltonian, model=cyl)
    assert FreeFermionState.from_form(form).route == "dense"
    with pytest.raises(GaussianStateError, match="no lattice was given"):
        FreeFermionState.from_form(form, options=MOMENTUM)
    with pytest.raises(GaussianStateError, match="unknown route 'fourier'; valid: auto, dense, momentum"):
        GaussianOptions(route="fourier")


def test_cylinder_matrix_reads_blocks_of_a_translation_invariant_matrix(rng):
    lattice = build_lattice("honeycomb", length=3, circumference=4)
    layout = cylinder_layout(lattice, 2)
    assert layout.circumference == 4 and layout.num_orbitals == 3 * 2 * 2
    n = 2 * lattice.num_sites
    # a random matrix made invariant by summing over the translation group (common practice)
    perm = layout.index[(np.arange(4) + 1) % 4].ravel()
    inverse = np.empty(n, dtype=np.int64)
    inverse[layout.index.ravel()] = perm
    base = rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))
    m = np.zeros((n, n), dtype=complex)
    p = np.arange(n)
    for _ in range(4):
        m += base[np.ix_(p, p)]
        p = inverse[p]
    blocks = translation_blocks(m, layout, 1e-12)
    assert blocks is not None
    cm = CylinderMatrix(blocks, layout)
    rows, cols = rng.permutation(n)[:17], rng.permutation(n)[:9]
    # the group sum adds the same four numbers in different orders for different entries: a few ulps
    np.testing.assert_allclose(cm.block(rows, cols), m[np.ix_(rows, cols)], rtol=0, atol=tol(20.0))
    np.testing.assert_allclose(cm.dense(), m, rtol=0, atol=tol(20.0))
    assert translation_blocks(base, layout, 1e-12) is None
    assert "4 blocks of 12" in repr(cm)
    assert cm.shape == (n, n)
