"""Compiled (numba) kernels of the exact engine: the walk that enumerates a charge sector and the loops that count,
fill and apply the sparse operator of a Hamiltonian in a sector basis.

Kernels take arrays and return arrays; they validate nothing. :mod:`netprobe.engines.exact.basis` explains the
state codes, the monomial pieces and the rank tables they use, and imports this module when it first needs a
kernel, so that numba loads only when exact diagonalisation runs.
"""

from __future__ import annotations

import numpy as np
from numba import njit, prange

__all__ = [
    "CHUNK",
    "enumerate_sector",
    "decode",
    "lookup",
    "piece",
    "count_kernel",
    "fill_kernel",
    "compact",
    "apply_kernel",
]

CHUNK = 2048  # states per parallel work item


@njit(cache=True)
def enumerate_sector(num_sites, d, q, target, cnt_flat, cnt_base, cnt_lo, cnt_span, cnt_stride, out):
    """Depth-first walk over prefixes, pruned by the suffix counts; writes sorted codes into ``out``."""
    k = q.shape[1]
    choice = np.full(num_sites, -1, np.int64)
    charge = np.zeros((num_sites + 1, k), np.int64)
    prefix = np.zeros(num_sites + 1, np.int64)
    pos = 0
    j = 0
    while j >= 0:
        m = num_sites - j - 1
        s = choice[j] + 1
        found = False
        while s < d:
            idx = cnt_base[m]
            ok = True
            for c in range(k):
                r = target[c] - charge[j, c] - q[s, c] - cnt_lo[m, c]
                if r < 0 or r > cnt_span[m, c]:
                    ok = False
                    break
                idx += r * cnt_stride[m, c]
            if ok and cnt_flat[idx] > 0:
                found = True
                break
            s += 1
        if not found:
            choice[j] = -1
            j -= 1
            continue
        choice[j] = s
        for c in range(k):
            charge[j + 1, c] = charge[j, c] + q[s, c]
        prefix[j + 1] = prefix[j] * d + s
        if j == num_sites - 1:
            out[pos] = prefix[num_sites]
            pos += 1
        else:
            j += 1
    return pos


@njit(cache=True)
def decode(code, num_sites, d, dbits, digits):
    if dbits > 0:
        mask = d - 1
        x = code
        for j in range(num_sites - 1, -1, -1):
            digits[j] = x & mask
            x = x >> dbits
        return
    x = code
    for j in range(num_sites - 1, -1, -1):
        y = x // d
        digits[j] = x - y * d
        x = y


@njit(cache=True)
def lookup(hi, lo, dm, start, rank, codes, use_tables, verify):
    code = hi * dm + lo
    n = codes.size
    if use_tables:
        s = start[hi]
        if s < 0:
            return -1
        i = s + rank[lo]
        if not verify:
            return i
        if i < n and codes[i] == code:
            return i
        return -1
    a = 0
    b = n
    while a < b:
        mid = (a + b) >> 1
        if codes[mid] < code:
            a = mid + 1
        else:
            b = mid
    if a < n and codes[a] == code:
        return a
    return -1


@njit(cache=True)
def piece(o, digits, op_ptr, fsite, fdhi, fdlo, famp, coef):
    """Amplitude and (hi, lo) code shifts of piece ``o`` on a decoded state; ok is False if it vanishes."""
    amp = coef[o]
    dh = 0
    dl = 0
    for f in range(op_ptr[o], op_ptr[o + 1]):
        c = digits[fsite[f]]
        a = famp[f, c]
        if a == 0:
            return False, 0, 0, amp * 0
        amp = amp * a
        dh += fdhi[f, c]
        dl += fdlo[f, c]
    return True, dh, dl, amp


# Pieces come grouped by image (see _compile); last[o] marks the end of a group, whose summed
# amplitude is then looked up once. One flat loop is markedly faster than a loop over groups.


@njit(parallel=True, cache=True)
def count_kernel(rows, num_sites, d, dbits, dm, op_ptr, fsite, fdhi, fdlo, famp, coef, last, verify,
                  cstart, crank, ccodes, use_tables, counts, leaks):
    n = rows.size
    nops = op_ptr.size - 1
    nchunk = (n + CHUNK - 1) // CHUNK
    for ch in prange(nchunk):
        digits = np.empty(num_sites, np.int64)
        for r in range(ch * CHUNK, min(n, (ch + 1) * CHUNK)):
            code = rows[r]
            decode(code, num_sites, d, dbits, digits)
            hi = code // dm
            lo = code - hi * dm
            cnt = 0
            acc = coef[0] * 0
            sh = 0
            sl = 0
            for o in range(nops):
                ok, dh, dl, amp = piece(o, digits, op_ptr, fsite, fdhi, fdlo, famp, coef)
                if ok:
                    acc += amp
                    sh = dh
                    sl = dl
                if last[o]:
                    if acc != 0:
                        i = lookup(hi + sh, lo + sl, dm, cstart, crank, ccodes, use_tables, verify[o] != 0)
                        if i < 0:
                            leaks[o] = 1
                        else:
                            cnt += 1
                    acc = acc * 0
            counts[r] = cnt


@njit(parallel=True, cache=True)
def fill_kernel(rows, num_sites, d, dbits, dm, op_ptr, fsite, fdhi, fdlo, famp, coef, last, verify,
                 cstart, crank, ccodes, use_tables, ptr, ind, val, lens):
    n = rows.size
    nops = op_ptr.size - 1
    nchunk = (n + CHUNK - 1) // CHUNK
    for ch in prange(nchunk):
        digits = np.empty(num_sites, np.int64)
        for r in range(ch * CHUNK, min(n, (ch + 1) * CHUNK)):
            code = rows[r]
            decode(code, num_sites, d, dbits, digits)
            hi = code // dm
            lo = code - hi * dm
            p = ptr[r]
            acc = coef[0] * 0
            sh = 0
            sl = 0
            for o in range(nops):
                ok, dh, dl, amp = piece(o, digits, op_ptr, fsite, fdhi, fdlo, famp, coef)
                if ok:
                    acc += amp
                    sh = dh
                    sl = dl
                if last[o]:
                    if acc != 0:
                        i = lookup(hi + sh, lo + sl, dm, cstart, crank, ccodes, use_tables, verify[o] != 0)
                        if i >= 0:
                            ind[p] = i
                            val[p] = acc
                            p += 1
                    acc = acc * 0
            lens[r] = p - ptr[r]


@njit(cache=True)
def compact(ptr, lens, ind, val, newptr):
    w = 0
    newptr[0] = 0
    for r in range(lens.size):
        src = ptr[r]
        if src != w:
            for t in range(lens[r]):
                ind[w + t] = ind[src + t]
                val[w + t] = val[src + t]
        w += lens[r]
        newptr[r + 1] = w
    return w


@njit(parallel=True, cache=True)
def apply_kernel(rows, num_sites, d, dbits, dm, op_ptr, fsite, fdhi, fdlo, famp, coef, last, verify,
                  cstart, crank, ccodes, use_tables, x, y):
    n = rows.size
    nops = op_ptr.size - 1
    nchunk = (n + CHUNK - 1) // CHUNK
    for ch in prange(nchunk):
        digits = np.empty(num_sites, np.int64)
        for r in range(ch * CHUNK, min(n, (ch + 1) * CHUNK)):
            code = rows[r]
            decode(code, num_sites, d, dbits, digits)
            hi = code // dm
            lo = code - hi * dm
            total = y[r]  # y arrives zeroed
            acc = coef[0] * 0
            sh = 0
            sl = 0
            for o in range(nops):
                ok, dh, dl, amp = piece(o, digits, op_ptr, fsite, fdhi, fdlo, famp, coef)
                if ok:
                    acc += amp
                    sh = dh
                    sl = dl
                if last[o]:
                    if acc != 0:
                        i = lookup(hi + sh, lo + sl, dm, cstart, crank, ccodes, use_tables, verify[o] != 0)
                        if i >= 0:
                            total += acc * x[i]
                    acc = acc * 0
            y[r] = total
