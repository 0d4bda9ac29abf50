"""The registry of reduced-state routes and the one dispatcher that every public entry point uses.

A route is a way to build the reduced state of a site set: :data:`ROUTES` maps its method name to a
:class:`Route` with ``applies(state, sites, space)``, ``estimate(state, sites, space, output)`` (peak
bytes, before anything large is allocated) and ``build(state, sites, space, budget, where, output)``.
``output`` is ``"root"`` (a :class:`~netprobe.rdm.common.GradedRoot`), ``"dense"`` (the dense matrix)
or ``"blocks"`` (a :class:`~netprobe.rdm.common.BlockedRho`, on the routes that keep the charge blocks
of rho itself). :func:`dispatch` picks the route (the named one, or for ``"auto"`` the applicable one
with the smallest weighted estimate), checks the budget with its estimate and builds.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from netprobe.errors import NetprobeError
from netprobe.resources import check_memory_budget
from netprobe.rdm import root as _root
from netprobe.rdm import split as _split
from netprobe.rdm import vector as _vector
from netprobe.rdm import zipper as _zipper
from netprobe.rdm.common import _check_sites, _check_space, _is_vector, _root_from_rho, _vector_sites
from netprobe.rdm.tables import _parity_graded

__all__ = ["Route", "ROUTES", "RDM_METHODS", "OUTPUTS", "choose_route", "dispatch", "route_estimate"]

#: What a route can hand back.
OUTPUTS = ("root", "dense", "blocks")


@dataclass(frozen=True)
class Route:
    """One way to build a reduced state.

    Attributes
    ----------
    name : str
        The method name users pass (``method="split"``).
    label : str
        Recorded on the results (``GradedRoot.route``): ``"vector"``, ``"mps-root"``, ...
    what : str
        For messages: ``"the split walk"``.
    applies : callable
        ``applies(state, sites, space) -> bool``.
    estimate : callable
        ``estimate(state, sites, space, output, budget=None) -> float``, peak bytes of what ``build``
        runs under that budget (only the split route's plan depends on it).
    build : callable
        ``build(state, sites, space, budget, where, output)``.
    unfit : str
        Why the route does not apply where it does not, with what to use instead.
    weight : float
        Factor on the estimate when ``auto`` compares routes: 1 for a realistic figure; below 1 for
        an exact count, preferred unless the other routes are expected to be far smaller.
    outputs : tuple of str
        The outputs it can build.
    """

    name: str
    label: str
    what: str
    applies: Callable
    estimate: Callable
    build: Callable
    unfit: str
    weight: float = 1.0
    outputs: tuple[str, ...] = ("root", "dense")


def _dense_bytes(state, sites, space) -> float:
    return float(space.dim) ** (2 * len(sites)) * np.dtype(state.dtype).itemsize


# --- dense vectors -------------------------------------------------------------------------------

def _vector_estimate(psi, sites, space, output, budget=None):
    n = _vector_sites(psi, space, "estimate_rdm_memory")
    return _vector.vector_estimate(n, space.dim, len(sites), np.dtype(psi.dtype).itemsize, output == "dense")


def _vector_build(psi, sites, space, budget, where, output):
    if output == "dense":
        return _vector.vector_rho(np.asarray(psi), space, sites, budget, where)
    return _vector.vector_root(np.asarray(psi), space, sites, budget, where)


# --- MPS routes ----------------------------------------------------------------------------------

def _is_mps(state) -> bool:
    return not _is_vector(state)


def _root_applies(state, sites, space) -> bool:
    return _is_mps(state) and _parity_graded(state.basis)


def _root_estimate(state, sites, space, output, budget=None):
    return _root.root_estimate(state, sites) + (_dense_bytes(state, sites, space) if output == "dense" else 0.0)


def _root_build(state, sites, space, budget, where, output):
    root = _root.root_walk(state, sites, budget, where)
    if output == "dense":
        check_memory_budget(root.nbytes + _dense_bytes(state, sites, space), budget,
                            f"{where}: the dense rho over {len(sites)} sites")
        return root.density_matrix()
    return root


def _zipper_estimate(state, sites, space, output, budget=None):
    # the dense rho is the zipper's own output, held beside the last transfer
    return _zipper.zipper_estimate(state, sites) + _dense_bytes(state, sites, space)


def _zipper_build(state, sites, space, budget, where, output):
    if not _parity_graded(state.basis):
        _zipper.check_mps_parity(state, where)
    rho = _zipper.zipper_rho(state, sites)
    if output == "dense":
        return rho
    return _root_from_rho(rho, space, sites, state.basis.conserved, "mps-zipper")


def _split_applies(state, sites, space) -> bool:
    return _is_mps(state) and _split.split_applies(state, sites)


def _split_estimate(state, sites, space, output, budget=None):
    return _split.split_estimate(state, sites, output, budget)


def _split_build(state, sites, space, budget, where, output):
    estimate = _split.split_estimate(state, sites, output, budget)
    blocks = _split.split_blocks(state, sites, budget, where, estimate)
    if output == "blocks":
        return blocks
    if output == "dense":
        return blocks.density_matrix()
    return blocks.to_root(drop=True)


_UNGRADED = ("the MPS's conserved charges do not fix the fermion parity of a site, so the {what} cannot place "
             "the parity strings; use method='zipper' or conserved N")

#: The routes by method name.
ROUTES: dict[str, Route] = {
    "vector": Route("vector", "vector", "the dense-vector partial trace", lambda s, x, sp: _is_vector(s),
                    _vector_estimate, _vector_build, "it needs a state vector, not an MPS"),
    "root": Route("root", "mps-root", "the square-root zipper", _root_applies, _root_estimate, _root_build,
                  _UNGRADED.format(what="square-root route")),
    "zipper": Route("zipper", "mps-zipper", "the density-matrix zipper", lambda s, x, sp: _is_mps(s),
                    _zipper_estimate, _zipper_build, "it needs an MPS"),
    "split": Route("split", "mps-split", "the split walk", _split_applies, _split_estimate, _split_build,
                   _UNGRADED.format(what="split route") + " (or the charges of the open sectors)",
                   weight=0.25, outputs=("root", "dense", "blocks")),
}

#: Method names accepted by the public entry points ("auto" picks the cheapest route that applies).
RDM_METHODS = ("auto",) + tuple(ROUTES)


def _check_method(method: str, where: str) -> str:
    if method not in RDM_METHODS:
        raise NetprobeError(f"{where}: unknown method '{method}'; valid methods: {', '.join(RDM_METHODS)}")
    return method


def _checked_sites(state, sites, space, where: str) -> tuple[int, ...]:
    if _is_vector(state):
        n = _vector_sites(np.asarray(state), space, where)
        return _check_sites(sites, n, where)
    _check_space(state, space, where)
    return _check_sites(sites, state.num_sites, where)


def choose_route(state, sites, space, method: str = "auto", output: str = "root",
                 where: str = "choose_route", budget: int | None = None) -> Route:
    """The route that builds the reduced state of ``sites``: the named one or the cheapest that applies.

    Parameters
    ----------
    state : ndarray or MPS
        A pure state (see :func:`netprobe.rdm.as_pure_state`).
    sites : tuple of int
        Checked site set in MPS order.
    space : SiteSpace
    method : str
        One of :data:`RDM_METHODS`. A state vector always takes the ``"vector"`` route (the MPS
        methods have no meaning for it).
    output : {"root", "dense", "blocks"}
    where : str
        Caller's name, for messages.
    budget : int, optional
        Bytes allowed (the split route's estimate depends on it).

    Returns
    -------
    Route

    Raises
    ------
    NetprobeError
        For an unknown method, or a named route that does not apply (the message says why and
        what to use).
    """
    _check_method(method, where)
    if _is_vector(state):
        return ROUTES["vector"]
    if method != "auto":
        route = ROUTES[method]
        if not route.applies(state, sites, space):
            raise NetprobeError(f"{where}: method='{method}' does not apply: {route.unfit}")
        return route
    if not _parity_graded(state.basis):
        return ROUTES["zipper"]
    candidates = [r for n, r in ROUTES.items() if n != "vector" and output in r.outputs
                  and r.applies(state, sites, space)]
    return min(candidates, key=lambda r: r.weight * r.estimate(state, sites, space, output, budget))


def route_estimate(state, sites, space, method: str = "auto", output: str = "root",
                   where: str = "estimate_rdm_memory", budget: int | None = None) -> tuple[Route, float]:
    """The chosen route and its peak-byte estimate under ``budget`` (sites are checked here)."""
    sites = _checked_sites(state, sites, space, where)
    route = choose_route(state, sites, space, method, output, where, budget)
    return route, float(route.estimate(state, sites, space, output, budget))


def dispatch(state, sites, space, *, method: str = "auto", output: str = "root", budget: int | None = None,
             where: str = "reduced_root"):
    """Check the sites, choose the route, refuse above the budget with its estimate, then build.

    Returns
    -------
    GradedRoot, ndarray or BlockedRho
        As ``output`` asks. Every result of a route carries (or, for a dense matrix, came from) the
        route's ``label``.

    Raises
    ------
    MemoryBudgetError
        Before any large allocation, if the route's estimate exceeds the budget (and, on the walks,
        if a step would, checked with the actual dimensions before the step).
    """
    if output not in OUTPUTS:
        raise ValueError(f"output must be one of {OUTPUTS}, got {output!r}")
    sites = _checked_sites(state, sites, space, where)
    route = choose_route(state, sites, space, method, output, where, budget)
    if output not in route.outputs:
        raise NetprobeError(f"{where}: {route.what} does not keep the charge blocks of rho; use method='split'")
    check_memory_budget(route.estimate(state, sites, space, output, budget), budget,
                        f"{where}: {route.what} over {len(sites)} sites")
    try:
        return route.build(state, sites, space, budget, where, output)
    except _root.UngradedParity:
        if method != "auto":
            raise NetprobeError(f"{where}: method='{method}' does not apply: {route.unfit}") from None
    zipper = ROUTES["zipper"]
    check_memory_budget(zipper.estimate(state, sites, space, output, budget), budget,
                        f"{where}: {zipper.what} over {len(sites)} sites")
    return zipper.build(state, sites, space, budget, where, output)
