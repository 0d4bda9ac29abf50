"""Lattice geometry: site counts, coordination numbers, bond families, orientation conventions."""

import math

import numpy as np
import pytest

from netprobe.errors import LatticeError
from netprobe.model.lattice import LATTICES, build_lattice

# Bulk coordination numbers (common practice): nearest and next-nearest neighbours per site.
COORDINATION = {
    "square": (4, 4),
    "triangular": (6, 6),
    "honeycomb": (3, 6),
    "kagome": (4, 4),
}


def degrees(lattice, family):
    deg = np.zeros(lattice.num_sites, dtype=int)
    for bond in lattice.family(family):
        for s in bond.sites:
            deg[s] += 1
    return deg


@pytest.mark.parametrize("name", sorted(COORDINATION))
def test_torus_coordination(name):
    # On a torus large enough to avoid double bonds every site has the bulk coordination.
    lat = build_lattice(name, length=6, circumference=6, geometry="torus")
    nn, nnn = COORDINATION[name]
    assert set(degrees(lat, "nn")) == {nn}
    assert set(degrees(lat, "nnn")) == {nnn}


@pytest.mark.parametrize("name", sorted(COORDINATION))
def test_bond_lengths_are_shells(name):
    lat = build_lattice(name, length=5, circumference=5, geometry="torus")
    nn = {round(lat.distance(*b.sites), 9) for b in lat.family("nn")}
    nnn = {round(lat.distance(*b.sites), 9) for b in lat.family("nnn")}
    assert len(nn) == 1 and len(nnn) == 1
    assert min(nnn) > max(nn)


def test_site_order_columns_then_y():
    # design notes section 2: columns left to right, inside a column increasing y
    lat = build_lattice("kagome", length=3, circumference=3)
    cols = lat.cells[:, 0]
    assert np.all(np.diff(cols) >= 0)
    for c in range(3):
        ys = lat.positions[cols == c, 1]
        assert np.all(np.diff(ys) >= -1e-12)


def test_cylinder_of_circumference_one_is_a_chain():
    lat = build_lattice("square", length=7, circumference=1)
    assert sorted(b.sites for b in lat.family("nn")) == [(i, i + 1) for i in range(6)]
    assert lat.family("nnn") == ()


def test_chain_has_second_neighbours():
    lat = build_lattice("chain", length=6, circumference=1)
    assert sorted(b.sites for b in lat.family("nnn")) == [(i, i + 2) for i in range(4)]


def test_strip_drops_wrapping_bonds():
    cyl = build_lattice("square", length=4, circumference=4)
    strip = build_lattice("square", length=4, circumference=4, geometry="strip")
    # 4x4: cylinder 4*3 + 4*4 bonds, strip 2 * 4*3 bonds (common practice: count of grid edges)
    assert len(cyl.family("nn")) == 28
    assert len(strip.family("nn")) == 24


def test_triangles_counterclockwise_and_counted():
    lat = build_lattice("triangular", length=4, circumference=4, geometry="torus")
    tri = lat.family("triangles")
    assert len(tri) == 2 * lat.num_sites  # two triangles per site of the triangular lattice
    for bond in tri:
        p = bond.positions
        u, v = p[1] - p[0], p[2] - p[0]
        area = 0.5 * (u[0] * v[1] - u[1] * v[0])
        assert area > 0
        assert math.isclose(area, math.sqrt(3) / 4, rel_tol=1e-12)


def test_kagome_triangles():
    lat = build_lattice("kagome", length=4, circumference=4, geometry="torus")
    assert len(lat.family("triangles")) == 2 * lat.num_sites // 3  # one up and one down per cell


@pytest.mark.parametrize("orientation", ["zigzag", "armchair"])
def test_honeycomb_bond_types_and_haldane_orientation(orientation):
    lat = build_lattice("honeycomb", length=4, circumference=4, geometry="torus", orientation=orientation)
    for kind in "xyz":
        assert set(degrees(lat, f"nn_{kind}")) == {1}  # each site has one link of each type
    # nu_ij = +1: the path j -> k -> i turns left (Haldane, PRL 61, 2015 (1988)); on a given
    # sublattice the +1 hoppings go around each hexagon in one sense, so every site has 3 outgoing
    out = np.zeros(lat.num_sites, int)
    for b in lat.family("nnn_oriented"):
        out[b.sites[1]] += 1
    assert set(out) == {3}
    # three-site paths: each site is the centre of one path of each pair of link types
    for fam in ("paths_xy", "paths_yz", "paths_zx"):
        centres = [b.sites[1] for b in lat.family(fam)]
        assert sorted(centres) == list(range(lat.num_sites))


def test_toric_stars_and_plaquettes_commute_and_count():
    lat = build_lattice("toric", length=3, circumference=3)
    stars = [set(b.sites) for b in lat.family("stars")]
    plaqs = [set(b.sites) for b in lat.family("plaquettes")]
    assert len(stars) == len(plaqs) == 9
    for s in stars:
        for p in plaqs:
            assert len(s & p) % 2 == 0  # X-type and Z-type checks commute iff overlap is even


def test_peierls_flux_per_plaquette():
    # Landau gauge: the phases around one square plaquette add to 2 pi flux
    lat = build_lattice("square", length=3, circumference=4)
    flux = 0.23
    p = lat.family("plaquettes")[0].positions
    total = 0.0
    from netprobe.model.lattice import Bond

    for a, b in ((1, 0), (2, 1), (3, 2), (0, 3)):  # hops around the loop 0 -> 1 -> 2 -> 3 -> 0
        total += lat.peierls_phase(Bond((0, 1), np.array([p[a], p[b]])), flux=flux)
    assert math.isclose(total, 2 * math.pi * flux, rel_tol=1e-12)


def test_twist_around_cylinder():
    lat = build_lattice("square", length=2, circumference=5)
    twist = 0.7
    ybonds = [b for b in lat.family("nn") if b.positions[0][0] == b.positions[1][0] and b.positions[0][0] == 0]
    total = sum(lat.peierls_phase(b, twist=twist) for b in ybonds)
    assert math.isclose(abs(total), twist, rel_tol=1e-12)


@pytest.mark.parametrize("name", LATTICES)
def test_every_registered_lattice_builds(name):
    lat = build_lattice(name, length=2, circumference=1 if name == "chain" else 3)
    assert lat.num_sites > 0 and "sites" in lat.families


def test_bad_input():
    with pytest.raises(LatticeError, match="unknown lattice 'hexagon'"):
        build_lattice("hexagon", length=2, circumference=2)
    with pytest.raises(LatticeError, match="length must be a positive integer"):
        build_lattice("square", length=0, circumference=2)
    with pytest.raises(LatticeError, match="chain lattice has circumference 1"):
        build_lattice("chain", length=4, circumference=2)
    with pytest.raises(LatticeError, match="no bond family 'triangles'"):
        build_lattice("square", length=2, circumference=2).family("triangles")
