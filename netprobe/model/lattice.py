"""Lattices on cylinders, strips and tori, with their bond families and the 1D order of the MPS.

Conventions (design notes, section 2): x runs along the open direction (``length`` unit cells),
y around the periodic direction (``circumference`` unit cells; the second primitive vector points
along y). Sites are numbered in the MPS order: columns of unit cells left to right, and inside a
column by increasing y (then sublattice). Every bond family is a tuple of :class:`Bond` objects
whose ``sites`` are MPS indices; ``positions`` are the members' unwrapped coordinates, from which
Peierls phases and seam crossings follow.

Geometries
    ``cylinder`` (open x, periodic y), ``strip`` (open in both), ``torus`` (periodic in both, for
    the exact engine). On a cylinder of circumference 1, bonds that wind around y are dropped, so
    the lattice becomes a chain or ladder.

Registered lattices
    ``chain``, ``square`` (also ``nn_along_x`` and ``nn_along_y``: nearest neighbours split by
    direction, member 1 one step along +x or +y from member 0), ``triangular``, ``honeycomb`` (orientation ``zigzag`` or
    ``armchair``: the kind of edge at the open ends; ``hexagons`` lists each complete hexagon with its
    members ordered by the type of their outward link, x, x, y, y, z, z; ``dangling_left`` and
    ``dangling_right`` list the sites on a single link at either end, which the zigzag ends have: the
    outer end of each z link there), ``kagome``, ``toric`` (spins on the edges of
    the square lattice, with ``stars`` and ``plaquettes``).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field

import numpy as np

from netprobe.errors import LatticeError

__all__ = ["Bond", "Lattice", "LATTICES", "GEOMETRIES", "ORIENTATIONS", "build_lattice"]

GEOMETRIES = ("cylinder", "strip", "torus")
ORIENTATIONS = ("zigzag", "armchair")
_ROUND = 9  # decimals used to compare coordinates


@dataclass(frozen=True)
class Bond:
    """A group of sites that one term acts on.

    Attributes
    ----------
    sites : tuple of int
        MPS indices of the members, in the order the term's operators are applied to.
    positions : ndarray, shape (k, 2)
        Unwrapped coordinates of the members (continuous across the seam).
    kind : str
        Sub-type of the bond where a lattice distinguishes them (honeycomb ``x``, ``y``, ``z``).
    slots : tuple of int
        Which member of the family's pattern each site fills; a bond cut by an open edge (allowed
        for toric-code stars and plaquettes) lacks some slots.
    arity : int
        Number of members of a complete bond of this family.
    """

    sites: tuple[int, ...]
    positions: np.ndarray = field(repr=False, compare=False)
    kind: str = ""
    slots: tuple[int, ...] = ()
    arity: int = 0


@dataclass(frozen=True)
class _Template:
    """Members as (cell offset x, cell offset y, sublattice) relative to an anchor cell."""

    family: str
    members: tuple[tuple[int, int, int], ...]
    kind: str = ""
    partial_ok: bool = False


@dataclass(frozen=True)
class _CellGeometry:
    a1: tuple[float, float]
    a2: tuple[float, float]
    basis: tuple[tuple[float, float], ...]

    def position(self, ix, iy, s) -> np.ndarray:
        return ix * np.array(self.a1) + iy * np.array(self.a2) + np.array(self.basis[s])

    @property
    def cell_area(self) -> float:
        return abs(self.a1[0] * self.a2[1] - self.a1[1] * self.a2[0])


_SQ3 = math.sqrt(3.0)
_CELLS = {
    "chain": _CellGeometry((1.0, 0.0), (0.0, 1.0), ((0.0, 0.0),)),
    "square": _CellGeometry((1.0, 0.0), (0.0, 1.0), ((0.0, 0.0),)),
    "triangular": _CellGeometry((_SQ3 / 2, 0.5), (0.0, 1.0), ((0.0, 0.0),)),
    "honeycomb-zigzag": _CellGeometry((1.5, _SQ3 / 2), (0.0, _SQ3), ((0.0, 0.0), (1.0, 0.0))),
    "honeycomb-armchair": _CellGeometry((_SQ3 / 2, 1.5), (0.0, 3.0), ((0.0, 0.0), (0.0, 1.0))),
    "kagome": _CellGeometry((_SQ3, 1.0), (0.0, 2.0), ((0.0, 0.0), (_SQ3 / 2, 0.5), (0.0, 1.0))),
    "toric": _CellGeometry((1.0, 0.0), (0.0, 1.0), ((0.5, 0.0), (0.0, 0.5))),
}

LATTICES = ("chain", "square", "triangular", "honeycomb", "kagome", "toric")


def _distance_shells(cell: _CellGeometry, reach: int = 3):
    """Pair templates grouped by distance: list of (distance, [template members])."""
    found = {}
    nb = len(cell.basis)
    for s1, s2 in itertools.product(range(nb), repeat=2):
        for dx, dy in itertools.product(range(-reach, reach + 1), repeat=2):
            if (dx, dy, s2) <= (0, 0, s1):  # keep one orientation of each pair
                continue
            d = np.linalg.norm(cell.position(dx, dy, s2) - cell.position(0, 0, s1))
            found.setdefault(round(d, 6), []).append(((0, 0, s1), (dx, dy, s2)))
    return sorted(found.items())


def _pair_templates(cell: _CellGeometry, shell: int, family: str):
    return [_Template(family, members) for members in _distance_shells(cell)[shell][1]]


def _triangle_templates(cell: _CellGeometry):
    """Elementary triangles (three mutually nearest-neighbour sites), members counterclockwise."""
    neighbours = {s: set() for s in range(len(cell.basis))}
    for (a, b) in _distance_shells(cell)[0][1]:  # a is always at cell (0, 0)
        neighbours[a[2]].add(b)
        neighbours[b[2]].add((-b[0], -b[1], a[2]))
    templates = []
    for s0 in range(len(cell.basis)):
        anchor = (0, 0, s0)
        for p, q in itertools.combinations(sorted(neighbours[s0]), 2):
            if (q[0] - p[0], q[1] - p[1], q[2]) not in neighbours[p[2]]:
                continue
            if min(anchor, p, q) != anchor:  # each triangle once, from its smallest member
                continue
            members = [anchor, p, q]
            pos = np.array([cell.position(*m) for m in members])
            centre = pos.mean(axis=0)
            order = np.argsort(np.arctan2(pos[:, 1] - centre[1], pos[:, 0] - centre[0]))
            templates.append(_Template("triangles", tuple(members[k] for k in order)))
    return templates


def _honeycomb_templates(cell: _CellGeometry, orientation: str):
    templates = []
    # nearest neighbours from A (sublattice 0) to B (sublattice 1), typed by direction
    for (a, b) in _distance_shells(cell)[0][1]:
        src, dst = (a, b) if a[2] == 0 else (b, a)
        vec = cell.position(*dst) - cell.position(*src)
        if orientation == "zigzag":  # one bond along x is the z bond
            kind = "z" if abs(vec[1]) < 1e-9 else ("x" if vec[1] > 0 else "y")
        else:  # armchair: one bond along y is the z bond
            kind = "z" if abs(vec[0]) < 1e-9 else ("x" if vec[0] > 0 else "y")
        templates.append(_Template("nn", (a, b), kind))
        templates.append(_Template(f"nn_{kind}", (a, b), kind))
    # next-nearest neighbours oriented with Haldane's nu_ij = +1: the path j -> k -> i turns left
    nn_vectors = {}
    for t in templates:
        if t.family == "nn":
            a, b = t.members
            v = cell.position(*b) - cell.position(*a)
            nn_vectors.setdefault(a[2], []).append(v)
            nn_vectors.setdefault(b[2], []).append(-v)
    for members in _distance_shells(cell)[1][1]:
        templates.append(_Template("nnn", members))
        i, j = members
        ri, rj = cell.position(*i), cell.position(*j)
        turn = None
        for d1 in nn_vectors[j[2]]:
            rk = rj + d1
            d2 = ri - rk
            if abs(np.linalg.norm(d2) - 1.0) < 1e-6:
                turn = d1[0] * d2[1] - d1[1] * d2[0]
        ordered = (i, j) if turn > 0 else (j, i)
        templates.append(_Template("nnn_oriented", ordered))
    # three-site paths j - k - l through a centre k whose links have types (a, b), a before b
    by_site = {0: [], 1: []}
    for t in templates:
        if t.family.startswith("nn_"):
            a, b = t.members
            by_site[a[2]].append(((b[0] - a[0], b[1] - a[1], b[2]), t.kind))
            by_site[b[2]].append(((a[0] - b[0], a[1] - b[1], a[2]), t.kind))
    for centre in (0, 1):
        for (p, kp), (q, kq) in itertools.permutations(by_site[centre], 2):
            pair = kp + kq
            if pair in ("xy", "yz", "zx"):
                templates.append(_Template(f"paths_{pair}", (p, (0, 0, centre), q)))
    return templates + _hexagon_templates(cell, templates)


def _hexagon_templates(cell: _CellGeometry, templates):
    """One hexagon per unit cell, members ordered by the type of the link pointing out of it.

    Each site of a hexagon has two links on it and one pointing out; the six out-link types are x, x,
    y, y, z, z (opposite sites share a type). Members are listed in that order (sublattice 0 first
    within a type), so ``ops = "X X Y Y Z Z"`` gives the plaquette operator W_p = prod_j sigma_j^{out}
    in either orientation (Kitaev, Annals of Physics 321, 2 (2006), eq. 6).
    """
    links = [t for t in templates if t.family.startswith("nn_")]
    kinds = {}  # (site relative to a sublattice-0 anchor) -> {neighbour: link type}
    for t in links:
        a, b = t.members
        for p, q in ((a, b), (b, a)):
            shift = (q[0] - p[0], q[1] - p[1], q[2])
            kinds.setdefault(p[2], {})[shift] = t.kind

    def neighbours(m):
        return {(m[0] + d[0], m[1] + d[1], d[2]): k for d, k in kinds[m[2]].items()}

    def left_turn(prev, cur, nxt):
        v0 = cell.position(*cur) - cell.position(*prev)
        v1 = cell.position(*nxt) - cell.position(*cur)
        return v0[0] * v1[1] - v0[1] * v1[0]

    # every hexagon has two links of each type; walk one from the sublattice-0 site at the cell origin,
    # turning left at every site, so the ring runs counterclockwise
    start = (0, 0, 0)
    ring = [start, next(iter(neighbours(start)))]
    while len(ring) < 7:
        prev, cur = ring[-2], ring[-1]
        ring.append(max((n for n in neighbours(cur) if n != prev), key=lambda n: left_turn(prev, cur, n)))
    if ring[6] != start:  # cannot happen on the honeycomb lattice
        raise LatticeError("internal: the hexagon walk did not close")
    centre_ring = ring[:6]
    members = []
    for k, m in enumerate(centre_ring):
        inside = {centre_ring[k - 1], centre_ring[(k + 1) % 6]}
        out = next(kind for n, kind in neighbours(m).items() if n not in inside)
        members.append((out, m[2], m))
    members.sort(key=lambda t: (t[0], t[1]))
    return [_Template("hexagons", tuple(m for _, _, m in members))]


def _square_plaquettes():
    return [_Template("plaquettes", ((0, 0, 0), (1, 0, 0), (1, 1, 0), (0, 1, 0)))]


def _toric_templates():
    h, v = 0, 1  # h edge of cell (ix, iy) joins vertices (ix, iy)-(ix+1, iy); v edge (ix, iy)-(ix, iy+1)
    stars = _Template("stars", ((0, 0, h), (0, 0, v), (-1, 0, h), (0, -1, v)), partial_ok=True)
    plaquettes = _Template("plaquettes", ((0, 0, h), (1, 0, v), (0, 1, h), (0, 0, v)), partial_ok=True)
    return [stars, plaquettes]


class Lattice:
    """A finite lattice with its sites in MPS order and its bond families.

    Use :func:`build_lattice` to construct one.

    Attributes
    ----------
    name, geometry, orientation : str
    length, circumference : int
        Unit cells along x (open) and around y.
    positions : ndarray, shape (N, 2)
        Site coordinates, y reduced into [0, circumference length) on periodic geometries.
    cells : ndarray of int, shape (N, 2)
        Unit cell (ix, iy) of each site.
    sublattice : ndarray of int, shape (N,)
    """

    def __init__(self, name, geometry, length, circumference, orientation, cell, templates):
        self.name = name
        self.geometry = geometry
        self.length = length
        self.circumference = circumference
        self.orientation = orientation
        self._cell = cell
        nb = len(cell.basis)
        raw = []
        for ix, iy, s in itertools.product(range(length), range(circumference), range(nb)):
            pos = cell.position(ix, iy, s)
            raw.append((ix, iy, s, pos))
        self.circumference_length = circumference * float(np.linalg.norm(cell.a2))
        self.length_vector = np.array(cell.a1) * length

        def wrap_y(y):
            if geometry == "strip":
                return y
            yw = y % self.circumference_length
            return 0.0 if abs(yw - self.circumference_length) < 1e-9 else yw

        order = sorted(range(len(raw)), key=lambda k: (raw[k][0], round(wrap_y(raw[k][3][1]), _ROUND), raw[k][2]))
        self._index = {}
        positions, cells, sub = [], [], []
        for new, old in enumerate(order):
            ix, iy, s, pos = raw[old]
            self._index[(ix, iy, s)] = new
            positions.append((pos[0], wrap_y(pos[1])))
            cells.append((ix, iy))
            sub.append(s)
        self.positions = np.array(positions, dtype=float)
        self.cells = np.array(cells, dtype=np.int64)
        self.sublattice = np.array(sub, dtype=np.int64)
        for arr in (self.positions, self.cells, self.sublattice):
            arr.setflags(write=False)
        # families are placed on first use (a model reads one or two of a lattice's dozen)
        self._templates = tuple(templates)
        names = ["sites", *dict.fromkeys(t.family for t in self._templates)]
        if self.name == "honeycomb":
            names += ["dangling_left", "dangling_right"]
        self._family_names = tuple(names)
        self._families: dict[str, tuple[Bond, ...]] = {}

    @property
    def num_sites(self) -> int:
        """Number of sites N."""
        return len(self.positions)

    @property
    def cell_area(self) -> float:
        """Area of the unit cell (sets the field strength of a given flux per cell)."""
        return self._cell.cell_area

    @property
    def families(self) -> tuple[str, ...]:
        """Names of the bond families this lattice has (always including ``sites``)."""
        return self._family_names

    def family(self, name: str) -> tuple[Bond, ...]:
        """The bonds of a family.

        Raises
        ------
        LatticeError
            If the lattice has no such family; the message lists the valid ones.
        """
        bonds = self._families.get(name)
        if bonds is None:
            if name not in self._family_names:
                raise LatticeError(
                    f"lattice '{self.name}' has no bond family '{name}'; valid families: {', '.join(self.families)}")
            bonds = self._families[name] = self._instantiate(name)
        return bonds

    def _cell_positions(self, ix: np.ndarray, iy: np.ndarray, s) -> np.ndarray:
        """:meth:`_CellGeometry.position` for arrays of cells, row by row the same arithmetic."""
        cell = self._cell
        basis = np.array(cell.basis, dtype=float)[s]
        return ix[:, None] * np.array(cell.a1) + iy[:, None] * np.array(cell.a2) + basis

    def _instantiate(self, name: str) -> tuple[Bond, ...]:
        """The bonds of one family, in the order of its templates and of the cells."""
        if name == "sites":
            places = self._cell_positions(self.cells[:, 0], self.cells[:, 1], self.sublattice)
            return tuple(Bond((k,), places[k][None, :], "", (0,), 1) for k in range(self.num_sites))
        if name in ("dangling_left", "dangling_right"):  # honeycomb: outer ends of the links at a zigzag end
            count = np.zeros(self.num_sites, np.int64)
            for bond in self.family("nn"):
                count[list(bond.sites)] += 1
            dangling = [b for b in self.family("sites") if count[b.sites[0]] == 1]
            middle = 0.5 * (self.positions[:, 0].min() + self.positions[:, 0].max())
            left = name == "dangling_left"
            return tuple(b for b in dangling if (self.positions[b.sites[0], 0] < middle) == left)
        L, W = self.length, self.circumference
        nb = len(self._cell.basis)
        index = np.full((L, W, nb), -1, dtype=np.int64)  # MPS index of each (ix, iy, s)
        for key, k in self._index.items():
            index[key] = k
        # the cells in the order of itertools.product(range(L), range(W))
        cx = np.repeat(np.arange(L, dtype=np.int64), W)
        cy = np.tile(np.arange(W, dtype=np.int64), L)
        bonds: list[Bond] = []
        for t in self._templates:
            if t.family != name:
                continue
            m = len(t.members)
            present, sites, winds, places = [], [], [], []
            for dx, dy, s in t.members:  # each member mapped onto the finite lattice for all cells at once
                jx, jy = cx + dx, cy + dy
                ok = np.ones(len(cx), dtype=bool)
                if self.geometry == "torus":
                    jx = jx % L
                else:
                    ok &= (jx >= 0) & (jx < L)
                if self.geometry == "strip":
                    ok &= (jy >= 0) & (jy < W)
                    wind = np.zeros_like(jy)
                else:
                    wind = jy // W
                    jy = jy % W
                site = np.where(ok, index[np.where(ok, jx, 0), np.where(ok, jy, 0), s], -1)
                present.append(ok)
                sites.append(site)
                winds.append(wind)
                places.append(self._cell_positions(cx + dx, cy + dy, s))
            present = np.stack(present, axis=1).tolist()
            sites = np.stack(sites, axis=1).tolist()
            winds = np.stack(winds, axis=1).tolist()
            places = np.stack(places, axis=1)  # (cells, members, 2), unwrapped coordinates
            whole = tuple(range(m))
            seen = set()
            for c in range(len(cx)):
                here = present[c]
                if all(here):
                    slots = whole
                    bond_sites = tuple(sites[c])
                    bond_winds = tuple(winds[c])
                else:
                    slots = tuple(k for k in whole if here[k])
                    if not (t.partial_ok and len(slots) >= 2):
                        continue
                    bond_sites = tuple(sites[c][k] for k in slots)
                    bond_winds = tuple(winds[c][k] for k in slots)
                if len(set(bond_sites)) < len(bond_sites):
                    continue  # members coincide on a too-small lattice
                if self.circumference == 1 and self.geometry != "strip" and len(set(bond_winds)) > 1:
                    continue  # a bond around a width-1 cylinder would join a site to itself's image
                key = bond_sites, bond_winds
                if key in seen:
                    continue
                seen.add(key)
                positions = places[c] if slots is whole else places[c, list(slots)]
                bonds.append(Bond(bond_sites, positions, t.kind, slots, m))
        return tuple(bonds)

    def peierls_phase(self, bond: Bond, *, flux: float = 0.0, twist: float = 0.0) -> float:
        """Phase picked up by a unit charge hopping from ``bond.sites[1]`` to ``bond.sites[0]``.

        Landau gauge A = (0, B x) with B = 2 pi flux / (cell area), so the phase around one unit
        cell is 2 pi ``flux``; the twist adds a uniform A_y = twist / (circumference length), so a
        particle going once around the cylinder picks up ``twist`` (a flux threaded through it).

        Returns the line integral of A along the straight segment from member 1 to member 0.
        """
        (x0, y0), (x1, y1) = bond.positions[0], bond.positions[1]
        b_field = 2 * math.pi * flux / self.cell_area
        a_twist = twist / self.circumference_length if self.geometry != "strip" else 0.0
        return (b_field * 0.5 * (x0 + x1) + a_twist) * (y0 - y1)

    def peierls_phases(self, bonds, *, flux: float = 0.0, twist: float = 0.0) -> list:
        """:meth:`peierls_phase` of many bonds at once, as Python floats (``None`` for one-member bonds).

        The same arithmetic in the same order, element by element, so every value equals the one
        :meth:`peierls_phase` gives to the last bit.
        """
        at = [k for k, bond in enumerate(bonds) if len(bond.positions) >= 2]
        out: list = [None] * len(bonds)
        if not at:
            return out
        pos = np.array([bonds[k].positions[:2] for k in at], dtype=float)
        x0, y0, x1, y1 = pos[:, 0, 0], pos[:, 0, 1], pos[:, 1, 0], pos[:, 1, 1]
        b_field = 2 * math.pi * flux / self.cell_area
        a_twist = twist / self.circumference_length if self.geometry != "strip" else 0.0
        values = ((b_field * 0.5 * (x0 + x1) + a_twist) * (y0 - y1)).tolist()
        for k, value in zip(at, values):
            out[k] = value
        return out

    def distance(self, i: int, j: int) -> float:
        """Distance between two sites with the minimal image around periodic directions."""
        d = self.positions[i] - self.positions[j]
        if self.geometry != "strip":
            c = self.circumference_length
            d[1] = (d[1] + c / 2) % c - c / 2
        if self.geometry == "torus":
            lx = self.length_vector
            # the x wrap carries the shear of a1; find the shortest image among a few
            best = np.linalg.norm(d)
            for n in (-1, 1):
                e = d + n * lx
                e[1] = (e[1] + self.circumference_length / 2) % self.circumference_length - self.circumference_length / 2
                best = min(best, np.linalg.norm(e))
            return float(best)
        return float(np.linalg.norm(d))

    def describe(self) -> str:
        """One line: lattice, geometry, sizes, sites."""
        orient = f" ({self.orientation})" if self.name == "honeycomb" else ""
        return (
            f"{self.name}{orient} {self.geometry}, length {self.length} x circumference "
            f"{self.circumference} cells, {self.num_sites} sites"
        )

    def __repr__(self) -> str:
        return f"Lattice({self.describe()})"


def build_lattice(
    name: str, *, length: int, circumference: int, geometry: str = "cylinder", orientation: str = "zigzag"
) -> Lattice:
    """Build a registered lattice.

    Parameters
    ----------
    name : {'chain', 'square', 'triangular', 'honeycomb', 'kagome', 'toric'}
    length : int
        Unit cells along x (the open direction), at least 1.
    circumference : int
        Unit cells around y, at least 1; must be 1 for ``chain``.
    geometry : {'cylinder', 'strip', 'torus'}
    orientation : {'zigzag', 'armchair'}
        Honeycomb only: the kind of edge at the open ends.

    Raises
    ------
    LatticeError
        For an unknown name, geometry or orientation, or a bad size.
    """
    if name not in LATTICES:
        raise LatticeError(f"unknown lattice '{name}'; valid lattices: {', '.join(LATTICES)}")
    if geometry not in GEOMETRIES:
        raise LatticeError(f"unknown geometry '{geometry}'; valid geometries: {', '.join(GEOMETRIES)}")
    for label, value in (("length", length), ("circumference", circumference)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < 1:
            raise LatticeError(f"{label} must be a positive integer, got {value!r}; set it with --set {label}=N")
    if name == "chain" and circumference != 1:
        raise LatticeError(
            f"the chain lattice has circumference 1, got {circumference}; use --set circumference=1 "
            "or a two-dimensional lattice (square, triangular, ...)"
        )
    if name == "honeycomb" and orientation not in ORIENTATIONS:
        raise LatticeError(f"unknown honeycomb orientation '{orientation}'; valid: {', '.join(ORIENTATIONS)}")
    key = f"honeycomb-{orientation}" if name == "honeycomb" else name
    cell = _CELLS[key]
    if name == "chain":  # second neighbours two steps along x (the square cell's diagonals would wrap)
        templates = [_Template(f, ((0, 0, 0), (1, 0, 0))) for f in ("nn", "nn_along_x")]
        templates.append(_Template("nnn", ((0, 0, 0), (2, 0, 0))))
    elif name == "square":
        nn = _pair_templates(cell, 0, "nn")
        along = [_Template("nn_along_x" if t.members[1][1] == 0 else "nn_along_y", t.members) for t in nn]
        templates = nn + along + _pair_templates(cell, 1, "nnn") + _square_plaquettes()
    elif name == "honeycomb":
        templates = _honeycomb_templates(cell, orientation)
    elif name == "toric":
        templates = _pair_templates(cell, 0, "nn") + _toric_templates()
    else:
        templates = _pair_templates(cell, 0, "nn") + _pair_templates(cell, 1, "nnn") + _triangle_templates(cell)
    return Lattice(name, geometry, int(length), int(circumference), orientation, cell, templates)
