"""Flux threading: the charge pumped across a cylinder when one flux quantum is inserted.

Laughlin's argument (Phys. Rev. B 23, 5632 (1981)): threading a flux theta through the cylinder
adiabatically from 0 to 2 pi moves an integer charge, the Hall conductance in units of e^2/h, from one
edge to the other. On a finite cylinder with DMRG (the method of Gong, Zhu and Sheng, Sci. Rep. 4, 6317
(2014), for a chiral spin liquid; and Zaletel, Mong and Pollmann, Phys. Rev. Lett. 110, 236801 (2013),
for infinite cylinders) the ground state at each theta is warm-started from the previous one, so that it
follows the adiabatic branch through the edge-level crossings, and the charge of the left half is read
from the Schmidt spectrum at the central cut: <Q_L> = sum_a lambda_a^2 q_a.

The model must have a ``twist`` parameter (the lattice key that puts the phase theta on every
charge-moving bond around the cylinder) and a conserved charge. For spin models with Sz conservation
the pumped quantity is the spin analogue (twice_sz, reported in units of Sz).
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np

from netprobe.engines.dmrg import ConvergenceWarning, SweepSettings
from netprobe.engines import SolveSettings, ground_state
from netprobe.errors import NetprobeError, SpecError
from netprobe.engines.mps import entanglement_spectrum
from netprobe.model.spec import build_model, load_spec
from netprobe.tensor.entropy import entanglement_energies

__all__ = ["FluxResult", "thread_flux"]


@dataclass(frozen=True)
class FluxResult:
    """Charge of the left half against the threaded flux.

    Attributes
    ----------
    thetas : ndarray
        Flux values from 0 to 2 pi (inclusive).
    left_charge : ndarray
        <Q_L> at each theta (in units of the charge; Sz for spins).
    energies : ndarray
    pumped : float
        <Q_L>(2 pi) - <Q_L>(0): the Hall conductance estimate (e^2/h for fermions).
    spectra : list of dict
        Entanglement spectrum at the central cut for each theta: levels (-2 ln lambda) by charge.
    """

    thetas: np.ndarray
    left_charge: np.ndarray
    energies: np.ndarray
    pumped: float
    charge: str
    bond: int
    spectra: list = field(repr=False, default_factory=list)
    seconds: float = 0.0

    def to_json(self) -> dict:
        """Plain values for JSON."""
        return {"thetas": self.thetas.tolist(), "left_charge": self.left_charge.tolist(),
                "energies": self.energies.tolist(), "pumped": self.pumped, "charge": self.charge,
                "bond": self.bond, "spectra": self.spectra, "seconds": self.seconds}

    def __repr__(self) -> str:
        return f"FluxResult(pumped {self.charge} = {self.pumped:+.4f} over {len(self.thetas) - 1} steps)"


def _left_charge(state, bond: int, component: int, scale: float):
    spec = entanglement_spectrum(state, bond)
    weights = spec.weights / spec.weights.sum()
    q = spec.charges[:, component].astype(float) * scale
    levels = {}
    for level, charge in zip(entanglement_energies(spec.values), spec.charges[:, component]):
        levels.setdefault(int(charge), []).append(float(level))
    return float(np.dot(weights, q)), {str(k): sorted(v)[:8] for k, v in sorted(levels.items())}


def thread_flux(spec, overrides: dict | None = None, *, steps: int = 8, bond_dimension: int = 64,
                sweeps: int = 6, seed: int = 0, progress=None) -> FluxResult:
    """Thread one flux quantum through the cylinder in ``steps`` steps (see the module notes).

    Parameters
    ----------
    spec : ModelSpec or str
        The model (a parsed description or a model name/path); it needs a ``twist`` parameter.
    overrides : dict of str to str
        ``--set`` overrides (``twist`` is set by this function).
    steps : int
        Number of flux steps from 0 to 2 pi.
    """
    if steps < 2:
        raise NetprobeError(f"flux threading needs at least 2 steps, got {steps}")
    spec = load_spec(spec) if isinstance(spec, str) else spec
    if not spec.conserved:
        raise SpecError(f"model '{spec.name}' conserves no charge; flux threading needs a U(1) charge to pump")
    if "twist" not in spec.parameters:
        raise SpecError(f"model '{spec.name}' has no 'twist' parameter; add twist = 0.0 to its [parameters]")
    overrides = dict(overrides or {})
    charge = spec.conserved[0]
    start = time.perf_counter()
    thetas = np.linspace(0.0, 2 * math.pi, steps + 1)
    state = None
    charges, energies, spectra = [], [], []
    sweep_settings = SweepSettings(bond_dimension=bond_dimension, sweep_limit=sweeps)
    bond = None
    for k, theta in enumerate(thetas):
        model = build_model(spec, {**overrides, "twist": repr(float(theta))})
        if bond is None:
            bond = model.num_sites // 2
            scale = model.space.flux_charge_scale if model.space.flux_charge == charge else 1.0
        settings = SolveSettings(bond_dimensions=(bond_dimension,), sweeps=sweep_settings, seed=seed,
                                 initial=state, progress=None)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", ConvergenceWarning)  # each step is a warm start; energies are shown
            result = ground_state(model, "dmrg", settings)
        state = result.state
        q_left, levels = _left_charge(state, bond, 0, scale)
        charges.append(q_left)
        energies.append(result.energy)
        spectra.append({"theta": float(theta), "levels": levels})
        if progress is not None:
            print(f"flux | step {k}/{steps} | theta/2pi {theta / (2 * math.pi):.3f} | energy {result.energy:.10f} "
                  f"| <Q_L> {q_left:.6f}", file=progress, flush=True)
    charges = np.array(charges)
    return FluxResult(thetas, charges, np.array(energies), float(charges[-1] - charges[0]), charge, bond,
                      spectra, time.perf_counter() - start)
