"""The main window: drawing in the middle, editing and results beside it, menus around it.

User questions (file names, unsaved changes, errors) go through small `ask_*` / `show_*`
methods so tests can answer them without opening modal dialogs.
"""
from __future__ import annotations

import html
import time
from pathlib import Path

from PySide6.QtCore import Qt, QTimer
from PySide6.QtGui import QAction, QActionGroup, QKeySequence
from PySide6.QtWidgets import (QDockWidget, QDoubleSpinBox, QFileDialog, QLabel, QMainWindow,
                               QMessageBox, QScrollArea, QTabWidget, QToolBar)

from raytrace.atomic import clashing_outputs
from raytrace.errors import SceneError
from raytrace.scene import Scene
from raytrace.scene_io import scene_from_text

from . import edits, gc_policy, help as help_text
from .autosave import Autosaver, find_recoveries
from .canvas import Canvas
from .document import Document
from .edge_fade import add_edge_fades
from .export import save_figure_png, save_figure_svg, save_ray_table_csv
from .panels.controls import TraceControls
from .panels.ledger import LedgerPanel
from .panels.plots import ProfilePanel
from .panels.problems import ProblemsPanel
from .problems import scene_problems
from .panels.properties import PropertiesPanel
from .recent import add_recent, recent_files
from .tools import ARC, DETECTOR_TOOL, HOLE, MEASURE, POLYGON, RECTANGLE, ROTATE, SELECT, SOURCE_TOOL, ZOOM_BOX
from .tracing import TraceCancelled, run_trace
from .worker import TraceOutcome, TraceRequest, TraceWorker

SCENE_FILTER = "Scene files (*.json);;All files (*)"
# after an edit the drawing is painted when the rays of the new state are drawn, or after this
# long at most (a coarse fan of a slow scene takes a few tens of ms; see Canvas.hold_paint)
PAINT_HOLD_S = 0.06
# the full trace after a coarse fan starts once the fan is painted, or after this long at most
REFINE_WAIT_S = 0.1


def distinct_keys(*keys) -> list[QKeySequence]:
    """Shortcuts from standard keys and key strings, each once: a key bound twice to one
    action is ambiguous to Qt and does nothing."""
    out = []
    for k in keys:
        seqs = QKeySequence.keyBindings(k) if isinstance(k, QKeySequence.StandardKey) else [QKeySequence(k)]
        out += [q for q in seqs if not q.isEmpty() and q not in out]
    return out


def redo_keys() -> list[QKeySequence]:
    """The platform's redo keys, with Ctrl+Shift+Z and Ctrl+Y added where the platform lacks them."""
    return distinct_keys(QKeySequence.StandardKey.Redo, "Ctrl+Shift+Z", "Ctrl+Y")


def _scrolled(widget):
    """Long forms scroll instead of forcing the window taller than the screen."""
    area = QScrollArea()
    area.setWidget(widget)
    area.setWidgetResizable(True)
    area.setFrameShape(QScrollArea.NoFrame)
    return add_edge_fades(area)


# The Results dock's least height: the flux ledger of a sample scene (about 15 rows) without
# scrolling; what is left of a 700 px window goes to the Edit dock and its vertex table.
RESULTS_MIN_PX = 360
# In a taller window the Results dock takes this share: the ledger and profiles keep their room
# and the Edit dock shows a part's fields and its vertex table together.
RESULTS_SHARE = 0.42


class MainWindow(QMainWindow):
    def __init__(self, autosave_s: float = 60.0):
        super().__init__()
        gc_policy.collect_on_ui_thread()
        self.doc = Document(self)
        self.worker = TraceWorker(self)
        self.autosaver = Autosaver(self.doc, autosave_s, self)
        self.last_error = ""
        self.last_outcome: TraceOutcome | None = None
        self.traces_shown = 0
        self.redraw_times: list[float] = []   # seconds from a request to its drawn rays

        self.canvas = Canvas(self.doc)
        self.setCentralWidget(self.canvas)
        self.properties = PropertiesPanel(self.doc, self.status_note, self.ask_material)
        self.controls = TraceControls(self.doc)
        self.ledger = LedgerPanel()
        self.profiles = ProfilePanel()
        self.problems_panel = ProblemsPanel()
        self.problems = []
        edit_tabs = QTabWidget()
        edit_tabs.addTab(_scrolled(self.properties), "Selection")
        edit_tabs.addTab(_scrolled(self.controls), "Trace")
        result_tabs = QTabWidget()
        result_tabs.addTab(self.ledger, "Flux ledger")
        result_tabs.addTab(self.profiles, "Profiles")      # the plots shrink to fit; no scrolling
        result_tabs.addTab(self.problems_panel, "Problems")
        self.edit_tabs, self.result_tabs = edit_tabs, result_tabs
        docks = []
        for title, w, name in (("Edit", edit_tabs, "edit"), ("Results", result_tabs, "results")):
            dock = QDockWidget(title, self)
            dock.setObjectName(name)
            dock.setWidget(w)
            dock.setFeatures(QDockWidget.DockWidgetMovable | QDockWidget.DockWidgetFloatable)
            self.addDockWidget(Qt.RightDockWidgetArea, dock)
            docks.append(dock)

        self.cursor_label = QLabel("x -, y - mm")
        self.cursor_label.setMinimumWidth(190)
        self.trace_label = QLabel("")
        self.statusBar().addPermanentWidget(self.trace_label)
        self.statusBar().addPermanentWidget(self.cursor_label)

        self._build_actions()
        self.doc.changed.connect(self._scene_changed)
        self.doc.file_changed.connect(self._update_title)
        self.canvas.selection_changed.connect(self._selection_changed)
        self.canvas.cursor_moved.connect(lambda x, y: self.cursor_label.setText(f"x {x:.3f}, y {y:.3f} mm"))
        self.canvas.status_message.connect(self.status_note)
        self.problems_panel.part_chosen.connect(lambda i: self.canvas.select((edits.PART, i)))
        self.worker.finished.connect(self._show_outcome)
        self.worker.prepare = self._prepare_drawing
        self.worker.refine_wait_s = REFINE_WAIT_S
        self._coarse_on_canvas = -1       # request id of a coarse fan drawn but not yet painted
        self.canvas.plot.painted.connect(self._canvas_painted)
        # a bound slot, so the call is queued to this thread (busy is emitted by the trace thread)
        self.worker.busy.connect(self._trace_busy)
        self.worker.progress.connect(self._trace_progress)
        self.controls.options_changed.connect(self.request_trace)
        self.controls.trace_now.connect(lambda: self.request_trace(force=True))
        self.controls.stop.connect(self.stop_trace)
        self.status_text = ""
        self._docks = docks
        self._arranged = False
        self.resize(1400, 900)
        self._scene_changed()
        self._update_title()

    def arrange_docks(self) -> None:
        """Share the window between drawing and panels by its size: at 1024 x 700 the drawing
        keeps most of the width and the flux ledger its rows, the rest of the height going to the
        Edit dock's vertex table; at 1400 x 900 the panels grow."""
        w, h = self.width(), self.height()
        self.resizeDocks(self._docks[:1], [int(min(470, max(330, 0.34 * w)))], Qt.Horizontal)
        avail = h - self.menuBar().sizeHint().height() - self.statusBar().sizeHint().height()
        results = int(min(max(RESULTS_SHARE * avail, RESULTS_MIN_PX), avail - 200))
        self.resizeDocks(self._docks, [avail - results, results], Qt.Vertical)

    def showEvent(self, ev):
        super().showEvent(ev)
        if not self._arranged:       # once: later the user's own dock sizes are kept
            self._arranged = True
            self.arrange_docks()

    # ------------------------------------------------------------------ actions and menus
    def _act(self, menu, text, slot, shortcut=None, tip="", checkable=False):
        a = QAction(text, self)
        if shortcut:
            a.setShortcut(QKeySequence(shortcut))
        if tip:
            a.setStatusTip(tip)
            a.setToolTip(tip)
        a.setCheckable(checkable)
        a.triggered.connect(slot)
        menu.addAction(a)
        return a

    def _build_actions(self):
        mb = self.menuBar()
        f = mb.addMenu("&File")
        self._act(f, "&New", self.new_scene, QKeySequence.New, "Start an empty scene")
        self._act(f, "&Open...", lambda: self.open_file(), QKeySequence.Open, "Open a scene file")
        self.recent_menu = f.addMenu("Open &recent")
        self.recent_menu.aboutToShow.connect(self._fill_recent)
        self._act(f, "&Save", lambda: self.save(), QKeySequence.Save, "Save the scene")
        self._act(f, "Save &as...", lambda: self.save_as(), QKeySequence.SaveAs, "Save under another name")
        self._act(f, "Import &DXF...", lambda: self.import_dxf(), None,
                  "Add the closed contours of a DXF drawing as parts, a material per layer")
        f.addSeparator()
        self._act(f, "Export ray table (CSV)...", lambda: self.export_csv(), None,
                  "The drawn rays' segments, one row each")
        self._act(f, "Export drawing (PNG)...", lambda: self.export_png(), None, "The drawing with its legend")
        self._act(f, "Export drawing (SVG)...", lambda: self.export_svg(), None, "The drawing as vector graphics")
        self.export_dxf_action = self._act(
            f, "Export cross-section as D&XF...", lambda: self.export_dxf(), None,
            "The parts' outlines and holes as DXF lines and arcs in mm, a layer per material")
        f.addSeparator()
        quit_action = self._act(f, "&Quit", self.close, None, "Quit (asks first when there are unsaved changes)")
        quit_action.setShortcuts(distinct_keys(QKeySequence.Quit, "Ctrl+Q"))   # Quit is empty on some platforms

        e = mb.addMenu("&Edit")
        self.undo_action = self.doc.undo_stack.createUndoAction(self, "&Undo")
        self.undo_action.setShortcut(QKeySequence.Undo)
        self.redo_action = self.doc.undo_stack.createRedoAction(self, "&Redo")
        self.redo_action.setShortcuts(redo_keys())
        e.addAction(self.undo_action)
        e.addAction(self.redo_action)
        e.addSeparator()
        self._act(e, "&Delete selected", self.delete_selected, QKeySequence.Delete,
                  "Delete the selected part, source or detector")
        self._act(e, "D&uplicate selected", self.duplicate_selected, "Ctrl+D",
                  "A copy of the selected part, source or detector, a little to the side")
        self._act(e, "Add part from a &shape...", lambda: self.add_shape(), "Ctrl+Shift+A",
                  "Prism, roof prism, light-pipe path, microprism strip, window, lens...")
        self._act(e, "Define a &material...", lambda: self.properties.define_material(), None,
                  "A material of your own: constant index or nd/Vd glass")

        v = mb.addMenu("&View")
        self._act(v, "&Fit parts and sources", lambda: self.canvas.fit(), "Ctrl+0",
                  "Frame the parts and sources (detectors near them cross the frame)")
        self._act(v, "Fit &everything", lambda: self.canvas.fit(everything=True), "Ctrl+Shift+0",
                  "Frame the parts, sources and every detector whole")
        self.grid_action = self._act(v, "&Grid", self.canvas.show_grid, "G", "Show the grid", True)
        self.grid_action.setChecked(True)
        self.wavelength_colour_action = self._act(
            v, "Colour rays by &wavelength", self.canvas.set_colour_by_wavelength, None,
            "Draw each ray in the colour of its wavelength (still fading with flux); for this session only",
            True)
        self.snap_action = self._act(v, "&Snap to grid", self._set_snap, "Shift+G",
                                     "Vertices, parts and ends land on the grid", True)

        t = mb.addMenu("&Tools")
        tb = QToolBar("Tools")
        tb.setObjectName("tools")
        self.addToolBar(Qt.LeftToolBarArea, tb)
        group = QActionGroup(self)
        self.tool_actions = {}
        for name, text, key, tip in (
                (SELECT, "Select", "V", "Select and drag parts, vertices, sources, aim handles, detectors"),
                (ROTATE, "Rotate", "R", "Drag to rotate a part, source or detector"),
                (POLYGON, "Polygon", "P", "Add a part by clicking its vertices"),
                (RECTANGLE, "Rectangle", "B", "Add a rectangular part by dragging"),
                (SOURCE_TOOL, "Source", "L", "Place a light source; drag to aim it"),
                (DETECTOR_TOOL, "Detector", "D", "Drag to place a detector")):
            self._add_tool(t, tb, group, name, text, key, tip)
        self._add_drawing_aids(v, t, tb, group)
        self.tool_actions[SELECT].setChecked(True)
        tb.addSeparator()
        shape = QAction("Shape...", self)
        shape.setToolTip("Add a part from a shape builder")
        shape.triggered.connect(lambda: self.add_shape())
        tb.addAction(shape)
        tb.addSeparator()
        tb.addWidget(QLabel(" grid"))
        self.grid_step = QDoubleSpinBox()
        self.grid_step.setRange(0.001, 1000)
        self.grid_step.setDecimals(3)
        self.grid_step.setValue(1.0)
        self.grid_step.setSuffix(" mm")
        self.grid_step.setToolTip("Snapping step")
        self.grid_step.valueChanged.connect(lambda v: setattr(self.canvas, "grid_step", v))
        tb.addWidget(self.grid_step)

        r = mb.addMenu("T&race")
        self._act(r, "Trace &now", lambda: self.request_trace(force=True), "F5")
        self._act(r, "&Stop trace", self.stop_trace, "Shift+F5")
        self._act(r, "S&weep...", self.open_sweep, "F6",
                  "Vary one number and plot the efficiencies; optimize or tolerance numbers")

        h = mb.addMenu("&Help")
        self._act(h, "&Safety cautions", lambda: self.show_info("Safety cautions", help_text.SAFETY))
        self._act(h, "&Keys and mouse", lambda: self.show_info("Keys and mouse", help_text.SHORTCUTS), QKeySequence.HelpContents)
        self._act(h, "&About", lambda: self.show_info("About", help_text.ABOUT))

    def _add_tool(self, menu, toolbar, group, name, text, key, tip) -> None:
        """A checkable action choosing one tool, in the Tools menu and the tool bar."""
        a = self._act(menu, text, lambda _c=False, n=name: self.set_tool(n), key, tip, True)
        group.addAction(a)
        toolbar.addAction(a)
        self.tool_actions[name] = a

    def _add_drawing_aids(self, view_menu, tools_menu, toolbar, group) -> None:
        """Arc, hole, measure and zoom-box tools; zoom keys; snapping to the parts' geometry."""
        tools_menu.addSeparator()
        toolbar.addSeparator()
        for name, text, key, tip in (
                (ARC, "Arc", "A", "Bend an edge into an arc: drag it through a point, or click it and type a radius"),
                (HOLE, "Hole", "H", "Cut a hole in a part: click its vertices, or drag centre to rim for a round one"),
                (MEASURE, "Measure", "M", "Distance between two points, angle at a corner"),
                (ZOOM_BOX, "Zoom box", "Z", "Drag a box to zoom into it")):
            self._add_tool(tools_menu, toolbar, group, name, text, key, tip)
        self.canvas.tool_changed.connect(lambda n: self.tool_actions[n].setChecked(True))
        view_menu.addSeparator()
        zoom_in = self._act(view_menu, "Zoom &in", lambda: self.canvas.zoom(1.25), None, "Zoom in (Ctrl+= or Ctrl++)")
        zoom_in.setShortcuts(distinct_keys("Ctrl+=", QKeySequence.ZoomIn, "Ctrl++"))
        zoom_out = self._act(view_menu, "Zoom &out", lambda: self.canvas.zoom(1 / 1.25), None, "Zoom out (Ctrl+-)")
        zoom_out.setShortcuts(distinct_keys(QKeySequence.ZoomOut, "Ctrl+-"))
        self._act(view_menu, "Zoom to &box", lambda: self.set_tool(ZOOM_BOX), None, "Drag a box to zoom into it (Z)")
        self.geometry_snap_action = self._act(
            view_menu, "Snap to &vertices and edges", self._set_geometry_snap, "Shift+V",
            "Drawn points and dragged vertices land on vertices, edge midpoints, arc centres and edges "
            "of the parts (before the grid)", True)

    def _set_geometry_snap(self, on: bool) -> None:
        self.canvas.object_snapping = on

    def set_tool(self, name: str) -> None:
        self.canvas.set_tool(name)
        self.tool_actions[name].setChecked(True)

    def _set_snap(self, on: bool) -> None:
        self.canvas.snapping = on
        self.canvas.grid_step = self.grid_step.value()

    def _fill_recent(self):
        self.recent_menu.clear()
        items = recent_files()
        if not items:
            self.recent_menu.addAction("(none)").setEnabled(False)
        for p in items:
            a = self.recent_menu.addAction(p)
            a.triggered.connect(lambda _c=False, path=p: self.open_file(path))

    # ------------------------------------------------------------------ hooks (tests replace these)
    def ask_open_path(self) -> str:
        path, _ = QFileDialog.getOpenFileName(self, "Open a scene", str(self._dir()), SCENE_FILTER)
        return path

    def ask_save_path(self, title="Save the scene", filt=SCENE_FILTER, suffix=".json") -> str:
        start = str(self.doc.path) if self.doc.path else str(self._dir() / f"untitled{suffix}")
        if suffix != ".json":
            start = str(Path(start).with_suffix(suffix))
        path, _ = QFileDialog.getSaveFileName(self, title, start, filt)
        return path

    def ask_unsaved(self) -> str:
        """"save", "discard" or "cancel"."""
        box = QMessageBox(QMessageBox.Warning, "Unsaved changes",
                          f"{self.doc.title} has changes that are not saved.", parent=self)
        box.setStandardButtons(QMessageBox.Save | QMessageBox.Discard | QMessageBox.Cancel)
        return {QMessageBox.Save: "save", QMessageBox.Discard: "discard"}.get(box.exec(), "cancel")

    def ask_recovery(self, description: str) -> str:
        """"restore", "discard" or "keep"."""
        box = QMessageBox(QMessageBox.Question, "Recover unsaved work",
                          f"Work on {description} was not saved when the program last ended.\n"
                          "Restore it?", parent=self)
        restore = box.addButton("Restore", QMessageBox.AcceptRole)
        discard = box.addButton("Discard", QMessageBox.DestructiveRole)
        box.addButton("Not now", QMessageBox.RejectRole)
        box.exec()
        clicked = box.clickedButton()
        return "restore" if clicked is restore else "discard" if clicked is discard else "keep"

    def ask_material(self, taken):
        from .dialogs.material import MaterialDialog
        dlg = MaterialDialog(taken, self)
        return dlg.material() if dlg.exec() else None

    def show_error(self, title: str, text: str) -> None:
        self.last_error = text
        self.status_note(text, 15000)
        box = QMessageBox(QMessageBox.Warning, title, text, parent=self)
        box.setTextFormat(Qt.PlainText)       # "<part 'a' ...>" in a problem is text, not a tag
        box.exec()

    def show_info(self, title: str, html: str) -> None:
        QMessageBox.information(self, title, html)

    def status_note(self, text: str, ms: int = 8000) -> None:
        """A message left of the permanent labels, cut with "..." where it would run into them
        (the whole text is in the status bar's tooltip)."""
        bar = self.statusBar()
        labels = [w for w in (self.trace_label, self.cursor_label) if w.isVisible()]
        # the labels' place once laid out, or what their current texts will need (just changed)
        room = bar.width() - sum(max(w.sizeHint().width(), w.minimumWidth()) + 12 for w in labels) - 24
        if labels and all(w.geometry().left() > 0 for w in labels):
            room = min(room, min(w.geometry().left() for w in labels) - 24)
        room = max(80, room)
        self.status_text = text
        bar.setToolTip(text)
        # a window not on screen has no width to fit: keep the whole text
        shown = bar.isVisible() and bar.width() > 0
        bar.showMessage(bar.fontMetrics().elidedText(text, Qt.ElideRight, room) if shown else text, ms)

    def _dir(self) -> Path:
        return self.doc.path.parent if self.doc.path else Path.cwd()

    # ------------------------------------------------------------------ files
    def maybe_discard(self) -> bool:
        """True when the current work may be replaced (saved, discarded, or unchanged)."""
        if not self.doc.modified:
            return True
        answer = self.ask_unsaved()
        if answer == "save":
            return self.save()
        return answer == "discard"

    def new_scene(self) -> None:
        if self.maybe_discard():
            self.autosaver.discard()
            self.doc.replace(Scene(name="untitled"), None)
            self.canvas.fit()

    def open_file(self, path: str | None = None) -> bool:
        if not self.maybe_discard():
            return False
        path = path or self.ask_open_path()
        if not path:
            return False
        try:
            self.doc.open(path)
        except SceneError as exc:
            lines = [str(p) for p in exc.problems]
            text = f"{path} has {len(lines)} problem(s):\n" + "\n".join(lines[:20])
            if any("DXF drawing, not a scene file" in line for line in lines):    # ASCII or binary
                text += "\n\nIn this app, File > Import DXF... adds the drawing's contours to the scene as parts."
            self.show_error("Cannot open the scene", text)
            return False
        except OSError as exc:
            self.show_error("Cannot open the scene", f"Could not read {path}: {exc.strerror or exc}")
            return False
        self.autosaver.discard()
        add_recent(path)
        self.canvas.select(None)
        self.canvas.fit()
        if self.problems:
            self.result_tabs.setCurrentWidget(self.problems_panel)
            self.status_note(f"Opened {path}: {len(self.problems)} problem(s) to fix before it can be "
                             "traced (see Problems)")
        elif self.canvas.fit_left_out:      # the fit's own note would be replaced by "Opened"
            self.status_note(f"Opened {Path(path).name}; outside the view: detector "
                             f"{', '.join(self.canvas.fit_left_out)} (Ctrl+Shift+0 shows it)")
        else:
            self.status_note(f"Opened {path}")
        return True

    def save(self) -> bool:
        if self.doc.path is None:
            return self.save_as()
        return self._save_to(self.doc.path)

    def save_as(self, path: str | None = None) -> bool:
        path = path or self.ask_save_path()
        if not path:
            return False
        return self._save_to(Path(path))

    def _save_to(self, path: Path) -> bool:
        try:
            self.doc.save(path)
        except (OSError, SceneError) as exc:
            # a SceneError: a value no scene file can hold (NaN from code): say which
            reason = "; ".join(str(p) for p in exc.problems) if isinstance(exc, SceneError) \
                else exc.strerror or str(exc)
            self.show_error("Not saved", f"Could not save {path}: {reason}. "
                                         "The scene is still open with its changes unsaved.")
            self._update_title()
            return False
        add_recent(path)
        self.autosaver.discard()
        self.status_note(f"Saved {path}" + (f" with {len(self.problems)} problem(s) still to fix (see Problems)"
                                            if self.problems else ""))
        return True

    def _export(self, what: str, suffix: str, filt: str, write) -> bool:
        path = self.ask_save_path(f"Export {what}", filt, suffix)
        if not path:
            return False
        if self.doc.path is not None and clashing_outputs({"scene": str(self.doc.path)}, {"the export": path}):
            self.show_error("Not exported", f"{path} is the open scene's own file; exporting there would "
                                            "destroy it. Choose another name.")
            return False
        try:
            n = write(path)
        except (OSError, ValueError) as exc:
            self.show_error("Not exported", f"Could not write {path}: {getattr(exc, 'strerror', None) or exc}")
            return False
        self.status_note(f"Exported {what} to {path}" + (f" ({n} rows)" if isinstance(n, int) else ""))
        return True

    def export_csv(self) -> bool:
        if self.canvas.result is None:
            self.show_error("Not exported", "There is no trace to export yet.")
            return False
        return self._export("the ray table", ".csv", "CSV (*.csv)",
                            lambda p: save_ray_table_csv(self.canvas.result, p))

    def _figure_titles(self, with_title: bool = True) -> dict:
        if not with_title:
            return {}
        from .figure import figure_subtitle
        return {"title": self.doc.scene.name or self.doc.title, "subtitle": figure_subtitle(self.canvas.result)}

    def ask_png_options(self) -> dict | None:
        """Size, resolution and title block of a PNG export, or None when cancelled."""
        from .dialogs.png_export import PngExportDialog
        size = self.canvas.plot.size()
        dlg = PngExportDialog(size.width(), size.height(), self)
        return dlg.options() if dlg.exec() else None

    def export_png(self) -> bool:
        opts = self.ask_png_options()
        if opts is None:
            return False
        return self._export("the drawing", ".png", "PNG image (*.png)", lambda p: save_figure_png(
            self.canvas, p, opts["width"], opts["height"], opts["dpi"], **self._figure_titles(opts["title_block"])))

    def export_svg(self) -> bool:
        return self._export("the drawing", ".svg", "SVG image (*.svg)",
                            lambda p: save_figure_svg(self.canvas, p, **self._figure_titles()))

    def export_dxf(self) -> bool:
        """File > Export cross-section as DXF: the parts as they are edited, for the CAD model."""
        from raytrace.dxf_io import export_dxf
        if not self.doc.scene.parts:
            self.show_error("Not exported", "The scene has no parts to export.")
            return False
        return self._export("the cross-section", ".dxf", "DXF drawing (*.dxf)",
                            lambda p: (export_dxf(self.doc.scene, p), None)[1])

    def offer_recovery(self) -> bool:
        """After a crash: offer the newest recovery copy; True when one was restored."""
        for rec in find_recoveries():
            answer = self.ask_recovery(rec.describe())
            if answer == "keep":
                return False
            if answer == "discard":
                rec.discard()
                continue
            try:
                scene = scene_from_text(rec.scene_file.read_text(encoding="utf-8"), check_shapes=False)
            except (SceneError, OSError) as exc:
                self.show_error("Cannot restore", f"The recovery copy {rec.scene_file} cannot be read: {exc}")
                return False
            self.doc.replace(scene, Path(rec.original) if rec.original else None, dirty=True)
            self.autosaver.save_now()      # our own copy first, then drop the old one
            rec.discard()
            self.canvas.fit()
            self.status_note(f"Restored {rec.describe()}; save it to keep it")
            return True
        return False

    def closeEvent(self, ev):
        if not self.maybe_discard():
            ev.ignore()
            return
        self.worker.shutdown()
        self.autosaver.discard()
        ev.accept()

    def _update_title(self) -> None:
        mark = "*" if self.doc.modified else ""
        name = self.doc.scene.name
        self.setWindowTitle(f"{mark}{self.doc.title}" + (f" - {name}" if name and name != "untitled" else "")
                            + " - 2D ray tracer")

    # ------------------------------------------------------------------ editing
    def delete_selected(self) -> None:
        sel = self.canvas.selection
        if not sel:
            return
        kind, index = sel
        name = {edits.PART: self.doc.scene.parts, edits.SOURCE: self.doc.scene.sources,
                edits.DETECTOR: self.doc.scene.detectors}[kind][index].name
        self.canvas.select(None)
        self.doc.apply(edits.delete_item(self.doc.scene, kind, index), f"delete {name}")

    def duplicate_selected(self) -> None:
        sel = self.canvas.selection
        if not sel:
            return
        kind, index = sel
        if kind == edits.PART:     # beside the original: overlapping parts cannot be traced
            bx0, _, bx1, _ = self.doc.scene.parts[index].outer.bounds()
            dx, dy = 1.1 * (bx1 - bx0), 0.0
        else:
            (x0, x1), _ = self.canvas.view.viewRange()
            dx, dy = 0.05 * (x1 - x0), -0.05 * (x1 - x0)
        if self.canvas.snapping:
            g = self.canvas.grid_step
            dx, dy = (round(dx / g) or (1 if dx else 0)) * g, round(dy / g) * g
        new = edits.duplicate(self.doc.scene, kind, index, dx, dy)
        items = {edits.PART: new.parts, edits.SOURCE: new.sources, edits.DETECTOR: new.detectors}[kind]
        self.doc.apply(new, f"duplicate as {items[-1].name}")
        self.canvas.select((kind, len(items) - 1))

    def add_shape(self, kind: str | None = None) -> None:
        from raytrace.catalog import CATALOG
        from .dialogs.shape import ShapeDialog
        r = self.canvas.view.viewRange()
        centre = ((r[0][0] + r[0][1]) / 2, (r[1][0] + r[1][1]) / 2)
        mats = list(CATALOG) + [m for m in self.doc.scene.materials if m not in CATALOG]
        dlg = ShapeDialog(mats, self.canvas.default_material, (round(centre[0], 3), round(centre[1], 3)), self)
        if kind:
            dlg.set_kind(kind)
        if not dlg.exec():
            return
        part = edits.shape_part(dlg.spec(), dlg.material.currentText(), dlg.name.text().strip())
        placed = edits.place_clear(self.doc.scene, part)
        if placed is not part:
            self.status_note(f"{part.name} placed beside the other parts: at the view centre it would overlap one")
        scene = edits.add_part(self.doc.scene, placed)
        self.doc.apply(scene, f"add {scene.parts[-1].name}")
        self.canvas.select((edits.PART, len(scene.parts) - 1))

    def ask_dxf_path(self) -> str:
        path, _ = QFileDialog.getOpenFileName(self, "Import a DXF drawing", str(self._dir()), "DXF drawings (*.dxf)")
        return path

    def ask_dxf_setup(self, layers, ask_units, recorded=None):
        from .dxf_import import ask_setup
        return ask_setup(self, layers, self.doc.scene, ask_units, recorded)

    def import_dxf(self, path: str | None = None) -> bool:
        """File > Import DXF: the drawing's parts join the scene in one undoable step."""
        from raytrace.dxf_io import dxf_layers, recorded_materials
        from .dxf_import import import_parts
        path = path or self.ask_dxf_path()
        if not path:
            return False
        try:
            layers, units_stated = dxf_layers(path)
            setup = self.ask_dxf_setup(layers, not units_stated, recorded_materials(path))
            if setup is None:
                return False
            scene, count = import_parts(self.doc.scene, path, *setup)
        except SceneError as exc:
            lines = [str(p) for p in exc.problems]
            self.show_error("Cannot import the drawing",
                            f"{path} has {len(lines)} problem(s):\n" + "\n".join(lines[:20]))
            return False
        from raytrace.cli import counted
        self.doc.apply(scene, f"import {counted(count, 'part')} from {Path(path).name}")
        self.canvas.fit()
        self.status_note(f"Imported {counted(count, 'part')} from {path}")
        return True

    def open_sweep(self) -> None:
        from .dialogs.sweep import SweepDialog
        s = self.doc.scene.settings
        dlg = SweepDialog(self.doc.scene, {"mode": s.mode, "flux_floor": s.flux_floor,
                                           "max_generations": s.max_generations}, self)
        dlg.exec()

    def apply_optimum(self, result):
        """The optimize tab's "Apply to scene": the tuned numbers set to the optimum, one undo
        step; the document's scene after it, or None when it could not be applied."""
        from raytrace.scene_io import scene_from_dict, scene_to_dict
        from raytrace.errors import RaytraceError
        from raytrace.sweep import SweepError, apply_settings
        pairs = list(zip(result.names, result.optimum))
        try:
            data = apply_settings(scene_to_dict(self.doc.scene), pairs, str(self.doc.path or ""))
            scene = scene_from_dict(data, check_shapes=False)
        except (SweepError, RaytraceError, ValueError) as exc:
            self.show_error("Not applied", f"The optimum could not be applied to the scene: {exc}")
            return None
        self.doc.apply(scene, "apply optimum " + ", ".join(f"{n} = {v:.6g}" for n, v in pairs))
        self.status_note("Applied the optimum: " + ", ".join(f"{n} = {v:.6g}" for n, v in pairs)
                         + " (Ctrl+Z undoes)")
        return self.doc.scene

    def _selection_changed(self, sel) -> None:
        self.properties.show_selection(self.doc.scene, sel)
        if sel:
            self.edit_tabs.setCurrentIndex(0)

    def _scene_changed(self) -> None:
        scene = self.doc.scene
        # the trace first: the trace thread compiles the scene while this thread redraws the
        # parts and refreshes the panels (the drawing is held until the new rays are there)
        if self.request_trace() is not None:
            self.canvas.hold_paint(PAINT_HOLD_S)
        self.canvas.set_scene(scene)
        self._show_problems(scene_problems(scene))
        self.properties.show_selection(scene, self.canvas.selection)
        self.controls.show_scene(scene)
        self._update_title()

    def _show_problems(self, problems) -> None:
        self.problems = problems
        self.canvas.set_problems(problems)
        self.problems_panel.show_problems(problems)
        i = self.result_tabs.indexOf(self.problems_panel)
        text = f"Problems ({len(problems)})" if problems else "Problems"
        if self.result_tabs.tabText(i) != text:        # an unchanged tab needs no new layout
            self.result_tabs.setTabText(i, text)

    # ------------------------------------------------------------------ tracing
    def request_trace(self, force: bool = False) -> int | None:
        if not force and not self.controls.live.isChecked():
            return None
        scene = self.doc.scene
        if not scene.sources:
            self.canvas.set_result(None)
            self.ledger.show_result(None)
            self.profiles.show_result(None)
            self.trace_label.setText("no source to trace")
            return None
        return self.worker.submit(scene, self.controls.options(), self.doc.epoch)

    def _trace_busy(self, busy: bool) -> None:
        if busy:
            self.trace_label.setText("tracing...")

    def _trace_progress(self, segments: int) -> None:
        self.trace_label.setText(f"tracing... {segments:,} segments (Shift+F5 stops)")

    def stop_trace(self) -> None:
        self.worker.cancel()
        self.trace_label.setText("trace stopped")

    def trace_blocking(self) -> TraceOutcome:
        """Trace on this thread and show the result (screenshots, scripts)."""
        req = TraceRequest(-1, self.doc.epoch, self.doc.scene, self.controls.options(), time.perf_counter())
        out = TraceOutcome(req)
        t0 = time.perf_counter()
        try:
            out.result = run_trace(req.scene, req.options)
        except TraceCancelled:
            out.cancelled = True
        except SceneError as exc:
            out.error = "; ".join(str(p) for p in exc.problems)
        except Exception as exc:  # noqa: BLE001 - shown to the user, not swallowed
            out.error = f"{type(exc).__name__}: {exc}"
        out.elapsed_s = time.perf_counter() - t0
        self._show_outcome(out)
        return out

    def _prepare_drawing(self, result, scene):
        """Runs on the trace thread: the drawing of a result as the canvas draws it now (the
        canvas checks the colour choice again when it shows it)."""
        from .raydraw import scene_drawing
        return scene_drawing(result, scene, self.canvas.colour_by_wavelength, self.canvas.view_pixel_mm)

    def _show_outcome(self, out: TraceOutcome) -> None:
        if out.request.epoch != self.doc.epoch:
            return
        self.last_outcome = out
        if out.error:
            self.canvas.set_result(None)
            self.ledger.show_result(None)
            self.profiles.show_result(None)
            self.ledger.summary.setText(f"<b>Not traced:</b> {html.escape(out.error)}")
            self.canvas.legend.show_problem(out.error)
            self.trace_label.setText("not traced: see Problems" if self.problems else "not traced: see Flux ledger")
            self.status_note(out.error)
            return
        if out.result is None:
            return
        self.canvas.set_result(out.result, out.drawing)
        self.canvas.legend.show_problem("")
        self.traces_shown += 1
        self.redraw_times.append(time.perf_counter() - out.request.submitted)
        if out.coarse:
            # a preview: the panels wait for the full trace of the same state, which the worker
            # starts once the fan is on the screen (the drawing would otherwise share Python's
            # lock with it); a drawing that is not shown need not be waited for
            self.trace_label.setText(f"preview of {out.result.stats['source_rays']:,} rays, refining...")
            self._coarse_on_canvas = out.request.id
            if not self.canvas.plot.isVisible():
                self._canvas_painted()
            return
        self._coarse_on_canvas = -1
        if not gc_policy.heap_settled():
            QTimer.singleShot(0, gc_policy.settle_heap)      # after this result is painted
        self.ledger.show_result(out.result)
        self.profiles.show_result(out.result)
        # the one time figure of a trace (the flux panel gives rays and segments)
        self.trace_label.setText(f"traced in {out.elapsed_s * 1000:.0f} ms")

    def _canvas_painted(self) -> None:
        """The drawing has been painted: a coarse fan on it is on the screen."""
        if self._coarse_on_canvas >= 0:
            self.worker.shown(self._coarse_on_canvas)
            self._coarse_on_canvas = -1
