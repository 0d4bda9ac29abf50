"""The charged two-site matvec as large matrix products on contiguous slabs, planned once per bond.

The general route of :class:`~netprobe.engines.dmrg.effective.PairOperator` makes four block
contractions, each of which fuses its operands into sector matrices; three of those fusions are
transposed copies of intermediates with ``chi^2 D_w d^2`` entries, and they cost about as much time
as the matrix products. This module orders the same sum so that each step writes where the next
one reads:

1. ``X[(w, s1, s2), a*, b] = sum_a L[a*, a, w] theta[a, s1, s2, b]``: for every pair of outer
   sectors ``(A, B)`` of the result, ``X_AB`` is one array of shape ``(P, dim A, dim B)``, the
   channel-and-physical index ``p = (w, s1, s2)`` outermost. Each product ``L^T[(w, a*), a] @
   theta[a, b]`` (``L`` regrouped once per bond) writes straight into a contiguous slab of ``X_AB``.
2. ``Y_AB[a*] = M_AB X_AB[:, a*, :]``: the two MPO tensors joined into one matrix ``M[(s1', s2', v),
   (w, s1, s2)]`` (``D_w^2 d^4`` entries), cut once per bond to the rows and columns of the pair;
   one batched product over ``a*`` whose result ``Y_AB`` has the legs ``(a*, p', b)``.
3. ``out[a*, b*] = sum Y_AB[a*, (v, b)] R[(v, b), b*]``: for every output block and every pair
   ``(B, V)`` that reaches it, ``Y_AB[:, rows of V, :]`` is a strided matrix ``(dim A, dim V dim B)``
   used in place, multiplied by ``R`` regrouped as ``[(v, b), b*]`` (once per bond), and summed
   straight into the output vector (one addition of a ``dim A x dim B*`` block per further pair).

No intermediate is copied or transposed. The sum is the same as the block contractions' up to the
order of additions (round-off). Everything that depends only on the bond (index plans, regrouped
``L`` and ``R`` blocks, joined MPO blocks) is built when the plan is made, i.e. once per position
of the sweep. The intermediates live in one scratch array per thread, as large as the largest
bond's ``X`` and ``Y`` together (about ``2 chi^2 D_w d^2`` entries over the charge sectors), kept
between matvecs and bonds; :func:`release_scratch` frees it.
"""

from __future__ import annotations

import functools
import threading
from collections import defaultdict

import numpy as np

from netprobe.tensor import BlockLayout, BlockTensor, matmul_tally

__all__ = ["SectorPairPlan", "plan_sector_matvec", "release_scratch"]

# Scratch space of the intermediates, one per thread, kept from one matvec and one bond to the next:
# fresh pages for the ~10^7 entries of a product's intermediates cost as much as a step of the product.
# Nothing in it outlives a matvec call, so operators of one thread can share it.
_SCRATCH = threading.local()


def _scratch(count: int, dtype) -> np.ndarray:
    """A flat array of at least ``count`` entries of ``dtype`` from this thread's scratch space."""
    dtype = np.dtype(dtype)
    nbytes = count * dtype.itemsize
    buf = getattr(_SCRATCH, "buffer", None)
    if buf is None or buf.nbytes < nbytes:
        buf = np.empty(nbytes, np.uint8)
        _SCRATCH.buffer = buf
    return buf[:nbytes].view(dtype)


def release_scratch() -> None:
    """Free this thread's scratch space (it is allocated again by the next matvec)."""
    _SCRATCH.buffer = None


def _offsets(leg) -> np.ndarray:
    return np.concatenate(([0], np.cumsum(np.asarray(leg.dims, np.int64))))


class SectorPairPlan:
    """Precomputed products of one bond's two-site matvec on U(1)/Z_n-charged blocks.

    Build with :func:`plan_sector_matvec` (which returns None where the plan does not apply).

    Attributes
    ----------
    size : int
        Length of the flat vectors (the layout's size).
    dtype : numpy.dtype
        Result type of the operator's tensors.
    """

    def __init__(self, left: BlockTensor, w1: BlockTensor, w2: BlockTensor, right: BlockTensor,
                 layout: BlockLayout):
        self.size = layout.size
        self.dtype = np.result_type(layout.dtype, left.dtype, w1.dtype, w2.dtype, right.dtype)
        a_leg, s1_leg, s2_leg, b_leg = layout.legs
        slots = {key: (start, stop, shape) for key, start, stop, shape in layout._slots}
        self._slots = slots
        d1s, d2s = s1_leg.dims.tolist(), s2_leg.dims.tolist()

        # L regrouped as [(w, a*), a] per block, grouped by the ket sector a
        by_ket = defaultdict(list)
        for (sa, sk, sw), blk in left.blocks.items():
            dim_a, dim_k, dim_w = blk.shape
            lt = np.ascontiguousarray(blk.transpose(2, 0, 1)).reshape(dim_w * dim_a, dim_k)
            by_ket[sk].append((sa, sw, dim_w, lt))

        # step 1: destinations (A, B) <- (W, s1, s2) from theta block (a, s1, s2, B) and L block (A, a, W)
        sources = defaultdict(lambda: defaultdict(list))
        for key in layout.keys:
            sk, t1, t2, sb = key
            for sa, sw, dim_w, lt in by_ket.get(sk, ()):
                sources[(sa, sb)][(sw, t1, t2)].append((key, dim_w, lt))

        # the two MPO tensors joined: M[(s1', s2', v), (w, s1, s2)] in the dense blocked basis
        w1d, w2d = w1.to_dense(), w2.to_dense()
        nw, n1, _, nu = w1d.shape
        _, n2, _, nv = w2d.shape
        joined = np.einsum("wabu,ucdv->acvwbd", w1d, w2d).reshape(n1 * n2 * nv, nw * n1 * n2)
        w_off, v_off = _offsets(w1.legs[0]), _offsets(w2.legs[3])
        s1_off, s2_off = _offsets(s1_leg), _offsets(s2_leg)
        wdims, vdims = w1.legs[0].dims.tolist(), w2.legs[3].dims.tolist()

        # R blocks by the ket sector b
        r_by_ket = defaultdict(list)
        for (sb, sv, sbo), blk in right.blocks.items():
            r_by_ket[sb].append((sv, sbo, blk))

        @functools.lru_cache(maxsize=None)
        def col_index(sw, t1, t2):
            # order (i1, i2, w) inside the combination
            w = np.arange(wdims[sw])
            i1, i2 = np.arange(d1s[t1]), np.arange(d2s[t2])
            g = ((w_off[sw] + w[None, None, :]) * n1 + s1_off[t1] + i1[:, None, None]) * n2 \
                + s2_off[t2] + i2[None, :, None]
            return g.reshape(-1)

        @functools.lru_cache(maxsize=None)
        def row_index(t1, t2, sv):
            v = np.arange(vdims[sv])
            j1, j2 = np.arange(d1s[t1]), np.arange(d2s[t2])
            g = ((s1_off[t1] + j1[:, None, None]) * n2 + s2_off[t2] + j2[None, :, None]) * nv \
                + v_off[sv] + v[None, None, :]
            return g.reshape(-1)

        out_keys = set(layout.keys)
        cuts = {}
        self._pairs = []
        tasks = []
        pieces = defaultdict(list)  # output key -> [(pair number, row start, dim v, dim B, R block)]
        for (sa, sb), combos in sources.items():
            dim_a, dim_b = int(a_leg.dims[sa]), int(b_leg.dims[sb])
            cols = [(c, col_index(*c)) for c in sorted(combos)]
            col_all = np.concatenate([g for _, g in cols])
            rows = []
            for sv, sbo, rblk in r_by_ket.get(sb, ()):
                for t1 in range(len(d1s)):
                    for t2 in range(len(d2s)):
                        if (sa, t1, t2, sbo) in out_keys:
                            rows.append(((t1, t2, sv), sbo, rblk, row_index(t1, t2, sv)))
            if not rows:
                continue
            # joined MPO cut to this pair; combinations that are zero throughout are dropped (the cut
            # depends only on the combinations, shared by many pairs)
            ident = (tuple(r[0] for r in rows), tuple(c for c, _ in cols))
            cut = cuts.get(ident)
            if cut is None:
                mat = joined[np.concatenate([r[3] for r in rows])[:, None], col_all[None, :]]
                nz_rows = np.add.reduceat(np.any(mat != 0, axis=1), np.cumsum([0] + [len(r[3]) for r in rows])[:-1])
                nz_cols = np.add.reduceat(np.any(mat != 0, axis=0), np.cumsum([0] + [len(g) for _, g in cols])[:-1])
                keep_r = [i for i, k in enumerate(nz_rows.tolist()) if k]
                keep_c = [i for i, k in enumerate(nz_cols.tolist()) if k]
                if keep_r and keep_c:
                    mat = np.ascontiguousarray(joined[np.concatenate([rows[i][3] for i in keep_r])[:, None],
                                                      np.concatenate([cols[i][1] for i in keep_c])[None, :]])
                cut = cuts[ident] = (keep_r, keep_c, mat)
            keep_r, keep_c, mat = cut
            if not keep_r or not keep_c:
                continue
            keep_rows = [(rows[i], None, len(rows[i][3])) for i in keep_r]
            keep_cols = [(cols[i][0], None, len(cols[i][1])) for i in keep_c]
            number = len(self._pairs)
            off = 0
            for (sw, t1, t2), _, n in keep_cols:
                dim_w = wdims[sw]
                for i1 in range(d1s[t1]):
                    for i2 in range(d2s[t2]):
                        for first, (key, dw, lt) in enumerate(combos[(sw, t1, t2)]):
                            tasks.append((first > 0, id(lt), number, off, off + dw, lt, slots[key], i1, i2))
                        off += dim_w
            self._pairs.append((dim_a, dim_b, off, mat))
            row = 0
            for ((t1, t2, sv), sbo, rblk, _), _, n in keep_rows:
                dim_v = vdims[sv]
                for j1 in range(d1s[t1]):
                    for j2 in range(d2s[t2]):
                        pieces[((sa, t1, t2, sbo), j1, j2)].append((number, row, dim_v, dim_b, rblk))
                        row += dim_v

        # step 1 grouped by L block (each read once while it is in cache), additions after the first writes
        tasks.sort(key=lambda t: t[:2])
        self._tasks = tuple(t[2:] + (t[0],) for t in tasks)
        # step 3: per output block (and physical index pair inside it), the pieces and R regrouped; blocks
        # of one outgoing sector b* in turn (they share the R blocks)
        self._outputs = []
        regrouped = {}
        for (key, j1, j2), plist in sorted(pieces.items(), key=lambda item: (item[0][0][3], item[0])):
            ks = []
            for number, row, dim_v, dim_b, rblk in plist:
                r = regrouped.get(id(rblk))
                if r is None:
                    r = np.ascontiguousarray(rblk.transpose(1, 0, 2)).reshape(dim_v * dim_b, rblk.shape[2])
                    regrouped[id(rblk)] = r
                ks.append((number, row, dim_v, r))
            self._outputs.append((key, j1, j2, tuple(ks)))
        # blocks that no product writes whole (no pieces, or physical sectors wider than 1) start at zero
        whole = {o[0] for o in self._outputs}
        self._flops = 0
        self._products = len(self._tasks) + sum(len(o[3]) for o in self._outputs)
        factor = 8 if self.dtype.kind == "c" else 2  # the tally's convention (MatmulTally)
        for number, lo, hi, lt, slot, i1, i2, add in self._tasks:
            self._flops += factor * lt.shape[0] * lt.shape[1] * self._pairs[number][1]
        self._x_sizes, self._y_sizes = [], []
        for dim_a, dim_b, p, mat in self._pairs:
            self._flops += factor * mat.shape[0] * p * dim_b * dim_a
            self._products += dim_a
            self._x_sizes.append(p * dim_a * dim_b)
            self._y_sizes.append(dim_a * mat.shape[0] * dim_b)
        for key, j1, j2, ks in self._outputs:
            for number, row, dim_v, r in ks:
                self._flops += factor * slots[key][2][0] * r.shape[0] * r.shape[1]
        self._zero = tuple((start, stop) for key, (start, stop, shape) in slots.items()
                           if key not in whole or shape[1] * shape[2] != 1)

    def matvec(self, x: np.ndarray) -> np.ndarray:
        """``H_eff x`` for a flat vector in the layout's order."""
        dtype = np.result_type(self.dtype, x.dtype)
        slots = self._slots
        total = sum(self._x_sizes) + sum(self._y_sizes)
        arena = _scratch(total, dtype)
        buffers, at = [], 0
        for (dim_a, dim_b, p, mat), nx, ny in zip(self._pairs, self._x_sizes, self._y_sizes):
            buffers.append((arena[at:at + nx].reshape(p, dim_a, dim_b),
                            arena[at + nx:at + nx + ny].reshape(dim_a, mat.shape[0], dim_b)))
            at += nx + ny
        for number, lo, hi, lt, (start, stop, shape), i1, i2, add in self._tasks:
            xab = buffers[number][0]
            th = x[start:stop].reshape(shape)[:, i1, i2, :]
            dest = xab[lo:hi].reshape(lt.shape[0], xab.shape[2])
            if add:
                dest += lt @ th
            else:
                np.matmul(lt, th, out=dest)
        ys = []
        for (dim_a, dim_b, p, mat), (xab, y) in zip(self._pairs, buffers):
            # one product per a*, written as (a*, p', b): the slabs of step 3 are then plain strided matrices
            ys.append(np.matmul(mat, xab.transpose(1, 0, 2), out=y))
        out = np.empty(self.size, dtype)
        for start, stop in self._zero:
            out[start:stop] = 0
        for key, j1, j2, ks in self._outputs:
            start, stop, shape = slots[key]
            dim_a = shape[0]
            block = out[start:stop].reshape(shape)[:, j1, j2, :]
            first = shape[1] * shape[2] == 1
            for number, row, dim_v, r in ks:
                y = ys[number][:, row:row + dim_v, :].reshape(dim_a, r.shape[0])
                if first:
                    np.matmul(y, r, out=block)
                    first = False
                else:
                    block += y @ r
        # the products made, counted as MatmulTally.record would count them one by one
        tally = matmul_tally()
        tally.products += self._products
        tally.flops += self._flops * (4 if dtype.kind == "c" and self.dtype.kind != "c" else 1)
        return out


def plan_sector_matvec(left: BlockTensor, w1: BlockTensor, w2: BlockTensor, right: BlockTensor,
                       layout: BlockLayout) -> SectorPairPlan | None:
    """The slab plan of a two-site operator, or None where it does not apply.

    It applies when ``theta`` has four legs, the operator maps the layout onto itself (output legs
    ``(left[0], w1[1], w2[1], right[2])`` equal to the layout's) and the environments and MPO
    tensors carry no charge of their own.
    """
    if len(layout.legs) != 4:
        return None
    if (left.legs[0], w1.legs[1], w2.legs[1], right.legs[2]) != tuple(layout.legs):
        return None
    if any(np.any(t.charge) for t in (left, w1, w2, right)):
        return None
    return SectorPairPlan(left, w1, w2, right, layout)

