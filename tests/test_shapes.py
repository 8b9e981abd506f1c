"""Shape builders: closed ccw loops with named faces, true arcs, and the right dimensions."""
from __future__ import annotations

import inspect
import math

import numpy as np
import pytest

from raytrace.errors import render
from raytrace.geometry import Loop, Part, ShapeSpec
from raytrace.shapes import (BUILDERS, PARAMETERS, ShapeParameterError, build, check_params,
                             lens, light_pipe, light_pipe_centerline_length, light_pipe_ends,
                             microprism_strip, prism, rectangle, regular_polygon, roof_prism,
                             window)

DEFAULTS = {kind: {p.name: p.default for p in infos} for kind, infos in PARAMETERS.items()}

FACES = {
    "rectangle": {"bottom", "right", "top", "left"},
    "prism": {"base", "right face", "left face"},
    "roof_prism": {"hypotenuse", "left leg", "right leg"},
    "regular_polygon": {f"side {k}" for k in range(1, 7)},
    "light_pipe": {"input", "output", "outer wall", "inner wall", "left wall", "right wall"},
    "microprism_strip": {"flat side", "prism facet", "end"},
    "window": {"front", "back", "top edge", "bottom edge"},
    "lens": {"front surface", "back surface", "rim"},
}

VARIANTS = [
    ("rectangle", {"width": 3.0, "height": 0.2}),
    ("prism", {"apex_angle_deg": 150.0, "side": 4.0}),
    ("regular_polygon", {"sides": 3, "circumradius": 2.0}),
    ("light_pipe", {"width": 3.0, "segments": [{"bend": {"radius": 0.5, "angle": -180}},
                                               {"straight": 10}, {"straight": 5},
                                               {"bend": {"radius": 2, "angle": 45}}]}),
    ("light_pipe", {"width": 2.0, "segments": [{"bend": {"radius": 1, "angle": 300}}]}),
    ("microprism_strip", {"pitch": 0.05, "prism_angle_deg": 120, "count": 1, "slab_thickness": 0.5}),
    ("lens", {"r1": 0, "r2": -30, "center_thickness": 4, "aperture": 20}),
    ("lens", {"r1": -40, "r2": 30, "center_thickness": 10, "aperture": 30}),
    ("lens", {"r1": 10, "r2": 10, "center_thickness": 2, "aperture": 20}),   # hemispheric meniscus
]
CASES = [(k, DEFAULTS[k]) for k in BUILDERS] + VARIANTS


def angle_at(a, b, c) -> float:
    """Angle at vertex b of the path a-b-c, in degrees."""
    u = np.subtract(a, b)
    v = np.subtract(c, b)
    return math.degrees(math.atan2(abs(u[0] * v[1] - u[1] * v[0]), float(np.dot(u, v))))


def faces(loop: Loop) -> list[str]:
    return [e.face for e in loop.edges]


# ---------------------------------------------------------------- every shape

@pytest.mark.parametrize("kind,params", CASES)
def test_loops_are_closed_ccw_valid_and_named(kind, params):
    loop = BUILDERS[kind](**params)
    assert loop.closure_gap() < 1e-12
    assert loop.signed_area() > 0
    tol = 1e-4 * loop.size_hint()
    poly = Part("p", "glass", loop).to_shapely(tol)
    assert poly.is_valid
    # reference library: shapely.Polygon.area of the flattening vs the exact area.  Each chord
    # of length c and sagitta s <= tol cuts off a segment of area <= c * s (it fits in the c x s
    # rectangle), so the two differ by at most tol * perimeter
    perimeter = sum(e.length() for e in loop.edges)
    assert abs(poly.area - loop.signed_area()) <= tol * perimeter
    names = set(faces(loop))
    assert None not in names
    if kind == "regular_polygon":
        assert names == {f"side {k}" for k in range(1, params["sides"] + 1)}
    else:
        assert names <= FACES[kind]


def test_parameters_match_builder_signatures():
    assert set(PARAMETERS) == set(BUILDERS)
    for kind, infos in PARAMETERS.items():
        sig = inspect.signature(BUILDERS[kind])
        assert [p.name for p in infos] == list(sig.parameters)
        for info in infos:
            assert info.type in ("number", "integer", "segments")
            assert info.unit in ("mm", "deg", "")
            assert info.description
        assert check_params(kind, DEFAULTS[kind]) == []


# ---------------------------------------------------------------- simple polygons

def test_rectangle_corners_and_faces():
    loop = rectangle(4.0, 2.0)
    assert loop.vertices == [(-2.0, -1.0), (2.0, -1.0), (2.0, 1.0), (-2.0, 1.0)]
    assert faces(loop) == ["bottom", "right", "top", "left"]
    assert loop.signed_area() == 8.0


def test_window_faces_sit_at_x0_and_thickness():
    loop = window(3.0, 25.0)
    by_face = {e.face: e for e in loop.edges}
    assert by_face["front"].start[0] == by_face["front"].end[0] == 0.0
    assert by_face["back"].start[0] == by_face["back"].end[0] == 3.0
    assert {by_face["top edge"].start[1], by_face["bottom edge"].start[1]} == {12.5, -12.5}
    assert loop.signed_area() == pytest.approx(75.0, rel=1e-15)


@pytest.mark.parametrize("apex", [1.0, 30.0, 60.0, 90.0, 123.4, 179.0])
def test_prism_apex_angle_measured_from_vertices(apex):
    """common practice: the apex angle is the angle between the two equal faces at the apex."""
    loop = prism(apex, 7.0)
    (bl, br, top) = loop.vertices
    assert faces(loop) == ["base", "right face", "left face"]
    assert angle_at(br, top, bl) == pytest.approx(apex, abs=1e-12)
    assert bl[1] == br[1] == 0.0 and bl[0] == -br[0] and top[0] == 0.0
    assert math.dist(bl, top) == pytest.approx(7.0, rel=1e-14)
    assert math.dist(br, top) == pytest.approx(7.0, rel=1e-14)


def test_roof_prism_legs_meet_at_right_angle():
    """common practice: a roof prism's legs are at 90 deg; hypotenuse = leg * sqrt 2."""
    loop = roof_prism(10.0)
    (hl, hr, apex) = loop.vertices
    assert faces(loop) == ["hypotenuse", "right leg", "left leg"]
    assert angle_at(hr, apex, hl) == pytest.approx(90.0, abs=1e-12)
    assert hl[1] == hr[1] == 0.0 and apex[1] > 0 and hl[0] == -hr[0]
    assert math.dist(hl, hr) == pytest.approx(10.0 * math.sqrt(2), rel=1e-15)
    assert math.dist(hr, apex) == pytest.approx(10.0, rel=1e-15)


@pytest.mark.parametrize("n", [3, 4, 5, 6, 7, 12, 100])
def test_regular_polygon_area_and_sides(n):
    """published: regular polygon with circumradius R has area (n/2) R^2 sin(2 pi / n) and side
    2 R sin(pi / n) (CRC Standard Mathematical Tables, regular polygons)."""
    R = 3.5
    loop = regular_polygon(n, R)
    assert loop.signed_area() == pytest.approx(n / 2 * R * R * math.sin(2 * math.pi / n), rel=1e-13)
    assert faces(loop) == [f"side {k}" for k in range(1, n + 1)]
    for e in loop.edges:
        assert e.length() == pytest.approx(2 * R * math.sin(math.pi / n), rel=1e-13)
        assert math.hypot(*e.start) == pytest.approx(R, rel=1e-15)
    side1 = loop.edges[0]
    assert side1.start[1] == pytest.approx(side1.end[1], abs=1e-14) and side1.start[1] < 0


# ---------------------------------------------------------------- microprism strip

@pytest.mark.parametrize("angle,count", [(90.0, 5), (60.0, 1), (100.0, 13)])
def test_microprism_strip_facets_pitch_and_angles(angle, count):
    """common practice: an isosceles prism of base p and apex angle a is (p/2)/tan(a/2) high and
    its facets lean 90 - a/2 deg from the base."""
    pitch, t = 0.5, 1.2
    loop = microprism_strip(pitch, angle, count, t)
    facets = [e for e in loop.edges if e.face == "prism facet"]
    assert len(facets) == 2 * count
    assert faces(loop).count("end") == 2 and faces(loop).count("flat side") == 1
    flat = next(e for e in loop.edges if e.face == "flat side")
    assert flat.start[1] == flat.end[1] == 0.0
    assert flat.length() == pytest.approx(count * pitch, rel=1e-14)
    apexes = [f.end for f in facets[0::2]]
    assert np.allclose(np.diff([a[0] for a in apexes]), -pitch, rtol=0, atol=1e-14)
    height = (pitch / 2) / math.tan(math.radians(angle) / 2)
    for k in range(count):
        a, b = facets[2 * k], facets[2 * k + 1]
        assert angle_at(a.start, a.end, b.end) == pytest.approx(angle, abs=1e-11)
        assert a.start[1] == b.end[1] == t
        lean = math.degrees(math.atan2(a.end[1] - a.start[1], abs(a.end[0] - a.start[0])))
        assert lean == pytest.approx(90 - angle / 2, abs=1e-11)
    area = count * pitch * t + count * pitch * height / 2
    assert loop.signed_area() == pytest.approx(area, rel=1e-13)


# ---------------------------------------------------------------- lens

def surface_edges(loop: Loop):
    return (next(e for e in loop.edges if e.face == "front surface"),
            next(e for e in loop.edges if e.face == "back surface"))


def sag(R: float, h: float) -> float:
    """published: sag of a spherical surface s = R - sqrt(R^2 - h^2) (e.g. W. J. Smith, Modern
    Optical Engineering, sec. on surface sag), signed with R."""
    return math.copysign(abs(R) - math.sqrt(R * R - h * h), R)


LENSES = [(50.0, -50.0, 5.0, 20.0), (30.0, 80.0, 4.0, 25.0), (-20.0, 20.0, 2.0, 16.0),
          (100.0, 0.0, 3.0, 40.0), (0.0, math.inf, 3.0, 10.0), (15.0, -1e4, 16.0, 30.0)]   # last: hemispheric front


@pytest.mark.parametrize("r1,r2,t,D", LENSES)
def test_lens_sagitta_and_centre_thickness(r1, r2, t, D):
    loop = lens(r1, r2, t, D)
    front, back = surface_edges(loop)
    h = D / 2
    vertex_f, vertex_b = front.point_at(0.5), back.point_at(0.5)
    assert vertex_f == pytest.approx((0.0, 0.0), abs=1e-12)
    assert vertex_b[0] - vertex_f[0] == pytest.approx(t, abs=1e-12)
    for edge, R, vx in ((front, r1, vertex_f[0]), (back, r2, vertex_b[0])):
        flat = R == 0 or math.isinf(R)
        assert edge.is_arc == (not flat)
        expected = 0.0 if flat else sag(R, h)
        for end in (edge.start, edge.end):
            assert abs(end[1]) == h
            assert end[0] - vx == pytest.approx(expected, abs=1e-12 * max(1.0, abs(expected)))
        if not flat:
            assert edge.radius == pytest.approx(abs(R), rel=1e-14)
    assert {e.face for e in loop.edges if not e.is_arc} >= {"rim"}


@pytest.mark.parametrize("r1,r2,t,D", LENSES)
def test_lens_area_matches_integrated_thickness(r1, r2, t, D):
    """common practice: area = integral over the aperture of the thickness t + s2(y) - s1(y),
    here by 400-point Gauss-Legendre (reference library: numpy.polynomial.legendre.leggauss) in
    y = h sin(phi), which keeps the integrand smooth even for a hemispheric surface (|R| = h), so
    the quadrature error is far below 1e-12."""
    u, w = np.polynomial.legendre.leggauss(400)
    h = D / 2
    phi, w = u * math.pi / 2, w * math.pi / 2
    y, dy = h * np.sin(phi), h * np.cos(phi)

    def s(R):
        if R == 0 or math.isinf(R):
            return np.zeros_like(y)
        return R - np.sign(R) * np.sqrt(R * R - y * y)
    area = float(np.sum(w * dy * (t + s(r2) - s(r1))))
    assert lens(r1, r2, t, D).signed_area() == pytest.approx(area, rel=1e-12)


def test_lens_rejects_negative_edge_and_oversized_aperture():
    with pytest.raises(ValueError, match=r"^center_thickness: expected .*edge thickness"):
        lens(20.0, -20.0, 2.0, 20.0)   # each sag 2.68 mm: edge 2 - 5.36 < 0
    with pytest.raises(ValueError, match=r"^r2: expected a radius of at least aperture/2"):
        lens(50.0, -8.0, 5.0, 20.0)
    with pytest.raises(ValueError, match=r"^center_thickness: "):
        lens(-10.0, 10.0, 0.0, 5.0)    # a concave lens still needs a centre


# ---------------------------------------------------------------- light pipe

def annulus_sector(theta_rad: float, r_in: float, r_out: float) -> float:
    """published: area of an annular sector (theta/2)(R_o^2 - R_i^2) (CRC Standard Mathematical
    Tables, circular sector)."""
    return theta_rad / 2 * (r_out ** 2 - r_in ** 2)


@pytest.mark.parametrize("angle", [90.0, -90.0])
def test_single_bend_area_exact_and_flattened(angle):
    """The exact area equals the annular sector to 1e-12.  The flattened polygon's area differs
    by the circular segments cut off (outer wall) or added (inner wall): per chord of length c
    and sagitta s the segment area A obeys (2/3) c s <= A <= (pi/4) c s (segments up to a half
    circle).  The lower bound is the parabolic segment with the same chord and height
    (published: Archimedes, Quadrature of the Parabola), which the circle encloses; the upper is
    the half ellipse with the same chord and height, which encloses it.  A bound of (2/3) c s
    alone would be wrong: a circular segment is slightly larger than the parabolic one."""
    w, r_in = 5.0, 8.0
    loop = light_pipe(w, [{"bend": {"radius": r_in, "angle": angle}}])
    exact = annulus_sector(math.pi / 2, r_in, r_in + w)
    assert loop.signed_area() == pytest.approx(exact, rel=1e-12)
    outer = next(e for e in loop.edges if e.face == "outer wall")
    inner = next(e for e in loop.edges if e.face == "inner wall")
    assert outer.radius == pytest.approx(r_in + w, rel=1e-14)
    assert inner.radius == pytest.approx(r_in, rel=1e-14)
    assert outer.length() == pytest.approx((r_in + w) * math.pi / 2, rel=1e-14)

    tol = 1e-3
    flat_area = Part("p", "pmma", loop).to_shapely(tol).area

    def chords_cs(edge):
        pts = np.array(edge.flattened(tol) + [edge.end])
        c = np.hypot(*np.diff(pts, axis=0).T)
        s = edge.radius - np.sqrt(edge.radius ** 2 - c * c / 4)
        assert s.max() <= tol * (1 + 1e-9)
        return float(np.sum(c * s))
    cs_out, cs_in = chords_cs(outer), chords_cs(inner)
    change = flat_area - exact              # + inner segments gained, - outer segments lost
    assert 2 / 3 * cs_in - math.pi / 4 * cs_out <= change <= math.pi / 4 * cs_in - 2 / 3 * cs_out


def test_bend_direction_and_walls():
    """Left turn (+angle) has its inner wall on the left; a right turn on the right."""
    w, r = 2.0, 3.0
    left = light_pipe(w, [{"bend": {"radius": r, "angle": 90}}])
    inner = next(e for e in left.edges if e.face == "inner wall")
    assert inner.arc_center == pytest.approx((0.0, r + w / 2), abs=1e-15)
    right = light_pipe(w, [{"bend": {"radius": r, "angle": -90}}])
    inner = next(e for e in right.edges if e.face == "inner wall")
    assert inner.arc_center == pytest.approx((0.0, -(r + w / 2)), abs=1e-15)
    assert faces(left)[-1] == "input"
    straight = light_pipe(w, [{"straight": 10}])
    by_face = {e.face: e for e in straight.edges}
    assert by_face["left wall"].start[1] == w / 2 and by_face["right wall"].start[1] == -w / 2


def test_l_shaped_pipe_area_ends_and_length():
    """common practice (elementary geometry): an L of runs L1, L2 joined by a 90 deg left bend of
    centreline radius Rc = R + w/2 ends at (L1 + Rc, Rc + L2) heading +y, with area
    w (L1 + L2) + annular sector, and centreline length L1 + L2 + Rc pi/2."""
    w, r, l1, l2 = 4.0, 6.0, 20.0, 15.0
    segs = [{"straight": l1}, {"bend": {"radius": r, "angle": 90}}, {"straight": l2}]
    loop = light_pipe(w, segs)
    rc = r + w / 2
    area = w * (l1 + l2) + annulus_sector(math.pi / 2, r, r + w)
    assert loop.signed_area() == pytest.approx(area, rel=1e-13)
    ends = light_pipe_ends(w, segs)
    assert ends["input"] == ((0.0, 0.0), (1.0, 0.0))
    (px, py), (dx, dy) = ends["output"]
    assert (px, py) == pytest.approx((l1 + rc, rc + l2), abs=1e-13)
    assert (dx, dy) == pytest.approx((0.0, 1.0), abs=1e-15)
    out = next(e for e in loop.edges if e.face == "output")
    assert out.point_at(0.5) == pytest.approx((px, py), abs=1e-13)
    assert out.length() == pytest.approx(w, rel=1e-14)
    assert light_pipe_centerline_length(w, segs) == pytest.approx(l1 + l2 + rc * math.pi / 2, rel=1e-15)
    assert faces(loop).count("right wall") == 2 and faces(loop).count("outer wall") == 1


def test_light_pipe_ends_follow_placement():
    """The placed ends sit on the placed loop's end faces, facing the same way."""
    w = 3.0
    segs = [{"straight": 7}, {"bend": {"radius": 2, "angle": -60}}, {"straight": 4}]
    spec = ShapeSpec("light_pipe", {"width": w, "segments": segs}, (12.0, -4.0), 33.0)
    loop = build(spec)
    ends = light_pipe_ends(w, segs, spec.position, spec.rotation_deg)
    for key in ("input", "output"):
        face = next(e for e in loop.edges if e.face == key)
        point, (dx, dy) = ends[key]
        assert face.point_at(0.5) == pytest.approx(point, abs=1e-12)
        fx, fy = np.subtract(face.end, face.start) / w
        assert fx * dx + fy * dy == pytest.approx(0.0, abs=1e-14)   # face perpendicular
        assert math.hypot(dx, dy) == pytest.approx(1.0, rel=1e-15)
    assert ends["output"][1] == pytest.approx((math.cos(math.radians(-27)),
                                               math.sin(math.radians(-27))), abs=1e-15)


def test_consecutive_straights_are_joined():
    a = light_pipe(2.0, [{"straight": 3}, {"straight": 4}])
    b = light_pipe(2.0, [{"straight": 7}])
    assert a == b and len(a.edges) == 4


def test_self_overlapping_pipe_is_rejected():
    with pytest.raises(ValueError, match=r"^segments: expected a path"):
        light_pipe(5.0, [{"bend": {"radius": 1, "angle": 180}}, {"bend": {"radius": 1, "angle": 180}}])
    with pytest.raises(ValueError, match=r"^segments: "):
        # a square hook whose last run comes back down across the first run
        light_pipe(4.0, [{"straight": 10}, {"bend": {"radius": 0.5, "angle": 90}},
                         {"straight": 10}, {"bend": {"radius": 0.5, "angle": 90}},
                         {"straight": 5}, {"bend": {"radius": 0.5, "angle": 90}}, {"straight": 20}])
    # the same hook stopped short of the first run is fine
    light_pipe(4.0, [{"straight": 10}, {"bend": {"radius": 0.5, "angle": 90}},
                     {"straight": 10}, {"bend": {"radius": 0.5, "angle": 90}},
                     {"straight": 5}, {"bend": {"radius": 0.5, "angle": 90}}, {"straight": 10}])


# ---------------------------------------------------------------- build and placement

def test_build_rotates_about_origin_then_translates():
    spec = ShapeSpec("rectangle", {"width": 4.0, "height": 2.0}, (10.0, 5.0), 90.0)
    loop = build(spec)
    expected = [(11.0, 3.0), (11.0, 7.0), (9.0, 7.0), (9.0, 3.0)]
    for got, want in zip(loop.vertices, expected):
        assert got == pytest.approx(want, abs=1e-14)
    assert loop.signed_area() == pytest.approx(8.0, rel=1e-14)
    assert faces(loop) == ["bottom", "right", "top", "left"]


def test_build_keeps_arcs_true_after_placement():
    spec = ShapeSpec("lens", DEFAULTS["lens"], (3.0, 4.0), 25.0)
    loop = build(spec)
    front, _ = surface_edges(loop)
    assert front.is_arc and front.radius == pytest.approx(50.0, rel=1e-14)
    assert loop.signed_area() == pytest.approx(lens(**DEFAULTS["lens"]).signed_area(), rel=1e-13)


# ---------------------------------------------------------------- bad parameters

BAD = [
    ("rectangle", {"width": -2, "height": 1}, "width", "a number greater than 0", "-2"),
    ("rectangle", {"width": 2, "height": "tall"}, "height", "a number greater than 0", "'tall'"),
    ("rectangle", {"width": True, "height": 1}, "width", "a number greater than 0", "true"),
    ("window", {"thickness": float("nan"), "height": 1}, "thickness", "a number", "NaN"),
    ("prism", {"apex_angle_deg": 180, "side": 1}, "apex_angle_deg",
     "a number greater than 0 and less than 180", "180"),
    ("roof_prism", {"leg": 0}, "leg", "a number greater than 0", "0"),
    ("regular_polygon", {"sides": 2, "circumradius": 1}, "sides", "a whole number at least 3", "2"),
    ("regular_polygon", {"sides": 4.5, "circumradius": 1}, "sides", "a whole number", "4.5"),
    ("microprism_strip", {"pitch": 1, "prism_angle_deg": 90, "count": 0, "slab_thickness": 1},
     "count", "a whole number at least 1", "0"),
    ("microprism_strip", {"pitch": 1, "prism_angle_deg": 90, "count": 3, "slab_thickness": -1},
     "slab_thickness", "a number greater than 0", "-1"),
    ("light_pipe", {"width": 5, "segments": []}, "segments", "a non-empty list", "[]"),
    ("light_pipe", {"width": 5, "segments": [{"straight": 20}, {"bend": {"radius": -2, "angle": 90}}]},
     "segments[1].bend.radius", "a number greater than 0", "-2"),
    ("light_pipe", {"width": 5, "segments": [{"bend": {"radius": 2}}]},
     "segments[0].bend.angle", "a number greater than -360", "<missing>"),
    ("light_pipe", {"width": 5, "segments": [{"bend": {"radius": 2, "angle": 0}}]},
     "segments[0].bend.angle", "a turn other than 0", "0"),
    ("light_pipe", {"width": 5, "segments": [{"twist": 3}]}, "segments[0]", 'an object with one key',
     '{"twist": 3}'),
    ("light_pipe", {"width": 5, "segments": [{"bend": {"radius": 2, "angle": 9, "ang": 1}}]},
     "segments[0].bend.ang", 'only the keys "radius" and "angle"', "1"),
    ("lens", {"r1": 5, "r2": -50, "center_thickness": 5, "aperture": 20}, "r1",
     "a radius of at least aperture/2 = 10", "5"),
]


@pytest.mark.parametrize("kind,params,name,expected,found", BAD)
def test_bad_parameters_name_the_parameter(kind, params, name, expected, found):
    with pytest.raises(ValueError) as info:
        BUILDERS[kind](**params)
    err = info.value
    assert isinstance(err, ShapeParameterError)
    assert str(err).startswith(f"{name}: expected {expected}")
    assert str(err).endswith(f", found {found}")
    assert err.param == name and render(err.found) == found
    assert [e.param for e in check_params(kind, params)] == [name]


def test_check_params_reports_every_field():
    probs = check_params("rectangle", {"width": -1, "colour": "red"})
    assert sorted(p.param for p in probs) == ["colour", "height", "width"]
    assert "one of the parameters of rectangle: width, height" in str(
        next(p for p in probs if p.param == "colour"))
    assert next(p for p in probs if p.param == "height").found == "<missing>"
    assert next(p for p in probs if p.param == "width").found == -1
    assert [p.param for p in check_params("cylinder", {})] == ["kind"]


def test_build_reports_bad_kind_params_and_placement():
    with pytest.raises(ValueError, match=r"^kind: expected one of rectangle, prism"):
        build(ShapeSpec("cylinder", {}))
    with pytest.raises(ValueError, match=r"^width: expected a number greater than 0, found -2$"):
        build(ShapeSpec("rectangle", {"width": -2, "height": 1}))
    with pytest.raises(ValueError, match=r"^rotation_deg: expected a number"):
        build(ShapeSpec("rectangle", {"width": 2, "height": 1}, (0.0, 0.0), "up"))  # type: ignore[arg-type]
    with pytest.raises(ValueError, match=r"^position: expected a point"):
        build(ShapeSpec("rectangle", {"width": 2, "height": 1}, (0.0,), 0.0))  # type: ignore[arg-type]


def test_derived_values_are_the_placed_builder_points():
    """The values linked numbers read (shapes.derived_values / face_values) are points of the
    built loop, placed: from memory, an isosceles prism with faces L about apex angle a has its
    apex L cos(a/2) above the base centre, and turning by t about the origin maps (0, h) to
    (-h sin t, h cos t)."""
    from raytrace.shapes import derived_values, face_values
    spec = ShapeSpec("prism", {"apex_angle_deg": 60.0, "side": 10.0}, (3.0, -2.0), 30.0)
    v = derived_values(spec)
    h = 10.0 * math.cos(math.radians(30.0))
    assert (v["apex_x"], v["apex_y"]) == pytest.approx((3.0 - h * 0.5, -2.0 + h * math.cos(math.radians(30))), abs=1e-12)
    apex = next(e.end for e in build(spec).edges if e.face == "right face")
    assert (v["apex_x"], v["apex_y"]) == pytest.approx(apex, abs=1e-12)
    faces = face_values(spec)
    assert (faces["base.mid_x"], faces["base.mid_y"]) == pytest.approx((3.0, -2.0), abs=1e-12)
    pipe = ShapeSpec("light_pipe", {"width": 2.0, "segments": [{"straight": 5.0}, {"bend": {"radius": 3.0, "angle": -90.0}}]},
                     (1.0, 1.0), 90.0)
    v = derived_values(pipe)
    # heading +y after the 90 deg turn of the frame: the right turn leaves heading +x, with the
    # output centre 5 + 4 up and 4 to the right of the input
    assert (v["output_x"], v["output_y"], v["output_deg"]) == pytest.approx((5.0, 10.0, 0.0), abs=1e-12)
    assert v["length"] == pytest.approx(5.0 + 4.0 * math.pi / 2, abs=1e-12)
    assert (face_values(pipe)["output.mid_x"], face_values(pipe)["output.mid_y"]) == pytest.approx((5.0, 10.0), abs=1e-12)
