"""Faster nearest-hit searches that give exactly the plain search's answer.

Two methods, picked by edge count (`hit_function`):

* few edges (the samples have 5 to 60; up to GRID_MIN_EDGES): a *sweep*, one pass per edge over blocks of rays that
  fit in the CPU cache, with the edge's constants as scalars.  No ray x edge matrix is built,
  so the cost is a few cache-resident vector operations per (ray, edge) pair.
* many edges (prism films, faceted parts): a *uniform grid* over the parts' bounding box.
  Each ray walks the cells it crosses in order (a vectorized 2D DDA, all rays advancing one
  cell per step) and tests only the edges listed in those cells; it stops at the first cell
  whose far side lies beyond the best hit found so far.  Edges much larger than a cell
  (detectors, long flat sides) are kept out of the grid and swept for every ray, which keeps
  the grid tight around the fine structure.

Why a uniform grid rather than a BVH or shapely's STRtree: the edges of the scenes that need
acceleration are of similar size and spread evenly along a part (facets of a film), where a
uniform grid is as selective as a tree; its walk is the same few array operations for every
ray at every step, with no per-ray stack, which suits numpy.  STRtree answers box queries one
geometry at a time in C but cannot return the *nearest* hit along a ray, so every ray would
still need the exact test against all candidates of its whole path box, which for a long film
is most of the film.

Exactness: candidates are tested with the plain search's pair formulas (`intersect.line_t`,
`intersect.arc_t`), arcs as true circles; every edge is listed in every cell its (slightly
fattened) extent touches, and ties go to the same edge (lowest line index, then lowest arc
index).  So the accelerated search returns the same (t, edge) bits as `intersect.nearest_hit`;
the tests check this on samples and random scenes.
"""
from __future__ import annotations

import math

import numpy as np

from .compile import CompiledScene
from .intersect import arc_constants, arc_t, line_reach, line_t, nearest_hit

GRID_MIN_EDGES = 160        # above this many edges the grid beats the sweep (measured on films)
SMALL_MATRIX = 50_000       # rays x edges up to which one plain matrix beats the sweep
BLOCK = 32768               # rays per sweep block: a few float arrays of this fit in L2
CELLS_PER_EDGE = 0.25       # grid resolution: a few edges per cell suit array-at-a-time tests
BIG_EDGE_FACTOR = 24        # an edge this many times the median edge size is swept, not gridded
MAX_BIG_EDGES = 32

_CACHE_ATTR = "_accel_cache"


def hit_function(cs: CompiledScene, method: str = "auto"):
    """The nearest-hit function for a compiled scene: "auto", "plain", "sweep" or "grid".

    "auto" uses the grid for scenes of more than GRID_MIN_EDGES edges; otherwise, per call,
    one small ray x edge matrix when the generation is small (fewest numpy calls: what the
    GUI's small fans need) and the sweep when it is large.  All give identical results.
    With the compiled kernel selected (`kernel.selected()`), the compiled searches of
    `kernel_hits` are returned instead: the same results again."""
    from . import kernel
    if kernel.compiled():
        from .kernel_hits import compiled_hit_function
        return compiled_hit_function(cs, method)
    if method == "plain":
        return nearest_hit
    if method == "auto":
        if cs.n_edges > GRID_MIN_EDGES:
            method = "grid"
        else:
            table = edge_table(cs)
            ne = max(cs.n_edges, 1)

            def auto(_cs, x, y, dx, dy, start):
                if len(x) * ne <= SMALL_MATRIX:
                    return table.matrix(x, y, dx, dy, start)
                return table.sweep(x, y, dx, dy, start)
            return auto
    if method == "sweep":
        table = edge_table(cs)
        return lambda _cs, x, y, dx, dy, start: table.sweep(x, y, dx, dy, start)
    if method == "grid":
        grid = edge_grid(cs)
        return lambda _cs, x, y, dx, dy, start: grid.nearest(x, y, dx, dy, start)
    raise ValueError(f"acceleration: expected one of auto, plain, sweep, grid, found {method!r}")


def _cached(cs: CompiledScene, key: str, build):
    cache = cs.__dict__.setdefault(_CACHE_ATTR, {})
    if key not in cache:
        cache[key] = build()
    return cache[key]


def edge_table(cs: CompiledScene) -> "EdgeTable":
    """Per-edge constants, computed once per compiled scene and kept with it."""
    return _cached(cs, "table", lambda: EdgeTable(cs))


def edge_grid(cs: CompiledScene) -> "EdgeGrid":
    return _cached(cs, "grid", lambda: EdgeGrid(cs))


class EdgeTable:
    """Edge constants as plain arrays and Python floats, for the sweep and the tracer."""

    def __init__(self, cs: CompiledScene, edge_ids: np.ndarray | None = None):
        self.cs = cs
        self.eps = cs.eps
        ids = np.arange(cs.n_edges) if edge_ids is None else np.asarray(edge_ids, dtype=np.int64)
        self.lines = ids[~cs.is_arc[ids]]
        self.arcs = ids[cs.is_arc[ids]]
        ex = cs.x1 - cs.x0
        ey = cs.y1 - cs.y0
        reach = line_reach(cs, self.lines)
        self.line_rows = [(int(i), float(cs.x0[i]), float(cs.y0[i]), float(ex[i]), float(ey[i]), float(reach[j]))
                          for j, i in enumerate(self.lines)]
        k = arc_constants(cs, self.arcs)
        self.arc_rows = [(int(i),) + tuple(float(k[f][j]) for f in ("cx", "cy", "r2", "sx", "sy", "qx", "qy"))
                         + (bool(k["major"][j]), float(k["tol"][j])) for j, i in enumerate(self.arcs)]
        # the same constants as (edges, 1) columns for the one-matrix search of small batches
        self.col_lines = self.lines[:, None]
        self.col_line = tuple(np.array([r[j] for r in self.line_rows], dtype=float)[:, None] for j in (1, 2, 3, 4, 5))
        self.col_arc = {f: v[:, None] for f, v in k.items()}
        # unit normals of straight edges (right of travel), for the interface physics
        L = np.hypot(ex, ey)
        with np.errstate(divide="ignore", invalid="ignore"):
            self.nx = np.where(cs.is_arc, 0.0, ey / L)
            self.ny = np.where(cs.is_arc, 0.0, -ex / L)

    def matrix(self, x, y, dx, dy, start_edge):
        """All rays against all edges in one (edges x rays) matrix: `intersect.nearest_hit` with
        cached constants, laid out so numpy's inner loops run along the rays (long, contiguous)
        rather than along the few edges."""
        n = len(x)
        t_best = np.full(n, np.inf)
        e_best = np.full(n, -1, dtype=np.int64)
        if n == 0:
            return t_best, e_best
        X, Y, DX, DY = x[None, :], y[None, :], dx[None, :], dy[None, :]
        cols = np.arange(n)
        if len(self.lines):
            ax, ay, ex, ey, reach = self.col_line
            t = line_t(X, Y, DX, DY, ax, ay, ex, ey, reach, self.eps)
            t[self.col_lines == start_edge[None, :]] = np.inf
            k = np.argmin(t, axis=0)
            t_best = t[k, cols]
            e_best = np.where(t_best < np.inf, self.lines[k], -1)
        if len(self.arcs):
            a = self.col_arc
            ta = arc_t(X, Y, DX, DY, a["cx"], a["cy"], a["r2"], a["sx"], a["sy"], a["qx"], a["qy"], a["major"],
                       a["tol"], self.eps)
            k = np.argmin(ta, axis=0)
            tk = ta[k, cols]
            better = tk < t_best
            t_best = np.where(better, tk, t_best)
            e_best = np.where(better, self.arcs[k], e_best)
        return t_best, e_best

    def sweep(self, x, y, dx, dy, start_edge):
        n = len(x)
        t_best = np.full(n, np.inf)
        e_best = np.full(n, -1, dtype=np.int64)
        for lo in range(0, n, BLOCK):
            hi = min(n, lo + BLOCK)
            self._sweep_block(x[lo:hi], y[lo:hi], dx[lo:hi], dy[lo:hi], start_edge[lo:hi],
                              t_best[lo:hi], e_best[lo:hi])
        return t_best, e_best

    def _sweep_block(self, x, y, dx, dy, start, t_best, e_best):
        """Edge by edge, keep the nearest; same formulas and tie order as the plain search.

        The start-edge exclusion is left out of the inner loop: it can only matter where the
        start edge itself came out nearest (a grazing departure), and those few rays are
        searched again with it."""
        self._lines_block(x, y, dx, dy, None, t_best, e_best)
        self._arcs_block(x, y, dx, dy, t_best, e_best)
        if len(self.line_rows):
            again = np.flatnonzero((e_best == start) & (start >= 0))
            if len(again):
                tb = np.full(len(again), np.inf)
                eb = np.full(len(again), -1, dtype=np.int64)
                xs, ys, dxs, dys = x[again], y[again], dx[again], dy[again]
                self._lines_block(xs, ys, dxs, dys, start[again], tb, eb)
                self._arcs_block(xs, ys, dxs, dys, tb, eb)
                t_best[again] = tb
                e_best[again] = eb

    def _lines_block(self, x, y, dx, dy, start, t_best, e_best):
        eps = self.eps
        m = len(x)
        denom, wx, wy, inv, t, u, tmp = (np.empty(m) for _ in range(7))
        ok = np.empty(m, dtype=bool)
        ok2 = np.empty(m, dtype=bool)
        with np.errstate(divide="ignore", invalid="ignore"):
            for i, ax, ay, ex, ey, reach in self.line_rows:
                # denom = dx*ey - dy*ex; t = (wx*ey - wy*ex)/denom; u = (wx*dy - wy*dx)/denom
                np.multiply(dx, ey, out=denom)
                np.multiply(dy, ex, out=tmp)
                np.subtract(denom, tmp, out=denom)
                np.subtract(ax, x, out=wx)
                np.subtract(ay, y, out=wy)
                np.divide(1.0, denom, out=inv)
                np.multiply(wx, ey, out=t)
                np.multiply(wy, ex, out=tmp)
                np.subtract(t, tmp, out=t)
                np.multiply(t, inv, out=t)
                np.multiply(wx, dy, out=u)
                np.multiply(wy, dx, out=tmp)
                np.subtract(u, tmp, out=u)
                np.multiply(u, inv, out=u)
                np.greater_equal(u, -reach, out=ok)
                np.less_equal(u, 1.0 + reach, out=ok2)
                ok &= ok2
                np.greater(t, eps, out=ok2)
                ok &= ok2
                np.less(t, t_best, out=ok2)
                ok &= ok2
                if start is not None:
                    np.not_equal(start, i, out=ok2)
                    ok &= ok2
                np.copyto(t_best, t, where=ok)
                np.copyto(e_best, i, where=ok)

    def _arcs_block(self, x, y, dx, dy, t_best, e_best):
        if not self.arc_rows:
            return
        eps = self.eps
        m = len(x)
        fx, fy, b, c, sq, t, hx, hy, tmp = (np.empty(m) for _ in range(9))
        ok, c1, c2 = (np.empty(m, dtype=bool) for _ in range(3))
        with np.errstate(invalid="ignore"):
            for i, cx, cy, r2, sx, sy, qx, qy, major, tol in self.arc_rows:
                # the steps of intersect.arc_t, in place; sqrt of a negative disc gives nan,
                # which fails every test below just as arc_t's `has` mask does
                np.subtract(x, cx, out=fx)
                np.subtract(y, cy, out=fy)
                np.multiply(fx, dx, out=b)
                np.multiply(fy, dy, out=tmp)
                np.add(b, tmp, out=b)
                np.multiply(fx, fx, out=c)
                np.multiply(fy, fy, out=tmp)
                np.add(c, tmp, out=c)
                np.subtract(c, r2, out=c)
                np.multiply(b, b, out=sq)
                np.subtract(sq, c, out=sq)
                np.sqrt(sq, out=sq)
                np.negative(b, out=b)
                for sign in (-1, 1):
                    (np.subtract if sign < 0 else np.add)(b, sq, out=t)
                    np.multiply(t, dx, out=hx)
                    np.add(fx, hx, out=hx)
                    np.multiply(t, dy, out=hy)
                    np.add(fy, hy, out=hy)
                    # c1 = sx*hy - sy*hx >= -tol ; c2 = hx*qy - hy*qx >= -tol
                    np.multiply(hy, sx, out=tmp)
                    np.multiply(hx, sy, out=c)
                    np.subtract(tmp, c, out=tmp)
                    np.greater_equal(tmp, -tol, out=c1)
                    np.multiply(hx, qy, out=tmp)
                    np.multiply(hy, qx, out=c)
                    np.subtract(tmp, c, out=tmp)
                    np.greater_equal(tmp, -tol, out=c2)
                    if major:
                        np.logical_or(c1, c2, out=ok)
                    else:
                        np.logical_and(c1, c2, out=ok)
                    np.greater(t, eps, out=c1)
                    ok &= c1
                    np.less(t, t_best, out=c1)
                    ok &= c1
                    np.copyto(t_best, t, where=ok)
                    np.copyto(e_best, i, where=ok)


class EdgeGrid:
    """Uniform grid of cells listing the edges that touch them, plus the swept big edges."""

    def __init__(self, cs: CompiledScene):
        self.cs = cs
        n = cs.n_edges
        lo_x, lo_y, hi_x, hi_y = edge_boxes(cs)
        span = max(float(hi_x.max() - lo_x.min()), float(hi_y.max() - lo_y.min()), cs.scale * 1e-6)
        # edges much longer than the typical edge (detectors, the flat side of a film) are swept
        # for every ray instead of being listed in the many cells they cross; at most 32 of them
        size = np.maximum(hi_x - lo_x, hi_y - lo_y)
        typical = float(np.median(size)) if n else 0.0
        big = size > BIG_EDGE_FACTOR * typical
        if big.sum() > MAX_BIG_EDGES:
            big[:] = False
            big[np.argsort(-size, kind="stable")[:MAX_BIG_EDGES]] = True
        if (~big).sum() < 1:
            big[:] = False
        small = np.flatnonzero(~big)
        cell = _cell_size(lo_x[small], lo_y[small], hi_x[small], hi_y[small], len(small))
        pad = 1e-7 * span + 16 * cs.eps
        self.big = EdgeTable(cs, np.flatnonzero(big))
        self.x0 = float(lo_x[small].min()) - pad
        self.y0 = float(lo_y[small].min()) - pad
        x1 = float(hi_x[small].max()) + pad
        y1 = float(hi_y[small].max()) + pad
        self.nx = max(1, int(math.ceil((x1 - self.x0) / cell)))
        self.ny = max(1, int(math.ceil((y1 - self.y0) / cell)))
        self.h = cell
        self.x1 = self.x0 + self.nx * cell
        self.y1 = self.y0 + self.ny * cell
        self.fatten = pad
        cells, edges = self._rasterize(small)
        self._build_lists(cells, edges)

    # ---- building
    def _rasterize(self, ids: np.ndarray):
        """(cell, edge) pairs for every cell an edge's fattened piece-boxes touch.

        Each edge is cut into pieces no longer than a cell (arcs by angle), and each piece's
        exact bounding box, fattened, marks the cells it overlaps: conservative, never missing."""
        cs = self.cs
        h = self.h
        out_c, out_e = [], []
        for arc in (False, True):
            sel = ids[cs.is_arc[ids] == arc]
            if len(sel) == 0:
                continue
            if not arc:
                L = np.hypot(cs.x1[sel] - cs.x0[sel], cs.y1[sel] - cs.y0[sel])
            else:
                L = cs.radius[sel] * np.abs(cs.sweep[sel])
            k = np.maximum(1, np.ceil(L / (0.5 * h)).astype(np.int64))
            if arc:
                k = np.maximum(k, np.ceil(np.abs(cs.sweep[sel]) / (np.pi / 8)).astype(np.int64))
            eid = np.repeat(sel, k)
            start = np.repeat(np.cumsum(k) - k, k)
            j = np.arange(len(eid)) - start
            kk = np.repeat(k, k)
            f0, f1 = j / kk, (j + 1) / kk
            if not arc:
                ex, ey = cs.x1[eid] - cs.x0[eid], cs.y1[eid] - cs.y0[eid]
                ax, bx = cs.x0[eid] + f0 * ex, cs.x0[eid] + f1 * ex
                ay, by = cs.y0[eid] + f0 * ey, cs.y0[eid] + f1 * ey
                bx0, bx1 = np.minimum(ax, bx), np.maximum(ax, bx)
                by0, by1 = np.minimum(ay, by), np.maximum(ay, by)
            else:
                bx0, by0, bx1, by1 = _arc_piece_boxes(cs, eid, f0, f1)
            p = self.fatten
            ix0 = np.clip(np.floor((bx0 - p - self.x0) / h).astype(np.int64), 0, self.nx - 1)
            ix1 = np.clip(np.floor((bx1 + p - self.x0) / h).astype(np.int64), 0, self.nx - 1)
            iy0 = np.clip(np.floor((by0 - p - self.y0) / h).astype(np.int64), 0, self.ny - 1)
            iy1 = np.clip(np.floor((by1 + p - self.y0) / h).astype(np.int64), 0, self.ny - 1)
            # every piece box covers at most a few cells in each direction: enumerate them
            wx = ix1 - ix0 + 1
            wy = iy1 - iy0 + 1
            for ox in range(int(wx.max())):
                for oy in range(int(wy.max())):
                    m = (ox < wx) & (oy < wy)
                    out_c.append((iy0[m] + oy) * self.nx + ix0[m] + ox)
                    out_e.append(eid[m])
        if not out_c:
            return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
        return np.concatenate(out_c), np.concatenate(out_e)

    def _build_lists(self, cells, edges):
        """Padded per-cell lists: lines then arcs, each in ascending edge index (the tie order)."""
        cs = self.cs
        n_cells = self.nx * self.ny
        pairs = np.unique(cells * (cs.n_edges + 1) + edges)
        cells, edges = pairs // (cs.n_edges + 1), pairs % (cs.n_edges + 1)
        self.n_pairs = len(pairs)
        for arc in (False, True):
            m = cs.is_arc[edges] == arc
            c, e = cells[m], edges[m]
            count = np.bincount(c, minlength=n_cells)
            width = int(count.max()) if len(c) else 0
            table = np.full((n_cells, max(width, 1)), -1, dtype=np.int64)
            if len(c):
                first = np.cumsum(count) - count
                slot = np.arange(len(c)) - first[c]
                table[c, slot] = e
            if arc:
                self.arc_cells, self.arc_count, self.arc_width = table, count, width
            else:
                self.line_cells, self.line_count, self.line_width = table, count, width
        self.occupied = (self.line_count + self.arc_count) > 0
        # per-edge constant rows for gathering; index n_edges is a dummy that never hits
        ne = cs.n_edges
        self.ax = np.append(cs.x0, 0.0)
        self.ay = np.append(cs.y0, 0.0)
        self.ex = np.append(cs.x1 - cs.x0, 0.0)
        self.ey = np.append(cs.y1 - cs.y0, 0.0)
        self.reach = np.append(line_reach(cs, np.arange(ne)), 0.0)
        k = arc_constants(cs, np.arange(ne))
        self.arc_k = {f: np.append(v, False if f == "major" else 0.0) for f, v in k.items()}
        self.arc_k["r2"][ne] = -1.0       # the dummy circle has no real points
        self.line_cells[self.line_cells < 0] = ne
        self.arc_cells[self.arc_cells < 0] = ne
        self.is_arc = np.append(cs.is_arc, False)
        # tie order of the plain search: lines by index, then arcs by index; "no hit" (-1) last
        self.rank = np.append(np.arange(ne) + ne * cs.is_arc, 2 * ne + 1)

    # ---- searching
    def nearest(self, x, y, dx, dy, start_edge):
        t_best, e_best = self.big.sweep(x, y, dx, dy, start_edge)
        n = len(x)
        step = 8 * BLOCK
        for lo in range(0, n, step):
            hi = min(n, lo + step)
            self._walk(x[lo:hi], y[lo:hi], dx[lo:hi], dy[lo:hi], start_edge[lo:hi],
                       t_best[lo:hi], e_best[lo:hi])
        return t_best, e_best

    def _walk(self, x, y, dx, dy, start, t_best, e_best):
        """March every ray through the grid cell by cell (2D DDA), testing the cells' edges.

        The per-ray state lives in two matrices (floats, integers) so that dropping the rays
        that are done is two array operations per step, whatever the number of fields."""
        h = self.h
        with np.errstate(divide="ignore", invalid="ignore"):
            idx_ = 1.0 / dx
            idy_ = 1.0 / dy
            tx0 = (self.x0 - x) * idx_
            tx1 = (self.x1 - x) * idx_
            ty0 = (self.y0 - y) * idy_
            ty1 = (self.y1 - y) * idy_
        inside_x = (x >= self.x0) & (x <= self.x1)
        inside_y = (y >= self.y0) & (y <= self.y1)
        zx, zy = dx == 0, dy == 0
        # a ray parallel to an axis is inside that slab for all t, or for none
        tx0 = np.where(zx, np.where(inside_x, -np.inf, np.inf), tx0)
        tx1 = np.where(zx, np.where(inside_x, np.inf, -np.inf), tx1)
        ty0 = np.where(zy, np.where(inside_y, -np.inf, np.inf), ty0)
        ty1 = np.where(zy, np.where(inside_y, np.inf, -np.inf), ty1)
        t_in = np.maximum(np.maximum(np.minimum(tx0, tx1), np.minimum(ty0, ty1)), 0.0)
        t_out = np.minimum(np.maximum(tx0, tx1), np.maximum(ty0, ty1))
        act = np.flatnonzero((t_in <= t_out) & (t_in < t_best))
        if len(act) == 0:
            return
        xa, ya, dxa, dya = x[act], y[act], dx[act], dy[act]
        ti = t_in[act]
        ix = np.clip(np.floor((xa + ti * dxa - self.x0) / h), 0, self.nx - 1)
        iy = np.clip(np.floor((ya + ti * dya - self.y0) / h), 0, self.ny - 1)
        sx = np.where(dxa > 0, 1.0, -1.0)
        sy = np.where(dya > 0, 1.0, -1.0)
        with np.errstate(divide="ignore", invalid="ignore"):
            # t at which the ray crosses the next vertical / horizontal cell line
            tmx = np.where(zx[act], np.inf, (self.x0 + (ix + (sx > 0)) * h - xa) * idx_[act])
            tmy = np.where(zy[act], np.inf, (self.y0 + (iy + (sy > 0)) * h - ya) * idy_[act])
            tdx = np.where(zx[act], np.inf, np.abs(idx_[act]) * h)
            tdy = np.where(zy[act], np.inf, np.abs(idy_[act]) * h)
        eb = e_best[act]
        F = np.stack([xa, ya, dxa, dya, tmx, tmy, tdx, tdy, t_best[act], t_out[act], ix, iy, sx, sy])
        G = np.stack([act, eb, self.rank[eb], start[act]])
        X, Y, DX, DY, TMX, TMY, TDX, TDY, TB, TOUT, IX, IY, SX, SY = range(14)
        ACT, EB, RB, ST = range(4)
        nx, ny = self.nx, self.ny
        while F.shape[1]:
            cell = (F[IY] * nx + F[IX]).astype(np.int64)
            occ = np.flatnonzero(self.occupied[cell])
            if len(occ):
                self._test(F, G, occ, cell[occ])
            t_far = np.minimum(F[TMX], F[TMY])
            # done: the best hit lies before the far side of this cell, or the ray leaves the grid
            done = (F[TB] <= t_far) | (t_far >= F[TOUT])
            step_x = F[TMX] < F[TMY]
            sxm = np.where(step_x, F[SX], 0.0)
            sym = np.where(step_x, 0.0, F[SY])
            F[IX] += sxm
            F[IY] += sym
            F[TMX] += np.where(step_x, F[TDX], 0.0)
            F[TMY] += np.where(step_x, 0.0, F[TDY])
            done |= (F[IX] < 0) | (F[IX] >= nx) | (F[IY] < 0) | (F[IY] >= ny)
            fin = np.flatnonzero(done)
            if len(fin):
                a = G[ACT, fin]
                tb, rb = F[TB, fin], G[RB, fin]
                better = (tb < t_best[a]) | ((tb == t_best[a]) & (rb < self.rank[e_best[a]]))
                t_best[a[better]] = tb[better]
                e_best[a[better]] = G[EB, fin[better]]
                keep = np.flatnonzero(~done)
                F = F[:, keep]
                G = G[:, keep]

    def _test(self, F, G, j, c):
        """Test rays j against the edges of their current cells c; update their running best."""
        eps = self.cs.eps
        X, Y, DX, DY = F[0, j][:, None], F[1, j][:, None], F[2, j][:, None], F[3, j][:, None]
        cand_t, cand_e = [], []
        if self.line_width:
            E = self.line_cells[c, : self.line_width]
            t = line_t(X, Y, DX, DY, self.ax[E], self.ay[E], self.ex[E], self.ey[E], self.reach[E], eps)
            t[E == G[3, j][:, None]] = np.inf
            cand_t.append(t)
            cand_e.append(E)
        if self.arc_width:
            has = np.flatnonzero(self.arc_count[c] > 0)
            if len(has):
                E = np.full((len(j), self.arc_width), self.cs.n_edges, dtype=np.int64)
                Es = self.arc_cells[c[has], : self.arc_width]
                E[has] = Es
                k = self.arc_k
                ta = np.full(E.shape, np.inf)
                ta[has] = arc_t(X[has], Y[has], DX[has], DY[has], k["cx"][Es], k["cy"][Es], k["r2"][Es],
                                k["sx"][Es], k["sy"][Es], k["qx"][Es], k["qy"][Es], k["major"][Es],
                                k["tol"][Es], eps)
                cand_t.append(ta)
                cand_e.append(E)
        if not cand_t:
            return
        t = np.concatenate(cand_t, axis=1) if len(cand_t) > 1 else cand_t[0]
        E = np.concatenate(cand_e, axis=1) if len(cand_e) > 1 else cand_e[0]
        k = np.argmin(t, axis=1)
        rows = np.arange(len(j))
        tk = t[rows, k]
        ek = np.where(tk < np.inf, E[rows, k], -1)
        rk = self.rank[ek]
        tb = F[8, j]
        better = (tk < tb) | ((tk == tb) & (rk < G[2, j]))
        jb = j[better]
        F[8, jb] = tk[better]
        G[1, jb] = ek[better]
        G[2, jb] = rk[better]


def _cell_size(lo_x, lo_y, hi_x, hi_y, n):
    w = max(float(hi_x.max() - lo_x.min()), 1e-12)
    hgt = max(float(hi_y.max() - lo_y.min()), 1e-12)
    cells = max(CELLS_PER_EDGE * n, 1.0)
    h = math.sqrt(w * hgt / cells)
    # a very flat box (a film): do not let cells get longer than the box is wide in the other way
    # never more cells along the long side than cells in all (a box flat as a line)
    h = max(h, max(w, hgt) / cells)
    return min(h, max(w, hgt))


def edge_boxes(cs: CompiledScene):
    """Exact bounding box of every edge (arcs by their extreme points)."""
    lo_x = np.minimum(cs.x0, cs.x1)
    hi_x = np.maximum(cs.x0, cs.x1)
    lo_y = np.minimum(cs.y0, cs.y1)
    hi_y = np.maximum(cs.y0, cs.y1)
    arcs = np.flatnonzero(cs.is_arc)
    if len(arcs):
        b = _arc_piece_boxes(cs, arcs, np.zeros(len(arcs)), np.ones(len(arcs)))
        lo_x[arcs], lo_y[arcs], hi_x[arcs], hi_y[arcs] = b
    return lo_x, lo_y, hi_x, hi_y


def _arc_piece_boxes(cs, eid, f0, f1):
    """Bounding boxes of the arc pieces from fraction f0 to f1 of each arc's sweep."""
    a0 = cs.a0[eid]
    sw = cs.sweep[eid]
    r = cs.radius[eid]
    cx, cy = cs.cx[eid], cs.cy[eid]
    b0 = a0 + f0 * sw
    b1 = a0 + f1 * sw
    lo = np.minimum(b0, b1)
    hi = np.maximum(b0, b1)
    xs = [np.cos(lo), np.cos(hi)]
    ys = [np.sin(lo), np.sin(hi)]
    xmin, xmax = np.minimum(*xs), np.maximum(*xs)
    ymin, ymax = np.minimum(*ys), np.maximum(*ys)
    # axis directions crossed inside [lo, hi] reach +-1
    for k in range(-8, 9):
        a = k * np.pi / 2
        inside = (lo <= a) & (a <= hi)
        c, s = round(math.cos(a)), round(math.sin(a))
        if c:
            xmin = np.where(inside, np.minimum(xmin, c), xmin)
            xmax = np.where(inside, np.maximum(xmax, c), xmax)
        if s:
            ymin = np.where(inside, np.minimum(ymin, s), ymin)
            ymax = np.where(inside, np.maximum(ymax, s), ymax)
    # cos/sin of the end angles are within a few ulp: widen by a relative 1e-12 of the radius
    slack = 1e-12 * r
    return cx + r * xmin - slack, cy + r * ymin - slack, cx + r * xmax + slack, cy + r * ymax + slack
