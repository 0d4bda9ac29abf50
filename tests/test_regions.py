"""Region layouts: site sets against direct counts, orientation, separation, checks, parsing, plots."""

import functools
import json

import numpy as np
import pytest
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from netprobe.errors import LatticeError
from netprobe.model.lattice import build_lattice
from netprobe.output.plots import plot_layout
from netprobe.regions import (
    LAYOUTS,
    SYNTAX,
    Layout,
    RegionLimits,
    annulus,
    build_layout,
    default_center,
    disk,
    half,
    levin_wen,
    parse_region,
    sectors,
    shielded,
    strips,
)
from netprobe.model.spec import load_model


ON_RAY = 1e-6  # distance below which a site counts as lying on a sector boundary: far below the lattice spacing 1
HALF_SECTOR_STEP = 30.0  # degrees: half of the smallest allowed angular step (60) between sector boundaries


# Lattices large enough for every example below: circumference length 8 to 8.7, x range 11 to 13.
SIZES = {"square": (12, 8), "triangular": (14, 8), "honeycomb": (9, 5), "kagome": (8, 4), "toric": (12, 8)}

# One example of each registered kind that fits every lattice of SIZES with the default centre.
EXAMPLES = {
    "disk": {"radius": 2.5},
    "sectors": {"radius": 3.0},
    "annulus": {"inner": 1.2, "outer": 3.0},
    "levin_wen": {"inner": 1.2, "outer": 3.2, "cut": 60.0},
    "shielded": {"a": 1.2, "b": 2.4, "c": 3.4},
    "strips": {"a": 1.5, "b": 1.5, "c": 1.5},
    "half": {"columns": 3},
}

# Number of integer points (m, n) with m^2 + n^2 <= r^2 for r = 0..6: OEIS A000328 (from memory).
A000328 = (1, 5, 13, 29, 49, 81, 113)

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # first eight bytes of every PNG file (W3C PNG specification, 2003)


@functools.lru_cache(maxsize=None)
def lattice(name):
    """Shared lattices of SIZES (read-only objects, built once per session)."""
    length, circumference = SIZES[name]
    return build_lattice(name, length=length, circumference=circumference)


def reference_ball(lat, center, radius):
    """Sites within ``radius`` of ``center`` from scipy's k-d tree with a periodic box around y."""
    box = [1e6, lat.circumference_length]  # x never wraps on a cylinder: a period far beyond the lattice
    tree = cKDTree(lat.positions, boxsize=box)
    return set(tree.query_ball_point([center[0], center[1] % box[1]], radius + 1e-9))


def min_image(lat, center):
    d = lat.positions - np.asarray(center)
    c = lat.circumference_length
    d[:, 1] = (d[:, 1] + c / 2) % c - c / 2
    return d


def n_components(lat, sites, family="nn"):
    """Connected pieces of a site set under a bond family, from scipy's graph routines."""
    sites = sorted(sites)
    where = {s: k for k, s in enumerate(sites)}
    rows, cols = [], []
    for bond in lat.family(family):
        i, j = bond.sites[:2]
        if i in where and j in where:
            rows.append(where[i])
            cols.append(where[j])
    graph = coo_matrix((np.ones(len(rows)), (rows, cols)), shape=(len(sites), len(sites)))
    return connected_components(graph, directed=False)[0]


def touching(lat, first, second, family="nn"):
    first, second = set(first), set(second)
    out = []
    for b in lat.family(family):
        i, j = b.sites[:2]
        if (i in first and j in second) or (j in first and i in second):
            out.append(b.sites)
    return out


def mean_angle(d):
    """Circular mean, in degrees in [0, 360), of the directions of displacement vectors."""
    u = d / np.linalg.norm(d, axis=1)[:, None]
    m = u.mean(axis=0)
    return float(np.degrees(np.arctan2(m[1], m[0])) % 360.0)


# ------------------------------------------------------------------------------------- disks


@pytest.mark.parametrize("r", [1, 2, 3, 4, 5])
def test_square_disk_on_a_site_counts_gauss_circle_points(r):
    lat = build_lattice("square", length=15, circumference=12)
    # centred on the site (7, 0): the disk straddles the seam y = 0, so the minimal image is exercised
    lay = disk(lat, radius=float(r), center=(7.0, 0.0))
    m = np.arange(-r, r + 1)
    gx, gy = np.meshgrid(m, m)
    direct = int(np.count_nonzero(gx**2 + gy**2 <= r * r))  # Gauss circle problem count (common practice)
    assert direct == A000328[r]
    assert len(lay["A"]) == direct


def test_square_disk_at_generic_centres_counts_integer_points(rng):
    lat = build_lattice("square", length=15, circumference=12)
    for _ in range(20):
        cx, cy, r = rng.uniform(6.0, 8.0), rng.uniform(0.0, 12.0), rng.uniform(0.8, 4.5)
        lay = disk(lat, radius=r, center=(cx, cy))
        # integer points of the plane within r of (cx, cy): each is one site, since 2 r < circumference
        m = np.arange(int(cx - r) - 1, int(cx + r) + 2)
        n = np.arange(int(cy - r) - 1, int(cy + r) + 2)
        gx, gy = np.meshgrid(m, n)
        assert len(lay["A"]) == int(np.count_nonzero((gx - cx) ** 2 + (gy - cy) ** 2 <= r * r))


@pytest.mark.parametrize("name", sorted(SIZES))
@pytest.mark.parametrize("radius", [1.3, 2.5, 3.2])
def test_disk_matches_kd_tree_ball(name, radius):
    lat = lattice(name)
    lay = disk(lat, radius=radius)
    # reference: scipy.spatial.cKDTree ball query with a periodic box (general-purpose library)
    assert set(lay["A"]) == reference_ball(lat, lay.center, radius)


def test_disk_on_a_torus_wraps_both_directions():
    lat = build_lattice("toric", length=8, circumference=8, geometry="torus")
    lay = disk(lat, radius=2.2, center=(0.3, 0.2))
    # toric cells are unit squares, so the torus is the periodic box [0, 8) x [0, 8)
    tree = cKDTree(lat.positions, boxsize=[8.0, 8.0])
    assert set(lay["A"]) == set(tree.query_ball_point([0.3, 0.2], 2.2 + 1e-9))


def test_disk_on_a_chain_is_an_interval():
    lat = build_lattice("chain", length=12, circumference=1)
    lay = disk(lat, radius=2.0)
    cx = lay.center[0]
    assert len(lay["A"]) == int(np.count_nonzero(np.abs(np.arange(12) - cx) <= 2.0))


@pytest.mark.parametrize("name", sorted(SIZES))
def test_default_centre_is_generic(name):
    lat = lattice(name)
    cx, cy = default_center(lat)
    d = min_image(lat, (cx, cy))
    assert np.hypot(d[:, 0], d[:, 1]).min() > 1e-3
    for ray in (90.0, 210.0, 330.0):  # the default sector boundaries
        u = np.array([np.cos(np.radians(ray)), np.sin(np.radians(ray))])
        off = np.abs(d[:, 0] * u[1] - d[:, 1] * u[0])
        assert not np.any((d @ u > 0) & (off < ON_RAY))
    xs = lat.positions[:, 0]
    assert abs(cx - 0.5 * (xs.min() + xs.max())) < 1.5  # near the middle: within a face size


# ----------------------------------------------------------------------------------- sectors


@pytest.mark.parametrize("name", sorted(SIZES))
@pytest.mark.parametrize("start", [90.0, 0.0, 37.0])
def test_sectors_partition_the_disk_counterclockwise(name, start):
    lat = lattice(name)
    lay = sectors(lat, radius=3.0, start=start)
    whole = disk(lat, radius=3.0)
    assert sum(lay.sizes.values()) == len(whole["A"])
    assert set(lay.union("ABC")) == set(whole["A"])
    d = min_image(lat, lay.center)
    angles = [mean_angle(d[list(lay[k])]) for k in "ABC"]
    steps = [(angles[(k + 1) % 3] - angles[k]) % 360.0 for k in range(3)]
    assert sum(steps) == pytest.approx(360.0)  # one turn: A -> B -> C -> A goes around once, counterclockwise
    # each step is 120 degrees for a continuous disk; the lattice shifts the mean directions by a few
    # degrees, so 60 to 180 (and 30 degrees around A's bisector start + 60) only allow for that
    assert all(60.0 < s < 180.0 for s in steps)
    assert (angles[0] - (start + 60.0) + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=HALF_SECTOR_STEP)
    # shoelace formula (common practice): positive signed area <=> vertices listed counterclockwise
    (ax, ay), (bx, by), (cx, cy) = (d[list(lay[k])].mean(axis=0) for k in "ABC")
    assert (bx - ax) * (cy - ay) - (by - ay) * (cx - ax) > 0
    n = len(whole["A"])
    # sector counts differ only through sites near the three bounding rays, about one per unit length
    assert max(lay.sizes.values()) - min(lay.sizes.values()) <= 2 * 3.0
    assert min(lay.sizes.values()) > n / 6


@pytest.mark.parametrize("name", ["triangular", "honeycomb", "kagome"])
def test_sectors_around_a_threefold_axis_are_equal(name):
    # A 120-degree rotation about a face centre maps these lattices onto themselves (common practice),
    # so the default sectors are images of each other.
    lay = sectors(lattice(name), radius=3.3)
    assert len(set(lay.sizes.values())) == 1


def test_sector_labels_rotate_with_the_start_angle():
    lat = lattice("square")
    base = sectors(lat, radius=3.0, start=20.0)
    turned = sectors(lat, radius=3.0, start=140.0)
    assert (turned["A"], turned["B"], turned["C"]) == (base["B"], base["C"], base["A"])


def test_a_site_at_the_centre_goes_to_a():
    lat = build_lattice("square", length=12, circumference=8)
    site = 5 * 8 + 4  # cell (5, 4), at (5.0, 4.0)
    lay = sectors(lat, radius=2.0, center=tuple(lat.positions[site]))
    assert site in lay["A"]


# ------------------------------------------------------------------------------------- rings


@pytest.mark.parametrize("name", sorted(SIZES))
def test_annulus_is_a_ring_around_a_hole(name):
    lat = lattice(name)
    lay = annulus(lat, inner=1.2, outer=3.0)
    # reference: scipy.spatial.cKDTree ball queries (general-purpose library)
    assert set(lay["A"]) == reference_ball(lat, lay.center, 3.0) - reference_ball(lat, lay.center, 1.2)
    assert n_components(lat, lay["A"]) == 1
    assert n_components(lat, lay.complement()) == 2  # the hole and the outside


@pytest.mark.parametrize("name", sorted(SIZES))
def test_levin_wen_arcs(name):
    lat = lattice(name)
    params = EXAMPLES["levin_wen"]
    lay = levin_wen(lat, **params)
    ring = annulus(lat, inner=params["inner"], outer=params["outer"])
    assert set(lay.union("ABC")) == set(ring["A"])
    assert touching(lat, lay["A"], lay["C"]) == []
    # AB and BC are disks, B two disks, ABC a ring: the topology behind I(A:C|B) = 2 gamma
    # (Levin and Wen, Phys. Rev. Lett. 96, 110405 (2006))
    counts = {k: n_components(lat, lay.union(k)) for k in ("A", "B", "C", "AB", "BC", "ABC")}
    assert counts == {"A": 1, "B": 2, "C": 1, "AB": 1, "BC": 1, "ABC": 1}
    assert n_components(lat, lay.complement()) == 2
    assert len(lay.components("B")) == 2
    d = min_image(lat, lay.center)
    assert d[list(lay["A"]), 0].mean() < 0 < d[list(lay["C"]), 0].mean()  # default angle 90: A left, C right
    assert sorted(np.sign(d[list(p), 1].mean()) for p in lay.components("B")) == [-1, 1]


@pytest.mark.parametrize("name", sorted(SIZES))
def test_shielded_shells(name):
    lat = lattice(name)
    params = EXAMPLES["shielded"]
    lay = shielded(lat, **params)
    ball = {r: reference_ball(lat, lay.center, params[r]) for r in "abc"}  # scipy k-d tree reference
    assert set(lay["A"]) == ball["a"]
    assert set(lay["B"]) == ball["b"] - ball["a"]
    assert set(lay["C"]) == ball["c"] - ball["b"]
    assert touching(lat, lay["A"], lay["C"]) == []


@pytest.mark.parametrize("name", sorted(SIZES))
@pytest.mark.parametrize("axis", ["x", "y"])
def test_strips_follow_each_other(name, axis):
    lat = lattice(name)
    lay = strips(lat, **EXAMPLES["strips"], axis=axis)
    assert touching(lat, lay["A"], lay["C"]) == []
    k = 0 if axis == "x" else 1
    coord = min_image(lat, lay.center)[:, k]
    a, b, c = (coord[list(lay[p])] for p in "ABC")
    assert a.max() < b.min() and b.max() < c.min()
    if axis == "x":  # bands all around the cylinder: every site of the covered x range is in a part
        lo, hi = a.min() + lay.center[0], c.max() + lay.center[0]
        xs = lat.positions[:, 0]
        assert set(np.flatnonzero((xs >= lo - 1e-9) & (xs <= hi + 1e-9))) == set(lay.union("ABC"))


def test_half_cut():
    lat = lattice("honeycomb")
    by_x = half(lat, x=4.0)
    assert set(by_x["A"]) == set(np.flatnonzero(lat.positions[:, 0] < 4.0))
    by_columns = half(lat, columns=3)
    assert len(by_columns["A"]) == 3 * 5 * 2  # 3 columns of 5 cells with 2 sites each
    assert len(by_columns.complement()) == lat.num_sites - 30


def test_regions_from_a_model_file():
    lat = load_model("kagome_chiral", {"length": "8", "circumference": "4"}).lattice
    lay = sectors(lat, radius=3.0)
    assert len(set(lay.sizes.values())) == 1  # threefold axis of the kagome lattice, as above


# --------------------------------------------------------------------------------- registry


@pytest.mark.parametrize("name", sorted(SIZES))
@pytest.mark.parametrize("kind", sorted(LAYOUTS))
def test_every_kind_on_every_lattice(name, kind):
    lat = lattice(name)
    lay = build_layout(lat, kind, **EXAMPLES[kind])
    assert lay.kind == kind and lay.names[0] == "A"
    assert all(lay.sizes.values())
    assert sum(lay.sizes.values()) == len(lay.union(lay.names))  # disjoint
    again = parse_region(lay.spec, lat)
    assert again == lay and again.params == lay.params
    exported = json.loads(json.dumps(lay.to_json()))
    assert build_layout(lat, exported["kind"], **exported["params"]) == lay
    for part, entry in exported["parts"].items():
        assert entry["sites"] == list(lay[part])
        coords = np.array(entry["positions"]).reshape(-1, 2)
        np.testing.assert_array_equal(coords, lat.positions[entry["sites"]])


def test_registry_and_syntax_agree():
    assert set(SYNTAX) == set(LAYOUTS) == set(EXAMPLES)


def test_layout_helpers():
    lat = lattice("square")
    lay = sectors(lat, radius=3.0)
    assert lay.union("AB") == tuple(sorted(lay["A"] + lay["B"]))
    assert lay.union(["C", "A"]) == lay.union("AC")
    assert len(lay.complement()) == lat.num_sites - len(lay.union("ABC"))
    assert lay.positions("B").shape == (len(lay["B"]), 2)
    assert "sectors" in repr(lay) and "A " in repr(lay)
    assert hash(lay) == hash(parse_region(lay.spec, lat))


# ------------------------------------------------------------------------------- validation


def test_disk_leaving_the_lattice():
    lat = build_lattice("square", length=6, circumference=8)
    with pytest.raises(LatticeError, match=r"disk of radius 3 reaches x = -0.5, outside the lattice "
                                           r"\(x from 0 to 5\); reduce the radius.*--set length="):
        disk(lat, radius=3.0)


def test_margin_columns():
    lat = build_lattice("square", length=8, circumference=8)
    disk(lat, radius=2.9)  # reaches column 1: allowed with the default margin of one column
    with pytest.raises(LatticeError, match=r"in column 1 .*within 2 column\(s\) of an open end"):
        disk(lat, radius=2.9, limits=RegionLimits(margin=2))


def test_region_too_wide_for_the_circumference():
    lat = build_lattice("square", length=12, circumference=4)
    with pytest.raises(LatticeError, match=r"spans 4 around the cylinder, too much for circumference 4 .*"
                                           r"--set circumference=5"):
        disk(lat, radius=2.0)


def test_region_closing_around_the_cylinder():
    lat = build_lattice("square", length=12, circumference=4)
    # without the gap the span test passes, but a whole column of sites lies in the disk
    with pytest.raises(LatticeError, match="closes around the lattice"):
        disk(lat, radius=2.0, center=(5.5, 1.5), limits=RegionLimits(gap=0.0))


def test_region_outside_a_strip():
    lat = build_lattice("square", length=12, circumference=6, geometry="strip")
    with pytest.raises(LatticeError, match=r"outside the strip \(y from 0 to 5\)"):
        disk(lat, radius=3.0)


def test_empty_part_and_empty_hole():
    lat = lattice("square")  # default centre (5.5, 3.5): distances 0.707, 1.58, 2.12, ...
    with pytest.raises(LatticeError, match=r"part A of the annulus 1 < d <= 1.2 contains no sites; widen"):
        annulus(lat, inner=1.0, outer=1.2)
    with pytest.raises(LatticeError, match=r"hole of the annulus .* contains no site.*increase the inner"):
        annulus(lat, inner=0.5, outer=2.5)


def test_b_must_separate_a_from_c():
    lat = lattice("square")
    with pytest.raises(LatticeError, match=r"B does not separate A from C: sites \d+ and \d+ share a bond of "
                                           r"family 'nn'; widen the cuts"):
        levin_wen(lat, inner=1.2, outer=3.2, cut=25.0)
    shielded(lat, a=1.2, b=1.6, c=3.0)  # separates along nearest-neighbour bonds ...
    with pytest.raises(LatticeError, match="family 'nnn'; widen the ring B"):
        shielded(lat, a=1.2, b=1.6, c=3.0, limits=RegionLimits(bonds="nnn"))  # ... but not along diagonals


@pytest.mark.parametrize("call, message", [
    (lambda lat: disk(lat, radius=-1.0), "disk: radius must be a positive number"),
    (lambda lat: disk(lat, radius=2.0, center=(1.0,)), r"disk: center must be two numbers"),
    (lambda lat: annulus(lat, inner=2.0, outer=1.5), "outer radius 1.5 must exceed inner radius 2"),
    (lambda lat: levin_wen(lat, inner=1.0, outer=3.0, cut=200.0), "cut 200 degrees must be below 180"),
    (lambda lat: shielded(lat, a=2.0, b=1.0, c=3.0), r"radii must grow, a < b < c"),
    (lambda lat: strips(lat, a=1.0, b=1.0, c=1.0, axis="z"), "axis must be 'x' or 'y'"),
    (lambda lat: half(lat), "give exactly one of x=X"),
    (lambda lat: half(lat, x=1.0, columns=2), "give exactly one of x=X"),
    (lambda lat: half(lat, columns=12), "columns must be a whole number from 1 to 11"),
    (lambda lat: half(lat, x=-3.0), "leaves part A empty; put the cut between x = 0 and 11"),
    (lambda lat: build_layout(lat, "circle", radius=1.0), r"unknown region kind 'circle'; valid kinds: disk"),
    (lambda lat: build_layout(lat, "disk", radius=2.0, centre=(1, 1)),
     r"no parameter 'centre'; valid parameters: radius, center"),
    (lambda lat: build_layout(lat, "disk"), r"needs the parameter 'radius'; syntax: disk:radius=R"),
    (lambda lat: Layout("custom", {"A": [0, 1], "B": [1, 2]}, lat), "parts A and B overlap in site 1"),
    (lambda lat: Layout("custom", {"AB": [0]}, lat), "single capital letters"),
    (lambda lat: Layout("custom", {"A": [96]}, lat), r"contains site 96; the lattice has 96 sites"),
    (lambda lat: disk(lat, radius=2.0)["B"], r"has no part 'B'; its parts are A"),
    (lambda lat: RegionLimits(margin=-1), "margin must be a whole number"),
])
def test_bad_requests(call, message):
    with pytest.raises(LatticeError, match=message):
        call(lattice("square"))


# ---------------------------------------------------------------------------------- parsing


def test_parse_explicit_forms():
    lat = lattice("square")
    assert parse_region("disk:radius=2,center=5,4", lat) == disk(lat, radius=2.0, center=(5.0, 4.0))
    assert parse_region(" sectors: radius=3, start=30 ", lat) == sectors(lat, radius=3.0, start=30.0)
    assert parse_region("sectors:center=5.2,3.9,radius=2.5", lat) == sectors(lat, radius=2.5,
                                                                             center=(5.2, 3.9))
    assert parse_region("levin_wen:inner=1.2,outer=3.2,cut=60,angle=0", lat) == levin_wen(
        lat, inner=1.2, outer=3.2, cut=60.0, angle=0.0)
    assert parse_region("shielded:a=1.2,b=2.4,c=3.4", lat) == shielded(lat, a=1.2, b=2.4, c=3.4)
    assert parse_region("strips:a=1,b=2,c=1,axis=y,span=4", lat) == strips(lat, a=1.0, b=2.0, c=1.0,
                                                                           axis="y", span=4.0)
    assert parse_region("half:x=3.5", lat) == half(lat, x=3.5)
    assert parse_region("half:columns=4", lat)["A"] == tuple(range(32))


@pytest.mark.parametrize("text, message", [
    ("", "empty region"),
    ("blob:radius=1", r"unknown kind 'blob'; valid kinds: disk, sectors, annulus, levin_wen, shielded"),
    ("disk", r"missing 'radius'; syntax: disk:radius=R\[,center=X,Y\]"),
    ("disk:radius=abc", r"radius must be a number, got 'abc'; syntax: disk:"),
    ("disk:radius", r"'radius' is not key=value"),
    ("disk:radius=2,radius=3", "'radius' is given twice"),
    ("disk:radius=2,center=1", "center must be two numbers X,Y"),
    ("disk:radius=2,center=1,2,3", "'3' is not key=value"),
    ("disk:radius=2,start=10", r"unknown key 'start' \(valid keys: radius, center\)"),
    ("half:columns=2.5", "columns must be a whole number"),
    ("annulus:inner=3,outer=2", "outer radius 2 must exceed inner radius 3"),
])
def test_parse_errors(text, message):
    with pytest.raises(LatticeError, match=message) as caught:
        parse_region(text, lattice("square"))
    assert "\n" not in str(caught.value)


# ------------------------------------------------------------------------------------ plots


PLOTS = [("square", "strips"), ("triangular", "sectors"), ("honeycomb", "levin_wen"), ("kagome", "shielded"),
         ("toric", "half")]


@pytest.mark.parametrize("name, kind", PLOTS)
def test_plot_layout_writes_a_png(tmp_path, name, kind):
    lay = build_layout(lattice(name), kind, **EXAMPLES[kind])
    out = plot_layout(lay, tmp_path / "figures" / f"{name}.png", title=None if kind != "half" else "cut")
    data = out.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    width, height = int.from_bytes(data[16:20], "big"), int.from_bytes(data[20:24], "big")  # IHDR chunk
    assert width > 300 and height > 200
