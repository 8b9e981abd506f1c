"""Exports that never leave a half-written file: write beside the target, then rename."""
from __future__ import annotations


from raytrace.atomic import atomic_write as _atomic
from raytrace.atomic import atomic_write_text
from raytrace.raytable import write_csv


def save_widget_png(widget, path) -> None:
    """A PNG of a widget as it is on screen (the canvas with its legend, or the whole window)."""
    def write(tmp):
        if not widget.grab().save(tmp, "PNG"):
            raise OSError(f"could not encode the image for {path}")
    _atomic(path, write)


def save_figure_svg(canvas, path, title: str = "", subtitle: str = "") -> None:
    """The drawing as SVG of vector shapes only, at the canvas's size, with a title block."""
    from .figure import figure_svg
    size = canvas.plot.size()
    text = figure_svg(canvas, size.width(), size.height(), title, subtitle)
    atomic_write_text(path, text)


def save_figure_png(canvas, path, width_px: int, height_px: int, dpi: float = 96.0,
                    title: str = "", subtitle: str = "") -> None:
    """The drawing as a PNG of width_px x height_px at `dpi`: laid out at 96 dpi units, so text
    and lines keep their printed size whatever the resolution."""
    from .figure import figure_svg, render_png
    scale = 96.0 / dpi
    text = figure_svg(canvas, width_px * scale, height_px * scale, title, subtitle)
    render_png(text, path, width_px, height_px, dpi)


def save_ray_table_csv(result, path) -> int:
    """Write the recorded ray segments as CSV; returns the number of rows."""
    n = write_csv(result, path)      # streamed, atomic
    if n is None:
        raise ValueError("this trace recorded no ray segments (set Drawn rays above 0)")
    return n
