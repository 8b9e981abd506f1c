"""Turn a trace result into what the canvas draws: ray segments grouped by kind and by
brightness, detector hit points, and escape markers sized by the flux lost at each face.

Pure numpy; no Qt.  With colour by wavelength the same segments are grouped by wavelength
(5 nm bins) and brightness instead of by kind.  Grouping keeps the number of drawn items small (one line item per kind and
brightness level) however many segments there are.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from raytrace.ledger import BinLayout
from raytrace.tracer import B_TIR, E_ESCAPED

from .spectral import VISIBLE_NM, wavelength_bin

# Segment kinds, in drawing order (later ones on top).
INSIDE, ESCAPING, TIR = "ray", "escaping", "tir"
KINDS = (INSIDE, ESCAPING, TIR)
# Brightness levels: a segment's flux relative to its source ray's starting flux.
LEVELS = (0.5, 0.1, 1e-2, 1e-3, 0.0)
LEVEL_ALPHA = (235, 120, 34, 14, 4)
# Escaping legs are drawn at most this many times the size of the parts: they run to the edge of
# the scene in the trace and would flood the view around the parts.
ESCAPE_REACH = 0.25


@dataclass
class RayDrawing:
    # kind -> list over LEVELS of (x, y) arrays with pairs of points (connect="pairs")
    lines: dict[str, list[tuple[np.ndarray, np.ndarray]]] = field(default_factory=dict)
    hits_x: np.ndarray = field(default_factory=lambda: np.zeros(0))
    hits_y: np.ndarray = field(default_factory=lambda: np.zeros(0))
    escapes: list[tuple[float, float, float, str]] = field(default_factory=list)  # x, y, share, label
    escape_edges: list = field(default_factory=list)      # the compiled Edge of each escape marker
    # unit vector from each hit toward the side the ray arrived from (marks sit on that side)
    hits_nx: np.ndarray = field(default_factory=lambda: np.zeros(0))
    hits_ny: np.ndarray = field(default_factory=lambda: np.zeros(0))
    # direction cues: bright legs of a few source rays, as start point, end point and kind index
    cue_x0: np.ndarray = field(default_factory=lambda: np.zeros(0))
    cue_y0: np.ndarray = field(default_factory=lambda: np.zeros(0))
    cue_x1: np.ndarray = field(default_factory=lambda: np.zeros(0))
    cue_y1: np.ndarray = field(default_factory=lambda: np.zeros(0))
    cue_at: np.ndarray = field(default_factory=lambda: np.zeros(0))   # where along the leg (0..1)
    n_segments: int = 0
    n_thinned: int = 0          # legs not drawn because their fan was too crowded to read
    # with colour by wavelength: (wavelength bin in nm, or nan, level, x, y) per non-empty group,
    # in stacking order within each level
    by_wavelength: list[tuple[float, int, np.ndarray, np.ndarray]] = field(default_factory=list)
    colour_by_wavelength: bool = False
    escape_reach: float | None = None     # the cut applied to escaping legs (mm), None: none
    pixel_mm: float | None = None         # the view's pixel size the crowding was judged for


def brightness_level(rel: np.ndarray) -> np.ndarray:
    """Index into LEVELS for each relative flux (0 = brightest)."""
    out = np.full(len(rel), len(LEVELS) - 1, dtype=np.int64)
    for k in range(len(LEVELS) - 2, -1, -1):
        out[rel >= LEVELS[k]] = k
    return out


def _pairs(seg, sel) -> tuple[np.ndarray, np.ndarray]:
    n = int(sel.sum())
    x = np.empty(2 * n)
    y = np.empty(2 * n)
    x[0::2], x[1::2] = seg["x0"][sel], seg["x1"][sel]
    y[0::2], y[1::2] = seg["y0"][sel], seg["y1"][sel]
    return x, y


def clip_escaping(seg: dict, escaping: np.ndarray, reach: float) -> dict:
    """A copy of the segment columns with escaping legs cut to at most `reach` mm."""
    x0, y0, x1, y1 = (np.asarray(seg[k], dtype=float) for k in ("x0", "y0", "x1", "y1"))
    length = np.hypot(x1 - x0, y1 - y0)
    cut = escaping & (length > reach)
    if not cut.any():
        return seg
    u = np.where(cut, reach / np.where(length > 0, length, 1.0), 1.0)
    out = dict(seg)
    out["x1"], out["y1"] = x0 + u * (x1 - x0), y0 + u * (y1 - y0)
    return out


def ray_drawing(result, min_escape_share: float = 1e-3, colour_by_wavelength: bool = False,
                escape_reach: float | None = None, pixel_mm: float | None = None) -> RayDrawing:
    """`escape_reach` (mm) cuts the drawn escaping legs to that length (None: as traced);
    `pixel_mm` is the size of a screen pixel in the view the drawing is for (see `crowding`)."""
    d = RayDrawing(colour_by_wavelength=colour_by_wavelength, escape_reach=escape_reach, pixel_mm=pixel_mm)
    seg = result.segments
    if seg is not None and len(seg["x0"]):
        if escape_reach is not None:
            seg = clip_escaping(seg, seg["end"] == E_ESCAPED, escape_reach)
        flux = seg["flux_s"] + seg["flux_p"]
        root = seg["source_ray"].astype(np.int64)
        start_flux = np.zeros(int(root.max()) + 1)
        first = seg["generation"] == 0
        start_flux[root[first]] = flux[first]
        ref = start_flux[root]
        rel = np.divide(flux, ref, out=np.zeros_like(flux), where=ref > 0)
        level = brightness_level(rel)
        cue_level = level
        steps, keep = crowding(seg, root, pixel_mm)
        faintest = len(LEVELS) - 1            # (a crowded leg fades at most to the step above it)
        level = np.where(level == faintest, level, np.minimum(level + steps, faintest - 1))
        level[~keep] = -1                                     # thinned out of a crowded fan
        d.n_thinned = int((~keep).sum())
        kind = np.full(len(flux), 0, dtype=np.int64)
        kind[seg["end"] == E_ESCAPED] = 1
        kind[seg["born"] == B_TIR] = 2
        d.n_segments = len(flux)
        _direction_cues(d, seg, root, cue_level)
        for k, name in enumerate(KINDS):
            d.lines[name] = [_pairs(seg, (kind == k) & (level == lv)) for lv in range(len(LEVELS))]
        if colour_by_wavelength:
            nm = wavelength_bin(seg["wavelength_nm"])
            outside = ~np.isfinite(nm) | (nm < VISIBLE_NM[0]) | (nm > VISIBLE_NM[1])
            nm[outside] = np.nan          # one grey group for everything outside vision
            bins = np.unique(nm[~outside]).tolist() + ([np.nan] if outside.any() else [])
            # Beams of nearby wavelengths overlap; drawn one colour after another the last one
            # would hide the others.  Few colours are split into sparse slices of source rays,
            # stacked slice after slice with the colour order rotating, so where beams overlap
            # every colour shows through and the fringes show the dispersion.
            n_slices = max(1, min(12, 36 // max(1, len(bins))))
            rank = np.unique(root, return_inverse=True)[1].reshape(-1)
            for j in range(n_slices):
                in_slice = rank % n_slices == j
                r = j % len(bins)
                for b in bins[r:] + bins[:r]:
                    same = (np.isnan(nm) if np.isnan(b) else nm == b) & in_slice
                    for lv in range(len(LEVELS)):
                        sel = same & (level == lv)
                        if sel.any():
                            d.by_wavelength.append((float(b), lv, *_pairs(seg, sel)))
    d.hits_x, d.hits_y = hit_points(result)
    d.hits_nx, d.hits_ny = hit_sides(result)
    d.escapes, d.escape_edges = escape_markers(result, min_escape_share)
    return d


def parts_box(scene):
    """(x0, y0, x1, y1) around the parts of a scene, or None without parts."""
    boxes = [p.outer.bounds() for p in scene.parts]
    if not boxes:
        return None
    return (min(b[0] for b in boxes), min(b[1] for b in boxes),
            max(b[2] for b in boxes), max(b[3] for b in boxes))


def escape_reach_for(scene) -> float | None:
    """How far escaping legs are drawn in this scene: ESCAPE_REACH times the parts' size."""
    box = parts_box(scene)
    return ESCAPE_REACH * max(box[2] - box[0], box[3] - box[1], 1e-6) if box else None


def scene_drawing(result, scene, colour_by_wavelength: bool = False,
                  pixel_mm: float | None = None) -> RayDrawing:
    """The drawing the canvas shows for `result` traced on `scene`, in a view of `pixel_mm` mm
    per pixel.  Pure numpy, so the trace thread builds it beside the trace and the UI thread
    only hands the arrays to the items."""
    return ray_drawing(result, colour_by_wavelength=colour_by_wavelength,
                       escape_reach=escape_reach_for(scene), pixel_mm=pixel_mm)


# Where legs crowd, each is drawn some brightness steps fainter, so a dense fan of TIR legs reads
# as rays, not as a solid fill; kinds keep their colours.  Ink is estimated on a grid of
# CROWD_CELLS cells across the rays' extent, for the view's pixel size with 1 px lines (a view
# about CROWD_VIEW_PX pixels across the rays when it is not known): a cell's covered share =
# leg length in it x pixel size / cell area.  Zoomed in, a pixel is smaller, so a fan covers
# less of each cell and more of its rays are drawn.
CROWD_CELLS = 48
CROWD_VIEW_PX = 600
# A drawing is thinned anew when the view's pixel size moves this factor away from the one it
# was judged for (strides go in powers of 2, so a smaller change would rarely change one).
RETHIN_RATIO = 1.4
CROWD_START = 1.0       # covered share where fading starts (solid ink); each further x3 one step more
CROWD_MAX_STEPS = 1
CROWD_DIRECTIONS = 12   # direction bins of 15 degrees
CROWD_TANGLE = 5        # a cell with ink in this many direction bins is a tangle, not beams
CROWD_CAP = 1.0         # at most this covered share is drawn in a cell; the rest is thinned


def thinned_for(drawing: RayDrawing, pixel_mm: float) -> bool:
    """Whether `drawing`'s crowding was judged for a view of about `pixel_mm` mm per pixel."""
    was = drawing.pixel_mm
    return bool(was and pixel_mm > 0 and max(was / pixel_mm, pixel_mm / was) < RETHIN_RATIO)


def crowding(seg, root: np.ndarray, pixel_mm: float | None = None,
             compiled: bool | None = None) -> tuple[np.ndarray, np.ndarray]:
    """(steps, keep) per leg: brightness steps (0..CROWD_MAX_STEPS) to fade it by, and whether
    it is drawn at all.  Opaque lines at full cover are a fill whatever their shade, so where
    the legs would cover a cell more than CROWD_CAP times over, only every 2nd, 4th... source
    ray's legs are drawn there (strides of 2^k nest, so a kept ray runs on unbroken into
    sparser cells).  `pixel_mm`: the view's pixel size in mm (None: CROWD_VIEW_PX across).
    `compiled`: use the compiled pass (`crowding_kernel`) or the array code; None: the compiled
    one unless the tracer runs its numpy kernel (RAYTRACE_KERNEL=numpy: nothing compiles)."""
    x0, y0, x1, y1 = (np.asarray(seg[k], dtype=float) for k in ("x0", "y0", "x1", "y1"))
    lo_x, hi_x = min(x0.min(), x1.min()), max(x0.max(), x1.max())
    lo_y, hi_y = min(y0.min(), y1.min()), max(y0.max(), y1.max())
    extent = max(hi_x - lo_x, hi_y - lo_y, 1e-9)
    cell = extent / CROWD_CELLS
    px = pixel_mm if pixel_mm and pixel_mm > 0 else extent / CROWD_VIEW_PX
    # a beam drawn as a solid band still reads as a beam, and so do two beams crossing; only
    # legs running in many directions make an unreadable fill: count the 15-degree direction
    # bins holding at least 5 % of a cell's ink
    th = np.mod(np.arctan2(y1 - y0, x1 - x0), np.pi)
    dbin = np.minimum((th / (np.pi / CROWD_DIRECTIONS)).astype(np.int64), CROWD_DIRECTIONS - 1)
    if compiled is None:
        from raytrace import kernel
        compiled = kernel.compiled()
    if compiled:
        from .crowding_kernel import covered_share
        share = covered_share(x0, y0, x1, y1, dbin, lo_x, lo_y, cell, CROWD_CELLS, px,
                              CROWD_DIRECTIONS, CROWD_TANGLE, 0.05)
    else:
        share = _covered_share(x0, y0, x1, y1, dbin, lo_x, lo_y, cell, px)
    steps = np.floor(np.log(np.maximum(share, 1e-12) / CROWD_START) / np.log(3.0)) + 1
    steps = np.clip(steps, 0, CROWD_MAX_STEPS).astype(np.int64)
    stride = 2 ** np.ceil(np.log2(np.maximum(share / CROWD_CAP, 1.0))).astype(np.int64)
    return steps, source_rank(root) % stride == 0


# ids up to this many times the legs are ranked through a table of every id; sparser ones (the
# app draws 1,000 source rays of a trace of up to 10 million) by np.unique: for 1,000 drawn rays
# of 10 million (66,000 legs) the table and its running count took 50-140 ms and 170 MB at every
# redraw, np.unique 1.5 ms
DENSE_IDS = 8


def _dense(root: np.ndarray) -> bool:
    return len(root) > 0 and int(root.max()) < DENSE_IDS * len(root)


def source_rank(root: np.ndarray) -> np.ndarray:
    """Each leg's source ray's rank among the source rays present (0, 1, 2... in id order):
    what np.unique(root, return_inverse=True) gives, without its sort where the ids are dense."""
    if not _dense(root):
        return np.unique(root, return_inverse=True)[1].reshape(-1)
    present = np.zeros(int(root.max()) + 1, dtype=bool)
    present[root] = True
    return (np.cumsum(present) - 1)[root]


def present_sources(root: np.ndarray) -> np.ndarray:
    """The source rays present among the legs, sorted: np.unique(root), by a count of every id
    where the ids are dense."""
    return np.flatnonzero(np.bincount(root)) if _dense(root) else np.unique(root)


def _covered_share(x0, y0, x1, y1, dbin, lo_x, lo_y, cell, px) -> np.ndarray:
    """The array version of `crowding_kernel.covered_share` (the reference it is checked
    against): four sample points per leg, their cells' ink and ink per direction by bincount."""
    t = (np.arange(4) + 0.5) / 4                       # four sample points along each leg
    sx = x0[:, None] + t * (x1 - x0)[:, None]
    sy = y0[:, None] + t * (y1 - y0)[:, None]
    ix = np.minimum(((sx - lo_x) / cell).astype(np.int64), CROWD_CELLS)
    iy = np.minimum(((sy - lo_y) / cell).astype(np.int64), CROWD_CELLS)
    flat = ix * (CROWD_CELLS + 1) + iy
    length = np.hypot(x1 - x0, y1 - y0)
    ink = np.bincount(flat.ravel(), weights=np.repeat(length / 4, 4), minlength=(CROWD_CELLS + 1) ** 2)
    share = ink[flat].max(axis=1) * px / (cell * cell)
    key = flat * CROWD_DIRECTIONS + np.repeat(dbin, 4).reshape(flat.shape)
    by_dir = np.bincount(key.ravel(), weights=np.repeat(length / 4, 4),
                         minlength=ink.size * CROWD_DIRECTIONS).reshape(ink.size, CROWD_DIRECTIONS)
    n_dirs = (by_dir >= 0.05 * np.maximum(ink, 1e-300)[:, None]).sum(axis=1) * (ink > 0)
    return np.where(n_dirs[flat].max(axis=1) >= CROWD_TANGLE, share, 0.0)


CUE_RAYS = 3          # source rays whose brightest legs carry a direction arrow
CUE_MAX = 24          # arrows drawn at most


def _direction_cues(d: RayDrawing, seg, root: np.ndarray, level: np.ndarray) -> None:
    """Pick the brightest legs (above half their source ray's flux) of a few source rays spread
    over the fan: an arrow on each tells an incoming beam from a returning one."""
    roots = present_sources(root)
    chosen = roots[np.unique(np.linspace(0, len(roots) - 1, min(CUE_RAYS, len(roots))).round().astype(int))]
    sel = np.isin(root, chosen) & (level == 0)
    # each chosen ray has its arrows at its own place along the legs, so the arrows of a
    # parallel beam are staggered instead of lined up across it like a hatch
    d.cue_at = np.array([0.3, 0.55, 0.8])[np.searchsorted(chosen, root[sel]) % 3]
    d.cue_x0, d.cue_y0 = np.asarray(seg["x0"])[sel], np.asarray(seg["y0"])[sel]
    d.cue_x1, d.cue_y1 = np.asarray(seg["x1"])[sel], np.asarray(seg["y1"])[sel]


def arrow_strokes(x0, y0, x1, y1, head: float, min_length: float, at=0.55):
    """Pairs of points (connect="pairs") drawing an open arrowhead `head` mm long at fraction
    `at` (one for all, or one per leg) along each leg longer than `min_length` mm."""
    dx, dy = x1 - x0, y1 - y0
    length = np.hypot(dx, dy)
    keep = length > min_length
    if keep.sum() > CUE_MAX:       # the longest legs, in their drawing order
        keep[np.flatnonzero(keep)[np.argsort(-length[keep])[CUE_MAX:]]] = False
    if not keep.any():
        return np.zeros(0), np.zeros(0)
    ux, uy = dx[keep] / length[keep], dy[keep] / length[keep]
    at = np.broadcast_to(np.asarray(at, dtype=float), length.shape)[keep]
    tx, ty = x0[keep] + at * dx[keep], y0[keep] + at * dy[keep]
    bx, by = tx - head * ux, ty - head * uy          # back of the head, then +-half width
    wx, wy = -0.5 * head * uy, 0.5 * head * ux
    xs = np.stack([tx, bx + wx, tx, bx - wx], axis=1).reshape(-1)
    ys = np.stack([ty, by + wy, ty, by - wy], axis=1).reshape(-1)
    return xs, ys


def hit_points(result) -> tuple[np.ndarray, np.ndarray]:
    h = result.raw.hits
    if not h or not len(h.get("position", [])):
        return np.zeros(0), np.zeros(0)
    dets = result.compiled.detectors
    idx = h["detector"].astype(np.int64)
    sx = np.array([d.start[0] for d in dets])[idx]
    sy = np.array([d.start[1] for d in dets])[idx]
    ex = np.array([d.end[0] for d in dets])[idx]
    ey = np.array([d.end[1] for d in dets])[idx]
    L = np.hypot(ex - sx, ey - sy)
    u = h["position"] / L
    return sx + u * (ex - sx), sy + u * (ey - sy)


def hit_sides(result) -> tuple[np.ndarray, np.ndarray]:
    """Unit normal of the detector at each hit, pointing to the side the ray came from."""
    h = result.raw.hits
    if not h or not len(h.get("position", [])) or "front" not in h:
        return np.zeros(0), np.zeros(0)
    dets = result.compiled.detectors
    idx = h["detector"].astype(np.int64)
    ex = np.array([d.end[0] - d.start[0] for d in dets])[idx]
    ey = np.array([d.end[1] - d.start[1] for d in dets])[idx]
    L = np.hypot(ex, ey)
    sign = np.where(np.asarray(h["front"], dtype=bool), 1.0, -1.0)   # front: right of start->end
    return sign * ey / L, -sign * ex / L


def escape_markers(result, min_share: float):
    """One marker per edge where flux escaped: at the edge's midpoint, with its share of the
    source flux and a label "part / face"; and the list of those edges."""
    cs = result.compiled
    layout = BinLayout(cs)
    total = result.ledger.source_flux or 1.0
    esc = result.ledger.bins[layout.escape0:layout.escape0 + layout.E] / total
    out, edges = [], []
    for e in np.flatnonzero(esc >= min_share):
        if cs.detector[e] >= 0 or e >= len(cs.edges):
            continue
        x, y = cs.edges[e].point_at(0.5)
        part, face = cs.face_labels[cs.face[e]]
        out.append((x, y, float(esc[e]), f"{part} / {face}"))
        edges.append(cs.edges[e])
    return out, edges



