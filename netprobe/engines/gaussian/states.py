"""Free-fermion (Gaussian) engine: quadratic Hamiltonians, their ground states and entanglement probes.

A model whose Hamiltonian is quadratic in fermion operators (after Jordan-Wigner in MPS order for
spin-1/2 and hard-core boson sites) has a Gaussian ground state, fixed by its one-body correlation
matrix. Every probe of the other engines (entropies, mutual information, conditional mutual
information, the Kitaev-Preskill combination, the modular commutator) then costs O(n^3) in the size
n of the region instead of exponential, and the real-space Chern number comes for free.

Stages
------
Extraction (:func:`quadratic_form`, in :mod:`netprobe.engines.gaussian.quadratic`)
    The Hamiltonian as ``c^dag h c + (1/2)(c^dag Delta c^dag + h.c.) + constant`` in modes.
Diagonalisation (route ``dense`` or ``momentum``, :class:`GaussianOptions`)
    One eigendecomposition of the whole lattice, or, where the form is translation invariant around
    the cylinder, one per momentum (:mod:`netprobe.engines.gaussian.momentum`); then the states hold the
    correlations as L_y real-space blocks and read each region's rows and columns from them.
Number-conserving ground state (:class:`FreeFermionState`)
    ``G_ij = <c_j^dag c_i>``, the projector on the filled levels (the sector's N lowest levels).
Pairing ground state (:class:`MajoranaState`)
    Majoranas ``g_2j = c_j + c_j^dag``, ``g_2j+1 = -i (c_j - c_j^dag)``, covariance
    ``Gamma_pq = (i/2) <[g_p, g_q]>``; for ``H = (i/4) g^T W g + const``, ``Gamma = i sign(i W)``.
Modular commutator
    Only the B columns of ``h_AB`` and the B rows of ``h_BC`` enter J; they are formed through the
    tridiagonal form of G_AB and G_BC (:mod:`netprobe.engines.gaussian.tridiagonal`, the same LAPACK
    arithmetic as an eigendecomposition in another order), or by full eigendecompositions with
    ``method='eigh'`` (the reference); ``threads=2`` forms the two in parallel.

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

import functools
import itertools
import math
import operator
from dataclasses import dataclass, field
from typing import Iterable, Sequence

import numpy as np
import scipy.linalg
from scipy.special import entr

from netprobe.errors import LatticeError
from netprobe.engines.gaussian.momentum import (
    CylinderMatrix,
    cylinder_layout,
    majorana_layout,
    matrix_function_blocks,
    momentum_eigh,
    translation_blocks,
)
from netprobe.engines.gaussian.quadratic import GaussianOptions, GaussianStateError, QuadraticForm, quadratic_form
from netprobe.engines.gaussian.tridiagonal import function_columns, function_rows, run_pair

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
]


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


def fermion_modular_commutator(g: np.ndarray, sizes: tuple[int, int, int], clip: float,
                               *, method: str = "tridiagonal", threads: int = 1) -> float:
    """``J = i Tr(G [h_AB + 0_C, 0_A + h_BC])`` for G ordered A|B|C with the given block sizes.

    With ``x = Tr(G h_AB h_BC)``, Hermiticity gives ``J = -2 Im x``; only the B columns of h_AB and
    the B rows of h_BC meet, so x needs those slices and one product of off-diagonal blocks.
    ``method`` picks how the slices are formed (:mod:`netprobe.engines.gaussian.tridiagonal`):
    ``tridiagonal`` (default) or ``eigh`` (full eigendecompositions, the reference); the two agree
    to rounding. ``threads=2`` forms the two slices in two Python threads
    (:func:`netprobe.engines.gaussian.tridiagonal.run_pair`); the result is the same.
    """
    na, nb, nc = sizes
    weights = functools.partial(_fermion_log_weights, clip=clip)
    # the product with G's off-diagonal block goes with the first slice: with two threads it overlaps the
    # second slice's reduction
    g_h_ab_b, h_bc_b = run_pair(
        lambda: g[na:, : na + nb] @ function_columns(g[: na + nb, : na + nb], weights, slice(na, na + nb),
                                                     method=method),
        lambda: function_rows(g[na:, na:], weights, slice(0, nb), method=method), threads)
    x = np.sum(g_h_ab_b * h_bc_b.T)
    return float(-2.0 * np.imag(x))


def majorana_modular_commutator(gamma: np.ndarray, sizes: tuple[int, int, int], clip: float,
                                *, method: str = "tridiagonal", threads: int = 1) -> float:
    """``J = (1/4) Tr(Gamma [W_AB + 0, 0 + W_BC])`` for Gamma ordered A|B|C (sizes in Majoranas).

    Notes
    -----
    For ``Q_A = (i/4) g^T A g``, ``[Q_A, Q_B] = i Q_[A,B]`` and ``<Q_C> = -(1/4) Tr(C Gamma)``, so
    ``i <[K_AB, K_BC]> = (1/4) Tr(Gamma [W_AB, W_BC])`` with ``K_X = Q_(W^X)``. Real antisymmetry
    makes the two orders of the commutator equal and opposite: ``J = (1/2) Tr(Gamma W_AB W_BC)``.
    ``method`` and ``threads`` as in :func:`fermion_modular_commutator`.
    """
    na, nb, nc = sizes
    weights = functools.partial(_majorana_log_weights, clip=clip)
    gamma_w_ab_b, w_bc_b = run_pair(
        lambda: gamma[na:, : na + nb] @ function_columns(1j * gamma[: na + nb, : na + nb], weights,
                                                         slice(na, na + nb), method=method).real,
        lambda: function_rows(1j * gamma[na:, na:], weights, slice(0, nb), method=method).real, threads)
    return float(0.5 * np.sum(gamma_w_ab_b * w_bc_b.T))


def _chern_from_blocks(p_ab: np.ndarray, p_bc: np.ndarray, p_ca: np.ndarray) -> float:
    """``nu = 12 pi i sum_{j in A, k in B, l in C} (P_jk P_kl P_lj - P_jl P_lk P_kj)`` from the blocks of P.

    The first sum is ``t = Tr(P_AB P_BC P_CA)``, the second its complex conjugate (P is Hermitian),
    so ``nu = -24 pi Im t`` (Kitaev, Annals of Physics 321, 2 (2006), appendix).
    """
    t = np.sum((p_ab @ p_bc) * p_ca.T)
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
    source: np.ndarray | CylinderMatrix
    _units_per_site: int

    @classmethod
    def from_model(cls, model, *, options: GaussianOptions | None = None):
        """Build the ground state of a model (``load_model``) in its sector; see :meth:`from_hamiltonian`."""
        return cls.from_hamiltonian(model.hamiltonian, name=model.name, options=options, model=model)

    def _dense(self) -> np.ndarray:
        return self.source if isinstance(self.source, np.ndarray) else self.source.dense()

    def _block(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        if isinstance(self.source, np.ndarray):
            return self.source[np.ix_(rows, cols)]
        return self.source.block(rows, cols)

    @property
    def route(self) -> str:
        """``dense``, or ``momentum`` where the matrix is held by its blocks around the cylinder."""
        return "dense" if isinstance(self.source, np.ndarray) else "momentum"

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

    def modular_commutator(self, a: Iterable[int], b: Iterable[int], c: Iterable[int], *,
                           threads: int = 1) -> float:
        """Modular commutator ``J(A, B, C) = i Tr(rho_ABC [K_AB, K_BC])``, ``K_X = -ln rho_X``.

        Defined in Phys. Rev. Lett. 128, 176402 (2022).

        For A, B, C counterclockwise around a bulk point, ``J = (pi/3) c_-``. The modular matrices use
        eigenvalues clipped to [clip, 1 - clip] (see ``clip``). ``threads=2`` forms the two modular
        matrices in two Python threads (worth it with two free cores and one BLAS thread each); the
        value does not depend on it.
        """
        ra, rb, rc = self._regions([("A", a), ("B", b), ("C", c)])
        for arr, what in ((np.concatenate([ra, rb]), "AB"), (np.concatenate([rb, rc]), "BC")):
            self._check_contiguous(arr, what)
        if ra.size == 0 or rb.size == 0 or rc.size == 0:
            return 0.0  # J vanishes when one part is empty (rho_ABC factorises)
        return self._commutator(self._units(np.sort(ra)), self._units(np.sort(rb)), self._units(np.sort(rc)),
                                threads)


def _label(form: QuadraticForm) -> str:
    """How messages name the model of a quadratic form."""
    return f"model '{form.name}'" if form.name else "the Hamiltonian"


def _quadratic(hamiltonian, name: str, options: GaussianOptions | None, model):
    """(options, quadratic form, label) of a Hamiltonian: the first steps of every ``from_hamiltonian``."""
    options = options or GaussianOptions()
    form = quadratic_form(hamiltonian, name=name, options=options, model=model)
    return options, form, _label(form)


def _sector_blocks(form: QuadraticForm, hamiltonian, label: str):
    """(modes, particle number or None) for each block the conserved charges fix separately."""
    conserved = tuple(getattr(hamiltonian, "conserved", ()))
    sector = dict(getattr(hamiltonian, "sector", {}))
    n = form.num_modes
    space = hamiltonian.space.name
    if space == "spinful_fermion":
        if "twice_sz" in conserved:
            if "N" not in conserved:
                raise GaussianStateError(
                    f"{label} conserves twice_sz but not N; add N to conserved for the Gaussian engine")
            total, twice_sz = sector["N"], sector["twice_sz"]
            up, dn = np.arange(0, n, 2), np.arange(1, n, 2)
            if np.any(form.hopping[np.ix_(up, dn)] != 0):
                raise GaussianStateError(
                    f"{label} conserves twice_sz but its hopping flips spins; drop twice_sz from conserved")
            return [(up, (total + twice_sz) // 2), (dn, (total - twice_sz) // 2)]
        return [(np.arange(n), sector["N"] if "N" in conserved else None)]
    if space == "spin-1/2" and "twice_sz" in conserved:
        return [(np.arange(n), (form.num_sites - sector["twice_sz"]) // 2)]  # occupied = spin down
    if space in ("fermion", "hardcore-boson") and "N" in conserved:
        return [(np.arange(n), sector["N"])]
    return [(np.arange(n), None)]


_TRANSLATION_RTOL = 1e-10  # entries of M - T M T^-1 below this fraction of max|M| are rounding (phases)


def _translation_plan(matrix: np.ndarray, lattice, units_per_site: int, options: GaussianOptions,
                      label: str, entries=None):
    """``(layout, blocks)`` for the momentum route, or None for the dense one (see ``options.route``).

    ``entries``: a callable giving the nonzero entries of ``matrix`` in ``np.nonzero`` order, if at hand.
    """
    if options.route == "dense":
        return None
    layout = cylinder_layout(lattice, units_per_site) if lattice is not None else None
    blocks = None
    if layout is not None:
        if entries is None:
            rows, cols = np.nonzero(matrix)  # hopping matrices are sparse: read them once, entry by entry
            values = matrix[rows, cols]
        else:
            rows, cols, values = entries()
        scale = max(float(np.max(np.abs(values), initial=0.0)), 1.0)
        blocks = translation_blocks(matrix, layout, _TRANSLATION_RTOL * scale, entries=(rows, cols, values))
    if blocks is not None:
        return layout, blocks
    if options.route == "momentum":
        why = ("no lattice was given" if lattice is None else
               "the lattice is not periodic in y with circumference >= 2" if layout is None else
               "the quadratic form is not invariant under a translation around the cylinder")
        raise GaussianStateError(
            f"{label}: route 'momentum' needs translation invariance around y, but {why}; "
            "use route 'auto' or 'dense'")
    return None


def _filling(e: np.ndarray, count: int | None, tol: float, label: str) -> tuple[int, float]:
    """Particles placed in a block with ascending levels ``e`` and the gap at its Fermi level."""
    if count is None:
        if e.size and np.min(np.abs(e)) < tol:
            raise GaussianStateError(
                f"{label} has a single-particle level at zero energy ({np.min(np.abs(e)):.3g}); the "
                "ground state is not unique: fix the particle number in conserved/[sector]")
        count = int(np.sum(e < 0))
    if not 0 <= count <= e.size:
        raise GaussianStateError(f"{label}: cannot place {count} particles in {e.size} modes")
    gap = math.inf
    if 0 < count < e.size:
        gap = float(e[count] - e[count - 1])
        if gap < tol:
            raise GaussianStateError(
                f"{label}: levels {count} and {count + 1} are degenerate ({e[count - 1]:.12g}, "
                f"{e[count]:.12g}), so the ground state with {count} particles is not unique; change "
                "the filling or the lattice size, or on a cylinder lift edge zero modes with a small flux "
                "through it (--set twist=0.3)")
    return count, gap


def _majorana_from_correlation(one_minus_g: np.ndarray, g_transposed: np.ndarray) -> np.ndarray:
    """``Gamma = Re[i (R diag(1 - G, G^T) R^dag - 1)]`` entry by entry (last two axes: modes).

    ``R[2 j + alpha, a n + j] = rho[alpha, a]`` maps psi = (c, c^dag) to the Majoranas, so
    ``Gamma[2i + alpha, 2j + beta] = Re i (rho[alpha,0] rho*[beta,0] (1 - G)_ij + rho[alpha,1]
    rho*[beta,1] G^T_ij - delta)``; works on one matrix or on a stack of momentum blocks.
    """
    rho = np.array([[1.0, 1.0], [-1j, 1j]])
    m = (np.einsum("A,B,...ij->...iAjB", rho[:, 0], rho[:, 0].conj(), one_minus_g)
         + np.einsum("A,B,...ij->...iAjB", rho[:, 1], rho[:, 1].conj(), g_transposed))
    shape = m.shape[:-4] + (2 * m.shape[-4], 2 * m.shape[-2])
    return (1j * m.reshape(shape)).real  # the -i delta term is imaginary: it drops out of Re


@dataclass(frozen=True, eq=False)
class FreeFermionState(_Probes):
    """Ground state of a number-conserving quadratic Hamiltonian: a filled Fermi sea.

    Attributes
    ----------
    source : ndarray or CylinderMatrix, shape (n, n)
        The correlation matrix itself (route ``dense``), or its blocks around the cylinder (route
        ``momentum``), from which each probe reads only its region's rows and columns.
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

    source: np.ndarray | CylinderMatrix = field(repr=False)
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

    @property
    def correlation(self) -> np.ndarray:
        """``G_ij = <c_j^dag c_i>``, modes in Jordan-Wigner order (by momentum: formed on first use)."""
        return self._dense()

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
        options, form, label = _quadratic(hamiltonian, name, options, model)
        if form.has_pairing:
            raise GaussianStateError(
                f"{label} has pairing terms; use MajoranaState.from_model or gaussian_state for it")
        blocks = _sector_blocks(form, hamiltonian, label)
        return cls.from_form(form, blocks=blocks, options=options,
                             lattice=getattr(hamiltonian, "lattice", None))

    @classmethod
    def from_form(cls, form: QuadraticForm, *, blocks=None, options: GaussianOptions | None = None,
                  lattice=None) -> "FreeFermionState":
        """Fill the lowest levels of a number-conserving form.

        Parameters
        ----------
        form : QuadraticForm
        blocks : list of (ndarray of int, int or None), optional
            Mode sets diagonalised separately and the particles each holds; ``None`` fills every
            negative level. Default: one block of all modes, negative levels filled.
        options : GaussianOptions, optional
        lattice : Lattice, optional
            The lattice of the form's sites; needed for the momentum route (``options.route``).
        """
        options = options or GaussianOptions()
        label = _label(form)
        if form.has_pairing:
            raise GaussianStateError(f"{label} has pairing terms; use MajoranaState.from_form for it")
        n = form.num_modes
        if blocks is None:
            blocks = [(np.arange(n), None)]
        plan = _translation_plan(form.hopping, lattice, form.modes_per_site, options, label,
                                 form.stored_hopping)
        if plan is not None and any(plan[0].orbitals_of(modes) is None for modes, _ in blocks):
            if options.route == "momentum":
                raise GaussianStateError(
                    f"{label}: a charge block is not translation invariant; use route 'dense'")
            plan = None
        real = not np.iscomplexobj(form.hopping)
        if plan is None:
            g = np.zeros((n, n), dtype=float if real else complex)
        else:
            layout, hop_blocks = plan
            g_blocks = np.zeros(hop_blocks.shape, dtype=complex)
        levels, total, energy, gap = [], 0, form.constant, math.inf
        for modes, count in blocks:
            if plan is None:
                e, v = _eigh(form.hopping[np.ix_(modes, modes)])
                count, block_gap = _filling(e, count, options.degeneracy_tol, label)
                occ = v[:, :count]
                g[np.ix_(modes, modes)] = occ @ occ.conj().T
            else:
                orbitals = layout.orbitals_of(modes)
                vals, vecs = momentum_eigh(hop_blocks[:, orbitals][:, :, orbitals])
                order = np.argsort(vals, axis=None, kind="stable")
                e = vals.ravel()[order]
                count, block_gap = _filling(e, count, options.degeneracy_tol, label)
                filled = np.zeros(vals.size)
                filled[order[:count]] = 1.0
                g_blocks[:, orbitals[:, None], orbitals[None, :]] = matrix_function_blocks(
                    vecs, filled.reshape(vals.shape))
            gap = min(gap, block_gap)
            levels.append(e)
            total += count
            energy += float(np.sum(e[:count]))
        if plan is None:
            g.setflags(write=False)
            source = g
        else:
            g_blocks = g_blocks.real.copy() if real else g_blocks
            g_blocks.setflags(write=False)
            source = CylinderMatrix(g_blocks, layout)
        levels = np.sort(np.concatenate(levels))
        levels.setflags(write=False)
        return cls(source, levels, total, float(energy), gap, form.num_sites, form.modes_per_site,
                   options.clip, form.spin_like, form.name)

    def correlation_matrix(self, sites: Iterable[int]) -> np.ndarray:
        """``G_X`` for a set of sites, modes in the order the sites are given (each site's modes in turn)."""
        arr = self._check(sites, "region")
        u = self._units(arr)
        return np.array(self._block(u, u))

    def _spectrum_entropy(self, units, order) -> float:
        return peschel_entropy(np.linalg.eigvalsh(self._block(units, units)), order)

    def _commutator(self, ua, ub, uc, threads: int = 1) -> float:
        u = np.concatenate([ua, ub, uc])
        return fermion_modular_commutator(self._block(u, u), (ua.size, ub.size, uc.size), self.clip,
                                          threads=threads)

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
        ua, ub, uc = self._units(ra), self._units(rb), self._units(rc)
        return _chern_from_blocks(self._block(ua, ub), self._block(ub, uc), self._block(uc, ua))

    def __repr__(self) -> str:
        label = f"'{self.name}', " if self.name else ""
        return (f"FreeFermionState({label}{self.num_sites} sites x {self.modes_per_site} mode(s), "
                f"N={self.particles}, E0={self.energy:.10g}, gap={self.gap:.4g}, clip={self.clip:g}, "
                f"route={self.route})")


@dataclass(frozen=True, eq=False)
class MajoranaState(_Probes):
    """Ground state of a quadratic Hamiltonian with pairing terms, in Majorana form.

    Attributes
    ----------
    source : ndarray or CylinderMatrix, shape (2n, 2n)
        The covariance itself (route ``dense``) or its blocks around the cylinder (``momentum``).
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

    source: np.ndarray | CylinderMatrix = field(repr=False)
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

    @property
    def covariance(self) -> np.ndarray:
        """``Gamma_pq = (i/2) <[g_p, g_q]>``, real antisymmetric; Majoranas ``2j, 2j+1`` belong to mode j."""
        return self._dense()

    @classmethod
    def from_hamiltonian(cls, hamiltonian, *, name: str = "", options: GaussianOptions | None = None,
                         model=None) -> "MajoranaState":
        """Build the ground state of a Hamiltonian; number-conserving ones are filled in their sector first.

        Raises
        ------
        NotQuadraticError
            If the Hamiltonian is not quadratic.
        GaussianStateError
            If it conserves a particle number but has pairing terms, or its ground state is not unique.
        """
        options, form, label = _quadratic(hamiltonian, name, options, model)
        lattice = getattr(hamiltonian, "lattice", None)
        if not form.has_pairing:
            blocks = _sector_blocks(form, hamiltonian, label)
            return cls.from_free_fermion(FreeFermionState.from_form(form, blocks=blocks, options=options,
                                                                    lattice=lattice))
        if getattr(hamiltonian, "conserved", ()):
            raise GaussianStateError(
                f"{label} has pairing terms but conserves {', '.join(hamiltonian.conserved)}; "
                "set conserved = []")
        return cls.from_form(form, options=options, lattice=lattice)

    @classmethod
    def from_form(cls, form: QuadraticForm, *, options: GaussianOptions | None = None,
                  lattice=None) -> "MajoranaState":
        """The ground state of ``H = (i/4) g^T W g + shift``: ``Gamma = i sign(i W)``.

        ``lattice`` (optional) enables the momentum route (``options.route``).
        """
        options = options or GaussianOptions()
        label = _label(form)
        w, shift = form.majorana_matrix()
        plan = _translation_plan(w, lattice, 2 * form.modes_per_site, options, label)
        if plan is None:
            vals, vecs = _eigh(1j * w)
        else:
            vals, vecs = momentum_eigh(1j * plan[1])
        smallest = float(np.min(np.abs(vals))) if vals.size else math.inf
        if smallest < options.degeneracy_tol:
            raise GaussianStateError(
                f"{label} has a Majorana level at zero energy ({smallest:.3g}), so its ground state is not "
                "unique (e.g. an ordered phase or edge zero modes); change the couplings or the lattice size")
        if plan is None:
            gamma = (1j * ((vecs * np.sign(vals)) @ vecs.conj().T)).real
            source = 0.5 * (gamma - gamma.T)
        else:
            gamma = (1j * matrix_function_blocks(vecs, np.sign(vals))).real
            source = CylinderMatrix(gamma, plan[0])
            gamma.setflags(write=False)
        if isinstance(source, np.ndarray):
            source.setflags(write=False)
        levels = np.sort(np.abs(vals), axis=None)[::2].copy()
        levels.setflags(write=False)
        energy = shift - 0.25 * float(np.sum(np.abs(vals)))
        return cls(source, levels, energy, form.num_sites, form.modes_per_site, options.clip, form.spin_like,
                   form.name)

    @classmethod
    def from_free_fermion(cls, state: FreeFermionState) -> "MajoranaState":
        """The Majorana covariance of a number-conserving state: ``Gamma = i (R <psi psi^dag> R^dag - 1)``.

        Here psi = (c, c^dag) and R maps it to the Majoranas; ``<psi psi^dag> = diag(1 - G, G^T)``.
        A momentum-resolved state gives a momentum-resolved covariance.
        """
        if isinstance(state.source, np.ndarray):
            g = state.correlation
            gamma = _majorana_from_correlation(np.eye(g.shape[0]) - g, g.T)
            gamma = 0.5 * (gamma - gamma.T)
            gamma.setflags(write=False)
            source = gamma
        else:
            blocks, layout = state.source.blocks, state.source.layout
            w, r = blocks.shape[:2]
            one = np.zeros((w, r, r))
            one[0] = np.eye(r)
            reflected = np.swapaxes(blocks[(-np.arange(w)) % w], 1, 2)  # (G^T)_d = (G_-d)^T
            gamma = _majorana_from_correlation(one - blocks, reflected)
            gamma.setflags(write=False)
            source = CylinderMatrix(gamma, majorana_layout(layout))
        return cls(source, state.levels, state.energy, state.num_sites, state.modes_per_site, state.clip,
                   state.spin_like, state.name)

    def _spectrum_entropy(self, units, order) -> float:
        return majorana_entropy(np.linalg.eigvalsh(1j * self._block(units, units)), order)

    def _commutator(self, ua, ub, uc, threads: int = 1) -> float:
        u = np.concatenate([ua, ub, uc])
        return majorana_modular_commutator(self._block(u, u), (ua.size, ub.size, uc.size), self.clip,
                                           threads=threads)

    def __repr__(self) -> str:
        label = f"'{self.name}', " if self.name else ""
        low = f"{self.levels[0]:.4g}" if self.levels.size else "none"
        return (f"MajoranaState({label}{self.num_sites} sites x {self.modes_per_site} mode(s), "
                f"E0={self.energy:.10g}, lowest level={low}, clip={self.clip:g}, route={self.route})")


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
    >>> from netprobe.model.spec import load_model
    >>> state = gaussian_state(load_model("tfim", {"length": "16"}))
    >>> round(state.energy, 6)  # Pfeuty's J [1 - 1/sin(pi/66)]
    -20.016388
    """
    options = options or GaussianOptions()
    form = quadratic_form(model.hamiltonian, name=model.name, options=options, model=model)
    label = f"model '{form.name}'"
    if form.has_pairing:
        if model.hamiltonian.conserved:
            raise GaussianStateError(
                f"{label} has pairing terms but conserves {', '.join(model.hamiltonian.conserved)}; "
                "set conserved = []")
        return MajoranaState.from_form(form, options=options, lattice=model.lattice)
    blocks = _sector_blocks(form, model.hamiltonian, label)
    return FreeFermionState.from_form(form, blocks=blocks, options=options, lattice=model.lattice)
