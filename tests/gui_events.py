"""Real input for GUI tests: mouse events through the drawing's viewport at scene-mm points,
and keys sent to whichever widget has the keyboard focus, as a user's keys are."""
from __future__ import annotations

from PySide6.QtCore import QEvent, QPointF, Qt
from PySide6.QtGui import QMouseEvent
from PySide6.QtTest import QTest
from PySide6.QtWidgets import QApplication


def widget_point(canvas, p):
    """The viewport pixel showing scene point p (mm)."""
    return canvas.plot.mapFromScene(canvas.view.mapViewToScene(QPointF(*p)))


def pixel_offset(canvas, p, dx_px: float, dy_px: float = 0.0):
    """The scene point dx_px, dy_px screen pixels away from p (y up on screen)."""
    px = canvas.pixel_mm()
    return (p[0] + dx_px * px, p[1] + dy_px * px)


def _move(qtbot, vp, p, buttons):
    QApplication.sendEvent(vp, QMouseEvent(QEvent.MouseMove, p, p, QPointF(vp.mapToGlobal(p.toPoint())),
                                           Qt.NoButton, buttons, Qt.NoModifier))
    qtbot.wait(20)     # pyqtgraph drops move events closer than ~16 ms apart


def hover(qtbot, canvas, p):
    """Move the mouse (no button) to p."""
    _move(qtbot, canvas.plot.viewport(), QPointF(widget_point(canvas, p)), Qt.NoButton)


_last_click = [None]


def click(qtbot, canvas, p):
    """Move to p, then press and release there.  A click near the previous one waits out the
    double-click interval first, so two clicks never make a double-click."""
    w = widget_point(canvas, p)
    last = _last_click[0]
    if last is not None and (w - last).manhattanLength() < 12:
        qtbot.wait(QApplication.styleHints().mouseDoubleClickInterval() + 20)
    hover(qtbot, canvas, p)
    QTest.mouseClick(canvas.plot.viewport(), Qt.LeftButton, Qt.NoModifier, w)
    _last_click[0] = w
    qtbot.wait(10)


def drag(qtbot, canvas, a, b, steps: int = 8):
    """Press at a, move with the button held, release at b."""
    vp = canvas.plot.viewport()
    pa, pb = widget_point(canvas, a), widget_point(canvas, b)
    hover(qtbot, canvas, a)
    QTest.mousePress(vp, Qt.LeftButton, Qt.NoModifier, pa)
    for k in range(1, steps + 1):
        _move(qtbot, vp, QPointF(pa + (pb - pa) * (k / steps)), Qt.LeftButton)
    QTest.mouseRelease(vp, Qt.LeftButton, Qt.NoModifier, pb)
    qtbot.wait(10)


def key(key, modifiers=Qt.NoModifier) -> None:
    """One key press and release, to the widget with the focus."""
    QTest.keyClick(QApplication.focusWidget(), key, modifiers)


def type_text(text: str) -> None:
    """Characters typed one by one, each to the widget with the focus at that moment (the first
    character may open a box that takes the rest)."""
    for ch in text:
        QTest.keyClicks(QApplication.focusWidget(), ch)
