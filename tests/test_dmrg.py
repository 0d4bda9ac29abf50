"""Two-site DMRG against exact references: our exact engine on small systems, closed forms and
published numbers on long chains, and the properties every run must have (variational energies,
reproducible checkpoints, honest non-convergence).
"""

import io
import math
import os
import warnings

import numpy as np
import pytest
import scipy.linalg

from conftest import (CALABRESE_CARDY_FIT, DMRG_EXACT_ENERGY, DMRG_TIGHT_ENERGY, HEISENBERG_BULK,
                      HEISENBERG_BULK_ELIMINATED, LANCZOS_ASKED, LANCZOS_RESIDUAL_FLOOR, RESUMED_LADDER, tol)
from netprobe.engines import exact
from netprobe.engines.dmrg import (CHECKPOINT_NAME, EIGENSOLVERS, ConvergenceWarning, GroundStateSearch, LadderSettings,
                           SweepSettings, extrapolate_energy, find_ground_state, resume_ladder, run_ladder,
                           stage_file_name)
from netprobe.engines.dmrg.engine import LOCAL_UPDATES
from netprobe.engines.dmrg.solvers import lanczos_lowest
from netprobe.errors import NetprobeError, SectorError
from netprobe.engines.mps.mpo import build_mpo
from netprobe.engines.mps import entanglement_entropies, expectation_value, random_state
from netprobe.model.spec import load_model
from netprobe.engines.mps.store import load_state

# Catalogue of small cases with a trusted reference (our exact engine), tagged by what they exercise.
EXACT_CASES = {
    "heisenberg-chain": ("heisenberg", {"length": "12"}, 64, "critical"),
    "heisenberg-cylinder-w3": ("heisenberg", {"lattice": "square", "circumference": "3", "length": "4"}, 64,
                               "two-dimensional"),
    "haldane-interacting": ("haldane", {"length": "2", "circumference": "2", "phi": "pi/3", "V": "1.0"}, 32,
                            "fermionic, chiral, complex, long hoppings"),
    "kagome-chiral": ("kagome_chiral", {"length": "3", "circumference": "1", "twice_sz": "1", "Jchi": "0.7"},
                      32, "chiral, complex"),
    "hubbard-chain": ("hubbard", {"length": "6"}, 64, "fermionic, two charges"),
    "tfim-no-charge": ("tfim", {"length": "10", "h": "0.7"}, 32, "no conserved charge"),
    "kitaev-no-charge": ("kitaev", {"length": "2"}, 32, "no conserved charge, complex"),
}
TIGHT = dict(energy_tolerance=1e-12, discarded_tolerance=1e-9)


def _quiet(**kw):
    return dict(progress=None, **kw)


@pytest.mark.parametrize("case", list(EXACT_CASES))
def test_ground_energy_matches_exact_engine(case):
    name, overrides, chi, tags = EXACT_CASES[case]
    model = load_model(name, overrides)
    ham = model.hamiltonian
    if "complex" in tags:
        assert ham.is_complex
    if "long hoppings" in tags:  # a fermion hopping with Jordan-Wigner strings across other sites
        assert any(p.sites[-1] - p.sites[0] > 1 and len(p.sites) > 2 for p in ham.products)
    reference = exact.ground_state(ham).energy  # our exact engine (reference)
    result = find_ground_state(model, SweepSettings(bond_dimension=chi, ramp=(), **TIGHT), seed=3, **_quiet())
    assert result.converged, result.message
    # truncation_weight 1e-12 and residual 1e-8 bound the error far below 1e-8 relative
    assert abs(result.energy - reference) <= DMRG_EXACT_ENERGY * abs(reference), (result.energy, reference)
    state_energy = expectation_value(result.state, build_mpo(ham))
    assert abs(state_energy - reference) <= DMRG_EXACT_ENERGY * abs(reference)


@pytest.mark.parametrize("solver", list(EIGENSOLVERS))
@pytest.mark.parametrize("update", list(LOCAL_UPDATES))
def test_every_eigensolver_and_local_update_reach_the_exact_energy(solver, update):
    model = load_model("heisenberg", {"length": "10", "Delta": "0.5", "J2": "0.2"})
    reference = exact.ground_state(model.hamiltonian).energy  # our exact engine (reference)
    warm = find_ground_state(model, SweepSettings(bond_dimension=32, eigensolver=solver, **TIGHT), seed=4,
                             **_quiet())
    settings = SweepSettings(bond_dimension=32, eigensolver=solver, local_update=update, **TIGHT)
    result = find_ground_state(model, settings, state=warm.state, **_quiet())
    assert abs(result.energy - reference) <= DMRG_TIGHT_ENERGY * abs(reference)


@pytest.mark.parametrize("dtype", [np.float64, np.complex128])
def test_lanczos_kernel_matches_numpy_eigvalsh(dtype, rng):
    n = 200
    a = rng.standard_normal((n, n))
    if dtype == np.complex128:
        a = a + 1j * rng.standard_normal((n, n))
    h = (a + a.conj().T) / 2
    pair = lanczos_lowest(lambda x: h @ x, rng.standard_normal(n).astype(dtype), tol=LANCZOS_ASKED,
                          krylov_dimension=60, restarts=20)
    expected = scipy.linalg.eigvalsh(h)[0]  # LAPACK reference
    assert pair.converged
    # a residual r bounds the eigenvalue error by r (Weyl; Parlett 1998, ch. 4)
    assert abs(pair.value - expected) <= max(pair.residual, LANCZOS_RESIDUAL_FLOOR) * 10
    assert np.linalg.norm(h @ pair.vector - pair.value * pair.vector) <= LANCZOS_ASKED * abs(expected) * 10


@pytest.mark.parametrize("dtype", [np.float64, np.complex128])
def test_lanczos_full_krylov_space_gives_the_lowest_eigenvalue_to_round_off(dtype, rng):
    # with a Krylov space as large as the matrix and the basis kept orthonormal (recurrence, one
    # Gram-Schmidt pass, a second where the first removes most of the vector), the tridiagonal
    # matrix is H in another basis, so its lowest eigenvalue is LAPACK's to round-off (common
    # practice). Widely spread eigenvalues (1 to 1e4) make the Ritz values converge early, which is
    # where a basis without reorthogonalisation loses orthogonality (Parlett 1998, ch. 13).
    n = 80
    q, _ = np.linalg.qr(rng.standard_normal((n, n)) + (1j * rng.standard_normal((n, n)) if dtype == np.complex128
                                                        else 0))
    values = np.concatenate(([-3.0, -2.999], np.geomspace(1, 1e4, n - 2)))
    h = (q * values) @ q.conj().T
    h = (h + h.conj().T) / 2
    pair = lanczos_lowest(lambda x: h @ x, rng.standard_normal(n).astype(dtype), tol=0.0, krylov_dimension=n,
                          restarts=0)
    expected = scipy.linalg.eigvalsh(h)[0]  # LAPACK reference
    assert abs(pair.value - expected) <= tol(np.abs(values).max())
    assert np.linalg.norm(h @ pair.vector - pair.value * pair.vector) <= tol(np.abs(values).max())


def test_lanczos_leaves_an_operator_s_returned_input_alone(rng):
    # an operator that returns its argument itself (here the identity): the solver updates its own
    # copy, so the basis stays intact and the eigenvalue is exactly 1 (common practice)
    x0 = rng.standard_normal(30)
    pair = lanczos_lowest(lambda x: x, x0.copy(), tol=LANCZOS_ASKED)
    assert pair.value == pytest.approx(1.0, abs=tol(1.0))
    assert np.linalg.norm(pair.vector - x0 / np.linalg.norm(x0)) <= tol(1.0)


# ---- long chains: closed forms and published numbers -------------------------------------------


def _calabrese_cardy_c(entropies, length, even_only):
    """Fit S(l) = (c/6) ln x + s0 + b/x with x = (2L/pi) sin(pi l / L) over L/8 <= l <= 7L/8.

    The open-chain form is from Calabrese and Cardy, J. Stat. Mech. P06002 (2004); the b/x term
    absorbs the leading boundary (and, for even l only, parity) correction, whose 1/x decay in the
    XX chain is from Laflorencie, Sorensen, Chang and Affleck, PRL 96, 100603 (2006) (from memory).
    """
    l = np.arange(1, length)
    x = (2 * length / np.pi) * np.sin(np.pi * l / length)
    mask = (l >= length // 8) & (l <= length - length // 8)
    if even_only:
        mask &= l % 2 == 0
    design = np.column_stack([np.log(x[mask]) / 6, np.ones(mask.sum()), 1 / x[mask]])
    return float(np.linalg.lstsq(design, entropies[mask], rcond=None)[0][0])


@pytest.fixture(scope="module")
def critical_ising_64():
    model = load_model("tfim", {"length": "64", "J": "1.0", "h": "1.0"})
    return find_ground_state(model, SweepSettings(bond_dimension=24, energy_tolerance=1e-10,
                                                  discarded_tolerance=1e-9), seed=1, **_quiet())


def test_critical_ising_open_chain_energy_closed_form(critical_ising_64):
    n, j = 64, 1.0
    # open chain at h = J: E0 = J [1 - 1/sin(pi/(4N+2))] (Pfeuty, Ann. Phys. 57, 79 (1970))
    expected = j * (1 - 1 / math.sin(math.pi / (4 * n + 2)))
    assert critical_ising_64.converged
    assert abs(critical_ising_64.energy - expected) <= DMRG_EXACT_ENERGY * abs(expected)


def test_critical_ising_central_charge(critical_ising_64):
    c = _calabrese_cardy_c(entanglement_entropies(critical_ising_64.state), 64, even_only=False)
    # c = 1/2 for the critical Ising chain (Calabrese and Cardy, J. Stat. Mech. P06002 (2004))
    assert abs(c - 0.5) <= CALABRESE_CARDY_FIT * 0.5


@pytest.mark.slow  # long run (over 10 s on 2 cores); run with -m slow
def test_xx_chain_central_charge():
    length = 48
    model = load_model("heisenberg", {"length": str(length), "Delta": "0"})
    result = find_ground_state(model, SweepSettings(bond_dimension=32, energy_tolerance=1e-9,
                                                    discarded_tolerance=1e-6), seed=1, **_quiet())
    c = _calabrese_cardy_c(entanglement_entropies(result.state), length, even_only=True)
    # c = 1 for the XX chain (Calabrese and Cardy, J. Stat. Mech. P06002 (2004)); even l only because of
    # the parity oscillation of open chains
    assert abs(c - 1.0) <= CALABRESE_CARDY_FIT


def _open_chain_energy(length, chi):
    model = load_model("heisenberg", {"length": str(length)})
    result = find_ground_state(model, SweepSettings(bond_dimension=chi, energy_tolerance=1e-9,
                                                    discarded_tolerance=1e-5), seed=1, **_quiet())
    assert result.converged, result.message
    return result.energy


@pytest.mark.slow  # long run (over 10 s on 2 cores); run with -m slow
def test_heisenberg_bulk_energy_by_finite_size_elimination():
    # E(L) = e L + e_boundary + a / L + ...: three lengths eliminate e_boundary and a
    e12, e24, e48 = (_open_chain_energy(n, 32) for n in (12, 24, 48))
    e_bulk = (2 * (e48 - e24) - (e24 - e12)) / 36
    # 1/4 - ln 2 (Bethe, Z. Phys. 71, 205 (1931); Hulthen, Ark. Mat. Astron. Fys. 26A (1938)); 1e-4 leaves
    # room for the 1/L^2 and logarithmic corrections the elimination keeps
    assert abs(e_bulk - (0.25 - math.log(2))) <= HEISENBERG_BULK


@pytest.mark.slow
def test_heisenberg_bulk_energy_from_long_chains():
    e32, e64, e128 = (_open_chain_energy(n, chi) for n, chi in ((32, 64), (64, 64), (128, 64)))
    bulk = 0.25 - math.log(2)  # Bethe (1931); Hulthen (1938)
    # E(2L) - E(L) cancels the boundary energy; what remains falls like 1/L^2
    assert abs((e128 - e64) / 64 - bulk) <= HEISENBERG_BULK
    assert abs((2 * (e128 - e64) - (e64 - e32)) / 96 - bulk) <= HEISENBERG_BULK_ELIMINATED


# ---- properties of the sweeps ------------------------------------------------------------------


def _norm_bound(ham):
    """sum |coefficient| * prod ||matrix||_2 bounds the spectral width of H (triangle inequality)."""
    return 2 * sum(abs(p.coefficient) * np.prod([np.linalg.norm(m, 2) for m in p.matrices])
                   for p in ham.products)


def test_single_site_sweeps_never_raise_the_energy():
    model = load_model("haldane", {"length": "3", "circumference": "2", "V": "1.0"})
    mpo = build_mpo(model.hamiltonian)
    warm = GroundStateSearch(mpo, random_state(model.hamiltonian, bond_dimension=10, rng=4),
                      SweepSettings(bond_dimension=10, ramp=()), **_quiet())
    warm.step()
    engine = GroundStateSearch(mpo, warm.state, SweepSettings(bond_dimension=10, local_update="single-site",
                                                       sweep_limit=50), **_quiet())
    energies = [engine.step().energy for _ in range(6)]
    # variational: each local update minimises over a space that contains the current state, and the QR
    # gauge moves are exact, so only rounding (a few ulps of |E| per sweep) can raise the energy
    assert max(np.diff(energies)) <= 100 * np.finfo(float).eps * abs(energies[-1])
    assert energies[-1] < energies[0]


def test_two_site_energy_rises_at_most_by_the_truncation():
    model = load_model("heisenberg", {"length": "24"})
    ham = model.hamiltonian
    engine = GroundStateSearch(build_mpo(ham), random_state(ham, bond_dimension=8, rng=4),
                        SweepSettings(bond_dimension=8, ramp=(), noise=0.0, sweep_limit=50), **_quiet())
    records = [engine.step() for _ in range(6)]
    width = _norm_bound(ham)
    steps = 2 * (ham.num_sites - 1)
    for before, after in zip(records, records[1:]):
        # keeping a fraction 1 - w of an eigenvector raises its energy by exactly w (E_d - E) / (1 - w),
        # E_d the energy of the discarded part (derived from H theta = E theta), at most w * width
        w = after.discarded_weight
        bound = steps * w * width / (1 - w) + 100 * np.finfo(float).eps * abs(after.energy)
        assert after.energy - before.energy <= bound


def test_engine_steps_and_reports_each_sweep():
    model = load_model("heisenberg", {"length": "10"})
    stream = io.StringIO()
    engine = GroundStateSearch(build_mpo(model.hamiltonian), random_state(model.hamiltonian, rng=1),
                        SweepSettings(bond_dimension=16, discarded_tolerance=1e-3), progress=stream)
    first = engine.step()
    assert first.sweep == 1 and math.isnan(first.energy_change) and first.bond_dimension == 16
    assert first.centre_entropy > 0 and first.seconds > 0 and first.matvecs > 0
    second = engine.step()
    assert second.sweep == 2 and second.energy_change == pytest.approx(second.energy - first.energy)
    result = engine.finish()
    assert result.converged and result.sweeps == len(result.energies) == len(result.history) >= 3
    lines = stream.getvalue().splitlines()
    assert len(lines) == result.sweeps and all(line.startswith("sweep ") for line in lines)
    assert "\r" not in stream.getvalue()  # no live indicator when the stream is not a terminal
    assert repr(result).startswith("DmrgResult(energy=-4.2580") and len(repr(result)) < 120


class _Terminal(io.StringIO):
    def isatty(self):
        return True


def test_live_indicator_on_terminals():
    model = load_model("heisenberg", {"length": "8"})
    stream = _Terminal()
    engine = GroundStateSearch(build_mpo(model.hamiltonian), random_state(model.hamiltonian, rng=1),
                        SweepSettings(bond_dimension=8), progress=stream)
    engine.step()
    text = stream.getvalue()
    assert "\r" in text and "sweep 1: bond 14/14" in text
    assert text.endswith("\n") and "\rsweep   1 |" not in text and "sweep   1 | D" in text


def test_non_convergence_keeps_the_work_and_warns():
    model = load_model("heisenberg", {"length": "10"})
    with pytest.warns(ConvergenceWarning, match="not converged after 2 sweeps"):
        result = find_ground_state(model, SweepSettings(bond_dimension=16, sweep_limit=2), seed=1, **_quiet())
    assert not result.converged and result.sweeps == 2 and math.isfinite(result.energy)
    with pytest.warns(ConvergenceWarning, match="discarded weight .* exceeds discarded_tolerance"):
        result = find_ground_state(model, SweepSettings(bond_dimension=4, discarded_tolerance=1e-12), seed=1,
                                   **_quiet())
    assert not result.converged and result.state.max_bond_dimension <= 4


# ---- ladders, checkpoints, resume ----------------------------------------------------------------


def test_extrapolate_energy_on_exact_lines_and_bad_input():
    w = np.array([4e-3, 2e-3, 1e-3, 5e-4])
    e = -10.0 + 3.0 * w
    fit = extrapolate_energy(w, e)
    assert fit.energy == pytest.approx(np.polyfit(w, e, 1)[1], abs=tol(10.0, 450))  # numpy.polyfit reference
    assert fit.slope == pytest.approx(3.0) and fit.error <= tol(factor=4.5e3) and fit.points == 4
    two = extrapolate_energy(w[:2], e[:2] + [0.0, 1e-3])
    assert two.error == pytest.approx(abs(two.energy - e[1] - 1e-3))
    with pytest.raises(NetprobeError, match="at least two stages"):
        extrapolate_energy([1e-3], [-1.0])


@pytest.mark.slow  # long run (over 10 s on 2 cores); run with -m slow
def test_ladder_extrapolation_brackets_the_exact_energy(tmp_path):
    overrides = {"lattice": "square", "circumference": "4", "length": "4"}
    model = load_model("heisenberg", overrides)
    reference = exact.ground_state(model.hamiltonian).energy  # our exact engine (reference)
    settings = LadderSettings(bond_dimensions=(16, 24, 32, 40), sweeps=SweepSettings(sweep_limit=6),
                              variance=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        result = run_ladder(model, settings, overrides=overrides, seed=2, out=tmp_path, progress=None)
    stages = result.stages
    assert [s.bond_dimension for s in stages] == [16, 24, 32, 40]
    assert all(b.energy < a.energy for a, b in zip(stages, stages[1:]))
    assert all(s.variance > 0 and s.discarded_weight > 0 for s in stages)
    x = result.extrapolation
    assert x.points == 4
    # the extrapolation must beat the best stage and its error bar must cover the exact energy
    assert abs(x.energy - reference) < abs(stages[-1].energy - reference)
    assert abs(x.energy - reference) <= x.error
    for k, s in enumerate(stages):
        assert os.path.basename(s.state_file) == stage_file_name(k, s.bond_dimension)
        assert load_state(s.state_file).info["energy"] == s.energy
    payload = result.to_dict()
    assert set(payload["stages"][0]) >= {"bond_dimension", "energy", "discarded_weight", "variance", "sweeps",
                                         "seconds", "state_file"}
    assert sorted(os.listdir(tmp_path)) == sorted([CHECKPOINT_NAME] + [stage_file_name(k, s.bond_dimension)
                                                                       for k, s in enumerate(stages)])


class _Interrupt(Exception):
    """Stands in for a killed process."""


def _interrupt_after(monkeypatch, sweeps):
    original = GroundStateSearch.step
    count = {"n": 0}

    def sweep(self):
        if count["n"] == sweeps:
            raise _Interrupt
        count["n"] += 1
        return original(self)

    monkeypatch.setattr(GroundStateSearch, "step", sweep)


def test_resume_from_a_mid_run_checkpoint_reproduces_the_uninterrupted_run(tmp_path, monkeypatch):
    overrides = {"length": "16", "J2": "0.3"}
    model = load_model("heisenberg", overrides)
    settings = LadderSettings(bond_dimensions=(8, 16), sweeps=SweepSettings(energy_tolerance=1e-10))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ConvergenceWarning)
        straight = run_ladder(model, settings, overrides=overrides, seed=7, out=tmp_path / "a", progress=None)
        _interrupt_after(monkeypatch, straight.stages[0].sweeps + 2)  # two sweeps into the second stage
        with pytest.raises(_Interrupt):
            run_ladder(model, settings, overrides=overrides, seed=7, out=tmp_path / "b", progress=None)
        monkeypatch.undo()
        saved = load_state(tmp_path / "b" / CHECKPOINT_NAME)
        assert saved.kind == "checkpoint" and saved.info["stage"] == 1
        assert len(saved.info["engine"]["history"]) == 2
        assert saved.rng_state["bit_generator"] == "PCG64"
        resumed = resume_ladder(tmp_path / "b", progress=None)
    for a, b in zip(straight.stages, resumed.stages, strict=True):
        # same seed, same arithmetic: equal to rounding (the brief asks for 1e-10)
        assert abs(a.energy - b.energy) <= RESUMED_LADDER and a.sweeps == b.sweeps
        assert abs(a.variance - b.variance) <= RESUMED_LADDER
    assert not [f for f in os.listdir(tmp_path / "b") if f.endswith(".tmp")]

    # a finished folder is not recomputed
    def no_sweeps(self):
        raise AssertionError("a finished stage was recomputed")

    monkeypatch.setattr(GroundStateSearch, "step", no_sweeps)
    again = run_ladder(model, settings, overrides=overrides, seed=7, out=tmp_path / "b", resume=True,
                       progress=None)
    assert [s.energy for s in again.stages] == [s.energy for s in resumed.stages]
    with pytest.raises(NetprobeError, match="different run .*bond dimensions"):
        run_ladder(model, LadderSettings(bond_dimensions=(8, 24)), overrides=overrides, seed=7,
                   out=tmp_path / "b", resume=True, progress=None)


def test_bad_input_raises_our_errors(tmp_path):
    with pytest.raises(NetprobeError, match="bond_dimension=0 must be an integer of at least 1"):
        SweepSettings(bond_dimension=0)
    with pytest.raises(NetprobeError, match="unknown eigensolver 'davidsen'; valid eigensolvers: lanczos"):
        SweepSettings(eigensolver="davidsen")
    with pytest.raises(NetprobeError, match="unknown local_update"):
        SweepSettings(local_update="three-site")
    with pytest.raises(NetprobeError, match="bond dimension 0 must be an integer of at least 1"):
        LadderSettings(bond_dimensions=(64, 0))
    with pytest.raises(NetprobeError, match="must increase from stage to stage"):
        LadderSettings(bond_dimensions=(128, 64))
    with pytest.raises(NetprobeError, match="unknown setting.* chi"):
        SweepSettings.from_dict({"chi": 4})
    ham = load_model("heisenberg", {"length": "8"}).hamiltonian
    with pytest.raises(SectorError, match="sector twice_sz = 3 has no states on 8 sites"):
        find_ground_state(ham.with_sector({"twice_sz": 3}), **_quiet())
    with pytest.raises(SectorError, match="sector twice_sz = 10 has no states"):
        find_ground_state(ham.with_sector({"twice_sz": 10}), **_quiet())
    with pytest.raises(NetprobeError, match="resume needs the output folder"):
        run_ladder(load_model("heisenberg", {"length": "8"}), LadderSettings(bond_dimensions=(4,)),
                   resume=True)
    one = load_model("tfim", {"length": "1"})
    with pytest.raises(NetprobeError, match="at least 2 sites"):
        find_ground_state(one, **_quiet())


def test_one_block_fast_path_equals_the_block_contractions_and_the_exact_energy():
    # charges switched off: every tensor is one dense block and the matvec takes the fast path
    from netprobe.engines.dmrg.effective import PairOperator
    from netprobe.engines.mps import BlockMPO
    from netprobe.tensor import BlockLayout, contract
    from netprobe.model.terms import Hamiltonian

    charged = load_model("kagome_chiral", {}).hamiltonian  # complex couplings
    ham = Hamiltonian(charged.lattice, charged.space, charged.products, conserved=(), sector={})
    result = find_ground_state(ham, SweepSettings(bond_dimension=64, sweep_limit=12), seed=4, progress=None)
    reference = exact.ground_state(charged).energies[0]
    # two-site DMRG at a bond dimension that truncates nothing on 12 sites: energy to the solver tolerance
    assert abs(result.energy - reference) < DMRG_EXACT_ENERGY * abs(reference)
    state = result.state
    mpo = BlockMPO.from_mpo(build_mpo(ham), state.basis)
    state.move_centre(5)
    left = [None] * 7
    from netprobe.engines.mps import left_boundary, left_environment_step, right_boundary, right_environment_step
    left[0] = left_boundary(state, mpo)
    for i in range(5):
        left[i + 1] = left_environment_step(left[i], state.tensors[i], mpo.tensors[i])
    right = right_boundary(state, mpo)
    for i in range(state.num_sites - 1, 6, -1):
        right = right_environment_step(right, state.tensors[i], mpo.tensors[i])
    theta = contract(state.tensors[5], state.tensors[6], ([2], [0]))
    op = PairOperator(left[5], mpo.tensors[5], mpo.tensors[6], right,
                            BlockLayout(theta.legs, None, state.basis.rule, theta.dtype))
    assert op._dense_factors() is not None
    fast = op.apply(theta).to_dense()
    op._dense = None  # the general route: one matrix product per contraction
    slow = op.apply(theta).to_dense()
    assert np.allclose(fast, slow, atol=tol(factor=4.5e3))  # rounding only (common practice)
    # <theta|H|theta> is the energy of the normalised state with its centre on the bond
    assert abs(np.vdot(theta.to_dense(), slow).real - result.energy) < DMRG_EXACT_ENERGY


@pytest.mark.parametrize("case", ["heisenberg-cylinder-w3", "haldane-interacting", "kagome-chiral"])
def test_expanding_single_site_sweeps_match_two_site_and_exact_energies(case):
    name, overrides, chi, tags = EXACT_CASES[case]
    model = load_model(name, overrides)
    reference = exact.ground_state(model.hamiltonian).energy  # our exact engine (reference)
    energies, bonds = {}, {}
    for update in ("two-site", "single-site-expanding"):
        settings = SweepSettings(bond_dimension=chi, local_update=update, **TIGHT)
        result = find_ground_state(model, settings, seed=5, **_quiet())
        assert result.converged, result.message
        energies[update] = result.energy
        bonds[update] = (result.history[0].max_bond_dimension, result.bond_dimensions[-1])
    # the expanding sweeps grow the bonds from the random start (bond dimension 16) as far as two-site ones
    assert bonds["single-site-expanding"][1] == bonds["two-site"][1]
    if bonds["two-site"][1] > 16:
        assert bonds["single-site-expanding"][0] < bonds["single-site-expanding"][1]
    # both are converged to energy_tolerance 1e-12 with truncation weight 1e-12: 1e-8 relative is loose
    assert abs(energies["single-site-expanding"] - reference) <= DMRG_EXACT_ENERGY * abs(reference)
    assert abs(energies["single-site-expanding"] - energies["two-site"]) <= DMRG_EXACT_ENERGY * abs(reference)


# sector dimensions above 1 on the physical legs: the Hubbard site space with only N conserved has
# the sectors n = 0, 1 (up or down), 2
SLAB_CASES = {
    "heisenberg-cylinder-w3": ("heisenberg", {"lattice": "square", "circumference": "3", "length": "4"}, None),
    "kagome-chiral": ("kagome_chiral", {"length": "2", "circumference": "1", "twice_sz": "0", "Jchi": "0.7"},
                      None),
    "hubbard-n-only": ("hubbard", {"length": "6"}, ("N",)),
}


@pytest.mark.parametrize("case", list(SLAB_CASES))
def test_charged_slab_matvec_equals_the_dense_sum_and_the_block_contractions(case):
    # the slab plan of the charged two-site matvec against numpy's tensordot on the dense tensors
    # (common practice) and against the route of four block contractions, at every bond of a random state
    from netprobe.engines.dmrg.effective import PairOperator
    from netprobe.engines.mps import (BlockMPO, left_boundary, left_environment_step, right_boundary,
                                      right_environment_step)
    from netprobe.model.terms import Hamiltonian
    from netprobe.tensor import BlockLayout, contract

    name, overrides, conserved = SLAB_CASES[case]
    ham = load_model(name, overrides).hamiltonian
    if conserved is not None:
        ham = Hamiltonian(ham.lattice, ham.space, ham.products, conserved=conserved,
                          sector={c: ham.sector[c] for c in conserved})
    state = random_state(ham, bond_dimension=12, rng=7)
    mpo = BlockMPO.from_mpo(build_mpo(ham), state.basis)
    n = state.num_sites
    right = [None] * (n + 1)
    right[n] = right_boundary(state, mpo)
    for i in range(n - 1, 1, -1):
        right[i] = right_environment_step(right[i + 1], state.tensors[i], mpo.tensors[i])
    left = left_boundary(state, mpo)
    rng = np.random.default_rng(3)
    wide = False
    for i in range(n - 1):
        theta = contract(state.tensors[i], state.tensors[i + 1], ([2], [0]))
        layout = BlockLayout(theta.legs, None, state.basis.rule, theta.dtype)
        op = PairOperator(left, mpo.tensors[i], mpo.tensors[i + 1], right[i + 2], layout)
        assert op._slab_plan() is not None
        wide = wide or max(theta.legs[1].dims) > 1
        x = rng.standard_normal(layout.size)
        if op.dtype.kind == "c":
            x = x + 1j * rng.standard_normal(layout.size)
        slab = op.matvec(x)
        dense = np.tensordot(left.to_dense(), layout.unpack(x).to_dense(), ([1], [0]))  # (a*, w, s1, s2, b)
        dense = np.tensordot(dense, mpo.tensors[i].to_dense(), ([1, 2], [0, 2]))  # (a*, s2, b, s1', u)
        dense = np.tensordot(dense, mpo.tensors[i + 1].to_dense(), ([4, 1], [0, 2]))  # (a*, b, s1', s2', v)
        dense = np.tensordot(dense, right[i + 2].to_dense(), ([1, 4], [0, 1]))  # (a*, s1', s2', b*)
        scale = np.abs(dense).max()
        # the same sum in another order: rounding only (common practice)
        assert np.allclose(layout.unpack(slab).to_dense(), dense, rtol=0, atol=tol(scale))
        op._slabs = None  # the general route
        assert np.allclose(op.matvec(x), slab, rtol=0, atol=tol(scale))
        if i + 2 < n:
            state.move_centre(i + 1)
            left = left_environment_step(left, state.tensors[i], mpo.tensors[i])
    assert wide == (conserved is not None)
