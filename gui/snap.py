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


class _PartTargets:
    """The snap targets of one part; refs are (loop, index) rows."""

    def __init__(self, part):
        pts, kinds, refs = [], [], []
        seg_a, seg_b, seg_refs, self.arcs = [], [], [], []
        for li, loop in enumerate(part.loops):
            for ei, e in enumerate(loop.edges):
                pts += [e.start, e.point_at(0.5)]
                kinds += [VERTEX, MIDPOINT]
                refs += [(li, ei)] * 2
                if e.is_arc:
                    pts.append(e.arc_center)
                    kinds.append(CENTRE)
                    refs.append((li, ei))
                    self.arcs.append((e, li, ei))
                else:
                    seg_a.append(e.start)
                    seg_b.append(e.end)
                    seg_refs.append((li, ei))
        self.points = np.asarray(pts, dtype=float).reshape(-1, 2)
        self.kinds = np.asarray(kinds, dtype=object)
        self.refs = np.asarray(refs, dtype=int).reshape(-1, 2)
        self.seg_a = np.asarray(seg_a, dtype=float).reshape(-1, 2)
        self.seg_b = np.asarray(seg_b, dtype=float).reshape(-1, 2)
        self.seg_refs = np.asarray(seg_refs, dtype=int).reshape(-1, 2)


def _with_part(refs: np.ndarray, part: int) -> np.ndarray:
    return np.column_stack([np.full(len(refs), part), refs])


class SnapIndex:
    """Every snap target of one scene, as arrays.  The targets of parts that the previous
    index already had (the same Part objects: an edit replaces only what it changes) are
    reused, so dragging a source over a 10,000-edge film does not rebuild the film's."""

    def __init__(self, scene: Scene, previous: "SnapIndex | None" = None):
        self.scene = scene
        known = previous.by_part if previous is not None else {}
        self.by_part = {}
        for part in scene.parts:
            old = known.get(id(part))
            self.by_part[id(part)] = old if old is not None and old[0] is part else (part, _PartTargets(part))
        targets = [self.by_part[id(p)][1] for p in scene.parts]
        self.points = np.concatenate([t.points for t in targets] or [np.empty((0, 2))])
        self.kinds = np.concatenate([t.kinds for t in targets] or [np.empty(0, dtype=object)])
        self.refs = np.concatenate([_with_part(t.refs, i) for i, t in enumerate(targets)] or [np.empty((0, 3), int)])
        self.seg_a = np.concatenate([t.seg_a for t in targets] or [np.empty((0, 2))])
        self.seg_b = np.concatenate([t.seg_b for t in targets] or [np.empty((0, 2))])
        self.seg_refs = np.concatenate([_with_part(t.seg_refs, i) for i, t in enumerate(targets)]
                                       or [np.empty((0, 3), int)])
        self.arcs = [(e, (i, li, ei)) for i, t in enumerate(targets) for e, li, ei in t.arcs]

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
        if ignore is None or (ref[0], ref[1]) != tuple(ignore[:2]):
            return False
        n = len(self.scene.parts[ref[0]].loops[ref[1]].edges)
        if kind == VERTEX:
            return ref[2] == ignore[2]
        return ref[2] in (ignore[2], (ignore[2] - 1) % n)    # the edges that move with it

    @staticmethod
    def _within(dist: np.ndarray, tol: float) -> np.ndarray:
        """Indices of the distances within tol, nearest first."""
        near = np.flatnonzero(dist <= tol)
        return near[np.argsort(dist[near])]

    def _nearest_point(self, q, tol, ignore) -> Snap | None:
        d = np.hypot(*(self.points - q).T)
        for k in self._within(d, tol):
            ref = tuple(int(v) for v in self.refs[k])
            if not self._skipped(ref, self.kinds[k], ignore):
                x, y = self.points[k]
                return Snap((float(x), float(y)), self.kinds[k], *ref)
        return None

    def _nearest_edge(self, q, tol, ignore) -> Snap | None:
        best, best_d = None, tol
        a, d = self.seg_a, self.seg_b - self.seg_a
        L2 = (d * d).sum(axis=1)
        t = np.clip(np.divide(((q - a) * d).sum(axis=1), L2, out=np.zeros_like(L2), where=L2 > 0), 0, 1)
        c = a + t[:, None] * d
        dist = np.hypot(*(q - c).T)
        for k in self._within(dist, tol):
            ref = tuple(int(v) for v in self.seg_refs[k])
            if not self._skipped(ref, EDGE, ignore):
                best, best_d = Snap((float(c[k, 0]), float(c[k, 1])), EDGE, *ref), dist[k]
                break
        for e, ref in self.arcs:
            p = nearest_on_arc(e, (float(q[0]), float(q[1])))
            dist_arc = math.dist(p, q)
            if dist_arc <= best_d and not self._skipped(ref, EDGE, ignore):
                best, best_d = Snap(p, EDGE, *ref), dist_arc
        return best


_last: SnapIndex | None = None


def snap_index(scene: Scene) -> SnapIndex:
    """The index of `scene`, built again only when the scene is another object (every edit
    makes a new scene), from the previous one's parts where they are unchanged."""
    global _last
    if _last is None or _last.scene is not scene:
        _last = SnapIndex(scene, _last)
    return _last
