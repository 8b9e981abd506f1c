"""Bending a part's edge into a true circular arc, by a third point or by a radius (no Qt).

The file format stores an arc as a centre and a direction on an edge whose ends stay where
they were, so bending never moves a vertex and the neighbouring edges are untouched.
"""
from __future__ import annotations

import math
from dataclasses import replace

from raytrace.geometry import Edge, Loop, Part, Point


class ArcError(ValueError):
    """An arc that cannot be made (the message says why, in a user's words)."""


def circle_through(a: Point, b: Point, p: Point) -> tuple[Point, bool] | None:
    """Centre and direction (True: counter-clockwise) of the arc from `a` through `p` to `b`;
    None when the three points are (nearly) on one line."""
    # relative to a, so far-away coordinates keep their digits
    bx, by = b[0] - a[0], b[1] - a[1]
    px, py = p[0] - a[0], p[1] - a[1]
    d = 2.0 * (bx * py - by * px)
    scale = max(math.hypot(bx, by), math.hypot(px, py), math.dist(b, p))
    if scale == 0 or abs(d) <= 1e-9 * scale * scale:
        return None
    b2, p2 = bx * bx + by * by, px * px + py * py
    cx = (py * b2 - by * p2) / d
    cy = (bx * p2 - px * b2) / d
    # a -> p -> b turning left runs counter-clockwise round the circle
    ccw = px * (by - py) - py * (bx - px) > 0
    return (a[0] + cx, a[1] + cy), ccw


def bulge_point(a: Point, b: Point, radius: float, left: bool) -> Point:
    """The middle of the shorter arc of `radius` on the chord a-b, on its left (seen from a
    towards b) or right side."""
    c = math.dist(a, b)
    r = abs(radius)
    if r < c / 2 * (1 - 1e-12):
        raise ArcError(f"a radius of at least half the edge's length ({c / 2:.6g} mm); found {r:.6g} mm")
    sagitta = r - math.sqrt(max(r * r - c * c / 4, 0.0))
    nx, ny = -(b[1] - a[1]) / c, (b[0] - a[0]) / c
    s = sagitta if left else -sagitta
    return ((a[0] + b[0]) / 2 + s * nx, (a[1] + b[1]) / 2 + s * ny)


def _chord_area(loop: Loop) -> float:
    """Signed area of the loop's vertex polygon (arcs as chords): its turning sense."""
    v = loop.vertices
    return 0.5 * sum(v[i][0] * v[(i + 1) % len(v)][1] - v[(i + 1) % len(v)][0] * v[i][1] for i in range(len(v)))


def material_on_left(part: Part, loop_index: int) -> bool:
    """True when the part's material lies left of the loop's edges (walking start -> end)."""
    ccw = _chord_area(part.loops[loop_index]) > 0
    return ccw if loop_index == 0 else not ccw      # a hole's material is outside it


def _with_loop_edge(part: Part, loop_index: int, edge_index: int, edge: Edge) -> Part:
    loop = part.loops[loop_index]
    edges = list(loop.edges)
    edges[edge_index] = edge
    new = Loop(tuple(edges))
    if loop_index == 0:     # the builder no longer describes a bent outline
        return replace(part, outer=new, shape=None)
    holes = list(part.holes)
    holes[loop_index - 1] = new
    return replace(part, holes=tuple(holes))


def bend_through(part: Part, loop_index: int, edge_index: int, through: Point | None) -> Part:
    """The part with one edge made the arc through `through` (straight when None or on the
    chord's line)."""
    e = part.loops[loop_index].edges[edge_index]
    circle = None if through is None else circle_through(e.start, e.end, through)
    if circle is None:
        return _with_loop_edge(part, loop_index, edge_index, replace(e, arc_center=None, ccw=True))
    centre, ccw = circle
    return _with_loop_edge(part, loop_index, edge_index, replace(e, arc_center=centre, ccw=ccw))


def bend_by_radius(part: Part, loop_index: int, edge_index: int, radius: float) -> Part:
    """The part with one edge made the shorter arc of |radius|: bulging out of the material
    for radius > 0 (convex), into it for radius < 0 (concave), straight for 0."""
    if not math.isfinite(radius):
        raise ArcError(f"a finite radius in mm; found {radius}")
    if radius == 0:
        return bend_through(part, loop_index, edge_index, None)
    e = part.loops[loop_index].edges[edge_index]
    outward_left = not material_on_left(part, loop_index)
    left = outward_left if radius > 0 else not outward_left
    return bend_through(part, loop_index, edge_index, bulge_point(e.start, e.end, radius, left))


def signed_radius(part: Part, loop_index: int, edge_index: int) -> float:
    """The edge's radius as `bend_by_radius` takes it (> 0 convex, < 0 concave, 0 straight)."""
    e = part.loops[loop_index].edges[edge_index]
    if not e.is_arc:
        return 0.0
    # the side of the chord the arc's midpoint lies on is the side it bulges to
    mx, my = e.point_at(0.5)
    sx, sy = e.start
    ex, ey = e.end
    bulge_left = (ex - sx) * (my - sy) - (ey - sy) * (mx - sx) > 0
    convex = bulge_left != material_on_left(part, loop_index)
    return e.radius if convex else -e.radius
