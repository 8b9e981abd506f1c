"""Nearest hit of many rays against all edges, one vectorized step.

This is the plain method: every ray against every edge, in blocks that bound the size of the
ray x edge matrices.  It is the reference the accelerated methods in `accel` are checked
against, so both use the same pair formulas below (`line_t`, `arc_t`): they use only +, -, *,
/ and sqrt, which IEEE rounds exactly, so a pair gives the same bits whatever the array shape.
(Transcendental functions such as arctan2 may take SIMD or scalar paths by memory layout and
differ in the last bit; they are kept out of the hit test for that reason.)
"""
from __future__ import annotations

import numpy as np

from .compile import CompiledScene

# Rays per block: keeps each rays x edges matrix near 2 million entries.
BLOCK_ENTRIES = 2_000_000
# Angular slack (radians) that lets an arc's own end points count as on the arc.
ARC_SLACK = 1e-12


def line_reach(cs: CompiledScene, lines) -> np.ndarray:
    """How far past its ends a straight edge counts as hit, as a fraction of its length: eps.

    Where two edges meet, a ray exactly through the shared vertex finds it at u = 1 on one edge
    and u = 0 on the other only up to rounding, and could slip between them (a leak through a
    sealed corner).  Reaching eps past both ends closes that gap; the corner rules in the
    tracer then decide which edge acts.  sqrt, not hypot: exactly rounded, the same bits in
    every method."""
    ex = cs.x1[lines] - cs.x0[lines]
    ey = cs.y1[lines] - cs.y0[lines]
    return cs.eps / np.sqrt(ex * ex + ey * ey)


def line_t(x, y, dx, dy, ax, ay, ex, ey, reach, eps):
    """Distance along each ray to the segment a -> a + e, reaching `reach` (a fraction of its
    length, `line_reach`) past both ends; inf where it misses (or t <= eps).

    A parallel pair has denom 0, so u is inf or nan and fails the range test."""
    denom = dx * ey - dy * ex
    wx = ax - x
    wy = ay - y
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):   # a near-parallel pair
        inv = 1.0 / denom
        t = (wx * ey - wy * ex) * inv
        u = (wx * dy - wy * dx) * inv
    ok = (u >= -reach) & (u <= 1.0 + reach) & (t > eps)
    return np.where(ok, t, np.inf)


def arc_t(x, y, dx, dy, cx, cy, r2, sx, sy, qx, qy, major, tol, eps):
    """Distance along each ray to an arc, inf where it misses.

    Both roots of |p + t d - c|^2 = r^2 are tried; a root counts if it lies on the arc's span.
    (sx, sy) and (qx, qy) are the span's ends relative to the centre in counter-clockwise order;
    a point h is on a span of at most pi if it is left of s and right of q, on a longer span if
    it is not strictly inside the complementary short span.  `tol` = ARC_SLACK * r^2."""
    fx = x - cx
    fy = y - cy
    b = fx * dx + fy * dy
    c = fx * fx + fy * fy - r2
    disc = b * b - c
    has = disc >= 0.0
    with np.errstate(invalid="ignore"):
        sq = np.sqrt(disc)
    nb = -b
    best = None
    for t in (nb - sq, nb + sq):
        hx = fx + t * dx
        hy = fy + t * dy
        c1 = sy * hx
        c1 = sx * hy - c1 >= -tol
        c2 = hy * qx
        c2 = hx * qy - c2 >= -tol
        on = np.where(major, c1 | c2, c1 & c2)
        tt = np.where(has & on & (t > eps), t, np.inf)
        best = tt if best is None else np.minimum(best, tt)
    return best


def arc_constants(cs: CompiledScene, arcs: np.ndarray) -> dict[str, np.ndarray]:
    """Per-arc values the hit test needs, computed once per compiled scene."""
    ccw = cs.sweep[arcs] > 0
    sx0, sy0 = cs.x0[arcs] - cs.cx[arcs], cs.y0[arcs] - cs.cy[arcs]
    sx1, sy1 = cs.x1[arcs] - cs.cx[arcs], cs.y1[arcs] - cs.cy[arcs]
    r = cs.radius[arcs]
    return {
        "cx": cs.cx[arcs], "cy": cs.cy[arcs], "r2": r * r,
        "sx": np.where(ccw, sx0, sx1), "sy": np.where(ccw, sy0, sy1),
        "qx": np.where(ccw, sx1, sx0), "qy": np.where(ccw, sy1, sy0),
        "major": np.abs(cs.sweep[arcs]) > np.pi, "tol": ARC_SLACK * r * r,
    }


def nearest_hit(cs: CompiledScene, x, y, dx, dy, last_edge, edge_ids=None):
    """Distance to and index of the first edge each ray meets; (inf, -1) where none.

    `last_edge` is the edge each ray starts on (-1 if none).  A ray never re-hits the point it
    left: hits closer than cs.eps are ignored, and a straight edge cannot be hit again by a ray
    leaving it.  An arc can (a concave wall seen from inside), so only the distance test applies.
    Equal distances go to the line of lowest index, then the arc of lowest index.
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
    last_edge = np.asarray(last_edge)
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
    reach = line_reach(cs, lines)[None, :]
    t = line_t(x[:, None], y[:, None], dx[:, None], dy[:, None], ax, ay, ex, ey, reach, eps)
    t[lines[None, :] == last_edge[:, None]] = np.inf
    k = np.argmin(t, axis=1)
    return t[np.arange(len(x)), k], k


def arc_hits(cs, arcs, x, y, dx, dy, eps):
    """Nearest arc hit per ray: (t, index into `arcs`)."""
    k_ = arc_constants(cs, arcs)
    row = {k: v[None, :] for k, v in k_.items()}
    best = arc_t(x[:, None], y[:, None], dx[:, None], dy[:, None], row["cx"], row["cy"], row["r2"],
                 row["sx"], row["sy"], row["qx"], row["qy"], row["major"], row["tol"], eps)
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
        ax, ay = hx - cs.cx[edge], hy - cs.cy[edge]
        r = np.sqrt(ax * ax + ay * ay)        # the vector's own length: unit even off the circle
        anx = ax / r
        any_ = ay / r
    nx = np.where(arc, anx, lnx)
    ny = np.where(arc, any_, lny)
    return nx, ny
