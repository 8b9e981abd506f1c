"""Numeric editing of whatever is selected: a part (material, builder parameters, every vertex,
face names and treatments), a source, a detector, or the scene itself.

Widgets are refreshed from the scene with their signals blocked; a finished edit builds a new
scene through `edits` and hands it to the document, so every change is one undo step.
"""
from __future__ import annotations

import math
from dataclasses import replace

from PySide6.QtCore import QEvent, Qt, QTimer, Signal
from PySide6.QtWidgets import (QCheckBox, QComboBox, QDoubleSpinBox, QFormLayout, QFrame, QGroupBox,
                               QHBoxLayout, QLabel, QLineEdit, QPlainTextEdit, QPushButton, QScrollArea,
                               QSizePolicy, QSpinBox, QStackedWidget, QTableWidget,
                               QTableWidgetItem, QVBoxLayout, QWidget)

from raytrace.catalog import CATALOG
from raytrace.fields import MAX_COORD, bad_text
from raytrace.geometry import TREATMENT_KINDS
from raytrace.scene import DISTRIBUTIONS, POLARIZATIONS, SAMPLINGS, SOURCE_KINDS, Spectrum
from raytrace.shapes import PARAMETERS, ShapeParameterError

from .. import arcs, edits
from ..dialogs.shape import SHAPE_LABELS, param_value, param_widget
from ..edge_fade import add_edge_fades
from .fit_table import fit_columns, height_for_rows, make_fitting
from .grip_splitter import GripSplitter


def _dspin(lo=-1e6, hi=1e6, decimals=4, suffix=" mm", tip=""):
    w = QDoubleSpinBox()
    w.setRange(lo, hi)
    w.setDecimals(decimals)
    w.setSuffix(suffix)
    w.setKeyboardTracking(False)
    w.setToolTip(tip)
    return w


def typed_number(text: str, what: str, lo: float, hi: float, exclusive_lo: bool = False) -> float:
    """A number typed into a text field, within [lo, hi]; ValueError("expected ...") for text,
    NaN, infinities and values out of range (a scene file could not hold them)."""
    try:
        v = float(text)
    except ValueError:
        v = math.nan
    low_ok = v > lo if exclusive_lo else v >= lo
    if not (low_ok and v <= hi):      # also refuses nan
        raise ValueError(f"expected {what} from {_plain(lo)} to {_plain(hi)}, found {text!r}")
    return v


def _plain(v: float) -> str:
    """A bound as people write it: 1,000,000 rather than 1e+06."""
    return f"{int(v):,}" if v == int(v) and abs(v) < 1e15 else f"{v:g}"


def clean_text(text: str, what: str) -> str:
    """A name or note typed by the user; ValueError when a scene file would refuse it."""
    bad = bad_text(text)
    if bad:
        raise ValueError(f"expected {what} without {bad}")
    return text


def _set(widget, value):
    widget.blockSignals(True)
    if isinstance(widget, (QDoubleSpinBox, QSpinBox)):
        widget.setValue(value)
    elif isinstance(widget, QLineEdit):
        widget.setText(value)
        widget.setCursorPosition(0)      # show the beginning of long texts
    elif isinstance(widget, StoryEdit):
        widget.setText(value)
    elif isinstance(widget, QCheckBox):
        widget.setChecked(value)
    elif isinstance(widget, QComboBox):
        i = widget.findData(value)
        if i < 0:
            i = widget.findText(value)
        if i < 0 and widget.isEditable():
            widget.setEditText(value)
        else:
            widget.setCurrentIndex(i)
    widget.blockSignals(False)


class _Page(QWidget):
    def __init__(self, panel: "PropertiesPanel"):
        super().__init__()
        self.panel = panel
        self.index = 0

    @property
    def doc(self):
        return self.panel.doc

    def apply(self, scene, text):
        self.doc.apply(scene, text)

    def error(self, text):
        self.panel.message(text)


class StoryEdit(QPlainTextEdit):
    """The scene's one-line purpose, word-wrapped over a few lines so all of it shows.  Enter
    or leaving the field finishes the edit (like a line field); line breaks become spaces."""

    editingFinished = Signal()

    def __init__(self):
        super().__init__()
        self.setLineWrapMode(QPlainTextEdit.WidgetWidth)
        self.setTabChangesFocus(True)
        self.set_lines(5)

    def set_lines(self, lines: int) -> None:
        """Exactly `lines` whole lines tall: a longer purpose scrolls by whole lines (as a plain
        text box does) instead of showing a line cut in half at the bottom edge."""
        # the text starts one document margin down; the box ends where line `lines` does
        margin = self.document().documentMargin()
        self.setFixedHeight(round(self.fontMetrics().lineSpacing() * lines + margin) + 2 * self.frameWidth())

    def changeEvent(self, ev):
        super().changeEvent(ev)
        if ev.type() == QEvent.FontChange:
            self.set_lines(5)

    def text(self) -> str:
        return " ".join(self.toPlainText().split())

    def setText(self, text: str) -> None:
        self.setPlainText(text)
        self.setToolTip(text or "One line: what this scene is for")

    def keyPressEvent(self, ev):
        if ev.key() in (Qt.Key_Return, Qt.Key_Enter):
            self.editingFinished.emit()
            return
        super().keyPressEvent(ev)

    def focusOutEvent(self, ev):
        super().focusOutEvent(ev)
        self.editingFinished.emit()


class ScenePage(_Page):
    def __init__(self, panel):
        super().__init__(panel)
        self.name = QLineEdit()
        self.story = StoryEdit()
        self.ambient = QComboBox()
        self.seed = QSpinBox()
        self.seed.setRange(0, 2**31 - 1)
        self.seed.setToolTip("Random seed for Monte Carlo and random sampling")
        self.materials = QLabel("")
        self.materials.setWordWrap(True)
        define = QPushButton("Define a material...")
        define.clicked.connect(lambda: panel.define_material())
        outer = QVBoxLayout(self)
        form = QFormLayout()
        outer.addLayout(form)
        outer.addStretch(1)      # spare height below the fields, not between them
        form.addRow(QLabel("<b>Scene</b> (nothing selected)"))
        # the hint first: it is what a new user needs, and in a 700 px window the fields below
        # scroll, where a last row of text showed only its top pixels
        hint = QLabel("Click a part, source or detector in the drawing to edit it here; the tools "
                      "on the left add new ones. Hover a face to see its name.")
        hint.setWordWrap(True)
        hint.setStyleSheet("color: #555")
        form.addRow(hint)
        form.addRow("Name", self.name)
        form.addRow("Purpose", self.story)
        form.addRow("Surrounding medium", self.ambient)
        form.addRow("Random seed", self.seed)
        form.addRow("Own materials", self.materials)
        form.addRow(define)
        self.name.editingFinished.connect(lambda: self._fields(name=self.name.text()))
        self.story.editingFinished.connect(lambda: self._fields(story=self.story.text()))
        self.ambient.activated.connect(lambda _i: self._fields(ambient=self.ambient.currentText()))
        self.seed.editingFinished.connect(
            lambda: self.apply(edits.set_settings(self.doc.scene, seed=self.seed.value()), "change seed"))

    def _fields(self, **changes):
        s = self.doc.scene
        if all(getattr(s, k) == v for k, v in changes.items()):
            return
        for k, v in changes.items():
            if isinstance(v, str) and bad_text(v):
                self.error(f"scene {k}: expected text without {bad_text(v)}")
                self.show(s, 0)
                return
        self.apply(edits.set_fields(s, **changes), "change scene " + ", ".join(changes))

    def show(self, scene, index):
        _set(self.name, scene.name)
        _set(self.story, scene.story)
        self.panel.fill_materials(self.ambient, scene)
        _set(self.ambient, scene.ambient)
        _set(self.seed, scene.settings.seed)
        self.materials.setText(", ".join(scene.materials) or "(none)")


class PartPage(_Page):
    # short headers, so six columns fit a narrow panel; the units are in the headers' tooltips
    COLS = ("x", "y", "face", "treatment", "mirror R", "arc R")
    COL_TIPS = ("x of the vertex (mm)", "y of the vertex (mm)", "Name of the face from this vertex to the next",
                "What the face does to the rays", "Reflectance of a mirror face (0 to 1); shown when "
                "the part has a mirror face", "Arc radius of the face in mm: > 0 bulges out of the material, "
                "< 0 into it, empty straight")
    MIRROR_COL = 4
    RADIUS_COL = 5
    FACE_COL = 2
    # The vertex table and the fields above it share the page through a splitter: the table is
    # given room for up to TABLE_ROWS rows, the fields at least FIELDS_SHARE of the height (they
    # scroll on their own when that is less than they need), until the user moves the splitter.
    TABLE_ROWS = 10
    FIELDS_SHARE = 0.3

    def __init__(self, panel):
        super().__init__(panel)
        self.name = QLineEdit()
        self.material = QComboBox()
        self.material.setToolTip("Catalog materials, then the scene's own")
        define = QPushButton("New...")
        define.setToolTip("Define a material of your own for this part")
        define.clicked.connect(lambda: panel.define_material(for_part=self.index))
        mat = QHBoxLayout()
        mat.addWidget(self.material, 1)
        mat.addWidget(define)
        self.turn = _dspin(-360, 360, 3, " deg", "Angle to turn the part by (counter-clockwise)")
        turn_btn = QPushButton("Rotate")
        turn_btn.clicked.connect(self._rotate)
        turn = QHBoxLayout()
        turn.addWidget(self.turn, 1)
        turn_btn.setToolTip("Turn the part about its origin (builder parts) or its centre")
        turn.addWidget(turn_btn)
        top = QFormLayout()
        top.addRow("Name", self.name)
        top.addRow("Material", mat)
        top.addRow("Rotate by", turn)

        self.shape_box = QGroupBox("Shape")
        self.shape_form = QFormLayout(self.shape_box)
        self.shape_kind = None
        self.shape_widgets = {}
        self.pos_x, self.pos_y = _dspin(), _dspin()
        self.rotation = _dspin(-360, 360, 4, " deg")
        self.shape_form.addRow("Position x", self.pos_x)      # rows 0-2 stay for every builder
        self.shape_form.addRow("Position y", self.pos_y)
        self.shape_form.addRow("Rotation", self.rotation)
        for w in (self.pos_x, self.pos_y, self.rotation):
            w.valueChanged.connect(lambda _v: self._shape_changed())

        self.table = QTableWidget(0, len(self.COLS))
        self.table.setHorizontalHeaderLabels(self.COLS)
        for c, tip in enumerate(self.COL_TIPS):
            self.table.horizontalHeaderItem(c).setToolTip(tip)
        self.table.setToolTip("Row i: vertex i (start of edge i) and the face from it to the next vertex; "
                              "rows 'hole k.i' are the holes' vertices.  arc R: the edge's arc radius "
                              "(> 0 bulges out of the material, < 0 into it, 0 or empty straight)")
        self.table.itemChanged.connect(self._cell_changed)
        make_fitting(self.table, self.FACE_COL)
        self.fields = QWidget()
        fields = QVBoxLayout(self.fields)
        fields.setContentsMargins(0, 0, 0, 0)
        fields.addWidget(QLabel("<b>Part</b>"))
        fields.addLayout(top)
        fields.addWidget(self.shape_box)
        fields.addStretch(1)
        self.fields_area = QScrollArea()
        self.fields_area.setWidget(self.fields)
        self.fields_area.setWidgetResizable(True)
        self.fields_area.setFrameShape(QFrame.NoFrame)
        self.fields_area.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        add_edge_fades(self.fields_area)
        add_edge_fades(self.table)
        rows = QWidget()
        rows_lay = QVBoxLayout(rows)
        rows_lay.setContentsMargins(0, 0, 0, 0)
        rows_lay.setSpacing(2)
        self.rows_label = QLabel("Vertices and faces")
        rows_lay.addWidget(self.rows_label)
        rows_lay.addWidget(self.table, 1)
        self.split = GripSplitter(Qt.Vertical)
        self.split.setChildrenCollapsible(False)
        self.split.addWidget(self.fields_area)
        self.split.addWidget(rows)
        self.split.setStretchFactor(1, 1)
        self._split_by_user = False
        self._split_for = None
        self.split.splitterMoved.connect(lambda *_: setattr(self, "_split_by_user", True))
        lay = QVBoxLayout(self)
        lay.setContentsMargins(4, 2, 2, 2)
        lay.addWidget(self.split)
        self.name.editingFinished.connect(self._rename)
        self.material.activated.connect(lambda _i: self._material(self.material.currentText()))

    def part(self):
        return self.doc.scene.parts[self.index]

    def _replace(self, part, text):
        self.apply(edits.replace_part(self.doc.scene, self.index, part), text)

    def _rename(self):
        name = self.name.text().strip()
        p = self.part()
        if not name or name == p.name:
            return
        if bad_text(name):
            self.error(f"part name: expected a name without {bad_text(name)}")
            _set(self.name, p.name)
            return
        if name in {q.name for q in self.doc.scene.parts}:
            self.error(f"a part called {name!r} already exists")
            _set(self.name, p.name)
            return
        self._replace(replace(p, name=name), f"rename {p.name} to {name}")

    def _material(self, name):
        p = self.part()
        if name and name != p.material:
            self._replace(replace(p, material=name), f"set material of {p.name} to {name}")

    def _rotate(self):
        a = self.turn.value()
        if a:
            p = self.part()
            self._replace(edits.rotate_part(p, a), f"rotate {p.name}")

    def _shape_changed(self):
        p = self.part()
        if p.shape is None:
            return
        try:
            params = {name: param_value(info, w) for name, (info, w) in self.shape_widgets.items()}
            spec = replace(p.shape, params=params, position=(self.pos_x.value(), self.pos_y.value()),
                           rotation_deg=self.rotation.value())
            new = edits.rebuild(p, spec)
        except ShapeParameterError as exc:
            self.error(f"{p.name}: {exc}")
            return
        self._replace(new, f"change shape of {p.name}")

    def _loop_edge(self, row):
        """(loop index, edge index) of a table row: the outline's edges, then each hole's."""
        p = self.part()
        for li, loop in enumerate(p.loops):
            if row < len(loop.edges):
                return li, row
            row -= len(loop.edges)
        raise IndexError(row)

    def _cell_changed(self, item):
        row, col = item.row(), item.column()
        p = self.part()
        text = item.text().strip()
        li, ei = self._loop_edge(row)
        try:
            if col == self.RADIUS_COL:
                r = typed_number(text or "0", "an arc radius in mm (0 for a straight edge)", -MAX_COORD, MAX_COORD)
                new = arcs.bend_by_radius(p, li, ei, r)
                label = f"hole {li}, edge {ei + 1}" if li else f"edge {ei + 1}"
                what = f"set arc radius of {p.name} / {label}"
            elif li:
                return          # a hole's other cells are shown, not edited here
            elif col in (0, 1):
                v = typed_number(text, "a coordinate in mm", -MAX_COORD, MAX_COORD)
                new = edits.set_vertex_xy(p, row, **({"x": v} if col == 0 else {"y": v}))
                what = f"move vertex {row + 1} of {p.name}"
            elif col == 2:
                new = edits.set_edge(p, row, face=clean_text(text, "a face name") or None)
                what = f"rename face of {p.name}"
            elif col == 4:
                R = typed_number(text, "a mirror reflectance", 0.0, 1.0)
                new = edits.set_edge(p, row, treatment=edits.treatment("mirror", R))
                what = f"set mirror reflectance on {p.name}"
            else:
                return
        except ValueError as exc:
            row_name = self.table.verticalHeaderItem(row).text() if self.table.verticalHeaderItem(row) else str(row + 1)
            field = "arc R: " if col == self.RADIUS_COL else ""
            self.error(f"row {row_name}: {field}{exc}" if "expected" in str(exc)
                       else f"row {row_name}: {field}expected {exc}")
            self.show(self.doc.scene, self.index)
            return
        self._replace(new, what)
        self._note_outline(p, new)

    def _note_outline(self, old, new):
        # a hand edit of a built part's outline ends its shape: say so, the fields vanish
        if old.shape is not None and new.shape is None and self.part() is new:
            self.error(f"{new.name} is now a plain outline (Ctrl+Z undoes): its shape fields are "
                       f"gone and numbers linked to its shape save as plain numbers")

    def _treatment(self, row, kind):
        p = self.part()
        old = p.outer.edges[row].treatment
        R = old.reflectance if kind == "mirror" else 1.0
        new = edits.set_edge(p, row, treatment=edits.treatment(kind, R))
        self._replace(new, f"set {kind} on {p.name} / {p.outer.edges[row].face or f'edge {row + 1}'}")
        self._note_outline(p, new)

    def show(self, scene, index):
        self.index = index
        p = scene.parts[index]
        _set(self.name, p.name)
        self.panel.fill_materials(self.material, scene)
        _set(self.material, p.material)
        self._show_shape(p)
        self.table.blockSignals(True)
        rows = [(li, ei, e) for li, loop in enumerate(p.loops) for ei, e in enumerate(loop.edges)]
        edges = rows
        self.table.setRowCount(len(rows))
        self.table.setVerticalHeaderLabels([f"hole {li}.{ei + 1}" if li else f"{ei + 1}" for li, ei, _ in rows])
        for r, (li, ei, e) in enumerate(rows):
            cells = [f"{e.start[0]:.6g}", f"{e.start[1]:.6g}", e.face or ""]
            for c, text in enumerate(cells):
                it = QTableWidgetItem(text)
                if e.is_arc and c == 2:
                    it.setToolTip(f"{text + ': ' if text else ''}arc about ({e.arc_center[0]:.4g}, {e.arc_center[1]:.4g}), "
                                  f"radius {e.radius:.4g} mm")
                elif c == 2 and text:
                    it.setToolTip(text)          # the whole name where a narrow column cuts it
                if li:
                    it.setFlags(it.flags() & ~Qt.ItemIsEditable)
                self.table.setItem(r, c, it)
            if li:                  # a hole's treatment is shown; it is set on the drawing
                self.table.removeCellWidget(r, 3)
                tit = QTableWidgetItem(e.treatment.kind)
                tit.setFlags(tit.flags() & ~Qt.ItemIsEditable)
                self.table.setItem(r, 3, tit)
            else:
                combo = self.table.cellWidget(r, 3)
                if combo is None:      # made once per row; a drag only updates the texts
                    combo = QComboBox()
                    combo.addItems(TREATMENT_KINDS)
                    # as wide as "absorber": the list that opens shows the longer names whole
                    combo.setSizeAdjustPolicy(QComboBox.AdjustToMinimumContentsLengthWithIcon)
                    combo.setMinimumContentsLength(6)
                    combo.currentTextChanged.connect(lambda k, row=r: self._treatment(row, k))
                    self.table.setCellWidget(r, 3, combo)
                combo.blockSignals(True)
                combo.setCurrentText(e.treatment.kind)
                combo.blockSignals(False)
            rit = QTableWidgetItem(f"{e.treatment.reflectance:g}" if e.treatment.kind == "mirror" else "")
            if e.treatment.kind != "mirror" or li:
                rit.setFlags(rit.flags() & ~Qt.ItemIsEditable)
            self.table.setItem(r, 4, rit)
            radius = arcs.signed_radius(p, li, ei)
            self.table.setItem(r, self.RADIUS_COL, QTableWidgetItem(f"{radius:.6g}" if radius else ""))
        # the reflectance column only takes room when a face of the part (outline or hole) is a mirror
        mirrors = any(e.treatment.kind == "mirror" for _, _, e in rows)
        if self.table.isColumnHidden(self.MIRROR_COL) == mirrors:
            self.table.setColumnHidden(self.MIRROR_COL, not mirrors)
            self.table.setProperty("sized_for", None)
        if self.table.property("sized_for") != (index, len(edges)):
            fit_columns(self.table, self.FACE_COL)
            self.table.setProperty("sized_for", (index, len(edges)))
        self.table.blockSignals(False)
        self._fit_split()
        QTimer.singleShot(0, self._fit_split)     # again once new builder fields are polished

    def resizeEvent(self, ev):
        super().resizeEvent(ev)
        self._fit_split()

    def _fit_split(self) -> None:
        """Share the page between the fields and the vertex table (see TABLE_ROWS)."""
        h = self.split.height() - self.split.handleWidth()
        if self._split_by_user or h <= 0:
            return
        self.fields.layout().activate()      # builder rows just added count in its size hint
        want_fields = self.fields.sizeHint().height()
        key = (h, self.table.rowCount(), want_fields)
        if key == self._split_for:
            return
        self._split_for = key
        want_table = (self.rows_label.sizeHint().height() + 2
                      + height_for_rows(self.table, min(self.table.rowCount(), self.TABLE_ROWS)))
        fields = min(want_fields, max(h - want_table, int(self.FIELDS_SHARE * h)))
        self.split.setSizes([fields, h - fields])

    def _show_shape(self, p):
        if p.shape is None:
            self.shape_box.setVisible(False)
            self.shape_kind = None
            return
        self.shape_box.setVisible(True)
        spec = p.shape
        if spec.kind != self.shape_kind:
            # the rows of the old builder are deleted, not only taken out of the form: a taken
            # widget stays a visible child of the box and is painted under the new rows
            while self.shape_form.rowCount() > 3:
                self.shape_form.removeRow(3)
            self.shape_widgets = {}
            for info in PARAMETERS[spec.kind]:
                w = param_widget(info, spec.params.get(info.name, info.default))
                if hasattr(w, "setKeyboardTracking"):
                    w.setKeyboardTracking(False)
                    w.valueChanged.connect(lambda _v: self._shape_changed())
                else:
                    w.editingFinished.connect(self._shape_changed)
                self.shape_widgets[info.name] = (info, w)
                self.shape_form.addRow(info.name.replace("_", " "), w)
            self.shape_kind = spec.kind
        self.shape_box.setTitle(f"Shape: {SHAPE_LABELS.get(spec.kind, spec.kind)}")
        _set(self.pos_x, spec.position[0])
        _set(self.pos_y, spec.position[1])
        _set(self.rotation, spec.rotation_deg)
        import json
        for name, (info, w) in self.shape_widgets.items():
            v = spec.params.get(name, info.default)
            _set(w, json.dumps(v) if info.type == "segments" else v)


class SourcePage(_Page):
    def __init__(self, panel):
        super().__init__(panel)
        self.name = QLineEdit()
        self.kind = QComboBox()
        self.kind.addItems(SOURCE_KINDS)
        self.kind.setToolTip("beam: collimated; point: rays from one point; emitter: a flat emitting die")
        self.x, self.y = _dspin(), _dspin()
        self.direction = _dspin(-360, 360, 4, " deg", "Direction of the axis, counter-clockwise from +x")
        self.width = _dspin(0, 1e6, 4, " mm", "Width of a beam or emitter")
        self.half = _dspin(0, 180, 3, " deg", "Half angle of a point source or emitter")
        self.dist = QComboBox()
        self.dist.addItems(DISTRIBUTIONS)
        self.cos_power = _dspin(0.001, 1000, 3, "", "Exponent m of cos^m for cos_power")
        self.flux = _dspin(0, 1e9, 6, "", "Source flux (any unit; the ledger uses the same unit)")
        self.spec_kind = QComboBox()
        self.spec_kind.addItems(["one wavelength", "band (Gaussian)", "lines"])
        self.wl = _dspin(100, 20000, 3, " nm", "Wavelength, or band centre")
        self.fwhm = _dspin(0.001, 10000, 3, " nm", "Band full width at half maximum")
        self.lines = QLineEdit()
        self.lines.setToolTip("Lines as 'nm:weight, nm:weight', e.g. 486.1:1, 587.6:1, 656.3:1")
        self.pol = QComboBox()
        self.pol.addItems(POLARIZATIONS)
        self.sampling = QComboBox()
        self.sampling.addItems(SAMPLINGS)
        self.sampling.setToolTip("even: a regular fan; random: seeded stratified sampling")
        self.note = QLineEdit()
        self.note.setToolTip("Free text, e.g. the safety class of the light source")
        form = QFormLayout(self)
        form.addRow(QLabel("<b>Source</b>"))
        rows = [("Name", self.name), ("Kind", self.kind), ("Position x", self.x), ("Position y", self.y),
                ("Direction", self.direction), ("Width", self.width), ("Half angle", self.half),
                ("Distribution", self.dist), ("cos power", self.cos_power), ("Flux", self.flux),
                ("Spectrum", self.spec_kind), ("Wavelength", self.wl), ("Band FWHM", self.fwhm),
                ("Lines", self.lines), ("Polarization", self.pol), ("Sampling", self.sampling),
                ("Note", self.note)]
        for label, w in rows:
            form.addRow(label, w)
        for w in (self.x, self.y, self.direction, self.width, self.half, self.cos_power, self.flux,
                  self.wl, self.fwhm):
            w.valueChanged.connect(lambda _v: self._commit())
        for w in (self.kind, self.dist, self.pol, self.sampling, self.spec_kind):
            w.activated.connect(lambda _i: self._commit())
        for w in (self.name, self.note, self.lines):
            w.editingFinished.connect(self._commit)

    def _spectrum(self) -> Spectrum:
        k = self.spec_kind.currentIndex()
        if k == 0:
            return Spectrum.line(self.wl.value())
        if k == 1:
            return Spectrum.band(self.wl.value(), self.fwhm.value())
        wls, ws = [], []
        for item in self.lines.text().split(","):
            if item.strip():
                wl, _, w = item.partition(":")
                wls.append(typed_number(wl.strip(), "a wavelength in nm", 100.0, 20000.0))
                ws.append(typed_number(w.strip() or "1", "a weight", 0.0, 1e30, exclusive_lo=True))
        if not wls:
            raise ValueError("at least one line 'nm:weight'")
        return Spectrum(tuple(wls), tuple(ws))

    def _commit(self):
        scene = self.doc.scene
        src = scene.sources[self.index]
        try:
            spectrum = self._spectrum()
        except ValueError as exc:
            self.error(f"spectrum lines 'nm:weight, ...': {exc}")
            return
        name = self.name.text().strip() or src.name
        for text, what in ((name, "a source name"), (self.note.text(), "a note")):
            if bad_text(text):
                self.error(f"{what}: expected text without {bad_text(text)}")
                self.show(scene, self.index)
                return
        if name != src.name and name in {s.name for s in scene.sources}:
            self.error(f"a source called {name!r} already exists")
            name = src.name
        new = replace(src, name=name, kind=self.kind.currentText(), position=(self.x.value(), self.y.value()),
                      direction_deg=self.direction.value(), width=self.width.value(),
                      half_angle_deg=self.half.value(), distribution=self.dist.currentText(),
                      cos_power=self.cos_power.value(), flux=self.flux.value(), spectrum=spectrum,
                      polarization=self.pol.currentText(), sampling=self.sampling.currentText(),
                      note=self.note.text())
        if new != src:
            self.apply(edits.replace_source(scene, self.index, new), f"edit source {src.name}")

    def show(self, scene, index):
        self.index = index
        s = scene.sources[index]
        for w, v in ((self.name, s.name), (self.kind, s.kind), (self.x, s.position[0]), (self.y, s.position[1]),
                     (self.direction, s.direction_deg), (self.width, s.width), (self.half, s.half_angle_deg),
                     (self.dist, s.distribution), (self.cos_power, s.cos_power), (self.flux, s.flux),
                     (self.pol, s.polarization), (self.sampling, s.sampling), (self.note, s.note)):
            _set(w, v)
        sp = s.spectrum
        kind = 1 if sp.is_band else 0 if len(sp.wavelengths_nm) == 1 else 2
        self.spec_kind.blockSignals(True)
        self.spec_kind.setCurrentIndex(kind)
        self.spec_kind.blockSignals(False)
        _set(self.wl, sp.band_center_nm if sp.is_band else sp.wavelengths_nm[0])
        _set(self.fwhm, sp.band_fwhm_nm or 10.0)
        _set(self.lines, ", ".join(f"{w:g}:{v:g}" for w, v in zip(sp.wavelengths_nm, sp.weights)))
        self.width.setEnabled(s.kind != "point")
        self.half.setEnabled(s.kind != "beam")
        self.dist.setEnabled(s.kind != "beam")
        self.cos_power.setEnabled(s.distribution == "cos_power")
        self.fwhm.setEnabled(kind == 1)
        self.lines.setEnabled(kind == 2)
        self.wl.setEnabled(kind != 2)


class DetectorPage(_Page):
    def __init__(self, panel):
        super().__init__(panel)
        self.name = QLineEdit()
        self.sx, self.sy, self.ex, self.ey = _dspin(), _dspin(), _dspin(), _dspin()
        self.absorbing = QCheckBox("absorbs the rays")
        self.absorbing.setToolTip("On: a sensor, rays end there; off: a monitor, rays pass on")
        self.bins = QSpinBox()
        self.bins.setRange(1, 100_000)
        self.bins.setToolTip("Bins of the irradiance profile")
        self.angle_bins = QSpinBox()
        self.angle_bins.setRange(1, 100_000)
        self.angle_bins.setToolTip("Bins of the angular profile (-90..90 deg)")
        self.central = _dspin(0.001, 1.0, 3, "", "Central part of the detector used for uniformity figures")
        form = QFormLayout(self)
        head = QLabel("<b>Detector</b> (counts rays arriving from either side; ticks on its "
                      "back mark the start-to-end direction)")
        head.setWordWrap(True)
        form.addRow(head)
        for label, w in (("Name", self.name), ("Start x", self.sx), ("Start y", self.sy), ("End x", self.ex),
                         ("End y", self.ey), ("", self.absorbing), ("Position bins", self.bins),
                         ("Angle bins", self.angle_bins), ("Central fraction", self.central)):
            form.addRow(label, w)
        for w in (self.sx, self.sy, self.ex, self.ey, self.central):
            w.valueChanged.connect(lambda _v: self._commit())
        for w in (self.bins, self.angle_bins):
            w.editingFinished.connect(self._commit)
        self.absorbing.toggled.connect(lambda _b: self._commit())
        self.name.editingFinished.connect(self._commit)

    def _commit(self):
        scene = self.doc.scene
        d = scene.detectors[self.index]
        start, end = (self.sx.value(), self.sy.value()), (self.ex.value(), self.ey.value())
        if start == end:
            self.error("a detector needs two different end points")
            return
        name = self.name.text().strip() or d.name
        if bad_text(name):
            self.error(f"detector name: expected a name without {bad_text(name)}")
            name = d.name
        if name != d.name and name in {x.name for x in scene.detectors}:
            self.error(f"a detector called {name!r} already exists")
            name = d.name
        new = replace(d, name=name, start=start, end=end, absorbing=self.absorbing.isChecked(),
                      bins=self.bins.value(), angle_bins=self.angle_bins.value(),
                      central_fraction=self.central.value())
        if new != d:
            self.apply(edits.replace_detector(scene, self.index, new), f"edit detector {d.name}")

    def show(self, scene, index):
        self.index = index
        d = scene.detectors[index]
        for w, v in ((self.name, d.name), (self.sx, d.start[0]), (self.sy, d.start[1]), (self.ex, d.end[0]),
                     (self.ey, d.end[1]), (self.absorbing, d.absorbing), (self.bins, d.bins),
                     (self.angle_bins, d.angle_bins), (self.central, d.central_fraction)):
            _set(w, v)


class PropertiesPanel(QStackedWidget):
    """One page per kind of selection.  The panel is as tall as the page shown (a stack is as
    tall as its tallest page, which made the part page scroll as a whole under the source
    page's long form)."""

    def __init__(self, doc, message=lambda text: None, ask_material=None, parent=None):
        super().__init__(parent)
        self.doc = doc
        self.message = message
        self.ask_material = ask_material     # callable(taken) -> Material | None
        self.pages = {None: ScenePage(self), edits.PART: PartPage(self),
                      edits.SOURCE: SourcePage(self), edits.DETECTOR: DetectorPage(self)}
        for p in self.pages.values():
            self.addWidget(p)
        self.selection = None
        self._size_by(self.pages[None])

    def _size_by(self, page) -> None:
        for p in self.pages.values():
            policy = QSizePolicy.Preferred if p is page else QSizePolicy.Ignored
            p.setSizePolicy(policy, policy)
        self.updateGeometry()

    def show_selection(self, scene, selection) -> None:
        self.selection = selection
        kind, index = selection if selection else (None, 0)
        page = self.pages[kind]
        if page is not self.currentWidget():
            self.setCurrentWidget(page)
            self._size_by(page)
        page.show(scene, index)

    def sizeHint(self):
        page = self.currentWidget()
        return page.sizeHint() if page is not None else super().sizeHint()

    def minimumSizeHint(self):
        page = self.currentWidget()
        return page.minimumSizeHint() if page is not None else super().minimumSizeHint()

    def fill_materials(self, combo: QComboBox, scene) -> None:
        combo.blockSignals(True)
        combo.clear()
        combo.addItems(list(CATALOG) + [m for m in scene.materials if m not in CATALOG])
        combo.blockSignals(False)

    def define_material(self, for_part: int | None = None) -> None:
        if self.ask_material is None:
            return
        scene = self.doc.scene
        m = self.ask_material(set(CATALOG) | set(scene.materials))
        if m is None:
            return
        new = edits.set_material(scene, m.name, m)
        if isinstance(for_part, int) and for_part < len(new.parts):
            new = edits.replace_part(new, for_part, replace(new.parts[for_part], material=m.name))
        self.doc.apply(new, f"define material {m.name}")
