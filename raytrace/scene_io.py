"""Scene files: JSON with our own format name and version; load -> validate -> Scene, and save.

Loading never writes to the file.  Every problem found is reported at once, each naming the
file, the JSON path, what was found and what was expected.  Saving is atomic (write a
temporary file beside the target, then rename), so a failed save leaves the old file intact.
"""
from __future__ import annotations

import json
import math
import os
import stat
from dataclasses import replace
from pathlib import Path
from typing import Any

from . import fields as F
from . import linked
from .atomic import atomic_write_text  # noqa: F401  (re-exported: callers import it from here)
from .compile import check_geometry, resolve_materials
from .errors import Problems, SceneError
from .geometry import (MIRROR, TREATMENT_KINDS, Edge, Loop, Part, ShapeSpec, Treatment)
from .materials import material_from_dict
from .scene import (MAX_GENERATIONS, DISTRIBUTIONS, POLARIZATIONS, SAMPLINGS, SOURCE_KINDS, Acceptance, Detector,
                    Scene,
                    Source, Spectrum, TraceSettings)

FORMAT_NAME = "raytrace2d-scene"
FORMAT_VERSION = 1
UNITS = {"length": "mm", "wavelength": "nm"}
# "numbers", "repeat", "aim_at", "pivot" and "turn_deg" are read by linked.resolve, before these
TOP_KEYS = ("format", "version", "units", "name", "story", "ambient", "numbers", "materials",
            "parts", "sources", "detectors", "trace")
PART_KEYS = ("name", "material", "boundary", "holes", "shape", "faces", "repeat")
EDGE_KEYS = ("from", "face", "treatment", "arc")
FACE_KEYS = ("treatment", "name")
SOURCE_KEYS = ("name", "kind", "position", "direction_deg", "aim_at", "pivot", "turn_deg", "width",
               "half_angle_deg", "distribution", "cos_power", "flux", "spectrum", "polarization",
               "sampling", "note")
DETECTOR_KEYS = ("name", "start", "end", "absorbing", "bins", "angle_bins", "central_fraction", "acceptance")
ACCEPTANCE_KEYS = ("half_angle_deg", "direction_deg", "back_to_source")
TRACE_KEYS = ("rays", "mode", "flux_floor", "max_generations", "segment_budget", "seed", "max_memory_mb")
# Earlier names of trace settings, still read (with a note) so older files keep working.
OLD_TRACE_KEYS = {"min_relative_flux": "flux_floor", "max_depth": "max_generations",
                  "max_segments": "segment_budget"}
MODES = ("branching", "monte_carlo")
# Largest source flux: sums and squares of fluxes must stay finite (1e308 overflowed to a
# non-standard Infinity in the JSON summary); the Sun gives about 3.8e26 W.
MAX_FLUX = 1e30
MAX_BINS = 1_000_000
MAX_MEMORY_MB = 1e9    # 1 PB: any real machine is below it   # histogram bins per detector: beyond this a histogram is only memory


# ----------------------------------------------------------------------------- loading

MAX_SCENE_BYTES = 64 * 2**20   # far above any hand-made or generated scene (a 10,000-edge film is ~1 MB)


def load_scene(path: str | os.PathLike, check_shapes: bool = True) -> Scene:
    """Read, validate and build a scene.  Raises SceneError listing every problem.

    `check_shapes=False` skips the geometry checks (self-crossing loops, overlapping parts):
    the editor opens such a scene so the user can fix it, and shows those problems itself."""
    path = Path(path)
    problems = Problems(file=str(path))
    try:
        text = read_scene_text(path)
    except FileNotFoundError:
        problems.add("$", "<no such file>", "an existing scene file")
        raise SceneError(problems.items)
    except _NotAScene as exc:
        problems.add("$", f"<{exc}>", exc.expected)
        raise SceneError(problems.items)
    except _BinaryDxf:
        _not_a_drawing(path, problems, "a binary DXF drawing")
    except UnicodeDecodeError as exc:
        if path.suffix.lower() == ".dxf":         # an ASCII drawing in a legacy code page
            _not_a_drawing(path, problems, "a DXF drawing")
        problems.add("$", f"<unreadable file: {exc}>", "a readable UTF-8 JSON file")
        raise SceneError(problems.items)
    except OSError as exc:
        problems.add("$", f"<unreadable file: {exc}>", "a readable UTF-8 JSON file")
        raise SceneError(problems.items)
    if path.suffix.lower() == ".dxf" and not text.lstrip().startswith("{"):
        _not_a_drawing(path, problems, "a DXF drawing")
    return scene_from_text(text, problems, check_shapes)


BINARY_DXF = b"AutoCAD Binary DXF"     # how every binary DXF file begins (its sentinel)


def _not_a_drawing(path: Path, problems: Problems, what: str):
    """A drawing given where a scene belongs: say what it is and how to turn it into a scene."""
    problems.add("$", f"<{what}, not a scene file>",
                 f"a scene file (JSON); make one from the drawing with: raytrace import-dxf {path} "
                 f"-o {path.with_suffix('.json').name}")
    raise SceneError(problems.items)


class _NotAScene(OSError):
    def __init__(self, found: str, expected: str):
        super().__init__(found)
        self.expected = expected


def read_scene_text(path: Path) -> str:
    """The file's text, read only from a regular file and at most MAX_SCENE_BYTES: a FIFO
    would wait for a writer and /dev/zero would be read forever."""
    from .atomic import describe_kind
    st = os.stat(path)
    if not stat.S_ISREG(st.st_mode):
        raise _NotAScene(describe_kind(st.st_mode), "a regular scene file")
    with open(path, "rb") as fh:
        data = fh.read(MAX_SCENE_BYTES + 1)
    if len(data) > MAX_SCENE_BYTES:
        size = f"{MAX_SCENE_BYTES / 2**20:.3g} MB"
        raise _NotAScene(f"a file of more than {size}", f"a scene file of at most {size}")
    if data.startswith(BINARY_DXF):
        # not text at all: decoding would only say "invalid start byte"
        raise _BinaryDxf()
    return data.decode("utf-8-sig")   # -sig: accept the BOM some editors write


class _BinaryDxf(OSError):
    """A binary DXF drawing where a scene's text was expected."""


def scene_from_text(text: str, problems: Problems | None = None, check_shapes: bool = True) -> Scene:
    problems = problems or Problems()
    duplicates = DuplicateKeys()
    try:
        data = json.loads(text, parse_constant=F.NonFinite, parse_int=F.parse_int,
                          object_pairs_hook=duplicates.hook)
    except json.JSONDecodeError as exc:
        problems.add("$", f"<malformed JSON at line {exc.lineno} column {exc.colno}: {exc.msg}>",
                     "valid JSON")
        raise SceneError(problems.items)
    except RecursionError:
        problems.add("$", "<JSON nested too deeply>", "a scene file of ordinary depth")
        raise SceneError(problems.items)
    duplicates.report(data, problems)
    return scene_from_dict(data, problems, check_shapes)


class DuplicateKeys:
    """JSON object hook that notes keys given twice in one object (Python's parser keeps the
    last silently: a second "parts": [] would drop every part), to report them by JSON path."""

    def __init__(self):
        self.found: dict[int, tuple[dict, list[str]]] = {}

    def hook(self, pairs: list[tuple[str, Any]]) -> dict:
        out: dict = {}
        twice = []
        for k, v in pairs:
            if k in out and k not in twice:
                twice.append(k)
            out[k] = v
        if twice:
            self.found[id(out)] = (out, twice)
        return out

    def report(self, data: Any, problems: Problems) -> None:
        if not self.found:
            return
        for where, obj in _objects(data, "$"):
            hit = self.found.get(id(obj))
            if hit is not None and hit[0] is obj:
                for k in hit[1]:
                    problems.add(f"{where}.{_key(k)}", f"<the key {k!r} given more than once>",
                                 "each key once in an object (only the last would count)")
        problems.raise_if_errors()


def _objects(value: Any, where: str):
    """Every JSON object in `value` with its path."""
    if isinstance(value, dict):
        yield where, value
        for k, v in value.items():
            yield from _objects(v, f"{where}.{_key(str(k))}")
    elif isinstance(value, list):
        for k, v in enumerate(value):
            yield from _objects(v, f"{where}[{k}]")


def scene_from_dict(data: Any, problems: Problems | None = None, check_shapes: bool = True) -> Scene:
    problems = problems or Problems()
    top = F.obj(data, "$", problems)
    if top is None:
        raise SceneError(problems.items)
    # named numbers, expressions, aimed sources and repeated parts become plain numbers first
    top, linker = linked.resolve(top, problems)
    F.check_keys(top, TOP_KEYS, "$", problems)
    fmt = top.get("format", F.MISSING)
    if fmt != FORMAT_NAME:
        problems.add("$.format", fmt, f"{FORMAT_NAME!r}")
    version = top.get("version", F.MISSING)
    if not (F.is_number(version) and version == FORMAT_VERSION):
        problems.add("$.version", version if not isinstance(version, F.NonFinite) else f"<{version}>",
                     f"{FORMAT_VERSION} (the version this program reads)")
    units = top.get("units", F.MISSING)
    if units != UNITS:
        problems.add("$.units", units, f'{json.dumps(UNITS)}: lengths in mm, wavelengths in nm')

    name = F.string(top, "name", "$", problems, default="")
    story = F.string(top, "story", "$", problems, default="")
    ambient = F.string(top, "ambient", "$", problems, default="air", nonempty=True)

    materials = {}
    failed_materials: set[str] = set()
    mats = top.get("materials", {})
    if F.obj(mats, "$.materials", problems) is not None:
        for mname, mdata in mats.items():
            if F.bad_text(mname):
                problems.add(f"$.materials.{_key(mname)}", mname, f"a material name without {F.bad_text(mname)}")
                failed_materials.add(mname)
                continue
            m = material_from_dict(mname, mdata, f"$.materials.{_key(mname)}", problems)
            if m is not None:
                materials[mname] = m
            else:
                failed_materials.add(mname)

    parts, part_paths = [], []
    for i, pdata in enumerate(_list(top, "parts", "$", problems)):
        part = _part(pdata, f"$.parts[{i}]", problems)
        if part is not None:
            parts.append(part)
            part_paths.append(f"$.parts[{i}]")
    sources = []
    for i, sdata in enumerate(_list(top, "sources", "$", problems)):
        src = _source(sdata, f"$.sources[{i}]", problems)
        if src is not None:
            sources.append(src)
    detectors = []
    for i, ddata in enumerate(_list(top, "detectors", "$", problems)):
        det = _detector(ddata, f"$.detectors[{i}]", problems)
        if det is not None:
            detectors.append(det)
    _unique_names(sources, "$.sources", problems)
    _unique_names(detectors, "$.detectors", problems)
    names = {s.name for s in sources}
    for i, det in enumerate(detectors):
        back = det.acceptance.back_to_source if det.acceptance is not None else ""
        if back and back not in names:
            problems.add(f"$.detectors[{i}].acceptance.back_to_source", back,
                         "the name of a source: " + ", ".join(repr(n) for n in sorted(names)))
    settings = _settings(top.get("trace", {}), "$.trace", problems)

    scene = Scene(parts=parts, sources=sources, detectors=detectors, materials=materials,
                  ambient=ambient or "air", settings=settings or TraceSettings(), story=story or "",
                  name=name or "")
    # scene-level checks run on every part that could be read, so one pass reports all problems
    resolve_materials(scene, problems, part_paths, skip=frozenset(failed_materials))
    if check_shapes:
        check_geometry(scene, problems, part_paths)
    if linker is not None:
        _file_paths(problems, linker)
    problems.raise_if_errors()
    scene.notes = [str(w) for w in problems.warnings]
    if linker is not None:
        scene.links = linker.links(_plain_dict(scene))
    return scene


def _file_paths(problems: Problems, linker) -> None:
    """Loader problems as the file reads: paths of copies of a repeated part name the part
    written in the file, and a field whose link already has a problem is not reported twice."""
    problems.items = [replace(p, path=linker.file_path(p.path)) for p in problems.items
                      if linked.UNRESOLVED not in p.found]


def _key(name: str) -> str:
    return name if name.replace("_", "").isalnum() else json.dumps(name)


def _list(top: dict, key: str, path: str, problems: Problems) -> list:
    if key not in top:
        return []
    value = F.array(top[key], f"{path}.{key}", problems)
    return value or []


def _unique_names(items, path: str, problems: Problems) -> None:
    seen: dict[str, int] = {}
    for i, it in enumerate(items):
        if it.name in seen:
            problems.add(f"{path}[{i}].name", it.name, f"a name not already used by {path}[{seen[it.name]}]")
        seen.setdefault(it.name, i)


def _treatment(value: Any, where: str, problems: Problems) -> Treatment | None:
    if isinstance(value, str):
        if value in TREATMENT_KINDS and value != MIRROR:
            return Treatment(value)
        if value == MIRROR:
            return Treatment(MIRROR, 1.0)
        problems.add(where, value, f"one of {', '.join(TREATMENT_KINDS)}, or {{\"kind\": \"mirror\", \"reflectance\": R}}")
        return None
    d = F.obj(value, where, problems)
    if d is None:
        return None
    F.check_keys(d, ("kind", "reflectance"), where, problems)
    kind = F.string(d, "kind", where, problems, choices=TREATMENT_KINDS)
    refl = F.number(d, "reflectance", where, problems, default=1.0, minimum=0.0, maximum=1.0,
                    what="a reflectance")
    if kind is None or refl is None:
        return None
    return Treatment(kind, refl)


def _loop(value: Any, where: str, problems: Problems) -> Loop | None:
    items = F.array(value, where, problems)
    if items is None:
        return None
    if len(items) < 2:
        problems.add(where, f"{len(items)} vertex entries", "at least 3 entries (or 2 when one edge is an arc)")
        return None
    starts: list = []
    extras: list[dict] = []
    ok = True
    for j, item in enumerate(items):
        w = f"{where}[{j}]"
        d = F.obj(item, w, problems)
        if d is None:
            ok = False
            continue
        F.check_keys(d, EDGE_KEYS, w, problems)
        p = F.point(d, "from", w, problems)
        face = F.string(d, "face", w, problems, default=None)
        treat = _treatment(d["treatment"], f"{w}.treatment", problems) if "treatment" in d else Treatment()
        arc = None
        if "arc" in d:
            a = F.obj(d["arc"], f"{w}.arc", problems)
            if a is not None:
                F.check_keys(a, ("center", "direction"), f"{w}.arc", problems)
                c = F.point(a, "center", f"{w}.arc", problems)
                direction = F.string(a, "direction", f"{w}.arc", problems, choices=("ccw", "cw"))
                arc = (c, direction) if c is not None and direction is not None else None
                ok = ok and arc is not None
        if p is None or treat is None:
            ok = False
        starts.append(p)
        extras.append({"face": face, "treatment": treat, "arc": arc})
    if not ok:
        return None
    edges = []
    n = len(starts)
    for j in range(n):
        ex = extras[j]
        arc = ex["arc"]
        edges.append(Edge(start=starts[j], end=starts[(j + 1) % n],
                          arc_center=arc[0] if arc else None, ccw=(arc[1] == "ccw") if arc else True,
                          face=ex["face"], treatment=ex["treatment"] or Treatment()))
    return Loop(tuple(edges))


def _part(value: Any, where: str, problems: Problems) -> Part | None:
    from .shapes import BUILDERS, build
    d = F.obj(value, where, problems)
    if d is None:
        return None
    F.check_keys(d, PART_KEYS, where, problems)
    name = F.string(d, "name", where, problems, nonempty=True)
    material = F.string(d, "material", where, problems, nonempty=True)
    has_b, has_s = "boundary" in d, "shape" in d
    if has_b == has_s:
        problems.add(where, "<both 'boundary' and 'shape'>" if has_b else "<neither 'boundary' nor 'shape'>",
                     "exactly one of 'boundary' (a list of edges) or 'shape' (a shape builder)")
        return None
    spec = None
    outer = None
    if has_b:
        outer = _loop(d["boundary"], f"{where}.boundary", problems)
    else:
        s = F.obj(d["shape"], f"{where}.shape", problems)
        if s is not None:
            F.check_keys(s, ("kind", "params", "position", "rotation_deg"), f"{where}.shape", problems)
            kind = F.string(s, "kind", f"{where}.shape", problems, choices=tuple(BUILDERS))
            params = F.obj(s.get("params", {}), f"{where}.shape.params", problems)
            pos = F.point(s, "position", f"{where}.shape", problems, default=(0.0, 0.0))
            rot = F.number(s, "rotation_deg", f"{where}.shape", problems, default=0.0)
            if params is not None and kind is not None and not _params_in_range(kind, params, f"{where}.shape.params", problems):
                params = None
            if kind is not None and params is not None and pos is not None and rot is not None:
                spec = ShapeSpec(kind, dict(params), pos, rot)
                try:
                    outer = build(spec)
                except (ValueError, ArithmeticError) as exc:
                    param = getattr(exc, "param", None)
                    if param is not None:
                        problems.add(f"{where}.shape.params.{param}", exc.found, exc.expected)
                    else:
                        problems.add(f"{where}.shape.params", "<invalid parameters>", str(exc))
    holes = []
    for k, h in enumerate(F.array(d.get("holes", []), f"{where}.holes", problems) or []):
        loop = _loop(h, f"{where}.holes[{k}]", problems)
        if loop is not None:
            holes.append(loop)
    if outer is not None and "faces" in d:
        outer = _apply_faces(outer, d["faces"], f"{where}.faces", problems)
    if name is None or material is None or outer is None:
        return None
    return Part(name, material, outer, tuple(holes), spec)


def _params_in_range(kind: str, params: dict, where: str, problems: Problems) -> bool:
    """Screen builder parameters for sizes no scene needs before building: a radius of 1e308
    breaks arc flattening, and a count of a billion prisms would hang the loader."""
    from .shapes import PARAMETERS
    ok = True
    counts = {p.name for p in PARAMETERS.get(kind, ()) if p.type == "integer"}

    def walk(value, w, key):
        nonlocal ok
        if isinstance(value, dict):
            for k, v in value.items():
                walk(v, f"{w}.{_key(str(k))}", k)
        elif isinstance(value, list):
            for k, v in enumerate(value):
                walk(v, f"{w}[{k}]", key)
        elif isinstance(value, float) and not math.isfinite(value):
            # a literal such as 1e400 reads as an infinite float; a file holds finite numbers
            problems.add(w, f"<{value!r}>", "a finite number (0 stands for a flat lens surface)")
            ok = False
        elif F.is_number(value):
            limit = F.MAX_COUNT if key in counts else F.MAX_COORD
            if abs(value) > limit:
                problems.add(w, value, f"a value of magnitude at most {limit:g}")
                ok = False
    walk(params, where, None)
    return ok


def _apply_faces(loop: Loop, value: Any, where: str, problems: Problems) -> Loop | None:
    """Per-face settings for a built shape, keyed by the builder's face name:
    {"left face": {"name": "exit face", "treatment": "anti-reflection"}}.  Treatments and
    new names apply after the build; two faces may not end up with the same name, since
    reports and the ledger tell faces apart by name."""
    d = F.obj(value, where, problems)
    if d is None:
        return loop
    names = {e.face for e in loop.edges}
    overrides: dict[str, dict] = {}
    for face, spec in d.items():
        w = f"{where}.{_key(face)}"
        if face not in names:
            problems.add(w, face, f"a face of this shape: {', '.join(sorted(n for n in names if n))}")
            continue
        s = F.obj(spec, w, problems)
        if s is None:
            continue
        F.check_keys(s, FACE_KEYS, w, problems)
        o: dict[str, Any] = {}
        if "treatment" in s:
            t = _treatment(s["treatment"], f"{w}.treatment", problems)
            if t is not None:
                o["treatment"] = t
        if "name" in s:
            new_name = F.string(s, "name", w, problems, nonempty=True)
            if new_name is not None:
                o["name"] = new_name
        overrides[face] = o
    final: dict[str, str] = {}
    for face in sorted(n for n in names if n):
        new_name = overrides.get(face, {}).get("name", face)
        if new_name in final:
            # blame the renamed face (at least one of the two was renamed)
            culprit, other = (face, final[new_name]) if "name" in overrides.get(face, {}) \
                else (final[new_name], face)
            problems.add(f"{where}.{_key(culprit)}.name", new_name,
                         f"a name no other face of this part has (face {other!r} ends up with it too)")
        final[new_name] = face
    return apply_face_overrides(loop, overrides)


def apply_face_overrides(loop: Loop, overrides: dict[str, dict]) -> Loop:
    """A built loop with per-face {"treatment": Treatment, "name": str} applied, matched by
    the builder's face names.  Also what a shape editor uses to keep a user's face settings
    when the part is rebuilt (moved, turned, resized): see face_overrides."""
    edges = []
    for e in loop.edges:
        o = overrides.get(e.face) if e.face else None
        if o:
            e = replace(e, treatment=o.get("treatment", e.treatment), face=o.get("name", e.face))
        edges.append(e)
    return Loop(tuple(edges))


def face_overrides(part: Part) -> dict[str, dict] | None:
    """What differs between a builder part's faces and a fresh build of its shape, keyed by the
    builder's face name: {"left face": {"name": "exit face", "treatment": Treatment}}.  None when
    the difference cannot be said per face (geometry edited by hand, or the edges sharing one
    builder face disagree), so the part must be saved as a plain boundary."""
    from .shapes import build
    if part.shape is None:
        return None
    built = build(part.shape)
    if not _same_geometry(built, part.outer):
        return None
    out: dict[str, dict] = {}
    seen: dict[str | None, tuple] = {}
    for b, e in zip(built.edges, part.outer.edges):
        state = (e.face, e.treatment)
        if seen.setdefault(b.face, state) != state:
            return None   # edges of one builder face no longer alike
        if b.face is None:
            if state != (None, b.treatment):
                return None   # an unnamed edge changed: no face key to say it under
            continue
        o: dict[str, Any] = {}
        if e.treatment != b.treatment:
            o["treatment"] = e.treatment
        if e.face != b.face:
            if not e.face:
                return None
            o["name"] = e.face
        if o:
            out[b.face] = o
    return out


def _spectrum(value: Any, where: str, problems: Problems) -> Spectrum | None:
    d = F.obj(value, where, problems)
    if d is None:
        return None
    F.check_keys(d, ("wavelength_nm", "lines", "band"), where, problems)
    given = [k for k in ("wavelength_nm", "lines", "band") if k in d]
    if len(given) != 1:
        problems.add(where, f"<{' and '.join(given) or 'none'} of wavelength_nm, lines, band>",
                     "exactly one of wavelength_nm, lines [[nm, weight], ...] or band {center_nm, fwhm_nm}")
        return None
    wl_rule = dict(minimum=100.0, maximum=20000.0, what="a wavelength in nm")
    if "wavelength_nm" in d:
        wl = F.number(d, "wavelength_nm", where, problems, **wl_rule)
        return None if wl is None else Spectrum.line(wl)
    if "band" in d:
        b = F.obj(d["band"], f"{where}.band", problems)
        if b is None:
            return None
        F.check_keys(b, ("center_nm", "fwhm_nm"), f"{where}.band", problems)
        c = F.number(b, "center_nm", f"{where}.band", problems, **wl_rule)
        f = F.number(b, "fwhm_nm", f"{where}.band", problems, minimum=0.0, exclusive=True,
                     what="a width in nm")
        return None if c is None or f is None else Spectrum.band(c, f)
    lines = F.array(d["lines"], f"{where}.lines", problems)
    if not lines:
        if lines is not None:
            problems.add(f"{where}.lines", "an empty list", "at least one [wavelength_nm, weight] pair")
        return None
    wls, ws = [], []
    for k, item in enumerate(lines):
        w = f"{where}.lines[{k}]"
        if not (isinstance(item, list) and len(item) == 2):
            problems.add(w, f"<{F.type_name(item)}>", "a pair [wavelength_nm, weight]")
            continue
        wl = F.number_value(item[0], f"{w}[0]", problems, **wl_rule)
        wt = F.number_value(item[1], f"{w}[1]", problems, minimum=0.0, exclusive=True, what="a weight")
        if wl is not None and wt is not None:
            wls.append(wl)
            ws.append(wt)
    if len(wls) != len(lines):
        return None
    return Spectrum(tuple(wls), tuple(ws))


def _source(value: Any, where: str, problems: Problems) -> Source | None:
    d = F.obj(value, where, problems)
    if d is None:
        return None
    F.check_keys(d, SOURCE_KEYS, where, problems)
    before = len(problems.errors)
    kw = dict(
        name=F.string(d, "name", where, problems, nonempty=True),
        kind=F.string(d, "kind", where, problems, choices=SOURCE_KINDS),
        position=F.point(d, "position", where, problems),
        direction_deg=F.number(d, "direction_deg", where, problems, default=0.0, what="an angle in degrees"),
        width=F.number(d, "width", where, problems, default=1.0, minimum=0.0, maximum=F.MAX_COORD,
                       exclusive=d.get("kind") == "beam", what="a width in mm"),
        half_angle_deg=F.number(d, "half_angle_deg", where, problems, default=90.0, minimum=0.0,
                                maximum=180.0, what="a half angle in degrees"),
        distribution=F.string(d, "distribution", where, problems, default="uniform", choices=DISTRIBUTIONS),
        cos_power=F.number(d, "cos_power", where, problems, default=1.0, minimum=0.0, exclusive=True,
                           what="an exponent m of cos^m"),
        flux=F.number(d, "flux", where, problems, default=1.0, minimum=0.0, maximum=MAX_FLUX, what="a flux"),
        polarization=F.string(d, "polarization", where, problems, default="unpolarized", choices=POLARIZATIONS),
        sampling=F.string(d, "sampling", where, problems, default="even", choices=SAMPLINGS),
        note=F.string(d, "note", where, problems, default=""),
    )
    spectrum = _spectrum(d["spectrum"], f"{where}.spectrum", problems) if "spectrum" in d else Spectrum()
    if kw["kind"] in ("point", "emitter") and kw["distribution"] != "uniform" and (kw["half_angle_deg"] or 0) > 90:
        problems.add(f"{where}.half_angle_deg", kw["half_angle_deg"],
                     "at most 90 for a lambertian or cos_power distribution")
    if len(problems.errors) > before or spectrum is None:
        return None
    return Source(spectrum=spectrum, **kw)


def _detector(value: Any, where: str, problems: Problems) -> Detector | None:
    d = F.obj(value, where, problems)
    if d is None:
        return None
    F.check_keys(d, DETECTOR_KEYS, where, problems)
    before = len(problems.errors)
    kw = dict(
        name=F.string(d, "name", where, problems, nonempty=True),
        start=F.point(d, "start", where, problems),
        end=F.point(d, "end", where, problems),
        absorbing=F.boolean(d, "absorbing", where, problems, default=True),
        bins=F.integer(d, "bins", where, problems, default=50, minimum=1, maximum=MAX_BINS),
        angle_bins=F.integer(d, "angle_bins", where, problems, default=36, minimum=1, maximum=MAX_BINS),
        central_fraction=F.number(d, "central_fraction", where, problems, default=0.8, minimum=0.0,
                                  exclusive=True, maximum=1.0, what="a fraction"),
    )
    if len(problems.errors) > before:
        return None
    if math.dist(kw["start"], kw["end"]) <= 0:
        problems.add(f"{where}.end", list(kw["end"]), "a point different from start (a detector has length)")
        return None
    if "acceptance" in d:
        kw["acceptance"] = _acceptance(d["acceptance"], f"{where}.acceptance", problems)
        if kw["acceptance"] is None:
            return None
    return Detector(**kw)


def _acceptance(value: Any, where: str, problems: Problems) -> Acceptance | None:
    """{"half_angle_deg": a, "direction_deg": d} or {"half_angle_deg": a, "back_to_source": NAME}."""
    before = len(problems.errors)
    d = F.object_with_keys(value, ACCEPTANCE_KEYS, where, problems)
    if d is None:
        return None
    half = F.number(d, "half_angle_deg", where, problems, minimum=0.0, exclusive=True, maximum=180.0,
                    what="an angle in degrees")
    if ("direction_deg" in d) == ("back_to_source" in d):
        problems.add(where, sorted(k for k in d if k in ("direction_deg", "back_to_source")) or "<neither>",
                     "exactly one of direction_deg (the accepted direction of travel, degrees) or "
                     "back_to_source (a source's name: accept light going back along it)")
        return None
    direction = F.number(d, "direction_deg", where, problems, default=None) if "direction_deg" in d else None
    back = F.string(d, "back_to_source", where, problems, nonempty=True) if "back_to_source" in d else ""
    if len(problems.errors) > before:
        return None
    return Acceptance(half, direction, back)


def _settings(value: Any, where: str, problems: Problems) -> TraceSettings | None:
    d = F.obj(value, where, problems)
    if d is None:
        return None
    d = _renamed_keys(d, OLD_TRACE_KEYS, where, problems)
    F.check_keys(d, TRACE_KEYS, where, problems)
    base = TraceSettings()
    kw = dict(
        rays=F.integer(d, "rays", where, problems, default=base.rays, minimum=0),
        mode=F.string(d, "mode", where, problems, default=base.mode, choices=MODES),
        flux_floor=F.number(d, "flux_floor", where, problems, default=base.flux_floor,
                                   minimum=0.0, maximum=1.0, what="a relative flux"),
        max_generations=F.integer(d, "max_generations", where, problems, default=base.max_generations, minimum=1,
                                  maximum=MAX_GENERATIONS),
        segment_budget=F.integer(d, "segment_budget", where, problems, default=base.segment_budget, minimum=1),
        seed=F.integer(d, "seed", where, problems, default=base.seed, minimum=0),
        max_memory_mb=F.number(d, "max_memory_mb", where, problems, default=base.max_memory_mb, minimum=0.0,
                               exclusive=True, maximum=MAX_MEMORY_MB, what="a memory limit in MB"),
    )
    if any(v is None for v in kw.values()):
        return None
    return TraceSettings(**kw)


# ----------------------------------------------------------------------------- saving

def _renamed_keys(d: dict, renamed: dict[str, str], where: str, problems: Problems) -> dict:
    """Read keys under their earlier names: a note for each, an error if both names are given."""
    if not any(old in d for old in renamed):
        return d
    d = dict(d)
    for old, new in renamed.items():
        if old not in d:
            continue
        if new in d:
            problems.add(f"{where}.{old}", d[old], f"only {new!r}, its new name (both are given)")
            del d[old]
            continue
        d[new] = d.pop(old)
        problems.warn(f"{where}.{old}", f"<the earlier name of {new!r}>",
                      f"{new!r}; the earlier name is still read, and saving writes the new one")
    return d


def scene_to_dict(scene: Scene) -> dict:
    """The file form of a scene, with its linked numbers (scene.links) written back where the
    scene still holds the values they gave; a value edited since is written as a plain number."""
    return linked.restore(_plain_dict(scene), scene.links)


def _plain_dict(scene: Scene) -> dict:
    out: dict[str, Any] = {"format": FORMAT_NAME, "version": FORMAT_VERSION, "units": dict(UNITS)}
    if scene.name:
        out["name"] = scene.name
    if scene.story:
        out["story"] = scene.story
    out["ambient"] = scene.ambient
    if scene.materials:
        out["materials"] = {k: m.to_dict() for k, m in scene.materials.items()}
    out["parts"] = [_part_dict(p) for p in scene.parts]
    out["sources"] = [_source_dict(s) for s in scene.sources]
    out["detectors"] = [_detector_dict(d) for d in scene.detectors]
    t = scene.settings
    out["trace"] = {"rays": int(t.rays), "mode": t.mode, "flux_floor": float(t.flux_floor),
                    "max_generations": int(t.max_generations), "segment_budget": int(t.segment_budget), "seed": int(t.seed)}
    if t.max_memory_mb != TraceSettings().max_memory_mb:    # written only when set: files stay as they were
        out["trace"]["max_memory_mb"] = float(t.max_memory_mb)
    return out


def _loop_list(loop: Loop) -> list[dict]:
    items = []
    for e in loop.edges:
        item: dict[str, Any] = {"from": _xy(e.start)}
        if e.face:
            item["face"] = e.face
        if e.treatment != Treatment():
            item["treatment"] = e.treatment.to_dict()
        if e.is_arc:
            item["arc"] = {"center": _xy(e.arc_center), "direction": "ccw" if e.ccw else "cw"}
        items.append(item)
    return items


def _part_dict(p: Part) -> dict:
    d: dict[str, Any] = {"name": p.name, "material": p.material}
    overrides = face_overrides(p)
    if overrides is not None:
        d["shape"] = {"kind": p.shape.kind, "params": _file_params(p.shape),
                      "position": _xy(p.shape.position), "rotation_deg": float(p.shape.rotation_deg)}
        faces = {}
        for face, o in overrides.items():
            item: dict[str, Any] = {}
            if "name" in o:
                item["name"] = o["name"]
            if "treatment" in o:
                item["treatment"] = o["treatment"].to_dict()
            faces[face] = item
        if faces:
            d["faces"] = faces
    else:   # no builder, or edited by hand since it was built: keep the edges
        d["boundary"] = _loop_list(p.outer)
    if p.holes:
        d["holes"] = [_loop_list(h) for h in p.holes]
    return d


def _file_params(spec: ShapeSpec) -> dict:
    """Builder params as a file holds them: a lens radius of +-inf (flat, from code) is written
    as 0, the file's word for flat, since JSON has no infinity."""
    if spec.kind != "lens":
        return spec.params
    return {k: (0.0 if k in ("r1", "r2") and isinstance(v, float) and math.isinf(v) else v)
            for k, v in spec.params.items()}


def _same_geometry(a: Loop, b: Loop) -> bool:
    """Same edges, face names aside (those a file can rename under `faces`)."""
    if len(a.edges) != len(b.edges):
        return False
    return all(x.start == y.start and x.end == y.end and x.arc_center == y.arc_center
               and x.ccw == y.ccw for x, y in zip(a.edges, b.edges))


def _xy(p) -> list[float]:
    """A point as written: floats always, so an int from code saves as 3.0 the first time too."""
    return [float(p[0]), float(p[1])]


def _source_dict(s: Source) -> dict:
    """Fields a kind does not use are still written when they differ from the default, so a
    source switched from point to beam and back keeps its cone: saving loses nothing."""
    base = Source(s.name)
    d: dict[str, Any] = {"name": s.name, "kind": s.kind, "position": _xy(s.position),
                         "direction_deg": float(s.direction_deg)}
    if s.kind in ("beam", "emitter") or s.width != base.width:
        d["width"] = float(s.width)
    if s.kind in ("point", "emitter") or s.half_angle_deg != base.half_angle_deg:
        d["half_angle_deg"] = float(s.half_angle_deg)
    if s.kind in ("point", "emitter") or s.distribution != base.distribution:
        d["distribution"] = s.distribution
    if s.distribution == "cos_power" or s.cos_power != base.cos_power:
        d["cos_power"] = float(s.cos_power)
    d["flux"] = float(s.flux)
    sp = s.spectrum
    if sp.is_band:
        d["spectrum"] = {"band": {"center_nm": float(sp.band_center_nm), "fwhm_nm": float(sp.band_fwhm_nm)}}
    elif len(sp.wavelengths_nm) == 1 and sp.weights == (1.0,):
        d["spectrum"] = {"wavelength_nm": float(sp.wavelengths_nm[0])}
    else:
        d["spectrum"] = {"lines": [[float(w), float(v)] for w, v in zip(sp.wavelengths_nm, sp.weights)]}
    d["polarization"] = s.polarization
    d["sampling"] = s.sampling
    if s.note:
        d["note"] = s.note
    return d


def _detector_dict(det: Detector) -> dict:
    return {"name": det.name, "start": _xy(det.start), "end": _xy(det.end), "absorbing": det.absorbing,
            "bins": det.bins, "angle_bins": det.angle_bins, "central_fraction": float(det.central_fraction),
            **({"acceptance": _acceptance_dict(det.acceptance)} if det.acceptance is not None else {})}


def _acceptance_dict(a: Acceptance) -> dict:
    out: dict = {"half_angle_deg": float(a.half_angle_deg)}
    if a.back_to_source:
        out["back_to_source"] = a.back_to_source
    else:
        out["direction_deg"] = float(a.direction_deg)
    return out


def scene_to_text(scene: Scene) -> str:
    """The file text.  A scene holding NaN or an infinity (possible only from code) cannot be
    written as JSON: that is a SceneError naming each such field, not a bare ValueError."""
    data = scene_to_dict(scene)
    problems = Problems()
    _non_finite(data, "$", problems)
    problems.raise_if_errors()
    return json.dumps(data, indent=2, allow_nan=False) + "\n"


def _non_finite(value: Any, where: str, problems: Problems) -> None:
    if isinstance(value, float) and not math.isfinite(value):
        problems.add(where, f"<{value!r}>", "a finite number (a scene file cannot hold NaN or infinity)")
    elif isinstance(value, dict):
        for k, v in value.items():
            _non_finite(v, f"{where}.{_key(str(k))}", problems)
    elif isinstance(value, (list, tuple)):
        for k, v in enumerate(value):
            _non_finite(v, f"{where}[{k}]", problems)


def save_scene(scene: Scene, path: str | os.PathLike) -> None:
    atomic_write_text(path, scene_to_text(scene))
