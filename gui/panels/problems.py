"""The Problems list: what stops the scene from being traced, one row each; a click selects the
part concerned so it can be fixed in the drawing or the Selection form."""
from __future__ import annotations

from PySide6.QtCore import Qt, Signal
from PySide6.QtWidgets import QLabel, QListWidget, QListWidgetItem, QVBoxLayout, QWidget

from ..edge_fade import add_edge_fades


class ProblemsPanel(QWidget):
    part_chosen = Signal(int)

    def __init__(self, parent=None):
        super().__init__(parent)
        self.summary = QLabel("")
        self.summary.setTextFormat(Qt.PlainText)
        self.summary.setWordWrap(True)
        self.list = QListWidget()
        add_edge_fades(self.list)
        self.list.setWordWrap(True)
        self.list.setToolTip("Click a problem to select the part it concerns")
        self.list.itemClicked.connect(self._clicked)
        lay = QVBoxLayout(self)
        lay.setContentsMargins(2, 2, 2, 2)
        lay.addWidget(self.summary)
        lay.addWidget(self.list, 1)
        self.problems = []
        self.show_problems([])

    def show_problems(self, problems) -> None:
        problems = list(problems)
        if problems == self.problems and self.summary.text():
            # every edit asks again; refilling the same list and text would lay out the whole
            # results dock anew (a few ms of the UI thread while the new trace runs)
            return
        self.problems = problems
        self.list.clear()
        for p in self.problems:
            item = QListWidgetItem(p.text)      # plain text: "<part 'a' ...>" shows as written
            item.setToolTip(p.text)
            item.setData(Qt.UserRole, p.parts[0] if p.parts else -1)
            self.list.addItem(item)
        self.summary.setText(
            f"{len(self.problems)} problem(s) to fix before this scene can be traced; they are "
            "marked red in the drawing." if self.problems else "No problems: the scene can be traced.")

    def _clicked(self, item) -> None:
        index = item.data(Qt.UserRole)
        if isinstance(index, int) and index >= 0:
            self.part_chosen.emit(index)
