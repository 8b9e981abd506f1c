"""Typed coordinates for the drawing tools (no Qt).

While a drawing tool is active the user can type the next point instead of clicking it:

    x, y          the point (x, y) in mm (a space also separates: "x y")
    @dx, dy       relative to the last point
    length<angle  length mm from the last point, angle degrees counter-clockwise from +x
    length        length mm from the last point towards the cursor
"""
from __future__ import annotations

import math
import re

from raytrace.geometry import Point

FORMATS = "x, y  or  @dx, dy  or  length<angle  or  length (towards the cursor)"


class TypedError(ValueError):
    """Text that is not a point; the message says what was expected."""


def _numbers(text: str, original: str) -> list[float]:
    parts = [p for p in re.split(r"[,;\s]+", text.strip()) if p]
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise TypedError(f"could not read {original!r}: expected {FORMATS}") from None
    if not all(math.isfinite(v) for v in values):
        raise TypedError(f"could not read {original!r}: expected finite numbers (mm, degrees)")
    return values


def parse_number(text: str) -> float:
    values = _numbers(text, text)
    if len(values) != 1:
        raise TypedError(f"could not read {text!r}: expected one number")
    return values[0]


def parse_point(text: str, last: Point | None, toward: Point | None = None) -> Point:
    """The point `text` stands for; `last` is the previous point of the shape being drawn
    (None before the first), `toward` the cursor."""
    s = text.strip()
    if not s:
        raise TypedError(f"nothing typed: expected {FORMATS}")
    relative = s.startswith("@")
    body = s[1:] if relative else s
    if "<" in body:
        length_text, _, angle_text = body.partition("<")
        (length,), (angle,) = _one(length_text, text), _one(angle_text, text)
        x0, y0 = _need_last(last, text)
        a = math.radians(angle)
        return (x0 + length * math.cos(a), y0 + length * math.sin(a))
    values = _numbers(body, text)
    if len(values) == 2:
        if not relative:
            return (values[0], values[1])
        x0, y0 = _need_last(last, text)
        return (x0 + values[0], y0 + values[1])
    if len(values) == 1 and not relative:
        x0, y0 = _need_last(last, text)
        if toward is None or math.dist(toward, (x0, y0)) == 0:
            raise TypedError(f"{text!r}: a length alone goes towards the cursor; "
                             "move the cursor away from the last point, or type length<angle")
        d = math.dist(toward, (x0, y0))
        return (x0 + values[0] * (toward[0] - x0) / d, y0 + values[0] * (toward[1] - y0) / d)
    raise TypedError(f"could not read {text!r}: expected {FORMATS}")


def _need_last(last: Point | None, text: str) -> Point:
    if last is None:
        raise TypedError(f"{text!r} is measured from the last point, and there is none yet: "
                         "type the first point as x, y")
    return last


def _one(text: str, original: str) -> list[float]:
    values = _numbers(text, original)
    if len(values) != 1:
        raise TypedError(f"could not read {original!r}: expected length<angle, e.g. 10<45")
    return values
