"""Measuring on the drawing: a distance between two points, the angle at a corner (no Qt)."""
from __future__ import annotations

import math

from raytrace.geometry import Point


def direction_deg(a: Point, b: Point) -> float:
    """The direction from a to b, degrees counter-clockwise from +x, in (-180, 180]."""
    return math.degrees(math.atan2(b[1] - a[1], b[0] - a[0]))


def angle_at(corner: Point, a: Point, c: Point) -> float:
    """The angle a-corner-c in degrees (0..180); NaN when either arm has no length."""
    ux, uy = a[0] - corner[0], a[1] - corner[1]
    vx, vy = c[0] - corner[0], c[1] - corner[1]
    if (ux == 0 and uy == 0) or (vx == 0 and vy == 0):
        return math.nan
    # atan2 of cross and dot keeps its digits near 0 and 180 degrees, where acos does not
    return math.degrees(math.atan2(abs(ux * vy - uy * vx), ux * vx + uy * vy))


def distance_readout(a: Point, b: Point) -> tuple[str, str]:
    """(a short label for the drawing, the full line for the status bar)."""
    d = math.dist(a, b)
    return (f"{d:.4f} mm",
            f"distance {d:.4f} mm (dx {b[0] - a[0]:+.4f}, dy {b[1] - a[1]:+.4f}), "
            f"direction {direction_deg(a, b):.2f} deg")


def angle_readout(a: Point, corner: Point, c: Point) -> tuple[str, str]:
    """(a short label for the drawing, the full line for the status bar)."""
    ang = angle_at(corner, a, c)
    if math.isnan(ang):
        return "", "angle: both arms need a length"
    return (f"{ang:.3f} deg",
            f"angle {ang:.3f} deg at ({corner[0]:.4f}, {corner[1]:.4f}); "
            f"arms {math.dist(corner, a):.4f} and {math.dist(corner, c):.4f} mm")
