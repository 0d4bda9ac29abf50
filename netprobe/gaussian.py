"""Free-fermion (Gaussian) engine: quadratic Hamiltonians, their ground states and entanglement probes.

A model whose Hamiltonian is quadratic in fermion operators (after Jordan-Wigner in MPS order for
spin-1/2 and hard-core boson sites) has a Gaussian ground state, fixed by its one-body correlation
matrix. Every probe of the other engines (entropies, mutual information, conditional mutual
information, the Kitaev-Preskill combination, the modular commutator) then costs O(n^3) in the size
n of the region instead of exponential, and the real-space Chern number comes for free.

Stages
------
Extraction (:func:`quadratic_form`)
    Each local matrix of a :class:`~netprobe.terms.LocalProduct` is written in the qubit basis of its
    modes (one mode per ``fermion`` site; ``up`` then ``dn`` for ``electron`` sites; one for
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
Number-conserving ground state (:class:`FreeFermionState`)
    ``G_ij = <c_j^dag c_i>``, the projector on the filled levels (the sector's N lowest levels).
Pairing ground state (:class:`MajoranaState`)
    Majoranas ``g_2j = c_j + c_j^dag``, ``g_2j+1 = -i (c_j - c_j^dag)``, covariance
    ``Gamma_pq = (i/2) <[g_p, g_q]>``; for ``H = (i/4) g^T W g + const``, ``Gamma = i sign(i W)``.

Sign conventions of the probes (pinned by tests against the exact engine): with A, B, C
counterclockwise, J(A, B, C) = i Tr(rho_ABC [K_AB, K_BC]) and the real-space Chern number are
both positive for ``chern_square`` at 0 < m < 2, and for ``haldane`` at phi = +pi/2 both are
negative (the Chern number follows -sign(sin phi) in the bundled model's conventions).

Eigenvalue clipping: entropies use the eigenvalues of G_X (or (1 + i Gamma_X)/2) clipped to
[0, 1] with 0 ln 0 = 0, which is exact; modular Hamiltonians need logarithms and use
[clip, 1 - clip] with ``clip = 1e-14`` by default (:class:`GaussianOptions`), reported in every
state's ``repr``.
"""

from __future__ import annotations

import itertools
import math
import operator
from dataclasses import dataclass, field
from typing import Iterable, Sequence

import numpy as np
import scipy.linalg
from scipy.special import entr

from netprobe.errors import GaussianStateError, HermiticityError, LatticeError, NotQuadraticError

__all__ = [
    "GaussianOptions",
    "QuadraticForm",
    "quadratic_form",
    "FreeFermionState",
    "MajoranaState",
    "gaussian_state",
    "peschel_entropy",
    "majorana_entropy",
    "fermion_modular_matrix",
    "majorana_modular_matrix",
    "fermion_modular_commutator",
    "majorana_modular_commutator",
    "real_space_chern_number",
]


_SPIN_AXES = ("z", "x", "y")


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
    """

    clip: float = 1e-14
    degeneracy_tol: float = 1e-10
    spin_axis: str = "auto"
    quadratic_rtol: float = 1e-12

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
    if space.name == "electron":
        perm = [0, 2, 1, 3]  # site basis (0, up, dn, updn) -> Kronecker basis (n_up, n_dn)
        v = np.zeros((4, 4))
        v[perm, np.arange(4)] = 1.0
        return [_ModeMap(2, v, "electron (modes up, dn)", False)]
    if space.name == "hardcore-boson":
        return [_ModeMap(1, np.eye(2), "hard-core boson", True)]
    if space.name == "spin-1/2":
        axes = _SPIN_AXES if options.spin_axis == "auto" else (options.spin_axis,)
        return [_pauli_axis_map(a) for a in axes]
    raise NotQuadraticError(
        f"site space '{space.name}' has no free-fermion form; the Gaussian engine takes fermion, electron, "
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
        bdg = np.block([[h, d], [d.conj().T, -h.T]])
        omega = np.zeros((2 * n, 2 * n), dtype=complex)
        j = np.arange(n)
        omega[j, 2 * j] = 0.5
        omega[j, 2 * j + 1] = 0.5j
        omega[n + j, 2 * j] = 0.5
        omega[n + j, 2 * j + 1] = -0.5j
        w = 2 * (omega.conj().T @ bdg @ omega).imag
        w = 0.5 * (w - w.T)
        return w, float(self.constant + 0.5 * np.trace(h).real)

    def __repr__(self) -> str:
        kind = "pairing" if self.has_pairing else "number-conserving"
        label = f"'{self.name}', " if self.name else ""
        return f"QuadraticForm({label}{self.num_modes} modes, {kind}, {self.mapping})"


class _Collector:
    """Sums of the physical monomials found while expanding the products."""

    def __init__(self):
        self.constant = 0.0 + 0.0j
        self.hop = ([], [], [])
        self.cdcd = ([], [], [])  # c_p^dag c_q^dag, p < q
        self.cc = ([], [], [])  # c_p c_q, p < q
        self.other: dict[tuple, list] = {}
        self.scale = 0.0

    @staticmethod
    def _push(target, p, q, value):
        target[0].append(p)
        target[1].append(q)
        target[2].append(value)

    def add(self, coef: complex, odd, fmodes, origin: str):
        self.scale = max(self.scale, abs(coef))
        if not odd:
            if len(fmodes) == 0:
                self.constant += coef
                return
            if len(fmodes) == 1:  # F_l = 1 - 2 n_l
                self.constant += coef
                self._push(self.hop, int(fmodes[0]), int(fmodes[0]), -2 * coef)
                return
        elif len(odd) == 2:
            (p, lp), (q, lq) = odd
            inner = q - p - 1
            if len(fmodes) == inner and (inner == 0 or (fmodes[0] == p + 1 and fmodes[-1] == q - 1)):
                if lp == _A and lq == _A:
                    self._push(self.cc, p, q, -coef)
                elif lp == _D and lq == _A:
                    self._push(self.hop, p, q, coef)
                elif lp == _A and lq == _D:
                    self._push(self.hop, q, p, coef)
                else:
                    self._push(self.cdcd, p, q, coef)
                return
        key = (tuple(odd), tuple(int(m) for m in fmodes))
        entry = self.other.get(key)
        if entry is None:
            self.other[key] = [coef, origin]
        else:
            entry[0] += coef

    def culprit(self, rtol: float) -> str | None:
        for coef, origin in self.other.values():
            if abs(coef) > rtol * max(self.scale, 1e-300):
                return origin or "(no origin recorded)"
        return None


def _collect(products, mode_map: _ModeMap) -> _Collector:
    col = _Collector()
    k = mode_map.modes_per_site
    cache: dict = {}
    empty = np.zeros(0, dtype=np.int64)
    for prod in products:
        # strings repeat one matrix over many sites: group the sites by matrix content first
        # (the byte strings of float and complex d x d matrices differ in length, so bytes are a key)
        keys = list(map(np.ndarray.tobytes, prod.matrices))
        index = {key: i for i, key in enumerate(dict.fromkeys(keys))}
        codes = np.fromiter(map(index.__getitem__, keys), dtype=np.int64, count=len(keys))
        sites = np.asarray(prod.sites, dtype=np.int64)
        coef = complex(prod.coefficient)
        fparts, odd, varying = [], [], []
        for key, i in index.items():
            positions = np.flatnonzero(codes == i)
            dec = cache.get(key)
            if dec is None:
                dec = cache[key] = _site_monomials(prod.matrices[positions[0]], mode_map)
            if not dec:
                break
            where = sites[positions] * k
            if len(dec) == 1:
                c, letters = dec[0]
                coef *= c ** where.size
                for offset, letter in enumerate(letters):
                    if letter == _F:
                        fparts.append(where + offset)
                    elif letter != _I:
                        odd.extend((int(m), letter) for m in where + offset)
            else:
                varying.extend((int(base), dec) for base in where)
        else:
            for combo in itertools.product(*(dec for _, dec in varying)):
                c_all = coef
                f_all = list(fparts)
                odd_all = list(odd)
                for (base, _), (c, letters) in zip(varying, combo):
                    c_all *= c
                    for offset, letter in enumerate(letters):
                        if letter == _F:
                            f_all.append(np.array([base + offset]))
                        elif letter != _I:
                            odd_all.append((base + offset, letter))
                fmodes = np.sort(np.concatenate(f_all)) if f_all else empty
                odd_all.sort()
                col.add(c_all, odd_all, fmodes, prod.origin)
    return col


def _dense(n: int, triples, dtype=complex) -> np.ndarray:
    out = np.zeros((n, n), dtype=dtype)
    if triples[0]:
        np.add.at(out, (np.array(triples[0]), np.array(triples[1])), np.array(triples[2]))
    return out


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
        Terms in normal form (:mod:`netprobe.terms`), on fermion, electron, spin-1/2 or hard-core
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
    if space.name == "spin-1/2" and "2Sz" in getattr(hamiltonian, "conserve", ()):
        maps = [m for m in maps if m.label.endswith("along z")]  # 2Sz must be the particle number
        if not maps:
            raise GaussianStateError(
                f"{label} conserves 2Sz, which is a particle number only with occupation along z; "
                "use spin_axis='z' or 'auto'")
    failures = []
    for mode_map in maps:
        col = _collect(hamiltonian.products, mode_map)
        culprit = col.culprit(options.quadratic_rtol)
        if culprit is not None:
            failures.append((mode_map, culprit))
            continue
        n = hamiltonian.num_sites * mode_map.modes_per_site
        h = _dense(n, col.hop)
        scale = max(col.scale, 1.0)
        hermitian = np.max(np.abs(h - h.conj().T), initial=0.0) <= 1e-10 * scale
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
        h = _maybe_real(0.5 * (h + h.conj().T))
        for arr in (h, pairing):
            arr.setflags(write=False)
        return QuadraticForm(h, pairing, float(col.constant.real), hamiltonian.num_sites,
                             mode_map.modes_per_site, mode_map.label, mode_map.to_qubits,
                             mode_map.spin_like, name)
    if len(failures) == 1:
        origin = failures[0][1]
        extra = "" if not failures[0][0].spin_like else " after Jordan-Wigner in MPS order"
        raise NotQuadraticError(f"{label} is not quadratic{extra}: term {origin}{_model_hint(origin, model)}")
    tried = "; ".join(f"along {m.label[-1]}: term {origin}" for m, origin in failures)
    raise NotQuadraticError(
        f"{label} is not quadratic after Jordan-Wigner in MPS order with occupation along any spin axis "
        f"({tried}); use the exact or DMRG engine")


# ----------------------------------------------------------------------------------------------
# kernels
# ----------------------------------------------------------------------------------------------


def _eigh(mat: np.ndarray):
    # the relatively robust representations driver: for complex matrices of order ~1000-3000 it ran
    # 2-3x faster than the divide-and-conquer default in our measurements, at the same accuracy
    return scipy.linalg.eigh(mat, driver="evr", check_finite=False)


def peschel_entropy(occupations: np.ndarray, order: float = 1.0) -> float:
    """Entropy of a Gaussian state from the eigenvalues ``nu`` of its correlation matrix G_X.

    ``S = -sum [nu ln nu + (1 - nu) ln(1 - nu)]``; Renyi ``S_n = sum ln(nu^n + (1 - nu)^n) / (1 - n)``
    (Peschel, J. Phys. A 36, L205 (2003)).
    """
    nu = np.clip(occupations, 0.0, 1.0)
    if order == 1.0:
        return float(np.sum(entr(nu) + entr(1.0 - nu)))
    return float(np.sum(np.log(nu**order + (1.0 - nu) ** order)) / (1.0 - order))


def majorana_entropy(spectrum: np.ndarray, order: float = 1.0) -> float:
    """Entropy from the eigenvalues ``+-nu_k`` of ``i Gamma_X`` (each pair counted once).

    ``S = -sum_k [p_k ln p_k + q_k ln q_k]``, ``p, q = (1 +- nu_k)/2`` (Vidal, Latorre, Rico,
    Kitaev, PRL 90, 227902 (2003)).
    """
    return 0.5 * peschel_entropy(0.5 * (1.0 + np.asarray(spectrum)), order)


def _fermion_log_weights(vals: np.ndarray, clip: float) -> np.ndarray:
    vals = np.clip(vals, clip, 1.0 - clip)
    return np.log((1.0 - vals) / vals)


def _majorana_log_weights(vals: np.ndarray, clip: float) -> np.ndarray:
    return 2j * np.arctanh(np.clip(vals, -1.0 + 2 * clip, 1.0 - 2 * clip))


def fermion_modular_matrix(g: np.ndarray, clip: float) -> np.ndarray:
    """``h = ln[(1 - G) G^-1]`` through eigh, eigenvalues clipped to [clip, 1 - clip]."""
    vals, vecs = _eigh(g)
    return (vecs * _fermion_log_weights(vals, clip)) @ vecs.conj().T


def majorana_modular_matrix(gamma: np.ndarray, clip: float) -> np.ndarray:
    """``W = 2i artanh(i Gamma)`` (real antisymmetric) through eigh of ``i Gamma``.

    The eigenvalues ``lambda`` of ``i Gamma`` are clipped so that ``(1 + lambda)/2`` lies in
    [clip, 1 - clip].
    """
    vals, vecs = _eigh(1j * gamma)
    return ((vecs * _majorana_log_weights(vals, clip)) @ vecs.conj().T).real


def _function_slice(vecs, weights, rows=None, cols=None):
    """Rows or columns of ``V diag(w) V^dag`` without forming the rest."""
    if cols is not None:
        return (vecs * weights) @ vecs[cols].conj().T
    return (vecs[rows] * weights) @ vecs.conj().T


def fermion_modular_commutator(g: np.ndarray, sizes: tuple[int, int, int], clip: float) -> float:
    """``J = i Tr(G [h_AB + 0_C, 0_A + h_BC])`` for G ordered A|B|C with the given block sizes.

    With ``x = Tr(G h_AB h_BC)``, Hermiticity gives ``J = -2 Im x``; only the B columns of h_AB and
    the B rows of h_BC meet, so x needs those slices and one product of off-diagonal blocks.
    """
    na, nb, nc = sizes
    vals, vecs = _eigh(g[: na + nb, : na + nb])
    h_ab_b = _function_slice(vecs, _fermion_log_weights(vals, clip), cols=slice(na, na + nb))
    vals, vecs = _eigh(g[na:, na:])
    h_bc_b = _function_slice(vecs, _fermion_log_weights(vals, clip), rows=slice(0, nb))
    x = np.sum((g[na:, : na + nb] @ h_ab_b) * h_bc_b.T)
    return float(-2.0 * np.imag(x))


def majorana_modular_commutator(gamma: np.ndarray, sizes: tuple[int, int, int], clip: float) -> float:
    """``J = (1/4) Tr(Gamma [W_AB + 0, 0 + W_BC])`` for Gamma ordered A|B|C (sizes in Majoranas).

    Notes
    -----
    For ``Q_A = (i/4) g^T A g``, ``[Q_A, Q_B] = i Q_[A,B]`` and ``<Q_C> = -(1/4) Tr(C Gamma)``, so
    ``i <[K_AB, K_BC]> = (1/4) Tr(Gamma [W_AB, W_BC])`` with ``K_X = Q_(W^X)``. Real antisymmetry
    makes the two orders of the commutator equal and opposite: ``J = (1/2) Tr(Gamma W_AB W_BC)``.
    """
    na, nb, nc = sizes
    vals, vecs = _eigh(1j * gamma[: na + nb, : na + nb])
    w_ab_b = _function_slice(vecs, _majorana_log_weights(vals, clip), cols=slice(na, na + nb)).real
    vals, vecs = _eigh(1j * gamma[na:, na:])
    w_bc_b = _function_slice(vecs, _majorana_log_weights(vals, clip), rows=slice(0, nb)).real
    return float(0.5 * np.sum((gamma[na:, : na + nb] @ w_ab_b) * w_bc_b.T))


def real_space_chern_number(p: np.ndarray, a: np.ndarray, b: np.ndarray, c: np.ndarray) -> float:
    """``nu = 12 pi i sum_{j in A, k in B, l in C} (P_jk P_kl P_lj - P_jl P_lk P_kj)``.

    The first sum is ``t = Tr(P_AB P_BC P_CA)``, the second its complex conjugate (P is Hermitian),
    so ``nu = -24 pi Im t`` (Kitaev, Annals of Physics 321, 2 (2006), appendix).
    """
    t = np.sum((p[np.ix_(a, b)] @ p[np.ix_(b, c)]) * p[np.ix_(c, a)].T)
    return float(-24.0 * math.pi * np.imag(t))


# ----------------------------------------------------------------------------------------------
# ground states and probes
# ----------------------------------------------------------------------------------------------


def _site_indices(sites, num_sites: int, what: str) -> np.ndarray:
    try:
        arr = np.array([operator.index(s) for s in sites], dtype=np.int64)
    except (TypeError, ValueError):
        raise LatticeError(
            f"{what}: sites must be a list of integer lattice site indices, got {sites!r}") from None
    bad = arr[(arr < 0) | (arr >= num_sites)]
    if bad.size:
        raise LatticeError(
            f"{what} contains site {int(bad[0])}; the lattice has {num_sites} sites (0 to {num_sites - 1})")
    if np.unique(arr).size != arr.size:
        values, counts = np.unique(arr, return_counts=True)
        raise LatticeError(f"{what} lists site {int(values[counts > 1][0])} twice; give each site once")
    return arr


class _Probes:
    """Probes shared by the two Gaussian states; subclasses supply the spectra and the J kernel.

    Regions are lists of lattice site indices (MPS order); a site brings all its modes.
    """

    num_sites: int
    clip: float
    spin_like: bool
    _units_per_site: int

    def _units(self, sites: np.ndarray) -> np.ndarray:
        u = self._units_per_site
        return (sites[:, None] * u + np.arange(u)[None, :]).ravel()

    def _check(self, sites, what: str) -> np.ndarray:
        return _site_indices(sites, self.num_sites, what)

    def _check_contiguous(self, arr: np.ndarray, what: str):
        if self.spin_like and arr.size and arr.max() - arr.min() + 1 != arr.size:
            raise LatticeError(
                f"{what} is not contiguous in MPS order; for spin and boson sites the Gaussian engine gives "
                "the physical reduced state only for contiguous sets (use the exact or DMRG engine)")

    def _regions(self, named: Sequence[tuple[str, object]]) -> list[np.ndarray]:
        out = [self._check(sites, label) for label, sites in named]
        for (la, a), (lb, b) in itertools.combinations(zip([n for n, _ in named], out), 2):
            common = np.intersect1d(a, b)
            if common.size:
                raise LatticeError(
                    f"regions {la} and {lb} share site {int(common[0])}; give disjoint regions")
        return out

    def _spectrum_entropy(self, units: np.ndarray, order: float) -> float:
        raise NotImplementedError

    def _set_entropy(self, arr: np.ndarray, order: float, what: str) -> float:
        if arr.size == 0:
            return 0.0
        self._check_contiguous(arr, what)
        return self._spectrum_entropy(self._units(np.sort(arr)), order)

    def entropy(self, sites: Iterable[int], *, order: float = 1.0) -> float:
        """Von Neumann (``order=1``) or Renyi entropy of a set of lattice sites, in nats.

        Raises
        ------
        LatticeError
            For a site outside the lattice, a repeated site, or (spin sites) a set that is not
            contiguous in MPS order.
        """
        order = float(order)
        if not 0 < order < math.inf:
            raise GaussianStateError(f"entropy order must be a positive finite number, got {order}")
        return self._set_entropy(self._check(sites, "region"), order, "region")

    def mutual_information(self, a: Iterable[int], b: Iterable[int]) -> float:
        """``I(A:B) = S_A + S_B - S_AB``."""
        ra, rb = self._regions([("A", a), ("B", b)])
        ab = np.concatenate([ra, rb])
        s = self._set_entropy
        return s(ra, 1.0, "A") + s(rb, 1.0, "B") - s(ab, 1.0, "AB")

    def cmi(self, a: Iterable[int], b: Iterable[int], c: Iterable[int]) -> float:
        """Conditional mutual information ``I(A:C|B) = S_AB + S_BC - S_B - S_ABC``."""
        ra, rb, rc = self._regions([("A", a), ("B", b), ("C", c)])
        s = self._set_entropy
        return (s(np.concatenate([ra, rb]), 1.0, "AB") + s(np.concatenate([rb, rc]), 1.0, "BC")
                - s(rb, 1.0, "B") - s(np.concatenate([ra, rb, rc]), 1.0, "ABC"))

    def kitaev_preskill(self, a: Iterable[int], b: Iterable[int], c: Iterable[int]) -> float:
        """``S_A + S_B + S_C - S_AB - S_BC - S_CA + S_ABC``.

        For a three-sector disk this is -gamma (Kitaev and Preskill, PRL 96, 110404 (2006)).
        """
        ra, rb, rc = self._regions([("A", a), ("B", b), ("C", c)])
        s = self._set_entropy
        cat = np.concatenate
        return (s(ra, 1.0, "A") + s(rb, 1.0, "B") + s(rc, 1.0, "C") - s(cat([ra, rb]), 1.0, "AB")
                - s(cat([rb, rc]), 1.0, "BC") - s(cat([rc, ra]), 1.0, "CA")
                + s(cat([ra, rb, rc]), 1.0, "ABC"))

    def _commutator(self, ua, ub, uc) -> float:
        raise NotImplementedError

    def modular_commutator(self, a: Iterable[int], b: Iterable[int], c: Iterable[int]) -> float:
        """Modular commutator ``J(A, B, C) = i Tr(rho_ABC [K_AB, K_BC])``, ``K_X = -ln rho_X``.

        Defined in Phys. Rev. Lett. 128, 176402 (2022).

        For A, B, C counterclockwise around a bulk point, ``J = (pi/3) c_-``. The modular matrices use
        eigenvalues clipped to [clip, 1 - clip] (see ``clip``).
        """
        ra, rb, rc = self._regions([("A", a), ("B", b), ("C", c)])
        for arr, what in ((np.concatenate([ra, rb]), "AB"), (np.concatenate([rb, rc]), "BC")):
            self._check_contiguous(arr, what)
        if ra.size == 0 or rb.size == 0 or rc.size == 0:
            return 0.0  # J vanishes when one part is empty (rho_ABC factorises)
        return self._commutator(self._units(np.sort(ra)), self._units(np.sort(rb)), self._units(np.sort(rc)))

    def chiral_central_charge(self, a: Iterable[int], b: Iterable[int], c: Iterable[int]) -> float:
        """The estimate ``c_- = 3 J / pi`` from a counterclockwise three-sector disk."""
        return 3.0 * self.modular_commutator(a, b, c) / math.pi


def _sector_blocks(form: QuadraticForm, hamiltonian, label: str):
    """(modes, particle number or None) for each block the conserved charges fix separately."""
    conserve = tuple(getattr(hamiltonian, "conserve", ()))
    sector = dict(getattr(hamiltonian, "sector", {}))
    n = form.num_modes
    space = hamiltonian.space.name
    if space == "electron":
        if "2Sz" in conserve:
            if "N" not in conserve:
                raise GaussianStateError(
                    f"{label} conserves 2Sz but not N; add N to conserve for the Gaussian engine")
            total, twice_sz = sector["N"], sector["2Sz"]
            up, dn = np.arange(0, n, 2), np.arange(1, n, 2)
            if np.any(form.hopping[np.ix_(up, dn)] != 0):
                raise GaussianStateError(
                    f"{label} conserves 2Sz but its hopping flips spins; drop 2Sz from conserve")
            return [(up, (total + twice_sz) // 2), (dn, (total - twice_sz) // 2)]
        return [(np.arange(n), sector["N"] if "N" in conserve else None)]
    if space == "spin-1/2" and "2Sz" in conserve:
        return [(np.arange(n), (form.num_sites - sector["2Sz"]) // 2)]  # occupied = spin down
    if space in ("fermion", "hardcore-boson") and "N" in conserve:
        return [(np.arange(n), sector["N"])]
    return [(np.arange(n), None)]


@dataclass(frozen=True, eq=False)
class FreeFermionState(_Probes):
    """Ground state of a number-conserving quadratic Hamiltonian: a filled Fermi sea.

    Attributes
    ----------
    correlation : ndarray, shape (n, n)
        ``G_ij = <c_j^dag c_i>``, the projector on the filled levels (modes in Jordan-Wigner order).
    levels : ndarray, shape (n,)
        Single-particle energies, ascending.
    particles : int
        Number of filled levels.
    energy : float
        Sum of the filled levels plus the constant of the quadratic form.
    gap : float
        Smallest distance between a filled and an empty level of the same block (inf if none).
    num_sites, modes_per_site : int
    clip : float
        Clipping of eigenvalues before the logarithms of modular Hamiltonians.
    spin_like : bool
    name : str
    """

    correlation: np.ndarray = field(repr=False)
    levels: np.ndarray = field(repr=False)
    particles: int
    energy: float
    gap: float
    num_sites: int
    modes_per_site: int
    clip: float = 1e-14
    spin_like: bool = False
    name: str = ""

    @property
    def _units_per_site(self) -> int:
        return self.modes_per_site

    @classmethod
    def from_model(cls, model, *, options: GaussianOptions | None = None) -> "FreeFermionState":
        """Build the ground state of a model (``load_model``) in its sector."""
        return cls.from_hamiltonian(model.hamiltonian, name=model.name, options=options, model=model)

    @classmethod
    def from_hamiltonian(cls, hamiltonian, *, name: str = "", options: GaussianOptions | None = None,
                         model=None) -> "FreeFermionState":
        """Build the ground state of a Hamiltonian in its sector.

        Raises
        ------
        NotQuadraticError
            If the Hamiltonian is not quadratic.
        GaussianStateError
            If it has pairing terms (use :class:`MajoranaState`) or its ground state in the sector
            is not unique (degenerate levels at the Fermi energy).
        """
        options = options or GaussianOptions()
        form = quadratic_form(hamiltonian, name=name, options=options, model=model)
        label = f"model '{form.name}'" if form.name else "the Hamiltonian"
        if form.has_pairing:
            raise GaussianStateError(
                f"{label} has pairing terms; use MajoranaState.from_model or gaussian_state for it")
        blocks = _sector_blocks(form, hamiltonian, label)
        return cls.from_form(form, blocks=blocks, options=options)

    @classmethod
    def from_form(cls, form: QuadraticForm, *, blocks=None, options: GaussianOptions | None = None
                  ) -> "FreeFermionState":
        """Fill the lowest levels of a number-conserving form.

        Parameters
        ----------
        form : QuadraticForm
        blocks : list of (ndarray of int, int or None), optional
            Mode sets diagonalised separately and the particles each holds; ``None`` fills every
            negative level. Default: one block of all modes, negative levels filled.
        options : GaussianOptions, optional
        """
        options = options or GaussianOptions()
        label = f"model '{form.name}'" if form.name else "the Hamiltonian"
        if form.has_pairing:
            raise GaussianStateError(f"{label} has pairing terms; use MajoranaState.from_form for it")
        n = form.num_modes
        if blocks is None:
            blocks = [(np.arange(n), None)]
        dtype = complex if np.iscomplexobj(form.hopping) else float
        g = np.zeros((n, n), dtype=dtype)
        levels, total, energy, gap = [], 0, form.constant, math.inf
        tol = options.degeneracy_tol
        for modes, count in blocks:
            e, v = _eigh(form.hopping[np.ix_(modes, modes)])
            if count is None:
                if e.size and np.min(np.abs(e)) < tol:
                    raise GaussianStateError(
                        f"{label} has a single-particle level at zero energy ({np.min(np.abs(e)):.3g}); the "
                        "ground state is not unique: fix the particle number in conserve/[sector]")
                count = int(np.sum(e < 0))
            if not 0 <= count <= e.size:
                raise GaussianStateError(f"{label}: cannot place {count} particles in {e.size} modes")
            if 0 < count < e.size:
                gap = min(gap, float(e[count] - e[count - 1]))
                if e[count] - e[count - 1] < tol:
                    raise GaussianStateError(
                        f"{label}: levels {count} and {count + 1} are degenerate ({e[count - 1]:.12g}, "
                        f"{e[count]:.12g}), so the ground state with {count} particles is not unique; change "
                        "the filling or the lattice size")
            occ = v[:, :count]
            g[np.ix_(modes, modes)] = occ @ occ.conj().T
            levels.append(e)
            total += count
            energy += float(np.sum(e[:count]))
        g.setflags(write=False)
        levels = np.sort(np.concatenate(levels))
        levels.setflags(write=False)
        return cls(g, levels, total, float(energy), gap, form.num_sites, form.modes_per_site,
                   options.clip, form.spin_like, form.name)

    def correlation_matrix(self, sites: Iterable[int]) -> np.ndarray:
        """``G_X`` for a set of sites, modes in the order the sites are given (each site's modes in turn)."""
        arr = self._check(sites, "region")
        u = self._units(arr)
        return self.correlation[np.ix_(u, u)].copy()

    def _spectrum_entropy(self, units, order) -> float:
        return peschel_entropy(np.linalg.eigvalsh(self.correlation[np.ix_(units, units)]), order)

    def _commutator(self, ua, ub, uc) -> float:
        u = np.concatenate([ua, ub, uc])
        g = self.correlation[np.ix_(u, u)]
        return fermion_modular_commutator(g, (ua.size, ub.size, uc.size), self.clip)

    def chern_number(self, a: Iterable[int], b: Iterable[int], c: Iterable[int]) -> float:
        """Real-space Chern number of three sectors A, B, C (counterclockwise) meeting at a point.

        ``nu = 12 pi i sum_{j in A, k in B, l in C} (P_jk P_kl P_lj - P_jl P_lk P_kj)`` with P = G
        (Kitaev, Annals of Physics 321, 2 (2006)); internal modes of a site are summed over.
        """
        if self.spin_like:
            raise GaussianStateError(
                "the real-space Chern number counts fermion bands; this state comes from spin or boson sites")
        ra, rb, rc = self._regions([("A", a), ("B", b), ("C", c)])
        if ra.size == 0 or rb.size == 0 or rc.size == 0:
            return 0.0
        return real_space_chern_number(self.correlation, self._units(ra), self._units(rb), self._units(rc))

    def __repr__(self) -> str:
        label = f"'{self.name}', " if self.name else ""
        return (f"FreeFermionState({label}{self.num_sites} sites x {self.modes_per_site} mode(s), "
                f"N={self.particles}, E0={self.energy:.10g}, gap={self.gap:.4g}, clip={self.clip:g})")


@dataclass(frozen=True, eq=False)
class MajoranaState(_Probes):
    """Ground state of a quadratic Hamiltonian with pairing terms, in Majorana form.

    Attributes
    ----------
    covariance : ndarray, shape (2n, 2n)
        ``Gamma_pq = (i/2) <[g_p, g_q]>``, real antisymmetric; Majoranas ``2j, 2j+1`` belong to mode j.
    levels : ndarray, shape (n,)
        Quasiparticle energies (nonnegative eigenvalues of ``i W``), ascending; for a state made by
        :meth:`from_free_fermion`, the single-particle levels of that state.
    energy : float
        ``shift - (1/4) sum |eig(i W)|``.
    num_sites, modes_per_site : int
    clip : float
    spin_like : bool
    name : str
    """

    covariance: np.ndarray = field(repr=False)
    levels: np.ndarray = field(repr=False)
    energy: float
    num_sites: int
    modes_per_site: int
    clip: float = 1e-14
    spin_like: bool = False
    name: str = ""

    @property
    def _units_per_site(self) -> int:
        return 2 * self.modes_per_site

    @classmethod
    def from_model(cls, model, *, options: GaussianOptions | None = None) -> "MajoranaState":
        """Build the ground state of a model; number-conserving models are filled in their sector first."""
        return cls.from_hamiltonian(model.hamiltonian, name=model.name, options=options, model=model)

    @classmethod
    def from_hamiltonian(cls, hamiltonian, *, name: str = "", options: GaussianOptions | None = None,
                         model=None) -> "MajoranaState":
        """Build the ground state of a Hamiltonian (see :meth:`from_model`).

        Raises
        ------
        NotQuadraticError
            If the Hamiltonian is not quadratic.
        GaussianStateError
            If it conserves a particle number but has pairing terms, or its ground state is not unique.
        """
        options = options or GaussianOptions()
        form = quadratic_form(hamiltonian, name=name, options=options, model=model)
        label = f"model '{form.name}'" if form.name else "the Hamiltonian"
        if not form.has_pairing:
            blocks = _sector_blocks(form, hamiltonian, label)
            return cls.from_free_fermion(FreeFermionState.from_form(form, blocks=blocks, options=options))
        if getattr(hamiltonian, "conserve", ()):
            raise GaussianStateError(
                f"{label} has pairing terms but conserves {', '.join(hamiltonian.conserve)}; "
                "set conserve = []")
        return cls.from_form(form, options=options)

    @classmethod
    def from_form(cls, form: QuadraticForm, *, options: GaussianOptions | None = None) -> "MajoranaState":
        """The ground state of ``H = (i/4) g^T W g + shift``: ``Gamma = i sign(i W)``."""
        options = options or GaussianOptions()
        label = f"model '{form.name}'" if form.name else "the Hamiltonian"
        w, shift = form.majorana_matrix()
        vals, vecs = _eigh(1j * w)
        smallest = float(np.min(np.abs(vals))) if vals.size else math.inf
        if smallest < options.degeneracy_tol:
            raise GaussianStateError(
                f"{label} has a Majorana level at zero energy ({smallest:.3g}), so its ground state is not "
                "unique (e.g. an ordered phase or edge zero modes); change the couplings or the lattice size")
        gamma = (1j * ((vecs * np.sign(vals)) @ vecs.conj().T)).real
        gamma = 0.5 * (gamma - gamma.T)
        gamma.setflags(write=False)
        levels = np.sort(np.abs(vals))[::2].copy()
        levels.setflags(write=False)
        energy = shift - 0.25 * float(np.sum(np.abs(vals)))
        return cls(gamma, levels, energy, form.num_sites, form.modes_per_site, options.clip, form.spin_like,
                   form.name)

    @classmethod
    def from_free_fermion(cls, state: FreeFermionState) -> "MajoranaState":
        """The Majorana covariance of a number-conserving state: ``Gamma = i (R <psi psi^dag> R^dag - 1)``.

        Here psi = (c, c^dag) and R maps it to the Majoranas; ``<psi psi^dag> = diag(1 - G, G^T)``.
        """
        g = state.correlation
        n = g.shape[0]
        nambu = np.zeros((2 * n, 2 * n), dtype=complex)
        nambu[:n, :n] = np.eye(n) - g
        nambu[n:, n:] = g.T
        r = np.zeros((2 * n, 2 * n), dtype=complex)
        j = np.arange(n)
        r[2 * j, j] = 1.0
        r[2 * j, n + j] = 1.0
        r[2 * j + 1, j] = -1j
        r[2 * j + 1, n + j] = 1j
        gamma = (1j * (r @ nambu @ r.conj().T - np.eye(2 * n))).real
        gamma = 0.5 * (gamma - gamma.T)
        gamma.setflags(write=False)
        return cls(gamma, state.levels, state.energy, state.num_sites, state.modes_per_site, state.clip,
                   state.spin_like, state.name)

    def covariance_matrix(self, sites: Iterable[int]) -> np.ndarray:
        """``Gamma_X`` for a set of sites (Majoranas of each site in turn, in the given site order)."""
        arr = self._check(sites, "region")
        u = self._units(arr)
        return self.covariance[np.ix_(u, u)].copy()

    def _spectrum_entropy(self, units, order) -> float:
        return majorana_entropy(np.linalg.eigvalsh(1j * self.covariance[np.ix_(units, units)]), order)

    def _commutator(self, ua, ub, uc) -> float:
        u = np.concatenate([ua, ub, uc])
        gamma = self.covariance[np.ix_(u, u)]
        return majorana_modular_commutator(gamma, (ua.size, ub.size, uc.size), self.clip)

    def __repr__(self) -> str:
        label = f"'{self.name}', " if self.name else ""
        low = f"{self.levels[0]:.4g}" if self.levels.size else "none"
        return (f"MajoranaState({label}{self.num_sites} sites x {self.modes_per_site} mode(s), "
                f"E0={self.energy:.10g}, lowest level={low}, clip={self.clip:g})")


def gaussian_state(model, *, options: GaussianOptions | None = None) -> FreeFermionState | MajoranaState:
    """The Gaussian ground state of a quadratic model, built on the cheapest path.

    Returns
    -------
    FreeFermionState or MajoranaState
        A :class:`FreeFermionState` (filled in the model's sector) when the quadratic form has no
        pairing terms, else a :class:`MajoranaState`.

    Raises
    ------
    NotQuadraticError, GaussianStateError
        As :meth:`FreeFermionState.from_model` and :meth:`MajoranaState.from_model`.

    Examples
    --------
    >>> from netprobe.spec import load_model
    >>> state = gaussian_state(load_model("tfim", {"length": "16"}))
    >>> round(state.energy, 6)  # Pfeuty's J [1 - 1/sin(pi/66)]
    -20.016388
    """
    options = options or GaussianOptions()
    form = quadratic_form(model.hamiltonian, name=model.name, options=options, model=model)
    label = f"model '{form.name}'"
    if form.has_pairing:
        if model.hamiltonian.conserve:
            raise GaussianStateError(
                f"{label} has pairing terms but conserves {', '.join(model.hamiltonian.conserve)}; "
                "set conserve = []")
        return MajoranaState.from_form(form, options=options)
    blocks = _sector_blocks(form, model.hamiltonian, label)
    return FreeFermionState.from_form(form, blocks=blocks, options=options)
