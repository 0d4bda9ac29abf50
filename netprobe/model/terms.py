"""The Hamiltonian as a sum of coefficient times products of local operators.

A :class:`Term` lists (site, operator name) pairs in the order they are written: the product
``O_1 O_2 ... O_k`` acts with ``O_k`` first. Sites are MPS indices. Fermionic operators are the
physical ones, ``c_j = F_1 ... F_{j-1} a_j`` with ``F = (-1)^n`` (Jordan-Wigner in MPS order).

:func:`normal_form` turns a term into a :class:`LocalProduct`: a coefficient times one local matrix
per site, sorted by site, in the qubit (Jordan-Wigner) basis, with the strings written out. This is
the one place where fermion signs are handled (design notes, section 4):

1. Sort the operators by site (stable); each exchange of two odd operators on different sites
   flips the sign.
2. Multiply the operators on the same site in their written order.
3. Pair the odd sites in order, (p1, p2), (p3, p4), ...; the local matrix at the first member of
   each pair becomes ``a F`` and every site strictly between the two members gets ``F``. (From
   ``c_p c_q = (a_p F_p)(F_{p+1} ... F_{q-1}) a_q`` for p < q.)

Every engine (exact, MPO/DMRG, free-fermion) consumes these local products.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Iterable, Sequence

import numpy as np

from netprobe.errors import HermiticityError, OperatorError, SectorError
from netprobe.model.sites import SiteSpace, operator_parity

__all__ = ["Term", "LocalProduct", "Hamiltonian", "normal_form"]

_ATOL = 1e-12  # entries below this are structural zeros of exactly built operator matrices


@dataclass(frozen=True)
class Term:
    """Coefficient times a product of named local operators.

    Attributes
    ----------
    coefficient : complex
    operators : tuple of (int, str)
        (site, operator name) in written order; a name may be an on-site product ``a.b``.
    origin : str
        Where the term came from (model file entry and bond), for error messages.
    """

    coefficient: complex
    operators: tuple[tuple[int, str], ...]
    origin: str = ""


@dataclass(frozen=True, eq=False)
class LocalProduct:
    """A term in normal form: ``coefficient * prod_k matrices[k] acting on sites[k]``.

    ``sites`` is strictly increasing; the matrices are in the Jordan-Wigner qubit basis, strings
    included, identities left out. ``origin`` names the source term.
    """

    coefficient: complex
    sites: tuple[int, ...]
    matrices: tuple[np.ndarray, ...] = field(repr=False)
    origin: str = ""

    def adjoint(self, memo: dict | None = None) -> "LocalProduct":
        """The Hermitian conjugate (factor-wise, since the factors act on distinct sites).

        ``memo`` (a dict, optional) keeps the adjoint factors of each tuple of matrices met before, so
        that products sharing their matrices (one pattern, one string length) share their adjoints too.
        """
        mats = self.matrices
        if memo is not None:
            key = (len(mats), id(mats[0]), id(mats[-1])) if mats else ()
            for seen, adjoints in memo.get(key, ()):
                if _same_objects(seen, mats):
                    return LocalProduct(np.conj(self.coefficient), self.sites, adjoints, self.origin)
        # the shared string matrices are Hermitian: keep them by identity (cheap comparisons later)
        shared = {id(m) for m in _STRINGS.values()}
        adjoints = tuple(m if id(m) in shared else _adjoint(m) for m in mats)
        if memo is not None:
            memo.setdefault(key, []).append((mats, adjoints))
        return LocalProduct(np.conj(self.coefficient), self.sites, adjoints, self.origin)


def _same_objects(a: tuple, b: tuple) -> bool:
    """True if two tuples of matrices of equal length hold the same objects in the same order.

    Tuple equality compares elements by identity first; two different matrices reach
    ``ndarray.__eq__``, whose array result has no truth value (a ValueError): not the same.
    """
    try:
        return a is b or bool(a == b)
    except ValueError:
        return False


def _adjoint(mat: np.ndarray) -> np.ndarray:
    """``mat.conj().T``, shared for the matrices of the normal-form patterns."""
    entry = _ADJOINTS.get(id(mat))
    if entry is not None and entry[0] is mat:
        return entry[1]
    return mat.conj().T


def _proportional_to_identity(mat: np.ndarray):
    d = mat.shape[0]
    diag = np.diag(mat)
    if np.max(np.abs(mat - np.diag(diag)), initial=0.0) > _ATOL:
        return None
    if np.max(np.abs(diag - diag[0])) > _ATOL:
        return None
    return diag[0] if d else None


_STRINGS: dict[str, np.ndarray] = {}


def _kron(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``np.kron`` of two matrices without its general-purpose overhead (called once per term factor)."""
    return (a[:, None, :, None] * b[None, :, None, :]).reshape(a.shape[0] * b.shape[0], a.shape[1] * b.shape[1])


def _string_operator(space: SiteSpace) -> np.ndarray:
    """One shared, read-only F matrix per site space, so string factors compare by identity."""
    mat = _STRINGS.get(space.name)
    if mat is None:
        mat = space.string_operator
        mat.setflags(write=False)
        _STRINGS[space.name] = mat
    return mat


def normal_form(term: Term, space: SiteSpace) -> LocalProduct | None:
    """Bring a term into normal form (see the module notes); ``None`` if it vanishes.

    Terms that differ only in their sites, not in their operators or in the order of their sites,
    share one normal form up to where the strings run: it is worked out once (a :class:`_Pattern`)
    and placed on the sites of each such term.

    Raises
    ------
    OperatorError
        For an unknown operator, or a term that changes the fermion parity (such a term cannot
        appear in a Hamiltonian).
    """
    operators = term.operators
    if len(operators) == 2:  # the common case (hopping, exchange): the ranks without sorting
        (first, name0), (second, name1) = operators
        first, second = int(first), int(second)
        if first < second:
            distinct, ranks = [first, second], (0, 1)
        elif first > second:
            distinct, ranks = [second, first], (1, 0)
        else:
            distinct, ranks = [first], (0, 0)
        key = (id(space), (name0, name1), ranks)
    else:
        sites = [int(s) for s, _ in operators]
        distinct = sorted(set(sites))
        rank = {s: r for r, s in enumerate(distinct)}
        ranks = tuple(rank[s] for s in sites)
        key = (id(space), tuple(name for _, name in operators), ranks)
    pattern = _PATTERNS.get(key)
    if pattern is None:
        pattern = _Pattern.build(term, space, ranks)
        if len(_PATTERNS) >= _PATTERN_LIMIT:
            _PATTERNS.clear()
            _ADJOINTS.clear()
        _PATTERNS[key] = (pattern, space)  # the space is held so that its id stays unique
    else:
        pattern = pattern[0]
    return pattern.place(term, distinct)


_PATTERN_LIMIT = 4096  # distinct (operators, site order) patterns kept; models have a handful
_LAYOUT_LIMIT = 64  # string-length layouts kept per pattern (a cylinder's bonds have a few lengths)
_PATTERNS: dict[tuple, tuple["_Pattern", SiteSpace]] = {}
# adjoints of the pattern matrices, by id (the patterns hold the matrices, so the ids stay valid)
_ADJOINTS: dict[int, tuple[np.ndarray, np.ndarray]] = {}


@dataclass(frozen=True)
class _Pattern:
    """The normal form of a term on sites given by their ranks (0 for the lowest site, ...).

    ``kept`` lists (rank, matrix) of the factors that are not proportional to the identity, in
    site order, strings already multiplied in where a factor lies on or inside a string;
    ``pairs`` the rank pairs of odd factors whose strict interior carries ``F``; ``inside`` is True
    when a kept factor lies strictly inside a string (the sites are then merged one by one).
    """

    sign: int
    scales: tuple
    kept: tuple
    pairs: tuple
    inside: bool
    string: np.ndarray | None
    ends: dict = field(default_factory=dict, compare=False)  # rank of each pair's first member -> rank of its second
    # the matrix tuple of each tuple of string lengths met (one shared tuple for all such products)
    layouts: dict = field(default_factory=dict, compare=False)

    @classmethod
    def build(cls, term: Term, space: SiteSpace, ranks: tuple[int, ...]) -> "_Pattern":
        mats = [space.operator(name) for _, name in term.operators]
        parities = [operator_parity(space, m) for m in mats]
        if sum(parities) % 2:
            raise OperatorError(
                f"term {term.origin or term.operators} changes the fermion parity; a Hamiltonian term needs an "
                "even number of fermion operators"
            )
        sign = 1
        for a in range(len(ranks)):  # odd operators exchanged by the stable sort
            if parities[a]:
                for b in range(a + 1, len(ranks)):
                    if parities[b] and ranks[a] > ranks[b]:
                        sign = -sign
        order = sorted(range(len(ranks)), key=lambda k: ranks[k])
        grouped: dict[int, np.ndarray] = {}
        for k in order:
            r = ranks[k]
            grouped[r] = grouped[r] @ mats[k] if r in grouped else mats[k]
        scales, local = [], {}
        for r, mat in grouped.items():
            scale = _proportional_to_identity(mat)
            if scale is None:
                local[r] = mat
            else:
                scales.append(scale)
        odd = [r for r in sorted(local) if operator_parity(space, local[r])]
        fmat = _string_operator(space) if odd else None
        pairs = tuple(zip(odd[0::2], odd[1::2]))
        inside = False
        for p, q in pairs:
            local[p] = local[p] @ fmat
            for r in local:
                if p < r < q:
                    local[r] = local[r] @ fmat
                    inside = True
        kept = []
        for r in sorted(local):
            mat = np.asarray(local[r])
            if mat is fmat:
                kept.append((r, mat))
                continue
            mat = mat.copy()
            mat.setflags(write=False)
            adj = mat.conj().T
            adj.setflags(write=False)
            _ADJOINTS[id(mat)] = (mat, adj)
            kept.append((r, mat))
        return cls(sign, tuple(scales), tuple(kept), pairs, inside, fmat, dict(pairs))

    def place(self, term: Term, distinct: list[int]) -> LocalProduct | None:
        coefficient = complex(term.coefficient) * self.sign
        for scale in self.scales:
            coefficient *= scale
        if abs(coefficient) == 0.0:
            return None
        if not self.pairs:
            sites = tuple(distinct[r] for r, _ in self.kept)
            return LocalProduct(coefficient, sites, tuple(m for _, m in self.kept), term.origin)
        if self.inside:
            local = {distinct[r]: m for r, m in self.kept}
            for p, q in self.pairs:
                for s in range(distinct[p] + 1, distinct[q]):
                    local.setdefault(s, self.string)
            keep = sorted(local)
            return LocalProduct(coefficient, tuple(keep), tuple(local[s] for s in keep), term.origin)
        ends = self.ends
        sites, gaps = [], []
        for r, _ in self.kept:
            s = distinct[r]
            sites.append(s)
            q = ends.get(r)
            if q is not None and distinct[q] > s + 1:
                end = distinct[q]
                sites.extend(range(s + 1, end))
                gaps.append(end - s - 1)
            else:
                gaps.append(0)
        gaps = tuple(gaps)
        mats = self.layouts.get(gaps)
        if mats is None:
            listed = []
            for (_, m), gap in zip(self.kept, gaps):
                listed.append(m)
                listed.extend([self.string] * gap)
            mats = tuple(listed)
            if len(self.layouts) < _LAYOUT_LIMIT:
                self.layouts[gaps] = mats
        return LocalProduct(coefficient, tuple(sites), mats, term.origin)


def _any_complex(products) -> bool:
    """True if a coefficient or a matrix of the products has a nonzero imaginary part.

    Matrices shared between products (strings, normal-form patterns) are looked at once.
    """
    seen: set[int] = set()
    for p in products:
        if abs(np.imag(p.coefficient)) > 0:
            return True
        for m in p.matrices:
            if id(m) in seen:
                continue
            seen.add(id(m))
            if np.iscomplexobj(m) and np.any(np.imag(m)):
                return True
    return False


class Hamiltonian:
    """A Hamiltonian on a lattice: site space, terms, conserved charges and target sector.

    Parameters
    ----------
    lattice : Lattice
    space : SiteSpace
    products : sequence of LocalProduct
        Terms in normal form.
    conserved : tuple of str
        Names of the conserved charges used to block the problem (may be empty).
    sector : dict of str to int
        Target value of each conserved charge.
    """

    def __init__(self, lattice, space: SiteSpace, products: Sequence[LocalProduct], *,
                 conserved: tuple[str, ...] = (), sector: dict[str, int] | None = None):
        self.lattice = lattice
        self.space = space
        self.products = tuple(products)
        self.conserved = tuple(conserved)
        self.sector = dict(sector or {})
        # indices of products added as the exact adjoint of their neighbour (see from_terms): a
        # group of such pairs is Hermitian by construction, and check_hermitian passes over it
        self._paired: frozenset[int] = frozenset()
        self.is_complex = _any_complex(self.products)

    @classmethod
    def from_terms(cls, lattice, space: SiteSpace, terms: Iterable[Term], *, add_conjugate=(), **kwargs):
        """Build from written terms; ``add_conjugate`` holds the origins whose conjugates are added."""
        products, paired = [], []
        memo: dict = {}  # adjoint factors by tuple of matrices, for this call (it holds the tuples alive)
        for term in terms:
            prod = normal_form(term, space)
            if prod is None:
                continue
            products.append(prod)
            if term.origin in add_conjugate:
                paired.extend((len(products) - 1, len(products)))
                products.append(prod.adjoint(memo))
        ham = cls(lattice, space, products, **kwargs)
        ham._paired = frozenset(paired)
        return ham

    def with_sector(self, sector: dict[str, int]) -> "Hamiltonian":
        """The same Hamiltonian targeting another charge sector (e.g. N + 1 for a charge gap)."""
        unknown = set(sector) - set(self.conserved)
        if unknown:
            raise SectorError(
                f"charge(s) {', '.join(sorted(unknown))} not conserved; conserved: {', '.join(self.conserved) or 'none'}"
            )
        return Hamiltonian(self.lattice, self.space, self.products, conserved=self.conserved,
                           sector={**self.sector, **sector})

    @property
    def num_sites(self) -> int:
        """Number of lattice sites."""
        return self.lattice.num_sites

    @property
    def dtype(self):
        """complex128 if any coupling or matrix is complex, else float64."""
        return np.complex128 if self.is_complex else np.float64

    def check_hermitian(self, *, rtol: float = 1e-10) -> None:
        """Raise :class:`HermiticityError` naming a term whose Hermitian partner is missing.

        Terms are grouped by their support (sites with a non-identity factor); the sum in each
        group must be Hermitian on its own, which is sufficient for the whole. Factors common to
        every term of a group are split off first, so only the varying sites are made dense.
        """
        groups: dict[tuple[int, ...], list[LocalProduct]] = {}
        unpaired: set[tuple[int, ...]] = set()
        for i, p in enumerate(self.products):
            groups.setdefault(p.sites, []).append(p)
            if i not in self._paired:
                unpaired.add(p.sites)
        scale = max((abs(p.coefficient) for p in self.products), default=1.0) or 1.0
        string = _STRINGS.get(getattr(self.space, "name", None))
        string_id = id(string) if string is not None else None
        for support, prods in groups.items():
            if support not in unpaired:
                continue  # sums of a product and its adjoint (from_terms): Hermitian by construction
            varying = []
            # factors shared by identity (the string matrices) need no element-wise comparison
            ids = np.array([list(map(id, q.matrices)) for q in prods], dtype=np.uint64)
            shared = (ids == ids[0]).all(axis=0)
            skip = shared & (ids[0] == np.uint64(string_id)) if string_id is not None else np.zeros_like(shared)
            for k in np.flatnonzero(~skip).tolist():
                first = prods[0].matrices[k]
                common = shared[k] or all(np.array_equal(q.matrices[k], first) for q in prods[1:])
                if not common:
                    varying.append(k)
                elif first is not string and np.max(np.abs(first - first.conj().T)) > _ATOL:
                    # a common non-Hermitian factor X: the group is X (x) Y, Hermitian only if zero
                    varying.append(k)
            dense = 0
            for q in prods:
                mat = np.array([[q.coefficient]], dtype=complex)
                for k in varying:
                    mat = _kron(mat, q.matrices[k])
                dense = dense + mat
            dense = np.asarray(dense)
            if np.max(np.abs(dense - dense.conj().T), initial=0.0) > rtol * scale:
                culprit = prods[0].origin or f"on sites {support}"
                raise HermiticityError(
                    f"the Hamiltonian is not Hermitian: term {culprit} has no matching Hermitian conjugate; "
                    "add its conjugate (conjugate = true in the model file) or fix its coupling"
                )

    def __repr__(self) -> str:
        sector = ", ".join(f"{k}={v}" for k, v in self.sector.items()) or "no conserved charge"
        return f"Hamiltonian({len(self.products)} terms on {self.num_sites} sites, {self.space.name}, {sector})"
