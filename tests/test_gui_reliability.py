"""Desktop app faults a tester tries on purpose: NaN, infinity and huge numbers typed into the
vertex table, names with control characters, a save that cannot be written, and recovery
copies whose owner's process id repeats or whose sidecar was tampered with.

Keys are typed into the table's own cell editor, as a user does (double-click, type, Enter)."""
from __future__ import annotations

import json
import math
import os
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtCore import QEvent, Qt  # noqa: E402
from PySide6.QtWidgets import QApplication, QLineEdit  # noqa: E402

from raytrace.scene import Spectrum  # noqa: E402
from raytrace.scene_io import load_scene  # noqa: E402

from gui import autosave, edits  # noqa: E402
from gui.autosave import find_recoveries  # noqa: E402
from test_gui import home, make_window, win  # noqa: E402,F401  (the GUI tests' own fixtures)

SAMPLES = Path(__file__).resolve().parents[1] / "samples"
WINDOW = SAMPLES / "oblique-window.json"
TIMEOUT_MS = 30_000


def type_into_cell(qtbot, table, row, col, text, paste=False):
    """Open the cell's editor, select what is there, type (or paste) `text` and press Enter."""
    QApplication.sendPostedEvents(None, QEvent.DeferredDelete)   # editors closed before are gone
    table.setCurrentCell(row, col)
    table.editItem(table.item(row, col))
    editors = table.findChildren(QLineEdit)
    assert len(editors) == 1, "one cell editor is open"
    editor = editors[0]
    editor.selectAll()
    if paste:
        editor.insert(text)      # pasted text may hold characters no key types
    else:
        qtbot.keyClicks(editor, text)
    qtbot.keyClick(editor, Qt.Key_Return)
    QApplication.processEvents()


@pytest.mark.parametrize("typed", ["nan", "inf", "-inf", "1e308", "2e6"])
def test_vertex_table_refuses_nan_infinity_and_huge_values(qtbot, win, tmp_path, typed):
    assert win.open_file(str(WINDOW))
    win.canvas.select((edits.PART, 0))
    page = win.properties.pages[edits.PART]
    before = win.doc.scene
    type_into_cell(qtbot, page.table, 1, 0, typed)
    assert win.doc.scene is before, "the bad value reached the scene"
    message = win.statusBar().currentMessage()
    assert message == f"row 2: expected a coordinate in mm from -1,000,000 to 1,000,000, found {typed!r}"
    assert page.table.item(1, 0).text() != typed, "the table shows the part's real value again"
    # a good value typed the same way goes in, and the saved file reopens
    type_into_cell(qtbot, page.table, 1, 0, "21.25")
    assert win.doc.scene.parts[0].outer.vertices[1][0] == 21.25
    out = tmp_path / "edited.json"
    assert win.save_as(str(out)), win.errors
    assert load_scene(out).parts[0].outer.vertices[1][0] == 21.25


def test_mirror_reflectance_and_spectrum_lines_refuse_nan(qtbot, win):
    assert win.open_file(str(WINDOW))
    win.canvas.select((edits.PART, 0))
    page = win.properties.pages[edits.PART]
    page.table.cellWidget(0, 3).setCurrentText("mirror")
    before = win.doc.scene
    type_into_cell(qtbot, page.table, 0, 4, "nan")
    assert win.doc.scene is before
    assert "expected a mirror reflectance from 0 to 1, found 'nan'" in win.statusBar().currentMessage()
    src = win.doc.scene.sources[0]
    two_lines = replace(src, spectrum=Spectrum((500.0, 600.0), (1.0, 1.0)))
    win.doc.apply(edits.replace_source(win.doc.scene, 0, two_lines), "two lines")
    win.canvas.select((edits.SOURCE, 0))
    sp = win.properties.pages[edits.SOURCE]
    assert sp.lines.isEnabled()
    before = win.doc.scene
    sp.lines.selectAll()
    qtbot.keyClicks(sp.lines, "550:1, inf:2")
    qtbot.keyClick(sp.lines, Qt.Key_Return)
    assert [s.spectrum for s in win.doc.scene.sources] == [s.spectrum for s in before.sources]
    assert "expected a wavelength in nm from 100 to 20,000, found 'inf'" in win.statusBar().currentMessage()


def test_names_with_control_characters_are_refused(qtbot, win):
    assert win.open_file(str(WINDOW))
    win.canvas.select((edits.PART, 0))
    page = win.properties.pages[edits.PART]
    page.name.selectAll()
    page.name.insert("view\x1b[31mport")      # pasted
    qtbot.keyClick(page.name, Qt.Key_Return)
    assert win.doc.scene.parts[0].name == "viewport"
    assert "control characters" in win.statusBar().currentMessage()
    type_into_cell(qtbot, page.table, 0, 2, "front\x07", paste=True)
    assert "\x07" not in (win.doc.scene.parts[0].outer.edges[0].face or "")
    assert "row 1: expected a face name without control characters" in win.statusBar().currentMessage()


@pytest.mark.filterwarnings("ignore:invalid value encountered:RuntimeWarning")   # shapely meets the NaN
def test_save_of_a_value_no_file_can_hold_says_so_and_autosave_does_not_raise(qtbot, win, tmp_path):
    assert win.open_file(str(WINDOW))
    # NaN can only come from code (every field refuses it); the save must say what is wrong
    p = win.doc.scene.parts[0]
    win.doc.apply(edits.replace_part(win.doc.scene, 0, edits.set_vertex_xy(p, 1, x=math.nan)), "nan from code")
    out = tmp_path / "never.json"
    assert not win.save_as(str(out))
    assert not out.exists()
    assert win.errors and "$.parts[0].boundary[1].from[0]" in win.errors[-1] and "finite number" in win.errors[-1]
    assert win.doc.modified
    assert win.autosaver.save_now() is False        # no exception on the timer
    assert "finite number" in win.autosaver.last_error


def test_recovery_copies_are_keyed_by_session_not_pid(qtbot, home):
    a, b = make_window(qtbot), make_window(qtbot)
    try:
        for w in (a, b):
            assert w.open_file(str(WINDOW))
            w.canvas.select((edits.SOURCE, 0))
            w.properties.pages[edits.SOURCE].direction.setValue(11.0 if w is a else 22.0)
            assert w.autosaver.save_now()
        assert a.autosaver.scene_file != b.autosaver.scene_file, "two windows of one process, two copies"
        assert find_recoveries() == []
        # a copy left by an earlier run that had the same pid as this one (pid 1 in a container)
        meta = json.loads(a.autosaver.meta_file.read_text())
        meta["session"] = "an-earlier-run"
        a.autosaver.meta_file.write_text(json.dumps(meta))
        found = find_recoveries()
        assert [r.scene_file for r in found] == [a.autosaver.scene_file]
        assert load_scene(found[0].scene_file).sources[0].direction_deg == 11.0
    finally:
        for w in (a, b):
            w.worker.shutdown()
            w.autosaver.timer.stop()


def test_discard_never_deletes_the_file_a_crafted_sidecar_names(qtbot, home, tmp_path):
    victim = tmp_path / "precious.json"
    victim.write_text("keep me")
    rec = home / "recovery"
    rec.mkdir(parents=True)
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    (rec / "recovery-crafted.json").write_text(WINDOW.read_text())
    (rec / "recovery-crafted.meta.json").write_text(json.dumps(
        {"pid": int(dead.stdout), "session": "crafted", "scene_file": str(victim), "original": "", "saved_at": 1}))
    found = find_recoveries()
    assert [r.scene_file.name for r in found] == ["recovery-crafted.json"]
    found[0].discard()
    assert victim.read_text() == "keep me"
    assert not (rec / "recovery-crafted.json").exists() and not (rec / "recovery-crafted.meta.json").exists()


def test_a_sidecar_without_its_copy_or_with_a_bad_name_is_ignored(home):
    rec = home / "recovery"
    rec.mkdir(parents=True)
    (rec / "recovery-x.meta.json").write_text(json.dumps({"pid": 999999999, "session": "x"}))
    (rec / "recovery-..%2f.meta.json").write_text(json.dumps({"pid": 999999999}))
    assert find_recoveries() == []
    assert autosave._alive(os.getpid(), session="someone-else") is False


def test_export_refuses_the_open_scene_file(qtbot, win, tmp_path):
    scene = tmp_path / "scene.json"
    scene.write_text(WINDOW.read_text())
    assert win.open_file(str(scene))
    qtbot.waitUntil(lambda: win.canvas.result is not None, timeout=TIMEOUT_MS)
    before = scene.read_bytes()
    link = tmp_path / "link.csv"
    link.symlink_to(scene.name)
    for target in (scene, link):
        win.ask_save_path = lambda *a, **k: str(target)
        assert not win.export_csv()
        assert "the open scene's own file" in win.errors[-1]
    assert scene.read_bytes() == before


def test_saving_over_a_read_only_file_says_so_and_keeps_it(qtbot, win, tmp_path):
    target = tmp_path / "locked.json"
    target.write_text(WINDOW.read_text())
    target.chmod(0o444)
    try:
        assert win.open_file(str(target))
        win.canvas.select((edits.SOURCE, 0))
        win.properties.pages[edits.SOURCE].direction.setValue(31.0)
        assert not win.save()
        assert "is read-only (mode 444); make it writable or choose another name" in win.errors[-1]
        assert target.read_text() == WINDOW.read_text()
        assert win.doc.modified
    finally:
        target.chmod(0o644)
