"""Families of bulk regions of growing size: three-sector disks for J and gamma, shielded rings for the CMI.

A region ladder holds, for every site count n it reaches, a few three-sector disks (:func:`sectors`) of
n sites with different placements (centre on a face, on a site, on a bond; several orientations of
the sector boundaries), so that there are more sizes than centred disks alone give and the spread
between placements of one size can be measured. Every disk is checked by the layout builder (inside
the lattice, no wrapping, a margin of columns free at the open ends); unbalanced splits (one part
much smaller than the others) are left out, since they sit far below balanced ones of the same size
(design notes, section 11).

A Markov series is a set of shielded layouts (A a disk, B a ring of width w around it, C the next
ring) for growing w: the CMI I(A:C|B) against w gives the Markov length.

Linear sizes are in nearest-neighbour lengths: a region of n sites has the radius of a disk of the
same area, ``sqrt(n a / pi)``, with ``a`` the area per site.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np

from netprobe.errors import LatticeError
from netprobe.model.lattice import Lattice
from netprobe.regions.layout import Layout, _displacements, _is_generic, _nn_length, default_center
from netprobe.regions.shapes import sectors, shielded

__all__ = ["RegionRung", "region_ladder", "markov_series", "linear_size", "nn_length"]

_ORIENTATIONS = (90.0, 130.0, 170.0)  # start angles of sector A: a third of the 120-degree period apart
_DISTANCE_DIGITS = 9  # distances equal to 1e-9 count as one shell (coordinates are exact to ~1e-12)


@dataclass(frozen=True)
class RegionRung:
    """One three-sector disk of a region ladder.

    Attributes
    ----------
    layout : Layout
        Parts A, B, C counterclockwise.
    sites : int
    linear_size : float
        Radius of a disk of the same area, in nearest-neighbour lengths.
    placement : str
        ``"face"``, ``"site"`` or ``"bond"``: what the centre sits on.
    start : float
        Angle (degrees) where A begins.
    """

    layout: Layout
    sites: int
    linear_size: float
    placement: str
    start: float

    @property
    def balance(self) -> int:
        """Largest minus smallest part."""
        sizes = [len(self.layout[k]) for k in "ABC"]
        return max(sizes) - min(sizes)

    def to_json(self) -> dict:
        return {"spec": self.layout.spec, "placement": self.placement,
                "parts": {k: len(self.layout[k]) for k in "ABC"}}


def nn_length(lattice: Lattice) -> float:
    """The nearest-neighbour distance (the unit of linear sizes)."""
    return _nn_length(lattice)


def _area_per_site(lattice: Lattice) -> float:
    column = float(lattice.length_vector[0]) / lattice.length
    return column * lattice.circumference_length * lattice.length / lattice.num_sites


def linear_size(lattice: Lattice, sites: int) -> float:
    """Radius (in nearest-neighbour lengths) of a disk holding ``sites`` sites."""
    return math.sqrt(sites * _area_per_site(lattice) / math.pi) / nn_length(lattice)


def _centres(lattice: Lattice) -> list[tuple[str, np.ndarray]]:
    face = np.array(default_center(lattice))
    pos = lattice.positions
    d = _displacements(lattice, face)
    site = pos[int(np.argmin(np.hypot(d[:, 0], d[:, 1])))]
    out = [("face", face), ("site", np.array(site, float))]
    try:
        bonds = lattice.family("nn")
    except LatticeError:
        bonds = ()
    if bonds:
        mids = np.array([b.positions.mean(axis=0) for b in bonds])
        dm = mids - face
        out.append(("bond", mids[int(np.argmin(np.hypot(dm[:, 0], dm[:, 1])))]))
    nudge = 1e-3 * nn_length(lattice)
    fixed = []
    for name, c in out:
        # a site on a sector ray would sit on a boundary; the tiny nudge keeps every part well defined
        if name != "site" and not _is_generic(lattice, c):
            c = c + np.array([0.7071, 0.3183]) * nudge
        fixed.append((name, c))
    return fixed


def region_ladder(lattice: Lattice, *, max_sites: int, min_sites: int = 6, placements: int = 3,
                  fits: Callable[[Layout], bool] | None = None) -> dict[int, list[RegionRung]]:
    """Three-sector disks by site count, up to ``max_sites``.

    Parameters
    ----------
    lattice : Lattice
    max_sites, min_sites : int
        Range of site counts.
    placements : int
        At most this many disks per size (the best balanced first, then varied centres).
    fits : callable, optional
        ``fits(layout) -> bool``: False drops a region (e.g. over the memory budget).

    Returns
    -------
    dict of int to list of RegionRung
        Sizes in increasing order.

    Raises
    ------
    LatticeError
        If no region fits the lattice.
    """
    found: dict[int, list[RegionRung]] = {}
    seen: set = set()
    for placement, centre in _centres(lattice):
        d = _displacements(lattice, centre)
        shells = np.unique(np.round(np.hypot(d[:, 0], d[:, 1]), _DISTANCE_DIGITS))
        for radius in shells:
            if np.count_nonzero(np.hypot(d[:, 0], d[:, 1]) <= radius + 1e-9) > max_sites:
                break
            for start in _ORIENTATIONS:
                try:
                    layout = sectors(lattice, radius=float(radius) + 1e-7, center=tuple(centre), start=start)
                except LatticeError:
                    continue
                n = sum(len(layout[k]) for k in "ABC")
                key = tuple(layout[k] for k in "ABC")
                if n < min_sites or n > max_sites or key in seen:
                    continue
                seen.add(key)
                rung = RegionRung(layout, n, linear_size(lattice, n), placement, start)
                if rung.balance > max(1, round(0.15 * n)):
                    continue
                found.setdefault(n, []).append(rung)
    ladder = {}
    for n in sorted(found):
        rungs = sorted(found[n], key=lambda r: (r.balance, r.placement != "face", r.start))
        chosen, kinds = [], set()
        for r in rungs:  # one of each placement first, then the rest by balance
            if r.placement not in kinds:
                chosen.append(r)
                kinds.add(r.placement)
        chosen += [r for r in rungs if r not in chosen]
        chosen = [r for r in chosen if fits is None or fits(r.layout)][:placements]
        if chosen:
            ladder[n] = chosen
    if not ladder:
        raise LatticeError(
            f"no three-sector region of {min_sites} to {max_sites} sites fits this lattice; "
            "use a longer or wider lattice, or raise --max-sites")
    return ladder


def markov_series(lattice: Lattice, *, max_sites: int, inner: float = 2.0, outer: float = 2.0,
                  widths: Sequence[float] = (0.5, 1, 1.5, 2, 3, 4, 5), fits: Callable[[Layout], bool] | None = None
                  ) -> list[tuple[float, Layout]]:
    """Shielded layouts A (d <= inner), B (a ring of width w), C (the next ring, width ``outer``).

    Lengths in nearest-neighbour units. Widths whose layout does not build, exceeds ``max_sites`` or
    fails ``fits`` are skipped; when nothing builds with the given ``inner``/``outer``, smaller
    ones (down to one site in A, C one bond wide) are tried, as small regions need.
    """
    unit = nn_length(lattice)
    centre = default_center(lattice)
    for a_inner, c_outer in ((inner, outer), (1.0, 1.0), (0.5, 1.0)):
        out = []
        for w in widths:
            a = a_inner * unit
            b = a + w * unit
            try:
                layout = shielded(lattice, a=a + 1e-7, b=b + 1e-7, c=b + c_outer * unit + 1e-7, center=centre)
            except LatticeError:
                continue
            n = sum(len(layout[k]) for k in "ABC")
            if n > max_sites or (fits is not None and not fits(layout)):
                continue
            out.append((float(w), layout))
        if len(out) >= 2:
            return out
    return out
