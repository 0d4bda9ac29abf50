"""Slices of modular matrices through the tridiagonal form against numpy's full eigendecomposition.

The tridiagonal route (netprobe/engines/gaussian/tridiagonal.py) reorders the arithmetic of a
divide-and-conquer eigendecomposition; numpy.linalg.eigh (a general-purpose library) is the reference
for single matrices, and the eigh route of the engine for the modular commutator of lattice states.
"""

import functools

import numpy as np
import pytest
import scipy.linalg.lapack as lapack
from conftest import CLIPPED_LOG_J, tol

from netprobe.engines.gaussian import gaussian_state
from netprobe.engines.gaussian.states import (
    _fermion_log_weights,
    _majorana_log_weights,
    fermion_modular_commutator,
    majorana_modular_commutator,
    MajoranaState,
)
from netprobe.engines.gaussian import tridiagonal
from netprobe.engines.gaussian.tridiagonal import function_columns, function_rows
from netprobe.model.spec import load_model

CLIP = 1e-14
# |ln((1 - x)/x)| <= ln(1/CLIP) ~ 32 on [CLIP, 1 - CLIP]
LOG_SCALE = 32.3
# entries of V diag(f) V^dag from two backward-stable Hermitian eigensolvers of an order-n matrix: ~n ulps
# of max|f| each, times the condition of the logarithm (1/(x(1-x)) <= 150 for the unclipped occupations of
# _correlations), summed over n terms (common practice); 1e5 ulps of 32 (7e-10) covers n up to ~60
ENTRY_TOL = tol(LOG_SCALE, 1e5)


def _correlations(rng, n, real, deep=0):
    """A Gaussian state's G = (e^k + 1)^-1 (Peschel, J. Phys. A 36, L205 (2003)) in a random basis.

    The levels of k spread over [-5, 5], so that the occupations stay >= 6.7e-3 from 0 and 1 where
    ln((1 - x)/x) is well conditioned; ``deep`` more levels sit at +-40 (occupations ~4e-18 from 0 or
    1, beyond the clip, like the modes deep inside a region of a gapped state).
    """
    x = rng.standard_normal((n, n)) + (0 if real else 1j * rng.standard_normal((n, n)))
    _, basis = np.linalg.eigh(x + x.conj().T)
    levels = np.concatenate([np.linspace(-5.0, 5.0, n - deep), np.resize([40.0, -40.0], deep)])
    return (basis / (np.exp(levels) + 1)) @ basis.conj().T


@pytest.mark.parametrize("n", [1, 2, 3, 17, 48])
@pytest.mark.parametrize("real", [False, True])
def test_columns_and_rows_match_numpy_eigh(rng, n, real):
    g = _correlations(rng, n, real)
    weights = functools.partial(_fermion_log_weights, clip=CLIP)
    w, v = np.linalg.eigh(g)
    full = (v * weights(w)) @ v.conj().T
    cols = np.sort(rng.choice(n, size=max(1, n // 3), replace=False))
    np.testing.assert_allclose(function_columns(g, weights, cols), full[:, cols], atol=ENTRY_TOL, rtol=0)
    np.testing.assert_allclose(function_rows(g, weights, cols), full[cols, :], atol=ENTRY_TOL, rtol=0)
    np.testing.assert_allclose(function_columns(g, weights, slice(0, n), method="eigh"), full, atol=ENTRY_TOL, rtol=0)


def test_complex_weights_and_clustered_spectra(rng):
    # a projector-like G: many eigenvalues at ~1e-17 and ~1 - 1e-17, beyond the clip, as deep inside a
    # region of a gapped state; the Majorana weights 2i artanh (of 2G - 1's eigenvalues) are imaginary
    n = 40
    g = _correlations(rng, n, real=False, deep=20)
    cases = [(g, functools.partial(_fermion_log_weights, clip=CLIP)),
             (2 * g - np.eye(n), functools.partial(_majorana_log_weights, clip=CLIP))]
    for mat, weights in cases:
        w, v = np.linalg.eigh(mat)
        full = (v * weights(w)) @ v.conj().T
        np.testing.assert_allclose(function_columns(mat, weights, slice(5, 25)), full[:, 5:25], atol=ENTRY_TOL, rtol=0)
        np.testing.assert_allclose(function_rows(mat, weights, slice(5, 25)), full[5:25, :], atol=ENTRY_TOL, rtol=0)


@pytest.mark.parametrize("real", [False, True])
def test_reduction_through_the_cython_interface_equals_scipys_wrapper(rng, real, monkeypatch):
    # the same LAPACK routine (hetrd / sytrd) reached two ways: scipy.linalg.lapack is the reference, and the
    # results must agree bit for bit; with the Cython interface unreachable the wrapper itself is used
    g = _correlations(rng, 30, real)
    reference = (lapack.dsytrd if real else lapack.zhetrd)(g, lower=1, lwork=64 * 30)[:4]
    for _ in range(2):
        packed, diag, off, tau = tridiagonal._tridiagonalize(g, 64 * 30)
        np.testing.assert_array_equal(np.tril(packed), np.tril(reference[0]))
        for got, want in zip((diag, off, tau), reference[1:]):
            np.testing.assert_array_equal(got, want)
        monkeypatch.setattr(tridiagonal, "_unlocked", lambda name: None)


def test_unknown_method_is_refused():
    with pytest.raises(ValueError, match="tridiagonal, eigh"):
        function_columns(np.eye(3), np.log1p, slice(0, 1), method="qr")


def _disk(lattice, radius):
    pos = lattice.positions
    d = pos - pos.mean(axis=0)
    inside = np.hypot(d[:, 0], d[:, 1]) < radius
    sector = np.floor(np.mod(np.arctan2(d[:, 1], d[:, 0]), 2 * np.pi) / (2 * np.pi / 3)).astype(int)
    return [np.nonzero(inside & (sector == k))[0] for k in range(3)]


def test_modular_commutator_routes_agree_on_a_haldane_disk():
    # ~100-site disk of a gapped Haldane cylinder: many eigenvalues of G_AB lie beyond the clip, where
    # the two routes' rounding is amplified by the logarithm; CLIPPED_LOG_J bounds that (conftest)
    model = load_model("haldane", {"length": "12", "circumference": "10", "twist": "1.0"})
    state = gaussian_state(model)
    a, b, c = _disk(model.lattice, 6.5)
    u = np.concatenate([state._units(a), state._units(b), state._units(c)])
    g = np.array(state._block(u, u))
    sizes = (a.size, b.size, c.size)
    assert min(sizes) > 25
    fast = fermion_modular_commutator(g, sizes, CLIP)
    reference = fermion_modular_commutator(g, sizes, CLIP, method="eigh")
    assert abs(fast - reference) < CLIPPED_LOG_J
    assert abs(fast) > 0.5  # a chiral state: J near -pi/3 (the sign convention of states.py)
    # two Python threads run the same arithmetic on each side (one BLAS thread each): rounding at most
    assert abs(fermion_modular_commutator(g, sizes, CLIP, threads=2) - fast) < tol(LOG_SCALE)
    assert abs(state.modular_commutator(a, b, c, threads=2) - fast) < tol(LOG_SCALE)
    majorana = MajoranaState.from_free_fermion(state)
    m = np.concatenate([majorana._units(a), majorana._units(b), majorana._units(c)])
    gamma = np.array(majorana._block(m, m))
    msizes = tuple(2 * s for s in sizes)
    assert abs(majorana_modular_commutator(gamma, msizes, CLIP)
               - majorana_modular_commutator(gamma, msizes, CLIP, method="eigh")) < CLIPPED_LOG_J
    assert abs(majorana_modular_commutator(gamma, msizes, CLIP) - fast) < CLIPPED_LOG_J
