"""The sweep dialog's Optimize and Tolerance tabs and File > Import DXF, driven offscreen as a user
drives them (tab clicks, typed fields, the File menu's action).  Numbers are compared exactly with
the engine's API: the GUI adds no physics of its own (common practice)."""
from __future__ import annotations

import os
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtCore import Qt  # noqa: E402

from gui.main_window import MainWindow  # noqa: E402
from raytrace.optimize import Bound, optimize  # noqa: E402
from raytrace.scene_io import load_scene, scene_to_dict  # noqa: E402
from raytrace.tolerance import Tolerance, tolerance  # noqa: E402

SAMPLES = Path(__file__).resolve().parents[1] / "samples"
WINDOW = SAMPLES / "oblique-window.json"
PIPE_DXF = SAMPLES / "light-pipe.dxf"
TIMEOUT_MS = 60_000


@pytest.fixture
def win(qtbot, tmp_path, monkeypatch):
    monkeypatch.setenv("RAYTRACE_GUI_HOME", str(tmp_path / "home"))
    w = MainWindow(autosave_s=3600.0)
    qtbot.addWidget(w)
    w.errors = []
    w.show_error = lambda title, text: w.errors.append(text)
    w.ask_unsaved = lambda: "discard"
    yield w
    w.worker.shutdown()


def sweep_dialog(qtbot, scene):
    from gui.dialogs.sweep import SweepDialog
    dlg = SweepDialog(scene, {})
    qtbot.addWidget(dlg)
    dlg.show()
    return dlg


def click_tab(qtbot, dlg, title):
    bar = dlg.tabs.tabBar()
    index = next(i for i in range(dlg.tabs.count()) if dlg.tabs.tabText(i) == title)
    qtbot.mouseClick(bar, Qt.LeftButton, pos=bar.tabRect(index).center())
    assert dlg.tabs.currentIndex() == index


def test_optimize_tab_gives_the_api_result(qtbot):
    scene = load_scene(WINDOW)
    dlg = sweep_dialog(qtbot, scene)
    click_tab(qtbot, dlg, "Optimize")
    p = dlg.optimize_panel
    p.name.setCurrentText("probe beam.direction_deg")
    p.low.lineEdit().selectAll()
    qtbot.keyClicks(p.low.lineEdit(), "30")
    p.high.lineEdit().selectAll()
    qtbot.keyClicks(p.high.lineEdit(), "60")
    p.rays.setValue(8)
    qtbot.mouseClick(p.run_btn, Qt.LeftButton)
    qtbot.waitUntil(lambda: not p.running(), timeout=TIMEOUT_MS)
    assert p.message == ""
    expected = optimize(scene, [Bound("probe beam.direction_deg", 30.0, 60.0)], "efficiency: inside chamber",
                        options={"rays": 8}, workers=1)
    assert p.result.optimum == expected.optimum and p.result.value == expected.value
    assert "maximize efficiency: inside chamber" in p.report.toPlainText()
    assert len(p.plot.listDataItems()) == 2          # the evaluations and the optimum


def test_tolerance_tab_gives_the_api_result_and_cancels(qtbot):
    scene = load_scene(WINDOW)
    dlg = sweep_dialog(qtbot, scene)
    click_tab(qtbot, dlg, "Tolerance")
    t = dlg.tolerance_panel
    t.tols.selectAll()
    qtbot.keyClicks(t.tols, "probe beam.direction_deg=2")
    t.samples.setValue(12)
    t.rays.setValue(8)
    qtbot.mouseClick(t.run_btn, Qt.LeftButton)
    qtbot.waitUntil(lambda: not t.running(), timeout=TIMEOUT_MS)
    assert t.message == ""
    expected = tolerance(scene, [Tolerance("probe beam.direction_deg", 2.0, 2.0)], ["efficiency: inside chamber"],
                         samples=12, options={"rays": 8}, workers=1)
    assert list(t.result.spreads[0].values) == list(expected.spreads[0].values)
    assert "worst case" in t.report.toPlainText()
    t.samples.setValue(5000)
    qtbot.mouseClick(t.run_btn, Qt.LeftButton)
    qtbot.mouseClick(t.cancel_btn, Qt.LeftButton)
    qtbot.waitUntil(lambda: not t.running(), timeout=TIMEOUT_MS)
    assert t.message == "cancelled" and "Stopped: cancelled" in t.report.toPlainText()


def test_tolerance_tab_reports_a_bad_name_in_the_dialog(qtbot):
    dlg = sweep_dialog(qtbot, load_scene(WINDOW))
    t = dlg.tolerance_panel
    t.tols.setPlainText("viewport.nope=0.1")
    t.run()
    qtbot.waitUntil(lambda: not t.running(), timeout=TIMEOUT_MS)
    assert t.result is None and "viewport.nope" in t.report.toPlainText()


def file_action(win, text):
    menu = next(a.menu() for a in win.menuBar().actions() if a.text() == "&File")
    return next(a for a in menu.actions() if a.text() == text)


def test_import_dxf_from_the_file_menu_adds_parts_in_one_undo_step(qtbot, win):
    win.new_scene()
    asked = []
    win.ask_dxf_path = lambda: str(PIPE_DXF)

    def setup(layers, ask_units, recorded=None):
        asked.append((layers, ask_units, recorded))
        return {"guide": "PMMA", "panel window": "polycarbonate"}, None
    win.ask_dxf_setup = setup
    file_action(win, "Import &DXF...").trigger()
    assert asked == [(["guide", "panel window"], False, {})]      # (the sample records no materials)
    scene = win.doc.scene
    assert [(p.name, p.material) for p in scene.parts] == [("guide", "PMMA"), ("panel window", "polycarbonate")]
    assert win.doc.undo_stack.count() == 1 and win.doc.modified
    win.undo_action.trigger()
    assert win.doc.scene.parts == []
    assert win.errors == []


def test_import_dxf_with_problems_changes_nothing(qtbot, win, tmp_path):
    import ezdxf
    doc = ezdxf.new()
    doc.header["$INSUNITS"] = 0
    doc.modelspace().add_line((0, 0), (5, 0), dxfattribs={"layer": "PMMA"})
    bad = tmp_path / "open.dxf"
    doc.saveas(bad)
    win.open_file(str(WINDOW))
    before = scene_to_dict(win.doc.scene)
    win.ask_dxf_path = lambda: str(bad)
    win.ask_dxf_setup = lambda layers, ask_units, recorded=None: ({"PMMA": "PMMA"}, "mm" if ask_units else None)
    assert not win.import_dxf()
    assert scene_to_dict(win.doc.scene) == before and win.doc.undo_stack.count() == 0
    assert len(win.errors) == 1 and "open contour" in win.errors[0] and "LINE (handle" in win.errors[0]


def test_import_dxf_dialog_presets_known_materials_and_asks_units(qtbot):
    from gui.dxf_import import CHOOSE, DxfSetupDialog
    dlg = DxfSetupDialog(["PMMA", "glass layer"], ["air", "PMMA", "water"], ask_units=True)
    qtbot.addWidget(dlg)
    mapping, units = dlg.choice()
    # a layer that names no material is not preset (it was: to air, the list's first entry)
    assert mapping == {"PMMA": "PMMA", "glass layer": CHOOSE} and units == "mm"
    assert not dlg.ok.isEnabled()
    dlg.combos["glass layer"].setCurrentText("water")
    dlg.units.setCurrentText("in")
    assert dlg.choice() == ({"PMMA": "PMMA", "glass layer": "water"}, "in") and dlg.ok.isEnabled()


def test_optimize_result_table_and_apply_to_scene_with_undo(qtbot, win, tmp_path):
    """After a run the Optimize tab lists the tuned number from start to optimum and the figure
    with its +- (the engine's OptimizeResult, exactly); "Apply to scene" sets the optimum in the
    open scene as one undo step: Ctrl+Z by key restores it, and a save reopens with the optimum."""
    from gui.dialogs.sweep import SweepDialog
    win.resize(1024, 700)
    win.show()
    qtbot.waitExposed(win)
    assert win.open_file(str(WINDOW))
    before = win.doc.scene
    dlg = SweepDialog(win.doc.scene, {}, win)
    qtbot.addWidget(dlg)
    dlg.show()
    click_tab(qtbot, dlg, "Optimize")
    p = dlg.optimize_panel
    assert not p.apply_btn.isEnabled(), "nothing to apply before a run"
    p.name.setCurrentText("probe beam.direction_deg")
    p.low.lineEdit().selectAll()
    qtbot.keyClicks(p.low.lineEdit(), "30")
    p.high.lineEdit().selectAll()
    qtbot.keyClicks(p.high.lineEdit(), "60")
    p.rays.setValue(8)
    qtbot.mouseClick(p.run_btn, Qt.LeftButton)
    qtbot.waitUntil(lambda: not p.running(), timeout=TIMEOUT_MS)
    r = p.result
    cells = [[p.table.item(i, c).text() for c in range(4)] for i in range(p.table.rowCount())]
    assert cells[0] == ["probe beam.direction_deg", f"{r.start[0]:.6g}", f"{r.optimum[0]:.6g}", "30 .. 60"]
    v0, se0 = r.start_value
    assert cells[1] == [r.figure.label, f"{v0:.6g} \u00b1 {se0:.2g}", f"{r.value:.6g} \u00b1 {r.se:.2g}", "maximize"]
    assert p.apply_btn.isEnabled()
    qtbot.mouseClick(p.apply_btn, Qt.LeftButton)
    assert win.doc.scene.sources[0].direction_deg == r.optimum[0]
    assert "Ctrl+Z undoes" in win.statusBar().currentMessage()
    applied = win.doc.scene
    dlg.close()
    win.activateWindow()
    qtbot.waitUntil(win.isActiveWindow, timeout=5000)
    win.canvas.setFocus()
    qtbot.keyClick(win.canvas.plot, Qt.Key_Z, Qt.ControlModifier)
    assert win.doc.scene == before, "Ctrl+Z undoes the applied optimum in one step"
    qtbot.keyClick(win.canvas.plot, Qt.Key_Y, Qt.ControlModifier)
    assert win.doc.scene == applied
    out = tmp_path / "tuned.json"
    win.ask_save_path = lambda *a, **k: str(out)
    assert win.save_as()
    assert load_scene(out).sources[0].direction_deg == pytest.approx(r.optimum[0], abs=0)


def test_after_apply_the_next_run_starts_from_the_applied_optimum(qtbot, win):
    """Tune, Apply to scene, then run again in the same dialog: the second run starts from the
    optimum now in the scene (its start column shows it), and the Sweep and Tolerance tabs work
    on that scene too.  Before, every tab kept the scene the dialog was opened with, so a second
    number tuned after applying the first was tuned without the first one's optimum.  While a
    run is going, Apply is off (the optimum shown is about to be replaced)."""
    from gui.dialogs.sweep import SweepDialog
    win.resize(1024, 700)
    win.show()
    qtbot.waitExposed(win)
    assert win.open_file(str(WINDOW))
    start_direction = win.doc.scene.sources[0].direction_deg
    dlg = SweepDialog(win.doc.scene, {}, win)
    qtbot.addWidget(dlg)
    dlg.show()
    click_tab(qtbot, dlg, "Optimize")
    p = dlg.optimize_panel
    p.name.setCurrentText("probe beam.direction_deg")
    p.low.setValue(30.0)
    p.high.setValue(70.0)
    p.rays.setValue(8)
    qtbot.mouseClick(p.run_btn, Qt.LeftButton)
    qtbot.waitUntil(lambda: not p.running(), timeout=TIMEOUT_MS)
    first = p.result
    assert first.start[0] == start_direction and first.optimum[0] != start_direction
    qtbot.mouseClick(p.apply_btn, Qt.LeftButton)
    assert win.doc.scene.sources[0].direction_deg == first.optimum[0]
    assert dlg.scene is win.doc.scene and p.scene is win.doc.scene and dlg.tolerance_panel.scene is win.doc.scene
    qtbot.mouseClick(p.run_btn, Qt.LeftButton)
    assert not p.apply_btn.isEnabled(), "no Apply while the next run is going"
    qtbot.waitUntil(lambda: not p.running(), timeout=TIMEOUT_MS)
    assert p.result.start[0] == first.optimum[0]
    assert p.table.item(0, 1).text() == f"{first.optimum[0]:.6g}"
    assert p.apply_btn.isEnabled()
    dlg.close()


def test_opening_a_dxf_drawing_as_a_scene_points_to_file_import_dxf(win):
    """File > Open on the bundled DXF drawing: the message says what the file is and names the
    app's own way to use it (File > Import DXF...), beside the command line's import-dxf."""
    assert not win.open_file(str(PIPE_DXF))
    text = win.errors[-1]
    assert "a DXF drawing, not a scene file" in text and "File > Import DXF..." in text
    assert win.doc.path is None


def test_import_of_one_part_says_1_part(qtbot, win, tmp_path):
    """A drawing with one contour: the status bar and the undo step say '1 part' (was '1 parts')."""
    import ezdxf
    doc = ezdxf.new()
    doc.header["$INSUNITS"] = 4
    doc.modelspace().add_lwpolyline([(0, 0), (4, 0), (4, 4), (0, 4)], close=True, dxfattribs={"layer": "PMMA"})
    one = tmp_path / "one.dxf"
    doc.saveas(one)
    win.new_scene()
    win.ask_dxf_path = lambda: str(one)
    win.ask_dxf_setup = lambda layers, ask_units, recorded=None: ({"PMMA": "PMMA"}, None)
    assert win.import_dxf()
    assert win.statusBar().currentMessage() == f"Imported 1 part from {one}"
    assert win.doc.undo_stack.text(0) == "import 1 part from one.dxf"
