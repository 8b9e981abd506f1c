"""Add a part from a shape builder: its parameters come from `shapes.PARAMETERS`."""
from __future__ import annotations

import json

from PySide6.QtWidgets import (QComboBox, QDialog, QDialogButtonBox, QDoubleSpinBox, QFormLayout,
                               QGroupBox, QLabel, QLineEdit, QSpinBox, QWidget)

from raytrace.geometry import ShapeSpec
from raytrace.shapes import PARAMETERS, ShapeParameterError, build

SHAPE_LABELS = {"rectangle": "rectangle", "prism": "prism", "roof_prism": "roof prism",
                "regular_polygon": "regular polygon", "light_pipe": "light-pipe path",
                "microprism_strip": "microprism strip", "window": "window", "lens": "lens"}


def param_widget(info, value) -> QWidget:
    """An input for one builder parameter, showing its unit, limits and description."""
    if info.type == "integer":
        w = QSpinBox()
        w.setRange(int(info.min if info.min is not None else 0), 100_000)
        w.setValue(int(value))
    elif info.type == "number":
        w = QDoubleSpinBox()
        w.setDecimals(6)
        lo = info.min if info.min is not None else -1e6
        hi = info.max if info.max is not None else 1e6
        w.setRange(lo, hi)
        w.setValue(float(value))
        if info.unit:
            w.setSuffix(f" {info.unit}")
    else:   # light-pipe segments: JSON text
        w = QLineEdit(json.dumps(value))
    w.setToolTip(info.description)
    return w


def param_value(info, w):
    if info.type == "integer":
        return int(w.value())
    if info.type == "number":
        return float(w.value())
    try:
        return json.loads(w.text())
    except json.JSONDecodeError as exc:
        raise ShapeParameterError(info.name, w.text(), f"a JSON list of segments ({exc.msg})") from None


class ShapeDialog(QDialog):
    def __init__(self, materials: list[str], default_material: str, centre=(0.0, 0.0), parent=None):
        super().__init__(parent)
        self.setWindowTitle("Add a part from a shape")
        self.kind = QComboBox()
        for k in PARAMETERS:
            self.kind.addItem(SHAPE_LABELS.get(k, k), k)
        self.name = QLineEdit("part")
        self.material = QComboBox()
        self.material.addItems(materials)
        self.material.setCurrentText(default_material)
        self.x = _coord(centre[0])
        self.y = _coord(centre[1])
        self.rot = _coord(0.0, " deg")
        self.params_box = QGroupBox("Parameters")
        self.params_form = QFormLayout(self.params_box)
        self.error = QLabel("")
        self.error.setWordWrap(True)
        self.error.setStyleSheet("color: #b00020")
        form = QFormLayout(self)
        form.addRow("Shape", self.kind)
        form.addRow("Name", self.name)
        form.addRow("Material", self.material)
        form.addRow("Position x", self.x)
        form.addRow("Position y", self.y)
        form.addRow("Rotation", self.rot)
        form.addRow(self.params_box)
        form.addRow(self.error)
        box = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        box.accepted.connect(self._accept)
        box.rejected.connect(self.reject)
        form.addRow(box)
        self.widgets = {}
        self.kind.currentIndexChanged.connect(lambda _i: self._fill())
        self._fill()

    def set_kind(self, kind: str) -> None:
        self.kind.setCurrentIndex(self.kind.findData(kind))

    def _fill(self):
        while self.params_form.rowCount():
            self.params_form.removeRow(0)
        kind = self.kind.currentData()
        self.widgets = {}
        for info in PARAMETERS[kind]:
            w = param_widget(info, info.default)
            self.widgets[info.name] = (info, w)
            self.params_form.addRow(info.name.replace("_", " "), w)
        self.name.setText(SHAPE_LABELS.get(kind, kind))

    def spec(self) -> ShapeSpec:
        params = {name: param_value(info, w) for name, (info, w) in self.widgets.items()}
        return ShapeSpec(self.kind.currentData(), params, (self.x.value(), self.y.value()), self.rot.value())

    def _accept(self):
        try:
            build(self.spec())
        except ShapeParameterError as exc:
            self.error.setText(str(exc))
            return
        if not self.name.text().strip():
            self.error.setText("Give the part a name")
            return
        self.accept()


def _coord(value, suffix=" mm"):
    w = QDoubleSpinBox()
    w.setRange(-1e6, 1e6)
    w.setDecimals(4)
    w.setValue(value)
    w.setSuffix(suffix)
    return w
