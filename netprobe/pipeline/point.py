"""One point of coupling space: model -> engine -> ground state(s) -> probes on a region.

:func:`probe_model` is what ``netprobe probe`` runs: the ground state by any engine
(:mod:`netprobe.engines`), then the probes (:mod:`netprobe.pipeline.measure`) on the layouts that a
region text stands for (:func:`expand_region`):

- ``disk:radius=R[,center=X,Y]`` is split into three counterclockwise 120-degree sectors A, B, C
  (J, c- = 3 J / pi, entropies, Kitaev-Preskill gamma) and, for the CMI, into the shielded layout
  A (d <= R/3), B (R/3 < d <= 2R/3), C (2R/3 < d <= R), in which B separates A from C;
- any other layout kind is used as given (for ``levin_wen``, ``gamma_levin_wen`` = I(A:C|B)/2).

DMRG rungs are measured in memory as the ladder produces them; the headline values are the last
rung's.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Sequence

from netprobe.engines import GroundState, SolveSettings, solve
from netprobe.errors import LatticeError
from netprobe.pipeline.measure import PROBES, Measurement, check_probes, measure
from netprobe.probes import DEFAULT_EPS
from netprobe.regions import Layout, build_layout, parse_region
from netprobe.engines.mps.store import load_state

__all__ = ["RegionPlan", "Rung", "ProbeResult", "expand_region", "probe_model", "probe_ground_state",
           "probe_saved_state"]


@dataclass(frozen=True)
class RegionPlan:
    """The layouts a region text stands for.

    Attributes
    ----------
    main : Layout
    cmi : Layout or None
        The CMI layout; None to evaluate the CMI on ``main`` itself.
    note : str
        Why a CMI is missing, if it is.
    """

    main: Layout
    cmi: Layout | None = None
    note: str = ""
    cmi_possible: bool = True


def expand_region(text: str | Layout, lattice, cmi_region: str | Layout | None = None) -> RegionPlan:
    """The layouts of a region description (see the module notes)."""
    layout = text if isinstance(text, Layout) else parse_region(text, lattice)
    if layout.kind == "disk":
        radius = float(layout.params["radius"])
        center = layout.params.get("center")
        main = build_layout(lattice, "sectors", radius=radius, center=center)
    else:
        main, radius, center = layout, None, None
    if cmi_region is not None:
        cmi = cmi_region if isinstance(cmi_region, Layout) else parse_region(cmi_region, lattice)
        return RegionPlan(main, cmi)
    if radius is None:
        return RegionPlan(main)
    try:
        shield = build_layout(lattice, "shielded", a=radius / 3, b=2 * radius / 3, c=radius, center=center)
    except LatticeError as err:
        return RegionPlan(main, None, f"no CMI: the shielded split of this disk is not valid ({err})", False)
    return RegionPlan(main, shield)


@dataclass(frozen=True)
class Rung:
    """One ground state and its probes."""

    ground: GroundState
    values: Measurement

    def to_json(self) -> dict:
        out = {"energy": self.ground.energy}
        if self.ground.bond_dimension is not None:
            out["bond_dimension"] = self.ground.bond_dimension
            out["discarded_weight"] = self.ground.discarded_weight
            if self.ground.info.get("state_file"):
                out["state_file"] = self.ground.info["state_file"]
        out.update(self.values.to_json())
        return out


def _parts_json(layout: Layout) -> dict:
    data = layout.to_json()
    return {"kind": layout.kind, "spec": layout.spec, "parts": data.get("parts", data)}


@dataclass(frozen=True)
class ProbeResult:
    """Probes of a model's ground state(s) on one region plan.

    Attributes
    ----------
    model : netprobe.model.spec.Model
    engine : str
    plan : RegionPlan
    rungs : list of Rung
        One per ground state (a DMRG ladder: one per bond dimension).
    seconds : float
    state_file : str or None
        The source, when a saved state was probed.
    """

    model: Any = field(repr=False)
    engine: str
    plan: RegionPlan = field(repr=False)
    rungs: list
    seconds: float = 0.0
    state_file: str | None = None

    @property
    def last(self) -> Rung:
        return self.rungs[-1]

    def to_json(self) -> dict:
        """The JSON object of ``netprobe probe``."""
        model = self.model
        out: dict = {"model": model.name, "engine": self.engine, "sites": model.num_sites,
                     "parameters": model.numeric_parameters()}
        if self.state_file is not None:
            out["state_file"] = self.state_file
        last = self.last.to_json()
        out.update({k: v for k, v in last.items() if k not in ("bond_dimension", "state_file", "discarded_weight")})
        if self.engine == "dmrg":
            out["bond_dimension"] = self.last.ground.bond_dimension
            if self.state_file is None:
                out["ladder"] = [r.to_json() for r in self.rungs]
                if len(self.rungs) > 1 and self.rungs[-1].values.J is not None:
                    out["J_change_last_rungs"] = abs(self.rungs[-1].values.J - self.rungs[-2].values.J)
        regions = {"main": _parts_json(self.plan.main)}
        if self.plan.cmi is not None:
            regions["cmi"] = _parts_json(self.plan.cmi)
        out["regions"] = regions
        if self.plan.main.kind == "levin_wen" and out.get("cmi") is not None:
            out["gamma_levin_wen"] = out["cmi"] / 2
        if self.plan.note:
            out["note"] = self.plan.note
        for key in ("J", "c_minus", "gamma", "cmi", "entropies"):
            out.setdefault(key, None)
        out["seconds"] = self.seconds
        return out

    def __repr__(self) -> str:
        return f"ProbeResult({self.model.name}, {self.engine}, {len(self.rungs)} rung(s): {self.last.values!r})"


def probe_ground_state(ground: GroundState, plan: RegionPlan, *, probes: Sequence[str] = tuple(PROBES),
                       eps: float = DEFAULT_EPS, memory_budget: int | None = None) -> Rung:
    """The probes of one ground state on a region plan."""
    cmi_layout = plan.cmi if plan.cmi_possible else None
    wanted = tuple(p for p in probes if p != "CMI" or plan.cmi_possible)
    return Rung(ground, measure(ground, plan.main, probes=wanted, cmi_layout=cmi_layout, eps=eps,
                                memory_budget=memory_budget))


def probe_model(model, region: str | Layout, *, engine: str = "dmrg", probes: Sequence[str] = tuple(PROBES),
                settings: SolveSettings | None = None, eps: float = DEFAULT_EPS,
                memory_budget: int | None = None, cmi_region: str | Layout | None = None) -> ProbeResult:
    """Ground state(s) of ``model`` by ``engine``, then the probes on ``region`` (see the module notes).

    Parameters
    ----------
    model : netprobe.model.spec.Model
    region : str or Layout
    engine : {"dmrg", "exact", "gaussian"}
    probes : sequence of str
        Names in :data:`netprobe.pipeline.measure.PROBES`.
    settings : SolveSettings, optional
        Engine settings (the DMRG ladder, seed, output folder, progress).
    eps : float
        Kernel floor of the modular Hamiltonians.
    memory_budget : int, optional
        Bytes allowed for a reduced state.
    cmi_region : str or Layout, optional
        Replaces the default CMI layout.

    Returns
    -------
    ProbeResult
    """
    probes = check_probes(probes)
    plan = expand_region(region, model.lattice, cmi_region)
    start = time.perf_counter()
    rungs: list[Rung] = []
    solve(model, engine, settings,
          lambda ground: rungs.append(probe_ground_state(ground, plan, probes=probes, eps=eps,
                                                         memory_budget=memory_budget)))
    return ProbeResult(model, engine, plan, rungs, time.perf_counter() - start)


def probe_saved_state(path, region: str | Layout, *, probes: Sequence[str] = tuple(PROBES),
                      eps: float = DEFAULT_EPS, memory_budget: int | None = None) -> ProbeResult:
    """The probes on a state file written by ``netprobe run``."""
    probes = check_probes(probes)
    saved = load_state(path)
    model = saved.model()
    plan = expand_region(region, model.lattice)
    start = time.perf_counter()
    state = saved.state
    ground = GroundState("dmrg", "many-body", state, float(saved.info.get("energy", float("nan"))), model,
                         bond_dimension=int(state.max_bond_dimension),
                         discarded_weight=saved.info.get("discarded_weight"), info={"state_file": str(path)})
    rung = probe_ground_state(ground, plan, probes=probes, eps=eps, memory_budget=memory_budget)
    return ProbeResult(model, "dmrg", plan, [rung], time.perf_counter() - start, state_file=str(Path(path)))
