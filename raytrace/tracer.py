"""The branching loop: nearest hit -> interface physics -> children, one generation at a time.

All rays of a generation are handled together as arrays.  The loop runs over generations, never
over rays.  Every unit of flux that leaves the tree is deposited in a ledger bin as it leaves,
so the ledger closes by construction and is then checked.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from . import fresnel
from .compile import (T_ABSORBER, T_AR, T_BARE, T_DETECT_ABSORB, T_DETECT_MONITOR, T_MIRROR,
                      CompiledScene)
from .intersect import edge_normal, nearest_hit
from .ledger import TRUNC_BUDGET, TRUNC_DEPTH, TRUNC_FLUX, BinLayout
from .sources import StartRays

BRANCHING, MONTE_CARLO = "branching", "monte_carlo"
MODES = (BRANCHING, MONTE_CARLO)

# How a segment began (born) and what ended it (end): codes in the ray table.
BORN = ("source", "refracted", "reflected", "total internal reflection", "mirror", "passed detector")
B_SOURCE, B_REFRACTED, B_REFLECTED, B_TIR, B_MIRROR, B_PASSED = range(6)
END = ("refracted", "reflected", "total internal reflection", "absorbed", "escaped", "detected",
       "truncated", "passed detector")
E_REFRACTED, E_REFLECTED, E_TIR, E_ABSORBED, E_ESCAPED, E_DETECTED, E_TRUNCATED, E_PASSED = range(8)

# Path events: what a ray did at an edge (code = edge * N_EVENT_KINDS + kind).
EVENT_KINDS = ("through", "reflected off", "TIR at", "mirror at", "through detector")
EV_THROUGH, EV_REFLECT, EV_TIR, EV_MIRROR, EV_PASS = range(5)
N_EVENT_KINDS = len(EVENT_KINDS)
MAX_PATH_NODES = 500_000     # past this, new paths are lumped as "other paths"

FIELDS = ("x", "y", "dx", "dy", "wli", "fs", "fp", "med", "gen", "rid", "parent", "root",
          "ref", "opl", "start_edge", "last", "path", "born")


@dataclass
class Limits:
    min_relative_flux: float = 1e-4
    max_depth: int = 200
    max_segments: int = 50_000_000


@dataclass
class Recording:
    """Which source rays get their segments written to the ray table."""

    mode: str = "none"     # "none", "first" (the first `count` source rays) or "all"
    count: int = 0

    def wants(self, root: np.ndarray) -> np.ndarray | None:
        if self.mode == "all":
            return np.ones(len(root), dtype=bool)
        if self.mode == "first":
            return root < self.count
        return None


@dataclass
class RawTrace:
    """What the loop produces; `results.TraceResult` wraps it for users."""

    bins: np.ndarray
    source_flux: float
    segments: dict[str, np.ndarray] | None
    hits: dict[str, np.ndarray]
    path_parent: np.ndarray
    path_code: np.ndarray
    path_flux: dict[tuple[int, int], float]   # (bin, path node) -> flux
    wavelengths: np.ndarray
    stats: dict = field(default_factory=dict)


class _Paths:
    """A trie of event sequences: node ids for (parent node, event code) pairs."""

    def __init__(self, n_roots: int, enabled: bool):
        self.enabled = enabled
        self.parent = list(range(-1, -1 - n_roots, -1))  # roots: -1 - source index
        self.code = [-1] * n_roots
        self.index: dict[int, int] = {}
        self.flux: dict[tuple[int, int], float] = {}
        self.other = -1

    def extend(self, node: np.ndarray, code: np.ndarray, n_codes: int) -> np.ndarray:
        if not self.enabled or len(node) == 0:
            return node
        keys = node.astype(np.int64) * n_codes + code
        uniq, inv = np.unique(keys, return_inverse=True)
        ids = np.empty(len(uniq), dtype=np.int64)
        for i, k in enumerate(uniq.tolist()):
            nid = self.index.get(k)
            if nid is None:
                if len(self.parent) >= MAX_PATH_NODES:
                    nid = self._other()
                else:
                    nid = len(self.parent)
                    self.parent.append(k // n_codes)
                    self.code.append(k % n_codes)
                    self.index[k] = nid
            ids[i] = nid
        return ids[inv]

    def _other(self) -> int:
        if self.other < 0:
            self.other = len(self.parent)
            self.parent.append(-1_000_000)   # marker: lumped paths
            self.code.append(-1)
        return self.other

    def deposit(self, bins: np.ndarray, node: np.ndarray, flux: np.ndarray) -> None:
        if not self.enabled or len(bins) == 0:
            return
        keys = bins.astype(np.int64) * (1 << 32) + node
        uniq, inv = np.unique(keys, return_inverse=True)
        sums = np.bincount(inv, weights=flux)
        for k, f in zip(uniq.tolist(), sums.tolist()):
            key = (k >> 32, k & 0xFFFFFFFF)
            self.flux[key] = self.flux.get(key, 0.0) + f


def trace_rays(cs: CompiledScene, start: StartRays, mode: str = BRANCHING,
               limits: Limits | None = None, seed: int = 1, record: Recording | None = None,
               track_paths: bool = True, hit_fn=None, n_sources: int | None = None,
               progress=None) -> RawTrace:
    """Trace `start` rays through the compiled scene and return the raw tallies."""
    if mode not in MODES:
        raise ValueError(f"mode: expected one of {', '.join(MODES)}, found {mode!r}")
    limits = limits or Limits()
    record = record or Recording()
    hit_fn = hit_fn or nearest_hit
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()

    layout = BinLayout(cs)
    bins = np.zeros(layout.size)
    n_sources = n_sources if n_sources is not None else (int(start.source.max()) + 1 if len(start) else 0)
    paths = _Paths(n_sources, track_paths)

    wavelengths, wli = np.unique(start.wavelength, return_inverse=True)
    n_table = np.array([np.broadcast_to(np.asarray(m.index(wavelengths), dtype=float), wavelengths.shape)
                        for m in cs.media])          # (media, wavelengths)
    alpha = np.array([m.absorption_per_mm for m in cs.media], dtype=float)

    n = len(start)
    flux0 = start.flux_s + start.flux_p
    rays = {
        "x": start.x.astype(float), "y": start.y.astype(float),
        "dx": start.dx.astype(float), "dy": start.dy.astype(float),
        "wli": wli.astype(np.int64), "fs": start.flux_s.astype(float), "fp": start.flux_p.astype(float),
        "med": _medium_at(cs, start.x, start.y), "gen": np.zeros(n, dtype=np.int64),
        "rid": np.arange(n, dtype=np.int64), "parent": np.full(n, -1, dtype=np.int64),
        "root": np.arange(n, dtype=np.int64), "ref": flux0.astype(float), "opl": np.zeros(n),
        "start_edge": np.full(n, -1, dtype=np.int64), "last": np.full(n, -1, dtype=np.int64),
        "path": start.source.astype(np.int64),   # path roots: node i is source i
        "born": np.full(n, B_SOURCE, dtype=np.int64),
    }
    source_flux = float(flux0.sum())
    next_id = n
    seg_store: dict[str, list[np.ndarray]] | None = {} if record.mode != "none" else None
    hit_store: dict[str, list[np.ndarray]] = {}
    stats = {"segments": 0, "generations": 0, "vertex_hits": 0, "grazing_hits": 0,
             "medium_mismatches": 0, "tir_events": 0, "source_rays": n}

    def deposit(code, flux, node):
        np.add.at(bins, code, flux) if len(code) < 64 else _bincount_add(bins, code, flux)
        paths.deposit(code, node, flux)

    def truncate(r, mask, reason, record_it):
        if not mask.any():
            return
        f = r["fs"][mask] + r["fp"][mask]
        deposit(np.full(int(mask.sum()), layout.trunc0 + reason), f, r["path"][mask])
        if record_it and seg_store is not None:
            want = record.wants(r["root"][mask])
            if want is not None and want.any():
                sub = {k: v[mask][want] for k, v in r.items()}
                _store_segments(seg_store, sub, sub["x"], sub["y"], np.full(len(sub["x"]), E_TRUNCATED),
                                np.full(len(sub["x"]), -1), wavelengths)

    while len(rays["x"]):
        # --- limits that end rays before they are traced
        too_deep = rays["gen"] > limits.max_depth
        truncate(rays, too_deep, TRUNC_DEPTH, True)
        if too_deep.any():
            rays = _take(rays, ~too_deep)
        room = limits.max_segments - stats["segments"]
        if len(rays["x"]) > room:
            over = np.zeros(len(rays["x"]), dtype=bool)
            over[max(room, 0):] = True
            truncate(rays, over, TRUNC_BUDGET, True)
            rays = _take(rays, ~over)
        m = len(rays["x"])
        if m == 0:
            break
        stats["generations"] += 1
        stats["segments"] += m
        if progress is not None:
            progress(stats)

        # --- nearest hit, then travel to it
        t, e = hit_fn(cs, rays["x"], rays["y"], rays["dx"], rays["dy"], rays["start_edge"])
        esc = e < 0
        med = rays["med"]
        n_here = n_table[med, rays["wli"]]
        a = alpha[med]
        L = np.where(esc, 0.0, t)
        keep = np.exp(-a * L)
        keep[esc & (a > 0)] = 0.0          # an absorbing ambient swallows what leaves
        fs_start, fp_start = rays["fs"], rays["fp"]
        lost = (fs_start + fp_start) * (1.0 - keep)
        absorbed = lost > 0
        if absorbed.any():
            deposit(layout.bulk0 + med[absorbed], lost[absorbed], rays["path"][absorbed])
        rays["fs"] = rays["fs"] * keep
        rays["fp"] = rays["fp"] * keep
        rays["opl"] = rays["opl"] + n_here * L
        hx = rays["x"] + L * rays["dx"]
        hy = rays["y"] + L * rays["dy"]

        # --- escapes
        esc_live = esc & (keep > 0)
        if esc_live.any():
            last = rays["last"][esc_live]
            code = np.where(last >= 0, layout.escape0 + last, layout.escape_none)
            deposit(code, (rays["fs"] + rays["fp"])[esc_live], rays["path"][esc_live])

        e_safe = np.where(esc, 0, e)
        treat = np.where(esc, -1, cs.treatment[e_safe])
        end = np.full(m, E_ESCAPED, dtype=np.int64)
        end[esc & (keep == 0)] = E_ABSORBED

        children: list[dict[str, np.ndarray]] = []

        def spawn(idx, x, y, dx, dy, fs, fp, medium, born, edge, event_kind, last=None):
            nonlocal next_id
            k = len(idx)
            if k == 0:
                return
            node = paths.extend(rays["path"][idx], edge * N_EVENT_KINDS + event_kind, cs.n_edges * N_EVENT_KINDS)
            child = {
                "x": x, "y": y, "dx": dx, "dy": dy, "wli": rays["wli"][idx], "fs": fs, "fp": fp,
                "med": medium, "gen": rays["gen"][idx] + 1, "rid": np.arange(next_id, next_id + k),
                "parent": rays["rid"][idx], "root": rays["root"][idx], "ref": rays["ref"][idx],
                "opl": rays["opl"][idx], "start_edge": edge, "last": edge if last is None else last,
                "path": node, "born": np.full(k, born, dtype=np.int64),
            }
            next_id += k
            # children too faint to matter end here, their flux booked as truncated
            faint = (fs + fp) < limits.min_relative_flux * child["ref"]
            if faint.any():
                deposit(np.full(int(faint.sum()), layout.trunc0 + TRUNC_FLUX), (fs + fp)[faint],
                        rays["path"][idx][faint])
                child = _take(child, ~faint)
            children.append(child)

        # --- detectors
        det = (treat == T_DETECT_ABSORB) | (treat == T_DETECT_MONITOR)
        if det.any():
            idx = np.flatnonzero(det)
            ed = e[idx]
            _store_hits(hit_store, cs, rays, idx, ed, hx[idx], hy[idx], wavelengths)
            absorb = treat[idx] == T_DETECT_ABSORB
            ia = idx[absorb]
            if len(ia):
                deposit(cs.detector[e[ia]], (rays["fs"] + rays["fp"])[ia], rays["path"][ia])
                end[ia] = E_DETECTED
            ip = idx[~absorb]
            if len(ip):
                end[ip] = E_PASSED
                spawn(ip, hx[ip], hy[ip], rays["dx"][ip], rays["dy"][ip], rays["fs"][ip], rays["fp"][ip],
                      med[ip], B_PASSED, e[ip], EV_PASS, last=rays["last"][ip])

        # --- absorbing faces
        ab = treat == T_ABSORBER
        if ab.any():
            deposit(layout.face0 + e[ab], (rays["fs"] + rays["fp"])[ab], rays["path"][ab])
            end[ab] = E_ABSORBED

        # --- mirrors: reflect R, absorb the rest at the face
        mi = np.flatnonzero(treat == T_MIRROR)
        if len(mi):
            em = e[mi]
            nx, ny = edge_normal(cs, em, hx[mi], hy[mi])
            rdx, rdy = fresnel.reflect(rays["dx"][mi], rays["dy"][mi], nx, ny)
            R = cs.reflectance[em]
            lost_m = (rays["fs"][mi] + rays["fp"][mi]) * (1 - R)
            deposit(layout.face0 + em, lost_m, rays["path"][mi])
            end[mi] = E_REFLECTED
            spawn(mi, hx[mi], hy[mi], rdx, rdy, rays["fs"][mi] * R, rays["fp"][mi] * R, med[mi],
                  B_MIRROR, em, EV_MIRROR)

        # --- dielectric interfaces (bare or anti-reflection)
        di = np.flatnonzero((treat == T_BARE) | (treat == T_AR))
        if len(di):
            _interfaces(cs, rays, di, e[di], hx[di], hy[di], treat[di], n_table, mode, rng, stats, end, spawn)

        # --- where rays start a segment exactly at a vertex or graze, keep count
        hit = ~esc & (treat < T_DETECT_ABSORB)
        if hit.any():
            ih = np.flatnonzero(hit)
            eh = e[ih]
            d0 = np.hypot(hx[ih] - cs.x0[eh], hy[ih] - cs.y0[eh])
            d1 = np.hypot(hx[ih] - cs.x1[eh], hy[ih] - cs.y1[eh])
            stats["vertex_hits"] += int(np.count_nonzero(np.minimum(d0, d1) < 1e3 * cs.eps))

        if seg_store is not None:
            want = record.wants(rays["root"])
            if want is not None and want.any():
                sub = {k: v[want] for k, v in rays.items()}
                sub["fs"], sub["fp"] = fs_start[want], fp_start[want]
                ex = np.where(esc, hx + 3 * cs.scale * rays["dx"], hx)[want]
                ey = np.where(esc, hy + 3 * cs.scale * rays["dy"], hy)[want]
                _store_segments(seg_store, sub, ex, ey, end[want], e[want], wavelengths)

        rays = _concat(children) if children else _take(rays, np.zeros(m, dtype=bool))

    stats["elapsed_s"] = time.perf_counter() - t0
    stats["events"] = stats["segments"]
    return RawTrace(
        bins=bins, source_flux=source_flux,
        segments=None if seg_store is None else {k: np.concatenate(v) for k, v in seg_store.items()},
        hits={k: np.concatenate(v) for k, v in hit_store.items()},
        path_parent=np.array(paths.parent, dtype=np.int64), path_code=np.array(paths.code, dtype=np.int64),
        path_flux=paths.flux, wavelengths=wavelengths, stats=stats)


def _interfaces(cs, rays, idx, e, hx, hy, treat, n_table, mode, rng, stats, end, spawn):
    dx, dy = rays["dx"][idx], rays["dy"][idx]
    nx, ny = edge_normal(cs, e, hx, hy)
    cos_raw = dx * nx + dy * ny
    from_plus = cos_raw < 0                      # travelling against the normal
    m_from = np.where(from_plus, cs.med_plus[e], cs.med_minus[e])
    m_to = np.where(from_plus, cs.med_minus[e], cs.med_plus[e])
    stats["medium_mismatches"] += int(np.count_nonzero(m_from != rays["med"][idx]))
    wli = rays["wli"][idx]
    n1 = n_table[m_from, wli]
    n2 = n_table[m_to, wli]
    ci = np.abs(cos_raw)
    stats["grazing_hits"] += int(np.count_nonzero(ci < 1e-9))
    # normal pointing back into the incident medium
    bnx = np.where(from_plus, nx, -nx)
    bny = np.where(from_plus, ny, -ny)
    cos_t, tir = fresnel.snell_cos_t(n1, n2, ci)
    Rs, Rp = fresnel.fresnel_rs_rp(n1, n2, ci, cos_t, tir)
    ar = treat == T_AR
    if ar.any():
        Rs = np.where(ar & ~tir, 0.0, Rs)
        Rp = np.where(ar & ~tir, 0.0, Rp)
    stats["tir_events"] += int(np.count_nonzero(tir))
    rdx = dx + 2 * ci * bnx
    rdy = dy + 2 * ci * bny
    eta = n1 / n2
    tdx, tdy = fresnel.refract(dx, dy, bnx, bny, eta, ci, cos_t)
    # renormalise against rounding so directions stay unit vectors over many bounces
    tn = np.hypot(tdx, tdy)
    tn[tn == 0] = 1.0
    tdx, tdy = tdx / tn, tdy / tn
    fs, fp = rays["fs"][idx], rays["fp"][idx]
    born_r = np.where(tir, B_TIR, B_REFLECTED)
    ev_r = np.where(tir, EV_TIR, EV_REFLECT)

    if mode == BRANCHING:
        end[idx] = np.where(tir, E_TIR, E_REFRACTED)
        _spawn_split(spawn, idx, hx, hy, rdx, rdy, fs * Rs, fp * Rp, m_from, born_r, e, ev_r, mask=None)
        tr = ~tir
        if tr.any():
            spawn(idx[tr], hx[tr], hy[tr], tdx[tr], tdy[tr], (fs * (1 - Rs))[tr], (fp * (1 - Rp))[tr],
                  m_to[tr], B_REFRACTED, e[tr], EV_THROUGH)
        return

    # Monte Carlo: reflect with probability R, carry the whole flux on, s and p reweighted
    f = fs + fp
    R = np.where(f > 0, (fs * Rs + fp * Rp) / np.where(f > 0, f, 1.0), 0.0)
    refl = rng.random(len(idx)) < R
    end[idx] = np.where(tir, E_TIR, np.where(refl, E_REFLECTED, E_REFRACTED))
    with np.errstate(invalid="ignore", divide="ignore"):
        sr = np.where(R > 0, 1.0 / R, 0.0)
        st = np.where(R < 1, 1.0 / (1.0 - R), 0.0)
    _spawn_split(spawn, idx, hx, hy, rdx, rdy, fs * Rs * sr, fp * Rp * sr, m_from, born_r, e, ev_r, mask=refl)
    tr = ~refl
    if tr.any():
        spawn(idx[tr], hx[tr], hy[tr], tdx[tr], tdy[tr], (fs * (1 - Rs) * st)[tr], (fp * (1 - Rp) * st)[tr],
              m_to[tr], B_REFRACTED, e[tr], EV_THROUGH)


def _spawn_split(spawn, idx, hx, hy, dx, dy, fs, fp, med, born, e, ev, mask):
    """Spawn reflected children, TIR and partial reflections separately (they differ in labels)."""
    sel = np.ones(len(idx), dtype=bool) if mask is None else mask
    for flag in (B_TIR, B_REFLECTED):
        s = sel & (born == flag)
        if s.any():
            spawn(idx[s], hx[s], hy[s], dx[s], dy[s], fs[s], fp[s], med[s], flag, e[s],
                  EV_TIR if flag == B_TIR else EV_REFLECT)


def _bincount_add(bins, code, flux):
    bins += np.bincount(code, weights=flux, minlength=len(bins))[: len(bins)]


def _take(r, mask):
    return {k: v[mask] for k, v in r.items()}


def _concat(parts):
    return {k: np.concatenate([p[k] for p in parts]) for k in FIELDS}


def _medium_at(cs: CompiledScene, x, y) -> np.ndarray:
    """Medium containing each point: cast a ray and read the medium behind the first edge hit.

    The first boundary a ray meets is seen from the medium the point is in; a ray that meets
    nothing started in the ambient."""
    n = len(x)
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    # an irrational-ish direction avoids passing exactly through vertices of axis-aligned parts
    ang = 0.7390851332151607
    dx = np.full(n, np.cos(ang))
    dy = np.full(n, np.sin(ang))
    boundary = np.flatnonzero(cs.detector < 0)
    t, e = nearest_hit(cs, np.asarray(x, float), np.asarray(y, float), dx, dy,
                       np.full(n, -1, dtype=np.int64), edge_ids=boundary)
    med = np.zeros(n, dtype=np.int64)
    hit = e >= 0
    if hit.any():
        eh = e[hit]
        hx = x[hit] + t[hit] * dx[hit]
        hy = y[hit] + t[hit] * dy[hit]
        nx, ny = edge_normal(cs, eh, hx, hy)
        from_plus = dx[hit] * nx + dy[hit] * ny < 0
        med[hit] = np.where(from_plus, cs.med_plus[eh], cs.med_minus[eh])
    return med


def _store_hits(store, cs, rays, idx, ed, hx, hy, wavelengths):
    d = cs.detector[ed]
    ex = cs.x1[ed] - cs.x0[ed]
    ey = cs.y1[ed] - cs.y0[ed]
    L = np.hypot(ex, ey)
    s = ((hx - cs.x0[ed]) * ex + (hy - cs.y0[ed]) * ey) / L
    # angle of arrival from the detector normal (normal = right of start->end), signed
    nx, ny = ey / L, -ex / L
    dx, dy = rays["dx"][idx], rays["dy"][idx]
    cosn = -(dx * nx + dy * ny)
    sint = dx * (ex / L) + dy * (ey / L)
    angle = np.degrees(np.arctan2(sint, np.abs(cosn)))
    front = cosn >= 0
    for k, v in (("detector", d), ("position", s), ("angle_deg", angle), ("front", front),
                 ("flux_s", rays["fs"][idx]), ("flux_p", rays["fp"][idx]),
                 ("wavelength_nm", wavelengths[rays["wli"][idx]]), ("optical_path", rays["opl"][idx]),
                 ("path", rays["path"][idx]), ("root", rays["root"][idx])):
        store.setdefault(k, []).append(np.asarray(v))


def _store_segments(store, r, ex, ey, end, edge, wavelengths):
    cols = {
        "ray_id": r["rid"], "parent_id": r["parent"], "generation": r["gen"], "source_ray": r["root"],
        "x0": r["x"], "y0": r["y"], "x1": ex, "y1": ey, "dx": r["dx"], "dy": r["dy"],
        "wavelength_nm": wavelengths[r["wli"]], "flux_s": r["fs"], "flux_p": r["fp"],
        "medium": r["med"], "born": r["born"], "end": end, "end_edge": edge, "optical_path": r["opl"],
    }
    for k, v in cols.items():
        store.setdefault(k, []).append(np.asarray(v))
