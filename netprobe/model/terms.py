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

    def adjoint(self) -> "LocalProduct":
        """The Hermitian conjugate (factor-wise, since the factors act on distinct sites)."""
        # the shared string matrices are Hermitian: keep them by identity (cheap comparisons later)
        shared = {id(m) for m in _STRINGS.values()}
        return LocalProduct(
            np.conj(self.coefficient), self.sites,
            tuple(m if id(m) in shared else m.conj().T for m in self.matrices), self.origin
        )


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

    Raises
    ------
    OperatorError
        For an unknown operator, or a term that changes the fermion parity (such a term cannot
        appear in a Hamiltonian).
    """
    mats = [space.operator(name) for _, name in term.operators]
    sites = [int(s) for s, _ in term.operators]
    parities = [operator_parity(space, m) for m in mats]
    if sum(parities) % 2:
        raise OperatorError(
            f"term {term.origin or term.operators} changes the fermion parity; a Hamiltonian term needs an "
            "even number of fermion operators"
        )
    sign = 1
    for a in range(len(sites)):  # odd operators exchanged by the stable sort
        if parities[a]:
            for b in range(a + 1, len(sites)):
                if parities[b] and sites[a] > sites[b]:
                    sign = -sign
    order = sorted(range(len(sites)), key=lambda k: sites[k])
    grouped: dict[int, np.ndarray] = {}
    for k in order:
        s = sites[k]
        grouped[s] = grouped[s] @ mats[k] if s in grouped else mats[k]
    coefficient = complex(term.coefficient) * sign
    local = {}
    for s, mat in grouped.items():
        scale = _proportional_to_identity(mat)
        if scale is None:
            local[s] = mat
        else:
            coefficient *= scale
    if abs(coefficient) == 0.0:
        return None
    odd = [s for s in sorted(local) if operator_parity(space, local[s])]
    fmat = _string_operator(space)
    for p, q in zip(odd[0::2], odd[1::2]):
        local[p] = local[p] @ fmat
        for s in range(p + 1, q):
            local[s] = local[s] @ fmat if s in local else fmat
    keep = sorted(local)
    return LocalProduct(coefficient, tuple(keep), tuple(np.asarray(local[s]) for s in keep), term.origin)


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
        self.is_complex = any(
            abs(np.imag(p.coefficient)) > 0 or any(np.iscomplexobj(m) and np.any(np.imag(m)) for m in p.matrices)
            for p in self.products
        )

    @classmethod
    def from_terms(cls, lattice, space: SiteSpace, terms: Iterable[Term], *, add_conjugate=(), **kwargs):
        """Build from written terms; ``add_conjugate`` holds the origins whose conjugates are added."""
        products = []
        for term in terms:
            prod = normal_form(term, space)
            if prod is None:
                continue
            products.append(prod)
            if term.origin in add_conjugate:
                products.append(prod.adjoint())
        return cls(lattice, space, products, **kwargs)

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
        for p in self.products:
            groups.setdefault(p.sites, []).append(p)
        scale = max((abs(p.coefficient) for p in self.products), default=1.0) or 1.0
        string = _STRINGS.get(getattr(self.space, "name", None))
        for support, prods in groups.items():
            varying = []
            # factors shared by identity (the string matrices) need no element-wise comparison
            shared = [len(set(col)) == 1 for col in zip(*(map(id, q.matrices) for q in prods))]
            for k in range(len(support)):
                first = prods[0].matrices[k]
                if shared[k] and first is string:
                    continue
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
