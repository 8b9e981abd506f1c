"""Compiled nearest-hit search: every ray against every edge, or through the uniform grid.

The same pair formulas as `intersect.line_t` / `intersect.arc_t`, written out per pair, with
the same operations in the same order (numba does not fuse or reorder floating-point operations
without fast-math), so every (ray, edge) pair gives the same bits as the array code.  The same
tie order as the plain search: the line of lowest index, then the arc of lowest index.  The
grid walk is `accel.EdgeGrid._walk` for one ray at a time, on the grid that class builds.

The every-edge search (`brute_all`) runs in blocks of rays, edge outer and rays inner, with
selects instead of branches, so the compiler vectorizes it across rays; `brute_one` and
`brute_all_scalar` are the one-ray formulation it must match bit for bit.
"""
from __future__ import annotations

import math

import numpy as np

from .accel import GRID_MIN_EDGES, _cached, edge_grid
from .compile import CompiledScene
from .intersect import arc_constants, line_reach
from .kernel import jit, timed_first_call

INF = math.inf


@jit(inline="always")
def line_t(x, y, dx, dy, ax, ay, ex, ey, reach, eps):
    denom = dx * ey - dy * ex
    wx = ax - x
    wy = ay - y
    tn = wx * ey - wy * ex
    # t = tn / denom has the sign of tn * denom (exactly: rounding keeps signs, and t = 0 or a
    # parallel pair fails anyway), so a segment behind the ray is out without the division
    if not ((tn > 0.0 and denom > 0.0) or (tn < 0.0 and denom < 0.0)):
        return INF
    inv = 1.0 / denom
    t = tn * inv
    u = (wx * dy - wy * dx) * inv
    if u >= -reach and u <= 1.0 + reach and t > eps:
        return t
    return INF


@jit(inline="always")
def arc_t(x, y, dx, dy, cx, cy, r2, sx, sy, qx, qy, major, tol, eps):
    fx = x - cx
    fy = y - cy
    b = fx * dx + fy * dy
    c = fx * fx + fy * fy - r2
    disc = b * b - c
    if not disc >= 0.0:
        return INF
    sq = math.sqrt(disc)
    nb = -b
    best = INF
    for k in range(2):
        t = nb - sq if k == 0 else nb + sq
        hx = fx + t * dx
        hy = fy + t * dy
        c1 = sx * hy - sy * hx >= -tol
        c2 = hx * qy - hy * qx >= -tol
        on = (c1 or c2) if major else (c1 and c2)
        if on and t > eps and t < best:
            best = t
    return best


@jit
def brute_one(x, y, dx, dy, start, lid, lf, aid, af, amaj, eps):
    """Nearest hit of one ray on the lines `lid` (rows of lf: start x, y, extent x, y, reach past
    the ends as a fraction of the length, `intersect.line_reach`) and the
    arcs `aid` (rows of af: centre x, y, r^2, span start x, y, span end x, y, slack): (t, edge)."""
    tb = INF
    eb = -1
    for j in range(len(lid)):
        if lid[j] == start:
            continue
        t = line_t(x, y, dx, dy, lf[0, j], lf[1, j], lf[2, j], lf[3, j], lf[4, j], eps)
        if t < tb:
            tb = t
            eb = lid[j]
    for j in range(len(aid)):
        t = arc_t(x, y, dx, dy, af[0, j], af[1, j], af[2, j], af[3, j], af[4, j], af[5, j], af[6, j], amaj[j],
                  af[7, j], eps)
        if t < tb:
            tb = t
            eb = aid[j]
    return tb, eb


@jit
def brute_all_scalar(x, y, dx, dy, start, lid, lf, aid, af, amaj, eps, t_out, e_out):
    """One ray at a time through brute_one: the formulation brute_all replaced, kept as the
    reference its tests and bench/hit_search.py compare against."""
    for i in range(len(x)):
        t_out[i], e_out[i] = brute_one(x[i], y[i], dx[i], dy[i], start[i], lid, lf, aid, af, amaj, eps)


BLOCK = 128     # rays per block: the block's rays and best hits stay in L1 across all edges


@jit(inline="always")
def lines_block(x, y, dx, dy, start, lid, lf, eps, tb, eb):
    """Every line against the rays of one block (views of BLOCK rays or fewer), improving tb/eb.

    Edge outer, rays inner, without branches: the inner loop is selects only, so the compiler
    vectorizes it across rays.  Each pair still gets line_t's operations in line_t's order
    (the division is done for every pair, the sign test decides by a select whether it counts:
    the same t, the same pairs counted); edges in ascending order with a strict < keep the
    lowest index on ties, as brute_one does."""
    m = len(x)
    for j in range(len(lid)):
        ax = lf[0, j]
        ay = lf[1, j]
        ex = lf[2, j]
        ey = lf[3, j]
        lo = -lf[4, j]
        hi = 1.0 + lf[4, j]
        ej = lid[j]
        for k in range(m):
            denom = dx[k] * ey - dy[k] * ex
            wx = ax - x[k]
            wy = ay - y[k]
            tn = wx * ey - wy * ex
            inv = 1.0 / denom
            t = tn * inv
            u = (wx * dy[k] - wy * dx[k]) * inv
            ok = ((tn > 0.0) & (denom > 0.0)) | ((tn < 0.0) & (denom < 0.0))
            ok = ok & (u >= lo) & (u <= hi) & (t > eps) & (start[k] != ej) & (t < tb[k])
            tb[k] = t if ok else tb[k]
            eb[k] = ej if ok else eb[k]


@jit(inline="always")
def arcs_block(x, y, dx, dy, aid, af, amaj, eps, tb, eb):
    """Every arc against the rays of one block, as lines_block: arc_t's operations per pair,
    both roots as selects (a missed circle gives nan roots, which no comparison passes)."""
    m = len(x)
    for j in range(len(aid)):
        cx = af[0, j]
        cy = af[1, j]
        r2 = af[2, j]
        sx = af[3, j]
        sy = af[4, j]
        qx = af[5, j]
        qy = af[6, j]
        tol = af[7, j]
        ntol = -tol
        major = amaj[j]
        ej = aid[j]
        for k in range(m):
            fx = x[k] - cx
            fy = y[k] - cy
            b = fx * dx[k] + fy * dy[k]
            c = fx * fx + fy * fy - r2
            disc = b * b - c
            has = disc >= 0.0
            sq = math.sqrt(disc)
            nb = -b
            t1 = nb - sq
            hx = fx + t1 * dx[k]
            hy = fy + t1 * dy[k]
            c1 = sx * hy - sy * hx >= ntol
            c2 = hx * qy - hy * qx >= ntol
            on1 = ((c1 | c2) & major) | ((c1 & c2) & (not major))
            t2 = nb + sq
            hx = fx + t2 * dx[k]
            hy = fy + t2 * dy[k]
            c1 = sx * hy - sy * hx >= ntol
            c2 = hx * qy - hy * qx >= ntol
            on2 = ((c1 | c2) & major) | ((c1 & c2) & (not major))
            ok1 = has & on1 & (t1 > eps)
            ok2 = has & on2 & (t2 > eps) & ((t2 < t1) | (not ok1))
            t = t2 if ok2 else t1
            ok = (ok1 | ok2) & (t < tb[k])
            tb[k] = t if ok else tb[k]
            eb[k] = ej if ok else eb[k]


@jit
def brute_all(x, y, dx, dy, start, lid, lf, aid, af, amaj, eps, t_out, e_out):
    """Nearest hit of every ray on every edge (brute_one's answer, the same bits), in blocks of
    BLOCK rays: all lines, then all arcs, each as a loop over the block's rays per edge."""
    n = len(x)
    for i0 in range(0, n, BLOCK):
        i1 = min(n, i0 + BLOCK)
        tb = t_out[i0:i1]
        eb = e_out[i0:i1]
        tb[:] = INF
        eb[:] = -1
        lines_block(x[i0:i1], y[i0:i1], dx[i0:i1], dy[i0:i1], start[i0:i1], lid, lf, eps, tb, eb)
        arcs_block(x[i0:i1], y[i0:i1], dx[i0:i1], dy[i0:i1], aid, af, amaj, eps, tb, eb)


@jit(inline="always")
def _next_line(d, inv, g0, i, step, h, p):
    """Along one axis: t at which the ray crosses the next cell line, and t between lines."""
    if d == 0.0:
        return INF, INF
    return (g0 + (i + (1 if step > 0 else 0)) * h - p) * inv, abs(inv) * h


@jit
def grid_all(x, y, dx, dy, start, lid, lf, aid, af, amaj, eps, gx0, gy0, gx1, gy1, h, nx, ny, ne,
             line_cells, line_count, arc_cells, arc_count, rank, ef, kf, kmaj, t_out, e_out):
    """Big edges every ray against, then a 2D DDA walk through the grid's cells (per-edge rows
    ef: start x, y, extent x, y, reach; kf: the arc constants as in brute_one)."""
    for i in range(len(x)):
        xi, yi, dxi, dyi, st = x[i], y[i], dx[i], dy[i], start[i]
        tb, eb = brute_one(xi, yi, dxi, dyi, st, lid, lf, aid, af, amaj, eps)
        rb = rank[eb] if eb >= 0 else 2 * ne + 1
        idx_ = 1.0 / dxi
        idy_ = 1.0 / dyi
        tx0 = (gx0 - xi) * idx_
        tx1 = (gx1 - xi) * idx_
        ty0 = (gy0 - yi) * idy_
        ty1 = (gy1 - yi) * idy_
        if dxi == 0.0:
            inside = xi >= gx0 and xi <= gx1
            tx0 = -INF if inside else INF
            tx1 = INF if inside else -INF
        if dyi == 0.0:
            inside = yi >= gy0 and yi <= gy1
            ty0 = -INF if inside else INF
            ty1 = INF if inside else -INF
        t_in = max(max(min(tx0, tx1), min(ty0, ty1)), 0.0)
        t_exit = min(max(tx0, tx1), max(ty0, ty1))
        if t_in <= t_exit and t_in < tb:
            fx = math.floor((xi + t_in * dxi - gx0) / h)
            fy = math.floor((yi + t_in * dyi - gy0) / h)
            ix = int(min(max(fx, 0.0), nx - 1))
            iy = int(min(max(fy, 0.0), ny - 1))
            sx = 1 if dxi > 0 else -1
            sy = 1 if dyi > 0 else -1
            tmx, tdx = _next_line(dxi, idx_, gx0, ix, sx, h, xi)
            tmy, tdy = _next_line(dyi, idy_, gy0, iy, sy, h, yi)
            while True:
                cell = iy * nx + ix
                for k in range(line_count[cell]):
                    ed = line_cells[cell, k]
                    if ed == st:
                        continue
                    t = line_t(xi, yi, dxi, dyi, ef[0, ed], ef[1, ed], ef[2, ed], ef[3, ed], ef[4, ed], eps)
                    if t < INF and (t < tb or (t == tb and rank[ed] < rb)):
                        tb, eb, rb = t, ed, rank[ed]
                for k in range(arc_count[cell]):
                    ed = arc_cells[cell, k]
                    t = arc_t(xi, yi, dxi, dyi, kf[0, ed], kf[1, ed], kf[2, ed], kf[3, ed], kf[4, ed], kf[5, ed],
                              kf[6, ed], kmaj[ed], kf[7, ed], eps)
                    if t < INF and (t < tb or (t == tb and rank[ed] < rb)):
                        tb, eb, rb = t, ed, rank[ed]
                t_far = min(tmx, tmy)
                if tb <= t_far or t_far >= t_exit:
                    break
                if tmx < tmy:
                    ix += sx
                    tmx += tdx
                else:
                    iy += sy
                    tmy += tdy
                if ix < 0 or ix >= nx or iy < 0 or iy >= ny:
                    break
        t_out[i] = tb
        e_out[i] = eb


ARC_ROWS = ("cx", "cy", "r2", "sx", "sy", "qx", "qy", "tol")


def edge_lists(cs: CompiledScene, ids: np.ndarray):
    """(line ids, line rows, arc ids, arc rows, arc is major) for the edges `ids`, in ascending
    index within each kind: the arguments of brute_one after the ray."""
    ids = np.asarray(ids, dtype=np.int64)
    lines = np.ascontiguousarray(ids[~cs.is_arc[ids]])
    arcs = np.ascontiguousarray(ids[cs.is_arc[ids]])
    lf = np.ascontiguousarray(np.array([cs.x0[lines], cs.y0[lines], (cs.x1 - cs.x0)[lines], (cs.y1 - cs.y0)[lines],
                                        line_reach(cs, lines)], dtype=float).reshape(5, len(lines)))
    k = arc_constants(cs, arcs)
    af = np.ascontiguousarray(np.array([k[f] for f in ARC_ROWS], dtype=float).reshape(len(ARC_ROWS), len(arcs)))
    return lines, lf, arcs, af, np.ascontiguousarray(k["major"], dtype=np.bool_)


class CompiledHits:
    """A compiled scene's edge constants in the layouts the kernels take (plain arrays only:
    numba types plain array arguments fast, tuples slowly, and a generation makes a few calls)."""

    def __init__(self, cs: CompiledScene, method: str):
        self.eps = float(cs.eps)
        self.method = method
        if method == "grid":
            g = edge_grid(cs)
            self.edges = edge_lists(cs, np.concatenate([g.big.lines, g.big.arcs]).astype(np.int64))
            c = np.ascontiguousarray
            k = g.arc_k
            self.grid = (float(g.x0), float(g.y0), float(g.x1), float(g.y1), float(g.h), int(g.nx), int(g.ny),
                         int(cs.n_edges), c(g.line_cells), c(g.line_count, dtype=np.int64), c(g.arc_cells),
                         c(g.arc_count, dtype=np.int64), c(g.rank),
                         c(np.array([g.ax, g.ay, g.ex, g.ey, g.reach], dtype=float)),
                         c(np.array([k[f] for f in ARC_ROWS], dtype=float)), c(k["major"], dtype=np.bool_))
        else:
            self.edges = edge_lists(cs, np.arange(cs.n_edges))

    def __call__(self, _cs, x, y, dx, dy, start):
        n = len(x)
        t = np.empty(n)
        e = np.empty(n, dtype=np.int64)
        if n == 0:
            return t, e
        c = np.ascontiguousarray
        args = (c(x, dtype=float), c(y, dtype=float), c(dx, dtype=float), c(dy, dtype=float),
                c(start, dtype=np.int64)) + self.edges + (self.eps,)
        if self.method == "grid":
            timed_first_call("grid hit search", lambda: grid_all(*args, *self.grid, t, e))
        else:
            timed_first_call("plain hit search", lambda: brute_all(*args, t, e))
        return t, e


def compiled_hit_function(cs: CompiledScene, method: str = "auto"):
    """The compiled nearest-hit function: "plain" (every edge), "grid", or "auto" (the grid
    above accel.GRID_MIN_EDGES edges, as the array code decides; "sweep" is plain here: a
    compiled loop over every edge is the sweep)."""
    if method == "auto":
        method = "grid" if cs.n_edges > GRID_MIN_EDGES else "plain"
    if method == "sweep":
        method = "plain"
    if method not in ("plain", "grid"):
        raise ValueError(f"acceleration: expected one of auto, plain, sweep, grid, found {method!r}")
    return _cached(cs, f"compiled hits {method}", lambda: CompiledHits(cs, method))
