"""Public entry points for reduced states: every one goes through :func:`netprobe.rdm.routes.dispatch`."""

from __future__ import annotations

import numpy as np

from netprobe.rdm.blocked import blocks_probe_estimate
from netprobe.rdm.common import BlockedRho, GradedRoot, as_pure_state
from netprobe.rdm.routes import _checked_sites, dispatch, route_estimate
from netprobe.rdm.split import block_sizes
from netprobe.model.sites import SiteSpace

__all__ = [
    "reduced_root",
    "reduced_density_matrix",
    "reduced_blocks",
    "estimate_rdm_memory",
    "estimate_blocks_memory",
    "rdm_route",
]



def reduced_root(state, sites, space: SiteSpace, *, method: str = "auto",
                 memory_budget: int | None = None) -> GradedRoot:
    """Square-root factor of the reduced density matrix of a site set, graded by charge.

    Parameters
    ----------
    state : ndarray, shape (d**N,), ExactResult or MPS
        A pure state: a vector in the full space (site 0 most significant, as
        :func:`netprobe.engines.exact.full_vector` returns it), an exact-engine result (its ground state), or a
        :class:`netprobe.engines.mps.MPS`.
    sites : sequence of int
        MPS indices of the set S (any order, any gaps; listed back in MPS order).
    space : SiteSpace
        The local site space (fermionic spaces get the fermionic reduced matrix).
    method : {"auto", "vector", "root", "zipper", "split"}
        MPS only (a vector always takes the dense-vector route): the square-root zipper on block
        tensors, the dense density-matrix zipper, the split double-layer walks, or the applicable
        route with the smallest memory estimate (:mod:`netprobe.rdm.routes`).
    memory_budget : int, optional
        Bytes the computation may use; default :func:`netprobe.resources.default_memory_budget`.

    Returns
    -------
    GradedRoot
        Its ``route`` names the route that built it.

    Raises
    ------
    LatticeError
        For a site outside the lattice, a repeated site or an empty set.
    SectorError
        For a fermionic state of mixed parity.
    NetprobeError
        For an unknown method, or a named route that does not apply to this state.
    MemoryBudgetError
        If the route's up-front estimate exceeds the budget, or a step of a walk would (checked with
        the actual dimensions before each step's allocation).
    """
    return dispatch(as_pure_state(state), sites, space, method=method, output="root", budget=memory_budget,
                    where="reduced_root")


def reduced_density_matrix(state, sites, space: SiteSpace, *, method: str = "auto",
                           memory_budget: int | None = None) -> np.ndarray:
    """The reduced density matrix of a site set as a dense matrix.

    Parameters
    ----------
    state, sites, space, method, memory_budget
        As for :func:`reduced_root` (the same dispatcher chooses the same route).

    Returns
    -------
    ndarray, shape (d**m, d**m)
        ``rho_S`` in the basis of S's sites in MPS order (first site most significant); for fermions
        the fermionic reduced matrix in the Jordan-Wigner basis of S. Unit trace.

    Raises
    ------
    LatticeError, SectorError, NetprobeError, MemoryBudgetError
        As for :func:`reduced_root`.

    Examples
    --------
    >>> import numpy as np
    >>> from netprobe.model.sites import site_space
    >>> bell = np.array([0, 1, -1, 0]) / np.sqrt(2)
    >>> np.round(reduced_density_matrix(bell, [0], site_space("spin-1/2")), 3).tolist()
    [[0.5, 0.0], [0.0, 0.5]]
    """
    return dispatch(as_pure_state(state), sites, space, method=method, output="dense", budget=memory_budget,
                    where="reduced_density_matrix")


def reduced_blocks(state, sites, space: SiteSpace, *, method: str = "auto",
                   memory_budget: int | None = None) -> BlockedRho:
    """The reduced density matrix of an MPS kept in its charge blocks (never a dense ``d**m`` square).

    Parameters
    ----------
    state, sites, space, method, memory_budget
        As for :func:`reduced_root`; ``auto`` takes the split route, the one that builds the blocks.

    Returns
    -------
    BlockedRho
    """
    if method == "auto":
        method = "split"
    return dispatch(as_pure_state(state), sites, space, method=method, output="blocks", budget=memory_budget,
                    where="reduced_blocks")


def estimate_rdm_memory(state, sites, space: SiteSpace, *, method: str = "auto",
                        dense: bool = False, memory_budget: int | None = None) -> float:
    """Bytes a reduced state of ``sites`` would need, estimated before any large allocation.

    Parameters
    ----------
    state : ndarray or MPS
    sites : sequence of int
    space : SiteSpace
    method : {"auto", "vector", "root", "zipper", "split"}
        The route, or the one ``auto`` would choose (the same dispatcher as :func:`reduced_root`).
    dense : bool
        Estimate for the dense ``d**m x d**m`` output (what :func:`reduced_density_matrix` returns)
        instead of the square root.
    memory_budget : int, optional
        The budget the computation would run under (the split route plans its streaming by it);
        default :func:`netprobe.resources.default_memory_budget`.

    Returns
    -------
    float
        Peak bytes. Dense vector, density-matrix zipper and split walks: counted exactly from the
        dimensions and charge sectors. Square-root zipper: a realistic figure, not a bound; the width
        of its compressed leg is known only during the walk, so the estimate assumes it stays within
        its dimension bound and within the largest bond dimension over the span. Every walk then
        checks each step, right before its allocation, with the actual dimensions.
    """
    _, estimate = route_estimate(as_pure_state(state), sites, space, method, "dense" if dense else "root",
                                 budget=memory_budget)
    return estimate


def rdm_route(state, sites, space: SiteSpace, *, method: str = "auto", dense: bool = False) -> str:
    """Name of the route (``"vector"``, ``"root"``, ``"zipper"``, ``"split"``) the dispatcher would take."""
    route, _ = route_estimate(as_pure_state(state), sites, space, method, "dense" if dense else "root",
                              where="rdm_route")
    return route.name


def estimate_blocks_memory(state, sites, space: SiteSpace, *, memory_budget: int | None = None) -> float:
    """Peak bytes of :func:`reduced_blocks` followed by the probes on the blocks (:mod:`netprobe.rdm.blocked`).

    Both counted exactly from the charge sectors: the split walks and their join as planned under
    ``memory_budget`` (default :func:`netprobe.resources.default_memory_budget`), then the blocks with
    one product and one eigenvalue copy of the largest block.
    """
    state = as_pure_state(state)
    _, walk = route_estimate(state, sites, space, "split", "blocks", where="estimate_blocks_memory",
                             budget=memory_budget)
    checked = _checked_sites(state, sites, space, "estimate_blocks_memory")
    probes = blocks_probe_estimate(block_sizes(state, checked), np.dtype(state.dtype).itemsize)
    return max(walk, probes)
