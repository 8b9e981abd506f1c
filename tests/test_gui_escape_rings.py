"""Escape rings on the prism film (samples/microprism-strip.json): at 1024 x 700 its facets are
a few pixels apart, and one ring per facet covered the 0.5 mm teeth.  Same-named faces whose
rings would crowd are drawn as one ring for their summed share; nothing is lost: the rings of a
name add up to the flux ledger's row for it, the merged ring's tooltip (a real hover) says how
many faces it stands for, and zoomed in by keys each facet gets its ring back."""
from __future__ import annotations

import math
import os
from collections import defaultdict
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6.QtCore import Qt  # noqa: E402

import gui_events  # noqa: E402
from gui.escape_rings import CROWD_DIAMETERS  # noqa: E402
from test_gui import home, wait_traced, win  # noqa: E402,F401  (the GUI tests' fixtures)
from test_gui_report import shown  # noqa: E402
from test_gui_rough import _tooltip_at  # noqa: E402

FILM = Path(__file__).resolve().parents[1] / "samples" / "microprism-strip.json"


def _by_label(rings):
    out = defaultdict(float)
    for r in rings:
        out[r.label] += r.share
    return out


def _crowded_pairs(c):
    px = c.pixel_mm()
    rs = c.escape_rings
    return [(a, b) for i, a in enumerate(rs) for b in rs[i + 1:]
            if a.label == b.label and math.dist((a.x, a.y), (b.x, b.y))
            < CROWD_DIAMETERS * max(c.escape_ring_px(a.share), c.escape_ring_px(b.share)) * px]


def test_crowded_escape_rings_merge_and_come_back_when_zoomed_in(qtbot, win):
    shown(qtbot, win, (1024, 700))
    assert win.open_file(str(FILM))
    wait_traced(qtbot, win)
    c = win.canvas
    c.setFocus()
    gui_events.key(Qt.Key_0, Qt.ControlModifier)      # fit the view, as the app opens it
    qtbot.wait(400)
    faces = len(c.drawing.escapes)            # faces flux escapes through, one ring each before
    assert faces >= 20
    merged = [r for r in c.escape_rings if r.faces > 1]
    assert merged and len(c.escape_rings) < faces / 2
    assert not _crowded_pairs(c)
    # every face is still counted once, each name's rings carry the flux of its faces' rings,
    # and so the ledger's row for the name, less faces under the drawing's 0.1 % ring threshold
    assert sum(r.faces for r in c.escape_rings) == faces
    per_face = defaultdict(float)
    for _, _, share, label in c.drawing.escapes:
        per_face[label] += share
    ledger = {label: share for label, _, share, _ in win.ledger.rows}
    cs = win.last_outcome.result.compiled
    for label, share in _by_label(c.escape_rings).items():
        assert share == pytest.approx(per_face[label], abs=1e-12)
        row = [v for k, v in ledger.items() if k.endswith(label)]
        n_named = sum(1 for e in range(len(cs.edges)) if " / ".join(cs.face_labels[cs.face[e]]) == label)
        assert len(row) == 1 and 0 <= row[0] - share < 1e-3 * n_named, (label, row, share, n_named)
    # the merged ring says what it stands for, at the mouse, and keeps off the source's glyph
    # and aim stem (the film's middle facets are right beside it)
    big = max(merged, key=lambda r: r.faces)
    for src in win.doc.scene.sources:
        a, b = src.position, c.aim_handle(src)
        t = max(0.0, min(1.0, ((big.x - a[0]) * (b[0] - a[0]) + (big.y - a[1]) * (b[1] - a[1]))
                         / math.dist(a, b) ** 2))
        near = (a[0] + t * (b[0] - a[0]), a[1] + t * (b[1] - a[1]))
        assert math.dist((big.x, big.y), near) > 0.5 * c.escape_ring_px(big.share) * c.pixel_mm()
    tip = _tooltip_at(qtbot, c, (big.x, big.y))
    assert f"{100 * big.share:.2f} %" in tip and f"{big.faces} faces" in tip, tip
    # zoomed in by keys, the facets spread apart and get their own rings again
    c.setFocus()
    for _ in range(10):
        gui_events.key(Qt.Key_Equal, Qt.ControlModifier)
    qtbot.wait(50)
    assert not _crowded_pairs(c)
    assert max(r.faces for r in c.escape_rings) < big.faces
    x0, x1 = c.view.viewRange()[0]
    shown_faces = [r for r in c.escape_rings if x0 <= r.x <= x1]
    assert shown_faces and all(r.faces == 1 for r in shown_faces)


def test_a_merged_ring_keeps_off_a_source_stem_at_its_centre():
    """Eleven same-named faces 1 px apart, flux spread evenly, a source's aim stem through the
    middle one: the merged ring stands on the nearest face whose ring clears the stem by the
    clearance asked for (not on the stem, where the flux-weighted centre is)."""
    from gui.escape_rings import Ring, merge_crowded
    rings = [Ring(float(k), 0.0, 0.001, "film / facet", 1) for k in range(-5, 6)]
    size = lambda share: 6.0 + 0.0 * share          # noqa: E731  (6 px rings, 1 mm a px)
    stem = ((0.0, -3.0), (0.0, 3.0))
    out = merge_crowded(rings, size, 1.0, ([stem], 1.0))
    assert len(out) == 1 and out[0].faces == 11 and out[0].share == pytest.approx(0.011)
    assert abs(out[0].x) == 4.0         # 3 px of ring radius and 1 px clearance: |x| >= 4
    alone = merge_crowded(rings, size, 1.0)
    assert alone[0].x == 0.0            # with no glyph to avoid, the centre
