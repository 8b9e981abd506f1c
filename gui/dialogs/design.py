"""The Optimize and Tolerance tabs of the sweep dialog.

Each runs `raytrace.optimize.optimize` or `raytrace.tolerance.tolerance` in a worker thread, one
trace at a time (the app's own trace worker keeps the other core), shows the report as text and
plots the evaluations (optimize) or the spread of the samples (tolerance).  Cancel stops after
the trace in progress.
"""
from __future__ import annotations

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QComboBox, QFormLayout, QHBoxLayout, QHeaderView, QPlainTextEdit,
                               QProgressBar, QPushButton, QSpinBox, QTableWidget, QTableWidgetItem,
                               QVBoxLayout, QWidget)

from .. import style
from .background import BackgroundRun
from .sweep import _spin


def figure_names(scene) -> list[str]:
    out = []
    for d in scene.detectors:
        out += [f"efficiency: {d.name}", f"mean_angle_deg: {d.name}", f"centroid_mm: {d.name}"]
    return out


class _DesignPanel(QWidget):
    """A form, Run / Cancel, a progress bar, the report and a plot; subclasses fill the form
    and say what to run."""

    def __init__(self, scene, options: dict, parent=None):
        super().__init__(parent)
        self.scene, self.options = scene, options
        self.result, self.message = None, ""
        self.form = QFormLayout()
        self.figure = QComboBox()
        self.figure.setEditable(True)
        self.figure.addItems(figure_names(scene))
        self.rays = QSpinBox()
        self.rays.setRange(1, 10_000_000)
        self.rays.setValue(scene.settings.rays)
        self.rays.setToolTip("Source rays per trace")
        self.bar = QProgressBar()
        self.report = QPlainTextEdit()
        self.report.setReadOnly(True)
        self.report.setMinimumHeight(130)
        self.plot = pg.PlotWidget(background=style.BACKGROUND)
        self.plot.setMinimumSize(420, 200)
        for axis in ("left", "bottom"):
            self.plot.getAxis(axis).enableAutoSIPrefix(False)
        self.run_btn = QPushButton("Run")
        self.cancel_btn = QPushButton("Cancel")
        self.cancel_btn.setEnabled(False)
        self.run_btn.clicked.connect(self.run)
        self.cancel_btn.clicked.connect(self.cancel)
        buttons = QHBoxLayout()
        buttons.addWidget(self.run_btn)
        buttons.addWidget(self.cancel_btn)
        buttons.addStretch(1)
        lay = QVBoxLayout(self)
        lay.addLayout(self.form)
        lay.addWidget(self.bar)
        lay.addWidget(self.report)
        lay.addWidget(self.plot, 1)
        lay.addLayout(buttons)
        self._runner = self._thread = None

    def job(self):        # -> callable(progress) returning a result
        raise NotImplementedError

    def show_result(self, result):
        raise NotImplementedError

    def running(self) -> bool:
        return self._thread is not None

    def run(self):
        if self._thread is not None:
            return
        job = self.job()
        self._runner = BackgroundRun()
        self._runner.progress.connect(lambda done, total: (self.bar.setRange(0, total), self.bar.setValue(done)))
        self._runner.done.connect(self._done)
        self.report.setPlainText("running...")
        self.run_btn.setEnabled(False)
        self.cancel_btn.setEnabled(True)
        self._thread = self._runner.start(job, "design")

    def cancel(self):
        if self._runner is not None:
            self._runner.cancel.set()

    def _done(self, result, message):
        self._thread = None
        if result is not None:
            self.bar.setValue(self.bar.maximum())     # the refinement may end before its budget
        self.run_btn.setEnabled(True)
        self.cancel_btn.setEnabled(False)
        self.result, self.message = result, message
        if result is None:
            self.report.setPlainText(f"Stopped: {message}")
            return
        self.report.setPlainText(result.text())
        self.show_result(result)

    def trace_options(self) -> dict:
        return dict(self.options, rays=self.rays.value())


class OptimizePanel(_DesignPanel):
    """`apply_optimum(result)` puts the optimum into the open document (one undo step) and
    returns the document's scene then (None when it could not); `applied(scene)` is told it."""

    def __init__(self, scene, options: dict, names: list[str], current_value, parent=None, apply_optimum=None,
                 applied=None):
        super().__init__(scene, options, parent)
        self.current_value = current_value
        self.apply_optimum = apply_optimum
        self.applied = applied
        # the result at a glance: each tuned number from start to optimum, and the figure with its +-
        self.table = QTableWidget(0, 4)
        self.table.setHorizontalHeaderLabels(["", "start", "optimum", "bounds"])
        self.table.verticalHeader().setVisible(False)
        self.table.setEditTriggers(QTableWidget.NoEditTriggers)
        self.table.horizontalHeader().setSectionResizeMode(QHeaderView.ResizeToContents)
        self.table.horizontalHeader().setStretchLastSection(True)
        self.table.setFixedHeight(self.table.horizontalHeader().sizeHint().height() + 4)
        self.apply_btn = QPushButton("Apply to scene")
        self.apply_btn.setToolTip("Set the tuned numbers to the optimum in the open scene (Ctrl+Z undoes)")
        self.apply_btn.setEnabled(False)
        self.apply_btn.clicked.connect(self.apply)
        lay = self.layout()
        lay.insertWidget(lay.indexOf(self.report), self.table)
        lay.itemAt(lay.count() - 1).layout().insertWidget(2, self.apply_btn)
        self.name = QComboBox()
        self.name.setEditable(True)
        self.name.addItems(names)
        self.low, self.high = _spin(), _spin()
        rng = QHBoxLayout()
        rng.addWidget(self.low)
        rng.addWidget(self.high)
        self.goal = QComboBox()
        self.goal.addItems(["maximize", "minimize"])
        self.form.addRow("Number to tune", self.name)
        self.form.addRow("Bounds", rng)
        self.form.addRow("Figure", self.figure)
        self.form.addRow("Goal", self.goal)
        self.form.addRow("Rays per trace", self.rays)
        self.name.currentTextChanged.connect(self._default_bounds)
        self._default_bounds(self.name.currentText())

    def _default_bounds(self, name):
        v = self.current_value(self.scene, name)
        if v is not None:
            span = abs(v) * 0.2 if v else 1.0
            self.low.setValue(v - span)
            self.high.setValue(v + span)

    def job(self):
        from raytrace.optimize import Bound, optimize
        bound = Bound(self.name.currentText().strip(), self.low.value(), self.high.value())
        figure, maximize, options = self.figure.currentText(), self.goal.currentIndex() == 0, self.trace_options()
        scene = self.scene
        return lambda progress: optimize(scene, [bound], figure, maximize=maximize, options=options,
                                         workers=1, progress=progress)

    def run(self):
        self.apply_btn.setEnabled(False)        # the optimum shown is about to be replaced
        super().run()

    def apply(self):
        if self.result is None or self.apply_optimum is None:
            return
        scene = self.apply_optimum(self.result)
        if scene is None:
            return
        self.apply_btn.setEnabled(False)        # applied once; run again to tune further
        self.scene = scene                      # the next run starts from the applied optimum
        if self.applied is not None:
            self.applied(scene)

    def _fill_table(self, result):
        rows = []
        for k, (name, x0, x) in enumerate(zip(result.names, result.start, result.optimum)):
            b = result.bounds[k] if k < len(result.bounds) else None
            rows.append((name, f"{x0:.6g}", f"{x:.6g}", f"{b[0]:.6g} .. {b[1]:.6g}" if b else ""))
        v0, se0 = result.start_value
        rows.append((result.figure.label, f"{v0:.6g} \u00b1 {se0:.2g}", f"{result.value:.6g} \u00b1 {result.se:.2g}",
                     "maximize" if result.maximize else "minimize"))
        self.table.setRowCount(len(rows))
        for r, row in enumerate(rows):
            for c, text in enumerate(row):
                it = QTableWidgetItem(text)
                if c:
                    it.setTextAlignment(Qt.AlignRight | Qt.AlignVCenter)
                self.table.setItem(r, c, it)
        self.table.resizeRowsToContents()       # every row shows whole, without scrolling
        self.table.setFixedHeight(self.table.horizontalHeader().sizeHint().height() + 2 * self.table.frameWidth()
                                  + sum(self.table.rowHeight(r) for r in range(len(rows))) + 2)
        self.apply_btn.setEnabled(self.apply_optimum is not None)

    def show_result(self, result):
        self._fill_table(result)
        self.plot.clear()
        self.plot.setLabel("bottom", result.names[0])
        self.plot.setLabel("left", result.figure.label)
        pts = [(e.values[0], e.value) for e in result.evaluations if np.isfinite(e.value)]
        if pts:
            x, y = np.array(pts).T
            self.plot.plot(x, y, pen=None, symbol="o", symbolSize=6, symbolBrush=(60, 110, 200))
            self.plot.plot([result.optimum[0]], [result.value], pen=None, symbol="star", symbolSize=14,
                           symbolBrush=(230, 150, 0))


class TolerancePanel(_DesignPanel):
    def __init__(self, scene, options: dict, names: list[str], parent=None):
        super().__init__(scene, options, parent)
        self.tols = QPlainTextEdit()
        self.tols.setPlaceholderText("one per line: NAME=T for +-T, or NAME=-A,+B")
        self.tols.setPlainText(f"{names[0]}=0.1" if names else "")
        self.tols.setMaximumHeight(70)
        self.samples = QSpinBox()
        self.samples.setRange(2, 100_000)
        self.samples.setValue(100)
        self.distribution = QComboBox()
        self.distribution.addItems(["uniform", "normal"])
        self.distribution.setToolTip("normal: the tolerance band is +-3 standard deviations")
        self.seed = QSpinBox()
        self.seed.setRange(0, 2_000_000_000)
        self.seed.setValue(1)
        self.form.addRow("Tolerances", self.tols)
        self.form.addRow("Figure", self.figure)
        self.form.addRow("Samples", self.samples)
        self.form.addRow("Distribution", self.distribution)
        self.form.addRow("Sample seed", self.seed)
        self.form.addRow("Rays per trace", self.rays)

    def job(self):
        from raytrace.tolerance import parse_tolerance, tolerance
        lines = [ln.strip() for ln in self.tols.toPlainText().splitlines() if ln.strip()]
        figure, samples = self.figure.currentText(), self.samples.value()
        distribution, seed, options, scene = self.distribution.currentText(), self.seed.value(), \
            self.trace_options(), self.scene

        def job(progress):
            tols = [parse_tolerance(ln, "tolerance") for ln in lines]
            return tolerance(scene, tols, [figure], samples=samples, distribution=distribution,
                             sample_seed=seed, options=options, workers=1, progress=progress)
        return job

    def show_result(self, result):
        self.plot.clear()
        spread = result.spreads[0]
        values = spread.ok
        if len(values):
            hist, edges = np.histogram(values, bins=min(30, max(5, len(values) // 5)))
            self.plot.plot(edges, hist, stepMode="center", fillLevel=0, brush=(60, 110, 200, 120))
            self.plot.addLine(x=spread.nominal, pen=pg.mkPen((230, 150, 0), width=2))
        self.plot.setLabel("bottom", spread.figure.label)
        self.plot.setLabel("left", "samples")
