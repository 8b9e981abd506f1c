"""Thinning of crowded fans follows the scale the rays are drawn at, on screen and in exports.

The crowding estimate (`gui/raydraw.crowding`) judges ink per cell of a grid laid over the rays'
whole extent, for 1 px lines of a given size in mm: it depends on the zoom, not on where the
view is.  So:

* a pan (a real mouse drag on empty space) keeps the drawing, and the drawing kept is exactly
  the one made afresh for the panned view (redoing it would change nothing);
* an exported figure is laid out in 96-dpi units with 1-unit lines and thins for its own scale
  (mm per unit): an SVG at the canvas's size has the legs the screen shows, a small PNG fewer,
  a large one more (as the canvas would at those zooms), and its legend says when it thinned;
* the CSV ray table is data, not a picture: every recorded leg, whatever the view.
"""
from __future__ import annotations

import csv
import os
import re

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")

import gui_events  # noqa: E402  (tests/gui_events.py: real mouse events and keys)
from gui.raydraw import scene_drawing  # noqa: E402
from test_gui import LIGHT_PIPE, home, wait_traced, win  # noqa: E402,F401  (the GUI tests' fixtures)
from test_gui_report import shown  # noqa: E402


def _open_zoomed(qtbot, win):
    from PySide6.QtCore import Qt
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    c = win.canvas
    c.setFocus()
    for _ in range(2):
        gui_events.key(Qt.Key_Equal, Qt.ControlModifier)
    qtbot.waitUntil(lambda: c.drawing.pixel_mm == pytest.approx(c.pixel_mm()), timeout=3000)
    assert c.drawing.n_thinned > 0, "the fan is still crowded at this zoom"
    return c


def _same_lines(a, b):
    for kind in a.lines:
        for (ax, ay), (bx, by) in zip(a.lines[kind], b.lines[kind]):
            np.testing.assert_array_equal(ax, bx)
            np.testing.assert_array_equal(ay, by)
    assert a.n_thinned == b.n_thinned


def test_a_pan_keeps_the_thinning_which_is_the_panned_views_own(qtbot, win):
    c = _open_zoomed(qtbot, win)
    drawing, px = c.drawing, c.pixel_mm()
    (x0, x1), (y0, y1) = c.view.viewRange()
    # empty space near the view's top left corner (no part, source or detector there)
    start = (x0 + 0.08 * (x1 - x0), y1 - 0.08 * (y1 - y0))
    assert c.pick(*start) is None and c.face_at(*start) is None
    gui_events.drag(qtbot, c, start, (start[0] + 0.3 * (x1 - x0), start[1] - 0.2 * (y1 - y0)))
    (nx0, nx1), _ = c.view.viewRange()
    assert nx0 < x0 - 0.2 * (x1 - x0), "the view panned"
    assert c.pixel_mm() == pytest.approx(px, rel=1e-9)
    qtbot.wait(400)                  # longer than the rest after which a zoom is thinned anew
    assert c.drawing is drawing
    _same_lines(drawing, scene_drawing(c.result, c.scene, pixel_mm=c.pixel_mm()))


def _ray_legs(svg: str) -> int:
    return sum(d.count("M") for d in re.findall(r'<path class="rays" d="([^"]*)"', svg))


def test_exported_figures_thin_for_their_own_scale_and_the_csv_keeps_every_leg(qtbot, win, tmp_path, monkeypatch):
    import gui.figure as figure
    c = _open_zoomed(qtbot, win)
    screen_legs = c.painted_segments
    win.ask_save_path = lambda *a, **k: str(tmp_path / "same.svg")
    assert win.export_svg()                     # File > Export drawing (SVG), at the canvas's size
    svg = (tmp_path / "same.svg").read_text()
    assert _ray_legs(svg) == screen_legs
    assert "crowded fans thinned" in svg

    rendered = []
    real_render = figure.render_png
    monkeypatch.setattr(figure, "render_png", lambda text, *a: (rendered.append(text), real_render(text, *a)))
    size = c.plot.size()
    legs = {}
    for name, scale in (("small", 0.4), ("large", 2.5)):     # what the PNG dialog is given
        w, h = int(scale * size.width()), int(scale * size.height())
        win.ask_png_options = lambda w=w, h=h: {"width": w, "height": h, "dpi": 96, "title_block": True}
        win.ask_save_path = lambda *a, n=name, **k: str(tmp_path / f"{n}.png")
        assert win.export_png()
        assert (tmp_path / f"{name}.png").stat().st_size > 0
        legs[name] = _ray_legs(rendered[-1])
    assert legs["small"] < screen_legs < legs["large"], (legs, screen_legs)
    assert c.painted_segments == screen_legs and c.drawing.pixel_mm == pytest.approx(c.pixel_mm())

    win.ask_save_path = lambda *a, **k: str(tmp_path / "rays.csv")
    assert win.export_csv()                     # File > Export ray table (CSV)
    with open(tmp_path / "rays.csv", newline="") as f:
        rows = [r for r in csv.reader(f) if r and not r[0].startswith("#")]
    assert len(rows) - 1 == len(c.result.segments["x0"]) > screen_legs
