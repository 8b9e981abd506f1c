"""`raytrace-gui [SCENE] [--screenshot PNG]`: start the desktop application.

With --screenshot the scene is traced, the window rendered to the PNG, and the program exits
(0 on success, 1 when the scene has problems, 4 when the image cannot be written).  A scene
whose only problems are in its geometry (overlapping parts, ...) is still drawn, problems
marked, and the exit code is 1."""
from __future__ import annotations

import argparse
import os
import sys


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="raytrace-gui", description="Draw parts and watch ray fans and losses live.")
    p.add_argument("scene", nargs="?", metavar="SCENE", help="scene file to open")
    p.add_argument("--screenshot", metavar="PNG", help="trace, render the window to PNG and exit")
    p.add_argument("--size", default="1400x900", metavar="WxH", help="window size for --screenshot")
    p.add_argument("--colour-by-wavelength", action="store_true",
                   help="draw rays in the colour of their wavelength (as View > Colour rays by wavelength)")
    return p


def qt_binding_problem() -> str:
    """PySide6 6.12.0 drops a reference to None/True/False on every call that returns one when
    run on Python 3.11 (found here: a few thousand calls abort the interpreter).  Say so
    instead of crashing minutes into a session."""
    import PySide6
    if sys.version_info < (3, 12) and PySide6.__version__.startswith("6.12."):
        return (f"PySide6 {PySide6.__version__} does not work on Python "
                f"{sys.version_info.major}.{sys.version_info.minor} (it miscounts references and "
                "crashes); install PySide6-Essentials<6.12 or use Python 3.12 or newer")
    return ""


def main(argv: list[str] | None = None) -> int:
    args = build_parser().parse_args(argv)
    problem = qt_binding_problem()
    if problem:
        print(f"error: {problem}", file=sys.stderr)
        return 2
    if args.screenshot and not os.environ.get("QT_QPA_PLATFORM") and not (
            os.environ.get("DISPLAY") or os.environ.get("WAYLAND_DISPLAY")) and sys.platform.startswith("linux"):
        os.environ["QT_QPA_PLATFORM"] = "offscreen"   # no screen needed for a picture
    from PySide6.QtWidgets import QApplication

    app = QApplication.instance() or QApplication(sys.argv[:1])
    app.setApplicationName("raytrace2d")
    app.setOrganizationName("raytrace2d")
    from .main_window import MainWindow

    win = MainWindow()
    if args.screenshot:
        if args.colour_by_wavelength:
            win.wavelength_colour_action.setChecked(True)
            win.canvas.set_colour_by_wavelength(True)
        return screenshot(app, win, args.scene, args.screenshot, args.size)
    if args.colour_by_wavelength:
        win.wavelength_colour_action.setChecked(True)
        win.canvas.set_colour_by_wavelength(True)
    win.show()
    # unsaved work from a crash comes first; a restored scene is not replaced by SCENE
    if win.offer_recovery():
        if args.scene:
            win.status_note(f"Restored unsaved work; {args.scene} was not opened")
    elif args.scene:
        win.open_file(args.scene)
    return app.exec()


def screenshot(app, win, scene_path, png, size) -> int:
    from raytrace.errors import SceneError

    from .export import save_widget_png
    try:
        w, h = (int(v) for v in size.lower().split("x"))
    except ValueError:
        print(f"error: --size: expected WxH such as 1400x900, found {size!r}", file=sys.stderr)
        return 2
    win.controls.live.setChecked(False)      # one trace, on this thread
    win.resize(w, h)
    win.show()
    if scene_path:
        try:
            win.doc.open(scene_path)
        except SceneError as exc:
            for p in exc.problems:
                print(f"error: {p}", file=sys.stderr)
            return 1
    app.processEvents()
    win.canvas.fit()
    out = win.trace_blocking()
    if out.error and not win.problems:       # geometry problems are listed once, below
        print(f"error: not traced: {out.error}", file=sys.stderr)
    if win.problems:
        win.result_tabs.setCurrentWidget(win.problems_panel)
    live = win.controls.live         # show the setting a user would have, without retracing
    live.blockSignals(True)
    live.setChecked(True)
    live.blockSignals(False)
    app.processEvents()
    win.canvas.fit()
    win.canvas.thin_for_view()       # crowded fans as the framed view shows them, without waiting
    app.processEvents()
    try:
        save_widget_png(win, png)
    except OSError as exc:
        print(f"error: could not write {png}: {exc.strerror or exc}", file=sys.stderr)
        return 4
    win.worker.shutdown()
    win.autosaver.discard()
    for p in win.problems:      # opened and drawn with its problems marked, but not traceable
        print(f"error: {scene_path}: {p.text}", file=sys.stderr)
    return 1 if win.problems else 0


if __name__ == "__main__":
    sys.exit(main())
