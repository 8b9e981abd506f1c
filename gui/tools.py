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

from . import edits
from .document import new_drag_token

SELECT, ROTATE, POLYGON, RECTANGLE, SOURCE_TOOL, DETECTOR_TOOL = (
    "select", "rotate", "polygon", "rectangle", "source", "detector")


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
                new = edits.move_vertex(part, sub[1], c.snap((x, y)))
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
    hint = "Click vertices; click the first one, double-click or press Enter to close; Esc cancels"

    def __init__(self, canvas):
        super().__init__(canvas)
        self.points: list[tuple[float, float]] = []

    def click(self, x, y, double=False):
        p = self.canvas.snap((x, y))
        if self.points and (double or (len(self.points) >= 3 and self.canvas.near(p, self.points[0]))):
            self.finish()
            return True
        if not self.points or p != self.points[-1]:
            self.points.append(p)
        self.hover(x, y)
        return True

    def hover(self, x, y):
        if self.points:
            self.canvas.set_preview(self.points + [self.canvas.snap((x, y))], closed=False)

    def finish(self):
        pts = list(dict.fromkeys(self.points))
        self.points = []
        self.canvas.set_preview(None)
        if len(pts) < 3:
            self.canvas.message("A part needs at least 3 vertices")
            return
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


class _DragTool(Tool):
    """A tool that draws from the point where the drag began to where it ends: shows
    `outline(a, b)` while dragging and calls `finish(a, b)` on release (snapped points)."""

    closed = False

    def __init__(self, canvas):
        super().__init__(canvas)
        self._start = None

    def press(self, x, y):
        self._start = self.canvas.snap((x, y))
        return True

    def move(self, x, y):
        if self._start is not None:
            self.canvas.set_preview(self.outline(self._start, self.canvas.snap((x, y))), closed=self.closed)

    def release(self, x, y):
        if self._start is None:
            return
        a, b = self._start, self.canvas.snap((x, y))
        self._start = None
        self.canvas.set_preview(None)
        self.finish(a, b)

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
        src = Source("source", "beam", self.canvas.snap((x, y)), 0.0, width=width)
        scene = edits.add_source(self.doc.scene, src)
        self._token = new_drag_token()
        self.doc.apply(scene, f"add {scene.sources[-1].name}", self._token)
        self._index = len(scene.sources) - 1
        self.canvas.select((edits.SOURCE, self._index))

    def click(self, x, y, double=False):
        self._place(x, y)
        self._index = None
        return True

    def press(self, x, y):
        self._place(x, y)
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

    def finish(self, a, b):
        if math.dist(a, b) <= 0:
            return
        scene = edits.add_detector(self.doc.scene, Detector("detector", a, b))
        self.doc.apply(scene, f"add {scene.detectors[-1].name}")
        self.canvas.select((edits.DETECTOR, len(scene.detectors) - 1))


TOOLS = {t.name: t for t in (SelectTool, RotateTool, PolygonTool, RectangleTool, SourceTool, DetectorTool)}
