"""Exact 2D boundary geometry: straight edges and true circular arcs.

A part's boundary is a closed `Loop` of `Edge`s.  Arcs stay arcs: the tracer intersects rays
with the circle itself.  Shapely only sees a flattened copy (`loop_coords`) for validation and
measurement, never for tracing.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Iterable, Sequence


Point = tuple[float, float]

# Surface treatments.  Codes are what the compiled arrays carry.
BARE, MIRROR, ABSORBER, ANTI_REFLECTION = "bare", "mirror", "absorber", "anti-reflection"
TREATMENT_KINDS = (BARE, MIRROR, ABSORBER, ANTI_REFLECTION)


@dataclass(frozen=True)
class Treatment:
    """What happens at an edge.  `reflectance` only matters for a mirror."""

    kind: str = BARE
    reflectance: float = 1.0

    def to_dict(self) -> dict | str:
        if self.kind == MIRROR:
            return {"kind": MIRROR, "reflectance": self.reflectance}
        return self.kind


BARE_TREATMENT = Treatment()


@dataclass(frozen=True)
class Edge:
    """A straight segment, or a circular arc when `arc_center` is set.

    An arc runs from `start` to `end` around `arc_center`, counter-clockwise when `ccw` is true.
    """

    start: Point
    end: Point
    arc_center: Point | None = None
    ccw: bool = True
    face: str | None = None
    treatment: Treatment = BARE_TREATMENT

    @property
    def is_arc(self) -> bool:
        return self.arc_center is not None

    @property
    def radius(self) -> float:
        assert self.arc_center is not None
        return math.dist(self.start, self.arc_center)

    def arc_angles(self) -> tuple[float, float]:
        """(start angle, signed sweep) in radians; sweep > 0 is counter-clockwise."""
        cx, cy = self.arc_center  # type: ignore[misc]
        a0 = math.atan2(self.start[1] - cy, self.start[0] - cx)
        a1 = math.atan2(self.end[1] - cy, self.end[0] - cx)
        sweep = (a1 - a0) % (2 * math.pi)
        if self.ccw:
            if sweep < 1e-15:
                sweep = 2 * math.pi
            return a0, sweep
        sweep = sweep - 2 * math.pi if sweep > 1e-15 else -2 * math.pi
        return a0, sweep

    def length(self) -> float:
        if not self.is_arc:
            return math.dist(self.start, self.end)
        return self.radius * abs(self.arc_angles()[1])

    def point_at(self, u: float) -> Point:
        """Point at fraction u in [0, 1] along the edge."""
        if not self.is_arc:
            return (self.start[0] + u * (self.end[0] - self.start[0]),
                    self.start[1] + u * (self.end[1] - self.start[1]))
        a0, sweep = self.arc_angles()
        cx, cy = self.arc_center  # type: ignore[misc]
        r = self.radius
        a = a0 + u * sweep
        return (cx + r * math.cos(a), cy + r * math.sin(a))

    def flattened(self, tolerance: float) -> list[Point]:
        """Points from start up to (not including) end; arcs split so the sagitta <= tolerance."""
        if not self.is_arc:
            return [self.start]
        if not tolerance > 0:  # also catches NaN: 0 would need infinitely many chords
            raise ValueError(f"tolerance: expected a number greater than 0, found {tolerance!r}")
        a0, sweep = self.arc_angles()
        r = self.radius
        # sagitta of a chord spanning angle da: r (1 - cos(da/2)) <= tol
        if tolerance >= r:
            n = 4
        else:
            da = 2 * math.acos(1 - tolerance / r)
            n = max(2, math.ceil(abs(sweep) / da))
        cx, cy = self.arc_center  # type: ignore[misc]
        pts = [self.start]
        for k in range(1, n):
            a = a0 + sweep * k / n
            pts.append((cx + r * math.cos(a), cy + r * math.sin(a)))
        return pts

    def bounds(self) -> tuple[float, float, float, float]:
        """Exact (xmin, ymin, xmax, ymax): an arc also reaches every axis direction its sweep crosses."""
        pts = [self.start, self.end]
        if self.is_arc:
            a0, sweep = self.arc_angles()
            cx, cy = self.arc_center  # type: ignore[misc]
            r = self.radius
            for k, (ux, uy) in enumerate(((1.0, 0.0), (0.0, 1.0), (-1.0, 0.0), (0.0, -1.0))):
                turn = (k * math.pi / 2 - a0) % (2 * math.pi) if sweep > 0 else \
                    (a0 - k * math.pi / 2) % (2 * math.pi)
                if turn <= abs(sweep):
                    pts.append((cx + r * ux, cy + r * uy))
        xs = [p[0] for p in pts]
        ys = [p[1] for p in pts]
        return (min(xs), min(ys), max(xs), max(ys))

    def reversed(self) -> "Edge":
        return replace(self, start=self.end, end=self.start, ccw=not self.ccw)

    def transformed(self, dx: float, dy: float, rotation_deg: float, about: Point = (0.0, 0.0)) -> "Edge":
        rot = rotate_translate(rotation_deg, dx, dy, about)
        return replace(self, start=rot(self.start), end=rot(self.end),
                       arc_center=None if self.arc_center is None else rot(self.arc_center))


def rotate_translate(rotation_deg: float, dx: float, dy: float, about: Point = (0.0, 0.0)):
    c, s = math.cos(math.radians(rotation_deg)), math.sin(math.radians(rotation_deg))
    ax, ay = about

    def apply(p: Point) -> Point:
        x, y = p[0] - ax, p[1] - ay
        return (ax + c * x - s * y + dx, ay + s * x + c * y + dy)
    return apply


@dataclass(frozen=True)
class Loop:
    """A closed chain of edges: edges[i].end is edges[i+1].start, and the last closes on the first."""

    edges: tuple[Edge, ...]

    @classmethod
    def polygon(cls, points: Sequence[Point], faces: Sequence[str | None] | None = None,
                treatments: Sequence[Treatment] | None = None) -> "Loop":
        """Straight-edged loop through `points`; edge i runs from points[i] to points[i+1]."""
        n = len(points)
        edges = []
        for i in range(n):
            edges.append(Edge(
                start=_pt(points[i]), end=_pt(points[(i + 1) % n]),
                face=faces[i] if faces else None,
                treatment=treatments[i] if treatments else BARE_TREATMENT))
        return cls(tuple(edges))

    def coords(self, tolerance: float) -> list[Point]:
        """Flattened ring (first point not repeated) for shapely."""
        pts: list[Point] = []
        for e in self.edges:
            pts.extend(e.flattened(tolerance))
        return pts

    def signed_area(self) -> float:
        """Exact area enclosed, positive when the loop runs counter-clockwise.

        Green's theorem per edge: the chord term plus, for an arc, its circular-segment term.
        """
        total = 0.0
        for e in self.edges:
            (x0, y0), (x1, y1) = e.start, e.end
            total += 0.5 * (x0 * y1 - x1 * y0)
            if e.is_arc:
                _, sweep = e.arc_angles()
                r = e.radius
                # area between the chord and the arc, signed with the sweep direction
                total += 0.5 * r * r * (sweep - math.sin(sweep))
        return total

    def transformed(self, dx: float, dy: float, rotation_deg: float, about: Point = (0.0, 0.0)) -> "Loop":
        return Loop(tuple(e.transformed(dx, dy, rotation_deg, about) for e in self.edges))

    def closure_gap(self) -> float:
        """Largest distance between one edge's end and the next edge's start."""
        n = len(self.edges)
        return max((math.dist(self.edges[i].end, self.edges[(i + 1) % n].start) for i in range(n)),
                   default=0.0)

    def bounds(self) -> tuple[float, float, float, float]:
        """Exact bounding box, arcs included (no flattening)."""
        boxes = [e.bounds() for e in self.edges]
        return (min(b[0] for b in boxes), min(b[1] for b in boxes),
                max(b[2] for b in boxes), max(b[3] for b in boxes))

    def size_hint(self) -> float:
        """The larger side of the exact bounding box.  Arc radii are not used: a nearly flat lens
        surface has a huge radius but a small extent, and tolerances must follow the extent."""
        if not self.edges:
            return 0.0
        x0, y0, x1, y1 = self.bounds()
        return max(x1 - x0, y1 - y0)

    def with_edge(self, index: int, **changes) -> "Loop":
        edges = list(self.edges)
        edges[index] = replace(edges[index], **changes)
        return Loop(tuple(edges))

    def with_vertex(self, index: int, point: Point) -> "Loop":
        """Move vertex `index` (the start of edge index) and keep the loop closed.

        An arc touching the vertex keeps its centre only if it can: arcs become straight when
        the moved end no longer lies on their circle, since a user dragging a vertex expects the
        boundary to follow."""
        edges = list(self.edges)
        n = len(edges)
        p = _pt(point)
        if n == 1:
            return Loop((_straighten_if_off_circle(replace(edges[0], start=p, end=p)),))
        prev = edges[(index - 1) % n]
        cur = edges[index]
        edges[(index - 1) % n] = _straighten_if_off_circle(replace(prev, end=p))
        edges[index] = _straighten_if_off_circle(replace(cur, start=p))
        return Loop(tuple(edges))

    @property
    def vertices(self) -> list[Point]:
        return [e.start for e in self.edges]


def _straighten_if_off_circle(e: Edge) -> Edge:
    if e.is_arc and abs(math.dist(e.start, e.arc_center) - math.dist(e.end, e.arc_center)) > 1e-9 * max(1.0, e.radius):
        return replace(e, arc_center=None)
    return e


def _pt(p: Iterable[float]) -> Point:
    x, y = p
    return (float(x), float(y))


@dataclass(frozen=True)
class ShapeSpec:
    """How a part was built: a shape builder's name, its parameters, and its placement.

    Kept with the part so a scene file stays editable in the builder's own terms and a sweep
    can vary a builder parameter (a bend radius, a prism angle)."""

    kind: str
    params: dict = field(default_factory=dict)
    position: Point = (0.0, 0.0)
    rotation_deg: float = 0.0

    def __hash__(self) -> int:  # params is a dict; hash by content for frozen use
        return hash((self.kind, _frozen(self.params), _frozen(self.position), self.rotation_deg))


def _frozen(value):
    """A hashable copy of nested JSON-like data (dicts, lists)."""
    if isinstance(value, dict):
        return tuple(sorted((k, _frozen(v)) for k, v in value.items()))
    if isinstance(value, (list, tuple)):
        return tuple(_frozen(v) for v in value)
    return value


@dataclass(frozen=True)
class Part:
    """A region of one material: an outer loop with optional holes."""

    name: str
    material: str
    outer: Loop
    holes: tuple[Loop, ...] = ()
    shape: ShapeSpec | None = None

    @property
    def loops(self) -> tuple[Loop, ...]:
        return (self.outer, *self.holes)

    def area(self) -> float:
        return abs(self.outer.signed_area()) - sum(abs(h.signed_area()) for h in self.holes)

    def size_hint(self) -> float:
        return self.outer.size_hint()

    def to_shapely(self, tolerance: float):
        import shapely
        shell = self.outer.coords(tolerance)
        holes = [h.coords(tolerance) for h in self.holes]
        return shapely.Polygon(shell, holes)
