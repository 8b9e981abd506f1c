"""Rough edges of the editor, checked the way a user meets them: a window of 1024 x 700 or
larger, files opened from disk, keys and mouse events sent to the widgets."""
from __future__ import annotations

import json
import os
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtCore import QRect, Qt  # noqa: E402
from PySide6.QtGui import QFontMetrics  # noqa: E402

from test_gui import home, make_window, wait_traced, win  # noqa: E402,F401  (the GUI tests' fixtures)
from test_gui_report import shown  # noqa: E402

SAMPLES = Path(__file__).resolve().parents[1] / "samples"
LIGHT_PIPE = SAMPLES / "light-pipe-90.json"
MICROPRISM = SAMPLES / "microprism-strip.json"

ZWSP = "\u200b"


# ---------------------------------------------------------------------------- 1. ledger names
def _long_named_film(tmp_path) -> Path:
    data = json.loads(MICROPRISM.read_text())
    data["parts"][0]["name"] = "brightness_enhancement_film_PMMA_90deg_rev_B"
    data["detectors"][0]["name"] = "viewer side, 300 mm in front of the display panel"
    data["detectors"][1]["name"] = "recycled towards the backlight's reflector sheet"
    path = tmp_path / "long-names.json"
    path.write_text(json.dumps(data))
    return path


@pytest.mark.parametrize("size", [(1024, 700), (1600, 1000)])
def test_every_ledger_row_is_readable_in_full(qtbot, win, tmp_path, size):
    """Long part, face and detector names wrap in the ledger instead of ending in an ellipsis,
    the figures keep their columns, and the panel still shows every row without scrolling."""
    shown(qtbot, win, size)
    assert win.open_file(str(_long_named_film(tmp_path)))
    wait_traced(qtbot, win)
    qtbot.wait(50)
    tree = win.ledger.tree
    fm = QFontMetrics(tree.font())
    items = win.ledger.items()
    names = [it.text(0).replace(ZWSP, "") for it in items]
    assert "brightness_enhancement_film_PMMA_90deg_rev_B / prism facet" in names
    assert "viewer side, 300 mm in front of the display panel" in names
    col0 = tree.header().sectionSize(0)
    wrapped = 0
    for it in items:
        rect = tree.visualItemRect(it)
        assert rect.height() > 0, it.text(0)
        indent = 0 if it.parent() is None else tree.indentation()
        text_w = col0 - indent - 8            # the delegate's margins
        need = fm.boundingRect(QRect(0, 0, text_w, 10_000), Qt.TextWordWrap, it.text(0)).height()
        # the row is tall enough for the wrapped name, and no line is wider than the column
        assert rect.height() >= need - 1, (it.text(0), rect.height(), need)
        for word in it.text(0).replace(ZWSP, " ").split():
            assert fm.horizontalAdvance(word) <= text_w + 1, word
        wrapped += need > fm.lineSpacing() + 1
        for c in (1, 2, 3):                  # the figures shown are never cut
            if not tree.isColumnHidden(c):
                assert fm.horizontalAdvance(it.text(c)) <= tree.header().sectionSize(c), it.text(c)
        if it.parent() is not None:          # the flux is always there: in its column or tooltip
            assert it.toolTip(2) == f"flux {it.text(1)}"
    if size[0] == 1024:
        assert wrapped >= 2, "at 1024 px the long names take more than one line"
        assert tree.isColumnHidden(1), "the narrow panel gives the names the flux column's width"
    else:
        assert not tree.isColumnHidden(1), "a wide panel shows the flux column"
    assert tree.verticalScrollBar().maximum() == 0, "every row shows without scrolling"
    assert tree.horizontalScrollBar().maximum() == 0 or not tree.horizontalScrollBar().isVisible()
    win.grab().save(str(tmp_path / f"ledger-{size[0]}.png"))


# ---------------------------------------------------------------------------- 2. fit frames the parts
def _frame(win):
    (x0, x1), (y0, y1) = win.canvas.view.viewRange()
    return x0, x1, y0, y1


def _fit_keys(qtbot, win, modifiers):
    win.activateWindow()
    qtbot.waitUntil(win.isActiveWindow, timeout=5000)
    win.canvas.zoom(0.2)                              # somewhere else first, so the key must act
    qtbot.keyClick(win.canvas.plot, Qt.Key_0, modifiers)
    qtbot.wait(20)


@pytest.mark.parametrize("size", [(1024, 700), (1600, 1000)])
def test_ctrl_0_frames_the_prism_film_and_its_detectors_cross_the_frame(qtbot, win, size):
    """The prism film sample: 12 mm of film between two 40 mm detectors.  Ctrl+0 makes the film
    most of the drawing's width; both detectors still cross the frame; Ctrl+Shift+0 shows the
    detectors whole; Ctrl+= and Ctrl+- still zoom about the view."""
    shown(qtbot, win, size)
    assert win.open_file(str(MICROPRISM))
    _fit_keys(qtbot, win, Qt.ControlModifier)
    x0, x1, y0, y1 = _frame(win)
    px0, _, px1, _ = win.canvas.parts_box()
    assert (px1 - px0) / (x1 - x0) > 0.7, "the film fills most of the width"
    for d in win.doc.scene.detectors:                 # horizontal detectors at y = 8 and y = 0
        assert y0 < d.start[1] < y1 and min(d.start[0], d.end[0]) < x0 and max(d.start[0], d.end[0]) > x1
    assert win.canvas.fit_left_out == []
    _fit_keys(qtbot, win, Qt.ControlModifier | Qt.ShiftModifier)
    x0, x1, y0, y1 = _frame(win)
    assert x0 < -20 and x1 > 20, "fit everything shows the detectors end to end"
    width = x1 - x0
    qtbot.keyClick(win.canvas.plot, Qt.Key_Equal, Qt.ControlModifier)
    assert _frame(win)[1] - _frame(win)[0] < 0.9 * width, "Ctrl+= zooms in"
    qtbot.keyClick(win.canvas.plot, Qt.Key_Minus, Qt.ControlModifier)
    assert _frame(win)[1] - _frame(win)[0] == pytest.approx(width, rel=1e-6), "Ctrl+- zooms back out"


def test_a_far_detector_is_named_when_the_fit_leaves_it_out(qtbot, win, tmp_path):
    """A screen 500 mm from a 12 mm film would shrink the film to nothing: Ctrl+0 leaves it out
    of the frame and the status bar names it and the key that shows it."""
    data = json.loads(MICROPRISM.read_text())
    data["detectors"][0]["start"], data["detectors"][0]["end"] = [-20.0, 500.0], [20.0, 500.0]
    path = tmp_path / "far.json"
    path.write_text(json.dumps(data))
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(path))
    _fit_keys(qtbot, win, Qt.ControlModifier)
    x0, x1, y0, y1 = _frame(win)
    assert y1 < 500 and (12.0 / (x1 - x0)) > 0.7
    assert win.canvas.fit_left_out == ["viewer"]
    assert "viewer" in win.statusBar().currentMessage() and "Ctrl+Shift+0" in win.statusBar().currentMessage()


# ---------------------------------------------------------------------------- 6. DXF export
def test_export_cross_section_as_dxf_writes_the_edited_parts(qtbot, win, tmp_path):
    """Open the light pipe, move the guide one grid step by key, File > Export cross-section as
    DXF: the file, read back with ezdxf (the reference DXF library), holds every edge of the
    edited scene in mm as a LINE or an ARC with the same ends, centre and radius."""
    import ezdxf
    from gui import edits
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(LIGHT_PIPE))
    win.activateWindow()
    qtbot.waitUntil(win.isActiveWindow, timeout=5000)
    win.canvas.select((edits.PART, 0))
    win.canvas.setFocus()
    qtbot.keyClick(win.canvas.plot, Qt.Key_Right)
    scene = win.doc.scene
    out = tmp_path / "section.dxf"
    win.ask_save_path = lambda *a, **k: str(out)
    menu = next(a.menu() for a in win.menuBar().actions() if a.text() == "&File")
    action = next(a for a in menu.actions() if a.text() == "Export cross-section as D&XF...")
    action.trigger()
    assert out.exists(), win.errors
    assert "Exported the cross-section" in win.statusBar().currentMessage()
    doc = ezdxf.readfile(out)
    assert doc.header["$INSUNITS"] == 4                       # DXF reference: 4 = millimetres
    msp = doc.modelspace()
    lines = [((e.dxf.start.x, e.dxf.start.y), (e.dxf.end.x, e.dxf.end.y)) for e in msp.query("LINE")]
    arcs = [(e.dxf.center.x, e.dxf.center.y, e.dxf.radius, e.start_point, e.end_point) for e in msp.query("ARC")]
    n = 0
    for part in scene.parts:
        for loop in part.loops:
            for e in loop.edges:
                n += 1
                if e.is_arc:
                    assert any(abs(cx - e.arc_center[0]) < 1e-9 and abs(cy - e.arc_center[1]) < 1e-9
                               and abs(r - e.radius) < 1e-9
                               and {(round(p.x, 9), round(p.y, 9)) for p in (a, b)}
                               == {(round(q[0], 9), round(q[1], 9)) for q in (e.start, e.end)}
                               for cx, cy, r, a, b in arcs), e
                else:
                    assert any({tuple(round(v, 9) for v in p) for p in ln}
                               == {tuple(round(v, 9) for v in q) for q in (e.start, e.end)} for ln in lines), e
    assert len(lines) + len(arcs) == n
    assert arcs, "the bend stays arcs"
    before = load_first_x(LIGHT_PIPE)
    assert min(x for (a, b) in lines for x in (a[0], b[0])) == pytest.approx(before + 1.0), "the moved guide"


def load_first_x(path):
    from raytrace.scene_io import load_scene
    return min(x for p in load_scene(path).parts for lp in p.loops for e in lp.edges for x in (e.start[0], e.end[0]))


# ---------------------------------------------------------------------------- 4. dense ray fans
def _guide_pixels(qtbot, win, with_rays: bool):
    """The drawing's pixels over the upright arm of the light pipe (x 18.5..20.5, y 12..19 mm)."""
    import numpy as np
    from gui_events import widget_point
    for it in win.canvas._ray_items:
        it.setVisible(with_rays)
    qtbot.wait(20)
    img = win.canvas.plot.viewport().grab().toImage()
    a, b = widget_point(win.canvas, (18.5, 19.0)), widget_point(win.canvas, (20.5, 12.0))
    out = np.array([[img.pixelColor(x, y).getRgb()[:3] for x in range(int(a.x()), int(b.x()))]
                    for y in range(int(a.y()), int(b.y()))], dtype=float)
    for it in win.canvas._ray_items:
        it.setVisible(True)
    return out


def test_a_dense_tir_fan_reads_as_rays_not_as_a_fill(qtbot, win):
    """The light pipe's 2,000 source rays bounce by TIR thousands of times in a 3 mm guide.  Drawn
    with opaque lines they painted the guide solid green; now most of the guide's tint shows
    between the rays, green TIR rays still show there, and the legend says the fan is thinned."""
    import numpy as np
    from gui import style  # noqa: F401  (the colours are the canvas's own)
    from gui.canvas import KIND_COLOUR
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    qtbot.wait(30)
    bare = _guide_pixels(qtbot, win, with_rays=False)
    drawn = _guide_pixels(qtbot, win, with_rays=True)
    tint = np.median(bare.reshape(-1, 3), axis=0)
    same = np.abs(drawn - tint).max(axis=2) <= 3
    assert same.mean() > 0.5, f"only {same.mean():.0%} of the guide shows its tint between the rays"
    green = KIND_COLOUR["tir"]
    g = np.array([green.red(), green.green(), green.blue()], dtype=float)
    # a TIR leg's pixel lies between the tint and the TIR colour: closer to that colour than the tint
    toward = ((drawn - tint) @ (g - tint)) / ((g - tint) @ (g - tint))
    assert (toward > 0.2).mean() > 0.02, "TIR rays still show in the guide"
    assert win.canvas.drawing.n_thinned > 0
    assert "thinned" in win.canvas.legend.fade_note.text()
    assert "ledger counts them all" in win.canvas.legend.fade_note.toolTip()


def test_a_sparse_beam_is_neither_faded_nor_thinned(qtbot, win):
    """The oblique window's parallel beam does not crowd: every leg is drawn at its flux step."""
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(SAMPLES / "oblique-window.json"))
    wait_traced(qtbot, win)
    assert win.canvas.drawing.n_thinned == 0
    assert win.canvas.legend.fade_note.text() == "(all fade with flux)"


# ---------------------------------------------------------------------------- 3. arcs and holes in the table
def _type_in_cell(qtbot, table, row, col, text):
    """Click-select the cell, F2 to edit, select what is there, type, Enter: as a user does."""
    from PySide6.QtTest import QTest
    from PySide6.QtWidgets import QApplication
    table.setFocus()
    table.setCurrentCell(row, col)
    QTest.keyClick(table, Qt.Key_F2)
    qtbot.wait(10)
    editor = QApplication.focusWidget()
    QTest.keyClick(editor, Qt.Key_A, Qt.ControlModifier)
    QTest.keyClicks(editor, text)
    QTest.keyClick(editor, Qt.Key_Return)
    qtbot.wait(10)


def test_vertex_table_shows_and_edits_arc_radii_and_hole_rows(qtbot, win, tmp_path):
    """A ring (a 20 x 10 plate with a round hole of radius 2) saved to disk and opened: the
    table lists the outline's four vertices and the hole's two, each arc with its radius; an
    outline edge typed to R 40 becomes that arc, a radius shorter than half the edge is refused
    with a message naming the row and field, Ctrl+Z undoes, and the saved file reopens
    with the arc.  Hovering the arc's face shows its radius."""
    from raytrace.scene_io import load_scene, save_scene
    from test_dxf_io import scene_with_everything
    import gui_events
    from gui import edits
    path = tmp_path / "ring.json"
    save_scene(scene_with_everything(), path)
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(path))
    win.canvas.select((edits.PART, 0))
    qtbot.wait(20)
    from PySide6.QtWidgets import QTableWidget
    table = next(t for t in win.properties.findChildren(QTableWidget)
                 if t.isVisibleTo(win.properties) and t.columnCount() == 6)
    heads = [table.verticalHeaderItem(r).text() for r in range(table.rowCount())]
    assert heads == ["1", "2", "3", "4", "hole 1.1", "hole 1.2"]
    assert table.horizontalHeaderItem(5).text() == "arc R" and "in mm" in table.horizontalHeaderItem(5).toolTip()
    assert [table.item(r, 5).text() for r in range(6)][:4] == ["", "", "", ""]
    hole_r = [float(table.item(r, 5).text()) for r in (4, 5)]
    assert [abs(r) for r in hole_r] == [2.0, 2.0]         # the hole's half circles, radius 2 mm
    assert not table.item(4, 0).flags() & Qt.ItemIsEditable   # a hole's vertices are shown only

    _type_in_cell(qtbot, table, 0, 5, "40")               # edge 1, (0,0) -> (20,0), chord 20 mm
    e = win.doc.scene.parts[0].outer.edges[0]
    assert e.is_arc and e.radius == pytest.approx(40.0) and e.start == (0, 0) and e.end == (20, 0)
    assert table.item(0, 5).text() == "40"
    bent = win.doc.scene
    _type_in_cell(qtbot, table, 1, 5, "3")                # edge 2 is 10 mm long: R 3 cannot span it
    assert win.doc.scene is bent, "a bad radius changes nothing"
    said = win.statusBar().currentMessage()
    assert said.startswith("row 2: arc R: expected") and "half the edge's length (5 mm)" in said, said
    assert table.item(1, 5).text() == ""
    _type_in_cell(qtbot, table, 4, 5, "-2.5")             # a hole's edge: radius 2.5 into the material
    assert win.doc.scene.parts[0].holes[0].edges[0].radius == pytest.approx(2.5)

    # hovering the bent face says its radius (it bulges out of the plate: +40)
    mid = e.point_at(0.5)
    win.canvas.fit()
    gui_events.hover(qtbot, win.canvas, mid)
    assert "arc R 40 mm" in win.canvas.hover_text(*mid)

    win.canvas.setFocus()
    qtbot.keyClick(win.canvas.plot, Qt.Key_Z, Qt.ControlModifier)
    assert win.doc.scene is bent, "Ctrl+Z undoes the hole's radius"
    out = tmp_path / "ring-bent.json"
    win.ask_save_path = lambda *a, **k: str(out)
    assert win.save_as()
    again = load_scene(out, check_shapes=False).parts[0].outer.edges[0]
    assert again.is_arc and again.radius == pytest.approx(40.0)


# ---------------------------------------------------------------------------- Help > Keys
def test_help_keys_lists_a_shortcut_of_every_menu_action(win):
    """Help > Keys and mouse (F1) names at least one key of every menu action that has one, as
    the menus set them (Fit everything, Ctrl+Shift+0, was missing, and Ctrl+0 was called 'fit
    the scene' after it came to frame the parts and sources)."""
    import re
    from PySide6.QtGui import QKeySequence
    from gui.help import SHORTCUTS
    keys = set()
    for cell in re.findall(r"<tr><td>(.*?)</td>", SHORTCUTS):
        keys.update(k for k in re.split(r"\s*(?:/|,| or |\(|\))\s*", cell) if k)
    missing = []
    for top in win.menuBar().actions():
        for a in top.menu().actions():
            shortcuts = [s.toString(QKeySequence.PortableText) for s in a.shortcuts()]
            if shortcuts and not keys.intersection(shortcuts):
                missing.append((a.text(), shortcuts))
    assert missing == []
    assert "fit the parts and sources" in SHORTCUTS


def test_opening_a_scene_with_a_far_detector_names_it(qtbot, win, tmp_path):
    """Open frames the parts too: the status bar's "Opened ..." also names the detector the
    frame leaves out (the fit's own note was replaced by "Opened" at once)."""
    data = json.loads(MICROPRISM.read_text())
    data["detectors"][0]["start"], data["detectors"][0]["end"] = [-20.0, 500.0], [20.0, 500.0]
    path = tmp_path / "far.json"
    path.write_text(json.dumps(data))
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(path))
    assert win.canvas.fit_left_out == ["viewer"]
    said = win.statusBar().currentMessage()
    assert said == "Opened far.json; outside the view: detector viewer (Ctrl+Shift+0 shows it)", said


def test_sweep_table_is_not_saved_over_the_open_scene(qtbot, win, tmp_path):
    """Sweep > Save table... onto the open scene's own file wrote the CSV over the scene (the
    main window's exports refuse that, the dialog did not); now it is refused, the file stays."""
    import shutil
    from gui.dialogs.sweep import SweepDialog
    from test_gui import run_sweep_dialog
    scene = tmp_path / "window.json"
    shutil.copy(SAMPLES / "oblique-window.json", scene)
    assert win.open_file(str(scene))
    dlg = SweepDialog(win.doc.scene, {}, win)
    qtbot.addWidget(dlg)
    run_sweep_dialog(qtbot, dlg, "probe beam.direction_deg", 30.0, 50.0, 2, 10)
    assert dlg.result is not None
    assert not dlg.save_table(str(scene))
    assert "the open scene's own file" in dlg.status.text()
    assert scene.read_bytes() == (SAMPLES / "oblique-window.json").read_bytes()
    assert dlg.save_table(str(tmp_path / "table.csv"))


def test_typing_a_vertex_of_a_built_part_says_it_becomes_a_plain_outline(qtbot, win):
    """The light pipe's guide is built from a shape; typing a vertex's x in the table makes it
    a plain outline (the documented rule).  The status bar says so and how to undo; Ctrl+Z
    gives the shape back."""
    from gui import edits
    from PySide6.QtWidgets import QTableWidget
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(LIGHT_PIPE))
    built = win.doc.scene
    assert built.parts[0].shape is not None
    win.canvas.select((edits.PART, 0))
    qtbot.wait(20)
    table = next(t for t in win.properties.findChildren(QTableWidget)
                 if t.isVisibleTo(win.properties) and t.columnCount() >= 5)
    x0 = float(table.item(0, 0).text())
    _type_in_cell(qtbot, table, 0, 0, f"{x0 - 0.5:g}")
    assert win.doc.scene.parts[0].shape is None
    said = win.statusBar().currentMessage()
    assert said.startswith("guide is now a plain outline (Ctrl+Z undoes)"), said
    assert "linked to its shape save as plain numbers" in win.statusBar().toolTip()   # the whole note
    win.canvas.setFocus()
    qtbot.keyClick(win.canvas.plot, Qt.Key_Z, Qt.ControlModifier)
    assert win.doc.scene == built and win.doc.scene.parts[0].shape is not None
