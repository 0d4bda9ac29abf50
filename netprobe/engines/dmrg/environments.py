"""Left and right environments of the two-site sweep, updated one site at a time.

``left[i]`` holds sites ``0..i-1`` contracted with the MPO (legs ``(bra, ket, w)``), ``right[i]`` holds
sites ``i..N-1`` (legs ``(ket, w, bra)``); ``left[0]`` and ``right[N]`` are the trivial boundaries. The
two-site problem on sites ``(i, i+1)`` needs ``left[i]`` and ``right[i + 2]``, the one-site problem on
site ``i`` needs ``left[i]`` and ``right[i + 1]``.
"""

from __future__ import annotations

from netprobe.engines.mps import (MPS, BlockMPO, left_boundary, left_environment_step, right_boundary,
                          right_environment_step)

__all__ = ["Environments"]


class Environments:
    """Cached environments of one state and one MPO.

    Parameters
    ----------
    state : MPS
        Orthogonality centre at site 0 (all other sites right-orthonormal).
    mpo : BlockMPO
    """

    def __init__(self, state: MPS, mpo: BlockMPO):
        n = state.num_sites
        self.mpo = mpo
        self.left = [None] * (n + 1)
        self.right = [None] * (n + 1)
        self.left[0] = left_boundary(state, mpo)
        self.right[n] = right_boundary(state, mpo)
        for i in range(n - 1, 0, -1):
            self.update_right(i, state.tensors[i])

    def update_left(self, i: int, tensor) -> None:
        """Set ``left[i + 1]`` from ``left[i]`` and the left-orthonormal tensor of site ``i``."""
        self.left[i + 1] = left_environment_step(self.left[i], tensor, self.mpo.tensors[i])

    def update_right(self, i: int, tensor) -> None:
        """Set ``right[i]`` from ``right[i + 1]`` and the right-orthonormal tensor of site ``i``."""
        self.right[i] = right_environment_step(self.right[i + 1], tensor, self.mpo.tensors[i])
