"""Colours and sizes of the drawing, in one place so canvas, legend and exports agree."""
from __future__ import annotations

import zlib

from PySide6.QtGui import QColor

BACKGROUND = QColor(250, 250, 246)
AXIS = QColor(60, 60, 60)
GRID_MAJOR = QColor(212, 212, 204)
GRID_MINOR = QColor(238, 238, 232)

RAY = QColor(222, 118, 0)          # rays travelling on (refracted, reflected, from the source)
ESCAPING = QColor(214, 40, 90)     # the last leg of a ray that leaves the scene
TIR = QColor(20, 110, 230)         # legs that began with total internal reflection
HIT = QColor(120, 30, 170)          # points where rays reached a detector
ESCAPE_MARK = QColor(214, 40, 90)  # faces where flux escapes
SOURCE = QColor(255, 196, 0)
SOURCE_EDGE = QColor(120, 80, 0)
DETECTOR = QColor(0, 128, 120)
HANDLE = QColor(255, 255, 255)
HANDLE_EDGE = QColor(30, 30, 30)
SELECTED = QColor(255, 60, 0)
PREVIEW = QColor(90, 90, 90)

GLYPH_PX = 14        # size of source and detector glyphs on screen
HANDLE_PX = 9
PICK_PX = 8          # how close the cursor must be to pick a vertex, face or handle

SNAP_MARK = QColor(0, 150, 60)     # where a drawn point snaps to a vertex or an edge

_MATERIAL_TINTS = {
    "PMMA": (110, 170, 230),
    "polycarbonate": (160, 130, 220),
    "crown glass": (100, 200, 180),
    "flint glass": (210, 180, 90),
    "fused silica": (150, 215, 230),
    "water": (70, 140, 230),
    "air": (230, 230, 230),
    "vacuum": (240, 240, 240),
}


def material_tint(name: str) -> QColor:
    """A fill colour per material: fixed for catalog materials, stable per name otherwise."""
    rgb = _MATERIAL_TINTS.get(name)
    if rgb is None:
        hue = zlib.crc32(name.encode("utf-8")) % 360
        c = QColor.fromHsv(hue, 110, 215)
        rgb = (c.red(), c.green(), c.blue())
    return QColor(*rgb, 80)


def material_outline(name: str) -> QColor:
    c = material_tint(name)
    return QColor(int(c.red() * 0.45), int(c.green() * 0.45), int(c.blue() * 0.45))
