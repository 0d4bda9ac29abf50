"""The dense density-matrix zipper: the reference route, and the one for fermionic MPS whose charges do
not fix the parity of a site.

Bring the orthogonality centre into ``[min S, max S]`` and contract the span from ``max S`` down to
``min S`` with bra and ket; on each traced site ``k`` the transfer uses ``F_k = (-1)^n_k`` where the
combined ket + bra parity of the open legs to the right of ``k`` is odd. Peak memory about
``chi^2 d^(2m)`` entries.
"""

from __future__ import annotations

import numpy as np

from netprobe.errors import SectorError
from netprobe.rdm.common import _PARITY_TOL, _config_parity
from netprobe.rdm.tables import _centred_copy

__all__ = ["zipper_estimate", "zipper_rho", "check_mps_parity"]


def zipper_estimate(state, sites: tuple[int, ...]) -> float:
    d = state.basis.dim
    item = np.dtype(state.dtype).itemsize
    lo, hi = sites[0], sites[-1]
    peak, opened = 0.0, 0
    for k in range(hi, lo - 1, -1):
        opened += k in sites
        chi = state.tensors[k].legs[0].dim
        chi_r = state.tensors[k].legs[2].dim
        big = max(chi, chi_r)
        # input, output and temporaries of one transfer (the fermion case splits E into two parities)
        peak = max(peak, 4.0 * big * big * float(d) ** (2 * opened) * d)
    return peak * item


def _dense_site(state, k: int) -> np.ndarray:
    blocked = state.tensors[k].to_dense()
    a = np.zeros_like(blocked)
    a[:, state.basis.order, :] = blocked
    return a


def zipper_rho(state, sites: tuple[int, ...]) -> np.ndarray:
    space = state.basis.space
    parity = np.asarray(space.parity, dtype=np.int8)
    fsign = 1.0 - 2.0 * parity
    lo, hi = sites[0], sites[-1]
    st = _centred_copy(state, lo, hi)
    a = _dense_site(st, hi)
    env = np.tensordot(a, a.conj(), axes=([2], [2]))  # (a, s, a*, s*)
    env = env.transpose(0, 2, 1, 3)
    opened = 1
    for k in range(hi - 1, lo - 1, -1):
        a = _dense_site(st, k)
        if k in sites:
            t = np.tensordot(a, env, axes=([2], [0]))  # (a', s, a*, O, O*)
            t = np.tensordot(t, a.conj(), axes=([2], [2]))  # (a', s, O, O*, a'*, s*)
            chi = a.shape[0]
            env = t.transpose(0, 4, 1, 2, 5, 3).reshape(chi, chi, a.shape[1] * env.shape[2], -1)
            opened += 1
            continue
        if space.fermionic:
            par = _config_parity(space.parity, opened)
            odd = (par[:, None] ^ par[None, :]).astype(bool)
            env_odd = np.where(odd, env, 0)
            env = _transfer(a, a, env - env_odd) + _transfer(a * fsign[None, :, None], a, env_odd)
        else:
            env = _transfer(a, a, env)
    rho = np.einsum("aaij->ij", env)
    return rho / np.trace(rho).real


def _transfer(ket: np.ndarray, bra: np.ndarray, env: np.ndarray) -> np.ndarray:
    """``E'[a', a'*, O, O*] = sum ket[a', s, a] E[a, a*, O, O*] conj(bra[a'*, s, a*])``."""
    t = np.tensordot(ket, env, axes=([2], [0]))  # (a', s, a*, O, O*)
    t = np.tensordot(t, bra.conj(), axes=([1, 2], [1, 2]))  # (a', O, O*, a'*)
    return t.transpose(0, 3, 1, 2)


def check_mps_parity(state, where: str) -> None:
    """Refuse a fermionic MPS of mixed parity (its fermionic reduced matrix is not defined)."""
    fsign = 1.0 - 2.0 * np.asarray(state.basis.space.parity)
    env = np.ones((1, 1))
    for k in range(state.num_sites):
        a = _dense_site(state, k)
        t = np.tensordot(env, a * fsign[None, :, None], axes=([1], [0]))  # (a*, s, b)
        env = np.tensordot(a.conj(), t, axes=([0, 1], [0, 1]))
    norm2 = float(np.real(_plain_norm2(state)))
    value = float(np.real(env[0, 0])) / norm2
    if 1.0 - abs(value) > _PARITY_TOL:
        raise SectorError(
            f"{where}: the MPS mixes fermion parities (<(-1)^N> = {value:.6f}); a fermionic reduced density "
            "matrix needs a state of definite parity: conserved N, or project the state"
        )


def _plain_norm2(state):
    env = np.ones((1, 1))
    for k in range(state.num_sites):
        a = _dense_site(state, k)
        env = np.tensordot(a.conj(), np.tensordot(env, a, axes=([1], [0])), axes=([0, 1], [0, 1]))
    return env[0, 0]

