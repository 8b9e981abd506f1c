"""CAD cross-sections: DXF drawings in and out (with ezdxf).

Import
------
LINE, ARC, CIRCLE, LWPOLYLINE and 2D POLYLINE entities (bulges become true arcs) of the model
space are joined, layer by layer, into closed contours: an end meets the next entity's end when
they lie within `tolerance` (mm).  A contour inside another of the same layer is a hole in it
(inside a hole, a part again, and so on); contours of different layers become separate parts,
which the scene may nest (a core in its cladding).  Each layer's parts take the material the
mapping gives for the layer, or the layer's own name.  Annotation (TEXT, MTEXT, DIMENSION,
LEADER, MULTILEADER, POINT, HATCH) is skipped; anything else is an error naming the entity.

Lengths are scaled to mm from the units the file states in $INSUNITS; a file that states none
needs `units`.  Entities must lie in the drawing's XY plane: arcs, circles and polylines with
extrusion +Z, or -Z (their own coordinates then have x mirrored); lines are in world coordinates.

Export
------
One layer per material, named as the material (a character a layer name cannot hold becomes
"_", and two materials that would still share a name get " 2", " 3"); every edge is a LINE or an
ARC (arcs stay arcs), $INSUNITS = mm.  Each entity carries its part and face name (and a face
treatment, and its material where the layer's name differs from it) as XDATA of the application
RAYTRACE2D, so a drawing exported here imports back to the same parts, names, faces and
materials.  Sources, detectors and trace settings are not part of a cross-section drawing.
"""
from __future__ import annotations

import json
import math
import os
from dataclasses import dataclass, replace

from .errors import Problems, SceneError
from .geometry import Edge, Loop, Part, Treatment

APP = "RAYTRACE2D"
TO_MM = {"mm": 1.0, "cm": 10.0, "m": 1000.0, "in": 25.4, "um": 1e-3}
INSUNITS_TO_MM = {1: 25.4, 2: 304.8, 4: 1.0, 5: 10.0, 6: 1000.0, 8: 25.4e-6, 9: 25.4e-3, 13: 1e-3, 14: 0.1}
SUPPORTED = ("LINE", "ARC", "CIRCLE", "LWPOLYLINE", "POLYLINE")
SKIPPED = ("TEXT", "MTEXT", "DIMENSION", "LEADER", "MULTILEADER", "MLEADER", "POINT", "HATCH", "VIEWPORT")


@dataclass(frozen=True)
class Piece:
    """One edge of the drawing, with the entity it came from (for messages)."""

    edge: Edge
    layer: str
    entity: str          # e.g. "LINE (handle 2F, layer 'guide')"
    meta: dict           # XDATA written by export: part, face, treatment


def layer_materials(entries: list[str], mapping_file: str | None = None) -> dict[str, str]:
    """LAYER=MATERIAL entries over an optional JSON mapping file; ValueError naming the bad one."""
    out: dict[str, str] = {}
    if mapping_file:
        try:
            with open(mapping_file, encoding="utf-8") as fh:
                data = json.load(fh)
        except OSError as exc:
            raise ValueError(f"--materials-file: could not read {mapping_file}: {exc.strerror or exc}") from None
        except json.JSONDecodeError as exc:
            raise ValueError(f"{mapping_file}: line {exc.lineno} column {exc.colno}: {exc.msg}; expected a "
                             'JSON object {"LAYER": "MATERIAL", ...}') from None
        if not isinstance(data, dict) or not all(isinstance(v, str) for v in data.values()):
            raise ValueError(f'{mapping_file}: expected a JSON object {{"LAYER": "MATERIAL", ...}} of strings')
        out.update(data)
    for text in entries:
        layer, sep, material = text.partition("=")
        if not sep or not layer.strip() or not material.strip():
            raise ValueError(f"--layer-material: found {text!r}; expected LAYER=MATERIAL")
        out[layer.strip()] = material.strip()
    return out


# ----------------------------------------------------------------------------- import

def import_dxf(path: str | os.PathLike, units: str | None = None, layer_materials: dict | None = None,
               tolerance: float = 1e-6, setup=None):
    """Read the drawing at `path` into a Scene; SceneError listing every problem found.

    setup: a Scene whose sources, detectors, materials and trace settings the new scene takes
    (its parts are replaced by the drawing's)."""
    from .scene import Scene
    path = os.fspath(path)
    problems = Problems(file=path)
    doc = _read(path, problems)
    scale = _scale(doc, units, problems)
    pieces = []
    for e in doc.modelspace():
        pieces += _pieces(e, scale, problems)
    loops = []
    for layer in dict.fromkeys(p.layer for p in pieces):
        loops += _contours([p for p in pieces if p.layer == layer], tolerance, problems)
    problems.raise_if_errors()
    parts = _parts(loops, layer_materials or {})
    base = setup or Scene()
    # links=None: the setup's links (numbers, fields that follow a builder part's output) refer
    # to parts the drawing replaces, so the new scene keeps their values as plain numbers
    scene = replace(base.copy(), parts=[p for p, _ in parts], links=None,
                    name=base.name or os.path.splitext(os.path.basename(path))[0],
                    story=base.story or f"Parts imported from {os.path.basename(path)}")
    _check_materials(scene, parts, layer_materials or {}, problems)
    problems.raise_if_errors()
    return scene


def dxf_layers(path: str | os.PathLike) -> tuple[list[str], bool]:
    """(layers that hold model-space entities, whether the file states its units), for asking a
    user what each layer is made of before importing."""
    path = os.fspath(path)
    doc = _read(path, Problems(file=path))
    layers = list(dict.fromkeys(e.dxf.get("layer", "0") for e in doc.modelspace() if e.dxftype() not in SKIPPED))
    return layers, doc.header.get("$INSUNITS", 0) in INSUNITS_TO_MM


def recorded_materials(path: str | os.PathLike) -> dict[str, str]:
    """{layer: material} that this program's export recorded (XDATA) where a layer's name could
    not be the material's own ("glass/A" on layer "glass_A"): what an import takes for a layer
    when no mapping is given, and what a user asked for the layers' materials should be shown."""
    path = os.fspath(path)
    doc = _read(path, Problems(file=path))
    out: dict[str, str] = {}
    for e in doc.modelspace():
        layer = e.dxf.get("layer", "0")
        if layer not in out and e.dxftype() not in SKIPPED:
            material = _meta(e).get("material")
            if isinstance(material, str) and material:
                out[layer] = material
    return out


def _read(path: str, problems: Problems):
    import ezdxf
    try:
        return ezdxf.readfile(path)
    except OSError as exc:
        problems.add("file", f"<could not read: {exc.strerror or exc}>", "a readable DXF file")
    except ezdxf.DXFError as exc:
        problems.add("file", f"<not a DXF drawing: {exc}>", "a DXF file (ASCII or binary)")
    except (StopIteration, EOFError, ValueError):
        # the DXF library's own readers stop with these on a file cut short in its header
        problems.add("file", "<not a whole DXF drawing: it ends early or is damaged>",
                     "a complete DXF file (ASCII or binary); save or copy the drawing again")
    raise SceneError(problems.items)


def _scale(doc, units, problems: Problems) -> float:
    if units is not None:
        if units not in TO_MM:
            problems.add("--units", units, "one of " + ", ".join(TO_MM))
            return 1.0
        return TO_MM[units]
    code = doc.header.get("$INSUNITS", 0)
    if code in INSUNITS_TO_MM:
        return INSUNITS_TO_MM[code]
    found = "no $INSUNITS (unitless)" if not code else f"$INSUNITS = {code}, a unit this import does not know"
    problems.add("$INSUNITS", f"<{found}>", "drawing units stated in the file; give them with --units "
                 "mm|cm|m|in|um (units= in Python)")
    return 1.0


def _describe(e) -> str:
    return f"{e.dxftype()} (handle {e.dxf.handle}, layer {e.dxf.get('layer', '0')!r})"


def _meta(e) -> dict:
    try:
        if e.has_xdata(APP):
            meta = json.loads(next(v for code, v in e.get_xdata(APP) if code == 1000))
            # (the export writes an object; other JSON there, from an edited drawing, is
            # ignored as unreadable JSON is)
            return meta if isinstance(meta, dict) else {}
    except (StopIteration, ValueError, TypeError):
        pass
    return {}


def _pieces(e, scale: float, problems: Problems) -> list[Piece]:
    kind = e.dxftype()
    if kind in SKIPPED:
        return []
    where = _describe(e)
    if kind not in SUPPORTED:
        problems.add(where, f"<an unsupported {kind} entity>",
                     "LINE, ARC, CIRCLE, LWPOLYLINE or POLYLINE (convert it to these in the CAD program, "
                     "e.g. explode it or turn splines into arcs)")
        return []
    ez = tuple(e.dxf.get("extrusion", (0.0, 0.0, 1.0))) if kind != "LINE" else (0.0, 0.0, 1.0)
    if abs(ez[0]) > 1e-12 or abs(ez[1]) > 1e-12:
        problems.add(where, f"<an entity in a plane tilted out of the drawing (extrusion {ez})>",
                     "entities in the XY plane (extrusion 0,0,1)")
        return []
    mirror = ez[2] < 0          # seen from below: x is mirrored and turning directions swap
    layer, meta = e.dxf.get("layer", "0"), _meta(e)

    def pt(x, y):
        return ((-x if mirror else x) * scale, y * scale)

    def piece(edge):
        return Piece(edge, layer, where, meta)
    if kind == "LINE":           # world coordinates: its extrusion only gives a thickness direction
        a, b = e.dxf.start, e.dxf.end
        return [piece(Edge((a[0] * scale, a[1] * scale), (b[0] * scale, b[1] * scale)))]
    if kind in ("ARC", "CIRCLE"):
        c, r = e.dxf.center, e.dxf.radius
        if not r > 0:
            problems.add(where, f"<radius {r}>", "a radius greater than 0")
            return []
        if kind == "CIRCLE":       # two half arcs: a loop needs distinct vertices
            p0, p1 = (c[0] + r, c[1]), (c[0] - r, c[1])
            cc = pt(c[0], c[1])
            return [piece(Edge(pt(*p0), pt(*p1), cc, not mirror)), piece(Edge(pt(*p1), pt(*p0), cc, not mirror))]
        a0, a1 = math.radians(e.dxf.start_angle), math.radians(e.dxf.end_angle)
        p0 = (c[0] + r * math.cos(a0), c[1] + r * math.sin(a0))
        p1 = (c[0] + r * math.cos(a1), c[1] + r * math.sin(a1))
        return [piece(Edge(pt(*p0), pt(*p1), pt(c[0], c[1]), not mirror))]
    if kind == "LWPOLYLINE":
        verts = [(float(x), float(y), float(b)) for x, y, b in e.get_points("xyb")]
        closed = bool(e.closed)
    else:
        if not e.is_2d_polyline:
            problems.add(where, "<a 3D polyline, mesh or polyface>", "a 2D POLYLINE or an LWPOLYLINE")
            return []
        verts = [(float(v.dxf.location[0]), float(v.dxf.location[1]), float(v.dxf.get("bulge", 0.0)))
                 for v in e.vertices]
        closed = bool(e.is_closed)
    out = []
    n = len(verts)
    for k in range(n if closed else n - 1):
        (x0, y0, bulge), (x1, y1, _) = verts[k], verts[(k + 1) % n]
        if (x0, y0) == (x1, y1):
            continue                 # a repeated vertex (closed polylines often repeat the first)
        out.append(piece(_bulge_edge(pt(x0, y0), pt(x1, y1), -bulge if mirror else bulge)))
    return out


def _bulge_edge(p0, p1, bulge: float) -> Edge:
    """A polyline segment: straight, or an arc whose bulge is tan(included angle / 4), > 0 ccw."""
    if bulge == 0.0:
        return Edge(p0, p1)
    theta = 4.0 * math.atan(bulge)
    dx, dy = p1[0] - p0[0], p1[1] - p0[1]
    d = math.hypot(dx, dy)
    offset = 0.5 * d / math.tan(theta / 2)     # from the chord's midpoint to the centre, leftward
    mx, my = 0.5 * (p0[0] + p1[0]), 0.5 * (p0[1] + p1[1])
    centre = (mx - dy / d * offset, my + dx / d * offset)
    return Edge(p0, p1, centre, bulge > 0)


def _contours(pieces: list[Piece], tol: float, problems: Problems) -> list[tuple[Loop, list[Piece]]]:
    """Join one layer's pieces end to end into closed loops; problems name the gap or branch."""
    import numpy as np
    ends = np.array([p for pc in pieces for p in (pc.edge.start, pc.edge.end)], dtype=float).reshape(-1, 2)
    # cluster the ends: each end takes the node of the first earlier end within tol
    node = np.full(len(ends), -1)
    nodes: list[int] = []
    for i in range(len(ends)):
        if node[i] >= 0:
            continue
        near = np.flatnonzero(np.hypot(*(ends - ends[i]).T) <= tol)
        node[near[node[near] < 0]] = len(nodes)
        nodes.append(i)
    at: dict[int, list[int]] = {}
    for i, k in enumerate(node):
        at.setdefault(int(k), []).append(i)
    bad = False
    for k, members in at.items():
        if len(members) == 2:
            continue
        bad = True
        x, y = ends[nodes[k]]
        here = pieces[members[0] // 2]
        if len(members) == 1:
            others = np.delete(np.arange(len(ends)), [members[0], members[0] ^ 1])
            gap = (f"; the nearest other end is {float(np.hypot(*(ends[others] - ends[members[0]]).T).min()):.6g} mm away"
                   if len(others) else "")
            problems.add(here.entity, f"<an open contour: its end at ({x:.6g}, {y:.6g}) mm meets no other end "
                         f"within {tol:g} mm{gap}>",
                         "closed contours (close the gap in the drawing, or raise --tolerance)")
        else:
            names = ", ".join(pieces[m // 2].entity for m in members)
            problems.add(here.entity, f"<{len(members)} ends meeting at ({x:.6g}, {y:.6g}) mm: {names}>",
                         "exactly two ends at each corner (contours that do not branch or overlap)")
    if bad:
        return []
    used = [False] * len(pieces)
    loops = []
    for first in range(len(pieces)):
        if used[first]:
            continue
        # a clockwise edge was written as a (counter-clockwise) ARC: walk it backwards so the
        # loop keeps the direction it had when exported
        edges, members, cur, forward = [], [], first, not pieces[first].meta.get("reversed", False)
        while not used[cur]:
            used[cur] = True
            members.append(pieces[cur])
            e = pieces[cur].edge if forward else pieces[cur].edge.reversed()
            edges.append(e)
            end_slot = 2 * cur + (1 if forward else 0)
            nxt = next(m for m in at[int(node[end_slot])] if m != end_slot)
            cur, forward = nxt // 2, nxt % 2 == 0
        # snap each joint to one point so the loop closes exactly
        for j in range(len(edges)):
            k = (j + 1) % len(edges)
            p = edges[k].start
            edges[j] = replace(edges[j], end=p)
        loops.append((Loop(tuple(edges)), members))
    return loops


def _parts(loops, materials: dict) -> list[tuple[Part, str]]:
    """(part, layer): outer contours and their holes by nesting, layer by layer; names from
    XDATA or the layer."""
    import shapely
    polys = [shapely.Polygon(loop.coords(max(loop.size_hint(), 1e-9) * 1e-4)) for loop, _ in loops]
    layer = [members[0].layer for _, members in loops]
    inside = [[j for j in range(len(loops)) if j != i and layer[j] == layer[i] and polys[j].contains(polys[i])]
              for i in range(len(loops))]
    parts, counts = [], {}
    outers = [i for i in range(len(loops)) if len(inside[i]) % 2 == 0]
    for i in outers:
        counts[layer[i]] = counts.get(layer[i], 0) + 1
    seen: dict[str, int] = {}
    for i in outers:
        holes = [j for j in range(len(loops)) if len(inside[j]) == len(inside[i]) + 1 and i in inside[j]]
        meta = loops[i][1][0].meta
        seen[layer[i]] = seen.get(layer[i], 0) + 1
        name = meta.get("part") or (layer[i] if counts[layer[i]] == 1 else f"{layer[i]} {seen[layer[i]]}")
        # the mapping, else the material this program's export recorded, else the layer's name
        material = materials.get(layer[i], meta.get("material") or layer[i])
        parts.append((Part(name, material, _with_faces(*loops[i]), tuple(_with_faces(*loops[j]) for j in holes)),
                      layer[i]))
    return parts


def _with_faces(loop: Loop, members: list[Piece]) -> Loop:
    """Face names and treatments carried in XDATA (drawings exported by this program)."""
    edges = []
    for e, pc in zip(loop.edges, members):
        face = pc.meta.get("face") or None
        t = pc.meta.get("treatment")
        treatment = (Treatment(t["kind"], float(t.get("reflectance", 1.0))) if isinstance(t, dict)
                     else Treatment(t) if isinstance(t, str) else e.treatment)
        edges.append(replace(e, face=face, treatment=treatment))
    return Loop(tuple(edges))


def _check_materials(scene, parts, materials: dict, problems: Problems) -> None:
    from .catalog import CATALOG, close_matches, lookup
    known = list(CATALOG) + list(scene.materials)
    unknown = {layer: part.material for part, layer in reversed(parts) if lookup(part.material, scene.materials) is None}
    for layer in dict.fromkeys(layer for part, layer in parts if layer in unknown):
        material = unknown[layer]
        how = ("given for it" if layer in materials else "the layer's own name (no --layer-material for it)"
               if material == layer else "as the drawing records it (no --layer-material for it)")
        hint = close_matches(material, known)
        problems.add(f"layer {layer!r}", f"<material {material!r}, {how}>",
                     f"a catalog or scene material (--layer-material {layer}=MATERIAL"
                     + (f"; did you mean {', '.join(hint)}?)" if hint else f"; one of {', '.join(known)})"))


# ----------------------------------------------------------------------------- export

def export_dxf(scene, path: str | os.PathLike) -> list[str]:
    """Write the scene's parts to `path` (atomically); returns the layer names used."""
    import ezdxf
    from .atomic import atomic_write
    doc = ezdxf.new("R2010")
    doc.header["$INSUNITS"] = 4          # mm
    doc.appids.add(APP)
    msp = doc.modelspace()
    layer_of = _layer_names([part.material for part in scene.parts], [layer.dxf.name for layer in doc.layers])
    for layer in dict.fromkeys(layer_of.values()):
        doc.layers.add(layer)
    for part in scene.parts:
        layer = layer_of[part.material]
        for loop in part.loops:
            for e in loop.edges:
                attribs = {"layer": layer}
                if e.is_arc:
                    a0, sweep = e.arc_angles()
                    a1 = a0 + sweep
                    lo, hi = (a0, a1) if sweep > 0 else (a1, a0)
                    ent = msp.add_arc(e.arc_center, e.radius, math.degrees(lo), math.degrees(hi), dxfattribs=attribs)
                else:
                    ent = msp.add_line(e.start, e.end, dxfattribs=attribs)
                meta = {"part": part.name}
                if layer != part.material:      # the layer name could not be the material's
                    meta["material"] = part.material
                if e.is_arc and not e.ccw:
                    meta["reversed"] = True
                if e.face:
                    meta["face"] = e.face
                if e.treatment != Treatment():
                    meta["treatment"] = e.treatment.to_dict()
                ent.set_xdata(APP, [(1000, json.dumps(meta))])
    atomic_write(path, doc.saveas)
    return list(dict.fromkeys(layer_of.values()))


def _layer_name(material: str) -> str:
    """DXF layer names may not hold <>/\\":;?*|=' characters."""
    return "".join("_" if ch in '<>/\\":;?*|=\'' else ch for ch in material)


def _layer_names(materials: list[str], existing: list[str]) -> dict[str, str]:
    """A new layer name per material, distinct as DXF compares them (without case) from each
    other and from the drawing's `existing` layers ("0"): two materials that differ only in a
    character a layer name cannot hold ("A/B", "A:B") or only in case would otherwise share a
    layer, which the DXF library refuses; the later ones get " 2", " 3"."""
    out: dict[str, str] = {}
    taken = {name.casefold() for name in existing}
    for m in dict.fromkeys(materials):
        base = name = _layer_name(m)
        k = 1
        while name.casefold() in taken:
            k += 1
            name = f"{base} {k}"
        taken.add(name.casefold())
        out[m] = name
    return out
