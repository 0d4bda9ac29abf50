"""The cut between two halves of a cylinder: Schmidt states resolved by charge and by momentum.

A bond of the MPS order that falls between two columns of unit cells splits the cylinder into a
left part (columns ``0 .. column-1``) and a right part. The partial translation ``T_y^L`` moves every
site of the left part one unit cell around the cylinder and leaves the right part alone. Its matrix
in the Schmidt basis of the cut is block diagonal in (near-)degenerate Schmidt values; its
eigenvalues there are ``exp(i k)`` with ``k = 2 pi m / L_y`` the momentum of each Schmidt state, and
its expectation value is the momentum polarization ``lambda = <T_y^L>`` (Tu, Zhang and Qi, Phys.
Rev. B 88, 195412 (2013)).

Conventions
-----------
Translation
    ``T_+`` maps site ``(ix, iy, s)`` to ``(ix, iy + 1, s)``: ``T_+ c_r^dag T_+^-1 = c_{r + a2}^dag``,
    the translation of the left part by one unit cell towards +y. The momentum polarization is
    ``lambda = <T_+>``. Momenta are physical momenta around +y: a state with wave function
    ``exp(i k y)`` has ``T_+ = exp(-i k)``, so ``k = -arg`` of the eigenvalue of ``T_+``. With these
    signs a Schmidt spectrum whose levels rise towards +k belongs to an edge that runs towards +y
    along the cut, i.e. counterclockwise around the left part (x right, y up), and
    ``arg lambda = (2 pi / L_y)(h_a - c-/24) + ...`` gives c- > 0 for it: the orientation convention of
    the modular commutator J (A, B, C counterclockwise). Checked on the Chern insulator, whose J,
    momentum counting and polarization all give c- = +1 for 0 < m < 2.
Fermion signs
    With ``|n_1 ... n_N> = (c_1^dag)^n_1 ... (c_N^dag)^n_N |0>`` (MPS order) the permutation of
    the modes of one column picks up ``(-1)`` for every pair of occupied modes whose order it
    reverses. Inside a column the translation is a cyclic shift by the sites of one unit cell, so
    the sign is ``(-1)^(N_front N_back)``, the occupations of the shifted part and of the wrapped part.
Three routes
    Exact states (:func:`exact_cut`): reshape the vector at the cut, SVD per charge of the left
    part, and apply the signed permutation to the left singular vectors. MPS (:func:`mps_cut`): the
    left part contracted with itself through the translation of one column at a time, keeping the
    physical legs that the cyclic shift has not yet matched, ending in the open bond of the cut.
    Free fermions (:func:`gaussian_cut`): ``<T_+> = det(1 - G + G U)`` with
    ``G_ij = <c_j^dag c_i>`` on the left part and ``U`` the one-particle translation
    (``U e_i = e_pi(i)``), a standard Gaussian-state identity (for ``C_ij = <c_i^dag c_j> = G^T`` it
    reads ``det(1 - C + C U^T)``), pinned against the exact route in the tests; the spectrum from
    the entanglement modes of definite momentum, combined into many-body levels below a window.
Flux through the cylinder (``twist``)
    The lattice spreads a twist theta uniformly around y (``A_y = theta / C``, C the circumference
    length), so the plain permutation commutes with the Hamiltonian, but its eigenvalues measure the
    canonical momentum ``k``, while the modes disperse with the kinetic momentum ``k - q theta / L_y``.
    The partial translation used here is the gauge-covariant one, ``T_+ prod_(i in left)
    exp(i q_i theta / L_y)`` (``q`` the charge that couples to the vector potential, in its coupling
    units): its eigenvalues are ``exp(-i k_kin)``; in the gauge that puts the whole twist on the link
    that wraps around, it is the permutation with the phase ``exp(i q theta)`` on the wrapping
    orbitals. The plain permutation differs by ``exp(i theta N_L / L_y)``, a phase that depends on
    the charge of the left part and does not drop out of the fit: it shifts the sector (measured on the
    Chern insulator at m = -1, theta = pi, odd L_y: s = -0.0001 with the plain permutation, +0.0410
    with the covariant one, against +1/24).
"""

from __future__ import annotations

import cmath
import math
from dataclasses import dataclass, field

import numpy as np

from netprobe.errors import LatticeError, NetprobeError
from netprobe.tensor.entropy import entanglement_energies

__all__ = [
    "ColumnCut",
    "CutSpectrum",
    "column_cut",
    "translation_permutation",
    "signed_permutation",
    "cut_from_schmidt",
    "exact_cut",
    "mps_cut",
    "gaussian_cut",
    "translation_expectation_gaussian",
    "translation_unitary",
    "DEGENERACY_TOL",
]

DEGENERACY_TOL = 1e-7
"""Schmidt values whose levels -2 ln(s) differ by less than this are diagonalised together."""

_ZERO = 1e-14  # Schmidt values below this (relative to 1) carry no weight and are dropped


@dataclass(frozen=True, eq=False)
class ColumnCut:
    """Where the cylinder is cut and how the left part translates around y.

    Attributes
    ----------
    column : int
        Columns ``0 .. column-1`` form the left part.
    bond : int
        MPS bond of the cut: the number of sites of the left part.
    circumference : int
        Unit cells around y (the momentum quantum is ``2 pi / circumference``).
    column_sites : int
        Sites per column.
    shift : int
        Sites per unit cell: inside each column the translation is a cyclic shift by this many positions.
    permutation : ndarray of int, shape (bond,)
        ``T_+`` maps left site ``i`` to ``permutation[i]``.
    twist : float
        Flux through the cylinder (radians for a unit coupling charge); the translation carries
        ``exp(i q twist / circumference)`` for every unit of charge q in the left part (module notes).
    """

    column: int
    bond: int
    circumference: int
    column_sites: int
    shift: int
    permutation: np.ndarray = field(repr=False)
    twist: float = 0.0

    def charge_phase(self, q):
        """The gauge phase ``exp(i q twist / L_y)`` that the translation carries on charge ``q``."""
        return np.exp(1j * np.asarray(q, float) * self.twist / self.circumference)

    def site_phases(self, space) -> np.ndarray | None:
        """``exp(i q_s twist / L_y)`` for each local basis state s of ``space``; None without a twist.

        ``q`` is the charge that couples to the vector potential (``space.flux_charge`` times its
        coupling scale); a space without one gets None.
        """
        if not self.twist or getattr(space, "flux_charge", None) is None:
            return None
        return self.charge_phase(np.asarray(space.charges[space.flux_charge], float) * float(space.flux_charge_scale))


def translation_permutation(lattice) -> np.ndarray:
    """Site map of ``T_+``: ``(ix, iy, s) -> (ix, iy + 1 mod L_y, s)`` in MPS indices, shape (N,)."""
    cells, sub = lattice.cells, lattice.sublattice
    index = {(int(c[0]), int(c[1]), int(s)): k for k, (c, s) in enumerate(zip(cells, sub))}
    w = lattice.circumference
    return np.array([index[(int(c[0]), (int(c[1]) + 1) % w, int(s))]
                     for c, s in zip(lattice.cells, lattice.sublattice)], dtype=np.int64)


def column_cut(lattice, column: int | None = None, *, twist: float = 0.0) -> ColumnCut:
    """Validate a cut between columns and describe the translation of the left part.

    Parameters
    ----------
    lattice : Lattice
    column : int, optional
        Number of columns in the left part; default ``length // 2`` (the central cut).
    twist : float
        The model's flux through the cylinder (its ``twist`` parameter); the translation then
        carries the gauge phase that makes it measure kinetic momentum (module notes).

    Raises
    ------
    LatticeError
        For a geometry other than the cylinder, a circumference below 2, a cut outside
        ``1 .. length-1``, or columns whose translation is not a cyclic shift in MPS order.
    """
    if lattice.geometry != "cylinder":
        raise LatticeError(f"the cut diagnostics need a cylinder (open x, periodic y), got geometry "
                           f"'{lattice.geometry}'; use --set geometry=cylinder")
    if lattice.circumference < 2:
        raise LatticeError(f"circumference {lattice.circumference}: momentum around the cylinder needs at "
                           "least 2 unit cells; use --set circumference=N with N >= 2")
    length = lattice.length
    if column is None:
        column = length // 2
    if isinstance(column, bool) or not isinstance(column, (int, np.integer)) or not 1 <= column <= length - 1:
        raise LatticeError(f"cut column {column!r} is outside 1..{length - 1}: the left part holds that many "
                           f"of the {length} columns; use --cut C with 1 <= C <= {length - 1}")
    column = int(column)
    per_column = lattice.num_sites // length
    per_cell = per_column // lattice.circumference
    perm = translation_permutation(lattice)
    for ix in range(length):
        start = ix * per_column
        block = perm[start:start + per_column] - start
        expected = (np.arange(per_column) + per_cell) % per_column
        if not np.array_equal(block, expected):
            raise LatticeError(
                f"column {ix} of the {lattice.name} lattice is not mapped onto itself by a cyclic shift of one "
                "unit cell in MPS order; the cut diagnostics need columns invariant under the translation "
                "around y")
    bond = column * per_column
    perm = perm[:bond].copy()
    perm.setflags(write=False)
    return ColumnCut(column, bond, lattice.circumference, per_column, per_cell, perm, float(twist))


def signed_permutation(codes: np.ndarray, num_sites: int, d: int, permutation: np.ndarray,
                       parity: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """Images and signs of basis codes under a fermionic site permutation.

    ``|sigma> -> sign |sigma'>`` with ``sigma'_{pi(i)} = sigma_i`` and ``sign = (-1)^(sum over pairs
    i < j with pi(i) > pi(j) of p_i p_j)`` for site parities ``p`` (None: no signs). Codes put site 0
    in the most significant digit.
    """
    codes = np.asarray(codes, dtype=np.int64)
    powers = d ** np.arange(num_sites - 1, -1, -1, dtype=np.int64)
    digits = (codes[:, None] // powers[None, :]) % d
    image = np.zeros_like(digits)
    image[:, permutation] = digits
    new_codes = image @ powers
    sign = np.ones(codes.size)
    if parity is not None and np.any(parity):
        occ = np.asarray(parity)[digits]
        perm = np.asarray(permutation)
        i, j = np.triu_indices(num_sites, 1)
        crossed = perm[i] > perm[j]
        count = np.sum(occ[:, i[crossed]] * occ[:, j[crossed]], axis=1)
        sign = 1.0 - 2.0 * (count % 2)
    return new_codes, sign


@dataclass(frozen=True, eq=False)
class CutSpectrum:
    """Schmidt values at a cut with the charge and momentum of every Schmidt state.

    Attributes
    ----------
    values : ndarray, shape (n,)
        Schmidt values, descending within each charge, ``sum values**2 = 1``.
    charges : ndarray of int, shape (n, k)
        Charge of the left part (k conserved charges, may be 0).
    momenta : ndarray of int, shape (n,)
        ``m`` in ``k = 2 pi m / L_y``, reduced to ``(-L_y/2, L_y/2]``.
    phases : ndarray of float, shape (n,)
        ``k`` itself, from the eigenvalue of ``T_y^L`` (a check that it is a root of unity).
    moduli : ndarray of float, shape (n,)
        ``|eigenvalue|``: 1 up to truncation where the degenerate clusters are closed under ``T``.
    polarization : complex
        ``lambda = <T_+>``, the translation of the left part by one unit cell towards +y.
    circumference : int
    names : tuple of str
        Charge names.
    """

    values: np.ndarray = field(repr=False)
    charges: np.ndarray = field(repr=False)
    momenta: np.ndarray = field(repr=False)
    phases: np.ndarray = field(repr=False)
    moduli: np.ndarray = field(repr=False)
    polarization: complex
    circumference: int
    names: tuple[str, ...] = ()
    sectors: dict | None = field(default=None, repr=False)

    def sector_polarization(self) -> dict[tuple[int, ...], tuple[float, complex]]:
        """Per charge of the left part: its weight ``p_Q`` and ``lambda_Q = <T_+>`` within it (normalised).

        From the eigenvalues of ``T_+`` in the Schmidt basis, or exactly from the free-fermion
        generating function where the spectrum itself is cut off at a window.
        """
        if self.sectors is not None:
            return dict(self.sectors)
        eig = self.moduli * np.exp(-1j * self.phases)
        w = self.values**2
        out = {}
        for q in sorted(set(map(tuple, self.charges.tolist()))):
            mask = np.all(self.charges == np.array(q, dtype=np.int64).reshape(1, -1), axis=1) if q else \
                np.ones(w.size, bool)
            pq = float(np.sum(w[mask]))
            out[q] = (pq, complex(np.sum(w[mask] * eig[mask]) / pq))
        return out

    @property
    def levels(self) -> np.ndarray:
        """Entanglement energies ``-ln(values**2)``."""
        return entanglement_energies(self.values)

    def sorted(self, limit: int | None = None) -> list[dict]:
        """Entries ``{charge, momentum, level}`` by ascending level (the first ``limit``)."""
        order = np.argsort(self.levels, kind="stable")[:limit]
        out = []
        for k in order:
            q = self.charges[k].tolist()
            out.append({"charge": q[0] if len(q) == 1 else (q or None), "momentum": int(self.momenta[k]),
                        "level": float(self.levels[k])})
        return out

    def __repr__(self) -> str:
        return (f"CutSpectrum({len(self.values)} Schmidt values, L_y = {self.circumference}, "
                f"|lambda| = {abs(self.polarization):.6g}, "
                f"arg lambda = {cmath.phase(self.polarization):+.6f})")


def _reduce_momentum(phase: float, circumference: int) -> int:
    m = int(round(phase * circumference / (2 * math.pi))) % circumference
    return m - circumference if m > circumference // 2 else m


def cut_from_schmidt(blocks, circumference: int, names=(), tol: float = DEGENERACY_TOL) -> CutSpectrum:
    """Momenta of Schmidt states from ``T_+`` in each charge block's Schmidt basis.

    Parameters
    ----------
    blocks : list of (charge, s, t) or (charge, s, t, gauge)
        ``s`` the Schmidt values of one charge of the left part (any order), ``t`` the matrix
        ``<a|T_+|b>`` between the corresponding left Schmidt states; ``gauge`` (default 1) the
        phase ``exp(i q Q twist / L_y)`` that the gauge-covariant translation carries on this charge,
        divided out before the momenta are rounded to integers (the phases keep it).
    circumference : int
    names : tuple of str
    tol : float
        Levels closer than this form one cluster in which ``T_+`` is diagonalised.
    """
    values, charges, phases, moduli, canonical = [], [], [], [], []
    total = 0j
    for charge, s, t, *rest in blocks:
        gauge = complex(rest[0]) if rest else 1.0
        s = np.asarray(s, float)
        order = np.argsort(-s, kind="stable")
        s, t = s[order], np.asarray(t)[np.ix_(order, order)]
        total += np.sum(s**2 * np.diag(t))
        levels = entanglement_energies(s)
        start = 0
        while start < s.size:
            stop = start + 1
            while stop < s.size and levels[stop] - levels[stop - 1] < tol * max(1.0, abs(levels[stop])):
                stop += 1
            eig = np.linalg.eigvals(t[start:stop, start:stop])
            for e in eig:
                phases.append(-cmath.phase(e))  # T_+ = exp(-i k) on momentum k
                moduli.append(abs(e))
                canonical.append(-cmath.phase(e / gauge))
            values.extend(s[start:stop])
            charges.extend([charge] * (stop - start))
            start = stop
    values = np.array(values)
    norm = np.sum(values**2)
    phases = np.array(phases)
    momenta = np.array([_reduce_momentum(p, circumference) for p in canonical], dtype=np.int64)
    k = len(names)
    charges = np.array(charges, dtype=np.int64).reshape(len(values), k)
    return CutSpectrum(values / np.sqrt(norm), charges, momenta, phases, np.array(moduli),
                       complex(total / norm), circumference, tuple(names))


def _block_gauge(cut: ColumnCut, space, names, charge) -> complex:
    """``exp(i q Q twist / L_y)`` on a charge block of the left part (1 where the charge is not resolved)."""
    flux = getattr(space, "flux_charge", None)
    if not cut.twist or flux is None or flux not in names:
        return 1.0
    return complex(cut.charge_phase(float(charge[list(names).index(flux)]) * float(space.flux_charge_scale)))


# --------------------------------------------------------------------------------------------------
# Exact states
# --------------------------------------------------------------------------------------------------


def exact_cut(vector: np.ndarray, basis, space, cut: ColumnCut, *,
              tol: float = DEGENERACY_TOL) -> CutSpectrum:
    """Charge- and momentum-resolved Schmidt spectrum of an exact state (a vector on a sector basis).

    Parameters
    ----------
    vector : ndarray, shape (dim,)
    basis : SectorBasis
        The basis the vector lives on (codes, site 0 most significant).
    space : SiteSpace
    cut : ColumnCut
    """
    n, d = basis.num_sites, basis.local_dim
    n_left = cut.bond
    right_dim = d ** (n - n_left)
    left_codes, right_codes = np.divmod(basis.codes, right_dim)
    q = basis.local_charges
    powers = d ** np.arange(n_left - 1, -1, -1, dtype=np.int64)
    parity = space.parity if space.fermionic else None
    phases = cut.site_phases(space)
    names = tuple(basis.names)
    blocks = []
    left_unique, left_pos = np.unique(left_codes, return_inverse=True)
    digits = (left_unique[:, None] // powers[None, :]) % d
    left_charge = q[digits].sum(axis=1) if q.shape[1] else np.zeros((left_unique.size, 0), np.int64)
    for charge in np.unique(left_charge, axis=0):
        rows = np.nonzero(np.all(left_charge == charge, axis=1))[0]
        mask = np.isin(left_pos, rows)
        r_unique, r_pos = np.unique(right_codes[mask], return_inverse=True)
        row_of = np.full(left_unique.size, -1)
        row_of[rows] = np.arange(rows.size)
        mat = np.zeros((rows.size, r_unique.size), dtype=vector.dtype)
        mat[row_of[left_pos[mask]], r_pos] = vector[mask]
        u, s, _ = np.linalg.svd(mat, full_matrices=False)
        keep = s > _ZERO
        if not np.any(keep):
            continue
        u, s = u[:, keep], s[keep]
        image, sign = signed_permutation(left_unique[rows], n_left, d, cut.permutation, parity)
        if phases is not None:
            sign = sign * np.prod(phases[digits[rows]], axis=1)
        target = np.searchsorted(left_unique[rows], image)
        target = np.minimum(target, rows.size - 1)
        present = left_unique[rows][target] == image
        # <a|T|b> = sum_x conj(u[T x, a]) sign(x) u[x, b]; images outside the support carry no amplitude
        tu = np.zeros_like(u, dtype=complex)
        tu[target[present]] = sign[present, None] * u[present]
        blocks.append((tuple(int(c) for c in charge), s, u.conj().T @ tu, _block_gauge(cut, space, names, charge)))
    return cut_from_schmidt(blocks, cut.circumference, names, tol)


# --------------------------------------------------------------------------------------------------
# Matrix product states
# --------------------------------------------------------------------------------------------------


def _dense_site(tensor, order) -> np.ndarray:
    blocked = tensor.to_dense()
    a = np.zeros_like(blocked)
    a[:, order, :] = blocked
    return a


def _column_transfer(env: np.ndarray, sites: list[np.ndarray], shift: int,
                     parity: np.ndarray | None, kets: list[np.ndarray] | None = None) -> np.ndarray:
    """``E'[a', b'] = sum conj(A..)[a, s.., a'] <s..|T_+|s'..> A..[b, s'.., b']`` through one column.

    ``kets`` (default ``sites``) are the tensors on the ket side, e.g. with the gauge phases of a
    twist absorbed into their physical legs.

    The bra leg of position k meets the ket leg of position ``k - shift`` (cyclically); the legs
    not yet matched ride along as extra axes: ``g`` (open bra legs of the first ``shift``
    positions) and ``r`` (ket legs waiting for their bra partner), and a parity bit ``p`` of the
    front part for the fermion sign ``(-1)^(N_front N_back)``.
    """
    n = len(sites)
    d = sites[0].shape[1]
    fermionic = parity is not None and bool(np.any(parity))
    np_ = 2 if fermionic else 1
    e = np.zeros(env.shape + (np_,), dtype=complex)
    e[..., 0] = env
    free = list(range(3, 52))  # einsum's sublist labels; released ones are reused

    def new():
        return free.pop()

    a_lab, b_lab, p_lab = 0, 1, 2
    g_labs: list[int] = []
    r_labs: list[int] = []
    labels = [a_lab, b_lab, p_lab]
    if fermionic:
        flip = np.zeros((d, 2, 2))
        for s in range(d):
            for p in range(2):
                flip[s, p, p ^ int(parity[s])] = 1.0
        sign = np.array([[1.0, 1.0 - 2.0 * int(parity[s])] for s in range(d)])  # sign[s, p]
    kets = sites if kets is None else kets
    for k, a in enumerate(sites):
        ket = kets[k]
        # bra site k
        a_new = new()
        if k < shift:
            s_lab = new()
            g_labs.append(s_lab)
            out = [a_new if x == a_lab else x for x in labels] + [s_lab]
        else:
            s_lab = r_labs.pop(0)
            out = [a_new if x == a_lab else x for x in labels if x != s_lab]
        e = np.einsum(e, labels, a.conj(), [a_lab, s_lab, a_new], out, optimize=True)
        free.append(a_lab)
        if k >= shift:
            free.append(s_lab)
        labels, a_lab = out, a_new
        # ket site k
        b_new = new()
        if k < n - shift:
            s_lab = new()
            r_labs.append(s_lab)
            out = [b_new if x == b_lab else x for x in labels] + [s_lab]
            e = np.einsum(e, labels, ket, [b_lab, s_lab, b_new], out, optimize=True)
            free.append(b_lab)
            labels, b_lab = out, b_new
            if fermionic:
                p_new = new()
                out = [p_new if x == p_lab else x for x in labels]
                e = np.einsum(e, labels, flip, [s_lab, p_lab, p_new], out, optimize=True)
                free.append(p_lab)
                labels, p_lab = out, p_new
        else:
            s_lab = g_labs.pop(0)
            out = [b_new if x == b_lab else x for x in labels if x != s_lab]
            if fermionic:
                e = np.einsum(e, labels, ket, [b_lab, s_lab, b_new], sign, [s_lab, p_lab], out, optimize=True)
            else:
                e = np.einsum(e, labels, ket, [b_lab, s_lab, b_new], out, optimize=True)
            free.extend((b_lab, s_lab))
            labels, b_lab = out, b_new
    e = np.einsum(e, labels, [a_lab, b_lab])
    return e


def mps_cut(state, cut: ColumnCut, *, tol: float = DEGENERACY_TOL) -> CutSpectrum:
    """Charge- and momentum-resolved Schmidt spectrum of an MPS at a column cut.

    The left part, left-orthonormal up to the cut, is contracted with itself through ``T_+`` one
    column at a time (:func:`_column_transfer`); the matrix on the open bond of the cut is then
    taken into the Schmidt basis of the centre tensor, charge by charge.
    """
    work = state.copy()
    work.move_centre(cut.bond)
    order = work.basis.order
    space = work.basis.space
    parity = space.parity if space.fermionic else None
    phases = cut.site_phases(space)
    env = np.ones((1, 1), dtype=complex)
    n_col = cut.column_sites
    for c in range(cut.column):
        sites = [_dense_site(work.tensors[c * n_col + j], order) for j in range(n_col)]
        kets = None if phases is None else [a * phases[None, :, None] for a in sites]
        env = _column_transfer(env, sites, cut.shift, parity, kets)
    centre = work.tensors[cut.bond]
    dense = _dense_site(centre, order)
    mat = dense.reshape(dense.shape[0], -1)
    bond_charges = centre.legs[0].basis_charges()[:, : len(work.basis.conserved)]
    blocks = []
    for charge in np.unique(bond_charges, axis=0):
        rows = np.nonzero(np.all(bond_charges == charge, axis=1))[0]
        u, s, _ = np.linalg.svd(mat[rows], full_matrices=False)
        keep = s > _ZERO * max(1.0, float(np.linalg.norm(mat)))
        if not np.any(keep):
            continue
        u, s = u[:, keep], s[keep]
        t = u.conj().T @ env[np.ix_(rows, rows)] @ u
        blocks.append((tuple(int(c) for c in charge), s, t,
                       _block_gauge(cut, space, tuple(work.basis.conserved), charge)))
    return cut_from_schmidt(blocks, cut.circumference, work.basis.conserved, tol)


# --------------------------------------------------------------------------------------------------
# Free fermions
# --------------------------------------------------------------------------------------------------


def _mode_permutation(cut: ColumnCut, modes_per_site: int) -> np.ndarray:
    u = modes_per_site
    return (cut.permutation[:, None] * u + np.arange(u)[None, :]).ravel()


def translation_unitary(state, cut: ColumnCut) -> np.ndarray:
    """The one-particle translation ``U`` on the modes of the left part, gauge phase included.

    ``U e_i = exp(i twist / L_y) e_pi(i)``: every fermion mode carries one unit of the charge N that
    couples to the twist (module notes).
    """
    n_modes = cut.bond * state.modes_per_site
    unitary = np.zeros((n_modes, n_modes), dtype=complex)
    phase = complex(cut.charge_phase(1.0)) if cut.twist else 1.0
    unitary[_mode_permutation(cut, state.modes_per_site), np.arange(n_modes)] = phase
    return unitary


def translation_expectation_gaussian(g_left: np.ndarray, unitary: np.ndarray) -> complex:
    """``<Gamma(U)> = det(1 - G + G U)``.

    ``G_ij = <c_j^dag c_i>`` and ``Gamma(U) c_j^dag Gamma(U)^-1 = sum_i U_ij c_i^dag``.
    """
    n = g_left.shape[0]
    return complex(np.linalg.det(np.eye(n) - g_left + g_left @ unitary))


def _momentum_modes(unitary: np.ndarray, circumference: int):
    """Orthonormal eigenvectors of a permutation with ``U^L = 1`` by momentum m (``U = exp(-2 pi i m / L)``)."""
    w = circumference
    out = {}
    power = [np.eye(unitary.shape[0])]
    for _ in range(w - 1):
        power.append(unitary @ power[-1])
    for m in range(w):
        proj = sum(np.exp(2j * math.pi * m * j / w) * power[j] for j in range(w)) / w
        vals, vecs = np.linalg.eigh((proj + proj.conj().T) / 2)
        out[_reduce_momentum(2 * math.pi * m / w, w)] = vecs[:, vals > 0.5]
    return out


def gaussian_cut(state, cut: ColumnCut, *, window: float = 12.0, max_levels: int = 4000,
                 clip: float = 1e-15) -> CutSpectrum:
    """Momentum polarization and many-body entanglement levels of a number-conserving Gaussian state.

    Parameters
    ----------
    state : FreeFermionState
        A filled Fermi sea of fermion sites (not spins or hard-core bosons: their translation is not
        Gaussian in Jordan-Wigner fermions).
    cut : ColumnCut
    window : float
        Many-body levels up to this far above the lowest one are enumerated.
    max_levels : int
        At most this many levels (lowest first).

    Notes
    -----
    The entanglement modes diagonalise ``G_L`` within each momentum block of ``U`` (``G_L``
    commutes with ``U`` for a state invariant under the translation around y). A Slater
    determinant of modes ``S`` has Schmidt weight ``prod_S nu prod_(not S) (1 - nu)``, charge
    ``|S|`` and momentum ``sum_S m``; :func:`_enumerate_levels` walks the flips away from the
    most probable configuration in order of cost.
    """
    if getattr(state, "spin_like", False):
        raise NetprobeError("the free-fermion cut needs fermion sites; for spin or boson sites the translation "
                            "of the left part is not Gaussian in Jordan-Wigner fermions (use --engine exact "
                            "or dmrg)")
    if not hasattr(state, "correlation"):
        raise NetprobeError("the free-fermion cut needs a number-conserving state (no pairing terms); use "
                            "--engine exact or dmrg for this model")
    u_per = state.modes_per_site
    n_modes = cut.bond * u_per
    g = np.asarray(state.correlation)[:n_modes, :n_modes]
    unitary = translation_unitary(state, cut)
    lam_plus = translation_expectation_gaussian(g, unitary)
    nus, moms = [], []
    for m, vecs in _momentum_modes(np.abs(unitary), cut.circumference).items():
        if vecs.shape[1] == 0:
            continue
        block = vecs.conj().T @ g @ vecs
        nu = np.linalg.eigvalsh((block + block.conj().T) / 2)
        nus.append(nu)
        moms.append(np.full(nu.size, m))
    nu = np.clip(np.concatenate(nus), clip, 1 - clip)
    mom = np.concatenate(moms)
    values, charges, momenta = _enumerate_levels(nu, mom, window, max_levels)
    w = cut.circumference
    momenta = np.array([_reduce_momentum(2 * math.pi * m / w, w) for m in momenta], dtype=np.int64)
    phases = (2 * math.pi * momenta - cut.twist * charges) / w  # kinetic momentum (module notes)
    sectors = _charge_resolved(g, unitary, int(round(float(np.real(np.trace(g))))))
    return CutSpectrum(values, charges.reshape(-1, 1), momenta, phases, np.ones(values.size),
                       complex(lam_plus), w, ("N",), sectors)


def _charge_resolved(g: np.ndarray, unitary: np.ndarray, centre: int, points: int = 64, floor: float = 1e-9):
    """``p_Q`` and ``<T_+>`` within charge Q of the left part, from ``det(1 - G + G U e^(i theta))``.

    The determinant is a polynomial in ``e^(i theta)`` whose coefficient of ``e^(i Q theta)`` is
    ``p_Q lambda_Q`` (with U = 1: ``p_Q``); a discrete Fourier transform over ``points`` angles
    recovers the coefficients with ``|Q - centre| < points / 2`` (the others are negligible).
    """
    n = g.shape[0]
    thetas = 2 * math.pi * np.arange(points) / points
    eye = np.eye(n)
    f_t = np.array([np.linalg.det(eye - g + (g @ unitary) * np.exp(1j * t)) for t in thetas])
    f_1 = np.array([np.linalg.det(eye - g + g * np.exp(1j * t)) for t in thetas])
    out = {}
    for r in range(-points // 2 + 1, points // 2):
        q = centre + r
        phase = np.exp(-1j * thetas * q)
        pq = float(np.real(np.mean(phase * f_1)))
        if pq > floor:
            out[(q,)] = (pq, complex(np.mean(phase * f_t)) / pq)
    return out


def _enumerate_levels(nu: np.ndarray, mom: np.ndarray, window: float, max_levels: int):
    """Many-body levels of independent modes within ``window`` of the lowest, lowest first."""
    eps = np.log((1 - nu) / nu)  # level cost of occupying the mode
    filled = eps < 0
    base = float(np.sum(np.where(filled, -np.log(nu), -np.log(1 - nu))))
    cost = np.abs(eps)
    order = np.argsort(cost)
    cost, dq, dm = cost[order], np.where(filled, -1, 1)[order], np.where(filled, -1, 1)[order] * mom[order]
    n0 = int(np.sum(filled))
    m0 = int(np.sum(mom[filled]))
    found = []
    stack = [(0, 0.0, 0, 0)]  # next mode, cost so far, charge change, momentum change
    while stack:
        start, c, q, m = stack.pop()
        found.append((c, q, m))
        for j in range(start, cost.size):
            if c + cost[j] > window:
                break
            stack.append((j + 1, c + cost[j], q + dq[j], m + dm[j]))
        if len(found) > 50 * max_levels:
            break
    found.sort(key=lambda x: x[0])
    found = found[:max_levels]
    levels = np.array([base + f[0] for f in found])
    values = np.exp(-levels / 2)
    charges = np.array([n0 + f[1] for f in found], dtype=np.int64)
    momenta = np.array([m0 + f[2] for f in found], dtype=np.int64)
    return values, charges, momenta
