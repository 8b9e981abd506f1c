"""File > Import DXF: add the closed contours of a DXF drawing to the scene as parts.

Before importing, a small dialog asks what each layer is made of (a layer named after a known
material is preset to it, a layer this program's export renamed to the material the drawing
records, any other layer to nothing: OK waits until each has one) and, when the file does not state its units, which units it was drawn
in.  All the parts arrive in one undoable step; a drawing with problems adds nothing and the
problems are listed, each naming its entity."""
from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QComboBox, QDialog, QDialogButtonBox, QFormLayout, QLabel, QVBoxLayout

from raytrace.catalog import CATALOG
from raytrace.dxf_io import TO_MM


CHOOSE = "(choose a material)"


class DxfSetupDialog(QDialog):
    """`recorded`: {layer: material} the drawing records for layers named otherwise (an export
    of a material whose name a layer cannot hold); each layer is preset to its recorded
    material, else to the material it is named after."""

    def __init__(self, layers: list[str], materials: list[str], ask_units: bool, parent=None,
                 recorded: dict[str, str] | None = None):
        super().__init__(parent)
        self.setWindowTitle("Import DXF")
        lay = QVBoxLayout(self)
        lay.addWidget(QLabel("Material of each layer's parts:"))
        form = QFormLayout()
        self.combos: dict[str, QComboBox] = {}
        recorded = recorded or {}
        for layer in layers:
            box = QComboBox()
            box.addItems(materials)
            mine = recorded.get(layer)
            if mine is not None and mine not in materials:
                # kept as the drawing says: importing then names the material to define
                box.insertItem(0, mine)
                box.setItemData(0, "recorded in the drawing; not defined in this scene", Qt.ToolTipRole)
            if mine is not None:
                box.setCurrentText(mine)
                box.setToolTip(f"The drawing records {mine!r} for layer {layer!r}")
            elif layer in materials:
                box.setCurrentText(layer)
            else:
                # nothing to go by: the user chooses (the first catalog entry, air, was preset,
                # and a part of air does nothing to the rays)
                box.insertItem(0, CHOOSE)
                box.setCurrentIndex(0)
                box.setToolTip(f"Layer {layer!r} names no material: choose what its parts are made of")
            box.currentIndexChanged.connect(lambda _i: self._update_ok())
            self.combos[layer] = box
            form.addRow(layer, box)
        self.units = None
        if ask_units:
            self.units = QComboBox()
            self.units.addItems(list(TO_MM))
            form.addRow("Drawing units (the file does not say)", self.units)
        lay.addLayout(form)
        buttons = QDialogButtonBox(QDialogButtonBox.Ok | QDialogButtonBox.Cancel)
        buttons.accepted.connect(self.accept)
        buttons.rejected.connect(self.reject)
        lay.addWidget(buttons)
        self.ok = buttons.button(QDialogButtonBox.Ok)
        self._update_ok()

    def _update_ok(self) -> None:
        missing = [layer for layer, box in self.combos.items() if box.currentText() == CHOOSE]
        self.ok.setEnabled(not missing)
        self.ok.setToolTip("Choose a material for " + ", ".join(repr(m) for m in missing) if missing else "")

    def accept(self) -> None:
        if self.ok.isEnabled():          # Enter with a layer still to choose does nothing
            super().accept()

    def choice(self) -> tuple[dict[str, str], str | None]:
        return ({layer: box.currentText() for layer, box in self.combos.items()},
                self.units.currentText() if self.units is not None else None)


def ask_setup(parent, layers: list[str], scene, ask_units: bool, recorded: dict[str, str] | None = None):
    """({layer: material}, units or None), or None when cancelled."""
    dlg = DxfSetupDialog(layers, list(CATALOG) + [m for m in scene.materials if m not in CATALOG], ask_units,
                         parent, recorded)
    return dlg.choice() if dlg.exec() else None


def import_parts(scene, path: str, layer_materials: dict[str, str], units: str | None):
    """The scene with the drawing's parts added (renamed where a name is taken) and their count;
    SceneError when the drawing has problems."""
    from raytrace.dxf_io import import_dxf
    from . import edits
    drawn = import_dxf(path, units=units, layer_materials=layer_materials, setup=scene)
    for part in drawn.parts:
        scene = edits.add_part(scene, part)
    return scene, len(drawn.parts)
