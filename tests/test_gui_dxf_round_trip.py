"""DXF in the app, as a user meets it.

* A part of a material whose name a DXF layer cannot hold ("PMMA/frosted": layers may not hold
  '/') is exported by File > Export cross-section as DXF onto layer "PMMA_frosted", with the
  material recorded beside it; File > Import DXF then asks for the layers' materials with that
  layer preset to the recorded material, and Enter in the dialog imports the part with it (the
  dialog preset the first catalog material, and the part came back as that).
* A binary DXF opened with File > Open is named as a binary DXF drawing, with the way to
  import it, not a UTF-8 decoding error.  The binary form is the one ezdxf, the reference DXF
  library the import reads with, writes (`saveas(..., fmt="bin")`, sentinel
  "AutoCAD Binary DXF\\r\\n\\x1a\\x00" as the DXF reference describes the binary format).
"""
from __future__ import annotations

import json
import os
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6.QtCore import Qt, QTimer  # noqa: E402
from PySide6.QtTest import QTest  # noqa: E402
from PySide6.QtWidgets import QApplication, QComboBox  # noqa: E402

from test_gui import home, win  # noqa: E402,F401  (the GUI tests' fixtures)

SAMPLES = Path(__file__).resolve().parents[1] / "samples"


def _accept_next_dialog(qtbot, seen: dict):
    """When the next modal dialog is up, note its layers' presets and press Enter in it."""
    def act():
        dlg = QApplication.activeModalWidget()
        if dlg is None:
            QTimer.singleShot(20, act)
            return
        seen.update({layer: box.currentText() for layer, box in dlg.combos.items()})
        seen["_combos"] = len(dlg.findChildren(QComboBox))
        QTest.keyClick(dlg, Qt.Key_Return)
    QTimer.singleShot(20, act)


def _export_frosted_light_pipe(win, tmp_path):
    """The light pipe with its guide in a user material whose name is no valid DXF layer name,
    opened and exported as DXF through the window (File > Export cross-section as DXF)."""
    data = json.loads((SAMPLES / "light-pipe-90.json").read_text())
    data["materials"] = {"PMMA/frosted": {"model": "constant", "n": 1.49}}
    data["parts"][0]["material"] = "PMMA/frosted"
    scene_file = tmp_path / "frosted.json"
    scene_file.write_text(json.dumps(data))
    assert win.open_file(str(scene_file))
    out = tmp_path / "frosted.dxf"
    win.ask_save_path = lambda *a, **k: str(out)
    assert win.export_dxf()
    return out


def test_a_renamed_layers_material_survives_export_and_import(qtbot, win, tmp_path):
    out = _export_frosted_light_pipe(win, tmp_path)
    names = {p.name: p.material for p in win.doc.scene.parts}
    # the same scene without its parts, then File > Import DXF of the drawing
    delete = next(a for m in win.menuBar().actions() if m.menu() for a in m.menu().actions()
                  if a.text() == "&Delete selected")
    for _ in range(len(win.doc.scene.parts)):
        win.canvas.select(("part", 0))
        delete.trigger()                                     # Edit > Delete selected
    assert not win.doc.scene.parts
    win.ask_dxf_path = lambda: str(out)
    seen: dict = {}
    _accept_next_dialog(qtbot, seen)
    assert win.import_dxf(), getattr(win, "last_error", "")
    assert seen["PMMA_frosted"] == "PMMA/frosted"           # the layer, preset to the recorded material
    assert {p.name: p.material for p in win.doc.scene.parts} == names


def test_a_recorded_material_the_scene_does_not_define_is_named_on_import(qtbot, win, tmp_path):
    out = _export_frosted_light_pipe(win, tmp_path)
    win.new_scene()                                          # a scene without that material
    win.ask_dxf_path = lambda: str(out)
    seen: dict = {}
    _accept_next_dialog(qtbot, seen)
    assert not win.import_dxf()
    assert seen["PMMA_frosted"] == "PMMA/frosted"
    assert "PMMA/frosted" in win.last_error and "PMMA_frosted" in win.last_error
    assert not win.doc.scene.parts                           # nothing half imported


def test_opening_a_binary_dxf_says_what_it_is_and_how_to_import_it(win, tmp_path):
    import ezdxf
    doc = ezdxf.readfile(SAMPLES / "light-pipe.dxf")
    binary = tmp_path / "pipe-binary.dxf"
    doc.saveas(binary, fmt="bin")
    assert binary.read_bytes().startswith(b"AutoCAD Binary DXF\r\n\x1a\x00")
    assert not win.open_file(str(binary))                    # File > Open
    text = win.errors[-1]
    assert "a binary DXF drawing, not a scene file" in text, text
    assert "File > Import DXF..." in text and f"raytrace import-dxf {binary}" in text
    assert "utf-8" not in text.lower() and "codec" not in text
    assert win.doc.path is None
    # and File > Import DXF takes it
    win.new_scene()
    win.ask_dxf_path = lambda: str(binary)
    win.ask_dxf_setup = lambda layers, ask_units, recorded=None: (
        {layer: "PMMA" for layer in layers}, "mm" if ask_units else None)
    assert win.import_dxf(), getattr(win, "last_error", "")
    assert len(win.doc.scene.parts) == 2


def test_a_layer_that_names_no_material_waits_for_the_users_choice(qtbot, win):
    """The bundled drawing's layers "guide" and "panel window" name no material: the dialog
    preset both to air (the catalog's first entry), and Enter imported two parts of air that do
    nothing to the rays.  Now both wait for a choice: Enter does nothing, OK is disabled until
    each layer has a material, chosen here by typing its name into the list as a user does."""
    win.new_scene()
    win.ask_dxf_path = lambda: str(SAMPLES / "light-pipe.dxf")
    state = {}

    def act():
        dlg = QApplication.activeModalWidget()
        if dlg is None:
            QTimer.singleShot(20, act)
            return
        state["ok_before"] = dlg.ok.isEnabled()
        QTest.keyClick(dlg, Qt.Key_Return)              # nothing chosen yet: stays open
        state["open_after_enter"] = dlg.isVisible()
        for layer, material in (("guide", "PMMA"), ("panel window", "polycarbonate")):
            box = dlg.combos[layer]
            box.setFocus()
            QTest.keyClicks(box, material)              # a closed list jumps to the typed item
        state["chosen"] = {layer: box.currentText() for layer, box in dlg.combos.items()}
        state["ok_after"] = dlg.ok.isEnabled()
        QTest.keyClick(dlg, Qt.Key_Return)
    QTimer.singleShot(20, act)
    assert win.import_dxf(), getattr(win, "last_error", "")
    assert state["ok_before"] is False and state["open_after_enter"] is True
    assert state["chosen"] == {"guide": "PMMA", "panel window": "polycarbonate"} and state["ok_after"]
    assert [(p.name, p.material) for p in win.doc.scene.parts] == [("guide", "PMMA"), ("panel window", "polycarbonate")]
