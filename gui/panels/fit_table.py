"""A table that fits a narrow panel: its columns share the width it has (no sideways scrolling),
rows are compact, and it says how tall it wants to be for a number of rows."""
from __future__ import annotations

from PySide6.QtCore import QEvent, QObject, Qt
from PySide6.QtWidgets import QHeaderView, QTableWidget

# a column is never squeezed below this (its text is elided; the cell's tooltip has it whole)
MIN_COLUMN_PX = 28


class _Refit(QObject):
    """Fits the columns again whenever the table's viewport changes width."""

    def __init__(self, table: QTableWidget, flexible: int):
        super().__init__(table)
        self.table, self.flexible = table, flexible
        self._width = -1

    def eventFilter(self, obj, ev):
        if ev.type() == QEvent.Resize and obj.width() != self._width:
            self._width = obj.width()
            fit_columns(self.table, self.flexible)
        return False


def make_fitting(table: QTableWidget, flexible: int) -> None:
    """Set `table` up to fit its width: column `flexible` (a text column) takes the width left
    over, or gives it up first when there is too little."""
    table.setHorizontalScrollBarPolicy(Qt.ScrollBarAlwaysOff)
    table.setTextElideMode(Qt.ElideRight)
    header = table.horizontalHeader()
    header.setSectionResizeMode(QHeaderView.Fixed)
    header.setStretchLastSection(False)
    header.setMinimumSectionSize(MIN_COLUMN_PX)
    rows = table.verticalHeader()
    rows.setSectionResizeMode(QHeaderView.Fixed)
    # a line of text and a combo box's frame, not the style's roomier default
    rows.setDefaultSectionSize(max(table.fontMetrics().height() + 5, 20))
    table.viewport().installEventFilter(_Refit(table, flexible))


def fit_columns(table: QTableWidget, flexible: int) -> None:
    """Columns as wide as their contents when that fits the viewport (the flexible column gets
    the rest); else the flexible column shrinks to what its header needs, then every column in
    proportion, so the last one always ends inside the panel."""
    n = table.columnCount()
    if n == 0:
        return
    header = table.horizontalHeader()
    avail = table.viewport().width()
    need = [0 if table.isColumnHidden(c) else
            max(table.sizeHintForColumn(c), header.sectionSizeHint(c), MIN_COLUMN_PX) for c in range(n)]
    widths = list(need)
    others = sum(need) - need[flexible]
    floor = max(header.sectionSizeHint(flexible), MIN_COLUMN_PX)
    if others + need[flexible] <= avail:
        widths[flexible] = avail - others
    elif others + floor <= avail:
        widths[flexible] = avail - others
    else:
        widths[flexible] = floor
        scale = avail / max(sum(widths), 1)
        widths = [w and max(MIN_COLUMN_PX, int(w * scale)) for w in widths]
        while sum(widths) > avail and max(widths) > MIN_COLUMN_PX:     # rounding and floors
            widths[widths.index(max(widths))] -= 1
    for c, w in enumerate(widths):
        if w:
            header.resizeSection(c, w)


def height_for_rows(table: QTableWidget, rows: int) -> int:
    """The table's height showing its header and `rows` rows."""
    return (table.horizontalHeader().sizeHint().height() + rows * table.verticalHeader().defaultSectionSize()
            + 2 * table.frameWidth() + 2)
