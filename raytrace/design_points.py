"""Trace a scene at a list of design points and read figures of merit: the engine shared by
`optimize` and `tolerance`.

A design point sets named numbers (named as in `raytrace.sweep`) to values.  Points run in a
concurrent.futures executor (a Dask client's `get_executor()` works) or a local process pool,
and come back in the order they were asked for, so the result never depends on which worker
finished first.
"""
from __future__ import annotations

import json
import math
from concurrent.futures import Executor
from typing import Any, Callable

from .errors import Problems, RaytraceError, SceneError
from .merit import Figure, measure
from .sweep import TRACE_OPTIONS, SweepError, Target, _applied, _get, resolve, run_tasks


def scene_data(scene) -> dict:
    """The scene's JSON form (a private copy when given a dict)."""
    from .scene import Scene
    if isinstance(scene, Scene):
        from .scene_io import scene_to_dict
        return scene_to_dict(scene)
    return json.loads(json.dumps(scene))


def resolve_continuous(data: dict, name: str, option: str, file: str = "") -> tuple[Target, float]:
    """Where `name` lands and its value in the scene, for a number that may take any value."""
    target = resolve(data, name, file, how=option)

    def fail(found, expected):
        problems = Problems(file=file)
        problems.add(f"{option} {name}", found, expected)
        raise SweepError(problems.items)
    if target.whole:
        fail("a field that counts things", "a number that can take any value (not a count, bins, rays or seed)")
    if name == "wavelength":
        fail(name, "SOURCE.wavelength (one source's wavelength), since 'wavelength' replaces whole spectra")
    path = target.paths[0]
    try:
        value = _get(data, path)
    except (KeyError, IndexError, TypeError):
        fail("<not given in the scene file>", "a number the scene file states (write it there first)")
    if isinstance(value, str):          # a named number or a field linked by "= ..."
        value = _linked_value(data, path)
        if value is None:
            fail(f"<a linked field, {_get(data, path)!r}>",
                 "a plain number, or the named number it is linked to")
    return target, float(value)


def _linked_value(data: dict, path: tuple) -> float | None:
    """The value a linked field or named number evaluates to, None when it cannot be read off
    (a field of a repeated part or of a placed source, whose numbers move with the copies)."""
    from .linked import resolve as resolve_links
    problems = Problems()
    plain, linker = resolve_links(data, problems)
    if problems.items or linker is None:
        return None
    if path[0] == "numbers":
        return dict(linker.values).get(path[1])
    collection, index, sub = path[0], path[1], path[2:]
    name = data[collection][index].get("name") if isinstance(index, int) else None
    where = (collection, name, sub) if isinstance(index, int) else (collection, None, path[1:])
    return next((float(v) for w, _, v in linker.leaves if w == where and v is not None), None)


def problem(path, found, expected, file: str = ""):
    """One Problem, for errors raised on their own."""
    p = Problems(file=file)
    p.add(path, found, expected)
    return p.items[0]


def trace_options(options: dict | None) -> dict:
    return {k: v for k, v in (options or {}).items() if k in TRACE_OPTIONS and v is not None}


def evaluate_point(data: dict, settings: list[tuple[tuple, Any]], options: dict,
                   figures: list[Figure]) -> dict:
    """Trace one design point; a plain dict back (it crosses process and cluster lines):
    {"status": "ok", "figures": {label: [value, standard error]}} or {"status": "invalid: ..."}."""
    from .api import trace
    from .scene_io import scene_from_dict
    from .sources import sample_sources
    data = _applied(data, settings)
    try:
        scene = scene_from_dict(data)
        s = scene.settings
        rays = int(options.get("rays", s.rays))
        seed = int(options.get("seed", s.seed))
        start = sample_sources(scene.sources, rays, seed=seed, sampling=options.get("sampling"))
        result = trace(scene, start=start, track_paths=False, hits="keep", **options)
    except SceneError as exc:
        return {"status": "invalid: " + "; ".join(str(p) for p in exc.problems)}
    except RaytraceError as exc:
        return {"status": f"stopped: {exc}"}
    return {"status": "ok", "figures": {f.label: list(measure(result, f)) for f in figures}}


def run_points(data: dict, points: list[list[tuple[tuple, Any]]], options: dict, figures: list[Figure],
               executor: Executor | None = None, workers: int | None = None,
               progress: Callable[[int, int], None] | None = None) -> list[dict]:
    """evaluate_point at every point, in point order (see sweep.run_tasks for where they run)."""
    return run_tasks(evaluate_point, [(data, settings, options, figures) for settings in points],
                     executor, workers, progress)


def figure_of(point: dict, figure: Figure) -> tuple[float, float]:
    """(value, standard error) of a point's figure; nan for a point that could not be traced."""
    if point.get("status") != "ok":
        return math.nan, math.nan
    value, se = point["figures"][figure.label]
    return float(value), float(se)
