"""Entropies of a spectrum (netprobe.tensor.entropy), the one implementation every stage calls."""

import math

import numpy as np
import scipy.stats
from conftest import tol

from netprobe.engines.mps.measure import SchmidtSpectrum
from netprobe.tensor.entropy import entropy_from_weights, renyi_from_weights


def _spectrum(seed=3, n=12):
    rng = np.random.default_rng(seed)
    w = rng.random(n) ** 3
    return w / w.sum()


def test_von_neumann_matches_scipy():
    w = _spectrum()
    # scipy.stats.entropy normalises and computes -sum p ln p (general-purpose library)
    assert abs(entropy_from_weights(w) - scipy.stats.entropy(w)) < tol()
    # an unnormalised spectrum with negative rounding noise gives the same value (common practice:
    # eigenvalues of a density matrix at -1e-17 are zeros)
    noisy = np.concatenate([3.0 * w, [-1e-17, 0.0]])
    assert abs(entropy_from_weights(noisy) - scipy.stats.entropy(w)) < tol()


def test_renyi_orders():
    w = _spectrum()
    # S_2 = -ln sum p^2 and S_inf = -ln max p (Renyi 1961)
    assert abs(renyi_from_weights(w, 2) + math.log(np.sum(w**2))) < tol()
    assert abs(renyi_from_weights(w, math.inf) + math.log(w.max())) < tol()
    assert renyi_from_weights(w, 1) == entropy_from_weights(w)
    # S_n is non-increasing in n (Renyi 1961)
    values = [renyi_from_weights(w, n) for n in (0.5, 1, 2, 3, math.inf)]
    assert all(a >= b - tol() for a, b in zip(values, values[1:]))


def test_empty_spectrum_has_zero_entropy():
    # a spectrum with no weight has nothing to mix: 0, and not -0.0 in a JSON file
    assert math.copysign(1.0, entropy_from_weights([0.0, 0.0])) == 1.0


def test_schmidt_spectrum_uses_squared_values():
    w = _spectrum(seed=5, n=6)
    spec = SchmidtSpectrum(3, np.sqrt(w), np.zeros((6, 0), int), ())
    # the entanglement entropy of Schmidt values s is -sum s^2 ln s^2 (common practice)
    assert abs(spec.entropy() - scipy.stats.entropy(w)) < tol()
    assert abs(spec.renyi(2) + math.log(np.sum(w**2))) < tol()
