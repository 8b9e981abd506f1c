"""The accelerated nearest-hit searches give exactly the plain search's answer.

common practice: an acceleration structure must not change what a ray tracer computes, only how
fast; so every check here is bit-for-bit equality of (distance, edge) with the plain search
(`intersect.nearest_hit`, every ray against every edge), on the samples, on random scenes with
true arcs, on fine films of many facets, on rays aimed exactly at shared vertices, and on rays
starting on an edge.  One check compares arc hits with the ray-circle quadratic directly.
Random inputs use fixed seeds (numpy default_rng(seed)) and a derandomized hypothesis run.
"""
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings, strategies as st

from conftest import make_scene, shaped_part
from raytrace import kernel
from raytrace.accel import EdgeGrid, edge_grid, edge_table, hit_function
from raytrace.compile import compile_scene
from raytrace.intersect import nearest_hit
from raytrace.scene import Source
from raytrace.scene_io import load_scene

SAMPLES = sorted((Path(__file__).parent.parent / "samples").glob("*.json"))
METHODS = ("sweep", "grid", "auto")


def random_rays(cs, n, seed, on_edges=True):
    """Rays from random points of the scene box (some starting exactly on edges), random directions."""
    rng = np.random.default_rng(seed)
    xs = np.concatenate([cs.x0, cs.x1])
    ys = np.concatenate([cs.y0, cs.y1])
    pad = 0.2 * (xs.max() - xs.min() + ys.max() - ys.min()) + 1.0
    x = rng.uniform(xs.min() - pad, xs.max() + pad, n)
    y = rng.uniform(ys.min() - pad, ys.max() + pad, n)
    start = np.full(n, -1, dtype=np.int64)
    if on_edges:
        # a third start on a straight edge, as children of a hit do
        lines = np.flatnonzero(~cs.is_arc)
        k = n // 3
        e = lines[rng.integers(0, len(lines), k)]
        u = rng.random(k)
        x[:k] = cs.x0[e] + u * (cs.x1[e] - cs.x0[e])
        y[:k] = cs.y0[e] + u * (cs.y1[e] - cs.y0[e])
        start[:k] = e
    a = rng.uniform(-math.pi, math.pi, n)
    return x, y, np.cos(a), np.sin(a), start


def assert_same_as_plain(cs, x, y, dx, dy, start, methods=METHODS):
    """Every method of both kernels (the numpy array code and the compiled loops, "plain"
    included for the compiled one) against the numpy plain search."""
    t0, e0 = nearest_hit(cs, x, y, dx, dy, start)
    for name in kernel.KERNELS:
        with kernel.using(name):
            # the compiled every-edge search too, where it is quick (it is what the grid beats)
            plain = ("plain",) if name == "numba" and cs.n_edges <= 2000 else ()
            for method in methods + plain:
                t, e = hit_function(cs, method)(cs, x, y, dx, dy, start)
                np.testing.assert_array_equal(e, e0, err_msg=f"edge differs ({name} {method})")
                np.testing.assert_array_equal(t, t0, err_msg=f"distance differs ({name} {method})")
    return t0, e0


@pytest.mark.parametrize("path", SAMPLES, ids=lambda p: p.stem)
def test_samples_random_rays_same_hits(path):
    cs = compile_scene(load_scene(path))
    # 60,000 rays: large enough that "auto" uses the sweep, not the small plain matrix
    t, e = assert_same_as_plain(cs, *random_rays(cs, 60_000, seed=7))
    assert (e >= 0).mean() > 0.2      # the rays do meet the scene


def test_small_batches_same_hits():
    """Few rays (the small-matrix branch of "auto") and an empty batch."""
    cs = compile_scene(load_scene(SAMPLES[0]))
    assert_same_as_plain(cs, *random_rays(cs, 37, seed=3))
    z = np.zeros(0)
    for method in METHODS:
        t, e = hit_function(cs, method)(cs, z, z, z, z, np.zeros(0, dtype=np.int64))
        assert len(t) == 0 and len(e) == 0


def strip_scene(edges, pitch=0.05):
    count = max(1, (edges - 4) // 2)
    part = shaped_part("film", "n15", "microprism_strip", pitch=pitch, prism_angle_deg=90.0, count=count,
                       slab_thickness=0.3)
    src = Source("b", kind="beam", position=(0.0, -1.0), direction_deg=90.0, width=1.0)
    return make_scene([part], [src], materials={"n15": 1.5})


@pytest.mark.parametrize("edges", [100, 1000, 10000])
def test_films_of_many_facets_same_hits(edges):
    cs = compile_scene(strip_scene(edges))
    grid = edge_grid(cs)
    assert grid.nx * grid.ny > 1
    x, y, dx, dy, start = random_rays(cs, 30_000, seed=edges)
    # most random rays over a wide film miss it: also send rays from just under the facets
    rng = np.random.default_rng(edges + 1)
    k = len(x) // 2
    half = (cs.x1.max() - cs.x0.min()) / 2
    x[:k] = rng.uniform(-half, half, k)
    y[:k] = rng.uniform(0.01, 0.32, k)
    start[:k] = -1
    t, e = assert_same_as_plain(cs, x, y, dx, dy, start, methods=("grid", "auto"))
    assert (e >= 0).mean() > 0.5


def test_rays_through_shared_vertices_pick_the_same_edge():
    """Rays aimed exactly at vertices (two edges at the same distance): ties broken alike."""
    cs = compile_scene(strip_scene(400))
    rng = np.random.default_rng(11)
    v = rng.integers(0, cs.n_edges, 5000)
    px, py = cs.x0[v], cs.y0[v]
    a = rng.uniform(-math.pi, math.pi, len(v))
    d = rng.uniform(0.05, 2.0, len(v))
    x, y = px - d * np.cos(a), py - d * np.sin(a)
    start = np.full(len(v), -1, dtype=np.int64)
    t, e = assert_same_as_plain(cs, x, y, np.cos(a), np.sin(a), start, methods=("grid", "sweep", "auto"))
    # a ray aimed at a convex corner from outside may pass it by a rounding error
    assert (e >= 0).mean() > 0.9


def circle_scene():
    """A lens with two true arcs (spherical faces) and a bent guide (arc walls)."""
    lens = shaped_part("lens", "n15", "lens", position=(0.0, 0.0), r1=8.0, r2=-8.0, center_thickness=4.0,
                       aperture=8.0)
    pipe = shaped_part("pipe", "n15", "light_pipe", position=(12.0, 0.0), width=2.0,
                       segments=[{"straight": 2.0}, {"bend": {"radius": 3.0, "angle": 200.0}}])
    src = Source("b", kind="beam", position=(-10.0, 0.0), width=1.0)
    return make_scene([lens, pipe], [src], materials={"n15": 1.5})


def test_arcs_exact_against_the_circle_equation():
    """common practice: a ray p + t d meets the circle |q - c| = r at t = -b +- sqrt(b^2 - c),
    b = (p - c).d, c = |p - c|^2 - r^2; the hit must lie on the arc's span.  Rays aimed at arc
    points from outside must report that arc at that distance (to 1e-12 relative), and all
    methods agree bit for bit."""
    cs = compile_scene(circle_scene())
    arcs = np.flatnonzero(cs.is_arc)
    assert len(arcs) >= 3
    rng = np.random.default_rng(5)
    k = 4000
    ea = arcs[rng.integers(0, len(arcs), k)]
    f = rng.uniform(0.05, 0.95, k)
    ang = cs.a0[ea] + f * cs.sweep[ea]
    qx = cs.cx[ea] + cs.radius[ea] * np.cos(ang)
    qy = cs.cy[ea] + cs.radius[ea] * np.sin(ang)
    # come in along the outward normal from 0.01 mm away: the arc point is the first hit
    dist = 0.01
    x, y = qx + dist * np.cos(ang), qy + dist * np.sin(ang)
    dx, dy = -np.cos(ang), -np.sin(ang)
    start = np.full(k, -1, dtype=np.int64)
    t, e = assert_same_as_plain(cs, x, y, dx, dy, start)
    np.testing.assert_array_equal(e, ea)
    np.testing.assert_allclose(t, dist, rtol=1e-9)
    # and from inside the circle, rays leaving the arc (start on it) see the far side
    t2, e2 = assert_same_as_plain(cs, qx, qy, -dx, -dy, ea.astype(np.int64) * 0 - 1)
    assert np.isfinite(t2).any()


def test_arc_rays_random_same_hits():
    cs = compile_scene(circle_scene())
    assert_same_as_plain(cs, *random_rays(cs, 50_000, seed=9))


HYP = settings(max_examples=25, derandomize=True, deadline=None,
               suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])


@st.composite
def random_scene(draw):
    parts = []
    for i in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(["rectangle", "prism", "lens", "light_pipe", "regular_polygon", "strip"]))
        pos = (i * 30.0, draw(st.floats(-3.0, 3.0)))
        rot = draw(st.floats(-180.0, 180.0))
        if kind == "rectangle":
            p = shaped_part(f"p{i}", "n15", kind, pos, rot, width=draw(st.floats(0.5, 15.0)),
                            height=draw(st.floats(0.5, 15.0)))
        elif kind == "prism":
            p = shaped_part(f"p{i}", "n15", kind, pos, rot, apex_angle_deg=draw(st.floats(20.0, 160.0)),
                            side=draw(st.floats(1.0, 10.0)))
        elif kind == "lens":
            h = draw(st.floats(1.0, 4.0))
            r1 = draw(st.sampled_from([-1, 1])) * draw(st.floats(h * 1.05, 30.0))
            r2 = draw(st.sampled_from([-1, 1])) * draw(st.floats(h * 1.05, 30.0))
            sag = [r - math.copysign(math.sqrt(r * r - h * h), r) for r in (r1, r2)]
            p = shaped_part(f"p{i}", "n15", kind, pos, rot, r1=r1, r2=r2,
                            center_thickness=max(sag[0] - sag[1], 0.0) + draw(st.floats(0.3, 3.0)), aperture=2 * h)
        elif kind == "light_pipe":
            p = shaped_part(f"p{i}", "n15", kind, pos, rot, width=draw(st.floats(0.3, 2.0)),
                            segments=[{"straight": draw(st.floats(0.5, 3.0))},
                                      {"bend": {"radius": draw(st.floats(0.5, 3.0)),
                                                "angle": draw(st.sampled_from([-1, 1])) * draw(st.floats(20.0, 170.0))}}])
        elif kind == "regular_polygon":
            p = shaped_part(f"p{i}", "n15", kind, pos, rot, sides=draw(st.integers(3, 40)),
                            circumradius=draw(st.floats(1.0, 10.0)))
        else:
            p = shaped_part(f"p{i}", "n15", "microprism_strip", pos, rot, pitch=draw(st.floats(0.05, 1.0)),
                            prism_angle_deg=draw(st.floats(40.0, 140.0)), count=draw(st.integers(1, 120)),
                            slab_thickness=draw(st.floats(0.1, 1.0)))
        parts.append(p)
    src = Source("b", kind="beam", position=(-10.0, 0.0), width=1.0)
    return make_scene(parts, [src], materials={"n15": 1.5}), draw(st.integers(0, 10_000))


@HYP
@given(random_scene())
def test_random_scenes_same_hits(case):
    scene, seed = case
    cs = compile_scene(scene)
    x, y, dx, dy, start = random_rays(cs, 6000, seed=seed)
    assert_same_as_plain(cs, x, y, dx, dy, start, methods=("sweep", "grid"))


def test_grid_lists_every_edge_in_the_cells_it_touches():
    """Each edge is listed in the cell of each of its sample points (arcs by angle)."""
    cs = compile_scene(circle_scene())
    g = EdgeGrid(cs)
    big = set(g.big.lines.tolist()) | set(g.big.arcs.tolist())
    for e in range(cs.n_edges):
        if e in big:
            continue
        u = np.linspace(0.0, 1.0, 101)
        if cs.is_arc[e]:
            a = cs.a0[e] + u * cs.sweep[e]
            px, py = cs.cx[e] + cs.radius[e] * np.cos(a), cs.cy[e] + cs.radius[e] * np.sin(a)
            table = g.arc_cells
        else:
            px, py = cs.x0[e] + u * (cs.x1[e] - cs.x0[e]), cs.y0[e] + u * (cs.y1[e] - cs.y0[e])
            table = g.line_cells
        ix = np.clip(np.floor((px - g.x0) / g.h).astype(int), 0, g.nx - 1)
        iy = np.clip(np.floor((py - g.y0) / g.h).astype(int), 0, g.ny - 1)
        cells = iy * g.nx + ix
        assert all(e in table[c] for c in cells), f"edge {e} missing from a cell it crosses"


def test_unknown_method_is_a_clear_error():
    cs = compile_scene(circle_scene())
    with pytest.raises(ValueError, match="expected one of auto, plain, sweep, grid"):
        hit_function(cs, "bvh")


def test_edge_table_is_built_once_per_compiled_scene():
    cs = compile_scene(circle_scene())
    assert edge_table(cs) is edge_table(cs)
    assert edge_grid(cs) is edge_grid(cs)
