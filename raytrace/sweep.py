"""Sweeps: trace a scene over a range of one or two named numbers and tabulate the results.

Naming a number of a scene
--------------------------
A name addresses one number in the scene, in one of these forms:

    NAME                     a named number of the scene file ("numbers"): whatever is linked
                             to it follows
    OBJECT.FIELD             OBJECT is the name of a part, source or detector
    KIND:OBJECT.FIELD        the same, with KIND = part, source or detector, when names clash
    wavelength               every source becomes one line at this wavelength (nm)
    trace.FIELD              a trace setting: trace.rays, trace.seed, trace.flux_floor, ...
    $.JSON.PATH              any number in the scene file by its JSON path, e.g.
                             $.parts[0].shape.params.width or $.materials.mine.index

FIELD is a key path with dots and [index]es:
- for a part built from a shape: the shape's parameters (guide.width,
  guide.segments[1].bend.radius, roof prism.leg) or its placement (guide.position[0],
  guide.rotation_deg);
  or its repeat (sheet.repeat.pitch, sheet.repeat.count);
- for a source: its fields as in the scene file (LED.direction_deg, LED.position[1],
  LED.width, LED.half_angle_deg, LED.cos_power, LED.flux, LED.aim_at[0], LED.pivot[1],
  LED.turn_deg), and LED.wavelength: the wavelength
  in nm of a one-line spectrum, or the centre of a band (a weighted list of lines is addressed
  by JSON path);
- for a detector: its fields (return.start[0], return.end[1], ...).

Object names may contain spaces and dots; the longest name that fits is used.  Whole-number
fields (counts, bins, rays, seed) take only whole values.

Values: START:STOP:COUNT (COUNT evenly spaced values, both ends included) or a comma list
v1,v2,...  With two names the points form a grid, the first name varying slowest.

The table (one row per point, in point order whatever order the points finish in):
    point, <each name>, status ("ok", or the problem that stopped this point), warnings (what
    `raytrace trace` would have warned about at that point, joined by " | "; empty when none),
    rays (source rays traced; with a target error, those of the last round), source_flux,
    "efficiency: <detector>" for every detector (flux reaching it / source flux) and
    "efficiency error: <detector>" (its standard error, see raytrace.uncertainty),
    each figure asked for with `figures` (see raytrace.figures), then
    "share: <bucket>" and "share error: <bucket>" for every other ledger bucket met at any
    point (flux / source flux; 0 where a point has none).

Points run in parallel through a concurrent.futures executor: local processes by default;
any executor with submit() works, such as a Dask distributed client's `client.get_executor()`.
"""
from __future__ import annotations

import csv
import io
import json
import math
import os
import re
from concurrent.futures import Executor, ProcessPoolExecutor, as_completed
from dataclasses import dataclass, field
from typing import Any, Callable

from .errors import Problems, RaytraceError, SceneError

KINDS = {"part": "parts", "source": "sources", "detector": "detectors"}
SOURCE_FIELDS = ("position", "direction_deg", "width", "half_angle_deg", "cos_power", "flux",
                 "aim_at", "pivot", "turn_deg")
DETECTOR_FIELDS = ("start", "end", "bins", "angle_bins", "central_fraction")
TRACE_FIELDS = ("rays", "flux_floor", "max_generations", "segment_budget", "seed", "max_memory_mb")
WHOLE_NUMBER_FIELDS = {"rays", "max_generations", "segment_budget", "seed", "bins", "angle_bins", "sides", "count"}
# Points in one sweep: a table of this many rows is a long night of tracing already; the
# limit keeps a mistyped COUNT (1e9) from filling memory with values before anything runs.
MAX_POINTS = 100_000
TRACE_OPTIONS = ("rays", "mode", "seed", "flux_floor", "max_generations", "segment_budget", "sampling",
                 "max_memory_mb")


class SweepError(SceneError):
    """A sweep name or range that cannot be used; names the --vary entry and what was expected."""


@dataclass(frozen=True)
class Variable:
    name: str                      # as the user wrote it; also the CSV column name
    values: tuple[float, ...]


@dataclass(frozen=True)
class Target:
    """Where a name lands in the scene's JSON form."""

    name: str
    paths: tuple[tuple, ...]       # one key path per number set (wavelength: one per source)
    whole: bool                    # whole numbers only


@dataclass
class SweepResult:
    names: list[str]
    detectors: list[str]
    columns: list[str]
    rows: list[dict] = field(default_factory=list)

    @property
    def failed(self) -> list[dict]:
        return [r for r in self.rows if r["status"] != "ok"]

    def to_csv(self, path: str | os.PathLike | None = None) -> str | None:
        """CSV text (floats written with repr, so they read back identical); writes
        atomically to `path` when given."""
        buf = io.StringIO()
        w = csv.writer(buf, lineterminator="\n")
        w.writerow(self.columns)
        for row in self.rows:
            w.writerow([row.get(c, "") for c in self.columns])
        if path is None:
            return buf.getvalue()
        from .scene_io import atomic_write_text
        atomic_write_text(path, buf.getvalue())
        return None


# ----------------------------------------------------------------------------- parsing names

def parse_vary(text: str, where: str = "--vary") -> Variable:
    """NAME=START:STOP:COUNT or NAME=v1,v2,... -> Variable."""
    problems = Problems()
    name, sep, spec = text.rpartition("=")
    if not sep or not name.strip():
        problems.add(where, text, "NAME=START:STOP:COUNT or NAME=v1,v2,... (see `raytrace sweep --help`)")
        raise SweepError(problems.items)
    name, spec = name.strip(), spec.strip()
    try:
        if ":" in spec:
            parts = spec.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop = float(parts[0]), float(parts[1])
            count = int(parts[2])
            if count > MAX_POINTS:
                raise _TooMany(count)
            if count < 1 or not (math.isfinite(start) and math.isfinite(stop)):
                raise ValueError
            values = tuple(start + (stop - start) * k / (count - 1) for k in range(count)) if count > 1 else (start,)
            if count > 1:
                values = values[:-1] + (stop,)   # the stop value exactly, not start + sum of steps
        else:
            if spec.count(",") >= MAX_POINTS:
                raise _TooMany(spec.count(",") + 1)
            values = tuple(float(v) for v in spec.split(","))
            if not values or not all(math.isfinite(v) for v in values):
                raise ValueError
    except _TooMany as exc:
        problems.add(f"{where} {name}", f"<{exc.count:,} values>", _too_many_text())
        raise SweepError(problems.items)
    except ValueError:
        problems.add(f"{where} {name}", spec,
                     "START:STOP:COUNT with finite numbers and a whole COUNT >= 1, or a list v1,v2,...")
        raise SweepError(problems.items)
    return Variable(name, values)


class _TooMany(ValueError):
    def __init__(self, count: int):
        super().__init__(count)
        self.count = count


def _too_many_text() -> str:
    return f"at most {MAX_POINTS:,} points in one sweep (split it into several runs)"


def resolve(data: dict, name: str, file: str = "", how: str = "--vary") -> Target:
    """Find where `name` lands in the scene dict `data`; SweepError if it addresses nothing.
    `how` is the option the name came from, for the messages (--vary or --set)."""
    problems = Problems(file=file)
    label = f"{how} {name}"

    def fail(found, expected):
        problems.add(label, found, expected)
        raise SweepError(problems.items)

    if name.startswith("$"):
        path = _parse_path(name[1:], label, problems)
        _check_number(data, path, label, problems)
        return Target(name, (path,), _whole(path))
    numbers = data.get("numbers")
    if isinstance(numbers, dict) and name in numbers:
        return Target(name, (("numbers", name),), False)
    if name == "wavelength":
        sources = data.get("sources", [])
        if not sources:
            fail("a scene without sources", "a scene with at least one source")
        # a monochromatic sweep: each source's whole spectrum is replaced by one line
        return Target(name, tuple(("sources", i, "spectrum") for i in range(len(sources))), False)

    kind = None
    m = re.match(r"(part|source|detector):(.*)$", name, re.S)
    rest = name
    if m:
        kind, rest = m.group(1), m.group(2)
    candidates = []
    for k, key in KINDS.items():
        if kind and k != kind:
            continue
        for i, obj in enumerate(data.get(key, [])):
            oname = obj.get("name", "") if isinstance(obj, dict) else ""
            if oname and rest.startswith(oname + "."):
                candidates.append((len(oname), k, i, rest[len(oname) + 1:]))
    if name.startswith("trace.") and kind is None:
        if candidates:
            fail(name, "an unambiguous name: a part, source or detector is called 'trace'; write $.trace."
                 + name[6:] + " or KIND:trace." + name[6:])
        fld = name[6:]
        if fld not in TRACE_FIELDS:
            fail(name, "trace.FIELD with FIELD one of " + ", ".join(TRACE_FIELDS))
        return Target(name, (("trace", fld),), fld in WHOLE_NUMBER_FIELDS)
    if not candidates:
        names = [f"{k} {o.get('name')!r}" for k, key in KINDS.items() for o in data.get(key, []) if isinstance(o, dict)]
        numbers = ", ".join(data.get("numbers") or {}) if isinstance(data.get("numbers"), dict) else ""
        fail(name, (f"a named number ({numbers}), or " if numbers else "")
             + "OBJECT.FIELD naming one of: " + ", ".join(names) + "; or wavelength, trace.FIELD, $.JSON.PATH")
    best = max(c[0] for c in candidates)
    top = [c for c in candidates if c[0] == best]
    if len(top) > 1:
        fail(name, "a KIND: prefix, since " + " and ".join(f"a {c[1]}" for c in top) + " share that name "
             f"(e.g. {top[0][1]}:{name})")
    _, k, i, fld = top[0]
    key = KINDS[k]
    sub = _parse_path(fld, label, problems)
    if k == "part":
        part = data["parts"][i]
        shape = part.get("shape")
        if sub[0] == "repeat" and isinstance(part.get("repeat"), dict):
            path = (key, i) + sub
            _check_number(data, path, label, problems)
            return Target(name, (path,), _whole(path))
        if not isinstance(shape, dict):
            fail(name, f"a part built from a shape (part {part.get('name')!r} is given by its boundary; "
                       f"address its numbers by JSON path, e.g. $.parts[{i}].boundary[0].from[0])")
        if sub[0] in ("position", "rotation_deg"):
            path = (key, i, "shape") + sub
        else:
            from .shapes import PARAMETERS
            known = [p.name for p in PARAMETERS.get(shape.get("kind"), [])]
            if sub[0] not in known:
                fail(name, f"a parameter of the {shape.get('kind')} shape ({', '.join(known)}), "
                           "or position[0], position[1], rotation_deg")
            path = (key, i, "shape", "params") + sub
    elif k == "source":
        if sub == ("wavelength",):
            return Target(name, (_wavelength_path(data, i, label, problems),), False)
        if sub[0] not in SOURCE_FIELDS:
            fail(name, "a source field: " + ", ".join(SOURCE_FIELDS) + ", or wavelength")
        path = (key, i) + sub
    else:
        if sub[0] not in DETECTOR_FIELDS:
            fail(name, "a detector field: " + ", ".join(DETECTOR_FIELDS))
        path = (key, i) + sub
    # fields a source or detector may leave out (defaults) can be set all the same
    if len(path) == 3 and k in ("source", "detector") and path[2] not in data[key][i]:
        return Target(name, (path,), _whole(path))
    _check_number(data, path, label, problems)
    return Target(name, (path,), _whole(path))


def _whole(path: tuple) -> bool:
    """Fields that count things take whole numbers only (judged by the field's own name)."""
    last = next((k for k in reversed(path) if isinstance(k, str)), "")
    return last in WHOLE_NUMBER_FIELDS and isinstance(path[-1], str)


def _wavelength_path(data: dict, i: int, label: str, problems: Problems) -> tuple:
    src = data["sources"][i]
    spec = src.get("spectrum", {"wavelength_nm": 550.0})
    if "wavelength_nm" in spec:
        return ("sources", i, "spectrum", "wavelength_nm")
    if "band" in spec:
        return ("sources", i, "spectrum", "band", "center_nm")
    problems.add(label, f"source {src.get('name')!r} with a list of lines",
                 f"a one-line or band spectrum; address a line by JSON path, e.g. $.sources[{i}].spectrum.lines[0][0]")
    raise SweepError(problems.items)


_TOKEN = re.compile(r"\.?([^.\[\]]+)|\[(\d+)\]")


def _parse_path(text: str, label: str, problems: Problems) -> tuple:
    path, pos = [], 0
    while pos < len(text):
        m = _TOKEN.match(text, pos)
        if not m or m.end() == pos:
            problems.add(label, text, "a field path such as width, segments[1].bend.radius or position[0]")
            raise SweepError(problems.items)
        path.append(m.group(1) if m.group(1) is not None else int(m.group(2)))
        pos = m.end()
    if not path:
        problems.add(label, "an empty field", "a field path after the name")
        raise SweepError(problems.items)
    return tuple(path)


def _get(data, path: tuple):
    cur = data
    for k in path:
        cur = cur[k]
    return cur


def _check_number(data: dict, path: tuple, label: str, problems: Problems) -> None:
    try:
        value = _get(data, path)
    except (KeyError, IndexError, TypeError):
        problems.add(label, "<nothing there>", "a name that addresses an existing number ("
                     + "$." + _render_path(path) + " does not exist)")
        raise SweepError(problems.items)
    if isinstance(value, str) and value.lstrip().startswith("="):
        return    # a linked field: the sweep's values replace its expression
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        problems.add(label, value, "a name that addresses a number")
        raise SweepError(problems.items)


def _render_path(path: tuple) -> str:
    out = ""
    for k in path:
        out += f"[{k}]" if isinstance(k, int) else (("." if out else "") + str(k))
    return out


def _set(data, path: tuple, value) -> None:
    cur = data
    for k in path[:-1]:
        cur = cur[k]
    cur[path[-1]] = value


# ----------------------------------------------------------------------------- running

def sweep(scene, variables: list[Variable], trace_options: dict | None = None,
          executor: Executor | None = None, workers: int | None = None,
          progress: Callable[[int, int], None] | None = None, file: str = "",
          figures: list | None = None, option_names: dict[str, str] | None = None) -> SweepResult:
    """Trace `scene` (a Scene or its JSON dict) at every point of the grid of `variables`.

    executor: any concurrent.futures executor (not shut down here), e.g. a Dask client's
    `client.get_executor()`.  Without one, points run in a local process pool of `workers`
    processes (default and most: the CPUs this process may use), or in this process when workers == 1.
    progress(done, total) is called as points finish.  figures: `raytrace.figures.Figure`s to
    add as columns.  A trace option that a varied name also sets (trace_options rays=500 with
    trace.rays varied) is refused: it would make every point the same.  option_names: how to
    call each option in that message (the CLI passes its flags)."""
    from .scene import Scene
    if isinstance(scene, Scene):
        from .scene_io import scene_to_dict
        data = scene_to_dict(scene)
    else:
        data = json.loads(json.dumps(scene))     # a private copy
    if not 1 <= len(variables) <= 2:
        raise SweepError([_problem("--vary", f"{len(variables)} names", "one or two names to vary")])
    if len({v.name for v in variables}) != len(variables):
        raise SweepError([_problem("--vary", [v.name for v in variables], "two different names")])
    targets = [resolve(data, v.name, file) for v in variables]
    _refuse_shared_number(targets, data=data)
    for v, t in zip(variables, targets):
        if t.whole:
            bad = [x for x in v.values if x != round(x)]
            if bad:
                raise SweepError([_problem(f"--vary {v.name}", bad[0], "whole numbers (this field counts things)")])
    n_points = math.prod(len(v.values) for v in variables)
    if n_points > MAX_POINTS:
        raise SweepError([_problem("--vary", f"<a grid of {n_points:,} points>", _too_many_text())])
    points = _grid(variables, targets)
    options = {k: v for k, v in (trace_options or {}).items()
               if k in TRACE_OPTIONS + ("target_error", "target_figure", "ray_cap") and v is not None}
    refuse_overrides(targets, options, option_names, "--vary")
    figures = list(figures or [])
    tasks = [(data, [(t.paths, val) for t, val in zip(targets, vals)], options, figures) for vals in points]

    results = run_tasks(run_point, tasks, executor, workers, progress)
    return _table(variables, points, results, [d.get("name", "") for d in data.get("detectors", [])],
                  [f.column for f in figures])


def run_tasks(fn: Callable, tasks: list[tuple], executor: Executor | None = None, workers: int | None = None,
              progress: Callable[[int, int], None] | None = None) -> list:
    """fn(*task) for every task, results in task order whatever order they finish in: on
    `executor`, else on a local pool of `workers` processes (default and most: the CPUs this
    process may use), or in this process when that is one, or there is one task.
    progress(done, total) as tasks finish."""
    from .parallel import capped_workers
    results: list = [None] * len(tasks)
    done = 0
    if executor is None and (workers == 1 or len(tasks) <= 1 or capped_workers(workers) == 1):
        for i, task in enumerate(tasks):
            results[i] = fn(*task)
            done += 1
            if progress:
                progress(done, len(tasks))
        return results
    own = executor is None
    from .parallel import die_with_parent
    ex = executor or ProcessPoolExecutor(max_workers=min(capped_workers(workers), len(tasks)),
                                         initializer=die_with_parent)
    try:
        futures = {ex.submit(fn, *task): i for i, task in enumerate(tasks)}
        for fut in as_completed(futures):
            results[futures[fut]] = fut.result()
            done += 1
            if progress:
                progress(done, len(tasks))
    finally:
        if own:
            ex.shutdown(wait=True, cancel_futures=True)
    return results


def refuse_overrides(targets: list[Target], options: dict, option_names: dict[str, str] | None = None,
                     how: str = "--vary") -> None:
    """SweepError when a trace option given outright also sets a number that is varied or set
    by name: the option would silently win over it."""
    problems = Problems()
    for t in targets:
        for path in t.paths:
            if len(path) == 2 and path[0] == "trace" and path[1] in options:
                flag = (option_names or {}).get(path[1], path[1])
                problems.add(flag, f"{flag} together with {how} {t.name}",
                             f"one or the other: {flag} would set {t.name} to {options[path[1]]!r}"
                             + (" at every point" if how == "--vary" else ", overriding " + how))
    if problems.items:
        raise SweepError(problems.items)


def _refuse_shared_number(targets: list[Target], how: str = "--vary", data: dict | None = None) -> None:
    """Two names for one number (guide.width and $.parts[0].shape.params.width, or wavelength
    and LED.wavelength, or one name twice): the later would silently overwrite the earlier.
    With the scene's `data`, also a named number and a field linked to it ("= EXPR"): the
    field's new value replaces its link, so the named number's would not reach it."""
    if data is not None:
        refuse_linked_pair(data, targets, how)
    for i, b in enumerate(targets):
        for a in targets[:i]:
            for pa in a.paths:
                for pb in b.paths:
                    n = min(len(pa), len(pb))
                    if pa[:n] == pb[:n]:
                        found = (f"<{b.name} given twice>" if a.name == b.name else
                                 f"<the number {a.name} sets too ($.{_render_path(pb)})>")
                        raise SweepError([_problem(f"{how} {b.name}", found,
                                                   "two names for two different numbers")])


def refuse_linked_pair(data: dict, targets: list, how: str, file: str = "") -> None:
    """SweepError naming both when one target is a named number and another a field (or named
    number) whose "= EXPR" follows it."""
    from .linked import numbers_behind
    named = {t.paths[0][1]: t for t in targets if len(t.paths) == 1 and t.paths[0][:1] == ("numbers",)}
    if not named:
        return
    for b in targets:
        for path in b.paths:
            for number, link in numbers_behind(data, path).items():
                a = named.get(number)
                if a is None or a is b:
                    continue
                p = Problems(file=file)
                p.add(f"{how} {b.name}", f"<linked to the named number {number} by {link!r} at "
                      f"$.{_render_path(path)}, and {how} {a.name} sets {number} too>",
                      f"one of the two: {how} {a.name} alone (the linked field follows it) or {how} "
                      f"{b.name} alone (its value replaces the link); given both, one would be ignored")
                raise SweepError(p.items)


def _problem(path, found, expected):
    p = Problems()
    p.add(path, found, expected)
    return p.items[0]


def _grid(variables: list[Variable], targets: list[Target]) -> list[tuple]:
    def cast(t, x):
        return int(round(x)) if t.whole else float(x)
    if len(variables) == 1:
        return [(cast(targets[0], a),) for a in variables[0].values]
    return [(cast(targets[0], a), cast(targets[1], b)) for a in variables[0].values for b in variables[1].values]


def run_point(data: dict, settings: list[tuple[tuple, Any]], options: dict, figures: list | None = None) -> dict:
    """Trace one point; a plain dict back (picklable, so it crosses process and cluster lines).

    Runs in a worker: everything it needs comes in its arguments."""
    from .api import trace
    from .scene_io import scene_from_dict
    data = _applied(data, settings)
    options = dict(options)
    target = {k: options.pop(k) for k in ("target_error", "target_figure", "ray_cap") if k in options}
    try:
        scene = scene_from_dict(data)
        routes = any(f.kind == "route" for f in figures or [])     # route shares need path tallies
        if target.get("target_error"):
            from .converge import DEFAULT_RAY_CAP, trace_to_error
            result = trace_to_error(scene, target["target_error"], target.get("target_figure"),
                                    target.get("ray_cap") or DEFAULT_RAY_CAP, track_paths=routes, **options)
        else:
            result = trace(scene, track_paths=routes, **options)
    except SceneError as exc:
        return {"status": "invalid: " + "; ".join(str(p) for p in exc.problems)}
    except RaytraceError as exc:
        return {"status": f"stopped: {exc}"}
    except MemoryError:
        return {"status": "stopped: out of memory (set trace.max_memory_mb below the free memory)"}
    from .figures import figure_values
    return {
        "status": "ok",
        "warnings": list(result.warnings),
        "rays": int(result.stats["source_rays"]),
        "source_flux": result.source_flux,
        "efficiency": {d.name: result.efficiency(d.name) for d in result.compiled.detectors},
        "efficiency_error": {d.name: result.efficiency_error(d.name) for d in result.compiled.detectors},
        "figures": figure_values(result, figures or []),
        "shares": {b.label: b.flux / result.source_flux if result.source_flux else 0.0
                   for b in result.ledger.buckets if b.kind != "detector"},
        "share_errors": {b.label: result.share_error(b.label) for b in result.ledger.buckets if b.kind != "detector"},
    }


def _applied(data: dict, settings: list[tuple[tuple, Any]]) -> dict:
    """A copy of the scene dict with each (key paths, value) set (a wavelength replaces the spectrum)."""
    data = json.loads(json.dumps(data))
    for paths, value in settings:
        for path in paths:
            _set(data, path, {"wavelength_nm": value} if path[-1] == "spectrum" else value)
    return data


def parse_set(text: str) -> tuple[str, float]:
    """--set NAME=VALUE -> (name, value): one finite number, named as for --vary."""
    name, sep, value = text.rpartition("=")
    try:
        number = float(value)
        if not sep or not name.strip() or not math.isfinite(number):
            raise ValueError
    except ValueError:
        raise SweepError([_problem("--set", text, "NAME=VALUE with one finite number, named as for --vary "
                                                  "(e.g. guide.width=3.5 or trace.rays=5000)")]) from None
    return name.strip(), number


def apply_settings(data: dict, pairs: list[tuple[str, float]], file: str = "", options: dict | None = None,
                   option_names: dict[str, str] | None = None, record: list | None = None) -> dict:
    """The scene dict with each named number set (`raytrace trace --set`); SweepError for a name
    that addresses nothing, a fraction in a whole-number field, or a trace option also given.
    `record`, when given, gets one {"name", "value", "fields"} per pair: the value as set (a
    whole number in a field that counts) and the JSON paths it was written to."""
    targets = [resolve(data, name, file, how="--set") for name, _ in pairs]
    for (name, value), t in zip(pairs, targets):
        if t.whole and value != round(value):
            raise SweepError([_problem(f"--set {name}", value, "a whole number (this field counts things)")])
    _refuse_shared_number(targets, "--set", data)
    refuse_overrides(targets, {k: v for k, v in (options or {}).items() if v is not None}, option_names, "--set")
    values = [int(round(v)) if t.whole else v for t, (_, v) in zip(targets, pairs)]
    if record is not None:
        record.extend({"name": name, "value": v, "fields": ["$." + _render_path(p) for p in t.paths]}
                      for (name, _), t, v in zip(pairs, targets, values))
    return _applied(data, [(t.paths, v) for t, v in zip(targets, values)])


def _table(variables, points, results, detectors, figure_columns=()) -> SweepResult:
    names = [v.name for v in variables]
    labels: list[str] = []
    for r in results:
        for lab in (r or {}).get("shares", {}):
            if lab not in labels:
                labels.append(lab)
    # order loss columns by their largest share over the sweep: the big losses come first
    peak = {lab: max((r or {}).get("shares", {}).get(lab, 0.0) for r in results) for lab in labels}
    labels.sort(key=lambda lab: -peak[lab])
    columns = (["point"] + names + ["status", "warnings", "rays", "source_flux"]
               + [c for d in detectors for c in (f"efficiency: {d}", f"efficiency error: {d}")]
               + list(figure_columns)
               + [c for lab in labels for c in (f"share: {lab}", f"share error: {lab}")])
    rows = []
    for i, (vals, r) in enumerate(zip(points, results)):
        row: dict[str, Any] = {"point": i, **dict(zip(names, vals)), "status": r["status"],
                               "warnings": " | ".join(r.get("warnings", []))}
        if r["status"] == "ok":
            row["rays"] = r["rays"]
            row["source_flux"] = r["source_flux"]
            for d in detectors:
                row[f"efficiency: {d}"] = r["efficiency"].get(d, 0.0)
                row[f"efficiency error: {d}"] = _cell(r["efficiency_error"].get(d))
            for c in figure_columns:
                row[c] = _cell(r["figures"].get(c))
            for lab in labels:
                row[f"share: {lab}"] = r["shares"].get(lab, 0.0)
                # a bucket a point never met has share 0 and, like any empty tally, error 0
                row[f"share error: {lab}"] = _cell(r["share_errors"].get(lab, 0.0))
        rows.append(row)
    return SweepResult(names, detectors, columns, rows)


def _cell(value) -> Any:
    """A figure for the table: empty where it does not exist (None or nan)."""
    return "" if value is None or value != value else value
