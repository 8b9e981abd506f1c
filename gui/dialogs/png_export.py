"""PNG export choices: size in pixels, resolution, and whether to add the title block."""
from __future__ import annotations

from PySide6.QtWidgets import QCheckBox, QComboBox, QDialog, QDialogButtonBox, QFormLayout, QLabel, QSpinBox

DPI_CHOICES = (96, 150, 300, 600)


class PngExportDialog(QDialog):
    def __init__(self, width: int, height: int, parent=None):
        super().__init__(parent)
        self.setWindowTitle("Export the drawing as PNG")
        self.width_px, self.height_px = QSpinBox(), QSpinBox()
        for w, v in ((self.width_px, width), (self.height_px, height)):
            w.setRange(100, 20000)
            w.setSuffix(" px")
            w.setValue(int(v))
            w.valueChanged.connect(lambda _v: self._update())
        self.dpi = QComboBox()
        self.dpi.addItems([str(d) for d in DPI_CHOICES])
        self.dpi.setToolTip("Pixels per inch: text and lines keep their printed size, so more dpi "
                            "means a finer picture of the same printed size")
        self.dpi.currentIndexChanged.connect(lambda _i: self._update())
        self.title_block = QCheckBox("title block (scene name, rays, date)")
        self.title_block.setChecked(True)
        self.printed = QLabel("")
        form = QFormLayout(self)
        form.addRow("Width", self.width_px)
        form.addRow("Height", self.height_px)
        form.addRow("Resolution (dpi)", self.dpi)
        form.addRow("", self.printed)
        form.addRow(self.title_block)
        box = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        box.accepted.connect(self.accept)
        box.rejected.connect(self.reject)
        form.addRow(box)
        self._update()

    def _update(self) -> None:
        dpi = int(self.dpi.currentText())
        self.printed.setText(f"prints {25.4 * self.width_px.value() / dpi:.0f} x "
                             f"{25.4 * self.height_px.value() / dpi:.0f} mm")

    def options(self) -> dict:
        return {"width": self.width_px.value(), "height": self.height_px.value(),
                "dpi": int(self.dpi.currentText()), "title_block": self.title_block.isChecked()}
