"""The live editor's redraw path: an edit, a coarse fan, then the full trace, drawn as the engine
traces the scene.

Checked against the engine itself (common practice for a GUI over an engine: it adds no physics
of its own): the final drawing after a real mouse drag is the drawing of a direct trace of the
dragged scene, array for array and pixel for pixel; the coarse fan comes first and is a real
trace of the same state with fewer rays; the canvas is not painted between an edit and its new
rays (at most PAINT_HOLD_S), and a drawing made on the trace thread is used only when it was
made the way the canvas draws now.
"""
from __future__ import annotations

import os
from dataclasses import replace

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6.QtCore import QEvent, QObject  # noqa: E402

from gui import edits, main_window as main_window_mod, worker as worker_mod  # noqa: E402
from gui.raydraw import scene_drawing  # noqa: E402
from gui.tracing import run_trace  # noqa: E402
from gui_events import drag  # noqa: E402  (tests/gui_events.py: real mouse events)
from test_gui import LIGHT_PIPE, make_window, wait_traced  # noqa: E402

TIMEOUT_MS = 60_000


@pytest.fixture
def home(tmp_path, monkeypatch):
    h = tmp_path / "home"
    monkeypatch.setenv("RAYTRACE_GUI_HOME", str(h))
    return h


@pytest.fixture
def win(qtbot, home):
    w = make_window(qtbot)
    w.resize(1200, 800)
    w.show()
    qtbot.waitExposed(w)
    yield w
    w.worker.shutdown()


def _open(qtbot, win, rays=1000):
    assert win.open_file(str(LIGHT_PIPE))
    win.controls.drawn.setValue(rays)
    win.doc.apply(edits.set_settings(win.doc.scene, rays=rays), "rays")
    wait_traced(qtbot, win)


class _Paints(QObject):
    """Counts the paint events the drawing's viewport receives."""

    def __init__(self, widget):
        super().__init__()
        self.count = 0
        widget.installEventFilter(self)

    def eventFilter(self, obj, ev):
        if ev.type() == QEvent.Paint:
            self.count += 1
        return False


def _same_drawing(a, b):
    assert a.n_segments == b.n_segments > 0
    for kind in b.lines:
        for (ax, ay), (bx, by) in zip(a.lines[kind], b.lines[kind]):
            np.testing.assert_array_equal(ax, bx)
            np.testing.assert_array_equal(ay, by)
    np.testing.assert_array_equal(a.hits_x, b.hits_x)
    np.testing.assert_array_equal(a.hits_y, b.hits_y)
    assert a.escapes == b.escapes


def test_after_a_drag_the_drawing_is_the_direct_trace_of_the_dragged_scene(qtbot, win, monkeypatch):
    # any trace counts as slow: every state of the drag gets a coarse fan first
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    _open(qtbot, win)
    shown = []
    win.worker.finished.connect(shown.append)
    x0, y0, x1, y1 = win.doc.scene.parts[1].outer.bounds()        # the panel window
    centre = (0.5 * (x0 + x1), 0.5 * (y0 + y1))
    drag(qtbot, win.canvas, centre, (centre[0] + 1.0, centre[1] + 0.5))
    assert win.doc.scene.parts[1].outer.bounds()[0] > x0          # the part moved
    wait_traced(qtbot, win)
    final = win.last_outcome
    assert not final.coarse and final.result.stats["source_rays"] == 1000
    # the drawing made on the trace thread is the one shown ...
    assert win.canvas.drawing is final.drawing
    # ... and equals the drawing of the engine's own trace of the dragged scene
    direct = run_trace(win.doc.scene, win.controls.options())
    np.testing.assert_array_equal(final.result.ledger.bins, direct.ledger.bins)
    _same_drawing(win.canvas.drawing, scene_drawing(direct, win.doc.scene, pixel_mm=win.canvas.view_pixel_mm))
    # pixel for pixel: the window's picture, then the direct trace drawn on the UI thread
    picture = win.canvas.plot.grab().toImage()
    win.canvas.set_result(direct)
    assert win.canvas.drawing is not final.drawing
    assert win.canvas.plot.grab().toImage() == picture
    # coarse fans were shown on the way, each a real trace of fewer rays of a dragged state
    coarse = [o for o in shown if o.coarse]
    assert coarse and all(o.result.stats["source_rays"] < 1000 for o in coarse)
    states = {id(o.request.scene) for o in shown}
    assert all(id(o.request.scene) in states for o in coarse)


def test_an_edit_shows_its_coarse_fan_first_then_its_full_trace(qtbot, win, monkeypatch):
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    _open(qtbot, win)
    shown = []
    win.worker.finished.connect(lambda o: shown.append((o, win.canvas.drawing.n_segments)))
    s = win.doc.scene
    win.doc.apply(edits.replace_part(s, 1, edits.move_part(s.parts[1], 0.2, 0.0)), "move")
    wait_traced(qtbot, win)
    assert [o.coarse for o, _ in shown] == [True, False]
    (coarse, n_coarse), (full, n_full) = shown
    assert coarse.request is full.request and coarse.request.scene is win.doc.scene
    assert coarse.result.stats["source_rays"] < full.result.stats["source_rays"] == 1000
    assert 0 < n_coarse < n_full                     # each was on the canvas in its turn
    # the coarse fan is the real trace of that state with its number of rays, ending its legs
    # at the coarse flux floor (the scene's own floor is lower)
    n = coarse.result.stats["source_rays"]
    floor = max(win.doc.scene.settings.flux_floor, worker_mod.COARSE_FLUX_FLOOR)
    assert coarse.options == replace(coarse.request.options, rays=n, flux_floor=floor,
                                     drawn_rays=min(coarse.request.options.drawn_rays, n))
    ref = run_trace(win.doc.scene, coarse.options)
    np.testing.assert_array_equal(coarse.result.ledger.bins, ref.ledger.bins)
    assert coarse.result.settings["flux_floor"] == floor
    # the full trace keeps the scene's floor and equals the direct trace of the state
    assert full.options == full.request.options
    np.testing.assert_array_equal(full.result.ledger.bins,
                                  run_trace(win.doc.scene, full.request.options).ledger.bins)


def test_the_canvas_waits_for_the_new_rays_before_painting(qtbot, win, monkeypatch):
    _open(qtbot, win)
    # a hold of an hour: only the result can end it, however slow the machine (with a hold of
    # seconds, a trace slower than that would fail the check through the timer)
    monkeypatch.setattr(main_window_mod, "PAINT_HOLD_S", 3600.0)
    vp = win.canvas.plot.viewport()
    paints = _Paints(vp)
    painted_at_result = []
    win.worker.finished.connect(lambda _o: painted_at_result.append(paints.count))
    s = win.doc.scene
    win.doc.apply(edits.replace_part(s, 1, edits.move_part(s.parts[1], 0.2, 0.0)), "move")
    assert not vp.updatesEnabled()                  # held: the old fan is not painted again
    wait_traced(qtbot, win)
    qtbot.waitUntil(lambda: paints.count > 0, timeout=TIMEOUT_MS)
    assert painted_at_result[0] == 0                # nothing painted before the first new rays
    assert vp.updatesEnabled()


def test_the_hold_ends_on_its_own_when_no_result_comes(qtbot, win, monkeypatch):
    _open(qtbot, win)
    vp = win.canvas.plot.viewport()
    paints = _Paints(vp)
    monkeypatch.setattr(win.worker, "submit", lambda *a, **k: 1)     # a trace that never returns
    s = win.doc.scene
    win.doc.apply(edits.replace_part(s, 1, edits.move_part(s.parts[1], 0.2, 0.0)), "move")
    assert not vp.updatesEnabled()
    qtbot.waitUntil(lambda: vp.updatesEnabled() and paints.count > 0,
                    timeout=int(1000 * main_window_mod.PAINT_HOLD_S) + 5000)
    # the moved part is on the canvas: its outline item follows the document
    rect = win.canvas._part_paths[1].boundingRect()
    assert rect.left() == pytest.approx(win.doc.scene.parts[1].outer.bounds()[0], abs=1e-3)


def test_without_live_tracing_an_edit_is_painted_at_once(qtbot, win):
    _open(qtbot, win)
    win.controls.live.setChecked(False)
    s = win.doc.scene
    win.doc.apply(edits.replace_part(s, 1, edits.move_part(s.parts[1], 0.2, 0.0)), "move")
    assert win.canvas.plot.viewport().updatesEnabled()


def test_a_drawing_made_for_another_colour_choice_is_made_again(qtbot, win):
    _open(qtbot, win)
    out = win.last_outcome
    assert out.drawing is not None and not out.drawing.colour_by_wavelength
    win.wavelength_colour_action.trigger()           # View > Colour rays by wavelength
    assert win.canvas.colour_by_wavelength
    win.canvas.set_result(out.result, out.drawing)
    assert win.canvas.drawing is not out.drawing and win.canvas.drawing.colour_by_wavelength
    assert win.canvas.drawing.by_wavelength


def _slow_scene_edit(win):
    s = win.doc.scene
    win.doc.apply(edits.replace_part(s, 1, edits.move_part(s.parts[1], 0.2, 0.0)), "move")


def test_the_panels_show_the_full_trace_not_the_coarse_fan(qtbot, win, monkeypatch):
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    _open(qtbot, win)
    before_rows, before_result = list(win.ledger.rows), win.profiles.result
    seen = []       # connected after the window's own slot: what the panels show once it ran
    win.worker.finished.connect(lambda o: seen.append((o, list(win.ledger.rows), win.profiles.result,
                                                       win.trace_label.text())))
    _slow_scene_edit(win)
    wait_traced(qtbot, win)
    (coarse, c_rows, c_result, c_label), (full, f_rows, f_result, f_label) = seen
    assert coarse.coarse and not full.coarse
    # the coarse fan is drawn, the panels still show the last full trace ...
    assert c_rows == before_rows and c_result is before_result
    assert "preview" in c_label
    # ... and the full trace refreshes them: every bucket of its ledger, in its order
    from gui.panels.ledger import SECTIONS
    buckets = full.result.ledger.buckets
    assert [(r[0], r[1]) for r in f_rows] == [(b.label, b.flux) for kind, _ in SECTIONS
                                              for b in buckets if b.kind == kind]
    assert c_rows != f_rows
    assert f_result is full.result and "traced in" in f_label


def test_the_full_trace_starts_once_the_coarse_fan_is_painted(qtbot, win, monkeypatch):
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    _open(qtbot, win)
    # the worker would start on its own after this long: far longer than the test waits for
    win.worker.refine_wait_s = 3600.0
    paints = _Paints(win.canvas.plot.viewport())
    at_coarse, at_full = [], []
    win.worker.finished.connect(lambda o: o.coarse and at_coarse.append(paints.count))
    real = worker_mod.run_trace

    def traced(scene, options, *a, **k):
        if options.rays is None:                       # the full stage: the scene's own count
            at_full.append((paints.count, win.worker._shown_id))
        return real(scene, options, *a, **k)
    monkeypatch.setattr(worker_mod, "run_trace", traced)
    _slow_scene_edit(win)
    wait_traced(qtbot, win)
    assert len(at_coarse) == 1 and len(at_full) == 1
    (painted, shown_id), req = at_full[0], win.last_outcome.request
    assert painted > at_coarse[0], "the coarse fan was painted before the full trace began"
    assert shown_id >= req.id, "the window said so"


def test_a_hidden_window_does_not_hold_up_the_full_trace(qtbot, win, monkeypatch):
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    _open(qtbot, win)
    win.worker.refine_wait_s = 3600.0
    win.hide()
    _slow_scene_edit(win)
    wait_traced(qtbot, win)          # would wait for the hour: nothing paints a hidden window
    assert not win.last_outcome.coarse and win.worker._shown_id >= win.last_outcome.request.id


def test_one_compile_serves_both_stages_and_a_retrace(qtbot, win, monkeypatch):
    monkeypatch.setattr(worker_mod, "COARSE_WHEN_OVER_S", 0.0)
    _open(qtbot, win)
    calls = []
    real = worker_mod.compile_for
    monkeypatch.setattr(worker_mod, "compile_for", lambda *a: calls.append(a) or real(*a))
    shown = []
    win.worker.finished.connect(shown.append)
    _slow_scene_edit(win)
    wait_traced(qtbot, win)
    assert [o.coarse for o in shown] == [True, False] and len(calls) == 1
    win.request_trace(force=True)                       # Trace now: the same scene again
    wait_traced(qtbot, win, count=win.traces_shown + 1)
    assert len(calls) == 1
    # what the shared compile traced is what a trace of its own gives
    direct = run_trace(win.doc.scene, win.controls.options())
    np.testing.assert_array_equal(win.last_outcome.result.ledger.bins, direct.ledger.bins)
    _same_drawing(win.canvas.drawing, scene_drawing(direct, win.doc.scene, pixel_mm=win.canvas.view_pixel_mm))


def test_an_unchanged_problem_list_is_not_refilled(qtbot, win):
    from gui.problems import SceneProblem
    panel = win.problems_panel
    p = [SceneProblem("$.parts[1]: found an overlapping part; expected apart", (1, 0))]
    panel.show_problems(p)
    first = panel.list.item(0)
    panel.show_problems(list(p))               # the same problems again (every edit asks)
    assert panel.list.item(0) is first and panel.list.count() == 1
    panel.show_problems([SceneProblem("$.parts[0]: found a crossing; expected none", (0,))])
    assert panel.list.item(0).text().startswith("$.parts[0]")
    panel.show_problems([])
    assert panel.list.count() == 0 and "No problems" in panel.summary.text()


def test_garbage_is_collected_on_the_ui_thread_only(qtbot, win):
    """Collection freeing Qt objects outside the UI thread can deadlock against it (see
    gui/gc_policy.py): automatic collection is off, a UI-thread timer collects, and after the
    first trace what lives is frozen out of full collections."""
    import gc
    import threading
    from gui import gc_policy
    _open(qtbot, win)
    assert not gc.isenabled()
    qtbot.waitUntil(gc_policy.heap_settled, timeout=TIMEOUT_MS)
    assert gc.get_freeze_count() > 0
    threads = []

    def watch(phase, info):
        threads.append(threading.current_thread() is threading.main_thread())
    gc.callbacks.append(watch)
    try:
        class Cycle:
            pass
        for _ in range(5 * gc.get_threshold()[0]):      # garbage enough for a gen-0 collection
            a, b = Cycle(), Cycle()
            a.b, b.a = b, a
        qtbot.waitUntil(lambda: len(threads) > 0, timeout=TIMEOUT_MS)
    finally:
        gc.callbacks.remove(watch)
    assert all(threads)
