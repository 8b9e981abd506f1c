"""Sweep one number of the scene over a range, in the background, and plot the efficiencies;
the Optimize and Tolerance tabs (dialogs/design.py) tune a number or tolerance it.

The sweep runs `raytrace.sweep.sweep` in a worker thread one point at a time; its progress
callback moves the bar and stops the run when Cancel is pressed (the point being traced is
finished first, the rest are skipped).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pyqtgraph as pg
from PySide6.QtCore import Qt
from PySide6.QtWidgets import (QComboBox, QDialog, QDoubleSpinBox, QFileDialog, QFormLayout,
                               QHBoxLayout, QLabel, QProgressBar, QPushButton, QSpinBox,
                               QTabWidget, QVBoxLayout, QWidget)

from raytrace.shapes import PARAMETERS
from raytrace.sweep import Variable, sweep

from .. import style
from .background import BackgroundRun


def sweep_names(scene) -> list[str]:
    """Numbers of the scene a user is likely to sweep, named as `raytrace.sweep` reads them."""
    links = getattr(scene, "links", None)
    names = list(links.named_numbers()) if links else []
    copies = {c: part for part, cs in (links.repeated() if links else {}).items() for c in cs}
    done: set[str] = set()
    for p in scene.parts:
        if p.name in copies:    # a copy of a repeated part: the file names the part once
            if copies[p.name] in done:
                continue
            done.add(copies[p.name])
            p = replace(p, name=copies[p.name])
            names += [f"{p.name}.repeat.pitch", f"{p.name}.repeat.count"]
        if p.shape is not None:
            for info in PARAMETERS[p.shape.kind]:
                if info.type in ("number", "integer"):
                    names.append(f"{p.name}.{info.name}")
            names += [f"{p.name}.rotation_deg", f"{p.name}.position[0]", f"{p.name}.position[1]"]
    placed = links.placed() if links else set()
    for s in scene.sources:
        # an aimed or turned source is swept by its turn: its direction follows from the file
        turn = "turn_deg" if s.name in placed else "direction_deg"
        names += [f"{s.name}.{turn}", f"{s.name}.position[0]", f"{s.name}.position[1]"]
        if s.kind != "point":
            names.append(f"{s.name}.width")
        if s.kind != "beam":
            names.append(f"{s.name}.half_angle_deg")
    names.append("wavelength")
    for d in scene.detectors:
        names += [f"{d.name}.start[0]", f"{d.name}.start[1]", f"{d.name}.end[0]", f"{d.name}.end[1]"]
    return names


def current_value(scene, name: str) -> float | None:
    """The value `name` has now (for the dialog's default range), when it can be read simply."""
    links = getattr(scene, "links", None)
    if links and name in links.named_numbers():
        return links.named_numbers()[name]
    obj, _, field = name.rpartition(".")
    if links and obj in links.repeated():
        obj = links.repeated()[obj][0]    # a repeated part's numbers, as its first copy has them
    idx = None
    if field.endswith("]"):
        field, _, i = field[:-1].partition("[")
        idx = int(i)
    for p in scene.parts:
        if p.name == obj and p.shape is not None:
            v = p.shape.params.get(field) if field in p.shape.params else getattr(p.shape, field, None)
            return float(v[idx] if idx is not None else v) if v is not None else None
    for group in (scene.sources, scene.detectors):
        for it in group:
            if it.name == obj and hasattr(it, field):
                v = getattr(it, field)
                return float(v[idx] if idx is not None else v)
    if name == "wavelength" and scene.sources:
        return float(scene.sources[0].spectrum.mean_nm)
    return None


class SweepDialog(QDialog):
    def __init__(self, scene, options: dict | None = None, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Sweep a number of the scene")
        self.scene = scene
        self.options = options or {}
        self.result = None
        self.message = ""
        self.name = QComboBox()
        self.name.setEditable(True)
        self.name.addItems(sweep_names(scene))
        self.name.setToolTip("OBJECT.FIELD, e.g. guide.width, LED.direction_deg, wavelength, or a JSON path $.parts[0]...")
        self.start = _spin()
        self.stop = _spin()
        self.count = QSpinBox()
        self.count.setRange(1, 10_000)
        self.count.setValue(11)
        self.rays = QSpinBox()
        self.rays.setRange(1, 10_000_000)
        self.rays.setValue(scene.settings.rays)
        self.rays.setToolTip("Source rays per point")
        self.bar = QProgressBar()
        self.status = QLabel("")
        self.status.setWordWrap(True)
        self.plot = pg.PlotWidget(background=style.BACKGROUND)
        self.plot.setLabel("left", "efficiency", units="%")
        self.plot.getAxis("left").enableAutoSIPrefix(False)
        self.plot.getAxis("bottom").enableAutoSIPrefix(False)
        self.plot.addLegend(offset=(-10, 10))
        self.plot.setMinimumSize(420, 260)
        self.run_btn = QPushButton("Run")
        self.cancel_btn = QPushButton("Cancel")
        self.cancel_btn.setEnabled(False)
        self.save_btn = QPushButton("Save table...")
        self.save_btn.setToolTip("The sweep table as CSV: one row per point, efficiencies and losses")
        self.save_btn.setEnabled(False)
        self.save_btn.clicked.connect(lambda: self.save_table())
        close = QPushButton("Close")
        self.run_btn.clicked.connect(self.run)
        self.cancel_btn.clicked.connect(self.cancel)
        close.clicked.connect(self.reject)
        form = QFormLayout()
        form.addRow("Number to vary", self.name)
        rng = QHBoxLayout()
        rng.addWidget(self.start)
        rng.addWidget(QLabel("to"))
        rng.addWidget(self.stop)
        rng.addWidget(QLabel("in"))
        rng.addWidget(self.count)
        rng.addWidget(QLabel("steps"))
        form.addRow("Range", rng)
        form.addRow("Rays per point", self.rays)
        buttons = QHBoxLayout()
        buttons.addWidget(self.run_btn)
        buttons.addWidget(self.cancel_btn)
        buttons.addWidget(self.save_btn)
        buttons.addStretch(1)
        sweep_tab = QWidget()
        lay = QVBoxLayout(sweep_tab)
        lay.addLayout(form)
        lay.addWidget(self.bar)
        lay.addWidget(self.status)
        lay.addWidget(self.plot, 1)
        lay.addLayout(buttons)
        self.tabs = QTabWidget()
        self.tabs.addTab(sweep_tab, "Sweep")
        self._add_design_tabs(scene)
        outer = QVBoxLayout(self)
        outer.addWidget(self.tabs, 1)
        outer.addWidget(close, 0, Qt.AlignRight)
        self.name.currentTextChanged.connect(self._default_range)
        self._default_range(self.name.currentText())
        self._runner = None
        self._thread = None

    def _add_design_tabs(self, scene):
        from .design import OptimizePanel, TolerancePanel
        names = sweep_names(scene)
        self.optimize_panel = OptimizePanel(scene, self.options, names, current_value,
                                            apply_optimum=getattr(self.parent(), "apply_optimum", None),
                                            applied=self.use_scene)
        self.tolerance_panel = TolerancePanel(scene, self.options, names)
        self.tabs.addTab(self.optimize_panel, "Optimize")
        self.tabs.addTab(self.tolerance_panel, "Tolerance")

    def use_scene(self, scene) -> None:
        """After "Apply to scene": every tab goes on from the scene with the optimum in it (a
        second number tuned or toleranced next must see the first one's optimum)."""
        self.scene = scene
        for panel in (self.optimize_panel, self.tolerance_panel):
            panel.scene = scene

    def _default_range(self, name):
        v = current_value(self.scene, name)
        if v is None:
            return
        span = abs(v) * 0.2 if v else 1.0
        self.start.setValue(v - span)
        self.stop.setValue(v + span)

    def run(self):
        if self._thread is not None:
            return
        n = self.count.value()
        a, b = self.start.value(), self.stop.value()
        values = tuple(a + (b - a) * k / (n - 1) for k in range(n)) if n > 1 else (a,)
        variable = Variable(self.name.currentText().strip(), values)
        options = dict(self.options, rays=self.rays.value())
        self._runner = BackgroundRun()
        self._runner.progress.connect(self._progress)
        self._runner.done.connect(self._done)
        self.bar.setRange(0, n)
        self.bar.setValue(0)
        self.status.setText("running...")
        self.run_btn.setEnabled(False)
        self.cancel_btn.setEnabled(True)
        scene = self.scene
        self._thread = self._runner.start(
            lambda progress: sweep(scene, [variable], options, workers=1, progress=progress), "sweep")

    def cancel(self):
        if self._runner is not None:
            self._runner.cancel.set()
            self.status.setText("cancelling after the current point...")

    def running(self) -> bool:
        return self._thread is not None

    def _progress(self, done, total):
        self.bar.setValue(done)

    def _done(self, result, message):
        self._thread = None
        self.run_btn.setEnabled(True)
        self.cancel_btn.setEnabled(False)
        self.result, self.message = result, message
        if result is None:
            self.status.setText(f"Sweep stopped: {message}")
            return
        self.save_btn.setEnabled(True)
        failed = result.failed
        self.status.setText(f"{len(result.rows)} points" + (f"; {len(failed)} failed: {failed[0]['status']}" if failed else ""))
        self.plot_result(result)

    def ask_save_path(self) -> str:
        path, _ = QFileDialog.getSaveFileName(self, "Save the sweep table", "sweep.csv", "CSV (*.csv)")
        return path

    def save_table(self, path: str | None = None) -> bool:
        """Write the table atomically; a failure is shown in the dialog, never raised."""
        if self.result is None:
            return False
        path = path or self.ask_save_path()
        if not path:
            return False
        doc = getattr(self.parent(), "doc", None)
        if doc is not None and doc.path is not None:
            from raytrace.atomic import clashing_outputs
            if clashing_outputs({"scene": str(doc.path)}, {"the table": path}):
                self.status.setText(f"Not saved: {path} is the open scene's own file; writing the table "
                                    "there would destroy it. Choose another name.")
                return False
        try:
            self.result.to_csv(path)
        except OSError as exc:
            self.status.setText(f"Could not write {path}: {exc.strerror or exc}")
            return False
        self.status.setText(f"Saved {len(self.result.rows)} points to {path}")
        return True

    def plot_result(self, result):
        self.plot.clear()
        name = result.names[0]
        self.plot.setLabel("bottom", name)
        ok = [r for r in result.rows if r["status"] == "ok"]
        x = np.array([r[name] for r in ok], dtype=float)
        for k, det in enumerate(result.detectors):
            y = np.array([100 * r[f"efficiency: {det}"] for r in ok], dtype=float)
            colour = pg.intColor(k, hues=max(3, len(result.detectors)), values=1, maxValue=200)
            self.plot.plot(x, y, pen=pg.mkPen(colour, width=2), symbol="o", symbolSize=6,
                           symbolBrush=colour, name=det)
            # +-1 standard error of each point (0 where it cannot be estimated)
            err = np.array([100 * float(r[f"efficiency error: {det}"] or 0.0) for r in ok], dtype=float)
            self.plot.addItem(pg.ErrorBarItem(x=x, y=y, height=2 * err, beam=0.0, pen=pg.mkPen(colour)))

    def reject(self):
        self.cancel()
        self.optimize_panel.cancel()
        self.tolerance_panel.cancel()
        super().reject()


def _spin():
    s = QDoubleSpinBox()
    s.setRange(-1e6, 1e6)
    s.setDecimals(5)
    return s
