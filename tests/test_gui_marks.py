"""Detector hit marks drawn as one item: a dot for every hit the trace recorded, where the engine
says the ray met the detector, beside the line on the side the ray came from, and nowhere else.

The reference is the engine's own hit record (raytrace/detectors.py: a hit's position is in mm
from the detector's start toward its end; `front` is the side to the right of start -> end), not
the canvas's drawing code.
"""
from __future__ import annotations

import math
import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6.QtCore import QPointF  # noqa: E402

from gui import style  # noqa: E402
from gui.marks import Dots  # noqa: E402
from test_gui import LIGHT_PIPE, make_window, wait_traced  # noqa: E402


@pytest.fixture
def win(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("RAYTRACE_GUI_HOME", str(tmp_path / "home"))
    w = make_window(qtbot)
    w.resize(1200, 800)
    w.show()
    qtbot.waitExposed(w)
    yield w
    w.worker.shutdown()


def _viewport_px(canvas, x, y):
    p = canvas.plot.mapFromScene(canvas.view.mapViewToScene(QPointF(x, y)))
    return p.x(), p.y()


def test_hit_dots_sit_where_the_engine_recorded_the_hits(qtbot, win):
    assert win.open_file(str(LIGHT_PIPE))
    result = wait_traced(qtbot, win)
    c = win.canvas
    assert isinstance(c._hits, Dots)
    hits = result.raw.hits
    hx, hy = c._hits.getData()
    assert len(hx) == len(hits["position"]) > 100            # one dot per recorded hit
    px = c.pixel_mm()
    beside = (0.5 * style.DETECTOR_PX + 0.5 * style.HIT_PX + 1) * px
    for k, det in enumerate(win.doc.scene.detectors):
        mine = np.asarray(hits["detector"]) == k
        if not mine.any():
            continue
        L = math.dist(det.start, det.end)
        ux, uy = (det.end[0] - det.start[0]) / L, (det.end[1] - det.start[1]) / L
        rx, ry = uy, -ux                                     # right of start -> end: the front
        dx, dy = hx[mine] - det.start[0], hy[mine] - det.start[1]
        along = dx * ux + dy * uy
        across = dx * rx + dy * ry
        np.testing.assert_allclose(along, np.asarray(hits["position"])[mine], rtol=0, atol=1e-9 * L)
        side = np.where(np.asarray(hits["front"])[mine], 1.0, -1.0)
        np.testing.assert_allclose(across, side * beside, rtol=1e-9, atol=1e-12)


def test_hit_dots_are_painted_at_their_places_and_nowhere_else(qtbot, win):
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    c = win.canvas
    vp = c.plot.viewport()
    with_dots = vp.grab().toImage()
    c._hits.setVisible(False)
    without = vp.grab().toImage()
    c._hits.setVisible(True)
    assert with_dots.size() == without.size()
    w, h = with_dots.width(), with_dots.height()

    def pixels(img):
        img = img.convertToFormat(img.Format.Format_RGB32)
        return np.frombuffer(img.constBits(), np.uint8).reshape(h, img.bytesPerLine() // 4, 4)[:, :w, 2::-1].astype(int)   # stored B, G, R, A

    a, b = pixels(with_dots), pixels(without)
    changed = np.abs(a - b).sum(axis=2) > 0
    centres = np.array([_viewport_px(c, x, y) for x, y in zip(*c._hits.getData())])
    inside = (centres[:, 0] >= 0) & (centres[:, 0] < w) & (centres[:, 1] >= 0) & (centres[:, 1] < h)
    assert inside.sum() > 100
    # every changed pixel belongs to a dot: within a dot's radius (and a pixel of smoothing)
    ys, xs = np.nonzero(changed)
    assert len(xs)
    reach = 0.5 * style.HIT_PX + 1.0
    for x, y in zip(xs, ys):
        d = np.hypot(centres[:, 0] - (x + 0.5), centres[:, 1] - (y + 0.5)).min()
        assert d <= reach, (x, y, d)
    # and every dot shows: the pixel under each centre is the hit colour, except under the
    # square end handles of the detector, which are drawn over everything
    hx, hy = c._handles.getData()
    handles = np.array([_viewport_px(c, x, y) for x, y in zip(hx, hy)])
    under = np.array([np.abs(handles - p).max(axis=1).min() <= 0.5 * style.HANDLE_PX + 1 for p in centres])
    assert (inside & ~under).sum() > 100
    hit = np.array([style.HIT.red(), style.HIT.green(), style.HIT.blue()])
    for cx, cy in centres[inside & ~under]:
        # (8 levels: the smoothing of the pre-rendered dot)
        assert np.abs(a[int(cy), int(cx)] - hit).max() <= 8, (cx, cy, a[int(cy), int(cx)])


def test_dots_follow_the_zoom_in_screen_pixels(qtbot, win):
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    c = win.canvas
    r0 = c._hits.boundingRect()
    px0 = c.pixel_mm()
    c.zoom(2.0)
    qtbot.waitUntil(lambda: c.pixel_mm() < 0.75 * px0)
    # redrawn for the new zoom: still beside the line by the same number of pixels
    det = win.doc.scene.detectors[0]
    mine = np.asarray(win.last_outcome.result.raw.hits["detector"]) == 0
    hx, hy = (v[mine] for v in c._hits.getData())
    L = math.dist(det.start, det.end)
    ux, uy = (det.end[0] - det.start[0]) / L, (det.end[1] - det.start[1]) / L
    across = np.abs((hx - det.start[0]) * uy - (hy - det.start[1]) * ux) / c.pixel_mm()
    np.testing.assert_allclose(across, 0.5 * style.DETECTOR_PX + 0.5 * style.HIT_PX + 1, rtol=1e-9)
    assert c._hits.boundingRect().width() < r0.width()       # the pixel padding shrinks in mm
