"""Geometry problems of the scene being edited, for the drawing and the Problems list.

The editor opens and keeps scenes the tracer refuses (overlapping parts, a boundary that crosses
itself): the user fixes them in the drawing.  This module runs the engine's own geometry checks
on the current scene and says, for each problem, which parts it concerns and where to mark it.
Pure Python and shapely; no Qt.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

from raytrace.compile import check_geometry, part_tolerance
from raytrace.errors import Problems
from raytrace.scene import Scene

_PART_INDEX = re.compile(r"\$\.parts\[(\d+)\]")


@dataclass
class SceneProblem:
    text: str                                   # one line in plain words (the path first)
    parts: tuple[int, ...]                      # indices of the parts it concerns
    # outlines (lists of (x, y) mm) of the areas to mark, e.g. where two parts overlap
    areas: list[list[tuple[float, float]]] = field(default_factory=list)


# the parts (kept alive, so their ids stay theirs), the tolerance scale and the problems found
_last: list = [None, None, None]


def scene_problems(scene: Scene) -> list[SceneProblem]:
    """Every geometry problem of `scene`, as the tracer would report it.  Parts are immutable,
    so while an edit leaves every part as it was (a source or detector dragged, a setting
    changed) and the scene's scale with them, the last check's finding is returned: the check
    (shapely, about 2.5 ms for the light pipe) ran on the UI thread at every step of a drag."""
    key = (tuple(map(id, scene.parts)), scene.size_hint())
    if _last[0] is not None and _last[1] == key and all(a is b for a, b in zip(_last[0], scene.parts)):
        return list(_last[2])
    found = _check(scene)
    _last[:] = [tuple(scene.parts), key, found]
    return list(found)


def _check(scene: Scene) -> list[SceneProblem]:
    problems = Problems()
    check_geometry(scene, problems)
    out = []
    for p in problems.errors:
        text = f"{p.path}: found {p.found}; expected {p.expected}"
        # the part of the path, then any other part named in the finding (the overlap partner)
        parts = tuple(dict.fromkeys(int(i) for i in _PART_INDEX.findall(f"{p.path} {p.found}")))
        parts = tuple(i for i in parts if i < len(scene.parts))
        areas = _overlap_areas(scene, parts) if "overlapping part" in p.found and len(parts) == 2 else []
        out.append(SceneProblem(text, parts, areas))
    return out


def _overlap_areas(scene: Scene, parts: tuple[int, ...]) -> list[list[tuple[float, float]]]:
    try:
        size = scene.size_hint()
        a, b = (scene.parts[i].to_shapely(part_tolerance(scene.parts[i], size)) for i in parts)
        inter = a.intersection(b)
    except Exception:      # noqa: BLE001 - a mark is a courtesy; the problem text still shows
        return []
    geoms = getattr(inter, "geoms", [inter])
    return [[(float(x), float(y)) for x, y in g.exterior.coords] for g in geoms
            if g.geom_type == "Polygon" and not g.is_empty]
