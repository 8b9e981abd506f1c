"""What the drawing shows while a tool works, over the scene: the snap marker, the measurement
readout, and the box where the next point is typed.

Kept apart from the canvas, which owns the scene's own items; the canvas creates one Overlay
and forwards typed keys to it.
"""
from __future__ import annotations

import pyqtgraph as pg
from PySide6.QtCore import QEvent, QObject, Qt
from PySide6.QtWidgets import QFrame, QHBoxLayout, QLabel, QLineEdit

from . import style
from .snap import EDGE
from .typed import FORMATS, TypedError

# keys that start typing a point or a number while a drawing tool is active
TYPED_START = set("0123456789-+.@")

_MARKER_SYMBOL = {EDGE: "x"}          # vertex-like targets get a square


def pass_clicks(item) -> None:
    """Let clicks on a scatter item's symbols through to the view (and so to the tool): by
    itself the item keeps a click on any of its dots."""
    item.mouseClickEvent = lambda ev: ev.ignore()


class Overlay(QObject):
    def __init__(self, canvas):
        super().__init__(canvas)
        self.canvas = canvas
        self.marker = pg.ScatterPlotItem(size=13, pxMode=True, brush=None,
                                         pen=pg.mkPen(style.SNAP_MARK, width=2))
        self.marker.setZValue(30)
        pass_clicks(self.marker)            # the marker sits right where the user clicks
        self.readout_item = pg.TextItem("", color=style.AXIS, fill=pg.mkBrush(255, 255, 255, 230),
                                        border=pg.mkPen(style.PREVIEW), anchor=(0, 1))
        self.readout_item.setZValue(31)
        self.readout_item.hide()
        for it in (self.marker, self.readout_item):
            canvas.plot.addItem(it, ignoreBounds=True)
        self.readout = ""

        # the typing box sits in the drawing's lower left corner
        self.box = QFrame(canvas.plot)
        self.box.setFrameShape(QFrame.StyledPanel)
        self.box.setAutoFillBackground(True)
        lay = QHBoxLayout(self.box)
        lay.setContentsMargins(4, 2, 4, 2)
        self.prompt = QLabel("")
        self.entry = QLineEdit()
        self.entry.setMinimumWidth(160)
        self.entry.setPlaceholderText("x, y   @dx, dy   length<angle")
        self.entry.setToolTip(f"Type {FORMATS} (mm, degrees); Enter places it, Esc closes this box")
        self.entry.installEventFilter(self)
        self.entry.textEdited.connect(lambda text: self.canvas.tool.preview_typed(text, self.canvas.cursor))
        lay.addWidget(self.prompt)
        lay.addWidget(self.entry)
        self.box.hide()

    # ------------------------------------------------------------------ snap marker
    def show_snap(self, snap) -> None:
        if snap is None:
            if len(self.marker.data):       # most calls find it empty already: no repaint then
                self.marker.setData([], [])
            return
        self.marker.setData([snap.point[0]], [snap.point[1]], symbol=_MARKER_SYMBOL.get(snap.kind, "s"))

    # ------------------------------------------------------------------ measurement readout
    def show_readout(self, text: str, at=None, label: str = "") -> None:
        """The full `text` in the status bar, the short `label` on the drawing at `at`, on the
        side of it that faces the middle of the view so it is never cut off."""
        self.readout = text
        if not label or at is None:
            self.readout_item.hide()
        else:
            (x0, x1), (y0, y1) = self.canvas.view.viewRange()
            self.readout_item.setAnchor((0.0 if at[0] < (x0 + x1) / 2 else 1.0,
                                         1.0 if at[1] < (y0 + y1) / 2 else 0.0))
            self.readout_item.setText(label)
            self.readout_item.setPos(*at)
            self.readout_item.show()
        if text:
            self.canvas.message(text)

    # ------------------------------------------------------------------ typed entry
    @property
    def typing(self) -> bool:
        return self.box.isVisible()

    def start_typing(self, ev) -> bool:
        """Open the typing box when `ev` is the first character of a point or number and the
        tool takes typed input; True when the key was taken."""
        tool = self.canvas.tool
        if not tool.typed_prompt or not ev.text() or ev.text()[0] not in TYPED_START:
            return False
        if ev.modifiers() & (Qt.ControlModifier | Qt.AltModifier | Qt.MetaModifier):
            return False
        self.open(ev.text())
        return True

    def open(self, text: str = "") -> None:
        self.prompt.setText(self.canvas.tool.typed_prompt)
        self.entry.setText(text)
        self.canvas.tool.preview_typed(text, self.canvas.cursor)
        self.box.adjustSize()
        self.box.move(self.canvas.plot.width() // 2 - self.box.width() // 2,
                      self.canvas.plot.height() - self.box.height() - 40)
        self.box.show()
        self.box.raise_()
        self.entry.setFocus()

    def close(self) -> None:
        if self.box.isVisible():
            self.box.hide()
            self.entry.clear()
            self.canvas.plot.setFocus()

    def _commit(self) -> None:
        text = self.entry.text().strip()
        tool = self.canvas.tool
        if not text:                  # Enter on an empty box: as Enter on the drawing
            self.close()
            tool.key_enter()
            return
        try:
            tool.typed(text, self.canvas.cursor)
        except TypedError as exc:
            self.canvas.message(str(exc))
            self.entry.selectAll()
            return
        self.entry.clear()
        if tool.typed_prompt and tool.last_point() is not None:   # a shape under way: its next point
            self.prompt.setText(tool.typed_prompt)
        else:                   # done: Ctrl+Z and the tool keys belong to the drawing again
            self.close()

    def eventFilter(self, obj, ev) -> bool:
        if obj is self.entry and ev.type() == QEvent.KeyPress:
            if ev.key() == Qt.Key_Escape:
                self.close()
                return True
            if ev.key() in (Qt.Key_Return, Qt.Key_Enter):
                # taken here: a line edit passes Enter on to its parents, the drawing among them
                self._commit()
                return True
            if ev.key() == Qt.Key_Backspace and not self.entry.text():
                self.close()
                self.canvas.tool.key_backspace()
                return True
        return False
