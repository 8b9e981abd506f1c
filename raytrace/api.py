"""The one call most users need: `trace(scene, ...)`."""
from __future__ import annotations

from dataclasses import asdict

import numpy as np

from .compile import CompiledScene, compile_scene
from .catalog import valid_range_nm
from .errors import BudgetExceeded, Problems, memory_limit_text
from .heap import keep_freed_memory
from .ledger import Ledger
from .results import TraceResult
from .scene import Scene
from .sources import StartRays, band_span_nm, band_warnings, sample_sources
from .streaming import default_chunk, trace_chunked
from .tracer import Limits, Recording

# Above this many source rays, detector hits are binned into histograms by default rather
# than kept one record per hit (a record is ~80 bytes; branching gives several per ray).
KEEP_HITS_MAX_RAYS = 2_000_000
BYTES_PER_START_RAY = 200      # the starting-ray arrays and their sampling temporaries


def trace(scene: Scene, rays: int | None = None, mode: str | None = None, seed: int | None = None,
          flux_floor: float | None = None, max_generations: int | None = None,
          segment_budget: int | None = None, record: str | Recording = "none", record_count: int = 0,
          sampling: str | None = None, compiled: CompiledScene | None = None,
          start: StartRays | None = None, track_paths: bool = True, progress=None,
          workers: int = 1, chunk_size: int | None = None, max_memory_mb: float | None = None,
          accel: str = "auto", hits: str = "auto",
          route_flux_floor: float | None = None) -> TraceResult:
    """Trace a scene.  Unset options fall back to the scene's own trace settings.

    record: which source rays the ray table holds: "none", "all", "spread" (`record_count` rays
        spread evenly over all of them; see tracer.spread_rays) or "first" (the first
        `record_count`; with even sampling that is one end of a fan).
    sampling: "even" or "random" overrides each source's own sampling style.
    workers: processes to trace on (chunks spread over a pool); the result does not depend on it.
    chunk_size: source rays traced together (default 20,000 branching, 50,000 Monte Carlo); the
        ledger of a Monte Carlo trace depends on it through the per-chunk seeds, never on `workers`.
    max_memory_mb: memory the trace's arrays may use (default: the scene's trace.max_memory_mb,
        4096); the trace stops with BudgetExceeded before it would go past it.
    accel: nearest-hit method, "auto" (default), "plain", "sweep" or "grid"; all give the same result.
    route_flux_floor: rays fainter than this share of their source ray's flux are lumped
        into "other routes" in the route listing (default 1e-3; lower it to see faint ghosts).
    hits: "keep" one record per detector hit, "histogram" (binned per detector, for very long
        traces; `result.raw.histograms`), or "auto" (keep up to 2 million source rays).
    """
    s = scene.settings
    rays = s.rays if rays is None else int(rays)
    mode = s.mode if mode is None else mode
    seed = s.seed if seed is None else int(seed)
    limits = Limits(
        flux_floor=s.flux_floor if flux_floor is None else float(flux_floor),
        max_generations=s.max_generations if max_generations is None else int(max_generations),
        segment_budget=s.segment_budget if segment_budget is None else int(segment_budget))
    limits.max_memory_mb = float(s.max_memory_mb if max_memory_mb is None else max_memory_mb)
    if route_flux_floor is not None:
        limits.route_flux_floor = float(route_flux_floor)
    cs = compiled or compile_scene(scene)
    check_profile_memory(scene, limits.max_memory_mb, workers)
    chunk_size = int(chunk_size) if chunk_size else default_chunk(mode)
    if (rays if start is None else len(start)) > chunk_size:
        # a long trace: its sampling, generations and chunks reuse the memory they free
        # (set before sampling: its temporaries then stay in the heap for the chunks)
        keep_freed_memory()
    if start is None:
        need = rays * BYTES_PER_START_RAY
        if need > limits.max_memory_mb * 1e6:
            raise BudgetExceeded(f"{rays:,} starting rays need about {need / 1e6:,.0f} MB, more than "
                                 f"{memory_limit_text(limits.max_memory_mb)}; or trace fewer rays")
        span = band_span_nm(cs.media)
        problems = Problems()
        warnings = band_warnings(scene.sources, span, problems)
        problems.raise_if_errors()
        start = sample_sources(scene.sources, rays, seed=seed, sampling=sampling, span_nm=span)
    else:
        warnings = []
    warnings += check_wavelengths(scene, cs, start)
    recording = record if isinstance(record, Recording) else Recording(record, record_count, len(start))
    if recording.mode not in ("none", "all", "first", "spread"):
        raise ValueError(f"record: expected one of none, all, first, spread, found {recording.mode!r}")
    if hits not in ("auto", "keep", "histogram"):
        raise ValueError(f"hits: expected one of auto, keep, histogram, found {hits!r}")
    keep_hits = hits == "keep" or (hits == "auto" and len(start) <= KEEP_HITS_MAX_RAYS)
    raw = trace_chunked(cs, start, mode, limits, seed, recording, track_paths, len(scene.sources),
                        chunk_size=chunk_size, workers=max(1, int(workers)),
                        keep_hits=keep_hits, accel=accel, progress=progress)
    ledger = Ledger(cs, raw.bins, raw.source_flux, batch_bins=raw.batch_bins, batch_flux=raw.batch_flux)
    limit_settings = asdict(limits)
    limit_settings.pop("memory_share_mb")      # internal: how the limit was split
    settings = {"rays": rays, "mode": mode, "seed": seed, **limit_settings,
                "sampling": sampling or "per source", "source_names": [src.name for src in scene.sources],
                "source_samplings": [sampling or src.sampling for src in scene.sources],
                "source_positions": [list(src.position) for src in scene.sources],
                "workers": max(1, int(workers)), "chunk_size": chunk_size,
                "hits": "keep" if keep_hits else "histogram",
                "record": {"mode": recording.mode, "count": recording.count},
                # detectors give per-wavelength figures only for line spectra
                "band_spectrum": any(src.spectrum.is_band for src in scene.sources)}
    if len(start) and bool((start.source[1:] >= start.source[:-1]).all()):
        # rays are numbered source by source: lets the ray table name each ray's source
        settings["source_ray_counts"] = np.bincount(start.source, minlength=len(scene.sources)).tolist()
    warnings += result_warnings(ledger, raw.stats, limits)
    return TraceResult(cs, raw, ledger, mode, settings, warnings)


BYTES_PER_PROFILE_BIN = 8 * 4      # a bin's flux, its edges, and the density of the report


def check_profile_memory(scene: Scene, limit_mb: float, workers: int) -> None:
    """Detector profiles are allocated per detector, per process (binned hits) and again for
    the reports: refuse before allocating when their bins alone would pass the limit."""
    bins = sum(d.bins + d.angle_bins for d in scene.detectors)
    need = bins * BYTES_PER_PROFILE_BIN * (max(1, int(workers)) + 1)
    if need > limit_mb * 1e6:
        raise BudgetExceeded(f"the detectors' {bins:,} profile bins need about {need / 1e6:,.0f} MB, more than "
                             f"{memory_limit_text(limit_mb)}; or give the detectors fewer bins")


def check_wavelengths(scene: Scene, cs: CompiledScene, start: StartRays) -> list[str]:
    """Refuse wavelengths at which a material has no real index; warn where a catalog
    material's data do not reach (its index is then an extrapolation)."""
    if len(start) == 0:
        return []
    wls = np.unique(start.wavelength)
    problems = Problems()
    warnings = []
    for m, (material, where) in enumerate(zip(cs.media, cs.medium_names)):
        with np.errstate(all="ignore"):
            n = np.broadcast_to(np.asarray(material.index(wls), dtype=float), wls.shape)
        bad = ~np.isfinite(n) | (n <= 0)
        span = valid_range_nm(material)
        if bad.any():
            wl = float(wls[np.argmax(bad)])
            k = int(start.source[np.argmax(start.wavelength == wl)])
            expected = (f"wavelengths from {span[0]:g} to {span[1]:g} nm, where the data of {material.name!r} lie"
                        if span else f"wavelengths at which {material.name!r} has a real refractive index")
            problems.add(f"$.sources[{k}].spectrum",
                         f"<{wl:g} nm, where {material.name!r} ({where}) has no real refractive index>", expected)
        elif span and (wls.min() < span[0] or wls.max() > span[1]):
            lo, hi = float(wls.min()), float(wls.max())
            reach = f"{lo:g} nm lies" if lo == hi else f"wavelengths {lo:g}-{hi:g} nm reach"
            warnings.append(f"{where} ({material.name}): source {reach} outside "
                            f"the {span[0]:g}-{span[1]:g} nm of its data; its index there is extrapolated")
    problems.raise_if_errors()
    return warnings


def result_warnings(ledger: Ledger, stats: dict, limits: Limits) -> list[str]:
    """Limits that cut a visible share of the flux, and rays whose path may be wrong."""
    out = []
    if stats.get("source_rays", 0) == 0:
        out.append("no source rays were traced (no sources, or rays = 0): the ledger is empty")
    total = ledger.source_flux or 1.0
    for reason, option, value in (("segment budget", "--segment-budget / segment_budget", limits.segment_budget),
                                  ("generation limit", "--max-generations / max_generations", limits.max_generations)):
        cut = ledger.flux("truncated", reason=reason)
        if cut > 1e-6 * total:
            out.append(f"{100 * cut / total:.4g} % of the source flux was cut by the {reason} "
                       f"({value:,}); raise {option} for a complete ledger")
    if stats.get("medium_mismatches"):
        out.append(f"{stats['medium_mismatches']} ray(s) met a face from a medium that does not border it "
                   "(rays exactly through a vertex or along a face); their flux is accounted for, "
                   "but their paths after that point may be wrong")
    return out
