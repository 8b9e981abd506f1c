"""Detector profiles: irradiance along the detector and the angular distribution of arrivals."""
from __future__ import annotations

import re

import numpy as np
import pyqtgraph as pg
from PySide6.QtWidgets import QComboBox, QHBoxLayout, QLabel, QVBoxLayout, QWidget

from raytrace.detectors import detector_report

from .. import style


class ProfilePanel(QWidget):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.choice = QComboBox()
        self.choice.setToolTip("Detector whose profiles are shown")
        self.choice.currentTextChanged.connect(lambda _t: self._redraw())
        self.info = QLabel("")
        self.info.setWordWrap(True)
        self.irr = pg.PlotWidget(background=style.BACKGROUND)
        self.irr.setTitle("Irradiance along the detector", size="9pt")
        self.irr.setLabel("bottom", "position from start", units="mm")
        self.irr.setLabel("left", "flux / mm")
        self.ang = pg.PlotWidget(background=style.BACKGROUND)
        self.ang.setTitle("Angle of arrival (from the normal)", size="9pt")
        self.ang.setLabel("bottom", "angle", units="deg")
        self.ang.setLabel("left", "flux / deg")
        for w in (self.irr, self.ang):
            for ax in ("bottom", "left"):
                w.getAxis(ax).enableAutoSIPrefix(False)
            w.setMinimumHeight(100)      # two fit under the ledger-sized Results dock of a 700 px window
            w.getPlotItem().layout.setContentsMargins(2, 2, 6, 2)
        top = QHBoxLayout()
        top.addWidget(QLabel("Detector"))
        top.addWidget(self.choice, 1)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addLayout(top)
        lay.addWidget(self.info)
        lay.addWidget(self.irr, 1)
        lay.addWidget(self.ang, 1)
        self.result = None
        self.report = None
        self._stale = False       # a result arrived while hidden: redraw when shown

    def show_result(self, result) -> None:
        self.result = result
        names = [d.name for d in result.compiled.detectors] if result is not None else []
        current = self.choice.currentText()
        self.choice.blockSignals(True)
        self.choice.clear()
        self.choice.addItems(names)
        if current in names:
            self.choice.setCurrentText(current)
        self.choice.blockSignals(False)
        if self.isVisible():
            self._redraw()
        else:
            # behind the Flux ledger tab: drawn when shown (each edit's redraw spent about
            # 2.5 ms of the UI thread on profiles nobody saw)
            self._stale = True

    def showEvent(self, ev) -> None:
        super().showEvent(ev)
        if self._stale:
            self._redraw()

    def _redraw(self) -> None:
        self._stale = False
        self.irr.clear()
        self.ang.clear()
        name = self.choice.currentText()
        if self.result is None or not name:
            self.report = None
            self.info.setText("No detector" if self.result is not None else "")
            return
        r = self.report = detector_report(self.result, name)
        brush = pg.mkBrush(style.DETECTOR.red(), style.DETECTOR.green(), style.DETECTOR.blue(), 160)
        for plot, prof in ((self.irr, r.irradiance), (self.ang, r.angular)):
            plot.addItem(pg.BarGraphItem(x=prof.centers, height=prof.density,
                                         width=float(np.diff(prof.edges).mean()), brush=brush, pen=None))
        # the report's figures one phrase a line (wrapped anywhere they read as a jumble), a
        # figure kept on the line of its name (no-break space before it), with the ± the
        # ledger shows where the command line writes +-
        lines = (re.sub(r" (?=[-+\d%\u00b1])", "\u00a0", part.replace("+-", "\u00b1")).replace("/", "/\u2060")
                 for part in r.summary_line().split("; "))      # (U+2060: no break after "max/")
        self.info.setText("\n".join(lines))
