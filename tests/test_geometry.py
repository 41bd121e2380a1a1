"""Outlines from level sets and outline metrics, checked against closed-form areas."""
import math

import numpy as np
import pytest
import shapely
from conftest import plate_problem
from shapely.geometry import MultiPolygon, Point, Polygon, box

from levelform.geometry.measure import outline_holes, outline_metrics, smallest_member_width
from levelform.geometry.outline import outline_from_levelset
from levelform.geometry.shapes import domain_polygon, item_geometry, keep_regions, region_geometry
from levelform.spec import (
    GridInfo,
    Load,
    ProblemError,
    Region,
    Support,
)


def make_problem(outline, holes=(), regions=(), cell=0.1):
    return plate_problem(outline, cell, holes=holes, regions=regions, E=210e3, name="geom-test")


def grid_nodes(grid):
    x = grid.x0 + grid.h * np.arange(grid.nx + 1)
    y = grid.y0 + grid.h * np.arange(grid.ny + 1)
    return np.meshgrid(x, y)  # shapes (ny+1, nx+1): row j = y, column i = x


def test_circle_outline_area_matches_pi_r2():
    # Disc area pi r^2 (closed form); linear interpolation of a signed distance on a grid
    # of h = r/20 is well inside 1 %.
    grid = GridInfo(nx=100, ny=60, x0=0.0, y0=0.0, h=0.1)
    X, Y = grid_nodes(grid)
    r = 2.0
    phi = np.hypot(X - 5.0, Y - 3.0) - r
    out = outline_from_levelset(phi, grid, box(0, 0, 10, 6))
    assert isinstance(out, MultiPolygon)
    assert out.is_valid
    assert len(out.geoms) == 1
    assert out.area == pytest.approx(math.pi * r * r, rel=0.01)
    assert out.geoms[0].exterior.is_ccw


def test_outline_phi_orientation_sign_convention():
    # The same field with the sign flipped must give the complement inside the domain
    # (area of rectangle minus disc, closed form).
    grid = GridInfo(nx=100, ny=60, x0=0.0, y0=0.0, h=0.1)
    X, Y = grid_nodes(grid)
    phi = -(np.hypot(X - 5.0, Y - 3.0) - 2.0)
    out = outline_from_levelset(phi, grid, box(0, 0, 10, 6))
    assert out.area == pytest.approx(60.0 - math.pi * 4.0, rel=0.01)
    assert len(out.geoms) == 1 and len(out.geoms[0].interiors) == 1


def test_square_hole_gives_one_polygon_one_hole_oriented():
    # Material everywhere except the square [3,7]x[2,4] (area 8); phi is a Chebyshev-type
    # distance whose zero set lies on grid lines. Linear interpolation inside a cell can
    # only chop a corner of the square by a triangle of at most half a cell, so the
    # material area lies in [60 - 8, 60 - 8 + 4 * h^2 / 2] (elementary geometry).
    h = 0.2
    grid = GridInfo(nx=50, ny=30, x0=0.0, y0=0.0, h=h)
    X, Y = grid_nodes(grid)
    phi = np.minimum(np.minimum(X - 3.0, 7.0 - X), np.minimum(Y - 2.0, 4.0 - Y))
    out = outline_from_levelset(phi, grid, box(0, 0, 10, 6))
    assert out.is_valid
    assert len(out.geoms) == 1
    poly = out.geoms[0]
    assert len(poly.interiors) == 1
    assert poly.exterior.is_ccw
    assert not poly.interiors[0].is_ccw  # holes clockwise (RFC 7946)
    assert 52.0 - 1e-9 <= poly.area <= 52.0 + 2.0 * h * h + 1e-9
    m = outline_metrics(out, box(0, 0, 10, 6))
    assert m["holes"] == 1 and m["pieces"] == 1
    # Perimeter: rectangle 2(10+6) plus square 2(4+2) (closed form); a chopped corner
    # trades two legs of length h for a hypotenuse h*sqrt(2).
    assert 44.0 - 4 * (2 - math.sqrt(2)) * h - 1e-9 <= m["outline_length"] <= 44.0 + 1e-9


def test_clipping_to_triangle_domain_with_nan_outside():
    # All-material level set on a triangular domain; nodes outside hold NaN. The outline
    # must be the triangle itself: area = base * height / 2 = 8 * 5 / 2 = 20 (closed form),
    # with an exact (not staircase) hypotenuse.
    grid = GridInfo(nx=40, ny=25, x0=0.0, y0=0.0, h=0.2)
    X, Y = grid_nodes(grid)
    tri = Polygon([(0, 0), (8, 0), (0, 5)])
    outside = ~shapely.contains_xy(tri, X, Y) & ~shapely.intersects_xy(tri.boundary, X, Y)
    phi = np.full(X.shape, -1.0)
    phi[outside] = np.nan
    out = outline_from_levelset(phi, grid, tri)
    assert out.is_valid
    assert out.area == pytest.approx(20.0, rel=1e-9)
    assert out.symmetric_difference(tri).area < 1e-9


def test_void_next_to_nan_does_not_leave_a_sliver():
    # Left half material, right half void, on a domain whose right edge lies between
    # node columns (x = 7.9 with h = 0.2); nodes right of it are NaN. Expected area is the
    # material half only: the plane x < 4 cut by the zero level at x = 4: 4 * 5 = 20.
    grid = GridInfo(nx=40, ny=25, x0=0.0, y0=0.0, h=0.2)
    X, Y = grid_nodes(grid)
    dom = box(0, 0, 7.9, 5)
    phi = X - 4.0
    phi[X > 7.9] = np.nan
    out = outline_from_levelset(phi, grid, dom)
    assert out.area == pytest.approx(20.0, rel=1e-6)
    assert len(out.geoms) == 1


def test_circle_clipped_by_domain_edge():
    # Disc of radius 2 centred on the domain's left edge: half disc inside, area pi r^2/2.
    grid = GridInfo(nx=60, ny=60, x0=-3.0, y0=-3.0, h=0.1)
    X, Y = grid_nodes(grid)
    phi = np.hypot(X, Y) - 2.0
    phi[X < 0.0] = np.nan
    out = outline_from_levelset(phi, grid, box(0, -3, 3, 3))
    assert out.area == pytest.approx(math.pi * 2.0, rel=0.01)


def test_small_holes_and_pieces_are_dropped():
    grid = GridInfo(nx=20, ny=20, x0=0.0, y0=0.0, h=1.0)
    phi = np.full((21, 21), -1.0)
    phi[10, 10] = 1.0  # pinhole: area well below one cell
    out = outline_from_levelset(phi, grid, box(0, 0, 20, 20))
    assert len(out.geoms) == 1 and len(out.geoms[0].interiors) == 0
    assert out.area == pytest.approx(400.0)
    phi = np.full((21, 21), 1.0)
    phi[5, 5] = -1.0  # speck of material
    assert outline_from_levelset(phi, grid, box(0, 0, 20, 20)).is_empty


def test_all_void_gives_empty_multipolygon():
    grid = GridInfo(nx=4, ny=4, x0=0.0, y0=0.0, h=1.0)
    out = outline_from_levelset(np.ones((5, 5)), grid, box(0, 0, 4, 4))
    assert isinstance(out, MultiPolygon) and out.is_empty


def test_wrong_phi_shape_is_refused():
    grid = GridInfo(nx=4, ny=3, x0=0.0, y0=0.0, h=1.0)
    with pytest.raises(ValueError, match="shape"):
        outline_from_levelset(np.ones((5, 4)), grid, box(0, 0, 4, 3))


def test_domain_polygon_orientation_and_holes():
    # Clockwise input outline must come back counter-clockwise; area = 10*6 - 2*2.
    p = make_problem([(0, 0), (0, 6), (10, 6), (10, 0)], holes=[[(4, 2), (6, 2), (6, 4), (4, 4)]])
    dom = domain_polygon(p)
    assert dom.exterior.is_ccw and not dom.interiors[0].is_ccw
    assert dom.area == pytest.approx(56.0)


def test_domain_polygon_bad_outline_names_key():
    bowtie = make_problem([(0, 0), (4, 4), (4, 0), (0, 4)])
    with pytest.raises(ProblemError, match=r"domain\.outline"):
        domain_polygon(bowtie)
    outside_hole = make_problem([(0, 0), (4, 0), (4, 4), (0, 4)],
                                holes=[[(5, 5), (6, 5), (6, 6)]])
    with pytest.raises(ProblemError, match=r"domain\.holes\[0\]"):
        domain_polygon(outside_hole)


def test_region_geometry_shapes():
    # Circle polygon of 128 segments: area (n/2) sin(2 pi/n) r^2, within 0.1 % of pi r^2.
    c = region_geometry(Region("solid", "circle", (1.0, 2.0, 3.0)))
    assert c.area == pytest.approx(math.pi * 9.0, rel=1e-3)
    assert len(c.exterior.coords) - 1 >= 128
    b = region_geometry(Region("empty", "box", (0, 0, 2, 3)))
    assert b.area == pytest.approx(6.0)
    t = region_geometry(Region("solid", "polygon", ((0, 0), (0, 2), (2, 0))))
    assert t.area == pytest.approx(2.0) and t.exterior.is_ccw
    with pytest.raises(ProblemError, match=r"region\[3\]"):
        region_geometry(Region("solid", "star", (0, 0), key="region[3]"))
    with pytest.raises(ProblemError, match=r"region\[1\]"):
        region_geometry(Region("solid", "circle", (0, 0, -1), key="region[1]"))


def test_region_geometry_as_built_is_the_same_shape():
    # Orientation changes the order of the vertices, not the shape (RFC 7946, 3.1.6: the
    # exterior ring counter-clockwise): same area, same vertex set; only the oriented one
    # runs counter-clockwise. A shapely buffer ring runs clockwise (GEOS convention).
    for r in (Region("solid", "circle", (1.0, 2.0, 3.0)),
              Region("empty", "polygon", ((0.0, 0.0), (0.0, 2.0), (2.0, 0.0)))):
        built, oriented = region_geometry(r, oriented=False), region_geometry(r)
        assert oriented.exterior.is_ccw and not built.exterior.is_ccw
        assert built.area == pytest.approx(oriented.area, rel=1e-15)
        assert set(built.exterior.coords) == set(oriented.exterior.coords)


def test_item_geometry_of_supports_and_loads():
    # Closed forms: a 3-4-5 segment has length 5; a 2 x 3 box has area 6, perimeter 10.
    p = item_geometry(Load("point", (1.0, 2.0), (0.0, -1.0)))
    assert (p.geom_type, p.x, p.y) == ("Point", 1.0, 2.0)
    seg = item_geometry(Load("segment", ((0.0, 0.0), (3.0, 4.0)), (1.0, 0.0)))
    assert seg.geom_type == "LineString" and seg.length == pytest.approx(5.0)
    b = item_geometry(Support("box", (1.0, 1.0, 3.0, 4.0), "xy"))
    assert b.geom_type == "Polygon" and b.area == pytest.approx(6.0)
    assert b.length == pytest.approx(10.0) and b.bounds == (1.0, 1.0, 3.0, 4.0)


def test_outline_holes_of_a_single_polygon_and_of_pieces():
    # Hand count: the plate has the domain's bolt hole and two openings of its own; a
    # second piece has one more. The domain's hole never counts.
    dom = Polygon([(0, 0), (20, 0), (20, 6), (0, 6)], [[(4, 2), (6, 2), (6, 4), (4, 4)]])
    plate = Polygon([(0, 0), (10, 0), (10, 6), (0, 6)],
                    [dom.interiors[0], [(1, 1), (2, 1), (2, 2), (1, 2)],
                     [(7, 1), (8, 1), (8, 2), (7, 2)]])
    other = Polygon([(12, 0), (20, 0), (20, 6), (12, 6)], [[(14, 2), (16, 2), (16, 4), (14, 4)]])
    assert outline_holes(plate, dom) == 2
    assert outline_holes(MultiPolygon([plate, other]), dom) == 3
    assert outline_holes(MultiPolygon([plate, other]), None) == 4  # no domain: every ring
    assert outline_holes(MultiPolygon(), dom) == 0


def test_keep_regions_union_and_clip():
    regions = [Region("solid", "box", (-1, -1, 1, 1)), Region("solid", "box", (0, 0, 2, 2)),
               Region("empty", "circle", (5, 3, 1))]
    p = make_problem([(0, 0), (10, 0), (10, 6), (0, 6)], regions=regions)
    solid, empty = keep_regions(p)
    # Clipped union: [0,1]^2 and [0,2]^2 overlap -> [0,2]^2, area 4.
    assert solid.area == pytest.approx(4.0)
    assert empty.area == pytest.approx(math.pi, rel=1e-3)
    none_solid, none_empty = keep_regions(make_problem([(0, 0), (1, 0), (1, 1)]))
    assert none_solid.is_empty and none_empty.is_empty


def test_holes_coinciding_with_domain_holes_are_not_counted():
    dom = Polygon([(0, 0), (10, 0), (10, 6), (0, 6)], [[(4, 2), (6, 2), (6, 4), (4, 4)]])
    design = MultiPolygon([Polygon(dom.exterior, [dom.interiors[0],
                                                 [(1, 1), (2, 1), (2, 2), (1, 2)]])])
    m = outline_metrics(design, dom)
    assert m["holes"] == 1  # the bolt hole of the domain does not count
    assert m["pieces"] == 1
    assert m["area"] == pytest.approx(60.0 - 4.0 - 1.0)


def test_member_width_of_annulus_is_ring_width():
    # An annulus of width w is a union of discs of radius w/2 (closed form), so it survives
    # every opening with r <= w/2 and vanishes beyond: the metric must return w.
    w = 1.0
    ring = Point(0, 0).buffer(10.0, quad_segs=64).difference(
        Point(0, 0).buffer(10.0 - w, quad_segs=64))
    assert smallest_member_width(ring, tol=0.005) == pytest.approx(w, abs=0.01)


def test_member_width_of_long_strip():
    # Opening a w x L rectangle by r <= w/2 removes only the corners, (4 - pi) r^2 in all
    # (closed form); for L = 100 w that is 0.21 % < 0.5 %, so the answer is w.
    w = 2.0
    strip = box(0, 0, 100 * w, w)
    assert smallest_member_width(strip, tol=0.01) == pytest.approx(w, abs=0.02)


def test_member_width_takes_the_thinnest_member_and_is_cheap():
    # A thick block joined to a thin long bar (width 0.5) that holds well over 0.5 % of
    # the area: the thin bar decides.
    import time
    shape = box(0, 0, 10, 10).union(box(10, 4.75, 60, 5.25))
    t0 = time.perf_counter()
    width = smallest_member_width(shape, tol=0.01)
    assert time.perf_counter() - t0 < 0.5
    assert width == pytest.approx(0.5, abs=0.02)
    assert smallest_member_width(MultiPolygon()) == 0.0


def test_metrics_on_levelset_outline():
    # A typical outline: a perforated plate from a 200 x 100 grid. The member width of this
    # egg-crate pattern: cos(2 pi x/p) cos(2 pi y/p) = 0.4 leaves ligaments between holes.
    grid = GridInfo(nx=200, ny=100, x0=0.0, y0=0.0, h=0.1)
    X, Y = grid_nodes(grid)
    phi = np.cos(2 * np.pi * X / 2.5) * np.cos(2 * np.pi * Y / 2.5) - 0.4
    out = outline_from_levelset(phi, grid, box(0, 0, 20, 10))
    m = outline_metrics(out, box(0, 0, 20, 10))
    assert m["smallest_member_width"] > 0.0
    assert out.is_valid


def test_domain_hole_with_nan_inside_is_kept_and_not_counted():
    # All material on a 10 x 6 plate with a round bolt hole of radius 1 whose nodes are NaN:
    # the outline is the plate minus the (polygonal) hole, area 60 - pi (closed form, to
    # the hole polygon's 0.1 %), and the metric does not count the domain's own hole.
    grid = GridInfo(nx=50, ny=30, x0=0.0, y0=0.0, h=0.2)
    X, Y = grid_nodes(grid)
    hole = Point(5.0, 3.0).buffer(1.0, quad_segs=32)
    dom = Polygon(box(0, 0, 10, 6).exterior, [hole.exterior])
    phi = np.full(X.shape, -1.0)
    phi[shapely.contains_xy(hole, X, Y)] = np.nan
    out = outline_from_levelset(phi, grid, dom)
    assert out.area == pytest.approx(60.0 - math.pi, rel=1e-3)
    assert out.symmetric_difference(dom).area < 1e-9
    m = outline_metrics(out, dom)
    assert m["holes"] == 0 and m["pieces"] == 1


def test_member_width_finds_a_thin_strut_with_a_tiny_share_of_the_area():
    # A frame 100 x 20 with walls 5 wide and one strut 0.2 wide across its opening: the strut
    # holds 0.2 % of the area, yet it is the thinnest member (analytic: 0.2).
    frame = box(0, 0, 100, 20).difference(box(5, 5, 95, 15))
    g = frame.union(box(49.9, 5, 50.1, 15))
    assert smallest_member_width(g) == pytest.approx(0.2, abs=0.02)
    assert smallest_member_width(frame) == pytest.approx(5.0, rel=0.05)


def test_simplification_keeps_the_area_within_half_a_percent():
    # The exported outline is the zero contour simplified with a tolerance of SIMPLIFY cells;
    # against the unsimplified filled contour (contourpy, the reference library) its area
    # changes by far less than 0.5 % and its vertex count drops.
    import contourpy

    from levelform.geometry.outline import SIMPLIFY

    grid = GridInfo(nx=120, ny=60, x0=0.0, y0=0.0, h=0.5)
    X, Y = grid_nodes(grid)
    phi = np.cos(2 * np.pi * X / 13.0) * np.cos(2 * np.pi * Y / 9.0) + 0.2 * np.sin(X / 3.0) - 0.3
    dom = box(0, 0, 60, 30)
    out = outline_from_levelset(phi, grid, dom, min_hole_area=0.0)
    gen = contourpy.contour_generator(X[0], Y[:, 0], phi, fill_type="OuterOffset")
    pts, offs = gen.filled(-np.inf, 0.0)
    raw = shapely.union_all([Polygon(p[o[0]:o[1]], [p[a:b] for a, b in zip(o[1:-1], o[2:])]) for p, o in zip(pts, offs)])
    raw = raw.intersection(dom)
    assert SIMPLIFY <= 0.1
    assert abs(out.area - raw.area) <= 0.005 * raw.area
    n_out = sum(len(p.exterior.coords) + sum(len(r.coords) for r in p.interiors) for p in out.geoms)
    n_raw = sum(len(p.exterior.coords) + sum(len(r.coords) for r in p.interiors) for p in getattr(raw, "geoms", [raw]))
    assert n_out < n_raw


# A plate 40 x 20 with a 6 x 6 bolt hole near its supported edge, kept solid around the
# hole so the hole stays inside the material; few iterations on a coarse grid.
HOLED_PLATE = """
name = "plate with a bolt hole"
[material]
E = 1000.0
nu = 0.3
thickness = 1.0
[domain]
outline = [[0, 0], [40, 0], [40, 20], [0, 20]]
holes = [[[6, 7], [12, 7], [12, 13], [6, 13]]]
cell = 2.0
[[support]]
segment = [[0, 0], [0, 20]]
fix = "xy"
[[load]]
point = [40, 10]
force = [0, -1]
[[region]]
keep = "solid"
circle = [9, 10, 6]
[goal]
material = 0.5
[method]
iterations = 30
smoothing = 4.0
"""


def test_printed_hole_count_is_the_summary_count(tmp_path, capsys):
    import json
    import re

    from levelform.cli import main

    path = tmp_path / "holed.toml"
    path.write_text(HOLED_PLATE, encoding="utf-8")
    out = tmp_path / "out"
    assert main(["run", str(path), "-o", str(out), "-q", "--no-verify"]) == 0
    printed = re.findall(r"(\d+) holes", capsys.readouterr().out)
    summary = json.loads((out / "summary.json").read_text(encoding="utf-8"))
    # Independent count from outline.geojson: in a GeoJSON polygon every ring after the
    # first is a hole (RFC 7946, 3.1.6); those matching the domain's hole are not the
    # design's.
    features = json.loads((out / "outline.geojson").read_text(encoding="utf-8"))["features"]
    (material,) = [f for f in features if f["properties"]["role"] == "material"]
    rings = [r for poly in material["geometry"]["coordinates"] for r in poly[1:]]
    domain_hole = box(6, 7, 12, 13)
    own = [r for r in rings if Polygon(r).symmetric_difference(domain_hole).area > 0.01 * 36]
    assert len(rings) > len(own)  # the domain's hole is in the outline, and is not counted
    assert printed == [str(summary["holes"])]
    assert summary["holes"] == len(own)
