"""The one registry of bulk probes: name, meaning, unit, and the kinds of ground state that implement it.

Every other catalogue reads from :data:`PROBES`: the many-body kernels (:mod:`netprobe.probes.kernels`)
accept the probes whose kinds include ``"many-body"``, the measurement pipeline
(:mod:`netprobe.pipeline.measure`) dispatches on the kind of the ground state, and the study vocabulary
(:mod:`netprobe.study.description`) names, for each of its probes, the registry probe that computes it.

State kinds (:data:`STATE_KINDS`)
    ``"many-body"``  a state vector or an MPS; reduced density matrices through :mod:`netprobe.rdm`.
    ``"gaussian"``   a free-fermion or Majorana state; probes from correlation matrices.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Mapping

__all__ = ["STATE_KINDS", "ProbeInfo", "PROBES", "probes_of_kind"]

#: The kinds of ground state, as :class:`netprobe.engines.GroundState` ``kind`` names them.
STATE_KINDS = ("many-body", "gaussian")


@dataclass(frozen=True)
class ProbeInfo:
    """One bulk probe.

    Attributes
    ----------
    name : str
        The name used by the library and the command line (``--probes``).
    text : str
        What it measures, in a few words.
    unit : str
        ``"nats"`` for entropies, ``"1"`` for dimensionless numbers.
    kinds : frozenset of str
        The state kinds (:data:`STATE_KINDS`) that implement it.
    """

    name: str
    text: str
    unit: str
    kinds: frozenset

    def __repr__(self) -> str:
        return f"ProbeInfo({self.name!r}: {self.text} [{self.unit}]; {', '.join(sorted(self.kinds))})"


_BOTH = frozenset(STATE_KINDS)

#: Bulk probes by name.
PROBES: Mapping[str, ProbeInfo] = MappingProxyType({p.name: p for p in (
    ProbeInfo("S", "von Neumann entropy of every part and of their unions", "nats", _BOTH),
    ProbeInfo("CMI", "conditional mutual information I(A:C|B); needs parts A, B, C", "nats", _BOTH),
    ProbeInfo("J", "modular commutator J(A, B, C) and c- = 3 J / pi; needs parts A, B, C", "1", _BOTH),
    ProbeInfo("TEE", "Kitaev-Preskill combination (= -gamma) and gamma; needs parts A, B, C", "nats", _BOTH),
    ProbeInfo("chern_number", "Kitaev's real-space Chern number of three sectors (free fermions)", "1",
              frozenset({"gaussian"})),
)})


def probes_of_kind(kind: str) -> tuple[str, ...]:
    """Names of the probes that a kind of ground state implements, in registry order."""
    return tuple(name for name, info in PROBES.items() if kind in info.kinds)

