"""Scene -> flat numpy arrays for the tracer.

Done once per trace, in this order:
1. check the geometry (closed, non-zero area, simple, no partial overlaps) with shapely;
2. orient every loop so the part's material lies on the left of each edge;
3. split edges that parts share partly (a guide bonded to a wider window), then merge the
   coincident pieces into one interface between the two materials;
4. resolve the medium on each side of every edge: the part itself on the left, on the right the
   neighbouring part (cemented) or the innermost part that contains this one, else the ambient;
5. add detectors as pass-through edges.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .catalog import lookup
from .errors import Problems
from .geometry import ABSORBER, ANTI_REFLECTION, BARE, MIRROR, Edge, Loop, Part
from .materials import Material
from .scene import Detector, Scene

# Treatment codes in the compiled arrays.
T_BARE, T_MIRROR, T_ABSORBER, T_AR, T_DETECT_ABSORB, T_DETECT_MONITOR = range(6)
TREATMENT_CODE = {BARE: T_BARE, MIRROR: T_MIRROR, ABSORBER: T_ABSORBER, ANTI_REFLECTION: T_AR}


@dataclass
class CompiledScene:
    """Flat arrays, one entry per edge.  The tracer reads only this.

    Geometric normal: for a line from (x0, y0) to (x1, y1) it points to the right of travel;
    for an arc it points away from the centre.  `med_plus` is the medium on the normal side.
    """

    x0: np.ndarray
    y0: np.ndarray
    x1: np.ndarray
    y1: np.ndarray
    is_arc: np.ndarray
    cx: np.ndarray
    cy: np.ndarray
    radius: np.ndarray
    a0: np.ndarray           # arc start angle (rad)
    sweep: np.ndarray        # arc signed sweep (rad), ccw > 0
    med_plus: np.ndarray
    med_minus: np.ndarray
    treatment: np.ndarray
    reflectance: np.ndarray
    part: np.ndarray         # owning part index, -1 for a detector
    other_part: np.ndarray   # the cemented neighbour, -1 if none
    face: np.ndarray         # index into face_labels
    detector: np.ndarray     # detector index, -1 for a boundary edge
    face_labels: list[tuple[str, str]]   # (part name, face name)
    media: list[Material]                # medium 0 is the ambient
    medium_names: list[str]              # "ambient (air)" or the part name
    medium_part: np.ndarray              # part index of each medium, -1 for the ambient
    part_names: list[str]
    detectors: list[Detector]
    scale: float                          # scene size, sets tolerances
    eps: float                            # distance below which a hit is the point just left
    edges: list[Edge] = field(default_factory=list)   # the oriented edges, for drawing
    # per detector: (accepted direction of travel in degrees, half angle) or None
    acceptance: list[tuple[float, float] | None] = field(default_factory=list)

    @property
    def n_edges(self) -> int:
        return len(self.x0)

    @property
    def line_ids(self) -> np.ndarray:
        return np.flatnonzero(~self.is_arc)

    @property
    def arc_ids(self) -> np.ndarray:
        return np.flatnonzero(self.is_arc)


def flatten_tolerance(scene: Scene) -> float:
    return 1e-5 * scene.size_hint()


def part_tolerance(part: Part, scene_size: float) -> float:
    """Arc flattening tolerance for measuring one part: set by the part's own size, so a 1 mm
    part in a 10 m scene is not measured with a 0.1 mm chord error."""
    return 1e-5 * max(part.size_hint(), 1e-9 * max(scene_size, 1.0))


def _area_slack(a, b, tol_a: float, tol_b: float, size: float) -> float:
    """Area two flattened shapes may differ by without a real difference: each arc's chords
    cut off at most tol x length, plus rounding of coordinates of the scene's size."""
    return 4 * (tol_a * a.length + tol_b * b.length) + 1e-12 * size * (a.length + b.length)


def resolve_materials(scene: Scene, problems: Problems, part_paths: list[str] | None = None,
                      skip: frozenset[str] = frozenset()) -> dict[str, Material]:
    """Every material name used by the scene, resolved against user materials then the catalog.

    `part_paths` gives each part's JSON path when the parts list skips parts that failed to
    load; names in `skip` (user materials that failed to load) are not reported a second time."""
    from .catalog import CATALOG, close_matches
    found: dict[str, Material] = {}
    paths = part_paths or [f"$.parts[{i}]" for i in range(len(scene.parts))]
    wanted = [("$.ambient", scene.ambient)] + [(f"{paths[i]}.material", p.material)
                                               for i, p in enumerate(scene.parts)]
    for path, name in wanted:
        m = lookup(name, scene.materials)
        if m is None:
            if name in skip:
                continue
            names = sorted(set(CATALOG) | set(scene.materials))
            hint = close_matches(name, names)
            expected = "a catalog or user material name"
            expected += f" such as {', '.join(repr(h) for h in hint)}" if hint else f" (one of {', '.join(names)})"
            problems.add(path, name, expected)
        else:
            found[name] = m
    return found


def check_geometry(scene: Scene, problems: Problems, part_paths: list[str] | None = None) -> None:
    """Report every geometric problem: open, degenerate or self-intersecting loops, bad holes,
    duplicate part names, and partial overlaps between parts.

    `part_paths` gives each part's JSON path (parts that failed to load are not in the list)."""
    size = scene.size_hint()
    paths = part_paths or [f"$.parts[{i}]" for i in range(len(scene.parts))]
    polys: list = []
    seen: dict[str, int] = {}
    for i, part in enumerate(scene.parts):
        path = paths[i]
        if part.name in seen:
            problems.add(f"{path}.name", part.name, f"a name not already used by {paths[seen[part.name]]}")
        seen.setdefault(part.name, i)
        try:
            polys.append(_check_part(part, path, size, part_tolerance(part, size), problems))
        except (ArithmeticError, ValueError, shapely_error()) as exc:
            # coordinates so extreme that measuring them fails: say so instead of crashing
            problems.add(path, f"<geometry that cannot be measured: {exc}>",
                         "coordinates and radii of ordinary size (mm)")
            polys.append(None)
    _check_overlaps(scene, polys, paths, problems)


def shapely_error():
    import shapely.errors
    return shapely.errors.ShapelyError


def _check_part(part: Part, path: str, size: float, tol: float, problems: Problems):
    """Check one part's loops; return its shapely polygon, or None when it is unusable."""
    import shapely
    ok = True
    for k, loop in enumerate(part.loops):
        lpath = f"{path}.boundary" if k == 0 else f"{path}.holes[{k - 1}]"
        if part.shape is not None and k == 0:
            lpath = f"{path}.shape"
        if len(loop.edges) < 2 or (len(loop.edges) == 2 and not any(e.is_arc for e in loop.edges)):
            problems.add(lpath, f"<{len(loop.edges)} edge(s)>", "a closed boundary of at least 3 edges (or 2 with an arc)")
            ok = False
            continue
        loop_ok = True
        gap = loop.closure_gap()
        if gap > 1e-9 * max(size, 1.0):
            problems.add(lpath, f"<a gap of {gap:.3g} mm between consecutive edges>", "a closed boundary")
            loop_ok = False
        for j, e in enumerate(loop.edges):
            tiny = 1e-12 * max(size, 1.0)
            if e.is_arc and min(e.radius, math.dist(e.end, e.arc_center)) <= tiny:
                on = [w for w, p in (("start (this entry's \"from\")", e.start),
                                     ("end (the next entry's \"from\")", e.end)) if math.dist(p, e.arc_center) <= tiny]
                problems.add(f"{lpath}[{j}].arc.center", list(e.arc_center),
                             f"a centre off the arc's {' and '.join(on)}: a centre on it gives a radius of "
                             "zero; the centre is the middle of the circle the edge follows, equally far "
                             "from its start and end")
                loop_ok = False
                continue        # one problem: a zero radius also makes the zero-length edge
            if e.is_arc and abs(math.dist(e.start, e.arc_center) - math.dist(e.end, e.arc_center)) > 1e-7 * max(e.radius, 1e-9):
                problems.add(f"{lpath}[{j}].arc.center", list(e.arc_center),
                             "a centre equally far from the edge's start and end")
                loop_ok = False
            if e.length() <= 1e-12 * max(size, 1.0):
                problems.add(f"{lpath}[{j}]", "<an edge of zero length>", "distinct start and end points")
                loop_ok = False
        if loop_ok:
            # a crossing first: a symmetric figure-eight also has zero signed area, and the
            # crossing is what the user has to fix
            ring = shapely.LinearRing(loop.coords(tol))
            if not ring.is_simple:
                where = _self_crossing(ring)
                problems.add(lpath, f"<a boundary that crosses itself{where}>", "a simple (non-self-intersecting) boundary")
                loop_ok = False
            elif abs(loop.signed_area()) <= 1e-12 * max(size, 1e-6) ** 2:
                problems.add(lpath, "<zero enclosed area>", "a boundary that encloses an area")
                loop_ok = False
        ok = ok and loop_ok
    if not ok:
        return None
    poly = part.to_shapely(tol)
    if not poly.is_valid:
        hole_path, words = _bad_hole(poly, path)
        problems.add(hole_path, f"<{words}>",
                     "holes strictly inside the outer boundary and apart from each other")
        return None
    return poly


# Shapely's validity reasons, in our own words (the library's text is not the user's language).
_VALIDITY_WORDS = {
    "Hole lies outside shell": "a hole lying outside the part's outer boundary",
    "Holes are nested": "a hole lying inside another hole",
    "Interior is disconnected": "holes that cut the part into pieces",
    "Self-intersection": "boundaries that cross",
    "Ring Self-intersection": "a boundary that touches itself",
    "Nested shells": "one outer boundary inside another",
    "Duplicate Rings": "two identical boundaries",
    "Too few distinct points in geometry component": "a boundary with too few distinct points",
    "Invalid Coordinate": "a coordinate that is not a finite number",
    "Ring is not closed": "a boundary that is not closed",
}


def plain_validity(reason: str) -> str:
    """'Hole lies outside shell[58 23]' -> 'a hole lying outside ... at (58, 23) mm'."""
    import re
    m = re.fullmatch(r"\s*([^\[]*?)\s*(?:\[\s*(\S+)\s+(\S+)\s*\])?\s*", reason or "")
    if not m:
        return "an invalid shape"
    words = _VALIDITY_WORDS.get(m.group(1), "an invalid shape")
    if m.group(2) is None:
        return words
    try:
        x, y = float(m.group(2)), float(m.group(3))
    except ValueError:
        return words
    return f"{words} at ({x:.6g}, {y:.6g}) mm"


def _bad_hole(poly, path: str) -> tuple[str, str]:
    """The JSON path of the hole at fault and what is wrong with it, in plain words; the
    whole holes list when no single hole can be blamed."""
    import shapely
    shell = shapely.Polygon(poly.exterior)
    holes = [shapely.Polygon(r) for r in poly.interiors]
    general = plain_validity(shapely.is_valid_reason(poly))
    for k, h in enumerate(holes):
        if not shell.contains(h):
            single = shapely.Polygon(poly.exterior, [poly.interiors[k]])
            where = _at(shapely.is_valid_reason(single)) or _at_point(h.difference(shell))
            inside = shell.intersection(h).area > 0
            words = "a hole crossing the part's outer boundary" if inside else "a hole lying outside the part's outer boundary"
            return f"{path}.holes[{k}]", words + where
        for j in range(k):
            if holes[j].intersection(h).area > 0:
                words = (f"a hole overlapping hole {j} ({path}.holes[{j}])"
                         if not (holes[j].contains(h) or h.contains(holes[j]))
                         else f"a hole lying inside or around hole {j} ({path}.holes[{j}])")
                return f"{path}.holes[{k}]", words + _at_point(holes[j].intersection(h))
    return (f"{path}.holes[0]" if len(holes) == 1 else f"{path}.holes"), general


def _at(reason: str) -> str:
    text = plain_validity(reason)
    return text[text.index(" at ("):] if " at (" in text else ""


def _at_point(geom) -> str:
    if geom.is_empty:
        return ""
    p = geom.representative_point()
    return f" at ({p.x:.6g}, {p.y:.6g}) mm"


def _check_overlaps(scene: Scene, polys: list, paths: list[str], problems: Problems) -> None:
    """Partial overlaps are errors; nesting (one inside the other) and touching are fine.
    Coincident parts (the same region, to within the flattening slack) are errors too: which
    of the two materials fills the region would depend on the order of the parts.

    Only pairs whose shapes intersect are measured; an R-tree finds them in one bulk query."""
    import shapely
    size = scene.size_hint()
    usable = [k for k, poly in enumerate(polys) if poly is not None]
    if len(usable) < 2:
        return
    tree = shapely.STRtree([polys[k] for k in usable])
    left, right = tree.query([polys[k] for k in usable], predicate="intersects")
    pairs = sorted({(usable[a], usable[b]) for a, b in zip(left.tolist(), right.tolist()) if a < b})
    for i, j in pairs:
        a, b = polys[i], polys[j]
        inter = a.intersection(b).area
        area_tol = _area_slack(a, b, part_tolerance(scene.parts[i], size), part_tolerance(scene.parts[j], size), size)
        if inter <= area_tol:
            continue
        a_in_b, b_in_a = a.difference(b).area <= area_tol, b.difference(a).area <= area_tol
        if a_in_b and b_in_a:
            pa, pb = scene.parts[i], scene.parts[j]
            problems.add(paths[j], f"<part {pb.name!r} ({pb.material}) covering the same region as part "
                                   f"{pa.name!r} ({pa.material}, {paths[i]})>",
                         "parts that do not coincide: remove one of the two, or make one smaller so it "
                         "lies inside the other")
            continue
        if a_in_b or b_in_a:
            continue   # nested
        problems.add(paths[j], f"<part {scene.parts[j].name!r} overlapping part {scene.parts[i].name!r} "
                                   f"({paths[i]}) by {inter:.6g} mm^2>",
                         "parts that are apart, touch along a boundary, or lie wholly one inside the other")


def _self_crossing(ring) -> str:
    """' at (x, y) mm' where the boundary crosses itself, or '' when that cannot be found."""
    import shapely
    try:
        return _at(shapely.is_valid_reason(shapely.Polygon(ring)))
    except Exception:
        return ""


def _oriented_loops(part: Part) -> list[Loop]:
    """Outer loop counter-clockwise, holes clockwise: the material is then left of every edge."""
    out = []
    for k, loop in enumerate(part.loops):
        ccw = loop.signed_area() > 0
        want_ccw = k == 0
        out.append(loop if ccw == want_ccw else Loop(tuple(e.reversed() for e in reversed(loop.edges))))
    return out


@dataclass
class _Piece:
    edge: Edge
    part: int
    face_label: tuple[str, str]


def _split_points(a: Edge, b: Edge, tol: float) -> list[float]:
    """Fractions along `a` where `b` starts or ends, if `b` lies on `a`'s line/circle and overlaps it."""
    if a.is_arc != b.is_arc:
        return []
    if not a.is_arc:
        ax, ay = a.start
        dx, dy = a.end[0] - ax, a.end[1] - ay
        L = math.hypot(dx, dy)
        ux, uy = dx / L, dy / L
        out = []
        params = []
        for p in (b.start, b.end):
            px, py = p[0] - ax, p[1] - ay
            if abs(px * uy - py * ux) > tol:
                return []
            params.append((px * ux + py * uy) / L)
        lo, hi = min(params), max(params)
        if hi <= tol / L or lo >= 1 - tol / L:
            return []
        for t in params:
            if tol / L < t < 1 - tol / L:
                out.append(t)
        return out
    if math.dist(a.arc_center, b.arc_center) > tol or abs(a.radius - b.radius) > tol:
        return []
    a0, sw = a.arc_angles()
    cx, cy = a.arc_center
    out = []
    params = []
    for p in (b.start, b.end):
        ang = math.atan2(p[1] - cy, p[0] - cx)
        rel = ((ang - a0) * (1 if sw > 0 else -1)) % (2 * math.pi)
        params.append(rel / abs(sw))
    dtol = tol / (a.radius * abs(sw))
    # b overlaps a if its midpoint lies within a
    mid = b.point_at(0.5)
    mang = math.atan2(mid[1] - cy, mid[0] - cx)
    mrel = ((mang - a0) * (1 if sw > 0 else -1)) % (2 * math.pi) / abs(sw)
    inside = [dtol < t < 1 - dtol for t in params]
    if not (0 < mrel < 1 or any(inside)):
        return []
    return [t for t, ok in zip(params, inside) if ok]


def _split_edge(e: Edge, fractions: list[float]) -> list[Edge]:
    from dataclasses import replace
    if not fractions:
        return [e]
    ts = sorted(set(round(f, 15) for f in fractions))
    pts = [e.start] + [e.point_at(t) for t in ts] + [e.end]
    return [replace(e, start=pts[k], end=pts[k + 1]) for k in range(len(pts) - 1)]


def _bbox(e: Edge) -> tuple[float, float, float, float]:
    if e.is_arc:
        cx, cy = e.arc_center
        r = e.radius
        return (cx - r, cy - r, cx + r, cy + r)
    return (min(e.start[0], e.end[0]), min(e.start[1], e.end[1]),
            max(e.start[0], e.end[0]), max(e.start[1], e.end[1]))


def _shared_pieces(pieces: list[_Piece], tol: float) -> list[_Piece]:
    """Split every edge where an edge of another part starts or ends on it.

    Candidate pairs come from an R-tree of the edges' bounding boxes in one bulk query, so a
    scene with many edges (a prism sheet of thousands of facets) is not compared pair by pair."""
    import shapely
    n = len(pieces)
    if n == 0:
        return pieces
    boxes = np.array([_bbox(p.edge) for p in pieces])
    parts = np.array([p.part for p in pieces])
    if len(np.unique(parts)) < 2:
        return pieces
    geoms = shapely.box(boxes[:, 0] - tol, boxes[:, 1] - tol, boxes[:, 2] + tol, boxes[:, 3] + tol)
    tree = shapely.STRtree(geoms)
    left, right = tree.query(geoms, predicate="intersects")
    other = parts[left] != parts[right]
    cuts: list[list[float]] = [[] for _ in range(n)]
    for i, j in zip(left[other].tolist(), right[other].tolist()):
        cuts[i].extend(_split_points(pieces[i].edge, pieces[j].edge, tol))
    out = []
    for i, p in enumerate(pieces):
        for e in _split_edge(p.edge, cuts[i]):
            out.append(_Piece(e, p.part, p.face_label))
    return out


def _coincident_groups(pieces: list[_Piece], tol: float) -> list[list[int]]:
    """Group pieces that are the same edge (same ends, either direction, same kind).

    Midpoints are bucketed on a grid of cell size `tol`; each piece is compared with the pieces
    in its own and the neighbouring cells, so near-equal floats never fall on two sides of a
    rounding boundary."""
    cells: dict[tuple[int, int], list[int]] = {}
    group_of: list[int] = []
    groups: list[list[int]] = []
    for idx, p in enumerate(pieces):
        e = p.edge
        mx, my = e.point_at(0.5)
        cx, cy = int(math.floor(mx / tol)), int(math.floor(my / tol))
        match = -1
        for i in (cx - 1, cx, cx + 1):
            for j in (cy - 1, cy, cy + 1):
                for other in cells.get((i, j), ()):
                    o = pieces[other].edge
                    if o.is_arc != e.is_arc or pieces[other].part == p.part:
                        continue
                    same = math.dist(o.start, e.start) < tol and math.dist(o.end, e.end) < tol
                    flipped = math.dist(o.start, e.end) < tol and math.dist(o.end, e.start) < tol
                    if same or flipped:
                        match = group_of[other]
        if match < 0:
            group_of.append(len(groups))
            groups.append([idx])
        else:
            group_of.append(match)
            groups[match].append(idx)
        cells.setdefault((cx, cy), []).append(idx)
    return groups


def compile_scene(scene: Scene, check: bool = True) -> CompiledScene:
    """Check the scene and flatten it to arrays.  Raises SceneError listing every problem."""
    import shapely
    problems = Problems()
    materials = resolve_materials(scene, problems)
    if check:
        check_geometry(scene, problems)
    problems.raise_if_errors()

    size = scene.size_hint()
    tol = 1e-9 * max(size, 1e-3)
    n_parts = len(scene.parts)
    polys = [p.to_shapely(part_tolerance(p, size)) for p in scene.parts]
    areas = [p.area() for p in scene.parts]

    # parent of each part: the smallest part that contains it.  Partial overlaps were refused by
    # the check, so a part whose interior point lies inside a larger part is nested in it.
    # Candidates come from one bulk R-tree query of intersecting shapes.
    parent = [-1] * n_parts
    candidates: list[list[int]] = [[] for _ in range(n_parts)]
    if n_parts > 1:
        tree = shapely.STRtree(polys)
        left, right = tree.query(polys, predicate="intersects")
        for i, j in zip(left.tolist(), right.tolist()):
            if i != j and areas[j] > areas[i]:
                candidates[i].append(j)
    for i in range(n_parts):
        if not candidates[i]:
            continue
        inner = polys[i].point_on_surface()
        best = -1
        for j in sorted(candidates[i]):
            if polys[j].contains(inner) and (best < 0 or areas[j] < areas[best]):
                best = j
        parent[i] = best

    pieces: list[_Piece] = []
    from dataclasses import replace
    for pi, part in enumerate(scene.parts):
        # name unnamed edges in the order written, before clockwise loops are reversed
        named = [Loop(tuple(e if e.face else replace(e, face=f"edge {j + 1}" if k == 0 else f"hole {k} edge {j + 1}")
                            for j, e in enumerate(loop.edges))) for k, loop in enumerate(part.loops)]
        for loop in _oriented_loops(replace(part, outer=named[0], holes=tuple(named[1:]))):
            for e in loop.edges:
                pieces.append(_Piece(e, pi, (part.name, e.face)))
    pieces = _shared_pieces(pieces, tol * 1e3)

    groups = _coincident_groups(pieces, tol * 1e3)

    media: list[Material] = [materials[scene.ambient]]
    medium_names = [f"ambient ({scene.ambient})"]
    medium_part = [-1]
    for part in scene.parts:
        media.append(materials[part.material])
        medium_names.append(part.name)
        medium_part.append(len(medium_part) - 1)

    def outside_of(pi: int) -> int:
        return parent[pi] + 1  # medium id: parent part or ambient (0)

    face_index: dict[tuple[str, str], int] = {}
    rows = []
    for members in groups:
        first = pieces[members[0]]
        e = first.edge
        pa = first.part
        other = -1
        left = pa + 1            # material of the owning part lies left of the edge
        right = outside_of(pa)
        treat = e.treatment
        if len(members) > 1:
            second = pieces[members[1]]
            pb = second.part
            other = pb
            same_dir = math.dist(second.edge.start, e.start) < math.dist(second.edge.start, e.end)
            if not same_dir:
                right = pb + 1                       # cemented neighbours
            else:                                    # nested parts sharing a boundary
                inner, outer = (pa, pb) if areas[pa] <= areas[pb] else (pb, pa)
                left, right = inner + 1, outside_of(outer)
            if treat.kind == BARE:
                treat = second.edge.treatment
        fid = face_index.setdefault(first.face_label, len(face_index))
        # right of travel is the normal side for a line; for an arc the normal points away
        # from the centre, which is the right side only for a counter-clockwise arc.
        plus, minus = right, left
        if e.is_arc and not e.ccw:
            plus, minus = left, right
        rows.append((e, plus, minus, TREATMENT_CODE[treat.kind], treat.reflectance, pa, other, fid, -1))

    # detectors: pass-through edges; the medium is whatever the ray is already in
    for di, det in enumerate(scene.detectors):
        e = Edge(det.start, det.end, face=det.name)
        code = T_DETECT_ABSORB if det.absorbing else T_DETECT_MONITOR
        rows.append((e, -1, -1, code, 0.0, -1, -1, -1, di))

    n = len(rows)
    arr = {k: np.zeros(n) for k in ("x0", "y0", "x1", "y1", "cx", "cy", "radius", "a0", "sweep", "reflectance")}
    ints = {k: np.full(n, -1, dtype=np.int64) for k in ("med_plus", "med_minus", "part", "other_part", "face", "detector")}
    treatment = np.zeros(n, dtype=np.int8)
    is_arc = np.zeros(n, dtype=bool)
    edges = []
    for i, (e, plus, minus, code, refl, pa, other, fid, di) in enumerate(rows):
        edges.append(e)
        arr["x0"][i], arr["y0"][i] = e.start
        arr["x1"][i], arr["y1"][i] = e.end
        if e.is_arc:
            is_arc[i] = True
            arr["cx"][i], arr["cy"][i] = e.arc_center
            arr["radius"][i] = e.radius
            arr["a0"][i], arr["sweep"][i] = e.arc_angles()
        ints["med_plus"][i], ints["med_minus"][i] = plus, minus
        treatment[i] = code
        arr["reflectance"][i] = refl
        ints["part"][i], ints["other_part"][i], ints["face"][i], ints["detector"][i] = pa, other, fid, di

    return CompiledScene(
        **arr, **ints, is_arc=is_arc, treatment=treatment,
        face_labels=list(face_index), media=media, medium_names=medium_names,
        medium_part=np.array(medium_part, dtype=np.int64), part_names=[p.name for p in scene.parts],
        detectors=list(scene.detectors), scale=size, eps=1e-9 * max(size, 1e-3), edges=edges,
        acceptance=[(d.acceptance.direction(scene.sources), float(d.acceptance.half_angle_deg))
                    if d.acceptance is not None else None for d in scene.detectors])
