"""The split route: two double-layer walks that meet at one bond, joined into the charge blocks of rho.

``G[O, b, O*, b*]`` runs from ``min S`` to a split point and the same walk on the mirrored chain from
``max S`` back to the bond after it, each starting from the identity (the state is orthonormal towards
the span from outside); traced sites are summed ket against bra, open sites fused into the open legs,
block by block so that a step holds only its input and output. ``rho = sum_{b, b*} G_L G_R`` goes
straight into the charge blocks of ``rho_S`` (never a dense ``d**m x d**m`` matrix), from which the
square root comes by one eigendecomposition per block. The split point follows the first half of the
open sites and the traced sites after them, so the largest steps run while nothing else is held.

Fermions (design notes, section 6): on a traced site ``k`` the transfer uses ``F_k = (-1)^n_k`` on the
ket wherever the combined ket + bra parity of the open legs on one side of ``k`` is odd. Each walk
knows the open legs it has already fused, on its own side of ``k``: the left walk those left of
``k``, the mirrored right walk those right of ``k``. For a state of definite parity the two sides
give the same flag on every matrix element of ``rho_S`` (ket and bra parity of all of S agree), so
both walks apply the rule with their own side. The flag is one bit per sector of the open leg, read
off its charges, so the strings cost nothing; the route applies where the charges fix the parity of
every open sector (:func:`split_applies`).

Memory (:func:`split_estimate`, exact sector counts): the walks hold at most both layers of a step;
the last step of each walk is never done whole: the join runs one sector ``j`` of the bra bond ``b*``
at the split at a time, doing both last steps for that sector only (each pair of an input block and a
bra tensor block belongs to exactly one sector, so nothing is computed twice), and holds the two
walks' inputs to their last steps, the two pieces of sector ``j``, the blocks of rho
(``sum_Q n_Q**2`` entries, ``n_Q`` the configurations of S of charge Q) and a few copies of the
largest product of two layer blocks; the square root then holds the blocks and one
eigendecomposition. Layers are kept as ``G[O, O*, b, b*]`` so that every step and the join are plain
matrix products.

Where even that does not fit the budget (two halves of many open sites with traced sites between
them, so that one walk must carry a large layer past them), the right walk runs in pieces: each
piece fixes the bra's physical sector on the walk's first open sites, so its bra leg ``O*`` is a
part of the configurations and the pieces are disjoint through every step (nothing is computed
twice on the right); each piece is joined on its own into its columns of rho, and only the left
walk's streamed steps are redone per piece. Among such plans that fit, the planner takes the one
with the fewest entries computed in all (split point, pieces, streamed depth).

Threads: with more than one BLAS thread, large walk steps and the join split their work by ket open
sector (each group writes disjoint rows) among that many Python threads with one BLAS thread each;
the products of the walks are small, where a multi-threaded BLAS gains little.
"""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from itertools import product

import numpy as np

from threadpoolctl import threadpool_limits

from netprobe.resources import resolve_budget
from netprobe.rdm.common import BlockedRho, RootBlock, _grading_of, _labels
from netprobe.rdm.root import UngradedParity
from netprobe.rdm.spectra import _blas_threads
from netprobe.rdm.tiles import add_upper_tiles, fill_hermitian, upper_pairs
from netprobe.rdm.tables import (
    WalkMeter, _add, _bond_counts, _centred_copy, _fuse_tables, _pairs_by_charge, _parity_graded, _sector_parity,
)
from netprobe.tensor import BlockTensor, ChargeRule, Leg

__all__ = ["split_applies", "split_estimate", "split_blocks", "block_sizes"]


@dataclass
class _OpenSide:
    """Configuration codes and fermion parity (``None`` if mixed) of each sector of an open leg."""

    codes: list
    parity: list


def _bond_identity(bond: Leg, rule: ChargeRule, dtype) -> BlockTensor:
    """The start of a double-layer walk: ``G[O, O*, b, b*]``, identity on ``b``, one open state of charge 0.

    ``b`` contracts with ``bond``, the left bond of the walk's first tensor.
    """
    zero = np.zeros((1, rule.k), np.int64)
    blocks = {(0, 0, sec, sec): np.eye(int(n), dtype=dtype).reshape(1, 1, int(n), int(n))
              for sec, n in enumerate(bond.dims.tolist())}
    legs = (Leg(zero, [1], 1), Leg(zero, [1], -1), bond.dual(), bond)
    return BlockTensor(legs, None, rule, blocks, dtype=dtype)


def _fused_open_leg(o_leg: Leg, s_leg: Leg, side: _OpenSide, phys: _OpenSide, code_of, rule: ChargeRule,
                    keep=None):
    """Sectors, placements, codes and parities of the open leg after one more site.

    See :func:`_double_layer_step`; a sector whose pairs have different parities gets parity ``None``.
    ``keep`` (physical sector indices, optional) fuses only those sectors of the new site (a bra leg
    restricted to some configurations).
    """
    groups = _pairs_by_charge(o_leg, s_leg, rule)
    place, charges, dims, codes, parity = {}, [], [], [], []
    for q in sorted(groups):
        pairs = [(so, ss) for so, ss in groups[q] if keep is None or ss in keep]
        if not pairs:
            continue
        n = len(charges)
        off, parts, pars = 0, [], set()
        for so, ss in pairs:
            size = int(o_leg.dims[so] * s_leg.dims[ss])
            place[(so, ss)] = (n, off, size)
            off += size
            parts.append(code_of(np.asarray(side.codes[so], np.int64)[:, None],
                                 np.asarray(phys.codes[ss], np.int64)[None, :]).ravel())
            po, ps = side.parity[so], phys.parity[ss]
            pars.add(None if po is None or ps is None else po ^ ps)
        charges.append(q)
        dims.append(off)
        codes.append(np.concatenate(parts))
        parity.append(pars.pop() if len(pars) == 1 else None)
    leg = Leg(np.array(charges, np.int64).reshape(len(charges), rule.k), np.array(dims, np.int64), o_leg.direction)
    return leg, place, _OpenSide(codes, parity)


def _double_layer_step(g: BlockTensor, a: BlockTensor, open_site: bool, side: _OpenSide, phys: _OpenSide,
                       code_of, fermionic: bool, bra_sectors=None, bra_side: _OpenSide | None = None, keep=None):
    """``G'[O', O'*, c, c*] = sum A[b, s, c] G[O, O*, b, b*] conj(A[b*, s*, c*])``, one block pair at a time.

    A traced site has ``s* = s`` summed and ``O' = O``; for fermions it carries ``F = (-1)^n`` on the
    ket wherever the open parities of ``O`` and ``O*`` differ (the string rule, read off the sector
    flags). An open site fuses ``(O, s)`` into ``O'`` (``O`` major) with codes
    ``code_of(O codes, s codes)``. The layout ``(O, O*, b, b*)`` makes both contractions plain
    matrix products without copies of the layer: ``G`` read as ``((O, O*, b), b*)`` times the bra,
    then the ket applied as one product per open pair ``(O, O*)`` (a stacked product). Working block
    by block keeps the memory at the input and the output plus one product of blocks.

    ``bra_sectors`` (sector indices of the output bond, optional) restricts the output to the blocks
    whose bra bond ``c*`` lies in them; a mapping ``sector -> (start, stop)`` (or ``None`` for all of
    it) also restricts ``c*`` to a range of states of that sector. The pieces of one layer for
    different sectors or ranges are disjoint, and each (input block, bra tensor columns) pair is used
    by exactly one piece, so a layer built piece by piece costs what it costs whole.

    ``bra_side`` (codes and parities of the bra open leg ``O*``, default ``side``) and ``keep``
    (physical sectors the bra may take on this open site, default all) carry a piece of a layer cut
    by the bra's configuration of some open sites: ``O*`` is then its own leg, a part of ``O``'s
    configurations. Pieces with different bra configurations are disjoint through every later step.
    Returns the layer (or the piece) and the sides of ``O'`` and ``O'*``.
    """
    rule = g.rule
    bra_side = side if bra_side is None else bra_side
    by_bond: dict = {}
    for (b, ss, c), blk in a.blocks.items():
        bmat = blk.reshape(blk.shape[0], -1)
        by_bond.setdefault(b, []).append((ss, c, blk, bmat))
    if open_site:
        o_leg, place, new_side = _fused_open_leg(g.legs[0], a.legs[1], side, phys, code_of, rule)
        if keep is None and bra_side is side:
            ob_leg, place_b, new_bra = o_leg, place, new_side
        else:
            ob_leg, place_b, new_bra = _fused_open_leg(g.legs[1].dual(), a.legs[1], bra_side, phys, code_of, rule,
                                                       keep)
    else:
        o_leg, place, new_side = g.legs[0], None, side
        ob_leg, place_b, new_bra = g.legs[1].dual(), None, bra_side
    legs = (o_leg, ob_leg.dual(), a.legs[2], a.legs[2].dual())
    dtype = np.result_type(g.dtype, a.dtype)
    out: dict = {}
    lock = threading.Lock()

    def run(items):
        for (o, ob, b, bb), blk in items:
            kets = by_bond.get(b, ())
            bras = by_bond.get(bb, ())
            if bra_sectors is not None:
                bras = [_bra_chunk(item, bra_sectors) for item in bras if item[1] in bra_sectors]
            if open_site and keep is not None:
                bras = [item for item in bras if item[0] in keep]
            if not kets or not bras:
                continue
            odd = False
            if fermionic and not open_site:
                po, pob = side.parity[o], bra_side.parity[ob]
                if po is None or pob is None:
                    raise UngradedParity
                odd = bool(po ^ pob)
            x, y, nb, nbb = blk.shape
            flat = blk.reshape(x * y * nb, nbb)
            for sb, cb, kb, kbmat in bras:
                s_dim, n_cb = kb.shape[1], kb.shape[2]
                t = (flat @ kbmat.conj()).reshape(x * y, nb * s_dim, n_cb)  # (O O*, (b, s*), c*)
                for ss, c, ka, kamat in kets:
                    if not open_site:
                        if ss != sb:
                            continue
                        # sum over (b, s): ka read as ((b, s), c)
                        part = np.matmul(kamat.reshape(nb * s_dim, ka.shape[2]).T, t)  # (O O*, c, c*)
                        if odd and phys.parity[ss]:
                            part = np.negative(part, out=part)
                        key = (o, ob, c, cb)
                        part = part.reshape(x, y, ka.shape[2], n_cb)
                        target = out.get(key)
                        if target is None:
                            out[key] = part
                        else:
                            target += part
                    else:
                        sd = ka.shape[1]
                        # sum over b: ka read as (b, (s, c)); t read as (O O*, b, (s*, c*))
                        part = np.matmul(kamat.T, t.reshape(x * y, nb, s_dim * n_cb))  # (O O*, (s, c), (s*, c*))
                        n, off, size = place[(o, ss)]
                        nbk, offb, sizeb = place_b[(ob, sb)]
                        key = (n, nbk, c, cb)
                        target = out.get(key)
                        if target is None:
                            with lock:  # another ket sector may be creating the same output block
                                target = out.get(key)
                                if target is None:
                                    shape = (int(o_leg.dims[n]), int(ob_leg.dims[nbk]), ka.shape[2], n_cb)
                                    target = out[key] = np.zeros(shape, dtype)
                        view = target[off:off + size, offb:offb + sizeb]
                        view = view.reshape(x, sd, y, s_dim, ka.shape[2], n_cb)
                        view += part.reshape(x, y, sd, ka.shape[2], s_dim, n_cb).transpose(0, 2, 1, 4, 3, 5)
                    del part
                del t

    _run_by_ket_sector(run, g.blocks)
    if isinstance(bra_sectors, dict) and any(r is not None for r in bra_sectors.values()):
        return _Piece(legs, rule, out, dtype), new_side, new_bra  # c* cut to a range: not a whole leg
    return BlockTensor(legs, None, rule, out, dtype=dtype), new_side, new_bra


#: Layers of at least this many entries have their blocks worked on by several threads (one BLAS thread each).
PARALLEL_ENTRIES = 2**22


def _run_by_ket_sector(run, blocks: dict) -> None:
    """``run(items)`` over the blocks of a layer, split by ket open sector among the BLAS's threads.

    Every output block (or, at an open site, every row range of one) comes from the input blocks of
    one ket open sector ``O``, so the groups write to disjoint memory and each output sums its parts
    in the order of a single pass. With one BLAS thread (``OMP_NUM_THREADS=1``) or a small layer it
    is a single pass; otherwise each group runs on one BLAS thread, which keeps both cores busy on
    the small products of the walks where a two-thread BLAS mostly waits.
    """
    _run_grouped(run, list(blocks.items()), lambda item: item[0][0], lambda item: item[1].size)


def _run_grouped(run, items: list, group_of, size_of) -> None:
    """``run`` over ``items`` in one pass, or over groups (``group_of``) on the BLAS's threads, one BLAS thread each.

    Groups go whole to one worker, largest first to the least loaded (by ``size_of``); below
    ``PARALLEL_ENTRIES`` in all, or with one BLAS thread, a single pass in the given order.
    """
    workers = _blas_threads()
    total = sum(size_of(it) for it in items)
    if workers <= 1 or total < PARALLEL_ENTRIES:
        run(items)
        return
    groups: dict = {}
    for item in items:
        groups.setdefault(group_of(item), []).append(item)
    shares = [[] for _ in range(workers)]
    loads = [0] * workers
    for grp in sorted(groups.values(), key=lambda g: -sum(size_of(it) for it in g)):
        i = loads.index(min(loads))
        shares[i] += grp
        loads[i] += sum(size_of(it) for it in grp)
    shares = [sh for sh in shares if sh]
    with threadpool_limits(limits=1, user_api="blas"), ThreadPoolExecutor(len(shares)) as pool:
        for done in [pool.submit(run, sh) for sh in shares]:
            done.result()


@dataclass
class _Piece:
    """Blocks of a layer whose bra bond is cut to a range of states (what the join reads of a layer)."""

    legs: tuple
    rule: ChargeRule
    blocks: dict
    dtype: np.dtype


def _bra_chunk(item, bra_sectors):
    """A bra entry ``(s, c, block, matrix)`` cut to the range of ``c*`` states asked for, if any."""
    rng = bra_sectors.get(item[1]) if isinstance(bra_sectors, dict) else None
    if rng is None:
        return item
    ss, c, kb, _ = item
    part = np.ascontiguousarray(kb[:, :, rng[0]:rng[1]])
    return ss, c, part, part.reshape(part.shape[0], -1)


def _bra_positions(leg: Leg, side: _OpenSide, bra_leg: Leg, bra: _OpenSide) -> dict:
    """Sector of ``bra_leg`` (a part of ``leg``'s configurations) -> (sector of ``leg``, positions in it)."""
    by_charge = {tuple(q): n for n, q in enumerate(leg.charges.tolist())}
    out = {}
    for nb, q in enumerate(bra_leg.charges.tolist()):
        n = by_charge[tuple(q)]
        codes = np.asarray(side.codes[n])
        order = np.argsort(codes, kind="stable")
        out[nb] = (n, order[np.searchsorted(codes, bra.codes[nb], sorter=order)])
    return out


def _default_split(sites: tuple[int, ...]) -> int:
    """The balanced split: the left walk takes the first half of the open sites and the traced sites after them."""
    return sites[(len(sites) + 1) // 2] - 1 if len(sites) > 1 else sites[0]


def _label_counts(space, conserved, m: int) -> dict:
    """Grading label -> number of configurations of ``m`` sites with it (the block sizes of rho_S)."""
    _, local, moduli = _grading_of(space, conserved)
    if local.shape[1] == 0:
        return {(): space.dim**m}
    out = {tuple([0] * local.shape[1]): 1}
    rows = [tuple(int(x) for x in r) for r in local.tolist()]
    for _ in range(m):
        new: dict = {}
        for q, n in out.items():
            for r in rows:
                key = tuple((a + b) % mod if mod else a + b for a, b, mod in zip(q, r, moduli))
                new[key] = new.get(key, 0) + n
        out = new
    return out


def block_sizes(state, sites: tuple[int, ...]) -> list[int]:
    """Sizes of the charge blocks of ``rho_S`` (configurations of S per grading label)."""
    return list(_label_counts(state.basis.space, state.basis.conserved, len(sites)).values())


def _open_tables(state, count: int) -> dict:
    """Charge of the open leg after ``count`` open sites -> {parity: configurations} (parity 0 for bosons)."""
    basis = state.basis
    rule = basis.rule
    par = np.asarray(basis.space.parity)[basis.order] if basis.space.fermionic else np.zeros(basis.dim, int)
    phys = {}
    for sec, (a, b) in enumerate(zip(basis.leg.offsets[:-1], basis.leg.offsets[1:])):
        q = tuple(rule.reduce(np.asarray(basis.leg.charges[sec], np.int64)).tolist())
        for p in np.unique(par[a:b]).tolist():
            phys.setdefault(q, {})[int(p)] = phys.setdefault(q, {}).get(int(p), 0) + int(np.sum(par[a:b] == p))
    out = {tuple(rule.zero().tolist()): {0: 1}}
    for _ in range(count):
        new: dict = {}
        for q, pars in out.items():
            for qs, spars in phys.items():
                key = _add(q, qs, rule)
                tgt = new.setdefault(key, {})
                for p, n in pars.items():
                    for ps, ns in spars.items():
                        tgt[p ^ ps] = tgt.get(p ^ ps, 0) + n * ns
        out = new
    return out


def split_applies(state, sites: tuple[int, ...]) -> bool:
    """True for spin and boson spaces, and for fermions whose charges fix the parity of every open sector."""
    if not state.basis.space.fermionic:
        return True
    if not _parity_graded(state.basis):
        return False
    return all(len(p) == 1 for count in range(len(sites) + 1) for p in _open_tables(state, count).values())


#: Most final steps of one walk done sector by sector (each deeper one recomputes parts of a step).
MAX_STREAMED = 4
#: Pieces of the join with one streamed step per walk are cut to about the larger of these entries
#: and this fraction of the blocks of rho, in ranges of at least ``CHUNK_MIN`` bond states.
CHUNK_ENTRIES = 2.0**23
CHUNK_FRACTION = 0.125
CHUNK_MIN = 16
#: Most pieces of the right walk cut by its bra's configuration of its first open sites.
MAX_PIECES = 64


@dataclass
class _Plan:
    """Where the walks meet and how much of them is done sector by sector (sizes in entries).

    Attributes
    ----------
    m : int
        Last site of the left walk.
    depth : tuple of int
        Final steps of the left and the right walk done one sector of the split's bra bond at a time.
    peak, held, n_max : float
        Peak of the walks and the join; entries of the blocks of rho; largest block size.
    left, right : dict
        Entries of the left layer after each site, of the right layer after each site of the mirrored walk.
    units : list of tuple
        ``(sector, start, stop, need)``: the join's units, a sector of the split's bra bond (or a range
        of its states where both walks stream one step), and what its streamed steps hold besides
        the two inputs.
    inputs : float
        The two layers the streamed steps start from.
    extra : float
        Entries computed more than once by the streamed steps (a measure of their extra work).
    fixes : list of tuple
        Pieces of the right walk: the physical sectors its bra takes on its first open sites (one
        empty tuple: the walk whole). Each piece is walked from the start and joined on its own;
        the left walk's streamed steps are redone per piece.
    right_sizes : list of dict
        Entries of each piece's layers after each site (``right`` for the walk whole).
    """

    m: int
    depth: tuple
    peak: float
    held: float
    n_max: float
    left: dict
    right: dict
    units: list
    inputs: float
    extra: float
    fixes: list = field(default_factory=lambda: [()])
    right_sizes: list = field(default_factory=list)


def _predecessors(tensor: BlockTensor, ket_to_bra: bool) -> dict:
    """Output bond sector -> input bond sectors that feed it through ``tensor`` (its block keys)."""
    out: dict = {}
    for b, _, c in tensor.blocks:
        if ket_to_bra:
            out.setdefault(c, set()).add(b)
        else:
            out.setdefault(b, set()).add(c)
    return out


def _largest_join_block(lsz: dict, rsz: dict, rule) -> float:
    """Entries of the largest block of rho met in the join: open sectors (ql, ql2) on the left with (qr, qr2)
    on the right such that ql + qr = ql2 + qr2, ``lsz``/``rsz`` the sector sizes of the open sites."""
    part = 0.0
    for ql, nl in lsz.items():
        for ql2, nl2 in lsz.items():
            for qr, nr in rsz.items():
                nr2 = rsz.get(_add(_add(ql, qr, rule), ql2, rule, -1), 0)
                part = max(part, float(nl * nl2 * nr * nr2))
    return part


def _plan(state, sites: tuple[int, ...], budget: float | None = None) -> _Plan:
    """The split point and streaming depths: exact peaks from the charge sectors (entries).

    Every full step of a walk holds its input and output layer (the right walk also the left walk's
    streamed input); a layer ``G[(O, b), (O*, b*)]`` has ``sum_Q n_Q**2`` entries, ``n_Q`` the (open
    configuration, bond state) pairs of charge Q. The last ``depth`` steps of each walk are never done
    whole: the join runs one sector ``j`` of the bra bond ``b*`` at the split at a time, and each
    streamed step computes only the bra sectors that sector ``j`` needs (the predecessors through the
    MPS tensor's blocks), so it holds both walks' inputs, the pieces of two consecutive streamed
    steps (the left's final piece while the right's run), the blocks of rho and three copies of the
    largest product of a left and a right layer block. One streamed step per walk costs nothing extra;
    deeper ones recompute the sectors that several ``j`` share.

    ``budget`` (entries): among the plans within it, the one with the least recomputed work, else the
    smallest peak. Without a budget the smallest peak with one streamed step per walk.
    """
    basis = state.basis
    rule = basis.rule
    zero = tuple(rule.zero().tolist())
    lo, hi = sites[0], sites[-1]
    t = state.tensors
    opens = [{q: sum(p.values()) for q, p in _open_tables(state, c).items()} for c in range(len(sites) + 1)]

    def table(count: int, bond: Leg, sign: int) -> dict:
        bond_table = {_add(zero, q, rule, sign): n for q, n in _bond_counts(bond).items()}
        return _fuse_tables(opens[count], bond_table, rule)

    def pieces(count: int, bond: Leg, sign: int, bra: dict | None = None) -> list:
        # rows (O*, b*) of bra sector j: label t = q(O*) + sign q_j, each meeting the n_t rows of label t;
        # ``bra``: the open configurations the bra may take (a piece cut by the bra's first open sites)
        n_t = table(count, bond, sign)
        out = []
        for q, dim in zip(bond.charges.tolist(), bond.dims.tolist()):
            qj = _add(zero, tuple(q), rule, sign)
            rows = sum(n * n_t.get(_add(qo, qj, rule), 0) for qo, n in (opens[count] if bra is None else bra).items())
            out.append(float(int(dim) * rows))
        return out

    def identity(bond: Leg) -> float:
        return float(sum(int(n) ** 2 for n in bond.dims.tolist()))

    left, left_pieces = {lo - 1: identity(t[lo].legs[0])}, {}
    for k in range(lo, hi + 1):
        left_pieces[k] = pieces(sum(1 for s in sites if s <= k), t[k].legs[2], 1)
        left[k] = float(sum(left_pieces[k]))
    right, right_pieces = {hi + 1: identity(t[hi].legs[2])}, {}
    for k in range(hi, lo, -1):
        right_pieces[k] = pieces(sum(1 for s in sites if s >= k), t[k - 1].legs[2], -1)
        right[k] = float(sum(right_pieces[k]))
    left_pred = {k: _predecessors(t[k], True) for k in range(lo, hi + 1)}
    right_pred = {k: _predecessors(t[k], False) for k in range(lo + 1, hi + 1)}
    blocks = _label_counts(basis.space, basis.conserved, len(sites))
    held = float(sum(n * n for n in blocks.values()))
    n_max = float(max(blocks.values()))
    default = _default_split(sites)

    def chain(steps, sizes, preds, n_sectors):
        """Per top sector: (peak of two consecutive pieces, final piece); the recomputed entries; all computed."""
        peaks, finals = [], []
        produced: dict = {}
        for j in range(n_sectors):
            want, peak, below = {j}, 0.0, 0.0
            sets = []
            for k in steps:  # from the final step back
                sets.append((k, want))
                want = set().union(*(preds[k].get(x, ()) for x in want))
            for k, want in reversed(sets):  # computed from the deepest streamed step up
                size = float(sum(sizes[k][x] for x in want))
                produced[k] = produced.get(k, 0.0) + size
                peak = max(peak, below + size)
                below = size
            peaks.append(peak)
            finals.append(below)
        extra = sum(v - float(sum(sizes[k])) for k, v in produced.items())
        return peaks, finals, max(extra, 0.0), float(sum(produced.values()))

    single = len(sites) == 1
    workers = max(1, _blas_threads())  # the join's threads each hold their own products
    # the pieces of the join need not be larger than a fraction of what the join holds anyway
    chunk = max(CHUNK_ENTRIES, CHUNK_FRACTION * held)

    def search(deep: bool):
        best = None
        for m in range(lo, hi + 1) if not single else [lo]:
            k_left = sum(1 for s in sites if s <= m)
            if not single and not 0 < k_left < len(sites):
                continue
            bond = t[m].legs[2]
            n_sec = bond.n_sectors
            lsz, rsz = opens[k_left], opens[len(sites) - k_left]
            part = _largest_join_block(lsz, rsz, rule)
            depths_left = range(1, min(MAX_STREAMED, m - lo + 1) + 1) if deep else [1]
            depths_right = range(1, min(MAX_STREAMED, hi - m) + 1) if deep and not single else [1]
            for dl in depths_left:
                lp, lf, lx, _ = chain(range(m, m - dl, -1), left_pieces, left_pred, n_sec)
                base_left = left[m - dl]
                walk_left = max([left[k - 1] + left[k] for k in range(lo, m - dl + 1)], default=0.0)
                for dr in depths_right:
                    if single:  # no right walk: its identity taken sector by sector
                        rp = [float(int(n) ** 2) for n in bond.dims.tolist()]
                        rx, base_right, walk_right = 0.0, 0.0, 0.0
                    else:
                        rp, _, rx, _ = chain(range(m + 1, m + 1 + dr), right_pieces, right_pred, n_sec)
                        base_right = right[m + dr + 1]
                        walk_right = max([base_left + right[k + 1] + right[k]
                                          for k in range(m + dr + 1, hi + 1)], default=0.0)
                    needs = [max(a, f + b) for a, f, b in zip(lp, lf, rp)]
                    inputs = base_left + base_right
                    units = []
                    for j, (need, dim) in enumerate(zip(needs, bond.dims.tolist())):
                        dim = int(dim)
                        # one streamed step per walk: ranges of the sector's states within the chunk size
                        count = 1 if (dl, dr) != (1, 1) else max(1, min(dim // CHUNK_MIN,
                                                                        int(np.ceil(need / max(chunk, 1.0)))))
                        cuts = np.linspace(0, dim, count + 1).astype(int)
                        units += [(j, int(a), int(b), need * (b - a) / max(dim, 1))
                                  for a, b in zip(cuts[:-1], cuts[1:])]
                    join = inputs + max((u[3] for u in units), default=0.0) + held + 3.0 * workers * part
                    peak = max(walk_left, walk_right, join)
                    extra = lx + rx
                    if budget is None:
                        key = (peak, abs(m - default))
                    else:
                        key = (peak > budget, extra if peak <= budget else peak, peak, abs(m - default))
                    if best is None or key < best[0]:
                        best = (key, _Plan(m, (dl, dr), peak, held, n_max, left, right, units, inputs, extra,
                                           [()], [right]))
        return best

    phys_q = [tuple(rule.reduce(np.asarray(q, np.int64)).tolist()) for q in basis.leg.charges.tolist()]
    phys_d = [int(x) for x in basis.leg.dims.tolist()]
    cache: dict = {}

    def right_cut(fix: tuple):
        """Whole-layer and per-sector entries of the right walk whose bra takes the sectors ``fix`` first."""
        sizes, per = {hi + 1: identity(t[hi].legs[2])}, {}
        for k in range(hi, lo, -1):
            count = sum(1 for s in sites if s >= k)
            n_fix = min(count, len(fix))
            q, dim = zero, 1
            for sec in fix[:n_fix]:
                q, dim = _add(q, phys_q[sec], rule), dim * phys_d[sec]
            key = (k, count, n_fix, q, dim)
            if key not in cache:
                bra = _fuse_tables({q: dim}, opens[count - n_fix], rule)
                cache[key] = pieces(count, t[k - 1].legs[2], -1, bra)
            per[k] = cache[key]
            sizes[k] = float(sum(per[k]))
        return sizes, per

    def search_cut():
        """Plans with the right walk in pieces by its bra's first open sites (one streamed step on the right)."""
        best = None
        n_right_open = lambda m: sum(1 for s in sites if s > m)  # noqa: E731
        for m in range(lo, hi):
            k_left = sum(1 for s in sites if s <= m)
            if not 0 < k_left < len(sites):
                continue
            bond = t[m].legs[2]
            n_sec = bond.n_sectors
            lsz, rsz = opens[k_left], opens[len(sites) - k_left]
            part = _largest_join_block(lsz, rsz, rule)
            for k in range(1, n_right_open(m) + 1):
                if len(phys_q) ** k > MAX_PIECES:
                    break
                fixes = list(product(range(len(phys_q)), repeat=k))
                cuts = [right_cut(f) for f in fixes]
                base_right = max(c[0][m + 2] for c in cuts)
                right_need = [max(c[1][m + 1][j] for c in cuts) for j in range(n_sec)]
                for dl in range(1, min(MAX_STREAMED, m - lo + 1) + 1):
                    lp, lf, lx, made = chain(range(m, m - dl, -1), left_pieces, left_pred, n_sec)
                    base_left = left[m - dl]
                    walk_left = max([left[i - 1] + left[i] for i in range(lo, m - dl + 1)], default=0.0)
                    # later pieces walk while the blocks of rho are held
                    walk_right = max([base_left + held + c[0][i + 1] + c[0][i]
                                      for c in cuts for i in range(m + 2, hi + 1)], default=0.0)
                    needs = [max(a, f + b) for a, f, b in zip(lp, lf, right_need)]
                    inputs = base_left + base_right
                    units = []
                    for j, (need, dim) in enumerate(zip(needs, bond.dims.tolist())):
                        dim = int(dim)
                        count = 1 if dl != 1 else max(1, min(dim // CHUNK_MIN, int(np.ceil(need / max(chunk, 1.0)))))
                        cuts_j = np.linspace(0, dim, count + 1).astype(int)
                        units += [(j, int(a), int(b), need * (b - a) / max(dim, 1))
                                  for a, b in zip(cuts_j[:-1], cuts_j[1:])]
                    join = inputs + max((u[3] for u in units), default=0.0) + held + 4.0 * workers * part
                    peak = max(walk_left, walk_right, join)
                    extra = lx + (len(fixes) - 1) * made
                    # among the plans that fit, the least work: entries of every layer and piece computed
                    work = (sum(left[i] for i in range(lo, m - dl + 1)) + made * len(fixes)
                            + sum(sum(c[0][i] for i in range(m + 2, hi + 1)) + sum(c[1][m + 1]) for c in cuts))
                    key = (peak > budget, work if peak <= budget else peak, peak, abs(m - default))
                    if best is None or key < best[0]:
                        best = (key, _Plan(m, (dl, 1), peak, held, n_max, left, right, units, inputs, extra,
                                           fixes, [c[0] for c in cuts]))
        return best

    # one streamed step per walk costs nothing extra: deeper plans only where that does not fit, and
    # the right walk in pieces (the left's streamed steps redone per piece) only where those do not
    best = search(False)
    if budget is not None and best[1].peak > budget:
        deeper = search(True)
        if deeper[0] < best[0]:
            best = deeper
        if best[1].peak > budget and not single:
            cut = search_cut()
            if cut is not None and cut[0] < best[0]:
                best = cut
    return best[1]


def _join_into(mats: dict, g_left: BlockTensor, g_right: BlockTensor, place: dict, sizes: dict,
               side_left: _OpenSide, side_right: _OpenSide, dtype, bra_right: dict | None = None) -> None:
    """``rho += sum_{b, b*} G_L[O_L, O_L*, b, b*] G_R[O_R, O_R*, b, b*]`` into the charge blocks ``mats``.

    Only the sub-blocks on and above the diagonal of each block (row pair of sectors before or at the
    column pair), and in a diagonal sub-block only its tiles ``O_L <= O_L*`` (the products take the
    rows of those left index pairs alone, about half the flops of the full sub-block); the caller fills
    the rest from them (:func:`netprobe.rdm.tiles.fill_hermitian`), rho being Hermitian. ``bra_right`` maps the
    sectors of a right piece's bra leg (a part of the configurations) to ``(sector, positions)`` of
    the whole leg; its columns are then scattered into place.
    """
    left_groups: dict = {}
    for (sl, slb, bk, bb), blk in g_left.blocks.items():
        mat = blk.reshape(blk.shape[0] * blk.shape[1], -1)
        if sl == slb:  # a diagonal sub-block: the rows of the left index pairs O_L <= O_L* only
            mat = mat[upper_pairs(blk.shape[0])]
        left_groups.setdefault((sl, slb), {})[(bk, bb)] = mat
    right_groups: dict = {}
    for (sr, srb, bk, bb), blk in g_right.blocks.items():
        right_groups.setdefault((sr, srb), {})[(bk, bb)] = blk.reshape(blk.shape[0] * blk.shape[1], -1)
    lock = threading.Lock()

    def run(items):
        for (sl, slb), lefts in items:
            for (sr, srb), rights in right_groups.items():
                srb, pos = (srb, None) if bra_right is None else bra_right[srb]
                total, r0, rn = place[(sl, sr)]
                total_b, c0, cn = place[(slb, srb)]
                if total != total_b or r0 > c0:
                    continue  # a pair of charges that rho does not connect; the lower half comes by hermiticity
                part = None
                for key, blk in lefts.items():
                    other = rights.get(key)
                    if other is None:
                        continue
                    # (O_L O_L*, (b b*)) times ((b b*), O_R O_R*): one product, no copies of the layers
                    if part is None:
                        part = blk @ other.T
                    else:
                        part += blk @ other.T
                if part is None:
                    continue
                target = mats.get(total)
                if target is None:
                    with lock:  # another left sector may be creating the same block
                        target = mats.get(total)
                        if target is None:
                            target = mats[total] = np.zeros((sizes[total], sizes[total]), dtype)
                xl, yl = len(side_left.codes[sl]), len(side_left.codes[slb])
                xr, yr = len(side_right.codes[sr]), len(side_right.codes[srb])
                if sl == slb:
                    add_upper_tiles(target, part, r0, c0, xl, xr, yr, pos)
                elif pos is None:
                    view = target[r0:r0 + rn, c0:c0 + cn].reshape(xl, xr, yl, yr)
                    view += part.reshape(xl, yl, xr, yr).transpose(0, 2, 1, 3)
                else:  # the piece's columns: (O_L*, O_R*) with O_R* at ``pos`` of its sector (distinct columns)
                    cols = (c0 + np.arange(yl)[:, None] * yr + pos[None, :]).ravel()
                    target[r0:r0 + rn, cols] += part.reshape(xl, yl, xr, len(pos)).transpose(0, 2, 1, 3).reshape(
                        xl * xr, yl * len(pos))
                del part

    # each left open sector sl writes its own rows of rho: the groups run side by side
    _run_grouped(run, list(left_groups.items()), lambda item: item[0][0],
                 lambda item: sum(v.size for v in item[1].values()))


def _budget_entries(state, sites, budget) -> float:
    """The budget in entries of the walks and the join (what :func:`split_estimate` adds, taken off)."""
    n_states = float(state.basis.dim) ** len(sites)
    return max(float(resolve_budget(budget)) - 8.0 * n_states, 0.0) / np.dtype(state.dtype).itemsize


def split_estimate(state, sites: tuple[int, ...], output: str = "root", budget: int | None = None) -> float:
    """Peak bytes of the split route, counted exactly from the charge sectors before the walk.

    Parameters
    ----------
    state : MPS
    sites : tuple of int
    output : {"blocks", "root", "dense"}
        What the route hands back: the charge blocks of rho, their square root (one
        eigendecomposition per block on top of the blocks), or the dense ``d**m x d**m`` matrix
        (assembled from the blocks).
    budget : int, optional
        Bytes the route may use (default :func:`netprobe.resources.default_memory_budget`): the plan
        is the one :func:`split_blocks` runs under the same budget (:func:`_plan`).

    Notes
    -----
    The walks and the join of that plan, then the output stage, plus the row codes of the blocks.
    """
    item = np.dtype(state.dtype).itemsize
    plan = _plan(state, sites, _budget_entries(state, sites, budget))
    peak, held, n_max = plan.peak, plan.held, plan.n_max
    n_states = float(state.basis.dim) ** len(sites)
    if output == "root":
        # blocks, one eigendecomposition (copy of the block, eigenvectors, the scaled copy)
        peak = max(peak, held + 3.0 * n_max * n_max)
    elif output == "dense":
        peak = max(peak, held + n_states * n_states)
    return peak * item + 8.0 * n_states


def split_blocks(state, sites: tuple[int, ...], budget: int | None = None, where: str = "reduced_root",
                 estimate: float = 0.0) -> BlockedRho:
    """The charge blocks of ``rho_S`` by two double-layer walks (module notes).

    The left walk carries ``G_L[O_L, O_L*, b, b*]`` from the first site of the set to the split
    point; the right walk is the same walk on the mirrored chain (every tensor read as
    ``A[c, s, b]``) from the last site back to the bond after the split point. Outside the span the
    state is orthonormal towards it, so both walks start from the identity, and
    ``rho = sum_{b, b*} G_L[O_L, O_L*, b, b*] G_R[O_R, O_R*, b, b*]``, accumulated pair of blocks by pair
    of blocks into the charge blocks of rho, one sector of ``b*`` at a time (the last step of each walk
    is done for that sector only). Every walk step and every sector checks its allocation against the
    budget first.

    Raises
    ------
    UngradedParity
        For a fermionic open sector of mixed parity (``split_applies`` rules this out up front).
    """
    basis = state.basis
    rule = basis.rule
    d = basis.dim
    space = basis.space
    fermionic = space.fermionic
    bounds = list(zip(basis.leg.offsets[:-1], basis.leg.offsets[1:]))
    blocked_parity = np.asarray(space.parity)[basis.order] if fermionic else np.zeros(basis.dim, np.int64)
    phys = _OpenSide([np.asarray(basis.order[a:b], np.int64) for a, b in bounds],
                     _sector_parity(blocked_parity, basis.leg.offsets))
    lo, hi = sites[0], sites[-1]
    plan = _plan(state, sites, _budget_entries(state, sites, budget))
    m, (depth_left, depth_right), sizes_left, sizes_right = plan.m, plan.depth, plan.left, plan.right
    meter = WalkMeter(budget, f"{where}: the split walk over {len(sites)} sites", np.dtype(state.dtype).itemsize)
    st = _centred_copy(state, lo, hi)
    st_hi_bond = st.tensors[hi].legs[2]
    dtype = np.result_type(st.dtype, np.float64)

    def walk(start_bond, tensors, code_of, sizes, step, held: float, depth: int, fix: tuple = ()):
        """Full steps; returns the layer and ``piece(sectors)`` (the streamed steps, for some bra sectors).

        ``fix``: the physical sectors the bra takes on the walk's first open sites (a piece of the walk).
        """
        g = _bond_identity(start_bond, rule, dtype)
        side, opened = _OpenSide([np.zeros(1, np.int64)], [0]), 0
        bra = side
        full, streamed = tensors[:len(tensors) - depth], tensors[len(tensors) - depth:]

        def keep(is_open, count):
            return frozenset([fix[count]]) if is_open and count < len(fix) else None

        for k, a in full:
            is_open = k in sites
            meter.check(held + sizes[k - step] + sizes[k], k, a.legs[2].dim)  # input and output layers
            g, side, bra = _double_layer_step(g, a, is_open, side, phys, lambda o, s_: code_of(o, s_, opened),
                                              fermionic, bra_side=bra, keep=keep(is_open, opened))
            opened += is_open
        if not streamed:  # a single site: no right walk, its identity taken sector by sector
            def piece(sectors):
                blocks = {}
                for k, v in g.blocks.items():
                    if k[3] in sectors:
                        rng = sectors.get(k[3]) if isinstance(sectors, dict) else None
                        blocks[k] = v if rng is None else np.ascontiguousarray(v[:, :, :, rng[0]:rng[1]])
                return _Piece(g.legs, rule, blocks, dtype), side, bra

            return g, piece
        base, base_side, base_bra, counts = g, side, bra, []
        for k, _ in streamed:
            counts.append(opened)
            opened += k in sites
        preds = [_predecessors(a, True) for _, a in streamed]

        def piece(sectors):
            wants = [sectors]
            for pred in preds[:0:-1]:
                wants.append(set().union(*(pred.get(x, ()) for x in wants[-1])))
            wants.reverse()
            cur, cur_side, cur_bra = base, base_side, base_bra
            for (k, a), count, want in zip(streamed, counts, wants):
                cur, cur_side, cur_bra = _double_layer_step(
                    cur, a, k in sites, cur_side, phys, lambda o, s_, c=count: code_of(o, s_, c), fermionic, want,
                    bra_side=cur_bra, keep=keep(k in sites, count))
            return cur, cur_side, cur_bra

        return g, piece

    left = [(k, st.tensors[k]) for k in range(lo, m + 1)]
    g_left, piece_left = walk(st.tensors[lo].legs[0], left, lambda o, s_, k: o * d + s_, sizes_left, 1, 0.0,
                              depth_left)
    right = [(k, st.tensors[k].transpose((2, 1, 0))) for k in range(hi, m, -1)]  # the mirrored chain
    k_right = len([k for k, _ in right if k in sites])
    del st
    # the open legs after the last steps (an empty piece: legs and codes only)
    open_left, side_left, _ = piece_left(frozenset())
    names, local, moduli = _grading_of(space, basis.conserved)
    shift = d**k_right
    layout = place = sizes = None
    held = 0.0
    mats: dict = {}
    pieced = len(plan.fixes) > 1
    for fix, sizes_piece in zip(plan.fixes, plan.right_sizes):
        # later pieces walk while the blocks of rho are held
        g_right, piece_right = walk(st_hi_bond, right, lambda o, s_, k: s_ * d**k + o, sizes_piece, -1,
                                    sizes_left[m - depth_left] + (held if pieced else 0.0), depth_right, fix)
        open_right, side_right, bra_side = piece_right(frozenset())
        if layout is None:
            # rows of a block of rho: the (left sector, right sector) pairs of one total open charge, one
            # after the other, so that every product of two layers lands in a contiguous sub-block
            layout = {}
            for sl, ql in enumerate(open_left.legs[0].charges.tolist()):
                for sr, qr in enumerate(open_right.legs[0].charges.tolist()):
                    layout.setdefault(_add(tuple(ql), tuple(qr), rule), []).append((sl, sr))
            place, sizes = {}, {}
            for total, pairs in layout.items():
                off = 0
                for sl, sr in pairs:
                    n = len(side_left.codes[sl]) * len(side_right.codes[sr])
                    place[(sl, sr)] = (total, off, n)
                    off += n
                sizes[total] = off
            held = float(sum(n * n for n in sizes.values()))
        bra_right = _bra_positions(open_right.legs[0], side_right, open_right.legs[1].dual(), bra_side) if fix else None
        # the join, one sector j of the bra bond b* at a time: both last steps done for that sector only
        for j, start, stop, need in plan.units:
            meter.check(plan.inputs + need + held, m, len(plan.units))
            unit = {j: (start, stop)}
            pl, _, _ = piece_left(unit)
            pr, _, _ = piece_right(unit)
            _join_into(mats, pl, pr, place, sizes, side_left, side_right, dtype, bra_right)
            del pl, pr
        del g_right, piece_right
    del g_left
    for total, mat in mats.items():  # rho is Hermitian: what lies below the diagonal from what lies above
        fill_hermitian(mat, [(place[(sl, sr)][1], len(side_left.codes[sl]), len(side_right.codes[sr]))
                              for sl, sr in layout[total]])
    trace = sum(float(np.trace(b).real) for b in mats.values())
    powers = d ** np.arange(len(sites) - 1, -1, -1, dtype=np.int64)
    blocks = []
    for total in sorted(mats):
        mat = mats.pop(total)
        if trace > 0:
            mat /= trace
        codes = np.concatenate([(side_left.codes[sl][:, None] * shift + side_right.codes[sr][None, :]).ravel()
                                for sl, sr in layout[total]])
        label = _labels(local[(codes[0] // powers) % d].sum(axis=0, keepdims=True), moduli)[0]
        blocks.append(RootBlock(tuple(int(x) for x in label), codes, mat))
    return BlockedRho(tuple(sites), space, names, local, moduli, tuple(blocks), "mps-split", estimate)
