"""At 1024 x 700 the Edit panel's splitter can be seen and used, and the flux ledger's summary
reads in two lines.

Checked on the window's own pixels and through real mouse events: the handle between a
selected part's fields and its vertex table is drawn with a contrast a reader can see (its
grip against the panel's grey: at least 3:1, WCAG 2.1's minimum for user-interface components,
success criterion 1.4.11, relative luminance as defined there), and a drag on it moves the
split; the ledger's summary label is two lines of its font tall for a scene with one
detector, and wraps only between detectors' figures for more.
"""
from __future__ import annotations

import os
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6.QtCore import QPoint, Qt  # noqa: E402
from PySide6.QtGui import QFontMetrics  # noqa: E402
from PySide6.QtTest import QTest  # noqa: E402

from gui import edits  # noqa: E402
from test_gui import LIGHT_PIPE, home, wait_traced, win  # noqa: E402,F401  (the GUI tests' fixtures)
from test_gui_report import shown  # noqa: E402

SAMPLES = sorted((Path(__file__).resolve().parents[1] / "samples").glob("*.json"))


def _luminance(c) -> float:
    """WCAG 2.1 relative luminance of an sRGB colour."""
    def lin(v):
        v /= 255.0
        return v / 12.92 if v <= 0.04045 else ((v + 0.055) / 1.055) ** 2.4
    return 0.2126 * lin(c.red()) + 0.7152 * lin(c.green()) + 0.0722 * lin(c.blue())


def _contrast(a, b) -> float:
    la, lb = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def test_the_edit_panels_splitter_handle_shows_and_drags_at_1024_by_700(qtbot, win):
    from PySide6.QtGui import QColor
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    win.canvas.select((edits.PART, 0))
    qtbot.wait(50)
    split = _visible_split(win)
    handle = split.handle(1)
    assert handle.isVisible() and handle.height() >= 6
    img = handle.grab().toImage()
    colours = {img.pixel(x, y) for x in range(img.width()) for y in range(img.height())}
    background = QColor(img.pixel(2, img.height() // 2))
    darkest = min((QColor(c) for c in colours), key=_luminance)
    assert _contrast(darkest, background) >= 3.0, (darkest.name(), background.name())
    # a drag on the handle, as a user does it: the fields get 40 px more
    before = split.sizes()[0]
    # (the pointer's path is fixed on the screen; the handle moves under it)
    start = handle.mapToGlobal(QPoint(handle.width() // 2, handle.height() // 2))
    QTest.mousePress(handle, Qt.LeftButton, Qt.NoModifier, handle.mapFromGlobal(start))
    for dy in (10, 20, 30, 40):
        QTest.mouseMove(handle, handle.mapFromGlobal(start + QPoint(0, dy)))
        qtbot.wait(10)
    QTest.mouseRelease(handle, Qt.LeftButton, Qt.NoModifier, handle.mapFromGlobal(start + QPoint(0, 40)))
    assert split.sizes()[0] == pytest.approx(before + 40, abs=2)


def _visible_split(win):
    from gui.panels.grip_splitter import GripSplitter
    splits = [s for s in win.findChildren(GripSplitter) if s.isVisible()]
    assert len(splits) == 1
    return splits[0]


@pytest.mark.parametrize("sample", SAMPLES, ids=lambda p: p.stem)
def test_the_ledger_summary_takes_two_lines_at_1024_by_700(qtbot, win, sample):
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(sample))
    wait_traced(qtbot, win)
    qtbot.wait(30)
    label = win.ledger.summary
    line = QFontMetrics(label.font()).lineSpacing()
    lines = round((label.height() - label.contentsMargins().top() - label.contentsMargins().bottom()) / line)
    # the efficiency, then the counts: two lines; a wrap falls only between detectors
    n_detectors = len(win.doc.scene.detectors)
    assert lines == 2 if n_detectors == 1 else lines <= 1 + n_detectors, (label.text(), label.height(), line)
    assert label.text().count("<br>") == 1


def test_vertex_handles_of_a_fine_outline_leave_its_shape_visible(qtbot, win):
    """The prism film's 50 vertices 0.35 mm apart: selected at 1024 x 700 (about 11 px apart on
    screen), full-size 9 px handles covered the teeth; now each handle is at most half the
    on-screen distance to its neighbours (at least 5 px), and zoomed in they grow back."""
    from PySide6.QtCore import Qt
    import gui_events
    from gui import style
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(next(p for p in SAMPLES if p.stem == "microprism-strip")))
    wait_traced(qtbot, win)
    c = win.canvas
    gui_events.click(qtbot, c, (-5.0, 1.2))                 # on the film, beyond the backlight
    assert c.selection == (edits.PART, 0)
    verts = c.scene.parts[0].outer.vertices

    def sizes_and_gaps():
        sizes = [p.size() for p in c._handles.points()][:len(verts)]
        pts = [gui_events.widget_point(c, v) for v in verts]
        gaps = [min((pts[k] - pts[k - 1]).manhattanLength(), (pts[(k + 1) % len(pts)] - pts[k]).manhattanLength())
                for k in range(len(pts))]
        return sizes, gaps
    sizes, gaps = sizes_and_gaps()
    assert min(gaps) < 2 * style.HANDLE_PX            # crowded at this zoom
    assert all(s <= max(0.5 * g * 1.01, 5) + 1e-9 for s, g in zip(sizes, gaps)), (sizes, gaps)
    c.setFocus()
    for _ in range(6):
        gui_events.key(Qt.Key_Equal, Qt.ControlModifier)   # zoom in 3.8x
    sizes, gaps = sizes_and_gaps()
    assert min(gaps) > 2 * style.HANDLE_PX and all(s == style.HANDLE_PX for s in sizes)
