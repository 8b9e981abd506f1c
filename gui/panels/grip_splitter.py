"""A vertical splitter whose handle can be seen: a grooved bar with a grip in its middle.

The platform style's handle is a few faint dots on the panel's own grey (in the offscreen and
Fusion styles nearly invisible at 1024 x 700), so the user did not find that the part's fields
and its vertex table can share the page differently.
"""
from __future__ import annotations

from PySide6.QtCore import QPointF, Qt
from PySide6.QtGui import QColor, QPainter, QPalette, QPen
from PySide6.QtWidgets import QSplitter, QSplitterHandle

HANDLE_PX = 8         # the bar's height
GRIP_PX = 36          # the grip's length: three short lines in the middle of the bar


class _GripHandle(QSplitterHandle):
    def __init__(self, orientation, parent):
        super().__init__(orientation, parent)
        self.setAttribute(Qt.WA_Hover)
        self.setToolTip("Drag to give the fields above or the table below more room")

    def paintEvent(self, ev) -> None:
        p = QPainter(self)
        pal = self.palette()
        r = self.rect()
        hover = self.underMouse()
        p.fillRect(r, pal.color(QPalette.Midlight if hover else QPalette.Window))
        p.setPen(QPen(pal.color(QPalette.Mid), 1))
        p.drawLine(QPointF(r.left(), r.top() + 0.5), QPointF(r.right(), r.top() + 0.5))
        p.drawLine(QPointF(r.left(), r.bottom() + 0.5), QPointF(r.right(), r.bottom() + 0.5))
        p.setPen(QPen(pal.color(QPalette.Highlight) if hover else _grip_colour(pal), 1))
        cx, cy = r.center().x(), r.center().y()
        for dy in (-2, 0, 2):
            p.drawLine(QPointF(cx - GRIP_PX / 2, cy + dy + 0.5), QPointF(cx + GRIP_PX / 2, cy + dy + 0.5))
        p.end()

    def enterEvent(self, ev) -> None:
        super().enterEvent(ev)
        self.update()

    def leaveEvent(self, ev) -> None:
        super().leaveEvent(ev)
        self.update()


def _grip_colour(pal) -> QColor:
    """The text colour part way to the panel's grey: about 4:1 against it on a light panel
    (3:1 is the least for a control, WCAG 2.1 criterion 1.4.11), softer than text."""
    t, w = pal.color(QPalette.WindowText), pal.color(QPalette.Window)
    k = 0.55
    return QColor(round(k * t.red() + (1 - k) * w.red()), round(k * t.green() + (1 - k) * w.green()),
                  round(k * t.blue() + (1 - k) * w.blue()))


class GripSplitter(QSplitter):
    def __init__(self, orientation=Qt.Vertical, parent=None):
        super().__init__(orientation, parent)
        self.setHandleWidth(HANDLE_PX)

    def createHandle(self) -> QSplitterHandle:
        return _GripHandle(self.orientation(), self)
