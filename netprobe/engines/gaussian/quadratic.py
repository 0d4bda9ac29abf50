"""Quadratic forms of fermion Hamiltonians: the first stage of the free-fermion engine.

A Hamiltonian built from local products (:mod:`netprobe.model.terms`) on fermion, spinful_fermion, spin-1/2 or
hard-core boson sites is written in fermion modes (Jordan-Wigner in MPS order) and reduced to
``H = sum_ij c_i^dag h_ij c_j + (1/2) sum_ij (Delta_ij c_i^dag c_j^dag + h.c.) + constant``, or
refused with the term that is not quadratic. The engine's settings and error classes live here
too, since the extraction is the first stage that needs them; :mod:`netprobe.engines.gaussian` re-exports
them.

Extraction
----------
Each local matrix of a :class:`~netprobe.model.terms.LocalProduct` is written in the qubit basis of its
modes (one mode per ``fermion`` site; ``up`` then ``dn`` for ``spinful_fermion`` sites; one for
``spin-1/2`` and ``hardcore-boson`` sites) and split into single-mode monomials I, F, a, a^dag
(``F = 1 - 2n``, ``a|1> = |0>``). A product of monomials with odd letters on modes
``m_1 < ... < m_k`` and F letters on a set T equals, with ``c_m = F_0 ... F_{m-1} a_m``,
``(-1)^(k(k-1)/2) F_R c_m1 ... c_mk`` (daggers kept), where R is the symmetric difference of
T and the set of modes lying below an odd number of odd letters (moving the strings of the
later odd letters to the left past the earlier ones). It is quadratic exactly when k = 0 and
|T| <= 1, or k = 2 and T is the open interval between the two odd modes; then R = {m_1} and
``F_p c_p = c_p``, ``F_p c_p^dag = -c_p^dag`` give::

    a_p (F..) a_q  = -c_p c_q          a^dag_p (F..) a_q     = +c_p^dag c_q
    a_p (F..) a^dag_q = +c_q^dag c_p   a^dag_p (F..) a^dag_q = +c_p^dag c_q^dag

and ``F_l = 1 - 2 n_l``. With occupation along x for spins (``X = 1 - 2n``, ``Z = a + a^dag``)
this gives ``Z_i Z_(i+1) = (c_i^dag - c_i)(c_(i+1)^dag + c_(i+1))``.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from netprobe.errors import GaussianStateError, HermiticityError, NotQuadraticError
from netprobe.model.terms import _same_objects

__all__ = [
    "NotQuadraticError",
    "GaussianStateError",
    "GaussianOptions",
    "GAUSSIAN_ROUTES",
    "QuadraticForm",
    "quadratic_form",
]

_SPIN_AXES = ("z", "x", "y")
GAUSSIAN_ROUTES = ("auto", "dense", "momentum")


@dataclass(frozen=True, kw_only=True)
class GaussianOptions:
    """Settings of the free-fermion engine.

    Attributes
    ----------
    clip : float
        Eigenvalues of G_X (and (1 + i Gamma_X)/2) are clipped to [clip, 1 - clip] before the
        logarithms of a modular Hamiltonian; 1e-14 keeps ln within +-32.
    degeneracy_tol : float
        The ground state is refused as not unique when the last filled and the first empty level
        (or the smallest Majorana level) are closer than this.
    spin_axis : {'auto', 'z', 'x', 'y'}
        For spin-1/2 sites: the Pauli axis whose -1 eigenstate counts as an occupied mode. ``auto``
        tries z, x, y in turn and takes the first that makes the model quadratic.
    quadratic_rtol : float
        Left-over non-quadratic monomials below this fraction of the largest coupling are rounding.
    route : {'auto', 'dense', 'momentum'}
        How the ground state is diagonalised: ``dense`` (one eigendecomposition of the whole
        lattice), ``momentum`` (by momentum around the cylinder, :mod:`netprobe.engines.gaussian.momentum`;
        refused when the quadratic form is not translation invariant in y), or ``auto`` (momentum
        where the form is translation invariant, dense otherwise).
    """

    clip: float = 1e-14
    degeneracy_tol: float = 1e-10
    spin_axis: str = "auto"
    quadratic_rtol: float = 1e-12
    route: str = "auto"

    def __post_init__(self):
        if not 0.0 < self.clip < 0.5:
            raise GaussianStateError(f"GaussianOptions: clip must lie in (0, 0.5), got {self.clip!r}")
        if not self.degeneracy_tol >= 0.0:
            raise GaussianStateError(
                f"GaussianOptions: degeneracy_tol must be >= 0, got {self.degeneracy_tol!r}")
        if self.spin_axis not in ("auto",) + _SPIN_AXES:
            raise GaussianStateError(
                f"GaussianOptions: unknown spin_axis '{self.spin_axis}'; "
                f"valid: auto, {', '.join(_SPIN_AXES)}")
        if not 0.0 <= self.quadratic_rtol < 1e-3:
            raise GaussianStateError(
                f"GaussianOptions: quadratic_rtol must lie in [0, 1e-3), got {self.quadratic_rtol!r}")
        if self.route not in GAUSSIAN_ROUTES:
            raise GaussianStateError(
                f"GaussianOptions: unknown route '{self.route}'; valid: {', '.join(GAUSSIAN_ROUTES)}")


# ----------------------------------------------------------------------------------------------
# extraction of the quadratic form
# ----------------------------------------------------------------------------------------------

_I, _F, _A, _D = 0, 1, 2, 3  # single-mode monomials: identity, F = 1 - 2n, a, a^dag
# coefficients (I, F, a, a^dag) of a 2x2 matrix from its entries (M00, M01, M10, M11)
_TO_MONOMIALS = np.array([[0.5, 0, 0, 0.5], [0.5, 0, 0, -0.5], [0, 1, 0, 0], [0, 0, 1, 0]])
_MONOMIAL_RTOL = 1e-13


@dataclass(frozen=True)
class _ModeMap:
    """How a site space becomes modes: the unitary V with M_qubit = V M V^dag, modes per site."""

    modes_per_site: int
    to_qubits: np.ndarray
    label: str
    spin_like: bool


def _pauli_axis_map(axis: str) -> _ModeMap:
    s = 1 / math.sqrt(2)
    columns = {"z": np.eye(2), "x": np.array([[s, s], [s, -s]]),
               "y": np.array([[s, s], [1j * s, -1j * s]])}[axis]
    # qubit |0> = +1 eigenstate of the axis (empty), |1> = -1 eigenstate (occupied)
    return _ModeMap(1, columns.conj().T, f"spin-1/2 with occupation along {axis}", True)


def _mode_maps(space, options: GaussianOptions) -> list[_ModeMap]:
    if space.name == "fermion":
        return [_ModeMap(1, np.eye(2), "fermion", False)]
    if space.name == "spinful_fermion":
        perm = [0, 2, 1, 3]  # site basis (0, up, dn, updn) -> Kronecker basis (n_up, n_dn)
        v = np.zeros((4, 4))
        v[perm, np.arange(4)] = 1.0
        return [_ModeMap(2, v, "spinful_fermion (modes up, dn)", False)]
    if space.name == "hardcore-boson":
        return [_ModeMap(1, np.eye(2), "hard-core boson", True)]
    if space.name == "spin-1/2":
        axes = _SPIN_AXES if options.spin_axis == "auto" else (options.spin_axis,)
        return [_pauli_axis_map(a) for a in axes]
    raise NotQuadraticError(
        f"site space '{space.name}' has no free-fermion form; the Gaussian engine takes fermion, spinful_fermion, "
        "spin-1/2 and hardcore-boson sites (use the exact or DMRG engine)"
    )


def _site_monomials(matrix: np.ndarray, mode_map: _ModeMap):
    """Split a local matrix into ((coefficient, letters), ...) with one letter per mode of the site."""
    k = mode_map.modes_per_site
    v = mode_map.to_qubits
    q = v @ matrix @ v.conj().T
    t = q.reshape((2,) * (2 * k))
    t = t.transpose([x for pair in zip(range(k), range(k, 2 * k)) for x in pair]).reshape((4,) * k)
    for axis in range(k):
        t = np.moveaxis(np.tensordot(_TO_MONOMIALS, t, axes=([1], [axis])), 0, axis)
    scale = np.max(np.abs(t), initial=0.0)
    out = []
    for letters in zip(*np.nonzero(np.abs(t) > _MONOMIAL_RTOL * scale)):
        coef = complex(t[letters])
        out.append((coef, tuple(int(x) for x in letters)))
    return tuple(out)


@dataclass(frozen=True, eq=False)
class QuadraticForm:
    """``H = sum_ij c_i^dag h_ij c_j + (1/2) sum_ij (Delta_ij c_i^dag c_j^dag + h.c.) + constant``.

    Attributes
    ----------
    hopping : ndarray, shape (n, n)
        The Hermitian matrix h; modes in Jordan-Wigner order (site by site, ``up`` before ``dn``).
    pairing : ndarray, shape (n, n)
        The antisymmetric matrix Delta (zero for number-conserving models).
    constant : float
    num_sites, modes_per_site : int
    mapping : str
        How sites became modes (e.g. ``"spin-1/2 with occupation along x"``).
    site_rotation : ndarray, shape (d, d)
        The unitary V taking a site-basis matrix M to its qubit-basis form V M V^dag.
    spin_like : bool
        True for spin and boson sites: their reduced density matrices equal the fermionic ones only
        for sets contiguous in MPS order.
    name : str
    hopping_entries : (matrix, rows, cols, values) or None
        The nonzero entries of ``matrix`` in ``np.nonzero`` order, where the extraction has them (it
        builds h from them), so that the momentum route need not scan the dense matrix; read through
        :meth:`stored_hopping`, which ignores them unless ``matrix is hopping`` (a form copied with
        another hopping matrix by ``dataclasses.replace`` keeps stale ones).
    """

    hopping: np.ndarray = field(repr=False)
    pairing: np.ndarray = field(repr=False)
    constant: float
    num_sites: int
    modes_per_site: int
    mapping: str
    site_rotation: np.ndarray = field(repr=False)
    spin_like: bool = False
    name: str = ""
    hopping_entries: tuple | None = field(default=None, repr=False)

    def stored_hopping(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(rows, cols, values)`` of the nonzero entries of ``hopping``, in ``np.nonzero`` order."""
        if self.hopping_entries is not None and self.hopping_entries[0] is self.hopping:
            return self.hopping_entries[1:]
        rows, cols = np.nonzero(self.hopping)
        return rows, cols, self.hopping[rows, cols]

    @property
    def num_modes(self) -> int:
        """Number of fermion modes n."""
        return self.num_sites * self.modes_per_site

    @property
    def has_pairing(self) -> bool:
        """True if some Delta_ij is nonzero."""
        return bool(self.pairing.any())

    @property
    def is_complex(self) -> bool:
        """True if h or Delta has a nonzero imaginary part."""
        return bool(np.iscomplexobj(self.hopping) or np.iscomplexobj(self.pairing))

    def majorana_matrix(self) -> tuple[np.ndarray, float]:
        """``(W, shift)`` with ``H = (i/4) sum_pq W_pq g_p g_q + shift``, W real antisymmetric (2n x 2n).

        Notes
        -----
        With Nambu spinor psi = (c, c^dag) = Omega g, H = (1/2) psi^dag H_BdG psi + constant + Tr h / 2,
        H_BdG = [[h, Delta], [Delta^dag, -h^T]]; since Omega Omega^dag = 1/2, W = 2 Im(Omega^dag H_BdG
        Omega) and shift = constant + Tr h / 2.
        """
        n = self.num_modes
        h, d = self.hopping, self.pairing
        # Omega[a n + j, 2 j + alpha] = o[a, alpha]: the product Omega^dag H_BdG Omega, entry by entry
        o = np.array([[0.5, 0.5j], [0.5, -0.5j]])
        bdg = np.array([[h, d], [d.conj().T, -h.T]])
        w = 2 * np.einsum("aA,bB,abij->iAjB", o.conj(), o, bdg, optimize=True).reshape(2 * n, 2 * n).imag
        w = 0.5 * (w - w.T)
        return w, float(self.constant + 0.5 * np.trace(h).real)

    def __repr__(self) -> str:
        kind = "pairing" if self.has_pairing else "number-conserving"
        label = f"'{self.name}', " if self.name else ""
        return f"QuadraticForm({label}{self.num_modes} modes, {kind}, {self.mapping})"


class _Collector:
    """Sums of the physical monomials found while expanding the products.

    Monomials come one at a time (:meth:`add`) or as arrays for many products at once
    (:meth:`add_bilinears`); each carries the index of its product, and :meth:`finish` puts them
    back in product order, so that the sums are formed in the same order either way.
    """

    def __init__(self):
        self.constant = 0.0 + 0.0j
        self.hop = ([], [], [])
        self.cdcd = ([], [], [])  # c_p^dag c_q^dag, p < q
        self.cc = ([], [], [])  # c_p c_q, p < q
        self.other: dict[tuple, list] = {}
        self.scale = 0.0
        self._parts = {"constant": [], "hop": [], "cdcd": [], "cc": []}  # (product indices, p, q, values)
        self._pending = []  # (product index, coef, odd, fmodes, origin) of monomials that are not quadratic

    def _push(self, target, key, p, q, value):
        self._parts[target].append((np.array([key]), np.array([p]), np.array([q]), np.array([value])))

    def add(self, coef: complex, odd, fmodes, origin: str, key: int = 0):
        """Record one monomial of product ``key``: ``coef`` times the odd letters ``odd`` ((mode, letter),
        sorted) and F on the sorted modes ``fmodes``."""
        self.scale = max(self.scale, abs(coef))
        if not odd:
            if len(fmodes) == 0:
                self._push("constant", key, 0, 0, coef)
                return
            if len(fmodes) == 1:  # F_l = 1 - 2 n_l
                self._push("constant", key, 0, 0, coef)
                self._push("hop", key, int(fmodes[0]), int(fmodes[0]), -2 * coef)
                return
        elif len(odd) == 2:
            (p, lp), (q, lq) = odd
            inner = q - p - 1
            if len(fmodes) == inner and (inner == 0 or (fmodes[0] == p + 1 and fmodes[-1] == q - 1)):
                if lp == _A and lq == _A:
                    self._push("cc", key, p, q, -coef)
                elif lp == _D and lq == _A:
                    self._push("hop", key, p, q, coef)
                elif lp == _A and lq == _D:
                    self._push("hop", key, q, p, coef)
                else:
                    self._push("cdcd", key, p, q, coef)
                return
        self._pending.append((key, coef, odd, fmodes, origin))

    def _other(self, coef, odd, fmodes, origin):
        key = (tuple(odd), tuple(int(m) for m in fmodes))
        entry = self.other.get(key)
        if entry is None:
            self.other[key] = [coef, origin]
        else:
            entry[0] += coef

    def add_bilinears(self, keys, coefs, fmodes, odd, letters, products):
        """:meth:`add` for many products of one layout: ``odd`` (m, 2) modes with ``letters`` (2,),
        ``fmodes`` (m, nf) sorted, or ``odd`` (m, 0) for products of F letters only."""
        if keys.size == 0:
            return
        self.scale = max(self.scale, float(np.max(np.abs(coefs))))
        nf = fmodes.shape[1]
        if odd.shape[1] == 0:
            if nf > 1:
                bad = np.ones(keys.size, dtype=bool)
            else:
                bad = np.zeros(keys.size, dtype=bool)
                self._parts["constant"].append((keys, keys * 0, keys * 0, coefs))
                if nf == 1:
                    self._parts["hop"].append((keys, fmodes[:, 0], fmodes[:, 0], -2 * coefs))
        else:
            swap = odd[:, 0] > odd[:, 1]
            p = np.where(swap, odd[:, 1], odd[:, 0])
            q = np.where(swap, odd[:, 0], odd[:, 1])
            lp = np.where(swap, letters[1], letters[0])
            lq = np.where(swap, letters[0], letters[1])
            inner = q - p - 1
            if nf == 0:
                good = inner == 0
            else:
                good = (inner == nf) & (fmodes[:, 0] == p + 1) & (fmodes[:, -1] == q - 1)
            bad = ~good
            for target, pick, rows, cols, sign in (
                    ("cc", (lp == _A) & (lq == _A), p, q, -1),
                    ("hop", (lp == _D) & (lq == _A), p, q, 1),
                    ("hop", (lp == _A) & (lq == _D), q, p, 1),
                    ("cdcd", (lp == _D) & (lq == _D), p, q, 1)):
                pick = pick & good
                if pick.any():
                    values = -coefs[pick] if sign < 0 else coefs[pick]
                    self._parts[target].append((keys[pick], rows[pick], cols[pick], values))
        for row in np.flatnonzero(bad):  # not quadratic: recorded one by one, as :meth:`add` does
            pairs = sorted(zip(odd[row].tolist(), letters)) if odd.shape[1] else []
            self._pending.append((int(keys[row]), complex(coefs[row]), pairs, fmodes[row],
                                  products[int(keys[row])].origin))

    def finish(self):
        """Sort the monomials back into product order (stable) and form the sums' inputs."""
        for name, parts in self._parts.items():
            if not parts:
                continue
            keys, rows, cols, values = (np.concatenate(x) for x in zip(*parts))
            order = np.argsort(keys, kind="stable")
            if name == "constant":
                total = self.constant
                for value in values[order].tolist():  # one after the other, as the sum always ran
                    total += value
                self.constant = total
            else:
                setattr(self, name, (rows[order].tolist(), cols[order].tolist(), values[order].tolist()))
        for _, coef, odd, fmodes, origin in sorted(self._pending, key=lambda entry: entry[0]):
            self._other(coef, odd, fmodes, origin)
        self._parts, self._pending = {}, []
        return self

    def culprit(self, rtol: float) -> str | None:
        for coef, origin in self.other.values():
            if abs(coef) > rtol * max(self.scale, 1e-300):
                return origin or "(no origin recorded)"
        return None


@dataclass(frozen=True)
class _Layout:
    """How the products with one tuple of local matrices expand, worked out once for all of them.

    ``factors`` are (c, count) of the factors with one monomial each (count sites share the
    matrix); ``f_index``/``f_offset`` and ``odd_index``/``odd_offset``/``odd_letter`` give the F
    and odd letters as (position in the product's sites, mode offset); ``varying`` lists
    (position, monomials) of the factors with several monomials. ``vanishes``: a factor is zero.
    """

    factors: tuple
    f_index: np.ndarray
    f_offset: np.ndarray
    odd_index: np.ndarray
    odd_offset: np.ndarray
    odd_letter: tuple
    varying: tuple
    vanishes: bool


def _layout_of(matrices, mode_map: _ModeMap, cache: dict) -> _Layout:
    # group the positions by matrix content (the byte strings of float and complex d x d matrices
    # differ in length, so bytes are a key); strings repeat one matrix over many sites
    keys = list(map(np.ndarray.tobytes, matrices))
    index = {key: i for i, key in enumerate(dict.fromkeys(keys))}
    codes = np.fromiter(map(index.__getitem__, keys), dtype=np.int64, count=len(keys))
    k = mode_map.modes_per_site
    factors, f_index, f_offset, odd_index, odd_offset, odd_letter, varying = [], [], [], [], [], [], []
    for key, i in index.items():
        positions = np.flatnonzero(codes == i)
        dec = cache.get(key)
        if dec is None:
            dec = cache[key] = _site_monomials(matrices[positions[0]], mode_map)
        if not dec:
            return _Layout((), *(np.zeros(0, dtype=np.int64),) * 4, (), (), True)
        if len(dec) == 1:
            c, letters = dec[0]
            factors.append((c, positions.size))
            for offset, letter in enumerate(letters):
                if letter == _F:
                    f_index.append(positions)
                    f_offset.append(np.full(positions.size, offset))
                elif letter != _I:
                    odd_index.append(positions)
                    odd_offset.append(np.full(positions.size, offset))
                    odd_letter.extend([letter] * positions.size)
        else:
            varying.extend((int(p), dec) for p in positions)

    def cat(parts):
        return np.concatenate(parts).astype(np.int64) if parts else np.zeros(0, dtype=np.int64)

    return _Layout(tuple(factors), cat(f_index), cat(f_offset), cat(odd_index), cat(odd_offset),
                   tuple(odd_letter), tuple(varying), False)


def _collect(products, mode_map: _ModeMap) -> _Collector:
    """Expand every product into monomials of the physical modes and sum them (module notes).

    Products with the same local matrices (by identity: the normal forms of one model share them)
    share one :class:`_Layout`, and their modes are computed together, one array per layout.
    """
    col = _Collector()
    k = mode_map.modes_per_site
    cache: dict = {}
    layouts: dict[tuple, _Layout] = {}
    by_layout: dict[tuple, list[int]] = {}
    products = list(products)
    keys = []
    # a group's key is the matrices tuple of its first product (as the ids of its matrices); a product
    # joins a group found by length and end matrices if its tuple holds the same objects (tuple equality
    # tests identity first, without making a tuple of ids per product)
    candidates: dict[tuple, list[tuple]] = {}
    for i, prod in enumerate(products):
        mats = prod.matrices
        cheap = (len(mats), id(mats[0]), id(mats[-1])) if mats else (0,)
        key = None
        for first, first_key in candidates.get(cheap, ()):
            if _same_objects(mats, first):
                key = first_key
                break
        if key is None:
            key = tuple(map(id, mats))
            if key not in layouts:
                layouts[key] = _layout_of(mats, mode_map, cache)
            candidates.setdefault(cheap, []).append((mats, key))
        by_layout.setdefault(key, []).append(i)
        keys.append(key)
    # modes of the F and odd letters of every product, one array operation per layout
    expanded: list = [None] * len(products)
    for key, members in by_layout.items():
        lay = layouts[key]
        if lay.vanishes:
            continue
        width = len(products[members[0]].sites)  # one layout, one number of sites
        sites = np.fromiter(itertools.chain.from_iterable([products[i].sites for i in members]), dtype=np.int64,
                            count=len(members) * width).reshape(len(members), width)
        fmodes = np.sort(sites[:, lay.f_index] * k + lay.f_offset, axis=1)
        odd = sites[:, lay.odd_index] * k + lay.odd_offset
        if not lay.varying and odd.shape[1] in (0, 2):  # the common case, for all members at once
            coefs = np.array([complex(products[i].coefficient) for i in members], dtype=complex)
            for c, count in lay.factors:
                coefs = coefs * (c ** count)
            col.add_bilinears(np.array(members, dtype=np.int64), coefs, fmodes, odd, lay.odd_letter, products)
            continue
        for row, i in enumerate(members):
            expanded[i] = (fmodes[row], odd[row].tolist(), sites[row])
    for i, prod in enumerate(products):
        if expanded[i] is None:
            continue
        lay = layouts[keys[i]]
        fmodes, odd_modes, sites = expanded[i]
        coef = complex(prod.coefficient)
        for c, count in lay.factors:
            coef *= c ** count
        odd = list(zip(odd_modes, lay.odd_letter))
        if not lay.varying:
            odd.sort()
            col.add(coef, odd, fmodes, prod.origin, i)
            continue
        fparts = [fmodes] if fmodes.size else []
        for combo in itertools.product(*(dec for _, dec in lay.varying)):
            c_all = coef
            f_all = list(fparts)
            odd_all = list(odd)
            for (position, _), (c, letters) in zip(lay.varying, combo):
                c_all *= c
                base = int(sites[position]) * k
                for offset, letter in enumerate(letters):
                    if letter == _F:
                        f_all.append(np.array([base + offset]))
                    elif letter != _I:
                        odd_all.append((base + offset, letter))
            fmodes_all = np.sort(np.concatenate(f_all)) if f_all else np.zeros(0, dtype=np.int64)
            odd_all.sort()
            col.add(c_all, odd_all, fmodes_all, prod.origin, i)
    return col.finish()


def _dense(n: int, triples, dtype=complex) -> np.ndarray:
    out = np.zeros((n, n), dtype=dtype)
    if triples[0]:
        np.add.at(out, (np.array(triples[0]), np.array(triples[1])), np.array(triples[2]))
    return out


def _hermitian_part(n: int, triples, atol: float) -> tuple[bool, np.ndarray, tuple]:
    """``(max |h - h^dag| <= atol, (h + h^dag) / 2, its nonzero entries)`` for h summed from triples.

    Works on the stored entries only (the matrix is sparse): the same sums in the same order as
    the dense ``np.add.at`` and the same entry-wise arithmetic, so the result is identical to the
    dense computation; the dense matrix is written once at the end (real if no entry is complex).
    The entries are (rows, cols, values) in ``np.nonzero`` order.
    """
    if not triples[0]:
        empty = np.zeros(0, dtype=np.int64)
        return True, np.zeros((n, n)), (empty, empty, np.zeros(0))
    rows, cols = np.array(triples[0], dtype=np.int64), np.array(triples[1], dtype=np.int64)
    keys, inverse = np.unique(rows * n + cols, return_inverse=True)
    values = np.zeros(keys.size, dtype=complex)
    np.add.at(values, inverse.ravel(), np.array(triples[2], dtype=complex))
    # the pattern closed under transposition, with h and h^T read on it (zero where not stored)
    both = np.union1d(keys, (keys % n) * n + keys // n)
    transposed = (both % n) * n + both // n

    def read(at):
        pos = np.minimum(np.searchsorted(keys, at), keys.size - 1)
        return np.where(keys[pos] == at, values[pos], 0.0)

    v, vt = read(both), read(transposed)
    hermitian = bool(np.max(np.abs(v - vt.conj()), initial=0.0) <= atol)
    sym = 0.5 * (v + vt.conj())
    real = not np.any(sym.imag)
    out = np.zeros((n, n), dtype=float if real else complex)
    values = sym.real if real else sym
    out.ravel()[both] = values
    stored = values != 0
    at = both[stored]
    return hermitian, out, (at // n, at % n, values[stored])


def _maybe_real(mat: np.ndarray) -> np.ndarray:
    return mat.real.copy() if not np.any(mat.imag) else mat


def _model_hint(origin: str, model) -> str:
    """Which parameter to set to zero for a non-quadratic term (from the model description)."""
    spec = getattr(model, "spec", None)
    for entry in getattr(spec, "terms", ()):
        if origin.startswith(entry.label):
            names = sorted(entry.coupling.names)
            if len(names) == 1:
                return f" (set {names[0]} = 0)"
            return f" (make its coupling '{entry.coupling.text}' vanish)"
    return " (remove it, or use the exact or DMRG engine)"


def quadratic_form(hamiltonian, *, name: str = "", options: GaussianOptions | None = None,
                   model=None) -> QuadraticForm:
    """Extract the quadratic form of a Hamiltonian built from local products.

    Parameters
    ----------
    hamiltonian : Hamiltonian
        Terms in normal form (:mod:`netprobe.model.terms`), on fermion, spinful_fermion, spin-1/2 or hard-core
        boson sites.
    name : str
        Model name for messages.
    options : GaussianOptions, optional
    model : Model, optional
        The model the Hamiltonian came from; used only to name the coupling in error messages.

    Returns
    -------
    QuadraticForm

    Raises
    ------
    NotQuadraticError
        If a monomial of degree other than 0 or 2 survives (for spins: along every axis tried); the
        message names the term.
    HermiticityError
        If the extracted h or Delta break Hermiticity.

    Notes
    -----
    See the module notes for the monomial rules; the Jordan-Wigner order is the MPS order.
    """
    options = options or GaussianOptions()
    name = name or getattr(model, "name", "")
    label = f"model '{name}'" if name else "the Hamiltonian"
    space = hamiltonian.space
    maps = _mode_maps(space, options)
    if space.name == "spin-1/2" and "twice_sz" in getattr(hamiltonian, "conserved", ()):
        maps = [m for m in maps if m.label.endswith("along z")]  # twice_sz must be the particle number
        if not maps:
            raise GaussianStateError(
                f"{label} conserves twice_sz, which is a particle number only with occupation along z; "
                "use spin_axis='z' or 'auto'")
    failures = []
    for mode_map in maps:
        col = _collect(hamiltonian.products, mode_map)
        culprit = col.culprit(options.quadratic_rtol)
        if culprit is not None:
            failures.append((mode_map, culprit))
            continue
        n = hamiltonian.num_sites * mode_map.modes_per_site
        scale = max(col.scale, 1.0)
        hermitian, h, entries = _hermitian_part(n, col.hop, 1e-10 * scale)
        if col.cdcd[0] or col.cc[0]:
            cdcd = _dense(n, col.cdcd)
            cc = _dense(n, col.cc)
            hermitian = hermitian and np.max(np.abs(cc + cdcd.conj()), initial=0.0) <= 1e-10 * scale
            pairing = _maybe_real(0.5 * ((cdcd - cdcd.T) - (cc - cc.T).conj()))
        else:
            pairing = np.zeros((n, n))
        if not hermitian:
            raise HermiticityError(
                f"{label}: the quadratic form is not Hermitian; add the conjugate of every hopping and "
                "pairing term (conjugate = true)")
        for arr in (h, pairing):
            arr.setflags(write=False)
        return QuadraticForm(h, pairing, float(col.constant.real), hamiltonian.num_sites,
                             mode_map.modes_per_site, mode_map.label, mode_map.to_qubits,
                             mode_map.spin_like, name, (h, *entries))
    if len(failures) == 1:
        origin = failures[0][1]
        extra = "" if not failures[0][0].spin_like else " after Jordan-Wigner in MPS order"
        raise NotQuadraticError(f"{label} is not quadratic{extra}: term {origin}{_model_hint(origin, model)}")
    tried = "; ".join(f"along {m.label[-1]}: term {origin}" for m, origin in failures)
    raise NotQuadraticError(
        f"{label} is not quadratic after Jordan-Wigner in MPS order with occupation along any spin axis "
        f"({tried}); use the exact or DMRG engine")
