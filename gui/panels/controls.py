"""Trace controls: ray count, generation limit, flux floor and mode (kept in the scene's trace
settings, so they are saved and undoable), plus view-only choices: one wavelength for all
sources and how many source rays are drawn."""
from __future__ import annotations

from PySide6.QtCore import Signal
from PySide6.QtWidgets import (QCheckBox, QComboBox, QDoubleSpinBox, QFormLayout, QHBoxLayout,
                               QPushButton, QSpinBox, QWidget)

from raytrace.scene import Scene

from .. import edits
from ..tracing import TraceOptions

MODE_LABELS = {"branching": "branching (every split followed)", "monte_carlo": "Monte Carlo (one branch per event)"}


class TraceControls(QWidget):
    options_changed = Signal()       # view-only options changed: retrace
    trace_now = Signal()
    stop = Signal()

    def __init__(self, doc, parent=None):
        super().__init__(parent)
        self.doc = doc
        self.rays = QSpinBox()
        self.rays.setRange(0, 10_000_000)
        self.rays.setSingleStep(100)
        self.rays.setToolTip("Source rays per trace (shared over the sources by flux)")
        self.depth = QSpinBox()
        self.depth.setRange(1, 100_000)
        self.depth.setToolTip("A ray is followed for at most this many generations (the source ray is 0, each "
                                 "interaction's children one more); the rest is booked as truncated")
        self.threshold = QDoubleSpinBox()
        self.threshold.setDecimals(8)
        self.threshold.setRange(0.0, 1.0)
        self.threshold.setSingleStep(1e-4)
        self.threshold.setToolTip("Child rays below this share of their source ray's flux end "
                                  "(counted as truncated)")
        self.mode = QComboBox()
        for key, label in MODE_LABELS.items():
            self.mode.addItem(label, key)
        # the list that opens shows the whole labels; the closed box may cut the explanation
        self.mode.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
        self.mode.setMinimumContentsLength(14)
        self.mode.setToolTip("Branching follows every reflected and refracted child; Monte Carlo "
                             "picks one per event with the Fresnel probabilities")
        # short texts, so the panel needs no sideways scrolling in a 1024 px window
        self.one_wavelength = QCheckBox("all sources at")
        self.one_wavelength.setToolTip("Trace every source at the wavelength on the right instead of "
                                       "its own spectrum (not saved in the file)")
        self.wavelength = QDoubleSpinBox()
        self.wavelength.setRange(100.0, 20000.0)
        self.wavelength.setValue(550.0)
        self.wavelength.setSuffix(" nm")
        self.wavelength.setEnabled(False)
        self.drawn = QSpinBox()
        self.drawn.setRange(0, 100_000)
        self.drawn.setValue(200)
        self.drawn.setToolTip("Source rays drawn on the canvas (spread evenly over the sources); "
                              "the ledger always counts every ray")
        self.live = QCheckBox("retrace after every edit")
        self.live.setChecked(True)
        go = QPushButton("Trace now")
        go.setToolTip("Trace the scene again (F5)")
        stop = QPushButton("Stop")
        stop.setToolTip("Stop the running trace (Esc in the drawing cancels a tool instead)")
        go.clicked.connect(self.trace_now)
        stop.clicked.connect(self.stop)

        wl = QHBoxLayout()
        wl.addWidget(self.one_wavelength)
        wl.addWidget(self.wavelength)
        buttons = QHBoxLayout()
        buttons.addWidget(go)
        buttons.addWidget(stop)
        form = QFormLayout(self)
        form.addRow("Rays", self.rays)
        form.addRow("Generations", self.depth)
        form.addRow("Flux floor", self.threshold)
        form.addRow("Mode", self.mode)
        form.addRow("Wavelength", wl)
        form.addRow("Drawn rays", self.drawn)
        form.addRow(self.live)
        form.addRow(buttons)

        self.rays.editingFinished.connect(lambda: self._set(rays=self.rays.value()))
        self.depth.editingFinished.connect(lambda: self._set(max_generations=self.depth.value()))
        self.threshold.editingFinished.connect(lambda: self._set(flux_floor=self.threshold.value()))
        self.mode.activated.connect(lambda _i: self._set(mode=self.mode.currentData()))
        self.one_wavelength.toggled.connect(self._wl_toggled)
        self.wavelength.editingFinished.connect(self.options_changed)
        self.drawn.editingFinished.connect(self.options_changed)
        self.live.toggled.connect(lambda on: on and self.options_changed.emit())

    def _wl_toggled(self, on: bool) -> None:
        self.wavelength.setEnabled(on)
        self.options_changed.emit()

    def _set(self, **changes) -> None:
        s = self.doc.scene.settings
        if all(getattr(s, k) == v for k, v in changes.items()):
            return
        self.doc.apply(edits.set_settings(self.doc.scene, **changes),
                       "change trace " + ", ".join(k.replace("_", " ") for k in changes))

    def show_scene(self, scene: Scene) -> None:
        s = scene.settings
        for w in (self.rays, self.depth, self.threshold, self.mode):
            w.blockSignals(True)
        self.rays.setValue(s.rays)
        self.depth.setValue(s.max_generations)
        self.threshold.setValue(s.flux_floor)
        self.mode.setCurrentIndex(max(0, self.mode.findData(s.mode)))
        for w in (self.rays, self.depth, self.threshold, self.mode):
            w.blockSignals(False)

    def options(self) -> TraceOptions:
        """Options for the live trace; ray count and limits come from the scene itself."""
        return TraceOptions(wavelength_nm=self.wavelength.value() if self.one_wavelength.isChecked() else None,
                            drawn_rays=self.drawn.value())
