"""The redraw's cheaper paths give what the plain ones gave.

* The compiled crowding pass (`gui/crowding_kernel.py`) against the array version it replaced
  (`raydraw._covered_share`, the reference, as the tracer's compiled kernel is checked against
  its numpy kernel): the same fading steps and the same thinned legs, leg for leg, on the
  samples' real traces and at several zooms.
* The source-ray rank without a sort against numpy's own `unique(..., return_inverse=True)`.
* The canvas reuses the items of the parts an edit did not change: after a real mouse drag of
  one part, a Delete key press and Ctrl+Z, every drawn outline is still its part's outline (its
  bounds are the part's bounds) and no item of a deleted part is left on the drawing.
"""
from __future__ import annotations

import os
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import numpy as np  # noqa: E402
import pytest  # noqa: E402

from gui import raydraw  # noqa: E402
from gui.tracing import TraceOptions, run_trace  # noqa: E402
from raytrace.scene_io import load_scene  # noqa: E402

SAMPLES = Path(__file__).resolve().parents[1] / "samples"


@pytest.mark.parametrize("name", ["light-pipe-90", "microprism-strip", "cemented-prism-pair"])
def test_the_compiled_crowding_pass_matches_the_array_version(name):
    scene = load_scene(SAMPLES / f"{name}.json")
    seg = run_trace(scene, TraceOptions(rays=1000, drawn_rays=1000)).segments
    root = seg["source_ray"].astype(np.int64)
    thinned = 0
    for pixel_mm in (None, 0.01, 0.05, 0.3):       # the default view, zoomed in, zoomed out
        steps_a, keep_a = raydraw.crowding(seg, root, pixel_mm, compiled=False)
        steps_c, keep_c = raydraw.crowding(seg, root, pixel_mm, compiled=True)
        np.testing.assert_array_equal(steps_c, steps_a)
        np.testing.assert_array_equal(keep_c, keep_a)
        thinned += int((~keep_a).sum())
    assert thinned > 0          # these fans are crowded: the comparison covers thinning


def test_source_rank_is_numpys_unique_inverse():
    rng = np.random.default_rng(7)        # seed 7: ids with gaps and repeats, in no order
    root = rng.choice(np.arange(0, 5000, 3), size=20_000)
    np.testing.assert_array_equal(raydraw.source_rank(root), np.unique(root, return_inverse=True)[1])


def test_ranking_a_few_drawn_rays_of_a_long_trace_needs_no_table_of_every_id():
    """The app draws 1,000 source rays spread over a trace of up to 10 million (every 10,000th
    here, about 66 legs each, as the light pipe's): ranking their legs, and listing the rays for
    the direction cues, takes memory for the legs, not a table of all 10 million ids (its
    running count alone is 80 MB).  The same ranks and rays as numpy's unique; seed 3 shuffles
    the legs.  Peak of the allocations traced by tracemalloc (numpy reports its arrays to it)."""
    import tracemalloc
    root = np.repeat(np.arange(0, 10_000_000, 10_000, dtype=np.int64), 66)
    np.random.default_rng(3).shuffle(root)
    tracemalloc.start()
    try:
        rank = raydraw.source_rank(root)
        present = raydraw.present_sources(root)
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 10 * root.nbytes, peak            # root: 0.5 MB; a table of every id: 80+ MB
    want_present, want_rank = np.unique(root, return_inverse=True)
    np.testing.assert_array_equal(rank, want_rank)
    np.testing.assert_array_equal(present, want_present)


def _outlines_follow_parts(win):
    c = win.canvas
    parts = win.doc.scene.parts
    assert len(c._part_items) == 2 * len(parts)
    on_plot = set(map(id, c.view.addedItems))
    for i, part in enumerate(parts):
        fill, outline = c._part_items[2 * i], c._part_items[2 * i + 1]
        assert id(fill) in on_plot and id(outline) in on_plot
        x0, y0, x1, y1 = part.outer.bounds()
        r = outline.path().boundingRect()
        assert (r.left(), r.top(), r.right(), r.bottom()) == pytest.approx((x0, y0, x1, y1), abs=1e-3)
        assert outline.toolTip().startswith(part.name)


def _shown_window(qtbot, tmp_path, monkeypatch):
    """The app's main window at 1200 x 800, shown, with its settings in a fresh home."""
    pytest.importorskip("pytestqt")
    monkeypatch.setenv("RAYTRACE_GUI_HOME", str(tmp_path / "home"))
    from test_gui import make_window
    win = make_window(qtbot)
    win.resize(1200, 800)
    win.show()
    qtbot.waitExposed(win)
    return win


def test_part_outlines_follow_a_drag_a_delete_and_an_undo(qtbot, tmp_path, monkeypatch):
    win = _shown_window(qtbot, tmp_path, monkeypatch)
    from PySide6.QtCore import Qt
    from gui_events import click, drag, key
    from test_gui import LIGHT_PIPE, wait_traced
    try:
        assert win.open_file(str(LIGHT_PIPE))
        wait_traced(qtbot, win)
        _outlines_follow_parts(win)
        untouched = [win.canvas._part_items[k] for k in (0, 1)]      # part 0's fill and outline
        x0, y0, x1, y1 = win.doc.scene.parts[1].outer.bounds()
        centre = (0.5 * (x0 + x1), 0.5 * (y0 + y1))
        drag(qtbot, win.canvas, centre, (centre[0] + 1.0, centre[1]))
        assert win.doc.scene.parts[1].outer.bounds()[0] > x0 + 0.5        # it moved
        _outlines_follow_parts(win)
        assert win.canvas._part_items[:2] == untouched                   # reused, not redrawn
        n = len(win.doc.scene.parts)
        click(qtbot, win.canvas, (centre[0] + 1.0, centre[1]))           # select the moved part
        win.canvas.plot.setFocus()
        key(Qt.Key_Delete)
        assert len(win.doc.scene.parts) == n - 1
        _outlines_follow_parts(win)
        key(Qt.Key_Z, Qt.ControlModifier)
        assert len(win.doc.scene.parts) == n
        _outlines_follow_parts(win)
    finally:
        win.worker.shutdown()


def test_a_source_drag_keeps_the_geometry_finding_and_a_part_drag_checks_again(qtbot, tmp_path, monkeypatch):
    """The light pipe with its panel window pushed 1 mm into the guide (an overlap the tracer
    refuses): dragging the source with the mouse leaves every part as it was, so the geometry
    check is not run again at each step and the overlap stays marked; dragging the window clear
    of the guide checks again and the problem goes."""
    import json
    win = _shown_window(qtbot, tmp_path, monkeypatch)
    from gui import problems as problems_mod
    from gui_events import drag
    data = json.loads((SAMPLES / "light-pipe-90.json").read_text())
    data["parts"][1]["shape"]["position"] = [19.5, 20.5]
    scene_file = tmp_path / "overlap.json"
    scene_file.write_text(json.dumps(data))
    try:
        assert win.open_file(str(scene_file))
        assert [p.parts for p in win.problems] == [(1, 0)]
        qtbot.wait(200)             # laid out and fitted (no trace to wait for: nothing traces)
        checks = []
        real = problems_mod._check
        monkeypatch.setattr(problems_mod, "_check", lambda scene: checks.append(1) or real(scene))
        src = win.doc.scene.sources[0].position
        drag(qtbot, win.canvas, (src[0], src[1]), (src[0], src[1] + 0.5))
        assert win.doc.scene.sources[0].position[1] > src[1] + 0.3       # it moved
        assert checks == [] and [p.parts for p in win.problems] == [(1, 0)]
        assert win.canvas._problem_items                                # still marked
        x0, y0, x1, y1 = win.doc.scene.parts[1].outer.bounds()
        centre = (0.5 * (x0 + x1), y1 - 0.3)                            # the window, above the guide
        drag(qtbot, win.canvas, centre, (centre[0], centre[1] + 1.5))
        assert checks and win.problems == []
    finally:
        win.worker.shutdown()
