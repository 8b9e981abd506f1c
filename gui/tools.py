"""Canvas tools: what a click or drag does.

Every tool receives points in scene millimetres through press / move / release / click / hover
(the canvas maps mouse events to these, and tests call them directly).  Drags always compute
the new scene from the scene at the start of the drag plus the total movement, so a long drag
does not accumulate rounding, and all steps of one drag form one undo step.
"""
from __future__ import annotations

import math
from dataclasses import replace

from raytrace.geometry import ShapeSpec
from raytrace.scene import Detector, Source

from . import arcs, edits, measure
from .document import new_drag_token
from .snap import snap_index
from .typed import TypedError, parse_number, parse_point

SELECT, ROTATE, POLYGON, RECTANGLE, SOURCE_TOOL, DETECTOR_TOOL = (
    "select", "rotate", "polygon", "rectangle", "source", "detector")
ARC, HOLE, MEASURE, ZOOM_BOX = "arc", "hole", "measure", "zoom box"


class Tool:
    name = ""
    hint = ""

    def __init__(self, canvas):
        self.canvas = canvas

    @property
    def doc(self):
        return self.canvas.doc

    def press(self, x: float, y: float) -> bool:   # True: this tool takes the drag
        return False

    def move(self, x: float, y: float) -> None:
        pass

    def release(self, x: float, y: float) -> None:
        pass

    def click(self, x: float, y: float, double: bool = False) -> bool:
        return False

    def hover(self, x: float, y: float) -> None:
        pass

    def cancel(self) -> None:
        self.canvas.set_preview(None)

    def key_enter(self) -> None:
        pass

    def key_backspace(self) -> None:
        pass

    # typed input (see gui/typed.py): tools that take it set a prompt and place the point
    @property
    def typed_prompt(self) -> str:
        return ""

    def last_point(self):
        """The point a typed length or @dx, dy is measured from, or None."""
        return None

    def typed(self, text: str, cursor) -> None:
        """Place the typed point; raises TypedError with a message for the user."""
        self.place(parse_point(text, self.last_point(), cursor))

    def place(self, p) -> None:
        """Put the tool's next point exactly at p (a typed point is never snapped)."""

    def preview(self, p) -> None:
        """Show what the next point at p would draw (the mouse, or text being typed)."""

    def preview_typed(self, text: str, cursor) -> None:
        """Preview the text typed so far, when it already reads as a point."""
        try:
            self.preview(parse_point(text, self.last_point(), cursor))
        except TypedError:
            pass


class SelectTool(Tool):
    """Pick and drag: vertices of the selected part, source aim handles, detector ends,
    sources, detectors and whole parts."""

    name = SELECT
    hint = "Click to select; drag a part, a vertex, a source, its aim handle or a detector end"

    def __init__(self, canvas):
        super().__init__(canvas)
        self._drag = None

    def press(self, x, y):
        target = self.canvas.pick(x, y)
        if target is None:
            self.canvas.select(None)
            return False
        kind, index, sub = target
        self.canvas.select((kind, index))
        self._drag = (target, self.doc.scene, (x, y), new_drag_token())
        return True

    def move(self, x, y):
        if self._drag is None:
            return
        (kind, index, sub), base, (x0, y0), token = self._drag
        c = self.canvas
        scene = base
        if kind == edits.PART:
            part = base.parts[index]
            if sub is not None and sub[0] == "vertex":
                new = edits.move_vertex(part, sub[1], c.snap((x, y), ignore=(index, 0, sub[1])))
                text = f"move vertex {sub[1] + 1} of {part.name}"
            else:
                dx, dy = c.snap_delta(edits.part_pivot(part), x - x0, y - y0)
                new = edits.move_part(part, dx, dy)
                text = f"move {part.name}"
            scene = edits.replace_part(base, index, new)
        elif kind == edits.SOURCE:
            src = base.sources[index]
            if sub == "aim":
                new = edits.aim_source(src, (x, y))
                text = f"aim {src.name}"
            else:
                new = replace(src, position=c.snap((src.position[0] + x - x0, src.position[1] + y - y0)))
                text = f"move {src.name}"
            scene = edits.replace_source(base, index, new)
        elif kind == edits.DETECTOR:
            det = base.detectors[index]
            if sub in ("start", "end"):
                p = c.snap((x, y))
                other = det.end if sub == "start" else det.start
                if math.dist(p, other) > 0:
                    det2 = replace(det, **{sub: p})
                else:
                    det2 = det
                text = f"move {sub} of {det.name}"
            else:
                dx, dy = c.snap_delta(det.start, x - x0, y - y0)
                det2 = edits.move_detector(det, dx, dy)
                text = f"move {det.name}"
            scene = edits.replace_detector(base, index, det2)
        else:
            return
        self.doc.apply(scene, text, token)

    def release(self, x, y):
        self.move(x, y)
        self._drag = None
        self.canvas.overlay.show_snap(None)     # this tool shows the marker only while dragging

    def click(self, x, y, double=False):
        target = self.canvas.pick(x, y)
        self.canvas.select(None if target is None else (target[0], target[1]))
        return target is not None


class RotateTool(Tool):
    """Drag around a part, source or detector to turn it about its pivot."""

    name = ROTATE
    hint = "Drag a part, source or detector to rotate it"

    def __init__(self, canvas):
        super().__init__(canvas)
        self._drag = None

    def press(self, x, y):
        target = self.canvas.pick(x, y)
        if target is None:
            return False
        kind, index, _ = target
        self.canvas.select((kind, index))
        base = self.doc.scene
        if kind == edits.PART:
            pivot = edits.part_pivot(base.parts[index])
        elif kind == edits.SOURCE:
            pivot = base.sources[index].position
        else:
            d = base.detectors[index]
            pivot = ((d.start[0] + d.end[0]) / 2, (d.start[1] + d.end[1]) / 2)
        a0 = math.degrees(math.atan2(y - pivot[1], x - pivot[0]))
        self._drag = (kind, index, base, pivot, a0, new_drag_token())
        return True

    def angle(self, x, y) -> float:
        kind, index, base, pivot, a0, token = self._drag
        da = math.degrees(math.atan2(y - pivot[1], x - pivot[0])) - a0
        da = (da + 180.0) % 360.0 - 180.0
        return float(round(da)) if self.canvas.snapping else da

    def move(self, x, y):
        if self._drag is None:
            return
        kind, index, base, pivot, a0, token = self._drag
        da = self.angle(x, y)
        if kind == edits.PART:
            p = base.parts[index]
            scene = edits.replace_part(base, index, edits.rotate_part(p, da))
            name = p.name
        elif kind == edits.SOURCE:
            s = base.sources[index]
            scene = edits.replace_source(base, index, edits.rotate_source(s, da))
            name = s.name
        else:
            d = base.detectors[index]
            scene = edits.replace_detector(base, index, edits.rotate_detector(d, da))
            name = d.name
        self.doc.apply(scene, f"rotate {name}", token)

    def release(self, x, y):
        self.move(x, y)
        self._drag = None


class PolygonTool(Tool):
    """Click the vertices of a new part; close it by clicking the first vertex, double-clicking
    or pressing Enter.  Backspace takes back the last vertex, Esc abandons the part."""

    name = POLYGON
    hint = ("Click vertices (or type x, y / length<angle); click the first one, double-click or "
            "press Enter to close; Esc cancels")

    def __init__(self, canvas):
        super().__init__(canvas)
        self.points: list[tuple[float, float]] = []

    def click(self, x, y, double=False):
        p = self.canvas.snap((x, y))
        if self.points and (double or (len(self.points) >= 3 and self.canvas.near(p, self.points[0]))):
            self.finish()
            return True
        self.place(p)
        return True

    def place(self, p):
        if len(self.points) >= 3 and p == self.points[0]:
            self.finish()
            return
        if not self.points or p != self.points[-1]:
            self.points.append(p)
        self.canvas.set_preview(self.points + ([self.canvas.cursor] if self.canvas.cursor else []), closed=False)

    @property
    def typed_prompt(self):
        return f"vertex {len(self.points) + 1}:"

    def last_point(self):
        return self.points[-1] if self.points else None

    def hover(self, x, y):
        self.preview(self.canvas.snap((x, y)))

    def preview(self, p):
        if self.points:
            self.canvas.set_preview(self.points + [p], closed=False)

    def finish(self):
        pts = list(dict.fromkeys(self.points))
        self.points = []
        self.canvas.set_preview(None)
        if len(pts) < 3:
            self.canvas.message(f"A {self.what} needs at least 3 vertices")
            return
        self.add(pts)

    what = "part"

    def add(self, pts):
        part = edits.polygon_part(pts, self.canvas.default_material, "part")
        scene = edits.add_part(self.doc.scene, part)
        self.doc.apply(scene, f"add {scene.parts[-1].name}")
        self.canvas.select((edits.PART, len(scene.parts) - 1))

    def key_enter(self):
        self.finish()

    def key_backspace(self):
        if self.points:
            self.points.pop()
            self.canvas.set_preview(self.points or None, closed=False)

    def cancel(self):
        self.points = []
        super().cancel()


class HoleTool(PolygonTool):
    """Cut a hole in a part: click its vertices like a new part, or drag from the centre of a
    round hole to its rim.  The hole goes into the smallest part that holds all of it."""

    name = HOLE
    hint = ("Click the vertices of a hole inside a part (Enter closes), or drag from the centre "
            "of a round hole to its rim")
    what = "hole"

    def __init__(self, canvas):
        super().__init__(canvas)
        self._centre = None

    def press(self, x, y):
        if self.points:          # a polygon hole is under way: the drag pans
            return False
        self._centre = self.canvas.snap((x, y))
        return True

    def _radius(self, x, y) -> float:
        return math.dist(self._centre, self.canvas.snap((x, y)))

    def move(self, x, y):
        if self._centre is None:
            return
        r = self._radius(x, y)
        cx, cy = self._centre
        self.canvas.set_preview([(cx + r * math.cos(k * math.pi / 24), cy + r * math.sin(k * math.pi / 24))
                                 for k in range(48)], closed=True)

    def release(self, x, y):
        if self._centre is None:
            return
        centre, r = self._centre, self._radius(x, y)
        self._centre = None
        self.canvas.set_preview(None)
        if r > 0:
            self.cut(lambda face: edits.round_hole(centre, r, face))

    def add(self, pts):
        self.cut(lambda face: edits.polygon_hole(pts, face))

    def cut(self, make) -> None:
        """Add the hole `make(face name)` to the part that holds it, or say why not."""
        scene = self.doc.scene
        index = edits.part_for_hole(scene, make("hole"))
        if index is None:
            self.canvas.message("A hole must lie inside a part, clear of its boundary and its other holes")
            return
        part = scene.parts[index]
        face = edits.free_hole_name(part)
        self.doc.apply(edits.replace_part(scene, index, edits.add_hole(part, make(face))),
                       f"cut {face} in {part.name}")
        self.canvas.select((edits.PART, index))

    def cancel(self):
        self._centre = None
        super().cancel()


class _DragTool(Tool):
    """A tool that draws from the point where the drag began to where it ends: shows
    `outline(a, b)` while dragging and calls `finish(a, b)` on release (snapped points).
    Typed points work as the two ends too: the first typed point starts, the second ends."""

    closed = False
    snaps = True

    def __init__(self, canvas):
        super().__init__(canvas)
        self._start = None

    def _point(self, x, y):
        return self.canvas.snap((x, y)) if self.snaps else (float(x), float(y))

    def press(self, x, y):
        self._start = self._point(x, y)
        return True

    def move(self, x, y):
        self.preview(self._point(x, y))

    def hover(self, x, y):
        # after a typed first point the outline follows the cursor; before, the snap marker
        # shows where a press would land
        self.preview(self._point(x, y))

    def preview(self, p):
        if self._start is not None:
            self.canvas.set_preview(self.outline(self._start, p), closed=self.closed)

    def release(self, x, y):
        if self._start is not None:
            self.place(self._point(x, y))

    def click(self, x, y, double=False):
        if self._start is None:     # a click is no drag; only ends one begun by a typed point
            return False
        self.place(self._point(x, y))
        return True

    @property
    def typed_prompt(self):
        return "first corner:" if self._start is None else "second corner:"

    def last_point(self):
        return self._start

    def place(self, p):
        if self._start is None:
            self._start = p
            return
        a = self._start
        self._start = None
        self.canvas.set_preview(None)
        self.finish(a, p)

    def cancel(self):
        self._start = None
        super().cancel()

    def outline(self, a, b):
        return [a, b]

    def finish(self, a, b):
        raise NotImplementedError


class RectangleTool(_DragTool):
    """Drag a rectangle to add a rectangular part (a builder part: width and height stay
    editable in the side panel)."""

    name = RECTANGLE
    hint = "Drag to draw a rectangular part"
    closed = True

    def outline(self, a, b):
        (x0, y0), (x1, y1) = a, b
        return [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]

    def finish(self, a, b):
        (x0, y0), (x1, y1) = a, b
        w, h = abs(x1 - x0), abs(y1 - y0)
        if w <= 0 or h <= 0:
            return
        spec = ShapeSpec("rectangle", {"width": w, "height": h}, ((x0 + x1) / 2, (y0 + y1) / 2), 0.0)
        scene = edits.add_part(self.doc.scene, edits.shape_part(spec, self.canvas.default_material, "block"))
        self.doc.apply(scene, f"add {scene.parts[-1].name}")
        self.canvas.select((edits.PART, len(scene.parts) - 1))


class SourceTool(Tool):
    """Click to place a beam; drag from the position to aim it."""

    name = SOURCE_TOOL
    hint = "Click to place a source; drag to place and aim it"

    def __init__(self, canvas):
        super().__init__(canvas)
        self._index = None
        self._token = 0

    def _place(self, x, y):
        width = max(self.canvas.pixel_mm() * 60, 1e-3)
        width = float(f"{width:.1g}")
        src = Source("source", "beam", (float(x), float(y)), 0.0, width=width)
        scene = edits.add_source(self.doc.scene, src)
        self._token = new_drag_token()
        self.doc.apply(scene, f"add {scene.sources[-1].name}", self._token)
        self._index = len(scene.sources) - 1
        self.canvas.select((edits.SOURCE, self._index))

    def click(self, x, y, double=False):
        self._place(*self.canvas.snap((x, y)))
        self._index = None
        return True

    @property
    def typed_prompt(self):
        return "source position:"

    def place(self, p):
        self._place(*p)
        self._index = None

    def press(self, x, y):
        self._place(*self.canvas.snap((x, y)))
        return True

    def move(self, x, y):
        if self._index is None:
            return
        scene = self.doc.scene
        src = scene.sources[self._index]
        self.doc.apply(edits.replace_source(scene, self._index, edits.aim_source(src, (x, y))),
                       f"add {src.name}", self._token)

    def release(self, x, y):
        self.move(x, y)
        self._index = None


class DetectorTool(_DragTool):
    """Drag from one end of a new detector to the other."""

    name = DETECTOR_TOOL
    hint = "Drag from one end of the detector to the other"

    @property
    def typed_prompt(self):
        return "detector start:" if self._start is None else "detector end:"

    def finish(self, a, b):
        if math.dist(a, b) <= 0:
            return
        scene = edits.add_detector(self.doc.scene, Detector("detector", a, b))
        self.doc.apply(scene, f"add {scene.detectors[-1].name}")
        self.canvas.select((edits.DETECTOR, len(scene.detectors) - 1))


class ArcTool(Tool):
    """Bend an edge of a part (or of a hole) into a circular arc: drag the edge to the point the
    arc passes through, or click the edge and type its radius (> 0 bulges out of the material,
    < 0 into it, 0 straightens) or click the point it passes through."""

    name = ARC
    hint = ("Drag an edge to bend it through a point; or click an edge, then type its radius "
            "(negative: inward, 0: straight) or click a point on the arc")

    def __init__(self, canvas):
        super().__init__(canvas)
        self._chosen = None         # ((part, loop, edge), the scene it was chosen in)
        self._drag = None

    @property
    def edge(self):
        """The (part, loop, edge) chosen by a click, while the scene is still the one it was
        chosen in (an undo or another file in between forgets it)."""
        if self._chosen is None or self._chosen[1] is not self.doc.scene:
            return None
        return self._chosen[0]

    @edge.setter
    def edge(self, ref):
        self._chosen = None if ref is None else (ref, self.doc.scene)

    def _edge_at(self, x, y):
        hit = snap_index(self.doc.scene).edge_near((x, y), self.canvas.pick_mm())
        return None if hit is None else (hit.part, hit.loop, hit.index)

    def _bent(self, scene, ref, through):
        pi, li, ei = ref
        return edits.replace_part(scene, pi, arcs.bend_through(scene.parts[pi], li, ei, through))

    def _label(self, ref) -> str:
        part = self.doc.scene.parts[ref[0]]
        e = part.loops[ref[1]].edges[ref[2]]
        return f"{part.name} / {e.face or f'edge {ref[2] + 1}'}"

    def _show_edge(self, ref, part=None) -> None:
        """Outline one edge (of `part`, by default the scene's) as the preview."""
        part = part or self.doc.scene.parts[ref[0]]
        e = part.loops[ref[1]].edges[ref[2]]
        self.canvas.set_preview(e.flattened(1e-3 * max(e.length(), 1e-9)) + [e.end])

    def hover(self, x, y):
        if self.edge is not None:   # the arc the next click would make
            self.preview(self.canvas.snap((x, y)))
            return
        ref = self._edge_at(x, y)
        if ref is None:
            self.canvas.set_preview(None)
        else:
            self._show_edge(ref)

    def preview(self, p):
        if self.edge is not None:
            pi, li, ei = self.edge
            self._show_edge(self.edge, arcs.bend_through(self.doc.scene.parts[pi], li, ei, p))

    def preview_typed(self, text, cursor):
        if self.edge is None:
            return
        try:
            radius = parse_number(text)
        except TypedError:      # not one number: perhaps the point the arc passes through
            super().preview_typed(text, cursor)
            return
        pi, li, ei = self.edge
        try:
            self._show_edge(self.edge, arcs.bend_by_radius(self.doc.scene.parts[pi], li, ei, radius))
        except arcs.ArcError:
            self._show_edge(self.edge)

    def press(self, x, y):
        ref = self._edge_at(x, y)
        if ref is None:
            return False
        self.edge = None
        self._drag = (ref, self.doc.scene, new_drag_token())
        return True

    def move(self, x, y):
        if self._drag is not None:
            ref, base, token = self._drag
            self.canvas.set_preview(None)
            self.doc.apply(self._bent(base, ref, self.canvas.snap((x, y))), f"bend {self._label(ref)}", token)

    def release(self, x, y):
        if self._drag is not None:
            self.move(x, y)
            self._check(self._drag[0])
            self._drag = None

    def click(self, x, y, double=False):
        if self.edge is None:
            self.edge = self._edge_at(x, y)
            if self.edge is None:
                return False
            self._show_edge(self.edge)
            self.canvas.message(f"{self._label(self.edge)}: type its radius, or click a point for the arc")
            return True
        self.place(self.canvas.snap((x, y)))
        return True

    @property
    def typed_prompt(self):
        return "" if self.edge is None else f"radius of {self._label(self.edge)} (or x, y on the arc):"

    def typed(self, text, cursor):
        if self.edge is None:
            raise TypedError("click the edge to bend first")
        try:
            radius = parse_number(text)
        except TypedError:
            try:
                through = parse_point(text, None)
            except TypedError:
                raise TypedError(f"could not read {text!r}: expected the radius in mm (negative bends "
                                 "inward, 0 straightens) or x, y of a point on the arc") from None
            self.place(through)
            return
        pi, li, ei = self.edge
        try:
            part = arcs.bend_by_radius(self.doc.scene.parts[pi], li, ei, radius)
        except arcs.ArcError as exc:
            raise TypedError(f"{self._label(self.edge)}: expected {exc}") from None
        self._commit(edits.replace_part(self.doc.scene, pi, part), f"radius {radius:g} mm")

    def place(self, p):
        if self.edge is not None:
            self._commit(self._bent(self.doc.scene, self.edge, p), "arc through a point")

    def _commit(self, scene, how):
        ref, self.edge = self.edge, None
        self.canvas.set_preview(None)
        self.doc.apply(scene, f"bend {self._label(ref)} ({how})")
        self._check(ref)

    def _check(self, ref) -> None:
        """Say so when the bent edge makes the part cross itself (the trace would refuse it)."""
        part = self.doc.scene.parts[ref[0]]
        if not part.to_shapely(1e-4 * max(part.size_hint(), 1e-6)).is_valid:
            self.canvas.message(f"{part.name} now crosses itself and cannot be traced: "
                                "bend the edge less, or undo (Ctrl+Z)")
        else:
            r = arcs.signed_radius(part, ref[1], ref[2])
            self.canvas.message(f"{self._label(ref)}: " + (f"radius {r:.6g} mm" if r else "straight"))
        self.canvas.select((edits.PART, ref[0]))

    def cancel(self):
        self.edge = None
        self._drag = None
        super().cancel()


class MeasureTool(Tool):
    """Click two points for a distance, a third for the angle at the second; points snap to
    vertices and edges.  A drag measures a distance too.  Nothing in the scene changes."""

    name = MEASURE
    hint = "Click two points for their distance, a third for the angle at the second; Esc clears"

    def __init__(self, canvas):
        super().__init__(canvas)
        self.points = []
        self._dragging = False

    def _snap(self, x, y):
        return self.canvas.snap((x, y), geometry=True)

    def _show(self, pts) -> None:
        self.canvas.set_preview(pts, closed=False)
        if len(pts) == 2:
            label, text = measure.distance_readout(*pts)
            at = ((pts[0][0] + pts[1][0]) / 2, (pts[0][1] + pts[1][1]) / 2)
        elif len(pts) == 3:
            label, text = measure.angle_readout(*pts)
            at = pts[1]
        else:
            return
        self.canvas.overlay.show_readout(text, at, label)

    def press(self, x, y):
        self.points = [self._snap(x, y)]
        self._dragging = True
        return True

    def move(self, x, y):
        if self._dragging:
            self._show([self.points[0], self._snap(x, y)])

    def release(self, x, y):
        if self._dragging:
            self._dragging = False
            self.place(self._snap(x, y))

    def hover(self, x, y):
        self.preview(self._snap(x, y))

    def preview(self, p):
        if 0 < len(self.points) < 3 and not self._dragging:
            self._show(self.points + [p])

    def click(self, x, y, double=False):
        self.place(self._snap(x, y))
        return True

    @property
    def typed_prompt(self):
        return "point to measure:"

    def last_point(self):
        return self.points[-1] if 0 < len(self.points) < 3 else None

    def place(self, p):
        self.points = [p] if len(self.points) >= 3 else self.points + [p]
        if len(self.points) == 1:
            self.canvas.overlay.show_readout("")
        self._show(self.points)

    def cancel(self):
        self.points = []
        self._dragging = False
        self.canvas.overlay.show_readout("")
        super().cancel()


class ZoomBoxTool(_DragTool):
    """Drag a box to zoom into it; then the previous tool comes back."""

    name = ZOOM_BOX
    hint = "Drag a box to zoom into it"
    closed = True
    snaps = False

    outline = RectangleTool.outline

    @property
    def typed_prompt(self):
        return ""

    def finish(self, a, b):
        self.canvas.zoom_to_box(a, b)
        self.canvas.restore_tool()


TOOLS = {t.name: t for t in (SelectTool, RotateTool, PolygonTool, RectangleTool, SourceTool, DetectorTool,
                             ArcTool, HoleTool, MeasureTool, ZoomBoxTool)}
