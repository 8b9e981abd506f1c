"""Desktop application checks, driving real widgets offscreen (pytest-qt).

Drags go through the canvas tool API (press / move / release in scene mm), which is what the
view's mouse handlers call.  Numbers compared with the engine are compared exactly: the GUI must
trace the same scene the same way (common practice: the GUI adds no physics of its own).
"""
from __future__ import annotations

import json
import os
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtGui import QImage  # noqa: E402

import raytrace  # noqa: E402
from raytrace import cli  # noqa: E402
from raytrace.scene_io import load_scene, scene_to_dict  # noqa: E402
from raytrace.shapes import PARAMETERS  # noqa: E402

from gui import edits  # noqa: E402
from gui.autosave import find_recoveries  # noqa: E402
from gui.main_window import MainWindow  # noqa: E402
from gui.tools import DETECTOR_TOOL, POLYGON, RECTANGLE, ROTATE, SELECT, SOURCE_TOOL  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "samples"
LIGHT_PIPE = SAMPLES / "light-pipe-90.json"
WINDOW = SAMPLES / "oblique-window.json"
TIMEOUT_MS = 30_000


@pytest.fixture
def home(tmp_path, monkeypatch):
    h = tmp_path / "home"
    monkeypatch.setenv("RAYTRACE_GUI_HOME", str(h))
    return h


def make_window(qtbot, autosave_s=3600.0):
    win = MainWindow(autosave_s=autosave_s)
    qtbot.addWidget(win)
    win.errors = []
    win.show_error = lambda title, text: (win.errors.append(text), setattr(win, "last_error", text))
    win.show_info = lambda title, html: None
    win.ask_unsaved = lambda: "discard"
    win.ask_png_options = lambda: {"width": 800, "height": 600, "dpi": 96, "title_block": True}
    return win


@pytest.fixture
def win(qtbot, home):
    w = make_window(qtbot)
    yield w
    w.worker.shutdown()


def wait_traced(qtbot, win, count=None):
    """Until the newest state of the document has been traced and shown."""
    def done():
        out = win.last_outcome
        return (win.worker.is_idle() and out is not None and out.request.scene is win.doc.scene
                and (count is None or win.traces_shown >= count))
    qtbot.waitUntil(done, timeout=TIMEOUT_MS)
    return win.last_outcome.result


def open_sample(qtbot, win, path):
    assert win.open_file(str(path))
    return wait_traced(qtbot, win)


def ledger_rows(result):
    return [(b.label, b.flux) for b in result.ledger.buckets]


# ---------------------------------------------------------------------------- editing and undo

def test_drag_vertex_changes_ledger_and_undo_restores_exactly(qtbot, win):
    first = open_sample(qtbot, win, LIGHT_PIPE)
    original = win.doc.scene
    shown_before = list(win.ledger.rows)
    guide = original.parts[0]
    # vertex 0 of the light pipe is a corner of the input face, on its right wall
    v = guide.outer.vertices[0]
    win.canvas.select((edits.PART, 0))
    target = (v[0] - 0.8, v[1] - 1.0)
    win.canvas.drag(v, target, steps=8)
    assert win.doc.scene.parts[0].outer.vertices[0] == target
    assert win.doc.undo_stack.count() == 1, "one drag is one undo step"
    moved = wait_traced(qtbot, win)
    assert ledger_rows(moved) != ledger_rows(first)
    assert win.ledger.rows != shown_before, "the ledger panel shows the new trace"

    win.undo_action.trigger()
    assert win.doc.scene == original
    assert scene_to_dict(win.doc.scene) == scene_to_dict(original)
    assert not win.doc.modified
    back = wait_traced(qtbot, win)
    assert ledger_rows(back) == ledger_rows(first)
    win.redo_action.trigger()
    assert win.doc.scene.parts[0].outer.vertices[0] == target


def test_drag_part_source_aim_and_detector_end(qtbot, win):
    open_sample(qtbot, win, WINDOW)
    s0 = win.doc.scene
    c = win.canvas
    # whole part: a builder part stays a builder part, moved by exactly the drag
    x0, y0, x1, y1 = s0.parts[0].outer.bounds()
    inside = ((x0 + x1) / 2, (y0 + y1) / 2)
    c.drag(inside, (inside[0] + 2.0, inside[1] - 1.0))
    p = win.doc.scene.parts[0]
    assert p.shape is not None
    assert p.shape.position == (s0.parts[0].shape.position[0] + 2.0, s0.parts[0].shape.position[1] - 1.0)
    # aim handle of the source: the direction follows the cursor
    src = win.doc.scene.sources[0]
    h = c.aim_handle(src)
    aim = (src.position[0] + 5.0, src.position[1] + 2.0)
    c.drag(h, aim)
    assert win.doc.scene.sources[0].direction_deg == pytest.approx(21.801409, abs=1e-6)   # atan(2/5)
    # detector end point
    det = win.doc.scene.detectors[0]
    c.drag(det.end, (det.end[0] + 1.0, det.end[1] + 2.0))
    assert win.doc.scene.detectors[0].end == (det.end[0] + 1.0, det.end[1] + 2.0)
    assert win.doc.undo_stack.count() == 3
    for _ in range(3):
        win.undo_action.trigger()
    assert win.doc.scene == s0


def test_rotate_tool_with_snapping(qtbot, win):
    open_sample(qtbot, win, WINDOW)
    part = win.doc.scene.parts[0]
    win.set_tool(ROTATE)
    win.snap_action.trigger()            # snapping on: whole degrees
    assert win.canvas.snapping
    px, py = edits.part_pivot(part)
    x0, y0, x1, y1 = part.outer.bounds()
    start = ((x0 + x1) / 2, (y0 + y1) / 2)
    r = (start[0] - px, start[1] - py)
    end = (px - r[1], py + r[0])         # a quarter turn counter-clockwise about the pivot
    win.canvas.drag(start, end, steps=6)
    assert win.doc.scene.parts[0].shape.rotation_deg == pytest.approx((part.shape.rotation_deg + 90.0) % 360.0)


def test_drawing_tools_add_parts_sources_and_detectors(qtbot, win):
    win.new_scene()
    c = win.canvas
    win.set_tool(POLYGON)
    for p in ((0.0, 0.0), (10.0, 0.0), (5.0, 8.0)):
        c.tool.click(*p)
    c.tool.click(0.0, 0.0)               # back on the first vertex closes the part
    s = win.doc.scene
    assert len(s.parts) == 1 and len(s.parts[0].outer.edges) == 3
    assert s.parts[0].outer.signed_area() > 0, "stored counter-clockwise"

    win.set_tool(RECTANGLE)
    c.drag((20.0, -2.0), (30.0, 4.0))
    rect = win.doc.scene.parts[1]
    assert rect.shape.kind == "rectangle" and rect.shape.params == {"width": 10.0, "height": 6.0}
    assert rect.shape.position == (25.0, 1.0)

    win.set_tool(SOURCE_TOOL)
    c.drag((-10.0, 3.0), (-10.0, 8.0))   # place and aim straight up
    src = win.doc.scene.sources[0]
    assert src.position == (-10.0, 3.0) and src.direction_deg == pytest.approx(90.0)

    win.set_tool(DETECTOR_TOOL)
    c.drag((40.0, -5.0), (40.0, 5.0))
    assert win.doc.scene.detectors[0].start == (40.0, -5.0)
    assert win.doc.undo_stack.count() == 4
    win.set_tool(SELECT)
    win.canvas.select((edits.DETECTOR, 0))
    win.delete_selected()
    assert not win.doc.scene.detectors
    win.undo_action.trigger()
    assert len(win.doc.scene.detectors) == 1


def test_shape_builder_dialog_adds_every_builder(qtbot, win, monkeypatch):
    from gui.dialogs import shape as shape_dialog
    monkeypatch.setattr(shape_dialog.ShapeDialog, "exec", lambda self: 1)
    win.new_scene()
    for kind in PARAMETERS:
        win.add_shape(kind)
    parts = win.doc.scene.parts
    assert [p.shape.kind for p in parts] == list(PARAMETERS)
    for p in parts:
        defaults = {i.name: i.default for i in PARAMETERS[p.shape.kind]}
        assert p.shape.params == defaults


def test_side_panel_edits_are_undoable(qtbot, win):
    open_sample(qtbot, win, LIGHT_PIPE)
    s0 = win.doc.scene
    win.canvas.select((edits.PART, 1))           # the panel window, a builder part
    page = win.properties.pages[edits.PART]
    assert win.properties.currentWidget() is page
    i = page.material.findText("crown glass")
    page.material.setCurrentIndex(i)
    page.material.activated.emit(i)
    assert win.doc.scene.parts[1].material == "crown glass"
    _, thickness = page.shape_widgets["thickness"]
    thickness.setValue(2.0)
    assert win.doc.scene.parts[1].shape.params["thickness"] == 2.0
    # a face treatment through the edge table's combo box
    combo = page.table.cellWidget(0, 3)
    combo.setCurrentText("absorber")
    assert win.doc.scene.parts[1].outer.edges[0].treatment.kind == "absorber"
    # a vertex coordinate typed into the table turns the part into a boundary part
    page = win.properties.pages[edits.PART]
    page.table.item(1, 0).setText("21.25")
    p = win.doc.scene.parts[1]
    assert p.outer.vertices[1][0] == 21.25 and p.shape is None
    win.canvas.select((edits.SOURCE, 0))
    sp = win.properties.pages[edits.SOURCE]
    sp.direction.setValue(12.5)
    assert win.doc.scene.sources[0].direction_deg == 12.5
    for _ in range(win.doc.undo_stack.count()):
        win.undo_action.trigger()
    assert win.doc.scene == s0


def test_face_name_on_hover(qtbot, win):
    open_sample(qtbot, win, WINDOW)
    part = win.doc.scene.parts[0]
    e = part.outer.edges[3]
    x, y = e.point_at(0.5)
    assert win.canvas.hover_text(x, y) == f"{part.name} / {e.face} (bare)"


# ---------------------------------------------------------------------------- files

def test_save_and_reopen_gives_the_same_scene(qtbot, win, tmp_path):
    open_sample(qtbot, win, LIGHT_PIPE)
    c = win.canvas
    win.canvas.select((edits.PART, 1))
    x0, y0, x1, y1 = win.doc.scene.parts[1].outer.bounds()
    c.drag(((x0 + x1) / 2, (y0 + y1) / 2), ((x0 + x1) / 2 + 0.5, (y0 + y1) / 2 + 0.25))
    win.canvas.select((edits.PART, 0))
    v = win.doc.scene.parts[0].outer.vertices[0]   # a corner of the input face
    c.drag(v, (v[0] - 0.125, v[1]))
    assert win.doc.modified and win.windowTitle().startswith("*")
    path = tmp_path / "edited.json"
    assert win.save_as(str(path))
    assert not win.doc.modified and not win.windowTitle().startswith("*")
    edited = win.doc.scene
    assert load_scene(path) == edited
    win2 = make_window(qtbot)
    try:
        assert win2.open_file(str(path))
        assert win2.doc.scene == edited
        assert scene_to_dict(win2.doc.scene) == scene_to_dict(edited)
    finally:
        win2.worker.shutdown()
    from gui.recent import recent_files
    assert recent_files()[0] == str(path.resolve())


def test_unsaved_changes_prompt(qtbot, win, tmp_path):
    open_sample(qtbot, win, WINDOW)
    x0, y0, x1, y1 = win.doc.scene.parts[0].outer.bounds()
    win.canvas.drag(((x0 + x1) / 2, (y0 + y1) / 2), ((x0 + x1) / 2 + 1.0, (y0 + y1) / 2))
    assert win.doc.modified
    asked = []
    win.ask_unsaved = lambda: (asked.append(1), "cancel")[1]
    assert not win.open_file(str(LIGHT_PIPE))
    assert asked and win.doc.path == WINDOW, "cancel keeps the current work"
    win.ask_unsaved = lambda: "save"
    win.ask_save_path = lambda *a, **k: str(tmp_path / "kept.json")
    win.doc.path = None
    assert win.open_file(str(LIGHT_PIPE))
    assert (tmp_path / "kept.json").exists()


def _read_only_dir(tmp_path) -> Path:
    """A directory this process cannot create files in.  Root ignores permission bits, so as
    root use sysfs, which refuses new files to everyone."""
    if os.geteuid() != 0:
        d = tmp_path / "locked"
        d.mkdir()
        d.chmod(0o555)
        return d
    if not Path("/sys").is_dir():
        pytest.skip("no directory that refuses writes to root")
    return Path("/sys")


def test_failed_save_keeps_document_unsaved_and_says_why(qtbot, win, tmp_path):
    open_sample(qtbot, win, WINDOW)
    win.canvas.select((edits.SOURCE, 0))
    win.properties.pages[edits.SOURCE].direction.setValue(33.0)
    assert win.doc.modified
    target = _read_only_dir(tmp_path) / "scene.json"
    assert not win.save_as(str(target))
    assert not target.exists()
    assert win.doc.modified and win.windowTitle().startswith("*")
    assert win.errors and str(target) in win.errors[-1] and "Permission denied" in win.errors[-1]


def test_failed_save_leaves_previous_file_intact(qtbot, win, tmp_path, monkeypatch):
    """A full disk during the rename step: the old file stays whole (atomic save)."""
    open_sample(qtbot, win, WINDOW)
    path = tmp_path / "scene.json"
    assert win.save_as(str(path))
    before = path.read_bytes()
    win.canvas.select((edits.SOURCE, 0))
    win.properties.pages[edits.SOURCE].direction.setValue(21.0)

    def full_disk(*_a, **_k):
        raise OSError(28, "No space left on device")
    monkeypatch.setattr(os, "replace", full_disk)
    assert not win.save()
    monkeypatch.undo()
    assert path.read_bytes() == before
    assert win.doc.modified and "No space left on device" in win.errors[-1]
    assert [p.name for p in tmp_path.iterdir()] == ["scene.json", "home"] or \
        sorted(p.name for p in tmp_path.iterdir()) == ["home", "scene.json"], "no temporary file left"


def test_autosave_writes_recovery_file_offered_on_next_start(qtbot, home):
    w1 = make_window(qtbot, autosave_s=0.05)
    try:
        assert w1.open_file(str(WINDOW))
        w1.canvas.select((edits.SOURCE, 0))
        w1.properties.pages[edits.SOURCE].direction.setValue(27.0)
        edited = w1.doc.scene
        qtbot.waitUntil(lambda: w1.autosaver.scene_file.exists(), timeout=TIMEOUT_MS)
        assert load_scene(w1.autosaver.scene_file) == edited
        assert find_recoveries() == [], "a running session's copy is not offered"
        # the session dies without cleaning up: make its copy look like a dead process's
        dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                              capture_output=True, text=True, check=True)
        meta = json.loads(w1.autosaver.meta_file.read_text())
        meta["pid"] = int(dead.stdout)
        w1.autosaver.meta_file.write_text(json.dumps(meta))
    finally:
        w1.worker.shutdown()
        w1.autosaver.timer.stop()
    found = find_recoveries()
    assert len(found) == 1 and found[0].original == str(WINDOW)
    w2 = make_window(qtbot)
    try:
        offered = []
        w2.ask_recovery = lambda description: (offered.append(description), "restore")[1]
        assert w2.offer_recovery()
        assert offered and str(WINDOW) in offered[0]
        assert w2.doc.scene == edited
        assert w2.doc.modified and w2.doc.path == WINDOW
        assert not found[0].scene_file.exists(), "the old copy is gone once restored"
        assert find_recoveries() == []
    finally:
        w2.worker.shutdown()


# ---------------------------------------------------------------------------- tracing

@pytest.mark.parametrize("sample", ["light-pipe-90", "cemented-prism-pair", "roof-prism-retroreflector"])
def test_gui_trace_equals_cli(qtbot, win, tmp_path, sample):
    path = SAMPLES / f"{sample}.json"
    result = open_sample(qtbot, win, path)
    out = tmp_path / "summary.json"
    assert cli.main(["trace", str(path), "--json", str(out), "--quiet"]) == 0
    summary = json.loads(out.read_text())
    assert result.to_summary_dict()["buckets"] == summary["buckets"]      # fluxes, shares and their errors
    assert {d.name: result.efficiency(d.name) for d in result.compiled.detectors} == summary["efficiency"]
    assert result.to_summary_dict()["efficiency_error"] == summary["efficiency_error"]
    assert result.stats["segments"] == summary["stats"]["segments"]


def test_wavelength_override_matches_engine(qtbot, win):
    """The single-wavelength control traces what the engine gives for one-line spectra."""
    open_sample(qtbot, win, SAMPLES / "cemented-prism-pair.json")
    win.controls.one_wavelength.setChecked(True)
    win.controls.wavelength.setValue(486.1)
    win.controls.wavelength.editingFinished.emit()
    qtbot.waitUntil(lambda: win.last_outcome.request.options.wavelength_nm == 486.1 and win.worker.is_idle(),
                    timeout=TIMEOUT_MS)
    scene = win.doc.scene.copy()
    scene.sources = [replace(s, spectrum=raytrace.Spectrum.line(486.1)) for s in scene.sources]
    ref = raytrace.trace(scene)
    assert ledger_rows(win.last_outcome.result) == ledger_rows(ref)


def test_only_the_newest_state_is_shown_during_a_drag(qtbot, win):
    open_sample(qtbot, win, LIGHT_PIPE)
    win.canvas.select((edits.PART, 0))
    v = win.doc.scene.parts[0].outer.vertices[0]
    submitted = win.worker._next_id
    win.canvas.drag(v, (v[0] - 1.0, v[1] - 1.0), steps=30)
    result = wait_traced(qtbot, win)
    assert win.worker._next_id - submitted == 30
    assert win.last_outcome.request.scene is win.doc.scene
    assert win.traces_shown < 1 + 30, "intermediate states were skipped or dropped"
    assert ledger_rows(result) == ledger_rows(raytrace.trace(win.doc.scene))


def test_long_trace_can_be_stopped(qtbot, win):
    """Stop during a 400,000-ray trace: its result is never shown.  A coarse preview fan may
    have been shown before the stop (the worker shows one first when it expects a slow trace,
    which depends on how fast the machine traced lately), but never the full result."""
    open_sample(qtbot, win, LIGHT_PIPE)
    results = []
    win.worker.finished.connect(results.append)
    win.controls.rays.setValue(400_000)
    win.controls.rays.editingFinished.emit()
    qtbot.waitUntil(win.worker.is_tracing, timeout=TIMEOUT_MS)
    win.stop_trace()
    qtbot.waitUntil(win.worker.is_idle, timeout=TIMEOUT_MS)
    assert all(o.coarse for o in results), [o.coarse for o in results]
    assert win.worker.dropped >= 1


def run_sweep_dialog(qtbot, dlg, name: str, start: float, stop: float, count: int, rays: int):
    """Fill in the sweep dialog as a user does, run it and wait for the table."""
    dlg.name.setCurrentText(name)
    dlg.start.setValue(start)
    dlg.stop.setValue(stop)
    dlg.count.setValue(count)
    dlg.rays.setValue(rays)
    dlg.run()
    qtbot.waitUntil(lambda: not dlg.running(), timeout=TIMEOUT_MS)


def test_sweep_dialog_runs_plots_and_cancels(qtbot, win, tmp_path):
    from gui.dialogs.sweep import SweepDialog
    open_sample(qtbot, win, WINDOW)
    dlg = SweepDialog(win.doc.scene, {}, win)
    qtbot.addWidget(dlg)
    run_sweep_dialog(qtbot, dlg, "probe beam.direction_deg", 30.0, 50.0, 3, 20)
    assert dlg.message == "" and len(dlg.result.rows) == 3
    assert [r["probe beam.direction_deg"] for r in dlg.result.rows] == [30.0, 40.0, 50.0]
    assert dlg.bar.value() == 3
    assert len(dlg.plot.listDataItems()) == len(win.doc.scene.detectors)
    import pyqtgraph as pg
    bars = [i for i in dlg.plot.getPlotItem().items if isinstance(i, pg.ErrorBarItem)]
    assert len(bars) == len(win.doc.scene.detectors)        # one +-1 standard error bar set each
    first = dlg.result.detectors[0]
    assert list(bars[0].opts["height"]) == [200 * r[f"efficiency error: {first}"] for r in dlg.result.rows]
    import pandas
    table = tmp_path / "sweep.csv"
    assert dlg.save_table(str(table))
    rows = pandas.read_csv(table)
    assert list(rows["probe beam.direction_deg"]) == [30.0, 40.0, 50.0]
    assert list(rows["efficiency: inside chamber"]) == [r["efficiency: inside chamber"] for r in dlg.result.rows]
    dlg.count.setValue(400)
    dlg.rays.setValue(2000)
    dlg.run()
    dlg.cancel()
    qtbot.waitUntil(lambda: not dlg.running(), timeout=TIMEOUT_MS)
    assert dlg.message == "cancelled" and dlg.bar.value() < 400


# ---------------------------------------------------------------------------- exports and screenshot

def test_exports_csv_png_svg(qtbot, win, tmp_path):
    import pandas
    result = open_sample(qtbot, win, WINDOW)
    for name, export in (("rays.csv", win.export_csv), ("drawing.png", win.export_png),
                         ("drawing.svg", win.export_svg)):
        win.ask_save_path = lambda *a, n=name, **k: str(tmp_path / n)
        assert export(), win.errors
        assert (tmp_path / name).stat().st_size > 0
    table = pandas.read_csv(tmp_path / "rays.csv")
    assert len(table) == len(result.segments["x0"])
    assert "<svg" in (tmp_path / "drawing.svg").read_text()[:2000]
    assert not QImage(str(tmp_path / "drawing.png")).isNull()


def _coloured_share(img: QImage) -> float:
    """Share of pixels with a clearly saturated colour (rays, part fills, glyphs); the window
    chrome and the empty drawing are grey or near white."""
    small = img.scaled(img.width() // 4, img.height() // 4)
    n = hits = 0
    for y in range(small.height()):
        for x in range(small.width()):
            c = small.pixelColor(x, y)
            n += 1
            if c.saturation() > 60 and c.value() > 40:
                hits += 1
    return hits / n


def test_screenshot_is_written_and_shows_the_scene(tmp_path, home):
    png = tmp_path / "shot.png"
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", RAYTRACE_GUI_HOME=str(home))
    run = subprocess.run([sys.executable, "-m", "gui.app", str(LIGHT_PIPE), "--screenshot", str(png),
                          "--size", "1000x700"], capture_output=True, text=True, timeout=120, env=env, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    img = QImage(str(png))
    assert (img.width(), img.height()) == (1000, 700)
    shown = _coloured_share(img)
    empty = tmp_path / "empty.png"
    run = subprocess.run([sys.executable, "-m", "gui.app", "--screenshot", str(empty), "--size", "1000x700"],
                         capture_output=True, text=True, timeout=120, env=env, cwd=ROOT)
    assert run.returncode == 0, run.stderr
    blank = _coloured_share(QImage(str(empty)))
    assert shown > 0.02 and shown > 5 * blank, (shown, blank)


def test_screenshot_of_a_bad_scene_reports_problems(tmp_path, home):
    bad = tmp_path / "bad.json"
    data = json.loads(WINDOW.read_text())
    data["parts"][0]["material"] = "unobtainium"
    bad.write_text(json.dumps(data))
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", RAYTRACE_GUI_HOME=str(home))
    run = subprocess.run([sys.executable, "-m", "gui.app", str(bad), "--screenshot", str(tmp_path / "x.png")],
                         capture_output=True, text=True, timeout=120, env=env, cwd=ROOT)
    assert run.returncode == 1
    assert "$.parts[0].material" in run.stderr and "unobtainium" in run.stderr
    assert not (tmp_path / "x.png").exists()


def test_screenshot_of_an_untraceable_scene_names_the_file_in_each_problem(tmp_path, home):
    bad = tmp_path / "overlap.json"
    data = json.loads((SAMPLES / "light-pipe-90.json").read_text())
    data["numbers"]["gap"] = -1          # pushes the panel window into the guide
    bad.write_text(json.dumps(data))
    env = dict(os.environ, QT_QPA_PLATFORM="offscreen", RAYTRACE_GUI_HOME=str(home))
    run = subprocess.run([sys.executable, "-m", "gui.app", str(bad), "--screenshot", str(tmp_path / "x.png")],
                         capture_output=True, text=True, timeout=120, env=env, cwd=ROOT)
    assert run.returncode == 1
    assert f"error: {bad}: $.parts[1]: found <part 'panel window' overlapping" in run.stderr


# ---------------------------------------------------------------------------- real mouse events

def _mouse_drag(qtbot, canvas, a, b, steps=10):
    """Press, move with the button held, release: real Qt mouse events on the drawing.
    pyqtgraph drops move events closer than ~16 ms apart, hence the short waits."""
    from PySide6.QtCore import QEvent, QPointF, Qt
    from PySide6.QtGui import QMouseEvent
    from PySide6.QtTest import QTest
    from PySide6.QtWidgets import QApplication
    vp = canvas.plot.viewport()

    def widget_point(p):
        return canvas.plot.mapFromScene(canvas.view.mapViewToScene(QPointF(*p)))
    pa, pb = widget_point(a), widget_point(b)
    QTest.mousePress(vp, Qt.LeftButton, Qt.NoModifier, pa)
    for k in range(1, steps + 1):
        p = QPointF(pa + (pb - pa) * (k / steps))
        QApplication.sendEvent(vp, QMouseEvent(QEvent.MouseMove, p, p, QPointF(vp.mapToGlobal(p.toPoint())),
                                               Qt.NoButton, Qt.LeftButton, Qt.NoModifier))
        qtbot.wait(20)
    QTest.mouseRelease(vp, Qt.LeftButton, Qt.NoModifier, pb)


def test_real_mouse_drags_a_part_and_pans_empty_space(qtbot, win):
    open_sample(qtbot, win, WINDOW)
    win.resize(1200, 800)
    win.canvas.fit()
    qtbot.wait(10)
    s0 = win.doc.scene
    x0, y0, x1, y1 = s0.parts[0].outer.bounds()
    a = ((x0 + x1) / 2, (y0 + y1) / 2)
    _mouse_drag(qtbot, win.canvas, a, (a[0] + 3.0, a[1]))
    moved = win.doc.scene.parts[0].shape.position
    px = win.canvas.pixel_mm()
    assert moved[0] == pytest.approx(s0.parts[0].shape.position[0] + 3.0, abs=2 * px)
    assert moved[1] == pytest.approx(s0.parts[0].shape.position[1], abs=2 * px)
    assert win.doc.undo_stack.count() == 1
    # empty space: the view pans, the scene stays
    scene = win.doc.scene
    (vx0, vx1), _ = win.canvas.view.viewRange()
    empty = (vx0 + 0.05 * (vx1 - vx0), y1 - 1.0)
    assert win.canvas.pick(*empty) is None
    _mouse_drag(qtbot, win.canvas, empty, (empty[0] + 5.0, empty[1]))
    assert win.doc.scene is scene
    (nx0, nx1), _ = win.canvas.view.viewRange()
    assert nx0 < vx0 - 2.0, "dragging empty space to the right shows more on the left"


# ---------------------------------------------------------------------------- panels and controls

def test_user_material_defined_and_used(qtbot, win):
    from raytrace.materials import AbbeGlass
    open_sample(qtbot, win, WINDOW)
    win.ask_material = lambda taken: AbbeGlass("my glass", 1.6, 40.0)
    win.properties.ask_material = win.ask_material
    win.canvas.select((edits.PART, 0))
    win.properties.define_material(for_part=0)
    s = win.doc.scene
    assert s.materials["my glass"] == AbbeGlass("my glass", 1.6, 40.0)
    assert s.parts[0].material == "my glass"
    assert win.doc.undo_stack.count() == 1
    result = wait_traced(qtbot, win)
    assert ledger_rows(result) == ledger_rows(raytrace.trace(s))


def test_mode_and_limits_controls_trace_like_the_engine(qtbot, win):
    open_sample(qtbot, win, SAMPLES / "cemented-prism-pair.json")
    c = win.controls
    c.mode.setCurrentIndex(c.mode.findData("monte_carlo"))
    c.mode.activated.emit(c.mode.currentIndex())
    c.depth.setValue(2)
    c.depth.editingFinished.emit()
    c.threshold.setValue(0.01)
    c.threshold.editingFinished.emit()
    s = win.doc.scene.settings
    assert (s.mode, s.max_generations, s.flux_floor) == ("monte_carlo", 2, 0.01)
    result = wait_traced(qtbot, win)
    assert ledger_rows(result) == ledger_rows(raytrace.trace(win.doc.scene))
    assert result.ledger.flux("truncated", reason="generation limit") > 0, "depth 2 truncates rays inside the prisms"


def test_escape_markers_add_up_to_the_ledger(qtbot, win):
    """Every escape marker sits on a face of the ledger's escape rows; per face the markers'
    shares add up to the ledger's share (markers below 0.1 % are left out)."""
    result = open_sample(qtbot, win, LIGHT_PIPE)
    total = result.ledger.source_flux
    per_label = {}
    for x, y, share, label in win.canvas.drawing.escapes:
        per_label[label] = per_label.get(label, 0.0) + share
    rows = {f"{b.part} / {b.face}": b.flux / total for b in result.ledger.buckets if b.kind == "escaped" and b.part}
    assert per_label and set(per_label) <= set(rows)
    for label, share in per_label.items():
        assert share == pytest.approx(rows[label], abs=1e-3 * len(result.compiled.face_labels))
    assert set(rows) - set(per_label) <= {k for k, v in rows.items() if v < 2e-2}


def test_profile_panel_shows_the_detector_report(qtbot, win):
    from PySide6.QtCore import Qt
    from raytrace.detectors import detector_report
    result = open_sample(qtbot, win, LIGHT_PIPE)
    win.show()
    qtbot.waitExposed(win)
    assert not win.profiles.isVisible()                 # behind the Flux ledger tab
    tabs = win.result_tabs
    qtbot.mouseClick(tabs.tabBar(), Qt.LeftButton,
                     pos=tabs.tabBar().tabRect(tabs.indexOf(win.profiles)).center())   # the Profiles tab
    assert win.profiles.isVisible()
    rep = win.profiles.report
    ref = detector_report(result, "viewer side")
    assert rep.name == "viewer side"
    assert list(rep.irradiance.flux) == list(ref.irradiance.flux)
    assert list(rep.angular.flux) == list(ref.angular.flux)
    # the report's own line, a phrase a line, with the ledger's ± and no break inside a figure
    shown = win.profiles.info.text()
    assert shown.replace("\u00a0", " ").replace("\u2060", "").replace("\u00b1", "+-").split("\n") \
        == ref.summary_line().split("; ")
    assert "\u00b1" in shown and "+-" not in shown
    bars = [i for i in win.profiles.irr.listDataItems() + win.profiles.irr.getPlotItem().items
            if i.__class__.__name__ == "BarGraphItem"]
    assert bars
    # back to the ledger, an edit, then the Profiles tab again: the profiles of the new trace
    # (drawn when the tab shows, not while it is hidden)
    qtbot.mouseClick(tabs.tabBar(), Qt.LeftButton, pos=tabs.tabBar().tabRect(tabs.indexOf(win.ledger)).center())
    assert not win.profiles.isVisible()
    s = win.doc.scene
    win.doc.apply(edits.replace_part(s, 1, edits.move_part(s.parts[1], 0.3, 0.0)), "move")
    moved = wait_traced(qtbot, win)
    assert moved is not result and win.profiles.report is rep          # not redrawn while hidden
    qtbot.mouseClick(tabs.tabBar(), Qt.LeftButton, pos=tabs.tabBar().tabRect(tabs.indexOf(win.profiles)).center())
    ref = detector_report(moved, "viewer side")
    assert win.profiles.report is not rep
    assert list(win.profiles.report.irradiance.flux) == list(ref.irradiance.flux)


def test_close_asks_before_losing_changes(qtbot, win):
    open_sample(qtbot, win, WINDOW)
    win.show()
    win.canvas.select((edits.SOURCE, 0))
    win.properties.pages[edits.SOURCE].direction.setValue(10.0)
    win.ask_unsaved = lambda: "cancel"
    win.close()
    assert win.isVisible() and win.doc.modified
    win.ask_unsaved = lambda: "discard"
    win.close()
    assert not win.isVisible()


def test_polygon_closed_with_the_enter_key(qtbot, win):
    from PySide6.QtCore import Qt
    win.new_scene()
    win.show()
    win.set_tool(POLYGON)
    for p in ((0.0, 0.0), (4.0, 0.0), (4.0, 3.0), (0.0, 3.0)):
        win.canvas.tool.click(*p)
    qtbot.keyClick(win.canvas.plot, Qt.Key_Backspace)     # take back the last vertex
    qtbot.keyClick(win.canvas.plot, Qt.Key_Return)
    part = win.doc.scene.parts[0]
    assert part.outer.vertices == [(0.0, 0.0), (4.0, 0.0), (4.0, 3.0)]


def test_a_scene_that_cannot_be_traced_says_why(qtbot, win):
    open_sample(qtbot, win, LIGHT_PIPE)
    guide = win.doc.scene.parts[0]
    # move the panel window into the guide: overlapping parts cannot be traced
    win.canvas.select((edits.PART, 1))
    x0, y0, x1, y1 = win.doc.scene.parts[1].outer.bounds()
    c = ((x0 + x1) / 2, (y0 + y1) / 2)
    gx0, gy0, gx1, gy1 = guide.outer.bounds()
    win.canvas.drag(c, (c[0], c[1] - 3.0))
    qtbot.waitUntil(lambda: win.worker.is_idle() and win.last_outcome.request.scene is win.doc.scene,
                    timeout=TIMEOUT_MS)
    assert "overlapping" in win.last_outcome.error
    assert "overlapping" in win.canvas.legend.problem.text()
    assert win.canvas.result is None, "no stale rays are left on the drawing"
    win.undo_action.trigger()
    wait_traced(qtbot, win)
    assert win.canvas.legend.problem.text() == ""


def test_saved_and_exported_files_get_ordinary_permissions(qtbot, win, tmp_path):
    """Temporary files start private (0600); what the user saves must not stay so."""
    open_sample(qtbot, win, WINDOW)
    umask = os.umask(0)
    os.umask(umask)
    scene_path, png = tmp_path / "s.json", tmp_path / "d.png"
    assert win.save_as(str(scene_path))
    win.ask_save_path = lambda *a, **k: str(png)
    assert win.export_png()
    for p in (scene_path, png):
        assert p.stat().st_mode & 0o777 == 0o666 & ~umask
    scene_path.chmod(0o640)
    assert win.save()
    assert scene_path.stat().st_mode & 0o777 == 0o640, "a saved-over file keeps its mode"


@pytest.mark.parametrize("sample", sorted(p.stem for p in SAMPLES.glob("*.json")))
def test_every_sample_renders(qtbot, home, tmp_path, sample):
    """The screenshot path in-process for each bundled sample: traced without error, drawn."""
    from PySide6.QtWidgets import QApplication
    from gui.app import screenshot
    w = make_window(qtbot)
    png = tmp_path / f"{sample}.png"
    assert screenshot(QApplication.instance(), w, str(SAMPLES / f"{sample}.json"), str(png), "900x600") == 0
    assert w.last_outcome is not None and not w.last_outcome.error
    assert w.canvas.painted_segments > 0 and len(w.canvas.drawing.hits_x) > 0
    blank_png = tmp_path / "blank.png"
    assert screenshot(QApplication.instance(), make_window(qtbot), None, str(blank_png), "900x600") == 0
    shown, blank = _coloured_share(QImage(str(png))), _coloured_share(QImage(str(blank_png)))
    assert shown > 0.002 and shown > 4 * blank, (shown, blank)


def test_arrow_keys_nudge_and_duplicate(qtbot, win):
    from PySide6.QtCore import Qt
    open_sample(qtbot, win, WINDOW)
    win.show()
    win.canvas.select((edits.PART, 0))
    p0 = win.doc.scene.parts[0].shape.position
    qtbot.keyClick(win.canvas.plot, Qt.Key_Right)
    qtbot.keyClick(win.canvas.plot, Qt.Key_Up, Qt.ShiftModifier)
    assert win.doc.scene.parts[0].shape.position == (p0[0] + 1.0, p0[1] + 10.0)   # grid step 1 mm
    win.snap_action.trigger()
    win.duplicate_selected()
    parts = win.doc.scene.parts
    assert len(parts) == 2 and parts[1].name != parts[0].name
    x0, _, x1, _ = parts[0].outer.bounds()
    assert parts[1].shape.position == (parts[0].shape.position[0] + round(1.1 * (x1 - x0)),
                                       parts[0].shape.position[1]), "beside the original, on the grid"
    assert win.canvas.selection == (edits.PART, 1)
    assert win.doc.undo_stack.count() == 3


def test_recent_files_menu_reopens(qtbot, win):
    assert win.open_file(str(WINDOW))
    assert win.open_file(str(LIGHT_PIPE))
    win._fill_recent()
    actions = [a for a in win.recent_menu.actions() if a.isEnabled()]
    assert [a.text() for a in actions[:2]] == [str(LIGHT_PIPE.resolve()), str(WINDOW.resolve())]
    actions[1].trigger()
    assert win.doc.path == WINDOW.resolve() and win.doc.scene == load_scene(WINDOW)


def test_ledger_panel_shows_each_shares_standard_error(qtbot, win):
    """The ledger panel's error column shows the engine's standard error of each share, in points
    of % (the GUI adds no statistics of its own), and the summary says what it means."""
    result = open_sample(qtbot, win, LIGHT_PIPE)
    tree = win.ledger.tree
    assert tree.headerItem().text(3) == "\u00b1 error"
    shown = {it.toolTip(0): it.text(3) for it in win.ledger.items() if it.toolTip(0)}
    for b in result.ledger.buckets:
        assert shown[b.label] == f"{100 * result.share_error(b.label):.2f}"
    assert "\u00b1 " in win.ledger.summary.text()
    assert "sampling error" in win.ledger.summary.toolTip()
