"""Measurements on matrix product states: environments, overlaps, expectation values, variances, local
expectations, correlations and Schmidt spectra (by charge) with entanglement entropies.
"""

from __future__ import annotations

import itertools
import numbers
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from netprobe.errors import NetprobeError, OperatorError
from netprobe.model.sites import operator_charge_change, operator_parity
from netprobe.tensor import BlockTensor, contract, diag_multiply, svd, trace
from netprobe.tensor.entropy import entanglement_energies, entropy_from_weights, renyi_from_weights
from netprobe.model.terms import LocalProduct, Term, normal_form
from netprobe.engines.mps.state import (
    BlockMPO, MPS, SiteBasis,
)

__all__ = [
    "SchmidtSpectrum",
    "expectation_value",
    "energy_variance",
    "local_expectations",
    "correlation",
    "product_expectation",
    "schmidt_spectra",
    "entanglement_entropies",
    "entanglement_spectrum",
    "left_boundary",
    "right_boundary",
    "left_environment_step",
    "right_environment_step",
]

# --------------------------------------------------------------------------------------------------
# Environments and contractions with operators
# --------------------------------------------------------------------------------------------------


def left_boundary(state: MPS, mpo: BlockMPO) -> BlockTensor:
    """The trivial left environment, legs ``(bra, ket, w)``."""
    a, w = state.tensors[0].legs[0], mpo.tensors[0].legs[0]
    return BlockTensor((a, a.dual(), w.dual()), None, state.basis.rule,
                       {(0, 0, 0): np.ones((1, 1, 1))})


def right_boundary(state: MPS, mpo: BlockMPO) -> BlockTensor:
    """The trivial right environment, legs ``(ket, w, bra)``."""
    b, w = state.tensors[-1].legs[2], mpo.tensors[-1].legs[3]
    return BlockTensor((b.dual(), w.dual(), b), None, state.basis.rule, {(0, 0, 0): np.ones((1, 1, 1))})


def left_environment_step(env: BlockTensor, a: BlockTensor, w: BlockTensor) -> BlockTensor:
    """``L'[b*, b, w'] = sum L[a*, a, w] A[a, s, b] W[w, s', s, w'] conj(A[a*, s', b*])``."""
    t = contract(env, a, ([1], [0]))  # (bra, w, s, b)
    t = contract(t, w, ([1, 2], [0, 2]))  # (bra, b, s', w')
    return contract(a.conj(), t, ([0, 1], [0, 2]))  # (bra', b, w')


def right_environment_step(env: BlockTensor, a: BlockTensor, w: BlockTensor) -> BlockTensor:
    """``R'[a, w, a*] = sum A[a, s, b] W[w, s', s, w'] R[b, w', b*] conj(A[a*, s', b*])``."""
    t = contract(a, env, ([2], [0]))  # (a, s, w', bra)
    t = contract(t, w, ([1, 2], [2, 3]))  # (a, bra, w, s')
    return contract(t, a.conj(), ([1, 3], [2, 1]))  # (a, w, bra')


def _as_block_mpo(state: MPS, mpo) -> BlockMPO:
    block = BlockMPO.from_mpo(mpo, state.basis)
    if block.num_sites != state.num_sites:
        raise NetprobeError(f"the MPO has {block.num_sites} sites but the state has {state.num_sites}")
    return block




def expectation_value(state: MPS, mpo) -> float | complex:
    """``<psi|H|psi> / <psi|psi>`` for an MPO (real for a Hermitian MPO, up to rounding).

    Parameters
    ----------
    state : MPS
    mpo : netprobe.engines.mps.mpo.MPO or BlockMPO

    Returns
    -------
    float or complex
        Real part if the imaginary part is below 1e-12 of the magnitude.
    """
    block = _as_block_mpo(state, mpo)
    env = left_boundary(state, block)
    for a, w in zip(state.tensors, block.tensors):
        env = left_environment_step(env, a, w)
    value = complex(contract(env, right_boundary(state, block), ([0, 1, 2], [2, 0, 1])).item())
    value /= state.norm() ** 2
    return _real_if_close(value)


def _real_if_close(value: complex):
    return value.real if abs(value.imag) <= 1e-12 * max(1.0, abs(value)) else value


def energy_variance(state: MPS, mpo) -> float:
    """``<H^2> - <H>^2`` of the normalised state, by an exact contraction with two MPO layers.

    Notes
    -----
    ``<H^2>`` is contracted site by site with an environment of legs (bra, ket, w_lower, w_upper);
    the cost per site is about ``chi^3 D^2 d`` (``D`` the MPO bond dimension). Rounding limits the
    result to about ``eps <H^2>``.
    """
    block = _as_block_mpo(state, mpo)
    a0, w0 = state.tensors[0].legs[0], block.tensors[0].legs[0]
    env = BlockTensor((a0, a0.dual(), w0.dual(), w0.dual()), None, state.basis.rule,
                      {(0, 0, 0, 0): np.ones((1, 1, 1, 1))})
    for a, w in zip(state.tensors, block.tensors):
        t = contract(env, a, ([1], [0]))  # (bra, wl, wu, s, b)
        t = contract(t, w, ([1, 3], [0, 2]))  # (bra, wu, b, s', wl')
        t = contract(t, w, ([1, 3], [0, 2]))  # (bra, b, wl', s'', wu')
        env = contract(a.conj(), t, ([0, 1], [0, 3]))  # (bra', b, wl', wu')
    h2 = complex(sum((blk.sum() for blk in env.blocks.values()), 0.0)) / state.norm() ** 2
    h1 = complex(expectation_value(state, block))
    return float((h2 - h1 * h1.conjugate()).real)


def _expand_definite(basis: SiteBasis, product: LocalProduct):
    """Charge-definite pieces of a local product whose charge changes add up to zero."""
    options = [basis.split(m) for m in product.matrices]
    zero = tuple(basis.rule.zero().tolist())
    for combo in itertools.product(*options):
        total = tuple(np.sum([np.array(d, np.int64) for d, _ in combo], axis=0).tolist()) if combo else zero
        if tuple(basis.rule.reduce(np.array(total, np.int64)).tolist()) == zero:
            yield tuple(t for _, t in combo)


def product_expectation(state: MPS, product: LocalProduct):
    """``<psi|P|psi> / <psi|psi>`` for one local product in normal form (strings already written out).

    Parameters
    ----------
    state : MPS
    product : LocalProduct
        ``coefficient * prod_k matrices[k]`` on increasing ``sites``, in the site space's basis
        (:func:`netprobe.model.terms.normal_form` writes fermion strings out).

    Returns
    -------
    complex
        Parts of the product that change a conserved charge contribute nothing and are skipped.
    """
    if not product.sites:
        return complex(product.coefficient)
    work = state._clone()
    first, last = product.sites[0], product.sites[-1]
    work.move_centre(first)
    norm2 = work.tensors[first].norm() ** 2
    total = 0.0 + 0.0j
    for ops in _expand_definite(work.basis, product):
        by_site = dict(zip(product.sites, ops))
        env = BlockTensor.eye(work.tensors[first].legs[0], work.basis.rule)
        for s in range(first, last + 1):
            a = work.tensors[s]
            t = contract(env, a, ([1], [0]))  # (bra, s, b)
            op = by_site.get(s)
            if op is not None:
                t = contract(t, op, ([1], [1])).transpose((0, 2, 1))  # (bra, s', b)
            env = contract(a.conj(), t, ([0, 1], [0, 1]))  # (bra', b)
        total += complex(trace(env, 0, 1).item())
    return complex(product.coefficient) * total / norm2


def _hermitian_product(product: LocalProduct) -> bool:
    c = complex(product.coefficient)
    mats = product.matrices
    if abs(c.imag) > 1e-14 * max(1.0, abs(c)):
        return False
    return all(np.allclose(m, np.conj(m).T, atol=1e-12) for m in mats)


def _check_measurable(basis: SiteBasis, ops: Sequence[tuple[int, str]], label: str) -> None:
    """Refuse operators whose expectation vanishes by symmetry (they leave the sector)."""
    space = basis.space
    odd = sum(operator_parity(space, space.operator(name)) for _, name in ops) % 2
    if odd:
        raise OperatorError(f"operator {label} is fermion-odd, so its expectation vanishes; pair it with "
                            "another odd operator")
    for charge in basis.conserved:
        total = 0
        for _, name in ops:
            delta = operator_charge_change(space, space.operator(name), charge)
            if delta is None:
                raise OperatorError(
                    f"operator {label} mixes different changes of the conserved charge {charge}; in a "
                    f"fixed-{charge} state only its charge-conserving part counts: measure that part, "
                    "or drop the charge from conserved"
                )
            total += delta
        if total:
            raise OperatorError(
                f"operator {label} changes {charge} by {total:+d} and leaves the sector, so its expectation "
                "vanishes; use a charge-conserving operator or correlator"
            )


def local_expectations(state: MPS, op_name: str) -> np.ndarray:
    """``<O_i>`` on every site for a named local operator of the site space.

    Parameters
    ----------
    state : MPS
    op_name : str
        An operator of ``state.basis.space`` (or an on-site product ``a.b``).

    Returns
    -------
    ndarray, shape (N,)
        Real for a Hermitian operator, complex otherwise.

    Raises
    ------
    OperatorError
        For an unknown operator, or one whose expectation vanishes by symmetry (fermion-odd, or
        changing a conserved charge).
    """
    basis = state.basis
    mat = basis.space.operator(op_name)
    _check_measurable(basis, [(0, op_name)], f"'{op_name}'")
    parts = basis.split(mat)
    hermitian = np.allclose(mat, np.conj(mat).T, atol=1e-12)
    out = np.zeros(state.num_sites, dtype=float if hermitian else complex)
    if not parts:
        return out
    op = parts[0][1]
    work = state._clone()
    for i in range(state.num_sites):
        work.move_centre(i)
        a = work.tensors[i]
        oa = contract(op, a, ([1], [1])).transpose((1, 0, 2))  # (a, s', b)
        value = complex(a.inner(oa)) / a.norm() ** 2
        out[i] = value.real if hermitian else value
    return out


def correlation(state: MPS, op_a: str, op_b: str, i: int, j: int):
    """``<A_i B_j>`` for named local operators, with Jordan-Wigner strings for fermions.

    Parameters
    ----------
    state : MPS
    op_a, op_b : str
        Operators of the site space (e.g. ``"cdag"``, ``"c"`` or ``"Sz"``, ``"Sz"``); ``A_i`` is applied
        after ``B_j``, as written.
    i, j : int
        Sites in MPS order (may be equal or in any order).

    Returns
    -------
    float or complex
        Real if the product is Hermitian.

    Raises
    ------
    OperatorError
        For an unknown operator, a site out of range, or a product whose expectation vanishes by symmetry.
    """
    n = state.num_sites
    for site in (i, j):
        if not isinstance(site, (numbers.Integral, np.integer)) or not 0 <= int(site) < n:
            raise OperatorError(f"correlation: site {site!r} outside 0..{n - 1}")
    ops = [(int(i), op_a), (int(j), op_b)]
    label = f"'{op_a}_{i} {op_b}_{j}'"
    _check_measurable(state.basis, ops, label)
    product = normal_form(Term(1.0, tuple(ops), label), state.basis.space)
    if product is None:
        return 0.0
    value = product_expectation(state, product)
    return value.real if _hermitian_product(product) else value


# --------------------------------------------------------------------------------------------------
# Entanglement
# --------------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class SchmidtSpectrum:
    """Schmidt values at one bond, labelled by the charge of the left part.

    Attributes
    ----------
    bond : int
        Bond ``b`` separates sites ``0..b-1`` from ``b..N-1``.
    values : ndarray, shape (n,)
        Schmidt values, descending, ``sum values**2 = 1``.
    charges : ndarray of int, shape (n, k)
        Charge of the left part for each value (k = number of conserved charges, may be 0).
    names : tuple of str
        Names of the charge components.
    """

    bond: int
    values: np.ndarray
    charges: np.ndarray
    names: tuple[str, ...]

    @property
    def weights(self) -> np.ndarray:
        """Probabilities ``values**2``."""
        return self.values**2

    def entropy(self) -> float:
        """Von Neumann entanglement entropy ``-sum p ln p`` (nats)."""
        return entropy_from_weights(self.weights)

    def renyi(self, alpha: float) -> float:
        """Renyi entropy ``ln(sum p**alpha) / (1 - alpha)`` (nats); alpha = 1 gives :meth:`entropy`."""
        return renyi_from_weights(self.weights, alpha)

    def per_charge(self) -> dict[tuple[int, ...], np.ndarray]:
        """Schmidt values grouped by the charge of the left part (descending in each group)."""
        out: dict = {}
        for v, q in zip(self.values, map(tuple, self.charges.tolist())):
            out.setdefault(q, []).append(v)
        return {q: np.array(v) for q, v in sorted(out.items())}

    def levels(self) -> np.ndarray:
        """Entanglement energies ``-2 ln(values)``."""
        return entanglement_energies(self.values[self.values > 0])

    def __repr__(self) -> str:
        return f"SchmidtSpectrum(bond={self.bond}, n={len(self.values)}, entropy={self.entropy():.6g})"


def _spectrum(bond: int, s, basis: SiteBasis) -> SchmidtSpectrum:
    values = np.asarray(s.values, float)
    total = np.sqrt(np.sum(values**2))
    values = values / total if total > 0 else values
    charges = np.asarray(s.charges)[:, : len(basis.conserved)]
    return SchmidtSpectrum(bond, values, charges, basis.conserved)


def schmidt_spectra(state: MPS) -> list[SchmidtSpectrum]:
    """Schmidt spectra at every inner bond 1..N-1, from one sweep of SVDs.

    Returns
    -------
    list of SchmidtSpectrum
        Entry ``b - 1`` is bond ``b``.
    """
    work = state._clone()
    work.move_centre(0)
    out = []
    for i in range(work.num_sites - 1):
        u, s, v, _ = svd(work.tensors[i], [0, 1], [2])
        work.tensors[i] = u
        work.tensors[i + 1] = contract(diag_multiply(v, 0, s), work.tensors[i + 1], ([1], [0]))
        out.append(_spectrum(i + 1, s, work.basis))
    return out


def entanglement_entropies(state: MPS) -> np.ndarray:
    """Von Neumann entropy (nats) at every inner bond; entry ``b - 1`` is bond ``b``, shape (N-1,)."""
    return np.array([s.entropy() for s in schmidt_spectra(state)])


def entanglement_spectrum(state: MPS, bond: int) -> SchmidtSpectrum:
    """Schmidt values and left-part charges at one bond (1..N-1).

    Raises
    ------
    NetprobeError
        If the bond is out of range.
    """
    n = state.num_sites
    if not isinstance(bond, (numbers.Integral, np.integer)) or not 1 <= int(bond) <= n - 1:
        raise NetprobeError(
            f"entanglement_spectrum: bond {bond!r} outside 1..{n - 1} (bond b cuts left of site b)")
    work = state._clone()
    work.move_centre(int(bond))
    _, s, _, _ = svd(work.tensors[int(bond)], [0], [1, 2])
    return _spectrum(int(bond), s, work.basis)
