"""The geometry behind the drawing aids, without Qt: arcs through three points or of a radius,
snapping to edges, measured angles and typed coordinates."""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
import shapely

from raytrace.geometry import Edge, Loop, Part

from gui import arcs, edits, measure
from gui.snap import EDGE, VERTEX, SnapIndex, nearest_on_arc
from gui.typed import TypedError, parse_point


def _square(side=10.0):
    return Part("block", "PMMA", Loop.polygon([(0, 0), (side, 0), (side, side), (0, side)]))


@pytest.mark.parametrize("centre, r, angles", [((3.0, -2.0), 5.0, (10, 100, 200)),
                                                ((1e4, 1e4), 0.25, (350, 20, 80)),
                                                ((0.0, 0.0), 400.0, (-91, -90, -89))])
def test_circle_through_three_points_of_a_known_circle(centre, r, angles):
    # the outside truth is the circle the points were taken from
    pts = [(centre[0] + r * math.cos(math.radians(a)), centre[1] + r * math.sin(math.radians(a))) for a in angles]
    c, ccw = arcs.circle_through(pts[0], pts[2], pts[1])
    assert c == pytest.approx(centre, abs=1e-9 * max(r, 1.0) * 100)
    assert ccw, "angles increasing is counter-clockwise"
    c2, ccw2 = arcs.circle_through(pts[2], pts[0], pts[1])
    assert c2 == pytest.approx(centre, abs=1e-9 * max(r, 1.0) * 100) and not ccw2


def test_three_points_on_a_line_make_no_circle():
    assert arcs.circle_through((0, 0), (10, 0), (5, 0)) is None
    assert arcs.circle_through((0, 0), (10, 0), (5, 1e-12)) is None


def test_radius_bends_out_of_or_into_the_material_and_the_area_follows():
    part = _square()
    R = 6.0
    convex = arcs.bend_by_radius(part, 0, 1, R)          # the right side, x = 10
    concave = arcs.bend_by_radius(part, 0, 1, -R)
    # published (geometry handbook): circular segment area = R^2/2 (theta - sin theta), theta the
    # central angle, here 2 asin(c / 2R) for the 10 mm chord
    theta = 2 * math.asin(10.0 / (2 * R))
    segment = R * R / 2 * (theta - math.sin(theta))
    assert convex.area() == pytest.approx(100 + segment, rel=1e-12)
    assert concave.area() == pytest.approx(100 - segment, rel=1e-12)
    assert arcs.signed_radius(convex, 0, 1) == pytest.approx(R, rel=1e-12)
    assert arcs.signed_radius(concave, 0, 1) == pytest.approx(-R, rel=1e-12)
    # shapely (reference library) agrees on the flattened outline
    assert convex.to_shapely(1e-7).area == pytest.approx(100 + segment, rel=1e-6)
    assert not arcs.bend_by_radius(convex, 0, 1, 0).outer.edges[1].is_arc
    with pytest.raises(arcs.ArcError, match="at least half"):
        arcs.bend_by_radius(part, 0, 1, 4.9)


def test_a_hole_bends_the_same_way_seen_from_the_material():
    part = edits.add_hole(_square(), edits.polygon_hole([(4, 4), (6, 4), (6, 6), (4, 6)], "hole 1"))
    bent = arcs.bend_by_radius(part, 1, 0, 1.5)          # convex: out of the material, into the hole
    mid = bent.holes[0].edges[0].point_at(0.5)
    assert shapely.Polygon(part.holes[0].coords(1e-6)).contains(shapely.Point(mid))
    assert bent.area() > part.area(), "the glass bulges into the hole: more glass"


def test_nearest_point_on_an_arc_matches_shapely_projection():
    e = Edge((5.0, 0.0), (0.0, 5.0), arc_center=(0.0, 0.0), ccw=True)
    line = shapely.LineString(e.flattened(1e-9) + [e.end])
    rng = np.random.default_rng(7)
    for p in rng.uniform(-8, 8, size=(40, 2)):
        q = nearest_on_arc(e, tuple(p))
        # reference library: shapely's distance to the densely flattened arc (sagitta 1e-9 mm)
        assert math.dist(q, p) == pytest.approx(line.distance(shapely.Point(p)), abs=1e-8)
        assert math.dist(q, (0.0, 0.0)) == pytest.approx(5.0, abs=1e-12) and min(q) >= -1e-12


def test_snap_prefers_vertices_then_edges_and_skips_a_dragged_vertex():
    from raytrace.scene import Scene
    scene = Scene(parts=[_square()])
    index = SnapIndex(scene)
    hit = index.find((10.3, 9.8), 0.5)
    assert (hit.kind, hit.point) == (VERTEX, (10.0, 10.0))
    hit = index.find((10.2, 3.0), 0.5)
    assert (hit.kind, hit.point) == (EDGE, (10.0, 3.0))
    assert index.find((5.0, 5.0), 0.5) is None
    # dragging vertex 2 (10, 10): neither it nor its two edges attract it
    assert index.find((10.2, 9.9), 0.5, ignore=(0, 0, 2)) is None


def test_measured_angle_is_the_angle_between_the_arms():
    # from memory: the angle between two vectors is acos(u.v / |u||v|)
    rng = np.random.default_rng(3)
    for a, b, c in rng.uniform(-10, 10, size=(30, 3, 2)):
        u, v = a - b, c - b
        ref = math.degrees(math.acos(np.dot(u, v) / np.linalg.norm(u) / np.linalg.norm(v)))
        assert measure.angle_at(tuple(b), tuple(a), tuple(c)) == pytest.approx(ref, abs=1e-9)
    assert measure.angle_at((0, 0), (1, 0), (-1, 1e-12)) == pytest.approx(180.0, abs=1e-9)


@pytest.mark.parametrize("text, expected", [
    ("3, 4", (3.0, 4.0)), ("3 4", (3.0, 4.0)), ("-1.5;2e1", (-1.5, 20.0)),
    ("@2, -1", (12.0, 9.0)), ("5<90", (10.0, 15.0)), ("@5 < 180", (5.0, 10.0)),
    ("2", (12.0, 10.0)),                                 # towards the cursor at (20, 10)
])
def test_typed_points(text, expected):
    assert parse_point(text, (10.0, 10.0), (20.0, 10.0)) == pytest.approx(expected, abs=1e-12)


@pytest.mark.parametrize("text, last, words", [
    ("", (0, 0), "nothing typed"), ("1, 2, 3", (0, 0), "could not read"), ("x, 2", (0, 0), "could not read"),
    ("@1, 2", None, "there is none yet"), ("4<30", None, "there is none yet"), ("5", None, "none yet"),
    ("nan, 1", (0, 0), "finite"), ("4<", (0, 0), "length<angle")])
def test_typed_text_that_is_no_point_says_what_was_expected(text, last, words):
    with pytest.raises(TypedError, match=words):
        parse_point(text, last, (1.0, 1.0))


def test_an_index_built_from_the_previous_one_sees_the_edit():
    from raytrace.scene import Scene
    a, b = _square(), edits.move_part(replace(_square(), name="other"), 20.0, 0.0)
    before = SnapIndex(Scene(parts=[a, b]))
    after_scene = Scene(parts=[a, edits.move_part(b, 0.0, 5.0)])
    after = SnapIndex(after_scene, before)
    assert after.by_part[id(a)] is before.by_part[id(a)], "the unchanged part is reused"
    fresh = SnapIndex(after_scene)
    for p in [(10.2, 10.1), (20.1, 5.2), (20.1, 0.1), (25.0, 15.2), (5.0, 0.3)]:
        assert after.find(p, 0.5) == fresh.find(p, 0.5)
    assert after.find((20.1, 5.2), 0.5).point == (20.0, 5.0)       # the moved corner
    assert after.find((20.1, -0.2), 0.5) is None                    # not where it was


def test_holes_of_a_builder_part_turn_and_move_with_it():
    from raytrace.geometry import ShapeSpec
    spec = ShapeSpec("rectangle", {"width": 10.0, "height": 6.0}, (5.0, 1.0), 0.0)
    part = edits.add_hole(edits.shape_part(spec, "PMMA", "block"), edits.round_hole((7.0, 1.0), 1.0, "hole 1"))
    turned = edits.rotate_part(part, 90.0)                  # about the builder's origin (5, 1)
    assert turned.holes[0].edges[0].arc_center == pytest.approx((5.0, 3.0), abs=1e-12)
    moved = edits.move_part(turned, 1.0, -2.0)
    assert moved.holes[0].edges[0].arc_center == pytest.approx((6.0, 1.0), abs=1e-12)
    # a parameter change leaves the hole where it is
    wider = edits.rebuild(moved, replace(moved.shape, params={"width": 12.0, "height": 6.0}))
    assert wider.holes == moved.holes
