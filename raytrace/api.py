"""The one call most users need: `trace(scene, ...)`."""
from __future__ import annotations

from dataclasses import asdict

import numpy as np

from .compile import CompiledScene, compile_scene
from .ledger import Ledger
from .results import TraceResult
from .scene import Scene
from .sources import StartRays, sample_sources
from .tracer import Limits, Recording, trace_rays


def trace(scene: Scene, rays: int | None = None, mode: str | None = None, seed: int | None = None,
          min_relative_flux: float | None = None, max_depth: int | None = None,
          max_segments: int | None = None, record: str | Recording = "none", record_count: int = 0,
          sampling: str | None = None, compiled: CompiledScene | None = None,
          start: StartRays | None = None, track_paths: bool = True, progress=None) -> TraceResult:
    """Trace a scene.  Unset options fall back to the scene's own trace settings.

    record: "none", "all", or "first" with `record_count` source rays, for the ray table.
    sampling: "even" or "random" overrides each source's own sampling style.
    """
    s = scene.settings
    rays = s.rays if rays is None else int(rays)
    mode = s.mode if mode is None else mode
    seed = s.seed if seed is None else int(seed)
    limits = Limits(
        min_relative_flux=s.min_relative_flux if min_relative_flux is None else float(min_relative_flux),
        max_depth=s.max_depth if max_depth is None else int(max_depth),
        max_segments=s.max_segments if max_segments is None else int(max_segments))
    cs = compiled or compile_scene(scene)
    if start is None:
        start = sample_sources(scene.sources, rays, seed=seed, sampling=sampling)
    recording = record if isinstance(record, Recording) else Recording(record, record_count)
    raw = trace_rays(cs, start, mode=mode, limits=limits, seed=seed, record=recording,
                     track_paths=track_paths, n_sources=len(scene.sources), progress=progress)
    ledger = Ledger(cs, raw.bins, raw.source_flux)
    settings = {"rays": rays, "mode": mode, "seed": seed, **asdict(limits),
                "sampling": sampling or "per source", "source_names": [src.name for src in scene.sources],
                "source_positions": [list(src.position) for src in scene.sources]}
    if len(start) and bool((start.source[1:] >= start.source[:-1]).all()):
        # rays are numbered source by source: lets the ray table name each ray's source
        settings["source_ray_counts"] = np.bincount(start.source, minlength=len(scene.sources)).tolist()
    return TraceResult(cs, raw, ledger, mode, settings)
