"""The blocked compiled hit search (`kernel_hits.brute_all`) gives the same bits as before.

common practice: restructuring a kernel for speed must not change what it computes.  So every
check here is bit-for-bit equality of (distance, edge) among three formulations of the plain
search: the numpy reference `intersect.nearest_hit` (every ray against every edge as arrays),
the one-ray-at-a-time compiled loop `brute_all_scalar`, and the blocked `brute_all`.  Inputs:
the rays the tracer really queries on every sample, and random edge sets (seeded numpy
default_rng) of lines and arcs, minor and major, with indices of both kinds interleaved,
on integer lattices so that exact ties between edges occur, with rays starting on edges,
grazing (along a line, tangent to a circle), aimed at shared vertices, parallel to edges, and
every block-size boundary (0, 1, BLOCK - 1, BLOCK, BLOCK + 1 rays and more).  One check is the
elementary distance of a ray to a wall straight ahead.
"""
import math
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from raytrace import kernel
from raytrace.compile import compile_scene
from raytrace.intersect import nearest_hit
from raytrace.kernel_hits import BLOCK, brute_all, brute_all_scalar, compiled_hit_function, edge_lists
from raytrace.scene_io import load_scene
from raytrace.sources import sample_sources
from raytrace.tracer import Limits, trace_rays

SAMPLES = sorted((Path(__file__).parent.parent / "samples").glob("*.json"))
SIZES = (0, 1, 2, BLOCK - 1, BLOCK, BLOCK + 1, 3 * BLOCK + 7)


def run(fn, cs, x, y, dx, dy, start):
    n = len(x)
    t = np.full(n, 7.0)                       # not the answer: every entry must be written
    e = np.full(n, -7, dtype=np.int64)
    c = lambda a, d=float: np.ascontiguousarray(a, dtype=d)
    fn(c(x), c(y), c(dx), c(dy), c(start, np.int64), *edge_lists(cs, np.arange(cs.n_edges)), float(cs.eps), t, e)
    return t, e


def assert_all_same(cs, x, y, dx, dy, start):
    """The blocked search, the scalar loop and the numpy reference: the same t bits and edges."""
    t0, e0 = nearest_hit(cs, x, y, dx, dy, start)
    for fn in (brute_all_scalar, brute_all):
        t, e = run(fn, cs, x, y, dx, dy, start)
        np.testing.assert_array_equal(e, e0, err_msg=fn.__name__)
        np.testing.assert_array_equal(t.view(np.int64), t0.view(np.int64), err_msg=fn.__name__)
    return t0, e0


def edge_set(seed, n_lines, n_arcs, lattice=4):
    """A stand-in for a compiled scene holding the fields the hit searches read: lines between
    lattice points (so edges share vertices and rays tie), arcs of random sweep (minor and major,
    either direction) on lattice centres, their kinds interleaved in index order."""
    rng = np.random.default_rng(seed)
    n = n_lines + n_arcs
    is_arc = np.zeros(n, dtype=bool)
    is_arc[rng.permutation(n)[:n_arcs]] = True
    x0, y0 = rng.integers(-lattice, lattice + 1, (2, n)).astype(float)
    x1, y1 = rng.integers(-lattice, lattice + 1, (2, n)).astype(float)
    same = (x0 == x1) & (y0 == y1)
    x1[same] += 1.0                                   # no zero-length line
    cx, cy = rng.integers(-lattice, lattice + 1, (2, n)).astype(float)
    radius = rng.integers(1, 4, n).astype(float)
    a0 = rng.uniform(-math.pi, math.pi, n)
    sweep = rng.uniform(0.2, 2 * math.pi - 0.2, n) * rng.choice([-1.0, 1.0], n)
    ax0, ay0 = cx + radius * np.cos(a0), cy + radius * np.sin(a0)
    ax1, ay1 = cx + radius * np.cos(a0 + sweep), cy + radius * np.sin(a0 + sweep)
    x0, y0 = np.where(is_arc, ax0, x0), np.where(is_arc, ay0, y0)
    x1, y1 = np.where(is_arc, ax1, x1), np.where(is_arc, ay1, y1)
    ids = np.arange(n)
    return SimpleNamespace(n_edges=n, is_arc=is_arc, line_ids=ids[~is_arc], arc_ids=ids[is_arc], x0=x0, y0=y0,
                           x1=x1, y1=y1, cx=np.where(is_arc, cx, 0.0), cy=np.where(is_arc, cy, 0.0),
                           radius=np.where(is_arc, radius, 0.0), sweep=np.where(is_arc, sweep, 0.0), eps=1e-9)


def special_rays(cs, n, seed):
    """n rays, a sixth each: from a lattice point in a lattice direction (hits ties and vertices),
    from a point on a line (start = that line), along a line (grazing, parallel), at a vertex,
    tangent to an arc's circle, and from a point on an arc (the concave side can be hit again)."""
    rng = np.random.default_rng(seed)
    lines, arcs = cs.line_ids, cs.arc_ids
    x = rng.integers(-5, 6, n).astype(float)
    y = rng.integers(-5, 6, n).astype(float)
    dx = rng.integers(-2, 3, n).astype(float)
    dy = rng.integers(-2, 3, n).astype(float)
    dx[(dx == 0) & (dy == 0)] = 1.0
    start = np.full(n, -1, dtype=np.int64)
    kind = np.arange(n) % 6
    for i in range(n):
        if kind[i] in (1, 2, 3) and len(lines):
            e = lines[rng.integers(len(lines))]
            ex, ey = cs.x1[e] - cs.x0[e], cs.y1[e] - cs.y0[e]
            u = rng.choice([0.0, 0.5, 1.0, rng.random()])
            if kind[i] == 1:                          # leaving a line, as a child of a hit
                x[i], y[i], start[i] = cs.x0[e] + u * ex, cs.y0[e] + u * ey, e
            elif kind[i] == 2:                        # along a line or parallel to it
                x[i] += 0.0 if rng.random() < 0.5 else cs.x0[e] - x[i]
                y[i] += 0.0 if rng.random() < 0.5 else cs.y0[e] - y[i]
                dx[i], dy[i] = ex * rng.choice([-1.0, 1.0]), ey * rng.choice([-1.0, 1.0])
            else:                                     # through a vertex
                dx[i], dy[i] = cs.x0[e] - x[i], cs.y0[e] - y[i]
        elif kind[i] in (4, 5) and len(arcs):
            e = arcs[rng.integers(len(arcs))]
            a = rng.uniform(-math.pi, math.pi)
            r = cs.radius[e]
            px, py = cs.cx[e] + r * math.cos(a), cs.cy[e] + r * math.sin(a)
            if kind[i] == 4:                          # tangent to the circle at (px, py)
                x[i], y[i] = px - 2.0 * math.sin(a), py + 2.0 * math.cos(a)
                dx[i], dy[i] = math.sin(a), -math.cos(a)
            else:                                     # from the arc's end point, or its circle
                x[i], y[i] = (cs.x0[e], cs.y0[e]) if rng.random() < 0.5 else (px, py)
                start[i] = e
        if dx[i] == 0 and dy[i] == 0:
            dx[i] = 1.0
    L = np.hypot(dx, dy)
    unit = rng.random(n) < 0.7                        # mostly unit directions, as the tracer's
    dx = np.where(unit, dx / L, dx)
    dy = np.where(unit, dy / L, dy)
    return x, y, dx, dy, start


def test_a_wall_straight_ahead_is_at_its_distance():
    """Elementary geometry: from the origin along +x, the wall x = 2 (y from -1 to 1) is at t = 2,
    and the wall x = 3 behind it is not the nearest; the edge left (start) is skipped."""
    cs = SimpleNamespace(n_edges=2, is_arc=np.zeros(2, bool), line_ids=np.arange(2), arc_ids=np.arange(0),
                         x0=np.array([3.0, 2.0]), y0=np.array([-1.0, -1.0]), x1=np.array([3.0, 2.0]),
                         y1=np.array([1.0, 1.0]), cx=np.zeros(2), cy=np.zeros(2), radius=np.zeros(2),
                         sweep=np.zeros(2), eps=1e-9)
    z = np.zeros(2)
    t, e = run(brute_all, cs, z, z, z + 1.0, z, np.array([-1, 1]))
    assert list(t) == [2.0, 3.0] and list(e) == [1, 0]


@pytest.mark.parametrize("n", SIZES)
@pytest.mark.parametrize("seed", range(6))
def test_random_lines_and_arcs_every_block_size(seed, n):
    cs = edge_set(seed, n_lines=3 + 4 * seed, n_arcs=seed % 4 + (seed > 2))
    x, y, dx, dy, start = special_rays(cs, n, seed + 100)
    assert_all_same(cs, x, y, dx, dy, start)


def test_exact_ties_go_to_the_lowest_line_then_the_lowest_arc():
    """Duplicate edges tie at every hit: the reference's order (lowest line, then lowest arc)."""
    base = edge_set(11, n_lines=6, n_arcs=3)
    cs = SimpleNamespace(**{k: np.concatenate([v, v]) if isinstance(v, np.ndarray) else v
                            for k, v in vars(base).items()})
    n = base.n_edges
    cs.n_edges = 2 * n
    cs.line_ids = np.concatenate([base.line_ids, base.line_ids + n])
    cs.arc_ids = np.concatenate([base.arc_ids, base.arc_ids + n])
    x, y, dx, dy, start = special_rays(base, 3 * BLOCK + 1, 12)
    start = np.where(start >= 0, start, -1)
    t, e = assert_all_same(cs, x, y, dx, dy, start)
    hit = e >= 0
    assert hit.sum() > BLOCK                          # the check has ties to decide
    first_line = (~cs.is_arc[e[hit]]) & (e[hit] < n)
    first_arc = cs.is_arc[e[hit]] & (e[hit] < n)
    # a duplicate line is taken only where its twin was the edge the ray left
    twin_left = (~cs.is_arc[e[hit]]) & (e[hit] >= n) & (start[hit] == e[hit] - n)
    assert np.all(first_line | first_arc | twin_left)


def test_many_random_rays_many_edges():
    cs = edge_set(21, n_lines=90, n_arcs=10, lattice=8)
    rng = np.random.default_rng(22)
    n = 5000
    a = rng.uniform(-math.pi, math.pi, n)
    x, y = rng.uniform(-10, 10, (2, n))
    start = np.full(n, -1, dtype=np.int64)
    assert_all_same(cs, x, y, np.cos(a), np.sin(a), start)
    x, y, dx, dy, start = special_rays(cs, n, 23)
    assert_all_same(cs, x, y, dx, dy, start)


@pytest.mark.parametrize("path", SAMPLES, ids=lambda p: p.stem)
def test_the_tracers_own_queries_on_every_sample(path):
    """Every hit query a 300-ray trace of the sample makes, through all three formulations."""
    scene = load_scene(path)
    cs = compile_scene(scene)
    search = compiled_hit_function(cs, "plain")
    got = []

    def record(_cs, x, y, dx, dy, start):
        got.append([np.array(a) for a in (x, y, dx, dy, start)])
        return search(_cs, x, y, dx, dy, start)
    s = scene.settings
    with kernel.using("numba"):
        trace_rays(cs, sample_sources(scene.sources, 300, seed=s.seed), mode=s.mode,
                   limits=Limits(flux_floor=s.flux_floor, max_generations=s.max_generations), seed=s.seed,
                   hit_fn=record, n_sources=len(scene.sources), track_paths=False)
    x, y, dx, dy, start = (np.concatenate([g[i] for g in got]) for i in range(5))
    assert len(x) > 300
    assert_all_same(cs, x, y, dx, dy, start.astype(np.int64))
