"""Where the flux went: efficiency per detector, loss per face, absorption and truncation."""
from __future__ import annotations

from PySide6.QtCore import Qt
from PySide6.QtWidgets import QLabel, QTreeWidget, QTreeWidgetItem, QVBoxLayout, QWidget

from raytrace.ledger import ABSORBED, DETECTOR, ESCAPED, TRUNCATED

SECTIONS = ((DETECTOR, "Reached detectors"), (ESCAPED, "Escaped (by the last face met)"),
            (ABSORBED, "Absorbed"), (TRUNCATED, "Truncated"))


class LedgerPanel(QWidget):
    def __init__(self, parent=None):
        super().__init__(parent)
        self.tree = QTreeWidget()
        self.tree.setColumnCount(4)
        self.tree.setHeaderLabels(["where", "flux", "share", "\u00b1 error"])
        self.tree.setRootIsDecorated(False)
        self.tree.setToolTip("Every unit of source flux ends in one of these rows; they add up to "
                             "the source flux.  \u00b1 error: the standard error of the share, in "
                             "points of % (hover the summary for what it means in this trace).")
        self.summary = QLabel("No trace yet")
        self.summary.setWordWrap(True)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.summary)
        lay.addWidget(self.tree, 1)
        self.rows: list[tuple[str, float, float, float]] = []   # (label, flux, share, error) as shown

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
            head.setTextAlignment(1, Qt.AlignRight)
            head.setTextAlignment(2, Qt.AlignRight)
            self.tree.addTopLevelItem(head)
            for b in rows:
                label = _short_label(b)
                err = L.share_error(b.label)
                item = QTreeWidgetItem(["    " + label, f"{b.flux:.5g}", f"{100 * b.flux / total:.2f} %",
                                        _points(err)])
                for c in (1, 2, 3):
                    item.setTextAlignment(c, Qt.AlignRight)
                item.setToolTip(0, b.label)
                self.tree.addTopLevelItem(item)
                self.rows.append((b.label, b.flux, b.flux / total, err))
        for c in range(4):
            self.tree.resizeColumnToContents(c)
        st = result.stats
        eff = ", ".join(f"{d.name}: {100 * result.efficiency(d.name):.2f} % \u00b1 "
                        f"{_points(result.efficiency_error(d.name))}" for d in result.compiled.detectors)
        self.summary.setText(
            f"<b>Efficiency</b> {eff or '(no detector)'}<br>"
            f"{st['source_rays']:,} source rays, {st['segments']:,} segments; "
            f"ledger closes to {L.total - L.source_flux:.1e}")
        self.summary.setToolTip("\u00b1: " + result.error_meaning + ".  Trace more rays to shrink it.")

    def efficiencies(self) -> dict[str, float]:
        return {label[len("detector "):]: share for label, _, share in self.rows if label.startswith("detector ")}


def _points(error: float) -> str:
    """A share's standard error in points of % ("" when it cannot be estimated)."""
    return "" if error != error else f"{100 * error:.2f}"


def _short_label(b) -> str:
    if b.kind == DETECTOR:
        return b.detector
    if b.kind == ESCAPED:
        return f"{b.part} / {b.face}" if b.part else "without meeting anything"
    if b.kind == ABSORBED:
        return f"{b.part} (bulk)" if b.face == "bulk" else f"{b.part} / {b.face}"
    return b.reason
