"""Local site spaces: basis states, operator matrices, conserved charges and fermion parity.

A :class:`SiteSpace` is a small finite basis with named operator matrices. Each basis state carries
a value of every conserved charge the space knows ("N" for particle number, "twice_sz" for twice the
spin projection) and a fermion parity (0 even, 1 odd). Operators are plain dense matrices acting
on the local basis; fermionic operators are the on-site parts ``a_j`` of the Jordan-Wigner form
``c_j = F_1 ... F_{j-1} a_j`` with ``F = (-1)^n`` (see :mod:`netprobe.model.terms`).

Registered spaces (by name): ``spin-1/2``, ``spin-1``, ``fermion`` (spinless), ``spinful_fermion``
(spinful fermion), ``hardcore-boson``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Mapping

import numpy as np

from netprobe.errors import OperatorError, SpecError

__all__ = ["SiteSpace", "site_space", "SITE_SPACES", "operator_charge_change", "operator_parity",
           "count_sector_states"]


@dataclass(frozen=True, eq=False)
class SiteSpace:
    """A local Hilbert space with named operators.

    Parameters
    ----------
    name : str
        Registry name of the space.
    states : tuple of str
        Labels of the basis states, in basis order.
    operators : mapping of str to ndarray, shape (d, d)
        Named operator matrices acting on the local basis.
    charges : mapping of str to ndarray of int, shape (d,)
        Value of each conserved charge on each basis state.
    parity : ndarray of int, shape (d,)
        Fermion parity of each basis state (0 even, 1 odd); all zero for bosons and spins.
    flux_charge : str or None
        The charge that couples to a vector potential (Peierls phases). ``None`` if none does.
    flux_charge_scale : float
        Factor turning that charge into the coupling charge (0.5 for "twice_sz", so spins couple with Sz).
    """

    name: str
    states: tuple[str, ...]
    operators: Mapping[str, np.ndarray]
    charges: Mapping[str, np.ndarray]
    parity: np.ndarray
    flux_charge: str | None = None
    flux_charge_scale: float = 1.0
    description: str = field(default="")

    @property
    def dim(self) -> int:
        """Dimension of the local basis."""
        return len(self.states)

    @property
    def fermionic(self) -> bool:
        """True if some basis state is odd, i.e. the space needs Jordan-Wigner strings."""
        return bool(np.any(self.parity))

    @property
    def string_operator(self) -> np.ndarray:
        """The Jordan-Wigner string operator ``F = (-1)^n`` on this space (identity for bosons)."""
        return np.diag((-1.0) ** self.parity)

    def operator(self, name: str) -> np.ndarray:
        """Return the matrix of a named operator, or of a product written ``a.b`` (a applied after b).

        Raises
        ------
        OperatorError
            If a factor is not an operator of this space; the message lists the valid names.
        """
        factors = name.split(".")
        mat = np.eye(self.dim)
        for factor in factors:
            factor = factor.strip()
            if factor not in self.operators:
                raise OperatorError(
                    f"unknown operator '{factor}' for site space '{self.name}'; "
                    f"valid operators: {', '.join(sorted(self.operators))}"
                )
            mat = mat @ self.operators[factor]
        return mat

    def charge_values(self, conserved: tuple[str, ...]) -> np.ndarray:
        """Charges of each basis state for the chosen conserved quantities, shape (d, len(conserved)).

        Raises
        ------
        SpecError
            If a name is not a charge of this space.
        """
        for name in conserved:
            if name not in self.charges:
                valid = ", ".join(sorted(self.charges)) or "none"
                raise SpecError(
                    f"site space '{self.name}' has no conserved charge '{name}'; valid charges: {valid}"
                )
        if not conserved:
            return np.zeros((self.dim, 0), dtype=np.int64)
        return np.stack([np.asarray(self.charges[c], dtype=np.int64) for c in conserved], axis=1)

    def __repr__(self) -> str:
        charges = ", ".join(self.charges) or "none"
        return f"SiteSpace('{self.name}', dim={self.dim}, charges: {charges})"


def operator_charge_change(space: SiteSpace, matrix: np.ndarray, charge: str, *, atol: float = 1e-12):
    """The definite change of ``charge`` caused by ``matrix``, or ``None`` if it has none.

    An operator changes a charge definitely if every nonzero entry ``M[a, b]`` has the same
    ``q[a] - q[b]``. The zero matrix has change 0.
    """
    q = np.asarray(space.charges[charge])
    rows, cols = np.nonzero(np.abs(matrix) > atol)
    if rows.size == 0:
        return 0
    deltas = np.unique(q[rows] - q[cols])
    return int(deltas[0]) if deltas.size == 1 else None


def operator_parity(space: SiteSpace, matrix: np.ndarray, *, atol: float = 1e-12) -> int:
    """Fermion parity of an operator: 0 (even), 1 (odd).

    Raises
    ------
    OperatorError
        If the operator mixes even and odd parts; such an operator has no consistent
        Jordan-Wigner form.
    """
    rows, cols = np.nonzero(np.abs(matrix) > atol)
    if rows.size == 0:
        return 0
    flips = np.unique((space.parity[rows] + space.parity[cols]) % 2)
    if flips.size > 1:
        raise OperatorError(
            f"operator on site space '{space.name}' mixes fermion-even and fermion-odd parts; "
            "split it into an even and an odd term"
        )
    return int(flips[0])


def _freeze(mapping: dict) -> Mapping:
    for value in mapping.values():
        value.setflags(write=False)
    return MappingProxyType(mapping)


def _spin_space(twice_s: int) -> SiteSpace:
    s = twice_s / 2
    m = s - np.arange(twice_s + 1)  # basis |s, m> with m = s, s-1, ..., -s
    d = twice_s + 1
    sz = np.diag(m)
    sp = np.zeros((d, d))
    for k in range(1, d):  # S+ |m> = sqrt(s(s+1) - m(m+1)) |m+1>
        sp[k - 1, k] = np.sqrt(s * (s + 1) - m[k] * (m[k] + 1))
    sm = sp.T.copy()
    sx = (sp + sm) / 2
    sy = (sp - sm) / 2j
    ops = {"one": np.eye(d), "Sz": sz, "Sp": sp, "Sm": sm, "Sx": sx, "Sy": sy}
    if twice_s == 1:
        ops.update({"X": 2 * sx, "Y": 2 * sy, "Z": 2 * sz})  # Pauli matrices
        states = ("up", "down")
    else:
        ops.update({"Sz2": sz @ sz})
        states = tuple(f"m={mk:+g}" for mk in m)
    charges = {"twice_sz": np.rint(2 * m).astype(np.int64)}
    return SiteSpace(
        name=f"spin-{'1/2' if twice_s == 1 else int(s)}",
        states=states,
        operators=_freeze(ops),
        charges=_freeze(charges),
        parity=np.zeros(d, dtype=np.int64),
        flux_charge="twice_sz",
        flux_charge_scale=0.5,
        description="spin operators Sx, Sy, Sz, Sp, Sm (S = sigma/2)"
        + ("; Pauli X, Y, Z" if twice_s == 1 else "; Sz2 = Sz^2"),
    )


def _fermion_space() -> SiteSpace:
    # basis |0>, |1>; c|1> = |0>
    c = np.array([[0.0, 1.0], [0.0, 0.0]])
    ops = {"one": np.eye(2), "c": c, "cdag": c.T.copy(), "n": np.diag([0.0, 1.0]), "parity": np.diag([1.0, -1.0])}
    return SiteSpace(
        name="fermion",
        states=("empty", "occupied"),
        operators=_freeze(ops),
        charges=_freeze({"N": np.array([0, 1])}),
        parity=np.array([0, 1]),
        flux_charge="N",
        description="spinless fermion: c, cdag, n, parity = (-1)^n",
    )


def _spinful_fermion_space() -> SiteSpace:
    # basis |0>, |up>, |dn>, |up dn> = cdag_up cdag_dn |0> (up before down inside a site)
    c1 = np.array([[0.0, 1.0], [0.0, 0.0]])
    f1 = np.diag([1.0, -1.0])
    i1 = np.eye(2)
    # two modes per site in the order (up, dn): a_up = c1 x 1, a_dn = F_up x c1
    c_up = np.kron(c1, i1)
    c_dn = np.kron(f1, c1)
    # reorder the kron basis (n_up, n_dn) = 00, 01, 10, 11 to |0>, |up>, |dn>, |updn>
    perm = [0, 2, 1, 3]
    c_up = c_up[np.ix_(perm, perm)]
    c_dn = c_dn[np.ix_(perm, perm)]
    n_up = c_up.T @ c_up
    n_dn = c_dn.T @ c_dn
    ops = {
        "one": np.eye(4),
        "c_up": c_up,
        "c_dn": c_dn,
        "cdag_up": c_up.T.copy(),
        "cdag_dn": c_dn.T.copy(),
        "n_up": n_up,
        "n_dn": n_dn,
        "n": n_up + n_dn,
        "n_pair": n_up @ n_dn,
        "Sz": (n_up - n_dn) / 2,
        "Sp": c_up.T @ c_dn,
        "Sm": c_dn.T @ c_up,
        "parity": np.diag([1.0, -1.0, -1.0, 1.0]),
    }
    ops["Sx"] = (ops["Sp"] + ops["Sm"]) / 2
    ops["Sy"] = (ops["Sp"] - ops["Sm"]) / 2j
    return SiteSpace(
        name="spinful_fermion",
        states=("empty", "up", "down", "double"),
        operators=_freeze(ops),
        charges=_freeze({"N": np.array([0, 1, 1, 2]), "twice_sz": np.array([0, 1, -1, 0])}),
        parity=np.array([0, 1, 1, 0]),
        flux_charge="N",
        description="spinful fermion: c_up, c_dn, cdag_up, cdag_dn, n_up, n_dn, n, n_pair, Sx, Sy, Sz, Sp, Sm, parity",
    )


def _hardcore_boson_space() -> SiteSpace:
    b = np.array([[0.0, 1.0], [0.0, 0.0]])
    ops = {"one": np.eye(2), "b": b, "bdag": b.T.copy(), "n": np.diag([0.0, 1.0])}
    return SiteSpace(
        name="hardcore-boson",
        states=("empty", "occupied"),
        operators=_freeze(ops),
        charges=_freeze({"N": np.array([0, 1])}),
        parity=np.zeros(2, dtype=np.int64),
        flux_charge="N",
        description="hard-core boson: b, bdag, n",
    )


SITE_SPACES: Mapping[str, SiteSpace] = MappingProxyType(
    {
        "spin-1/2": _spin_space(1),
        "spin-1": _spin_space(2),
        "fermion": _fermion_space(),
        "spinful_fermion": _spinful_fermion_space(),
        "hardcore-boson": _hardcore_boson_space(),
    }
)


def site_space(name: str) -> SiteSpace:
    """Look up a registered site space by name.

    Raises
    ------
    SpecError
        If the name is unknown; the message lists the registered spaces.
    """
    try:
        return SITE_SPACES[name]
    except KeyError:
        raise SpecError(
            f"unknown site space '{name}'; valid site spaces: {', '.join(SITE_SPACES)}"
        ) from None


def count_sector_states(space: SiteSpace, num_sites: int, conserved: tuple[str, ...], sector: Mapping[str, int]) -> int:
    """Number of basis states of ``num_sites`` sites whose total charges equal ``sector``.

    Counted by convolving the local charge distribution site by site (no enumeration), so it is
    cheap for any size.
    """
    values = [tuple(row) for row in space.charge_values(conserved)]
    counts: dict[tuple[int, ...], int] = {(0,) * len(conserved): 1}
    for _ in range(num_sites):
        nxt: dict[tuple[int, ...], int] = {}
        for total, n in counts.items():
            for q in values:
                key = tuple(a + b for a, b in zip(total, q))
                nxt[key] = nxt.get(key, 0) + n
        counts = nxt
    return counts.get(tuple(int(sector[c]) for c in conserved), 0)
