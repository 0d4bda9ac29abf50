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
    "CENTER_OFFSET",
    "default_center",
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
    >>> from netprobe.regions.shapes import disk, sectors
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
    try:
        pairs = list(_bond_pairs(lat, "nn"))
    except LatticeError:
        return np.zeros((0, 2))
    vectors: dict[int, list[np.ndarray]] = {}
    for i, j, v in pairs:
        vectors.setdefault(i, []).append(v)
        vectors.setdefault(j, []).append(-v)
    # every pair of bond vectors at one site, in the order site by site, then p < q
    site, first, second = [], [], []
    for i, vs in vectors.items():
        for p in range(len(vs)):
            for q in range(p + 1, len(vs)):
                site.append(i)
                first.append(vs[p])
                second.append(vs[q])
    if not site:
        return np.zeros((0, 2))
    first, second = np.array(first, dtype=float), np.array(second, dtype=float)
    cos = np.sum(first * second, axis=1) / (np.hypot(first[:, 0], first[:, 1]) * np.hypot(second[:, 0], second[:, 1]))
    keep = np.abs(cos + 0.5) < 1e-6
    return (lat.positions[np.array(site)[keep]] + first[keep] + second[keep]).reshape(-1, 2)


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
        # the nearest faces first (dist is rounded already), then the tie-break on the few of them
        nearest = np.flatnonzero(dist == dist.min()).tolist()
        best = min(nearest, key=lambda k: (dist[k], round(d[k, 0], 9), round(d[k, 1], 9)))
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

