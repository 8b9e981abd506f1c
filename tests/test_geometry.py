"""Exact boundary geometry: edges, arcs, loops."""
from __future__ import annotations

import math

import numpy as np
import pytest
import shapely

from raytrace.geometry import Edge, Loop, Part, ShapeSpec

TAU = 2 * math.pi


def quarter(ccw: bool = True, r: float = 2.0, c=(1.0, -3.0)) -> Edge:
    return Edge((c[0] + r, c[1]), (c[0], c[1] + r), arc_center=c, ccw=ccw)


def disk(r: float, c=(0.0, 0.0), ccw: bool = True) -> Loop:
    p = (c[0] + r, c[1])
    return Loop((Edge(p, p, arc_center=c, ccw=ccw),))


def half_disk(r: float) -> Loop:
    """Upper half disk: arc from (r, 0) over the top to (-r, 0), then the diameter back."""
    return Loop((Edge((r, 0.0), (-r, 0.0), arc_center=(0.0, 0.0), ccw=True),
                 Edge((-r, 0.0), (r, 0.0))))


# ---------------------------------------------------------------- arc angles

def test_arc_angles_ccw_and_cw():
    """common practice: polar angle atan2(y, x); the cw way round a quarter is -(2 pi - pi/2)."""
    a0, sweep = quarter(ccw=True).arc_angles()
    assert a0 == pytest.approx(0.0, abs=1e-15)
    assert sweep == pytest.approx(math.pi / 2, rel=1e-15)
    a0, sweep = quarter(ccw=False).arc_angles()
    assert a0 == pytest.approx(0.0, abs=1e-15)
    assert sweep == pytest.approx(-1.5 * math.pi, rel=1e-15)


def test_arc_angles_full_circle_and_start_angle():
    """A closed arc (start == end) is a full turn either way; the start angle follows the start."""
    e = Edge((0.0, 5.0), (0.0, 5.0), arc_center=(0.0, 0.0))
    assert e.arc_angles() == pytest.approx((math.pi / 2, TAU), rel=1e-15)
    assert Edge((0.0, 5.0), (0.0, 5.0), (0.0, 0.0), ccw=False).arc_angles()[1] == -TAU
    e = Edge((-1.0, 0.0), (0.0, -1.0), arc_center=(0.0, 0.0), ccw=True)  # 180 deg -> 270 deg
    a0, sweep = e.arc_angles()
    assert abs(a0) == pytest.approx(math.pi, rel=1e-15)
    assert sweep == pytest.approx(math.pi / 2, rel=1e-14)


# ---------------------------------------------------------------- length, point_at

@pytest.mark.parametrize("ccw,theta", [(True, math.pi / 2), (False, 1.5 * math.pi)])
def test_arc_length_is_r_theta(ccw, theta):
    """published: arc length s = r * theta (any geometry handbook), theta the swept angle."""
    e = quarter(ccw=ccw, r=2.0)
    assert e.length() == pytest.approx(2.0 * theta, rel=1e-14)


def test_arc_length_matches_fine_polyline_through_point_at():
    """common practice: a polyline of n chords inscribed in an arc is shorter than the arc by
    about L theta^2 / (24 n^2); with n = 10^5 that is below 1e-11 of the length."""
    e = Edge((3.0, 1.0), (-2.0, 4.0), arc_center=(0.5, 0.2), ccw=False)
    u = np.linspace(0.0, 1.0, 100_001)
    pts = np.array([e.point_at(x) for x in u])
    poly = float(np.sum(np.hypot(*np.diff(pts, axis=0).T)))
    theta = abs(e.arc_angles()[1])
    assert poly <= e.length()
    assert e.length() - poly <= e.length() * theta ** 2 / (24 * 1e10) * 1.01 + 1e-12


def test_point_at_ends_middle_and_on_circle():
    """common practice: the midpoint of an arc lies on the bisector of its start and end angles."""
    e = quarter(ccw=True, r=2.0, c=(1.0, -3.0))
    assert e.point_at(0.0) == pytest.approx(e.start, abs=1e-15)
    assert e.point_at(1.0) == pytest.approx(e.end, abs=1e-14)
    mid = e.point_at(0.5)
    assert mid == pytest.approx((1.0 + math.sqrt(2), -3.0 + math.sqrt(2)), abs=1e-14)
    cw_mid = quarter(ccw=False, r=2.0, c=(1.0, -3.0)).point_at(0.5)   # the long way, through 225 deg
    assert cw_mid == pytest.approx((1.0 - math.sqrt(2), -3.0 - math.sqrt(2)), abs=1e-14)
    for u in np.linspace(0, 1, 7):
        assert math.dist(e.point_at(u), e.arc_center) == pytest.approx(2.0, rel=1e-15)
    seg = Edge((1.0, 1.0), (3.0, 5.0))
    assert seg.point_at(0.25) == (1.5, 2.0)
    assert seg.length() == pytest.approx(math.sqrt(20), rel=1e-15)


# ---------------------------------------------------------------- reversed, transformed

@pytest.mark.parametrize("edge", [quarter(True), quarter(False), Edge((0.0, 0.0), (2.0, 1.0))])
def test_reversed_traces_the_same_curve_backwards(edge):
    r = edge.reversed()
    assert (r.start, r.end) == (edge.end, edge.start)
    assert r.length() == pytest.approx(edge.length(), rel=1e-14)
    for u in (0.1, 0.5, 0.9):
        assert r.point_at(u) == pytest.approx(edge.point_at(1 - u), abs=1e-14)
    assert r.reversed() == edge


def test_reversed_loop_has_negated_area():
    """Green's theorem: walking the boundary the other way negates the signed area."""
    loop = half_disk(3.0)
    back = Loop(tuple(e.reversed() for e in reversed(loop.edges)))
    assert back.closure_gap() == 0.0
    assert back.signed_area() == pytest.approx(-loop.signed_area(), rel=1e-15)


def test_rotation_preserves_lengths_and_areas():
    """common practice: a rotation is an isometry; lengths and signed areas are unchanged."""
    loop = Loop((quarter(True, 2.0, (0.0, 0.0)), Edge((0.0, 2.0), (0.0, 0.0)),
                 Edge((0.0, 0.0), (2.0, 0.0))))
    moved = loop.transformed(4.0, -7.0, 37.0, about=(1.0, 2.0))
    assert moved.closure_gap() < 1e-12
    for a, b in zip(loop.edges, moved.edges):
        assert b.length() == pytest.approx(a.length(), rel=1e-14)
        assert b.is_arc == a.is_arc and b.ccw == a.ccw
    # quarter disk of radius 2: area pi r^2 / 4 (published: area of a circle, pi r^2)
    assert loop.signed_area() == pytest.approx(math.pi, rel=1e-14)
    assert moved.signed_area() == pytest.approx(math.pi, rel=1e-13)


def test_transformed_rotates_about_a_point_then_translates():
    e = Edge((2.0, 1.0), (1.0, 2.0), arc_center=(1.0, 1.0))
    t = e.transformed(10.0, 0.0, 90.0, about=(1.0, 1.0))
    assert t.arc_center == pytest.approx((11.0, 1.0), abs=1e-15)   # the pivot only moves by (dx, dy)
    assert t.start == pytest.approx((11.0, 2.0), abs=1e-15)
    assert t.end == pytest.approx((10.0, 1.0), abs=1e-15)


# ---------------------------------------------------------------- areas

@pytest.mark.parametrize("r", [0.5, 3.0, 40.0])
def test_disk_and_half_disk_areas(r):
    """published: area of a circle pi r^2; a cw circle (a hole) has negative signed area."""
    assert disk(r, c=(2.0, -1.0)).signed_area() == pytest.approx(math.pi * r * r, rel=1e-14)
    assert disk(r, ccw=False).signed_area() == pytest.approx(-math.pi * r * r, rel=1e-14)
    assert half_disk(r).signed_area() == pytest.approx(math.pi * r * r / 2, rel=1e-14)


def test_polygon_area_and_faces():
    """published: shoelace formula; a 3 x 2 rectangle has area 6."""
    loop = Loop.polygon([(0, 0), (3, 0), (3, 2), (0, 2)], ["a", "b", "c", "d"])
    assert loop.signed_area() == 6.0
    assert [e.face for e in loop.edges] == ["a", "b", "c", "d"]
    assert loop.closure_gap() == 0.0


def test_part_area_subtracts_holes():
    part = Part("ring", "glass", disk(3.0), (disk(1.0, ccw=False),))
    assert part.area() == pytest.approx(8 * math.pi, rel=1e-14)
    assert part.to_shapely(1e-4).is_valid


# ---------------------------------------------------------------- flattening

@pytest.mark.parametrize("tol", [1e-1, 1e-3, 1e-6])
def test_flattening_keeps_every_chord_within_the_tolerance(tol):
    """common practice: the sagitta of a chord of length c in a circle of radius r is
    r - sqrt(r^2 - c^2/4); flattening must keep it <= tol and put every point on the arc."""
    e = Edge((5.0, 0.0), (-5.0, 0.0), arc_center=(0.0, 0.0), ccw=False)
    pts = np.array(e.flattened(tol) + [e.end])
    assert np.allclose(np.hypot(pts[:, 0], pts[:, 1]), 5.0, rtol=1e-15, atol=0)
    c = np.hypot(*np.diff(pts, axis=0).T)
    sag = 5.0 - np.sqrt(25.0 - c * c / 4)
    assert sag.max() <= tol * (1 + 1e-9)
    assert np.all(pts[1:-1, 1] < 0)   # went the cw way, below the axis


@pytest.mark.parametrize("tol", [0.0, -1.0, float("nan")])
def test_flattening_rejects_a_tolerance_that_is_not_positive(tol):
    with pytest.raises(ValueError, match="tolerance"):
        quarter().flattened(tol)


# ---------------------------------------------------------------- bounds, size

def test_bounds_are_exact_for_arcs():
    """common practice: an arc's extreme x/y are its ends or the axis points its sweep crosses."""
    assert half_disk(2.0).bounds() == pytest.approx((-2.0, 0.0, 2.0, 2.0), abs=1e-15)
    below = Loop((Edge((2.0, 0.0), (-2.0, 0.0), (0.0, 0.0), ccw=False), Edge((-2.0, 0.0), (2.0, 0.0))))
    assert below.bounds() == pytest.approx((-2.0, -2.0, 2.0, 0.0), abs=1e-15)
    assert disk(1.0, c=(5.0, 6.0)).bounds() == pytest.approx((4.0, 5.0, 6.0, 7.0), abs=1e-15)
    # an arc away from the axis directions: bounds are its end points only
    e = Edge((math.cos(0.2), math.sin(0.2)), (math.cos(1.2), math.sin(1.2)), (0.0, 0.0))
    assert e.bounds() == pytest.approx((math.cos(1.2), math.sin(0.2), math.cos(0.2), math.sin(1.2)))


def test_bounds_contain_a_fine_flattening():
    """reference library: shapely.bounds of a flattening at tolerance t lies inside the exact
    bounds and within t of them."""
    loop = Loop((Edge((3.0, 1.0), (-2.0, 4.0), arc_center=(0.5, 0.2), ccw=True),
                 Edge((-2.0, 4.0), (3.0, 1.0))))
    tol = 1e-6
    fx0, fy0, fx1, fy1 = shapely.Polygon(loop.coords(tol)).bounds
    x0, y0, x1, y1 = loop.bounds()
    assert x0 <= fx0 and y0 <= fy0 and fx1 <= x1 and fy1 <= y1
    assert max(fx0 - x0, fy0 - y0, x1 - fx1, y1 - fy1) <= tol


def test_size_hint_follows_extent_not_radius():
    """A nearly flat arc (radius 1e6) over a 10 mm chord: the part is 10 mm, not 1e6 mm, big."""
    h = 5.0
    r = 1e6
    x = r - math.sqrt(r * r - h * h)
    loop = Loop((Edge((x, h), (x, -h), arc_center=(r, 0.0), ccw=True), Edge((x, -h), (x, h))))
    assert loop.size_hint() == pytest.approx(10.0, rel=1e-12)


# ---------------------------------------------------------------- with_vertex

def test_with_vertex_moves_both_neighbouring_edges():
    loop = Loop.polygon([(0, 0), (4, 0), (4, 3), (0, 3)], ["b", "r", "t", "l"])
    moved = loop.with_vertex(2, (5.0, 4.0))
    assert moved.closure_gap() == 0.0
    assert moved.edges[1].end == (5.0, 4.0) and moved.edges[2].start == (5.0, 4.0)
    assert [e.face for e in moved.edges] == ["b", "r", "t", "l"]
    assert moved.edges[0] == loop.edges[0] and moved.edges[3] == loop.edges[3]
    wrapped = loop.with_vertex(0, (-1.0, -1.0))   # vertex 0 is also the end of the last edge
    assert wrapped.edges[-1].end == (-1.0, -1.0) and wrapped.closure_gap() == 0.0


def test_with_vertex_keeps_arcs_on_their_circle_and_straightens_others():
    loop = half_disk(2.0)
    on_circle = (2.0 * math.cos(-0.3), 2.0 * math.sin(-0.3))
    kept = loop.with_vertex(0, on_circle)
    assert kept.edges[0].is_arc and kept.edges[0].arc_center == (0.0, 0.0)
    off = loop.with_vertex(0, (3.0, 0.0))
    assert not off.edges[0].is_arc
    assert off.closure_gap() == 0.0


def test_with_vertex_on_a_one_edge_circle_stays_closed():
    moved = disk(1.0).with_vertex(0, (0.0, 1.0))
    assert moved.closure_gap() == 0.0
    assert moved.signed_area() == pytest.approx(math.pi, rel=1e-14)


# ---------------------------------------------------------------- shape spec

def test_shape_spec_hashes_nested_params():
    """Light-pipe params hold lists of dicts; a spec (and so a Part) must still hash."""
    segs = [{"straight": 20}, {"bend": {"radius": 8, "angle": 90}}]
    a = ShapeSpec("light_pipe", {"width": 5, "segments": segs}, (1.0, 2.0), 30.0)
    b = ShapeSpec("light_pipe", {"segments": [dict(s) for s in segs], "width": 5}, (1.0, 2.0), 30.0)
    assert a == b and hash(a) == hash(b)
    c = ShapeSpec("light_pipe", {"width": 5, "segments": segs[:1]}, (1.0, 2.0), 30.0)
    assert a != c
    hash(Part("p", "glass", disk(1.0), shape=a))
