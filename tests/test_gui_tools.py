"""The drawing tools a user expects, driven by real input: mouse press / move / release through
the drawing's viewport and keys sent by key to the focused widget.  Arcs, holes, measuring,
snapping to the parts' geometry, typed coordinates, zoom keys and box zoom, Ctrl+Q, and the
one time figure of a trace.  Every edit is checked through undo and a saved, reopened file.
"""
from __future__ import annotations

import math
import os
import re

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtCore import Qt  # noqa: E402
from PySide6.QtWidgets import QLabel  # noqa: E402

from gui_events import click, drag, hover, key, pixel_offset, type_text  # noqa: E402
from test_gui import LIGHT_PIPE, SAMPLES, WINDOW, home, make_window, open_sample, wait_traced  # noqa: E402,F401

from gui.tools import ARC, DETECTOR_TOOL, HOLE, MEASURE, POLYGON, SELECT, ZOOM_BOX  # noqa: E402

ROOF_PRISM = SAMPLES / "roof-prism-retroreflector.json"


@pytest.fixture
def win(qtbot, home):
    """The main window shown and focused, as a user sees it."""
    w = make_window(qtbot)
    w.resize(1200, 800)
    w.show()
    qtbot.waitExposed(w)
    w.activateWindow()
    w.canvas.plot.setFocus()
    yield w
    w.worker.shutdown()


def _open(qtbot, win, path):
    open_sample(qtbot, win, path)
    win.canvas.fit()
    qtbot.wait(10)


def _status(win) -> str:
    return win.statusBar().currentMessage()


def _save_and_reopen(win, tmp_path, name="edited.json"):
    path = tmp_path / name
    assert win.save_as(str(path))
    scene = win.doc.scene
    assert win.open_file(str(path))
    return scene, win.doc.scene


# ---------------------------------------------------------------------------- arcs

def test_arc_dragged_through_a_point_then_undo_redo_save_reopen(qtbot, win, tmp_path):
    _open(qtbot, win, WINDOW)             # a plate: front x = 0, back x = 10, y from -20 to 20
    before = win.doc.scene
    key(Qt.Key_G, Qt.ShiftModifier)       # snap to the 1 mm grid
    key(Qt.Key_A)
    assert win.canvas.tool.name == ARC and win.tool_actions[ARC].isChecked()
    drag(qtbot, win.canvas, (10.0, 3.0), (12.0, 0.0))      # pull the back face 2 mm out at y = 0
    part = win.doc.scene.parts[0]
    back = next(e for e in part.outer.edges if e.face == "back")
    # common practice (sagitta of a circular arc): R = (h^2 + s^2) / (2 s), h half the chord
    h, s = 20.0, 2.0
    R = (h * h + s * s) / (2 * s)
    assert back.radius == pytest.approx(R, rel=1e-12)
    assert back.arc_center == pytest.approx((12.0 - R, 0.0), abs=1e-9)
    assert back.point_at(0.5) == pytest.approx((12.0, 0.0), abs=1e-9)
    assert (back.start, back.end) == ((10.0, -20.0), (10.0, 20.0))    # the vertices stay put
    assert part.shape is None             # a bent plate is no longer the builder's plate
    assert win.doc.undo_stack.count() == 1, "one drag is one undo step"
    out = wait_traced(qtbot, win)
    assert out is not None and not win.last_outcome.error

    key(Qt.Key_Z, Qt.ControlModifier)
    assert win.doc.scene == before
    win.redo_action.trigger()
    assert win.doc.scene.parts[0] == part
    saved, reopened = _save_and_reopen(win, tmp_path)
    assert reopened.parts == saved.parts
    assert reopened.parts[0].outer.edges == part.outer.edges


def test_arc_by_typed_radius_convex_concave_too_small_and_straight(qtbot, win, tmp_path):
    _open(qtbot, win, WINDOW)
    key(Qt.Key_A)
    click(qtbot, win.canvas, (10.0, 5.0))                 # choose the back face
    assert win.canvas.tool.edge is not None
    type_text("-29")                                        # concave: into the glass
    deepest = min(x for x, _ in win.canvas._preview)
    assert deepest == pytest.approx(2.0, abs=0.05), "the arc is previewed while the radius is typed"
    key(Qt.Key_Return)
    part = win.doc.scene.parts[0]
    back = next(e for e in part.outer.edges if e.face == "back")
    # common practice: sagitta s = R - sqrt(R^2 - h^2); 20-21-29 is a right triangle, s = 8
    assert back.radius == pytest.approx(29.0, rel=1e-12)
    assert back.point_at(0.5) == pytest.approx((2.0, 0.0), abs=1e-9)
    assert "radius -29 mm" in _status(win)

    click(qtbot, win.canvas, (0.0, -5.0))                 # the front face, bulging out of the glass
    type_text("29")
    key(Qt.Key_Return)
    front = next(e for e in win.doc.scene.parts[0].outer.edges if e.face == "front")
    assert front.point_at(0.5) == pytest.approx((-8.0, 0.0), abs=1e-9)
    assert win.doc.undo_stack.count() == 2

    scene = win.doc.scene
    click(qtbot, win.canvas, front.point_at(0.75))
    type_text("15")                                         # shorter than half the 40 mm chord
    key(Qt.Key_Return)
    assert win.doc.scene is scene
    assert "at least half the edge's length (20 mm)" in _status(win)
    type_text("0")                          # replaces the refused text: the same face, straight again
    key(Qt.Key_Return)
    front = next(e for e in win.doc.scene.parts[0].outer.edges if e.face == "front")
    assert not front.is_arc
    assert win.doc.undo_stack.count() == 3
    wait_traced(qtbot, win)
    assert not win.last_outcome.error

    click(qtbot, win.canvas, (0.0, 10.0))                 # choose the straight front face again...
    assert win.canvas.tool.edge is not None
    key(Qt.Key_Z, Qt.ControlModifier)                       # ...but undo first: the choice is forgotten
    assert win.doc.scene == scene
    assert win.canvas.tool.edge is None
    type_text("5")
    assert not win.canvas.overlay.typing and win.doc.scene == scene
    saved, reopened = _save_and_reopen(win, tmp_path)
    assert reopened.parts == saved.parts


# ---------------------------------------------------------------------------- holes

def test_holes_by_typed_vertices_and_by_drag_move_with_the_part_and_reopen(qtbot, win, tmp_path):
    _open(qtbot, win, WINDOW)
    key(Qt.Key_H)
    assert win.canvas.tool.name == HOLE
    for p in ("3, 5", "7, 5", "7, 9", "3, 9"):
        type_text(p)
        key(Qt.Key_Return)
    key(Qt.Key_Return)                                      # Enter on the empty box closes it
    key(Qt.Key_G, Qt.ShiftModifier)
    drag(qtbot, win.canvas, (5.0, -8.0), (7.0, -8.0))     # a round hole of radius 2 at (5, -8)
    part = win.doc.scene.parts[0]
    assert len(part.holes) == 2
    assert part.shape is not None, "holes are kept beside the builder"
    assert {e.face for e in part.holes[1].edges} == {"hole 2"}
    assert part.holes[1].edges[0].radius == 2.0 and part.holes[1].edges[0].arc_center == (5.0, -8.0)
    # published: the area of a circle is pi r^2 (any geometry handbook)
    assert part.area() == pytest.approx(10 * 40 - 4 * 4 - math.pi * 2 ** 2, rel=1e-12)
    assert win.doc.undo_stack.count() == 2
    wait_traced(qtbot, win)
    assert not win.last_outcome.error

    # a hole's edge bends too: radius 3 on its 4 mm top side, bulging out of the glass (into the hole)
    key(Qt.Key_A)
    click(qtbot, win.canvas, (5.0, 9.0))
    type_text("3")
    key(Qt.Key_Return)
    top = next(e for e in win.doc.scene.parts[0].holes[0].edges if e.start[1] == e.end[1] == 9.0)
    assert top.point_at(0.5) == pytest.approx((5.0, 9.0 - (3.0 - math.sqrt(9.0 - 4.0))), abs=1e-9)
    assert win.doc.scene.parts[0].shape is not None, "bending a hole keeps the builder"

    # outside every part: refused with a reason
    key(Qt.Key_H)
    scene = win.doc.scene
    drag(qtbot, win.canvas, (20.0, 0.0), (22.0, 0.0))
    assert win.doc.scene is scene and "inside a part" in _status(win)

    # the holes move with their builder part
    key(Qt.Key_V)
    click(qtbot, win.canvas, (1.0, 0.0))
    key(Qt.Key_Right)
    moved = win.doc.scene.parts[0]
    assert moved.holes[0].vertices == [(x + 1.0, y) for x, y in part.holes[0].vertices]
    assert moved.holes[1].edges[0].arc_center == (6.0, -8.0)
    key(Qt.Key_Z, Qt.ControlModifier)
    assert win.doc.scene.parts[0].holes[1] == part.holes[1]
    saved, reopened = _save_and_reopen(win, tmp_path)
    assert reopened.parts == saved.parts


# ---------------------------------------------------------------------------- measuring

def test_measure_snaps_to_vertices_and_changes_nothing(qtbot, win):
    _open(qtbot, win, ROOF_PRISM)     # leg 10 mm: hypotenuse corners (+-10/sqrt 2, 0), apex (0, 10/sqrt 2)
    scene = win.doc.scene
    key(Qt.Key_M)
    assert win.canvas.tool.name == MEASURE
    half = 10.0 / math.sqrt(2.0)
    left, apex, right = (-half, 0.0), (0.0, half), (half, 0.0)
    for p in (left, apex):
        click(qtbot, win.canvas, pixel_offset(win.canvas, p, 3, -2))    # a few pixels off
    tool = win.canvas.tool
    assert tool.points == [left, apex]
    # the builder's leg length (the sample's parameter)
    assert re.search(r"distance 10\.0000 mm", win.canvas.overlay.readout)
    click(qtbot, win.canvas, pixel_offset(win.canvas, right, -3, 2))
    # published: a roof prism's legs meet at a right angle (Hecht, Optics, sec 5.5)
    assert re.search(r"angle 90\.000 deg", win.canvas.overlay.readout), win.canvas.overlay.readout
    assert win.canvas.overlay.readout_item.isVisible()
    assert win.canvas.overlay.readout_item.textItem.toPlainText() == "90.000 deg"
    assert win.doc.scene is scene and win.doc.undo_stack.count() == 0 and not win.doc.modified
    key(Qt.Key_Escape)
    assert tool.points == [] and not win.canvas.overlay.readout_item.isVisible()


# ---------------------------------------------------------------------------- snapping

def test_snap_to_vertices_and_edges_for_detector_ends_and_dragged_vertices(qtbot, win, tmp_path):
    _open(qtbot, win, WINDOW)
    key(Qt.Key_V, Qt.ShiftModifier)
    assert win.canvas.object_snapping and win.geometry_snap_action.isChecked()
    key(Qt.Key_D)
    assert win.canvas.tool.name == DETECTOR_TOOL
    c = win.canvas
    hover(qtbot, c, pixel_offset(c, (10.0, 20.0), 3, 2))
    marker = c.overlay.marker.data
    assert [(m["x"], m["y"]) for m in marker] == [(10.0, 20.0)], "the marker shows where a press lands"
    drag(qtbot, c, pixel_offset(c, (10.0, 20.0), 3, 2), pixel_offset(c, (10.0, -5.0), 4, 0))
    det = win.doc.scene.detectors[-1]
    assert det.start == (10.0, 20.0), "on the corner vertex"
    assert det.end[0] == 10.0 and det.end[1] == pytest.approx(-5.0, abs=2 * c.pixel_mm()), "on the back face"

    # a dragged vertex lands on another part's vertex, and not on its own old place
    key(Qt.Key_P)
    for p in ("14, -10", "20, -10", "17, -5"):
        type_text(p)
        key(Qt.Key_Return)
    key(Qt.Key_Return)
    key(Qt.Key_V)
    tri = len(win.doc.scene.parts) - 1
    click(qtbot, c, (17.0, -8.0))
    assert c.selection == ("part", tri)
    drag(qtbot, c, (14.0, -10.0), pixel_offset(c, (10.0, -20.0), 3, 3))
    assert win.doc.scene.parts[tri].outer.vertices[0] == (10.0, -20.0)
    assert len(c.overlay.marker.data) == 0, "no marker left behind after the drag"
    saved, reopened = _save_and_reopen(win, tmp_path)
    assert reopened.parts == saved.parts and reopened.detectors == saved.detectors


# ---------------------------------------------------------------------------- typed coordinates

def test_typed_coordinates_draw_a_part_and_a_detector(qtbot, win, tmp_path):
    win.new_scene()
    c = win.canvas
    c.view.setRange(xRange=(-20, 20), yRange=(-20, 20), padding=0)
    key(Qt.Key_P)
    click(qtbot, c, (-10.0, -10.0))
    click(qtbot, c, (-5.0, -10.0))
    key(Qt.Key_Backspace)                   # after clicks in the view the drawing still has the keys
    key(Qt.Key_Backspace)
    assert c.tool.points == []
    type_text("0, 0")
    assert c.overlay.typing and c.overlay.prompt.text() == "vertex 1:"
    key(Qt.Key_Return)
    for text, p in (("10<0", (10.0, 0.0)), ("@0, 5", (10.0, 5.0))):
        type_text(text)
        assert c._preview[-1] == p, "the typed point is previewed before Enter"
        key(Qt.Key_Return)
    hover(qtbot, c, (-15.0, 5.0))           # a length alone goes towards the cursor
    type_text("4")
    key(Qt.Key_Return)
    assert c.tool.points[:3] == [(0.0, 0.0), (10.0, 0.0), (10.0, 5.0)]
    last = c.tool.points[3]
    assert math.dist(last, (10.0, 5.0)) == pytest.approx(4.0, rel=1e-12) and last[0] < 10.0
    type_text("1, a")                       # letters go into the box, not to the tool keys
    key(Qt.Key_Return)
    assert c.tool.name == POLYGON and len(c.tool.points) == 4
    assert "could not read '1, a'" in _status(win)
    key(Qt.Key_Escape)                      # closes the box, keeps the vertices
    assert not c.overlay.typing and len(c.tool.points) == 4
    key(Qt.Key_Return)                      # Enter on the drawing closes the part
    part = win.doc.scene.parts[0]
    assert part.outer.vertices == [(0.0, 0.0), (10.0, 0.0), (10.0, 5.0), last]

    key(Qt.Key_D)
    type_text("0, -5")
    assert c.overlay.prompt.text() == "detector start:"
    key(Qt.Key_Return)
    type_text("12, -5")
    key(Qt.Key_Return)
    det = win.doc.scene.detectors[0]
    assert (det.start, det.end) == ((0.0, -5.0), (12.0, -5.0))
    assert win.doc.undo_stack.count() == 2
    key(Qt.Key_Z, Qt.ControlModifier)
    assert not win.doc.scene.detectors
    win.redo_action.trigger()
    saved, reopened = _save_and_reopen(win, tmp_path)
    assert reopened.parts == saved.parts and reopened.detectors == saved.detectors


# ---------------------------------------------------------------------------- zoom and quit

def _width(win):
    (x0, x1), _ = win.canvas.view.viewRange()
    return x1 - x0


def test_zoom_keys_and_box_zoom(qtbot, win):
    _open(qtbot, win, WINDOW)
    w0 = _width(win)
    key(Qt.Key_Equal, Qt.ControlModifier)
    assert _width(win) == pytest.approx(w0 / 1.25, rel=1e-6)
    key(Qt.Key_Minus, Qt.ControlModifier)
    key(Qt.Key_Minus, Qt.ControlModifier)
    assert _width(win) == pytest.approx(w0 * 1.25, rel=1e-6)
    key(Qt.Key_Plus, Qt.ControlModifier)
    assert _width(win) == pytest.approx(w0, rel=1e-6)

    key(Qt.Key_Z)
    assert win.canvas.tool.name == ZOOM_BOX
    scene = win.doc.scene
    px = win.canvas.pixel_mm()              # the mouse lands on whole pixels of this zoom
    drag(qtbot, win.canvas, (0.0, 0.0), (5.0, 4.0))
    (x0, x1), (y0, y1) = win.canvas.view.viewRange()
    assert x0 <= 2 * px and x1 >= 5 - 2 * px and y0 <= 2 * px and y1 >= 4 - 2 * px
    assert min(x1 - x0 - 5.0, y1 - y0 - 4.0) < 4 * px, "the box fills the view in one direction"
    assert win.canvas.tool.name == SELECT and win.tool_actions[SELECT].isChecked()
    assert win.doc.scene is scene
    key(Qt.Key_0, Qt.ControlModifier)       # fit, as the sample opened
    assert _width(win) == pytest.approx(w0, rel=1e-6)


def test_ctrl_q_quits_after_asking_about_unsaved_changes(qtbot, win):
    _open(qtbot, win, WINDOW)
    click(qtbot, win.canvas, (5.0, 0.0))
    key(Qt.Key_Right)                        # a change to lose
    asked = []
    win.ask_unsaved = lambda: asked.append(1) or "cancel"
    key(Qt.Key_Q, Qt.ControlModifier)
    assert asked == [1] and win.isVisible()
    win.ask_unsaved = lambda: asked.append(2) or "discard"
    key(Qt.Key_Q, Qt.ControlModifier)
    assert asked == [1, 2] and not win.isVisible()


# ---------------------------------------------------------------------------- trace time

def test_one_time_figure_per_trace(qtbot, win):
    _open(qtbot, win, LIGHT_PIPE)
    for _ in range(2):                       # also after a second trace
        texts = [w.text() for w in win.findChildren(QLabel) if w.isVisible()] + [_status(win)]
        figures = [t for t in texts if re.search(r"\d\s*ms\b", t)]
        assert figures == [win.trace_label.text()], figures
        assert re.fullmatch(r"traced in \d+ ms", win.trace_label.text())
        click(qtbot, win.canvas, win.doc.scene.sources[0].position)
        key(Qt.Key_Right)
        wait_traced(qtbot, win)
