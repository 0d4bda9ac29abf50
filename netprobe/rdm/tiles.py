"""Hermitian halves of the blocks of rho that the split route joins (:mod:`netprobe.rdm.split`).

rho is Hermitian, so the join forms only what lies on or above the diagonal of each charge block: the
off-diagonal sub-blocks of sector pairs above the diagonal, and in a diagonal sub-block (the same left
and right open sectors on both sides) only its tiles ``(i, j)``, ``i <= j``, of left open states. The
tile ``(i, j)`` holds ``rho[(i, a), (j, b)]`` for all right open states ``a, b``; for ``i = j`` it is
whole. The helpers here pick the rows of those left index pairs, add a product over them into place,
and complete the block from its upper half at the end.
"""

from __future__ import annotations

import numpy as np

__all__ = ["upper_pairs", "add_upper_tiles", "fill_hermitian"]


def upper_pairs(n: int) -> np.ndarray:
    """Row positions ``i n + j`` of the index pairs ``i <= j`` of an ``n x n`` grid, ``i`` slowest."""
    i, j = np.triu_indices(n)
    return i * n + j


def add_upper_tiles(target: np.ndarray, part: np.ndarray, r0: int, c0: int, xl: int, xr: int, yr: int,
                     pos) -> None:
    """Add a diagonal sub-block's product over its left pairs ``i <= j`` (rows of ``part``) into ``target``.

    The rows of ``part`` are the pairs ``(i, j)``, ``i <= j``, in the order of :func:`upper_pairs`; its
    columns ``(O_R, O_R*)``. Tile ``(i, j)`` of the sub-block (rows ``i xr ..``, columns ``j yr ..``)
    receives row ``(i, j)``; for each ``i`` the tiles ``j >= i`` are one strided view. ``pos`` places the
    columns of a right piece's bra sector, as in :func:`netprobe.rdm.split._join_into`.
    """
    ny = yr if pos is None else len(pos)
    start = 0
    for i in range(xl):
        count = xl - i
        rows = part[start:start + count].reshape(count, xr, ny).transpose(1, 0, 2)
        start += count
        if pos is None:
            target[r0 + i * xr:r0 + (i + 1) * xr, c0 + i * yr:c0 + xl * yr].reshape(xr, count, yr)[...] += rows
        else:
            cols = (c0 + np.arange(i, xl)[:, None] * yr + pos[None, :]).ravel()
            target[r0 + i * xr:r0 + (i + 1) * xr, cols] += rows.reshape(xr, count * ny)


def fill_hermitian(mat: np.ndarray, spans: list) -> None:
    """Complete a block of rho from what :func:`netprobe.rdm.split._join_into` wrote: the sub-blocks above the diagonal
    give those below, and in each diagonal sub-block the tiles ``i <= j`` give the tiles ``i > j``.

    ``spans`` lists ``(offset, xl, xr)`` of the block's sector pairs in order (``xl * xr`` rows each).
    """
    for k, (r0, xl, xr) in enumerate(spans):
        rn = xl * xr
        for c0, yl, yr in spans[k + 1:]:
            cn = yl * yr
            mat[c0:c0 + cn, r0:r0 + rn] = mat[r0:r0 + rn, c0:c0 + cn].conj().T
        tiles = mat[r0:r0 + rn, r0:r0 + rn].reshape(xl, xr, xl, xr)
        for i in range(1, xl):  # tile (i, j < i) = tile (j, i)^dagger
            tiles[i, :, :i, :] = tiles[:i, :, i, :].transpose(2, 0, 1).conj()
