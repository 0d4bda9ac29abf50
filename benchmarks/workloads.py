"""The systems the benchmarks run on, built the same way in every run.

The width-6 square-lattice Heisenberg cylinder (J1 = 1, S = 1/2) is the workload of the matvec,
symmetry, cost-growth and reduced-density-matrix benchmarks. Its states come from one bond-dimension
ladder (two sweeps per rung, seeded); the second sweep of each rung is timed, the states are kept
for the later benchmarks. Converged energies are not needed for timing, only realistic block
structure, which the ladder gives.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from netprobe.engines.dmrg.effective import PairOperator
from netprobe.engines.dmrg.engine import GroundStateSearch, SweepSettings
from netprobe.engines.mps.mpo import build_mpo
from netprobe.engines.mps import MPS, SiteBasis
from netprobe.model.spec import load_model
from netprobe.tensor import BlockLayout, BlockTensor, ChargeRule, Leg, contract
from netprobe.model.terms import Hamiltonian

__all__ = ["heisenberg_cylinder", "kagome_cylinder", "without_charges_of", "without_charges", "dense_copy", "dense_operator", "LadderRun", "run_ladder_timed",
           "central_operator", "sweep_settings"]

SEED = 20261202


def heisenberg_cylinder(circumference: int, length: int, *, charges: bool = True) -> Hamiltonian:
    """``models/heisenberg.toml`` on a square cylinder; ``charges=False`` drops the twice_sz conservation."""
    model = load_model("heisenberg", {"lattice": "square", "circumference": str(circumference),
                                      "length": str(length)})
    ham = model.hamiltonian
    if not charges:
        ham = Hamiltonian(ham.lattice, ham.space, ham.products, conserved=(), sector={})
    return ham


def kagome_cylinder(length: int = 6, circumference: int = 3) -> Hamiltonian:
    """``models/kagome_chiral.toml`` (defaults: length 6, circumference 3: 54 spins, width-6 cylinder)."""
    return load_model("kagome_chiral", {"length": str(length), "circumference": str(circumference)}).hamiltonian


def without_charges_of(ham: Hamiltonian) -> Hamiltonian:
    """The same Hamiltonian without conserved charges."""
    return Hamiltonian(ham.lattice, ham.space, ham.products, conserved=(), sector={})


def sweep_settings(bond_dimension: int, **extra) -> SweepSettings:
    """One fixed-bond-dimension, noise-free sweep setting, the same for every timed run."""
    base = dict(bond_dimension=bond_dimension, ramp=(), sweep_limit=1, sweep_minimum=1, noise=0.0,
                noise_sweeps=0, truncation_weight=0.0, solver_tolerance=1e-7, ramp_solver_tolerance=1e-7)
    base.update(extra)
    return SweepSettings(**base)


def without_charges(state: MPS, ham: Hamiltonian) -> MPS:
    """The same state with every tensor one dense block (trivial charge rule), physical basis unpermuted."""
    basis = SiteBasis.from_hamiltonian(ham)
    rule = basis.rule
    tensors = []
    for k, t in enumerate(state.tensors):
        blocked = t.to_dense()
        dense = np.zeros_like(blocked)
        dense[:, state.basis.order, :] = blocked
        dense = dense[:, basis.order, :]
        legs = (Leg(np.zeros((1, 1), np.int64), [dense.shape[0]], t.legs[0].direction), basis.leg,
                Leg(np.zeros((1, 1), np.int64), [dense.shape[2]], t.legs[2].direction))
        tensors.append(BlockTensor.from_dense(dense, legs, None, rule, atol=0.0))
    return MPS(tensors, basis, centre=state.centre)


def dense_copy(t: BlockTensor) -> BlockTensor:
    """``t`` as one dense block under the trivial charge rule (same legs' dimensions and directions)."""
    rule = ChargeRule.trivial()
    legs = [Leg(np.zeros((1, 1), np.int64), [leg.dim], leg.direction) for leg in t.legs]
    return BlockTensor.from_dense(t.to_dense(), legs, None, rule, atol=0.0)


def dense_operator(op: PairOperator, theta: BlockTensor):
    """The same effective Hamiltonian and two-site tensor with every tensor one dense block.

    Values are unchanged (the blocked basis order is kept on every leg), so this is the
    charges-off matvec on exactly the environments of the charged run, without rebuilding them.
    """
    theta = dense_copy(theta)
    layout = BlockLayout(theta.legs, None, theta.rule, theta.dtype)
    return PairOperator(dense_copy(op.left), dense_copy(op.w1), dense_copy(op.w2), dense_copy(op.right),
                              layout), theta


@dataclass
class LadderRun:
    """States and the timed sweep of each rung of a ladder."""

    states: dict[int, MPS] = field(default_factory=dict)
    sweep_seconds: dict[int, float] = field(default_factory=dict)
    matvecs: dict[int, int] = field(default_factory=dict)
    energies: dict[int, float] = field(default_factory=dict)


def run_ladder_timed(ham: Hamiltonian, bond_dimensions, *, log=print, start: MPS | None = None,
                     seed: int = SEED, previous: LadderRun | None = None, timed=None) -> LadderRun:
    """Two sweeps per rung (the first grows the bonds, the second is timed), each rung from the last.

    ``timed`` (default: every rung) lists the rungs that get the timed second sweep; the others
    only grow.
    """
    from netprobe.engines.mps import random_state

    run = previous or LadderRun()
    mpo = build_mpo(ham)
    state = start if start is not None else random_state(ham, bond_dimension=16, rng=seed)
    for chi in bond_dimensions:
        if chi in run.states:
            state = run.states[chi]
            continue
        two = timed is None or chi in timed
        engine = GroundStateSearch(mpo, state, sweep_settings(chi, sweep_limit=2, sweep_minimum=2), progress=None,
                            blas_threads=1)
        record = engine.step()
        if two:
            record = engine.step()
        state = engine.state
        run.states[chi] = state
        run.sweep_seconds[chi] = record.seconds
        run.matvecs[chi] = record.matvecs
        run.energies[chi] = record.energy
        log(f"    ladder D={chi}: {'timed' if two else 'growing (untimed)'} sweep {record.seconds:.1f} s, {record.matvecs} matvecs, "
            f"E = {record.energy:.8f}, largest bond {record.max_bond_dimension}")
    return run


def central_operator(state: MPS, ham: Hamiltonian, dtype=None):
    """The two-site effective Hamiltonian of the central bond and its current two-site tensor."""
    mpo = build_mpo(ham)
    state = state.copy()
    if dtype is not None:
        state.tensors = [t.astype(dtype) for t in state.tensors]
    engine = GroundStateSearch(mpo, state, sweep_settings(max(state.bond_dimensions)), progress=None, blas_threads=1)
    i = state.num_sites // 2 - 1
    engine.state.move_centre(i)
    for j in range(i):
        engine._env.update_left(j, engine.state.tensors[j])
    t = engine.state.tensors
    theta = contract(t[i], t[i + 1], ([2], [0]))
    layout = BlockLayout(theta.legs, None, engine.state.basis.rule, theta.dtype)
    op = PairOperator(engine._env.left[i], engine.mpo.tensors[i], engine.mpo.tensors[i + 1],
                            engine._env.right[i + 2], layout)
    return op, theta
