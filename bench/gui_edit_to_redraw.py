"""Time from an edit to the redrawn rays in the desktop application.

A 1,000-ray fan on samples/light-pipe-90.json, every source ray drawn.  Each edit moves the panel
window by a small step through the document (as a drag step does) and waits until the worker is
idle; the clock stops when the window's own paint of the canvas that follows a shown result has
finished (the application paints as it does for a user: nothing is grabbed or painted twice):
the first redraw (a coarse fan when the worker shows one first) and the final one (the full
trace).  Prints the medians and spread, how the time splits into tracing (and what a coarse fan
costs), preparing the drawing (timed again on the last edit's full result) and painting, and the CPU time an edit costs the UI thread and the whole process (the
machine is shared: CPU time is what other load sways least).

Then a drag: the same moves arrive every 16 ms (a 60 Hz mouse) for --drag-s seconds, as the
canvas sends them, and the redraws shown meanwhile are counted (redraws per second, how many
were coarse fans).  Not a test: no assertions.

    QT_QPA_PLATFORM=offscreen python bench/gui_edit_to_redraw.py [--edits 30] [--rays 1000] [--drag-s 3]
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


def drag_rate(win, part, shown, seconds):
    """Moves every 16 ms for `seconds`, handed to the document from Qt timers as a drag's mouse
    events are; returns how many redraws were shown during the drag."""
    from PySide6.QtCore import QEventLoop, QTimer
    from gui import edits
    from gui.document import new_drag_token
    before = len(shown)
    token = new_drag_token()
    base = win.doc.scene
    t_start = time.perf_counter()
    loop = QEventLoop()
    state = {"k": 0}

    def move():
        if time.perf_counter() - t_start >= seconds:
            timer.stop()
            loop.quit()
            return
        state["k"] += 1
        dx = 0.02 * (state["k"] % 50)
        new = edits.replace_part(base, part, edits.move_part(base.parts[part], dx, 0.0))
        win.doc.apply(new, "bench drag", token)

    timer = QTimer()
    timer.setInterval(16)
    timer.timeout.connect(move)
    timer.start()
    loop.exec()
    during = [(o, t) for o, t in shown[before:] if t - t_start <= seconds]
    times = [t_start] + [t for _, t in during] + [t_start + seconds]
    return {"redraws": len(during), "coarse": sum(o.coarse for o, _ in during),
            "longest_gap": max(b - a for a, b in zip(times, times[1:]))}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--edits", type=int, default=30)
    ap.add_argument("--rays", type=int, default=1000)
    ap.add_argument("--drawn", type=int, default=None, help="source rays drawn (default: all of them)")
    ap.add_argument("--scene", default=str(ROOT / "samples" / "light-pipe-90.json"))
    ap.add_argument("--drag-s", type=float, default=3.0, help="length of the simulated drag")
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
    waiting = []        # outcomes drawn by the window, not yet painted

    def on_shown(outcome):
        waiting.append(outcome)

    # connected after the window's own slot, which draws the result: runs once it is drawn
    win.worker.finished.connect(on_shown)
    plot = win.canvas.plot
    window_paint = plot.paintEvent

    def timed_paint(ev):
        # the window's paint of the drawing (rays, parts, marks); a result counts as shown
        # when the first paint after it ends
        t = time.perf_counter()
        window_paint(ev)
        end = time.perf_counter()
        if waiting:
            paint.append(end - t)
            shown.extend((o, end) for o in waiting)
            waiting.clear()
    plot.paintEvent = timed_paint

    def wait_for(n, timeout_s=30.0):
        # the UI thread waits in Qt's event loop (as in the application), not in Python
        loop = QEventLoop()
        win.worker.finished.connect(loop.quit)
        t = QTimer()
        t.timeout.connect(loop.quit)       # look again after the paint that follows a result
        t.start(50)
        deadline = time.perf_counter() + timeout_s
        while not (len(shown) >= n and not waiting and win.worker.is_idle()) and time.perf_counter() < deadline:
            loop.exec()
        win.worker.finished.disconnect(loop.quit)
        t.stop()

    wait_for(1)                                     # warm-up: first trace after opening
    part = next(i for i, p in enumerate(win.doc.scene.parts) if p.name == "panel window")
    totals, firsts, traces, draws, coarse = [], [], [], [], []
    ui_cpu, all_cpu = [], []      # CPU seconds per edit: the UI thread's, the whole process's
    for k in range(args.edits):
        before = len(shown)
        scene = win.doc.scene
        step = 0.05 if k % 2 == 0 else -0.05
        new = edits.replace_part(scene, part, edits.move_part(scene.parts[part], step, 0.0))
        t0, u0, p0 = time.perf_counter(), time.thread_time(), time.process_time()
        win.doc.apply(new, "bench move")
        wait_for(before + 1)
        ui_cpu.append(time.thread_time() - u0)
        all_cpu.append(time.process_time() - p0)
        outcome, t1 = shown[-1]
        firsts.append(shown[before][1] - t0)
        totals.append(t1 - t0)
        traces.append(outcome.elapsed_s)
        coarse += [o for o, _ in shown[before:] if o.coarse]
    # the split is measured on the last edit's full result, before the drag
    last = shown[-1][0]
    segs = last.result.stats["segments"]
    recorded = win.canvas.drawing.n_segments
    drawn = win.canvas.painted_segments
    t = time.perf_counter()
    prepare = getattr(win.worker, "prepare", None)    # made on the trace thread, if the app does
    prepared = prepare(last.result, last.request.scene) if prepare else None
    draws.append(time.perf_counter() - t)
    t = time.perf_counter()
    win.canvas.set_result(last.result, prepared) if prepared is not None else win.canvas.set_result(last.result)
    draws.append(time.perf_counter() - t)
    drag = drag_rate(win, part, shown, args.drag_s)

    def ms(v):
        return f"{1000 * v:7.1f} ms"

    print(f"scene {Path(args.scene).name}: {args.rays:,} source rays, {segs:,} segments traced, "
          f"{recorded:,} recorded for drawing, {drawn:,} painted (the faintest left out); {args.edits} edits")
    print(f"edit -> first redraw  median {ms(statistics.median(firsts))}  "
          f"min {ms(min(firsts))}  max {ms(max(firsts))}  ({win.worker.coarse_shown} coarse fans shown in all)")
    print(f"edit -> full redraw   median {ms(statistics.median(totals))}  "
          f"min {ms(min(totals))}  max {ms(max(totals))}")
    print(f"  of which tracing    median {ms(statistics.median(traces))}")
    if coarse:
        print(f"  a coarse fan: median {statistics.median(o.result.stats['source_rays'] for o in coarse):.0f} "
              f"rays, {statistics.median(o.result.stats['segments'] for o in coarse):,.0f} segments, "
              f"traced in {ms(statistics.median(o.elapsed_s for o in coarse))} (CPU "
              f"{ms(statistics.median(o.cpu_s for o in coarse))}), its drawing CPU "
              f"{ms(statistics.median(getattr(o, 'drawing_cpu_s', float('nan')) for o in coarse))}")
    print(f"  preparing drawing   {ms(draws[0])} (ray grouping, on the "
          f"{'trace' if prepare else 'UI'} thread) + {ms(draws[1])} (line items and marks, UI thread)")
    print(f"  painting the canvas median {ms(statistics.median(paint[-args.edits:]))} (the window's paint after a result)")
    print(f"CPU time per edit (less swayed by other load than the wall times above): UI thread "
          f"{ms(statistics.median(ui_cpu))}, whole process {ms(statistics.median(all_cpu))} (median)")
    print(f"drag, a move every 16 ms for {args.drag_s:g} s: {drag['redraws']} redraws = "
          f"{drag['redraws'] / args.drag_s:.1f} per second ({drag['coarse']} coarse), "
          f"longest gap between redraws {ms(drag['longest_gap'])}")
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    print(f"machine: {os.cpu_count()} CPUs, load average {load:.2f} while measuring")
    win.worker.shutdown()
    win.autosaver.discard()
    return 0


if __name__ == "__main__":
    sys.exit(main())
