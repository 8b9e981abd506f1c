"""What a new user meets first in the desktop app, and pictures fit for a report.

Keys go in as key events, mouse clicks as Qt mouse events on the drawing's viewport, saved
files are reopened.  Contrast figures use luminance with the sRGB primaries' weights
(published: ITU-R BT.709, Y = 0.2126 R + 0.7152 G + 0.0722 B) and source-over compositing
(published: Porter and Duff, "Compositing Digital Images", SIGGRAPH 1984).
"""
from __future__ import annotations

import math
import os
import xml.etree.ElementTree as ET
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtCore import Qt  # noqa: E402
from PySide6.QtGui import QImage, QKeySequence  # noqa: E402
from PySide6.QtWidgets import QWidget  # noqa: E402

from raytrace import cli  # noqa: E402
from raytrace.shapes import PARAMETERS  # noqa: E402

from gui import edits, spectral, style  # noqa: E402

import gui_events  # noqa: E402  (tests/gui_events.py: real mouse events)
from gui.main_window import redo_keys  # noqa: E402
from gui.raydraw import LEVEL_ALPHA  # noqa: E402
from gui.tools import POLYGON, RECTANGLE  # noqa: E402
from test_gui import home, make_window, wait_traced, win  # noqa: E402,F401  (the GUI tests' own fixtures)

SAMPLES = Path(__file__).resolve().parents[1] / "samples"
LIGHT_PIPE = SAMPLES / "light-pipe-90.json"
WINDOW = SAMPLES / "oblique-window.json"
MICROPRISM = SAMPLES / "microprism-strip.json"
ROOF = SAMPLES / "roof-prism-retroreflector.json"
SVG = "{http://www.w3.org/2000/svg}"


def shown(qtbot, win, size=(1400, 900)):
    win.resize(*size)
    win.show()
    qtbot.waitExposed(win)
    win.arrange_docks()
    qtbot.wait(30)


def open_traced(qtbot, win, path, size=(1400, 900)):
    """Show the window at `size`, open a sample and wait for its trace."""
    shown(qtbot, win, size)
    assert win.open_file(str(path))
    wait_traced(qtbot, win)


def lum(rgb) -> float:
    return spectral.luminance(rgb)


def over_background(colour) -> tuple[float, float, float]:
    """A translucent fill composited over the drawing background (source-over)."""
    a = colour.alpha() / 255
    return tuple(a * c + (1 - a) * b for c, b in zip((colour.red(), colour.green(), colour.blue()),
                                                      spectral.BACKGROUND))


# ---------------------------------------------------------------------------- 1. redo keys

def test_redo_keys_are_the_platform_ones_each_once_and_work_by_key(qtbot, win):
    keys = [k.toString() for k in win.redo_action.shortcuts()]
    assert len(keys) == len(set(keys)), keys
    assert {"Ctrl+Shift+Z", "Ctrl+Y"} <= set(keys)
    assert all(k.toString() in keys for k in QKeySequence.keyBindings(QKeySequence.StandardKey.Redo))
    assert [k.toString() for k in redo_keys()] == keys
    shown(qtbot, win)
    assert win.open_file(str(WINDOW))
    win.activateWindow()
    qtbot.waitUntil(win.isActiveWindow, timeout=5000)
    before = win.doc.scene
    win.canvas.select((edits.PART, 0))
    win.canvas.setFocus()
    for redo in ((Qt.Key_Y, Qt.ControlModifier), (Qt.Key_Z, Qt.ControlModifier | Qt.ShiftModifier)):
        qtbot.keyClick(win.canvas.plot, Qt.Key_Right)           # one edit
        moved = win.doc.scene
        assert moved is not before
        qtbot.keyClick(win.canvas.plot, Qt.Key_Z, Qt.ControlModifier)
        assert win.doc.scene == before, "Ctrl+Z undoes"
        qtbot.keyClick(win.canvas.plot, *redo)
        assert win.doc.scene == moved, f"{redo} redoes"
        qtbot.keyClick(win.canvas.plot, Qt.Key_Z, Qt.ControlModifier)


# ---------------------------------------------------------------------------- 2. scenes with problems

def test_a_saved_scene_with_an_overlap_reopens_in_the_editor_to_be_fixed(qtbot, win, tmp_path):
    assert win.open_file(str(WINDOW))
    x0, y0, x1, y1 = win.doc.scene.parts[0].outer.bounds()
    win.set_tool(RECTANGLE)
    win.canvas.drag((x0 - 2.0, (y0 + y1) / 2), ((x0 + x1) / 2, y1 + 2.0))    # across the window
    assert len(win.doc.scene.parts) == 2
    assert win.problems and "overlapping" in win.problems[0].text
    saved = tmp_path / "overlap.json"
    assert win.save_as(str(saved))

    again = make_window(qtbot)
    try:
        assert again.open_file(str(saved)), "the editor opens what it saved"
        assert len(again.doc.scene.parts) == 2
        assert again.result_tabs.currentWidget() is again.problems_panel
        assert again.problems_panel.list.count() == len(again.problems) >= 1
        item = again.problems_panel.list.item(0)
        assert "overlapping" in item.text() and "<part" in item.text(), "plain text, nothing lost"
        assert again.canvas.problems and again.canvas.problems[0].areas, "the overlap is marked"
        assert again.canvas._problem_items
        # the tracer (and the command line) still refuse it
        wait_traced(qtbot, again)
        out = again.last_outcome
        assert not again.errors
        assert out.error and "overlapping" in out.error
        assert cli.main(["check", str(saved)]) != 0
        # a click on the problem selects the part; deleting it fixes the scene
        again.problems_panel.list.itemClicked.emit(item)
        assert again.canvas.selection and again.canvas.selection[0] == edits.PART
        again.delete_selected()
        assert not again.problems and again.problems_panel.list.count() == 0
        assert not again.canvas._problem_items
    finally:
        again.worker.shutdown()


def test_shape_dialog_places_new_parts_clear_of_existing_ones(qtbot, win, monkeypatch):
    from shapely.ops import unary_union

    from gui.dialogs import shape as shape_dialog
    monkeypatch.setattr(shape_dialog.ShapeDialog, "exec", lambda self: 1)
    assert win.open_file(str(WINDOW))
    win.canvas.view.setRange(xRange=(-1, 1), yRange=(-1, 1), padding=0)      # centred on the window
    for kind in ("rectangle", "prism", "lens"):
        win.add_shape(kind)
    parts = win.doc.scene.parts
    assert len(parts) == 1 + 3
    polys = [p.to_shapely(1e-4) for p in parts]
    for i, a in enumerate(polys):
        for b in polys[:i]:
            assert a.intersection(b).area < 1e-9, "no new part overlaps another"
    assert not win.problems
    assert unary_union(polys).area == pytest.approx(sum(p.area for p in polys), rel=1e-9)


# ---------------------------------------------------------------------------- 3. plain-text messages

def test_problem_texts_are_shown_as_plain_text_and_whole(qtbot, win):
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    win.canvas.select((edits.PART, 1))
    x0, y0, x1, y1 = win.doc.scene.parts[1].outer.bounds()
    c = ((x0 + x1) / 2, (y0 + y1) / 2)
    win.canvas.drag(c, (c[0], c[1] - 3.0))            # the panel window into the guide
    wait_traced(qtbot, win)
    out = win.last_outcome
    assert "<part" in out.error
    legend = win.canvas.legend.problem
    assert legend.textFormat() == Qt.PlainText and legend.isVisibleTo(win.canvas.legend)
    assert out.error in legend.text() or legend.text().endswith("...")
    assert "<part" in legend.text(), "the key part of the message is not read as a tag"
    assert legend.wordWrap() and legend.heightForWidth(legend.width()) <= legend.height() + 1, "not cut"
    assert "&lt;part" in win.ledger.summary.text(), "escaped where the label is rich text"
    # the status message stops before the permanent labels
    win.status_note("x" * 400)
    bar = win.statusBar()
    width = bar.fontMetrics().horizontalAdvance(bar.currentMessage())
    assert width < win.trace_label.geometry().left() - 6
    assert win.status_text == "x" * 400 and bar.toolTip() == "x" * 400


# ---------------------------------------------------------------------------- 4. builder rows

def test_switching_between_builder_parts_leaves_no_old_rows(qtbot, win, monkeypatch):
    from gui.dialogs import shape as shape_dialog
    monkeypatch.setattr(shape_dialog.ShapeDialog, "exec", lambda self: 1)
    shown(qtbot, win)
    win.new_scene()
    kinds = ("light_pipe", "rectangle", "lens")
    for kind in kinds:
        win.add_shape(kind)
    page = win.properties.pages[edits.PART]
    for i in (0, 1, 2, 0, 1):
        win.canvas.select((edits.PART, i))
        qtbot.wait(5)
        visible = [w for w in page.shape_box.findChildren(QWidget)
                   if w.isVisibleTo(page.shape_box) and w.parent() is page.shape_box]
        expected = 2 * (3 + len(PARAMETERS[kinds[i]]))        # label and field per row
        assert len(visible) == expected, (kinds[i], len(visible), expected)


def test_detector_panel_says_it_counts_both_sides(win):
    from PySide6.QtWidgets import QLabel
    texts = " ".join(w.text() for w in win.properties.pages[edits.DETECTOR].findChildren(QLabel))
    assert "either side" in texts and "right-hand side" not in texts


# ---------------------------------------------------------------------------- 5. SVG export

def test_svg_export_of_the_light_pipe_is_vector_only(qtbot, win, tmp_path):
    open_traced(qtbot, win, LIGHT_PIPE)
    svg = tmp_path / "pipe.svg"
    win.ask_save_path = lambda *a, **k: str(svg)
    assert win.export_svg(), win.errors
    size = svg.stat().st_size
    assert size < 1_500_000, f"{size} bytes (an embedded bitmap per hit made it 5.4 MB)"
    root = ET.parse(svg).getroot()
    assert not root.findall(f".//{SVG}image"), "no bitmaps"
    circles = root.findall(f".//{SVG}circle")
    assert circles
    ring = style.ESCAPE_MARK.name()
    groups = {g.get("stroke"): g for g in root.iter(f"{SVG}g")}
    rings = groups[ring].findall(f"{SVG}circle")
    assert len(rings) == len(win.canvas.drawing.escapes) > 0
    hits = [g for g in root.iter(f"{SVG}g") if g.get("fill") == style.HIT.name()][0].findall(f"{SVG}circle")
    assert len(hits) == len(win.canvas.drawing.hits_x) > 0
    title = "".join(t.text or "" for t in root.iter(f"{SVG}text"))
    assert win.doc.scene.name in title and "source rays" in title


# ---------------------------------------------------------------------------- 7. readability

def test_faintest_leg_is_darker_than_every_catalog_tint(win):
    """A ghost inside glass must read as a faint ray, not as a gap in the tint."""
    from raytrace.catalog import CATALOG
    for colour in (style.RAY, style.TIR, style.ESCAPING):
        rgb = (colour.red(), colour.green(), colour.blue())
        faintest = spectral.faded_rgb(rgb, min(LEVEL_ALPHA) * 0.4 / 255, (222, 118, 0))
        for name in CATALOG:
            fill = over_background(style.material_tint(name))
            assert lum(faintest) < lum(fill) - 3, (colour.name(), name, lum(faintest), lum(fill))


def test_tir_colour_stands_out_on_the_pmma_tint(win):
    fill = over_background(style.material_tint("PMMA"))
    tir = (style.TIR.red(), style.TIR.green(), style.TIR.blue())
    assert lum(fill) - lum(tir) > 80
    # and in hue: the PMMA fill is bluish, TIR legs are not (common practice: a hue apart)
    assert style.TIR.blue() < style.TIR.green()


def test_drawing_marks_are_readable(qtbot, win):
    open_traced(qtbot, win, LIGHT_PIPE)
    c, d = win.canvas, win.canvas.drawing
    px = c.pixel_mm()
    # escaping legs stop a quarter of the parts' size out
    x0, y0, x1, y1 = c.parts_box()
    reach = 0.25 * max(x1 - x0, y1 - y0)
    xs, ys = d.lines["escaping"][0]
    assert len(xs) and np.hypot(xs[1::2] - xs[0::2], ys[1::2] - ys[0::2]).max() <= reach * (1 + 1e-9)
    # hit marks beside the detector line, not on it
    hx, hy = c._hits.getData()
    det = win.doc.scene.detectors[0]
    ux, uy = np.subtract(det.end, det.start) / math.dist(det.start, det.end)
    off = np.abs((hx - det.start[0]) * -uy + (hy - det.start[1]) * ux) / px
    assert off.min() >= 0.5 * style.DETECTOR_PX + 0.5 * style.HIT_PX - 1e-6
    assert c._hits.zValue() < max(it.zValue() for it in c._glyph_items), "the line is drawn over them"
    # no escape ring covers the source glyph
    for (x, y), (_, _, share, _) in zip(c.escape_xy, d.escapes):
        r = 0.5 * c.escape_ring_px(share) * px
        assert c.escape_ring_px(share) <= style.ESCAPE_RING_MAX_PX
        for src in win.doc.scene.sources:
            assert math.dist((x, y), src.position) > r, (x, y, r)
    # direction arrows on a few bright legs
    ax, _ = c._cues.getData()
    assert ax is not None and 0 < len(ax) // 4 <= 24


def test_incoming_and_returning_beams_have_opposite_arrows(qtbot, win):
    open_traced(qtbot, win, ROOF)
    x, y = win.canvas._cues.getData()
    tips, backs = y[0::4], y[1::4]
    outside = (tips < 0) & (backs < 0)         # below the prism: the beam going up and coming back
    ups, downs = (tips > backs) & outside, (tips < backs) & outside
    assert ups.any() and downs.any()


def test_fit_frames_the_film_not_the_far_detectors(qtbot, win):
    shown(qtbot, win)
    assert win.open_file(str(MICROPRISM))
    (vx0, vx1), _ = win.canvas.view.viewRange()
    x0, _, x1, _ = win.canvas.parts_box()
    assert (x1 - x0) / (vx1 - vx0) > 0.3


# ---------------------------------------------------------------------------- 8. layout and PNG

@pytest.mark.parametrize("size", [(1400, 900), (1024, 700)])
def test_layout_fits_at_common_window_sizes(qtbot, win, size):
    shown(qtbot, win, size)
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    qtbot.wait(30)
    legend = win.canvas.legend
    for w in legend.children():
        if hasattr(w, "isVisibleTo") and w.isVisibleTo(legend):
            assert legend.rect().contains(w.geometry()), (size, w.geometry(), legend.rect())
    tree = win.ledger.tree
    assert tree.verticalScrollBar().maximum() == 0, f"{size}: the ledger scrolls"
    assert tree.horizontalScrollBar().maximum() == 0 or not tree.horizontalScrollBar().isVisible()
    win.result_tabs.setCurrentWidget(win.profiles)
    qtbot.wait(30)
    panel = win.profiles
    for plot in (panel.irr, panel.ang):
        assert plot.isVisible() and plot.height() >= 100
        assert panel.rect().contains(plot.geometry()), f"{size}: a profile is cut"
    bar = win.result_tabs.tabBar()
    assert all(bar.tabRect(i).right() <= bar.width() for i in range(bar.count())), "every tab shows"
    assert not win.canvas.plot.plotItem.autoBtn.isVisible(), "no auto-range button"


def test_png_export_with_size_dpi_and_title_block(qtbot, win, tmp_path):
    open_traced(qtbot, win, WINDOW)
    png = tmp_path / "fig.png"
    win.ask_save_path = lambda *a, **k: str(png)
    win.ask_png_options = lambda: {"width": 1800, "height": 1200, "dpi": 300, "title_block": True}
    assert win.export_png(), win.errors
    img = QImage(str(png))
    assert (img.width(), img.height()) == (1800, 1200)
    assert round(img.dotsPerMeterX() * 0.0254) == 300
    # the title block: dark text in the top band, on white
    title_px = int(46 * 300 / 96)                 # the title block is 46 units at 96 per inch
    band = [img.pixelColor(x, y).value() for y in range(0, title_px, 3) for x in range(0, 900, 3)]
    assert min(band) < 100 and max(band) == 255
    win.ask_png_options = lambda: None
    assert not win.export_png(), "cancelled: nothing written"


def test_png_options_dialog_reports_printed_size(qtbot):
    from gui.dialogs.png_export import PngExportDialog
    dlg = PngExportDialog(1200, 800)
    qtbot.addWidget(dlg)
    dlg.dpi.setCurrentText("300")
    assert dlg.options() == {"width": 1200, "height": 800, "dpi": 300, "title_block": True}
    assert "102 x 68 mm" in dlg.printed.text()      # 1200 px / 300 dpi * 25.4 mm


# ---------------------------------------------------------------------------- 10. real mouse events

def test_polygon_drawn_with_real_clicks_and_a_double_click_through_the_view(qtbot, win):
    shown(qtbot, win)
    win.new_scene()
    win.canvas.view.setRange(xRange=(-10, 10), yRange=(-10, 10), padding=0)
    qtbot.wait(20)
    win.set_tool(POLYGON)
    pts = [(-5.0, -5.0), (5.0, -5.0), (5.0, 5.0)]
    for p in pts[:-1]:
        gui_events.click(qtbot, win.canvas, p)
    gui_events.double_click(qtbot, win.canvas, pts[-1])
    parts = win.doc.scene.parts
    assert len(parts) == 1, "the double-click closed the part"
    px = win.canvas.pixel_mm()
    got = parts[0].outer.vertices
    assert len(got) == 3
    for a, b in zip(sorted(got), sorted(pts)):
        assert math.dist(a, b) < 2 * px
