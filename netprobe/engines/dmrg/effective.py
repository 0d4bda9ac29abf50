"""The two-site effective Hamiltonian as an operator that only knows how to apply itself.

For the bond between sites ``i`` and ``i + 1`` the wavefunction is ``theta[a, s1, s2, b]`` and

    (H theta)[a*, s1', s2', b*] = sum L[a*, a, w] W1[w, s1', s1, u] W2[u, s2', s2, v] R[b, v, b*]
                                  theta[a, s1, s2, b],

contracted one tensor at a time (cost about ``chi^3 D d^2`` per product); the matrix is never formed.
Without charges (one block per tensor) the three products run on dense matrices; with charges on
the slabs planned by :mod:`netprobe.engines.dmrg.sector_matvec` (once per bond, no transposed copies of
the large intermediates); the block contractions remain the general route.
The same partial products give the perturbation terms of the density-matrix noise.
:class:`SiteOperator` is the single-site analogue (cost about ``chi^3 D d``).
"""

from __future__ import annotations

import numpy as np

from netprobe.engines.dmrg.sector_matvec import plan_sector_matvec
from netprobe.tensor import BlockLayout, BlockTensor, contract, matmul_tally

__all__ = ["PairOperator", "SiteOperator"]


class PairOperator:
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

    def _dense_factors(self):
        """Matrices of the one-block (no charge) fast path, built once per operator; None otherwise.

        ``L`` as ``[(a*, w), a]``, the two MPO tensors joined into ``M^T[(s1', s2', v), (w, s1, s2)]``
        (``D_w^2 d^4`` entries, tiny) and ``R`` as ``[(v, b), b*]``. Then ``L theta`` has the legs
        ``(a*, w, s1, s2, b)`` with ``(w, s1, s2)`` contiguous, so the MPO step is one batched product
        over ``a*`` and the last step contracts the trailing ``(v, b)``: no large transposes.
        """
        if not hasattr(self, "_dense"):
            tensors = (self.left, self.w1, self.w2, self.right)
            self._dense = None
            if all(len(t.blocks) == 1 for t in tensors) and len(self.layout.legs) == 4 and all(
                    leg.n_sectors == 1 for leg in self.layout.legs):
                (left,), (w1,), (w2,), (right,) = (tuple(t.blocks.values()) for t in tensors)
                if left.shape == tuple(leg.dim for leg in self.left.legs):
                    dw, d1, d2 = left.shape[2], w1.shape[1], w2.shape[1]
                    chi_l, chi_r = left.shape[0], right.shape[2]
                    lmat = np.ascontiguousarray(left.transpose(0, 2, 1)).reshape(chi_l * dw, left.shape[1])
                    w12 = np.einsum("wabu,ucdv->acvwbd", w1, w2)  # (s1', s2', v, w, s1, s2)
                    mt = np.ascontiguousarray(w12.reshape(d1 * d2 * w2.shape[3], dw * w1.shape[2] * w2.shape[2]))
                    rmat = np.ascontiguousarray(right.transpose(1, 0, 2)).reshape(-1, chi_r)
                    self._dense = (lmat, mt, rmat, (chi_l, dw, d1, d2, w2.shape[3], chi_r))
        return self._dense

    def _apply_dense(self, theta: BlockTensor, factors) -> BlockTensor:
        lmat, mt, rmat, (chi_l, dw, d1, d2, dv, chi_r) = factors
        (key, blk), = theta.blocks.items()
        a, s1, s2, b = blk.shape
        x = lmat @ blk.reshape(a, s1 * s2 * b)  # (a*, w, s1, s2, b)
        y = np.matmul(mt, x.reshape(chi_l, dw * s1 * s2, b))  # (a*, s1', s2', v, b)
        out = y.reshape(chi_l * d1 * d2, dv * b) @ rmat  # (a*, s1', s2', b*)
        tally = matmul_tally()
        is_complex = out.dtype.kind == "c"
        tally.record(lmat.shape[0], lmat.shape[1], s1 * s2 * b, is_complex)
        tally.record(mt.shape[0], mt.shape[1], b, is_complex, count=chi_l)  # the batched product, one per a*
        tally.record(chi_l * d1 * d2, rmat.shape[0], chi_r, is_complex)
        legs = (self.left.legs[0], self.w1.legs[1], self.w2.legs[1], self.right.legs[2])
        return BlockTensor._new(legs, theta._qkey, theta.rule, {key: out.reshape(chi_l, d1, d2, chi_r)},
                                out.dtype)

    def _slab_plan(self):
        """The charged slab plan (:mod:`~netprobe.engines.dmrg.sector_matvec`), built once per operator;
        None where the one-block path or the general route applies."""
        if not hasattr(self, "_slabs"):
            self._slabs = None
            if self._dense_factors() is None:
                self._slabs = plan_sector_matvec(self.left, self.w1, self.w2, self.right, self.layout)
        return self._slabs

    def apply(self, theta: BlockTensor) -> BlockTensor:
        """``H_eff theta`` with the legs of ``theta``."""
        factors = self._dense_factors()
        if factors is not None and len(theta.blocks) == 1:
            return self._apply_dense(theta, factors)
        plan = self._slab_plan()
        if plan is not None and theta.legs == self.layout.legs and theta._qkey == self.layout._qkey:
            return self.layout.unpack(plan.matvec(self.layout.pack(theta)))
        x = contract(self.left, theta, ([1], [0]))  # (a*, w, s1, s2, b)
        x = contract(x, self.w1, ([1, 2], [0, 2]))  # (a*, s2, b, s1', u)
        x = contract(x, self.w2, ([4, 1], [0, 2]))  # (a*, b, s1', s2', v)
        return contract(x, self.right, ([1, 4], [0, 1]))  # (a*, s1', s2', b*)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        """``H_eff`` on a flat vector of the layout."""
        plan = self._slab_plan()
        if plan is not None:
            return plan.matvec(np.asarray(x))
        return self.layout.pack(self.apply(self.layout.unpack(x)))

    def left_expansion(self, theta: BlockTensor) -> BlockTensor:
        """``L W1 theta`` with legs ``(a*, s2, b, s1', u)``: the left block's image under the Hamiltonian."""
        x = contract(self.left, theta, ([1], [0]))
        return contract(x, self.w1, ([1, 2], [0, 2]))

    def right_expansion(self, theta: BlockTensor) -> BlockTensor:
        """``theta W2 R`` with legs ``(a, s1, b*, u, s2')``: the right block's image under the Hamiltonian."""
        x = contract(theta, self.right, ([3], [0]))  # (a, s1, s2, v, b*)
        return contract(x, self.w2, ([2, 3], [2, 3]))  # (a, s1, b*, u, s2')


class SiteOperator:
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

    def left_expansion(self, a: BlockTensor) -> BlockTensor:
        """``L W A`` with legs ``(a*, b, s', w')``: the site's image under the terms that cross its right bond."""
        x = contract(self.left, a, ([1], [0]))  # (a*, w, s, b)
        return contract(x, self.w, ([1, 2], [0, 2]))

    def right_expansion(self, a: BlockTensor) -> BlockTensor:
        """``A W R`` with legs ``(a, b*, w, s')``: the site's image under the terms that cross its left bond."""
        x = contract(a, self.right, ([2], [0]))  # (a, s, w', b*)
        return contract(x, self.w, ([1, 2], [2, 3]))
