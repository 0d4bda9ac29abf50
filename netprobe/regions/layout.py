"""Regions of a lattice in real-space coordinates: disks, three-sector disks, rings, shells, strips, cuts.

A region layout names a few disjoint parts, each a single capital letter (``A``, ``B``, ``C``), and
holds for each part the sorted site indices of the lattice that fall inside it. Parts are always
defined by coordinates (distances and angles measured from a centre with the minimal image around
y), never by positions in the MPS order; the reduced-density-matrix stage takes the site sets as
they come.

Layout kinds (the registry :data:`LAYOUTS`; command-line syntax in :data:`SYNTAX`)
    ``disk``       A: sites with d <= radius.
    ``sectors``    the disk cut into three 120-degree sectors A, B, C, counterclockwise from ``start``;
                   for the Kitaev-Preskill combination and the modular commutator J(A, B, C).
    ``annulus``    A: sites with inner < d <= outer.
    ``levin_wen``  the ring inner < d <= outer cut by two arcs B into two arcs A and C.
    ``shielded``   A: d <= a, B: a < d <= b, C: b < d <= c (A inside, B a ring, C outside).
    ``strips``     three adjacent strips A | B | C along x (bands around the cylinder) or along y.
    ``half``       A: the sites left of a cut across the cylinder.

Conventions (design notes, section 2): x runs along the open direction, y around the cylinder,
angles are in degrees, measured counterclockwise from the +x axis in the (x, y) plane with x to the
right and y up. Three-part disks follow each other counterclockwise, so that c- = 3 J(A, B, C) / pi.

Radii and strip edges are compared with a tolerance of 1e-9: a site at exactly the radius is
inside. Without an explicit centre, layouts sit at :func:`default_center`, the centre of a face
of the lattice near its middle.

Every builder checks its result: the shape stays inside the lattice's x range, no part is empty,
parts are disjoint, a margin of whole unit-cell columns stays free at each open end, no region
closes around the cylinder (except the kinds made for that: ``half`` and bands of ``strips``),
rings have a real hole, and B separates A from C wherever a conditional mutual information
I(A:C|B) is meant. Failures raise :class:`~netprobe.errors.LatticeError` with a one-line message
that says what to shrink or enlarge. :class:`RegionLimits` sets the margins.
"""

from __future__ import annotations

import inspect
import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Any, Iterable, Mapping

import numpy as np

from netprobe.errors import LatticeError
from netprobe.model.lattice import Lattice

__all__ = [
    "Layout",
    "RegionLimits",
    "LAYOUTS",
    "SYNTAX",
    "CENTER_OFFSET",
    "build_layout",
    "parse_region",
    "default_center",
    "disk",
    "sectors",
    "annulus",
    "levin_wen",
    "shielded",
    "strips",
    "half",
]

_TOL = 1e-9  # coordinates are sums of a few lattice vectors; equal distances agree far better than this
CENTER_OFFSET = (0.137, 0.071)
"""Shift of the default centre, in nearest-neighbour lengths, where a face centre is not generic."""


@dataclass(frozen=True, kw_only=True)
class RegionLimits:
    """How much room a region must leave, and which bonds define contact.

    Parameters
    ----------
    margin : int
        Whole unit-cell columns at each open end in x (rows at each edge of a strip geometry) that no
        part may touch. Edge modes of chiral phases live there.
    gap : float
        Length (in the lattice's unit, the lattice spacing of the lattices built here) that must
        stay outside a region around the cylinder, so that the region does not close on
        itself around the back: a disk needs 2 radius <= circumference length - gap.
    bonds : str
        Bond family of the lattice used to decide whether B separates A from C.
    """

    margin: int = 1
    gap: float = 1.0
    bonds: str = "nn"

    def __post_init__(self):
        if isinstance(self.margin, bool) or not isinstance(self.margin, (int, np.integer)) or self.margin < 0:
            raise LatticeError(f"region margin must be a whole number of columns >= 0, got {self.margin!r}")
        if not isinstance(self.gap, (int, float)) or not math.isfinite(self.gap) or self.gap < 0:
            raise LatticeError(f"region gap must be a length >= 0, got {self.gap!r}")


def _fmt(value: float) -> str:
    return f"{value:.4g}"


def _spec_value(value) -> str:
    if isinstance(value, tuple):
        return ",".join(repr(float(v)) for v in value)
    if isinstance(value, float):
        return repr(value)
    return str(value)


@dataclass(frozen=True)
class Layout:
    """Named disjoint parts of a lattice, with the kind and parameters that produced them.

    Build one with a layout function (:func:`disk`, :func:`sectors`, ...), :func:`build_layout` or
    :func:`parse_region`; direct construction checks only the structure (names, indices, overlap).

    Parameters
    ----------
    kind : str
        Layout kind, a key of :data:`LAYOUTS` for layouts built here.
    parts : mapping of str to sequence of int
        Part name (one capital letter) -> site indices; stored sorted, in the given part order.
    lattice : Lattice
        The lattice the indices refer to (not part of equality).
    params : mapping
        Parameters with defaults resolved (the centre actually used, for instance), enough to
        rebuild the layout with :func:`build_layout`.

    Examples
    --------
    >>> from netprobe.model.lattice import build_lattice
    >>> lat = build_lattice("square", length=9, circumference=8)
    >>> lay = sectors(lat, radius=2.5)
    >>> lay.names, len(lay.union("ABC")) == len(disk(lat, radius=2.5)["A"])
    (('A', 'B', 'C'), True)
    """

    kind: str
    parts: Mapping[str, tuple[int, ...]]
    lattice: Lattice = field(compare=False, repr=False)
    params: Mapping[str, Any] = field(default_factory=dict)

    def __post_init__(self):
        n = self.lattice.num_sites
        clean, owner = {}, {}
        for name, sites in dict(self.parts).items():
            if not (isinstance(name, str) and len(name) == 1 and name.isalpha() and name.isupper()):
                raise LatticeError(f"region part names are single capital letters (A, B, C), got {name!r}")
            idx = []
            for s in sites:
                if isinstance(s, bool) or not isinstance(s, (int, np.integer)) or not 0 <= s < n:
                    raise LatticeError(
                        f"part {name} contains site {s!r}; the lattice has {n} sites (0 to {n - 1})")
                if int(s) in owner:
                    raise LatticeError(
                        f"parts {owner[int(s)]} and {name} overlap in site {int(s)}; "
                        "the parts of a layout must be disjoint"
                    )
                owner[int(s)] = name
                idx.append(int(s))
            clean[name] = tuple(sorted(idx))
        params = dict(self.params)
        if params.get("center") is not None:  # JSON brings the centre back as a list
            params["center"] = tuple(float(x) for x in params["center"])
        object.__setattr__(self, "parts", MappingProxyType(clean))
        object.__setattr__(self, "params", MappingProxyType(params))

    def __hash__(self):
        return hash((self.kind, tuple(self.parts.items()), tuple(self.params.items())))

    @property
    def names(self) -> tuple[str, ...]:
        """Part names in layout order."""
        return tuple(self.parts)

    @property
    def sizes(self) -> dict[str, int]:
        """Number of sites in each part."""
        return {name: len(sites) for name, sites in self.parts.items()}

    @property
    def center(self) -> tuple[float, float] | None:
        """Centre of the layout, or None for kinds without one (``half``)."""
        return self.params.get("center")

    def __getitem__(self, name: str) -> tuple[int, ...]:
        try:
            return self.parts[name]
        except KeyError:
            raise LatticeError(
                f"layout '{self.kind}' has no part {name!r}; its parts are {', '.join(self.parts)}"
            ) from None

    def union(self, names: str | Iterable[str]) -> tuple[int, ...]:
        """Sorted sites of several parts: ``union("AB")`` or ``union(["A", "B"])``."""
        out: set[int] = set()
        for name in names:
            out.update(self[name])
        return tuple(sorted(out))

    def complement(self, names: str | Iterable[str] | None = None) -> tuple[int, ...]:
        """Sorted sites outside the given parts (default: outside every part)."""
        inside = set(self.union(self.names if names is None else names))
        return tuple(s for s in range(self.lattice.num_sites) if s not in inside)

    def positions(self, names: str | Iterable[str]) -> np.ndarray:
        """Coordinates, shape (n, 2), of the sites of ``union(names)``."""
        return self.lattice.positions[list(self.union(names))]

    def components(self, name: str, *, bonds: str = "nn") -> tuple[tuple[int, ...], ...]:
        """Connected pieces of a part, joined by the bonds of a family (two arcs for Levin-Wen B)."""
        return _components(self.lattice, self[name], bonds)

    @property
    def spec(self) -> str:
        """The layout in command-line syntax; :func:`parse_region` turns it back into this layout."""
        body = ",".join(f"{k}={_spec_value(v)}" for k, v in self.params.items())
        return f"{self.kind}:{body}" if body else self.kind

    def describe(self) -> str:
        """One line: kind, parameters and part sizes."""
        sizes = ", ".join(f"{k} {v}" for k, v in self.sizes.items())
        return f"{self.spec} ({sizes} sites)"

    def to_json(self) -> dict:
        """Plain JSON-ready dict: kind, spec, parameters, lattice, and per part its sites and coordinates."""
        lat = self.lattice
        return {
            "kind": self.kind,
            "spec": self.spec,
            "params": {k: list(v) if isinstance(v, tuple) else v for k, v in self.params.items()},
            "lattice": {
                "name": lat.name,
                "geometry": lat.geometry,
                "orientation": lat.orientation,
                "length": int(lat.length),
                "circumference": int(lat.circumference),
                "num_sites": int(lat.num_sites),
            },
            "parts": {
                name: {"sites": list(sites), "positions": lat.positions[list(sites)].tolist()}
                for name, sites in self.parts.items()
            },
        }

    def __repr__(self) -> str:
        return f"Layout({self.describe()})"


# ----------------------------------------------------------------------------------------------
# geometry helpers


def _column_step(lat: Lattice) -> float:
    return float(lat.length_vector[0]) / lat.length


def _cell_y(lat: Lattice) -> float:
    return lat.circumference_length / lat.circumference


def _nn_length(lat: Lattice) -> float:
    try:
        bonds = lat.family("nn")
    except LatticeError:
        bonds = ()
    if not bonds:
        return _cell_y(lat)
    return float(np.linalg.norm(bonds[0].positions[1] - bonds[0].positions[0]))


def _face_centres(lat: Lattice) -> np.ndarray:
    """Centres of the smallest faces of the lattice (triangles, plaquettes, hexagons), shape (k, 2)."""
    for family in ("triangles", "plaquettes"):
        if family in lat.families:
            bonds = [b for b in lat.family(family) if len(b.sites) == b.arity]
            if bonds:
                return np.array([b.positions.mean(axis=0) for b in bonds])
    # lattices whose bonds meet at 120 degrees (honeycomb): site + e1 + e2 is the centre of the
    # hexagon between the bonds e1 and e2
    out = []
    try:
        pairs = list(_bond_pairs(lat, "nn"))
    except LatticeError:
        return np.zeros((0, 2))
    vectors: dict[int, list[np.ndarray]] = {}
    for i, j, v in pairs:
        vectors.setdefault(i, []).append(v)
        vectors.setdefault(j, []).append(-v)
    for i, vs in vectors.items():
        for p in range(len(vs)):
            for q in range(p + 1, len(vs)):
                cos = float(vs[p] @ vs[q]) / (np.linalg.norm(vs[p]) * np.linalg.norm(vs[q]))
                if abs(cos + 0.5) < 1e-6:
                    out.append(lat.positions[i] + vs[p] + vs[q])
    return np.array(out).reshape(-1, 2)


def _is_generic(lat: Lattice, center, start: float = 90.0) -> bool:
    """No site at the centre or within 1e-6 of a default sector boundary ray."""
    d = _displacements(lat, center)
    r = np.hypot(d[:, 0], d[:, 1])
    if (r < 1e-6).any():
        return False
    for k in range(3):
        t = math.radians(start + 120.0 * k)
        u = np.array([math.cos(t), math.sin(t)])
        along = d @ u
        off = np.abs(d[:, 0] * u[1] - d[:, 1] * u[0])
        if ((along > 0) & (off < 1e-6)).any():
            return False
    return True


def default_center(lattice: Lattice) -> tuple[float, float]:
    """Default centre of a layout: the centre of a smallest face near the middle of the lattice.

    The middle is the midpoint of the occupied x range and, around the cylinder, half the
    circumference (the midpoint of the occupied y range on a strip or on a cylinder of
    circumference 1). The centre is the centroid of the face closest to it: an elementary triangle
    (triangular, kagome), a plaquette (square, toric) or a hexagon (honeycomb); a lattice without
    faces (chain) keeps the middle. Face centres are rotation centres of the lattice, so on
    lattices with a threefold axis the three sectors of :func:`sectors` are images of each other
    and hold equal numbers of sites. If a site sits at the chosen point or exactly on a boundary
    ray of the default sectors (start 90 degrees), as on the toric lattice, the point is moved by
    :data:`CENTER_OFFSET` nearest-neighbour lengths, an offset unrelated to any lattice vector.

    Returns
    -------
    (float, float)
        Rounded to 9 decimals.
    """
    pos = lattice.positions
    x_mid = 0.5 * (pos[:, 0].min() + pos[:, 0].max())
    if lattice.geometry == "strip" or lattice.circumference == 1:
        y_mid = 0.5 * (pos[:, 1].min() + pos[:, 1].max())
    else:
        y_mid = 0.5 * lattice.circumference_length
    centre = np.array([x_mid, y_mid])
    faces = _face_centres(lattice)
    if len(faces):
        d = faces - centre
        d[:, 1] = _wrap_dy(lattice, d[:, 1])
        dist = np.round(np.hypot(d[:, 0], d[:, 1]), 9)
        best = min(range(len(faces)), key=lambda k: (dist[k], round(d[k, 0], 9), round(d[k, 1], 9)))
        centre = centre + d[best]
    if not _is_generic(lattice, centre):
        centre = centre + np.array(CENTER_OFFSET) * _nn_length(lattice)
    cy = float(centre[1]) if lattice.geometry == "strip" else float(centre[1]) % lattice.circumference_length
    return round(float(centre[0]), 9), round(cy, 9)


def _wrap_dy(lat: Lattice, dy):
    if lat.geometry == "strip":
        return dy
    c = lat.circumference_length
    return (dy + c / 2) % c - c / 2


def _displacements(lat: Lattice, center) -> np.ndarray:
    """Site positions minus the centre, shape (N, 2), minimal image around the periodic directions."""
    d = lat.positions - np.asarray(center, dtype=float)
    d[:, 1] = _wrap_dy(lat, d[:, 1])
    if lat.geometry == "torus":
        best = np.linalg.norm(d, axis=1)
        for n in (-1, 1):
            e = d + n * lat.length_vector
            e[:, 1] = _wrap_dy(lat, e[:, 1])
            norm = np.linalg.norm(e, axis=1)
            better = norm < best - _TOL
            d[better], best[better] = e[better], norm[better]
    return d


def _polar(lat: Lattice, center):
    """Distances and angles in degrees in [0, 360) of every site, seen from the centre."""
    d = _displacements(lat, center)
    return np.hypot(d[:, 0], d[:, 1]), np.degrees(np.arctan2(d[:, 1], d[:, 0])) % 360.0


def _resolve_center(lat: Lattice, center, kind: str) -> tuple[float, float]:
    if center is None:
        return default_center(lat)
    try:
        cx, cy = (float(v) for v in center)
    except (TypeError, ValueError):
        raise LatticeError(
            f"{kind}: center must be two numbers (x, y), got {center!r}; e.g. center=3.5,2.1") from None
    if not (math.isfinite(cx) and math.isfinite(cy)):
        raise LatticeError(f"{kind}: center must be finite, got ({cx}, {cy})")
    if lat.geometry != "strip":
        cy = cy % lat.circumference_length
    return cx, cy


def _number(kind: str, name: str, value, *, positive: bool = True) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise LatticeError(f"{kind}: {name} must be a number, got {value!r}") from None
    if not math.isfinite(v) or (positive and v <= 0):
        raise LatticeError(f"{kind}: {name} must be a positive number, got {value!r}")
    return v


def _bond_pairs(lat: Lattice, family: str):
    """(i, j, vector from i to j without wrapping) for every pair of members of every bond."""
    for bond in lat.family(family):
        for p in range(len(bond.sites)):
            for q in range(p + 1, len(bond.sites)):
                yield bond.sites[p], bond.sites[q], bond.positions[q] - bond.positions[p]


def _components(lat: Lattice, sites, family: str = "nn"):
    inside = set(int(s) for s in sites)
    adj: dict[int, list[int]] = {s: [] for s in inside}
    for i, j, _ in _bond_pairs(lat, family):
        if i in inside and j in inside:
            adj[i].append(j)
            adj[j].append(i)
    seen, pieces = set(), []
    for root in sorted(inside):
        if root in seen:
            continue
        seen.add(root)
        stack, piece = [root], []
        while stack:
            i = stack.pop()
            piece.append(i)
            for j in adj[i]:
                if j not in seen:
                    seen.add(j)
                    stack.append(j)
        pieces.append(tuple(sorted(piece)))
    return tuple(pieces)


def _winding_pair(lat: Lattice, sites):
    """Two sites whose nearest-neighbour paths inside ``sites`` differ by a loop around the lattice, or None.

    Each connected piece is unrolled along its bonds (bond vectors are stored without wrapping);
    a bond that lands on an already placed site at a different unrolled position closes a loop that
    winds around a periodic direction.
    """
    inside = set(int(s) for s in sites)
    adj: dict[int, list] = {s: [] for s in inside}
    try:
        for i, j, v in _bond_pairs(lat, "nn"):
            if i in inside and j in inside:
                adj[i].append((j, v))
                adj[j].append((i, -v))
    except LatticeError:
        return None
    placed: dict[int, np.ndarray] = {}
    for root in sorted(inside):
        if root in placed:
            continue
        placed[root] = lat.positions[root].copy()
        stack = [root]
        while stack:
            i = stack.pop()
            for j, v in adj[i]:
                w = placed[i] + v
                if j not in placed:
                    placed[j] = w
                    stack.append(j)
                elif np.abs(placed[j] - w).max() > 1e-6:
                    return i, j
    return None


# ----------------------------------------------------------------------------------------------
# checks shared by every kind


@dataclass(frozen=True)
class _Shape:
    """What a layout was meant to cover, for the checks and their messages."""

    what: str                                # "disk of radius 2.5"
    x: tuple[float, float] | None            # x extent of the shape (None: not checked)
    y: tuple[float, float] | None            # y extent before wrapping (None: all around, allowed)
    shrink: str                              # advice when the shape is too large
    grow: Mapping[str, str] = field(default_factory=dict)  # advice per empty part
    wraps: bool = False                      # made to go around the cylinder (no closure check)
    margin: bool = True                      # keep the margin columns free


def _check_x_extent(lat: Lattice, shape: _Shape, limits: RegionLimits):
    if shape.x is None:
        return
    lo, hi = shape.x
    dx = _column_step(lat)
    if lat.geometry == "torus":
        period = lat.length * dx
        if hi - lo > period - limits.gap + _TOL:
            raise LatticeError(
                f"{shape.what} spans {_fmt(hi - lo)} along x, too much for the torus length {_fmt(period)} "
                f"(at least {_fmt(limits.gap)} must stay free); {shape.shrink} or lengthen the torus with "
                "--set length=N"
            )
        return
    xmin, xmax = float(lat.positions[:, 0].min()), float(lat.positions[:, 0].max())
    if lo < xmin - _TOL or hi > xmax + _TOL:
        reach = lo if lo < xmin - _TOL else hi
        need = lat.length + math.ceil((hi - lo - (xmax - xmin)) / dx - _TOL) + 2 * limits.margin
        raise LatticeError(
            f"{shape.what} reaches x = {_fmt(reach)}, outside the lattice (x from {_fmt(xmin)} to "
            f"{_fmt(xmax)}); {shape.shrink}, move the centre, or lengthen the cylinder with --set length=N "
            f"(N of about {need})"
        )


def _check_y_extent(lat: Lattice, shape: _Shape, limits: RegionLimits):
    if shape.y is None or lat.circumference == 1:
        return
    lo, hi = shape.y
    if lat.geometry == "strip":
        ymin, ymax = float(lat.positions[:, 1].min()), float(lat.positions[:, 1].max())
        if lo < ymin - _TOL or hi > ymax + _TOL:
            reach = lo if lo < ymin - _TOL else hi
            raise LatticeError(
                f"{shape.what} reaches y = {_fmt(reach)}, outside the strip (y from {_fmt(ymin)} to "
                f"{_fmt(ymax)}); {shape.shrink}, move the centre, or widen the strip with "
                "--set circumference=N"
            )
        return
    room = lat.circumference_length - limits.gap
    if not shape.wraps and hi - lo > room + _TOL:
        need = math.ceil((hi - lo + limits.gap) / _cell_y(lat) - _TOL)
        raise LatticeError(
            f"{shape.what} spans {_fmt(hi - lo)} around the cylinder, too much for circumference "
            f"{_fmt(lat.circumference_length)} (a length {_fmt(limits.gap)} must stay free so that the "
            f"region does not close around it); {shape.shrink} so that it spans at most {_fmt(room)}, or "
            f"widen the cylinder with --set circumference={need}"
        )


def _check_margin(lat: Lattice, sites, shape: _Shape, limits: RegionLimits):
    if not shape.margin or limits.margin == 0 or lat.geometry == "torus":
        return
    m = limits.margin
    edges = ((0, lat.length, "column", "lengthen the cylinder with --set length=N"),
             (1, lat.circumference, "row", "widen the strip with --set circumference=N"))
    for axis, count, what, fix in edges:
        if axis == 1 and (lat.geometry != "strip" or lat.circumference == 1):
            continue
        cells = lat.cells[sites, axis]
        bad = np.flatnonzero((cells < m) | (cells > count - 1 - m))
        if len(bad):
            site = sites[int(bad[0])]
            edge = "an open end" if axis == 0 else "an edge of the strip"
            raise LatticeError(
                f"{shape.what} contains site {site} in {what} {lat.cells[site, axis]} at "
                f"({_fmt(lat.positions[site, 0])}, {_fmt(lat.positions[site, 1])}), within {m} {what}(s) "
                f"of {edge} ({count} {what}s); "
                f"{shape.shrink}, move the centre, or {fix}"
            )


def _check_separation(layout: Layout, shape: _Shape, limits: RegionLimits):
    owner = {s: name for name in ("A", "C") for s in layout[name]}
    for i, j, _ in _bond_pairs(layout.lattice, limits.bonds):
        if {owner.get(i), owner.get(j)} == {"A", "C"}:
            raise LatticeError(
                f"in the {shape.what}, B does not separate A from C: sites {i} and {j} share a bond of "
                f"family '{limits.bonds}'; {shape.grow.get('B', 'widen B')}"
            )


def _check(layout: Layout, shape: _Shape, limits: RegionLimits, *, separated=False, hole: int | None = None):
    """Every check of the module docstring, cheapest first; the first failure raises."""
    lat = layout.lattice
    _check_x_extent(lat, shape, limits)
    _check_y_extent(lat, shape, limits)
    for name, sites in layout.parts.items():
        if not sites:
            advice = shape.grow.get(name, "enlarge the region")
            raise LatticeError(f"part {name} of the {shape.what} contains no sites; {advice}")
    union = list(layout.union(layout.names))
    _check_margin(lat, union, shape, limits)
    if not shape.wraps:
        loop = _winding_pair(lat, union)
        if loop is not None:
            raise LatticeError(
                f"{shape.what} closes around the lattice: a path of nearest-neighbour bonds inside it "
                f"through sites {loop[0]} and {loop[1]} winds around a periodic direction; {shape.shrink} "
                "or widen the cylinder"
            )
    if hole == 0:
        raise LatticeError(
            f"the hole of the {shape.what} contains no site, so on the lattice the ring is a disk; "
            "increase the inner radius"
        )
    if separated:
        _check_separation(layout, shape, limits)


def _finish(lattice, kind, params, parts, shape, limits, **checks) -> Layout:
    layout = Layout(kind, {k: np.flatnonzero(v).tolist() for k, v in parts.items()}, lattice,
                    {k: v for k, v in params.items() if v is not None})
    _check(layout, shape, limits if limits is not None else RegionLimits(), **checks)
    return layout


def _round_shape(what, center, radius, shrink, grow=None) -> _Shape:
    cx, cy = center
    return _Shape(what, (cx - radius, cx + radius), (cy - radius, cy + radius), shrink, grow or {})


# ----------------------------------------------------------------------------------------------
# layout kinds


def disk(lattice: Lattice, *, radius: float, center=None, limits: RegionLimits | None = None) -> Layout:
    """A disk: part A holds the sites within ``radius`` of the centre (d <= radius).

    Parameters
    ----------
    lattice : Lattice
    radius : float
        In the lattice's length unit (lattice spacing 1 on the lattices built here).
    center : (float, float), optional
        Defaults to :func:`default_center`.
    limits : RegionLimits, optional

    Returns
    -------
    Layout
        Part ``A``.

    Raises
    ------
    LatticeError
        If the disk is empty, leaves the lattice, touches the margin columns or closes around the
        cylinder.
    """
    r = _number("disk", "radius", radius)
    c = _resolve_center(lattice, center, "disk")
    dist, _ = _polar(lattice, c)
    shape = _round_shape(f"disk of radius {_fmt(r)}", c, r, "reduce the radius",
                         {"A": "increase the radius or move the centre onto the lattice"})
    return _finish(lattice, "disk", {"radius": r, "center": c}, {"A": dist <= r + _TOL}, shape, limits)


def sectors(lattice: Lattice, *, radius: float, center=None, start: float = 90.0,
            limits: RegionLimits | None = None) -> Layout:
    """A disk cut into three 120-degree sectors A, B, C that follow each other counterclockwise.

    Parameters
    ----------
    lattice : Lattice
    radius : float
    center : (float, float), optional
        Defaults to :func:`default_center`.
    start : float
        Angle in degrees where A begins (counterclockwise from +x). The default 90 puts the A/C
        boundary straight up: A spans [90, 210), B [210, 330), C [330, 450) degrees.
    limits : RegionLimits, optional

    Returns
    -------
    Layout
        Parts ``A``, ``B``, ``C``; their union is :func:`disk` with the same radius and centre.

    Notes
    -----
    A site's angle is that of its minimal-image displacement from the centre. A sector includes
    its starting ray and excludes its closing one. A site exactly at the centre (closer than 1e-9)
    has no angle and is put in A. With this orientation the chiral central charge estimate is
    c- = 3 J(A, B, C) / pi (design notes, section 2); swapping A and C flips J. The combination
    S_A + S_B + S_C - S_AB - S_BC - S_CA + S_ABC = -gamma is that of Kitaev and Preskill,
    Phys. Rev. Lett. 96, 110404 (2006).
    """
    r = _number("sectors", "radius", radius)
    s = _number("sectors", "start", start, positive=False) % 360.0
    c = _resolve_center(lattice, center, "sectors")
    dist, ang = _polar(lattice, c)
    inside = dist <= r + _TOL
    rel = (ang - s) % 360.0
    rel[dist < _TOL] = 0.0
    parts = {"A": inside & (rel < 120.0), "B": inside & (rel >= 120.0) & (rel < 240.0),
             "C": inside & (rel >= 240.0)}
    shape = _round_shape(f"three-sector disk of radius {_fmt(r)}", c, r, "reduce the radius",
                         {k: "increase the radius" for k in "ABC"})
    return _finish(lattice, "sectors", {"radius": r, "center": c, "start": s}, parts, shape, limits)


def _ring_radii(kind, inner, outer):
    r1 = _number(kind, "inner", inner)
    r2 = _number(kind, "outer", outer)
    if r2 <= r1:
        raise LatticeError(f"{kind}: outer radius {_fmt(r2)} must exceed inner radius {_fmt(r1)}")
    return r1, r2


def annulus(lattice: Lattice, *, inner: float, outer: float, center=None,
            limits: RegionLimits | None = None) -> Layout:
    """A ring: part A holds the sites with inner < d <= outer.

    Parameters
    ----------
    lattice : Lattice
    inner, outer : float
        Radii, 0 < inner < outer; the hole d <= inner must contain at least one site.
    center : (float, float), optional
    limits : RegionLimits, optional

    Returns
    -------
    Layout
        Part ``A``.
    """
    r1, r2 = _ring_radii("annulus", inner, outer)
    c = _resolve_center(lattice, center, "annulus")
    dist, _ = _polar(lattice, c)
    shape = _round_shape(f"annulus {_fmt(r1)} < d <= {_fmt(r2)}", c, r2, "reduce the outer radius",
                         {"A": "widen the ring (increase outer - inner)"})
    return _finish(lattice, "annulus", {"inner": r1, "outer": r2, "center": c},
                   {"A": (dist > r1 + _TOL) & (dist <= r2 + _TOL)}, shape, limits,
                   hole=int(np.count_nonzero(dist <= r1 + _TOL)))


def levin_wen(lattice: Lattice, *, inner: float, outer: float, cut: float, angle: float = 90.0, center=None,
              limits: RegionLimits | None = None) -> Layout:
    """The ring layout of Levin and Wen: an annulus whose two arcs B split it into arcs A and C.

    Parameters
    ----------
    lattice : Lattice
    inner, outer : float
        Radii of the ring inner < d <= outer; the hole must contain at least one site.
    cut : float
        Angular width in degrees of each of the two B arcs, 0 < cut < 180.
    angle : float
        Direction in degrees of the middle of the first B arc; the second is opposite. The default
        90 puts B at the top and bottom, A on the left and C on the right.
    center : (float, float), optional
    limits : RegionLimits, optional

    Returns
    -------
    Layout
        Parts ``A``, ``B``, ``C``; B has two connected pieces and no bond joins A to C.

    Notes
    -----
    With theta the angle of a ring site and t = (theta - angle) mod 360: B holds t within cut/2 of
    0 or of 180 (boundaries included), A holds cut/2 < t < 180 - cut/2 (the arc counterclockwise
    after the first cut) and C the rest. Then AB and BC are disks, B two disks and ABC a ring, so
    with S = alpha L - gamma per boundary component all lengths cancel in
    I(A:C|B) = S_AB + S_BC - S_B - S_ABC = 2 gamma (the ring construction of M. Levin and
    X.-G. Wen, Phys. Rev. Lett. 96, 110405 (2006), written as a conditional mutual information).
    """
    r1, r2 = _ring_radii("levin_wen", inner, outer)
    w = _number("levin_wen", "cut", cut)
    if w >= 180.0:
        raise LatticeError(f"levin_wen: cut {_fmt(w)} degrees must be below 180 so that A and C are arcs")
    a0 = _number("levin_wen", "angle", angle, positive=False) % 360.0
    c = _resolve_center(lattice, center, "levin_wen")
    dist, ang = _polar(lattice, c)
    ring = (dist > r1 + _TOL) & (dist <= r2 + _TOL)
    t = (ang - a0) % 360.0
    half = 0.5 * w
    in_b = (t <= half + _TOL) | (t >= 360.0 - half - _TOL) | (np.abs(t - 180.0) <= half + _TOL)
    in_a = ~in_b & (t < 180.0)
    parts = {"A": ring & in_a, "B": ring & in_b, "C": ring & ~in_b & ~in_a}
    grow = {"A": "narrow the cuts (cut=...) or enlarge the ring",
            "C": "narrow the cuts (cut=...) or enlarge the ring",
            "B": "widen the cuts (cut=...) or increase the inner radius"}
    shape = _round_shape(f"Levin-Wen ring {_fmt(r1)} < d <= {_fmt(r2)} with {_fmt(w)}-degree cuts", c, r2,
                         "reduce the outer radius", grow)
    return _finish(lattice, "levin_wen", {"inner": r1, "outer": r2, "cut": w, "angle": a0, "center": c},
                   parts, shape, limits, separated=True, hole=int(np.count_nonzero(dist <= r1 + _TOL)))


def shielded(lattice: Lattice, *, a: float, b: float, c: float, center=None,
             limits: RegionLimits | None = None) -> Layout:
    """A disk A shielded by a ring B from an outer ring C, for the conditional mutual information.

    Parameters
    ----------
    lattice : Lattice
    a, b, c : float
        Radii 0 < a < b < c: A holds d <= a, B a < d <= b, C b < d <= c.
    center : (float, float), optional
    limits : RegionLimits, optional

    Returns
    -------
    Layout
        Parts ``A``, ``B``, ``C``; no bond joins A to C.

    Notes
    -----
    I(A:C|B) is close to zero in a gapped phase and falls with the width b - a of the shield
    (design notes, section 7). Sites closer than b - a cannot share a bond, so b - a of at least
    one bond length always separates.
    """
    ra, rb, rc = (_number("shielded", n, v) for n, v in (("a", a), ("b", b), ("c", c)))
    if not ra < rb < rc:
        raise LatticeError(
            f"shielded: radii must grow, a < b < c, got a={_fmt(ra)}, b={_fmt(rb)}, c={_fmt(rc)}")
    cen = _resolve_center(lattice, center, "shielded")
    dist, _ = _polar(lattice, cen)
    parts = {"A": dist <= ra + _TOL, "B": (dist > ra + _TOL) & (dist <= rb + _TOL),
             "C": (dist > rb + _TOL) & (dist <= rc + _TOL)}
    grow = {"A": "increase a", "B": "widen the ring B (increase b - a)",
            "C": "widen the ring C (increase c - b)"}
    shape = _round_shape(f"shielded layout a={_fmt(ra)}, b={_fmt(rb)}, c={_fmt(rc)}", cen, rc,
                         "reduce the outer radius c", grow)
    return _finish(lattice, "shielded", {"a": ra, "b": rb, "c": rc, "center": cen}, parts, shape, limits,
                   separated=True)


def strips(lattice: Lattice, *, a: float, b: float, c: float, axis: str = "x", span: float | None = None,
           center=None, limits: RegionLimits | None = None) -> Layout:
    """Three adjacent strips A | B | C of widths a, b, c, with B centred on the centre.

    Parameters
    ----------
    lattice : Lattice
    a, b, c : float
        Widths along ``axis``. With u the coordinate along the axis measured from the centre,
        A holds -b/2 - a <= u < -b/2, B -b/2 <= u < b/2, C b/2 <= u < b/2 + c.
    axis : {'x', 'y'}
        ``x``: strips follow each other along the cylinder, A on the left; ``y``: around it, A below.
    span : float, optional
        Extent across the axis, centred on the centre. By default strips along x are bands all the
        way around the cylinder (allowed to close around it), and strips along y cover every column
        outside the margin.
    center : (float, float), optional
    limits : RegionLimits, optional

    Returns
    -------
    Layout
        Parts ``A``, ``B``, ``C``; no bond joins A to C.
    """
    wa, wb, wc = (_number("strips", n, v) for n, v in (("a", a), ("b", b), ("c", c)))
    if axis not in ("x", "y"):
        raise LatticeError(f"strips: axis must be 'x' or 'y', got {axis!r}")
    width = None if span is None else _number("strips", "span", span)
    lim = limits if limits is not None else RegionLimits()
    cen = _resolve_center(lattice, center, "strips")
    d = _displacements(lattice, cen)
    along, across = (d[:, 0], d[:, 1]) if axis == "x" else (d[:, 1], d[:, 0])
    lo, hi = -0.5 * wb - wa, 0.5 * wb + wc
    if width is not None:
        keep = np.abs(across) <= 0.5 * width + _TOL
        cross = (-0.5 * width, 0.5 * width)
    elif axis == "x":
        keep = np.ones(lattice.num_sites, dtype=bool)
        cross = None
    else:
        cols = lattice.cells[:, 0]
        keep = (cols >= lim.margin) & (cols <= lattice.length - 1 - lim.margin)
        cross = None
    parts = {"A": keep & (along >= lo - _TOL) & (along < -0.5 * wb - _TOL),
             "B": keep & (along >= -0.5 * wb - _TOL) & (along < 0.5 * wb - _TOL),
             "C": keep & (along >= 0.5 * wb - _TOL) & (along < hi - _TOL)}
    ext_along = (cen[0] + lo, cen[0] + hi) if axis == "x" else (cen[1] + lo, cen[1] + hi)
    ext_cross = None if cross is None else ((cen[1] if axis == "x" else cen[0]) + cross[0],
                                            (cen[1] if axis == "x" else cen[0]) + cross[1])
    x_ext, y_ext = (ext_along, ext_cross) if axis == "x" else (ext_cross, ext_along)
    grow = {"A": "widen A (a=...)", "B": "widen B (b=...)", "C": "widen C (c=...)"}
    shape = _Shape(f"strips {_fmt(wa)} | {_fmt(wb)} | {_fmt(wc)} along {axis}", x_ext, y_ext,
                   "narrow the strips", grow, wraps=(axis == "x" and width is None))
    return _finish(lattice, "strips", {"a": wa, "b": wb, "c": wc, "axis": axis, "span": width, "center": cen},
                   parts, shape, limits, separated=True)


def half(lattice: Lattice, *, x: float | None = None, columns: int | None = None,
         limits: RegionLimits | None = None) -> Layout:
    """A cut across the cylinder: part A holds the sites with x < ``x``, or the first ``columns`` columns.

    Parameters
    ----------
    lattice : Lattice
    x : float, optional
        Cut position; exactly one of ``x`` and ``columns`` is given.
    columns : int, optional
        Number of unit-cell columns in A, from the left end.
    limits : RegionLimits, optional
        Unused (a half cylinder touches an open end and goes around by design); accepted so that
        every kind takes the same settings.

    Returns
    -------
    Layout
        Part ``A``, neither empty nor the whole lattice. S(A) over several circumferences gives
        alpha L_y - gamma.
    """
    if (x is None) == (columns is None):
        raise LatticeError(
            "half: give exactly one of x=X (sites with x < X) or columns=K (the first K columns)")
    if columns is not None:
        whole = not isinstance(columns, bool) and isinstance(columns, (int, np.integer))
        if not whole or not 0 < columns < lattice.length:
            raise LatticeError(
                f"half: columns must be a whole number from 1 to {lattice.length - 1} on a "
                f"{lattice.length}-column lattice, got {columns!r}"
            )
        inside = lattice.cells[:, 0] < columns
        params = {"columns": int(columns)}
        what = f"half-cylinder cut after {int(columns)} columns"
    else:
        cut = _number("half", "x", x, positive=False)
        inside = lattice.positions[:, 0] < cut - _TOL
        params = {"x": cut}
        what = f"half-cylinder cut at x = {_fmt(cut)}"
    xs = lattice.positions[:, 0]
    if not inside.any() or inside.all():
        raise LatticeError(
            f"{what} leaves {'part A empty' if not inside.any() else 'no site outside part A'}; put the cut "
            f"between x = {_fmt(xs.min())} and {_fmt(xs.max())} (or columns from 1 to {lattice.length - 1})"
        )
    shape = _Shape(what, None, None, "move the cut", wraps=True, margin=False)
    return _finish(lattice, "half", params, {"A": inside}, shape, limits)


LAYOUTS: Mapping[str, Any] = MappingProxyType({
    "disk": disk,
    "sectors": sectors,
    "annulus": annulus,
    "levin_wen": levin_wen,
    "shielded": shielded,
    "strips": strips,
    "half": half,
})
"""Layout kinds by name -> builder ``f(lattice, *, ..., limits=None) -> Layout``."""

SYNTAX: Mapping[str, str] = MappingProxyType({
    "disk": "disk:radius=R[,center=X,Y]",
    "sectors": "sectors:radius=R[,center=X,Y][,start=DEG]",
    "annulus": "annulus:inner=R1,outer=R2[,center=X,Y]",
    "levin_wen": "levin_wen:inner=R1,outer=R2,cut=DEG[,angle=DEG][,center=X,Y]",
    "shielded": "shielded:a=RA,b=RB,c=RC[,center=X,Y]",
    "strips": "strips:a=WA,b=WB,c=WC[,axis=x|y][,span=S][,center=X,Y]",
    "half": "half:x=X or half:columns=K",
})
"""Command-line syntax of each kind (brackets mark optional entries)."""


def _parameters(kind: str):
    """(all keyword names, required names) of a kind's builder, without ``limits``."""
    sig = inspect.signature(LAYOUTS[kind])
    names = [p.name for p in sig.parameters.values() if p.kind is p.KEYWORD_ONLY and p.name != "limits"]
    required = [p.name for p in sig.parameters.values()
                if p.kind is p.KEYWORD_ONLY and p.default is p.empty]
    return names, required


def _unknown_kind(kind) -> LatticeError:
    return LatticeError(f"unknown region kind {kind!r}; valid kinds: {', '.join(LAYOUTS)}")


def build_layout(lattice: Lattice, kind: str, /, *, limits: RegionLimits | None = None, **params) -> Layout:
    """Build a layout of a registered kind by name.

    Parameters
    ----------
    lattice : Lattice
    kind : str
        A key of :data:`LAYOUTS`.
    limits : RegionLimits, optional
    **params
        The kind's parameters (see its builder); ``layout.params`` rebuilds the same layout.

    Raises
    ------
    LatticeError
        For an unknown kind or parameter (the message lists the valid ones), a missing parameter,
        or a region that does not fit the lattice.
    """
    if kind not in LAYOUTS:
        raise _unknown_kind(kind)
    names, required = _parameters(kind)
    for key in params:
        if key not in names:
            raise LatticeError(
                f"region kind '{kind}' has no parameter '{key}'; valid parameters: {', '.join(names)}")
    for key in required:
        if key not in params:
            raise LatticeError(f"region kind '{kind}' needs the parameter '{key}'; syntax: {SYNTAX[kind]}")
    return LAYOUTS[kind](lattice, limits=limits, **params)


_CONVERT = {"columns": int, "axis": str}  # every other value is a float


def parse_region(text: str, lattice: Lattice, *, limits: RegionLimits | None = None) -> Layout:
    """Build a layout from its command-line form, ``kind:key=value,key=value``.

    Parameters
    ----------
    text : str
        One of the forms in :data:`SYNTAX`, e.g. ``sectors:radius=3,center=6.5,4.2,start=90``. The
        centre takes two comma-separated numbers.
    lattice : Lattice
    limits : RegionLimits, optional

    Returns
    -------
    Layout

    Raises
    ------
    LatticeError
        With a one-line message naming the problem and showing the syntax of the kind.

    Examples
    --------
    >>> from netprobe.model.lattice import build_lattice
    >>> lat = build_lattice("square", length=9, circumference=8)
    >>> parse_region("disk:radius=2,center=4,4", lat).sizes
    {'A': 13}
    """
    if not isinstance(text, str) or not text.strip():
        raise LatticeError(f"empty region; give one of: {'; '.join(SYNTAX.values())}")
    kind, _, body = text.strip().partition(":")
    kind = kind.strip()
    if kind not in LAYOUTS:
        raise LatticeError(f"region '{text}': unknown kind {kind!r}; valid kinds: {', '.join(LAYOUTS)} "
                           f"(e.g. {SYNTAX['disk']})")
    syntax = SYNTAX[kind]

    def fail(problem):
        return LatticeError(f"region '{text}': {problem}; syntax: {syntax}")

    raw: dict[str, list[str]] = {}
    last = None
    for token in (t.strip() for t in body.split(",")) if body.strip() else ():
        key, eq, value = token.partition("=")
        key, value = key.strip(), value.strip()
        if eq:
            if not key or not value:
                raise fail(f"'{token}' is not key=value")
            if key in raw:
                raise fail(f"'{key}' is given twice")
            raw[key] = [value]
            last = key
        elif last == "center" and len(raw["center"]) == 1 and token:
            raw["center"].append(token)
        else:
            raise fail(f"'{token}' is not key=value")
    names, required = _parameters(kind)
    params: dict[str, Any] = {}
    for key, values in raw.items():
        if key not in names:
            raise fail(f"unknown key '{key}' (valid keys: {', '.join(names)})")
        try:
            if key == "center":
                if len(values) != 2:
                    raise ValueError
                params[key] = (float(values[0]), float(values[1]))
            else:
                params[key] = _CONVERT.get(key, float)(values[0])
        except ValueError:
            wanted = "two numbers X,Y" if key == "center" else (
                "a whole number" if key == "columns" else "a number")
            raise fail(f"{key} must be {wanted}, got '{','.join(values)}'") from None
    for key in required:
        if key not in params:
            raise fail(f"missing '{key}'")
    return LAYOUTS[kind](lattice, limits=limits, **params)
