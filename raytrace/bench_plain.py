"""The bench's "plain compiled" bar: a straightforward compiled tracer, one ray at a time.

Each source ray is traced depth first with a small stack of children: every segment tests every
edge (no acceleration, no vectorization), then the face acts with the same physics as the
tracer (bulk absorption, detectors, absorbing faces, mirrors, Snell / TIR / Fresnel s/p through
`kernel_step.dielectric`).  No ray table, detector records, paths or vertex rules: it is what a
competent first compiled loop would do, and the bench reports the tracer's speed as a ratio to
it, measured in the same process on the same starting rays.
"""
from __future__ import annotations

import numpy as np

from .kernel import jit
from .kernel_hits import brute_one
from .kernel_step import (T_ABSORBER, T_AR, T_BARE, T_DETECT_ABSORB, T_DETECT_MONITOR, T_MIRROR,
                          dielectric, edge_normal_at, mirror_direction)


@jit
def plain_trace(x0, y0, dx0, dy0, fs0, fp0, med0, wli0, lid, lf, aid, af, amaj, S, n_flat, alpha, W, eps,
                thr_rel, max_gen, monte_carlo, seed):
    """Returns (segments traced, flux out by fate: escaped, absorbed, detected, truncated)."""
    treat_t, enx, eny, is_arc, ecx, ecy, med_plus, med_minus, refl_t = S
    np.random.seed(seed)
    cap = 2 * max_gen + 8
    sx = np.empty(cap)
    sy = np.empty(cap)
    sdx = np.empty(cap)
    sdy = np.empty(cap)
    sfs = np.empty(cap)
    sfp = np.empty(cap)
    smed = np.empty(cap, dtype=np.int64)
    sstart = np.empty(cap, dtype=np.int64)
    sgen = np.empty(cap, dtype=np.int64)
    events = 0
    out = np.zeros(4)
    for r in range(len(x0)):
        thr = thr_rel * (fs0[r] + fp0[r])
        wl = wli0[r]
        sp = 0
        sx[0], sy[0], sdx[0], sdy[0], sfs[0], sfp[0] = x0[r], y0[r], dx0[r], dy0[r], fs0[r], fp0[r]
        smed[0], sstart[0], sgen[0] = med0[r], -1, 0
        sp = 1
        while sp > 0:
            sp -= 1
            x, y, dx, dy, fs, fp = sx[sp], sy[sp], sdx[sp], sdy[sp], sfs[sp], sfp[sp]
            med, start, gen = smed[sp], sstart[sp], sgen[sp]
            if gen > max_gen:
                out[3] += fs + fp
                continue
            events += 1
            t, e = brute_one(x, y, dx, dy, start, lid, lf, aid, af, amaj, eps)
            a = alpha[med]
            if e < 0:
                out[0 if a == 0 else 1] += fs + fp
                continue
            keep = np.exp(-a * t)
            out[1] += (fs + fp) * (1.0 - keep)
            fs *= keep
            fp *= keep
            hx = x + t * dx
            hy = y + t * dy
            tt = treat_t[e]
            if tt == T_DETECT_ABSORB:
                out[2] += fs + fp
                continue
            if tt == T_ABSORBER:
                out[1] += fs + fp
                continue
            # up to two children, each (x, y, dx, dy, fs, fp, medium)
            k1 = (hx, hy, dx, dy, fs, fp, med)
            k2 = k1
            n_kids = 0
            if tt == T_DETECT_MONITOR:
                k1 = (hx - 2 * eps * dx, hy - 2 * eps * dy, dx, dy, fs, fp, med)
                n_kids = 1
            nx, ny = edge_normal_at(e, hx, hy, enx, eny, is_arc, ecx, ecy)
            if tt == T_MIRROR:
                rx, ry = mirror_direction(dx, dy, nx, ny)
                R = refl_t[e]
                out[1] += (fs + fp) * (1 - R)
                k1 = (hx, hy, rx, ry, fs * R, fp * R, med)
                n_kids = 1
            if tt == T_BARE or tt == T_AR:
                m_from, m_to, ci, tir, Rs, Rp, rx, ry, tx, ty = dielectric(
                    dx, dy, nx, ny, med_plus[e], med_minus[e], med, wl, W, n_flat, tt == T_AR)
                if monte_carlo:
                    f = fs + fp
                    R = (fs * Rs + fp * Rp) / f if f > 0 else 0.0
                    if np.random.random() < R:
                        k1 = (hx, hy, rx, ry, fs * Rs / R, fp * Rp / R, m_from)
                    else:
                        k1 = (hx, hy, tx, ty, fs * (1 - Rs) / (1 - R), fp * (1 - Rp) / (1 - R), m_to)
                    n_kids = 1
                else:
                    k1 = (hx, hy, rx, ry, fs * Rs, fp * Rp, m_from)
                    k2 = (hx, hy, tx, ty, fs * (1 - Rs), fp * (1 - Rp), m_to)
                    n_kids = 1 if tir else 2
            for j in range(n_kids):
                k = k1 if j == 0 else k2
                f = k[4] + k[5]
                if f < thr or f <= 0:
                    out[3] += f
                    continue
                sx[sp], sy[sp], sdx[sp], sdy[sp], sfs[sp], sfp[sp] = k[0], k[1], k[2], k[3], k[4], k[5]
                smed[sp], sstart[sp], sgen[sp] = k[6], e, gen + 1
                sp += 1
    return events, out


def run_plain(cs, start, mode, limits, seed):
    """Trace `start` rays with the plain compiled loop, from the same start points, media and
    indices as `tracer.trace_rays`: (segments traced, flux out by fate)."""
    from .kernel_hits import edge_lists
    from .tracer import MONTE_CARLO, _scene_arrays, _start_points, medium_at
    from .accel import hit_function
    K = _scene_arrays(cs)
    edges = edge_lists(cs, np.arange(cs.n_edges))
    f, i = K.edge_float, K.edge_int
    S = (i[0], f[0], f[1], i[2], f[2], f[3], i[3], i[4], f[4])
    wavelengths, wli = np.unique(start.wavelength, return_inverse=True)
    n_flat = np.array([np.broadcast_to(np.asarray(m.index(wavelengths), dtype=float), wavelengths.shape)
                       for m in cs.media]).reshape(-1)
    x0, y0 = _start_points(cs, start, hit_function(cs))
    med0 = medium_at(cs, x0, y0, start.dx, start.dy)
    f64 = lambda a: np.ascontiguousarray(a, dtype=float)
    return plain_trace(f64(x0), f64(y0), f64(start.dx), f64(start.dy), f64(start.flux_s), f64(start.flux_p),
                       np.ascontiguousarray(med0, np.int64), np.ascontiguousarray(wli, np.int64), *edges, S,
                       n_flat, K.alpha, len(wavelengths), float(cs.eps), float(limits.flux_floor),
                       int(limits.max_generations), mode == MONTE_CARLO, int(seed if np.isscalar(seed) else seed[0]))
