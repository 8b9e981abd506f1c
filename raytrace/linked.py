"""Linked numbers in scene files: named numbers and expressions, aimed and pivoted sources, and
rows of repeated parts.

Besides plain numbers a scene file may hold
- "numbers": {"radius": 8, "gap": "radius / 16"}: named numbers and expressions;
- "= EXPRESSION" in any number field of a part, source, detector, material or trace setting,
  e.g. "position": ["= guide.output_x", "= guide.output_y + gap"];
- on a source, "aim_at": [x, y] (the source turns to face that point) and "pivot": [x, y] with
  "turn_deg": a (the source, position and direction, turns by a about the pivot);
- on a part, "repeat": {"count": N, "pitch": p, "direction_deg": d}: N copies named NAME[0] ..
  NAME[N-1], each p mm further along direction d; "faces" keys "NAME[k].FACE" set one copy's face.

`resolve(data, problems)` turns a file's dict into a plain one that the loader reads as before:
every expression evaluated (expressions.py; never Python's eval), repeats expanded and sources
placed.  Problems name the file's JSON path.  The returned `Linker` then records, against the
loaded scene, what is needed to write the file back as it was: `restore(plain, links)` puts
each expression, placement and repeat back where the scene still holds the value it gave, and
leaves a plain number where the value was changed by hand (a GUI edit).
"""
from __future__ import annotations

import copy
import json
import math
import re
from dataclasses import dataclass
from typing import Any

from . import fields as F
from .errors import Problems
from .expressions import RESERVED, ExpressionError, Reference, evaluate, parse, references

# fields that hold text: a value there that starts with "=" is text, not an expression
TEXT_KEYS = frozenset({"name", "story", "note", "material", "ambient", "kind", "face",
                       "distribution", "polarization", "sampling", "mode", "direction",
                       "treatment", "model", "source"})
SCANNED = ("parts", "sources", "detectors", "materials", "trace")
PLACEMENT_KEYS = ("position", "direction_deg", "aim_at", "pivot", "turn_deg")
REPEAT_KEYS = ("count", "pitch", "direction_deg")
MAX_COPIES = 10_000
UNRESOLVED = "<a linked value with a problem (see its own message)>"
_NAME = re.compile(r"[A-Za-z_]\w*$")
_COPY_NAME = re.compile(r"(.*)\[(\d+)\]$", re.S)
_COPY_FACE = re.compile(r"(.*)\[(-?\d+)\]\.(.+)$", re.S)   # NAME[k].FACE; k < 0 counts from the end


class _Failed(Exception):
    """A value that depends on a problem already reported."""


class _Cycle(Exception):
    def __init__(self, chain: list):
        self.chain = chain


# ----------------------------------------------------------------------------- what is kept

@dataclass(frozen=True)
class Leaf:
    """A number field written as an expression."""

    where: tuple          # (collection, object name or None, key path inside the object)
    raw: str
    value: Any            # as the resolver gave it
    saved: Any            # as the scene saves it


@dataclass(frozen=True)
class Placement:
    """A source placed by aim_at / pivot / turn_deg."""

    source: str
    raw: str              # JSON of {key: value as written} for the PLACEMENT_KEYS written
    position: tuple
    direction_deg: float


@dataclass(frozen=True)
class Repeat:
    """A part written once with "repeat", loaded as copies."""

    part: str
    raw: str              # JSON of the part as written
    copies: tuple         # names of the copies
    plain: str            # JSON of the copies as the resolver gave them
    saved: str            # JSON of the copies as the scene saves them


@dataclass(frozen=True)
class Links:
    numbers: str | None   # JSON of the "numbers" section as written
    items: tuple
    values: tuple = ()    # (name, value) of each named number, evaluated

    def named_numbers(self) -> dict[str, float]:
        return dict(self.values)

    def placed(self) -> set[str]:
        """Names of the sources placed by aim_at, pivot or turn_deg."""
        return {x.source for x in self.items if isinstance(x, Placement)}

    def repeated(self) -> dict[str, tuple[str, ...]]:
        """Each repeated part's name as written, and the names of its copies."""
        return {x.part: x.copies for x in self.items if isinstance(x, Repeat)}


# ----------------------------------------------------------------------------- paths

def json_path(path: tuple) -> str:
    out = "$"
    for k in path:
        if isinstance(k, int):
            out += f"[{k}]"
        else:
            out += "." + (k if re.fullmatch(r"\w+", k) else json.dumps(k))
    return out


def _get(data, path: tuple):
    cur = data
    for k in path:
        cur = cur[k]
    return cur


def _set(data, path: tuple, value) -> None:
    _get(data, path[:-1])[path[-1]] = value


def _find(data: dict, collection: str, name):
    """The object `name` of a collection (by its name in lists, by key in materials)."""
    group = data.get(collection)
    if name is None:
        return group
    if isinstance(group, list):
        return next((o for o in group if isinstance(o, dict) and o.get("name") == name), None)
    if isinstance(group, dict):
        return group.get(name)
    return None


def _at(data: dict, where: tuple):
    """(container, key) of a Leaf's place in `data`, or None when it is not there."""
    collection, name, sub = where
    obj = _find(data, collection, name)
    try:
        container = _get(obj, sub[:-1])
        container[sub[-1]]
    except (KeyError, IndexError, TypeError):
        return None
    return container, sub[-1]


def _is_expression(value, key) -> bool:
    return isinstance(value, str) and value.lstrip().startswith("=") and key not in TEXT_KEYS


def _expression_leaves(data: dict) -> list[tuple]:
    """JSON paths of every "= ..." field, in file order."""
    out = []

    def walk(value, path, key):
        if isinstance(value, dict):
            for k, v in value.items():
                walk(v, path + (k,), k)
        elif isinstance(value, list):
            for k, v in enumerate(value):
                walk(v, path + (k,), key)
        elif _is_expression(value, key):
            out.append(path)
    for top in SCANNED:
        if top in data:
            walk(data[top], (top,), top)
    return out


def has_links(data: Any) -> bool:
    if not isinstance(data, dict):
        return False
    if "numbers" in data or _expression_leaves(data):
        return True
    return any(isinstance(o, dict) and (set(o) & {"aim_at", "pivot", "turn_deg", "repeat"})
               for key in ("parts", "sources") if isinstance(data.get(key), list) for o in data[key])


# ----------------------------------------------------------------------------- evaluation

class _Resolver:
    """Evaluates named numbers, expression fields and part values on demand, each once, with
    cycles found by the chain of values being evaluated."""

    def __init__(self, data: dict, problems: Problems):
        self.data, self.problems = data, problems
        self.memo: dict[tuple, Any] = {}
        self.stack: list[tuple] = []
        self.numbers: dict[str, Any] = {}
        self.refused: set[str] = set()   # named numbers whose value was refused (already reported)
        self.parts = [p for p in data.get("parts", []) if isinstance(p, dict)] \
            if isinstance(data.get("parts"), list) else []
        self.leaves = set(_expression_leaves(data))

    # --- the cells
    def value(self, key: tuple):
        if key in self.memo:
            v = self.memo[key]
            if v is _FAILED:
                raise _Failed
            return v
        if key in self.stack:
            raise _Cycle(self.stack[self.stack.index(key):] + [key])
        self.stack.append(key)
        try:
            v = self._compute(key)
        except _Cycle as c:
            self.memo[key] = _FAILED
            if c.chain[0] != key:
                raise
            self._report(key, "<a chain of links that leads back to itself: "
                         + " -> ".join(self._label(k) for k in c.chain) + ">",
                         "links that end in plain numbers (no value may depend on itself)")
            raise _Failed from None
        except ExpressionError as exc:
            self.memo[key] = _FAILED
            self._report(key, self._text(key), f"a valid expression: {exc}")
            raise _Failed from None
        except _Failed:
            self.memo[key] = _FAILED
            raise
        finally:
            self.stack.pop()
        self.memo[key] = v
        return v

    def _compute(self, key: tuple):
        kind = key[0]
        if kind == "number":
            raw = self.numbers[key[1]]
            return raw if F.is_number(raw) else self._expression(raw)
        if kind == "leaf":
            return self._expression(_get(self.data, key[1]))
        return self._part_values(key[1], key[2])

    def _expression(self, text: str) -> float:
        text = text.lstrip()
        return evaluate(parse(text[1:] if text.startswith("=") else text), self._lookup)

    def _report(self, key: tuple, found, expected: str) -> None:
        if key[0] == "number":
            where = json_path(("numbers", key[1]))
        elif key[0] == "leaf":
            where = json_path(key[1])
        else:
            where = json_path(("parts", key[1], "shape"))
        self.problems.add(where, found, expected)

    def _text(self, key: tuple):
        if key[0] == "number":
            return self.numbers[key[1]]
        if key[0] == "leaf":
            return _get(self.data, key[1])
        return f"<part {self.parts[key[1]].get('name')!r}>"

    def _label(self, key: tuple) -> str:
        if key[0] == "number":
            return key[1]
        if key[0] == "leaf":
            return json_path(key[1])
        name = self.parts[key[1]].get("name")
        return f"part {name!r}" if key[2] is None else f"part {name}[{key[2]}]"

    # --- numbers in the file, plain or linked
    def number_at(self, path: tuple, default=None):
        try:
            raw = _get(self.data, path)
        except (KeyError, IndexError, TypeError):
            return default
        if path in self.leaves:
            return self.value(("leaf", path))
        return raw

    def resolved(self, value, path: tuple):
        """A copy of a piece of the file with its expression fields evaluated."""
        if isinstance(value, dict):
            return {k: self.resolved(v, path + (k,)) for k, v in value.items()}
        if isinstance(value, list):
            return [self.resolved(v, path + (k,)) for k, v in enumerate(value)]
        if path in self.leaves:
            return self.value(("leaf", path))
        return value

    # --- references
    def _lookup(self, ref: Reference) -> float:
        if ref.index is None and not ref.attrs:
            if ref.base in self.numbers:
                return self.value(("number", ref.base))
            if ref.base in self.refused:
                raise ExpressionError(f"{ref} is a named number whose own value is refused: expected "
                                      f"a valid value at {json_path(('numbers', ref.base))} (see there)")
            if self._part_index(ref.base) is not None:
                raise ExpressionError(f"{ref} is a part: expected one of its values, e.g. {ref}.x")
            known = ", ".join(self.numbers) or "none in this file"
            raise ExpressionError(f"unknown name {ref}: expected a named number ({known}) or "
                                  "PART.VALUE such as guide.output_x")
        i, copy_index = self._part_of(ref)
        values = self.value(("part", i, copy_index))
        attr = ".".join(ref.attrs)
        if attr not in values:
            plain = [k for k in values if "." not in k]
            faces = sorted({k.rpartition(".")[0] for k in values if "." in k})
            raise ExpressionError(
                f"{ref}: part {self.parts[i].get('name')!r} offers " + ", ".join(plain)
                + ("; and FACE.start_x (start_y, end_x, end_y, mid_x, mid_y) for its faces "
                   + ", ".join(repr(f) for f in faces) if faces else ""))
        return values[attr]

    def _part_index(self, name: str) -> int | None:
        return next((i for i, p in enumerate(self.parts) if p.get("name") == name), None)

    def _part_of(self, ref: Reference) -> tuple[int, int | None]:
        base, index = ref.base, ref.index
        i = self._part_index(base)
        if i is None and index is None and (m := _COPY_NAME.match(base)):
            base, index = m.group(1), int(m.group(2))       # 'sheet[3]'.x, quoted whole
            i = self._part_index(base)
        if i is None:
            names = ", ".join(repr(p.get("name")) for p in self.parts) or "none"
            raise ExpressionError(f"{ref}: no part is called {base!r} (parts: {names})")
        part = self.parts[i]
        if not isinstance(part.get("shape"), dict):
            raise ExpressionError(f"{ref}: part {base!r} is given by its boundary; only parts "
                                  "built from a shape offer values")
        if "repeat" in part:
            count = self._copies(i)
            if index is None:
                raise ExpressionError(f"{ref}: part {base!r} is repeated; name one copy, "
                                      f"{base}[0] .. {base}[{count - 1}]")
            if index >= count:
                raise ExpressionError(f"{ref}: part {base!r} has copies {base}[0] .. "
                                      f"{base}[{count - 1}]")
        elif index is not None:
            raise ExpressionError(f"{ref}: part {base!r} is not repeated; write {base}.VALUE")
        return i, index

    def _copies(self, i: int) -> int:
        count = self._repeat_field(i, "count", F.MISSING, Problems())
        if count is None:
            raise _Failed    # reported where the repeat is expanded
        return count

    def _repeat_field(self, i: int, key: str, default, sink: Problems):
        """One field of part i's repeat, checked (None after a problem, added to `sink`)."""
        base = ("parts", i, "repeat")
        where = json_path(base)
        rep = self.parts[i].get("repeat")
        if not isinstance(rep, dict):
            return None
        vals = {key: self.number_at(base + (key,), default)}
        if vals[key] is F.MISSING:
            del vals[key]
        if key == "count":
            return F.integer(vals, key, where, sink, minimum=1, maximum=MAX_COPIES)
        if key == "pitch":
            return F.number(vals, key, where, sink, minimum=0.0, exclusive=True,
                            maximum=F.MAX_COORD, what="a pitch in mm")
        return F.number(vals, key, where, sink, default=0.0, what="an angle in degrees")

    def repeat_spec(self, i: int, problems: Problems):
        """(count, pitch, direction_deg) of part i's repeat, or None (problems reported)."""
        where = json_path(("parts", i, "repeat"))
        d = F.obj(self.parts[i].get("repeat"), where, problems)
        if d is None:
            return None
        F.check_keys(d, REPEAT_KEYS, where, problems)
        try:
            out = tuple(self._repeat_field(i, k, F.MISSING, problems) for k in REPEAT_KEYS)
        except _Failed:
            return None
        return None if None in out else out

    def _step(self, i: int) -> tuple[float, float]:
        """The pitch and direction of part i's repeat, for copies after the first."""
        sink = Problems()
        pitch = self._repeat_field(i, "pitch", F.MISSING, sink)
        direction = self._repeat_field(i, "direction_deg", F.MISSING, sink)
        if pitch is None or direction is None:
            raise _Failed
        return pitch, direction

    def _part_values(self, i: int, copy_index: int | None) -> dict:
        from .geometry import ShapeSpec
        from .shapes import ShapeParameterError, derived_values, face_values
        shape = self.resolved(self.parts[i]["shape"], ("parts", i, "shape"))
        try:
            x, y = shape.get("position", [0.0, 0.0])
            if copy_index:
                x, y = _offset((x, y), self._step(i), copy_index)
            spec = ShapeSpec(shape["kind"], dict(shape.get("params", {})), (x, y),
                             shape.get("rotation_deg", 0.0))
            return {**derived_values(spec), **face_values(spec)}
        except (ShapeParameterError, KeyError, TypeError, ValueError, ArithmeticError):
            raise _Failed from None   # the loader reports what is wrong with the shape


_FAILED = object()


def _offset(position, step: tuple[float, float], k: int):
    """Copy k's position: k pitches along the repeat direction (exact along the axes)."""
    from .shapes import _cos_sin_deg
    pitch, direction = step
    c, s = _cos_sin_deg(direction)
    return position[0] + k * pitch * c, position[1] + k * pitch * s


# ----------------------------------------------------------------------------- resolving

class Linker:
    """What `resolve` learned; `links(saved)` records it against the scene as it saves."""

    def __init__(self, numbers, values, leaves, placements, repeats, part_origin):
        self.numbers, self.leaves, self.placements, self.repeats = numbers, leaves, placements, repeats
        self.values = values
        self.part_origin = part_origin    # plain part index -> (file part index, copy or None)

    def file_path(self, path: str) -> str:
        """A loader path in the plain dict, as a path in the file (copies -> their part)."""
        m = re.match(r"\$\.parts\[(\d+)\]", path)
        if not m or int(m.group(1)) >= len(self.part_origin):
            return path
        i, _ = self.part_origin[int(m.group(1))]
        return f"$.parts[{i}]" + path[m.end():]

    def links(self, saved: dict) -> Links:
        items: list = []
        for where, raw, value in self.leaves:
            spot = _at(saved, where)
            if spot is not None:
                items.append(Leaf(where, raw, value, spot[0][spot[1]]))
        items += self.placements
        for name, raw, copies, plain in self.repeats:
            saved_copies = [_find(saved, "parts", c) for c in copies]
            items.append(Repeat(name, raw, tuple(copies), plain, _dumps(saved_copies)))
        return Links(self.numbers, tuple(items), self.values)


def _dumps(value) -> str:
    """Stable text of a piece of a file (a value JSON cannot hold, such as a NaN token, is in
    a file that fails to load, so its text only has to exist)."""
    return json.dumps(value, sort_keys=True, default=repr)


def _text(value) -> str:
    """A piece of a file as written, key order kept (see _dumps for values JSON cannot hold)."""
    return json.dumps(value, default=repr)


def resolve(data: dict, problems: Problems) -> tuple[dict, Linker | None]:
    """The plain form of a file's dict (a new dict; `data` is not changed), and a Linker, or
    (data, None) when the file links nothing."""
    if not has_links(data):
        return data, None
    data = copy.deepcopy(data)
    numbers_raw = data.pop("numbers", None)
    r = _Resolver(data, problems)
    if numbers_raw is not None and F.obj(numbers_raw, "$.numbers", problems) is not None:
        for name, value in numbers_raw.items():
            where = json_path(("numbers", name))
            if not _NAME.match(name) or name in RESERVED or name == "wavelength":
                problems.add(where, name, "a name of letters, digits and _ that does not start with a "
                             "digit and is not a function, pi or wavelength")
            elif isinstance(value, str) or F.is_number(value):
                r.numbers[name] = value
            else:
                r.refused.add(name)
                problems.add(where, f"<{F.type_name(value)}>",
                             "a number or an expression such as \"2 * radius\"")
        for name in r.numbers:
            _try(r.value, ("number", name))

    plain = copy.deepcopy(data)
    leaves = []
    for path in sorted(r.leaves, key=_order(data)):
        v = _try(r.value, ("leaf", path))
        _set(plain, path, v if v is not None else F.NonFinite(UNRESOLVED))
        leaves.append(path)

    placements = _place_sources(data, plain, problems)
    repeats, origin = _expand_repeats(r, data, plain, problems)
    placed = {p.source for p in placements}
    repeated = {i for i, p in enumerate(r.parts) if "repeat" in p}
    kept = []
    for path in leaves:
        collection, index, sub = path[0], (path[1] if len(path) > 1 else None), path[2:]
        if collection == "sources" and data["sources"][index].get("name") in placed \
                and sub and sub[0] in PLACEMENT_KEYS:
            continue      # written back with the placement
        if collection == "parts" and index in repeated:
            continue      # written back with the repeated part
        if collection in ("parts", "sources", "detectors"):
            where = (collection, data[collection][index].get("name"), sub)
        elif collection == "materials":
            where = (collection, index, sub)
        else:
            where = (collection, None, path[1:])
        kept.append((where, _get(data, path), r.memo.get(("leaf", path))))
    numbers = None if numbers_raw is None else _text(numbers_raw)
    values = tuple((n, float(r.memo[("number", n)])) for n in r.numbers
                   if r.memo.get(("number", n), _FAILED) is not _FAILED)
    return plain, Linker(numbers, values, kept, placements, repeats, origin)


def _order(data: dict):
    keys = {p: k for k, p in enumerate(_expression_leaves(data))}
    return lambda p: keys[p]


def _try(fn, *args):
    try:
        return fn(*args)
    except _Failed:
        return None


def _place_sources(data: dict, plain: dict, problems: Problems) -> list[Placement]:
    out = []
    sources = plain.get("sources")
    if not isinstance(sources, list):
        return out
    for i, s in enumerate(sources):
        if not isinstance(s, dict) or not set(s) & {"aim_at", "pivot", "turn_deg"}:
            continue
        where = f"$.sources[{i}]"
        before = len(problems.errors)
        pos = F.point(s, "position", where, problems)
        aim = F.point(s, "aim_at", where, problems, default=None)
        pivot = F.point(s, "pivot", where, problems, default=None)
        turn = F.number(s, "turn_deg", where, problems, default=0.0, what="an angle in degrees")
        if aim is not None and "direction_deg" in s:
            problems.add(f"{where}.direction_deg", s["direction_deg"],
                         "no direction_deg beside aim_at (the source faces its aim point)")
        if "turn_deg" in s and pivot is None and "pivot" not in s:
            problems.add(f"{where}.pivot", F.MISSING, "a point [x, y] to turn the source about "
                         "(turn_deg turns the source about its pivot)")
        direction = F.number(s, "direction_deg", where, problems, default=0.0, what="an angle in degrees")
        for key in ("aim_at", "pivot", "turn_deg"):
            s.pop(key, None)
        if len(problems.errors) > before:
            s["position"] = F.NonFinite(UNRESOLVED)
            continue
        if aim is not None:
            if aim == pos:
                problems.add(f"{where}.aim_at", list(aim), "a point other than the source's position")
                continue
            direction = math.degrees(math.atan2(aim[1] - pos[1], aim[0] - pos[0]))
        if pivot is not None and turn:
            from .shapes import place_point
            pos = place_point((pos[0] - pivot[0], pos[1] - pivot[1]), pivot, turn)
            direction = direction + turn
        s["position"], s["direction_deg"] = [pos[0], pos[1]], direction
        raw = data["sources"][i]
        out.append(Placement(raw.get("name"), _text({k: raw[k] for k in PLACEMENT_KEYS if k in raw}),
                             (pos[0], pos[1]), direction))
    return out


def _expand_repeats(r: _Resolver, data: dict, plain: dict, problems: Problems):
    parts = plain.get("parts")
    if not isinstance(parts, list):
        return [], []
    out_parts, origin, repeats = [], [], []
    for i, p in enumerate(parts):
        if not (isinstance(p, dict) and "repeat" in p):
            out_parts.append(p)
            origin.append((i, None))
            continue
        spec = r.repeat_spec(i, problems)
        if spec is None:
            continue
        name = p.get("name")
        copies = []
        faces = _faces_per_copy(p.get("faces"), name, spec[0], f"$.parts[{i}].faces", problems)
        for k in range(spec[0]):
            c = {key: copy.deepcopy(v) for key, v in p.items() if key != "repeat"}
            c["name"] = f"{name}[{k}]" if isinstance(name, str) else name
            _shift(c, spec, k)
            if faces is not None:
                c["faces"] = faces[k]
            copies.append(c)
            out_parts.append(c)
            origin.append((i, k))
        repeats.append((name, _text(data["parts"][i]), [c["name"] for c in copies], _dumps(copies)))
    plain["parts"] = out_parts
    return repeats, origin


def _faces_per_copy(faces, name, count: int, where: str, problems: Problems):
    """The faces section of each copy: keys FACE for every copy, NAME[k].FACE for copy k."""
    if not isinstance(faces, dict):
        return None
    common = {k: v for k, v in faces.items() if not _is_copy_face(k, name)}
    per = [dict(common) for _ in range(count)]
    for key, value in faces.items():
        if not _is_copy_face(key, name):
            continue
        m = _COPY_FACE.match(key)
        k, face = int(m.group(2)), m.group(3)
        k = k + count if k < 0 else k
        if not 0 <= k < count:
            problems.add(f"{where}.{json.dumps(key)}", key,
                         f"a face of a copy {name}[0] .. {name}[{count - 1}] (or {name}[-1], the last)")
            continue
        merged = dict(per[k].get(face, {})) if isinstance(per[k].get(face), dict) else {}
        if isinstance(value, dict):
            merged.update(value)
            per[k][face] = merged
        else:
            per[k][face] = value
    return per


def _is_copy_face(key: str, name) -> bool:
    m = _COPY_FACE.match(key)
    return bool(m) and m.group(1) == name


def _shift(part: dict, spec, k: int) -> None:
    """Move copy k of a part: its shape's position, or every point of its boundary and holes."""
    if k == 0:
        return
    dx, dy = _offset((0.0, 0.0), spec[1:], k)
    shape = part.get("shape")
    if isinstance(shape, dict):
        shape["position"] = _moved(shape.get("position", [0.0, 0.0]), dx, dy)
    loops = [part.get("boundary")] if "boundary" in part else []
    loops += part.get("holes", []) if isinstance(part.get("holes"), list) else []
    for loop in loops:
        for edge in loop if isinstance(loop, list) else []:
            if isinstance(edge, dict):
                if "from" in edge:
                    edge["from"] = _moved(edge["from"], dx, dy)
                if isinstance(edge.get("arc"), dict) and "center" in edge["arc"]:
                    edge["arc"]["center"] = _moved(edge["arc"]["center"], dx, dy)


def _moved(p, dx, dy):
    if isinstance(p, list) and len(p) == 2 and all(F.is_number(c) for c in p):
        return [p[0] + dx, p[1] + dy]
    return p


# ----------------------------------------------------------------------------- writing back

def restore(plain: dict, links: Links | None) -> dict:
    """The dict to save: `plain` (a scene as it saves without links) with every link put back
    whose value the scene still holds, checked by evaluating the result again.  A link whose
    value was edited by hand stays a plain number, and so does one whose expression would now
    give another value (it refers to something edited by hand)."""
    if links is None:
        return plain
    active = [x for x in links.items if _holds(x, plain, saved=True)]
    while True:
        out = _apply(plain, links.numbers, active)
        if not active:
            return out
        try:
            again, _ = resolve(out, Problems())
        except Exception:   # noqa: BLE001  a file that no longer resolves: save the plain numbers
            again = None
        if again is None:
            active = []
            continue
        bad = [x for x in active if not _holds(x, again, saved=False)]
        if not bad:
            return out
        active = [x for x in active if x not in bad]


def _holds(link, data: dict, saved: bool) -> bool:
    """Whether `data` holds the values `link` gave: as the scene saves them (saved=True), or as
    the resolver gives them."""
    if isinstance(link, Leaf):
        spot = _at(data, link.where)
        return spot is not None and _same(spot[0][spot[1]], link.saved if saved else link.value)
    if isinstance(link, Placement):
        return _placed_as(link, data)
    return _dumps([_find(data, "parts", c) for c in link.copies]) == (link.saved if saved else link.plain)


def _placed_as(link: Placement, data: dict) -> bool:
    s = _find(data, "sources", link.source)
    return (isinstance(s, dict) and isinstance(s.get("position"), list)
            and [*s["position"]] == [*link.position] and _same(s.get("direction_deg"), link.direction_deg))


def _same(a, b) -> bool:
    return F.is_number(a) and F.is_number(b) and float(a) == float(b)


def _apply(plain: dict, numbers: str | None, active: list) -> dict:
    out = copy.deepcopy(plain)
    for link in active:
        if isinstance(link, Leaf):
            spot = _at(out, link.where)
            spot[0][spot[1]] = link.raw
        elif isinstance(link, Placement):
            s = _find(out, "sources", link.source)
            raw = json.loads(link.raw)
            rebuilt = {}
            for k, v in s.items():
                if k == "position":
                    rebuilt.update(raw)
                elif k not in PLACEMENT_KEYS:
                    rebuilt[k] = v
            s.clear()
            s.update(rebuilt)
        else:
            parts = out["parts"]
            first = next(i for i, p in enumerate(parts) if p.get("name") == link.copies[0])
            names = set(link.copies)
            parts[first] = json.loads(link.raw)
            out["parts"] = [p for i, p in enumerate(parts) if i == first or p.get("name") not in names]
    if numbers is not None:
        ordered = {}
        for k, v in out.items():
            if k in ("materials", "parts") and "numbers" not in ordered:
                ordered["numbers"] = json.loads(numbers)
            ordered[k] = v
        ordered.setdefault("numbers", json.loads(numbers))
        out = ordered
    return out


def numbers_behind(data: dict, path: tuple) -> dict[str, str]:
    """The named numbers the value at `path` of a scene file's dict follows, each with the
    expression text that links it (the field's own, or the one in between): a field written
    "= bend_radius + 1" follows bend_radius; a named number "gap": "radius / 16" follows radius,
    and so does a field "= gap".  A reference to a part ("= guide.output_y") is not followed: a
    number that shapes the guide still moves the guide when the field is set.  Empty for a plain
    number; expressions that cannot be read are left to the loader's own message."""
    numbers = data.get("numbers") if isinstance(data.get("numbers"), dict) else {}
    found: dict[str, str] = {}
    seen: set = set()

    def follow(value, link: str | None) -> None:
        if not isinstance(value, str):
            return
        text = value.strip()
        try:
            node = parse(text[1:] if text.startswith("=") else text)
        except ExpressionError:
            return
        for ref in references(node):
            if ref.index is None and not ref.attrs and ref.base in numbers:
                found.setdefault(ref.base, link or value)
                if ("number", ref.base) not in seen:
                    seen.add(("number", ref.base))
                    follow(numbers[ref.base], link or value)

    try:
        value = _get(data, path)
    except (KeyError, IndexError, TypeError):
        return found
    if path[:1] == ("numbers",):
        seen.add(("number", path[1]))
        if isinstance(value, str):
            follow(value, None)
    elif _is_expression(value, path[-1] if isinstance(path[-1], str) else None):
        follow(value, None)
    return found
