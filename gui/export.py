"""Exports that never leave a half-written file: write beside the target, then rename."""
from __future__ import annotations


from raytrace.atomic import atomic_write as _atomic
from raytrace.raytable import write_csv


def save_widget_png(widget, path) -> None:
    """A PNG of a widget as it is on screen (the canvas with its legend, or the whole window)."""
    def write(tmp):
        if not widget.grab().save(tmp, "PNG"):
            raise OSError(f"could not encode the image for {path}")
    _atomic(path, write)


def save_widget_svg(widget, path, title: str = "") -> None:
    """Vector drawing of a widget (the canvas): rays, parts and axes stay sharp at any size."""
    from PySide6.QtCore import QPoint, QRect, QSize
    from PySide6.QtGui import QPainter
    from PySide6.QtSvg import QSvgGenerator

    def write(tmp):
        gen = QSvgGenerator()
        gen.setFileName(tmp)
        gen.setSize(QSize(widget.width(), widget.height()))
        gen.setViewBox(QRect(0, 0, widget.width(), widget.height()))
        gen.setTitle(title or "ray trace drawing")
        painter = QPainter()
        if not painter.begin(gen):
            raise OSError(f"could not start the SVG file for {path}")
        try:
            widget.render(painter, QPoint(0, 0))
        finally:
            painter.end()
    _atomic(path, write)


def save_ray_table_csv(result, path) -> int:
    """Write the recorded ray segments as CSV; returns the number of rows."""
    n = write_csv(result, path)      # streamed, atomic
    if n is None:
        raise ValueError("this trace recorded no ray segments (set Drawn rays above 0)")
    return n
