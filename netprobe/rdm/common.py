"""Shared pieces of the reduced-state routes: fermionic signs, result types, input checks, gradings."""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import scipy.linalg

from netprobe.errors import LatticeError, NetprobeError
from netprobe.engines.mps import MPS
from netprobe.model.sites import SiteSpace
from netprobe.tensor import BlockTensor
from netprobe.engines.exact import full_vector  # the exact engine loads numba: only when needed

__all__ = [
    "RootBlock",
    "GradedRoot",
    "BlockedRho",
    "PartRoot",
    "permutation_sign",
    "as_pure_state",
]


_PARITY_TOL = 1e-12  # largest weight of the minority fermion parity still treated as rounding
_CHARGE_TOL = 1e-20  # weight outside one charge value below which a dense vector counts as definite
_ROOT_CUTOFF = 1e-28  # relative weights dropped when compressing e: s/s_max ~ 1e-14, rounding noise
_EIGH_FLOOR = 1e-15  # eigenvalues of a dense rho below this fraction of the largest are rounding


def permutation_sign(parities: Sequence[np.ndarray], order: Sequence[int]) -> np.ndarray:
    """Sign of reordering fermionic subsystems, for every basis state.

    Parameters
    ----------
    parities : sequence of ndarray of int, lengths (d_0, ..., d_{n-1})
        Fermion parity (0 or 1) of each basis state of each subsystem, in the current order.
    order : sequence of int
        The new order: position ``i`` holds the old subsystem ``order[i]``.

    Returns
    -------
    ndarray of int8, shape (d_0, ..., d_{n-1})
        ``(-1)^(sum over pairs i < j whose order is inverted of p_i p_j)``, indexed in the old order.
        A state ``|x_0 ... x_{n-1}>`` equals this sign times the same occupations written in the new
        order.

    Notes
    -----
    Moving the product of creation operators of subsystem j past that of subsystem i costs
    ``(-1)^(p_i p_j)``; a permutation is a product of such exchanges, one per inverted pair.
    """
    n = len(parities)
    pos = np.empty(n, dtype=np.int64)
    pos[np.asarray(order, dtype=np.int64)] = np.arange(n)
    shapes = [len(p) for p in parities]
    expo = np.zeros((1,) * n, dtype=np.int8)
    for j in range(n):
        inverted = [i for i in range(j) if pos[i] > pos[j]]
        if not inverted:
            continue
        acc = np.zeros((1,) * n, dtype=np.int8)
        for i in inverted:
            acc = acc ^ _along(parities[i], i, n)
        expo = expo ^ (acc & _along(parities[j], j, n))
    return np.broadcast_to(1 - 2 * expo, shapes).astype(np.int8)


def _along(values, axis: int, ndim: int) -> np.ndarray:
    shape = [1] * ndim
    shape[axis] = len(values)
    return np.asarray(values, dtype=np.int8).reshape(shape)


def _config_parity(parity: np.ndarray, m: int) -> np.ndarray:
    """Parity of every configuration of ``m`` sites (first site most significant), shape (d**m,)."""
    out = np.zeros(1, dtype=np.int8)
    for _ in range(m):
        out = (out[:, None] ^ parity.astype(np.int8)[None, :]).ravel()
    return out


def _config_sums(values: np.ndarray, m: int) -> np.ndarray:
    """Sum of a per-state value over ``m`` sites for every configuration, shape (d**m,)."""
    out = np.zeros(1, dtype=np.int64)
    for _ in range(m):
        out = (out[:, None] + values.astype(np.int64)[None, :]).ravel()
    return out


@dataclass(frozen=True, eq=False)
class RootBlock:
    """One charge block of a square-root factor.

    Attributes
    ----------
    label : tuple of int
        The grading charges of the rows (conserved charges, then the parity for fermions).
    codes : ndarray of int64, shape (n,)
        Configuration code of each row over the site set (first site most significant).
    matrix : ndarray, shape (n, r)
        The block ``Y_q``; ``rho_S`` restricted to these rows is ``Y_q Y_q^dag``.
    """

    label: tuple[int, ...]
    codes: np.ndarray = field(repr=False)
    matrix: np.ndarray = field(repr=False)


@dataclass(frozen=True, eq=False)
class _ChargeBlocks:
    """The fields that :class:`GradedRoot` and :class:`BlockedRho` share: a site set and its charge blocks."""

    sites: tuple[int, ...]
    space: SiteSpace = field(repr=False)
    grading: tuple[str, ...]
    local_charges: np.ndarray = field(repr=False)
    moduli: tuple[int, ...]
    blocks: tuple[RootBlock, ...] = field(repr=False)

    @property
    def dim(self) -> int:
        """Dimension ``d**m`` of the set's Hilbert space."""
        return self.space.dim ** len(self.sites)

    @property
    def nbytes(self) -> int:
        """Bytes held by the blocks."""
        return sum(b.matrix.nbytes + b.codes.nbytes for b in self.blocks)


@dataclass(frozen=True, eq=False)
class GradedRoot(_ChargeBlocks):
    """Square-root factor of a reduced density matrix, graded by charge: ``rho_S = sum_q Y_q Y_q^dag``.

    Attributes
    ----------
    sites : tuple of int
        The site set S in MPS order.
    space : SiteSpace
    grading : tuple of str
        Names of the conserved charges that grade the rows; ``"parity"`` is appended for fermions.
    local_charges : ndarray of int64, shape (d, len(grading))
        Grading charges of each local basis state.
    moduli : tuple of int
        0 for a U(1) grading charge, 2 for the parity (as in :class:`netprobe.tensor.ChargeRule`).
    blocks : tuple of RootBlock
    route : str
        How it was built: ``"vector"``, ``"mps-root"`` or ``"mps-zipper"``.
    peak_estimate : float
        For ``"mps-root"``: the largest per-step memory estimate of the walk that built it, in bytes
        (what the budget was checked against); 0 for the other routes.
    """

    route: str = "vector"
    peak_estimate: float = 0.0

    @property
    def num_sites(self) -> int:
        """Number of sites in the set."""
        return len(self.sites)

    @property
    def rank(self) -> int:
        """Total number of columns (an upper bound on the rank of ``rho_S``)."""
        return sum(b.matrix.shape[1] for b in self.blocks)

    def weights(self) -> np.ndarray:
        """Eigenvalues of ``rho_S`` (squared singular values of every block), descending, zeros dropped."""
        vals = [scipy.linalg.svdvals(b.matrix, check_finite=False) for b in self.blocks if b.matrix.size]
        w = np.concatenate(vals) ** 2 if vals else np.zeros(0)
        return np.sort(w[w > 0])[::-1]

    def density_matrix(self) -> np.ndarray:
        """The dense ``rho_S``, shape ``(d**m, d**m)`` (small sets only)."""
        dtype = np.result_type(*(b.matrix.dtype for b in self.blocks)) if self.blocks else np.float64
        rho = np.zeros((self.dim, self.dim), dtype=dtype)
        for b in self.blocks:
            rho[np.ix_(b.codes, b.codes)] = b.matrix @ b.matrix.conj().T
        return rho

    def __repr__(self) -> str:
        grading = ", ".join(self.grading) or "none"
        return (f"GradedRoot({self.num_sites} sites, {len(self.blocks)} blocks graded by {grading}, "
                f"rank <= {self.rank}, {self.route})")


@dataclass(frozen=True, eq=False)
class PartRoot:
    """Square-root factor of ``rho`` of a union of parts, with the modes in part order (e.g. A|B|C).

    Attributes
    ----------
    names : tuple of str
        Part names in leg order.
    sites : tuple of tuple of int
        Sites of each part, in MPS order inside the part.
    tensor : BlockTensor
        Legs ``(part_0, ..., part_{n-1}, e)``; each part leg is the fused basis of the part, blocked by
        the grading charges; ``rho = Y Y^dag`` contracting ``e``. Fermionic signs of the reordering
        are applied, so a prefix or suffix of parts is traced by an ordinary partial trace.
    orders : tuple of ndarray of int
        Blocked state ``j`` of part leg ``i`` is configuration ``orders[i][j]`` of that part.
    sector_parity : tuple of ndarray of int
        Fermion parity of each sector of each part leg (all 0 for bosons).
    fermionic : bool
    route : str
        Route of the :class:`GradedRoot` it came from.
    """

    names: tuple[str, ...]
    sites: tuple[tuple[int, ...], ...]
    tensor: BlockTensor = field(repr=False)
    orders: tuple[np.ndarray, ...] = field(repr=False)
    sector_parity: tuple[np.ndarray, ...] = field(repr=False)
    fermionic: bool = False
    route: str = "vector"

    @property
    def dims(self) -> tuple[int, ...]:
        """Dimension of each part."""
        return tuple(leg.dim for leg in self.tensor.legs[:-1])

    def __repr__(self) -> str:
        parts = ", ".join(f"{n}: {len(s)} sites" for n, s in zip(self.names, self.sites))
        return f"PartRoot({parts}; {self.route})"


def _check_sites(sites, num_sites: int, where: str) -> tuple[int, ...]:
    try:
        items = list(sites)
    except TypeError:
        raise LatticeError(f"{where}: sites must be a list of MPS site indices, got {sites!r}") from None
    if not items:
        raise LatticeError(f"{where}: the site set is empty; give at least one MPS site index")
    out = []
    for s in items:
        if not isinstance(s, (numbers.Integral, np.integer)) or not 0 <= int(s) < num_sites:
            raise LatticeError(f"{where}: site {s!r} is not an MPS index of a lattice with {num_sites} sites "
                               f"(0..{num_sites - 1})")
        out.append(int(s))
    if len(set(out)) != len(out):
        dup = sorted({s for s in out if out.count(s) > 1})
        raise LatticeError(f"{where}: site(s) {dup} listed twice; give each site once")
    return tuple(sorted(out))


def as_pure_state(state):
    """The state as a dense vector or an MPS: a :class:`netprobe.engines.exact.ExactResult` becomes its full vector.

    Raises
    ------
    NetprobeError
        For anything else.
    """
    if isinstance(state, (np.ndarray, MPS)):
        return state
    if type(state).__name__ == "ExactResult":
        return full_vector(state)
    raise NetprobeError(
        f"expected a state vector (numpy array in the full d**N space), an exact-engine result or an MPS, "
        f"got {type(state).__name__}"
    )


def _is_vector(state) -> bool:
    return isinstance(state, np.ndarray)


def _vector_sites(psi: np.ndarray, space: SiteSpace, where: str) -> int:
    d = space.dim
    size = psi.size
    n = int(round(math.log(size, d))) if size > 1 else 0
    if psi.ndim != 1 or n < 1 or d**n != size:
        raise NetprobeError(
            f"{where}: a state vector must be 1-D of length d**N with d = {d} ({space.name}); got shape "
            f"{psi.shape}"
        )
    return n


def _check_space(state, space: SiteSpace, where: str) -> None:
    if state.basis.space.name != space.name or state.basis.space.dim != space.dim:
        raise NetprobeError(
            f"{where}: the MPS lives on site space '{state.basis.space.name}' but '{space.name}' was given; "
            "pass the model's space"
        )


def _grading_of(space: SiteSpace, names: Sequence[str]):
    """(names, local charges (d, k), moduli) for the given conserved charges, plus parity for fermions."""
    names = tuple(names)
    cols = [np.asarray(space.charges[n], dtype=np.int64) for n in names]
    moduli = [0] * len(names)
    if space.fermionic:
        names = names + ("parity",)
        cols.append(np.asarray(space.parity, dtype=np.int64))
        moduli.append(2)
    local = np.stack(cols, axis=1) if cols else np.zeros((space.dim, 0), np.int64)
    return names, local, tuple(moduli)


def _labels(codes_charges: np.ndarray, moduli: tuple[int, ...]) -> np.ndarray:
    out = codes_charges.copy()
    for c, mod in enumerate(moduli):
        if mod:
            out[:, c] %= mod
    return out


def _config_labels(local: np.ndarray, moduli, m: int) -> np.ndarray:
    """Grading label of every configuration of ``m`` sites, shape (d**m, k)."""
    if local.shape[1] == 0:
        return np.zeros((local.shape[0] ** m, 0), np.int64)
    sums = np.stack([_config_sums(local[:, c], m) for c in range(local.shape[1])], axis=1)
    return _labels(sums, moduli)


def _root_from_rho(rho: np.ndarray, space: SiteSpace, sites, conserved, route: str) -> GradedRoot:
    names, local, moduli = _grading_of(space, conserved)
    labels = _config_labels(local, moduli, len(sites))
    uniq, inverse = (np.unique(labels, axis=0, return_inverse=True) if labels.shape[1]
                     else (np.zeros((1, 0), np.int64), np.zeros(rho.shape[0], np.int64)))
    inverse = np.asarray(inverse).ravel()
    blocks = []
    for g, label in enumerate(uniq):
        codes = np.flatnonzero(inverse == g)
        w, v = np.linalg.eigh(rho[np.ix_(codes, codes)])
        keep = w > _EIGH_FLOOR * max(w.max(initial=0.0), 0.0)
        if np.any(keep):
            blocks.append(RootBlock(tuple(int(x) for x in label), codes, v[:, keep] * np.sqrt(w[keep])))
    return GradedRoot(tuple(sites), space, names, local, moduli, tuple(blocks), route)


def _code_tables(space, conserved, m: int):
    """Grading labels, the block of every configuration code and its position inside the block."""
    names, local, moduli = _grading_of(space, conserved)
    labels = _config_labels(local, moduli, m)
    if labels.shape[1]:
        uniq, inverse = np.unique(labels, axis=0, return_inverse=True)
        inverse = np.asarray(inverse, np.int64).ravel()
    else:
        uniq, inverse = np.zeros((1, 0), np.int64), np.zeros(space.dim**m, np.int64)
    del labels
    order = np.argsort(inverse, kind="stable")
    counts = np.bincount(inverse, minlength=len(uniq))
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    position = np.empty_like(inverse)
    position[order] = np.arange(len(inverse)) - np.repeat(starts, counts)
    codes = np.split(order, np.cumsum(counts)[:-1])
    return (names, local, moduli), uniq, inverse, position, codes


@dataclass(frozen=True, eq=False)
class BlockedRho(_ChargeBlocks):
    """A reduced density matrix kept in its charge blocks: ``rho_S = sum_q P_q rho_q P_q``.

    Attributes
    ----------
    sites : tuple of int
        The site set S in MPS order.
    space : SiteSpace
    grading, local_charges, moduli
        As for :class:`GradedRoot`.
    blocks : tuple of RootBlock
        One per charge: ``codes`` are the configurations of the rows (first site most significant),
        ``matrix`` the square block ``rho_q`` over them (Hermitian, the blocks together of unit trace).
    route : str
        The route that built it.
    peak_estimate : float
        The up-front estimate of the route, in bytes.
    """

    route: str = "mps-split"
    peak_estimate: float = 0.0

    def density_matrix(self) -> np.ndarray:
        """The dense ``rho_S`` (small sets only)."""
        dtype = np.result_type(*(b.matrix.dtype for b in self.blocks)) if self.blocks else np.float64
        rho = np.zeros((self.dim, self.dim), dtype=dtype)
        for b in self.blocks:
            rho[np.ix_(b.codes, b.codes)] = b.matrix
        return rho

    def to_root(self, drop: bool = False) -> GradedRoot:
        """The square-root form ``Y_q = V_q sqrt(w_q)`` from the eigendecomposition of every block.

        Eigenvalues below ``1e-15`` of the largest of the block are rounding and dropped. With
        ``drop`` the blocks are released one by one as they are decomposed (the object is then
        empty), so the peak stays at the blocks plus one decomposition.
        """
        blocks = list(self.blocks)
        if drop:
            object.__setattr__(self, "blocks", ())
        out = []
        while blocks:
            b = blocks.pop(0)
            w, v = scipy.linalg.eigh(b.matrix, check_finite=False, driver="evr")
            label, codes = b.label, b.codes
            del b  # with ``drop`` this was the last reference to the block
            keep = w > _EIGH_FLOOR * max(w.max(initial=0.0), 0.0)
            if np.any(keep):
                out.append(RootBlock(label, codes, v[:, keep] * np.sqrt(w[keep])))
            del v
        return GradedRoot(self.sites, self.space, self.grading, self.local_charges, self.moduli, tuple(out),
                          self.route, self.peak_estimate)

    def __repr__(self) -> str:
        return f"BlockedRho({len(self.sites)} sites, {len(self.blocks)} blocks, {self.route})"
