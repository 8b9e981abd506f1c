"""The branching loop: nearest hit -> interface physics -> children, one generation at a time.

All rays of a generation are handled together as arrays.  The loop runs over generations, never
over rays.  Every unit of flux that leaves the tree is deposited in a ledger bin as it leaves,
so the ledger closes by construction and is then checked.

Speed notes (see DEVELOPERS.md, Performance): every ray of a generation has the same depth, so
depth is one number; per-edge constants come from a table built once per compiled scene
(`accel.edge_table`); ledger deposits of a generation are summed with one bincount; ray ids,
parents and birth codes are carried only when a ray table is recorded; path tracking uses a
hashed trie (`pathtrie`) and can be switched off.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from . import fresnel
from .accel import edge_table, hit_function
from .compile import (T_ABSORBER, T_AR, T_BARE, T_DETECT_ABSORB, T_DETECT_MONITOR, T_MIRROR,
                      CompiledScene)
from . import kernel, kernel_step
from .errors import BudgetExceeded, memory_limit_text
from .kernel import timed_first_call
from .intersect import edge_normal, nearest_hit
from .ledger import TRUNC_BUDGET, TRUNC_DEPTH, TRUNC_FLUX, BinLayout
from .pathtrie import PathTrie
from .sources import StartRays
from .uncertainty import SUB_BATCHES, batch_sums, sub_batch

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
T_ESCAPE = 6                 # treatment code of "no edge": index -1 of the extended tables
GRAZING_COS = 1e-9           # |cos| below which a hit counts as grazing
VERTEX_TOL = 1e3             # eps from an edge's end within which a hit is on the vertex
# directions (rad) of the casts that find the medium at a point when no direction is given
PROBE_ANGLES = (0.7390851332151607, 2.2903914791364015, 4.4076789862512483)
CORNER_PROBE = 4.0           # eps past a vertex hit where the medium beyond is probed
CORNER_ROUNDS = 8            # corners a ray may pass straight on through within one segment

# Bytes a live ray costs during one generation: its state plus the temporaries of the hit
# search and the interface physics.  tracemalloc on the light pipe (200,000 rays in one chunk)
# gives 430; the margin covers ray ids, arcs and Monte Carlo arrays.
BYTES_PER_LIVE_RAY = 1200
BYTES_PER_SEGMENT_ROW = 18 * 8     # one ray-table row
BYTES_PER_HIT = 10 * 8             # one detector record
KEPT_COPIES = 2                    # kept rows exist twice while their pieces are concatenated


@dataclass
class Limits:
    flux_floor: float = 1e-4
    max_generations: int = 200
    segment_budget: int = 1_000_000_000
    max_memory_mb: float = 4096.0
    # the part of max_memory_mb this one trace_rays call may use (the rest holds the starting
    # rays, the merged results and the other workers' chunks); None: all of it
    memory_share_mb: float | None = None
    # rays fainter than this share of their source ray's flux have their paths lumped into
    # "other paths": the path table stays small and does not depend on how rays are chunked
    route_flux_floor: float = 1e-3


@dataclass
class Recording:
    """Which source rays get their segments written to the ray table."""

    mode: str = "none"     # "none", "all", "first" (the first `count` source rays) or "spread"
    count: int = 0         # (`count` source rays spread evenly over all `total` of them)
    total: int = 0

    def wants(self, root: np.ndarray) -> np.ndarray | None:
        if self.mode == "all" or (self.mode == "spread" and self.count >= self.total):
            return np.ones(len(root), dtype=bool)
        if self.mode == "first":
            return root < self.count
        if self.mode == "spread":
            return in_spread(root, self.count, self.total)
        return None


def spread_rays(count: int, total: int) -> np.ndarray:
    """The `count` source rays, of `total`, spread evenly: the middle ray of each of `count`
    equal runs, so an even fan's recorded rays cover the whole source (not one end of it)."""
    i = np.arange(min(count, total), dtype=np.int64)
    return ((2 * i + 1) * total) // (2 * min(count, total))


def in_spread(root: np.ndarray, count: int, total: int) -> np.ndarray:
    """Whether each source ray is one of `spread_rays(count, total)` (without listing them)."""
    root = np.asarray(root, dtype=np.int64)
    guess = (root * count) // max(total, 1)
    out = np.zeros(len(root), dtype=bool)
    for i in (guess - 1, guess, guess + 1):
        ok = (i >= 0) & (i < count)
        out |= ok & (((2 * i + 1) * total) // (2 * count) == root)
    return out


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
    histograms: dict | None = None            # per detector, when hits are binned instead of kept
    # per sub-batch of source rays (`uncertainty`): ledger bins (SUB_BATCHES, len(bins)) and source flux
    batch_bins: np.ndarray | None = None
    batch_flux: np.ndarray | None = None


class _SceneArrays:
    """Per-edge lookups extended by one entry (index -1) that stands for "no edge hit"."""

    def __init__(self, cs: CompiledScene):
        ne = cs.n_edges
        layout = BinLayout(cs)
        self.layout = layout
        ext = lambda a, v: np.append(np.asarray(a), v)
        self.treat = ext(cs.treatment.astype(np.int64), T_ESCAPE)
        self.escape_code = ext(layout.escape0 + np.arange(ne), layout.escape_none)
        tab = edge_table(cs)
        # index -1 ("no edge") reads harmless finite values: those rows are never used
        self.nx, self.ny = ext(tab.nx, 1.0), ext(tab.ny, 0.0)
        self.is_arc = ext(cs.is_arc, False)
        self.cx, self.cy, self.radius = ext(cs.cx, 0.0), ext(cs.cy, 0.0), ext(np.where(cs.is_arc, cs.radius, 1.0), 1.0)
        self.x0, self.y0, self.x1, self.y1 = (ext(a, 0.0) for a in (cs.x0, cs.y0, cs.x1, cs.y1))
        self.med_plus, self.med_minus = ext(cs.med_plus, 0), ext(cs.med_minus, 0)
        self.reflectance = ext(cs.reflectance, 0.0)
        self.has_arcs = bool(cs.is_arc.any())
        present = set(np.unique(cs.treatment).tolist())
        self.has = {k: k in present for k in (T_BARE, T_MIRROR, T_ABSORBER, T_AR, T_DETECT_ABSORB,
                                              T_DETECT_MONITOR)}
        self.alpha = np.array([m.absorption_per_mm for m in cs.media], dtype=float)
        self.absorbing = bool((self.alpha > 0).any())
        self.n_codes = ne * N_EVENT_KINDS
        self.eps = cs.eps
        self.detector_ids = np.flatnonzero(cs.detector >= 0)
        # the same extended tables as kernel_step.interface_step takes them (EDGE_*_ROWS)
        i64 = lambda a: np.ascontiguousarray(a, dtype=np.int64)
        f64 = lambda a: np.ascontiguousarray(a, dtype=float)
        dex, dey = cs.x1 - cs.x0, cs.y1 - cs.y0
        self.edge_float = f64(np.array([self.nx, self.ny, self.cx, self.cy, self.reflectance, ext(cs.x0, 0.0),
                                        ext(cs.y0, 0.0), ext(dex, 1.0), ext(dey, 0.0), ext(np.hypot(dex, dey), 1.0)],
                                       dtype=float))
        self.edge_int = i64(np.array([self.treat, self.escape_code, self.is_arc, self.med_plus, self.med_minus,
                                      ext(cs.detector, -1)], dtype=np.int64))
        self.x0, self.y0, self.x1, self.y1 = (f64(a) for a in (self.x0, self.y0, self.x1, self.y1))
        self.detectors_touch_boundary = _detectors_touch_boundary(cs)


def _detectors_touch_boundary(cs: CompiledScene) -> bool:
    """Whether any detector meets a part's boundary: only then can a detector and a face be
    hit at the same point, which needs the detector-first tie rule in the loop."""
    dets = np.flatnonzero(cs.detector >= 0)
    if len(dets) == 0 or len(dets) == cs.n_edges:
        return False
    import shapely
    boundary = [e for e, d in zip(cs.edges, cs.detector) if d < 0]
    tol = 1e-5 * cs.scale
    lines = shapely.MultiLineString([e.flattened(tol) + [e.end] for e in boundary])
    return any(shapely.LineString([(cs.x0[i], cs.y0[i]), (cs.x1[i], cs.y1[i])]).distance(lines) <= 2 * cs.eps
               for i in dets)


def _start_points(cs: CompiledScene, start: StartRays, hit_fn):
    """Where source rays begin.  A ray whose start point lies on a face (an LED sitting on a
    guide's input face) is moved back by 2 eps along its direction, so it meets that face, on
    the side it comes from, and refracts there; other rays start exactly where they were put."""
    x = start.x.astype(float)
    y = start.y.astype(float)
    if len(x) == 0 or cs.n_edges == 0:
        return x, y
    back = 2.0 * cs.eps
    bx = x - back * start.dx
    by = y - back * start.dy
    t, e = hit_fn(cs, bx, by, start.dx, start.dy, np.full(len(x), -1, dtype=np.int64))
    on_face = (e >= 0) & (t <= back + cs.eps) & (cs.detector[np.maximum(e, 0)] < 0)
    return np.where(on_face, bx, x), np.where(on_face, by, y)


def _scene_arrays(cs: CompiledScene) -> _SceneArrays:
    cache = cs.__dict__.setdefault("_accel_cache", {})
    if "tracer" not in cache:
        cache["tracer"] = _SceneArrays(cs)
    return cache["tracer"]


def prepare_scene(cs: CompiledScene, accel: str = "auto") -> None:
    """Build the lookups a trace caches on the compiled scene (the nearest-hit method and its
    grid, the tracer's edge tables, the corner rules' vertex groups) before threads share the
    scene: each is otherwise built on first use, and two chunk threads could build one at once."""
    hit_function(cs, accel)
    _scene_arrays(cs)
    _vertex_groups(cs)


def trace_rays(cs: CompiledScene, start: StartRays, mode: str = BRANCHING,
               limits: Limits | None = None, seed: int | list[int] = 1, record: Recording | None = None,
               track_paths: bool = True, hit_fn=None, n_sources: int | None = None,
               progress=None, accel: str = "auto", root_offset: int = 0,
               keep_hits: bool = True, join_hits: bool = True) -> RawTrace:
    """Trace `start` rays through the compiled scene and return the raw tallies.

    hit_fn: a nearest-hit function (default: the fastest exact method for the scene, see
    `accel.hit_function`; `intersect.nearest_hit` is the plain reference).  root_offset: the
    index of start[0] among all source rays of a chunked trace (recording and hit records use
    global source-ray numbers).  keep_hits=False bins detector hits into histograms instead
    of keeping one record per hit.  join_hits=False returns each detector-record field as its
    list of per-generation pieces (`streaming.Merger` joins all chunks' pieces at once)."""
    if mode not in MODES:
        raise ValueError(f"mode: expected one of {', '.join(MODES)}, found {mode!r}")
    limits = limits or Limits()
    record = record or Recording()
    hit_fn = hit_fn or hit_function(cs, accel)
    compiled = kernel.compiled()
    compile_before = sum(kernel.COMPILE_SECONDS.values())
    rng = np.random.default_rng(seed)
    t0 = time.perf_counter()
    K = _scene_arrays(cs)
    layout = K.layout
    bins = np.zeros(layout.size)
    n_sources = n_sources if n_sources is not None else (int(start.source.max()) + 1 if len(start) else 0)
    paths = PathTrie(n_sources, track_paths, MAX_PATH_NODES, n_bins=layout.size)

    wavelengths, wli = np.unique(start.wavelength, return_inverse=True)
    W = len(wavelengths)
    n_table = np.array([np.broadcast_to(np.asarray(m.index(wavelengths), dtype=float), wavelengths.shape)
                        for m in cs.media])          # (media, wavelengths)
    n_flat = n_table.reshape(-1)

    n = len(start)
    flux0 = start.flux_s + start.flux_p
    thr_root = limits.flux_floor * flux0      # children below this end (per source ray)
    path_thr = max(limits.route_flux_floor, limits.flux_floor) * flux0
    recording = record.mode != "none"
    x0, y0 = _start_points(cs, start, hit_fn)
    med0 = medium_at(cs, x0, y0, start.dx, start.dy)
    # a ray moved back onto its face travels those 2 eps again: start its optical path below 0
    moved = np.hypot(x0 - start.x, y0 - start.y)
    r = {
        "x": x0, "y": y0,
        "dx": start.dx.astype(float), "dy": start.dy.astype(float),
        "fs": start.flux_s.astype(float), "fp": start.flux_p.astype(float),
        "opl": -moved * n_table[med0, wli],
        "wli": wli.astype(np.int64), "med": med0,
        "root": np.arange(n, dtype=np.int64), "start": np.full(n, -1, dtype=np.int64),
        "last": np.full(n, -1, dtype=np.int64), "path": start.source.astype(np.int64),
        "corner_edge": np.full(n, -1, dtype=np.int64),
    }
    if recording:
        r.update(rid=np.arange(n, dtype=np.int64) + root_offset, parent=np.full(n, -1, dtype=np.int64),
                 born=np.full(n, B_SOURCE, dtype=np.int64))
    source_flux = float(flux0.sum())
    batch = sub_batch(np.arange(n, dtype=np.int64) + root_offset)     # of each source ray
    batch_flux = np.bincount(batch, weights=flux0, minlength=SUB_BATCHES)
    batch_bins = np.zeros(SUB_BATCHES * layout.size)
    # the compiled step's ledger work arrays (kernel_step.book_deposits), zeroed once per trace
    ledger_work = (np.zeros(len(bins) + len(batch_bins)), np.zeros(len(bins) + len(batch_bins), dtype=bool)) \
        if compiled else None
    next_id = n + root_offset
    seg_store: dict[str, list[np.ndarray]] | None = {} if recording else None
    hit_store: dict[str, list[np.ndarray]] = {}      # field -> per-generation pieces of the detector records
    hist = _Histograms(cs) if not keep_hits else None
    stats = {"segments": 0, "generations": 0, "vertex_hits": 0, "grazing_hits": 0,
             "medium_mismatches": 0, "tir_events": 0, "source_rays": n}
    budget = (limits.max_memory_mb if limits.memory_share_mb is None else limits.memory_share_mb) * 1e6
    vertex_tol2 = (VERTEX_TOL * cs.eps) ** 2
    # the optional rows the compiled step writes (kernel_step.CHILD_STREAMS): a ray table reads
    # the parent rows, birth codes and its per-ray columns, the path tallies the path nodes and
    # events; the last edge differs from the start edge only past a monitor detector, the
    # wavelength index from 0 only with several wavelengths.  Without
    # path tallies a ray's path is its source's: the compiled step reads it per source ray
    # (`source_path`) and the rays carry none.
    step_streams = ((kernel_step.STREAM_PARENT | kernel_step.STREAM_TABLE if recording else 0)
                    | (kernel_step.STREAM_PATHS if paths.enabled else 0)
                    | (kernel_step.STREAM_LAST if K.has[T_DETECT_MONITOR] else 0)
                    | (kernel_step.STREAM_WAVES if W > 1 else 0))
    source_path = r.pop("path") if compiled and not paths.enabled else None
    gen = 0
    seg_rows = hit_rows = 0

    while len(r["x"]):
        m = len(r["x"])
        # --- limits that end rays before they are traced
        if gen > limits.max_generations:
            _truncate(r, np.ones(m, dtype=bool), layout.trunc0 + TRUNC_DEPTH, bins, paths, seg_store,
                      record, root_offset, gen, wavelengths, batch, batch_bins)
            break
        room = limits.segment_budget - stats["segments"]
        if m > room:
            over = np.zeros(m, dtype=bool)
            over[max(room, 0):] = True
            _truncate(r, over, layout.trunc0 + TRUNC_BUDGET, bins, paths, seg_store, record,
                      root_offset, gen, wavelengths, batch, batch_bins)
            r = {k: v[~over] for k, v in r.items()}
            m = len(r["x"])
            if m == 0:
                break
        # kept rows are held twice at the end: the per-generation pieces and their concatenation
        kept = KEPT_COPIES * (seg_rows * BYTES_PER_SEGMENT_ROW + hit_rows * BYTES_PER_HIT)
        if m * BYTES_PER_LIVE_RAY + kept > budget:
            raise BudgetExceeded(
                f"generation {gen} has {m:,} live rays (about {m * BYTES_PER_LIVE_RAY / 1e6:,.0f} MB) and "
                f"{seg_rows:,} ray-table rows and {hit_rows:,} detector records are kept (about {kept / 1e6:,.0f} MB), "
                f"more than {_share_text(limits)}{memory_limit_text(limits.max_memory_mb)}; or trace "
                f"fewer rays, raise the flux floor (--flux-floor), record fewer rays (--record first:N, "
                f"record=\"first\" in Python) or bin detector hits (hits=\"histogram\" in Python)")
        stats["generations"] += 1
        stats["segments"] += m
        if progress is not None:
            progress(stats)

        x, y, dx, dy = r["x"], r["y"], r["dx"], r["dy"]
        fs, fp, med = r["fs"], r["fp"], r["med"]
        # --- nearest hit (with the corner rules, see _corner_hits), then travel to it
        t, e, at_vertex = _corner_hits(cs, K, r, hit_fn, vertex_tol2, stats, compiled)
        if compiled:
            # the corner rules read the children's parent rows too
            streams = step_streams | (kernel_step.STREAM_PARENT if at_vertex is not None else 0)
            step = _compiled_step(cs, K, r, t, e, n_flat, W, thr_root, mode, rng, layout, streams, bins, batch_bins,
                                  batch, ledger_work, source_path)
            r, next_id, seg_rows, new_hits = _after_compiled_step(
                cs, K, r, e, step, streams, paths, path_thr, recording, record, root_offset, next_id, seg_store,
                seg_rows, hit_store, hist, wavelengths, at_vertex, gen, stats)
            hit_rows += new_hits
            gen += 1
            continue
        # --- the reference array code of the step that kernel_step.interface_step compiles
        esc = e < 0
        L = np.where(esc, 0.0, t)
        codes: list[np.ndarray] = []      # ledger deposits of this generation
        fluxes: list[np.ndarray] = []
        nodes: list[np.ndarray] = []
        batches: list[np.ndarray] = []
        path = r["path"]
        ray_batch = batch[r["root"]]

        def deposit(code, flux, rows):
            codes.append(code)
            fluxes.append(flux)
            nodes.append(path[rows])
            batches.append(ray_batch[rows])

        fs_start, fp_start = fs, fp
        if K.absorbing:
            a = K.alpha[med]
            keep = np.exp(-a * L)
            keep[esc & (a > 0)] = 0.0          # an absorbing ambient swallows what leaves
            lost = (fs + fp) * (1.0 - keep)
            ab = np.flatnonzero(lost > 0)
            if len(ab):
                deposit(layout.bulk0 + med[ab], lost[ab], ab)
            fs = fs * keep
            fp = fp * keep
            esc_live = esc & (keep > 0)
        else:
            esc_live = esc
        mw = med * W + r["wli"] if W > 1 else med
        n_here = n_flat[mw]
        opl = r["opl"] + n_here * L
        hx = x + L * dx
        hy = y + L * dy
        treat = K.treat[e]
        end = np.full(m, E_ESCAPED, dtype=np.int64) if recording else None
        if recording and K.absorbing:
            end[esc & ~esc_live] = E_ABSORBED

        # --- escapes
        ie = np.flatnonzero(esc_live)
        if len(ie):
            deposit(K.escape_code[r["last"][ie]], fs[ie] + fp[ie], ie)

        # children: (rows, dx, dy, fs, fp, medium, last, event, born); the arrays run over all m
        # rays of this generation and `rows` picks the parents, so nothing is gathered twice
        kids: list[tuple] = []

        # --- detectors
        if K.has[T_DETECT_ABSORB] or K.has[T_DETECT_MONITOR]:
            idet = np.flatnonzero(treat == T_DETECT_ABSORB) if not K.has[T_DETECT_MONITOR] else \
                np.flatnonzero((treat == T_DETECT_ABSORB) | (treat == T_DETECT_MONITOR))
            if len(idet):
                ed = e[idet]
                _store_hits(hit_store, hist, cs, idet, ed, hx[idet], hy[idet], dx[idet], dy[idet],
                            fs[idet], fp[idet], wavelengths[r["wli"][idet]], opl[idet], path[idet],
                            r["root"][idet] + root_offset)
                absorb = treat[idet] == T_DETECT_ABSORB
                ia = idet[absorb]
                if len(ia):
                    deposit(cs.detector[e[ia]], fs[ia] + fp[ia], ia)
                    if recording:
                        end[ia] = E_DETECTED
                ip = idet[~absorb]
                if len(ip):
                    if recording:
                        end[ip] = E_PASSED
                    kids.append((ip, dx, dy, fs, fp, med, r["last"], EV_PASS, B_PASSED))

        # --- absorbing faces
        if K.has[T_ABSORBER]:
            ab = np.flatnonzero(treat == T_ABSORBER)
            if len(ab):
                deposit(layout.face0 + e[ab], fs[ab] + fp[ab], ab)
                if recording:
                    end[ab] = E_ABSORBED

        # --- mirrors: reflect R, absorb the rest at the face
        if K.has[T_MIRROR]:
            mi = np.flatnonzero(treat == T_MIRROR)
            if len(mi):
                nx, ny = _normals(cs, K, e, hx, hy)
                rdx, rdy = fresnel.reflect(dx, dy, nx, ny)
                _unit(rdx, rdy)
                R = K.reflectance[e]
                em = e[mi]
                deposit(layout.face0 + em, (fs[mi] + fp[mi]) * (1 - R[mi]), mi)
                if recording:
                    end[mi] = E_REFLECTED
                kids.append((mi, rdx, rdy, fs * R, fp * R, med, e, EV_MIRROR, B_MIRROR))

        # --- dielectric interfaces (bare or anti-reflection)
        if K.has[T_BARE] or K.has[T_AR]:
            di = np.flatnonzero(treat == T_BARE) if not K.has[T_AR] else \
                np.flatnonzero((treat == T_BARE) | (treat == T_AR))
            if len(di):
                _interfaces(cs, K, r, di, e, hx, hy, fs, fp, treat, n_flat, W, mode, rng, stats, end, kids)

        if seg_store is not None:
            ex = np.where(esc, hx + 3 * cs.scale * dx, hx)
            ey = np.where(esc, hy + 3 * cs.scale * dy, hy)
            seg_rows += _record_segments(seg_store, record, r, root_offset, ex, ey, opl, end, e, gen)
        if hit_store:
            hit_rows = sum(len(v) for v in hit_store["root"])

        # --- the next generation: children that carry enough flux
        r, next_id = _next_generation(r, kids, thr_root, path_thr, paths, layout, K, recording,
                                      next_id, hx, hy, e, opl, deposit, n_here,
                                      at_vertex, cs)

        if codes:
            code = np.concatenate(codes)
            flux = np.concatenate(fluxes)
            bins += np.bincount(code, weights=flux, minlength=len(bins))
            batch_bins += np.bincount(np.concatenate(batches) * layout.size + code, weights=flux,
                                      minlength=len(batch_bins))
            if paths.enabled:
                paths.deposit(code, np.concatenate(nodes), flux)
        gen += 1

    stats["elapsed_s"] = time.perf_counter() - t0
    # first calls of the compiled kernel in this process (loading it from the cache, or compiling)
    stats["kernel_start_s"] = sum(kernel.COMPILE_SECONDS.values()) - compile_before
    stats["events"] = stats["segments"]
    if seg_store is not None and seg_store:
        segments = _segment_table(seg_store, wavelengths)
    elif seg_store is not None:
        segments = _segment_table({}, wavelengths)
    else:
        segments = None
    return RawTrace(
        bins=bins, source_flux=source_flux, segments=segments,
        hits={k: np.concatenate(v) if join_hits else v for k, v in hit_store.items()},
        path_parent=paths.parent.copy(), path_code=paths.code.copy(),
        path_flux=paths.flux_dict() if paths.enabled else {}, wavelengths=wavelengths, stats=stats,
        histograms=hist.to_dict() if hist is not None else None,
        batch_bins=batch_bins.reshape(SUB_BATCHES, layout.size), batch_flux=batch_flux)


def _owned(v: np.ndarray) -> np.ndarray:
    """`v`, copied if it is a view: a detector-record piece kept until the merge must own its
    memory.  The compiled step's records are rows of buffers sized for all the generation's
    live rays (16 times the records on the light pipe); kept as views, every generation's whole
    buffers would stay alive (3.9 GB instead of 1.0 GB on the 1e6-ray light pipe)."""
    return v.copy() if v.base is not None else v


def _share_text(limits: Limits) -> str:
    if limits.memory_share_mb is None:
        return ""
    return f"this chunk's share ({limits.memory_share_mb:,.0f} MB) of "


def _normals(cs, K, e, hx, hy):
    """Unit geometric normals at hit points: table lookups for lines, computed for arcs."""
    nx = K.nx[e]
    ny = K.ny[e]
    if K.has_arcs:
        arc = np.flatnonzero(K.is_arc[e])
        if len(arc):
            ea = e[arc]
            ax = hx[arc] - K.cx[ea]
            ay = hy[arc] - K.cy[ea]
            # by the vector's own length, not the radius: a hit a rounding error off the
            # circle still gets a unit normal
            L = np.sqrt(ax * ax + ay * ay)
            L[L == 0] = 1.0
            nx[arc] = ax / L
            ny[arc] = ay / L
    return nx, ny


def _unit(vx, vy):
    """Renormalise directions in place against rounding, so they stay unit vectors over many
    bounces (sqrt of the sum of squares: hypot is exact but several times slower)."""
    n = vx * vx
    n += vy * vy
    np.sqrt(n, out=n)
    n[n == 0] = 1.0
    vx /= n
    vy /= n


def _interfaces(cs, K, r, di, e, hx, hy, fs, fp, treat, n_flat, W, mode, rng, stats, end, kids):
    """Fresnel physics at bare and anti-reflection faces.

    Computed for every ray of the generation (rows `di` are the ones at such a face): on a
    virtual machine gathering the subset first costs more than the arithmetic on the few other
    rays, whose results are simply not used."""
    dx, dy = r["dx"], r["dy"]
    with np.errstate(invalid="ignore", divide="ignore"):
        nx, ny = _normals(cs, K, e, hx, hy)
        cos_raw = dx * nx + dy * ny
        from_plus = cos_raw < 0                      # travelling against the normal
        mp, mm = K.med_plus[e], K.med_minus[e]
        graze = np.abs(cos_raw) < GRAZING_COS
        if graze.any():
            # too close to tangent for the sign of d.n to tell the side: the ray's own medium does
            from_plus = np.where(graze, mp == r["med"], from_plus)
        m_from = np.where(from_plus, mp, mm)
        m_to = np.where(from_plus, mm, mp)
        if W > 1:
            wli = r["wli"]
            n1 = n_flat[m_from * W + wli]
            n2 = n_flat[m_to * W + wli]
        else:
            n1 = n_flat[m_from]
            n2 = n_flat[m_to]
        ci = np.abs(cos_raw)
        # normal pointing back into the incident medium
        sgn = np.where(from_plus, 1.0, -1.0)
        bnx = nx * sgn
        bny = ny * sgn
        cos_t, tir = fresnel.snell_cos_t(n1, n2, ci)
        Rs, Rp = fresnel.fresnel_rs_rp(n1, n2, ci, cos_t, tir)
        if K.has[T_AR]:
            ar = (treat == T_AR) & ~tir
            if ar.any():
                Rs = np.where(ar, 0.0, Rs)
                Rp = np.where(ar, 0.0, Rp)
        two_ci = 2 * ci
        rdx = dx + two_ci * bnx
        rdy = dy + two_ci * bny
        _unit(rdx, rdy)
        tdx, tdy = fresnel.refract(dx, dy, bnx, bny, n1 / n2, ci, cos_t)
        _unit(tdx, tdy)
    all_rays = len(di) == len(dx)
    sub = (lambda v: v) if all_rays else (lambda v: v[di])
    tir_d = sub(tir)
    n_tir = int(np.count_nonzero(tir_d))
    stats["tir_events"] += n_tir
    stats["medium_mismatches"] += int(np.count_nonzero(sub(m_from != r["med"])))
    stats["grazing_hits"] += int(np.count_nonzero(sub(ci) < GRAZING_COS))
    ev_r = np.where(tir, EV_TIR, EV_REFLECT) if n_tir else EV_REFLECT
    born_r = np.where(tir, B_TIR, B_REFLECTED) if n_tir else B_REFLECTED
    if mode == BRANCHING:
        if end is not None:
            end[di] = np.where(tir_d, E_TIR, E_REFRACTED)
        kids.append((di, rdx, rdy, fs * Rs, fp * Rp, m_from, e, ev_r, born_r))
        tr = di[~tir_d] if n_tir else di
        if len(tr):
            kids.append((tr, tdx, tdy, fs * (1 - Rs), fp * (1 - Rp), m_to, e, EV_THROUGH, B_REFRACTED))
        return

    # Monte Carlo: reflect with probability R, carry the whole flux on, s and p reweighted
    f = fs + fp
    with np.errstate(invalid="ignore", divide="ignore"):
        R = np.where(f > 0, (fs * Rs + fp * Rp) / np.where(f > 0, f, 1.0), 0.0)
        sr = np.where(R > 0, 1.0 / R, 0.0)
        st = np.where(R < 1, 1.0 / (1.0 - R), 0.0)
    refl = rng.random(len(di)) < R[di]
    if end is not None:
        end[di] = np.where(tir_d, E_TIR, np.where(refl, E_REFLECTED, E_REFRACTED))
    s = di[refl]
    if len(s):
        kids.append((s, rdx, rdy, fs * Rs * sr, fp * Rp * sr, m_from, e, ev_r, born_r))
    t_ = di[~refl]
    if len(t_):
        kids.append((t_, tdx, tdy, fs * (1 - Rs) * st, fp * (1 - Rp) * st, m_to, e, EV_THROUGH, B_REFRACTED))


def _next_generation(r, kids, thr_root, path_thr, paths, layout, K, recording, next_id, hx, hy, e, opl,
                     deposit, n_here, at_vertex=None, cs=None):
    """Gather the surviving children into the next generation's arrays.

    A child whose flux is below its source ray's threshold ends here: its flux is booked as
    truncated (with the parent's path).  A child below the path threshold keeps going but its
    path is lumped into "other paths" (so are its descendants, which are fainter still)."""
    if not kids:
        return {k: v[:0] for k, v in r.items()}, next_id
    root = r["root"]
    thr = thr_root[root]
    good = []
    for kid in kids:
        rows, kfs, kfp = kid[0], kid[3], kid[4]
        f = kfs + kfp
        ok = (f >= thr) & (f > 0)        # a zero-flux child ends even when the threshold is 0
        if len(rows) != len(root):
            ok = ok[rows]
        if not ok.all():
            bad = rows[~ok]
            deposit(np.full(len(bad), layout.trunc0 + TRUNC_FLUX), kfs[bad] + kfp[bad], bad)
            rows = rows[ok]
        good.append(rows)
    parts = [(g, k) for g, k in zip(good, kids) if len(g)]
    if not parts:
        return {k: v[:0] for k, v in r.items()}, next_id
    one = len(parts) == 1

    def col(j):
        vals = [k[j][g] if isinstance(k[j], np.ndarray) else np.full(len(g), k[j], dtype=np.int64)
                for g, k in parts]
        return vals[0] if one else np.concatenate(vals)

    pidx = parts[0][0] if one else np.concatenate([g for g, _ in parts])
    start = e[pidx]
    same_last = all(k[6] is e for _, k in parts)
    ox, oy, oopl = hx[pidx], hy[pidx], opl[pidx]
    is_pass = [np.isscalar(k[7]) and k[7] == EV_PASS for _, k in parts]
    if any(is_pass):
        # a ray that passed a detector goes on from 2 eps before the crossing, so a face lying
        # under the detector is still met (the detector edge itself is excluded as start edge)
        passed = np.concatenate([np.full(len(g), p) for (g, _), p in zip(parts, is_pass)])
        back = 2.0 * K.eps
        ox = np.where(passed, ox - back * col(1), ox)
        oy = np.where(passed, oy - back * col(2), oy)
        oopl = np.where(passed, oopl - back * n_here[pidx], oopl)   # the 2 eps are travelled again
    out = {"x": ox, "y": oy, "dx": col(1), "dy": col(2), "fs": col(3), "fp": col(4),
           "med": col(5), "start": start, "last": start if same_last else col(6), "opl": oopl,
           "wli": r["wli"][pidx], "root": root[pidx], "corner_edge": np.full(len(pidx), -1, dtype=np.int64)}
    if at_vertex is not None:
        _corner_children(cs, out, np.flatnonzero(at_vertex[pidx]))
    next_id = _child_paths_and_ids(out, r, pidx, start, col(7), col(8) if recording else None, paths,
                                   path_thr, K, next_id)
    return out, next_id


def _child_paths_and_ids(out, r, pidx, start, ev, born, paths, path_thr, K, next_id, parent_path=None):
    """The children's path nodes (parent's path extended by the event, or "other paths" for
    faint rays) and, when a ray table is recorded (`born` given), their ids and parents.
    pidx (the parents' rows) is needed only then or without parent_path."""
    if paths.enabled:
        if parent_path is None:
            parent_path = r["path"][pidx]
        bright = (out["fs"] + out["fp"]) >= path_thr[out["root"]]
        if bright.all():
            out["path"] = paths.extend(parent_path, start * N_EVENT_KINDS + ev, K.n_codes)
        else:
            node = np.full(len(start), paths.other_node(), dtype=np.int64)
            b = np.flatnonzero(bright)
            node[b] = paths.extend(parent_path[b], start[b] * N_EVENT_KINDS + ev[b], K.n_codes)
            out["path"] = node
    elif "path" in r:       # (the compiled kernel keeps no path per ray without path tallies)
        out["path"] = r["path"][pidx] if parent_path is None else parent_path
    if born is not None:
        k = len(pidx)
        out["rid"] = np.arange(next_id, next_id + k, dtype=np.int64)
        out["parent"] = r["rid"][pidx]
        out["born"] = born
        next_id += k
    return next_id


def _record_segments(seg_store, record, r, root_offset, ex, ey, opl, end, e, gen) -> int:
    """Append this generation's segments of the recorded source rays to the ray table; returns
    the number of rows added."""
    root = r["root"] + root_offset if root_offset else r["root"]
    want = record.wants(root)
    if want is None:
        return 0
    n_want = np.count_nonzero(want)     # (one pass, where all() and any() took two)
    if n_want == 0:
        return 0
    every = n_want == len(want)         # the usual case (a GUI fan, record="all"): no selection
    cols = {"x": r["x"], "y": r["y"], "ex": ex, "ey": ey, "dx": r["dx"], "dy": r["dy"], "fs": r["fs"],
            "fp": r["fp"], "med": r["med"], "opl": opl, "root": root,
            "rid": r["rid"], "parent": r["parent"], "born": r["born"], "end": end,
            "edge": e, "wli": r["wli"]}
    if not every:
        cols = {k: v[want] for k, v in cols.items()}
    cols["gen"] = np.full(len(cols["x"]), gen, dtype=np.int64)
    for k, v in cols.items():
        seg_store.setdefault(k, []).append(v)
    return len(cols["x"])


_NO_DRAWS = np.zeros(0)


def _compiled_step(cs, K, r, t, e, n_flat, W, thr_root, mode, rng, layout, streams, bins, batch_bins, batch,
                   ledger_work, source_path=None):
    """kernel_step.interface_step for this generation, with the Monte Carlo draws the array
    code would take (one per ray at a dielectric face, in ray order).  streams: the optional
    rows to write (kernel_step.STREAM_*): parent rows for a ray table or the corner rules,
    path nodes and events for path tallies, birth codes and the per-ray columns for a ray table.
    The generation's deposits go into `bins` and `batch_bins` (per sub-batch `batch` of each
    source ray) in the step, with ledger_work's zeroed arrays.  source_path: each source ray's
    path when the rays carry none (no path tallies)."""
    mc = mode == MONTE_CARLO
    u = _NO_DRAWS
    if mc:
        tr = K.treat[e]
        n_di = int(np.count_nonzero((tr == T_BARE) | (tr == T_AR)))
        if n_di:
            u = rng.random(n_di)
    c = np.ascontiguousarray
    state = [c(r[k]) for k in _STEP_STATE[:-1]]
    state.append(c(r["path"]) if source_path is None else source_path)
    return timed_first_call("interface step", lambda: kernel_step.interface_step(
        *state, t, e, K.edge_float, K.edge_int, n_flat, K.alpha, thr_root, int(W), bool(K.absorbing), mc,
        int(layout.bulk0), int(layout.face0), int(layout.trunc0 + TRUNC_FLUX), float(cs.eps), float(cs.scale),
        u, bins, batch_bins, batch, *ledger_work, int(streams)))


_STEP_STATE = ("x", "y", "dx", "dy", "fs", "fp", "opl", "wli", "med", "root", "last", "path")


def _after_compiled_step(cs, K, r, e, step, streams, paths, path_thr, recording, record, root_offset, next_id,
                         seg_store, seg_rows, hit_store, hist, wavelengths, at_vertex, gen, stats):
    """Book what the compiled step produced (it has added the ledger deposits itself): stats,
    detector records, ray table and path deposits; returns the next generation, next_id, the ray-table rows and the detector
    records kept (for the memory check)."""
    (end, PF), (DI, dflux), children, (HF, HI), counts = step
    n_tir, n_mismatch, n_graze, _ = counts.tolist()
    stats["tir_events"] += n_tir
    stats["medium_mismatches"] += n_mismatch
    stats["grazing_hits"] += n_graze
    kept_hits = 0
    if HI.shape[1]:
        pos, angle, hfs, hfp, hopl = HF
        det, row, hwli, hpath, hroot, hfront = HI
        if hist is not None:
            hist.add(det, pos, angle, hfs, hfp, hroot + root_offset, r["dx"][row], r["dy"][row])
        else:
            for k, v in (("detector", det), ("position", pos), ("angle_deg", angle), ("front", hfront.astype(bool)),
                         ("flux_s", hfs), ("flux_p", hfp), ("wavelength_nm", wavelengths[hwli]),
                         ("optical_path", hopl), ("path", hpath), ("root", hroot + root_offset)):
                hit_store.setdefault(k, []).append(_owned(v))
            kept_hits = HI.shape[1]
    if seg_store is not None:
        ex, ey, opl = PF
        seg_rows += _record_segments(seg_store, record, r, root_offset, ex, ey, opl, end, e, gen)
    # the step has added the deposits to the ledger bins (kernel_step.book_deposits); the path
    # tallies book them by the path of the ray each comes from (row DI[1])
    if paths.enabled and len(dflux):
        paths.deposit(DI[0], r["path"][DI[1]], dflux)
    CF, CI = children
    # the children's rows are named as the ray state's (kernel_step.CHILD_*_ROWS); of the
    # optional ones, those asked for (see the trace loop)
    out = dict(zip(kernel_step.CHILD_FLOAT_ROWS, CF))
    out.update(zip(kernel_step.CHILD_INT_ROWS, CI))
    rows = kernel_step.CHILD_LAYOUTS[streams]
    pidx, cpath, cev, cborn, clast, cwli = (CI[rows[k]] if k in rows else None
                                            for k in ("parent", "path", "event", "born", "last", "wli"))
    start = out["start"]
    out["last"] = start if clast is None else clast     # as the array code: one array for both
    out["wli"] = _zero_rows(len(start)) if cwli is None else cwli
    # (no "corner_edge" row: _corner_children adds one when a child gets a corner edge)
    if at_vertex is not None:
        _corner_children(cs, out, np.flatnonzero(at_vertex[pidx]))
    next_id = _child_paths_and_ids(out, r, pidx, start, cev, cborn, paths, path_thr,
                                   K, next_id, parent_path=cpath)
    return out, next_id, seg_rows, kept_hits


_ZERO_ROWS = np.zeros(0, dtype=np.int64)
_NO_ROWS = np.zeros(0, dtype=np.int64)


def _zero_rows(n: int) -> np.ndarray:
    """n zeros (the wavelength index of a one-wavelength trace): a view of one shared array, so
    no generation clears memory for it; nothing writes into a ray's wavelength index."""
    global _ZERO_ROWS
    z = _ZERO_ROWS
    if len(z) < n:      # (threads racing here each make a big enough one: harmless)
        z = _ZERO_ROWS = np.zeros(max(n, 2 * len(z)), dtype=np.int64)
    return z[:n]


def _vertex_groups(cs: CompiledScene):
    """Boundary edges grouped by the vertices they end at: (group of each edge's start, group of
    each edge's end, CSR offsets, edges of each group).  Vertices closer than VERTEX_TOL eps are one."""
    cache = cs.__dict__.setdefault("_accel_cache", {})
    if "vertex_groups" in cache:
        return cache["vertex_groups"]
    q = 1.0 / (VERTEX_TOL * cs.eps)
    keys: dict[tuple[int, int], int] = {}
    n = cs.n_edges
    group = np.empty(2 * n, dtype=np.int64)
    for i, (px, py) in enumerate(zip(np.concatenate([cs.x0, cs.x1]), np.concatenate([cs.y0, cs.y1]))):
        cx, cy = int(round(px * q)), int(round(py * q))
        g = keys.get((cx, cy))
        if g is None:   # also look in the neighbouring cells: no near pair split by rounding
            g = next((keys[(cx + a, cy + b)] for a in (-1, 0, 1) for b in (-1, 0, 1)
                      if (cx + a, cy + b) in keys), None)
        if g is None:
            g = keys[(cx, cy)] = len(keys)
        group[i] = g
    boundary = np.concatenate([cs.detector < 0, cs.detector < 0])
    edge_of = np.concatenate([np.arange(n), np.arange(n)])
    order = np.argsort(np.where(boundary, group, len(keys)), kind="stable")
    order = order[boundary[order]]
    counts = np.bincount(group[order], minlength=len(keys))
    offsets = np.concatenate([[0], np.cumsum(counts)])
    cache["vertex_groups"] = (group[:n], group[n:], offsets, edge_of[order])
    return cache["vertex_groups"]


def _first_hit(cs, K, x, y, dx, dy, start, hit_fn):
    """Nearest hit; a detector drawn on a face is met first: it records the ray, then the face acts."""
    t, e = hit_fn(cs, x, y, dx, dy, start)
    if K.detectors_touch_boundary:
        td, ed = nearest_hit(cs, x, y, dx, dy, start, edge_ids=K.detector_ids)
        first = (ed >= 0) & (ed != e) & (td <= t + cs.eps)
        if first.any():
            t = np.where(first, td, t)
            e = np.where(first, ed, e)
    return t, e


def _near_vertex(cs, K, e, hx, hy, tol2):
    """Hits on a boundary edge within sqrt(tol2) of one of its end points."""
    ev = np.where(e >= 0, e, -1)
    d2 = np.minimum((hx - K.x0[ev]) ** 2 + (hy - K.y0[ev]) ** 2, (hx - K.x1[ev]) ** 2 + (hy - K.y1[ev]) ** 2)
    return (e >= 0) & (d2 < tol2) & (K.treat[ev] < T_DETECT_ABSORB)


def _corner_hits(cs, K, r, hit_fn, tol2, stats, compiled=False):
    """Nearest hit of every ray, with the corner rules.  Returns (t, e, at_vertex).

    A hit on a vertex belongs to every edge meeting there.  The medium is probed CORNER_PROBE
    eps past the hit along the ray:
    - the same medium as the ray's: the ray passes straight on, with no event, and its segment
      runs on to the next hit beyond (searched from the probe point, so it agrees with the probe);
    - another medium: the edge between the two acts.  The edge the search met, if it is such an
      edge (it is the one a ray just off the vertex really meets); else the lowest-numbered one
      among the edges ending at the vertex; else (no edge fits) the search's edge.
    A ray with a corner edge (`corner_edge`, set by _corner_children) meets it where it starts,
    at t = 0.  `at_vertex` marks the rows whose hit is at a vertex: their children are checked
    by _corner_children."""
    x, y, dx, dy, med = r["x"], r["y"], r["dx"], r["dy"], r["med"]
    t, e = _first_hit(cs, K, x, y, dx, dy, r["start"], hit_fn)
    corner_edge = r.get("corner_edge")      # None: no ray has one (compiled kernel)
    forced = _NO_ROWS if corner_edge is None else np.flatnonzero(corner_edge >= 0)
    if compiled:        # the same test as _near_vertex, in one compiled pass
        idx = kernel_step.vertex_candidates(x, y, dx, dy, t, e, K.x0, K.y0, K.x1, K.y1, K.treat, tol2)
        if len(forced) == 0 and len(idx) == 0:
            return t, e, None
        at_vertex = np.zeros(len(x), dtype=bool)
        at_vertex[idx] = True
    else:
        hit = e >= 0
        at_vertex = _near_vertex(cs, K, e, x + np.where(hit, t, 0.0) * dx, y + np.where(hit, t, 0.0) * dy, tol2)
        idx = np.flatnonzero(at_vertex)
        if len(forced) == 0 and len(idx) == 0:
            return t, e, at_vertex
    events = len(forced)
    t, e = t.copy(), e.copy()
    if len(forced):
        t[forced] = 0.0
        e[forced] = corner_edge[forced]
        at_vertex[forced] = True
        idx = np.setdiff1d(idx, forced, assume_unique=True)
    step = CORNER_PROBE * cs.eps
    for _ in range(CORNER_ROUNDS):
        if len(idx) == 0:
            break
        events += len(idx)
        hx, hy = x[idx] + t[idx] * dx[idx], y[idx] + t[idx] * dy[idx]
        px, py = hx + step * dx[idx], hy + step * dy[idx]
        beyond = medium_at(cs, px, py, dx[idx], dy[idx])
        act = np.flatnonzero(beyond != med[idx])
        if len(act):
            ia = idx[act]
            e[ia], _ = _corner_edge(cs, hx[act], hy[act], dx[ia], dy[ia], med[ia], beyond[act], e[ia], own="prefer")
        on = beyond == med[idx]
        idx, px, py = idx[on], px[on], py[on]
        if len(idx) == 0:
            break
        # pass straight on: the segment goes on from the probe point to the next hit
        t2, e2 = _first_hit(cs, K, px, py, dx[idx], dy[idx], np.full(len(idx), -1, dtype=np.int64), hit_fn)
        t[idx] = t[idx] + step + t2
        e[idx] = e2
        h = e2 >= 0
        tt = np.where(h, t[idx], 0.0)
        again = _near_vertex(cs, K, e2, x[idx] + tt * dx[idx], y[idx] + tt * dy[idx], tol2)
        at_vertex[idx] = again
        idx = idx[again]
    stats["vertex_hits"] += events
    return t, e, at_vertex


def _corner_edge(cs, hx, hy, dx, dy, med, beyond, near, own):
    """For rays at a vertex: the boundary edge ending there that has the ray's medium `med` on
    the side the ray comes from and `beyond` on the other.  The vertex is the end of edge `near`
    closest to the hit.  own="prefer": `near` itself if it fits, else the lowest-numbered edge
    that fits; own="skip": the lowest-numbered fitting edge other than `near` (for a child
    leaving `near`).  Returns (edges, fitted); where none fits the edge is `near`."""
    g_start, g_end, offsets, members = _vertex_groups(cs)
    at_start = (hx - cs.x0[near]) ** 2 + (hy - cs.y0[near]) ** 2 <= (hx - cs.x1[near]) ** 2 + (hy - cs.y1[near]) ** 2
    g = np.where(at_start, g_start[near], g_end[near])
    sizes = offsets[g + 1] - offsets[g]
    rows = np.repeat(np.arange(len(g)), sizes)
    local = np.arange(len(rows)) - np.repeat(np.cumsum(sizes) - sizes, sizes)
    cols = members[offsets[g][rows] + local]
    out = near.copy()
    fitted = np.zeros(len(near), dtype=bool)
    if len(rows) == 0:
        return out, fitted
    nx, ny = edge_normal(cs, cols, hx[rows], hy[rows])
    cos = dx[rows] * nx + dy[rows] * ny
    cur, nxt = med[rows], beyond[rows]
    fits = ((cs.med_plus[cols] == cur) & (cs.med_minus[cols] == nxt) & (cos < 0)) | \
           ((cs.med_minus[cols] == cur) & (cs.med_plus[cols] == nxt) & (cos > 0))
    own_edge = cols == near[rows]
    if own == "skip":
        fits &= ~own_edge
    # the lowest fitting edge per ray: assign the fitting pairs from the highest edge down
    fit = np.flatnonzero(fits)
    order = fit[np.argsort(-cols[fit], kind="stable")]
    out[rows[order]] = cols[order]
    fitted[rows[fit]] = True
    if own == "prefer":
        keep = rows[fits & own_edge]
        out[keep] = near[keep]
    return out, fitted


def _corner_children(cs, out, rows) -> None:
    """Children born at a vertex: where a child heads across another edge ending at that vertex,
    it meets that edge at once.

    The medium is probed CORNER_PROBE eps along each child.  The same medium as the child's: it
    goes on.  Another medium: the edge between the two (other than the one the child leaves)
    becomes the child's corner edge, met at t = 0 in the next generation, so a ray in an
    inside corner reflects off both walls (or refracts at both faces) as a ray just off the
    vertex does.  No such edge: the child takes the medium found, so it never travels through
    one material while being traced as another."""
    if len(rows) == 0:
        return
    step = CORNER_PROBE * cs.eps
    dx, dy = out["dx"][rows], out["dy"][rows]
    hx, hy = out["x"][rows], out["y"][rows]
    probe = medium_at(cs, hx + step * dx, hy + step * dy, dx, dy)
    off = np.flatnonzero(probe != out["med"][rows])
    if len(off) == 0:
        return
    rr = rows[off]
    edge, fitted = _corner_edge(cs, hx[off], hy[off], dx[off], dy[off], out["med"][rr], probe[off],
                                out["start"][rr], own="skip")
    if fitted.any():
        if "corner_edge" not in out:        # (the compiled kernel's children come without one)
            out["corner_edge"] = np.full(len(out["x"]), -1, dtype=np.int64)
        out["corner_edge"][rr[fitted]] = edge[fitted]
    out["med"][rr[~fitted]] = probe[off][~fitted]


def _truncate(r, mask, code, bins, paths, seg_store, record, root_offset, gen, wavelengths, batch, batch_bins):
    f = r["fs"][mask] + r["fp"][mask]
    bins[code] += f.sum()
    per_batch = np.bincount(batch[r["root"][mask]], weights=f, minlength=SUB_BATCHES)
    batch_bins[code::len(bins)] += per_batch
    if paths.enabled:
        paths.deposit(np.full(len(f), code), r["path"][mask], f)
    if seg_store is not None:
        root = r["root"][mask] + root_offset
        want = record.wants(root)
        if want is not None and want.any():
            sub = {k: v[mask][want] for k, v in r.items()}
            k = len(sub["x"])
            cols = {"x": sub["x"], "y": sub["y"], "ex": sub["x"], "ey": sub["y"], "dx": sub["dx"],
                    "dy": sub["dy"], "fs": sub["fs"], "fp": sub["fp"], "med": sub["med"], "opl": sub["opl"],
                    "root": root[want], "rid": sub["rid"], "parent": sub["parent"], "born": sub["born"],
                    "end": np.full(k, E_TRUNCATED, dtype=np.int64), "edge": np.full(k, -1, dtype=np.int64),
                    "wli": sub["wli"], "gen": np.full(k, gen, dtype=np.int64)}
            for key, v in cols.items():
                seg_store.setdefault(key, []).append(v)


SEGMENT_COLUMNS = ("ray_id", "parent_id", "generation", "source_ray", "x0", "y0", "x1", "y1", "dx", "dy",
                   "wavelength_nm", "flux_s", "flux_p", "medium", "born", "end", "end_edge", "optical_path")
_SEG_SOURCE = {"ray_id": "rid", "parent_id": "parent", "generation": "gen", "source_ray": "root",
               "x0": "x", "y0": "y", "x1": "ex", "y1": "ey", "dx": "dx", "dy": "dy", "flux_s": "fs",
               "flux_p": "fp", "medium": "med", "born": "born", "end": "end", "end_edge": "edge",
               "optical_path": "opl"}


def _segment_table(store, wavelengths):
    out = {}
    for name in SEGMENT_COLUMNS:
        if name == "wavelength_nm":
            w = store.get("wli")
            out[name] = wavelengths[np.concatenate(w)] if w else np.zeros(0)
            continue
        v = store.get(_SEG_SOURCE[name])
        is_int = name not in ("x0", "y0", "x1", "y1", "dx", "dy", "flux_s", "flux_p", "optical_path")
        out[name] = np.concatenate(v) if v else np.zeros(0, dtype=np.int64 if is_int else float)
    return out


def medium_at(cs: CompiledScene, x, y, dx=None, dy=None, _probe: int = 0) -> np.ndarray:
    """Medium each ray starts in: cast it and read the medium on the near side of the first
    boundary it meets (ambient when it meets none).

    With directions given (a source's rays) each ray is cast along its own direction, so a ray
    that starts exactly on a face is in the medium it is heading into, and its medium always
    agrees with its first interface.  Without, fixed irrational-ish directions are used (they
    avoid passing exactly through vertices of axis-aligned parts).  A cast whose first boundary
    hit grazes the edge or lands on a vertex cannot tell the side: those points are cast again
    in the next fixed direction (PROBE_ANGLES)."""
    n = len(x)
    if n == 0:
        return np.zeros(0, dtype=np.int64)
    fixed = dx is None or dy is None
    if fixed:
        ang = PROBE_ANGLES[_probe]
        dx = np.full(n, np.cos(ang))
        dy = np.full(n, np.sin(ang))
    else:
        dx = np.asarray(dx, float)
        dy = np.asarray(dy, float)
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    hit_fn = hit_function(cs)
    t, e = hit_fn(cs, x, y, dx, dy, np.full(n, -1, dtype=np.int64))
    # detectors are not boundaries: go on through them (few rays cross one)
    t = t.copy()
    for _ in range(cs.n_edges):
        on_det = np.flatnonzero((e >= 0) & (cs.detector[np.maximum(e, 0)] >= 0))
        if len(on_det) == 0:
            break
        px = x[on_det] + t[on_det] * dx[on_det]
        py = y[on_det] + t[on_det] * dy[on_det]
        t2, e2 = hit_fn(cs, px, py, dx[on_det], dy[on_det], e[on_det])
        t[on_det] = t[on_det] + t2
        e[on_det] = e2
    med = np.zeros(n, dtype=np.int64)
    hit = e >= 0
    if hit.any():
        eh = e[hit]
        hx = x[hit] + t[hit] * dx[hit]
        hy = y[hit] + t[hit] * dy[hit]
        nx, ny = edge_normal(cs, eh, hx, hy)
        cos = dx[hit] * nx + dy[hit] * ny
        med[hit] = np.where(cos < 0, cs.med_plus[eh], cs.med_minus[eh])
        nxt = _probe + 1 if fixed else 0
        if nxt < len(PROBE_ANGLES):
            tol2 = (VERTEX_TOL * cs.eps) ** 2
            at_vertex = np.minimum((hx - cs.x0[eh]) ** 2 + (hy - cs.y0[eh]) ** 2,
                                   (hx - cs.x1[eh]) ** 2 + (hy - cs.y1[eh]) ** 2) < tol2
            again = np.flatnonzero(hit)[(np.abs(cos) < GRAZING_COS) | at_vertex]
            if len(again):
                med[again] = medium_at(cs, x[again], y[again], _probe=nxt)
    return med


class _Histograms:
    """Detector hits binned by position and angle (the detector's own bins), for long traces
    that do not keep one record per hit."""

    def __init__(self, cs: CompiledScene):
        self.dets = cs.detectors
        self.flux_s = [np.zeros((d.bins, d.angle_bins)) for d in cs.detectors]
        self.flux_p = [np.zeros((d.bins, d.angle_bins)) for d in cs.detectors]
        self.count = np.zeros(len(cs.detectors), dtype=np.int64)
        self.batch_flux = np.zeros((len(cs.detectors), SUB_BATCHES))   # for the efficiency's error
        self.acceptance = cs.acceptance or [None] * len(cs.detectors)
        self.accepted_batch = np.zeros((len(cs.detectors), SUB_BATCHES))  # flux within the acceptance

    def add(self, det, pos, angle, fs, fp, root, dx, dy):
        for d in np.unique(det).tolist():
            sel = det == d
            spec = self.dets[d]
            length = float(np.hypot(spec.end[0] - spec.start[0], spec.end[1] - spec.start[1]))
            i = np.clip((pos[sel] / length * spec.bins).astype(np.int64), 0, spec.bins - 1)
            j = np.clip(((angle[sel] + 90.0) / 180.0 * spec.angle_bins).astype(np.int64), 0, spec.angle_bins - 1)
            k = i * spec.angle_bins + j
            size = spec.bins * spec.angle_bins
            self.flux_s[d] += np.bincount(k, weights=fs[sel], minlength=size).reshape(spec.bins, spec.angle_bins)
            self.flux_p[d] += np.bincount(k, weights=fp[sel], minlength=size).reshape(spec.bins, spec.angle_bins)
            self.count[d] += int(sel.sum())
            self.batch_flux[d] += batch_sums(root[sel], fs[sel] + fp[sel])
            if self.acceptance[d] is not None:
                inside = within_acceptance(dx[sel], dy[sel], *self.acceptance[d])
                self.accepted_batch[d] += batch_sums(root[sel][inside], fs[sel][inside] + fp[sel][inside])

    def to_dict(self) -> dict:
        out = {}
        for d, spec in enumerate(self.dets):
            length = float(np.hypot(spec.end[0] - spec.start[0], spec.end[1] - spec.start[1]))
            out[spec.name] = {"position_edges": np.linspace(0.0, length, spec.bins + 1),
                              "angle_edges": np.linspace(-90.0, 90.0, spec.angle_bins + 1),
                              "flux_s": self.flux_s[d], "flux_p": self.flux_p[d], "hits": int(self.count[d]),
                              "batch_flux": self.batch_flux[d], "accepted_batch": self.accepted_batch[d]}
        return out


def within_acceptance(dx: np.ndarray, dy: np.ndarray, direction_deg: float, half_angle_deg: float) -> np.ndarray:
    """Whether each direction of travel lies within +-half_angle_deg of direction_deg."""
    a = np.radians(direction_deg)
    ca, sa = np.cos(a), np.sin(a)
    off = np.degrees(np.abs(np.arctan2(dx * sa - dy * ca, dx * ca + dy * sa)))
    return off <= half_angle_deg


def merge_histograms(target: dict | None, other: dict | None) -> dict | None:
    if target is None:
        return other
    if other is None:
        return target
    for name, h in other.items():
        t = target[name]
        t["flux_s"] = t["flux_s"] + h["flux_s"]
        t["flux_p"] = t["flux_p"] + h["flux_p"]
        t["hits"] += h["hits"]
        t["batch_flux"] = t["batch_flux"] + h["batch_flux"]
        t["accepted_batch"] = t["accepted_batch"] + h["accepted_batch"]
    return target


def _store_hits(store, hist, cs, idx, ed, hx, hy, dx, dy, fs, fp, wl, opl, path, root):
    d = cs.detector[ed]
    ex = cs.x1[ed] - cs.x0[ed]
    ey = cs.y1[ed] - cs.y0[ed]
    L = np.hypot(ex, ey)
    s = ((hx - cs.x0[ed]) * ex + (hy - cs.y0[ed]) * ey) / L
    # angle of arrival from the detector normal (normal = right of start->end), signed
    nx, ny = ey / L, -ex / L
    cosn = -(dx * nx + dy * ny)
    sint = dx * (ex / L) + dy * (ey / L)
    angle = np.degrees(np.arctan2(sint, np.abs(cosn)))
    if hist is not None:
        hist.add(d, s, angle, fs, fp, root, dx, dy)
        return
    front = cosn >= 0
    for k, v in (("detector", d), ("position", s), ("angle_deg", angle), ("front", front),
                 ("flux_s", fs), ("flux_p", fp), ("wavelength_nm", wl), ("optical_path", opl),
                 ("path", path), ("root", root)):
        store.setdefault(k, []).append(_owned(np.asarray(v)))
