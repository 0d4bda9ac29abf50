"""Entropies of a spectrum: the one place where ``-sum w ln w`` and the Renyi entropies are computed.

A spectrum is a list of weights (eigenvalues of a density matrix, squared Schmidt values); it is
normalised to unit sum and negative entries, rounding of zero ones, are dropped. All entropies are
in nats.

- von Neumann ``S = -sum_k w_k ln w_k``;
- entanglement energies ``xi_k = -2 ln s_k`` of Schmidt values ``s_k`` (levels of the entanglement
  Hamiltonian, common practice);
- Renyi ``S_n = ln(sum_k w_k^n) / (1 - n)``, with ``S_1 = S`` and ``S_inf = -ln max_k w_k``
  (A. Renyi, Proc. Fourth Berkeley Symp. Math. Stat. Prob. 1, 547 (1961)).
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["entanglement_energies", "entropy_from_weights", "renyi_from_weights"]


def _positive(weights) -> np.ndarray:
    """The positive weights, normalised to unit sum (an all-zero spectrum gives an empty array)."""
    w = np.asarray(weights, dtype=float).ravel()
    w = np.where(w > 0, w, 0.0)  # negative eigenvalues are rounding of zero ones
    total = w.sum()
    w = w / total if total > 0 else w
    return w[w > 0]


def entropy_from_weights(weights) -> float:
    """Von Neumann entropy ``-sum w ln w`` of a spectrum (normalised to unit sum, negatives dropped).

    Parameters
    ----------
    weights : array_like
        Eigenvalues of a density matrix or squared Schmidt values, any shape.

    Returns
    -------
    float
        In nats; 0 for an empty or all-zero spectrum.

    Examples
    --------
    >>> round(entropy_from_weights([0.5, 0.5]), 6)
    0.693147
    """
    w = _positive(weights)
    return float(-np.sum(w * np.log(w))) + 0.0  # + 0.0 turns -0.0 into 0.0


def renyi_from_weights(weights, order: float) -> float:
    """Renyi entropy ``ln(sum w^n) / (1 - n)``; order 1 is von Neumann, ``inf`` gives ``-ln max w``.

    Parameters
    ----------
    weights : array_like
        As for :func:`entropy_from_weights`.
    order : float
        The Renyi index ``n > 0``.

    Returns
    -------
    float
        In nats.

    Examples
    --------
    >>> round(renyi_from_weights([0.5, 0.25, 0.25], 2), 6)
    0.980829
    """
    w = _positive(weights)
    if order == 1:
        return float(-np.sum(w * np.log(w))) + 0.0
    if math.isinf(order):
        return float(-np.log(w.max()))
    return float(np.log(np.sum(w**order)) / (1.0 - order))


def entanglement_energies(schmidt_values) -> np.ndarray:
    """Entanglement energies ``-2 ln s`` of Schmidt values (the levels ``-ln s**2`` of ``-ln rho``).

    Parameters
    ----------
    schmidt_values : array_like
        Schmidt values ``s >= 0`` (not squared), any order; zeros give a large finite level
        (``-2 ln 1e-300``) so that the array keeps its shape.

    Returns
    -------
    ndarray of float, same shape

    Examples
    --------
    >>> entanglement_energies([1.0, math.exp(-1.0)])
    array([-0.,  2.])
    """
    s = np.asarray(schmidt_values, dtype=float)
    return -2.0 * np.log(np.maximum(s, 1e-300))
