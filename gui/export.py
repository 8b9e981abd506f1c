"""Exports that never leave a half-written file: write beside the target, then rename."""
from __future__ import annotations

import os
import tempfile
from pathlib import Path

from raytrace.raytable import ray_table


def _atomic(path: str | os.PathLike, write) -> None:
    """Call write(temp_path) for a temporary file next to `path`, then rename it over `path`."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=path.suffix, dir=str(path.parent or "."))
    os.close(fd)
    try:
        write(tmp)
        if os.path.getsize(tmp) == 0:
            raise OSError(f"nothing was written to {path}")
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.chmod(tmp, _file_mode(path))
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def _file_mode(path: Path) -> int:
    """The mode a new file would get (temporary files start private), or the old file's mode."""
    try:
        return path.stat().st_mode & 0o777
    except OSError:
        umask = os.umask(0)
        os.umask(umask)
        return 0o666 & ~umask


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
    table = ray_table(result)
    if table is None:
        raise ValueError("this trace recorded no ray segments (set Drawn rays above 0)")
    table.to_csv(path)      # atomic inside raytable
    return len(table)
