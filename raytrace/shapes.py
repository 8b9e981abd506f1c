"""Shape builders: a few parameters in, one closed counter-clockwise `Loop` out.

Every builder works in its own local frame (lengths in mm, angles in degrees), names every
edge with a face name, and keeps curves as true circular arcs.  `build(spec)` runs the builder
named by a `ShapeSpec` and then places the loop: rotate by `spec.rotation_deg` about the local
origin, then translate by `spec.position`.

Bad parameters raise `ShapeParameterError` (a `ValueError`) whose message reads
"<parameter>: expected <what>, found <value>", and whose `param`, `found` and `expected`
attributes let a scene loader report the JSON path of the field.
"""
from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Any, Callable

from .errors import RaytraceError, render
from .geometry import Edge, Loop, Point, ShapeSpec, rotate_translate

__all__ = [
    "ParamInfo", "ShapeParameterError", "PARAMETERS", "BUILDERS", "build", "check_params",
    "rectangle", "prism", "roof_prism", "regular_polygon", "light_pipe", "light_pipe_ends",
    "light_pipe_centerline_length", "microprism_strip", "window", "lens", "place_point",
    "place_direction", "derived_values", "FACE_POINTS",
]


class ShapeParameterError(ValueError, RaytraceError):
    """A builder parameter is missing, of the wrong type or out of range.

    `param` is the parameter's path inside the builder's params, e.g. "segments[2].bend.radius";
    `found` is the offending value as given (or a "<...>" description), ready for
    `Problems.add(path, err.found, err.expected)`.
    """

    def __init__(self, param: str, found: object, expected: str):
        self.param = param
        self.found = found
        self.expected = expected
        super().__init__(f"{param}: expected {expected}, found {render(found)}")


MISSING = "<missing>"


@dataclass(frozen=True)
class ParamInfo:
    """One builder parameter, for dialogs and scene validation.

    type: "number" (float), "integer" or "segments" (the light-pipe path list).
    min/max: limits; `min_inclusive`/`max_inclusive` say whether the limit itself is allowed.
    default: a sensible starting value for a dialog; `required` parameters must still be given
    in a scene file, the default is not filled in silently.
    """

    name: str
    type: str
    unit: str
    default: Any
    description: str
    min: float | None = None
    min_inclusive: bool = False
    max: float | None = None
    max_inclusive: bool = False
    required: bool = True
    allow_infinite: bool = False   # lens radii: +-inf is a flat surface, like 0


# ---------------------------------------------------------------- parameter checks

def _expected_range(min_: float | None, min_inc: bool, max_: float | None, max_inc: bool,
                    noun: str) -> str:
    parts = []
    if min_ is not None:
        parts.append(f"{'at least' if min_inc else 'greater than'} {_fmt(min_)}")
    if max_ is not None:
        parts.append(f"{'at most' if max_inc else 'less than'} {_fmt(max_)}")
    return f"{noun} " + " and ".join(parts) if parts else noun


def _fmt(x: float) -> str:
    return str(int(x)) if float(x).is_integer() else repr(float(x))


def _number(name: str, value: object, min_: float | None = None, min_inc: bool = False,
            max_: float | None = None, max_inc: bool = False, allow_inf: bool = False) -> float:
    expected = _expected_range(min_, min_inc, max_, max_inc, "a number")
    if value is MISSING:
        raise ShapeParameterError(name, MISSING, expected)
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ShapeParameterError(name, value, expected)
    x = float(value)
    if math.isnan(x) or (math.isinf(x) and not allow_inf):
        raise ShapeParameterError(name, value, expected)
    if min_ is not None and (x < min_ if min_inc else x <= min_):
        raise ShapeParameterError(name, value, expected)
    if max_ is not None and (x > max_ if max_inc else x >= max_):
        raise ShapeParameterError(name, value, expected)
    return x


def _integer(name: str, value: object, min_: int) -> int:
    expected = f"a whole number at least {min_}"
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or value is MISSING:
        raise ShapeParameterError(name, value, expected)
    x = float(value)
    if not x.is_integer() or x < min_:  # is_integer is False for NaN and inf
        raise ShapeParameterError(name, value, expected)
    return int(x)


def _check_param(info: ParamInfo, value: object) -> Any:
    if info.type == "number":
        return _number(info.name, value, info.min, info.min_inclusive, info.max, info.max_inclusive,
                       allow_inf=info.allow_infinite)
    if info.type == "integer":
        return _integer(info.name, value, int(info.min if info.min is not None else 0))
    if info.type == "segments":
        return _segments(info.name, value)
    raise AssertionError(info.type)


# ---------------------------------------------------------------- small helpers

def _cos_sin_deg(angle_deg: float) -> tuple[float, float]:
    """cos and sin of an angle in degrees, exact at multiples of 90 so axis-aligned parts stay
    exactly axis-aligned (math.cos(pi/2) is 6e-17, not 0)."""
    a = angle_deg % 360.0
    exact = {0.0: (1.0, 0.0), 90.0: (0.0, 1.0), 180.0: (-1.0, 0.0), 270.0: (0.0, -1.0)}
    if a in exact:
        return exact[a]
    r = math.radians(angle_deg)
    return math.cos(r), math.sin(r)


def place_point(point: Point, position: Point = (0.0, 0.0), rotation_deg: float = 0.0) -> Point:
    """Map a point from a builder's local frame to the scene exactly as `build` places the loop."""
    return rotate_translate(float(rotation_deg), float(position[0]), float(position[1]))(point)


def place_direction(direction: Point, rotation_deg: float = 0.0) -> Point:
    """Map a direction from a builder's local frame to the scene (rotation only)."""
    return rotate_translate(float(rotation_deg), 0.0, 0.0)(direction)


# ---------------------------------------------------------------- simple polygons

def rectangle(width: float, height: float) -> Loop:
    """Rectangle centred on the origin.  Faces: "bottom", "right", "top", "left"."""
    w = _number("width", width, 0) / 2
    h = _number("height", height, 0) / 2
    return Loop.polygon([(-w, -h), (w, -h), (w, h), (-w, h)], ["bottom", "right", "top", "left"])


def prism(apex_angle_deg: float, side: float) -> Loop:
    """Isosceles triangular prism, apex up, base on y = 0 centred on x = 0.

    `side` is the length of each of the two equal faces; the apex angle lies between them.
    Faces: "base", "right face", "left face".
    """
    a = _number("apex_angle_deg", apex_angle_deg, 0, False, 180, False)
    L = _number("side", side, 0)
    half_base = L * math.sin(math.radians(a) / 2)
    height = L * math.cos(math.radians(a) / 2)
    return Loop.polygon([(-half_base, 0.0), (half_base, 0.0), (0.0, height)],
                        ["base", "right face", "left face"])


def roof_prism(leg: float, roof_angle_deg: float = 90.0) -> Loop:
    """Roof prism: hypotenuse down on y = 0 (centred) as the entry face, the two legs meeting at
    the roof apex above its centre, at `roof_angle_deg` (90 for a right-angle roof; a made
    prism's error from 90 is what tolerancing varies).
    Faces: "hypotenuse", "right leg", "left leg"."""
    L = _number("leg", leg, 0)
    a = _number("roof_angle_deg", roof_angle_deg, 0, False, 180, False)
    if a == 90.0:
        half = height = L / math.sqrt(2.0)   # exactly as before the angle could vary
    else:
        half, height = L * math.sin(math.radians(a) / 2), L * math.cos(math.radians(a) / 2)
    return Loop.polygon([(-half, 0.0), (half, 0.0), (0.0, height)],
                        ["hypotenuse", "right leg", "left leg"])


def regular_polygon(sides: int, circumradius: float) -> Loop:
    """Regular polygon centred on the origin with "side 1" horizontal at the bottom, the other
    sides numbered counter-clockwise.  Faces: "side 1" .. "side N"."""
    n = _integer("sides", sides, 3)
    r = _number("circumradius", circumradius, 0)
    start = -90.0 - 180.0 / n
    pts = []
    for k in range(n):
        c, s = _cos_sin_deg(start + 360.0 * k / n)
        pts.append((r * c, r * s))
    return Loop.polygon(pts, [f"side {k + 1}" for k in range(n)])


def window(thickness: float, height: float) -> Loop:
    """Plane-parallel plate: "front" at x = 0, "back" at x = thickness, centred on y = 0, with
    "bottom edge" and "top edge"."""
    t = _number("thickness", thickness, 0)
    h = _number("height", height, 0) / 2
    return Loop.polygon([(0.0, -h), (t, -h), (t, h), (0.0, h)],
                        ["bottom edge", "back", "top edge", "front"])


def microprism_strip(pitch: float, prism_angle_deg: float, count: int,
                     slab_thickness: float) -> Loop:
    """A slab carrying a row of identical isosceles microprisms on its top.

    The flat bottom ("flat side") lies on y = 0 from x = -count*pitch/2 to +count*pitch/2; the
    slab is `slab_thickness` thick; each prism has base `pitch` on the slab's top and apex angle
    `prism_angle_deg`, so its height is (pitch/2) / tan(prism_angle/2).  Both prism facets are
    "prism facet" (2*count of them); the two vertical slab sides are "end".
    """
    p = _number("pitch", pitch, 0)
    a = _number("prism_angle_deg", prism_angle_deg, 0, False, 180, False)
    n = _integer("count", count, 1)
    t = _number("slab_thickness", slab_thickness, 0)
    half = n * p / 2
    peak = t + (p / 2) / math.tan(math.radians(a) / 2)
    pts: list[Point] = [(-half, 0.0), (half, 0.0)]
    faces = ["flat side", "end"]
    # walk the prism row from right to left so the loop stays counter-clockwise
    for k in range(n, 0, -1):
        right = -half + k * p
        pts += [(right, t), (right - p / 2, peak)]
        faces += ["prism facet", "prism facet"]
    pts.append((-half, t))
    faces.append("end")
    return Loop.polygon(pts, faces)


# ---------------------------------------------------------------- lens

def _radius(name: str, value: object) -> float:
    """A signed radius of curvature; 0 or +-inf means a flat surface (returned as inf)."""
    r = _number(name, value, allow_inf=True)
    return math.inf if r == 0 else r


def _sag(r: float, h: float) -> float:
    """Signed sag of a surface of radius r at height h: x(h) - x(0)."""
    if math.isinf(r):
        return 0.0
    return r - math.copysign(math.sqrt(max(r * r - h * h, 0.0)), r)


def lens(r1: float, r2: float, center_thickness: float, aperture: float) -> Loop:
    """Lens with circular surfaces, optical axis along x, front vertex at the origin and back
    vertex at (center_thickness, 0).

    Radii are signed as usual in optics: R > 0 puts the centre of curvature to the right
    (+x) of the surface's vertex, R < 0 to the left; 0 (or +-inf in Python) means flat.  So a
    biconvex lens has r1 > 0 and r2 < 0.  `aperture` is the full height: the surfaces end at
    |y| = aperture/2, where the flat "rim" faces close the lens.  Faces: "front surface",
    "back surface", "rim" (two edges, top and bottom).
    """
    R1 = _radius("r1", r1)
    R2 = _radius("r2", r2)
    t = _number("center_thickness", center_thickness, 0)
    D = _number("aperture", aperture, 0)
    h = D / 2
    for name, r, raw in (("r1", R1, r1), ("r2", R2, r2)):
        if abs(r) < h:
            raise ShapeParameterError(
                name, raw, f"a radius of at least aperture/2 = {h:g} mm in size (or 0 for flat), "
                         f"so the surface spans the aperture {D:g} mm")
    s1, s2 = _sag(R1, h), _sag(R2, h)
    edge = t + s2 - s1
    # thickness t + sag2(y) - sag1(y) is monotonic in |y| (sag slopes grow with curvature), so
    # checking the edge is enough to keep the surfaces apart across the whole aperture.
    if not edge > 0:
        raise ShapeParameterError(
            "center_thickness", center_thickness,
            f"a value giving a positive edge thickness; with r1 = {r1!r}, r2 = {r2!r} and aperture "
            f"{D:g} mm the edge would be {edge:.6g} mm thick: make center_thickness greater than "
            f"{s1 - s2:.6g} mm or reduce the aperture")
    top_front, bot_front = (s1, h), (s1, -h)
    top_back, bot_back = (t + s2, h), (t + s2, -h)
    front_c = None if math.isinf(R1) else (R1, 0.0)
    back_c = None if math.isinf(R2) else (t + R2, 0.0)
    edges = (
        # down the front surface: counter-clockwise about its centre when the centre is to the right
        Edge(top_front, bot_front, front_c, ccw=R1 > 0, face="front surface"),
        Edge(bot_front, bot_back, face="rim"),
        # up the back surface: counter-clockwise about its centre when the centre is to the left
        Edge(bot_back, top_back, back_c, ccw=R2 < 0, face="back surface"),
        Edge(top_back, top_front, face="rim"),
    )
    return Loop(edges)


# ---------------------------------------------------------------- light pipe

def _segments(name: str, value: object) -> list[tuple[str, float, float]]:
    """Check a light-pipe path; returns [("straight", length, 0) | ("bend", radius, angle)]."""
    expected_list = ('a non-empty list of segments such as [{"straight": 20}, '
                     '{"bend": {"radius": 8, "angle": 90}}]')
    if isinstance(value, (str, bytes, dict)) or not isinstance(value, (list, tuple)) or not value:
        raise ShapeParameterError(name, value, expected_list)
    out = []
    for i, seg in enumerate(value):
        where = f"{name}[{i}]"
        if not isinstance(seg, dict) or len(seg) != 1 or next(iter(seg)) not in ("straight", "bend"):
            raise ShapeParameterError(
                where, seg, 'an object with one key, "straight" (a length in mm) or "bend" '
                            '(an object with "radius" and "angle")')
        if "straight" in seg:
            out.append(("straight", _number(f"{where}.straight", seg["straight"], 0), 0.0))
            continue
        bend = seg["bend"]
        if not isinstance(bend, dict):
            raise ShapeParameterError(f"{where}.bend", bend,
                                      'an object {"radius": <inner-wall radius, mm>, '
                                      '"angle": <turn, deg, + is left>}')
        for key in bend:
            if key not in ("radius", "angle"):
                raise ShapeParameterError(f"{where}.bend.{key}", bend[key],
                                          'only the keys "radius" and "angle"')
        radius = _number(f"{where}.bend.radius", bend.get("radius", MISSING), 0)
        angle = _number(f"{where}.bend.angle", bend.get("angle", MISSING), -360, False, 360, False)
        if angle == 0:
            raise ShapeParameterError(f"{where}.bend.angle", bend["angle"],
                                      "a turn other than 0 deg, between -360 and 360 (exclusive)")
        out.append(("bend", radius, angle))
    return out


@dataclass(frozen=True)
class _Station:
    """A cross-section of the pipe: centreline point, heading, and the two wall points."""

    center: Point
    heading_deg: float
    left: Point
    right: Point


def _station(center: Point, heading_deg: float, half_width: float) -> _Station:
    c, s = _cos_sin_deg(heading_deg)
    nx, ny = -s, c   # left normal
    return _Station(center, heading_deg,
                    (center[0] + half_width * nx, center[1] + half_width * ny),
                    (center[0] - half_width * nx, center[1] - half_width * ny))


def _walk(width: float, segments: list[tuple[str, float, float]]):
    """Stations along the path, and per segment (kind, arc centre or None, turn in degrees)."""
    hw = width / 2
    st = _station((0.0, 0.0), 0.0, hw)
    stations, steps = [st], []
    for kind, a, b in segments:
        c, s = _cos_sin_deg(st.heading_deg)
        if kind == "straight":
            st = _station((st.center[0] + a * c, st.center[1] + a * s), st.heading_deg, hw)
            steps.append(("straight", None, 0.0))
        else:
            radius, angle = a, b
            rc = math.copysign(radius + hw, angle)      # signed centreline radius, + is left
            centre = (st.center[0] - rc * s, st.center[1] + rc * c)
            heading = st.heading_deg + angle
            c2, s2 = _cos_sin_deg(heading)
            st = _station((centre[0] + rc * s2, centre[1] - rc * c2), heading, hw)
            steps.append(("bend", centre, angle))
        stations.append(st)
    return stations, steps


def _merged(segments: list[tuple[str, float, float]]) -> list[tuple[str, float, float]]:
    """Join consecutive straight runs so no wall has a needless vertex in its middle."""
    out: list[tuple[str, float, float]] = []
    for seg in segments:
        if seg[0] == "straight" and out and out[-1][0] == "straight":
            out[-1] = ("straight", out[-1][1] + seg[1], 0.0)
        else:
            out.append(seg)
    return out


def light_pipe(width: float, segments: list) -> Loop:
    """A light guide of constant `width` following a path of straight runs and circular bends.

    The path starts at the origin heading +x, the guide centred on the x axis, so the "input"
    face is the segment x = 0, |y| <= width/2.  `segments` is a list of
      {"straight": L}                           a straight run L mm long, or
      {"bend": {"radius": R, "angle": A}}       a circular bend: R is the radius of the INNER
                                                wall (mm, > 0; the centreline radius is R + width/2,
                                                the outer wall's R + width); A the turn in degrees,
                                                positive = turn left (counter-clockwise),
                                                negative = turn right, 0 < |A| < 360.
    Faces: "input", "output" (the far end face); along a straight run "left wall" and
    "right wall" (left/right as seen travelling from input to output); along a bend
    "inner wall" (radius R) and "outer wall" (radius R + width), both true arcs.
    A path that makes the guide overlap itself is rejected.  `light_pipe_ends` gives the
    centres and directions of the end faces.
    """
    w = _number("width", width, 0)
    segs = _merged(_segments("segments", segments))
    stations, steps = _walk(w, segs)
    right_edges, left_edges = [], []
    for (kind, centre, angle), a, b in zip(steps, stations[:-1], stations[1:]):
        if kind == "straight":
            right_edges.append(Edge(a.right, b.right, face="right wall"))
            left_edges.append(Edge(b.left, a.left, face="left wall"))
        else:
            left_turn = angle > 0
            # the right wall is walked forward, the left wall backward (loop is counter-clockwise)
            right_edges.append(Edge(a.right, b.right, centre, ccw=left_turn,
                                    face="outer wall" if left_turn else "inner wall"))
            left_edges.append(Edge(b.left, a.left, centre, ccw=not left_turn,
                                   face="inner wall" if left_turn else "outer wall"))
    end, start = stations[-1], stations[0]
    loop = Loop((*right_edges, Edge(end.right, end.left, face="output"),
                 *reversed(left_edges), Edge(start.left, start.right, face="input")))
    _check_no_overlap(loop, w)
    return loop


def _check_no_overlap(loop: Loop, width: float) -> None:
    import shapely
    ring = loop.coords(1e-6 * width)
    if not shapely.Polygon(ring).is_valid:
        raise ShapeParameterError(
            "segments", "<a path along which the guide crosses or touches itself>",
            "a path whose runs and bends keep the guide clear of itself")


def light_pipe_ends(width: float, segments: list, position: Point = (0.0, 0.0),
                    rotation_deg: float = 0.0) -> dict[str, tuple[Point, Point]]:
    """Centres and travel directions of the end faces:
    {"input": (point, direction), "output": (point, direction)}.

    Directions are unit vectors along the guide from input to output, so the input direction
    points into the pipe and the output direction points out of it.  Each end face is `width`
    long, perpendicular to its direction.  With `position`/`rotation_deg` (as in a ShapeSpec)
    the result is in scene coordinates, else in the builder's local frame.
    """
    w = _number("width", width, 0)
    stations, _ = _walk(w, _merged(_segments("segments", segments)))
    out = {}
    for key, st in (("input", stations[0]), ("output", stations[-1])):
        direction = _cos_sin_deg(st.heading_deg)
        out[key] = (place_point(st.center, position, rotation_deg),
                    place_direction(direction, rotation_deg))
    return out


def light_pipe_centerline_length(width: float, segments: list) -> float:
    """Length of the guide's centreline in mm: straight runs plus (R + width/2) * |turn|."""
    w = _number("width", width, 0)
    total = 0.0
    for kind, a, b in _segments("segments", segments):
        total += a if kind == "straight" else (a + w / 2) * math.radians(abs(b))
    return total


# ---------------------------------------------------------------- registry

_POS = dict(min=0.0)
_ANGLE = dict(min=0.0, max=180.0)

PARAMETERS: dict[str, list[ParamInfo]] = {
    "rectangle": [
        ParamInfo("width", "number", "mm", 20.0, "size along x", **_POS),
        ParamInfo("height", "number", "mm", 10.0, "size along y", **_POS),
    ],
    "prism": [
        ParamInfo("apex_angle_deg", "number", "deg", 60.0,
                  "angle at the apex, between the two equal faces", **_ANGLE),
        ParamInfo("side", "number", "mm", 20.0, "length of each of the two equal faces", **_POS),
    ],
    "roof_prism": [
        ParamInfo("leg", "number", "mm", 20.0,
                  "length of each leg face; the hypotenuse is leg * sqrt 2 at a 90 deg roof", **_POS),
        ParamInfo("roof_angle_deg", "number", "deg", 90.0, "angle between the legs at the roof apex",
                  required=False, **_ANGLE),
    ],
    "regular_polygon": [
        ParamInfo("sides", "integer", "", 6, "number of sides", min=3, min_inclusive=True),
        ParamInfo("circumradius", "number", "mm", 10.0, "centre-to-corner distance", **_POS),
    ],
    "light_pipe": [
        ParamInfo("width", "number", "mm", 5.0, "width of the guide", **_POS),
        ParamInfo("segments", "segments", "", [{"straight": 20.0},
                                               {"bend": {"radius": 10.0, "angle": 90.0}},
                                               {"straight": 20.0}],
                  'path from the input face: {"straight": length mm} or {"bend": {"radius": '
                  'inner-wall radius mm, "angle": turn deg, + = left}}'),
    ],
    "microprism_strip": [
        ParamInfo("pitch", "number", "mm", 0.5, "base width of each prism", **_POS),
        ParamInfo("prism_angle_deg", "number", "deg", 90.0, "apex angle of each prism", **_ANGLE),
        ParamInfo("count", "integer", "", 20, "number of prisms", min=1, min_inclusive=True),
        ParamInfo("slab_thickness", "number", "mm", 1.0,
                  "thickness of the slab under the prisms", **_POS),
    ],
    "window": [
        ParamInfo("thickness", "number", "mm", 3.0, "distance from front to back", **_POS),
        ParamInfo("height", "number", "mm", 25.0, "size along y", **_POS),
    ],
    "lens": [
        ParamInfo("r1", "number", "mm", 50.0,
                  "front radius of curvature; > 0 centre to the right, 0 = flat",
                  allow_infinite=True),
        ParamInfo("r2", "number", "mm", -50.0,
                  "back radius of curvature; < 0 centre to the left, 0 = flat",
                  allow_infinite=True),
        ParamInfo("center_thickness", "number", "mm", 5.0, "thickness on the axis", **_POS),
        ParamInfo("aperture", "number", "mm", 20.0, "full height of the lens", **_POS),
    ],
}

BUILDERS: dict[str, Callable[..., Loop]] = {
    "rectangle": rectangle,
    "prism": prism,
    "roof_prism": roof_prism,
    "regular_polygon": regular_polygon,
    "light_pipe": light_pipe,
    "microprism_strip": microprism_strip,
    "window": window,
    "lens": lens,
}


def check_params(kind: str, params: dict) -> list[ShapeParameterError]:
    """Every problem with a builder's params, one entry per field, without raising.

    Fields are checked one by one first; relations between fields (a lens's edge thickness, a
    light pipe crossing itself) are checked by building once all fields are fine."""
    problems = _field_problems(kind, params)
    if not problems:
        try:
            BUILDERS[kind](**params)
        except ShapeParameterError as err:
            problems.append(err)
    return problems


def _field_problems(kind: str, params: dict) -> list[ShapeParameterError]:
    if kind not in BUILDERS:
        return [ShapeParameterError("kind", kind, "one of " + ", ".join(BUILDERS))]
    if not isinstance(params, dict):
        return [ShapeParameterError("params", params, "an object of builder parameters")]
    infos = {p.name: p for p in PARAMETERS[kind]}
    problems = [ShapeParameterError(key, "<unknown parameter>",
                                    f"one of the parameters of {kind}: " + ", ".join(infos))
                for key in params if key not in infos]
    for name, info in infos.items():
        if name not in params:
            if info.required:
                problems.append(ShapeParameterError(name, MISSING, _describe(info)))
            continue
        try:
            _check_param(info, params[name])
        except ShapeParameterError as err:
            problems.append(err)
    return problems


def _describe(info: ParamInfo) -> str:
    if info.type == "integer":
        return f"a whole number at least {int(info.min or 0)}"
    if info.type == "segments":
        return "a non-empty list of segments"
    return _expected_range(info.min, info.min_inclusive, info.max, info.max_inclusive, "a number")


def _local_points(kind: str, params: dict) -> dict[str, Point]:
    """Named points of a builder's local frame, for linked numbers (see derived_values)."""
    if kind == "prism":
        a, side = math.radians(params["apex_angle_deg"]) / 2, params["side"]
        return {"apex": (0.0, side * math.cos(a))}
    if kind == "roof_prism":
        return {"apex": (0.0, params["leg"] / math.sqrt(2.0))}
    if kind in ("window", "lens"):
        t = params["thickness" if kind == "window" else "center_thickness"]
        return {"back": (float(t), 0.0)}
    if kind == "microprism_strip":
        a = math.radians(params["prism_angle_deg"]) / 2
        return {"peak": (0.0, params["slab_thickness"] + (params["pitch"] / 2) / math.tan(a))}
    return {}


def derived_values(spec: ShapeSpec) -> dict[str, float]:
    """The numbers a built part offers to linked expressions (`guide.output_x`), in scene
    coordinates, mm and degrees: its placement `x`, `y`, `rotation_deg`; every number among its
    parameters (`width`, `leg`, ...); and, by builder, points as NAME_x / NAME_y:
      prism: apex_x, apex_y;  roof_prism: apex_x, apex_y and hypotenuse (its length);
      window and lens: back_x, back_y (the back face's centre, the back vertex);
      microprism_strip: peak_x, peak_y (the middle prism's apex line), length (count * pitch);
      light_pipe: input_x, input_y, output_x, output_y (end-face centres), output_deg (the
      direction of travel out of the output face) and length (of the centreline).
    Raises ShapeParameterError as `build` does."""
    build(spec)   # every parameter checked, and the shape known to be buildable
    x, y = float(spec.position[0]), float(spec.position[1])
    out = {"x": x, "y": y, "rotation_deg": float(spec.rotation_deg)}
    for key, value in spec.params.items():
        if isinstance(value, numbers.Real) and not isinstance(value, bool):
            out[key] = float(value)
    points = _local_points(spec.kind, spec.params)
    if spec.kind == "light_pipe":
        ends = light_pipe_ends(spec.params["width"], spec.params["segments"], (x, y), spec.rotation_deg)
        for end in ("input", "output"):
            (px, py), _ = ends[end]
            out[f"{end}_x"], out[f"{end}_y"] = px, py
        dx, dy = ends["output"][1]
        out["output_deg"] = math.degrees(math.atan2(dy, dx))
        out["length"] = light_pipe_centerline_length(spec.params["width"], spec.params["segments"])
    elif spec.kind == "roof_prism":
        out["hypotenuse"] = spec.params["leg"] * math.sqrt(2.0)
    elif spec.kind == "microprism_strip":
        out["length"] = spec.params["count"] * spec.params["pitch"]
    for name, local in points.items():
        out[f"{name}_x"], out[f"{name}_y"] = place_point(local, (x, y), spec.rotation_deg)
    return out


FACE_POINTS = ("start_x", "start_y", "end_x", "end_y", "mid_x", "mid_y")


def face_values(spec: ShapeSpec) -> dict[str, float]:
    """The end points and middle of each face that is one edge, keyed FACE.start_x, ...,
    FACE.mid_y by the builder's face name, in scene coordinates (the loop runs
    counter-clockwise, so start -> end keeps the part on the left)."""
    edges: dict[str, list] = {}
    for e in build(spec).edges:
        if e.face:
            edges.setdefault(e.face, []).append(e)
    out = {}
    for face, es in edges.items():
        if len(es) == 1:
            e = es[0]
            for key, (x, y) in (("start", e.start), ("end", e.end), ("mid", e.point_at(0.5))):
                out[f"{face}.{key}_x"], out[f"{face}.{key}_y"] = float(x), float(y)
    return out


def build(spec: ShapeSpec) -> Loop:
    """Build `spec.kind` from `spec.params`, then rotate by `spec.rotation_deg` about the local
    origin and translate by `spec.position`.  Raises ShapeParameterError on the first problem."""
    problems = _field_problems(spec.kind, spec.params)
    if problems:
        raise problems[0]
    pos = spec.position
    if isinstance(pos, (str, bytes)) or not isinstance(pos, (tuple, list)) or len(pos) != 2:
        raise ShapeParameterError("position", pos, "a point [x, y] in mm")
    x = _number("position[0]", pos[0])
    y = _number("position[1]", pos[1])
    rot = _number("rotation_deg", spec.rotation_deg)
    return BUILDERS[spec.kind](**spec.params).transformed(x, y, rot)
