"""Time from an edit to the redrawn rays in the desktop application.

A 1,000-ray fan on samples/light-pipe-90.json, every source ray drawn.  Each edit moves the panel
window by a small step through the document (as a drag step does); the clock stops when the
worker's result has been drawn and the canvas repainted.  Prints the median and spread, and how
the time splits into tracing, preparing the drawing and painting.  Not a test: no assertions.

    QT_QPA_PLATFORM=offscreen python bench/gui_edit_to_redraw.py [--edits 30] [--rays 1000]
"""
from __future__ import annotations

import argparse
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")
os.environ.setdefault("RAYTRACE_GUI_HOME", tempfile.mkdtemp(prefix="raytrace-gui-bench-"))

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edits", type=int, default=30)
    ap.add_argument("--rays", type=int, default=1000)
    ap.add_argument("--drawn", type=int, default=None, help="source rays drawn (default: all of them)")
    ap.add_argument("--scene", default=str(ROOT / "samples" / "light-pipe-90.json"))
    args = ap.parse_args()

    from PySide6.QtCore import QEventLoop, QTimer
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication([])
    from gui import edits
    from gui.main_window import MainWindow

    win = MainWindow(autosave_s=3600)
    win.resize(1400, 900)
    win.show()
    win.open_file(args.scene)
    win.controls.drawn.setValue(args.drawn if args.drawn is not None else args.rays)
    win.doc.apply(edits.set_settings(win.doc.scene, rays=args.rays), "rays")
    win.doc.undo_stack.setClean()

    paint = []
    shown = []

    def on_shown(outcome):
        t = time.perf_counter()
        win.canvas.plot.grab()                    # paints the drawing, rays included
        paint.append(time.perf_counter() - t)
        shown.append((outcome, time.perf_counter()))

    # connected after the window's own slot, which draws the result: runs once it is drawn
    win.worker.finished.connect(on_shown)

    def wait_for(n, timeout_s=30.0):
        # the UI thread waits in Qt's event loop (as in the application), not in Python
        loop = QEventLoop()
        win.worker.finished.connect(loop.quit)
        deadline = time.perf_counter() + timeout_s
        while not (len(shown) >= n and win.worker.is_idle()) and time.perf_counter() < deadline:
            QTimer.singleShot(int(timeout_s * 1000), loop.quit)
            loop.exec()
        win.worker.finished.disconnect(loop.quit)

    wait_for(1)                                     # warm-up: first trace after opening
    part = next(i for i, p in enumerate(win.doc.scene.parts) if p.name == "panel window")
    totals, traces, draws = [], [], []
    for k in range(args.edits):
        before = len(shown)
        scene = win.doc.scene
        step = 0.05 if k % 2 == 0 else -0.05
        new = edits.replace_part(scene, part, edits.move_part(scene.parts[part], step, 0.0))
        t0 = time.perf_counter()
        win.doc.apply(new, "bench move")
        wait_for(before + 1)
        outcome, t1 = shown[-1]
        totals.append(t1 - t0)
        traces.append(outcome.elapsed_s)
    segs = shown[-1][0].result.stats["segments"]
    recorded = win.canvas.drawing.n_segments
    drawn = win.canvas.painted_segments
    t = time.perf_counter()
    win.canvas.set_result(shown[-1][0].result)
    draws.append(time.perf_counter() - t)

    def ms(v):
        return f"{1000 * v:7.1f} ms"

    print(f"scene {Path(args.scene).name}: {args.rays:,} source rays, {segs:,} segments traced, "
          f"{recorded:,} recorded for drawing, {drawn:,} painted (the faintest left out); {args.edits} edits")
    print(f"edit -> redrawn rays  median {ms(statistics.median(totals))}  "
          f"min {ms(min(totals))}  max {ms(max(totals))}")
    print(f"  of which tracing    median {ms(statistics.median(traces))}")
    print(f"  preparing drawing   {ms(draws[0])} (ray grouping and line items, one result)")
    print(f"  painting the canvas median {ms(statistics.median(paint[-args.edits:]))}")
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"machine: {os.cpu_count()} CPUs, load average {load:.2f} while measuring")
    win.worker.shutdown()
    win.autosaver.discard()
    return 0


if __name__ == "__main__":
    sys.exit(main())
