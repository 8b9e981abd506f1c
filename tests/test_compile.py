"""Compile: the medium on each side of every edge, nesting, holes, cemented parts, overlaps.

Expected media follow from the geometry by hand (common practice: innermost containing part,
else the ambient); every check below names the medium on each side of one probe point.
"""
from __future__ import annotations

import math

import numpy as np
import pytest

from raytrace import trace
from raytrace.compile import compile_scene
from raytrace.errors import SceneError
from raytrace.geometry import MIRROR, Edge, Loop, Part, Treatment
from raytrace.intersect import edge_normal
from raytrace.materials import ConstantIndex
from raytrace.scene import Scene, Source, TraceSettings

AMBIENT = 0


def rect(x0, y0, x1, y1, treatment=Treatment()):
    return Loop.polygon([(x0, y0), (x1, y0), (x1, y1), (x0, y1)], ["bottom", "right", "top", "left"],
                        [treatment] * 4)


def scene_of(*parts, sources=(), ambient="air", **materials):
    mats = {k.replace("_", " "): ConstantIndex(k.replace("_", " "), n=v) for k, v in materials.items()}
    return Scene(parts=list(parts), sources=list(sources), materials=mats, ambient=ambient,
                 settings=TraceSettings(rays=5, flux_floor=1e-6))


def edges_at(cs, x, y):
    """Boundary edges passing through (x, y)."""
    out = []
    for i, e in enumerate(cs.edges):
        if cs.detector[i] >= 0:
            continue
        if e.is_arc:
            on_circle = abs(math.dist((x, y), e.arc_center) - e.radius) < 1e-9
            if not on_circle:
                continue
            a0, sw = e.arc_angles()
            ang = math.atan2(y - e.arc_center[1], x - e.arc_center[0])
            rel = ((ang - a0) if sw > 0 else (a0 - ang)) % (2 * math.pi)
            if rel <= abs(sw) + 1e-12:
                out.append(i)
        else:
            (x0, y0), (x1, y1) = e.start, e.end
            L = math.dist(e.start, e.end)
            cross = ((x - x0) * (y1 - y0) - (y - y0) * (x1 - x0)) / L
            u = ((x - x0) * (x1 - x0) + (y - y0) * (y1 - y0)) / L ** 2
            if abs(cross) < 1e-9 and -1e-12 <= u <= 1 + 1e-12:
                out.append(i)
    return out


def sides(cs, x, y, toward):
    """(medium on the `toward` side, medium on the other side) of the one edge through (x, y)."""
    hits = edges_at(cs, x, y)
    assert len(hits) == 1, f"expected one edge through ({x}, {y}), found {len(hits)}"
    i = hits[0]
    nx, ny = edge_normal(cs, np.array([i]), np.array([x]), np.array([y]))
    plus_is_toward = nx[0] * toward[0] + ny[0] * toward[1] > 0
    plus, minus = int(cs.med_plus[i]), int(cs.med_minus[i])
    return (plus, minus) if plus_is_toward else (minus, plus)


def medium(cs, name):
    return cs.medium_names.index(name)


UP, DOWN, LEFT, RIGHT = (0, 1), (0, -1), (-1, 0), (1, 0)


def test_core_inside_cladding():
    s = scene_of(Part("cladding", "clad", rect(0, 0, 10, 10)), Part("core", "core", rect(3, 3, 7, 7)),
                 clad=1.45, core=1.5)
    cs = compile_scene(s)
    clad, core = medium(cs, "cladding"), medium(cs, "core")
    assert sides(cs, 5, 0, UP) == (clad, AMBIENT)       # cladding bottom: cladding above, air below
    assert sides(cs, 10, 5, LEFT) == (clad, AMBIENT)
    assert sides(cs, 5, 3, UP) == (core, clad)          # core bottom: core above, cladding below
    assert sides(cs, 7, 5, RIGHT) == (clad, core)
    assert cs.n_edges == 8


def test_nesting_does_not_depend_on_part_order():
    a = compile_scene(scene_of(Part("core", "core", rect(3, 3, 7, 7)), Part("cladding", "clad", rect(0, 0, 10, 10)),
                               clad=1.45, core=1.5))
    assert sides(a, 5, 3, UP) == (medium(a, "core"), medium(a, "cladding"))
    assert sides(a, 5, 0, UP) == (medium(a, "cladding"), AMBIENT)


def test_three_levels_of_nesting():
    s = scene_of(Part("outer", "m1", rect(0, 0, 30, 30)), Part("middle", "m2", rect(5, 5, 25, 25)),
                 Part("inner", "m3", rect(10, 10, 20, 20)), m1=1.3, m2=1.4, m3=1.5)
    cs = compile_scene(s)
    assert sides(cs, 15, 10, UP) == (medium(cs, "inner"), medium(cs, "middle"))
    assert sides(cs, 15, 5, UP) == (medium(cs, "middle"), medium(cs, "outer"))
    assert sides(cs, 15, 0, UP) == (medium(cs, "outer"), AMBIENT)


def test_part_inside_a_hole_sees_the_ambient():
    ring = Part("ring", "glass", rect(0, 0, 20, 20), holes=(rect(5, 5, 15, 15),))
    plug = Part("plug", "resin", rect(8, 8, 12, 12))
    cs = compile_scene(scene_of(ring, plug, glass=1.5, resin=1.6))
    r, p = medium(cs, "ring"), medium(cs, "plug")
    assert sides(cs, 10, 5, UP) == (AMBIENT, r)      # the hole's bottom: air inside the hole
    assert sides(cs, 10, 0, UP) == (r, AMBIENT)
    assert sides(cs, 10, 8, UP) == (p, AMBIENT)      # the plug sits in air, not in the ring
    assert sides(cs, 12, 10, RIGHT) == (AMBIENT, p)


def test_hole_orientation_does_not_matter():
    hole_cw = Loop.polygon([(5, 5), (5, 15), (15, 15), (15, 5)])
    cs = compile_scene(scene_of(Part("ring", "glass", rect(0, 0, 20, 20), holes=(hole_cw,)), glass=1.5))
    assert sides(cs, 10, 5, UP) == (AMBIENT, medium(cs, "ring"))
    assert sides(cs, 5, 10, LEFT) == (medium(cs, "ring"), AMBIENT)


def test_cemented_full_edge_is_one_interface():
    a = Part("crown", "crown", rect(0, 0, 10, 10))
    b = Part("flint", "flint", rect(10, 0, 20, 10))
    cs = compile_scene(scene_of(a, b, crown=1.52, flint=1.62))
    assert sides(cs, 10, 5, RIGHT) == (medium(cs, "flint"), medium(cs, "crown"))
    assert cs.n_edges == 7                           # 4 + 4 - the shared one
    i = edges_at(cs, 10, 5)[0]
    assert {cs.part[i], cs.other_part[i]} == {0, 1}


def test_narrow_guide_bonded_to_wider_window_splits_edges():
    """A guide 4 mm tall bonded to the middle of a 10 mm window face: the window face splits in
    three, the middle piece is one crown|guide interface, the rest of the face sees air."""
    window = Part("window", "crown", rect(0, 0, 5, 10))
    guide = Part("guide", "pmma", rect(5, 3, 25, 7))
    cs = compile_scene(scene_of(window, guide, crown=1.52, pmma=1.49))
    w, g = medium(cs, "window"), medium(cs, "guide")
    assert sides(cs, 5, 5, RIGHT) == (g, w)
    assert sides(cs, 5, 1.5, RIGHT) == (AMBIENT, w)
    assert sides(cs, 5, 8.5, RIGHT) == (AMBIENT, w)
    assert cs.n_edges == 4 + 2 + 3                   # window face in 3 pieces, guide left face merged
    # the split points are exactly the guide's corners
    pieces = sorted((cs.edges[i].start[1], cs.edges[i].end[1]) for i in range(cs.n_edges)
                    if cs.edges[i].start[0] == 5 and cs.edges[i].end[0] == 5)
    assert [tuple(sorted(p)) for p in pieces] == [(0, 3), (3, 7), (7, 10)]


def test_guide_overhanging_a_window_edge_splits_both():
    """Partial shared edge where neither contains the other: [3, 12] against [0, 10]."""
    cs = compile_scene(scene_of(Part("window", "crown", rect(0, 0, 5, 10)),
                                Part("guide", "pmma", rect(5, 3, 15, 12)), crown=1.52, pmma=1.49))
    w, g = medium(cs, "window"), medium(cs, "guide")
    assert sides(cs, 5, 6, RIGHT) == (g, w)
    assert sides(cs, 5, 1, RIGHT) == (AMBIENT, w)
    assert sides(cs, 5, 11, LEFT) == (AMBIENT, g)


def test_no_air_gap_across_a_cemented_interface():
    """A beam through window then guide goes air -> window -> guide (no air between them)."""
    window = Part("window", "crown", rect(0, 0, 5, 10))
    guide = Part("guide", "pmma", rect(5, 3, 25, 7))
    src = Source("beam", "beam", (-5.0, 5.0), 0.0, width=1.0)
    s = scene_of(window, guide, sources=[src], crown=1.52, pmma=1.49)
    r = trace(s, rays=3, record="all")
    seg = r.segments
    cs = r.compiled
    first = seg["ray_id"][seg["generation"] == 0]
    # follow each source ray's transmitted chain
    for rid in first:
        chain = [int(rid)]
        while True:
            kids = np.flatnonzero((seg["parent_id"] == chain[-1]) & (seg["born"] == 1))
            if len(kids) == 0:
                break
            chain.append(int(seg["ray_id"][kids[0]]))
        media = [int(seg["medium"][np.flatnonzero(seg["ray_id"] == c)[0]]) for c in chain]
        assert media == [AMBIENT, medium(cs, "window"), medium(cs, "guide"), AMBIENT]


def test_cemented_arc_is_one_interface():
    arc = Edge((0, -5), (0, 5), arc_center=(-10, 0), ccw=True)     # bulges toward +x
    left = Loop((Edge((-8, -5), (0, -5)), arc, Edge((0, 5), (-8, 5)), Edge((-8, 5), (-8, -5))))
    right = Loop((Edge((0, -5), (6, -5)), Edge((6, -5), (6, 5)), Edge((6, 5), (0, 5)), arc.reversed()))
    cs = compile_scene(scene_of(Part("crown", "crown", left), Part("flint", "flint", right),
                                crown=1.52, flint=1.62))
    x = -10 + math.sqrt(125)                          # the arc's vertex on the axis
    assert sides(cs, x, 0, RIGHT) == (medium(cs, "flint"), medium(cs, "crown"))
    assert cs.n_edges == 7 and int(cs.is_arc.sum()) == 1


def test_nested_part_sharing_the_outer_boundary():
    """A core lying on the cladding's bottom face: the shared piece has core above, air below."""
    cs = compile_scene(scene_of(Part("cladding", "clad", rect(0, 0, 10, 10)),
                                Part("core", "core", rect(3, 0, 7, 4)), clad=1.45, core=1.5))
    core, clad = medium(cs, "core"), medium(cs, "cladding")
    assert sides(cs, 5, 0, UP) == (core, AMBIENT)
    assert sides(cs, 1, 0, UP) == (clad, AMBIENT)
    assert sides(cs, 5, 4, UP) == (clad, core)
    assert sides(cs, 3, 2, LEFT) == (clad, core)


def test_treatment_of_a_cemented_edge_comes_from_either_part():
    a = Part("a", "crown", rect(0, 0, 10, 10))
    b = Part("b", "flint", rect(10, 0, 20, 10), ) 
    b = Part("b", "flint", b.outer.with_edge(3, treatment=Treatment(MIRROR, 0.5)))
    cs = compile_scene(scene_of(a, b, crown=1.52, flint=1.62))
    i = edges_at(cs, 10, 5)[0]
    assert cs.reflectance[i] == 0.5


def test_partial_overlap_is_rejected_with_both_names_and_the_area():
    s = scene_of(Part("left block", "crown", rect(0, 0, 10, 10)),
                 Part("right block", "crown", rect(8, 5, 20, 20)), crown=1.5)
    with pytest.raises(SceneError) as info:
        compile_scene(s)
    (p,) = info.value.problems
    assert "'left block'" in p.found and "'right block'" in p.found
    assert "by 10 mm^2" in p.found                    # [8, 10] x [5, 10]


def test_coincident_parts_of_different_materials_are_refused_at_compile():
    """Built in Python, not read from a file: compile_scene refuses them too."""
    s = scene_of(Part("crown block", "crown", rect(0, 0, 10, 10)),
                 Part("flint block", "flint", rect(0, 0, 10, 10)), crown=1.52, flint=1.62)
    with pytest.raises(SceneError) as info:
        compile_scene(s)
    (p,) = info.value.problems
    assert p.path == "$.parts[1]"
    assert "'flint block' (flint)" in p.found and "'crown block' (crown, $.parts[0])" in p.found


def test_media_resolution_user_material_wins_over_catalog():
    mine = ConstantIndex("PMMA", n=1.7)
    s = Scene(parts=[Part("slab", "PMMA", rect(0, 0, 1, 1))], materials={"PMMA": mine}, ambient="water")
    cs = compile_scene(s)
    assert cs.media[1] is mine
    assert cs.medium_names == ["ambient (water)", "slab"]
    assert cs.media[0].name == "water"


def test_unknown_material_is_a_scene_error_at_compile():
    with pytest.raises(SceneError) as info:
        compile_scene(Scene(parts=[Part("slab", "unobtainium", rect(0, 0, 1, 1))]))
    assert info.value.problems[0].path == "$.parts[0].material"


def test_two_parts_cemented_to_one_edge():
    """A slab whose bottom face carries two blocks side by side: the face splits at x = 5 into
    two interfaces, one with each block."""
    cs = compile_scene(scene_of(Part("slab", "crown", rect(0, 0, 10, 5)),
                                Part("left foot", "pmma", rect(0, -5, 5, 0)),
                                Part("right foot", "flint", rect(5, -5, 10, 0)),
                                crown=1.52, pmma=1.49, flint=1.62))
    s_, lf, rf = (medium(cs, n) for n in ("slab", "left foot", "right foot"))
    assert sides(cs, 2.5, 0, UP) == (s_, lf)
    assert sides(cs, 7.5, 0, UP) == (s_, rf)
    assert sides(cs, 5, -2.5, RIGHT) == (rf, lf)
    assert cs.n_edges == 4 + 1 + 4 + 4 - 3   # slab bottom in two; three shared pieces merged


def test_cemented_lens_doublet_from_builders():
    """Crown lens (r2 = -20) and flint meniscus (r1 = -20) built separately and placed vertex to
    vertex: their common surface is one arc interface."""
    from raytrace.geometry import ShapeSpec
    from raytrace.shapes import build
    a = ShapeSpec("lens", {"r1": 30.0, "r2": -20.0, "center_thickness": 5.0, "aperture": 10.0})
    b = ShapeSpec("lens", {"r1": -20.0, "r2": -60.0, "center_thickness": 2.0, "aperture": 10.0}, (5.0, 0.0))
    cs = compile_scene(scene_of(Part("crown", "crown", build(a), shape=a), Part("flint", "flint", build(b), shape=b),
                                crown=1.52, flint=1.62))
    assert sides(cs, 5.0, 0.0, RIGHT) == (medium(cs, "flint"), medium(cs, "crown"))
    assert int(cs.is_arc.sum()) == 3               # front, shared, back


def test_prism_sheet_on_a_guide_compiles_quickly():
    """2000 microprisms cemented on a guide: one interface along the sheet's flat side, and the
    edge pairing stays far from quadratic (common practice: bounding-box tree)."""
    import time
    from raytrace.geometry import ShapeSpec
    from raytrace.shapes import build
    spec = ShapeSpec("microprism_strip", {"pitch": 0.05, "prism_angle_deg": 90.0, "count": 2000,
                                          "slab_thickness": 0.2})
    guide = Part("guide", "pmma", rect(-50, -2, 50, 0))
    t0 = time.perf_counter()
    cs = compile_scene(scene_of(Part("sheet", "crown", build(spec), shape=spec), guide, crown=1.52, pmma=1.49))
    assert time.perf_counter() - t0 < 5.0
    assert sides(cs, 0.0, 0.0, UP) == (medium(cs, "sheet"), medium(cs, "guide"))
    assert cs.n_edges == (2 * 2000 + 3) + 4 - 1


def test_many_parts_check_and_compile_quickly():
    """1000 separate blocks and one core in the last: overlap and nesting checks only measure
    pairs that intersect, so this stays fast (it took 10 s when every pair was measured)."""
    import time
    parts = [Part(f"block {i}", "crown", rect(2 * i, 0, 2 * i + 1, 1)) for i in range(1000)]
    parts.append(Part("core", "pmma", rect(1998.25, 0.25, 1998.75, 0.75)))
    t0 = time.perf_counter()
    cs = compile_scene(scene_of(*parts, crown=1.52, pmma=1.49))
    assert time.perf_counter() - t0 < 5.0
    assert sides(cs, 1998.5, 0.25, UP) == (medium(cs, "core"), medium(cs, "block 999"))
    assert sides(cs, 0.5, 0.0, UP) == (medium(cs, "block 0"), AMBIENT)


def test_small_overlap_in_a_large_scene_is_still_found():
    """Two 1 mm blocks overlapping by 0.2 x 0.5 = 0.1 mm^2, in a scene 2 m across: the area
    slack must follow the parts' size, not the scene's."""
    s = scene_of(Part("a", "crown", rect(0, 0, 1, 1)), Part("b", "crown", rect(0.8, 0.5, 1.8, 1.5)),
                 Part("far away", "crown", rect(2000, 0, 2001, 1)), crown=1.5)
    with pytest.raises(SceneError) as info:
        compile_scene(s)
    assert "by 0.1 mm^2" in info.value.problems[0].found


def test_small_core_nested_in_a_large_scene():
    s = scene_of(Part("cladding", "clad", rect(0, 0, 1, 1)), Part("core", "core", rect(0.4, 0.4, 0.6, 0.6)),
                 Part("far away", "clad", rect(5000, 0, 5001, 1)), clad=1.45, core=1.5)
    cs = compile_scene(s)
    assert sides(cs, 0.5, 0.4, UP) == (medium(cs, "core"), medium(cs, "cladding"))


def test_arc_partly_cemented():
    """A cap bonded to the middle of a block's arc face (circle centre (-10, 0), radius 10): the
    arc splits where the cap ends; the middle is block|cap, the rest block|air."""
    R, ox = 10.0, -10.0
    pt = lambda a: (ox + R * math.cos(a), R * math.sin(a))  # noqa: E731
    lo, hi, blo, bhi = pt(-0.5), pt(0.5), pt(-0.2), pt(0.2)
    block = Loop((Edge(lo, hi, arc_center=(ox, 0.0), ccw=True), Edge(hi, (-8, hi[1])),
                  Edge((-8, hi[1]), (-8, lo[1])), Edge((-8, lo[1]), lo)))
    cap = Loop((Edge(bhi, blo, arc_center=(ox, 0.0), ccw=False), Edge(blo, (3, blo[1])),
                Edge((3, blo[1]), (3, bhi[1])), Edge((3, bhi[1]), bhi)))
    cs = compile_scene(scene_of(Part("block", "crown", block), Part("cap", "flint", cap), crown=1.52, flint=1.62))
    b, c = medium(cs, "block"), medium(cs, "cap")
    assert sides(cs, 0.0, 0.0, RIGHT) == (c, b)
    x, y = pt(0.35)
    assert sides(cs, x, y, (math.cos(0.35), math.sin(0.35))) == (AMBIENT, b)
    assert int(cs.is_arc.sum()) == 3          # the block's arc in three pieces, the cap's merged
