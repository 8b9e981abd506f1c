"""The legend's items are evenly spaced, on screen and in an exported PNG, at 1024 x 700 and
1200 x 800.  Checked on the pixels: along each legend row the blank runs between one item's
text and the next item's swatch (the runs wider than a word space or the swatch-to-text step)
differ by at most 3 px.  The figure's legend widths were estimated at 6.3 px a character,
which left gaps from 7 to 65 px; they are now measured with the font's metrics."""
from __future__ import annotations

import os

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")

import pytest  # noqa: E402

pytest.importorskip("pytestqt")
from PySide6.QtGui import QColor, QImage  # noqa: E402
from PySide6.QtWidgets import QWidget  # noqa: E402

from gui import figure  # noqa: E402
from test_gui import LIGHT_PIPE, home, wait_traced, win  # noqa: E402,F401  (the GUI tests' fixtures)
from test_gui_report import shown  # noqa: E402

ITEM_GAP_MIN_PX = 9     # wider than any word space (about 3.5 px) or swatch-to-text step (4-6 px)


def _blank_runs(img: QImage, y0: int, y1: int, x0: int, x1: int) -> list[tuple[int, int]]:
    """(start, width) of the column runs with no ink between rows y0..y1, inside the inked span."""
    bg = QColor(img.pixel(x1 - 1, y0))

    def inked(x):
        for y in range(y0, y1):
            c = QColor(img.pixel(x, y))
            if max(abs(c.red() - bg.red()), abs(c.green() - bg.green()), abs(c.blue() - bg.blue())) > 40:
                return True
        return False
    ink = [inked(x) for x in range(x0, x1)]
    first, last = ink.index(True), len(ink) - 1 - ink[::-1].index(True)
    runs, start = [], None
    for i in range(first, last + 2):
        if not ink[i] if i <= last else False:
            start = i if start is None else start
        elif start is not None:
            runs.append((x0 + start, i - start))
            start = None
    return runs


def _item_gaps(img, y0, y1, x0, x1):
    return [w for _, w in _blank_runs(img, y0, y1, x0, x1) if w >= ITEM_GAP_MIN_PX]


@pytest.mark.parametrize("size", [(1024, 700), (1200, 800)], ids=lambda s: f"{s[0]}x{s[1]}")
def test_legend_items_are_evenly_spaced(qtbot, win, tmp_path, size):
    shown(qtbot, win, size)
    assert win.open_file(str(LIGHT_PIPE))
    wait_traced(qtbot, win)
    qtbot.wait(50)
    # on screen: each wrapped row of the legend under the drawing
    legend = win.canvas.legend
    img = legend.grab().toImage()
    boxes = [w.geometry() for w in legend.findChildren(QWidget)
             if w.parentWidget() is legend and w.isVisible() and w is not legend.problem]
    bands = []                      # one (top, bottom) per wrapped row of entries
    for g in sorted(boxes, key=lambda g: g.center().y()):
        if bands and g.center().y() - bands[-1][1] < 0:
            bands[-1] = (min(bands[-1][0], g.top()), max(bands[-1][1], g.bottom()))
        else:
            bands.append((g.top(), g.bottom()))
    assert bands
    checked = 0
    for top, bottom in bands:
        gaps = _item_gaps(img, top, bottom + 1, 0, img.width())
        if len(gaps) > 1:
            checked += 1
            assert max(gaps) - min(gaps) <= 3, (size, "screen", top, gaps)
    assert checked
    # exported: File > Export drawing (PNG) at the dialog's default size, 96 dpi, no title
    png = tmp_path / "fig.png"
    plot = win.canvas.plot.size()
    win.ask_save_path = lambda *a, **k: str(png)
    win.ask_png_options = lambda: {"width": plot.width(), "height": plot.height(), "dpi": 96, "title_block": False}
    assert win.export_png(), win.errors
    img = QImage(str(png))
    n_rows = len(figure._legend_rows(figure._legend_items(win.canvas, thinned=True), img.width() - 20))
    checked = 0
    for r in range(n_rows):         # the last row is centred 11 px above the bottom edge
        cy = img.height() - 11 - figure.LEGEND_ROW_H * (n_rows - 1 - r)
        gaps = _item_gaps(img, cy - 6, cy + 6, 2, img.width() - 2)
        if len(gaps) > 1:
            checked += 1
            assert max(gaps) - min(gaps) <= 3, (size, "figure", r, gaps)
    assert checked
