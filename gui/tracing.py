"""How the GUI calls the engine: trace options, the drawn-ray sample, and cancellation.

Kept free of Qt so the worker thread, the sweep dialog, the screenshot mode and the tests all
trace exactly the same way.
"""
from __future__ import annotations

import math
import threading
from dataclasses import dataclass, replace

import numpy as np

import raytrace
from raytrace.scene import Scene, Spectrum
from raytrace.tracer import Recording


class TraceCancelled(Exception):
    """Raised from the progress callback to stop a trace the user no longer wants."""


@dataclass(frozen=True)
class TraceOptions:
    """What the trace controls set.  None means: use the scene's own trace settings."""

    rays: int | None = None
    mode: str | None = None
    flux_floor: float | None = None
    max_generations: int | None = None
    wavelength_nm: float | None = None   # one wavelength for every source instead of its spectrum
    drawn_rays: int = 1000               # source rays whose segments are recorded for drawing


class SampledRecording(Recording):
    """Record every `stride`-th source ray, so a drawn fan covers the whole source evenly
    (recording "the first N" would draw one slice of an even fan)."""

    def __init__(self, stride: int):
        super().__init__("all", 0)
        self.stride = max(1, int(stride))

    def wants(self, root: np.ndarray) -> np.ndarray:
        if self.stride == 1:
            return np.ones(len(root), dtype=bool)
        return root % self.stride == 0


def scene_for(scene: Scene, options: TraceOptions) -> Scene:
    """The scene actually traced: with the wavelength override applied to every source."""
    if options.wavelength_nm is None:
        return scene
    s = scene.copy()
    s.sources = [replace(src, spectrum=Spectrum.line(options.wavelength_nm)) for src in scene.sources]
    return s


def compile_for(scene: Scene, options: TraceOptions):
    """The compiled scene `run_trace` traces for these options (raises SceneError)."""
    return raytrace.compile_scene(scene_for(scene, options))


def run_trace(scene: Scene, options: TraceOptions, cancel: threading.Event | None = None,
              on_progress=None, compiled=None):
    """Trace for display; raises TraceCancelled when `cancel` is set during the trace.
    `compiled`: `compile_for(scene, options)` made beforehand (the coarse and the full trace of
    one request share it), else the scene is compiled here.

    Path statistics are not kept (nothing in the window shows them and they cost a third of
    the trace time); the ledger and detector records do not depend on them."""
    traced = scene_for(scene, options)
    rays = options.rays if options.rays is not None else scene.settings.rays
    stride = max(1, math.ceil(rays / max(1, options.drawn_rays))) if options.drawn_rays > 0 else 0

    def progress(stats):
        if cancel is not None and cancel.is_set():
            raise TraceCancelled()
        if on_progress is not None:
            on_progress(stats)

    record = SampledRecording(stride) if stride else "none"
    return raytrace.trace(traced, rays=options.rays, mode=options.mode,
                          flux_floor=options.flux_floor, max_generations=options.max_generations,
                          record=record, progress=progress, track_paths=False, compiled=compiled)
