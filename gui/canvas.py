"""The drawing: parts, sources, detectors, rays and markers on mm axes that pan and zoom.

Geometry is drawn in scene millimetres with cosmetic (screen-width) pens; source and detector
glyphs are sized in screen pixels and rebuilt when the view range changes.  Rays come grouped
by kind and brightness from `raydraw`, one line item per group.
"""
from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import QPointF, Qt, QTimer, Signal
from PySide6.QtGui import QBrush, QPainterPath, QPen
from PySide6.QtWidgets import (QGraphicsPathItem, QHBoxLayout, QLabel, QSizePolicy, QToolTip,
                               QVBoxLayout, QWidget)

from raytrace.scene import EMITTER, POINT, Scene

from . import edits, style
from .arcs import signed_radius
from .escape_rings import Ring, merge_crowded
from .flow_layout import FlowLayout
from .marks import Dots
from .overlay import Overlay, pass_clicks
from .raydraw import (KINDS, LEVEL_ALPHA, LEVELS, RayDrawing, arrow_strokes, escape_reach_for, parts_box,
                      scene_drawing, thinned_for)
from .snap import snap_index
from .spectral import faded_rgb, spectral_rgb
from .tools import TOOLS, SELECT

# Rays are painted with opaque 1-px pens whose colour is already mixed with the background by
# the ray's brightness: measured on the raster engine, 66,000 segments take 0.2 s opaque and
# 1.4-3 s with alpha blending, and wider pens are slower still.

# Legs below 0.1 % of their source ray's flux are drawn only in small fans: in dense ones they
# are a few percent from the background, invisible, yet a third of the painting time.
FAINT_SHOWN_BELOW = 5000

# How long the view must rest after a zoom before crowded fans are thinned anew for it.
RETHIN_AFTER_MS = 150

KIND_COLOUR = {"ray": style.RAY, "escaping": style.ESCAPING, "tir": style.TIR}
KIND_LABEL = {"ray": "ray", "escaping": "escaping", "tir": "after TIR"}
FADE_NOTE = "every leg fades as its flux drops"


def _rgb(colour) -> tuple[int, int, int]:
    return colour.red(), colour.green(), colour.blue()


def _faded(rgb, strength: float):
    """An opaque pen colour for a leg of the given strength (0..1), equally heavy in any hue."""
    return pg.mkColor(*faded_rgb(rgb, strength, _rgb(style.RAY)))


def _spectrum_css() -> str:
    stops = ", ".join(f"stop:{(nm - 380) / 400:.3f} rgb{spectral_rgb(nm)}" for nm in range(380, 781, 20))
    return f"background: qlineargradient(x1:0, y1:0, x2:1, y2:0, {stops});"


def _pen(colour, width=1.5, style_=Qt.SolidLine):
    p = QPen(colour)
    p.setWidthF(width)
    p.setCosmetic(True)
    p.setStyle(style_)
    return p


_NUDGE = {Qt.Key_Left: (-1, 0), Qt.Key_Right: (1, 0), Qt.Key_Up: (0, 1), Qt.Key_Down: (0, -1)}


class _Plot(pg.PlotWidget):
    """The plot widget; says when a paint of the drawing has reached the screen."""

    painted = Signal()

    def paintEvent(self, ev):
        super().paintEvent(ev)
        # after this pass of painting and its flush to the screen, not in the middle of it
        QTimer.singleShot(0, self.painted.emit)


class _View(pg.ViewBox):
    """A view box that offers mouse events to the current tool before panning."""

    def __init__(self, canvas: "Canvas"):
        super().__init__(lockAspect=True, enableMenu=False)
        self.canvas = canvas
        self._tool_drag = False

    def mouseClickEvent(self, ev):
        if ev.button() == Qt.LeftButton:
            p = self.mapSceneToView(ev.scenePos())
            if self.canvas.tool.click(p.x(), p.y(), ev.double()):
                ev.accept()
                return
        super().mouseClickEvent(ev)

    def mouseDragEvent(self, ev, axis=None):
        if ev.button() == Qt.LeftButton:
            if ev.isStart():
                p = self.mapSceneToView(ev.buttonDownScenePos())
                self._tool_drag = self.canvas.tool.press(p.x(), p.y())
            if self._tool_drag:
                ev.accept()
                p = self.mapSceneToView(ev.scenePos())
                if ev.isFinish():
                    self._tool_drag = False
                    self.canvas.tool.release(p.x(), p.y())
                else:
                    self.canvas.tool.move(p.x(), p.y())
                return
        super().mouseDragEvent(ev, axis)

    def keyPressEvent(self, ev):
        # the view box takes focus on a click and would keep "-", "+" and Backspace for its own
        # zoom history; the canvas handles keys (tools, typed points, nudges)
        ev.ignore()


def _entry(*widgets) -> QWidget:
    """Swatch and text kept together when the legend wraps."""
    w = QWidget()
    lay = QHBoxLayout(w)
    lay.setContentsMargins(0, 0, 0, 0)
    lay.setSpacing(4)
    for x in widgets:
        lay.addWidget(x)
    return w


class LegendBar(QWidget):
    """The legend sits under the drawing, never on it; in a narrow window it wraps onto more
    rows.  Why the scene is not traced, if so, has a row of its own in plain text."""

    def __init__(self, parent=None):
        super().__init__(parent)
        outer = QVBoxLayout(self)
        outer.setContentsMargins(6, 2, 6, 2)
        outer.setSpacing(1)
        flow = FlowLayout(spacing=12)
        outer.addLayout(flow)
        self._kind_widgets = []
        items = [(style.RAY, "line", KIND_LABEL["ray"]), (style.TIR, "line", KIND_LABEL["tir"]),
                 (style.ESCAPING, "line", KIND_LABEL["escaping"]), (style.HIT, "dot", "detector hit"),
                 (style.ESCAPE_MARK, "ring", "escape (size = share)"), (style.CUE, "arrow", "direction"),
                 (style.SOURCE, "dot", "source"), (style.DETECTOR, "bar", "detector")]
        entries = []
        for colour, shape, text in items:
            lab = QLabel("\u2192" if shape == "arrow" else "")
            c = colour.name()
            css = {"line": f"background:{c}; min-height:3px; max-height:3px; min-width:22px;",
                   "dot": f"background:{c}; border-radius:5px; min-width:10px; max-width:10px; "
                          f"min-height:10px; max-height:10px;",
                   "ring": f"border:2px solid {c}; border-radius:6px; min-width:9px; max-width:9px; "
                           f"min-height:9px; max-height:9px;",
                   "arrow": f"color:{c}; font-weight: bold;",
                   "bar": f"background:{c}; min-height:5px; max-height:5px; min-width:22px;"}[shape]
            lab.setStyleSheet(css)
            text_label = QLabel(text)
            entry = _entry(lab, text_label)
            entries.append(entry)
            if text in KIND_LABEL.values():
                self._kind_widgets.append(entry)
        # shown instead of the three ray kinds when rays are coloured by wavelength
        self.spectrum_swatch = QLabel()
        self.spectrum_swatch.setStyleSheet(_spectrum_css() + " min-height:5px; max-height:5px; min-width:60px;")
        self.spectrum_text = QLabel("wavelength 380-780 nm")
        self.spectrum_text.setToolTip("Rays are coloured by wavelength; grey outside 380-780 nm")
        self.fade_note = QLabel("(all fade with flux)")
        self.fade_note.setToolTip(FADE_NOTE)
        self.fade_note.setStyleSheet("color: #555")
        self._spectrum_entry = _entry(self.spectrum_swatch, self.spectrum_text)
        for w in [self._spectrum_entry] + entries[:3] + [self.fade_note] + entries[3:]:
            flow.addWidget(w)
        self.problem = QLabel("")
        self.problem.setTextFormat(Qt.PlainText)     # "<part 'a' ...>" is text, not a tag
        self.problem.setWordWrap(True)
        self.problem.setStyleSheet("color: #b00020; font-weight: bold")
        self.problem.setVisible(False)
        outer.addWidget(self.problem)
        self.setSizePolicy(QSizePolicy.Ignored, QSizePolicy.Preferred)
        self.setToolTip("Ray colours: legs that began with total internal reflection and legs "
                        "leaving the scene have their own colours; every leg fades as its flux "
                        "drops, equally in every colour.")
        self.set_colour_by_wavelength(False)

    def set_colour_by_wavelength(self, on: bool) -> None:
        for w in self._kind_widgets:
            w.setVisible(not on)
        self._spectrum_entry.setVisible(on)
        self.spectrum_swatch.setVisible(on)
        self.spectrum_text.setVisible(on)
        self.updateGeometry()

    def show_problem(self, text: str) -> None:
        """Why the rays are missing (the scene cannot be traced as it stands), or nothing; the
        whole text, wrapped, at most about three lines (the rest is in the tooltip)."""
        short = text if len(text) <= 300 else text[:297] + "..."
        self.problem.setText(f"not traced: {short}" if text else "")
        self.problem.setToolTip(text)
        self.problem.setVisible(bool(text))
        self.updateGeometry()


class Canvas(QWidget):
    selection_changed = Signal(object)     # (kind, index) or None
    cursor_moved = Signal(float, float)
    status_message = Signal(str)
    tool_changed = Signal(str)

    def __init__(self, doc, parent=None):
        super().__init__(parent)
        self.doc = doc
        self.scene: Scene = doc.scene
        self.result = None
        self.drawing = RayDrawing()
        self.painted_segments = 0
        self.selection = None
        self.snapping = False
        self.object_snapping = False       # to vertices, edge midpoints, arc centres and edges
        self.cursor = None                 # the mouse in scene mm, once it has moved
        self.grid_step = 1.0
        self.default_material = "PMMA"
        self._preview = None

        self.view = _View(self)
        self.plot = _Plot(viewBox=self.view, background=style.BACKGROUND)
        self.fit_left_out: list[str] = []    # detectors the last fit left outside the view
        self.plot.hideButtons()      # no auto-range "A": Ctrl+0 fits, and it must not show in pictures
        self.plot.setLabel("bottom", "x", units="mm")
        self.plot.setLabel("left", "y", units="mm")
        # a fixed width: an axis that widens for longer tick labels moves the drawing sideways
        # and changes what a fit shows after a zoom
        self.plot.getAxis("left").setWidth(56)
        for ax in ("bottom", "left"):
            a = self.plot.getAxis(ax)
            a.enableAutoSIPrefix(False)
            a.setTextPen(style.AXIS)
            a.setPen(style.AXIS)
        # our own grid of opaque lines under the parts: pyqtgraph's grid is drawn with alpha
        # by the axes over the whole view and made every repaint several times slower
        self._grid_items = []
        for colour in (style.GRID_MINOR, style.GRID_MAJOR):
            g = pg.PlotCurveItem(pen=_pen(colour, 1.0), connect="pairs", antialias=False, skipFiniteCheck=True)
            g.setZValue(-10)
            self.plot.addItem(g, ignoreBounds=True)
            self._grid_items.append(g)
        self._grid_on = True
        self.legend = LegendBar()
        lay = QVBoxLayout(self)
        lay.setContentsMargins(0, 0, 0, 0)
        lay.setSpacing(0)
        lay.addWidget(self.plot, 1)
        lay.addWidget(self.legend)

        self._part_items: list[QGraphicsPathItem] = []
        self._outlines: dict = {}        # id(part) -> (part, tolerance, path, edge points)
        self._part_paths: list[QPainterPath] = []
        self._edge_polys: list[tuple[int, int, int, np.ndarray]] = []   # (part, loop, edge, points)
        self._glyph_items: list[QGraphicsPathItem] = []
        self._problem_items: list[QGraphicsPathItem] = []
        self.problems = []
        self.colour_by_wavelength = False
        self._ray_items: list[pg.PlotCurveItem] = []    # reused between traces, one per group
        # what each ray item shows: (kind name or wavelength bin in nm, level, pen colour, segments)
        self.ray_groups: list[tuple[object, int, object, int]] = []
        # hit marks sit beside the detector line on the side the ray came from, under the line
        self._hits = Dots(style.HIT_PX, style.HIT)      # one item, painted in one call
        self._hits.setZValue(14)
        self._escapes = pg.ScatterPlotItem(pxMode=True, brush=None, pen=_pen(style.ESCAPE_MARK, 2))
        self._escapes.setZValue(11)
        self.escape_rings: list[Ring] = []                  # the rings drawn (crowded ones merged)
        self.escape_xy: list[tuple[float, float]] = []      # where each escape ring is drawn
        self._cues = pg.PlotCurveItem(pen=_pen(style.CUE, 1.3), connect="pairs", antialias=False)
        self._cues.setZValue(10)
        self.plot.addItem(self._cues)
        self._handles = pg.ScatterPlotItem(size=style.HANDLE_PX, pxMode=True, symbol="s",
                                           pen=pg.mkPen(style.HANDLE_EDGE, width=1.2),
                                           brush=pg.mkBrush(style.HANDLE))
        self._handles.setZValue(20)
        self._preview_item = pg.PlotCurveItem(pen=_pen(style.PREVIEW, 1.5, Qt.DashLine))
        self._preview_item.setZValue(21)
        for it in (self._hits, self._escapes, self._handles, self._preview_item):
            self.plot.addItem(it)

        # after an edit the drawing waits a moment for the rays of the new state (see hold_paint)
        self._hold = QTimer(self)
        self._hold.setSingleShot(True)
        self._hold.timeout.connect(self.release_paint)
        # crowded fans are thinned for the view's pixel size: after a zoom the drawing is remade
        # from the rays already traced (no new trace), once the zooming pauses
        self.view_pixel_mm = self.pixel_mm()    # kept for the trace thread, which must not ask the view
        self._rethin = QTimer(self)
        self._rethin.setSingleShot(True)
        self._rethin.setInterval(RETHIN_AFTER_MS)
        self._rethin.timeout.connect(self.thin_for_view)

        self.tools = {name: cls(self) for name, cls in TOOLS.items()}
        self.tool = self.tools[SELECT]
        self._previous_tool = SELECT
        self.overlay = Overlay(self)
        # rings and handles are looked at, not clicked: a scatter item keeps a click on one of
        # its symbols (a 60 px escape ring over a vertex) and the tool never sees it (the hit
        # dots accept no mouse button at all)
        for markers in (self._escapes, self._handles):
            pass_clicks(markers)
        self.view.sigRangeChanged.connect(lambda *_: self._view_changed())
        self.plot.scene().sigMouseMoved.connect(self._mouse_moved)
        self.setMouseTracking(True)

    # ------------------------------------------------------------------ tool API
    def set_tool(self, name: str) -> None:
        self.tool.cancel()
        self.overlay.close()
        self.overlay.show_snap(None)
        if self.tool.name != name:
            self._previous_tool = self.tool.name
        self.tool = self.tools[name]
        self.status_message.emit(self.tool.hint)
        self.tool_changed.emit(name)

    def restore_tool(self) -> None:
        """Back to the tool used before this one (after a one-off like the zoom box)."""
        self.set_tool(self._previous_tool)

    def drag(self, start, end, steps: int = 5, tool: str | None = None) -> None:
        """Drive the current (or named) tool through a drag, as the mouse would."""
        t = self.tools[tool] if tool else self.tool
        if not t.press(*start):
            return
        for k in range(1, steps + 1):
            u = k / steps
            t.move(start[0] + u * (end[0] - start[0]), start[1] + u * (end[1] - start[1]))
        t.release(*end)

    def keyPressEvent(self, ev):
        if ev.key() == Qt.Key_Escape:
            self.tool.cancel()
        elif ev.key() in (Qt.Key_Return, Qt.Key_Enter):
            self.tool.key_enter()
        elif ev.key() == Qt.Key_Backspace:
            self.tool.key_backspace()
        elif ev.key() in _NUDGE and self.selection:
            dx, dy = _NUDGE[ev.key()]
            step = self.grid_step * (10 if ev.modifiers() & Qt.ShiftModifier else 1)
            self.nudge(dx * step, dy * step)
        elif self.overlay.start_typing(ev):
            pass
        else:
            super().keyPressEvent(ev)

    def nudge(self, dx: float, dy: float) -> None:
        """Move the selection by (dx, dy) mm: the arrow keys, one grid step (Shift: ten)."""
        kind, index = self.selection
        s = self.scene
        if kind == edits.PART:
            p = s.parts[index]
            new, name = edits.replace_part(s, index, edits.move_part(p, dx, dy)), p.name
        elif kind == edits.SOURCE:
            src = s.sources[index]
            moved = replace(src, position=(src.position[0] + dx, src.position[1] + dy))
            new, name = edits.replace_source(s, index, moved), src.name
        else:
            d = s.detectors[index]
            new, name = edits.replace_detector(s, index, edits.move_detector(d, dx, dy)), d.name
        self.doc.apply(new, f"nudge {name}")

    # ------------------------------------------------------------------ zoom
    def zoom(self, factor: float) -> None:
        """Zoom in (factor > 1) or out about the middle of the view."""
        self.view.scaleBy((1.0 / factor, 1.0 / factor))

    def zoom_to_box(self, a, b) -> None:
        """Show the box with corners a and b (the aspect stays 1:1, so one side may show more)."""
        (x0, y0), (x1, y1) = a, b
        if abs(x1 - x0) < 2 * self.pixel_mm() and abs(y1 - y0) < 2 * self.pixel_mm():
            return        # a slip of the mouse, not a box
        self.view.setRange(xRange=sorted((x0, x1)), yRange=sorted((y0, y1)), padding=0)

    # ------------------------------------------------------------------ geometry helpers
    def pixel_mm(self) -> float:
        """Millimetres per screen pixel (the view keeps x and y scales equal)."""
        px = self.view.viewPixelSize()
        v = float(max(px[0], px[1])) if px is not None else 0.0
        if not math.isfinite(v) or v <= 0:
            v = max(self.scene.size_hint(), 1.0) / 600
        return v

    def pick_mm(self) -> float:
        """How close the cursor must be to pick or snap, in mm at the current zoom."""
        return style.PICK_PX * self.pixel_mm()

    def snap(self, p, ignore=None, geometry=None):
        """Where a drawn point lands: on a vertex, midpoint, arc centre or edge of a part near it
        (when snapping to geometry: `geometry`, by default the View menu's choice; `ignore` is a
        vertex being dragged), else on the grid when snapping to the grid, else where it is."""
        to_geometry = self.object_snapping if geometry is None else geometry
        if to_geometry:
            hit = snap_index(self.scene).find(p, self.pick_mm(), ignore)
            self.overlay.show_snap(hit)
            if hit is not None:
                return hit.point
        else:
            self.overlay.show_snap(None)
        if not self.snapping or self.grid_step <= 0:
            return (float(p[0]), float(p[1]))
        g = self.grid_step
        return (round(round(p[0] / g) * g, 9), round(round(p[1] / g) * g, 9))

    def snap_delta(self, anchor, dx, dy):
        """A movement that lands `anchor` on the grid when snapping."""
        if not self.snapping:
            return dx, dy
        x, y = self.snap((anchor[0] + dx, anchor[1] + dy))
        return x - anchor[0], y - anchor[1]

    def near(self, p, q, px: float = style.PICK_PX) -> bool:
        return math.dist(p, q) <= px * self.pixel_mm()

    def pick(self, x, y):
        """What is under (x, y): (kind, index, sub) with sub a vertex, handle or None."""
        s = self.scene
        tol = style.PICK_PX * self.pixel_mm()
        sel = self.selection
        if sel and sel[0] == edits.PART and sel[1] < len(s.parts):
            for k, v in enumerate(s.parts[sel[1]].outer.vertices):
                if math.dist(v, (x, y)) <= tol:
                    return (edits.PART, sel[1], ("vertex", k))
        for i, src in enumerate(s.sources):
            if math.dist(self.aim_handle(src), (x, y)) <= tol:
                return (edits.SOURCE, i, "aim")
        for i, d in enumerate(s.detectors):
            for end in ("start", "end"):
                if math.dist(getattr(d, end), (x, y)) <= tol:
                    return (edits.DETECTOR, i, end)
        for i, src in enumerate(s.sources):
            if _segment_distance((x, y), *self.source_span(src)) <= tol:
                return (edits.SOURCE, i, None)
        for i, d in enumerate(s.detectors):
            if _segment_distance((x, y), d.start, d.end) <= tol:
                return (edits.DETECTOR, i, None)
        inside = [i for i, path in enumerate(self._part_paths) if path.contains(QPointF(x, y))]
        if inside:   # the smallest part under the cursor is the one meant (nested parts)
            i = min(inside, key=lambda k: s.parts[k].area())
            return (edits.PART, i, None)
        return None

    def face_at(self, x, y):
        """(part index, loop index, edge index) of the face under (x, y), or None; loop 0 is
        the outline, loop k the part's k-th hole."""
        tol = style.PICK_PX * self.pixel_mm()
        best, best_d = None, tol
        for pi, li, ei, pts in self._edge_polys:
            d = _polyline_distance((x, y), pts)
            if d <= best_d:
                best, best_d = (pi, li, ei), d
        return best

    def aim_handle(self, src):
        L = 3.2 * style.GLYPH_PX * self.pixel_mm()
        a = math.radians(src.direction_deg)
        return (src.position[0] + L * math.cos(a), src.position[1] + L * math.sin(a))

    def source_span(self, src):
        """The emitting extent of a source across its axis (a point for a point source)."""
        if src.kind == POINT:
            return src.position, src.position
        a = math.radians(src.direction_deg)
        h = src.width / 2
        nx, ny = -math.sin(a) * h, math.cos(a) * h
        return ((src.position[0] - nx, src.position[1] - ny), (src.position[0] + nx, src.position[1] + ny))

    # ------------------------------------------------------------------ selection and messages
    def select(self, sel) -> None:
        if sel == self.selection:
            return
        self.selection = sel
        self._draw_parts()
        self._draw_glyphs()
        self.selection_changed.emit(sel)

    def message(self, text: str) -> None:
        self.status_message.emit(text)

    def set_preview(self, points, closed: bool = False) -> None:
        self._preview = points
        if not points:
            self._preview_item.setData([], [])
            return
        xs = [p[0] for p in points] + ([points[0][0]] if closed else [])
        ys = [p[1] for p in points] + ([points[0][1]] if closed else [])
        self._preview_item.setData(xs, ys)

    def show_grid(self, on: bool) -> None:
        self._grid_on = bool(on)
        self._draw_grid()

    def _view_changed(self) -> None:
        self.view_pixel_mm = self.pixel_mm()
        if self.result is not None and not thinned_for(self.drawing, self.view_pixel_mm):
            self._rethin.start()
        self._draw_glyphs()
        self._draw_grid()
        self._draw_marks()
        if self.problems:
            self.set_problems(self.problems)

    def _draw_grid(self) -> None:
        """Minor and major lines at the axes' own tick spacings, across the visible range."""
        minor, major = self._grid_items
        if not self._grid_on:
            minor.setData([], [])
            major.setData([], [])
            return
        (x0, x1), (y0, y1) = self.view.viewRange()
        levels = []
        for name, lo, hi in (("bottom", x0, x1), ("left", y0, y1)):
            ax = self.plot.getAxis(name)
            size = max(self.view.width() if name == "bottom" else self.view.height(), 1.0)
            levels.append(ax.tickSpacing(lo, hi, size))
        for item, level in ((major, 0), (minor, 1)):
            xs, ys = [], []
            for axis, (lo, hi), other in ((0, (x0, x1), (y0, y1)), (1, (y0, y1), (x0, x1))):
                spacings = levels[axis]
                if len(spacings) <= level:
                    continue
                step, offset = spacings[level]
                if step <= 0 or (hi - lo) / step > 400:
                    continue
                first = np.ceil((lo - offset) / step) * step + offset
                v = np.arange(first, hi + 0.5 * step, step)
                a = np.repeat(v, 2)
                b = np.tile(np.asarray(other, dtype=float), len(v))
                xs.append(a if axis == 0 else b)
                ys.append(b if axis == 0 else a)
            if xs:
                item.setData(np.concatenate(xs), np.concatenate(ys), connect="pairs")
            else:
                item.setData([], [])

    # ------------------------------------------------------------------ drawing
    def set_scene(self, scene: Scene) -> None:
        self.scene = scene
        if self.selection:
            kind, index = self.selection
            n = {edits.PART: len(scene.parts), edits.SOURCE: len(scene.sources),
                 edits.DETECTOR: len(scene.detectors)}[kind]
            if index >= n:
                self.selection = None
                self.selection_changed.emit(None)
        self._draw_parts()
        self._draw_glyphs()

    def parts_box(self):
        """(x0, y0, x1, y1) around the parts, or None without parts."""
        return parts_box(self.scene)

    def fit(self, everything: bool = False) -> None:
        """Frame what matters: the parts and the sources, with a margin.  A detector counts by
        its point nearest the parts when that lies within reach of them, so a long detector over
        a thin film crosses the frame without shrinking the film to a sliver; a detector further
        away is named in the status bar.  `everything` frames every detector whole as well."""
        s = self.scene
        xs, ys = [], []
        box = self.parts_box()
        if box:
            xs += [box[0], box[2]]
            ys += [box[1], box[3]]
        for src in s.sources:
            for q in self.source_span(src):
                xs.append(q[0])
                ys.append(q[1])
        core = (min(xs), min(ys), max(xs), max(ys)) if xs else None
        outside = []
        for d in s.detectors:
            if everything or core is None:
                xs += [d.start[0], d.end[0]]
                ys += [d.start[1], d.end[1]]
                continue
            centre = ((core[0] + core[2]) / 2, (core[1] + core[3]) / 2)
            reach = max(0.75 * math.hypot(core[2] - core[0], core[3] - core[1]), 1e-3)
            q = _nearest_on_segment(centre, d.start, d.end)
            if math.hypot(q[0] - centre[0], q[1] - centre[1]) <= reach:
                xs.append(q[0])
                ys.append(q[1])
            else:
                outside.append(d.name)
        if not xs:
            xs, ys = [-10, 10], [-10, 10]
        w = max(max(xs) - min(xs), max(ys) - min(ys), 1e-3)
        m = 0.12 * w
        self.view.setRange(xRange=(min(xs) - m, max(xs) + m), yRange=(min(ys) - m, max(ys) + m), padding=0)
        self.fit_left_out = outside
        if outside:
            self.message(f"Outside the view: detector {', '.join(outside)} (View > Fit everything, "
                         "Ctrl+Shift+0, shows it)")

    def _draw_parts(self) -> None:
        # the items of the parts drawn before are reused, in order (adding and removing plot
        # items costs about half a millisecond each: most of redrawing the parts at an edit),
        # and given a new outline only where the part changed
        old_items, old_paths = self._part_items, self._part_paths
        for it in old_items[2 * len(self.scene.parts):]:
            self.plot.removeItem(it)
        self._part_items, self._part_paths, self._edge_polys = [], [], []
        tol = 2e-4 * max(self.scene.size_hint(), 1e-6)
        handles = []
        outlines = {}
        for i, part in enumerate(self.scene.parts):
            path, polys = self._part_outline(part, tol)
            outlines[id(part)] = (part, tol, path, polys)
            self._edge_polys += [(i, li, ei, pts) for li, ei, pts in polys]
            selected = self.selection == (edits.PART, i)
            if 2 * i + 1 < len(old_items):
                fill, item = old_items[2 * i], old_items[2 * i + 1]
                if old_paths[i] is not path:
                    fill.setPath(path)
                    item.setPath(path)
            else:
                # the fill lies under the rays, the outline over them
                fill, item = QGraphicsPathItem(path), QGraphicsPathItem(path)
                fill.setPen(QPen(Qt.NoPen))
                fill.setZValue(1)
                item.setBrush(QBrush(Qt.NoBrush))
                item.setZValue(12)
                self.plot.addItem(fill)
                self.plot.addItem(item)
            fill.setBrush(QBrush(style.material_tint(part.material)))
            item.setPen(_pen(style.SELECTED if selected else style.material_outline(part.material),
                             2.4 if selected else 1.4))
            item.setToolTip(f"{part.name} ({part.material})")
            self._part_items += [fill, item]
            self._part_paths.append(path)
            if selected:
                handles += part.outer.vertices
        self._vertex_handles = handles
        self._outlines = outlines

    def _part_outline(self, part, tol: float):
        """(path, [(loop, edge, points)]) of a part's outline and holes.  Parts are immutable
        and an edit replaces only the parts it changes, so the others' outlines are reused
        (flattening arcs and building paths point by point was most of a redraw of the parts)."""
        known = self._outlines.get(id(part))
        if known is not None and known[0] is part and known[1] == tol:
            return known[2], known[3]
        path = QPainterPath()
        path.setFillRule(Qt.OddEvenFill)
        for loop in part.loops:
            pts = loop.coords(tol)
            path.moveTo(*pts[0])
            for q in pts[1:]:
                path.lineTo(*q)
            path.closeSubpath()
        polys = [(li, ei, np.asarray(e.flattened(tol) + [e.end], dtype=float))
                 for li, loop in enumerate(part.loops)      # the outline, then each hole
                 for ei, e in enumerate(loop.edges)]
        return path, polys

    def set_problems(self, problems) -> None:
        """Mark geometry problems: the parts concerned get a red dashed outline, the areas where
        parts overlap a red hatch (see `gui.problems`)."""
        for it in self._problem_items:
            self.plot.removeItem(it)
        self._problem_items = []
        self.problems = list(problems)
        concerned = sorted({i for p in self.problems for i in p.parts if i < len(self._part_paths)})
        for i in concerned:
            item = QGraphicsPathItem(self._part_paths[i])
            item.setPen(_pen(style.PROBLEM, 2.0, Qt.DashLine))
            item.setBrush(QBrush(Qt.NoBrush))
            item.setZValue(13)
            self._problem_items.append(item)
        for p in self.problems:
            for area in p.areas:
                path = QPainterPath()
                path.moveTo(*area[0])
                for q in area[1:]:
                    path.lineTo(*q)
                path.closeSubpath()
                item = QGraphicsPathItem(path)
                item.setPen(_pen(style.PROBLEM, 1.5))
                brush = QBrush(style.PROBLEM, Qt.BDiagPattern)
                brush.setTransform(self._hatch_transform())
                item.setBrush(brush)
                item.setZValue(13)
                item.setToolTip(p.text)
                self._problem_items.append(item)
        for it in self._problem_items:
            self.plot.addItem(it)

    def _hatch_transform(self):
        """Hatch lines a few pixels apart whatever the zoom (a brush pattern is in item units)."""
        from PySide6.QtGui import QTransform
        s = 1.0 * self.pixel_mm()
        return QTransform.fromScale(s, s)

    def _draw_glyphs(self) -> None:
        for it in self._glyph_items:
            self.plot.removeItem(it)
        self._glyph_items = []
        px = self.pixel_mm()
        g = style.GLYPH_PX * px
        handles = list(getattr(self, "_vertex_handles", []))
        for i, src in enumerate(self.scene.sources):
            selected = self.selection == (edits.SOURCE, i)
            self._add_path(_source_path(self, src, g), style.SOURCE_EDGE, style.SOURCE, 2.2 if selected else 1.3,
                           f"source {src.name} ({src.kind})", selected)
            handles.append(self.aim_handle(src))
        for i, det in enumerate(self.scene.detectors):
            selected = self.selection == (edits.DETECTOR, i)
            self._add_path(_detector_ticks(det, g), style.DETECTOR, None, 1.2, f"detector {det.name}", selected)
            line = QPainterPath()
            line.moveTo(*det.start)
            line.lineTo(*det.end)
            self._add_path(line, style.SELECTED if selected else style.DETECTOR, None, style.DETECTOR_PX,
                           f"detector {det.name}" + ("" if det.absorbing else " (monitor: rays pass)"),
                           False, Qt.SolidLine if det.absorbing else Qt.DashLine)
            handles += [det.start, det.end]
        if handles:
            n_vertex = len(getattr(self, "_vertex_handles", []))
            sizes = np.full(len(handles), float(style.HANDLE_PX))
            sizes[:n_vertex] = vertex_handle_px(self._vertex_handles, px)
            self._handles.setData([h[0] for h in handles], [h[1] for h in handles], size=sizes)
        else:
            self._handles.setData([], [])

    def _add_path(self, path, colour, fill, width, tip, selected, line_style=Qt.SolidLine):
        item = QGraphicsPathItem(path)
        item.setPen(_pen(style.SELECTED if selected else colour, width, line_style))
        item.setBrush(QBrush(fill) if fill is not None else QBrush(Qt.NoBrush))
        item.setZValue(15)
        item.setToolTip(tip)
        self.plot.addItem(item)
        self._glyph_items.append(item)

    def hold_paint(self, seconds: float) -> None:
        """Paint nothing until the next result is drawn, or `seconds` at most: the moved part and
        its new rays are then painted together, and the old fan (which no longer fits the parts)
        is not painted once more while the new trace runs.  Painting holds Python's lock, so it
        would also slow that trace.  A hold already running is not extended: during a drag the
        parts are painted at least every `seconds`."""
        if self._hold.isActive():
            return
        self.plot.viewport().setUpdatesEnabled(False)
        self._hold.start(max(1, int(1000 * seconds)))

    def release_paint(self) -> None:
        self._hold.stop()
        if not self.plot.viewport().updatesEnabled():
            self.plot.viewport().setUpdatesEnabled(True)     # repaints the whole drawing

    def set_result(self, result, drawing: RayDrawing | None = None) -> None:
        """Draw a trace result (None clears the rays).  `drawing` is the result's drawing made
        beforehand (by the trace thread); it is used when it was made the way this canvas draws
        now (colour choice, reach of the escaping legs), else the drawing is made here."""
        self.result = result
        if result is None:
            self.drawing = RayDrawing()
        elif (drawing is not None and drawing.colour_by_wavelength == self.colour_by_wavelength
              and drawing.escape_reach == escape_reach_for(self.scene)
              and thinned_for(drawing, self.view_pixel_mm)):
            self.drawing = drawing
        else:
            self.drawing = scene_drawing(result, self.scene, self.colour_by_wavelength, self.view_pixel_mm)
        self._draw_rays()
        self._draw_marks()
        self.release_paint()

    def thin_for_view(self) -> None:
        """Remake the drawing of the shown rays for the view's pixel size: zoomed in, crowded
        fans show more of their rays (the trace is not run again)."""
        if self.result is None or thinned_for(self.drawing, self.view_pixel_mm):
            return
        self.drawing = scene_drawing(self.result, self.scene, self.colour_by_wavelength, self.view_pixel_mm)
        self._draw_rays()
        self._draw_marks()

    def escape_ring_px(self, share: float) -> float:
        """Diameter of an escape ring: grows with the share, capped so it hides nothing."""
        return min(style.ESCAPE_RING_MAX_PX, max(6.0, 60.0 * math.sqrt(share)))

    def _draw_marks(self) -> None:
        """Marks sized in screen pixels, redone when the zoom changes: hit marks beside the
        detector line, escape rings clear of the source glyphs, direction arrows."""
        d, px = self.drawing, self.pixel_mm()
        off = (0.5 * style.DETECTOR_PX + 0.5 * style.HIT_PX + 1) * px
        if len(d.hits_nx) == len(d.hits_x):
            self._hits.setData(d.hits_x + off * d.hits_nx, d.hits_y + off * d.hits_ny)
        else:
            self._hits.setData(d.hits_x, d.hits_y)
        rings = [Ring(*self._ring_place(edge, self.escape_ring_px(share) * px), share, label, 1)
                 for (_, _, share, label), edge in zip(d.escapes, d.escape_edges)]
        # a merged ring keeps off each source glyph and its aim stem, which it could hide
        glyphs = [(s.position, self.aim_handle(s)) for s in self.scene.sources]
        self.escape_rings = merge_crowded(rings, self.escape_ring_px, px, (glyphs, 0.5 * style.GLYPH_PX))
        self.escape_xy = [(r.x, r.y) for r in self.escape_rings]
        if self.escape_xy:
            self._escapes.setData([r.x for r in self.escape_rings], [r.y for r in self.escape_rings],
                                  size=[self.escape_ring_px(r.share) for r in self.escape_rings])
        else:
            self._escapes.setData([], [])
        xs, ys = arrow_strokes(d.cue_x0, d.cue_y0, d.cue_x1, d.cue_y1, style.CUE_PX * px, 8 * style.CUE_PX * px,
                               d.cue_at if len(d.cue_at) == len(d.cue_x0) else 0.55)
        self._cues.setData(xs, ys, connect="pairs")

    def _ring_place(self, edge, diameter: float):
        """Where on its face an escape ring goes: the midpoint, or the point along the face
        farthest from the source glyphs when the ring would cover one."""
        clear = 0.5 * diameter + style.GLYPH_PX * self.pixel_mm()
        spots = [edge.point_at(t) for t in (0.5, 0.3, 0.7, 0.15, 0.85)]
        sources = [s.position for s in self.scene.sources]
        if not sources:
            return spots[0]
        room = [min(math.dist(p, q) for q in sources) for p in spots]
        if room[0] >= clear:
            return spots[0]
        return spots[int(np.argmax(room))]

    def set_colour_by_wavelength(self, on: bool) -> None:
        """Colour rays by their wavelength instead of by kind (a view choice, not saved)."""
        self.colour_by_wavelength = bool(on)
        self.legend.set_colour_by_wavelength(self.colour_by_wavelength)
        self.set_result(self.result)

    def _ray_groups(self, d: RayDrawing):
        """(key, level, rgb, order, x, y) per group to draw of drawing `d`; order (0..3) stacks
        the groups of one level."""
        if d.colour_by_wavelength:
            n = max(1, len(d.by_wavelength))
            return [(nm, lv, spectral_rgb(nm), len(KINDS) * i / n, x, y) for i, (nm, lv, x, y) in enumerate(d.by_wavelength)]
        return [(k, lv, _rgb(KIND_COLOUR[k]), i, *d.lines[k][lv])
                for i, k in enumerate(KINDS) if k in d.lines for lv in range(len(LEVELS))
                if len(d.lines[k][lv][0])]

    def ray_strokes(self, d: RayDrawing):
        """(key, level, colour, z, x, y) per group of legs the canvas draws of drawing `d`, as the
        canvas draws them (the figure export draws the same from its own drawing)."""
        # dense fans are drawn fainter so that overlapping legs still read as separate rays
        dim = min(1.0, max(0.4, math.sqrt(5000.0 / max(d.n_segments, 1))))
        hide_faintest = d.n_segments > FAINT_SHOWN_BELOW
        out = []
        for key, lv, rgb, order, x, y in self._ray_groups(d):
            if hide_faintest and lv == len(LEVELS) - 1:
                continue
            colour = _faded(rgb, max(6, LEVEL_ALPHA[lv] * dim) / 255.0)
            # brighter legs on top whatever their kind, so a faint glint never covers the beam
            out.append((key, lv, colour, 5 + 0.5 * (len(LEVELS) - lv) + 0.4 * order / len(KINDS), x, y))
        return out

    def drawing_for(self, pixel_mm: float) -> RayDrawing:
        """The shown rays' drawing thinned for a view of `pixel_mm` mm per (1 px line) pixel: the
        canvas's own when it was judged for about that size, else made anew (an exported figure
        laid out at another scale than the screen thins as the canvas would at that zoom)."""
        if self.result is None or thinned_for(self.drawing, pixel_mm):
            return self.drawing
        return scene_drawing(self.result, self.scene, self.colour_by_wavelength, pixel_mm)

    def _draw_rays(self) -> None:
        thinned = self.drawing.n_thinned > 0
        self.legend.fade_note.setText("(all fade with flux; crowded fans thinned)" if thinned
                                      else "(all fade with flux)")
        self.legend.fade_note.setToolTip(FADE_NOTE + (
            f".  Where legs crowd so that they would paint a solid fill, they are drawn a step fainter "
            f"and only every 2nd, 4th... source ray is drawn there ({self.drawing.n_thinned:,} legs "
            f"not drawn); the flux ledger counts them all." if thinned else ""))
        groups = self.ray_strokes(self.drawing)
        while len(self._ray_items) < len(groups):
            item = pg.PlotCurveItem(connect="pairs", antialias=False, skipFiniteCheck=True)
            self.plot.addItem(item)
            self._ray_items.append(item)
        self.painted_segments = 0
        self.ray_groups = []
        for item, (key, lv, colour, z, x, y) in zip(self._ray_items, groups):
            item.setPen(_pen(colour, 1.0))
            item.setZValue(z)
            item.setData(x, y, connect="pairs")
            self.painted_segments += len(x) // 2
            self.ray_groups.append((key, lv, colour, len(x) // 2))
        for item in self._ray_items[len(groups):]:
            item.setData([], [])

    # ------------------------------------------------------------------ hover
    def _mouse_moved(self, scene_pos):
        if not self.plot.plotItem.sceneBoundingRect().contains(scene_pos):
            return
        p = self.view.mapSceneToView(scene_pos)
        x, y = p.x(), p.y()
        self.cursor = (x, y)
        self.cursor_moved.emit(x, y)
        self.tool.hover(x, y)
        tip = self.hover_text(x, y)
        if tip:
            QToolTip.showText(self.plot.mapToGlobal(self.plot.mapFromScene(scene_pos)), tip, self.plot)
        else:
            QToolTip.hideText()

    def hover_text(self, x, y) -> str:
        """What the tooltip says at (x, y): the face name and treatment, or an escape figure."""
        tol = style.PICK_PX * self.pixel_mm()
        for r in self.escape_rings:
            if math.dist((r.x, r.y), (x, y)) <= tol:
                where = "here" if r.faces == 1 else f"through these {r.faces} faces (zoom in to see each)"
                return f"{r.label}: {100 * r.share:.2f} % of the source flux escapes {where}"
        f = self.face_at(x, y)
        if f is None:
            return ""
        pi, li, ei = f
        part = self.scene.parts[pi]
        e = part.loops[li].edges[ei]
        t = e.treatment.kind + (f" R={e.treatment.reflectance:g}" if e.treatment.kind == "mirror" else "")
        arc = ""
        if e.is_arc:        # signed as the arc tool and the vertex table take it
            arc = f", arc R {signed_radius(part, li, ei):.4g} mm"
        # an unnamed face is called as the flux ledger calls it
        face = e.face or (f"hole {li} edge {ei + 1}" if li else f"edge {ei + 1}")
        return f"{part.name} / {face} ({t}{arc})"


# ---------------------------------------------------------------------- glyph shapes

HANDLE_MIN_PX = 5       # vertex handles shrink to this where vertices crowd (a prism film's teeth)


def vertex_handle_px(vertices, pixel_mm: float) -> np.ndarray:
    """Size in px of each vertex handle of an outline: HANDLE_PX, less where the next vertex
    along the outline either way is nearer than twice that, so the handles of a fine outline
    cover at most about half of each edge and its shape still shows (down to HANDLE_MIN_PX)."""
    v = np.asarray(vertices, dtype=float).reshape(-1, 2)
    if len(v) < 2 or not pixel_mm > 0:
        return np.full(len(v), float(style.HANDLE_PX))
    step = np.hypot(*(np.roll(v, -1, axis=0) - v).T) / pixel_mm      # to the next vertex, in px
    nearest = np.minimum(step, np.roll(step, 1))                     # ... or to the one before
    return np.clip(0.5 * nearest, HANDLE_MIN_PX, style.HANDLE_PX)


def _source_path(canvas: Canvas, src, g: float) -> QPainterPath:
    """Our own source glyphs: a beam is a bar across its width with an arrow; an emitter is a
    die (a thin box on its back side) with an arrow; a point source is a dot with its cone."""
    path = QPainterPath()
    a = math.radians(src.direction_deg)
    ux, uy = math.cos(a), math.sin(a)
    nx, ny = -uy, ux
    px_, py_ = src.position
    (x0, y0), (x1, y1) = canvas.source_span(src)
    hx, hy = canvas.aim_handle(src)
    if src.kind == POINT:
        r = 0.45 * g
        path.addEllipse(QPointF(px_, py_), r, r)
        half = math.radians(min(src.half_angle_deg, 89.0))
        for sgn in (-1, 1):
            c, s = math.cos(a + sgn * half), math.sin(a + sgn * half)
            path.moveTo(px_ + r * c, py_ + r * s)
            path.lineTo(px_ + 2.2 * g * c, py_ + 2.2 * g * s)
    else:
        back = 0.35 * g if src.kind == EMITTER else 0.2 * g
        path.moveTo(x0, y0)
        path.lineTo(x1, y1)
        path.lineTo(x1 - back * ux, y1 - back * uy)
        path.lineTo(x0 - back * ux, y0 - back * uy)
        path.closeSubpath()
    # axis arrow to the aim handle
    path.moveTo(px_, py_)
    path.lineTo(hx, hy)
    head = 0.55 * g
    path.moveTo(hx, hy)
    path.lineTo(hx - head * ux + 0.5 * head * nx, hy - head * uy + 0.5 * head * ny)
    path.lineTo(hx - head * ux - 0.5 * head * nx, hy - head * uy - 0.5 * head * ny)
    path.closeSubpath()
    return path


def _detector_ticks(det, g: float) -> QPainterPath:
    """Short ticks on the back of a detector (left of start -> end): they show which way the
    detector runs; rays are counted from either side."""
    path = QPainterPath()
    (sx, sy), (ex, ey) = det.start, det.end
    L = math.dist(det.start, det.end)
    ux, uy = (ex - sx) / L, (ey - sy) / L
    bx, by = -uy, ux            # left of start->end: the back; the front is to the right
    n = max(2, min(60, int(L / (0.6 * g))))
    for k in range(n + 1):
        t = L * k / n
        x, y = sx + ux * t, sy + uy * t
        path.moveTo(x, y)
        path.lineTo(x + 0.45 * g * (bx - 0.5 * ux), y + 0.45 * g * (by - 0.5 * uy))
    return path


def _nearest_on_segment(p, a, b) -> tuple[float, float]:
    dx, dy = b[0] - a[0], b[1] - a[1]
    L2 = dx * dx + dy * dy
    t = 0.0 if L2 == 0 else min(max(((p[0] - a[0]) * dx + (p[1] - a[1]) * dy) / L2, 0.0), 1.0)
    return (a[0] + t * dx, a[1] + t * dy)


def _segment_distance(p, a, b) -> float:
    ax, ay = a
    bx, by = b
    dx, dy = bx - ax, by - ay
    L2 = dx * dx + dy * dy
    t = 0.0 if L2 == 0 else max(0.0, min(1.0, ((p[0] - ax) * dx + (p[1] - ay) * dy) / L2))
    return math.hypot(p[0] - ax - t * dx, p[1] - ay - t * dy)


def _polyline_distance(p, pts: np.ndarray) -> float:
    a, b = pts[:-1], pts[1:]
    d = b - a
    L2 = (d * d).sum(axis=1)
    q = np.asarray(p)
    t = np.clip(np.divide(((q - a) * d).sum(axis=1), L2, out=np.zeros_like(L2), where=L2 > 0), 0, 1)
    c = a + t[:, None] * d
    return float(np.min(np.hypot(*(q - c).T)))
