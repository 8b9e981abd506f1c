"""Compiled interface step: travel to the hit, bulk absorption, what the face does (detector,
absorber, mirror, bare or anti-reflection dielectric: Snell, TIR, Fresnel s/p), and the next
generation, for all rays of a generation in one call.

It mirrors the array code of `tracer.trace_rays` / `tracer._interfaces` /
`tracer._next_generation` operation for operation, and writes its outputs in the order that
code produces them: ledger deposits (bulk, escapes, detectors, absorbing faces, mirrors, then
the children too faint to go on) and children (passed detectors, mirrors, reflected,
transmitted, each in ray order), and adds the deposits to the ledger bins in that order
(`book_deposits`).  So the ledger sums in the same order, the Monte Carlo draws go to the same
rays, and the next generation is the same arrays.  The children carry only the rows the trace
reads (CHILD_STREAMS).

Vertex and corner hits are not resolved here: the tracer resolves them between the hit search
and this step (`tracer._corner_hits`, the corner rules, shared by both kernels), and
`vertex_candidates` only finds the rays that need them.
"""
from __future__ import annotations

import math

import numpy as np

from .kernel import jit

# codes shared with tracer.py (checked there at import)
T_BARE, T_MIRROR, T_ABSORBER, T_AR, T_DETECT_ABSORB, T_DETECT_MONITOR = range(6)
B_SOURCE, B_REFRACTED, B_REFLECTED, B_TIR, B_MIRROR, B_PASSED = range(6)
E_REFRACTED, E_REFLECTED, E_TIR, E_ABSORBED, E_ESCAPED, E_DETECTED, E_TRUNCATED, E_PASSED = range(8)
EV_THROUGH, EV_REFLECT, EV_TIR, EV_MIRROR, EV_PASS = range(5)
GRAZING_COS = 1e-9

# groups of children, in the order the array code gathers them
G_PASS, G_MIRROR, G_REFLECT, G_TRANSMIT = range(4)


@jit
def vertex_candidates(x, y, dx, dy, t, e, x0, y0, x1, y1, treat, tol2):
    """Rays whose hit lies within sqrt(tol2) of an end of the edge hit (detectors excepted)."""
    out = np.empty(len(x), dtype=np.int64)
    k = 0
    for i in range(len(x)):
        ed = e[i]
        if ed < 0 or treat[ed] >= T_DETECT_ABSORB:
            continue
        vx = x[i] + t[i] * dx[i]
        vy = y[i] + t[i] * dy[i]
        a = (vx - x0[ed]) ** 2 + (vy - y0[ed]) ** 2
        b = (vx - x1[ed]) ** 2 + (vy - y1[ed]) ** 2
        if min(a, b) < tol2:
            out[k] = i
            k += 1
    return out[:k]


@jit
def _unit(vx, vy):
    n = vx * vx
    n += vy * vy
    n = math.sqrt(n)
    if n == 0.0:
        n = 1.0
    return vx / n, vy / n


@jit
def dielectric(dx, dy, nx, ny, mp, mm, med, wli, W, n_flat, anti_reflection):
    """A ray meeting a bare (or anti-reflection coated) interface, as tracer._interfaces and
    fresnel.py compute it: (medium before, medium after, cos of incidence, TIR, R_s, R_p,
    reflected direction, transmitted direction).  Snell and TIR: Hecht, Optics, sec. 4.4 and
    4.7; Fresnel power reflectances: sec. 4.6.  Under TIR the transmitted direction is (0, 0)
    and not computed (nothing is transmitted; about 45 % of the light pipe's events)."""
    cos_raw = dx * nx + dy * ny
    from_plus = cos_raw < 0                      # travelling against the normal
    if abs(cos_raw) < GRAZING_COS:
        from_plus = mp == med                    # too close to tangent: the ray's medium tells
    m_from = mp if from_plus else mm
    m_to = mm if from_plus else mp
    if W > 1:
        n1 = n_flat[m_from * W + wli]
        n2 = n_flat[m_to * W + wli]
    else:
        n1 = n_flat[m_from]
        n2 = n_flat[m_to]
    ci = abs(cos_raw)
    sgn = 1.0 if from_plus else -1.0             # normal pointing back into the incident medium
    bnx = nx * sgn
    bny = ny * sgn
    ratio = n1 / n2
    sin2_t = ratio * ratio * max(0.0, 1.0 - ci * ci)
    tir = sin2_t > 1.0
    two_ci = 2 * ci
    rx, ry = _unit(dx + two_ci * bnx, dy + two_ci * bny)
    if tir:
        # all of it reflects: no transmitted direction, no s/p amplitude ratios (the array code
        # computes them and drops them: R_s = R_p = 1 replaces them)
        return m_from, m_to, ci, tir, 1.0, 1.0, rx, ry, 0.0, 0.0
    cos_t = math.sqrt(max(0.0, 1.0 - sin2_t))
    a = n1 * ci
    b = n2 * cos_t
    c = n2 * ci
    d = n1 * cos_t
    rs = (a - b) / (a + b) if a + b > 0 else 1.0
    rp = (c - d) / (c + d) if c + d > 0 else 1.0
    Rs = rs * rs
    Rp = rp * rp
    if anti_reflection:
        Rs = 0.0
        Rp = 0.0
    eta = n1 / n2
    k = eta * ci - cos_t
    tx, ty = _unit(eta * dx + k * bnx, eta * dy + k * bny)
    return m_from, m_to, ci, tir, Rs, Rp, rx, ry, tx, ty


@jit
def edge_normal_at(ee, hx, hy, enx, eny, is_arc, ecx, ecy):
    """Unit geometric normal at a hit (towards the med_plus side): the table's for a line, by
    the vector's own length for an arc, so a hit a rounding error off the circle gets a unit one."""
    if not is_arc[ee]:
        return enx[ee], eny[ee]
    ax = hx - ecx[ee]
    ay = hy - ecy[ee]
    r = math.sqrt(ax * ax + ay * ay)
    if r == 0.0:
        r = 1.0
    return ax / r, ay / r


@jit
def mirror_direction(dx, dy, nx, ny):
    dot = dx * nx + dy * ny
    return _unit(dx - 2 * dot * nx, dy - 2 * dot * ny)


# The children's rows, stated here once.  CF holds CHILD_FLOAT_ROWS; CI holds CHILD_INT_ROWS, then
# those of CHILD_STREAMS that the `streams` bits ask for, in that order (the kernel writes only
# those): the parent's row (for a ray table and the corner rules), the path node and the event
# (for the path tallies), the birth code (for a ray table; STREAM_TABLE also asks for the
# per-ray columns of the ray table: end code, end point, optical path) and the last edge that
# acted (it differs from the start edge only for a ray that passed a monitor detector; without
# one the caller takes the start row for it), and the wavelength's index (only when the trace
# has more than one wavelength; else it is 0 and not read).  Without path tallies every ray's
# path is its source's, so no path row is carried: the step's `path` is then per source ray.
CHILD_FLOAT_ROWS = ("x", "y", "dx", "dy", "fs", "fp", "opl")
CHILD_INT_ROWS = ("med", "start", "root")
STREAM_PARENT, STREAM_PATHS, STREAM_TABLE, STREAM_LAST, STREAM_WAVES = 1, 2, 4, 8, 16
CHILD_STREAMS = ((STREAM_PARENT, "parent"), (STREAM_PATHS, "path"), (STREAM_PATHS, "event"), (STREAM_TABLE, "born"),
                 (STREAM_LAST, "last"), (STREAM_WAVES, "wli"))
N_CHILD_INTS = len(CHILD_INT_ROWS)


def child_layout(streams: int) -> dict[str, int]:
    """Row in CI of each integer field of the children written for these `streams`."""
    names = CHILD_INT_ROWS + tuple(name for bit, name in CHILD_STREAMS if streams & bit)
    return {name: row for row, name in enumerate(names)}


CHILD_LAYOUTS = tuple(child_layout(s) for s in range(1 << len(CHILD_STREAMS)))    # by `streams`


@jit
def child_int_rows(streams):
    """Rows of the children's integer block for these `streams` (one per bit set)."""
    return (N_CHILD_INTS + (streams & 1) + 2 * ((streams >> 1) & 1) + ((streams >> 2) & 1) + ((streams >> 3) & 1)
            + ((streams >> 4) & 1))


@jit
def _put_child(CF, CI, k, f, med, start, root, parent, path, event, born, last, wli, streams):
    """Write child k: f, its CHILD_FLOAT_ROWS; med .. root, its CHILD_INT_ROWS; parent .. wli:
    its CHILD_STREAMS, of which only those `streams` asks for are written.  (Scalars: with
    the integers passed as tuples and written in a loop the step measured 3-7 % slower.)"""
    for r in range(len(CHILD_FLOAT_ROWS)):
        CF[r, k] = f[r]
    CI[0, k] = med
    CI[1, k] = start
    CI[2, k] = root
    r = N_CHILD_INTS
    if streams & STREAM_PARENT:
        CI[r, k] = parent
        r += 1
    if streams & STREAM_PATHS:
        CI[r, k] = path
        CI[r + 1, k] = event
        r += 2
    if streams & STREAM_TABLE:
        CI[r, k] = born
        r += 1
    if streams & STREAM_LAST:
        CI[r, k] = last
        r += 1
    if streams & STREAM_WAVES:
        CI[r, k] = wli


@jit(inline="always")
def _book_faint(tflux, tnode, ttag, nt, f, row, group):
    """A child below its source ray's flux floor ends: book its flux as truncated (by its parent)."""
    tflux[nt] = f
    tnode[nt] = row
    ttag[nt] = group
    return nt + 1


@jit
def _stable_by_tag(tag, n, n_tags):
    """Positions that sort entries 0..n-1 stably by tag (a counting sort)."""
    count = np.zeros(n_tags + 1, dtype=np.int64)
    for j in range(n):
        count[tag[j] + 1] += 1
    for g in range(n_tags):
        count[g + 1] += count[g]
    pos = np.empty(n, dtype=np.int64)
    for j in range(n):
        pos[j] = count[tag[j]]
        count[tag[j]] += 1
    return pos


@jit
def book_deposits(bins, batch_bins, dcode, dflux, dnode, root, batch, scratch, seen):
    """Add a generation's deposits to the ledger bins and to the bins per sub-batch of source
    rays (`uncertainty`): the sums np.bincount makes (each bin's deposits added in list order,
    starting from 0), then added to the running totals, so the bits are the array code's.
    dnode: the row of the ray each deposit comes from; root: each row's source ray (chunk-local);
    batch: each source ray's sub-batch.  scratch, seen: zeroed work arrays of len(bins) +
    len(batch_bins), left zeroed.  Only the bins a generation touches are summed and cleared:
    a 10,000-edge film has 20,000 bins and 32 times as many per sub-batch, and clearing and
    adding them all made every generation cost about a millisecond more."""
    nb = len(bins)
    nd = len(dcode)
    touched = np.empty(2 * nd, dtype=np.int64)
    k = 0
    for j in range(nd):
        c = dcode[j]
        f = dflux[j]
        if not seen[c]:
            seen[c] = True
            touched[k] = c
            k += 1
        scratch[c] += f
        cb = nb + batch[root[dnode[j]]] * nb + c
        if not seen[cb]:
            seen[cb] = True
            touched[k] = cb
            k += 1
        scratch[cb] += f
    for j in range(k):
        s = touched[j]
        if s < nb:
            bins[s] += scratch[s]
        else:
            batch_bins[s - nb] += scratch[s]
        scratch[s] = 0.0
        seen[s] = False


# rows of the per-edge tables (extended by one "no edge" column at index ne)
EDGE_FLOAT_ROWS = ("nx", "ny", "cx", "cy", "reflectance", "x0", "y0", "ex", "ey", "length")
EDGE_INT_ROWS = ("treat", "escape_code", "is_arc", "med_plus", "med_minus", "detector")


@jit
def interface_step(x, y, dx, dy, fs, fp, opl, wli, med, root, last, path, t, e, TF, TI, n_flat, alpha,
                   thr_root, W, absorbing, mc, bulk0, face0, trunc_code, eps, scale, u, bins, batch_bins, batch,
                   scratch, seen, streams):
    """One generation after its hit search.

    x .. path: ray state (path: per ray with STREAM_PATHS, else per source ray, read by root);
    t, e: the hits.  TF, TI: per-edge tables (EDGE_FLOAT_ROWS,
    EDGE_INT_ROWS): normal (lines), arc centre, mirror reflectance, detector start, extent and
    length; treatment, escape bin, arc flag, media on both sides, detector id.  n_flat: index
    per (medium, wavelength); alpha: absorption per medium; thr_root: truncation threshold per
    source ray.  W wavelengths; bulk0, face0, trunc_code: ledger bins.  u: uniform draws for the
    dielectric rays of a Monte Carlo generation, in ray order.  bins, batch_bins, batch: the
    ledger and its sub-batch bins, to which the generation's deposits are added
    (`book_deposits`), and each source ray's sub-batch; scratch, seen: book_deposits' zeroed
    work arrays.  streams: STREAM_* bits, the
    optional rows the caller reads (CHILD_STREAMS; STREAM_TABLE: also the per-ray columns of the
    ray table); unasked ones are not written.  (Plain array and scalar arguments only: numba types those fast,
    tuples slowly, and a generation of a small fan is over in well under a millisecond.)

    Everything is written in one pass over the rays into buffers kept in ray order; where the
    array code orders a list by kind first (deposits: bulk, escapes, detectors, absorbing faces,
    mirrors, faint children; children: passed, mirror, reflected, transmitted) the buffers are
    put in that order at the end with a stable counting sort.

    Returns (end codes, PF: end points and optical paths) of the rays for a ray table; (DI:
    deposit codes and rows, fluxes), already added to the bins, for the path tallies; the
    children (CF, CI); the detector records (HF: position, angle, fs, fp, optical path; HI:
    detector, ray row, wavelength index, path, source ray, front 1/0); counts (TIR, medium
    mismatches, grazing hits, draws used).  Few arrays, since each returned one costs about
    0.3 us to hand back to Python.
    """
    enx, eny, ecx, ecy, refl_t = TF[0], TF[1], TF[2], TF[3], TF[4]
    dsx, dsy, dex, dey, dlen = TF[5], TF[6], TF[7], TF[8], TF[9]
    treat_t, esc_code, is_arc, med_plus, med_minus, det_id = TI[0], TI[1], TI[2], TI[3], TI[4], TI[5]
    m = len(x)
    ne = len(treat_t) - 1
    back = 2.0 * eps
    rec = (streams & STREAM_TABLE) != 0
    by_ray = (streams & STREAM_PATHS) != 0     # path per ray (path tallies), else per source ray
    mr = m if rec else 0
    end = np.empty(mr, dtype=np.int64)         # per ray, for the ray table only
    PF = np.empty((3, mr))                     # end point x, y and optical path
    ex, ey, opl_end = PF[0], PF[1], PF[2]
    # deposits (code, flux, the ray's row): bulk (ray order), face-kind ones (escape / detector /
    # absorber / mirror, tagged)
    bcode = np.empty(m, dtype=np.int64)
    bflux = np.empty(m)
    bnode = np.empty(m, dtype=np.int64)
    fcode = np.empty(m, dtype=np.int64)
    fflux = np.empty(m)
    fnode = np.empty(m, dtype=np.int64)
    ftag = np.empty(m, dtype=np.int64)
    # faint children: tagged by group
    tflux = np.empty(2 * m)
    tnode = np.empty(2 * m, dtype=np.int64)
    ttag = np.empty(2 * m, dtype=np.int64)
    # children: rows CHILD_FLOAT_ROWS / CHILD_INT_ROWS; A children (passed, mirror, reflected,
    # tagged by group) from column 0 up, B children (transmitted) from column m up, moved down
    # behind the A children at the end
    CF = np.empty((len(CHILD_FLOAT_ROWS), 2 * m))
    CI = np.empty((child_int_rows(streams), 2 * m), dtype=np.int64)
    ctag = np.empty(m, dtype=np.int64)
    # detector records, in ray order: position, angle, fs, fp, optical path; detector, ray
    HF = np.empty((5, m))
    HI = np.empty((6, m), dtype=np.int64)
    nb = nf = nt = na = nbk = nh = 0
    n_tir = n_mismatch = n_graze = k_u = 0
    for i in range(m):
        ed = e[i]
        esc = ed < 0
        ee = ne if esc else ed
        L = 0.0 if esc else t[i]
        mi = med[i]
        f_s = fs[i]
        f_p = fp[i]
        ddx = dx[i]
        ddy = dy[i]
        node = path[i] if by_ray else -1      # (not written without path tallies)
        e_code = E_ESCAPED
        esc_live = esc
        if absorbing:
            al = alpha[mi]
            keep = math.exp(-al * L)
            if esc and al > 0:
                keep = 0.0
            lost = (f_s + f_p) * (1.0 - keep)
            if lost > 0:
                bcode[nb] = bulk0 + mi
                bflux[nb] = lost
                bnode[nb] = i
                nb += 1
            f_s = f_s * keep
            f_p = f_p * keep
            esc_live = esc and keep > 0
            if esc and not esc_live:
                e_code = E_ABSORBED
        wl = wli[i] if W > 1 else 0          # one wavelength: 0, and the children carry no row of it
        n_here = n_flat[mi * W + wl] if W > 1 else n_flat[mi]
        o_end = opl[i] + n_here * L
        hx = x[i] + L * ddx
        hy = y[i] + L * ddy
        if rec:
            opl_end[i] = o_end
            if esc:
                ex[i] = hx + 3 * scale * ddx
                ey[i] = hy + 3 * scale * ddy
            else:
                ex[i] = hx
                ey[i] = hy
        if esc_live:
            fcode[nf] = esc_code[last[i] if last[i] >= 0 else ne]
            fflux[nf] = f_s + f_p
            fnode[nf] = i
            ftag[nf] = 0
            nf += 1
        tt = treat_t[ee]
        # children of this ray: up to two, A and B
        take_a = False
        take_b = False
        a_grp = G_REFLECT
        a = (hx, hy, ddx, ddy, f_s, f_p, o_end)
        a_med, a_last, a_ev, a_born = mi, ed, EV_REFLECT, B_REFLECTED
        if tt == T_DETECT_ABSORB or tt == T_DETECT_MONITOR:
            # record the hit: position along the detector, signed angle from its normal
            # (normal = right of start -> end), and the side it came from
            gx, gy, Ld = dex[ee], dey[ee], dlen[ee]
            cosn = -(ddx * (gy / Ld) + ddy * (-gx / Ld))
            HF[0, nh] = ((hx - dsx[ee]) * gx + (hy - dsy[ee]) * gy) / Ld
            HF[1, nh] = math.degrees(math.atan2(ddx * (gx / Ld) + ddy * (gy / Ld), abs(cosn)))
            HF[2, nh] = f_s
            HF[3, nh] = f_p
            HF[4, nh] = o_end
            HI[0, nh] = det_id[ee]
            HI[1, nh] = i
            HI[5, nh] = 1 if cosn >= 0 else 0
            nh += 1
            if tt == T_DETECT_ABSORB:
                e_code = E_DETECTED
                fcode[nf] = det_id[ee]
                fflux[nf] = f_s + f_p
                fnode[nf] = i
                ftag[nf] = 1
                nf += 1
            else:
                e_code = E_PASSED
                take_a = True
                a_grp = G_PASS
                a = (hx - back * ddx, hy - back * ddy, ddx, ddy, f_s, f_p, o_end - back * n_here)
                a_med, a_last, a_ev, a_born = mi, last[i], EV_PASS, B_PASSED
        elif tt == T_ABSORBER:
            e_code = E_ABSORBED
            fcode[nf] = face0 + ed
            fflux[nf] = f_s + f_p
            fnode[nf] = i
            ftag[nf] = 2
            nf += 1
        elif tt == T_MIRROR or tt == T_BARE or tt == T_AR:
            nx, ny = edge_normal_at(ee, hx, hy, enx, eny, is_arc, ecx, ecy)
            if tt == T_MIRROR:
                rx, ry = mirror_direction(ddx, ddy, nx, ny)
                Rm = refl_t[ee]
                fcode[nf] = face0 + ed
                fflux[nf] = (f_s + f_p) * (1 - Rm)
                fnode[nf] = i
                ftag[nf] = 3
                nf += 1
                e_code = E_REFLECTED
                take_a = True
                a_grp = G_MIRROR
                a = (hx, hy, rx, ry, f_s * Rm, f_p * Rm, o_end)
                a_med, a_last, a_ev, a_born = mi, ed, EV_MIRROR, B_MIRROR
            else:
                # dielectric: Snell, TIR, Fresnel s/p
                m_from, m_to, ci, tir, Rs, Rp, rx, ry, tx, ty = dielectric(
                    ddx, ddy, nx, ny, med_plus[ee], med_minus[ee], mi, wl, W, n_flat, tt == T_AR)
                if tir:
                    n_tir += 1
                if m_from != mi:
                    n_mismatch += 1
                if ci < GRAZING_COS:
                    n_graze += 1
                a_fs = f_s * Rs
                a_fp = f_p * Rp
                b_fs = f_s * (1 - Rs)
                b_fp = f_p * (1 - Rp)
                take_a = True
                take_b = not tir
                if mc:
                    # reflect with probability R, carry the whole flux on, s and p reweighted
                    f = f_s + f_p
                    Rt = (f_s * Rs + f_p * Rp) / (f if f > 0 else 1.0) if f > 0 else 0.0
                    sr = 1.0 / Rt if Rt > 0 else 0.0
                    st = 1.0 / (1.0 - Rt) if Rt < 1 else 0.0
                    take_a = u[k_u] < Rt
                    k_u += 1
                    take_b = not take_a
                    a_fs = a_fs * sr
                    a_fp = a_fp * sr
                    b_fs = b_fs * st
                    b_fp = b_fp * st
                    e_code = E_TIR if tir else (E_REFLECTED if take_a else E_REFRACTED)
                else:
                    e_code = E_TIR if tir else E_REFRACTED
                a = (hx, hy, rx, ry, a_fs, a_fp, o_end)
                a_med, a_last = m_from, ed
                a_ev = EV_TIR if tir else EV_REFLECT
                a_born = B_TIR if tir else B_REFLECTED
                if take_b:
                    f = b_fs + b_fp
                    if f >= thr_root[root[i]] and f > 0:
                        _put_child(CF, CI, m + nbk, (hx, hy, tx, ty, b_fs, b_fp, o_end), m_to, ed,
                                   root[i], i, node, EV_THROUGH, B_REFRACTED, ed, wl, streams)
                        nbk += 1
                    else:
                        nt = _book_faint(tflux, tnode, ttag, nt, f, i, G_TRANSMIT)
        if take_a:
            f = a[4] + a[5]
            if f >= thr_root[root[i]] and f > 0:
                _put_child(CF, CI, na, a, a_med, ed, root[i], i, node, a_ev, a_born, a_last, wl, streams)
                ctag[na] = a_grp
                na += 1
            else:
                nt = _book_faint(tflux, tnode, ttag, nt, f, i, a_grp)
        if rec:
            end[i] = e_code

    # deposits in the array code's order
    nd = nb + nf + nt
    DI = np.empty((2, nd), dtype=np.int64)
    dcode, dnode = DI[0], DI[1]
    dflux = np.empty(nd)
    dcode[:nb] = bcode[:nb]
    dflux[:nb] = bflux[:nb]
    dnode[:nb] = bnode[:nb]
    pos = _stable_by_tag(ftag, nf, 4)
    for j in range(nf):
        k = nb + pos[j]
        dcode[k] = fcode[j]
        dflux[k] = fflux[j]
        dnode[k] = fnode[j]
    pos = _stable_by_tag(ttag, nt, 4)
    for j in range(nt):
        k = nb + nf + pos[j]
        dcode[k] = trunc_code
        dflux[k] = tflux[j]
        dnode[k] = tnode[j]
    if nd:
        book_deposits(bins, batch_bins, dcode, dflux, dnode, root, batch, scratch, seen)
    # children: A by group (passed, mirror, reflected), then B
    sorted_a = True
    for j in range(1, na):
        if ctag[j] < ctag[j - 1]:
            sorted_a = False
            break
    if not sorted_a:
        pos = _stable_by_tag(ctag, na, 4)
        for row in range(CF.shape[0]):
            tmp = CF[row, :na].copy()
            for j in range(na):
                CF[row, pos[j]] = tmp[j]
        for row in range(CI.shape[0]):
            tmpi = CI[row, :na].copy()
            for j in range(na):
                CI[row, pos[j]] = tmpi[j]
    if na < m:
        # element by element, row by row: a column slice assignment (CF[:, a] = CF[:, b]) makes
        # numba copy the source to a fresh temporary first, a malloc and free per child
        for row in range(CF.shape[0]):    # destination before source: a forward copy is safe
            for j in range(nbk):
                CF[row, na + j] = CF[row, m + j]
        for row in range(CI.shape[0]):
            for j in range(nbk):
                CI[row, na + j] = CI[row, m + j]
    nk = na + nbk
    for j in range(nh):
        i = HI[1, j]
        HI[2, j] = wli[i] if W > 1 else 0
        HI[3, j] = path[i] if by_ray else path[root[i]]
        HI[4, j] = root[i]
    counts = np.array([n_tir, n_mismatch, n_graze, k_u], dtype=np.int64)
    return (end, PF), (DI, dflux), (CF[:, :nk], CI[:, :nk]), (HF[:, :nh], HI[:, :nh]), counts
