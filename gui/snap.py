"""Snapping to the parts' geometry: vertices, edge midpoints, arc centres and the nearest point
of an edge (no Qt).

Points are looked up in arrays built once per scene (a microprism film has thousands of edges
and the lookup runs on every mouse move).  A point near a vertex-like target wins over a point
on an edge; the nearest target of that class wins within the tolerance.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from raytrace.geometry import Edge, Point
from raytrace.scene import Scene

VERTEX, MIDPOINT, CENTRE, EDGE = "vertex", "midpoint", "centre", "edge"


@dataclass(frozen=True)
class Snap:
    point: Point
    kind: str                       # VERTEX, MIDPOINT, CENTRE or EDGE
    part: int
    loop: int                       # 0: outer boundary, k: hole k
    index: int                      # the vertex or edge within the loop


def nearest_on_arc(e: Edge, p: Point) -> Point:
    """The point of arc edge `e` nearest to `p` (straight edges are looked up as arrays)."""
    cx, cy = e.arc_center
    a0, sweep = e.arc_angles()
    a = math.atan2(p[1] - cy, p[0] - cx)
    # how far along the sweep the direction to p lies; outside the sweep, the nearer end
    along = ((a - a0) if sweep > 0 else (a0 - a)) % (2 * math.pi)
    if along <= abs(sweep):
        r = e.radius
        return (cx + r * math.cos(a), cy + r * math.sin(a))
    return min((e.start, e.end), key=lambda q: math.dist(q, p))


class SnapIndex:
    """Every snap target of one scene, as arrays."""

    def __init__(self, scene: Scene):
        self.scene = scene
        pts, kinds, refs = [], [], []
        seg_a, seg_b, seg_refs, self.arcs = [], [], [], []
        for pi, part in enumerate(scene.parts):
            for li, loop in enumerate(part.loops):
                for ei, e in enumerate(loop.edges):
                    pts.append(e.start)
                    kinds.append(VERTEX)
                    refs.append((pi, li, ei))
                    if e.is_arc:
                        pts += [e.point_at(0.5), e.arc_center]
                        kinds += [MIDPOINT, CENTRE]
                        refs += [(pi, li, ei)] * 2
                        self.arcs.append((e, (pi, li, ei)))
                    else:
                        pts.append(e.point_at(0.5))
                        kinds.append(MIDPOINT)
                        refs.append((pi, li, ei))
                        seg_a.append(e.start)
                        seg_b.append(e.end)
                        seg_refs.append((pi, li, ei))
        self.points = np.asarray(pts, dtype=float).reshape(-1, 2)
        self.kinds = kinds
        self.refs = refs
        self.seg_a = np.asarray(seg_a, dtype=float).reshape(-1, 2)
        self.seg_b = np.asarray(seg_b, dtype=float).reshape(-1, 2)
        self.seg_refs = seg_refs

    def find(self, p: Point, tol: float, ignore: tuple[int, int, int] | None = None) -> Snap | None:
        """The snap target nearest `p` within `tol`, or None.  `ignore` is a vertex
        (part, loop, index) being dragged: it and its two edges are not targets."""
        q = np.asarray(p, dtype=float)
        snap = self._nearest_point(q, tol, ignore)
        return snap if snap is not None else self._nearest_edge(q, tol, ignore)

    def edge_near(self, p: Point, tol: float) -> Snap | None:
        """The nearest point of the nearest edge within `tol` (vertices do not count)."""
        return self._nearest_edge(np.asarray(p, dtype=float), tol, None)

    def _skipped(self, ref, kind, ignore) -> bool:
        if ignore is None or ref[:2] != ignore[:2]:
            return False
        n = len(self.scene.parts[ref[0]].loops[ref[1]].edges)
        if kind == VERTEX:
            return ref[2] == ignore[2]
        return ref[2] in (ignore[2], (ignore[2] - 1) % n)    # the edges that move with it

    def _nearest_point(self, q, tol, ignore) -> Snap | None:
        if not len(self.points):
            return None
        d = np.hypot(*(self.points - q).T)
        for k in np.argsort(d):
            if d[k] > tol:
                return None
            if not self._skipped(self.refs[k], self.kinds[k], ignore):
                x, y = self.points[k]
                return Snap((float(x), float(y)), self.kinds[k], *self.refs[k])
        return None

    def _nearest_edge(self, q, tol, ignore) -> Snap | None:
        best, best_d = None, tol
        if len(self.seg_a):
            a, d = self.seg_a, self.seg_b - self.seg_a
            L2 = (d * d).sum(axis=1)
            t = np.clip(np.divide(((q - a) * d).sum(axis=1), L2, out=np.zeros_like(L2), where=L2 > 0), 0, 1)
            c = a + t[:, None] * d
            dist = np.hypot(*(q - c).T)
            for k in np.argsort(dist):
                if dist[k] > best_d:
                    break
                if not self._skipped(self.seg_refs[k], EDGE, ignore):
                    best, best_d = Snap((float(c[k, 0]), float(c[k, 1])), EDGE, *self.seg_refs[k]), dist[k]
                    break
        for e, ref in self.arcs:
            c = nearest_on_arc(e, (float(q[0]), float(q[1])))
            dist = math.dist(c, q)
            if dist <= best_d and not self._skipped(ref, EDGE, ignore):
                best, best_d = Snap(c, EDGE, *ref), dist
        return best


_last: SnapIndex | None = None


def snap_index(scene: Scene) -> SnapIndex:
    """The index of `scene`, built again only when the scene is another object (every edit
    makes a new scene)."""
    global _last
    if _last is None or _last.scene is not scene:
        _last = SnapIndex(scene)
    return _last
