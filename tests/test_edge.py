"""Cut diagnostics: partial translation at a column cut, momentum-resolved spectra, counting, polarization."""

import cmath
import json
import math

import numpy as np
import pytest
from conftest import (EDGE_C_MINUS, EDGE_H, EDGE_H_TWISTED, EXACT_VECTOR, LEVELS_TWO_ROUTES, SYNTHETIC_FIT,
                      SYNTHETIC_FIT_RESIDUAL, TORIC_EDGE_FIT, TWO_ROUTES, assert_one_line_error, kron_all, run_cli,
                      run_main, tol)

from netprobe.pipeline.cut import (_mode_permutation, column_cut, exact_cut, gaussian_cut, mps_cut, signed_permutation,
                          translation_expectation_gaussian)
from netprobe.pipeline.edge import CHARACTERS, count_levels, edge_ladder, edge_state, fit_polarization
from netprobe.errors import LatticeError
from netprobe.engines.exact import ground_state
from netprobe.engines.gaussian import gaussian_state
from netprobe.model.spec import load_model, load_spec

# DMRG at a bond dimension that holds the whole Schmidt spectrum of the small cylinders below, with
# energy tolerance 1e-12: the state error is then ~1e-6 in norm (square root of the energy error over
# the gap), so lambda agrees to about that
DMRG_LAMBDA_TOL = 1e-6
# entanglement levels of the lowest Schmidt values from DMRG: squared-amplitude errors ~1e-7 give
# level errors of that order relative to the Schmidt weight
DMRG_LEVEL_TOL = 1e-4


def _chern(**overrides):
    return load_model("chern_square", {k: str(v) for k, v in overrides.items()})


def _key(entry):
    return entry["charge"], entry["momentum"]


def _lowest_levels_by_sector(entries, count):
    out = {}
    for e in sorted(entries, key=lambda e: e["level"])[:count]:
        out.setdefault(_key(e), []).append(e["level"])
    return out


# ---------------------------------------------------------------------------------------------
# The translation itself
# ---------------------------------------------------------------------------------------------


def _jw_creation(n):
    """Jordan-Wigner c_i^dag on n spinless modes, site 0 most significant, |1> = occupied (common practice)."""
    cdag = np.array([[0.0, 0.0], [1.0, 0.0]])
    f = np.diag([1.0, -1.0])
    return [kron_all([f] * i + [cdag] + [np.eye(2)] * (n - i - 1)) for i in range(n)]


def test_signed_permutation_conjugates_creation_operators():
    # T c_i^dag T^-1 = c_pi(i)^dag with T|0> = |0> defines the fermionic permutation (common practice)
    n = 4
    perm = np.array([1, 2, 3, 0])
    codes = np.arange(2**n)
    image, sign = signed_permutation(codes, n, 2, perm, np.array([0, 1]))
    t = np.zeros((2**n, 2**n))
    t[image, codes] = sign
    cd = _jw_creation(n)
    for i in range(n):
        assert np.allclose(t @ cd[i] @ t.T, cd[perm[i]], atol=tol())
    assert np.allclose(np.linalg.matrix_power(t, n), np.eye(2**n), atol=tol())


def test_column_cut_describes_a_cyclic_shift_in_every_lattice():
    for name, extra in (("square", {}), ("honeycomb", {}), ("kagome", {}), ("toric", {}), ("triangular", {})):
        from netprobe.model.lattice import build_lattice

        lat = build_lattice(name, length=4, circumference=3, **extra)
        cut = column_cut(lat)
        per_cell = lat.num_sites // (4 * 3)
        assert cut.column == 2 and cut.bond == 2 * 3 * per_cell and cut.shift == per_cell
        # the translation keeps the unit cell and the sublattice and moves one cell around y
        for i, j in enumerate(cut.permutation):
            assert lat.sublattice[i] == lat.sublattice[j]
            assert lat.cells[j][0] == lat.cells[i][0]
            assert (lat.cells[j][1] - lat.cells[i][1]) % 3 == 1


@pytest.mark.parametrize("geometry,circ,column,match", [
    ("strip", 3, None, "need a cylinder"),
    ("cylinder", 1, None, "at least 2 unit cells"),
    ("cylinder", 3, 4, "outside 1..3"),
    ("cylinder", 3, 0, "outside 1..3"),
])
def test_column_cut_refuses_bad_cuts(geometry, circ, column, match):
    from netprobe.model.lattice import build_lattice

    lat = build_lattice("square", length=4, circumference=circ, geometry=geometry)
    with pytest.raises(LatticeError, match=match):
        column_cut(lat, column)


# ---------------------------------------------------------------------------------------------
# Three routes agree
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize("circumference", [3, 4])
def test_gaussian_polarization_is_the_exact_expectation_value(circumference):
    # <Gamma(U)> = det(1 - G + G U) for a Gaussian state (a standard identity, e.g. Klich, in
    # Quantum Noise in Mesoscopic Physics (2003)), checked against exact diagonalisation of the
    # same cylinder; twist 0.3 lifts the degeneracies of the even circumference
    model = _chern(length=2, circumference=circumference, twist=0.3)
    cut = column_cut(model.lattice, 1)
    gs = ground_state(model.hamiltonian)
    exact = exact_cut(gs.vector(0), gs.basis, model.space, cut)
    state = gaussian_state(model)
    free = gaussian_cut(state, cut)
    assert abs(exact.polarization - free.polarization) < TWO_ROUTES  # a Slater determinant: identical up to rounding
    # the transposed convention is a different number: the test pins the convention
    n = cut.bond * state.modes_per_site
    g = np.asarray(state.correlation)[:n, :n]
    u = np.zeros((n, n))
    u[_mode_permutation(cut, state.modes_per_site), np.arange(n)] = 1
    assert abs(translation_expectation_gaussian(g.T, u) - free.polarization) > 1e-3
    # momentum-resolved spectra agree level by level (the lowest 12)
    a = _lowest_levels_by_sector(exact.sorted(), 12)
    b = _lowest_levels_by_sector(free.sorted(), 12)
    assert set(a) == set(b)
    for key in a:
        assert np.allclose(a[key], b[key][:len(a[key])], atol=LEVELS_TWO_ROUTES)
    # the charge-resolved polarization adds up to the total
    total = sum(w * lam for w, lam in free.sector_polarization().values())
    assert abs(total - free.polarization) < TWO_ROUTES
    total = sum(w * lam for w, lam in exact.sector_polarization().values())
    assert abs(total - exact.polarization) < TWO_ROUTES


def test_mps_route_matches_free_fermions():
    from netprobe.engines.dmrg import SweepSettings, find_ground_state

    model = _chern(length=2, circumference=3, twist=0.3)  # bond dimension 64 = 4^3 holds every state
    cut = column_cut(model.lattice, 1)
    free = gaussian_cut(gaussian_state(model), cut)
    tight = SweepSettings(bond_dimension=64, energy_tolerance=1e-12, solver_tolerance=1e-11, sweep_minimum=4)
    result = find_ground_state(model, tight, seed=3, progress=None, warn=False)
    mps = mps_cut(result.state, cut)
    assert abs(mps.polarization - free.polarization) < DMRG_LAMBDA_TOL
    a = _lowest_levels_by_sector(free.sorted(), 10)
    b = _lowest_levels_by_sector(mps.sorted(), 10)
    assert set(a) == set(b)
    for key in a:
        assert np.allclose(a[key], b[key], atol=DMRG_LEVEL_TOL)
    assert np.allclose(mps.moduli[:20], 1.0, atol=DMRG_LAMBDA_TOL)  # degenerate clusters closed under T


def test_mps_route_matches_exact_for_spins_on_the_kagome_lattice():
    # a bosonic model with three sites per cell: the MPS contraction against the exact reshaping
    from netprobe.engines.dmrg import SweepSettings, find_ground_state

    model = load_model("kagome_chiral", {"length": "2", "circumference": "2"})
    cut = column_cut(model.lattice, 1)
    gs = ground_state(model.hamiltonian)
    exact = exact_cut(gs.vector(0), gs.basis, model.space, cut)
    tight = SweepSettings(bond_dimension=64, energy_tolerance=1e-12, solver_tolerance=1e-11, sweep_minimum=4)
    result = find_ground_state(model, tight, seed=1, progress=None, warn=False)
    mps = mps_cut(result.state, cut)
    assert abs(mps.polarization - exact.polarization) < DMRG_LAMBDA_TOL


# ---------------------------------------------------------------------------------------------
# Counting and fits
# ---------------------------------------------------------------------------------------------


def test_chern_insulator_counts_like_a_chiral_boson():
    # Li and Haldane, PRL 101, 010504 (2008): levels of a chiral edge count 1, 1, 2, 3, 5, ...
    out = edge_state(_chern(length=16, circumference=13), engine="gaussian", window=8.0)
    lowest = out["counting_details"]["lowest_sector"]
    assert out["counting"][lowest][:4] == [1, 1, 2, 3]
    sector = next(s for s in out["counting_details"]["sectors"] if s["charge"] == lowest)
    # counterclockwise around the left part, as J = +pi/3 for 0 < m < 2 (models/chern_square.toml)
    assert sector["direction"] == 1 and "chiral boson" in sector["matches"]
    flipped = edge_state(_chern(length=16, circumference=13, m=-1, twist=0.3), engine="gaussian", window=8.0)
    low = flipped["counting_details"]["lowest_sector"]
    assert next(s for s in flipped["counting_details"]["sectors"] if s["charge"] == low)["direction"] == -1
    trivial = edge_state(_chern(length=16, circumference=13, m=3), engine="gaussian", window=8.0)
    low = trivial["counting_details"]["lowest_sector"]
    assert next(s for s in trivial["counting_details"]["sectors"] if s["charge"] == low)["direction"] == 0


def test_counting_reference_tables():
    # partition numbers (common practice) and the Ising characters (shared/references.md, common practice)
    assert CHARACTERS["chiral boson"] == (1, 1, 2, 3, 5, 7, 11)
    assert CHARACTERS["Ising vacuum"][:3] == (1, 0, 1)


def test_fit_recovers_a_wrapped_phase():
    # synthetic lambda = exp(i[(2 pi/L) s + b L + c]) with s = 0.3: the unwrapping along L must
    # undo the 2 pi jumps (common practice); exact data, so only rounding remains
    lys = [5, 7, 9, 11, 13, 15]
    s, b, c = 0.3, 2.1, 0.4
    lam = [0.5**ly * cmath.exp(1j * (2 * math.pi * s / ly + b * ly + c)) for ly in lys]
    fit = fit_polarization(lys, lam)
    assert fit.s == pytest.approx(s, abs=SYNTHETIC_FIT)
    assert fit.error == pytest.approx(0.0, abs=SYNTHETIC_FIT_RESIDUAL)
    assert fit.c_minus == pytest.approx(-24 * s)


def test_toric_code_spectrum_is_flat_in_every_sector():
    # Kitaev, Ann. Phys. 303, 2 (2003): at a cut across an L-cell cylinder the reduced state is a
    # projector of rank 2^(L-1) (flat spectrum, gamma = ln 2). For the cyclic shift of one column,
    # Tr(rho_L T) keeps only the stabilizers whose traces with T survive (an even number of star
    # operators, derived from the stabilizer group, common practice): lambda = 1/4 at L = 3, in all
    # four sectors, so the plain translation does not resolve h = 1/2 of the fermion on odd L.
    for left in (1, -1):
        for right in (1, -1):
            model = load_model("toric_code", {"length": "2", "circumference": "3", "left_edge": str(left),
                                              "right_edge": str(right)})
            cut = column_cut(model.lattice, 1)
            gs = ground_state(model.hamiltonian)
            spec = exact_cut(gs.vector(0), gs.basis, model.space, cut)
            assert np.allclose(spec.values, 0.5, atol=EXACT_VECTOR)
            assert abs(spec.polarization - 0.25) < EXACT_VECTOR
            counts = count_levels(spec)
            assert counts[0].direction == 0


# ---------------------------------------------------------------------------------------------
# Command line
# ---------------------------------------------------------------------------------------------


def test_edge_command_json():
    proc = run_cli("edge", "chern_square", "--engine", "gaussian", "--set", "length=12", "--set",
                   "circumference=9", "--json", check=True)
    out = json.loads(proc.stdout)
    assert {"spectrum", "counting", "polarization"} <= set(out)
    assert {"charge", "momentum", "level"} <= set(out["spectrum"][0])
    assert {"lambda_abs", "lambda_arg"} <= set(out["polarization"])
    assert all(isinstance(v, list) for v in out["counting"].values())


def test_edge_command_ladder_json_and_plot(tmp_path):
    png = tmp_path / "cut.png"
    proc = run_cli("edge", "chern_square", "--engine", "gaussian", "--set", "length=8", "--circumferences",
                   "5,7,9,11", "--plot", str(png), "--json", check=True)
    out = json.loads(proc.stdout)
    pol = out["polarization"]
    for key in ("circumferences", "phases", "h_minus_c_over_24", "error", "c_minus", "c_minus_error"):
        assert key in pol
    assert pol["circumferences"] == [5, 7, 9, 11]
    assert png.stat().st_size > 1000


@pytest.mark.parametrize("args,match", [
    (("--cut", "9"), "cut column 9 is outside"),
    (("--set", "geometry=strip"), "need a cylinder"),
    (("--circumferences", "5,7"), "at least three"),
    (("--engine", "gaussian", "--set", "U=1"), ""),
])
def test_edge_command_user_errors(args, match):
    model = "hubbard" if "U=1" in args else "chern_square"
    proc = run_main("edge", model, "--engine", "gaussian", *args)
    assert_one_line_error(proc, match)


# ---------------------------------------------------------------------------------------------
# Larger runs
# ---------------------------------------------------------------------------------------------


@pytest.mark.slow
def test_chern_insulator_momentum_polarization():
    # Tu, Zhang, Qi, PRB 88, 195412 (2013): s = h_a - c-/24; vacuum of a c- = 1 edge: -1/24.
    # 16 columns, left 8, odd L_y 7..19, no twist (m = 1 has no edge zero mode on odd L_y);
    # 0.002 is the tolerance of the acceptance criterion (shared/references.md)
    spec = load_spec("chern_square")
    out = edge_ladder(spec, {"length": "16", "m": "1"}, [7, 9, 11, 13, 15, 17, 19], engine="gaussian", window=6.0)
    pol = out["polarization"]
    assert pol["h_minus_c_over_24"] == pytest.approx(-1 / 24, abs=EDGE_H)
    assert pol["c_minus"] == pytest.approx(1.0, abs=EDGE_C_MINUS)
    trivial = edge_ladder(spec, {"length": "16", "m": "3"}, [7, 9, 11, 13, 15, 17, 19], engine="gaussian",
                          window=6.0)
    assert trivial["polarization"]["h_minus_c_over_24"] == pytest.approx(0.0, abs=EDGE_H)
    # m = -1: the edge crosses at k = 0, an allowed momentum on odd L_y, so the edge fermion is periodic
    # (Ramond, h = 1/8 for a Dirac fermion; from memory) and runs the other way: s = -(1/8 - 1/24);
    # the twist 0.3 that lifts the zero mode shifts h by about (0.3/2 pi)^2/2 = 0.001
    flipped = edge_ladder(spec, {"length": "16", "m": "-1", "twist": "0.3"}, [7, 9, 11, 13, 15, 17, 19],
                          engine="gaussian", window=6.0)
    assert flipped["polarization"]["h_minus_c_over_24"] == pytest.approx(-(1 / 8 - 1 / 24), abs=EDGE_H_TWISTED)


@pytest.mark.slow
def test_chern_insulator_dmrg_counting():
    # circumference 7 holds momentum steps 0..3; 4 columns keep the run to minutes
    model = _chern(length=4, circumference=7)
    out = edge_state(model, engine="dmrg", bond_dimensions=(128,), sweeps=6)
    lowest = out["counting_details"]["lowest_sector"]
    assert out["counting"][lowest][:4] == [1, 1, 2, 3]
    free = edge_state(model, engine="gaussian")
    assert free["counting"][free["counting_details"]["lowest_sector"]][:4] == [1, 1, 2, 3]
    # D = 128 and six sweeps do not converge lambda on this cylinder (measured |lambda| 0.164 against
    # 0.147 from free fermions); the counting is already right there, lambda is compared in
    # test_mps_route_matches_free_fermions at a converged bond dimension


@pytest.mark.slow
def test_toric_code_sectors_give_zero_central_charge():
    spec = load_spec("toric_code")
    for left in (1, -1):
        for right in (1, -1):
            out = edge_ladder(spec, {"length": "2", "left_edge": str(left), "right_edge": str(right)}, [3, 5, 7],
                              engine="dmrg", bond_dimensions=(128,), sweeps=6)
            pol = out["polarization"]
            assert pol["c_minus"] == pytest.approx(0.0, abs=TORIC_EDGE_FIT)
            assert pol["h_minus_c_over_24"] in (pytest.approx(0.0, abs=TORIC_EDGE_FIT),
                                                pytest.approx(0.5, abs=TORIC_EDGE_FIT))
            counts = out["counting"]["none"]
            assert max(counts) - min(counts) <= 1  # flat
