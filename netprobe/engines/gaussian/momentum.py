"""Free fermions on cylinders by momentum around y: block-diagonal quadratic forms and their functions.

A quadratic form on a cylinder is often invariant under the translation T by one unit cell around
y (periodic direction), twist and magnetic flux included: the Peierls phases of
:meth:`netprobe.model.lattice.Lattice.peierls_phase` use the Landau gauge A = (0, B x) plus a uniform
A_y, which depend on x only. Every function f(M) of such a matrix (the projector on filled levels,
the sign of ``i W``) is then translation invariant too and is fixed by its blocks in momentum.

Layout
------
A unit (a fermion mode, or a Majorana) sits in a slice ``y`` (the cell index around the cylinder)
and has an orbital ``r`` (its column of cells, sublattice and internal index), so that
``M[(y, r), (y', r')] = t_(y - y' mod L_y)[r, r']`` for a translation-invariant M. With
``k = 2 pi q / L_y``::

    M_q = sum_d t_d exp(-i k d)          (numpy's forward FFT over d)
    f(M)_d = (1/L_y) sum_q exp(i k d) f(M_q)   (the inverse FFT)

so the n x n eigendecomposition becomes L_y decompositions of size R = n / L_y, and any block of
f(M) between two unit sets is read from the L_y matrices ``f(M)_d`` without forming the rest.

Translation invariance is decided on the matrix itself: the form is used by momentum only when
``M`` equals its translate to ``atol`` (Jordan-Wigner strings of spin models across the seam, a
strip geometry, or site-dependent couplings break it; the caller then falls back to the dense
route).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = [
    "CylinderLayout",
    "CylinderMatrix",
    "cylinder_layout",
    "majorana_layout",
    "translation_blocks",
    "momentum_eigh",
    "matrix_function_blocks",
]


@dataclass(frozen=True, eq=False)
class CylinderLayout:
    """Where the units of a lattice sit: ``index[y, r]`` is the unit in slice y with orbital r.

    Attributes
    ----------
    index : ndarray of int, shape (L_y, R)
    slice_of, orbital_of : ndarray of int, shape (n,)
        The inverse map: unit u sits at ``(slice_of[u], orbital_of[u])``.
    """

    index: np.ndarray = field(repr=False)
    slice_of: np.ndarray = field(repr=False)
    orbital_of: np.ndarray = field(repr=False)

    @property
    def circumference(self) -> int:
        """Number of slices L_y (momenta)."""
        return self.index.shape[0]

    @property
    def num_orbitals(self) -> int:
        """Units per slice R (the size of a momentum block)."""
        return self.index.shape[1]

    def orbitals_of(self, units: np.ndarray) -> np.ndarray | None:
        """Orbitals of a set of units, or None if the set is not closed under the translation."""
        units = np.asarray(units, dtype=np.int64)
        orbitals = np.unique(self.orbital_of[units])
        index = self.index[:, orbitals]
        if index.size != units.size or not np.array_equal(np.sort(index.ravel()), np.sort(units)):
            return None
        return orbitals

    def __repr__(self) -> str:
        return f"CylinderLayout({self.circumference} slices x {self.num_orbitals} orbitals)"


def _from_index(index: np.ndarray, size: int) -> CylinderLayout:
    slice_of = np.full(size, -1, dtype=np.int64)
    orbital_of = np.full(size, -1, dtype=np.int64)
    w, r = index.shape
    slice_of[index.ravel()] = np.repeat(np.arange(w), r)
    orbital_of[index.ravel()] = np.tile(np.arange(r), w)
    return CylinderLayout(index, slice_of, orbital_of)


def cylinder_layout(lattice, units_per_site: int) -> CylinderLayout | None:
    """The slices and orbitals of a lattice's units; None where y is not periodic or L_y < 2.

    Units are numbered site by site (``site * units_per_site + a``) as in the Gaussian engine; the
    orbital of a unit is ``((ix * nb) + sublattice) * units_per_site + a`` for a site in cell
    (ix, iy), and its slice is iy.
    """
    if getattr(lattice, "geometry", "strip") == "strip" or lattice.circumference < 2:
        return None
    w = int(lattice.circumference)
    cells = np.asarray(lattice.cells)
    sub = np.asarray(lattice.sublattice)
    nb = int(sub.max()) + 1 if sub.size else 1
    n_sites = cells.shape[0]
    site_orbital = cells[:, 0] * nb + sub
    r_sites = n_sites // w
    if r_sites * w != n_sites or np.unique(site_orbital * w + cells[:, 1]).size != n_sites:
        return None
    if site_orbital.max() + 1 != r_sites:
        return None
    site_index = np.empty((w, r_sites), dtype=np.int64)
    site_index[cells[:, 1], site_orbital] = np.arange(n_sites)
    u = int(units_per_site)
    index = (site_index[:, :, None] * u + np.arange(u)[None, None, :]).reshape(w, r_sites * u)
    return _from_index(index, n_sites * u)


def majorana_layout(layout: CylinderLayout) -> CylinderLayout:
    """The layout of the Majoranas ``2u, 2u + 1`` of the modes u of a layout (orbitals ``2r, 2r + 1``)."""
    w, r = layout.index.shape
    index = (2 * layout.index[:, :, None] + np.arange(2)[None, None, :]).reshape(w, 2 * r)
    return _from_index(index, 2 * layout.slice_of.size)


def translation_blocks(matrix: np.ndarray, layout: CylinderLayout, atol: float,
                       entries: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None) -> np.ndarray | None:
    """The blocks ``t_d = M[(d, .), (0, .)]`` of a translation-invariant matrix, or None if it is not.

    Parameters
    ----------
    matrix : ndarray, shape (n, n)
    layout : CylinderLayout
    atol : float
        Largest entry of ``M - T M T^-1`` accepted as rounding.
    entries : (rows, cols, values), optional
        The nonzero entries of ``matrix`` (``np.nonzero`` order), if already at hand.

    Returns
    -------
    ndarray, shape (L_y, R, R) or None

    Notes
    -----
    Invariance means ``M[(y, a), (y', b)] = t_((y - y') mod L_y)[a, b]`` for every entry. It is
    checked on the stored (nonzero) entries of M, and, for every block entry that some zero of M
    should equal (fewer than L_y nonzeros fall on it), by ``|t_d[a, b]| <= atol``: the same test
    as comparing every translated copy, without gathering the whole matrix.
    """
    w, r = layout.index.shape
    flat = layout.index.ravel()
    if flat.size != matrix.shape[0]:
        return None
    blocks = np.ascontiguousarray(matrix[np.ix_(layout.index.ravel(), layout.index[0])].reshape(w, r, r))
    if entries is None:
        rows, cols = np.nonzero(matrix)
        values = matrix[rows, cols]
    else:
        rows, cols, values = entries
    d = (layout.slice_of[rows] - layout.slice_of[cols]) % w
    where = (d * r + layout.orbital_of[rows]) * r + layout.orbital_of[cols]
    flat_blocks = blocks.reshape(-1)
    if np.max(np.abs(values - flat_blocks[where]), initial=0.0) > atol:
        return None
    covered = np.bincount(where, minlength=flat_blocks.size) == w
    if np.max(np.abs(flat_blocks[~covered]), initial=0.0) > atol:
        return None
    return blocks


def momentum_eigh(blocks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues (ascending per momentum) and eigenvectors of the momentum blocks ``M_q``.

    Parameters
    ----------
    blocks : ndarray, shape (L_y, R, R)
        Real-space blocks ``t_d`` of a Hermitian translation-invariant matrix.

    Returns
    -------
    values : ndarray, shape (L_y, R)
    vectors : ndarray, shape (L_y, R, R)
        ``M_q = V_q diag(values_q) V_q^dag`` with ``M_q = sum_d t_d exp(-2 pi i q d / L_y)``.
    """
    mq = np.fft.fft(blocks, axis=0)
    mq = 0.5 * (mq + np.conj(np.swapaxes(mq, 1, 2)))  # Hermitian up to the FFT's rounding
    return np.linalg.eigh(mq)


def matrix_function_blocks(vectors: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Real-space blocks of ``f(M) = sum_q V_q diag(w_q) V_q^dag`` (inverse FFT over q).

    Parameters
    ----------
    vectors : ndarray, shape (L_y, R, R)
    weights : ndarray, shape (L_y, R)
        ``f`` of each eigenvalue.

    Returns
    -------
    ndarray, shape (L_y, R, R), complex
        ``f(M)_d`` such that ``f(M)[(y, r), (y', r')] = f(M)_(y - y' mod L_y)[r, r']``.
    """
    fq = np.matmul(vectors * weights[:, None, :], np.conj(np.swapaxes(vectors, 1, 2)))
    return np.fft.ifft(fq, axis=0)


class CylinderMatrix:
    """A translation-invariant n x n matrix held by its L_y real-space blocks.

    Parameters
    ----------
    blocks : ndarray, shape (L_y, R, R)
        ``M[(y, r), (y', r')] = blocks[(y - y') mod L_y, r, r']``.
    layout : CylinderLayout

    Notes
    -----
    :meth:`block` reads any rows and columns from the blocks (memory of the result only);
    :meth:`dense` forms the whole matrix once and keeps it.
    """

    def __init__(self, blocks: np.ndarray, layout: CylinderLayout):
        self.blocks = blocks
        self.layout = layout
        self._dense = None

    @property
    def shape(self) -> tuple[int, int]:
        """(n, n)."""
        n = self.layout.slice_of.size
        return n, n

    @property
    def dtype(self):
        """dtype of the entries."""
        return self.blocks.dtype

    def block(self, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """``M[np.ix_(rows, cols)]``."""
        if self._dense is not None:
            return self._dense[np.ix_(rows, cols)]
        y, r = self.layout.slice_of, self.layout.orbital_of
        d = (y[rows][:, None] - y[cols][None, :]) % self.layout.circumference
        return self.blocks[d, r[rows][:, None], r[cols][None, :]]

    def dense(self) -> np.ndarray:
        """The whole matrix (n^2 entries), formed on first use."""
        if self._dense is None:
            everything = np.arange(self.shape[0])
            full = self.block(everything, everything)
            full.setflags(write=False)
            self._dense = full
        return self._dense

    def __repr__(self) -> str:
        return (f"CylinderMatrix({self.shape[0]} x {self.shape[1]}, {self.layout.circumference} blocks of "
                f"{self.layout.num_orbitals})")
