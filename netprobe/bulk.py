"""Bulk probes of a ground state on real-space regions, for any engine: the orchestration layer.

One call takes a model (or a saved state), a region description and an engine, computes the
ground state if needed, and returns the probes as a JSON-friendly dictionary:

- a ``disk:radius=R[,center=X,Y]`` region is split into three counterclockwise 120-degree sectors
  A, B, C (modular commutator J, c- = 3 J / pi, entropies, Kitaev-Preskill gamma), and the same disk
  into a shielded layout A (d <= R/3), B (R/3 < d <= 2R/3), C (2R/3 < d <= R) for the conditional
  mutual information I(A:C|B) of parts separated by B;
- any other layout kind (``sectors``, ``levin_wen``, ``shielded``, ``strips``, ...) is used as given
  (for ``levin_wen`` the reported ``gamma_levin_wen`` is I(A:C|B)/2).

Engines: ``exact`` (exact diagonalisation), ``gaussian`` (free fermions; also the real-space Chern
number), ``dmrg`` (a bond-dimension ladder; the probes are evaluated on every rung, the headline
values on the last).
"""

from __future__ import annotations

import math
import time
from pathlib import Path
from typing import Sequence

from netprobe.errors import LatticeError, NetprobeError

__all__ = ["ENGINES", "PROBE_NAMES", "expand_regions", "probe_model", "probe_saved_state"]

ENGINES = ("dmrg", "exact", "gaussian")
PROBE_NAMES = ("J", "CMI", "TEE", "S")


def _check_probes(probes: Sequence[str]) -> tuple[str, ...]:
    out = []
    for p in probes:
        p = p.strip()
        if p not in PROBE_NAMES:
            raise NetprobeError(f"unknown probe '{p}'; valid probes: {', '.join(PROBE_NAMES)}")
        out.append(p)
    if not out:
        raise NetprobeError(f"no probe requested; choose from {', '.join(PROBE_NAMES)}")
    return tuple(out)


def expand_regions(text: str, lattice, cmi_region: str | None = None):
    """The layouts a region description stands for: ``(main, cmi_layout, note)``.

    ``cmi_layout`` is a layout for the CMI, ``None`` to evaluate the CMI on ``main`` itself (a layout
    given explicitly), or ``False`` when a disk is too small for its shielded split (no CMI).
    """
    from netprobe.regions import build_layout, parse_region

    layout = parse_region(text, lattice)
    if cmi_region:
        main = layout if layout.kind != "disk" else build_layout(
            lattice, "sectors", radius=float(layout.params["radius"]), center=layout.params.get("center"))
        return main, parse_region(cmi_region, lattice), ""
    if layout.kind != "disk":
        return layout, None, ""
    radius = float(layout.params["radius"])
    center = layout.params.get("center")
    main = build_layout(lattice, "sectors", radius=radius, center=center)
    try:
        shield = build_layout(lattice, "shielded", a=radius / 3, b=2 * radius / 3, c=radius, center=center)
        return main, shield, ""
    except LatticeError as err:
        return main, False, f"no CMI: the shielded split of this disk is not valid ({err})"


def _parts_json(layout) -> dict:
    data = layout.to_json()
    return {"kind": layout.kind, "spec": layout.spec, "parts": data.get("parts", data)}


def _gaussian_probes(state, layout, cmi_layout, probes) -> dict:
    a, b, c = (list(layout[k]) for k in "ABC") if set("ABC") <= set(layout.names) else ([], [], [])
    out: dict = {}
    if a:
        names = {"A": a, "B": b, "C": c, "AB": a + b, "BC": b + c, "AC": a + c, "ABC": a + b + c}
        if "S" in probes or "TEE" in probes:
            out["entropies"] = {k: state.entropy(v) for k, v in names.items()}
        if "TEE" in probes:
            out["kitaev_preskill"] = state.kitaev_preskill(a, b, c)
            out["gamma"] = -out["kitaev_preskill"]
        if "J" in probes:
            j = state.modular_commutator(a, b, c)
            out.update(J=j, c_minus=3 * j / math.pi, eps=getattr(state, "clip", None))
            if hasattr(state, "chern_number"):
                out["chern_number"] = state.chern_number(a, b, c)
    target = layout if cmi_layout is None else cmi_layout
    if "CMI" in probes and target is not False and set("ABC") <= set(target.names):
        out["cmi"] = state.cmi(*(list(target[k]) for k in "ABC"))
    return out


def _many_body_probes(state, space, layout, cmi_layout, probes, eps, memory_budget) -> dict:
    from netprobe.probes import measure_probes

    wanted = tuple(p for p in probes if p != "CMI" or cmi_layout is None)
    if not set("ABC") <= set(layout.names):
        wanted = tuple(p for p in wanted if p == "S")
    out: dict = {}
    if wanted:
        report = measure_probes(state, layout, space, probes=wanted, eps=eps, memory_budget=memory_budget).to_json()
        out.update({k: report[k] for k in ("entropies", "kitaev_preskill", "gamma", "J", "J_loose", "eps",
                                            "eps_loose", "c_minus", "cmi", "route", "seconds")
                    if k in report and report[k] is not None})
    if "CMI" in probes and cmi_layout:
        report = measure_probes(state, cmi_layout, space, probes=("CMI",), eps=eps,
                                memory_budget=memory_budget).to_json()
        out["cmi"] = report["cmi"]
    return out


def _finish(out: dict, layout, cmi_layout, note: str) -> dict:
    regions = {"main": _parts_json(layout)}
    if cmi_layout:
        regions["cmi"] = _parts_json(cmi_layout)
    out["regions"] = regions
    if layout.kind == "levin_wen" and out.get("cmi") is not None:
        out["gamma_levin_wen"] = out["cmi"] / 2
    if note:
        out["note"] = note
    for key in ("J", "c_minus", "gamma", "cmi", "entropies"):
        out.setdefault(key, None)
    return out


def probe_model(model, region: str, *, engine: str = "dmrg", probes: Sequence[str] = PROBE_NAMES,
                bond_dimensions: Sequence[int] = (32, 64), sweeps: int | None = None, seed: int = 0,
                overrides=None, out: str | Path | None = None, eps: float = 1e-12,
                memory_budget: int | None = None, progress="stderr", cmi_region: str | None = None) -> dict:
    """Ground state of ``model`` by ``engine``, then the probes on ``region`` (see the module notes).

    ``cmi_region`` (a layout text) replaces the default layout of the CMI; ``progress`` is a stream,
    "stderr" or None (quiet) for the DMRG sweeps.
    """
    if engine not in ENGINES:
        raise NetprobeError(f"unknown engine '{engine}'; valid engines: {', '.join(ENGINES)}")
    probes = _check_probes(probes)
    layout, cmi_layout, note = expand_regions(region, model.lattice, cmi_region)
    start = time.perf_counter()
    result: dict = {"model": model.name, "engine": engine, "sites": model.num_sites,
                    "parameters": model.numeric_parameters()}
    if engine == "gaussian":
        from netprobe.gaussian import gaussian_state

        state = gaussian_state(model)
        result["energy"] = float(state.energy)
        result.update(_gaussian_probes(state, layout, cmi_layout, probes))
    elif engine == "exact":
        from netprobe.exact import ground_state

        gs = ground_state(model.hamiltonian)
        result["energy"] = float(gs.energy)
        result.update(_many_body_probes(gs, model.space, layout, cmi_layout, probes, eps, memory_budget))
    else:
        import tempfile

        from netprobe.dmrg import LadderSettings, SweepSettings, run_ladder
        from netprobe.store import load_state

        settings = LadderSettings(bond_dimensions=tuple(bond_dimensions),
                                  sweeps=SweepSettings(max_sweeps=sweeps) if sweeps else SweepSettings())
        with tempfile.TemporaryDirectory(prefix="netprobe-probe-") as scratch:
            folder = out or scratch
            ladder = run_ladder(model, settings, overrides=overrides, seed=seed, out=folder,
                                progress=progress)
            rungs = []
            for stage in ladder.to_dict()["stages"]:
                state = load_state(stage["state_file"]).state
                values = _many_body_probes(state, model.space, layout, cmi_layout, probes, eps, memory_budget)
                rungs.append({"bond_dimension": stage["bond_dimension"], "energy": stage["energy"],
                              "discarded_weight": stage["discarded_weight"],
                              **({"state_file": stage["state_file"]} if out else {}), **values})
        result.update({k: v for k, v in rungs[-1].items() if k not in ("bond_dimension", "state_file")})
        result["bond_dimension"] = rungs[-1]["bond_dimension"]
        result["ladder"] = rungs
        if len(rungs) > 1 and rungs[-1].get("J") is not None:
            result["J_change_last_rungs"] = abs(rungs[-1]["J"] - rungs[-2]["J"])
    result["seconds"] = time.perf_counter() - start
    return _finish(result, layout, cmi_layout, note)


def probe_saved_state(path, region: str, *, probes: Sequence[str] = PROBE_NAMES, eps: float = 1e-12,
                      memory_budget: int | None = None) -> dict:
    """The probes on a state file written by ``netprobe run``."""
    from netprobe.store import load_state

    probes = _check_probes(probes)
    saved = load_state(path)
    model = saved.model()
    layout, cmi_layout, note = expand_regions(region, model.lattice)
    start = time.perf_counter()
    result = {"model": model.name, "engine": "dmrg", "state_file": str(path), "sites": model.num_sites,
              "bond_dimension": saved.state.max_bond_dimension, "parameters": model.numeric_parameters()}
    result.update(_many_body_probes(saved.state, model.space, layout, cmi_layout, probes, eps, memory_budget))
    result["seconds"] = time.perf_counter() - start
    return _finish(result, layout, cmi_layout, note)

