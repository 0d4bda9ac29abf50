"""Convergence verdicts of a study point: energy and probes against the bond dimension.

For the DMRG engine a point has one task per rung of the ladder. Its verdict holds

- the energy extrapolated to zero discarded weight with an error
  (:func:`netprobe.engines.dmrg.extrapolate_energy`: a line in the discarded weight);
- for each probe, the value at the largest bond dimension done and an extrapolation linear in 1/D
  (:func:`inverse_bond_fit`), with an error and the fit stated in words;
- flags: a probe whose last two rungs differ by more than ``change_threshold``, an energy whose last
  two rungs differ by more than ``energy_threshold * max(1, |E|)``, a rung whose DMRG run did not
  converge.

The exact and Gaussian engines have one task per point and no ladder; their verdict says ``exact``.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field, replace
from typing import Mapping, Sequence

import numpy as np

from netprobe.fitting import Fit, extrapolate_to_zero
from netprobe.study.description import StudyDescription
from netprobe.study.ledger import TaskRow
from netprobe.engines.dmrg import extrapolate_energy

__all__ = ["Fit", "ProbeVerdict", "EnergyVerdict", "PointVerdict", "inverse_bond_fit", "point_verdict"]


def inverse_bond_fit(
    bond_dimensions: Sequence[int], values: Sequence[float], *, points: int = 3
) -> Fit | None:
    """Extrapolate ``v(D) = v_inf + a / D`` from the last rungs of a ladder.

    Parameters
    ----------
    bond_dimensions : sequence of int
        Increasing.
    values : sequence of float
    points : int
        Use at most this many of the largest bond dimensions.

    Returns
    -------
    Fit or None
        None for fewer than two rungs.

    Notes
    -----
    Truncation errors of local quantities of a gapped state fall quickly with D; a line in 1/D is the
    plainest model that still gives a direction (common practice). The error is

    - two rungs: ``|v_inf - v(D_max)|``, the whole extrapolation distance;
    - three rungs: the larger of the fit's standard error of ``v_inf`` and ``|v_inf - v_inf'|``, where
      ``v_inf'`` comes from the line through the last two rungs alone.

    """
    d = np.asarray(bond_dimensions, float)[-points:]
    v = np.asarray(values, float)[-points:]
    if len(d) < 2:
        return None
    used = ",".join(str(int(c)) for c in d)
    fit = extrapolate_to_zero(1.0 / d, v, variable="1/D")
    method = (f"line in 1/D through D={used}" if len(d) == 2 else f"least-squares line in 1/D over D={used}")
    return replace(fit, method=method)


@dataclass(frozen=True)
class ProbeVerdict:
    """A probe at one point: its value at the largest D done, the last change and the extrapolation."""

    probe: str
    value: float | None
    bond_dimension: int
    previous: float | None = None
    change: float | None = None
    fit: Fit | None = None
    flagged: bool = False

    def to_dict(self) -> dict:
        out = asdict(self)
        out["fit"] = None if self.fit is None else asdict(self.fit)
        return out


@dataclass(frozen=True)
class EnergyVerdict:
    """The energy at one point: value at the largest D, change from the previous rung, extrapolation."""

    value: float | None
    change: float | None = None
    extrapolated: float | None = None
    error: float | None = None
    method: str = ""
    flagged: bool = False

    def to_dict(self) -> dict:
        return asdict(self)


@dataclass(frozen=True)
class PointVerdict:
    """The convergence verdict of one point.

    Attributes
    ----------
    point : int
    label : str
    status : str
        ``exact`` (exact or Gaussian engine), ``converged`` (every check passed), ``flagged`` (see
        ``flags``), ``single rung`` (a ladder of one bond dimension: nothing to compare),
        ``incomplete`` (tasks not done yet) or ``failed`` (a task failed).
    bond_dimensions : tuple of int
        Rungs done.
    energy : EnergyVerdict
    probes : mapping of str to ProbeVerdict
    flags : tuple of str

    """

    point: int
    label: str
    status: str
    bond_dimensions: tuple[int, ...]
    energy: EnergyVerdict
    probes: Mapping[str, ProbeVerdict] = field(default_factory=dict)
    flags: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        return {
            "point": self.point,
            "label": self.label,
            "status": self.status,
            "bond_dimensions": list(self.bond_dimensions),
            "energy": self.energy.to_dict(),
            "probes": {k: v.to_dict() for k, v in self.probes.items()},
            "flags": list(self.flags),
        }

    def __repr__(self) -> str:
        flags = f", flags={list(self.flags)}" if self.flags else ""
        return f"PointVerdict({self.label}: {self.status}, D={list(self.bond_dimensions)}{flags})"


def _number(value):
    return None if value is None or (isinstance(value, float) and not math.isfinite(value)) else float(value)


def point_verdict(description: StudyDescription, rows: Sequence[TaskRow]) -> PointVerdict:
    """The verdict of one point from its task rows (all rungs of the point, any status)."""
    rows = sorted(rows, key=lambda r: r.bond_dimension)
    point, label = rows[0].point, rows[0].label
    done = [r for r in rows if r.status == "done" and r.result is not None]
    chis = tuple(r.bond_dimension for r in done)
    settings = description.verdicts
    flags: list[str] = []
    if any(r.status == "failed" for r in rows):
        status = "failed"
    elif len(done) < len(rows):
        status = "incomplete"
    elif description.engine != "dmrg":
        status = "exact"
    elif len(done) == 1:
        status = "single rung"
    else:
        status = "converged"
    if not done:
        return PointVerdict(point, label, status, chis, EnergyVerdict(None))

    energies = [float(r.result["energy"]) for r in done]
    energy = EnergyVerdict(energies[-1])
    if description.engine == "dmrg":
        for r in done:
            info = r.result.get("dmrg", {})
            if not info.get("converged", True):
                flags.append(f"D={r.bond_dimension}: {info.get('message', 'not converged')}")
        if len(done) >= 2:
            change = energies[-1] - energies[-2]
            flagged = abs(change) > settings.energy_threshold * max(1.0, abs(energies[-1]))
            weights = [float(r.result["dmrg"]["discarded_weight"]) for r in done]
            ex = extrapolate_energy(weights, energies)
            energy = EnergyVerdict(
                energies[-1],
                change,
                ex.energy,
                ex.error,
                f"{ex.method} in the discarded weight over D={','.join(map(str, chis))}",
                flagged,
            )
            if flagged:
                flags.append(f"energy changed by {change:.3g} between D={chis[-2]} and D={chis[-1]}")
    probes = {}
    for probe in description.probes:
        values = [_number(r.result.get("probes", {}).get(probe.text)) for r in done]
        pairs = [(c, v) for c, v in zip(chis, values) if v is not None]
        if not pairs:
            probes[probe.text] = ProbeVerdict(probe.text, None, chis[-1])
            continue
        cs, vs = zip(*pairs)
        if len(vs) < 2:
            probes[probe.text] = ProbeVerdict(probe.text, vs[-1], cs[-1])
            continue
        change = vs[-1] - vs[-2]
        # energies are judged by the energy verdict, relative to their size
        flagged = probe.name not in ("energy", "energy_per_site") and abs(change) > settings.change_threshold
        probes[probe.text] = ProbeVerdict(
            probe.text, vs[-1], cs[-1], vs[-2], change, inverse_bond_fit(cs, vs), flagged
        )
        if flagged:
            flags.append(f"{probe.text} changed by {change:.3g} between D={cs[-2]} and D={cs[-1]}")
    if status == "converged" and flags:
        status = "flagged"
    return PointVerdict(point, label, status, chis, energy, probes, tuple(flags))
