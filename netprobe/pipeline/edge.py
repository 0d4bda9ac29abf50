"""Edge diagnostics from the cut between two halves of a cylinder: counting, chirality, momentum polarization.

Built on :mod:`netprobe.pipeline.cut` (the charge- and momentum-resolved Schmidt spectrum at a column cut):

Counting (:func:`count_levels`)
    In each charge sector of the left part the levels ``xi = -ln(lambda^2)`` are grouped by their
    momentum relative to the lowest level of the sector. A chiral edge has its low levels on one
    side (the direction of the edge), with multiplicities given by its edge theory (Li and Haldane,
    Phys. Rev. Lett. 101, 010504 (2008)): chiral boson 1, 1, 2, 3, 5, 7, 11; Ising vacuum
    1, 0, 1, 1, 2, 2, 3; psi 1, 1, 1, 1, 2, 2, 3; sigma 1, 1, 1, 2, 2, 3, 4. Without ``window`` the
    levels at relative momentum n are counted below ``xi_0 + (n + 1/2) delta``, ``delta`` the
    distance to the lowest level one momentum step away on the chiral side (a linear edge
    dispersion puts all levels of momentum n near ``xi_0 + n delta``); with ``window`` every level
    below ``xi_0 + window`` counts. A sector shows a direction only when the chiral side holds
    more counted levels than the other and its lowest level two steps away lies above
    ``xi_0 + 3 delta / 2`` (a linear branch, not a flat band of high levels).
Momentum polarization (:func:`fit_polarization`)
    ``lambda = <T_+> = exp[(2 pi i / L_y)(h_a - c-/24) - alpha L_y]`` (Tu, Zhang and Qi, Phys. Rev.
    B 88, 195412 (2013)). ``arg lambda`` is unwrapped along increasing ``L_y`` and fitted to
    ``(2 pi / L_y) s + b L_y + const`` by least squares over the four largest circumferences (the
    corrections to the form fall off quickly with ``L_y``; the fit over all is reported beside
    it); ``s = h_a - c-/24`` is defined mod 1 (the left part's physical edge adds ``2 pi K / L_y``
    with an integer K that depends on its filling, and may do so differently for even and odd
    ``L_y``). The error combines the least-squares error with the change of s when the next
    smaller circumference joins the fit. A state real in a product basis under a real permutation
    (no twist) has a real lambda at every ``L_y``: only its sign at odd ``L_y`` can carry a spin
    (negative: s = 1/2), so when every lambda is real the fit reads s from the signs instead of
    fitting the phase (whose constant would absorb a common sign) and its note says so. At the toric
    code's fixed point lambda is positive in all four sectors, its fermion's h = 1/2 included (flat
    spectrum; :mod:`netprobe.pipeline.loops`).
Z2 sectors (:mod:`netprobe.pipeline.loops`)
    A model file that declares ``[z2_loops]`` gets the loop values on the last column of the left
    part and the Z2 labels (charge q, flux f) in ``polarization.z2_loops``; lambda itself is the plain
    ``<T_y^L>`` (a covariant Z2 phase was tried and rejected, see there).
Drivers (:func:`edge_state`, :func:`edge_ladder`)
    Ground state by the chosen engine (exact, dmrg, gaussian), cut, counting, per-sector
    polarization; a ladder of circumferences repeats this and fits.
"""

from __future__ import annotations

import cmath
import dataclasses
import math
import time
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from netprobe.pipeline.cut import CutSpectrum, column_cut, exact_cut, gaussian_cut, mps_cut
from netprobe.errors import NetprobeError
from netprobe.model.spec import build_model
from netprobe.engines.dmrg import SweepSettings, find_ground_state
from netprobe.engines.gaussian import gaussian_state
from netprobe.engines.exact import expectation, ground_state
from netprobe.engines.mps import product_expectation
from netprobe.pipeline.loops import z2_sector

__all__ = ["EDGE_ENGINES", "CHARACTERS", "SectorCount", "PolarizationFit", "count_levels", "fit_polarization",
           "edge_state", "edge_ladder", "charge_label", "zero_mode_ratio", "ZERO_MODE_RATIO"]

EDGE_ENGINES = ("exact", "dmrg", "gaussian")

CHARACTERS = {
    "chiral boson": (1, 1, 2, 3, 5, 7, 11),
    "Ising vacuum": (1, 0, 1, 1, 2, 2, 3),
    "Ising psi": (1, 1, 1, 1, 2, 2, 3),
    "Ising sigma": (1, 1, 1, 2, 2, 3, 4),
}
"""Multiplicities of the chiral edge theories by momentum step (partition numbers; Ising characters)."""

_SAME = 1e-6  # levels closer than this (in xi) count as degenerate with the lowest
_REAL = 1e-10  # |Im lambda| below this fraction of |lambda|: a real lambda (rounding of real arithmetic)
_TAIL = 4  # s is read from at most this many of the largest circumferences (the phase fit and the sign reading)


def charge_label(charge) -> str:
    """The JSON key of a charge sector: ``"3"``, ``"3,1"`` or ``"none"``."""
    charge = tuple(int(c) for c in charge)
    return ",".join(map(str, charge)) if charge else "none"


@dataclass(frozen=True)
class SectorCount:
    """Level counting of one charge sector of the left part.

    Attributes
    ----------
    charge : tuple of int
    lowest_level : float
    base_momentum : int
        Momentum of the lowest level; counts are relative to it.
    direction : int
        +1 or -1: the side (towards +y or -y) whose first level is lower, provided that side also
        holds more of the counted levels; 0 otherwise (no chirality visible). +1 is an edge running
        counterclockwise around the left part (c- > 0 in the convention of J).
    counts : list of int
        Levels at relative momentum ``0, direction, 2 direction, ...``.
    counts_opposite : list of int
        The same on the other side.
    spacing : float
        ``delta``, the step to the lowest level one momentum away on the chiral side.
    matches : list of str
        Edge theories of :data:`CHARACTERS` whose multiplicities start with ``counts``.
    """

    charge: tuple
    lowest_level: float
    base_momentum: int
    direction: int
    counts: list
    counts_opposite: list
    spacing: float
    matches: list = field(default_factory=list)

    def to_json(self) -> dict:
        """Plain values for JSON."""
        return {"charge": charge_label(self.charge), "lowest_level": self.lowest_level,
                "base_momentum": self.base_momentum, "direction": self.direction, "counts": list(self.counts),
                "counts_opposite": list(self.counts_opposite), "spacing": self.spacing,
                "matches": self.matches}


def _relative(m, m0, w):
    r = (int(m) - int(m0)) % w
    return r - w if r > w // 2 else r


def count_levels(spectrum: CutSpectrum, *, steps: int = 4, window: float | None = None) -> list[SectorCount]:
    """Counting of levels by relative momentum in every charge sector (see the module notes).

    Parameters
    ----------
    spectrum : CutSpectrum
    steps : int
        Count momenta ``0 .. steps`` away from the lowest level (at most ``L_y // 2``).
    window : float, optional
        Count every level below ``xi_0 + window`` instead of the momentum-dependent window.
    """
    w = spectrum.circumference
    steps = max(0, min(int(steps), w // 2 if w % 2 else w // 2 - 1))
    levels = spectrum.levels
    out = []
    for q in sorted(set(map(tuple, spectrum.charges.tolist()))):
        mask = np.all(spectrum.charges == np.array(q, dtype=np.int64).reshape(1, -1), axis=1) if q else \
            np.ones(levels.size, bool)
        xi, mom = levels[mask], spectrum.momenta[mask]
        order = np.argsort(xi, kind="stable")
        xi, mom = xi[order], mom[order]
        xi0, m0 = float(xi[0]), int(mom[0])
        rel = np.array([_relative(m, m0, w) for m in mom])
        first = {}
        for side in (1, -1):
            above = (rel == side) & (xi > xi0 + _SAME)
            first[side] = float(xi[above][0]) if np.any(above) else math.inf
        if math.isinf(first[1]) and math.isinf(first[-1]):
            direction = 0
        elif abs(first[1] - first[-1]) < _SAME * max(1.0, abs(xi0)):
            direction = 0
        else:
            direction = 1 if first[1] < first[-1] else -1
        side = direction or 1
        spacing = first[side] - xi0 if direction else 0.0

        def counts_on(sign):
            counts = []
            for n in range(steps + 1):
                if window is not None:
                    top = xi0 + window
                elif direction:
                    top = xi0 + (n + 0.5) * spacing
                else:
                    top = xi0 + _SAME * max(1.0, abs(xi0))
                counts.append(int(np.sum((rel == sign * n) & (xi <= top))))
            return counts

        counts = counts_on(side)
        opposite = counts_on(-side)
        if sum(counts[1:]) <= sum(opposite[1:]):
            direction = 0  # as many low levels against the first step as along it: no chirality visible
        if direction and steps >= 2:
            # a linear branch puts the lowest level two steps away near 2 delta; a flat band of high
            # levels (a trivial phase's entanglement gap) puts it near delta
            two = (rel == side * 2) & (xi > xi0 + _SAME)
            if np.any(two) and float(xi[two][0]) < xi0 + 1.5 * spacing:
                direction = 0
        matches = [name for name, ref in CHARACTERS.items()
                   if direction and len(counts) >= 3 and tuple(counts) == ref[:len(counts)]]
        out.append(SectorCount(q, xi0, m0, direction, counts, opposite, float(spacing), matches))
    return out


@dataclass(frozen=True)
class PolarizationFit:
    """Fit of ``arg lambda`` over circumferences to ``(2 pi / L_y) s + b L_y + const``.

    Attributes
    ----------
    circumferences : list of int
    phases : list of float
        ``arg lambda``, unwrapped along increasing circumference.
    moduli : list of float
    s : float
        ``h_a - c-/24`` reduced to (-1/2, 1/2].
    error : float
        Least-squares error combined with the change when the smallest circumference is dropped
        (None with fewer than four circumferences).
    slope : float
        ``b``.
    note : str
    """

    circumferences: list
    phases: list
    moduli: list
    s: float
    error: float | None
    slope: float
    note: str = ""
    used: list = field(default_factory=list)
    s_all: float | None = None

    @property
    def c_minus(self) -> float:
        """``-24 s`` (for the vacuum sector, ``h_a = 0``); defined mod 24."""
        return -24.0 * self.s

    @property
    def c_minus_error(self) -> float | None:
        return None if self.error is None else 24.0 * self.error

    def to_json(self) -> dict:
        """Plain values for JSON (the keys of the ``polarization`` object of ``netprobe edge``)."""
        return {"circumferences": list(self.circumferences), "phases": list(self.phases),
                "lambda_abs_by_circumference": list(self.moduli), "h_minus_c_over_24": self.s,
                "error": self.error, "slope": self.slope, "c_minus": self.c_minus,
                "c_minus_error": self.c_minus_error, "circumferences_fitted": list(self.used),
                "h_minus_c_over_24_all": self.s_all, "note": self.note}


def _lsq(lys: np.ndarray, phases: np.ndarray):
    a = np.stack([2 * math.pi / lys, lys, np.ones_like(lys)], axis=1)
    coef, *_ = np.linalg.lstsq(a, phases, rcond=None)
    dof = lys.size - 3
    if dof > 0:
        resid = phases - a @ coef
        cov = np.linalg.inv(a.T @ a) * float(resid @ resid) / dof
        return coef, math.sqrt(max(cov[0, 0], 0.0))
    return coef, None


def _mod1(s: float) -> float:
    r = s - math.floor(s + 0.5)
    return 0.5 if r <= -0.5 else r


def fit_polarization(circumferences: Sequence[int], lambdas: Sequence[complex],
                     note: str = "") -> PolarizationFit:
    """Fit ``arg lambda`` over circumferences (see the module notes).

    Raises
    ------
    NetprobeError
        With fewer than three distinct circumferences, or a lambda that vanishes.
    """
    pairs = sorted(zip((int(c) for c in circumferences), lambdas))
    lys = np.array([p[0] for p in pairs], float)
    if len(set(lys.tolist())) != lys.size or lys.size < 3:
        raise NetprobeError(f"--circumferences: the fit needs at least three different circumferences, got "
                            f"{sorted(set(int(x) for x in lys))}; e.g. --circumferences 7,9,11,13")
    lam = np.array([p[1] for p in pairs], complex)
    if np.any(np.abs(lam) < 1e-300):
        raise NetprobeError("the momentum polarization vanishes at some circumference; its phase is "
                            "undefined")
    phases = np.unwrap(np.angle(lam))
    if np.all(np.abs(lam.imag) <= _REAL * np.abs(lam)):
        return _sign_reading(lys, lam, phases, note)
    coef_all, _ = _lsq(lys, phases)
    tail = min(lys.size, _TAIL)
    coef, stat = _lsq(lys[-tail:], phases[-tail:])
    error = None
    if lys.size >= 5:
        coef_more, _ = _lsq(lys[-tail - 1:], phases[-tail - 1:])
        error = math.hypot(stat or 0.0, float(coef_more[0] - coef[0]))
    elif lys.size == 4:
        coef_less, _ = _lsq(lys[1:], phases[1:])
        error = math.hypot(stat or 0.0, float(coef_less[0] - coef[0]))
    used = [int(x) for x in lys[-tail:]]
    s_all = _mod1(float(coef_all[0]))
    text = (f"s from the {tail} largest circumferences {used} (finite-size corrections fall off quickly "
            f"with L_y; error: least squares and the change when the next smaller circumference joins); "
            f"fit over all {lys.size}: s = {s_all:+.5f}")
    return PolarizationFit([int(x) for x in lys], phases.tolist(), np.abs(lam).tolist(),
                           _mod1(float(coef[0])), error, float(coef[1]), text + ("; " + note if note else ""),
                           used, s_all)


def _sign_reading(lys: np.ndarray, lam: np.ndarray, phases: np.ndarray, note: str) -> PolarizationFit:
    """:class:`PolarizationFit` of real lambdas: ``s_L = L_y arg(lambda) / 2 pi mod 1`` at each ``L_y``.

    A real lambda has the phase 0 or pi; ``pi = 2 pi (s + K) / L_y`` with an integer K needs
    ``s = 1/2`` at odd ``L_y`` and allows only ``s = 0`` at even ``L_y``. The continuous fit cannot
    see this (its constant absorbs a common sign), so ``s`` is read at the largest circumference and
    the error is the largest difference among the four largest (1/2 where their signs disagree).
    """
    per = [0.5 if (int(ly) % 2 and value.real < 0) else 0.0 for ly, value in zip(lys, lam)]
    tail = min(lys.size, _TAIL)
    used = [int(x) for x in lys[-tail:]]
    s = per[-1]
    error = max(abs(x - s) for x in per[-tail:])
    s_all = s if all(x == s for x in per) else None
    text = (f"lambda is real at every circumference: s read from its sign (s = 1/2 for a negative lambda "
            f"at odd L_y, 0 otherwise: the phase pi is 2 pi (s + K) / L_y with an integer K), per "
            f"circumference {dict(zip(map(int, lys), per))}; s at the largest, error: the largest "
            f"difference among {used}")
    return PolarizationFit([int(x) for x in lys], phases.tolist(), np.abs(lam).tolist(), s, error, 0.0,
                           text + ("; " + note if note else ""), used, s_all)


# --------------------------------------------------------------------------------------------------
# Drivers
# --------------------------------------------------------------------------------------------------


def _thread_flux(model, state, settings, quanta: int, steps: int, seed, progress):
    """Warm-started DMRG while the twist grows by ``2 pi quanta`` (the adiabatic branch of :mod:`netprobe.pipeline.flux`)."""
    if "twist" not in model.spec.parameters or not model.spec.conserved:
        raise NetprobeError(f"--flux-quanta: model '{model.name}' needs a 'twist' parameter and a conserved charge "
                            "to thread flux; choose the sector by its boundary or charge instead")
    overrides = {k: repr(v) if isinstance(v, float) else str(v) for k, v in model.parameters.items()
                 if k in model.spec.parameters and not isinstance(v, complex)}
    twist0 = float(model.parameters.get("twist", 0.0))
    result = None
    for k in range(1, abs(quanta) * steps + 1):
        theta = twist0 + math.copysign(2 * math.pi * k / steps, quanta)
        step_model = build_model(model.spec, {**overrides, "twist": repr(theta)})
        result = find_ground_state(step_model, settings, seed=seed, state=state, progress=None, warn=False)
        state = result.state
        if progress is not None:
            print(f"edge | flux step {k}/{abs(quanta) * steps} | twist {theta:.4f} | energy {result.energy:.10f}",
                  file=progress, flush=True)
    return state, result


def _ground_state_cut(model, engine, cut, *, bond_dimensions, sweeps, seed, window, progress, flux_quanta=0,
                      flux_steps=8):
    info: dict = {}
    if flux_quanta and engine != "dmrg":
        raise NetprobeError("--flux-quanta needs --engine dmrg (the adiabatic branch follows a warm-started "
                            "state); with free fermions use the charge sectors of the cut instead")
    if engine == "gaussian":
        state = gaussian_state(model)
        info["energy"] = float(state.energy)
        return gaussian_cut(state, cut, window=window), info
    if engine == "exact":
        gs = ground_state(model.hamiltonian)
        info["energy"] = float(gs.energy)
        if model.spec.z2_loops:
            info["z2"] = z2_sector(model, cut.column - 1, lambda p: expectation(gs, [p]))
        return exact_cut(gs.vector(0), gs.basis, model.space, cut), info
    state, rungs, spectrum = None, [], None
    for d in bond_dimensions:
        # the cut needs the state itself, not only its energy: tighter than the engine's defaults
        kwargs = {"bond_dimension": int(d), "energy_tolerance": 1e-12, "solver_tolerance": 1e-10}
        if sweeps:
            kwargs["sweep_limit"] = int(sweeps)
        if state is not None:
            kwargs["ramp"] = ()
        result = find_ground_state(model, SweepSettings(**kwargs), seed=seed, state=state,
                                   progress=progress, warn=False)
        state = result.state
        spectrum = mps_cut(state, cut)
        lam = spectrum.polarization
        rungs.append({"bond_dimension": int(d), "energy": float(result.energy),
                      "converged": bool(getattr(result, "converged", True)),
                      "lambda_abs": abs(lam), "lambda_arg": cmath.phase(lam)})
    if flux_quanta:
        settings = SweepSettings(**kwargs)
        state, result = _thread_flux(model, state, settings, flux_quanta, flux_steps, seed, progress)
        # the state now belongs to the Hamiltonian with the larger twist: translate with its gauge phase
        cut = dataclasses.replace(cut, twist=cut.twist + 2 * math.pi * flux_quanta)
        spectrum = mps_cut(state, cut)
        lam = spectrum.polarization
        info["flux_quanta"] = int(flux_quanta)
        rungs.append({"bond_dimension": int(bond_dimensions[-1]), "energy": float(result.energy),
                      "converged": bool(getattr(result, "converged", True)), "flux_quanta": int(flux_quanta),
                      "lambda_abs": abs(lam), "lambda_arg": cmath.phase(lam)})
    info["energy"] = rungs[-1]["energy"]
    info["ladder"] = rungs
    if model.spec.z2_loops:
        info["z2"] = z2_sector(model, cut.column - 1, lambda p: product_expectation(state, p))
    if len(rungs) > 1:
        prev = rungs[-2]
        last = rungs[-1]["lambda_abs"] * cmath.exp(1j * rungs[-1]["lambda_arg"])
        info["lambda_change_last_rungs"] = abs(last - prev["lambda_abs"] * cmath.exp(1j * prev["lambda_arg"]))
    return spectrum, info


def _twist(model) -> float:
    """The model's flux through the cylinder (0 without a ``twist`` parameter)."""
    value = model.parameters.get("twist", 0.0) if "twist" in model.spec.parameters else 0.0
    return float(np.real(value or 0.0))


def edge_state(model, *, engine: str = "dmrg", column: int | None = None,
               bond_dimensions: Sequence[int] = (64,), sweeps: int | None = None, seed: int = 0,
               window: float = 12.0, steps: int = 4, count_window: float | None = None, progress=None,
               flux_quanta: int = 0) -> dict:
    """Ground state of ``model`` by ``engine``, its cut spectrum, counting and polarization.

    ``flux_quanta`` (DMRG) threads that many flux quanta through the cylinder after the ground state,
    warm-starting every step, so that the state follows its adiabatic branch into the next anyon sector.

    Returns a JSON-friendly dictionary with ``spectrum``, ``counting``, ``counting_details``,
    ``polarization`` (``lambda_abs``, ``lambda_arg``) and ``sectors`` (per charge of the left part:
    weight and ``lambda``), plus the cut and the engine's own information.
    """
    if engine not in EDGE_ENGINES:
        raise NetprobeError(f"unknown engine '{engine}'; valid engines: {', '.join(EDGE_ENGINES)}")
    cut = column_cut(model.lattice, column, twist=_twist(model))
    start = time.perf_counter()
    spectrum, info = _ground_state_cut(model, engine, cut, bond_dimensions=bond_dimensions, sweeps=sweeps,
                                       seed=seed, window=window, progress=progress, flux_quanta=flux_quanta)
    counts = count_levels(spectrum, steps=steps, window=count_window)
    lowest = min(counts, key=lambda c: c.lowest_level)
    ratio = zero_mode_ratio(counts)
    lam = spectrum.polarization
    z2 = info.pop("z2", None)
    polarization = {"lambda_abs": abs(lam), "lambda_arg": cmath.phase(lam)}
    if z2 is not None:
        polarization["z2_loops"] = z2.to_json()
    sectors = []
    for q, (weight, lam_q) in spectrum.sector_polarization().items():
        if weight > 1e-8:
            sectors.append({"charge": charge_label(q), "weight": weight, "lambda_abs": abs(lam_q),
                            "lambda_arg": cmath.phase(lam_q)})
    return {
        "model": model.name, "engine": engine, "lattice": model.lattice.describe(),
        "circumference": model.lattice.circumference, "cut": {"column": cut.column, "bond": cut.bond},
        "parameters": model.numeric_parameters(), **info,
        "spectrum": spectrum.sorted(),
        "counting": {charge_label(c.charge): c.counts for c in counts},
        "counting_details": {"lowest_sector": charge_label(lowest.charge), "steps": steps,
                             "window": count_window, "sectors": [c.to_json() for c in counts]},
        "polarization": polarization,
        "sectors": sectors,
        "zero_mode_ratio": ratio,
        "seconds": time.perf_counter() - start,
    }


ZERO_MODE_RATIO = 0.25
"""Below this :func:`zero_mode_ratio` flags an edge zero mode at the cut (about 1/2 without one, 0 with one)."""


def zero_mode_ratio(counts: Sequence[SectorCount]) -> float | None:
    """Gap from the lowest level to the lowest level of a neighbouring charge, over the momentum spacing.

    For a chiral fermion edge whose allowed momenta avoid its Fermi point (antiperiodic sector) a
    charge +-1 costs half a momentum step (ratio about 1/2); when the Fermi point is an allowed
    momentum (a zero mode, periodic sector, h = 1/8 for a Dirac edge) the two charges are degenerate
    (ratio near 0). None without a charge or without a visible chiral branch.
    """
    lowest = min(counts, key=lambda c: c.lowest_level)
    if not lowest.charge or not lowest.direction or lowest.spacing <= 0:
        return None
    near = [c.lowest_level for c in counts
            if c.charge and abs(c.charge[0] - lowest.charge[0]) == 1 and tuple(c.charge[1:]) == tuple(lowest.charge[1:])]
    if not near:
        return None
    return float((min(near) - lowest.lowest_level) / lowest.spacing)


def _why(circumferences, spec_params, ratios=()) -> str:
    parity = {c % 2 for c in circumferences}
    twist = float(np.real(spec_params.get("twist", 0.0) or 0.0))
    text = ("odd circumferences only" if parity == {1} else "even circumferences only" if parity == {0}
            else "mixed even and odd circumferences: the allowed momenta around y, and with them the edge's "
                 "sector, differ between them; fit odd and even separately if the fit is poor")
    text += (f"; twist {twist:g} rad (momenta are kinetic: the translation carries exp(i q twist / L_y) per "
             "unit charge, so T^L_y gives the Aharonov-Bohm phase)")
    flagged = [c for c, r in zip(circumferences, ratios) if r is not None and r < ZERO_MODE_RATIO]
    if flagged:
        text += (f"; WARNING: at L_y = {flagged} the lowest levels of neighbouring charges are nearly degenerate, "
                 "a zero mode of the edge at the cut (its Fermi point is an allowed momentum: periodic sector, "
                 "h shifted by 1/8 for a Dirac edge); choose the twist (0 or pi) or the parity of L_y that moves "
                 "the allowed momenta off the crossing")
    elif any(r is not None for r in ratios):
        text += "; no edge zero mode at the cut (neighbouring charges half a momentum step above the lowest level)"
    return text + "; s = h_a - c-/24 is defined mod 1"


def edge_ladder(spec, overrides: dict, circumferences: Sequence[int], *, engine: str = "dmrg",
                column: int | None = None, bond_dimensions: Sequence[int] = (64,), sweeps: int | None = None,
                seed: int = 0, window: float = 12.0, steps: int = 4, count_window: float | None = None,
                progress=None, flux_quanta: int = 0) -> dict:
    """:func:`edge_state` at every circumference, and the polarization fit (overall and per charge offset).

    The result of the largest circumference supplies ``spectrum`` and ``counting``; ``polarization``
    holds the fit of the full ``lambda`` (the vacuum sector where the state is in it), and
    ``sector_fits`` the fits of ``lambda_Q`` for the charge sectors at fixed offsets from the most
    probable one, whose differences are the topological spins ``h_Q - h_0`` (mod 1).
    """
    circumferences = [int(c) for c in circumferences]
    if len(circumferences) < 3:
        raise NetprobeError(f"--circumferences needs at least three values, got {circumferences}; "
                            "e.g. 7,9,11,13")
    runs = []
    for ly in sorted(circumferences):
        model = build_model(spec, {**overrides, "circumference": str(ly)})
        if progress is not None:
            print(f"edge | circumference {ly} | {model.lattice.describe()}", file=progress, flush=True)
        runs.append(edge_state(model, engine=engine, column=column, bond_dimensions=bond_dimensions,
                               sweeps=sweeps, seed=seed, window=window, steps=steps,
                               count_window=count_window, progress=None, flux_quanta=flux_quanta))
    lys = [r["circumference"] for r in runs]
    lambdas = [r["polarization"]["lambda_abs"] * cmath.exp(1j * r["polarization"]["lambda_arg"])
               for r in runs]
    note = _why(lys, runs[-1]["parameters"], [r.get("zero_mode_ratio") for r in runs])
    z2 = [r["polarization"].get("z2_loops") for r in runs]
    if any(z is not None for z in z2):
        labels = sorted({(z["charge"], z["flux"]) for z in z2 if z is not None}, key=str)
        note += (f"; Z2 loops (charge, flux) = {labels}"
                 + ("" if all(z is not None and z["sharp"] for z in z2) else " (not sharp at every circumference)"))
    if all(abs(lam.imag) <= _REAL * abs(lam) for lam in lambdas):
        note += ("; lambda is real at every circumference (a real state under a real translation): only its "
                 "sign at odd L_y can carry a spin (h = 1/2: negative); at the toric code's fixed point it is "
                 "positive in every sector (flat spectrum), so h = 1/2 of e x m does not show there")
    fit = fit_polarization(lys, lambdas, note)
    sector_fits = []
    if all(r["sectors"] and r["sectors"][0]["charge"] != "none" for r in runs):
        for offset in (-1, 0, 1):
            per = []
            for r in runs:
                best = max(r["sectors"], key=lambda s: s["weight"])
                target = _shift_label(best["charge"], offset)
                hit = [s for s in r["sectors"] if s["charge"] == target]
                if not hit:
                    break
                per.append(hit[0]["lambda_abs"] * cmath.exp(1j * hit[0]["lambda_arg"]))
            if len(per) == len(runs):
                f = fit_polarization(lys, per)
                sector_fits.append({"offset": offset, "h_minus_c_over_24": f.s, "error": f.error,
                                    "phases": f.phases})
        base = next((f for f in sector_fits if f["offset"] == 0), None)
        if base is not None:
            for f in sector_fits:
                f["h_relative"] = _mod1(f["h_minus_c_over_24"] - base["h_minus_c_over_24"])
    last = runs[-1]
    out = {k: v for k, v in last.items() if k not in ("polarization", "seconds")}
    out["polarization"] = {"lambda_abs": last["polarization"]["lambda_abs"],
                           "lambda_arg": last["polarization"]["lambda_arg"],
                           **{k: last["polarization"][k] for k in ("z2_loops",) if k in last["polarization"]},
                           **fit.to_json()}
    out["sector_fits"] = sector_fits
    out["runs"] = [{"circumference": r["circumference"], "lambda_abs": r["polarization"]["lambda_abs"],
                    "lambda_arg": r["polarization"]["lambda_arg"],
                    **{k: r["polarization"][k] for k in ("z2_loops",) if k in r["polarization"]},
                    "energy": r.get("energy"),
                    "zero_mode_ratio": r.get("zero_mode_ratio"),
                    "counting": r["counting"], "seconds": r["seconds"]} for r in runs]
    out["seconds"] = sum(r["seconds"] for r in runs)
    return out


def _shift_label(label: str, offset: int) -> str:
    parts = [int(x) for x in label.split(",")]
    parts[0] += offset
    return ",".join(map(str, parts))
