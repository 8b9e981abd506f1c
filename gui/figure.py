"""The drawing as a figure for a report: SVG of vector shapes only, and PNG rendered from it.

What is on the canvas (view range, parts, rays with their pens, marks, glyphs) is written as SVG
elements: paths for parts and rays, <circle> for escape rings and hit marks, text for the axes,
a title block (scene name, rays, date) and the legend.  No bitmaps, no view buttons.  The PNG
export renders the same SVG at the chosen size and resolution, so both look alike.
"""
from __future__ import annotations

import datetime as _dt
import math
from html import escape

import numpy as np
from PySide6.QtGui import QPainterPath

from . import style
from .canvas import KIND_COLOUR, KIND_LABEL, _detector_ticks, _source_path

TITLE_H = 46          # title block height (px of the figure's own units)
LEGEND_ROW_H = 18
MARGIN_L, MARGIN_R, MARGIN_B = 62, 14, 38
FONT = "DejaVu Sans, Arial, sans-serif"


def _hex(c) -> str:
    return f"#{c.red():02x}{c.green():02x}{c.blue():02x}"


class _Map:
    """Scene mm -> figure px, equal scale on x and y, centred in the plot box."""

    def __init__(self, view_range, box):
        (x0, x1), (y0, y1) = view_range
        bx, by, bw, bh = box
        self.s = min(bw / max(x1 - x0, 1e-12), bh / max(y1 - y0, 1e-12))
        self.cx, self.cy = (x0 + x1) / 2, (y0 + y1) / 2
        self.ox, self.oy = bx + bw / 2, by + bh / 2
        self.x0 = self.cx - bw / 2 / self.s
        self.x1 = self.cx + bw / 2 / self.s
        self.y0 = self.cy - bh / 2 / self.s
        self.y1 = self.cy + bh / 2 / self.s

    def x(self, v):
        return self.ox + (np.asarray(v, dtype=float) - self.cx) * self.s

    def y(self, v):
        return self.oy - (np.asarray(v, dtype=float) - self.cy) * self.s


def _num(v: float) -> str:
    """0.1 px is finer than any screen or print needs, and keeps the file small."""
    return f"{v:.1f}".rstrip("0").rstrip(".")


def _pairs_d(m: _Map, xs, ys) -> str:
    """Path data for point pairs (x0 y0 x1 y1 ...) as separate strokes."""
    X, Y = m.x(xs), m.y(ys)
    return " ".join(f"M{_num(X[i])} {_num(Y[i])}L{_num(X[i + 1])} {_num(Y[i + 1])}" for i in range(0, len(X) - 1, 2))


def _qpath_d(m: _Map, path: QPainterPath) -> str:
    out, i, n = [], 0, path.elementCount()
    while i < n:
        e = path.elementAt(i)
        if e.isMoveTo():
            out.append(f"M{_num(m.x(e.x))} {_num(m.y(e.y))}")
        elif e.isLineTo():
            out.append(f"L{_num(m.x(e.x))} {_num(m.y(e.y))}")
        else:        # a curve: this element and the two data elements after it
            pts = [path.elementAt(i + k) for k in range(3) if i + k < n]
            out.append("C" + " ".join(f"{_num(m.x(p.x))} {_num(m.y(p.y))}" for p in pts))
            i += 2
        i += 1
    return "".join(out)


def _ticks(lo: float, hi: float, approx: int = 7) -> list[float]:
    """Round tick values (1, 2, 5 x 10^k) across [lo, hi] (common practice for axis labels)."""
    span = max(hi - lo, 1e-12)
    raw = span / approx
    mag = 10 ** math.floor(math.log10(raw))
    step = min((k * mag for k in (1, 2, 5, 10) if k * mag >= raw), default=10 * mag)
    first = math.ceil(lo / step) * step
    return [round(first + k * step, 10) for k in range(int((hi - first) / step) + 1)]


def figure_svg(canvas, width: float, height: float, title: str = "", subtitle: str = "") -> str:
    """The canvas's current view as SVG text of `width` x `height` px."""
    title_h = TITLE_H if title or subtitle else 0
    # the legend's height sets the plot box and so the figure's scale, which sets the thinning,
    # which the legend names: lay it out with the longer note, then with the drawing's own
    rows = _legend_rows(_legend_items(canvas, thinned=True), width - 20)
    legend_h = LEGEND_ROW_H * len(rows) + 6
    box = (MARGIN_L, title_h + 6, width - MARGIN_L - MARGIN_R, height - title_h - 6 - MARGIN_B - legend_h)
    m = _Map(canvas.view.viewRange(), box)
    # crowded fans are thinned for the figure's own scale (its 1-unit lines, mm per unit), as
    # the canvas thins them for its pixels: the same at the same scale, and a figure laid out
    # smaller or larger than the screen reads as the canvas would at that zoom
    drawing = canvas.drawing_for(1.0 / m.s)
    rows = _legend_rows(_legend_items(canvas, thinned=drawing.n_thinned > 0), width - 20)
    bx, by, bw, bh = box
    out = [f'<svg xmlns="http://www.w3.org/2000/svg" version="1.1" width="{_num(width)}" height="{_num(height)}" '
           f'viewBox="0 0 {_num(width)} {_num(height)}" font-family="{FONT}">',
           f"<title>{escape(title or 'ray trace drawing')}</title>",
           f'<rect x="0" y="0" width="{_num(width)}" height="{_num(height)}" fill="#ffffff"/>',
           f'<defs><clipPath id="plot"><rect x="{_num(bx)}" y="{_num(by)}" width="{_num(bw)}" '
           f'height="{_num(bh)}"/></clipPath></defs>']
    out.append(f'<rect x="{_num(bx)}" y="{_num(by)}" width="{_num(bw)}" height="{_num(bh)}" '
               f'fill="{_hex(style.BACKGROUND)}"/>')
    out.append('<g clip-path="url(#plot)">')
    xt, yt = _ticks(m.x0, m.x1, max(3, int(bw / 90))), _ticks(m.y0, m.y1, max(3, int(bh / 70)))
    if canvas._grid_on:
        grid = [f"M{_num(m.x(v))} {_num(by)}V{_num(by + bh)}" for v in xt]
        grid += [f"M{_num(bx)} {_num(m.y(v))}H{_num(bx + bw)}" for v in yt]
        out.append(f'<path d="{"".join(grid)}" stroke="{_hex(style.GRID_MAJOR)}" stroke-width="0.8" fill="none"/>')
    out += _parts_svg(canvas, m)
    strokes = [(z, "rays", colour, 1.0, x, y) for _, _, colour, z, x, y in canvas.ray_strokes(drawing)]
    cues = canvas._cues
    if cues.xData is not None and len(cues.xData):
        pen = cues.opts["pen"]
        strokes.append((cues.zValue(), "cues", pen.color(), pen.widthF(), cues.xData, cues.yData))
    for _, kind, colour, pen_w, x, y in sorted(strokes, key=lambda s: s[0]):
        if len(x):      # (a class per kind: someone editing the figure can pick the rays out)
            out.append(f'<path class="{kind}" d="{_pairs_d(m, x, y)}" stroke="{_hex(colour)}" '
                       f'stroke-width="{_num(max(pen_w, 1.0))}" fill="none"/>')
    out += _marks_svg(canvas, m)
    out += _glyphs_svg(canvas, m)
    out.append("</g>")
    # white over the margins as well: renderers without clipPath support (Qt's) stop there too
    out.append(f'<path d="M0 0H{_num(width)}V{_num(by)}H0Z M0 {_num(by + bh)}H{_num(width)}V{_num(height)}H0Z '
               f'M0 0H{_num(bx)}V{_num(height)}H0Z M{_num(bx + bw)} 0H{_num(width)}V{_num(height)}H{_num(bx + bw)}Z" '
               f'fill="#ffffff"/>')
    if title_h:
        out.append(f'<text x="10" y="20" font-size="15" font-weight="bold">{escape(title)}</text>')
        out.append(f'<text x="10" y="38" font-size="11" fill="#444444">{escape(subtitle)}</text>')
    out += _axes_svg(m, box, xt, yt)
    out += _legend_svg(rows, 10, height - legend_h + 4)
    out.append("</svg>")
    return "\n".join(out)


def _parts_svg(canvas, m: _Map) -> list[str]:
    out = []
    tol = 2e-4 * max(canvas.scene.size_hint(), 1e-6)
    for part in canvas.scene.parts:
        d = ""
        for loop in part.loops:
            pts = loop.coords(tol)
            d += "M" + "L".join(f"{_num(m.x(x))} {_num(m.y(y))}" for x, y in pts) + "Z"
        tint, edge = style.material_tint(part.material), style.material_outline(part.material)
        out.append(f'<path d="{d}" fill="{_hex(tint)}" fill-opacity="{tint.alpha() / 255:.3f}" '
                   f'fill-rule="evenodd" stroke="{_hex(edge)}" stroke-width="1.4"/>')
    for p in canvas.problems:
        for area in p.areas:
            d = "M" + "L".join(f"{_num(m.x(x))} {_num(m.y(y))}" for x, y in area) + "Z"
            out.append(f'<path d="{d}" fill="{_hex(style.PROBLEM)}" fill-opacity="0.3" '
                       f'stroke="{_hex(style.PROBLEM)}" stroke-width="1.5"/>')
    return out


def _marks_svg(canvas, m: _Map) -> list[str]:
    d = canvas.drawing
    out = []
    hit = _hex(style.HIT)
    off = (0.5 * style.DETECTOR_PX + 0.5 * style.HIT_PX + 1) / m.s     # mm, beside the line
    nx = d.hits_nx if len(d.hits_nx) == len(d.hits_x) else np.zeros(len(d.hits_x))
    ny = d.hits_ny if len(d.hits_ny) == len(d.hits_y) else np.zeros(len(d.hits_y))
    X, Y = m.x(d.hits_x + off * nx), m.y(d.hits_y + off * ny)
    if len(X):
        out.append(f'<g fill="{hit}" stroke="none">')
        out += [f'<circle cx="{_num(a)}" cy="{_num(b)}" r="{_num(0.5 * style.HIT_PX)}"/>' for a, b in zip(X, Y)]
        out.append("</g>")
    if canvas.escape_xy:
        out.append(f'<g fill="none" stroke="{_hex(style.ESCAPE_MARK)}" stroke-width="2">')
        for r in canvas.escape_rings:
            out.append(f'<circle cx="{_num(m.x(r.x))}" cy="{_num(m.y(r.y))}" r="{_num(0.5 * canvas.escape_ring_px(r.share))}">'
                       f"<title>{escape(r.label)}: {100 * r.share:.2f} %</title></circle>")
        out.append("</g>")
    return out


def _glyphs_svg(canvas, m: _Map) -> list[str]:
    out = []
    g = style.GLYPH_PX / m.s
    for src in canvas.scene.sources:
        out.append(f'<path d="{_qpath_d(m, _source_path(canvas, src, g))}" fill="{_hex(style.SOURCE)}" '
                   f'stroke="{_hex(style.SOURCE_EDGE)}" stroke-width="1.3"/>')
    for det in canvas.scene.detectors:
        colour = _hex(style.DETECTOR)
        out.append(f'<path d="{_qpath_d(m, _detector_ticks(det, g))}" fill="none" stroke="{colour}" stroke-width="1.2"/>')
        dash = "" if det.absorbing else ' stroke-dasharray="8 4"'
        out.append(f'<path d="M{_num(m.x(det.start[0]))} {_num(m.y(det.start[1]))}L{_num(m.x(det.end[0]))} '
                   f'{_num(m.y(det.end[1]))}" stroke="{colour}" stroke-width="{_num(style.DETECTOR_PX)}"{dash}/>')
    return out


def _axes_svg(m: _Map, box, xt, yt) -> list[str]:
    bx, by, bw, bh = box
    axis = _hex(style.AXIS)
    out = [f'<rect x="{_num(bx)}" y="{_num(by)}" width="{_num(bw)}" height="{_num(bh)}" fill="none" '
           f'stroke="{axis}" stroke-width="1"/>']
    ticks = "".join(f"M{_num(m.x(v))} {_num(by + bh)}v5" for v in xt)
    ticks += "".join(f"M{_num(bx)} {_num(m.y(v))}h-5" for v in yt)
    out.append(f'<path d="{ticks}" stroke="{axis}" stroke-width="1"/>')
    out.append(f'<g font-size="11" fill="{axis}" text-anchor="middle">')
    out += [f'<text x="{_num(m.x(v))}" y="{_num(by + bh + 17)}">{v:g}</text>' for v in xt]
    out.append(f'<text x="{_num(bx + bw / 2)}" y="{_num(by + bh + 33)}">x (mm)</text>')
    out.append("</g>")
    out.append(f'<g font-size="11" fill="{axis}" text-anchor="end">')
    out += [f'<text x="{_num(bx - 8)}" y="{_num(m.y(v) + 4)}">{v:g}</text>' for v in yt]
    out.append("</g>")
    out.append(f'<text x="14" y="{_num(by + bh / 2)}" font-size="11" fill="{axis}" text-anchor="middle" '
               f'transform="rotate(-90 14 {_num(by + bh / 2)})">y (mm)</text>')
    return out


def _legend_items(canvas, thinned: bool = False) -> list[tuple[str, str, str]]:
    """(shape, colour, text) as on the legend under the drawing; `thinned`: the figure's drawing
    left legs of crowded fans out."""
    if canvas.colour_by_wavelength:
        items = [("line", "#7f3fbf", "rays coloured by wavelength (380-780 nm)")]
    else:
        items = [("line", _hex(KIND_COLOUR[k]), KIND_LABEL[k]) for k in ("ray", "tir", "escaping")]
    items[-1] = (*items[-1][:2], items[-1][2] + (" (all fade with flux; crowded fans thinned)" if thinned
                                                 else " (all fade with flux)"))
    return items + [("dot", _hex(style.HIT), "detector hit"), ("ring", _hex(style.ESCAPE_MARK), "escape (size = share)"),
                    ("arrow", _hex(style.CUE), "direction"), ("dot", _hex(style.SOURCE), "source"),
                    ("bar", _hex(style.DETECTOR), "detector")]


LEGEND_FONT_PX = 11
# each swatch's inked width: drawn flush with its item's left edge, the text a fixed step after
# it and the next item a fixed gap after the text, so every gap on the page looks the same
SWATCH_W = {"line": 22.0, "bar": 22.0, "dot": 9.0, "ring": 12.0, "arrow": 16.0}
SWATCH_TEXT_GAP = 5.0
LEGEND_GAP = 14.0


def _text_width(text: str) -> float:
    """The legend text's width in the figure's px, measured in the font the figure names (Qt
    renders the PNG with it); an estimate per character left gaps from 7 to 65 px."""
    from PySide6.QtGui import QFont, QFontMetricsF
    font = QFont(FONT.split(",")[0].strip())
    font.setPixelSize(LEGEND_FONT_PX)
    return QFontMetricsF(font).horizontalAdvance(text)


def _item_width(shape: str, text: str) -> float:
    return SWATCH_W[shape] + SWATCH_TEXT_GAP + _text_width(text) + LEGEND_GAP


def _legend_rows(items, width: float) -> list[list[tuple[str, str, str]]]:
    rows, row, used = [], [], 0.0
    for it in items:
        w = _item_width(it[0], it[2])
        if row and used + w - LEGEND_GAP > width:      # (no gap after the row's last item)
            rows.append(row)
            row, used = [], 0.0
        row.append(it)
        used += w
    return rows + [row] if row else rows


def _legend_svg(rows, x0: float, y0: float) -> list[str]:
    out = [f'<g font-size="{LEGEND_FONT_PX}" fill="#222222">']
    for r, row in enumerate(rows):
        x, y = x0, y0 + r * LEGEND_ROW_H + 9
        for shape, colour, text in row:
            if shape in ("line", "bar"):
                out.append(f'<path d="M{_num(x)} {_num(y)}h22" stroke="{colour}" stroke-width="{3 if shape == "line" else 5}"/>')
            elif shape == "dot":
                out.append(f'<circle cx="{_num(x + 4.5)}" cy="{_num(y)}" r="4.5" fill="{colour}"/>')
            elif shape == "ring":
                out.append(f'<circle cx="{_num(x + 6)}" cy="{_num(y)}" r="5" fill="none" stroke="{colour}" stroke-width="2"/>')
            else:
                out.append(f'<path d="M{_num(x)} {_num(y)}h16M{_num(x + 10)} {_num(y - 4)}l6 4l-6 4" '
                           f'stroke="{colour}" stroke-width="1.3" fill="none"/>')
            tx = x + SWATCH_W[shape] + SWATCH_TEXT_GAP
            out.append(f'<text x="{_num(tx)}" y="{_num(y + 4)}">{escape(text)}</text>')
            x += _item_width(shape, text)
    out.append("</g>")
    return out


def figure_subtitle(result, when: _dt.datetime | None = None) -> str:
    """'2,000 source rays, 132,189 segments; traced 2026-12-02 14:05' for the title block."""
    when = when or _dt.datetime.now()
    rays = (f"{result.stats['source_rays']:,} source rays, {result.stats['segments']:,} segments; "
            if result is not None else "not traced; ")
    return f"{rays}{when:%Y-%m-%d %H:%M}"


def render_png(svg_text: str, path, width_px: int, height_px: int, dpi: float) -> None:
    """Render the SVG to a PNG of width_px x height_px pixels, marked with `dpi`."""
    from PySide6.QtCore import QByteArray, Qt
    from PySide6.QtGui import QImage, QPainter
    from PySide6.QtSvg import QSvgRenderer

    from raytrace.atomic import atomic_write

    renderer = QSvgRenderer(QByteArray(svg_text.encode("utf-8")))
    if not renderer.isValid():
        raise OSError(f"could not draw the figure for {path}")
    img = QImage(int(width_px), int(height_px), QImage.Format_ARGB32)
    img.fill(Qt.white)
    per_metre = int(round(dpi / 0.0254))
    img.setDotsPerMeterX(per_metre)
    img.setDotsPerMeterY(per_metre)
    painter = QPainter(img)
    painter.setRenderHint(QPainter.Antialiasing)
    renderer.render(painter)
    painter.end()

    def write(tmp):
        if not img.save(tmp, "PNG"):
            raise OSError(f"could not encode the image for {path}")
    atomic_write(path, write)
