"""Rough edges of the editor met by a user: hovering a hole's faces, the Edit panel's vertex table
in a 1024 x 700 window, and crowded ray fans looked at closer.  Windows are sized for real, mouse
events go through the drawing's viewport in a real order (see gui_events)."""
from __future__ import annotations

import os
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtWidgets import QToolTip  # noqa: E402

import gui_events  # noqa: E402
from test_gui import home, wait_traced, win  # noqa: E402,F401  (the GUI tests' fixtures)
from test_gui_report import shown  # noqa: E402


# ---------------------------------------------------------------------------- 1. hole faces on hover
def _plate_with_holes():
    """A 30 x 12 mm plate with a square window (faces named, one a mirror) and a round bore."""
    from raytrace.geometry import Edge, Loop, Part, Treatment
    from raytrace.scene import Scene, Source, TraceSettings
    outer = Loop.polygon([(0, 0), (30, 0), (30, 12), (0, 12)], ["base", "end", "top", "entry"])
    square = Loop.polygon([(6, 4), (6, 8), (10, 8), (10, 4)], ["pocket left", "pocket top", None, "pocket base"],
                          [Treatment(), Treatment("mirror", 0.9), Treatment(), Treatment()])
    # a round bore of radius 2.5 about (20, 6): two half circles, clockwise
    bore = Loop((Edge((22.5, 6), (17.5, 6), (20, 6), False), Edge((17.5, 6), (22.5, 6), (20, 6), False)))
    plate = Part("plate", "PMMA", outer, (square, bore))
    src = Source("lamp", "beam", position=(-5.0, 6.0), direction_deg=0.0, width=10.0)
    return Scene(parts=[plate], sources=[src], name="plate with holes", settings=TraceSettings(rays=50))


def _tooltip_at(qtbot, canvas, p):
    """Hover p the way the mouse gets there (from beside it), return the tooltip shown."""
    gui_events.hover(qtbot, canvas, gui_events.pixel_offset(canvas, p, 40, 40))
    gui_events.hover(qtbot, canvas, p)
    qtbot.wait(30)
    return QToolTip.text() if QToolTip.isVisible() else ""


def test_hovering_a_hole_face_shows_its_tooltip_like_an_outer_face(qtbot, win, tmp_path):
    from raytrace.compile import compile_scene
    from raytrace.scene_io import save_scene
    path = tmp_path / "plate.json"
    scene = _plate_with_holes()
    save_scene(scene, path)
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(path))
    wait_traced(qtbot, win)
    c = win.canvas
    c.fit()
    qtbot.wait(30)
    plate = win.doc.scene.parts[0]
    # the names the engine gives the faces (the flux ledger's labels): unnamed ones are numbered
    labels = {lbl for lbl in compile_scene(win.doc.scene).face_labels}
    assert ("plate", "hole 1 edge 3") in labels and ("plate", "hole 2 edge 1") in labels

    outer_tip = _tooltip_at(qtbot, c, plate.outer.edges[0].point_at(0.3))
    assert outer_tip == "plate / base (bare)"
    assert _tooltip_at(qtbot, c, plate.holes[0].edges[1].point_at(0.3)) == "plate / pocket top (mirror R=0.9)"
    assert _tooltip_at(qtbot, c, plate.holes[0].edges[2].point_at(0.3)) == "plate / hole 1 edge 3 (bare)"
    # the bore's half circles curve into the material round the hole: negative by the vertex
    # table's rule (> 0 bulges out of the material, < 0 into it), radius as built
    bore_tip = _tooltip_at(qtbot, c, plate.holes[1].edges[0].point_at(0.3))
    assert bore_tip == "plate / hole 2 edge 1 (bare, arc R -2.5 mm)"
    # inside the hole, away from its edge, nothing is named (Qt hides a tooltip after a moment)
    gui_events.hover(qtbot, c, (20.0, 6.0))
    qtbot.waitUntil(lambda: not QToolTip.isVisible(), timeout=2000)


# ---------------------------------------------------------------------------- 3. thinning follows the zoom
LIGHT_PIPE = Path(__file__).resolve().parents[1] / "samples" / "light-pipe-90.json"


def _ray_share(qtbot, win, a, b):
    """The share of the drawing's pixels in the box a-b (scene mm) that the rays change."""
    import numpy as np
    from gui_events import widget_point
    c = win.canvas

    def grab(with_rays):
        for it in c._ray_items:
            it.setVisible(with_rays)
        qtbot.wait(20)
        img = c.plot.viewport().grab().toImage()
        p, q = widget_point(c, a), widget_point(c, b)
        return np.array([[img.pixelColor(x, y).getRgb()[:3] for x in range(int(p.x()), int(q.x()), 2)]
                         for y in range(int(p.y()), int(q.y()), 2)], dtype=float)
    bare, drawn = grab(False), grab(True)
    for it in c._ray_items:
        it.setVisible(True)
    return float((np.abs(drawn - bare).max(axis=2) > 3).mean())


def test_zooming_in_on_a_crowded_fan_shows_more_of_its_rays_without_a_new_trace(qtbot, win, monkeypatch):
    """The light pipe's TIR fan is thinned so it reads as rays.  Zoomed in about 4x (Ctrl+= six
    times, 1.25^6 = 3.8) the same legs are spread over 4x the pixels: drawn as thinned for the
    fit they would ink the guide a quarter as much; thinned for the new view more rays show,
    the guide is inked about as much as before, and its tint still shows between the rays."""
    from PySide6.QtCore import Qt
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    c = win.canvas
    qtbot.wait(300)        # a rest after the fit: the drawing is the one for this view
    submitted = []
    real_submit = win.worker.submit
    monkeypatch.setattr(win.worker, "submit", lambda *a, **k: submitted.append(a) or real_submit(*a, **k))
    traces = win.traces_shown
    thinned_fit = c.drawing.n_thinned
    assert thinned_fit > 0, "the fan is crowded at the fit"
    centre = (19.5, 15.5)                         # on the upright arm, 3 mm wide (x 18..21)
    box = ((18.6, 17.0), (20.4, 14.0))
    c.view.setRange(xRange=(centre[0] - 16, centre[0] + 16), yRange=(centre[1] - 11, centre[1] + 11), padding=0)
    qtbot.wait(300)
    share_fit = _ray_share(qtbot, win, *box)     # the same view framing, before the zoom
    legs_fit, px_fit = c.painted_segments, c.pixel_mm()
    c.setFocus()
    for _ in range(6):
        gui_events.key(Qt.Key_Equal, Qt.ControlModifier)
    assert c.pixel_mm() == pytest.approx(px_fit / 1.25 ** 6, rel=1e-6)
    qtbot.waitUntil(lambda: c.drawing.pixel_mm == pytest.approx(c.pixel_mm()), timeout=3000)
    qtbot.wait(50)
    # legs outside the tangles were never thinned, so the count grows by less than the zoom
    assert c.painted_segments > legs_fit, (legs_fit, c.painted_segments)
    assert c.drawing.n_thinned < thinned_fit
    share_zoomed = _ray_share(qtbot, win, *box)
    # without re-thinning the share drops by the zoom (found 0.27 -> 0.072, 1 / 3.8); strides
    # are powers of 2, so a view's share may land up to 2x from another's
    assert share_zoomed > 0.5 * share_fit, (share_fit, share_zoomed)
    assert share_zoomed < 0.5, "still rays with the guide's tint between them, not a fill"
    assert submitted == [] and win.traces_shown == traces and win.worker.is_idle(), "no new trace"


# ---------------------------------------------------------------------------- 2. the vertex table's room
def _vertex_table(win):
    from gui import edits
    return win.properties.pages[edits.PART].table


def _fully_shown_rows(table, win) -> int:
    """Rows whose whole height is on screen: inside the table's viewport and inside the Edit
    panel's own scroll area (a table taller than the panel is cut by it)."""
    from PySide6.QtCore import QPoint
    outer = win.edit_tabs.currentWidget().viewport()
    top = max(0, table.viewport().mapTo(outer, QPoint(0, 0)).y())
    shown = 0
    for r in range(table.rowCount()):
        rect = table.visualRect(table.model().index(r, 0))
        y0 = table.viewport().mapTo(outer, QPoint(0, rect.top())).y()
        y1 = table.viewport().mapTo(outer, QPoint(0, rect.bottom())).y()
        shown += rect.top() >= 0 and rect.bottom() < table.viewport().height() and y0 >= top and y1 < outer.height()
    return shown


def _check_fits_sideways(table):
    """No sideways scrolling, every column inside the panel, no header cut short."""
    from PySide6.QtGui import QFontMetrics
    header = table.horizontalHeader()
    assert not table.horizontalScrollBar().isVisible()
    assert table.horizontalScrollBar().maximum() == 0, "nothing lies beyond the right edge"
    shown_cols = [c for c in range(table.columnCount()) if not table.isColumnHidden(c)]
    assert header.sectionViewportPosition(shown_cols[-1]) + header.sectionSize(shown_cols[-1]) <= table.viewport().width()
    fm = QFontMetrics(header.font())
    for c in shown_cols:
        text = table.horizontalHeaderItem(c).text()
        assert header.sectionSize(c) >= fm.horizontalAdvance(text) + 6, f"header {text!r} is cut"
    # the faces' names read whole (the face column takes what the numbers leave)
    fm = QFontMetrics(table.font())
    for r in range(table.rowCount()):
        name = table.item(r, 2).text()
        assert header.sectionSize(2) >= fm.horizontalAdvance(name) + 6, f"face {name!r} is cut"


@pytest.mark.parametrize("size, rows", [((1024, 700), 6), ((1600, 1000), 8)])
def test_the_vertex_table_gets_the_room_of_the_edit_panel(qtbot, win, size, rows):
    """Clicking the light pipe (8 vertices) at 1024 x 700 shows at least 6 whole rows of its
    vertex table, at 1600 x 1000 all 8 and the builder's fields above them; the columns fit the
    panel's width, the part page does not scroll as a whole, and the flux ledger below still shows
    all its rows."""
    shown(qtbot, win, size)
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    gui_events.click(qtbot, win.canvas, (19.5, 15.0))          # inside the guide's upright arm
    qtbot.wait(50)
    from gui import edits
    assert win.canvas.selection == (edits.PART, 0)
    table = _vertex_table(win)
    assert table.isVisible() and table.rowCount() == 8
    assert _fully_shown_rows(table, win) >= rows, _fully_shown_rows(table, win)
    _check_fits_sideways(table)
    outer = win.edit_tabs.currentWidget()                     # the Selection tab's scroll area
    assert outer.verticalScrollBar().maximum() == 0, "the part page fits the panel's height"
    page = win.properties.pages[edits.PART]
    if size == (1600, 1000):
        assert page.fields_area.verticalScrollBar().maximum() == 0, "name, material and shape fields shown whole"
    tree = win.ledger.tree
    last = win.ledger.items()[-1]
    assert tree.visualItemRect(last).bottom() < tree.viewport().height(), "the ledger keeps its rows"


def test_hole_rows_and_a_mirror_column_fit_a_1024_px_window(qtbot, win, tmp_path):
    """A plate with two holes: 'hole k.i' rows and, as it has a mirror face, the reflectance
    column; still no sideways scrolling at 1024 x 700, also after the window was wider."""
    from raytrace.scene_io import save_scene
    path = tmp_path / "plate.json"
    save_scene(_plate_with_holes(), path)
    shown(qtbot, win, (1600, 1000))
    assert win.open_file(str(path))
    wait_traced(qtbot, win)
    win.canvas.fit()
    gui_events.click(qtbot, win.canvas, (3.0, 3.0))
    qtbot.wait(50)
    table = _vertex_table(win)
    assert table.rowCount() == 10 and not table.isColumnHidden(4)
    _check_fits_sideways(table)
    win.resize(1024, 700)                   # the user makes the window smaller
    qtbot.waitUntil(lambda: win.width() == 1024, timeout=2000)
    qtbot.wait(50)
    _check_fits_sideways(table)
    assert _fully_shown_rows(table, win) >= 5
