"""Bulk probes measured with an implementation per kind of ground state.

A probe name (the registry :data:`netprobe.probes.PROBES`, re-exported here) says what is measured on a
region layout; the kind of the ground state (:class:`~netprobe.engines.GroundState` ``kind``) says how:

``many-body``
    one reduced state of the parts A, B, C (:func:`netprobe.probes.measure_probes`), shared by every
    probe asked for;
``gaussian``
    correlation matrices and Majorana covariances (:mod:`netprobe.engines.gaussian`).

:func:`measure` returns a :class:`Measurement`; c- and gamma are derived in one place
(:func:`netprobe.probes.c_minus_from_j`, the Kitaev-Preskill sign).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np

from netprobe.errors import LatticeError, NetprobeError
from netprobe.engines.exact import local_expectations as exact_local_expectations
from netprobe.engines.mps import local_expectations as mps_local_expectations
from netprobe.probes import DEFAULT_EPS, PROBES, c_minus_from_j, measure_probes

__all__ = ["PROBES", "Measurement", "measure", "check_probes", "local_means"]


def check_probes(probes: Sequence[str] | str, kind: str | None = None) -> tuple[str, ...]:
    """Validated probe names (an unknown name is an error that lists the valid ones)."""
    if isinstance(probes, str):
        probes = [p for p in probes.split(",")]
    out = []
    for p in probes:
        p = p.strip()
        if p not in PROBES:
            raise NetprobeError(f"unknown probe '{p}'; valid probes: {', '.join(PROBES)}")
        if kind is not None and kind not in PROBES[p].kinds:
            continue
        out.append(p)
    if not out and not probes:
        raise NetprobeError(f"no probe requested; choose from {', '.join(PROBES)}")
    return tuple(out)


@dataclass(frozen=True)
class Measurement:
    """The probes of one ground state on one layout (values not asked for are None).

    Attributes
    ----------
    J, J_loose : float or None
        Modular commutator J(A, B, C) at the kernel floor ``eps`` and at ``100 eps`` (many-body).
    c_minus : float or None
        ``3 J / pi``.
    gamma, kitaev_preskill : float or None
        Topological entanglement entropy and the Kitaev-Preskill combination (``= -gamma``).
    cmi : float or None
        I(A:C|B) on the CMI layout.
    entropies : dict
        Von Neumann entropies by region name.
    chern_number : float or None
    sizes : dict
        Sites in each part.
    """

    J: float | None = None
    J_loose: float | None = None
    eps: float | None = None
    c_minus: float | None = None
    gamma: float | None = None
    kitaev_preskill: float | None = None
    cmi: float | None = None
    entropies: Mapping[str, float] = field(default_factory=dict)
    chern_number: float | None = None
    route: str | None = None
    sizes: Mapping[str, int] = field(default_factory=dict)
    seconds: float = 0.0

    def to_json(self) -> dict:
        """Plain values; keys of values not computed are left out."""
        out = {"entropies": dict(self.entropies) or None}
        for key in ("J", "J_loose", "eps", "c_minus", "gamma", "kitaev_preskill", "cmi", "chern_number",
                    "route"):
            value = getattr(self, key)
            if value is not None:
                out[key] = value
        if self.J_loose is not None and self.eps is not None:
            out["eps_loose"] = 100 * self.eps
        out["seconds"] = self.seconds
        return out

    def __repr__(self) -> str:
        items = [f"{k}={getattr(self, k):.5g}" for k in ("J", "c_minus", "gamma", "cmi", "chern_number")
                 if getattr(self, k) is not None]
        return f"Measurement({', '.join(items)})"


def _abc(layout) -> tuple[list[int], list[int], list[int]] | None:
    if layout is None or not set("ABC") <= set(layout.names):
        return None
    return tuple(list(layout[k]) for k in "ABC")


def _gaussian(ground, layout, cmi_layout, probes, eps, memory_budget) -> dict:
    state = ground.state
    out: dict = {}
    parts = _abc(layout)
    if parts is not None:
        a, b, c = parts
        if "S" in probes or "TEE" in probes:
            names = {"A": a, "B": b, "C": c, "AB": a + b, "BC": b + c, "AC": a + c, "ABC": a + b + c}
            out["entropies"] = {k: float(state.entropy(v)) for k, v in names.items()}
        if "TEE" in probes:
            kp = float(state.kitaev_preskill(a, b, c))
            out.update(kitaev_preskill=kp, gamma=-kp)
        if "J" in probes:
            j = float(state.modular_commutator(a, b, c))
            out.update(J=j, c_minus=c_minus_from_j(j), eps=getattr(state, "clip", None))
        # the Chern number comes with J: same three sectors, same projector, a fraction of the cost
        if ("J" in probes or "chern_number" in probes) and hasattr(state, "chern_number"):
            out["chern_number"] = float(state.chern_number(a, b, c))
    elif "S" in probes and layout is not None:
        out["entropies"] = {n: float(state.entropy(list(layout[n]))) for n in layout.names}
    target = _abc(cmi_layout if cmi_layout is not None else layout)
    if "CMI" in probes and target is not None:
        out["cmi"] = float(state.cmi(*target))
    out["route"] = "gaussian"
    return out


def _many_body(ground, layout, cmi_layout, probes, eps, memory_budget) -> dict:
    space = ground.model.space
    main_probes = tuple(p for p in probes if p in ("S", "TEE", "J") or (p == "CMI" and cmi_layout is None))
    if _abc(layout) is None:
        main_probes = tuple(p for p in main_probes if p == "S")
    out: dict = {}
    if main_probes:
        report = measure_probes(ground.state, layout, space, probes=main_probes, eps=eps,
                                memory_budget=memory_budget)
        out["entropies"] = dict(report.entropies)
        out["route"] = report.route
        if report.kitaev_preskill is not None:
            out.update(kitaev_preskill=report.kitaev_preskill, gamma=report.gamma)
        if report.cmi is not None:
            out["cmi"] = report.cmi
        mc = report.modular_commutator
        if mc is not None:
            out.update(J=mc.value, J_loose=mc.value_loose, eps=mc.eps, c_minus=mc.c_minus)
    if "CMI" in probes and cmi_layout is not None and _abc(cmi_layout) is not None:
        out["cmi"] = measure_probes(ground.state, cmi_layout, space, probes=("CMI",), eps=eps,
                                    memory_budget=memory_budget).cmi
    return out


_KINDS = {"many-body": _many_body, "gaussian": _gaussian}


def measure(ground, layout, *, probes: Sequence[str] = ("S", "TEE", "J", "CMI"), cmi_layout=None,
            eps: float = DEFAULT_EPS, memory_budget: int | None = None) -> Measurement:
    """The probes of a ground state on a region layout.

    Parameters
    ----------
    ground : GroundState
    layout : netprobe.regions.Layout
        Parts A, B, C (counterclockwise) for J, TEE and (without ``cmi_layout``) the CMI; any parts
        for the entropies alone.
    probes : sequence of str
        Names in :data:`netprobe.probes.PROBES`; probes the state's kind does not implement are skipped.
    cmi_layout : Layout, optional
        A layout whose B separates A from C, for the CMI.
    eps : float
        Kernel floor of the modular Hamiltonians (many-body states).
    memory_budget : int, optional

    Returns
    -------
    Measurement
    """
    if ground.kind not in _KINDS:
        raise ValueError(f"measure: unknown state kind {ground.kind!r}")
    probes = check_probes(probes, ground.kind)
    if layout is None:
        raise LatticeError("measure: no region layout given")
    start = time.perf_counter()
    values = _KINDS[ground.kind](ground, layout, cmi_layout, probes, eps, memory_budget)
    return Measurement(**values, sizes={n: len(layout[n]) for n in layout.names},
                       seconds=time.perf_counter() - start)


def local_means(ground, operator: str) -> np.ndarray:
    """``<O_i>`` on every site for a named local operator, for any kind of ground state.

    Free-fermion states give the occupation ``n`` only (the diagonal of the correlation matrix).
    """
    if ground.kind == "gaussian":
        correlation = getattr(ground.state, "correlation", None)
        if correlation is None or operator != "n":
            raise NetprobeError(f"'mean:{operator}': the gaussian engine evaluates mean:n of number-conserving "
                                "fermions only")
        return np.real(np.diag(correlation))
    if ground.engine == "exact":
        return np.asarray(exact_local_expectations(ground.state, ground.model, operator))
    return np.asarray(mps_local_expectations(ground.state, operator))
