"""Nearest hit of many rays against all edges, one vectorized step.

This is the plain method: every ray against every edge, in blocks that bound the size of the
ray x edge matrices.  `accel` builds on it for scenes with many edges.
"""
from __future__ import annotations

import numpy as np

from .compile import CompiledScene

# Rays per block: keeps each rays x edges matrix near 2 million entries.
BLOCK_ENTRIES = 2_000_000
TWO_PI = 2 * np.pi


def nearest_hit(cs: CompiledScene, x, y, dx, dy, last_edge, edge_ids=None):
    """Distance to and index of the first edge each ray meets; (inf, -1) where none.

    `last_edge` is the edge each ray starts on (-1 if none).  A ray never re-hits the point it
    left: hits closer than cs.eps are ignored, and a straight edge cannot be hit again by a ray
    leaving it.  An arc can (a concave wall seen from inside), so only the distance test applies.
    """
    n = len(x)
    t_best = np.full(n, np.inf)
    e_best = np.full(n, -1, dtype=np.int64)
    if n == 0 or cs.n_edges == 0:
        return t_best, e_best
    if edge_ids is None:
        lines, arcs = cs.line_ids, cs.arc_ids
    else:
        edge_ids = np.asarray(edge_ids)
        lines = edge_ids[~cs.is_arc[edge_ids]]
        arcs = edge_ids[cs.is_arc[edge_ids]]
    n_e = max(len(lines) + len(arcs), 1)
    step = max(1, BLOCK_ENTRIES // n_e)
    for lo in range(0, n, step):
        sl = slice(lo, min(n, lo + step))
        t, e = _block(cs, x[sl], y[sl], dx[sl], dy[sl], last_edge[sl], lines, arcs)
        t_best[sl] = t
        e_best[sl] = e
    return t_best, e_best


def _block(cs, x, y, dx, dy, last_edge, lines, arcs):
    n = len(x)
    t_best = np.full(n, np.inf)
    e_best = np.full(n, -1, dtype=np.int64)
    eps = cs.eps
    if len(lines):
        t, k = line_hits(cs, lines, x, y, dx, dy, last_edge, eps)
        better = t < t_best
        t_best[better] = t[better]
        e_best[better] = lines[k[better]]
    if len(arcs):
        t, k = arc_hits(cs, arcs, x, y, dx, dy, eps)
        better = t < t_best
        t_best[better] = t[better]
        e_best[better] = arcs[k[better]]
    return t_best, e_best


def line_hits(cs, lines, x, y, dx, dy, last_edge, eps):
    """Nearest straight-edge hit per ray: (t, index into `lines`)."""
    ax = cs.x0[lines][None, :]
    ay = cs.y0[lines][None, :]
    ex = (cs.x1[lines] - cs.x0[lines])[None, :]
    ey = (cs.y1[lines] - cs.y0[lines])[None, :]
    X, Y, DX, DY = x[:, None], y[:, None], dx[:, None], dy[:, None]
    denom = DX * ey - DY * ex
    wx = ax - X
    wy = ay - Y
    with np.errstate(divide="ignore", invalid="ignore"):
        inv = 1.0 / denom
        t = (wx * ey - wy * ex) * inv
        u = (wx * DY - wy * DX) * inv
    ok = (u >= 0.0) & (u <= 1.0) & (t > eps) & (denom != 0.0)
    ok &= lines[None, :] != last_edge[:, None]
    t = np.where(ok, t, np.inf)
    k = np.argmin(t, axis=1)
    return t[np.arange(len(x)), k], k


def arc_hits(cs, arcs, x, y, dx, dy, eps):
    """Nearest arc hit per ray: both roots of |p + t d - c| = r, kept if on the arc's span."""
    cx = cs.cx[arcs][None, :]
    cy = cs.cy[arcs][None, :]
    r = cs.radius[arcs][None, :]
    a0 = cs.a0[arcs][None, :]
    sw = cs.sweep[arcs][None, :]
    fx = x[:, None] - cx
    fy = y[:, None] - cy
    DX, DY = dx[:, None], dy[:, None]
    b = fx * DX + fy * DY
    c = fx * fx + fy * fy - r * r
    disc = b * b - c
    has = disc >= 0.0
    sq = np.sqrt(np.where(has, disc, 0.0))
    best = np.full(disc.shape, np.inf)
    for t in (-b - sq, -b + sq):
        hx = fx + t * DX
        hy = fy + t * DY
        ang = np.arctan2(hy, hx)
        rel = np.where(sw > 0, (ang - a0) % TWO_PI, (a0 - ang) % TWO_PI)
        # tolerance in angle so an arc's own end points count as on it
        on = rel <= np.abs(sw) + 1e-12
        ok = has & on & (t > eps)
        best = np.minimum(best, np.where(ok, t, np.inf))
    k = np.argmin(best, axis=1)
    return best[np.arange(len(x)), k], k


def edge_normal(cs: CompiledScene, edge, hx, hy):
    """Unit geometric normal at the hit point (points to the `med_plus` side)."""
    arc = cs.is_arc[edge]
    ex = cs.x1[edge] - cs.x0[edge]
    ey = cs.y1[edge] - cs.y0[edge]
    L = np.hypot(ex, ey)
    with np.errstate(divide="ignore", invalid="ignore"):
        lnx, lny = ey / L, -ex / L
        r = cs.radius[edge]
        anx = (hx - cs.cx[edge]) / r
        any_ = (hy - cs.cy[edge]) / r
    nx = np.where(arc, anx, lnx)
    ny = np.where(arc, any_, lny)
    return nx, ny
