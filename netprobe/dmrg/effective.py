"""The two-site effective Hamiltonian as an operator that only knows how to apply itself.

For the bond between sites ``i`` and ``i + 1`` the wavefunction is ``theta[a, s1, s2, b]`` and

    (H theta)[a*, s1', s2', b*] = sum L[a*, a, w] W1[w, s1', s1, u] W2[u, s2', s2, v] R[b, v, b*]
                                  theta[a, s1, s2, b],

contracted one tensor at a time (cost about ``chi^3 D d^2`` per product); the matrix is never formed.
The same partial products give the perturbation terms of the density-matrix noise.
:class:`OneSiteHamiltonian` is the single-site analogue (cost about ``chi^3 D d``).
"""

from __future__ import annotations

import numpy as np

from netprobe.tensor import BlockLayout, BlockTensor, contract

__all__ = ["TwoSiteHamiltonian", "OneSiteHamiltonian"]


class TwoSiteHamiltonian:
    """``H_eff`` on the two-site space of one bond.

    Parameters
    ----------
    left : BlockTensor
        Left environment, legs ``(bra, ket, w)``.
    w1, w2 : BlockTensor
        MPO tensors of the two sites, legs ``(w_left, s_out, s_in, w_right)``.
    right : BlockTensor
        Right environment, legs ``(ket, w, bra)``.
    layout : BlockLayout
        Layout of ``theta`` for the flat-vector interface.

    Attributes
    ----------
    size : int
        Dimension of the two-site space.
    dtype : numpy.dtype
    """

    def __init__(self, left: BlockTensor, w1: BlockTensor, w2: BlockTensor, right: BlockTensor,
                 layout: BlockLayout):
        self.left, self.w1, self.w2, self.right = left, w1, w2, right
        self.layout = layout
        self.size = layout.size
        self.dtype = np.result_type(layout.dtype, left.dtype, w1.dtype, w2.dtype, right.dtype)

    def apply(self, theta: BlockTensor) -> BlockTensor:
        """``H_eff theta`` with the legs of ``theta``."""
        x = contract(self.left, theta, ([1], [0]))  # (a*, w, s1, s2, b)
        x = contract(x, self.w1, ([1, 2], [0, 2]))  # (a*, s2, b, s1', u)
        x = contract(x, self.w2, ([4, 1], [0, 2]))  # (a*, b, s1', s2', v)
        return contract(x, self.right, ([1, 4], [0, 1]))  # (a*, s1', s2', b*)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        """``H_eff`` on a flat vector of the layout."""
        return self.layout.pack(self.apply(self.layout.unpack(x)))

    def left_expansion(self, theta: BlockTensor) -> BlockTensor:
        """``L W1 theta`` with legs ``(a*, s2, b, s1', u)``: the left block's image under the Hamiltonian."""
        x = contract(self.left, theta, ([1], [0]))
        return contract(x, self.w1, ([1, 2], [0, 2]))

    def right_expansion(self, theta: BlockTensor) -> BlockTensor:
        """``theta W2 R`` with legs ``(a, s1, b*, u, s2')``: the right block's image under the Hamiltonian."""
        x = contract(theta, self.right, ([3], [0]))  # (a, s1, s2, v, b*)
        return contract(x, self.w2, ([2, 3], [2, 3]))  # (a, s1, b*, u, s2')


class OneSiteHamiltonian:
    """``H_eff`` on the tensor of one site.

    ``(H A)[a*, s', b*] = sum L[a*, a, w] W[w, s', s, v] R[b, v, b*] A[a, s, b]``.

    Parameters
    ----------
    left : BlockTensor
        Left environment, legs ``(bra, ket, w)``.
    w : BlockTensor
        MPO tensor, legs ``(w_left, s_out, s_in, w_right)``.
    right : BlockTensor
        Right environment, legs ``(ket, w, bra)``.
    layout : BlockLayout
        Layout of the site tensor.
    """

    def __init__(self, left: BlockTensor, w: BlockTensor, right: BlockTensor, layout: BlockLayout):
        self.left, self.w, self.right = left, w, right
        self.layout = layout
        self.size = layout.size
        self.dtype = np.result_type(layout.dtype, left.dtype, w.dtype, right.dtype)

    def apply(self, a: BlockTensor) -> BlockTensor:
        """``H_eff A`` with the legs of ``A``."""
        x = contract(self.left, a, ([1], [0]))  # (a*, w, s, b)
        x = contract(x, self.w, ([1, 2], [0, 2]))  # (a*, b, s', v)
        return contract(x, self.right, ([1, 3], [0, 1]))  # (a*, s', b*)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        """``H_eff`` on a flat vector of the layout."""
        return self.layout.pack(self.apply(self.layout.unpack(x)))
