"""Entanglement probes: entropies, mutual informations, topological entanglement entropy, modular commutator.

All entropies are in nats. The kernels take numpy arrays (density matrices, their square roots, or
eigenvalues) and return numbers; :func:`measure_probes` and :func:`probe_state` take a state and the
site lists of the parts, build the reduced state with :mod:`netprobe.rdm` and keep the books.

Definitions
-----------
- ``S(X) = -Tr rho_X ln rho_X``; Renyi ``S_n(X) = ln Tr rho_X^n / (1 - n)``.
- Mutual information ``I(A:B) = S_A + S_B - S_AB``; conditional mutual information
  ``I(A:C|B) = S_AB + S_BC - S_B - S_ABC`` (>= 0 by strong subadditivity).
- Kitaev-Preskill: ``S_A + S_B + S_C - S_AB - S_BC - S_CA + S_ABC = -gamma`` for a three-sector disk;
  Levin-Wen: ``I(A:C|B) = 2 gamma`` for a ring ABC whose B cuts it into arcs A and C.
- Modular commutator ``J(A,B,C) = i Tr(rho_ABC [K_AB, K_BC])``, ``K_X = -ln rho_X``; with
  ``x = Tr(rho_ABC K_AB K_BC)``, ``J = -2 Im x`` (the K are Hermitian), and in square-root form
  ``rho_ABC = Y Y^dag``: ``J = -2 Im Tr[(K_AB Y)^dag (K_BC Y)]``. ``K_X`` is set to 0 on the kernel of
  ``rho_X``: eigenvalues at or below ``eps * lambda_max`` are dropped. This is exact, since the support
  of ``rho_ABC`` lies inside ``supp(rho_AB) x H_C``; J is reported at ``eps`` and ``100 eps`` so that the
  floor's influence shows. ``c- = 3 J / pi`` for A, B, C counterclockwise.

References
----------
E. H. Lieb and M. B. Ruskai, J. Math. Phys. 14, 1938 (1973) (strong subadditivity).
A. Kitaev and J. Preskill, Phys. Rev. Lett. 96, 110404 (2006); M. Levin and X.-G. Wen, Phys. Rev. Lett.
96, 110405 (2006) (topological entanglement entropy).
Modular commutator and c-: Phys. Rev. Lett. 128, 176402 (2022).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
import scipy.linalg

from netprobe import rdm
from netprobe.errors import LatticeError, NetprobeError
from netprobe.resources import check_memory_budget
from netprobe.model.sites import SiteSpace
from netprobe.probes.registry import probes_of_kind
from netprobe.tensor import contract, diag_multiply, svd
from netprobe.tensor.entropy import entropy_from_weights, renyi_from_weights

__all__ = [
    "MANY_BODY_PROBES",
    "DEFAULT_EPS",
    "ModularCommutator",
    "ProbeReport",
    "entropy_from_weights",
    "renyi_from_weights",
    "von_neumann_entropy",
    "renyi_entropy",
    "root_weights",
    "conditional_mutual_information",
    "kitaev_preskill_combination",
    "levin_wen_gamma",
    "c_minus_from_j",
    "partial_trace",
    "modular_hamiltonian",
    "modular_commutator",
    "modular_commutator_root",
    "measure_probes",
    "probe_state",
]

#: The probes these kernels evaluate (the many-body ones of the registry :data:`PROBES`).
MANY_BODY_PROBES = probes_of_kind("many-body")

#: Default kernel floor of the modular Hamiltonians, relative to the largest eigenvalue.
DEFAULT_EPS = 1e-12
_LOOSE = 100.0  # the second floor, to show the influence of the first
_ABC = ("A", "B", "C")


# --------------------------------------------------------------------------------------------------
# Entropies
# --------------------------------------------------------------------------------------------------


def von_neumann_entropy(rho: np.ndarray) -> float:
    """``-Tr rho ln rho`` of a density matrix (Hermitian part; eigenvalues through ``eigvalsh``)."""
    rho = np.asarray(rho)
    return entropy_from_weights(scipy.linalg.eigvalsh((rho + rho.conj().T) / 2, check_finite=False))


def renyi_entropy(rho: np.ndarray, order: float) -> float:
    """Renyi entropy of order ``order`` of a density matrix."""
    rho = np.asarray(rho)
    return renyi_from_weights(scipy.linalg.eigvalsh((rho + rho.conj().T) / 2, check_finite=False), order)


def root_weights(y: np.ndarray) -> np.ndarray:
    """Eigenvalues of ``Y Y^dag`` as squared singular values of ``Y`` (accurate far below ``eps * |rho|``)."""
    return scipy.linalg.svdvals(np.asarray(y), check_finite=False) ** 2


def conditional_mutual_information(s_ab: float, s_bc: float, s_b: float, s_abc: float) -> float:
    """``I(A:C|B) = S_AB + S_BC - S_B - S_ABC``."""
    return s_ab + s_bc - s_b - s_abc


def kitaev_preskill_combination(s_a, s_b, s_c, s_ab, s_bc, s_ca, s_abc) -> float:
    """``S_A + S_B + S_C - S_AB - S_BC - S_CA + S_ABC``, which equals ``-gamma`` on a three-sector disk."""
    return s_a + s_b + s_c - s_ab - s_bc - s_ca + s_abc


def levin_wen_gamma(cmi: float) -> float:
    """``gamma = I(A:C|B) / 2`` for the ring layout (B cuts the annulus ABC into arcs A and C)."""
    return cmi / 2.0


def c_minus_from_j(j: float) -> float:
    """Chiral central charge estimate ``c- = 3 J / pi`` (A, B, C counterclockwise)."""
    return 3.0 * j / math.pi


# --------------------------------------------------------------------------------------------------
# Partial traces and modular Hamiltonians
# --------------------------------------------------------------------------------------------------


def partial_trace(op: np.ndarray, dims: Sequence[int], keep: Sequence[int], parities=None) -> np.ndarray:
    """Partial trace of an operator on an ordered list of subsystems.

    Parameters
    ----------
    op : ndarray, shape (D, D)
        ``D = prod(dims)``; subsystem 0 is the most significant factor.
    dims : sequence of int
        Dimension of each subsystem.
    keep : sequence of int
        Subsystems kept (they keep their relative order).
    parities : sequence of ndarray of int, optional
        Fermion parity of each basis state of each subsystem. When given, a traced subsystem ``k``
        carries ``F_k`` wherever the ket + bra parity of the kept subsystems to its right is odd
        (the fermionic partial trace); ``None`` means bosons (the ordinary trace).

    Returns
    -------
    ndarray, shape (prod(dims[keep]), prod(dims[keep]))
    """
    dims = tuple(int(x) for x in dims)
    n = len(dims)
    keep = sorted(int(k) for k in keep)
    traced = [k for k in range(n) if k not in keep]
    t = np.asarray(op).reshape(dims + dims)
    if parities is not None and any(k < max(keep, default=-1) for k in traced):
        sign = rdm.permutation_sign(parities, keep + traced).astype(float)
        t = t * sign.reshape(dims + (1,) * n) * sign.reshape((1,) * n + dims)
    ket = list(range(n))
    bra = [k if k in traced else n + k for k in range(n)]
    out = [k for k in keep] + [n + k for k in keep]
    kept = int(np.prod([dims[k] for k in keep])) if keep else 1
    return np.einsum(t, ket + bra, out).reshape(kept, kept)


def modular_hamiltonian(rho: np.ndarray, eps: float = DEFAULT_EPS) -> np.ndarray:
    """``K = -ln rho`` on the eigenvalues above ``eps * lambda_max``, 0 on the rest (the kernel)."""
    w, v = scipy.linalg.eigh((rho + rho.conj().T) / 2, check_finite=False)
    keep = w > eps * w.max()
    vk = v[:, keep]
    return (vk * -np.log(w[keep])) @ vk.conj().T


def _check_eps(eps: float) -> float:
    eps = float(eps)
    if not 0.0 < eps < 1.0 / _LOOSE:
        raise NetprobeError(
            f"eps={eps!r} must lie in (0, {1 / _LOOSE:g}); the default {DEFAULT_EPS:g} is the recommended "
            "floor (large floors bias J)"
        )
    return eps


@dataclass(frozen=True)
class ModularCommutator:
    """The modular commutator at two kernel floors.

    Attributes
    ----------
    value : float
        J(A, B, C) with the floor ``eps``.
    value_loose : float
        J with the floor ``100 eps``; ``|value - value_loose|`` shows how much the floor matters.
    eps : float
    rank_ab, rank_bc : int
        Eigenvalues of rho_AB and rho_BC kept at ``eps``.
    """

    value: float
    value_loose: float
    eps: float
    rank_ab: int
    rank_bc: int

    @property
    def c_minus(self) -> float:
        """``3 J / pi``."""
        return c_minus_from_j(self.value)

    @property
    def floor_shift(self) -> float:
        """``value_loose - value``."""
        return self.value_loose - self.value

    def to_json(self) -> dict:
        """Plain values for JSON."""
        return {"J": self.value, "J_loose": self.value_loose, "eps": self.eps, "eps_loose": _LOOSE * self.eps,
                "c_minus": self.c_minus, "rank_ab": self.rank_ab, "rank_bc": self.rank_bc}

    def __repr__(self) -> str:
        return (f"ModularCommutator(J={self.value:.6g}, c-={self.c_minus:.6g}, eps={self.eps:.0e}, "
                f"shift at {_LOOSE:.0f} eps={self.floor_shift:.1e})")


def _floor_factor(values: np.ndarray, top: float, eps: float, power: int) -> np.ndarray:
    """``-ln(w) * s`` (power 1, square root form) or ``-ln(w)`` (power 0) on kept weights w = s^2."""
    w = values**2 if power else values
    out = np.zeros_like(values, dtype=float)
    keep = w > eps * top
    out[keep] = -np.log(w[keep]) * (values[keep] if power else 1.0)
    return out


def modular_commutator(rho: np.ndarray, dims: Sequence[int], *,
                       eps: float = DEFAULT_EPS) -> ModularCommutator:
    """``J(A,B,C) = i Tr(rho [K_AB, K_BC])`` of a dense ``rho_ABC`` in the order A|B|C.

    Parameters
    ----------
    rho : ndarray, shape (dA dB dC, dA dB dC)
        For fermions, reorder first with :func:`netprobe.rdm.reorder_parts`; then the ordinary
        partial traces and tensor products used here are the fermionic ones.
    dims : (int, int, int)
    eps : float
        Kernel floor relative to the largest eigenvalue of each reduced matrix.

    Returns
    -------
    ModularCommutator
    """
    eps = _check_eps(eps)
    da, db, dc = (int(x) for x in dims)
    rho = np.asarray(rho)
    rho = (rho + rho.conj().T) / 2
    out = []
    decomp = []
    for keep in ((0, 1), (1, 2)):
        w, v = scipy.linalg.eigh(partial_trace(rho, (da, db, dc), keep), check_finite=False)
        decomp.append((w, v))
    for floor in (eps, _LOOSE * eps):
        ks, ranks = [], []
        for w, v in decomp:
            f = _floor_factor(w, w.max(), floor, 0)
            ks.append((v * f) @ v.conj().T)
            ranks.append(int(np.count_nonzero(f)))
        z = (ks[0] @ rho.reshape(da * db, dc * da * db * dc)).reshape(da, db * dc, da, db * dc)
        # with Z = (K_AB x 1) rho:  x = Tr(rho K_AB K_BC) = Tr(Z^dag (1 x K_BC))
        x = np.einsum("aiaj,ij->", z.conj(), ks[1])
        out.append((-2.0 * float(np.imag(x)), ranks))
    return ModularCommutator(out[0][0], out[1][0], eps, out[0][1][0], out[0][1][1])


def modular_commutator_root(y: np.ndarray, dims: Sequence[int], *,
                            eps: float = DEFAULT_EPS) -> ModularCommutator:
    """J from a square root ``rho_ABC = Y Y^dag``: ``J = -2 Im Tr[(K_AB Y)^dag (K_BC Y)]``.

    Parameters
    ----------
    y : ndarray, shape (dA dB dC, r)
        Rows in the order A|B|C (fermionic signs already applied).
    dims : (int, int, int)
    eps : float

    Returns
    -------
    ModularCommutator

    Notes
    -----
    ``K_AB Y`` comes from the SVD ``Y[(a b), (c e)] = U s V``: ``K_AB Y = U (-ln s^2) s V``, so no
    density matrix is formed and the eigenvalues ``s^2`` are accurate far below ``eps * |rho|``.
    """
    eps = _check_eps(eps)
    da, db, dc = (int(x) for x in dims)
    y = np.asarray(y)
    r = y.shape[1]
    u1, s1, v1 = scipy.linalg.svd(y.reshape(da * db, dc * r), full_matrices=False, check_finite=False)
    y_bc = y.reshape(da, db * dc, r).transpose(1, 0, 2).reshape(db * dc, da * r)
    u2, s2, v2 = scipy.linalg.svd(y_bc, full_matrices=False, check_finite=False)
    out = []
    for floor in (eps, _LOOSE * eps):
        f1 = _floor_factor(s1, s1.max() ** 2, floor, 1)
        f2 = _floor_factor(s2, s2.max() ** 2, floor, 1)
        ky1 = ((u1 * f1) @ v1).reshape(da * db * dc, r)
        ky2 = ((u2 * f2) @ v2).reshape(db * dc, da, r).transpose(1, 0, 2).reshape(da * db * dc, r)
        x = np.vdot(ky1, ky2)
        out.append((-2.0 * float(np.imag(x)), int(np.count_nonzero(f1)), int(np.count_nonzero(f2))))
    return ModularCommutator(out[0][0], out[1][0], eps, out[0][1], out[0][2])


def _modular_commutator_blocks(root: rdm.PartRoot, eps: float):
    """J of a :class:`netprobe.rdm.PartRoot` with parts (A, B, C), block by block; also AB and BC weights."""
    y = root.tensor
    u1, s1, v1, _ = svd(y, [0, 1], [2, 3])
    u2, s2, v2, _ = svd(y, [1, 2], [0, 3])
    top1, top2 = float(s1.values[0]) ** 2, float(s2.values[0]) ** 2
    out = []
    for floor in (eps, _LOOSE * eps):
        f1 = {b: _floor_factor(np.asarray(v), top1, floor, 1) for b, v in s1.by_sector.items()}
        f2 = {b: _floor_factor(np.asarray(v), top2, floor, 1) for b, v in s2.by_sector.items()}
        ky1 = contract(diag_multiply(u1, 2, f1), v1, ([2], [0]))  # (A, B, C, e)
        ky2 = contract(diag_multiply(u2, 2, f2), v2, ([2], [0])).transpose([2, 0, 1, 3])
        x = ky1.inner(ky2)
        ranks = [sum(int(np.count_nonzero(v)) for v in f.values()) for f in (f1, f2)]
        out.append((-2.0 * float(np.imag(x)), ranks))
    mc = ModularCommutator(out[0][0], out[1][0], eps, out[0][1][0], out[0][1][1])
    return mc, np.asarray(s1.values) ** 2, np.asarray(s2.values) ** 2


def _modular_commutator_rho_blocks(pb: rdm.PartBlocks, eps: float):
    """J of a :class:`netprobe.rdm.PartBlocks` with parts (A, B, C): ``x = Tr(rho (K_AB x 1)(1 x K_BC))``.

    ``K_AB`` and ``K_BC`` come from the eigendecompositions of the charge blocks of rho_AB and rho_BC
    (small), and act on the blocks of rho_ABC block by block; also returns the AB and BC weights.
    """
    rho_ab, rho_bc = rdm.subset_rho(pb, (0, 1)), rdm.subset_rho(pb, (1, 2))
    dec_ab, dec_bc = rho_ab.eigh(), rho_bc.eigh()
    w_ab = np.concatenate([w for w, _ in dec_ab.values()]) if dec_ab else np.zeros(0)
    w_bc = np.concatenate([w for w, _ in dec_bc.values()]) if dec_bc else np.zeros(0)
    top_ab, top_bc = float(w_ab.max(initial=0.0)), float(w_bc.max(initial=0.0))
    out, kept = [], None
    for floor in (eps, _LOOSE * eps):
        factors = [{u: _floor_factor(w, top, floor, 0) for u, (w, _) in dec.items()}
                   for dec, top in ((dec_ab, top_ab), (dec_bc, top_bc))]
        if kept is not None and all(np.array_equal(f[u], g[u]) for f, g in zip(factors, kept) for u in f):
            out.append(out[-1])  # no weight between the two floors: the same operators, the same trace
            continue
        kept = factors
        ks, ranks = [], []
        for dec, fs, rho_x in ((dec_ab, factors[0], rho_ab), (dec_bc, factors[1], rho_bc)):
            mats, rank = {}, 0
            for u, (w, v) in dec.items():
                f = fs[u]
                rank += int(np.count_nonzero(f))
                mats[u] = (v * f) @ v.conj().T
            ks.append(rho_x.replaced(mats))
            ranks.append(rank)
        x = rdm.prefix_suffix_trace(pb, ks[0], ks[1])
        out.append((-2.0 * float(np.imag(x)), ranks))
    mc = ModularCommutator(out[0][0], out[1][0], eps, out[0][1][0], out[0][1][1])
    return mc, _positive_descending(w_ab), _positive_descending(w_bc)


def _positive_descending(w: np.ndarray) -> np.ndarray:
    return np.sort(w[w > 0])[::-1]


# --------------------------------------------------------------------------------------------------
# The driver
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ProbeReport:
    """Probes of one state and one layout of parts.

    Attributes
    ----------
    parts : mapping of str to tuple of int
        Sites of each part (MPS indices, in MPS order).
    route : str
        How the reduced state was built (``"vector"``, ``"mps-root"``, ``"mps-zipper"``).
    entropies : mapping of str to float
        Von Neumann entropies by region name (part names joined in part order: ``"AB"``, ``"AC"``).
    renyi : mapping of float to mapping of str to float
        Renyi entropies by order, same regions (empty unless asked for).
    cmi : float or None
        ``I(A:C|B)``.
    kitaev_preskill : float or None
        ``S_A + S_B + S_C - S_AB - S_BC - S_CA + S_ABC`` (``= -gamma``).
    modular_commutator : ModularCommutator or None
    memory_estimate : float
        Estimated peak bytes of the reduced state.
    seconds : float
        Wall time.
    """

    parts: Mapping[str, tuple[int, ...]]
    route: str
    entropies: Mapping[str, float]
    renyi: Mapping[float, Mapping[str, float]] = field(default_factory=dict)
    cmi: float | None = None
    kitaev_preskill: float | None = None
    modular_commutator: ModularCommutator | None = None
    memory_estimate: float = 0.0
    seconds: float = 0.0

    @property
    def gamma(self) -> float | None:
        """Topological entanglement entropy from the Kitaev-Preskill combination."""
        return None if self.kitaev_preskill is None else -self.kitaev_preskill

    def to_json(self) -> dict:
        """Plain values for JSON (floats, ints, lists, dicts)."""
        out = {
            "parts": {k: list(v) for k, v in self.parts.items()},
            "route": self.route,
            "entropies": dict(self.entropies),
            "cmi": self.cmi,
            "kitaev_preskill": self.kitaev_preskill,
            "gamma": self.gamma,
            "memory_estimate_bytes": self.memory_estimate,
            "seconds": self.seconds,
        }
        if self.renyi:
            out["renyi"] = {f"{order:g}": dict(vals) for order, vals in self.renyi.items()}
        if self.modular_commutator is not None:
            out.update(self.modular_commutator.to_json())
        return out

    def __repr__(self) -> str:
        sizes = ", ".join(f"{k}: {len(v)}" for k, v in self.parts.items())
        items = [f"S_{k}={v:.4g}" for k, v in self.entropies.items() if len(k) == len(self.parts)]
        if self.cmi is not None:
            items.append(f"CMI={self.cmi:.4g}")
        if self.kitaev_preskill is not None:
            items.append(f"gamma={self.gamma:.4g}")
        if self.modular_commutator is not None:
            items.append(f"J={self.modular_commutator.value:.4g}")
        return f"ProbeReport({sizes}; {', '.join(items)}; {self.route})"


def _as_parts(layout_parts) -> dict[str, list[int]]:
    if isinstance(layout_parts, Mapping):
        return {str(k): list(v) for k, v in layout_parts.items()}
    names = getattr(layout_parts, "names", None)
    if names is not None:  # a region layout: names plus item access
        return {str(n): list(layout_parts[n]) for n in names}
    raise LatticeError(
        f"parts must be a dict of part name -> list of MPS sites, got {type(layout_parts).__name__}"
    )


def _check_probes(probes) -> tuple[str, ...]:
    if isinstance(probes, str):
        probes = (probes,)
    probes = tuple(probes)
    unknown = [p for p in probes if p not in MANY_BODY_PROBES]
    if unknown or not probes:
        named = ", ".join(map(repr, unknown)) or "(none given)"
        raise NetprobeError(f"unknown probe(s) {named}; valid probes: {', '.join(MANY_BODY_PROBES)}")
    return probes


def _num_sites(state, space: SiteSpace) -> int:
    if isinstance(state, np.ndarray):
        d = space.dim
        n = round(math.log(state.size, d)) if state.size > 1 else 0
        if state.ndim != 1 or n < 1 or d**n != state.size:
            raise NetprobeError(
                f"a state vector must be 1-D of length d**N with d = {d}; got shape {state.shape}"
            )
        return n
    return state.num_sites


def measure_probes(state, layout_parts, space: SiteSpace, *, probes: Sequence[str] = ("S", "CMI", "J", "TEE"),
                   eps: float = DEFAULT_EPS, memory_budget: int | None = None, method: str = "auto",
                   renyi_orders: Sequence[float] = ()) -> ProbeReport:
    """Entropies, CMI, Kitaev-Preskill combination and modular commutator of a state on given parts.

    Parameters
    ----------
    state : ndarray, shape (d**N,), ExactResult or MPS
        A dense vector (site 0 most significant), an exact-engine result (its ground state is used) or
        a :class:`netprobe.engines.mps.MPS`.
    layout_parts : dict of str to list of int, or a region layout
        Sites (MPS indices) of each part; CMI, J and TEE need exactly the parts A, B and C (counterclockwise
        for J, so that c- = 3 J / pi).
    space : SiteSpace
    probes : sequence of str
        Names in :data:`MANY_BODY_PROBES`.
    eps : float
        Kernel floor of the modular Hamiltonians (J is also reported at ``100 eps``).
    memory_budget : int, optional
        Bytes; default :func:`netprobe.resources.default_memory_budget`.
    method : {"auto", "root", "zipper", "split"}
        Route for an MPS (see :func:`netprobe.rdm.reduced_root`).
    renyi_orders : sequence of float
        Also report Renyi entropies of these orders for every region computed.

    Returns
    -------
    ProbeReport

    Raises
    ------
    LatticeError
        For overlapping parts, sites outside the lattice, or missing parts A, B, C.
    NetprobeError
        For an unknown probe or a bad ``eps``.
    MemoryBudgetError
        If the reduced state or the probe stage would exceed the budget.
    """
    start = time.perf_counter()
    state = rdm.as_pure_state(state)
    probes = _check_probes(probes)
    eps = _check_eps(eps)
    parts = _as_parts(layout_parts)
    if not parts:
        raise LatticeError("measure_probes: no parts given; pass e.g. {'A': [...], 'B': [...], 'C': [...]}")
    needs_abc = [p for p in probes if p != "S"]
    if needs_abc:
        missing = [n for n in _ABC if n not in parts]
        extra = [n for n in parts if n not in _ABC]
        if missing or extra:
            raise LatticeError(
                f"measure_probes: probes {', '.join(needs_abc)} need exactly the parts A, B, C; the layout "
                f"has {', '.join(parts)}; use a three-part layout or probes=('S',)"
            )
        parts = {n: parts[n] for n in _ABC}
    n_sites = _num_sites(state, space)
    names, lists, union = rdm.check_parts(parts, "measure_probes", num_sites=n_sites)
    wanted = []
    if "S" in probes:
        wanted += [(i,) for i in range(len(names))] + [tuple(range(len(names)))]
    if "CMI" in probes:
        wanted += [(0, 1), (1, 2), (1,), (0, 1, 2)]
    if "TEE" in probes:
        wanted += [(0,), (1,), (2,), (0, 1), (1, 2), (0, 2), (0, 1, 2)]
    if rdm.rdm_route(state, union, space, method=method) == "split":
        weights, mc, route, estimate = _probes_on_blocks(state, names, lists, union, space, probes, wanted, eps,
                                                         memory_budget)
    else:
        weights, mc, route, estimate = _probes_on_root(state, names, lists, union, space, probes, wanted, eps,
                                                       memory_budget, method)
    entropies = {k: entropy_from_weights(w) for k, w in weights.items()}
    renyi = {float(n): {k: renyi_from_weights(w, float(n)) for k, w in weights.items()} for n in renyi_orders}
    cmi = kp = None
    if "CMI" in probes:
        e = entropies
        cmi = conditional_mutual_information(e["AB"], e["BC"], e["B"], e["ABC"])
    if "TEE" in probes:
        e = entropies
        kp = kitaev_preskill_combination(e["A"], e["B"], e["C"], e["AB"], e["BC"], e["AC"], e["ABC"])
    return ProbeReport(dict(zip(names, lists)), route, entropies, renyi, cmi, kp, mc, estimate,
                       time.perf_counter() - start)


def _probes_on_root(state, names, lists, union, space, probes, wanted, eps, memory_budget, method):
    """Weights and J from the square root of rho_ABC (vectors, the root and zipper routes)."""
    estimate = rdm.estimate_rdm_memory(state, union, space, method=method)
    root = rdm.reduced_root(state, union, space, method=method, memory_budget=memory_budget)
    # the probe stage holds Y, two SVDs (U and V each) and K_AB Y, K_BC Y: about eight copies of Y
    check_memory_budget(8.0 * root.nbytes, memory_budget, f"probes on {len(union)} sites")
    pr = rdm.part_root(root, dict(zip(names, lists)))
    weights: dict[str, np.ndarray] = {}
    mc = None
    if "J" in probes:
        mc, w_ab, w_bc = _modular_commutator_blocks(pr, eps)
        weights["AB"], weights["BC"] = w_ab, w_bc
    for keep in wanted:
        label = "".join(names[i] for i in keep)
        if label not in weights:
            weights[label] = root.weights() if len(keep) == len(names) else rdm.subset_weights(pr, keep)
    return weights, mc, root.route, estimate


def _probes_on_blocks(state, names, lists, union, space, probes, wanted, eps, memory_budget):
    """Weights and J from the charge blocks of rho_ABC (the split route), never a dense rho or its root."""
    estimate = rdm.estimate_blocks_memory(state, union, space, memory_budget=memory_budget)
    check_memory_budget(estimate, memory_budget, f"probes on the charge blocks of {len(union)} sites")
    blocked = rdm.reduced_blocks(state, union, space, method="split", memory_budget=memory_budget)
    pb = rdm.part_blocks(blocked, dict(zip(names, lists)))
    del blocked
    weights: dict[str, np.ndarray] = {}
    mc = None
    if "J" in probes:
        mc, weights["AB"], weights["BC"] = _modular_commutator_rho_blocks(pb, eps)
    for keep in wanted:
        label = "".join(names[i] for i in keep)
        if label not in weights:
            weights[label] = pb.weights() if len(keep) == len(names) else rdm.subset_rho(pb, keep).weights()
    return weights, mc, pb.route, estimate


def probe_state(state, layout_parts, space: SiteSpace, *, probes: Sequence[str] = ("S", "CMI", "J", "TEE"),
                eps: float = DEFAULT_EPS, memory_budget: int | None = None, method: str = "auto",
                renyi_orders: Sequence[float] = ()) -> dict:
    """:func:`measure_probes` as a JSON-friendly dict (see :meth:`ProbeReport.to_json`).

    Keys: ``parts``, ``route``, ``entropies`` (by region name), ``cmi``, ``kitaev_preskill``, ``gamma``,
    and with J: ``J``, ``J_loose`` (at ``100 eps``), ``eps``, ``eps_loose``, ``c_minus``, ``rank_ab``,
    ``rank_bc``; also ``memory_estimate_bytes`` and ``seconds``. Values not computed are ``None``.
    """
    return measure_probes(state, layout_parts, space, probes=probes, eps=eps, memory_budget=memory_budget,
                          method=method, renyi_orders=renyi_orders).to_json()
