"""Define a material of the user's own: a constant index, or a glass given by nd and Vd."""
from __future__ import annotations

from PySide6.QtWidgets import (QComboBox, QDialog, QDialogButtonBox, QDoubleSpinBox, QFormLayout,
                               QLabel, QLineEdit)

from raytrace.catalog import CATALOG
from raytrace.materials import AbbeGlass, ConstantIndex


class MaterialDialog(QDialog):
    def __init__(self, taken: set[str], parent=None):
        super().__init__(parent)
        self.setWindowTitle("Define a material")
        self.taken = taken
        self.name = QLineEdit("my material")
        self.model = QComboBox()
        self.model.addItem("constant index", "constant")
        self.model.addItem("glass from nd and Vd", "abbe")
        self.n = _spin(1.0, 4.0, 1.5, 5, "refractive index at every wavelength")
        self.vd = _spin(5.0, 120.0, 55.0, 2, "Abbe number Vd = (nd - 1) / (nF - nC)")
        self.alpha = _spin(0.0, 1000.0, 0.0, 6, "bulk absorption coefficient (Beer-Lambert)")
        self.alpha.setSuffix(" /mm")
        self.source = QLineEdit("")
        self.source.setToolTip("where the data come from (kept in the scene file)")
        self.error = QLabel("")
        self.error.setStyleSheet("color: #b00020")
        form = QFormLayout(self)
        form.addRow("Name", self.name)
        form.addRow("Model", self.model)
        form.addRow("Index n (nd)", self.n)
        form.addRow("Abbe number Vd", self.vd)
        form.addRow("Absorption", self.alpha)
        form.addRow("Data source", self.source)
        form.addRow(self.error)
        box = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        box.accepted.connect(self._accept)
        box.rejected.connect(self.reject)
        form.addRow(box)
        self.model.currentIndexChanged.connect(lambda _i: self.vd.setEnabled(self.model.currentData() == "abbe"))
        self.vd.setEnabled(False)

    def material(self):
        name = self.name.text().strip()
        kw = dict(source=self.source.text().strip(), absorption_per_mm=self.alpha.value())
        if self.model.currentData() == "abbe":
            return AbbeGlass(name, self.n.value(), self.vd.value(), **kw)
        return ConstantIndex(name, self.n.value(), **kw)

    def _accept(self):
        name = self.name.text().strip()
        if not name:
            self.error.setText("Give the material a name")
        elif name in CATALOG:
            self.error.setText(f"{name!r} is a catalog material; choose another name")
        else:
            try:
                self.material()
            except (ValueError, TypeError) as exc:
                self.error.setText(str(exc))
                return
            self.accept()


def _spin(lo, hi, value, decimals, tip):
    s = QDoubleSpinBox()
    s.setRange(lo, hi)
    s.setDecimals(decimals)
    s.setValue(value)
    s.setToolTip(tip)
    return s
