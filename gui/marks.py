"""Round dots of one screen size and colour at many points, painted as one item in one call.

A scatter item keeps a record per point (symbol, size, pen, brush) and rebuilds them on every
new set of points: for the detector hits of a trace (hundreds to thousands) that took 1-5 ms of
the UI thread per redraw.  Here the points are two arrays, and a paint stamps one pre-rendered
dot (the scatter item's own rendering of the symbol, so the dots look as before) at all of them
in one `drawPixmapFragments` call.  (`drawPoints` with a wide round pen was tried: the stroker
makes it 3 ms a paint for 500 dots.)
"""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
import pyqtgraph.functions as fn
from pyqtgraph.graphicsItems.ScatterPlotItem import renderSymbol
from pyqtgraph.Qt import internals
from PySide6.QtCore import QRectF, Qt
from PySide6.QtGui import QPainter, QPixmap


class Dots(pg.GraphicsObject):
    def __init__(self, size_px: float, colour):
        super().__init__()
        self.size_px = float(size_px)
        self._brush = pg.mkBrush(colour)
        self._dot: QPixmap | None = None          # rendered on the first paint, per pixel ratio
        self._dpr = 0.0
        self._frags = internals.PrimitiveArray(QPainter.PixmapFragment, 10)
        self._x = np.zeros(0)
        self._y = np.zeros(0)
        self._box = None                     # (x0, y0, x1, y1) of the points, None: no points
        self.setAcceptedMouseButtons(Qt.NoButton)    # looked at, not clicked

    def setData(self, x, y) -> None:
        x = np.asarray(x, dtype=float).reshape(-1)
        y = np.asarray(y, dtype=float).reshape(-1)
        ok = np.isfinite(x) & np.isfinite(y)
        if not ok.all():
            x, y = x[ok], y[ok]
        self.prepareGeometryChange()
        self._x, self._y = x, y
        if len(x):
            self._box = (float(x.min()), float(y.min()), float(x.max()), float(y.max()))
        else:
            self._box = None
        self.informViewBoundsChanged()
        self.update()

    def getData(self):
        return self._x, self._y

    def dataBounds(self, ax, frac=1.0, orthoRange=None):
        if self._box is None:
            return (None, None)
        return (self._box[ax], self._box[ax + 2])

    def pixelPadding(self) -> float:
        return 0.5 * self.size_px + 1

    def boundingRect(self) -> QRectF:
        if self._box is None:
            return QRectF()
        x0, y0, x1, y1 = self._box
        px, py = self.pixelVectors()
        pad = self.pixelPadding()
        dx = pad * (px.length() if px is not None else 0.0)
        dy = pad * (py.length() if py is not None else 0.0)
        return QRectF(x0 - dx, y0 - dy, x1 - x0 + 2 * dx, y1 - y0 + 2 * dy)

    def viewTransformChanged(self) -> None:
        self.prepareGeometryChange()         # the padding is in pixels: the bounds follow the zoom
        super().viewTransformChanged()

    def _dot_pixmap(self, dpr: float) -> QPixmap:
        if self._dot is None or dpr != self._dpr:
            self._dpr = dpr
            self._dot = QPixmap.fromImage(renderSymbol("o", self.size_px, pg.mkPen(None), self._brush, dpr=dpr))
        return self._dot

    def paint(self, p: QPainter, option, widget=None) -> None:
        if not len(self._x):
            return
        dpr = widget.devicePixelRatioF() if widget is not None else 1.0
        dot = self._dot_pixmap(dpr)
        # dots keep their pixel size: place them in device coordinates
        xy = fn.transformCoordinates(p.transform(), np.vstack([self._x, self._y]))
        xy = fn.clip_array(xy, -2 ** 30, 2 ** 30)      # Qt fails on coordinates far outside
        p.resetTransform()
        self._frags.resize(len(self._x))
        f = self._frags.ndarray()
        f[:, 0:2] = xy.T                                # centre of each dot
        f[:, 2:6] = (0, 0, dot.width(), dot.height())   # the whole pixmap
        f[:, 6:10] = (1 / dpr, 1 / dpr, 0.0, 1.0)       # scale, rotation, opacity
        p.drawPixmapFragments(*self._frags.drawargs(), dot)
