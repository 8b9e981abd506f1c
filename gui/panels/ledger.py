"""Where the flux went: efficiency per detector, loss per face, absorption and truncation."""
from __future__ import annotations

import html

from PySide6.QtCore import Qt, QTimer
from PySide6.QtWidgets import (QHeaderView, QLabel, QStyle, QStyledItemDelegate, QStyleOptionViewItem,
                               QTreeWidget, QTreeWidgetItem, QTreeWidgetItemIterator, QVBoxLayout, QWidget)

from raytrace.ledger import ABSORBED, DETECTOR, ESCAPED, TRUNCATED

from ..edge_fade import add_edge_fades

SECTIONS = ((DETECTOR, "Reached detectors"), (ESCAPED, "Escaped (by the last face met)"),
            (ABSORBED, "Absorbed"), (TRUNCATED, "Truncated"))


class _WrappingRows(QStyledItemDelegate):
    """Row heights for word-wrapped names: Qt's tree asks the size of an item without its column
    width, so a wrapped name would get one line's height; give it the width it is drawn in."""

    def __init__(self, tree: QTreeWidget):
        super().__init__(tree)
        self.tree = tree

    def sizeHint(self, option, index):
        if index.column() != 0:             # figures: one line, their columns fit them
            return super().sizeHint(option, index)
        opt = QStyleOptionViewItem(option)
        self.initStyleOption(opt, index)
        width = self.tree.header().sectionSize(0)
        depth, parent = 0, index.parent()
        while parent.isValid():
            depth, parent = depth + 1, parent.parent()
        width -= depth * self.tree.indentation()
        opt.rect.setWidth(max(width, 1))
        opt.rect.setHeight(10_000)
        return self.tree.style().sizeFromContents(QStyle.CT_ItemViewItem, opt, opt.rect.size(), self.tree)


class LedgerPanel(QWidget):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.tree = QTreeWidget()
        self.tree.setColumnCount(4)
        self.tree.setHeaderLabels(["where", "flux", "share", "\u00b1 error"])
        self.tree.setRootIsDecorated(False)
        self.tree.setIndentation(12)        # buckets are children of their section: a wrapped
        self.tree.setExpandsOnDoubleClick(False)   # name keeps its indent on every line
        self.tree.setUniformRowHeights(False)
        self.tree.setWordWrap(True)         # long bucket names wrap onto more lines, never "..."
        self.tree.setTextElideMode(Qt.ElideNone)
        self.tree.setItemDelegate(_WrappingRows(self.tree))
        self.tree.setAlternatingRowColors(True)     # where a wrapped name ends and the next begins
        head = self.tree.header()           # the figures always show; names take the rest and wrap
        head.setStretchLastSection(False)
        head.setSectionResizeMode(0, QHeaderView.Stretch)
        head.setSectionResizeMode(1, QHeaderView.ResizeToContents)
        head.setSectionResizeMode(2, QHeaderView.ResizeToContents)
        head.setSectionResizeMode(3, QHeaderView.ResizeToContents)
        self.tree.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
        self.tree.setStyleSheet("QTreeWidget::item { padding: 0px; }")   # every row fits at 1024 x 700
        # a narrower name column needs taller rows: lay the rows out again once resizing settles
        self._relayout = QTimer(self, singleShot=True, interval=0, timeout=self.tree.doItemsLayout)
        head.sectionResized.connect(lambda *_: self._relayout.start())
        self.tree.setToolTip("Every unit of source flux ends in one of these rows; they add up to "
                             "the source flux.  \u00b1 error: the standard error of the share, in "
                             "points of % (hover the summary for what it means in this trace).")
        add_edge_fades(self.tree)
        self.summary = QLabel("No trace yet")
        self.summary.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.summary)
        lay.addWidget(self.tree, 1)
        self.rows: list[tuple[str, float, float, float]] = []   # (label, flux, share, error) as shown

    # a narrow panel (a 1024 px window) gives the names the flux column's width: the share says
    # the same in %, and each share's tooltip still gives the flux
    NARROW_PX = 420

    def resizeEvent(self, ev) -> None:
        super().resizeEvent(ev)
        narrow = self.width() < self.NARROW_PX
        if narrow != self.tree.isColumnHidden(1):
            self.tree.setColumnHidden(1, narrow)
            self._relayout.start()

    def show_result(self, result) -> None:
        self.tree.clear()
        self.rows = []
        if result is None:
            self.summary.setText("No trace yet")
            return
        L = result.ledger
        total = L.source_flux or 1.0
        for kind, heading in SECTIONS:
            rows = [b for b in L.buckets if b.kind == kind]
            if not rows:
                continue
            head = QTreeWidgetItem([heading, f"{sum(b.flux for b in rows):.5g}",
                                    f"{100 * sum(b.flux for b in rows) / total:.2f} %", ""])
            f = head.font(0)
            f.setBold(True)
            for c in range(4):
                head.setFont(c, f)
            head.setTextAlignment(1, Qt.AlignRight | Qt.AlignTop)
            head.setTextAlignment(2, Qt.AlignRight | Qt.AlignTop)
            head.setToolTip(2, f"flux {sum(b.flux for b in rows):.5g}")
            self.tree.addTopLevelItem(head)
            for b in rows:
                label = _breakable(_short_label(b))
                err = L.share_error(b.label)
                item = QTreeWidgetItem(head, [label, f"{b.flux:.5g}", f"{100 * b.flux / total:.2f} %",
                                        _points(err)])
                for c in (1, 2, 3):                 # figures beside the first line of the name
                    item.setTextAlignment(c, Qt.AlignRight | Qt.AlignTop)
                item.setToolTip(0, b.label)
                item.setToolTip(2, f"flux {b.flux:.5g}")
                self.rows.append((b.label, b.flux, b.flux / total, err))
            head.setExpanded(True)
        # (no resizeColumnToContents: the figures' columns resize to their contents by their
        # mode and the names' column stretches; asking again laid every row out 4 more times)
        st = result.stats
        # each detector's figure is kept whole on one line: a narrow panel wraps between
        # detectors, never inside "name: 67.83 % ± 0.66"
        eff = ", ".join('<span style="white-space:nowrap">' + html.escape(
            f"{d.name}: {100 * result.efficiency(d.name):.2f} % \u00b1 {_points(result.efficiency_error(d.name))}")
            + "</span>" for d in result.compiled.detectors)
        gap = L.total - L.source_flux
        # two lines in a 1024 px window: the efficiency, then the counts and the closure
        self.summary.setText(
            f"<b>Efficiency</b> {eff or '(no detector)'}<br>"
            f"{st['source_rays']:,} rays, {st['segments']:,} segments; ledger closes to {_closure(gap)}")
        self.summary.setToolTip(
            "\u00b1: " + result.error_meaning + ".  Trace more rays to shrink it.\n"
            f"{st['source_rays']:,} source rays traced in {st['segments']:,} segments.  The rows add "
            f"up to the source flux to within {gap:.1e} (the ledger closes: no flux lost or made "
            "by the trace).")

    def items(self) -> list[QTreeWidgetItem]:
        """Every row as shown, section headings and buckets, top to bottom."""
        out, it = [], QTreeWidgetItemIterator(self.tree)
        while it.value():
            out.append(it.value())
            it += 1
        return out

    def efficiencies(self) -> dict[str, float]:
        return {label[len("detector "):]: share for label, _, share, _err in self.rows if label.startswith("detector ")}


def _closure(gap: float) -> str:
    """How far the rows' sum is from the source flux: 0, or its order of magnitude."""
    return "0" if gap == 0 else f"{gap:.0e}"


def _points(error: float) -> str:
    """A share's standard error in points of % ("" when it cannot be estimated)."""
    return "" if error != error else f"{100 * error:.2f}"


def _breakable(text: str) -> str:
    """A name that may wrap after '_', '/', '.' or '-' too (a zero-width space there), so a long
    name without spaces such as a file's face id still wraps instead of being cut."""
    for ch in "_/.-":
        text = text.replace(ch, ch + "\u200b")
    return text


def _short_label(b) -> str:
    if b.kind == DETECTOR:
        return b.detector
    if b.kind == ESCAPED:
        return f"{b.part} / {b.face}" if b.part else "without meeting anything"
    if b.kind == ABSORBED:
        return f"{b.part} (bulk)" if b.face == "bulk" else f"{b.part} / {b.face}"
    return b.reason
