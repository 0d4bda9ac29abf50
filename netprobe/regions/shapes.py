"""Region shapes (disk, sectors, annulus, Levin-Wen, shielded, strips, half) and the region syntax that builds them
by name (:func:`build_layout`, :func:`parse_region`); the layout class and its geometry live in
:mod:`netprobe.regions.layout`.
"""

from __future__ import annotations

import inspect
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np

from netprobe.errors import LatticeError
from netprobe.model.lattice import Lattice
from netprobe.regions.layout import (
    Layout, RegionLimits, _Shape, _TOL, _displacements,
    _finish, _fmt, _number, _polar, _resolve_center,
    _round_shape,
)

__all__ = [
    "LAYOUTS",
    "SYNTAX",
    "build_layout",
    "parse_region",
    "disk",
    "sectors",
    "annulus",
    "levin_wen",
    "shielded",
    "strips",
    "half",
]

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
