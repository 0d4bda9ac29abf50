"""Exact diagonalisation in a charge sector, for small systems and for validating the other engines.

Basis convention
----------------
A many-body basis state is the list of local states ``(s_0, ..., s_{N-1})`` in MPS order; its
integer code is ``sum_j s_j d**(N-1-j)`` (site 0 most significant). A full state vector reshaped
to ``(d,) * N`` therefore has its axes in MPS order, and the full-space Hamiltonian is the sum of
Kronecker products with site 0 as the leftmost factor. Fermions arrive in the Jordan-Wigner qubit
basis with their strings written out (:mod:`netprobe.model.terms`), so no sign is handled here.

How a term acts
---------------
Each local matrix is split into monomial pieces: for a shift ``s`` the piece keeps the entries
``M[(c + s) % d, c]``, so it sends every local state to at most one local state. A product of
pieces sends one basis state to one basis state; the compiled kernels loop over states times
pieces and look the image up in the sector basis in constant time (a two-level rank table, or a
binary search when the tables would be large). Pieces that change the same sites by the same
shifts share their image for every state, so they are grouped and their amplitudes summed before
the lookup: all diagonal pieces merge into one diagonal entry, and contributions of different terms
to one off-diagonal element arrive as one entry.

Entry points: :func:`ground_state`, :func:`hamiltonian_matrix`, :func:`hamiltonian_operator`,
:func:`operator_matrix`, :func:`apply_operator`, :func:`expectation`, :func:`local_expectations`,
:func:`correlation`, :func:`full_vector`.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np
import scipy.sparse as sp

from netprobe.errors import MemoryBudgetError, OperatorError, SectorError, SpecError
from netprobe.resources import default_memory_budget, format_bytes
from netprobe.model.terms import Hamiltonian, LocalProduct

__all__ = [
    "SectorBasis",
    "sector_basis",
]

_CODE_LIMIT = 2**62  # codes are int64; d**N must stay below this
_TABLE_LIMIT = 2**23  # entries of the two rank tables before falling back to binary search
_PIECE_RTOL = 1e-14  # local entries below this fraction of the matrix norm are rounding residue


def _kernels():
    """The compiled kernels (:mod:`netprobe.engines.exact.kernels`), imported on first use.

    numba alone takes 0.6-0.75 s CPU to import; with it and matplotlib loaded up front, ``import netprobe.cli``
    took 2.5 s CPU in every command and worker process, most of which never diagonalise exactly, without them
    1.1 s (``python -m benchmarks.startup``; benchmarks/RESULTS.md, 2026-12-03).
    """
    from netprobe.engines.exact import kernels  # numba only when exact diagonalisation runs (see the docstring)

    return kernels


# ----------------------------------------------------------------------------------------------
# sector basis
# ----------------------------------------------------------------------------------------------


def _suffix_counts(q: np.ndarray, num_sites: int):
    """Number of m-site configurations with each total charge, m = 0..N, flattened for the walk."""
    d, k = q.shape
    qmin = q.min(axis=0) if d else np.zeros(k, np.int64)
    span1 = q.max(axis=0) - qmin
    tables = [np.ones((1,) * k, dtype=np.int64)]
    for m in range(1, num_sites + 1):
        prev = tables[-1]
        cur = np.zeros(tuple(int(m * s + 1) for s in span1), dtype=np.int64)
        for s in range(d):
            offset = q[s] - qmin
            sl = tuple(slice(int(o), int(o) + n) for o, n in zip(offset, prev.shape))
            cur[sl] += prev
        tables.append(cur)
    base = np.zeros(num_sites + 1, np.int64)
    lo = np.zeros((num_sites + 1, k), np.int64)
    span = np.zeros((num_sites + 1, k), np.int64)
    stride = np.zeros((num_sites + 1, k), np.int64)
    offset = 0
    for m, table in enumerate(tables):
        base[m] = offset
        lo[m] = m * qmin
        span[m] = m * span1
        if k:
            stride[m] = np.array(table.strides, dtype=np.int64) // table.itemsize
        offset += table.size
    flat = np.concatenate([t.ravel() for t in tables])
    return flat, base, lo, span, stride, tables


class SectorBasis:
    """The sorted codes of all basis states whose total charges equal a target.

    Parameters
    ----------
    local_charges : array_like of int, shape (d, k)
        Charge values of each local basis state (``SiteSpace.charge_values(conserved)``); ``k = 0``
        gives the full space.
    num_sites : int
        Number of sites N.
    target : sequence of int, length k
        Total charge of the sector.
    names : sequence of str, optional
        Charge names, used in messages and by :meth:`with_target`.
    memory_budget : int, optional
        Bytes the enumeration may use; default :func:`netprobe.resources.default_memory_budget`.

    Raises
    ------
    SectorError
        If no state has the target charges.
    MemoryBudgetError
        If ``d**N`` does not fit 62 bits or the codes would not fit the budget.

    Notes
    -----
    The enumeration walks the prefixes site by site and keeps only those whose remaining charge
    the remaining sites can still supply (exact suffix counts), so its memory is the output.
    """

    def __init__(self, local_charges, num_sites: int, target: Sequence[int] = (), *,
                 names: Sequence[str] = (), memory_budget: int | None = None):
        q = np.array(local_charges, dtype=np.int64)  # a private, read-only copy
        if q.ndim != 2 or q.shape[0] < 1:
            raise SectorError(f"local charges must be an array of shape (d, k), got shape {q.shape}")
        d, k = q.shape
        num_sites = int(num_sites)
        if num_sites < 1:
            raise SectorError(f"a sector basis needs at least one site, got {num_sites}")
        target = tuple(int(t) for t in target)
        if len(target) != k:
            raise SectorError(f"sector target {target} has {len(target)} values for {k} conserved charge(s)")
        names = tuple(str(n) for n in names) or tuple(f"q{c}" for c in range(k))
        if len(names) != k:
            raise SectorError(f"{len(names)} charge names for {k} conserved charge(s)")
        if d**num_sites > _CODE_LIMIT:
            raise MemoryBudgetError(
                f"{num_sites} sites of dimension {d} give {d}^{num_sites} basis codes, more than 62 bits; "
                "exact diagonalisation cannot index them, use a smaller lattice or DMRG"
            )
        self.num_sites = num_sites
        self.local_dim = d
        self.local_charges = q
        q.setflags(write=False)
        self.target = target
        self.names = names
        budget = default_memory_budget() if memory_budget is None else int(memory_budget)
        if k == 0:
            dim = d**num_sites
        else:
            flat, base, lo, span, stride, tables = _suffix_counts(q, num_sites)
            rel = np.array(target) - lo[num_sites]
            if np.any(rel < 0) or np.any(rel > span[num_sites]):
                dim = 0
            else:
                dim = int(tables[num_sites][tuple(rel)])
            if dim == 0:
                sector = ", ".join(f"{n}={t}" for n, t in zip(names, target))
                ranges = ", ".join(f"{n} in [{a}, {b}]" for n, a, b in
                                   zip(names, lo[num_sites], lo[num_sites] + span[num_sites]))
                raise SectorError(
                    f"sector {sector} contains no states on {num_sites} sites (totals reachable: {ranges}, "
                    "not every value in between); choose another sector"
                )
        if 8 * dim > budget:
            raise MemoryBudgetError(
                f"the sector has {dim} states; its codes alone need {format_bytes(8 * dim)}, over the budget of "
                f"{format_bytes(budget)}; use a smaller lattice or DMRG"
            )
        if k == 0:
            codes = np.arange(dim, dtype=np.int64)
        else:
            codes = np.empty(dim, dtype=np.int64)
            written = _kernels().enumerate_sector(num_sites, d, q, np.array(target, np.int64), flat, base, lo,
                                                  span, stride, codes)
            assert written == dim
        codes.setflags(write=False)
        self.codes = codes
        self._tables = None

    @property
    def dim(self) -> int:
        """Number of states in the sector."""
        return int(self.codes.size)

    def __len__(self) -> int:
        return self.dim

    @property
    def sector(self) -> dict[str, int]:
        """The target as a dict, charge name -> value."""
        return dict(zip(self.names, self.target))

    def index(self, codes) -> np.ndarray:
        """Positions of ``codes`` in the basis (binary search), -1 where a code is not in it."""
        codes = np.asarray(codes, dtype=np.int64)
        pos = np.searchsorted(self.codes, codes)
        pos_c = np.minimum(pos, max(self.dim - 1, 0))
        found = (pos < self.dim) & (self.codes[pos_c] == codes)
        return np.where(found, pos, -1).astype(np.int64)

    def states(self, indices=None) -> np.ndarray:
        """Local states ``(s_0, ..., s_{N-1})`` of basis positions (default all), shape (n, N)."""
        codes = self.codes if indices is None else self.codes[np.asarray(indices)]
        powers = self.local_dim ** np.arange(self.num_sites - 1, -1, -1, dtype=np.int64)
        return (codes[:, None] // powers[None, :]) % self.local_dim

    def with_target(self, target: Mapping[str, int] | Sequence[int]) -> "SectorBasis":
        """The basis of another sector of the same sites (a dict by charge name, or a sequence)."""
        if isinstance(target, Mapping):
            unknown = set(target) - set(self.names)
            if unknown:
                raise SectorError(
                    f"unknown charge(s) {', '.join(sorted(unknown))}; charges: {', '.join(self.names)}"
                )
            target = [int(target.get(n, t)) for n, t in zip(self.names, self.target)]
        return SectorBasis(self.local_charges, self.num_sites, target, names=self.names)

    def lookup_tables(self):
        """(split, start, rank, use_tables) for constant-time lookups in the compiled kernels.

        A code is split as ``hi * d**split + lo`` (``lo`` the last ``split`` sites). Inside the block
        of codes sharing ``hi``, the ``lo`` parts are exactly those of the complementary charge, in
        order, so the position is ``start[hi] + rank[lo]`` with ``rank`` the rank of ``lo`` among
        the ``lo`` of its own charge. A hit of a piece that may leave the sector is confirmed
        against ``codes``; with no tables (too many sites) the kernels search ``codes`` instead.
        """
        if self._tables is None:
            n, d = self.num_sites, self.local_dim
            split = n // 2
            n_lo, n_hi = d**split, d ** (n - split)
            if n_lo + n_hi > _TABLE_LIMIT:
                self._tables = (split, np.zeros(1, np.int64), np.zeros(1, np.int64), False)
            else:
                lo_codes = np.arange(n_lo, dtype=np.int64)
                k = self.local_charges.shape[1]
                if k and split:
                    powers = d ** np.arange(split - 1, -1, -1, dtype=np.int64)
                    digits = (lo_codes[:, None] // powers[None, :]) % d
                    charge = self.local_charges[digits].sum(axis=1)
                    _, group = np.unique(charge, axis=0, return_inverse=True)
                    group = group.ravel()
                else:
                    group = np.zeros(n_lo, np.int64)
                order = np.argsort(group, kind="stable")
                sorted_group = group[order]
                first = np.searchsorted(sorted_group, sorted_group, side="left")
                rank = np.empty(n_lo, np.int64)
                rank[order] = np.arange(n_lo) - first
                heads = np.arange(n_hi, dtype=np.int64) * n_lo
                start = np.searchsorted(self.codes, heads).astype(np.int64)
                ok = start < self.dim
                ok[ok] = self.codes[start[ok]] // n_lo == np.arange(n_hi)[ok]
                start[~ok] = -1
                self._tables = (split, start, rank, True)
        return self._tables

    def __repr__(self) -> str:
        sector = ", ".join(f"{n}={t}" for n, t in zip(self.names, self.target)) or "full space"
        return f"SectorBasis({self.num_sites} sites, d={self.local_dim}, {sector}: {self.dim} states)"


def sector_basis(ham: Hamiltonian, sector: Mapping[str, int] | None = None, *,
                 memory_budget: int | None = None) -> SectorBasis:
    """The basis of the Hamiltonian's target sector (or of ``sector``, overriding some charges).

    Raises
    ------
    SectorError
        If ``sector`` names a charge the Hamiltonian does not conserved, or the sector is empty.
    """
    target = dict(ham.sector)
    if sector:
        unknown = set(sector) - set(ham.conserved)
        if unknown:
            raise SectorError(
                f"sector names charge(s) {', '.join(sorted(unknown))} that the model does not conserved; "
                f"conserved: {', '.join(ham.conserved) or 'none'}"
            )
        target.update({k: int(v) for k, v in sector.items()})
    missing = [c for c in ham.conserved if c not in target]
    if missing:
        raise SectorError(
            f"no target value for conserved charge(s) {', '.join(missing)}; give them in the sector"
        )
    return SectorBasis(ham.space.charge_values(ham.conserved), ham.num_sites,
                       [target[c] for c in ham.conserved], names=ham.conserved, memory_budget=memory_budget)


# ----------------------------------------------------------------------------------------------
# compiled form of a list of local products
# ----------------------------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class _Pieces:
    """Monomial pieces in flat arrays, consecutive by group of equal image.

    Piece o owns factors op_ptr[o]:op_ptr[o+1]; ``last[o]`` is 1 on the last piece of a group.
    """

    op_ptr: np.ndarray
    site: np.ndarray
    dhi: np.ndarray
    dlo: np.ndarray
    amp: np.ndarray
    coef: np.ndarray
    last: np.ndarray
    verify: np.ndarray  # per piece (read at the group end): the image may fall outside the column basis
    source: np.ndarray  # per piece: index of its product

    @property
    def num_pieces(self) -> int:
        return int(self.op_ptr.size - 1)

    def arrays(self):
        return self.op_ptr, self.site, self.dhi, self.dlo, self.amp, self.coef


def _products_dtype(products: Sequence[LocalProduct]):
    for p in products:
        if np.imag(p.coefficient) != 0 or any(np.iscomplexobj(m) and np.any(np.imag(m)) for m in p.matrices):
            return np.dtype(np.complex128)
    return np.dtype(np.float64)


def _local_pieces(matrix: np.ndarray, d: int):
    """Pieces (shift, amplitudes over the input state) of the transpose of ``matrix``.

    The kernels fill row ``r`` of the operator from the images of state ``r`` under the transpose:
    the transpose sends ``r`` to ``c`` with amplitude ``M[r, c]``.
    """
    mat = np.asarray(matrix)
    if mat.shape != (d, d):
        raise OperatorError(f"local matrix of shape {mat.shape} on a site of dimension {d}")
    scale = float(np.max(np.abs(mat), initial=0.0))
    cols = np.arange(d)
    out = []
    for shift in range(d):
        amps = mat[cols, (cols + shift) % d].copy()
        amps[np.abs(amps) <= _PIECE_RTOL * scale] = 0
        if np.any(amps != 0):
            out.append((shift, amps))
    return out


def _lands_in(combo, charges: np.ndarray, needed: np.ndarray, d: int) -> bool:
    """True if the piece changes the charges by exactly ``needed`` on every state it does not kill."""
    total = np.zeros(charges.shape[1], np.int64)
    cols = np.arange(d)
    for shift, amps in combo:
        live = amps != 0
        change = np.unique(charges[(cols[live] + shift) % d] - charges[cols[live]], axis=0)
        if change.shape[0] != 1:
            return False
        total += change[0]
    return bool(np.array_equal(total, needed))


def _compile(products: Sequence[LocalProduct], rows: SectorBasis, cols: SectorBasis, split: int,
             dtype, keep: str = "all") -> _Pieces:
    """Compile products into grouped pieces (``keep``: "all", "diagonal" or "offdiagonal" groups).

    Pieces with the same shifted sites and shifts send each state to the same image, so they form
    one group whose amplitudes are summed before the lookup: duplicates never reach the matrix, and
    all diagonal pieces (no shift) make one group, the merged diagonal.
    A group whose pieces all change the charges by fixed amounts equal to ``needed`` (column
    sector minus row sector) always lands in the column basis and skips the confirmation.
    """
    num_sites, d = rows.num_sites, rows.local_dim
    charges = cols.local_charges
    needed = np.asarray(cols.target, np.int64) - np.asarray(rows.target, np.int64)
    lo_start = num_sites - split
    groups: dict[tuple, list] = {}
    for index, prod in enumerate(products):
        sites = tuple(int(s) for s in prod.sites)
        if len(sites) != len(prod.matrices):
            raise OperatorError(
                f"term {prod.origin or sites}: {len(sites)} sites but {len(prod.matrices)} matrices"
            )
        if any(s < 0 or s >= num_sites for s in sites) or any(b <= a for a, b in zip(sites, sites[1:])):
            raise OperatorError(
                f"term {prod.origin or sites}: sites must be strictly increasing in 0..{num_sites - 1}"
            )
        coef = complex(prod.coefficient)
        if dtype.kind != "c":
            coef = coef.real
        if coef == 0:
            continue
        per_site = [_local_pieces(m, d) for m in prod.matrices]
        if any(not p for p in per_site):
            continue  # a zero factor
        for combo in itertools.product(*per_site):
            signature = tuple((s, shift) for s, (shift, _) in zip(sites, combo) if shift)
            if keep == "all" or (keep == "diagonal") == (not signature):
                groups.setdefault(signature, []).append((index, coef, sites, combo))
    return _pack(groups, num_sites, d, lo_start, dtype, charges, needed)


def _pack(groups: dict, num_sites: int, d: int, lo_start: int, dtype, charges, needed) -> _Pieces:
    pieces = [p for key in sorted(groups) for p in groups[key]]
    nfac = sum(len(p[2]) for p in pieces)
    op_ptr = np.zeros(len(pieces) + 1, np.int64)
    site = np.zeros(nfac, np.int64)
    dhi = np.zeros((nfac, d), np.int64)
    dlo = np.zeros((nfac, d), np.int64)
    amp = np.zeros((nfac, d), dtype)
    coef = np.zeros(max(len(pieces), 1), dtype)  # never empty: the kernels read coef[0] for the zero
    last = np.zeros(len(pieces), np.int64)
    verify = np.zeros(len(pieces), np.int64)
    source = np.zeros(len(pieces), np.int64)
    cols = np.arange(d)
    o = f = 0
    for g, key in enumerate(sorted(groups)):
        check = any(not _lands_in(combo, charges, needed, d) for _, _, _, combo in groups[key])
        for index, c, sites, combo in groups[key]:
            coef[o] = c
            source[o] = index
            verify[o] = check
            for s, (shift, amps) in zip(sites, combo):
                step = ((cols + shift) % d) - cols
                site[f] = s
                if s >= lo_start:
                    dlo[f] = step * d ** (num_sites - 1 - s)
                else:
                    dhi[f] = step * d ** (lo_start - 1 - s)
                amp[f] = amps if dtype.kind == "c" else np.real(amps)
                f += 1
            o += 1
            op_ptr[o] = f
        last[o - 1] = 1
    return _Pieces(op_ptr, site, dhi, dlo, amp, coef, last, verify, source)


class _Action:
    """An operator between two sector bases in compiled form: CSR assembly and matrix-free products."""

    def __init__(self, products: Sequence[LocalProduct], rows: SectorBasis, cols: SectorBasis, *, dtype=None,
                 keep: str = "all"):
        if rows.num_sites != cols.num_sites or rows.local_dim != cols.local_dim:
            raise SectorError("the two bases belong to different systems (sites or local dimension differ)")
        self.products = tuple(products)
        self.rows = rows
        self.cols = cols
        self.dtype = np.dtype(dtype) if dtype is not None else _products_dtype(self.products)
        self.split, self.start, self.rank, self.use_tables = cols.lookup_tables()
        d = rows.local_dim
        self.dm = d**self.split
        self.dbits = int(d).bit_length() - 1 if d & (d - 1) == 0 and d > 1 else 0
        self.pieces = _compile(self.products, rows, cols, self.split, self.dtype, keep)
        self._counts = None
        self.leaked = np.zeros(0, np.int64)

    def _kernel_args(self, dtype=None):
        pieces = self.pieces
        arrays = pieces.arrays()
        if dtype is not None and np.dtype(dtype) != self.dtype:  # one compiled variant per dtype
            arrays = arrays[:4] + (pieces.amp.astype(dtype), pieces.coef.astype(dtype))
        return (self.rows.codes, self.rows.num_sites, self.rows.local_dim, self.dbits, self.dm,
                *arrays, pieces.last, pieces.verify, self.start, self.rank, self.cols.codes, self.use_tables)

    def counts(self) -> np.ndarray:
        """Stored entries per row; records the products whose images leave the column basis."""
        if self._counts is None:
            counts = np.zeros(self.rows.dim, np.int64)
            leaks = np.zeros(max(self.pieces.num_pieces, 1), np.int64)
            _kernels().count_kernel(*self._kernel_args(), counts, leaks)
            self._counts = counts
            self.leaked = np.unique(self.pieces.source[np.nonzero(leaks[: self.pieces.num_pieces])[0]])
        return self._counts

    def _index_dtype(self, nnz: int):
        return np.int32 if max(nnz, self.cols.dim, self.rows.dim) < 2**31 - 1 else np.int64

    def csr_bytes(self) -> int:
        nnz = int(self.counts().sum())
        idx = np.dtype(self._index_dtype(nnz)).itemsize
        return nnz * (self.dtype.itemsize + idx) + (self.rows.dim + 1) * idx

    def csr(self) -> sp.csr_matrix:
        counts = self.counts()
        nnz_bound = int(counts.sum())
        idx_dtype = self._index_dtype(nnz_bound)
        ptr = np.zeros(self.rows.dim + 1, idx_dtype)
        np.cumsum(counts, out=ptr[1:])
        ind = np.empty(nnz_bound, idx_dtype)
        val = np.empty(nnz_bound, self.dtype)
        lens = np.zeros(self.rows.dim, np.int64)
        _kernels().fill_kernel(*self._kernel_args(), ptr, ind, val, lens)
        nnz = int(lens.sum())
        if nnz < nnz_bound:  # only if the two passes rounded differently; kept for safety
            newptr = np.empty_like(ptr)
            _kernels().compact(ptr, lens, ind, val, newptr)
            ptr, ind, val = newptr, ind[:nnz].copy(), val[:nnz].copy()
        return sp.csr_matrix((val, ind, ptr), shape=(self.rows.dim, self.cols.dim), copy=False)

    def apply(self, x: np.ndarray) -> np.ndarray:
        out_dtype = np.result_type(self.dtype, np.asarray(x).dtype)
        x = np.ascontiguousarray(x, dtype=out_dtype)
        y = np.zeros(self.rows.dim, out_dtype)
        _kernels().apply_kernel(*self._kernel_args(out_dtype), x, y)
        return y


def _check_conserving(action: _Action, ham: Hamiltonian):
    action.counts()
    if action.leaked.size:
        prod = ham.products[int(action.leaked[0])]
        charges = ", ".join(ham.conserved)
        raise SpecError(
            f"term {prod.origin or prod.sites} does not conserved {charges}; fix the term or drop the charge "
            "from conserved"
        )

