"""Rough edges of the editor met by a user: hovering a hole's faces, the Edit panel's vertex table
in a 1024 x 700 window, and crowded ray fans looked at closer.  Windows are sized for real, mouse
events go through the drawing's viewport in a real order (see gui_events)."""
from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")

from PySide6.QtWidgets import QToolTip  # noqa: E402

import gui_events  # noqa: E402
from test_gui import home, wait_traced, win  # noqa: E402,F401  (the GUI tests' fixtures)
from test_gui_report import shown  # noqa: E402


# ---------------------------------------------------------------------------- 1. hole faces on hover
def _plate_with_holes():
    """A 30 x 12 mm plate with a square window (faces named, one a mirror) and a round bore."""
    from raytrace.geometry import Edge, Loop, Part, Treatment
    from raytrace.scene import Scene, Source, TraceSettings
    outer = Loop.polygon([(0, 0), (30, 0), (30, 12), (0, 12)], ["base", "end", "top", "entry"])
    square = Loop.polygon([(6, 4), (6, 8), (10, 8), (10, 4)], ["pocket left", "pocket top", None, "pocket base"],
                          [Treatment(), Treatment("mirror", 0.9), Treatment(), Treatment()])
    # a round bore of radius 2.5 about (20, 6): two half circles, clockwise
    bore = Loop((Edge((22.5, 6), (17.5, 6), (20, 6), False), Edge((17.5, 6), (22.5, 6), (20, 6), False)))
    plate = Part("plate", "PMMA", outer, (square, bore))
    src = Source("lamp", "beam", position=(-5.0, 6.0), direction_deg=0.0, width=10.0)
    return Scene(parts=[plate], sources=[src], name="plate with holes", settings=TraceSettings(rays=50))


def _tooltip_at(qtbot, canvas, p):
    """Hover p the way the mouse gets there (from beside it), return the tooltip shown."""
    gui_events.hover(qtbot, canvas, gui_events.pixel_offset(canvas, p, 40, 40))
    gui_events.hover(qtbot, canvas, p)
    qtbot.wait(30)
    return QToolTip.text() if QToolTip.isVisible() else ""


def test_hovering_a_hole_face_shows_its_tooltip_like_an_outer_face(qtbot, win, tmp_path):
    from raytrace.compile import compile_scene
    from raytrace.scene_io import save_scene
    path = tmp_path / "plate.json"
    scene = _plate_with_holes()
    save_scene(scene, path)
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(path))
    wait_traced(qtbot, win)
    c = win.canvas
    c.fit()
    qtbot.wait(30)
    plate = win.doc.scene.parts[0]
    # the names the engine gives the faces (the flux ledger's labels): unnamed ones are numbered
    labels = {lbl for lbl in compile_scene(win.doc.scene).face_labels}
    assert ("plate", "hole 1 edge 3") in labels and ("plate", "hole 2 edge 1") in labels

    outer_tip = _tooltip_at(qtbot, c, plate.outer.edges[0].point_at(0.3))
    assert outer_tip == "plate / base (bare)"
    assert _tooltip_at(qtbot, c, plate.holes[0].edges[1].point_at(0.3)) == "plate / pocket top (mirror R=0.9)"
    assert _tooltip_at(qtbot, c, plate.holes[0].edges[2].point_at(0.3)) == "plate / hole 1 edge 3 (bare)"
    # the bore's half circles curve into the material round the hole: negative by the vertex
    # table's rule (> 0 bulges out of the material, < 0 into it), radius as built
    bore_tip = _tooltip_at(qtbot, c, plate.holes[1].edges[0].point_at(0.3))
    assert bore_tip == "plate / hole 2 edge 1 (bare, arc R -2.5 mm)"
    # inside the hole, away from its edge, nothing is named (Qt hides a tooltip after a moment)
    gui_events.hover(qtbot, c, (20.0, 6.0))
    qtbot.waitUntil(lambda: not QToolTip.isVisible(), timeout=2000)
