"""Scene edits as pure functions: old scene in, new scene out, nothing mutated.

Every change the GUI makes goes through one of these, so undo only has to remember scenes and
the same edits can be tested without Qt.  Parts built by a shape builder stay builder parts when
moved, rotated or re-parametrized (the file keeps the builder's own terms); dragging one of
their vertices or renaming a face turns them into plain boundary parts.
"""
from __future__ import annotations

import math
from dataclasses import replace

from raytrace.geometry import Edge, Loop, Part, Point, ShapeSpec, Treatment, rotate_translate
from raytrace.scene import Detector, Scene, Source
from raytrace.shapes import build

PART, SOURCE, DETECTOR = "part", "source", "detector"


def _with(scene: Scene, **changes) -> Scene:
    s = scene.copy()
    for k, v in changes.items():
        setattr(s, k, v)
    return s


def unique_name(base: str, taken: set[str]) -> str:
    if base not in taken:
        return base
    k = 2
    while f"{base} {k}" in taken:
        k += 1
    return f"{base} {k}"


# ------------------------------------------------------------------ parts

def _replaced(scene: Scene, attr: str, index: int, item) -> Scene:
    items = list(getattr(scene, attr))
    items[index] = item
    return _with(scene, **{attr: items})


def _added(scene: Scene, attr: str, item) -> Scene:
    """The scene with `item` appended to its list `attr`, renamed if its name is taken."""
    items = getattr(scene, attr)
    name = unique_name(item.name, {i.name for i in items})
    return _with(scene, **{attr: [*items, replace(item, name=name)]})


def replace_part(scene: Scene, index: int, part: Part) -> Scene:
    return _replaced(scene, "parts", index, part)


def add_part(scene: Scene, part: Part) -> Scene:
    return _added(scene, "parts", part)


def delete_item(scene: Scene, kind: str, index: int) -> Scene:
    attr = {PART: "parts", SOURCE: "sources", DETECTOR: "detectors"}[kind]
    items = list(getattr(scene, attr))
    del items[index]
    return _with(scene, **{attr: items})


def polygon_part(points: list[Point], material: str, name: str = "part") -> Part:
    """A part through clicked points, made counter-clockwise; faces named "face 1".. in order."""
    loop = Loop.polygon(points)
    if loop.signed_area() < 0:
        loop = Loop.polygon(points[::-1])
    loop = Loop(tuple(replace(e, face=f"face {i + 1}") for i, e in enumerate(loop.edges)))
    return Part(name, material, loop)


def polygon_hole(points: list[Point], face: str) -> Loop:
    """A hole through clicked points, made clockwise (the usual sense for holes); its edges
    are faces "<face> side 1".. in order."""
    loop = Loop.polygon(points)
    if loop.signed_area() > 0:
        loop = Loop.polygon(points[::-1])
    return Loop(tuple(replace(e, face=f"{face} side {i + 1}") for i, e in enumerate(loop.edges)))


def round_hole(centre: Point, radius: float, face: str) -> Loop:
    """A round hole: two half-circle arcs, clockwise, one face."""
    cx, cy = centre
    a, b = (cx + radius, cy), (cx - radius, cy)
    return Loop((Edge(a, b, arc_center=centre, ccw=False, face=face),
                 Edge(b, a, arc_center=centre, ccw=False, face=face)))


def part_for_hole(scene: Scene, hole: Loop) -> int | None:
    """The part a new hole cuts: the smallest whose material holds the whole hole (clear of its
    boundary and its other holes), or None."""
    import shapely
    tol = 2e-4 * max(scene.size_hint(), 1e-6)
    ring = shapely.Polygon(hole.coords(tol))
    fits = [i for i, p in enumerate(scene.parts) if p.to_shapely(tol).contains(ring)]
    return min(fits, key=lambda i: scene.parts[i].area(), default=None)


def add_hole(part: Part, hole: Loop) -> Part:
    """The part with one more hole; a builder part stays a builder part (holes are kept beside
    the builder in the file)."""
    return replace(part, holes=(*part.holes, hole))


def free_hole_name(part: Part) -> str:
    taken = {e.face for h in part.holes for e in h.edges}
    taken |= {f.rsplit(" side ", 1)[0] for f in taken if f}
    k = len(part.holes) + 1
    while f"hole {k}" in taken:
        k += 1
    return f"hole {k}"


def shape_part(spec: ShapeSpec, material: str, name: str) -> Part:
    return Part(name, material, build(spec), shape=spec)


def _keep_treatments(new: Loop, old: Loop) -> Loop:
    """Carry each face's treatment over to a rebuilt loop (faces matched by name)."""
    by_face = {e.face: e.treatment for e in old.edges if e.face}
    return Loop(tuple(replace(e, treatment=by_face.get(e.face, e.treatment)) for e in new.edges))


def rebuild(part: Part, spec: ShapeSpec) -> Part:
    """The part rebuilt from a changed builder spec, keeping the user's face names and
    treatments; raises ShapeParameterError if invalid."""
    from raytrace.scene_io import apply_face_overrides, face_overrides
    new = build(spec)
    overrides = face_overrides(part)
    outer = apply_face_overrides(new, overrides) if overrides is not None else _keep_treatments(new, part.outer)
    return replace(part, outer=outer, shape=spec, holes=_carried_holes(part, spec))


def _carried_holes(part: Part, spec: ShapeSpec) -> tuple[Loop, ...]:
    """The part's holes moved and turned as the builder's placement changes (a parameter
    change leaves them where they are)."""
    old = part.shape
    if not part.holes or old is None or (old.position == spec.position and old.rotation_deg == spec.rotation_deg):
        return part.holes
    dx, dy = spec.position[0] - old.position[0], spec.position[1] - old.position[1]
    turn = spec.rotation_deg - old.rotation_deg
    return tuple(h.transformed(dx, dy, turn, old.position) for h in part.holes)


def part_pivot(part: Part) -> Point:
    """The point a part turns about: a builder part's origin, else its bounding-box centre."""
    if part.shape is not None:
        return part.shape.position
    x0, y0, x1, y1 = part.outer.bounds()
    return ((x0 + x1) / 2, (y0 + y1) / 2)


def move_part(part: Part, dx: float, dy: float) -> Part:
    if part.shape is not None:
        px, py = part.shape.position
        return rebuild(part, replace(part.shape, position=(px + dx, py + dy)))
    return replace(part, outer=part.outer.transformed(dx, dy, 0.0),
                   holes=tuple(h.transformed(dx, dy, 0.0) for h in part.holes))


def rotate_part(part: Part, angle_deg: float) -> Part:
    if part.shape is not None:
        return rebuild(part, replace(part.shape, rotation_deg=_wrap_deg(part.shape.rotation_deg + angle_deg)))
    about = part_pivot(part)
    return replace(part, outer=part.outer.transformed(0.0, 0.0, angle_deg, about),
                   holes=tuple(h.transformed(0.0, 0.0, angle_deg, about) for h in part.holes))


def _wrap_deg(a: float) -> float:
    a = math.fmod(a, 360.0)
    return a + 360.0 if a < 0 else a


def move_vertex(part: Part, vertex: int, point: Point) -> Part:
    """Move one outer vertex; a builder part becomes a boundary part (it no longer matches)."""
    return replace(part, outer=part.outer.with_vertex(vertex, point), shape=None)


def set_edge(part: Part, edge: int, **changes) -> Part:
    """Change one outer edge's face name or treatment.  A face renamed on a builder part ends
    the builder link (the file could not express it); a treatment applies to every edge of
    that face on a builder part, since the file stores treatments per face."""
    e = part.outer.edges[edge]
    if "face" in changes and changes["face"] != e.face:
        return replace(part, outer=part.outer.with_edge(edge, **changes), shape=None)
    if part.shape is not None and e.face and "treatment" in changes:
        t = changes["treatment"]
        return replace(part, outer=Loop(tuple(replace(x, treatment=t) if x.face == e.face else x
                                              for x in part.outer.edges)))
    return replace(part, outer=part.outer.with_edge(edge, **changes))


def set_vertex_xy(part: Part, vertex: int, x: float | None = None, y: float | None = None) -> Part:
    px, py = part.outer.edges[vertex].start
    return move_vertex(part, vertex, (px if x is None else x, py if y is None else y))


# ------------------------------------------------------------------ sources and detectors

def replace_source(scene: Scene, index: int, source: Source) -> Scene:
    return _replaced(scene, "sources", index, source)


def replace_detector(scene: Scene, index: int, det: Detector) -> Scene:
    return _replaced(scene, "detectors", index, det)


def add_source(scene: Scene, source: Source) -> Scene:
    return _added(scene, "sources", source)


def add_detector(scene: Scene, det: Detector) -> Scene:
    return _added(scene, "detectors", det)


def aim_source(src: Source, target: Point) -> Source:
    """Point the source's axis at `target` (the aim handle)."""
    dx, dy = target[0] - src.position[0], target[1] - src.position[1]
    if dx == 0 and dy == 0:
        return src
    return replace(src, direction_deg=round(math.degrees(math.atan2(dy, dx)), 6))


def move_detector(det: Detector, dx: float, dy: float) -> Detector:
    return replace(det, start=(det.start[0] + dx, det.start[1] + dy),
                   end=(det.end[0] + dx, det.end[1] + dy))


def rotate_detector(det: Detector, angle_deg: float) -> Detector:
    c = ((det.start[0] + det.end[0]) / 2, (det.start[1] + det.end[1]) / 2)
    rot = rotate_translate(angle_deg, 0.0, 0.0, c)
    return replace(det, start=rot(det.start), end=rot(det.end))


def rotate_source(src: Source, angle_deg: float) -> Source:
    return replace(src, direction_deg=_wrap_deg(src.direction_deg + angle_deg))


def duplicate(scene: Scene, kind: str, index: int, dx: float, dy: float) -> Scene:
    """A copy of one part, source or detector, moved by (dx, dy) and given a free name."""
    if kind == PART:
        return add_part(scene, move_part(scene.parts[index], dx, dy))
    if kind == SOURCE:
        src = scene.sources[index]
        return add_source(scene, replace(src, position=(src.position[0] + dx, src.position[1] + dy)))
    return add_detector(scene, move_detector(scene.detectors[index], dx, dy))


# ------------------------------------------------------------------ scene-wide

def set_settings(scene: Scene, **changes) -> Scene:
    return _with(scene, settings=replace(scene.settings, **changes))


def set_material(scene: Scene, name: str, material) -> Scene:
    mats = dict(scene.materials)
    mats[name] = material
    return _with(scene, materials=mats)


def set_fields(scene: Scene, **changes) -> Scene:
    return _with(scene, **changes)


def treatment(kind: str, reflectance: float = 1.0) -> Treatment:
    return Treatment(kind, reflectance if kind == "mirror" else 1.0)

