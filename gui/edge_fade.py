"""A fade over the edge of a scrolling panel where there is more to see: a row cut in half at
the bottom of the Edit panel or the flux ledger read as a drawing fault; faded into the
panel's background with the scroll bar beside it, it reads as "more below" (or above)."""
from __future__ import annotations

from PySide6.QtCore import QEvent, QObject, QPointF, Qt, QTimer
from PySide6.QtGui import QColor, QLinearGradient, QPainter, QPen
from PySide6.QtWidgets import QAbstractItemView, QAbstractScrollArea, QWidget

# the fade's height, in lines of the panel's font: enough to cover a cut row's visible part
FADE_LINES = 1.3
CHEVRON = "#6b6b6b"     # 4.6:1 on the panels' grey #efefef, 5.3:1 on white (WCAG 2.1 contrast)


class _Fade(QWidget):
    def __init__(self, viewport: QWidget, at_bottom: bool):
        super().__init__(viewport)
        self.at_bottom = at_bottom
        self.setAttribute(Qt.WA_TransparentForMouseEvents)    # clicks reach the fields under it
        self.setFocusPolicy(Qt.NoFocus)

    def paintEvent(self, ev):
        vp = self.parentWidget()
        solid = QColor(vp.palette().color(vp.backgroundRole()))
        clear = QColor(solid)
        clear.setAlpha(0)
        g = QLinearGradient(0, 0, 0, self.height())
        # fully the background over the outer third, so no half letter shows at the edge
        if self.at_bottom:
            g.setColorAt(0.0, clear)
            g.setColorAt(0.65, solid)
        else:
            g.setColorAt(0.35, solid)
            g.setColorAt(1.0, clear)
        p = QPainter(self)
        p.fillRect(self.rect(), g)
        # and a small chevron in the middle, pointing to where the rest is
        p.setRenderHint(QPainter.Antialiasing)
        p.setPen(QPen(QColor(CHEVRON), 1.6))
        cx, w = self.width() / 2, 5.0
        y = self.height() - 6.0 if self.at_bottom else 6.0
        tip = y + 3.0 if self.at_bottom else y - 3.0
        p.drawPolyline([QPointF(cx - w, 2 * y - tip), QPointF(cx, tip), QPointF(cx + w, 2 * y - tip)])
        p.end()


class EdgeFades(QObject):
    """Keeps the two fades of one scroll area placed and shown only while there is more to
    scroll to on their side."""

    def __init__(self, area: QAbstractScrollArea):
        super().__init__(area)
        self.area = area
        vp = area.viewport()
        self.top, self.bottom = _Fade(vp, False), _Fade(vp, True)
        self._later = QTimer(self, singleShot=True, interval=0, timeout=self.update_fades)
        bar = area.verticalScrollBar()
        bar.valueChanged.connect(self.update_fades)
        bar.rangeChanged.connect(self.update_fades)
        vp.installEventFilter(self)
        self.update_fades()

    def eventFilter(self, obj, ev):
        if ev.type() in (QEvent.Resize, QEvent.Show, QEvent.FontChange):
            self.update_fades()
        elif ev.type() in (QEvent.ChildAdded, QEvent.ChildRemoved):
            self._later.start()     # a table's cell widgets, or a cell editor opened or closed
        return False

    def update_fades(self, *_):
        vp, bar = self.area.viewport(), self.area.verticalScrollBar()
        h = min(int(FADE_LINES * vp.fontMetrics().lineSpacing()), vp.height() // 4)
        self.top.setGeometry(0, 0, vp.width(), h)
        self.bottom.setGeometry(0, vp.height() - h, vp.width(), h)
        # no fade while a cell is being edited: the value being typed may be in the cut row
        editing = isinstance(self.area, QAbstractItemView) and self.area.state() == QAbstractItemView.EditingState
        self.top.setVisible(bar.value() > bar.minimum() and not editing)
        self.bottom.setVisible(bar.value() < bar.maximum() and not editing)
        for f in (self.top, self.bottom):
            f.raise_()      # over the form and a table's cell widgets (the combo boxes)


def add_edge_fades(area: QAbstractScrollArea) -> QAbstractScrollArea:
    area.edge_fades = EdgeFades(area)
    return area
